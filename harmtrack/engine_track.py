"""The engine pipeline: firing frequency, rpm, engine orders and uneven firing.

1. The harmonic tracker (:func:`harmtrack.tracker.track_signal`) follows the
   firing frequency in the firing range of the rpm range, with frames of a few
   firing periods.
2. The recording is resampled along that track at equal crank-angle increments
   (computed order tracking; jumps between harmonic relations removed first),
   where the engine is a steady sound however fast it accelerates.  The tracker
   runs again there, with frames of several engine cycles and a search range of
   less than an octave around the first track: this refines it and resolves the
   half orders.
3. Along the final track the orders are measured over windows of whole engine
   cycles (no leakage between orders, noise floor subtracted), and the
   uneven-firing index compares the non-firing with the firing orders.

References
----------
K. R. Fyfe and E. D. S. Munck, "Analysis of computed order tracking",
Mechanical Systems and Signal Processing 11(2), 1997.
"""

from __future__ import annotations

import dataclasses

import numpy as np
import scipy.ndimage

from . import machinery
from .config import ResolvedConfig, TrackerConfig
from .result import Track
from .tracker import prepare_signal, track_prepared, track_signal

__all__ = ["track_engine"]

#: Span of the running median that cleans a track before it serves as the
#: angle-domain reference, seconds: shorter excursions (a few frames on another
#: harmonic relation) would otherwise bend the reference.
REFERENCE_MEDIAN_S = 0.3

#: Engine cycles spanned by the angle-domain refinement frames and by the order
#: analysis windows: enough to resolve the half orders, whatever the run-up rate.
REFINE_CYCLES = 3.0
ORDER_CYCLES = 4

#: Half-width (ratio) of the refinement's search range around the reference:
#: narrower than an octave, so the refinement cannot step onto another relation.
REFINE_SPAN = 1.45

#: Cycle harmonics that enter the uneven-firing index: the firing orders up to
#: this multiple of the firing frequency, and every non-firing order between.
INDEX_FIRING_HARMONICS = 10

#: Span of the running median over the uneven-firing index, seconds: one misfire
#: lasts an engine cycle (0.15 s at 800 rpm, 4-stroke), so single frames where the
#: order analysis is disturbed (a track error, a gust) do not raise the flag.
INDEX_MEDIAN_S = 0.25


def _odd(x: float) -> int:
    """The odd integer nearest to ``x`` (at least 1)."""
    return max(1, 2 * int(round((x - 1.0) / 2.0)) + 1)


def _running_median(x: np.ndarray, n: int) -> np.ndarray:
    """Running median over ``n`` frames ignoring NaN (NaN stays NaN)."""
    ok = np.isfinite(x)
    if n <= 1 or not np.any(ok):
        return x
    filled = np.interp(np.arange(x.size), np.nonzero(ok)[0], x[ok])
    out = scipy.ndimage.median_filter(filled, size=n, mode="nearest")
    return np.where(ok, out, np.nan)


def _frame_positions(phase: np.ndarray, times: np.ndarray, sr: float, f_ref: float) -> np.ndarray:
    """Positions (samples of the angle-domain signal) of the frame centres ``times``."""
    return phase[np.minimum((times * sr).astype(np.int64), phase.size - 1)] / f_ref * sr


def _refine(ya: np.ndarray, asr: float, times: np.ndarray, track: np.ndarray,
            cfg: TrackerConfig, rc: ResolvedConfig, name: str) -> np.ndarray:
    """Step 2: the track refined in the angle domain along its jump-free version."""
    C = cfg.cylinders
    g = machinery.jump_free_track(track, median_frames=_odd(REFERENCE_MEDIAN_S / cfg.hop_s))
    z, f_ref, phase, stretch = machinery.angle_resample(ya, asr, times, g)
    band = min(rc.band_hz, 0.95 * asr / 2.0 / stretch)
    fmin2 = f_ref / REFINE_SPAN
    fmax2 = min(f_ref * REFINE_SPAN, band / 2.1)
    frame2 = min(1.0, max(REFINE_CYCLES * C / f_ref, 2.5 / fmin2))
    if not (fmax2 > fmin2 * 1.01 and z.size > frame2 * asr):
        return track
    mean_stretch = (phase[-1] / f_ref) / (ya.size / asr)
    cfg2 = dataclasses.replace(
        cfg, cylinders=None, fmin_hz=fmin2, fmax_hz=fmax2, frame_s=frame2, prewhiten=False,
        band_hz=max(100.0, band), analysis_sr=int(max(asr, 4000)), search_sr=None,
        hop_s=float(min(0.1, cfg.hop_s * mean_stretch)), glide_oct_s=0.2)
    second = track_signal(z, asr, cfg2, name=name)
    fz = np.interp(_frame_positions(phase, times, asr, f_ref) / asr, second.times, second.f0_hz)
    refined = fz * g / f_ref
    return np.where(np.isfinite(refined), refined, track)


def track_engine(y, sr: float, cfg: TrackerConfig, *, name: str = "<array>") -> Track:
    """Firing frequency, rpm, engine orders and uneven firing of an engine recording.

    See the module description for the method; :func:`harmtrack.track` for the
    public interface.
    """
    C = cfg.cylinders
    prepared = prepare_signal(y, sr, cfg, name=name)
    first = track_prepared(prepared)
    T = len(first)
    per_rpm = machinery.firing_hz_per_rpm(cylinders=C, strokes=cfg.strokes)
    K_out = int(round(cfg.max_order * cfg.strokes / 2))
    orders = machinery.order_numbers(K_out, cfg.strokes)
    voiced = first.voiced
    if not np.any(voiced):
        nan = np.full(T, np.nan)
        return dataclasses.replace(
            first, rpm=nan, order_numbers=orders, order_amplitudes=np.full((T, K_out), np.nan),
            uneven_db=nan.copy(), uneven_flag=np.zeros(T, dtype=bool))
    rc, ya, asr = prepared.rc, prepared.ya, prepared.rc.sr
    times = first.times

    # 2. refinement in the angle domain
    f = _refine(ya, asr, times, np.where(voiced, first.f0_hz, np.nan), cfg, rc, name)
    f = np.where(voiced, f, np.nan)

    # 3. orders along the final track
    g2 = machinery.jump_free_track(f)
    z2, f_ref2, phase2, stretch2 = machinery.angle_resample(ya, asr, times, g2)
    K_idx = max(K_out, C * INDEX_FIRING_HARMONICS, C * cfg.max_harmonics)
    cyc = machinery.order_amplitudes(z2, asr, f_ref2 / C, _frame_positions(phase2, times, asr, f_ref2),
                                     n_harmonics=K_idx, cycles=ORDER_CYCLES)
    # harmonics above the band that is undistorted everywhere in z2 are unknown
    k = np.arange(1, K_idx + 1)
    cyc[:, k * f_ref2 / C > min(rc.band_hz, 0.95 * asr / 2.0) / stretch2] = np.nan
    cyc[~voiced] = np.nan
    idx = machinery.uneven_index_db(cyc[:, :C * INDEX_FIRING_HARMONICS], C)
    idx = _running_median(idx, _odd(INDEX_MEDIAN_S / cfg.hop_s))
    flag = voiced & (idx > cfg.uneven_threshold_db)
    H = cfg.max_harmonics
    harm = cyc[:, C - 1:C * H:C]
    return dataclasses.replace(
        first, f0_hz=f, rpm=f / per_rpm, harmonic_amplitudes=harm,
        order_numbers=orders, order_amplitudes=cyc[:, :K_out],
        uneven_db=np.where(voiced, idx, np.nan), uneven_flag=flag)
