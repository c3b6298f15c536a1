"""Synthetic engine sounds with a known speed and known engine-order amplitudes.

Everything here produces test, demo and benchmark material for engine
monitoring (firing frequency, rpm, engine-order amplitudes, uneven firing)
whose truth is known exactly:

* :func:`firing_hz` and :func:`rpm_from_firing` convert between crankshaft
  speed and firing frequency.
* :func:`rpm_profile` draws a frame-rate rpm curve (steady, ramp, or a
  generator-set start-up with a load step).
* :func:`engine` renders an rpm curve as a train of combustion pulses, one per
  cylinder firing, coloured by a few structural resonances, optionally
  high-passed and noisy; it can also return the true engine-order amplitudes.
* :func:`demo_engine` is a ready-made generator-set scenario.

Vocabulary
----------
Engine order ``q`` is the frequency ``q * rpm / 60`` Hz: order 1 is the
crankshaft rotation rate. One engine cycle is two crankshaft revolutions
(720 degrees) for a 4-stroke engine and one revolution (360 degrees) for a
2-stroke engine, so a 4-stroke signal that repeats every cycle has energy at
the half orders 0.5, 1, 1.5, ... and a 2-stroke one at the whole orders 1, 2,
3, .... With ``C`` evenly spaced cylinders the firing order (the order of the
firing frequency) is ``C / 2`` for a 4-stroke engine and ``C`` for a 2-stroke
engine; a healthy engine whose cylinders are all alike has energy only at
multiples of the firing order. A weak or dead cylinder breaks that symmetry and
raises the other orders: the half orders (4-stroke) and, generally, every
non-firing order.

All functions are pure: they take numpy arrays, return new arrays, write no
files, and are deterministic given ``seed``.
"""

from __future__ import annotations

import numbers

import numpy as np
import scipy.signal

from .errors import HarmtrackError
from .machinery import (
    _cycle_hz_per_rpm,
    _cylinders,
    _strokes,
    firing_hz,
    rpm_from_firing,
)
from .synth import (
    _choice,
    _frame_series,
    _number,
    _rng,
    _sample_rate,
    _seed,
    _smoothstep,
    add_noise,
)

__all__ = [
    "firing_hz",
    "rpm_from_firing",
    "rpm_profile",
    "engine",
    "demo_engine",
]

# ---------------------------------------------------------------------------
# constants
# ---------------------------------------------------------------------------

_PROFILE_KINDS = ("steady", "ramp", "genset")
_NOISE_COLORS = ("white", "pink", "brown")
_MAX_RPM = 100000.0  # far above any reciprocating engine; guards against unit mix-ups

# Wander of the "steady" profile: peak relative deviation and the band of its
# slow components (a governed engine drifts by a fraction of a percent over
# seconds; common practice for a governed engine at constant load).
_STEADY_WANDER = 0.005
_WANDER_BAND_HZ = (0.05, 0.4)
_WANDER_PARTIALS = 4

# Generator-set scenario, laid out on a 6 s reference timeline and stretched
# in proportion to the requested duration.
_GENSET_REF_S = 6.0
_GENSET_CRANK_RPM = 250.0  # starter-motor cranking speed (common practice: 150-300 rpm)
_GENSET_RATED_RPM = 1500.0  # 50 Hz alternator with 4 poles (common practice)
_GENSET_CRANK_END_S = 0.5  # end of cranking / start of the run-up
_GENSET_RUNUP_END_S = 1.5  # rated speed reached
_GENSET_LOAD_STEP_S = 3.5  # load applied
_GENSET_DIP = 0.04  # speed dip on the load step, fraction of rated speed
_GENSET_DIP_PEAK_S = 0.15  # time from the load step to the deepest point of the dip
_GENSET_CRANK_WANDER = 0.02  # +-2 % speed irregularity while cranking
_GENSET_RUN_WANDER = 0.003  # +-0.3 % wander once running
_GENSET_MIN_S = 1.0

# Combustion pulse p(t) = (t / tau)**2 * exp(-t / tau), t >= 0. Its spectrum is
# P(f) = 2 tau / (1 + 2j pi f tau)**3: flat below 1 / (2 pi tau) (800 Hz for
# tau = 0.2 ms), then -18 dB/octave, with no spectral zeros. tau is lengthened
# to 3.2 samples at low sample rates so that |P| is 60 dB below its DC value at
# the Nyquist frequency (sampling the pulse then aliases negligibly).
_PULSE_TAU_S = 0.0002
_PULSE_TAU_SAMPLES = 3.2
_PULSE_SPAN_TAU = 24.0  # pulse truncated after 24 tau, where it is 1e-7 of its peak

# Each resonance is a unit-peak second-order band-pass added to the direct
# pulse with this gain (about +12 dB at its centre); chosen by ear so that the
# resonances colour the sound without hiding the pulse train.
_RESONANCE_GAIN = 3.0
_HIGHPASS_ORDER = 4  # Butterworth order of the optional high-pass, applied forward and back

# Pre- and post-roll rendered at the end speeds and cut off, so that resonators
# and the zero-phase high-pass start and end in their steady state.
_ROLL_S = 0.5
_CHUNK_VALUES = 2_000_000  # pulse samples placed per vectorised block (memory bound)
_MAX_FIRING_FRACTION = 0.45  # firing frequency must stay below this fraction of sr


# ---------------------------------------------------------------------------
# rpm profiles
# ---------------------------------------------------------------------------


def _wander(times, rng, band_hz=_WANDER_BAND_HZ):
    """Slow, smooth random curve of peak absolute value 1 at ``times``."""
    f = rng.uniform(band_hz[0], band_hz[1], _WANDER_PARTIALS)
    a = rng.uniform(0.5, 1.0, _WANDER_PARTIALS)
    ph = rng.uniform(0.0, 2.0 * np.pi, _WANDER_PARTIALS)
    w = np.sum(a[:, None] * np.sin(2.0 * np.pi * f[:, None] * times[None, :] + ph[:, None]),
               axis=0)
    peak = np.max(np.abs(w))
    return w / peak if peak > 0 else w


def _genset_events(duration_s):
    """Event times (s) of the generator-set scenario stretched to ``duration_s``."""
    scale = duration_s / _GENSET_REF_S
    return {
        "crank_end_s": _GENSET_CRANK_END_S * scale,
        "run_up_end_s": _GENSET_RUNUP_END_S * scale,
        "load_step_s": _GENSET_LOAD_STEP_S * scale,
        "dip_peak_s": (_GENSET_LOAD_STEP_S + _GENSET_DIP_PEAK_S) * scale,
    }


def _genset_rpm(times, duration_s, rng):
    ev = _genset_events(duration_s)
    scale = duration_s / _GENSET_REF_S
    crank = _GENSET_CRANK_RPM * (
        1.0 + _GENSET_CRANK_WANDER * _wander(times / scale, rng, band_hz=(0.5, 2.0)))
    run = _GENSET_RATED_RPM * (1.0 + _GENSET_RUN_WANDER * _wander(times / scale, rng))
    u = _smoothstep((times - ev["crank_end_s"]) / (ev["run_up_end_s"] - ev["crank_end_s"]))
    rpm = (1.0 - u) * crank + u * run
    # load step: the speed drops at once (kink) and the governor pulls it back;
    # dip(x) = x exp(1 - x) peaks at 1 for x = 1 and is below 2.5 % of its
    # peak one second (reference timeline) after the step
    x = np.maximum(times - ev["load_step_s"], 0.0) / (_GENSET_DIP_PEAK_S * scale)
    rpm = rpm - _GENSET_DIP * _GENSET_RATED_RPM * x * np.exp(1.0 - x)
    return rpm


def rpm_profile(duration_s, *, kind="steady", rpm=900.0, rpm_end=None, hop_s=0.01, seed=0):
    """Draw a frame-rate crankshaft-speed curve.

    Parameters
    ----------
    duration_s : float
        Length of the curve in seconds, in [``hop_s``, 3600]; at least 1 s for
        ``kind="genset"``.
    kind : {"steady", "ramp", "genset"}, keyword-only
        ``"steady"``: ``rpm`` with a small, slow random wander (a few
        components between 0.05 and 0.4 Hz) whose peak deviation is exactly
        +-0.5 % over the curve.
        ``"ramp"``: smooth, monotone change from ``rpm`` at the start to
        ``rpm_end`` at the end (smoothstep ``3u**2 - 2u**3`` in time), no
        wander.
        ``"genset"``: a generator-set start, laid out on a 6 s timeline and
        stretched in proportion to ``duration_s``: cranking near 250 rpm
        (+-2 % irregularity) for the first 1/12 of the duration (0.5 s of 6),
        a smooth run-up to the rated 1500 rpm ending at 1/4 of the duration
        (1.5 s of 6), steady running with +-0.3 % wander, then a load step at
        7/12 of the duration (3.5 s of 6) that pulls the speed down by 4 % of
        1500 rpm within 0.15 s (of 6) and is recovered by the governor within
        about 1 s (of 6). ``rpm`` and ``rpm_end`` are not used.
    rpm : float, keyword-only
        Speed in rpm for ``"steady"``, start speed for ``"ramp"``; in
        (0, 100000].
    rpm_end : float or None, keyword-only
        End speed of ``"ramp"`` in rpm, in (0, 100000]; None means ``2 * rpm``.
        Must be None for the other kinds.
    hop_s : float, keyword-only
        Frame hop in seconds, in [0.001, 0.1].
    seed : int, keyword-only
        Seed of the wander.

    Returns
    -------
    times : ndarray, shape (T,)
        Frame times in seconds, ``times[t] = t * hop_s``, covering
        0..``duration_s`` (``T = floor(duration_s / hop_s) + 1``).
    rpm : ndarray, shape (T,)
        Crankshaft speed in rpm at each frame, all > 0.
    """
    hop_s = _number("hop_s", hop_s, 0.001, 0.1, unit="s")
    duration_s = _number("duration_s", duration_s, hop_s, 3600.0, unit="s")
    kind = _choice("kind", kind, _PROFILE_KINDS)
    rpm = _number("rpm", rpm, 0.0, _MAX_RPM, unit="rpm", lo_open=True)
    if kind == "ramp":
        rpm_end = 2.0 * rpm if rpm_end is None else \
            _number("rpm_end", rpm_end, 0.0, _MAX_RPM, unit="rpm", lo_open=True)
    elif rpm_end is not None:
        raise HarmtrackError(
            f"rpm_end is only used by kind='ramp'; pass rpm_end=None for kind={kind!r}, "
            f"got {rpm_end!r}")
    if kind == "genset" and duration_s < _GENSET_MIN_S:
        raise HarmtrackError(
            f"duration_s must be at least {_GENSET_MIN_S:g} s for kind='genset', "
            f"got {duration_s!r}")
    rng = np.random.default_rng(_seed(seed))

    n_frames = int(np.floor(duration_s / hop_s + 1e-9)) + 1
    times = np.arange(n_frames) * hop_s
    if kind == "steady":
        curve = rpm * (1.0 + _STEADY_WANDER * _wander(times, rng))
    elif kind == "ramp":
        u = _smoothstep(times / times[-1]) if times[-1] > 0 else np.zeros(n_frames)
        curve = rpm + (rpm_end - rpm) * u
    else:
        curve = _genset_rpm(times, duration_s, rng)
    return times, curve


# ---------------------------------------------------------------------------
# engine renderer
# ---------------------------------------------------------------------------


def _pulse_tau(sr):
    return max(_PULSE_TAU_S, _PULSE_TAU_SAMPLES / sr)


def _pulse(t, tau):
    """Combustion pulse ``(t / tau)**2 exp(-t / tau)`` at ``t >= 0`` seconds (peak 4/e**2)."""
    x = t / tau
    return x * x * np.exp(-x)


def _pulse_spectrum(f, tau):
    """Continuous-time Fourier transform of :func:`_pulse` at ``f`` Hz (unit: s)."""
    return 2.0 * tau / (1.0 + 2j * np.pi * f * tau) ** 3


def _resonator_filters(resonances, sr):
    """(b, a) of each unit-peak band-pass resonator; validates ``resonances``."""
    if resonances is None:
        return []
    try:
        pairs = [tuple(p) for p in resonances]
    except TypeError:
        pairs = None
    nyq_lim = 0.45 * sr
    want = (f"None or a sequence of (centre Hz in [20, {nyq_lim:g}), bandwidth fraction "
            "in [0.01, 1]) pairs")
    if pairs is None or not all(len(p) == 2 for p in pairs):
        raise HarmtrackError(f"resonances must be {want}, got {resonances!r}")
    filters = []
    for fc, frac in pairs:
        ok = all(isinstance(v, numbers.Real) and not isinstance(v, bool) for v in (fc, frac))
        if not ok or not (np.isfinite(fc) and 20.0 <= fc < nyq_lim
                          and np.isfinite(frac) and 0.01 <= frac <= 1.0):
            raise HarmtrackError(
                f"resonances must be {want} for sr={sr}, got the pair {(fc, frac)!r}")
        b, a = scipy.signal.iirpeak(float(fc), 1.0 / float(frac), fs=sr)
        filters.append((b, a))
    return filters


def _biquad_response(b, a, f, sr):
    """Complex response of ``b(z) / a(z)`` (coefficients of z**0, z**-1, ...) at ``f`` Hz."""
    zi = np.exp(-2j * np.pi * np.asarray(f) / sr)
    num = np.zeros(zi.shape, dtype=np.complex128)
    den = np.zeros(zi.shape, dtype=np.complex128)
    for c in reversed(b):
        num = num * zi + c
    for c in reversed(a):
        den = den * zi + c
    return num / den


def _chain_response(f, sr, filters, hp_sos):
    """Complex response of the linear chain after the pulse train at ``f`` Hz.

    Direct path plus the weighted resonators, times ``|H_hp|**2`` of the
    forward-backward high-pass (zero phase).
    """
    h = np.ones(np.shape(f), dtype=np.complex128)
    for b, a in filters:
        h = h + _RESONANCE_GAIN * _biquad_response(b, a, f, sr)
    if hp_sos is not None:
        hp = np.ones(np.shape(f), dtype=np.complex128)
        for sec in hp_sos:
            hp = hp * _biquad_response(sec[:3], sec[3:], f, sr)
        h = h * np.abs(hp) ** 2
    return h


def _firing_times(u):
    """Fractional sample positions where ``u`` (increasing) crosses each integer.

    Returns (positions, integers); ``u`` is taken as linear between samples.
    """
    first = int(np.ceil(u[0]))
    last = int(np.floor(u[-1]))
    if last < first:
        return np.zeros(0), np.zeros(0, dtype=np.int64)
    m = np.arange(first, last + 1, dtype=np.int64)
    s = np.searchsorted(u, m, side="left")  # u[s - 1] < m <= u[s]
    s = np.clip(s, 1, u.size - 1)
    u0, u1 = u[s - 1], u[s]
    frac = np.clip((m - u0) / (u1 - u0), 0.0, 1.0)
    return (s - 1) + frac, m


def _place_pulses(positions, gains, n_samp, sr, tau):
    """Sum of ``gains[j] * p(n / sr - positions[j] / sr)`` over all pulses, length ``n_samp``.

    The pulse is evaluated exactly at each sample's fractional offset from its
    firing time (no interpolation), in vectorised blocks of pulses.
    """
    span = int(np.ceil(_PULSE_SPAN_TAU * tau * sr)) + 1
    x = np.zeros(n_samp)
    offsets = np.arange(span)
    block = max(1, _CHUNK_VALUES // span)
    for j0 in range(0, positions.size, block):
        pos = positions[j0:j0 + block]
        start = np.floor(pos).astype(np.int64) + 1  # first sample strictly after firing
        idx = start[:, None] + offsets[None, :]
        val = gains[j0:j0 + block, None] * _pulse((idx - pos[:, None]) / sr, tau)
        keep = idx < n_samp
        x += np.bincount(idx[keep], weights=val[keep], minlength=n_samp)
    return x


def _order_numbers(strokes, max_order):
    if strokes == 4:
        return np.arange(1, 2 * max_order + 1) / 2.0
    return np.arange(1, max_order + 1, dtype=np.float64)


def engine(times, rpm, sr, *, cylinders=4, strokes=4, seed=0, cylinder_spread_db=1.0,
           weak_cylinder=None, weak_db=-40.0,
           resonances=((180.0, 0.15), (650.0, 0.2), (1400.0, 0.25)),
           highpass_hz=None, noise_snr_db=None, noise_color="pink", amplitude=0.3,
           max_order=24, return_orders=False):
    """Render a frame-rate rpm curve as the sound of a reciprocating engine.

    Signal model, in order:

    1. The rpm curve is interpolated linearly from the frame times to the
       samples and integrated (trapezoidal rule) to the crank angle. One engine
       cycle is 720 degrees (4-stroke) or 360 degrees (2-stroke); the starting
       crank angle is drawn from ``seed``.
    2. Cylinder ``i`` (0-based) fires when the crank angle passes
       ``i * cycle / cylinders`` (modulo the cycle): an even firing order.
       Firing instants are found to a fraction of a sample.
    3. Every firing emits the same combustion pulse
       ``p(t) = (t / tau)**2 exp(-t / tau)`` (``t >= 0``, ``tau = 0.2 ms``, or
       3.2 samples if longer; peak after 0.4 ms, spectrum flat to about
       800 Hz then falling 18 dB/octave), sampled exactly at its fractional
       delay, scaled by that cylinder's gain. The gains are drawn once per
       seed: ``10**(cylinder_spread_db * z_i / 20)`` with ``z_i`` standard
       normal; the ``weak_cylinder`` is further multiplied by
       ``10**(weak_db / 20)``.
    4. The pulse train passes through the direct path plus, for each
       resonance, a unit-peak second-order band-pass (centre ``fc``,
       -3 dB bandwidth ``fraction * fc``) weighted by 3 (about +12 dB).
    5. Optionally a 4th-order Butterworth high-pass at ``highpass_hz``, run
       forward and backward (zero phase, magnitude squared), so that the low
       orders, including the firing fundamental, can be made weak.
    6. Half a second of pre- and post-roll (at the end speeds) is cut off, the
       mean is removed, and the signal is scaled to a peak of ``amplitude``.
    7. Optionally noise is added at ``noise_snr_db`` re the mean power of the
       whole clean signal.

    Parameters
    ----------
    times : array_like, shape (T,)
        Frame times in seconds, finite and strictly increasing, T >= 2.
    rpm : array_like, shape (T,)
        Crankshaft speed in rpm at each frame, finite and > 0, with a firing
        frequency below ``0.45 * sr``.
    sr : int
        Sample rate in Hz, in [1000, 384000].
    cylinders : int, keyword-only
        Number of cylinders, in [1, 24].
    strokes : {2, 4}, keyword-only
        Strokes per engine cycle.
    seed : int, keyword-only
        Seed of the cylinder gains, starting crank angle and noise.
    cylinder_spread_db : float, keyword-only
        Standard deviation in dB of the fixed per-cylinder gains, in [0, 12];
        0 makes all cylinders alike.
    weak_cylinder : int or None, keyword-only
        Index in [0, cylinders - 1] of a cylinder whose pulses are attenuated
        by ``weak_db``, or None for none.
    weak_db : float, keyword-only
        Gain of the weak cylinder in dB, in [-inf, 0]; ``-inf`` (or a very low
        value) is a dead cylinder.
    resonances : sequence of (float, float) or None, keyword-only
        ``(centre Hz, bandwidth fraction)`` pairs of the resonators, centres in
        [20, 0.45 * sr) Hz, fractions in [0.01, 1]; None or empty for none.
    highpass_hz : float or None, keyword-only
        Cut-off in Hz of the zero-phase high-pass, in [1, 0.45 * sr], or None.
    noise_snr_db : float or None, keyword-only
        SNR in dB of added noise, in [-60, 120], or None for a clean signal.
    noise_color : {"white", "pink", "brown"}, keyword-only
        Spectrum of the added noise.
    amplitude : float, keyword-only
        Peak absolute value of the clean signal, in (0, 1].
    max_order : int, keyword-only
        Highest engine order reported with ``return_orders``, in [1, 1000].
    return_orders : bool, keyword-only
        Also return the true engine-order amplitudes.

    Returns
    -------
    y : ndarray of float64, shape (N,)
        The signal. Sample ``n`` is at time ``times[0] + n / sr`` and
        ``N = round((times[-1] - times[0]) * sr) + 1``.
    truth : dict
        Only with ``return_orders=True``:

        ``"times"`` (T,) s and ``"rpm"`` (T,) rpm: the input curve;
        ``"firing_hz"`` (T,) Hz: firing frequency at each frame;
        ``"rotation_hz"`` (T,) Hz: crankshaft rate ``rpm / 60`` (order 1);
        ``"firing_order"``: ``cylinders / 2`` (4-stroke) or ``cylinders``;
        ``"order_numbers"`` (K,): 0.5, 1, ..., ``max_order`` (4-stroke,
        ``K = 2 * max_order``) or 1, 2, ..., ``max_order`` (2-stroke);
        ``"order_amplitudes"`` (T, K): linear peak amplitude, in the units of
        ``y``, of the sinusoid at each order's frequency
        ``order * rpm / 60`` Hz; NaN where that frequency reaches ``sr / 2``;
        ``"cylinder_gains"`` (cylinders,): the linear pulse gain of each
        cylinder (weak cylinder included), as drawn.

    Notes
    -----
    The order amplitudes are computed in closed form from the signal model.
    At constant speed the clean signal is periodic in the engine cycle of
    rate ``f_c`` (``rpm / 120`` Hz for 4-stroke, ``rpm / 60`` Hz for
    2-stroke). Its Fourier-series amplitude at the cycle harmonic
    ``k`` (frequency ``f_k = k f_c``) is::

        A_k = s * 2 f_c |P(f_k)| |H(f_k)| |sum_i g_i exp(-2j pi k i / C)|

    with ``P`` the pulse spectrum, ``H`` the response of the resonators (plus
    the direct path) times the squared magnitude of the high-pass, ``g_i``
    the cylinder gains, ``C`` the number of cylinders and ``s`` the output
    scale. ``k`` is twice the order for 4-stroke and the order for 2-stroke.
    The frame's own rpm is used at each frame. This is exact for a steady
    speed (up to the pulse's aliasing, below -60 dB at the Nyquist frequency,
    and filter transients at the edges, which the roll keeps out) and an
    approximation while the speed changes (it ignores the smearing of the
    orders by the speed change within the analysis window). The noise is not
    included. With identical cylinders the sum over cylinders vanishes unless
    ``k`` is a multiple of ``C``: only multiples of the firing order sound.
    """
    sr = _sample_rate(sr)
    times, rpm = _frame_series(times, rpm, "rpm")
    if not np.all(np.isfinite(rpm)) or np.any(rpm <= 0):
        bad = rpm[~(np.isfinite(rpm) & (rpm > 0))][0]
        raise HarmtrackError(f"rpm values must be finite and > 0, got {float(bad)!r}")
    cylinders = _cylinders(cylinders)
    strokes = _strokes(strokes)
    seed = _seed(seed)
    fire = firing_hz(rpm, cylinders=cylinders, strokes=strokes)
    f_lim = _MAX_FIRING_FRACTION * sr
    if np.max(fire) >= f_lim:
        raise HarmtrackError(
            f"the firing frequency must stay below {f_lim:g} Hz for sr={sr}, got up to "
            f"{float(np.max(fire)):g} Hz; lower the rpm or raise sr")
    spread = _number("cylinder_spread_db", cylinder_spread_db, 0.0, 12.0, unit="dB")
    if weak_cylinder is not None and (
            isinstance(weak_cylinder, bool) or not isinstance(weak_cylinder, numbers.Integral)
            or not 0 <= int(weak_cylinder) < cylinders):
        raise HarmtrackError(
            f"weak_cylinder must be None or an integer in [0, {cylinders - 1}], "
            f"got {weak_cylinder!r}")
    if isinstance(weak_db, bool) or not isinstance(weak_db, numbers.Real) \
            or np.isnan(weak_db) or not weak_db <= 0.0:
        raise HarmtrackError(f"weak_db must be a number in [-inf, 0] dB, got {weak_db!r}")
    filters = _resonator_filters(resonances, sr)
    hp_sos = None
    if highpass_hz is not None:
        hp = _number("highpass_hz", highpass_hz, 1.0, 0.45 * sr, unit="Hz")
        hp_sos = scipy.signal.butter(_HIGHPASS_ORDER, hp, btype="highpass", fs=sr,
                                     output="sos")
    if noise_snr_db is not None:
        noise_snr_db = _number("noise_snr_db", noise_snr_db, -60.0, 120.0, unit="dB")
    noise_color = _choice("noise_color", noise_color, _NOISE_COLORS)
    amplitude = _number("amplitude", amplitude, 0.0, 1.0, lo_open=True)
    if isinstance(max_order, bool) or not isinstance(max_order, numbers.Integral) \
            or not 1 <= int(max_order) <= 1000:
        raise HarmtrackError(f"max_order must be an integer in [1, 1000], got {max_order!r}")
    max_order = int(max_order)

    rng_gain, rng_phase, rng_noise = (_rng(seed, i) for i in range(3))
    gains = 10.0 ** (spread * rng_gain.standard_normal(cylinders) / 20.0)
    if weak_cylinder is not None:
        gains[int(weak_cylinder)] *= 10.0 ** (float(weak_db) / 20.0)  # -inf dB -> 0
    start_cycle = rng_phase.uniform()
    noise_seed = int(rng_noise.integers(2 ** 31))
    tau = _pulse_tau(sr)

    # --- crank angle, in firing intervals (u = cylinders * engine cycles) ---
    n_samp = int(round((times[-1] - times[0]) * sr)) + 1
    roll = int(np.ceil(_ROLL_S * sr))
    n_ext = n_samp + 2 * roll
    t_ext = times[0] + (np.arange(n_ext) - roll) / sr
    rpm_s = np.interp(t_ext, times, rpm)  # held at the end values in the rolls
    du = rpm_s * (_cycle_hz_per_rpm(strokes) * cylinders / sr)
    u = np.empty(n_ext)
    u[0] = start_cycle * cylinders
    np.cumsum(0.5 * (du[1:] + du[:-1]), out=u[1:])
    u[1:] += u[0]

    # --- pulse train, resonances, high-pass ---
    positions, counts = _firing_times(u)
    x = _place_pulses(positions, gains[counts % cylinders], n_ext, sr, tau)
    z = x.copy()
    for b, a in filters:
        z += _RESONANCE_GAIN * scipy.signal.lfilter(b, a, x)
    if hp_sos is not None:
        z = scipy.signal.sosfiltfilt(hp_sos, z)
    y = z[roll:roll + n_samp]
    y = y - np.mean(y)
    peak = np.max(np.abs(y))
    scale = amplitude / peak if peak > 0 else 0.0
    y = y * scale

    if noise_snr_db is not None and peak > 0:
        y = add_noise(y, noise_snr_db, color=noise_color, seed=noise_seed, ref="all")

    if not return_orders:
        return y

    # --- true engine-order amplitudes (closed form, see Notes) ---
    orders = _order_numbers(strokes, max_order)
    k = np.rint(orders * (strokes // 2)).astype(np.int64)  # cycle-harmonic numbers
    phase = np.exp(-2j * np.pi * np.outer(k, np.arange(cylinders)) / cylinders)
    cyl_sum = np.abs(phase @ gains)  # (K,)
    f_cycle = rpm * _cycle_hz_per_rpm(strokes)  # (T,)
    freqs = f_cycle[:, None] * k[None, :]  # (T, K) Hz
    amps = (scale * 2.0 * f_cycle[:, None] * np.abs(_pulse_spectrum(freqs, tau))
            * np.abs(_chain_response(freqs, sr, filters, hp_sos)) * cyl_sum[None, :])
    amps[freqs >= 0.5 * sr] = np.nan
    truth = {
        "times": times.copy(),
        "rpm": rpm.copy(),
        "firing_hz": np.asarray(fire, dtype=np.float64),
        "rotation_hz": rpm / 60.0,
        "firing_order": cylinders / 2.0 if strokes == 4 else float(cylinders),
        "order_numbers": orders,
        "order_amplitudes": amps,
        "cylinder_gains": gains,
    }
    return y, truth


# ---------------------------------------------------------------------------
# demo scenario
# ---------------------------------------------------------------------------


_DEMO_WIND_SNR_DB = 12.0  # wind level re the engine, dB (a breezy day outdoors; chosen by ear)
_GUST_STEP_S = 0.7  # a new gust level every this many seconds


def _wind(y, sr, *, snr_db, seed):
    """Gusty wind noise for ``y``: brown noise at ``snr_db`` re ``y`` times a gust envelope."""
    rng = _rng(seed, 0)
    noise = add_noise(y, snr_db, color="brown", seed=seed, ref="all") - y
    n_knots = int(np.ceil(y.size / sr / _GUST_STEP_S)) + 2
    knots = rng.uniform(0.2, 1.0, n_knots)
    u = np.arange(y.size) / sr / _GUST_STEP_S
    i = np.minimum(u.astype(np.int64), n_knots - 2)
    env = knots[i] + (knots[i + 1] - knots[i]) * _smoothstep(u - i)
    return noise * env / np.sqrt(np.mean(env ** 2))


def demo_engine(seed=0, *, dead_cylinder=None):
    """The engine demo scenario: a generator set starting up and taking a load.

    Six seconds at 16 kHz of a 6-cylinder 4-stroke engine following
    :func:`rpm_profile` ``kind="genset"``: cranking near 250 rpm until 0.5 s,
    run-up to 1500 rpm (firing frequency 75 Hz) by 1.5 s, steady running, a
    load step at 3.5 s with a 4 % speed dip recovered within about a second.
    Cylinder gains spread by 1 dB, the default resonances, a 120 Hz
    zero-phase high-pass (the 75 Hz firing fundamental is about 33 dB down at
    rated speed, so the firing frequency is mostly heard through its
    harmonics), pink noise at 15 dB SNR (exhaust and engine-bay hiss) and wind
    noise: brown (1/f**2) noise at 12 dB below the engine, swelling and fading in
    gusts (a smooth random envelope between 0.2 and 1, new level every 0.7 s).
    Nothing is written to disk.

    Parameters
    ----------
    seed : int
        Seed of every random choice; the same seed gives identical samples.
    dead_cylinder : int or None, keyword-only
        Index (0 to 5) of a cylinder that does not fire at all (a misfire), or
        None for a healthy engine.

    Returns
    -------
    y : ndarray of float64, shape (96001,)
        The signal, clean peak 0.3; sample ``n`` is at ``n / sr`` seconds.
    sr : int
        Sample rate, 16000 Hz.
    truth : dict
        The ``truth`` dictionary of :func:`engine` (frames every 10 ms, orders
        up to 24) plus ``"cylinders"`` (6), ``"strokes"`` (4), ``"snr_db"``
        (15.0) and ``"events"``: the scenario's event times in seconds
        (``"crank_end_s"``, ``"run_up_end_s"``, ``"load_step_s"``,
        ``"dip_peak_s"``).
    """
    seed = _seed(seed)
    sr = 16000
    duration_s = 6.0
    times, rpm = rpm_profile(duration_s, kind="genset", hop_s=0.01, seed=seed)
    y, truth = engine(times, rpm, sr, cylinders=6, strokes=4, seed=seed + 1,
                      cylinder_spread_db=1.0, weak_cylinder=dead_cylinder, weak_db=-np.inf, highpass_hz=120.0, noise_snr_db=15.0,
                      noise_color="pink", amplitude=0.3, return_orders=True)
    y = y + _wind(y, sr, snr_db=_DEMO_WIND_SNR_DB, seed=seed + 2)
    truth.update(cylinders=6, strokes=4, snr_db=15.0, events=_genset_events(duration_s))
    return y, sr, truth
