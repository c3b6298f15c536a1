"""Regenerate the demo files next to this script.

Run ``python audio_demo/make_demo.py`` from anywhere. It writes

* ``demo_voice.wav``: 3 s, 16 kHz mono, 16-bit PCM; the scenario of
  :func:`harmtrack.synth.demo_voice` (a short spoken-like phrase with glides,
  a rise and a phrase-final fall around 140 Hz, small room, 30 dB SNR);
* ``demo_voice_truth.csv``: its true f0 every 10 ms, ``nan`` where unvoiced;
* ``demo_engine.wav``: 6 s, 16 kHz mono, 16-bit PCM; the generator-set scenario
  of :func:`harmtrack.engine_synth.demo_engine` (6-cylinder 4-stroke engine
  cranking, running up to 1500 rpm and taking a load; high-passed, pink noise);
* ``demo_engine_misfire.wav``: the same engine with cylinder 3 dead;
* ``demo_engine_truth.csv``: the true rpm every 10 ms (both engine files).

The seed is fixed, so reruns give byte-identical files.
"""

from __future__ import annotations

import os
import sys
import tempfile
from pathlib import Path

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE.parent))

from harmtrack.engine_synth import demo_engine  # noqa: E402
from harmtrack.synth import demo_voice, write_wav  # noqa: E402

SEED = 0
ENGINE_DEAD_CYLINDER = 2  # 0-based: the third cylinder in firing order


def _write_truth(path: Path, times, f0, *, what="f0 of demo_voice.wav", column="f0_hz") -> None:
    lines = [f"# true {what}, made by make_demo.py", f"time_s,{column}"]
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
    for name, dead in (("demo_engine", None), ("demo_engine_misfire", ENGINE_DEAD_CYLINDER)):
        y, sr, truth = demo_engine(seed=SEED, dead_cylinder=dead)
        wav = write_wav(HERE / f"{name}.wav", y, sr)
        print(f"wrote {wav} ({y.size / sr:.2f} s at {sr} Hz)")
    csv = HERE / "demo_engine_truth.csv"
    _write_truth(csv, truth["times"], truth["rpm"], what="rpm of demo_engine*.wav", column="rpm")
    print(f"wrote {csv}")


if __name__ == "__main__":
    main()
