"""Streaming benchmark: speed against offline, delay per preset, memory over an hour.

Run from the repository root::

    python benchmarks/bench_stream.py [--hour-minutes M] [--json OUT]

* real-time factor (processing seconds per audio second, one core) of
  :class:`harmtrack.stream.StreamTracker` fed in blocks of 10 ms, 100 ms and
  1 s, against :func:`harmtrack.track` on the same 60 s recording, and the share
  of frames on which the two agree (both unvoiced, or voiced within 10 cents);
* the algorithmic delay (``latency_s``) of each preset at 16, 44.1 and 48 kHz;
* a generated recording of ``--hour-minutes`` minutes (default 60) written as
  a 16 kHz 16-bit WAV, then tracked in a fresh process by
  ``harmtrack track long.wav -o long.csv`` (read in blocks, rows written as
  produced) and by ``harmtrack.track_file`` (read in blocks, every frame kept);
  the peak resident memory of each process (from ``wait4``); also the command
  writing NPZ and JSON labels (spooled to disk, encoded at the end).

A report run by hand, not a test.
"""

import _single_thread  # noqa: F401, I001  (first: one thread before numpy loads)

import argparse
import json
import os
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np
import soundfile as sf

import harmtrack
from harmtrack import synth
from harmtrack.stream import StreamTracker, concat_tracks

SR = 16000


def recording(total_s, seed=0, snr_db=20.0):
    """Phrases of five synthetic speakers with pauses, in white noise (as the tests)."""
    return synth.speakers_recording(total_s, sr=SR, seed=seed, snr_db=snr_db)


TRACK_FILE_PROBE = r"""
import sys
import harmtrack
tr = harmtrack.track_file(sys.argv[1])
assert "read_in_blocks" in tr.settings, "not read in blocks"
print(len(tr))
"""


def _env():
    env = os.environ.copy()
    env["PYTHONPATH"] = os.pathsep.join(p for p in (str(Path(__file__).resolve().parents[1]),
                                                    env.get("PYTHONPATH")) if p)
    return env


def _run_measured(cmd):
    """Run ``cmd`` to its end; (exit status, its own peak RSS in MB, its stderr)."""
    with tempfile.TemporaryFile(mode="w+") as err:
        proc = subprocess.Popen(cmd, stdout=subprocess.DEVNULL, stderr=err, env=_env())
        _, status, usage = os.wait4(proc.pid, 0)
        proc.returncode = os.waitstatus_to_exitcode(status)
        err.seek(0)
        return proc.returncode, usage.ru_maxrss / 1024.0, err.read()


def agree(a, b):
    cents = np.abs(1200.0 * np.log2(a.f0_hz / b.f0_hz))
    return float(np.mean((~a.voiced & ~b.voiced) | (a.voiced & b.voiced & (cents <= 10.0))))


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--hour-minutes", type=float, default=60.0,
                    help="length of the long recording, minutes (default 60)")
    ap.add_argument("--json", type=Path, default=None)
    args = ap.parse_args(argv)
    out = {}
    print(f"harmtrack {harmtrack.__version__} | one thread | {os.cpu_count()} CPUs")

    minutes = args.hour_minutes
    with tempfile.TemporaryDirectory() as tmp:
        wav = Path(tmp) / "long.wav"
        base = recording(60.0, seed=1)
        with sf.SoundFile(wav, "w", samplerate=SR, channels=1, subtype="PCM_16") as f:
            for k in range(int(np.ceil(minutes))):
                f.write(base * (0.5 + 0.5 * ((k % 5) / 4.0)))
        size_mb = wav.stat().st_size / 1e6
        del base
        audio_s = sf.info(wav).frames / SR
        out["long"] = {"minutes": audio_s / 60.0, "wav_mb": size_mb}
        print(f"\n{audio_s / 60:.1f} min WAV ({size_mb:.0f} MB), each run a fresh process:")
        runs = (
            ("cli_csv", [sys.executable, "-m", "harmtrack", "track", str(wav), "-o",
                         str(Path(tmp) / "long.csv"), "-q"],
             "harmtrack track long.wav -o long.csv (rows written as produced)"),
            ("cli_npz", [sys.executable, "-m", "harmtrack", "track", str(wav), "-o",
                         str(Path(tmp) / "long.npz"), "-q"],
             "harmtrack track long.wav -o long.npz (spooled to disk, encoded at the end)"),
            ("cli_json", [sys.executable, "-m", "harmtrack", "track", str(wav), "-o",
                          str(Path(tmp) / "long.json"), "-q"],
             "harmtrack track long.wav -o long.json (spooled to disk, encoded at the end)"),
            ("api_track_file", [sys.executable, "-c", TRACK_FILE_PROBE, str(wav)],
             "harmtrack.track_file(long.wav) (a Track of every frame in memory)"),
        )
        for key, cmd, label in runs:
            t0 = time.perf_counter()
            status, rss, err = _run_measured(cmd)
            el = time.perf_counter() - t0
            if status != 0:
                raise RuntimeError(f"{label} failed: {err.strip()[-300:]}")
            out["long"][key] = {"seconds": el, "rtf": el / audio_s, "peak_rss_mb": rss}
            print(f"  {label}: {el:.1f} s (RTF {el / audio_s:.4f}), peak RSS {rss:.0f} MB "
                  "(floor: < 400 MB)")

    y = recording(60.0, seed=0)
    harmtrack.track(y[:SR], SR)  # kernels loaded
    t0 = time.perf_counter()
    off = harmtrack.track(y, SR)
    t_off = time.perf_counter() - t0
    print(f"\n60 s recording: offline track() {t_off:.3f} s (RTF {t_off / 60:.4f})")
    out["offline_rtf"] = t_off / 60.0
    out["stream"] = {}
    for block_s in (0.01, 0.1, 1.0):
        b = int(block_s * SR)
        st = StreamTracker(SR)
        t0 = time.perf_counter()
        parts = [st.feed(y[i:i + b]) for i in range(0, y.size, b)] + [st.flush()]
        el = time.perf_counter() - t0
        tr = concat_tracks(parts)
        a = agree(tr, off)
        out["stream"][str(block_s)] = {"rtf": el / 60.0, "agree": a}
        print(f"  stream, blocks of {block_s * 1000:6.0f} ms: {el:.3f} s (RTF {el / 60:.4f}, "
              f"{el / t_off:.2f} x offline); frames agreeing with offline {100 * a:.2f} %")

    print("\nalgorithmic delay (latency_s), s")
    out["latency"] = {}
    presets = (("voice", {}), ("singing", {}), ("engine", {"cylinders": 4}))
    print(f"  {'preset':<10s}" + "".join(f"{sr:>10d}" for sr in (16000, 44100, 48000)))
    for name, kw in presets:
        row = {}
        for sr in (16000, 44100, 48000):
            row[sr] = StreamTracker(sr, preset=name, **kw).latency_s
        out["latency"][name] = row
        print(f"  {name:<10s}" + "".join(f"{row[sr]:>10.3f}" for sr in row))

    if args.json:
        args.json.write_text(json.dumps(out, indent=1, default=float))
    return 0


if __name__ == "__main__":
    sys.exit(main())
