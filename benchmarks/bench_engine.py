"""Engine-speed benchmark: harmtrack's engine preset against librosa.pyin and librosa.yin.

Run from the repository root::

    python benchmarks/bench_engine.py [--quick] [--seeds N] [--json OUT]
                                      [--conditions a,b] [--cylinders 4,6,8]

A labelled corpus of engine sounds is synthesised in memory with
:mod:`harmtrack.engine_synth` (known crankshaft speed every 10 ms; 4-stroke
engines with 4, 6 and 8 cylinders, healthy or with one dead cylinder, 5 dB
white noise, high-passed at 150 Hz), tracked by the three methods in the same
process on the same firing-frequency range, and scored frame by frame against
the true rpm.  See ``benchmarks/README.md`` ("Engine benchmark") for the
columns.

The script is a report run by hand, not a test.  It exits with status 1 when a
floor fails and 0 otherwise; its last line is the number of failed floors.
"""

import _single_thread  # noqa: F401, I001  (first: one thread before numpy loads)
from _floors import Floors  # noqa: E402

import argparse  # noqa: E402
import json  # noqa: E402
import os  # noqa: E402
import platform  # noqa: E402
import sys  # noqa: E402
import time  # noqa: E402
import warnings  # noqa: E402
from pathlib import Path  # noqa: E402

import numpy as np  # noqa: E402


import librosa  # noqa: E402

REPO = _single_thread.REPO

import harmtrack  # noqa: E402
from harmtrack import engine_synth as es  # noqa: E402

# ---------------------------------------------------------------------------
# settings
# ---------------------------------------------------------------------------

SR = 16000
HOP_S = 0.01
HOP = 160  # samples, = HOP_S * SR
STROKES = 4
RPM_MIN, RPM_MAX = 800.0, 4000.0  # speed range given to every method
#: Margin of the firing-frequency range beyond the rpm range, the same for all
#: methods: fmin = firing(RPM_MIN) * 0.95, fmax = firing(RPM_MAX) * 1.05.  It
#: equals harmtrack's engine-preset margin (checked at start-up).
RANGE_MARGIN = 0.05

CYLINDERS = (4, 6, 8)
HEALTH = ("healthy", "dead")  # dead: cylinder 0 at -200 dB
WEAK_DB = -200.0
HIGHPASS_HZ = 150.0
NOISE_SNR_DB = 5.0
NOISE_COLOR = "white"

#: name -> (label, rpm_profile keywords incl. duration_s)
CONDITIONS = {
    "ramp3": ("ramp 3 s", dict(duration_s=3.0, kind="ramp", rpm=800.0, rpm_end=4000.0)),
    "fastramp": ("fast ramp", dict(duration_s=1.6, kind="ramp", rpm=800.0, rpm_end=4000.0)),
    "steady1200": ("steady 1200", dict(duration_s=3.0, kind="steady", rpm=1200.0)),
    "steady3000": ("steady 3000", dict(duration_s=3.0, kind="steady", rpm=3000.0)),
}
QUICK_CONDITIONS = ("ramp3", "steady1200")

METHODS = ("harmtrack", "pyin", "yin")

TOL_REL = 0.01  # "within 1 %" of the true rpm (this benchmark's choice)
CENT_TOL = 50.0  # "within 50 cents" (common practice; mir_eval.melody's default tolerance)
GROSS_REL = 0.2  # gross error: |est / true - 1| > 20 %, or no estimate (common practice)
RATIO_WINDOW_CENTS = 150.0  # gross-error ratio classes: within this of x1/2, x1/3, ...
#: Floor from the project's issue: harmtrack's pooled gross share <= this x pyin's.
GROSS_FACTOR_FLOOR = 0.25


# ---------------------------------------------------------------------------
# corpus
# ---------------------------------------------------------------------------


def per_rpm(cylinders):
    """Firing frequency in Hz of one rpm."""
    return es.firing_hz(1.0, cylinders=cylinders, strokes=STROKES)


def freq_range(cylinders):
    """(fmin, fmax) in Hz of the firing frequency, shared by all methods."""
    k = per_rpm(cylinders)
    return RPM_MIN * k * (1.0 - RANGE_MARGIN), RPM_MAX * k * (1.0 + RANGE_MARGIN)


def truth_curve(condition, seed):
    kw = dict(CONDITIONS[condition][1])
    duration = kw.pop("duration_s")
    return es.rpm_profile(duration, hop_s=HOP_S, seed=seed, **kw)


def render(times, rpm, cylinders, health, seed):
    """The signal of one file.  Healthy and dead files of a seed share gains and noise."""
    return es.engine(times, rpm, SR, cylinders=cylinders, strokes=STROKES, seed=seed,
                     weak_cylinder=0 if health == "dead" else None, weak_db=WEAK_DB,
                     highpass_hz=HIGHPASS_HZ, noise_snr_db=NOISE_SNR_DB,
                     noise_color=NOISE_COLOR)


def condition_label(condition, seed=0):
    """Label with the speed range and the peak rate of change of the truth."""
    name, kw = CONDITIONS[condition]
    _, rpm = truth_curve(condition, seed)
    rate = np.max(np.abs(np.diff(rpm))) / HOP_S
    if kw["kind"] == "ramp":
        what = f"{kw['rpm']:g} -> {kw['rpm_end']:g} rpm over {kw['duration_s']:g} s"
    else:
        what = f"{kw['rpm']:g} rpm +-0.5 % wander, {kw['duration_s']:g} s"
    return f"{name}: {what}, peak rate {rate:.0f} rpm/s"


# ---------------------------------------------------------------------------
# methods
# ---------------------------------------------------------------------------


def librosa_frame_length(fmin, two_periods=False):
    """Smallest power of two that librosa.yin accepts for ``fmin`` at SR.

    Found by asking librosa itself (librosa 0.11, ``librosa/core/pitch.py``,
    raises ParameterError unless ``sr / fmin < frame_length - 1`` and warns
    unless ``sr / fmin < frame_length // 2``); also returns whether librosa warned that
    fewer than two periods of fmin fit into the frame.  With ``two_periods``
    the smallest power of two that librosa accepts without that warning.
    """
    n = 64
    while n <= 1 << 16:
        with warnings.catch_warnings(record=True) as caught:
            warnings.simplefilter("always")
            try:
                librosa.yin(np.zeros(2 * n), fmin=fmin, fmax=fmin * 4.0, sr=SR,
                            frame_length=n, hop_length=HOP, center=True)
            except librosa.util.exceptions.ParameterError:
                n *= 2
                continue
        short = any("two periods" in str(w.message) for w in caught)
        if short and two_periods:
            n *= 2
            continue
        return n, short
    raise RuntimeError(f"no frame length up to 65536 accepted for fmin={fmin:g} Hz")


class Methods:
    """The three trackers for one cylinder count, each returning (times, firing Hz)."""

    def __init__(self, cylinders, two_periods=False):
        self.cylinders = cylinders
        self.fmin, self.fmax = freq_range(cylinders)
        self.frame_length, self.short_frame = librosa_frame_length(self.fmin, two_periods)
        self.last_flag = None

    def harmtrack(self, y):
        tr = harmtrack.track(y, SR, preset="engine", cylinders=self.cylinders, strokes=STROKES,
                             rpm_min=RPM_MIN, rpm_max=RPM_MAX, hop_s=HOP_S)
        self.last_flag = np.asarray(tr.uneven_flag, dtype=bool)
        self.last_settings = tr.settings
        rpm = np.asarray(tr.rpm, dtype=np.float64)
        # compared in rpm, expressed as firing Hz like the other methods
        # (firing Hz = rpm * cylinders / 120 for a 4-stroke engine; common practice)
        return np.asarray(tr.times, dtype=np.float64), rpm * per_rpm(self.cylinders)

    def pyin(self, y):
        f0, voiced, _ = librosa.pyin(y, fmin=self.fmin, fmax=self.fmax, sr=SR,
                                     frame_length=self.frame_length, hop_length=HOP, center=True)
        f0 = np.asarray(f0, dtype=np.float64)
        f0[~np.asarray(voiced, dtype=bool)] = np.nan  # unvoiced: no estimate, scored as an error
        return librosa.times_like(f0, sr=SR, hop_length=HOP), f0

    def yin(self, y):
        f0 = librosa.yin(y, fmin=self.fmin, fmax=self.fmax, sr=SR,
                         frame_length=self.frame_length, hop_length=HOP, center=True)
        f0 = np.asarray(f0, dtype=np.float64)
        return librosa.times_like(f0, sr=SR, hop_length=HOP), f0


def align(name, truth_times, times, est):
    """Cut truth and estimate to their common number of frames (both at i * HOP_S)."""
    m = min(truth_times.size, times.size)
    dt = np.max(np.abs(times[:m] - truth_times[:m])) if m else 0.0
    if dt > 1e-6:
        raise RuntimeError(f"{name}: frame times differ from the truth's by up to {dt:.6f} s")
    return m, est[:m]


# ---------------------------------------------------------------------------
# scores
# ---------------------------------------------------------------------------


def score(ref_hz, est_hz):
    """Frame shares in % over pooled frames; a missing estimate (NaN) is an error."""
    n = ref_hz.size
    has = np.isfinite(est_hz) & (np.nan_to_num(est_hz) > 0)
    ratio = np.ones(n)
    ratio[has] = est_hz[has] / ref_hz[has]
    cents = 1200.0 * np.log2(ratio)
    gross = ~has | (np.abs(ratio - 1.0) > GROSS_REL)
    out = {
        "frames": int(n),
        "within_1pct": 100.0 * np.mean(has & (np.abs(ratio - 1.0) <= TOL_REL)) if n else np.nan,
        "within_50c": 100.0 * np.mean(has & (np.abs(cents) <= CENT_TOL)) if n else np.nan,
        "gross": 100.0 * np.mean(gross) if n else np.nan,
        "no_estimate": 100.0 * np.mean(~has) if n else np.nan,
    }
    # gross errors with an estimate, by the ratio estimate / truth
    lc = cents[gross & has]
    classes = {"none": int((~has).sum())}
    taken = np.zeros(lc.size, dtype=bool)
    for label, r in (("x1/2", 0.5), ("x1/3", 1 / 3), ("x1/4", 0.25), ("x2", 2.0), ("x3", 3.0)):
        sel = ~taken & (np.abs(lc - 1200.0 * np.log2(r)) <= RATIO_WINDOW_CENTS)
        classes[label] = int(sel.sum())
        taken |= sel
    classes["other_down"] = int((~taken & (lc < 0)).sum())
    classes["other_up"] = int((~taken & (lc > 0)).sum())
    out["gross_by_ratio"] = classes
    return out


def pool(records, method, **where):
    """Score of ``method`` over the records matching ``where`` (frames concatenated)."""
    sel = [r for r in records if all(r[k] == v for k, v in where.items())]
    if not sel:
        return None
    cat = np.concatenate
    s = score(cat([r["ref"][method] for r in sel]), cat([r["est"][method] for r in sel]))
    s["files"] = len(sel)
    s["seconds"] = float(sum(r["seconds"][method] for r in sel))
    s["audio_s"] = float(sum(r["audio_s"] for r in sel))
    s["rtf"] = s["seconds"] / s["audio_s"]
    if method == "harmtrack":
        s["flag"] = 100.0 * float(np.mean(cat([r["flag"] for r in sel])))
    return s


# ---------------------------------------------------------------------------
# report
# ---------------------------------------------------------------------------


def fmt(v, spec="{:6.1f}", width=7):
    if v is None:
        return "-".rjust(width)
    if isinstance(v, float) and not np.isfinite(v):
        return "nan".rjust(width)
    return spec.format(v).rjust(width)


HEADER = (f"{'cyl':<4s}{'engine':<9s}{'method':<10s}{'frames':>7s}{'<=1%':>7s}{'<=50c':>7s}"
          f"{'gross%':>7s}{'none%':>7s}{'RTF':>8s}{'flag%':>7s}")


def row(cyl, health, method, s):
    return (f"{cyl:<4s}{health:<9s}{method:<10s}{s['frames']:>7d}{fmt(s['within_1pct'])}"
            f"{fmt(s['within_50c'])}{fmt(s['gross'])}{fmt(s['no_estimate'])}"
            f"{fmt(s['rtf'], '{:7.3f}', 8)}{fmt(s.get('flag'))}")


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--quick", action="store_true",
                    help="1 seed and the conditions " + ", ".join(QUICK_CONDITIONS))
    ap.add_argument("--seeds", type=int, default=None,
                    help="seeds 0..N-1 per condition, cylinder count and engine state "
                         "(default 3, or 1 with --quick)")
    ap.add_argument("--json", type=Path, default=None, help="write every number to this file")
    ap.add_argument("--repeats", type=int, default=2,
                    help="timing runs per file for harmtrack and yin (fastest counts); "
                         "pyin, far slower, runs once")
    ap.add_argument("--conditions", default=None,
                    help="comma-separated subset of: " + ",".join(CONDITIONS))
    ap.add_argument("--librosa-frame", choices=("min", "two-periods"), default="min",
                    help="librosa frame_length: the smallest power of two librosa accepts "
                         "(min, default) or the smallest without its fewer-than-two-periods "
                         "warning (two-periods)")
    ap.add_argument("--cylinders", default=None,
                    help="comma-separated subset of: " + ",".join(map(str, CYLINDERS)))
    args = ap.parse_args(argv)

    n_seeds = args.seeds if args.seeds is not None else (1 if args.quick else 3)
    if n_seeds < 1:
        ap.error("--seeds must be at least 1")
    if args.repeats < 1:
        ap.error("--repeats must be at least 1")
    if args.conditions:
        conds = [c.strip() for c in args.conditions.split(",") if c.strip()]
        bad = [c for c in conds if c not in CONDITIONS]
        if bad:
            ap.error(f"unknown condition(s) {', '.join(bad)}; choose from {', '.join(CONDITIONS)}")
    else:
        conds = list(QUICK_CONDITIONS if args.quick else CONDITIONS)
    if args.cylinders:
        try:
            cyls = [int(c) for c in args.cylinders.split(",") if c.strip()]
        except ValueError:
            ap.error(f"--cylinders must be integers, got {args.cylinders!r}")
        if not cyls or any(c not in CYLINDERS for c in cyls):
            ap.error(f"--cylinders must be a subset of {','.join(map(str, CYLINDERS))}")
    else:
        cyls = list(CYLINDERS)
    seeds = list(range(n_seeds))

    warnings.filterwarnings("ignore", category=FutureWarning)
    warnings.filterwarnings("ignore", category=DeprecationWarning)
    # librosa warns on every call when fewer than two periods of fmin fit into
    # its frame; the header reports it once instead.
    warnings.filterwarnings("ignore", message=".*less than two periods.*")

    load = os.getloadavg() if hasattr(os, "getloadavg") else (float("nan"),) * 3
    print(f"harmtrack {harmtrack.__version__} | librosa {librosa.__version__} | "
          f"numpy {np.__version__} | python {platform.python_version()} | {platform.machine()}")
    print(f"threads: 1 (env vars{' + threadpoolctl' if _single_thread.THREAD_LIMITER else ''}) | "
          f"load average {load[0]:.2f} on {os.cpu_count()} CPUs"
          + ("  << machine is busy: timings are unreliable"
             if load[0] > max(0.5, 0.25 * (os.cpu_count() or 1)) else ""))
    n_files = len(conds) * len(cyls) * len(HEALTH) * n_seeds
    audio_per = {c: truth_curve(c, 0)[0][-1] + 1.0 / SR for c in conds}
    print(f"corpus: {n_files} files = {len(conds)} conditions x cylinders "
          f"{','.join(map(str, cyls))} x (healthy, dead cylinder 0 at {WEAK_DB:g} dB) x "
          f"seeds 0..{n_seeds - 1}; {STROKES}-stroke, {NOISE_SNR_DB:g} dB {NOISE_COLOR} noise, "
          f"high-pass {HIGHPASS_HZ:g} Hz, {SR} Hz; "
          f"{sum(audio_per.values()) * len(cyls) * len(HEALTH) * n_seeds:.1f} s of audio")
    for c in conds:
        print(f"  {c:<11s} {condition_label(c)}")

    # --- methods: ranges, frame lengths, warm-up --------------------------------
    methods = {}
    compile_s = None
    print(f"search range, all methods: firing frequency at {RPM_MIN:g} rpm x "
          f"{1 - RANGE_MARGIN:g} to {RPM_MAX:g} rpm x {1 + RANGE_MARGIN:g}")
    t_warm = time.perf_counter()
    for cyl in cyls:
        m = methods[cyl] = Methods(cyl, two_periods=args.librosa_frame == "two-periods")
        # Warm-up on a short file: numba compilation (or its on-disk cache) and
        # librosa's caches happen here, before anything is timed.
        t, rpm = es.rpm_profile(1.0, kind="ramp", rpm=RPM_MIN, rpm_end=RPM_MAX, hop_s=HOP_S, seed=0)
        y = render(t, rpm, cyl, "dead", 0)
        for name in METHODS:
            t0 = time.perf_counter()
            getattr(m, name)(y)
            if name == "harmtrack" and compile_s is None:
                compile_s = time.perf_counter() - t0
        got = (m.last_settings["fmin_hz"], m.last_settings["fmax_hz"])
        if not np.allclose(got, (m.fmin, m.fmax), rtol=1e-9):
            raise RuntimeError(f"harmtrack's range {got} differs from the baselines' "
                               f"({m.fmin}, {m.fmax}) for {cyl} cylinders")
        print(f"  {cyl} cyl: {m.fmin:6.2f} - {m.fmax:6.2f} Hz; librosa frame_length "
              f"{m.frame_length} ({m.frame_length / SR * 1000:.0f} ms"
              + (", librosa warns: fewer than two periods of fmin per frame)"
                 if m.short_frame else ")"))
    print(f"warm-up {time.perf_counter() - t_warm:.1f} s; harmtrack's first call "
          f"{compile_s:.2f} s (numba compile or cache load, excluded from RTF)")

    # --- run -------------------------------------------------------------------
    records = []
    t_run = time.perf_counter()
    for c in conds:
        for cyl in cyls:
            m = methods[cyl]
            for seed in seeds:
                times, rpm = truth_curve(c, seed)
                ref_hz = rpm * per_rpm(cyl)
                for health in HEALTH:
                    y = render(times, rpm, cyl, health, seed)
                    rec = {"condition": c, "cylinders": cyl, "health": health, "seed": seed,
                           "audio_s": y.size / SR, "ref": {}, "est": {}, "seconds": {}}
                    for name in METHODS:
                        # Processing time: the fastest of --repeats runs (pyin: one),
                        # so that a passing hiccup of the machine is not counted.
                        best = np.inf
                        for _ in range(args.repeats if name != "pyin" else 1):
                            t0 = time.perf_counter()
                            out = getattr(m, name)(y)
                            best = min(best, time.perf_counter() - t0)
                        k, est = align(name, times, *out)
                        rec["seconds"][name] = best
                        rec["ref"][name] = ref_hz[:k]
                        rec["est"][name] = est
                        if name == "harmtrack":
                            rec["flag"] = m.last_flag[:k]
                    records.append(rec)
        print(f"  {c:<11s} done ({time.perf_counter() - t_run:6.1f} s elapsed)", flush=True)

    # --- tables per condition ---------------------------------------------------
    results = {}
    for c in conds:
        print()
        print(f"== {condition_label(c)} ==")
        print(HEADER)
        print("-" * len(HEADER))
        results[c] = {}
        for cyl in cyls:
            for health in HEALTH:
                for name in METHODS:
                    s = pool(records, name, condition=c, cylinders=cyl, health=health)
                    results[c][f"{cyl}/{health}/{name}"] = s
                    print(row(str(cyl) if name == "harmtrack" else "",
                              health if name == "harmtrack" else "", name, s))
        for name in METHODS:
            s = pool(records, name, condition=c)
            results[c][f"all/{name}"] = s
            print(row("all", "", name, s))

    # --- pooled summary ---------------------------------------------------------
    pooled = {}
    print()
    print("== pooled over all conditions ==")
    print(HEADER)
    print("-" * len(HEADER))
    for cyl in cyls:
        for name in METHODS:
            s = pool(records, name, cylinders=cyl)
            pooled[f"{cyl}/{name}"] = s
            print(row(str(cyl) if name == "harmtrack" else "", "both" if name == "harmtrack" else "",
                      name, s))
    for health in HEALTH:
        for name in METHODS:
            s = pool(records, name, health=health)
            pooled[f"{health}/{name}"] = s
            print(row("all" if name == "harmtrack" else "", health if name == "harmtrack" else "",
                      name, s))
    for name in METHODS:
        s = pool(records, name)
        pooled[name] = s
        print(row("all" if name == "harmtrack" else "", "both" if name == "harmtrack" else "",
                  name, s))
    print("-" * len(HEADER))
    print("Shares are of all frames. <=1%: within 1 % of the true rpm; <=50c: within 50 cents;\n"
          "gross%: off by more than 20 % or no estimate; none%: no estimate (harmtrack: no engine,\n"
          "pyin: unvoiced, yin: always estimates); RTF: processing s / audio s, one thread;\n"
          "flag%: harmtrack's uneven_flag set.")

    # --- gross errors by ratio ---------------------------------------------------
    print()
    print(f"gross errors by est/true ratio (frame counts, pooled; within {RATIO_WINDOW_CENTS:g} "
          "cents of the ratio, 'none' = no estimate)")
    labels = ("none", "x1/2", "x1/3", "x1/4", "x2", "x3", "other_down", "other_up")
    gh = f"{'method':<10s}{'engine':<9s}{'frames':>7s}" + "".join(
        f"{lab.replace('other_down', 'oth-').replace('other_up', 'oth+'):>7s}" for lab in labels)
    print(gh)
    print("-" * len(gh))
    for name in METHODS:
        for health in HEALTH:
            s = pooled[f"{health}/{name}"]
            g = s["gross_by_ratio"]
            print(f"{name:<10s}{health:<9s}{s['frames']:>7d}"
                  + "".join(f"{g[lab]:>7d}" for lab in labels))

    # --- report lines without a floor -------------------------------------------
    h = pooled["harmtrack"]
    print()
    print(f"harmtrack, healthy engines, share within 1 % of the true rpm: "
          f"{pooled['healthy/harmtrack']['within_1pct']:.1f} % "
          f"(pyin {pooled['healthy/pyin']['within_1pct']:.1f} %, "
          f"yin {pooled['healthy/yin']['within_1pct']:.1f} %)")
    print(f"harmtrack uneven_flag share: healthy {pooled['healthy/harmtrack']['flag']:.1f} % "
          f"of frames (false alarms), dead cylinder {pooled['dead/harmtrack']['flag']:.1f} % "
          "(detections)")
    print(f"RTF pooled: harmtrack {h['rtf']:.4f}, pyin {pooled['pyin']['rtf']:.4f}, "
          f"yin {pooled['yin']['rtf']:.4f} (harmtrack first call {compile_s:.2f} s not included)")

    # --- floors ------------------------------------------------------------------
    floors = Floors()
    floor = floors.add

    p = pooled["pyin"]
    floor(f"pooled gross harmtrack <= {GROSS_FACTOR_FLOOR:g} x pyin",
          h["gross"] <= GROSS_FACTOR_FLOOR * p["gross"],
          f"{h['gross']:.2f} % vs {GROSS_FACTOR_FLOOR:g} x {p['gross']:.2f} % = "
          f"{GROSS_FACTOR_FLOOR * p['gross']:.2f} %")

    n_fail = floors.report()

    if args.json:
        doc = {
            "settings": {
                "sr": SR, "hop_s": HOP_S, "strokes": STROKES, "rpm_min": RPM_MIN,
                "rpm_max": RPM_MAX, "range_margin": RANGE_MARGIN, "cylinders": cyls,
                "health": list(HEALTH), "weak_db": WEAK_DB, "highpass_hz": HIGHPASS_HZ,
                "noise_snr_db": NOISE_SNR_DB, "noise_color": NOISE_COLOR, "seeds": seeds,
                "conditions": {c: dict(CONDITIONS[c][1], label=condition_label(c))
                               for c in conds},
                "repeats": args.repeats, "librosa_frame": args.librosa_frame,
                "methods": {cyl: {"fmin": m.fmin, "fmax": m.fmax,
                                  "librosa_frame_length": m.frame_length,
                                  "librosa_short_frame_warning": m.short_frame,
                                  "hop_length": HOP, "center": True}
                            for cyl, m in methods.items()},
                "tolerances": {"within_rel": TOL_REL, "cents": CENT_TOL, "gross_rel": GROSS_REL},
            },
            "environment": {
                "harmtrack": harmtrack.__version__, "librosa": librosa.__version__,
                "numpy": np.__version__, "python": platform.python_version(),
                "machine": platform.machine(), "load_average_1min": load[0],
                "cpus": os.cpu_count(),
            },
            "harmtrack_first_call_s": compile_s,
            "files": [{k: r[k] for k in ("condition", "cylinders", "health", "seed", "audio_s",
                                         "seconds")} for r in records],
            "results": results, "pooled": pooled, "floors": floors.items, "failed_floors": n_fail,
        }
        args.json.parent.mkdir(parents=True, exist_ok=True)
        args.json.write_text(json.dumps(doc, indent=2, default=float) + "\n")
        print(f"\nwrote {args.json}")

    print(f"\nfailed floors: {n_fail} of {len(floors)}")
    return 1 if n_fail else 0


if __name__ == "__main__":
    sys.exit(main())
