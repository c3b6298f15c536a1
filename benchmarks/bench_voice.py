"""Speech-like f0 benchmark: harmtrack against librosa.pyin and librosa.yin.

Run from the repository root::

    python benchmarks/bench_voice.py [--quick] [--seeds N] [--json OUT] [--conditions a,b]

A labelled corpus is synthesised in memory with :mod:`harmtrack.synth`
(source-filter voices, speech-like phrases, known f0 every 10 ms), degraded
under several conditions, tracked by the three methods in the same process,
and scored frame by frame.  See ``benchmarks/README.md`` for the columns.

The script is a report: it always exits with status 0 and prints the number of
failed floors on its last line.
"""

import _single_thread  # noqa: F401, I001  (first: one thread before numpy loads)
from _floors import Floors  # noqa: E402

import argparse  # noqa: E402
import importlib.util  # noqa: E402
import json  # noqa: E402
import os  # noqa: E402
import platform  # noqa: E402
import subprocess  # noqa: E402
import sys  # noqa: E402
import tempfile  # noqa: E402
import time  # noqa: E402
import warnings  # noqa: E402
from pathlib import Path  # noqa: E402

import numpy as np  # noqa: E402


import librosa  # noqa: E402
import mir_eval  # noqa: E402
import mir_eval.melody  # noqa: E402

REPO = _single_thread.REPO

import harmtrack  # noqa: E402
from harmtrack import synth  # noqa: E402

# ---------------------------------------------------------------------------
# settings
# ---------------------------------------------------------------------------

SR = 16000
HOP_S = 0.01
HOP = 160  # samples, = HOP_S * SR
FMIN, FMAX = 50.0, 800.0  # search range given to the librosa baselines
FRAME_LENGTH = 1024  # librosa frame length, samples

#: Base pitch of the synthetic speakers, Hz.  Utterance j speaks at
#: SPEAKERS[j % 5]; the order spreads the first three (--quick) over the range.
SPEAKERS = (85.0, 140.0, 250.0, 110.0, 200.0)
JITTER = 0.005
SHIMMER = 0.05
AMPLITUDE = 0.5
VOWELS = ("a", "e", "i", "o", "u", "neutral")
SEED_BASE = 1000

#: name -> (description, harmonic set, degradation)
CONDITIONS = {
    "clean": ("clean", "all", None),
    "white10": ("white noise, 10 dB SNR", "all", ("noise", "white", 10.0)),
    "white0": ("white noise, 0 dB SNR", "all", ("noise", "white", 0.0)),
    "pink5": ("pink noise, 5 dB SNR", "all", ("noise", "pink", 5.0)),
    "telephone": ("telephone band 300-3400 Hz", "all", ("telephone",)),
    "reverb": ("reverberation, RT60 0.6 s, DRR 0 dB", "all", ("reverb", 0.6, 0.0)),
    "no_fundamental": ("missing fundamental", "no_fundamental", None),
    "odd": ("odd harmonics only", "odd", None),
}

METHODS = ("harmtrack", "pyin", "yin")
HAS_VOICING = {"harmtrack": True, "pyin": True, "yin": False}

#: Conditions at 10 dB SNR or better, where harmtrack's gross errors must stay rare.
GPE_FLOOR_CONDITIONS = ("clean", "white10", "telephone", "no_fundamental", "odd")
GPE_FLOOR = 1.0  # %
POOLED_RPA_FLOOR = 93.0  # %
CLI_GOAL_S = 1.5

GROSS_REL = 0.2  # gross error: |est / true - 1| > 20 %
CENT_TOL = 50.0  # RPA tolerance, cents
RATIO_WINDOW_CENTS = 150.0  # gross-error ratio classes: within this of 1/2, 2, 1/3, 3
EDGE_FRAMES = 3  # voicing errors within this many frames of a true voicing change are "edge"


# ---------------------------------------------------------------------------
# corpus
# ---------------------------------------------------------------------------


def utterance_spec(j):
    """Speaker, duration, vowels and seed of clean utterance ``j`` (deterministic)."""
    seed = SEED_BASE + j
    rng = np.random.default_rng(seed)
    duration = 3.0 + 0.1 * int(rng.integers(0, 11))  # 3.0 .. 4.0 s
    n_vowels = int(rng.integers(3, 7))
    vowels = tuple(VOWELS[i] for i in rng.integers(0, len(VOWELS), n_vowels))
    return dict(index=j, seed=seed, f0_base=SPEAKERS[j % len(SPEAKERS)],
                duration=duration, vowels=vowels)


def truth_contour(spec):
    times, f0 = synth.f0_contour(spec["duration"], hop_s=HOP_S, kind="phrase",
                                 f0_hz=spec["f0_base"], seed=spec["seed"])
    return times, f0


def render(spec, times, f0, condition):
    """Signal of utterance ``spec`` under ``condition``."""
    _, harmonics, degradation = CONDITIONS[condition]
    y = synth.voice(times, f0, SR, seed=spec["seed"], harmonics=harmonics,
                    formants=spec["vowels"], unvoiced="breath", jitter=JITTER,
                    shimmer=SHIMMER, amplitude=AMPLITUDE)
    if degradation is None:
        return y
    kind = degradation[0]
    # a separate, fixed seed stream per utterance and degradation
    dseed = 10 * spec["seed"] + 1 + list(CONDITIONS).index(condition)
    if kind == "noise":
        _, color, snr = degradation
        return synth.add_noise(y, snr, color=color, seed=dseed, ref="active")
    if kind == "telephone":
        return synth.telephone(y, SR)
    if kind == "reverb":
        _, rt60, drr = degradation
        return synth.reverberate(y, SR, rt60_s=rt60, drr_db=drr, seed=dseed)
    raise ValueError(kind)


# ---------------------------------------------------------------------------
# methods
# ---------------------------------------------------------------------------


def run_harmtrack(y):
    tr = harmtrack.track(y, SR, preset="voice", hop_s=HOP_S)
    f0 = np.asarray(tr.f0_hz, dtype=np.float64)
    voiced = np.asarray(tr.voiced, dtype=bool) & np.isfinite(f0) & (np.nan_to_num(f0) > 0)
    return np.asarray(tr.times, dtype=np.float64), f0, voiced


def run_pyin(y):
    f0, voiced_flag, _ = librosa.pyin(y, fmin=FMIN, fmax=FMAX, sr=SR,
                                      frame_length=FRAME_LENGTH, hop_length=HOP, center=True)
    # centred frames: frame i is centred on sample i * HOP
    times = librosa.times_like(f0, sr=SR, hop_length=HOP)
    f0 = np.asarray(f0, dtype=np.float64)
    voiced = np.asarray(voiced_flag, dtype=bool) & np.isfinite(f0)
    return times, f0, voiced


def run_yin(y):
    f0 = librosa.yin(y, fmin=FMIN, fmax=FMAX, sr=SR, frame_length=FRAME_LENGTH,
                     hop_length=HOP, center=True)
    times = librosa.times_like(f0, sr=SR, hop_length=HOP)
    f0 = np.asarray(f0, dtype=np.float64)
    # no voicing decision: every frame carries a pitch and counts as voiced
    voiced = np.isfinite(f0) & (np.nan_to_num(f0) > 0)
    return times, f0, voiced


RUNNERS = {"harmtrack": run_harmtrack, "pyin": run_pyin, "yin": run_yin}


def align(name, truth_times, times, f0, voiced):
    """Put a method's frames on the truth's frames (both at i * HOP_S, centred)."""
    n = truth_times.size
    m = min(n, times.size)
    if m < n:
        warnings.warn(f"{name}: {times.size} frames for {n} truth frames; "
                      "missing frames count as unvoiced")
    dt = np.max(np.abs(times[:m] - truth_times[:m])) if m else 0.0
    if dt > 1e-6:
        raise RuntimeError(f"{name}: frame times differ from the truth's by up to {dt:.6f} s")
    f = np.zeros(n)
    v = np.zeros(n, dtype=bool)
    f[:m] = np.where(np.isfinite(f0[:m]), f0[:m], 0.0)
    v[:m] = voiced[:m] & (f[:m] > 0)
    f[~v] = 0.0  # a frame called unvoiced carries no pitch
    return f, v


def warm_up():
    """Run every method once on a short signal (numba compilation, librosa caches)."""
    times, f0 = synth.f0_contour(1.0, hop_s=HOP_S, kind="phrase", f0_hz=150.0, seed=1)
    y = synth.voice(times, f0, SR, seed=1, unvoiced="breath")
    for run in RUNNERS.values():
        run(y)


# ---------------------------------------------------------------------------
# scores
# ---------------------------------------------------------------------------


def edge_mask(ref_v):
    """Where each frame lies relative to the true voicing changes of one utterance.

    0: interior (more than EDGE_FRAMES frames from any change); 1: within
    EDGE_FRAMES frames of a voicing onset; 2: of a voicing offset (the nearer
    change wins).
    """
    n = ref_v.size
    kind = np.zeros(n, dtype=np.int8)
    dist = np.full(n, np.inf)
    idx = np.arange(n)
    for c in np.flatnonzero(np.diff(ref_v.astype(np.int8)) != 0):
        # the change lies between frames c and c + 1
        d = np.where(idx <= c, c - idx, idx - c - 1).astype(float)
        near = (d < EDGE_FRAMES) & (d < dist)
        kind[near] = 1 if ref_v[c + 1] else 2
        dist = np.minimum(dist, d)
    return kind


def score(ref_f, ref_v, est_f, est_v, edge, has_voicing):
    """Frame scores of pooled (concatenated) frames; percentages and cents."""
    n = ref_f.size
    ref_cent = mir_eval.melody.hz2cents(ref_f)
    est_cent = mir_eval.melody.hz2cents(est_f)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        # mir_eval.melody.raw_pitch_accuracy (Poliner et al. 2007; Salamon et al. 2014):
        # share of truth-voiced frames whose estimate lies within 50 cents
        rpa = mir_eval.melody.raw_pitch_accuracy(ref_v.astype(float), ref_cent,
                                                 est_v.astype(float), est_cent,
                                                 cent_tolerance=CENT_TOL)
        vrec, vfa = mir_eval.melody.voicing_measures(ref_v.astype(float), est_v.astype(float))
    both = ref_v & est_v
    ratio = np.ones(n)
    ratio[both] = est_f[both] / ref_f[both]
    gross = both & (np.abs(ratio - 1.0) > GROSS_REL)
    fine = both & ~gross
    cents = np.zeros(n)
    cents[both] = 1200.0 * np.log2(ratio[both])
    n_ref_v = int(ref_v.sum())
    out = {
        "frames": int(n),
        "truth_voiced_frames": n_ref_v,
        "rpa": 100.0 * rpa,
        "gpe": 100.0 * gross.sum() / max(both.sum(), 1),
        "vde": 100.0 * np.mean(ref_v != est_v) if has_voicing else None,
        "fine_cents": float(np.mean(np.abs(cents[fine]))) if fine.any() else float("nan"),
        "voicing_recall": 100.0 * vrec if has_voicing else None,
        "voicing_false_alarm": 100.0 * vfa if has_voicing else None,
    }
    # --- diagnostics -----------------------------------------------------
    lc = cents[gross]
    classes = {}
    taken = np.zeros(lc.size, dtype=bool)
    for label, target in (("x1/2", -1200.0), ("x2", 1200.0),
                          ("x1/3", -1200.0 * np.log2(3.0)), ("x3", 1200.0 * np.log2(3.0)),
                          ("x1/4", -2400.0)):
        sel = ~taken & (np.abs(lc - target) <= RATIO_WINDOW_CENTS)
        classes[label] = int(sel.sum())
        taken |= sel
    classes["other_down"] = int((~taken & (lc < 0)).sum())
    classes["other_up"] = int((~taken & (lc > 0)).sum())
    miss = ref_v & ~est_v
    fa = ~ref_v & est_v
    wrong_within_20 = both & ~gross & (np.abs(cents) >= CENT_TOL)
    out["diag"] = {
        "voiced_in_both": int(both.sum()),
        "gross_errors": int(gross.sum()),
        "gross_by_ratio": classes,
        "misses": int(miss.sum()),
        "misses_onset": int((miss & (edge == 1)).sum()),  # late voicing onset
        "misses_offset": int((miss & (edge == 2)).sum()),  # early voicing offset
        "misses_interior": int((miss & (edge == 0)).sum()),
        "false_alarms": int(fa.sum()),
        "false_alarms_onset": int((fa & (edge == 1)).sum()),  # voicing starts too early
        "false_alarms_offset": int((fa & (edge == 2)).sum()),  # voicing hangs over
        "false_alarms_interior": int((fa & (edge == 0)).sum()),
        # truth-voiced frames that RPA counts wrong, by cause
        "rpa_loss_unvoiced": int(miss.sum()),
        "rpa_loss_gross": int(gross.sum()),
        "rpa_loss_50c_to_20pct": int(wrong_within_20.sum()),
        "truth_voiced_below_fmin": int((ref_v & (ref_f < FMIN)).sum()),
    }
    return out


# ---------------------------------------------------------------------------
# CLI timing
# ---------------------------------------------------------------------------


def time_cli():
    """Wall time of the command-line tool on a 3 s corpus voice (second of two runs)."""
    if importlib.util.find_spec("harmtrack.cli") is None:
        return {"available": False, "reason": "harmtrack/cli.py missing"}
    spec = utterance_spec(0)
    spec = dict(spec, duration=3.0)
    times, f0 = truth_contour(spec)
    y = render(spec, times, f0, "clean")
    walls = []
    with tempfile.TemporaryDirectory(prefix="harmtrack_bench_") as tmp:
        wav = Path(tmp) / "tmp.wav"
        csv = Path(tmp) / "tmp.csv"
        synth.write_wav(wav, y, SR)
        cmd = [sys.executable, "-m", "harmtrack", "track", str(wav), "-o", str(csv), "-q"]
        for _ in range(2):  # the first run fills numba's on-disk cache
            t0 = time.perf_counter()
            try:
                proc = subprocess.run(cmd, capture_output=True, text=True, timeout=300,
                                      cwd=str(REPO), env=os.environ.copy())
            except subprocess.TimeoutExpired:
                return {"available": False, "reason": "timed out after 300 s"}
            walls.append(time.perf_counter() - t0)
            if proc.returncode != 0:
                last = (proc.stderr.strip().splitlines() or ["(no message)"])[-1]
                return {"available": False,
                        "reason": f"exit status {proc.returncode}: {last[:200]}"}
    return {"available": True, "first_s": walls[0], "wall_s": walls[1],
            "audio_s": y.size / SR, "goal_s": CLI_GOAL_S}


# ---------------------------------------------------------------------------
# report
# ---------------------------------------------------------------------------


def fmt(v, spec="{:6.2f}", width=7):
    if v is None:
        return "-".rjust(width)
    if isinstance(v, float) and not np.isfinite(v):
        return "nan".rjust(width)
    return spec.format(v).rjust(width)


def row(label, method, s, rtf):
    return (f"{label:<16s} {method:<10s}{fmt(s['rpa'])}{fmt(s['gpe'])}{fmt(s['vde'])}"
            f"{fmt(s['fine_cents'], '{:6.1f}')}{fmt(rtf, '{:7.3f}', 8)}")


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--quick", action="store_true", help="3 utterances per condition")
    ap.add_argument("--seeds", type=int, default=None,
                    help="utterances per condition (default 10, or 3 with --quick)")
    ap.add_argument("--json", type=Path, default=None, help="write every number to this file")
    ap.add_argument("--repeats", type=int, default=3,
                    help="timing runs per file for harmtrack and yin (fastest counts); "
                         "pyin, far slower, runs once")
    ap.add_argument("--conditions", default=None,
                    help="comma-separated subset of: " + ",".join(CONDITIONS))
    args = ap.parse_args(argv)

    n_utt = args.seeds if args.seeds is not None else (3 if args.quick else 10)
    if n_utt < 1:
        ap.error("--seeds must be at least 1")
    if args.conditions:
        conds = [c.strip() for c in args.conditions.split(",") if c.strip()]
        bad = [c for c in conds if c not in CONDITIONS]
        if bad:
            ap.error(f"unknown condition(s) {', '.join(bad)}; choose from {', '.join(CONDITIONS)}")
    else:
        conds = list(CONDITIONS)

    warnings.filterwarnings("ignore", category=FutureWarning)
    warnings.filterwarnings("ignore", category=DeprecationWarning)

    load = os.getloadavg() if hasattr(os, "getloadavg") else (float("nan"),) * 3
    print(f"harmtrack {harmtrack.__version__} | librosa {librosa.__version__} | "
          f"mir_eval {mir_eval.__version__} | numpy {np.__version__} | "
          f"python {platform.python_version()} | {platform.machine()}")
    print(f"threads: 1 (env vars{' + threadpoolctl' if _single_thread.THREAD_LIMITER else ''}) | "
          f"load average {load[0]:.2f} on {os.cpu_count()} CPUs"
          + ("  << machine is busy: timings are unreliable"
             if load[0] > max(0.5, 0.25 * (os.cpu_count() or 1)) else ""))

    specs = [utterance_spec(j) for j in range(n_utt)]
    truths = [truth_contour(s) for s in specs]
    total_audio = sum(t[0][-1] + 1.0 / SR for t in truths)
    n_vf = sum(int(np.isfinite(t[1]).sum()) for t in truths)
    n_f = sum(t[1].size for t in truths)
    vf = np.concatenate([t[1][np.isfinite(t[1])] for t in truths])
    print(f"corpus: {n_utt} utterances x {len(conds)} conditions, {total_audio:.1f} s each "
          f"condition, {n_f} frames ({100.0 * n_vf / n_f:.1f} % voiced), true f0 "
          f"{vf.min():.0f}-{vf.max():.0f} Hz, speakers {', '.join(f'{b:g}' for b in sorted(set(s['f0_base'] for s in specs)))} Hz"
          f" | {int((vf < FMIN).sum())} voiced frames below {FMIN:g} Hz")

    t_warm = time.perf_counter()
    warm_up()
    print(f"warm-up {time.perf_counter() - t_warm:.1f} s")

    # per condition, per method: pooled arrays and processing time
    pooled = {c: {m: {"f": [], "v": []} for m in METHODS} for c in conds}
    ref = {c: {"f": [], "v": [], "edge": []} for c in conds}
    secs = {c: {m: 0.0 for m in METHODS} for c in conds}
    audio = {c: 0.0 for c in conds}
    t_run = time.perf_counter()
    for c in conds:
        for spec, (times, f0) in zip(specs, truths):
            y = render(spec, times, f0, c)
            rv = np.isfinite(f0)
            ref[c]["f"].append(np.where(rv, f0, 0.0))
            ref[c]["v"].append(rv)
            ref[c]["edge"].append(edge_mask(rv))
            audio[c] += y.size / SR
            for m in METHODS:
                # Processing time: the fastest of --repeats runs (the same for every
                # method), so that a passing hiccup of the machine is not counted.
                best = np.inf
                for _ in range(args.repeats if m != "pyin" else 1):
                    t0 = time.perf_counter()
                    out = RUNNERS[m](y)
                    best = min(best, time.perf_counter() - t0)
                secs[c][m] += best
                f, v = align(m, times, *out)
                pooled[c][m]["f"].append(f)
                pooled[c][m]["v"].append(v)
        print(f"  {c:<15s} done ({time.perf_counter() - t_run:6.1f} s elapsed)", flush=True)

    cat = np.concatenate
    results = {c: {} for c in conds}
    for c in conds:
        rf, rv, re_ = cat(ref[c]["f"]), cat(ref[c]["v"]), cat(ref[c]["edge"])
        for m in METHODS:
            s = score(rf, rv, cat(pooled[c][m]["f"]), cat(pooled[c][m]["v"]), re_, HAS_VOICING[m])
            s["seconds"] = secs[c][m]
            s["audio_s"] = audio[c]
            s["rtf"] = secs[c][m] / audio[c]
            results[c][m] = s
    allr = {}
    rf = cat([cat(ref[c]["f"]) for c in conds])
    rv = cat([cat(ref[c]["v"]) for c in conds])
    re_ = cat([cat(ref[c]["edge"]) for c in conds])
    for m in METHODS:
        s = score(rf, rv, cat([cat(pooled[c][m]["f"]) for c in conds]),
                  cat([cat(pooled[c][m]["v"]) for c in conds]), re_, HAS_VOICING[m])
        s["seconds"] = sum(secs[c][m] for c in conds)
        s["audio_s"] = sum(audio.values())
        s["rtf"] = s["seconds"] / s["audio_s"]
        allr[m] = s

    # --- table -------------------------------------------------------------
    header = (f"{'condition':<16s} {'method':<10s}{'RPA%':>7s}{'GPE%':>7s}{'VDE%':>7s}"
              f"{'fine¢':>7s}{'RTF':>8s}")
    print()
    print(header)
    print("-" * len(header))
    for c in conds:
        for m in METHODS:
            print(row(c, m, results[c][m], results[c][m]["rtf"]))
        print()
    for m in METHODS:
        print(row("speech-like", m, allr[m], allr[m]["rtf"]))
    print("-" * len(header))
    print("RPA: mir_eval.melody raw pitch accuracy (50 cents), an unvoiced decision counts as a "
          "miss; GPE: >20 % error among frames voiced in both; VDE: wrong voiced/unvoiced "
          "decisions among all frames (yin: no voicing, '-'); fine: mean |cents| without gross "
          "errors; RTF: processing s / audio s, single thread.")

    # --- diagnostics -------------------------------------------------------
    print()
    print("harmtrack diagnostics (frame counts). Gross errors by est/true ratio (within "
          f"{RATIO_WINDOW_CENTS:g} cents of x1/2, x2, x1/3, x3, x1/4; else other down/up).")
    print(f"Voicing errors: 'on'/'off' lie within {EDGE_FRAMES} frames of a true voicing "
          "onset/offset, 'int' further inside a voiced (miss) or unvoiced (FA) stretch.")
    dh = (f"{'condition':<16s}{'truthV':>7s}{'RPAmiss':>8s}{'=unv':>6s}{'+gross':>7s}{'+>50c':>6s}"
          f" | {'x1/2':>5s}{'x2':>5s}{'x1/3':>5s}{'x3':>5s}{'x1/4':>5s}{'oth-':>5s}{'oth+':>5s}"
          f" | {'miss':>5s}{'on':>5s}{'off':>5s}{'int':>5s} |{'FA':>5s}{'on':>5s}{'off':>5s}"
          f"{'int':>5s}")
    print(dh)
    print("-" * len(dh))

    def drow(label, s):
        d = s["diag"]
        g = d["gross_by_ratio"]
        lost = d["rpa_loss_unvoiced"] + d["rpa_loss_gross"] + d["rpa_loss_50c_to_20pct"]
        return (f"{label:<16s}{s['truth_voiced_frames']:>7d}{lost:>8d}{d['rpa_loss_unvoiced']:>6d}"
                f"{d['rpa_loss_gross']:>7d}{d['rpa_loss_50c_to_20pct']:>6d}"
                f" | {g['x1/2']:>5d}{g['x2']:>5d}{g['x1/3']:>5d}{g['x3']:>5d}{g['x1/4']:>5d}"
                f"{g['other_down']:>5d}{g['other_up']:>5d}"
                f" | {d['misses']:>5d}{d['misses_onset']:>5d}{d['misses_offset']:>5d}"
                f"{d['misses_interior']:>5d} |{d['false_alarms']:>5d}{d['false_alarms_onset']:>5d}"
                f"{d['false_alarms_offset']:>5d}{d['false_alarms_interior']:>5d}")

    for c in conds:
        print(drow(c, results[c]["harmtrack"]))
    print(drow("speech-like", allr["harmtrack"]))
    print("RPAmiss = truth-voiced frames RPA counts wrong = unvoiced decision + gross error + "
          "error between 50 cents and 20 %.")
    print("pyin, same columns:")
    for c in conds:
        print(drow(c, results[c]["pyin"]))
    print(drow("speech-like", allr["pyin"]))

    # --- CLI -------------------------------------------------------------------
    print()
    cli = time_cli()
    if cli["available"]:
        ok = cli["wall_s"] < CLI_GOAL_S
        print(f"CLI wall time, 3 s file (second run): {cli['wall_s']:.2f} s "
              f"(first run {cli['first_s']:.2f} s; goal < {CLI_GOAL_S:g} s: "
              f"{'met' if ok else 'NOT met'})")
    else:
        print(f"CLI not available ({cli['reason']})")

    # --- floors ------------------------------------------------------------
    floors = Floors()
    floor = floors.add

    for c in conds:
        h, p, y_ = (results[c][m] for m in METHODS)
        floor(f"RPA harmtrack >= pyin, yin [{c}]",
              h["rpa"] >= p["rpa"] and h["rpa"] >= y_["rpa"],
              f"{h['rpa']:.2f} vs pyin {p['rpa']:.2f}, yin {y_['rpa']:.2f}")
    for c in conds:
        h, p = results[c]["harmtrack"], results[c]["pyin"]
        floor(f"VDE harmtrack <= pyin [{c}]", h["vde"] <= p["vde"],
              f"{h['vde']:.2f} vs pyin {p['vde']:.2f}")
    for c in conds:
        if c in GPE_FLOOR_CONDITIONS:
            g = results[c]["harmtrack"]["gpe"]
            floor(f"GPE harmtrack <= {GPE_FLOOR:g} % [{c}]", g <= GPE_FLOOR, f"{g:.2f}")
    floor(f"pooled RPA harmtrack >= {POOLED_RPA_FLOOR:g} %",
          allr["harmtrack"]["rpa"] >= POOLED_RPA_FLOOR, f"{allr['harmtrack']['rpa']:.2f}")
    floor("RTF harmtrack <= yin (pooled)", allr["harmtrack"]["rtf"] <= allr["yin"]["rtf"],
          f"{allr['harmtrack']['rtf']:.4f} vs yin {allr['yin']['rtf']:.4f}")

    n_fail = floors.report()

    if args.json:
        doc = {
            "settings": {
                "sr": SR, "hop_s": HOP_S, "utterances": n_utt, "conditions": conds,
                "speakers_hz": SPEAKERS, "jitter": JITTER, "shimmer": SHIMMER,
                "baselines": {"fmin": FMIN, "fmax": FMAX, "frame_length": FRAME_LENGTH,
                              "hop_length": HOP, "center": True},
                "condition_descriptions": {c: CONDITIONS[c][0] for c in conds},
            },
            "environment": {
                "harmtrack": harmtrack.__version__, "librosa": librosa.__version__,
                "mir_eval": mir_eval.__version__, "numpy": np.__version__,
                "python": platform.python_version(), "machine": platform.machine(),
                "load_average_1min": load[0], "cpus": os.cpu_count(),
            },
            "utterances": [dict(s, vowels=list(s["vowels"])) for s in specs],
            "results": results, "pooled": allr, "cli": cli, "floors": floors.items,
            "failed_floors": n_fail,
        }
        args.json.parent.mkdir(parents=True, exist_ok=True)
        args.json.write_text(json.dumps(doc, indent=2, default=float) + "\n")
        print(f"\nwrote {args.json}")

    print(f"\nfailed floors: {n_fail} of {len(floors)}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
