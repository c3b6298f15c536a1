"""Regenerate the demo files next to this script.

Run ``python audio_demo/make_demo.py`` from anywhere. It writes

* ``demo_voice.wav``: 3 s, 16 kHz mono, 16-bit PCM; the scenario of
  :func:`harmtrack.synth.demo_voice` (a short spoken-like phrase with glides,
  a rise and a phrase-final fall around 140 Hz, small room, 30 dB SNR);
* ``demo_voice_truth.csv``: its true f0 every 10 ms, ``nan`` where unvoiced.

The seed is fixed, so reruns give byte-identical files.
"""

from __future__ import annotations

import os
import sys
import tempfile
from pathlib import Path

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE.parent))

from harmtrack.synth import demo_voice, write_wav  # noqa: E402

SEED = 0


def _write_truth(path: Path, times, f0) -> None:
    lines = ["# true f0 of demo_voice.wav, made by make_demo.py", "time_s,f0_hz"]
    for t, f in zip(times, f0):
        lines.append(f"{t:.2f},{'nan' if f != f else f'{f:.3f}'}")
    fd, tmp = tempfile.mkstemp(dir=path.parent, prefix=f".{path.name}.", suffix=".tmp")
    try:
        with os.fdopen(fd, "w", encoding="ascii", newline="\n") as fh:
            fh.write("\n".join(lines) + "\n")
        os.chmod(tmp, 0o644)
        os.replace(tmp, path)
    except BaseException:
        if os.path.exists(tmp):
            os.unlink(tmp)
        raise


def main() -> None:
    y, sr, times, f0 = demo_voice(seed=SEED)
    wav = write_wav(HERE / "demo_voice.wav", y, sr)
    csv = HERE / "demo_voice_truth.csv"
    _write_truth(csv, times, f0)
    print(f"wrote {wav} ({y.size / sr:.2f} s at {sr} Hz) and {csv} ({times.size} frames)")


if __name__ == "__main__":
    main()
