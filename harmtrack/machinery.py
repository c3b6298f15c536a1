"""Engine geometry and order analysis: firing frequency <-> rpm, angle-domain
resampling, engine-order amplitudes and the uneven-firing index.

Vocabulary
----------
Engine order ``q`` is the frequency ``q * rpm / 60`` Hz (order 1 is the
crankshaft rotation rate).  One engine cycle is two revolutions for a 4-stroke
engine and one for a 2-stroke engine; every cylinder fires once per cycle, so
``C`` evenly spaced cylinders fire at ``C`` times the cycle rate.  A signal that
repeats every cycle has energy at the *cycle harmonics* ``k`` (order
``k / 2`` for 4-stroke, ``k`` for 2-stroke).  With identical cylinders only the
multiples of ``C`` sound (the firing orders); a weak or dead cylinder raises the
others (the half orders of a 4-stroke engine; generally, the non-firing orders).

Computed order tracking: given a speed track, the recording is resampled at
equal increments of crank angle, so that every order becomes a stationary line
however fast the engine accelerates; order amplitudes are then read from windows
spanning a whole number of engine cycles.

References
----------
K. R. Fyfe and E. D. S. Munck, "Analysis of computed order tracking",
Mechanical Systems and Signal Processing 11(2), 1997.
R. G. Keys, "Cubic convolution interpolation for digital image processing",
IEEE Trans. ASSP 29(6), 1981 (the interpolation kernel of the resampling).
"""

from __future__ import annotations

import math
import numbers

import numpy as np
import scipy.ndimage
from numba import njit

from .config import UNEVEN_THRESHOLD_DB  # re-exported: the flag's default
from .errors import HarmtrackError

__all__ = [
    "firing_hz",
    "rpm_from_firing",
    "firing_hz_per_rpm",
    "cycle_harmonics",
    "order_numbers",
    "jump_free_track",
    "angle_resample",
    "order_amplitudes",
    "uneven_index_db",
    "UNEVEN_THRESHOLD_DB",
]

_MAX_CYLINDERS = 24
_STROKES = (2, 4)


def _cylinders(value):
    if isinstance(value, bool) or not isinstance(value, numbers.Integral) \
            or not 1 <= int(value) <= _MAX_CYLINDERS:
        raise HarmtrackError(
            f"cylinders must be an integer in [1, {_MAX_CYLINDERS}], got {value!r}")
    return int(value)


def _strokes(value):
    if isinstance(value, bool) or not isinstance(value, numbers.Integral) \
            or int(value) not in _STROKES:
        raise HarmtrackError(f"strokes must be 2 or 4, got {value!r}")
    return int(value)


def _positive_array(name, value, unit):
    """``value`` as float64 (scalar or array), all finite and > 0."""
    try:
        arr = np.asarray(value, dtype=np.float64)
    except (TypeError, ValueError):
        raise HarmtrackError(
            f"{name} must be a positive number or array of them in {unit}, got {value!r}"
        ) from None
    bad = ~(np.isfinite(arr) & (arr > 0))
    if isinstance(value, bool) or arr.size == 0 or np.any(bad):
        shown = value if arr.ndim == 0 or arr.size == 0 else float(arr[bad][0])
        raise HarmtrackError(
            f"{name} must be a finite positive number (or array of them) in {unit}, "
            f"got {shown!r}")
    return arr


def _scalar_out(arr, like):
    return float(arr) if np.ndim(like) == 0 else arr


def _cycle_hz_per_rpm(strokes):
    """Engine cycles per second for one rpm: a cycle is 2 revolutions (4-stroke) or 1."""
    return 1.0 / 60.0 / (strokes // 2)




def firing_hz(rpm, *, cylinders, strokes):
    """Firing frequency of an evenly firing engine.

    Every cylinder fires once per engine cycle, and a cycle lasts two
    crankshaft revolutions for a 4-stroke engine and one for a 2-stroke
    engine (common practice)::

        4-stroke: firing_hz = rpm / 60 * cylinders / 2
        2-stroke: firing_hz = rpm / 60 * cylinders

    Parameters
    ----------
    rpm : float or array_like
        Crankshaft speed in revolutions per minute, > 0.
    cylinders : int, keyword-only
        Number of cylinders, in [1, 24].
    strokes : {2, 4}, keyword-only
        Strokes per engine cycle.

    Returns
    -------
    float or ndarray of float64
        Firing frequency in Hz; a float for a scalar ``rpm``, else an array of
        the shape of ``rpm``.

    Examples
    --------
    >>> firing_hz(3000.0, cylinders=4, strokes=4)
    100.0
    """
    cylinders = _cylinders(cylinders)
    strokes = _strokes(strokes)
    arr = _positive_array("rpm", rpm, "rpm")
    return _scalar_out(arr * _cycle_hz_per_rpm(strokes) * cylinders, rpm)


def rpm_from_firing(firing_hz, *, cylinders, strokes):
    """Crankshaft speed of an evenly firing engine from its firing frequency.

    The inverse of :func:`firing_hz`::

        4-stroke: rpm = firing_hz * 60 * 2 / cylinders
        2-stroke: rpm = firing_hz * 60 / cylinders

    Parameters
    ----------
    firing_hz : float or array_like
        Firing frequency in Hz, > 0.
    cylinders : int, keyword-only
        Number of cylinders, in [1, 24].
    strokes : {2, 4}, keyword-only
        Strokes per engine cycle.

    Returns
    -------
    float or ndarray of float64
        Speed in rpm; a float for a scalar input, else an array of its shape.
    """
    cylinders = _cylinders(cylinders)
    strokes = _strokes(strokes)
    arr = _positive_array("firing_hz", firing_hz, "Hz")
    return _scalar_out(arr / (_cycle_hz_per_rpm(strokes) * cylinders), firing_hz)




def firing_hz_per_rpm(*, cylinders, strokes) -> float:
    """Firing frequency in Hz of one rpm: ``firing_hz = rpm * firing_hz_per_rpm``."""
    return _cycle_hz_per_rpm(_strokes(strokes)) * _cylinders(cylinders)


def cycle_harmonics(n: int, cylinders: int) -> tuple[np.ndarray, np.ndarray]:
    """Cycle-harmonic numbers ``1..n`` and whether each is a firing order (a multiple of C)."""
    k = np.arange(1, n + 1)
    return k, (k % cylinders) == 0


def order_numbers(n: int, strokes: int) -> np.ndarray:
    """Engine orders of the cycle harmonics ``1..n``: ``k / 2`` (4-stroke) or ``k`` (2-stroke)."""
    return np.arange(1, n + 1) / (_strokes(strokes) // 2)


# ---------------------------------------------------------------------------
# angle-domain resampling
# ---------------------------------------------------------------------------


def jump_free_track(f_hz: np.ndarray, *, max_step_oct: float = 0.1,
                    median_frames: int = 1) -> np.ndarray:
    """A continuous, positive speed reference from a frame-rate track.

    Unvoiced frames are bridged by interpolation in log frequency; steps larger
    than ``max_step_oct`` octaves between neighbouring frames (a jump to another
    harmonic relation, not a change of speed) are removed, and the level is set
    so that the median frame agrees with ``f_hz``; then excursions shorter than
    half of ``median_frames`` frames are removed by a running median (in log
    frequency: a steady ramp passes unchanged).  The result follows the
    relative speed changes of the track; an angle-domain analysis along it sees a
    steady engine even where the track itself sat on the wrong multiple.
    """
    lf = np.log2(np.asarray(f_hz, dtype=np.float64))
    ok = np.isfinite(lf)
    if not np.any(ok):
        raise ValueError("the track has no finite frequency")
    idx = np.arange(lf.size)
    lf = np.interp(idx, idx[ok], lf[ok])
    d = np.diff(lf)
    d[np.abs(d) > max_step_oct] = 0.0
    c = np.concatenate([[0.0], np.cumsum(d)])
    if median_frames > 1:
        c = scipy.ndimage.median_filter(c, size=int(median_frames), mode="nearest")
    return 2.0 ** (c + np.median(lf[ok] - c[ok]))


@njit(cache=True, nogil=True)
def _cubic_at(y, pos, out):
    """``y`` read at fractional sample positions ``pos`` (cubic convolution, a = -0.5)."""
    n = y.shape[0]
    for j in range(pos.shape[0]):
        p = pos[j]
        i = int(math.floor(p))
        u = p - i
        if i < 1 or i > n - 3:
            out[j] = y[min(max(i, 0), n - 1)]
            continue
        ym, y0, y1, y2 = y[i - 1], y[i], y[i + 1], y[i + 2]
        out[j] = y0 + 0.5 * u * (y1 - ym + u * (2.0 * ym - 5.0 * y0 + 4.0 * y1 - y2
                                               + u * (3.0 * (y0 - y1) + y2 - ym)))


def angle_resample(y: np.ndarray, sr: float, times: np.ndarray, ref_hz: np.ndarray):
    """Resample ``y`` at equal increments of the phase of a speed reference.

    Parameters
    ----------
    y : ndarray, shape (n,)
        Samples at ``sr`` Hz.
    times : ndarray, shape (T,)
        Frame times of ``ref_hz``, seconds, increasing.
    ref_hz : ndarray, shape (T,)
        Positive reference frequency (for instance the firing-frequency track).

    Returns
    -------
    z : ndarray
        The signal in *pseudo-time* ``tau = phase / f_ref`` sampled at ``sr``:
        a component at ``r * ref_hz(t)`` appears at the constant ``r * f_ref``.
    f_ref : float
        ``min(ref_hz)``: the warp only stretches, so nothing aliases.
    phase : ndarray, shape (n,)
        Reference phase in cycles at each input sample.
    stretch : float
        Largest local stretch ``max(ref_hz) / f_ref``; ``z`` holds input content
        up to ``sr / 2 / stretch`` without distortion everywhere.
    """
    y = np.ascontiguousarray(y, dtype=np.float64)
    t = np.arange(y.size) / sr
    g = np.interp(t, times, ref_hz)
    phase = np.empty(y.size)
    phase[0] = 0.0
    np.cumsum(0.5 * (g[1:] + g[:-1]) / sr, out=phase[1:])
    f_ref = float(np.min(ref_hz))
    m = int(phase[-1] / f_ref * sr)
    pos = np.interp(np.arange(m) * (f_ref / sr), phase, np.arange(y.size, dtype=np.float64))
    z = np.empty(m)
    _cubic_at(y, pos, z)
    return z, f_ref, phase, float(np.max(ref_hz) / f_ref)


# ---------------------------------------------------------------------------
# order amplitudes and uneven firing
# ---------------------------------------------------------------------------


def order_amplitudes(z: np.ndarray, sr: float, cycle_hz: float, centres: np.ndarray, *,
                     n_harmonics: int, cycles: int = 4) -> np.ndarray:
    """Amplitudes of the cycle harmonics of a steady (angle-domain) signal.

    Each window spans ``cycles`` whole engine cycles (Hann), so cycle harmonic
    ``k`` falls on DFT bin ``k * cycles`` and its neighbours on zeros of the
    window's transform: no leakage between orders.  The noise power per bin is
    estimated from the bins half-way between harmonics (median over the
    window) and subtracted before the amplitude is taken.  Near the ends of
    ``z`` the window is moved inwards so that it stays inside the signal; all
    rows are NaN when ``z`` is shorter than one window.

    Parameters
    ----------
    z : ndarray
        Angle-domain signal at ``sr`` Hz (see :func:`angle_resample`).
    cycle_hz : float
        Engine-cycle rate in ``z``, Hz (constant).
    centres : ndarray of float
        Window centres, in samples of ``z``.
    n_harmonics : int
        Cycle harmonics reported; those beyond ``0.95 * sr / 2`` are NaN.
    cycles : int
        Engine cycles per window, even and >= 4 (then the bins half-way between
        harmonics, where the noise is read, also fall on zeros of the window).

    Returns
    -------
    ndarray, shape (len(centres), n_harmonics)
        Linear peak amplitudes, in the units of ``z``.

    References
    ----------
    F. J. Harris, "On the use of windows for harmonic analysis with the discrete
    Fourier transform", Proc. IEEE 66(1), 1978 (Hann window zeros).
    """
    period = sr / cycle_hz  # samples per engine cycle
    k = np.arange(1, n_harmonics + 1)
    centres = np.asarray(centres, dtype=np.float64)
    return _cycle_spectrum_rows(np.asarray(z, dtype=np.float64), centres, period, int(cycles), k,
                                sr, cycle_hz)


def _cycle_spectrum_rows(z, centres, period, m, k, sr, cycle_hz):
    """Noise-corrected amplitudes of cycle harmonics ``k`` over ``m`` cycles at each centre."""
    n = max(int(round(m * period)), 4 * m)
    out = np.full((centres.size, k.size), np.nan)
    if n > z.size:
        return out
    w = np.hanning(n + 2)[1:-1]  # zeros of its transform fall on the neighbouring harmonics
    per_bin = n / (m * period)  # DFT bins per "cycles" bin (1 up to rounding of n)
    ib = np.rint(k * m * per_bin).astype(np.int64)
    valid = (k * cycle_hz < 0.475 * sr) & (ib < n // 2)
    mid = np.rint((k - 0.5) * m * per_bin).astype(np.int64)  # half-way between harmonics
    mid = mid[valid & (mid < n // 2)]
    scale = 2.0 / w.sum()
    for i, c in enumerate(centres):
        s = min(max(int(round(c)) - n // 2, 0), z.size - n)
        p = np.abs(np.fft.rfft(z[s:s + n] * w)) ** 2
        noise = float(np.median(p[mid])) if mid.size else 0.0
        out[i, valid] = scale * np.sqrt(np.maximum(p[ib[valid]] - noise, 0.0))
    return out


def uneven_index_db(cycle_amps: np.ndarray, cylinders: int) -> np.ndarray:
    """Energy of the non-firing cycle harmonics relative to the firing ones, dB.

    ``cycle_amps`` is (T, K) as from :func:`order_amplitudes`; NaN columns are
    ignored.  NaN for one cylinder (every harmonic is a firing order) and where
    no firing-order energy was measured.
    """
    a = np.asarray(cycle_amps, dtype=np.float64)
    out = np.full(a.shape[0], np.nan)
    if cylinders < 2:
        return out
    _, firing = cycle_harmonics(a.shape[1], cylinders)
    p = np.where(np.isfinite(a), a * a, 0.0)
    e_f = p[:, firing].sum(axis=1)
    e_h = p[:, ~firing].sum(axis=1)
    good = e_f > 0
    with np.errstate(divide="ignore"):
        out[good] = 10.0 * np.log10(np.maximum(e_h[good], 1e-300) / e_f[good])
    return out
