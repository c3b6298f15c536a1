"""Command-line interface: ``harmtrack track``, ``batch``, ``score``, ``plot``, ``demo``, ``live``...

The commands parse options, call the public API, write label files and
report; they do no signal processing of their own.  Heavy modules are
imported inside the commands so that ``--help`` and ``--version`` stay quick.

Exit status: 0 on success, 2 for bad input, settings or usage (one line
``harmtrack: error: ...`` on stderr), 1 for an unexpected failure
(``harmtrack: internal error: ...``; ``--debug`` adds the traceback), and for
``live`` 3 when the input device is lost mid-stream (see :mod:`harmtrack.live`).
"""

from __future__ import annotations

import argparse
import os
import sys
import time
import traceback
import warnings
from pathlib import Path

from ._version import __version__

__all__ = ["main", "console", "build_parser"]

PROG = "harmtrack"
EXIT_OK = 0
EXIT_INTERNAL = 1
EXIT_USAGE = 2
DEMO_NAME = "demo_voice"
DEFAULT_DEMO_DIR = "harmtrack_demo"


# ---------------------------------------------------------------------------
# argument parsing
# ---------------------------------------------------------------------------


_DEBUG_HELP = "show the full traceback of any error"


def _common_options() -> argparse.ArgumentParser:
    """Options every subcommand accepts.

    Their defaults are suppressed so that a value given before the command
    name (``harmtrack --debug track ...``) is not reset by the subcommand.
    """
    common = argparse.ArgumentParser(add_help=False)
    common.add_argument("--debug", action="store_true", default=argparse.SUPPRESS,
                        help=_DEBUG_HELP)
    return common


def _tracker_options() -> argparse.ArgumentParser:
    """The analysis options shared by ``track`` and ``batch``."""
    p = argparse.ArgumentParser(add_help=False)
    g = p.add_argument_group("analysis")
    g.add_argument("--preset", default="voice", metavar="NAME",
                   help="settings preset: voice (speech, 50-800 Hz), singing (60-1600 Hz) or "
                        "engine (needs --cylinders); default: voice")
    g.add_argument("--fmin", type=float, metavar="HZ", help="lowest f0 searched, Hz")
    g.add_argument("--fmax", type=float, metavar="HZ", help="highest f0 searched, Hz")
    g.add_argument("--hop", type=float, metavar="S",
                   help="frame hop, and so the labels' time step, seconds (default 0.01)")
    g.add_argument("--frame", type=float, metavar="S",
                   help="analysis frame length, seconds (default: from fmin)")
    g.add_argument("--max-harmonics", type=int, metavar="N",
                   help="largest number of harmonics fitted (amplitude columns)")
    g.add_argument("--smoothing", type=float, metavar="X",
                   help="strength of the pitch-continuity prior, 0 to 20")
    g.add_argument("--no-prewhiten", action="store_true",
                   help="do not flatten the long-term noise spectrum before the fit")
    e = p.add_argument_group("engine preset")
    e.add_argument("--cylinders", type=int, metavar="N", help="number of cylinders, 1 to 24")
    e.add_argument("--strokes", type=int, metavar="{2,4}",
                   help="engine cycle: 4 (4-stroke, default) or 2 (2-stroke)")
    e.add_argument("--rpm-min", type=float, metavar="RPM",
                   help="lowest crankshaft speed searched (default 500)")
    e.add_argument("--rpm-max", type=float, metavar="RPM",
                   help="highest crankshaft speed searched (default 6500)")
    e.add_argument("--max-order", type=int, metavar="N",
                   help="highest engine order written (default 12)")
    e.add_argument("--uneven-threshold", type=float, metavar="DB",
                   help="uneven-firing flag threshold, dB of half-order re firing-order energy "
                        "(default -12)")
    return p


def build_parser() -> argparse.ArgumentParser:
    """The argument parser of the ``harmtrack`` command."""
    common = _common_options()
    parser = argparse.ArgumentParser(
        prog=PROG,
        description="Track the fundamental frequency (f0), voicing and harmonic amplitudes "
                    "of harmonic sounds, frame by frame.",
    )
    parser.add_argument("--debug", action="store_true", help=_DEBUG_HELP)
    parser.set_defaults(func=None)
    parser.add_argument("--version", action="version", version=f"{PROG} {__version__}")
    sub = parser.add_subparsers(title="commands", metavar="COMMAND")

    analysis = _tracker_options()
    p = sub.add_parser(
        "track", parents=[common, analysis], help="track one audio file and write its labels",
        description="Track one audio file and write one row per frame (time, f0, voicing, "
                    "harmonic amplitudes...) to a label file.",
    )
    p.add_argument("input", metavar="IN", help="audio file (WAV, FLAC, OGG...)")
    p.add_argument("-o", "--output", metavar="OUT", required=True,
                   help="label file to write; format from its extension: .csv, .npz or .json")
    p.add_argument("--format", metavar="FMT", dest="fmt",
                   help="label format csv, npz or json (overrides the extension)")
    p.add_argument("-q", "--quiet", action="store_true", help="print no summary")
    p.set_defaults(func=cmd_track)

    b = sub.add_parser(
        "batch", parents=[common, analysis], help="label every recording of a folder or manifest",
        description="Label every recording of a folder (recursive) or manifest (CSV with a "
                    "path column, or a list of paths): per-file labels mirroring the input's "
                    "folders, one Parquet dataset of all frames, and a summary per file. "
                    "Files already labelled with the same content and settings are skipped, "
                    "so an interrupted batch resumes where it stopped.",
    )
    b.add_argument("input", metavar="IN", help="folder of audio files, or a manifest file")
    b.add_argument("-o", "--output-dir", metavar="OUTDIR", required=True,
                   help="folder for the labels, the dataset and the summary")
    b.add_argument("--formats", metavar="FMTS", default="npz",
                   help="per-file label formats, comma-separated: npz, csv, json (default npz)")
    b.add_argument("--workers", type=int, metavar="N",
                   help="worker processes (default: all cores)")
    b.add_argument("--scheduler", metavar="ADDR",
                   help="run on a Dask cluster: the scheduler's address (tcp://host:port) or "
                        "scheduler file; 'local' starts a Dask cluster on this machine")
    b.add_argument("--no-dataset", action="store_true",
                   help="do not write the Parquet dataset of all frames")
    b.add_argument("-q", "--quiet", action="store_true", help="no progress bar")
    b.set_defaults(func=cmd_batch)

    d = sub.add_parser(
        "demo", parents=[common], help="track the bundled demo recordings and score them",
        description="Track the bundled demo recordings (a voice, a healthy and a misfiring "
                    "generator set), write their labels to OUTDIR and compare them with the "
                    "known true f0 and rpm.",
    )
    d.add_argument("-o", "--output-dir", metavar="OUTDIR", default=DEFAULT_DEMO_DIR,
                   help="folder for the results, created if missing "
                        f"(default: ./{DEFAULT_DEMO_DIR})")
    d.set_defaults(func=cmd_demo)

    s = sub.add_parser(
        "score", parents=[common], help="score f0 labels against reference f0 files",
        description="Score estimated f0 labels (harmtrack CSV, NPZ or JSON, or plain time/f0 "
                    "text) against references (time/f0 text, 0 or nan = unvoiced): one pair of "
                    "files, or two folders whose files are matched by name. Raw pitch and chroma "
                    "accuracy, gross and fine pitch error, voicing decision error, recall and "
                    "false alarm, per file and pooled.",
    )
    s.add_argument("estimate", metavar="EST", help="estimated labels: a file or a folder")
    s.add_argument("reference", metavar="REF", help="reference f0: a file or a folder")
    s.add_argument("--csv", metavar="OUT", help="also write the scores to this CSV file")
    s.add_argument("--json", metavar="OUT", help="also write the scores to this JSON file")
    s.add_argument("--method", choices=("nearest", "linear"), default="nearest",
                   help="how the estimate is put on the reference's times: the nearest frame "
                        "within half a hop (default) or interpolation inside voiced stretches")
    s.add_argument("--cents", type=float, default=50.0, metavar="C",
                   help="largest error of a raw pitch or chroma hit, cents (default 50)")
    s.add_argument("--gross", type=float, default=0.2, metavar="R",
                   help="relative error above which a frame is a gross error (default 0.2)")
    s.add_argument("-q", "--quiet", action="store_true", help="print no table")
    s.set_defaults(func=cmd_score)

    g = sub.add_parser(
        "plot", parents=[common, analysis], help="draw the track over the spectrogram",
        description="Draw a recording's spectrogram with its f0 track and harmonic positions, "
                    "and its harmonic amplitudes (engine presets: rpm and the engine-order "
                    "map, uneven firing marked). Tracks the recording first, or draws an "
                    "existing label file (--labels). PNG, SVG or PDF by the output's extension.",
    )
    g.add_argument("input", metavar="IN",
                   help="audio file (WAV, FLAC, OGG...), or a batch's output folder (a one-page "
                        "overview of its summary: f0 per file, voiced share, failures)")
    g.add_argument("-o", "--output", metavar="FIG", required=True,
                   help="figure file: .png, .svg or .pdf")
    g.add_argument("--labels", metavar="FILE",
                   help="draw these labels (harmtrack CSV, NPZ or JSON) instead of tracking")
    g.add_argument("--log-freq", action="store_true",
                   help="logarithmic frequency axis for the spectrogram")
    g.add_argument("--max-freq", type=float, metavar="HZ", help="top of the spectrogram, Hz")
    g.add_argument("--harmonics", type=int, default=8, metavar="N",
                   help="harmonics overlaid, 1 to 50 (default 8)")
    g.add_argument("--size", metavar="WxH", default="10x6",
                   help="figure size in inches (default 10x6)")
    g.add_argument("--dpi", type=int, default=120, help="PNG resolution, dots per inch (default 120)")
    g.set_defaults(func=cmd_plot)

    from . import live  # light at import: the capture modules load inside its commands

    live.add_commands(sub, common=common, analysis=analysis)
    return parser


# ---------------------------------------------------------------------------
# reporting
# ---------------------------------------------------------------------------


def _first_line(text) -> str:
    lines = str(text).strip().splitlines()
    return lines[0] if lines else ""


def _error_text(exc: BaseException) -> str:
    """One-line description of an expected error (naming the file for OS errors)."""
    if isinstance(exc, OSError) and not _is_harmtrack_error(exc):
        what = exc.strerror or _first_line(exc) or type(exc).__name__
        return f"{exc.filename}: {what}" if exc.filename else what
    return _first_line(exc)


def _is_harmtrack_error(exc: BaseException) -> bool:
    from .errors import HarmtrackError

    return isinstance(exc, HarmtrackError)


def _fmt_seconds(s: float) -> str:
    return f"{s:.3f} s" if s < 10 else f"{s:.1f} s"


def format_summary(track, *, source: str, output: str, fmt: str, seconds: float) -> str:
    """Human-readable summary of a finished run (several lines, no trailing newline)."""
    import numpy as np

    info = track.settings.get("input") or {}
    n_frames = len(track)
    if info.get("frames"):
        duration = info["frames"] / track.sr
    else:
        duration = float(track.times[-1]) if n_frames else 0.0
    channels = info.get("channels")
    ch = f", {channels} channel{'s' if channels != 1 else ''}" if channels else ""
    voiced = np.asarray(track.voiced, dtype=bool)
    share = 100.0 * voiced.mean() if n_frames else 0.0
    f0 = np.asarray(track.f0_hz)[voiced]
    if f0.size:
        f0_line = f"median {np.median(f0):.1f} Hz, range {f0.min():.1f} to {f0.max():.1f} Hz"
    else:
        f0_line = "no voiced frames"
    rate = min(float(track.sr), float(track.settings.get("analysis_sr", track.sr)))
    how = "" if rate == track.sr else " (resampled)"
    if track.is_engine:
        f0_line = f0_line.replace("median", "firing median")
    rows = [
        ("file", source),
        ("duration", f"{duration:.3f} s at {track.sr:g} Hz{ch}"),
        ("analysis", f"{rate:g} Hz{how}, {track.frame_s * 1000:.0f} ms frames"),
        ("frames", f"{n_frames} every {track.hop_s * 1000:g} ms, {share:.1f} % voiced"),
        ("f0", f0_line),
        *_engine_rows(track),
        ("took", _fmt_seconds(seconds)),
        ("output", f"{output} ({fmt})"),
    ]
    return "\n".join(f"{k:<10}{v}" for k, v in rows)


def _engine_rows(track) -> list:
    """Summary rows of an engine track: speed, uneven firing, strongest orders."""
    if not track.is_engine:
        return []
    s = track.summary()
    cfg = track.settings
    head = f"{cfg.get('cylinders')} cylinders, {cfg.get('strokes')}-stroke"
    if "rpm_mean" not in s:
        return [("engine", head + "; no engine heard")]
    thr = cfg.get("uneven_threshold_db")
    rows = [
        ("engine", head),
        ("rpm", f"mean {s['rpm_mean']:.0f}, range {s['rpm_min']:.0f} to {s['rpm_max']:.0f}"),
        ("uneven", f"{100.0 * s['flagged_fraction']:.1f} % of engine frames flagged "
                   f"(index median {s.get('uneven_db_median', float('nan')):.1f} dB, "
                   f"threshold {thr:g} dB)"),
        ("orders", "strongest " + ", ".join(f"{q:g}" for q in s.get("strongest_orders", []))),
    ]
    return rows


def format_scores(scores: dict) -> str:
    """The demo's scores against the true f0 (several lines)."""
    def pct(x):
        return "n/a" if x != x else f"{100.0 * x:.1f} %"

    rows = [
        ("raw pitch accuracy", pct(scores["raw_pitch_accuracy"])),
        ("gross pitch error", pct(scores["gross_pitch_error"])),
        ("voicing decision error", pct(scores["voicing_decision_error"])),
    ]
    return "\n".join(f"{k:<24}{v}" for k, v in rows)


# ---------------------------------------------------------------------------
# commands
# ---------------------------------------------------------------------------


def _track_options(args) -> dict:
    """Keyword options of :func:`harmtrack.track_file` from the parsed arguments."""
    return dict(
        preset=args.preset, fmin=args.fmin, fmax=args.fmax, hop_s=args.hop,
        frame_s=args.frame, max_harmonics=args.max_harmonics, smoothing=args.smoothing,
        prewhiten=False if args.no_prewhiten else None,
        cylinders=args.cylinders, strokes=args.strokes, rpm_min=args.rpm_min,
        rpm_max=args.rpm_max, max_order=args.max_order,
        uneven_threshold_db=args.uneven_threshold,
    )


def _naming(exc, path: str):
    """``exc`` with ``path`` in its message when it does not name a file yet."""
    from .errors import HarmtrackError

    msg = _first_line(exc)
    if path in msg:
        return exc
    return HarmtrackError(f"{path}: {msg}")


def cmd_track(args) -> int:
    """``harmtrack track IN -o OUT``."""
    from . import api
    from .errors import HarmtrackError
    from .io import labels
    from .io.atomic import check_destination

    source = args.input
    fmt = labels.resolve_format(args.output, args.fmt)
    check_destination(args.output)
    _refuse_overwriting_input(source, args.output)
    start = time.perf_counter()
    from .file_stream import needs_blocks, write_labels_in_blocks

    options = _track_options(args)
    try:
        if needs_blocks(source):
            # a long file: its labels are written (CSV) or spooled (NPZ, JSON) as produced
            tr, out = write_labels_in_blocks(source, args.output, options, fmt=fmt)
        else:
            tr = api.track_file(source, **options)
            out = None
    except HarmtrackError as exc:
        raise _naming(exc, source) from None
    seconds = time.perf_counter() - start
    if out is None:
        out = labels.write_labels(tr, args.output, fmt=fmt)
    if not args.quiet:
        print(format_summary(tr, source=source, output=os.fspath(out), fmt=fmt, seconds=seconds))
    return EXIT_OK


def _progress_printer(stream):
    """A progress callback drawing one line: files, audio hours, rate, ETA."""
    tty = stream.isatty()
    last = {"t": -1.0}

    def show(done, total, audio_done, fraction, elapsed):
        if not tty and done < total and elapsed - last["t"] < 10.0:
            return
        last["t"] = elapsed
        eta = elapsed * (1.0 - fraction) / fraction if fraction > 0 else float("nan")
        width = 24
        filled = int(width * done / total) if total else width
        bar = "#" * filled + "-" * (width - filled)
        eta_text = "--:--" if eta != eta else f"{int(eta // 60):02d}:{int(eta % 60):02d}"
        line = (f"[{bar}] {done}/{total} files, {audio_done / 3600:.3f} h audio done, "
                f"ETA {eta_text}")
        stream.write(("\r" + line) if tty else (line + "\n"))
        if tty and done == total:
            stream.write("\n")
        stream.flush()

    return show


def cmd_batch(args) -> int:
    """``harmtrack batch IN -o OUTDIR``."""
    from . import batch

    options = _track_options(args)
    formats = [f.strip().lower() for f in args.formats.split(",") if f.strip()]
    tasks = batch.plan_batch(args.input, args.output_dir, formats=formats, options=options)
    if not tasks:
        from .errors import HarmtrackError

        raise HarmtrackError(f"{args.input}: no audio files found")
    if args.workers is not None and not 1 <= args.workers <= 1024:
        from .errors import HarmtrackError

        raise HarmtrackError(f"--workers {args.workers}: give 1 to 1024")
    if args.scheduler is None:
        # this process labels files too, and its helpers are forked from it
        from .worker_setup import prepare_worker

        prepare_worker()
    progress = None if args.quiet else _progress_printer(sys.stderr)
    rep = batch.run_batch(tasks, args.output_dir, workers=args.workers,
                          scheduler=args.scheduler, dataset=not args.no_dataset,
                          progress=progress)
    c = rep.counts
    speed = rep.audio_s / rep.seconds if rep.seconds > 0 else float("nan")
    dataset = f"; dataset {rep.dataset}" if rep.dataset else ""
    print(f"{len(tasks)} files: {c['ok']} labelled, {c['skipped']} up to date, "
          f"{c['failed']} failed; {rep.audio_s / 3600:.3f} h of audio in "
          f"{_fmt_seconds(rep.seconds)} ({speed:.0f} x real time){dataset}; "
          f"summary {rep.summary}")
    for rec in rep.records:
        if rec and rec["status"] == "failed":
            print(f"{PROG}: failed: {rec['name']}: {rec['error']}", file=sys.stderr)
    return EXIT_USAGE if rep.failed else EXIT_OK


def cmd_score(args) -> int:
    """``harmtrack score EST REF``."""
    from . import scoring
    from .io.atomic import atomic_write_bytes, check_destination

    for out in (args.csv, args.json):
        if out is not None:
            check_destination(out)
    pairs, est_only, ref_only = scoring.match_pairs(args.estimate, args.reference)
    rows = scoring.score_pairs(pairs, method=args.method, cent_tolerance=args.cents,
                               gross_tolerance=args.gross)
    settings = {"method": args.method, "cent_tolerance": args.cents,
                "gross_tolerance": args.gross, "estimate": args.estimate,
                "reference": args.reference}
    if args.csv:
        atomic_write_bytes(args.csv, scoring.encode_csv(rows))
    if args.json:
        atomic_write_bytes(args.json, scoring.encode_json(rows, settings=settings))
    if not args.quiet:
        print(scoring.format_table(rows))
    for what, names in (("estimate", est_only), ("reference", ref_only)):
        if names:
            shown = ", ".join(names[:5]) + (" ..." if len(names) > 5 else "")
            print(f"{PROG}: note: {len(names)} {what} file(s) without a partner, not scored: "
                  f"{shown}", file=sys.stderr)
    return EXIT_OK


def cmd_plot(args) -> int:
    """``harmtrack plot IN -o FIG``."""
    from . import api, plotting
    from .audio import load
    from .errors import HarmtrackError
    from .io.atomic import check_destination

    check_destination(args.output)
    try:
        w, h = (float(v) for v in args.size.lower().split("x"))
        if not (1.0 <= w <= 100.0 and 1.0 <= h <= 100.0):
            raise ValueError
    except ValueError:
        raise HarmtrackError(f"--size {args.size}: give width x height in inches, e.g. 10x6 "
                             "(1 to 100 each)") from None
    if os.path.isdir(args.input):  # a batch's output folder: its overview
        from .batch import SUMMARY_NAME

        summary = os.path.join(args.input, SUMMARY_NAME)
        if not os.path.isfile(summary):
            raise HarmtrackError(f"{args.input}: a folder without {SUMMARY_NAME}; give an audio "
                                 "file, or a batch's output folder")
        fig = plotting.plot_batch_overview(summary, title=os.path.basename(
            os.path.normpath(args.input)), figsize=(w, h))
        out = plotting.save_figure(fig, args.output, dpi=args.dpi)
        print(f"figure {out}")
        return EXIT_OK
    y, sr, _ = load(args.input)
    if args.labels:
        from .io import read_labels
        from .io.columns import table_track

        track = table_track(*read_labels(args.labels))
    else:
        try:
            track = api.track(y, sr, **_track_options(args))
        except HarmtrackError as exc:
            raise _naming(exc, args.input) from None
    fig = plotting.plot_track(y, sr, track, freq_scale="log" if args.log_freq else "linear",
                              max_freq_hz=args.max_freq, harmonics=args.harmonics,
                              title=os.path.basename(args.input), figsize=(w, h))
    out = plotting.save_figure(fig, args.output, dpi=args.dpi)
    print(f"figure {out}")
    return EXIT_OK


def _refuse_overwriting_input(source: str, output: str) -> None:
    from .errors import HarmtrackError

    try:
        same = os.path.samefile(source, output)
    except OSError:
        return
    if same:
        raise HarmtrackError(f"{output}: output would overwrite the input audio file")


def _bundled_demo_dir() -> Path:
    """``audio_demo`` next to the package (present in a source checkout)."""
    import harmtrack

    return Path(harmtrack.__file__).resolve().parents[1] / "audio_demo"


def _demo_material(outdir: Path):
    """The demo recording, its true f0 and whether it had to be regenerated.

    Uses the bundled files when present; otherwise regenerates the recording
    into ``outdir`` from the demo scenario.

    Returns
    -------
    wav : pathlib.Path
    truth : (ndarray, ndarray)
        True frame times (s) and f0 (Hz, NaN unvoiced).
    regenerated : bool
    """
    from .io import read_reference

    bundled = _bundled_demo_dir()
    wav, truth = bundled / f"{DEMO_NAME}.wav", bundled / f"{DEMO_NAME}_truth.csv"
    if wav.is_file() and truth.is_file():
        return wav, read_reference(truth), False
    from . import synth

    y, sr, times, f0 = synth.demo_voice()
    wav = synth.write_wav(outdir / f"{DEMO_NAME}.wav", y, sr)
    return wav, (times, f0), True


def cmd_demo(args) -> int:
    """``harmtrack demo [-o OUTDIR]``."""
    from . import api, metrics
    from .io import labels

    outdir = Path(args.output_dir)
    outdir.mkdir(parents=True, exist_ok=True)
    wav, (ref_times, ref_f0), regenerated = _demo_material(outdir)
    if regenerated:
        print(f"demo recording regenerated as {wav}")
    start = time.perf_counter()
    tr = api.track_file(wav, preset="voice")
    seconds = time.perf_counter() - start
    out = labels.write_labels(tr, outdir / f"{DEMO_NAME}.csv")
    scores = metrics.compare(ref_times, ref_f0, tr.times, tr.f0_hz)
    print(format_summary(tr, source=os.fspath(wav), output=os.fspath(out), fmt="csv",
                         seconds=seconds))
    print(format_scores(scores))
    _demo_engines(outdir)
    return EXIT_OK


#: The engine demo's settings: the generator set of ``engine_synth.demo_engine``.
DEMO_ENGINE = dict(preset="engine", cylinders=6, strokes=4, rpm_min=200.0, rpm_max=2000.0)


def _demo_engines(outdir: Path) -> None:
    """Track the healthy and the misfiring generator-set recordings and score the rpm."""
    import numpy as np

    from . import api
    from .io import labels

    bundled = _bundled_demo_dir()
    for name in ("demo_engine", "demo_engine_misfire"):
        wav, truth_csv = bundled / f"{name}.wav", bundled / "demo_engine_truth.csv"
        if wav.is_file() and truth_csv.is_file():
            truth = np.loadtxt(truth_csv, delimiter=",", comments="#", skiprows=2)
            ref_t, ref_rpm = truth[:, 0], truth[:, 1]
        else:
            from . import engine_synth, synth

            y, sr, tr_ = engine_synth.demo_engine(dead_cylinder=None if name == "demo_engine" else 2)
            wav = synth.write_wav(outdir / f"{name}.wav", y, sr)
            ref_t, ref_rpm = tr_["times"], tr_["rpm"]
            print(f"demo recording regenerated as {wav}")
        start = time.perf_counter()
        tr = api.track_file(wav, **DEMO_ENGINE)
        seconds = time.perf_counter() - start
        out = labels.write_labels(tr, outdir / f"{name}.csv")
        print()
        print(format_summary(tr, source=os.fspath(wav), output=os.fspath(out), fmt="csv",
                             seconds=seconds))
        est = np.interp(ref_t, tr.times, tr.rpm)
        within = np.abs(est / ref_rpm - 1.0) < 0.01
        print(f"{'rpm within 1 % of the truth':<28}{100.0 * np.mean(within):.1f} % of frames")


# ---------------------------------------------------------------------------
# entry point
# ---------------------------------------------------------------------------


def _warning_printer(original):
    """A ``warnings.showwarning`` printing harmtrack warnings as one line each."""
    from .errors import HarmtrackWarning

    seen: set[str] = set()

    def show(message, category, filename, lineno, file=None, line=None):
        if not issubclass(category, HarmtrackWarning):
            return original(message, category, filename, lineno, file, line)
        text = _first_line(message)
        if text not in seen:
            seen.add(text)
            print(f"{PROG}: warning: {text}", file=sys.stderr)

    return show


def main(argv: list[str] | None = None) -> int:
    """Run the ``harmtrack`` command.

    Parameters
    ----------
    argv : list of str, optional
        Arguments without the program name; ``sys.argv[1:]`` by default.

    Returns
    -------
    int
        Exit status: 0 success, 1 internal error, 2 bad input, settings or usage.
    """
    parser = build_parser()
    try:
        args = parser.parse_args(argv)
    except SystemExit as exc:  # --help, --version and usage errors
        return exc.code if isinstance(exc.code, int) else EXIT_USAGE
    if args.func is None:
        parser.print_usage(sys.stderr)
        print(f"{PROG}: error: a command is required (track, batch, score, plot, demo, live "
              "or devices)",
              file=sys.stderr)
        return EXIT_USAGE
    from .errors import HarmtrackWarning

    with warnings.catch_warnings():
        warnings.simplefilter("always", HarmtrackWarning)
        warnings.showwarning = _warning_printer(warnings.showwarning)
        try:
            return args.func(args)
        except KeyboardInterrupt:
            print(f"{PROG}: interrupted", file=sys.stderr)
            return 130
        except Exception as exc:  # noqa: BLE001 - the command line reports every failure
            if args.debug:
                traceback.print_exc()
            if _is_harmtrack_error(exc) or isinstance(exc, OSError):
                print(f"{PROG}: error: {_error_text(exc)}", file=sys.stderr)
                return EXIT_USAGE
            print(f"{PROG}: internal error: {type(exc).__name__}: {_first_line(exc)} "
                  "(rerun with --debug for the traceback)", file=sys.stderr)
            return EXIT_INTERNAL


def console() -> None:
    """Entry point of the installed ``harmtrack`` command and of ``python -m harmtrack``.

    Runs :func:`main`, flushes the output streams and ends the process at once:
    every file has been written and closed by then, and skipping the
    interpreter's teardown of the compiled kernels saves about 0.2 s per run.
    """
    code = main()
    for stream in (sys.stdout, sys.stderr):
        try:
            stream.flush()
        except (OSError, ValueError):
            pass
    os._exit(code)

