"""Streaming benchmark: speed against offline, delay per preset, memory over an hour.

Run from the repository root::

    python benchmarks/bench_stream.py [--hour-minutes M] [--json OUT]

* real-time factor (processing seconds per audio second, one core) of
  :class:`harmtrack.stream.StreamTracker` fed in blocks of 10 ms, 100 ms and
  1 s, against :func:`harmtrack.track` on the same 60 s recording, and the share
  of frames on which the two agree (both unvoiced, or voiced within 10 cents);
* the algorithmic delay (``latency_s``) of each preset at 16, 44.1 and 48 kHz;
* first, in the fresh process: a generated recording of ``--hour-minutes``
  minutes (default 60) written as a 16 kHz 16-bit WAV, read back in 1 s blocks
  with soundfile, streamed, each frame's row appended to a CSV file as it is
  produced; the peak resident memory of the process (VmHWM) before and after.

A report run by hand, not a test.
"""

import _single_thread  # noqa: F401, I001  (first: one thread before numpy loads)

import argparse
import json
import os
import resource
import sys
import tempfile
import time
from pathlib import Path

import numpy as np
import soundfile as sf

import harmtrack
from harmtrack import synth
from harmtrack.io.columns import track_table
from harmtrack.stream import StreamTracker, concat_tracks

SR = 16000


def recording(total_s, seed=0, snr_db=20.0):
    """Phrases of five synthetic speakers with pauses, in white noise (as the tests)."""
    return synth.speakers_recording(total_s, sr=SR, seed=seed, snr_db=snr_db)


def peak_rss_mb():
    try:
        with open("/proc/self/status") as f:
            for line in f:
                if line.startswith("VmHWM:"):
                    return int(line.split()[1]) / 1024.0
    except OSError:
        pass
    return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024.0


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
        rss0 = peak_rss_mb()
        csv_path = Path(tmp) / "long.csv"
        st = StreamTracker(SR)
        frames = 0
        t0 = time.perf_counter()
        with open(csv_path, "w") as fh:
            header = None
            for block in sf.blocks(wav, blocksize=SR, dtype="float64"):
                tr = st.feed(block)
                frames += _write_rows(fh, tr, header is None)
                header = True
            frames += _write_rows(fh, st.flush(), header is None)
        el = time.perf_counter() - t0
        rss1 = peak_rss_mb()
        audio_s = sf.info(wav).frames / SR
        out["long"] = {"minutes": audio_s / 60.0, "wav_mb": size_mb, "frames": frames,
                       "seconds": el, "rtf": el / audio_s, "peak_rss_mb_before": rss0,
                       "peak_rss_mb_after": rss1, "csv_mb": csv_path.stat().st_size / 1e6}
        print(f"\n{audio_s / 60:.1f} min WAV ({size_mb:.0f} MB) streamed in 1 s blocks: "
              f"{frames} frames in {el:.1f} s (RTF {el / audio_s:.4f}); CSV "
              f"{out['long']['csv_mb']:.0f} MB written as produced")
        print(f"  peak RSS of this process: {rss0:.0f} MB before, {rss1:.0f} MB after "
              f"(floor: < 400 MB)")
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


def _write_rows(fh, tr, header):
    if not len(tr):
        return 0
    table = track_table(tr, validate=False)
    names = list(table)
    if header:
        fh.write(",".join(names) + "\n")
    cols = [np.asarray(table[n], dtype=np.float64) for n in names]
    np.savetxt(fh, np.column_stack(cols), delimiter=",", fmt="%.6g")
    return len(tr)


if __name__ == "__main__":
    sys.exit(main())
