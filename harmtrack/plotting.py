"""Figures: the track laid over the spectrogram, harmonic amplitudes, engine speed and orders.

:func:`plot_track` returns a matplotlib figure; :func:`save_figure` writes it
as PNG, SVG or PDF (by extension), atomically.  matplotlib's non-interactive
Agg backend is used, so no screen is needed.

Voice tracks get two panels: the spectrogram (dB colour, linear or logarithmic
frequency axis) with the f0 track and the positions of its harmonics overlaid,
unvoiced stretches marked along the bottom; and the harmonic amplitudes
(harmonic number against time, dB colour).  Engine tracks get three: the
spectrogram with the firing frequency, the rpm curve, and the engine-order map
(order against time, dB colour), with uneven-firing stretches marked in the
last two.
"""

from __future__ import annotations

import io
import os
from pathlib import Path

import numpy as np

from .errors import HarmtrackError

__all__ = ["plot_track", "plot_batch_overview", "save_figure", "FIGURE_FORMATS", "STYLE"]

#: Output formats, by file extension.
FIGURE_FORMATS = ("png", "svg", "pdf")

#: The figures' look: colours of the overlays and markings, colour maps.
STYLE = {
    "f0": "#00e5ff",          # the f0 / firing-frequency track
    "harmonics": "#ffffff",   # harmonic positions k * f0
    "unvoiced": "#ff4f79",    # unvoiced stretches along the bottom of the spectrogram
    "uneven": "#ff4f79",      # uneven-firing stretches
    "rpm": "#0b6e99",
    "spectrogram_cmap": "magma",
    "amplitude_cmap": "viridis",
    "dynamic_range_db": 80.0,
    "font_size": 9.0,
}


def _pyplot():
    import matplotlib

    matplotlib.use("Agg", force=False)
    import matplotlib.pyplot as plt

    return plt


def _spectrogram(y: np.ndarray, sr: float, hop_s: float, frame_s: float):
    """Power spectrogram (dB re its maximum) on frames centred at ``k * hop_s``."""
    from . import spectral

    n = max(32, int(round(frame_s * sr)))
    n += n % 2
    hop = hop_s * sr
    T = spectral.frame_count(y.size, hop)
    nfft = 1 << int(np.ceil(np.log2(2 * n)))
    win = spectral.analysis_window(n, "hann")
    ps = np.empty((T, nfft // 2 + 1))
    for b0 in range(0, T, 256):
        idx = np.arange(b0, min(T, b0 + 256))
        p, _ = spectral.windowed_spectra(np.ascontiguousarray(y, dtype=np.float64),
                                         spectral.frame_starts(idx, hop, n), win, nfft)
        ps[b0:b0 + idx.size] = p
    db = 10.0 * np.log10(np.maximum(ps, 1e-30))
    db -= db.max()
    return np.arange(T) * hop_s, np.arange(nfft // 2 + 1) * sr / nfft, db


def _runs(mask: np.ndarray):
    """(start, stop) index pairs of the True runs of ``mask``."""
    m = np.concatenate([[False], np.asarray(mask, bool), [False]])
    d = np.diff(m.astype(np.int8))
    return list(zip(np.nonzero(d == 1)[0], np.nonzero(d == -1)[0]))


def _mark_runs(ax, times, mask, hop, color, *, ymin=0.0, ymax=1.0, alpha=0.25, label=None):
    for k, (a, b) in enumerate(_runs(mask)):
        ax.axvspan(times[a] - hop / 2, times[b - 1] + hop / 2, ymin=ymin, ymax=ymax,
                   color=color, alpha=alpha, lw=0, label=label if k == 0 else None)


def plot_track(y, sr: float, track, *, freq_scale: str = "linear", max_freq_hz: float | None = None,
               harmonics: int = 8, title: str | None = None, figsize=(10.0, 6.0)):
    """A figure of ``track`` over the spectrogram of the samples ``y`` (at ``sr`` Hz).

    Parameters
    ----------
    y : array_like, shape (n,)
        The recording the track was made from (mono).
    sr : float
        Its sample rate, Hz.
    track : harmtrack.Track
    freq_scale : {"linear", "log"}
        Frequency axis of the spectrogram.
    max_freq_hz : float, optional
        Top of the spectrogram; default: the highest overlaid harmonic's
        largest frequency, at least 1 kHz, at most the Nyquist frequency.
    harmonics : int
        Harmonics overlaid (1 to 50): ``f0, 2 f0, ...``.
    title : str, optional
    figsize : (float, float)
        Inches (the PNG's pixel size is ``figsize * dpi``).

    Returns
    -------
    matplotlib.figure.Figure

    Raises
    ------
    HarmtrackError
        A bad option, or samples and track that do not belong together.
    """
    if freq_scale not in ("linear", "log"):
        raise HarmtrackError(f"frequency scale {freq_scale!r}: use linear or log")
    if not (isinstance(harmonics, (int, np.integer)) and 1 <= harmonics <= 50):
        raise HarmtrackError(f"harmonics={harmonics!r}: give a whole number from 1 to 50")
    y = np.asarray(y, dtype=np.float64)
    if y.ndim != 1 or y.size == 0:
        raise HarmtrackError("plot: give the recording as 1-D samples")
    n = len(track)
    if n == 0:
        raise HarmtrackError("plot: the track has no frames")
    hop = track.hop_s if np.isfinite(track.hop_s) else (
        float(np.median(np.diff(track.times))) if n > 1 else 0.01)
    duration = y.size / sr
    if track.times[-1] > duration + 2 * hop:
        raise HarmtrackError(f"plot: the track runs to {track.times[-1]:.2f} s but the "
                             f"recording lasts {duration:.2f} s: they do not belong together")
    plt = _pyplot()
    f0 = np.where(track.voiced, track.f0_hz, np.nan)
    top = max_freq_hz
    if top is None:
        fmax = np.nanmax(f0) if np.any(np.isfinite(f0)) else 500.0
        top = min(sr / 2.0, max(1000.0, 1.1 * harmonics * fmax))
    if not (np.isfinite(top) and 0 < top <= sr / 2.0):
        raise HarmtrackError(f"max frequency {top:g} Hz must lie in (0, {sr / 2:g}] Hz")
    engine = track.is_engine
    frame = track.frame_s if np.isfinite(track.frame_s) else 0.0  # labels may lack it
    times_s, freqs, db = _spectrogram(y, sr, hop, max(frame, 4 * hop))
    rows = 3 if engine else 2
    ratios = [2.2, 1.0, 1.2] if engine else [2.2, 1.2]
    with plt.rc_context({"font.size": STYLE["font_size"]}):
        fig, axes = plt.subplots(rows, 1, figsize=figsize, sharex=True,
                                 gridspec_kw={"height_ratios": ratios})
        ax = axes[0]
        keep = freqs <= top
        lo = -STYLE["dynamic_range_db"]
        mesh = ax.pcolormesh(times_s, freqs[keep], db[:, keep].T, shading="nearest",
                             cmap=STYLE["spectrogram_cmap"], vmin=lo, vmax=0.0, rasterized=True)
        if freq_scale == "log":
            ax.set_yscale("log")
            ax.set_ylim(max(20.0, freqs[1]), top)
            _plain_log_ticks(ax)
        else:
            ax.set_ylim(0.0, top)
        for k in range(2, harmonics + 1):
            ax.plot(track.times, k * f0, color=STYLE["harmonics"], lw=0.6, ls=(0, (3, 3)),
                    alpha=0.7, label="harmonics" if k == 2 else None)
        ax.plot(track.times, f0, color=STYLE["f0"], lw=1.6,
                label="firing frequency" if engine else "f0")
        _mark_runs(ax, track.times, ~track.voiced, hop, STYLE["unvoiced"], ymax=0.03, alpha=0.9,
                   label="no engine heard" if engine else "unvoiced")
        ax.set_ylabel("frequency (Hz)")
        ax.legend(loc="upper right", fontsize=STYLE["font_size"] - 1, framealpha=0.6)
        fig.colorbar(mesh, ax=ax, label="level (dB re max)", pad=0.01)
        if engine:
            ax2 = axes[1]
            ax2.plot(track.times, track.rpm, color=STYLE["rpm"], lw=1.4)
            _mark_runs(ax2, track.times, track.uneven_flag, hop, STYLE["uneven"],
                       label="uneven firing")
            ax2.set_ylabel("speed (rpm)")
            if np.any(track.uneven_flag):
                ax2.legend(loc="upper right", fontsize=STYLE["font_size"] - 1)
            _colorbar_space(fig, ax2)
            ax3 = axes[2]
            amp = track.order_amplitudes_db()
            q = track.order_numbers
            _image(fig, ax3, track.times, q, amp, "order level (dB re full scale)")
            _mark_runs(ax3, track.times, track.uneven_flag, hop, STYLE["uneven"], ymax=0.05,
                       alpha=0.9)
            ax3.set_ylabel("engine order")
        else:
            ax2 = axes[1]
            H = track.n_harmonics
            _image(fig, ax2, track.times, np.arange(1, H + 1), track.amplitudes_db(),
                   "amplitude (dB re full scale)")
            ax2.set_ylabel("harmonic number")
        axes[-1].set_xlabel("time (s)")
        axes[-1].set_xlim(0.0, max(duration, track.times[-1]))
        fig.suptitle(title or ("engine track" if engine else "f0 track"))
        fig.align_ylabels(axes)
    return fig


def _plain_log_ticks(ax) -> None:
    """Ticks at 1, 2, 5 x 10^k written as plain numbers on a logarithmic y axis."""
    from matplotlib.ticker import LogLocator, NullFormatter, ScalarFormatter

    ax.yaxis.set_major_locator(LogLocator(base=10.0, subs=(1.0, 2.0, 5.0)))
    ax.yaxis.set_major_formatter(ScalarFormatter())
    ax.yaxis.set_minor_formatter(NullFormatter())


def _image(fig, ax, times, rows, values_db, label):
    v = np.where(np.isfinite(values_db), values_db, np.nan)
    finite = v[np.isfinite(v)]
    hi = float(np.max(finite)) if finite.size else 0.0
    mesh = ax.pcolormesh(times, rows, v.T, shading="nearest", cmap=STYLE["amplitude_cmap"],
                         vmin=hi - 60.0, vmax=hi, rasterized=True)
    fig.colorbar(mesh, ax=ax, label=label, pad=0.01)


def _colorbar_space(fig, ax):
    """Keep a panel without a colour bar as wide as those with one."""
    from matplotlib.cm import ScalarMappable

    cb = fig.colorbar(ScalarMappable(), ax=ax, pad=0.01)
    cb.ax.set_visible(False)


def save_figure(fig, path, *, dpi: int = 120) -> Path:
    """Write ``fig`` to ``path`` (PNG, SVG or PDF, by extension) atomically.

    Raises
    ------
    HarmtrackError
        Unknown extension, bad dpi, or a path that cannot be written.
    """
    from .io.atomic import atomic_write_bytes, check_destination

    name = os.fspath(path)
    ext = Path(name).suffix.lower().lstrip(".")
    if ext not in FIGURE_FORMATS:
        raise HarmtrackError(f"{name}: unknown figure format {('.' + ext) if ext else '(none)'}; "
                             "use .png, .svg or .pdf")
    if not (isinstance(dpi, (int, np.integer)) and 30 <= dpi <= 1200):
        raise HarmtrackError(f"dpi={dpi!r}: give a whole number from 30 to 1200")
    check_destination(name)
    buf = io.BytesIO()
    fig.savefig(buf, format=ext, dpi=dpi, metadata=_metadata(ext))
    return atomic_write_bytes(name, buf.getvalue())


def _metadata(ext: str) -> dict:
    """Fixed metadata, so the same figure gives the same bytes."""
    from ._version import __version__

    creator = f"harmtrack {__version__}"
    if ext == "png":
        return {"Software": creator}
    if ext == "svg":
        return {"Creator": creator, "Date": None}
    return {"Creator": creator, "Producer": creator, "CreationDate": None}


def plot_batch_overview(summary_path, *, title: str | None = None, figsize=(10.0, 7.0)):
    """One page on a batch: f0 median and range per file, voiced share, failures.

    ``summary_path`` is the batch's ``summary.csv`` (see :mod:`harmtrack.batch`).

    Raises
    ------
    HarmtrackError
        A missing or malformed summary (the message names it).
    """
    import csv

    name = os.fspath(summary_path)
    try:
        with open(name, newline="", encoding="utf-8") as fh:
            rows = list(csv.DictReader(fh))
    except OSError as exc:
        raise HarmtrackError(f"{name}: cannot read the batch summary "
                             f"({exc.strerror or exc})") from None
    need = {"file_id", "name", "status", "error", "voiced_share", "f0_median_hz", "f0_min_hz",
            "f0_max_hz"}
    if not rows or not need <= set(rows[0]):
        raise HarmtrackError(f"{name}: not a batch summary (columns "
                             f"{', '.join(sorted(need))} expected)")

    def num(v):
        try:
            return float(v)
        except (TypeError, ValueError):
            return np.nan

    idx = np.arange(len(rows))
    med = np.array([num(r["f0_median_hz"]) for r in rows])
    lo = np.array([num(r["f0_min_hz"]) for r in rows])
    hi = np.array([num(r["f0_max_hz"]) for r in rows])
    share = np.array([num(r["voiced_share"]) for r in rows])
    status = [r["status"] for r in rows]
    failed = [(r["name"], r["error"]) for r in rows if r["status"] == "failed"]
    plt = _pyplot()
    with plt.rc_context({"font.size": STYLE["font_size"]}):
        fig, axes = plt.subplots(3, 1, figsize=figsize, layout="constrained",
                                 gridspec_kw={"height_ratios": [2.0, 1.0, 0.9]})
        ax = axes[0]
        ok = np.isfinite(med)
        ax.vlines(idx[ok], lo[ok], hi[ok], color=STYLE["rpm"], lw=1.0, alpha=0.6,
                  label="f0 range")
        ax.plot(idx[ok], med[ok], "o", ms=3, color=STYLE["f0"], mec="#333333", mew=0.4,
                label="f0 median")
        bad = np.array([s == "failed" for s in status])
        if bad.any():
            ax.plot(idx[bad], np.full(bad.sum(), np.nanmin(lo) if ok.any() else 1.0), "x",
                    color=STYLE["unvoiced"], label="failed")
        ax.set_yscale("log")
        _plain_log_ticks(ax)
        ax.set_ylabel("f0 (Hz)")
        ax.legend(loc="upper right", fontsize=STYLE["font_size"] - 1)
        ax.set_xlim(-0.5, len(rows) - 0.5)
        ax2 = axes[1]
        ax2.bar(idx, np.nan_to_num(share) * 100.0, width=0.9, color=STYLE["rpm"])
        ax2.set_ylabel("voiced (%)")
        ax2.set_ylim(0, 100)
        ax2.set_xlim(-0.5, len(rows) - 0.5)
        ax2.set_xlabel("file (input order)")
        ax3 = axes[2]
        ax3.axis("off")
        counts = {s: status.count(s) for s in ("ok", "skipped", "failed")}
        lines = [f"{len(rows)} files: {counts['ok']} labelled, {counts['skipped']} up to date, "
                 f"{counts['failed']} failed; median voiced share "
                 f"{100.0 * np.nanmedian(share) if np.isfinite(share).any() else 0.0:.1f} %"]
        for n, e in failed[:6]:
            lines.append(f"failed: {n}: {e}"[:140])
        if len(failed) > 6:
            lines.append(f"... and {len(failed) - 6} more failed files (see the summary)")
        ax3.text(0.0, 1.0, "\n".join(lines), va="top", ha="left", family="monospace",
                 fontsize=STYLE["font_size"] - 1, transform=ax3.transAxes)
        fig.suptitle(title or "batch overview")
    return fig
