"""Frame-level evaluation of an f0 track against a reference track.

Both tracks are ``(times, f0)`` pairs; a frame is *voiced* when its f0 is
finite and positive (NaN, 0 or a negative value mean unvoiced, with no pitch).
:func:`compare` first puts the estimate on the reference times (see
:func:`resample_nearest` and :func:`resample_linear`), then scores every
reference frame:

``raw_pitch_accuracy``
    Share of reference-voiced frames whose estimate is voiced and within
    ``cent_tolerance`` (50) cents of the reference (strictly less).  Frames the
    estimate calls unvoiced count as misses.  0 when no reference frame is voiced.
``raw_chroma_accuracy``
    As raw pitch accuracy, but the error is first folded to the nearest whole
    number of octaves (1200 cents), so octave errors count as hits.
``gross_pitch_error``
    Share of frames voiced in both tracks with ``|f0_est / f0_ref - 1| > 0.2``.
    NaN when no frame is voiced in both.
``fine_pitch_error_cents``
    Mean absolute error in cents over the frames voiced in both tracks that are
    not gross errors.  NaN when there are none.
``voicing_decision_error``
    Share of all reference frames whose voiced/unvoiced decision differs.
``voicing_recall``
    Share of reference-voiced frames the estimate calls voiced; 1 when no
    reference frame is voiced.
``voicing_false_alarm``
    Share of reference-unvoiced frames the estimate calls voiced; 0 when every
    reference frame is voiced.

Cent errors are differences of ``1200 * log2(f / 10 Hz)`` values.
The functions taking two f0 arrays expect them on one time grid already.
"""

from __future__ import annotations

import numpy as np

from .errors import HarmtrackError
from .result import hz_to_cents

__all__ = [
    "compare",
    "evaluate_aligned",
    "resample_nearest",
    "resample_linear",
    "is_voiced",
    "raw_pitch_accuracy",
    "raw_chroma_accuracy",
    "gross_pitch_error",
    "fine_pitch_error_cents",
    "voicing_decision_error",
    "voicing_recall",
    "voicing_false_alarm",
]

#: Resampling methods of :func:`compare`.
METHODS = ("nearest", "linear")


def is_voiced(f0) -> np.ndarray:
    """Voicing of each frame: f0 finite and positive."""
    f0 = np.asarray(f0, dtype=np.float64)
    with np.errstate(invalid="ignore"):
        return np.isfinite(f0) & (f0 > 0)


def _cent_errors(ref_f0: np.ndarray, est_f0: np.ndarray, both: np.ndarray) -> np.ndarray:
    """Absolute cent differences at the frames ``both`` (voiced in both tracks)."""
    return np.abs(hz_to_cents(ref_f0[both]) - hz_to_cents(est_f0[both]))


def _pair_1d(a, b, what: str) -> tuple[np.ndarray, np.ndarray]:
    """Two float arrays that must be 1-D and of one length (``what`` names them)."""
    a = np.asarray(a, dtype=np.float64)
    b = np.asarray(b, dtype=np.float64)
    if a.ndim != 1 or a.shape != b.shape:
        raise HarmtrackError(
            f"{what} must be 1-D arrays of one length; got shapes {a.shape} and {b.shape}"
        )
    return a, b


def _aligned(ref_f0, est_f0):
    ref_f0, est_f0 = _pair_1d(ref_f0, est_f0, "reference and estimate f0")
    return ref_f0, est_f0, is_voiced(ref_f0), is_voiced(est_f0)


def raw_pitch_accuracy(ref_f0, est_f0, *, cent_tolerance: float = 50.0) -> float:
    """Share of reference-voiced frames with a voiced estimate within ``cent_tolerance`` cents."""
    ref_f0, est_f0, rv, ev = _aligned(ref_f0, est_f0)
    n_ref = int(rv.sum())
    if n_ref == 0:
        return 0.0
    both = rv & ev
    hits = _cent_errors(ref_f0, est_f0, both) < cent_tolerance
    return float(hits.sum()) / n_ref


def raw_chroma_accuracy(ref_f0, est_f0, *, cent_tolerance: float = 50.0) -> float:
    """As :func:`raw_pitch_accuracy`, with errors folded to the nearest octave."""
    ref_f0, est_f0, rv, ev = _aligned(ref_f0, est_f0)
    n_ref = int(rv.sum())
    if n_ref == 0:
        return 0.0
    err = _cent_errors(ref_f0, est_f0, rv & ev)
    folded = np.abs(err - 1200.0 * np.floor(err / 1200.0 + 0.5))
    return float((folded < cent_tolerance).sum()) / n_ref


def gross_pitch_error(ref_f0, est_f0, *, tolerance: float = 0.2) -> float:
    """Share of frames voiced in both with ``|est / ref - 1| > tolerance`` (NaN if none)."""
    ref_f0, est_f0, rv, ev = _aligned(ref_f0, est_f0)
    both = rv & ev
    n = int(both.sum())
    if n == 0:
        return float("nan")
    gross = np.abs(est_f0[both] / ref_f0[both] - 1.0) > tolerance
    return float(gross.sum()) / n


def fine_pitch_error_cents(ref_f0, est_f0, *, tolerance: float = 0.2) -> float:
    """Mean absolute cent error over frames voiced in both without gross errors (NaN if none)."""
    ref_f0, est_f0, rv, ev = _aligned(ref_f0, est_f0)
    both = rv & ev
    fine = np.abs(est_f0[both] / ref_f0[both] - 1.0) <= tolerance
    if not fine.any():
        return float("nan")
    return float(np.mean(_cent_errors(ref_f0, est_f0, both)[fine]))


def voicing_decision_error(ref_f0, est_f0) -> float:
    """Share of frames whose voiced/unvoiced decisions differ (NaN for no frames)."""
    _, _, rv, ev = _aligned(ref_f0, est_f0)
    if rv.size == 0:
        return float("nan")
    return float(np.count_nonzero(rv != ev)) / rv.size


def voicing_recall(ref_f0, est_f0) -> float:
    """Share of reference-voiced frames called voiced (1 when none is voiced)."""
    _, _, rv, ev = _aligned(ref_f0, est_f0)
    n = int(rv.sum())
    if n == 0:
        return 1.0
    return float(np.count_nonzero(rv & ev)) / n


def voicing_false_alarm(ref_f0, est_f0) -> float:
    """Share of reference-unvoiced frames called voiced (0 when none is unvoiced)."""
    _, _, rv, ev = _aligned(ref_f0, est_f0)
    n = int((~rv).sum())
    if n == 0:
        return 0.0
    return float(np.count_nonzero(~rv & ev)) / n


def evaluate_aligned(ref_f0, est_f0, *, cent_tolerance: float = 50.0,
                     gross_tolerance: float = 0.2) -> dict:
    """All scores of two f0 arrays on one time grid (see the module documentation).

    Returns
    -------
    dict
        The seven scores and the frame counts ``frames``, ``ref_voiced_frames``,
        ``est_voiced_frames`` and ``both_voiced_frames``.
    """
    ref_f0, est_f0, rv, ev = _aligned(ref_f0, est_f0)
    return {
        "raw_pitch_accuracy": raw_pitch_accuracy(ref_f0, est_f0, cent_tolerance=cent_tolerance),
        "raw_chroma_accuracy": raw_chroma_accuracy(ref_f0, est_f0, cent_tolerance=cent_tolerance),
        "gross_pitch_error": gross_pitch_error(ref_f0, est_f0, tolerance=gross_tolerance),
        "fine_pitch_error_cents": fine_pitch_error_cents(ref_f0, est_f0, tolerance=gross_tolerance),
        "voicing_decision_error": voicing_decision_error(ref_f0, est_f0),
        "voicing_recall": voicing_recall(ref_f0, est_f0),
        "voicing_false_alarm": voicing_false_alarm(ref_f0, est_f0),
        "frames": int(rv.size),
        "ref_voiced_frames": int(rv.sum()),
        "est_voiced_frames": int(ev.sum()),
        "both_voiced_frames": int((rv & ev).sum()),
    }


def _check_series(times, f0, what: str) -> tuple[np.ndarray, np.ndarray]:
    times, f0 = _pair_1d(times, f0, f"{what} times and f0")
    if not np.all(np.isfinite(times)) or (times.size > 1 and not np.all(np.diff(times) > 0)):
        raise HarmtrackError(f"{what} times must be finite and strictly increasing")
    return times, f0


def _hop(times: np.ndarray) -> float:
    return float(np.median(np.diff(times))) if times.size > 1 else 0.0


def _nearest_index(src_times: np.ndarray, times: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Index of the nearest source frame of each time (earlier on a tie) and its distance."""
    right = np.clip(np.searchsorted(src_times, times), 0, src_times.size - 1)
    left = np.clip(right - 1, 0, src_times.size - 1)
    d_left = np.abs(times - src_times[left])
    d_right = np.abs(src_times[right] - times)
    idx = np.where(d_left <= d_right, left, right)
    return idx, np.minimum(d_left, d_right)


def resample_nearest(est_times, est_f0, times, *, max_gap_s: float | None = None) -> np.ndarray:
    """Estimate f0 at ``times``, taken from the nearest estimate frame.

    A time farther than ``max_gap_s`` from every estimate frame (by default
    half the estimate's median hop, plus a relative margin of 1e-6 for rounding)
    is unvoiced.  On a tie the earlier frame wins.  On identical grids this
    returns ``est_f0`` unchanged.

    Returns
    -------
    ndarray
        f0 in Hz at ``times``, NaN where unvoiced.
    """
    est_times, est_f0 = _check_series(est_times, est_f0, "estimate")
    times = np.asarray(times, dtype=np.float64)
    out = np.full(times.shape, np.nan)
    if est_times.size == 0 or times.size == 0:
        return out
    if max_gap_s is None:
        max_gap_s = 0.5 * _hop(est_times) * (1.0 + 1e-6)
    idx, dist = _nearest_index(est_times, times)
    ok = dist <= max_gap_s + 1e-12
    vals = np.where(is_voiced(est_f0), est_f0, np.nan)
    out[ok] = vals[idx[ok]]
    return out


def resample_linear(est_times, est_f0, times, *, max_gap_s: float | None = None) -> np.ndarray:
    """Estimate f0 at ``times``, interpolated inside voiced stretches.

    The voicing of each time is that of the nearest estimate frame (as in
    :func:`resample_nearest`).  A voiced time between two voiced estimate frames
    gets their f0 interpolated linearly in log frequency; next to an unvoiced
    frame it takes the nearest frame's f0.  f0 is never interpolated across an
    unvoiced frame.

    Returns
    -------
    ndarray
        f0 in Hz at ``times``, NaN where unvoiced.
    """
    near = resample_nearest(est_times, est_f0, times, max_gap_s=max_gap_s)
    est_times, est_f0 = _check_series(est_times, est_f0, "estimate")
    times = np.asarray(times, dtype=np.float64)
    if est_times.size < 2 or times.size == 0:
        return near
    v = is_voiced(est_f0)
    right = np.clip(np.searchsorted(est_times, times, side="right"), 1, est_times.size - 1)
    left = right - 1
    inside = (times > est_times[left]) & (times < est_times[right])  # frame times stay exact
    use = is_voiced(near) & inside & v[left] & v[right]
    if use.any():
        lf = np.log2(np.where(v, est_f0, 1.0))
        t0, t1 = est_times[left[use]], est_times[right[use]]
        w = (times[use] - t0) / (t1 - t0)
        near[use] = 2.0 ** ((1.0 - w) * lf[left[use]] + w * lf[right[use]])
    return near


def compare(ref_times, ref_f0, est_times, est_f0, *, method: str = "nearest",
            cent_tolerance: float = 50.0, gross_tolerance: float = 0.2) -> dict:
    """Score an estimated f0 track against a reference track.

    Parameters
    ----------
    ref_times, ref_f0 : array_like, shape (R,)
        Reference frame times (s, strictly increasing) and f0 (Hz; NaN or <= 0
        where unvoiced).  Every reference frame is scored.
    est_times, est_f0 : array_like, shape (E,)
        The estimate, on any time grid.
    method : {"nearest", "linear"}
        How the estimate is put on the reference times: the nearest estimate
        frame within half a hop (:func:`resample_nearest`, the default), or
        interpolation inside voiced stretches (:func:`resample_linear`).
    cent_tolerance : float
        Largest error (exclusive) of a raw pitch or chroma hit, cents.
    gross_tolerance : float
        Relative error above which a frame is a gross pitch error.

    Returns
    -------
    dict
        ``raw_pitch_accuracy``, ``raw_chroma_accuracy``, ``gross_pitch_error``,
        ``fine_pitch_error_cents``, ``voicing_decision_error``, ``voicing_recall``,
        ``voicing_false_alarm`` (see the module documentation) and the counts
        ``frames``, ``ref_voiced_frames``, ``est_voiced_frames``, ``both_voiced_frames``.

    Raises
    ------
    HarmtrackError
        Mismatched shapes, times not strictly increasing, an empty reference or
        an unknown method.
    """
    ref_times, ref_f0 = _check_series(ref_times, ref_f0, "reference")
    est_times, est_f0 = _check_series(est_times, est_f0, "estimate")
    if ref_times.size == 0:
        raise HarmtrackError("the reference track has no frames")
    if method == "nearest":
        est_on_ref = resample_nearest(est_times, est_f0, ref_times)
    elif method == "linear":
        est_on_ref = resample_linear(est_times, est_f0, ref_times)
    else:
        raise HarmtrackError(f"unknown method {method!r}; use one of {', '.join(METHODS)}")
    return evaluate_aligned(ref_f0, est_on_ref, cent_tolerance=cent_tolerance,
                            gross_tolerance=gross_tolerance)
