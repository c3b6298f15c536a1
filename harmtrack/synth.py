"""Synthetic harmonic signals with a known fundamental frequency.

Everything here produces test, demo and benchmark material whose true f0 (and
true harmonic amplitudes) is known exactly:

* :func:`f0_contour` draws a frame-rate f0 contour (speech-like phrase, glide,
  vibrato or steady), NaN where unvoiced.
* :func:`voice` renders a contour as a source-filter, speech-like voice:
  additive, alias-free harmonics with a glottal-like spectral tilt shaped by a
  formant envelope, optional breath noise in the unvoiced gaps.
* :func:`harmonic_tone` makes a stationary sum of harmonics.
* :func:`add_noise`, :func:`telephone` and :func:`reverberate` degrade a signal
  in controlled ways (SNR, telephone band, synthetic room).
* :func:`write_wav` writes 16-bit PCM WAV files atomically.
* :func:`demo_voice` is the scenario behind ``audio_demo/demo_voice.wav``.

All functions are pure: they take numpy arrays, return new arrays, and are
deterministic given ``seed``.
"""

from __future__ import annotations

import numbers
import os
import tempfile
from pathlib import Path

import numpy as np
import scipy.signal

from .errors import HarmtrackError, warn

__all__ = [
    "VOWEL_FORMANTS",
    "speakers_recording",
    "f0_contour",
    "voice",
    "add_noise",
    "telephone",
    "reverberate",
    "room_impulse_response",
    "harmonic_tone",
    "write_wav",
    "demo_voice",
]

# ---------------------------------------------------------------------------
# constants
# ---------------------------------------------------------------------------

#: Vowel formants: name -> ((F1, F2, F3) in Hz, (B1, B2, B3) in Hz).
#: Rounded, adult-male-like values; "neutral" is an evenly spaced schwa-like tract.
VOWEL_FORMANTS: dict[str, tuple[tuple[float, float, float], tuple[float, float, float]]] = {
    "neutral": ((500.0, 1500.0, 2500.0), (80.0, 100.0, 140.0)),
    "a": ((700.0, 1200.0, 2600.0), (90.0, 110.0, 150.0)),
    "e": ((500.0, 1850.0, 2500.0), (70.0, 100.0, 140.0)),
    "i": ((300.0, 2300.0, 3000.0), (60.0, 100.0, 150.0)),
    "o": ((550.0, 850.0, 2450.0), (80.0, 90.0, 140.0)),
    "u": ((320.0, 900.0, 2300.0), (60.0, 90.0, 140.0)),
}

# Peak boost of each formant above the envelope floor (linear, floor = 1).
_FORMANT_BOOST = np.array([8.0, 4.0, 2.5])

_CONTOUR_KINDS = ("phrase", "glide", "vibrato", "steady")
_NOISE_COLORS = ("white", "pink", "brown")
_HARMONIC_SETS = ("all", "odd", "no_fundamental")
_UNVOICED_KINDS = ("breath", "silence")

_MAX_HARMONIC_FRACTION = 0.45  # harmonics stop at this fraction of the sample rate
_TAPER_START_FRACTION = 0.40  # ...fading out smoothly from this fraction on
_RAMP_S = 0.010  # voicing onset/offset ramp length, s
_BREATH_DB = -25.0  # breath-noise level re the voiced RMS, dB
_BREATH_HIGHPASS_HZ = 2000.0
_CONTROL_S = 0.001  # control (amplitude) rate of the additive synthesis, s
_ACTIVE_WINDOW = 512  # samples, power smoothing window for ref="active"
_ACTIVE_FLOOR_DB = -40.0  # dB re the loudest window, threshold for "active"
_LN_1000 = np.log(1000.0)  # 60 dB of amplitude decay, in nepers


# ---------------------------------------------------------------------------
# validation helpers
# ---------------------------------------------------------------------------


def _number(name, value, lo, hi, *, unit="", lo_open=False, hi_open=False):
    """Return ``value`` as float after checking it lies in the given range."""
    lo_b = "(" if lo_open else "["
    hi_b = ")" if hi_open else "]"
    want = f"a number in {lo_b}{lo:g}, {hi:g}{hi_b}{' ' + unit if unit else ''}"
    if isinstance(value, bool) or not isinstance(value, numbers.Real):
        raise HarmtrackError(f"{name} must be {want}, got {value!r}")
    v = float(value)
    ok = np.isfinite(v)
    ok = ok and (v > lo if lo_open else v >= lo)
    ok = ok and (v < hi if hi_open else v <= hi)
    if not ok:
        raise HarmtrackError(f"{name} must be {want}, got {value!r}")
    return v


def _seed(value):
    if isinstance(value, bool) or not isinstance(value, numbers.Integral) or value < 0:
        raise HarmtrackError(f"seed must be a non-negative integer, got {value!r}")
    return int(value)


def _sample_rate(sr, *, lo=1000, hi=384000):
    if isinstance(sr, bool) or not isinstance(sr, numbers.Real) or not np.isfinite(sr) \
            or float(sr) != int(sr) or not lo <= int(sr) <= hi:
        raise HarmtrackError(
            f"sr must be a whole number of Hz in [{lo}, {hi}], got {sr!r}")
    return int(sr)


def _choice(name, value, options):
    if not isinstance(value, str) or value not in options:
        opts = ", ".join(repr(o) for o in options)
        raise HarmtrackError(f"{name} must be one of {opts}, got {value!r}")
    return value


def _signal(name, y, *, min_len=1):
    arr = np.asarray(y)
    if arr.dtype.kind not in "biuf":
        raise HarmtrackError(f"{name} must be a real numeric array, got dtype {arr.dtype}")
    arr = arr.astype(np.float64, copy=False)
    if arr.ndim != 1:
        raise HarmtrackError(f"{name} must be a 1-D array of samples, got shape {arr.shape}")
    if arr.size < min_len:
        raise HarmtrackError(
            f"{name} must hold at least {min_len} samples, got {arr.size}")
    if not np.all(np.isfinite(arr)):
        raise HarmtrackError(f"{name} must be finite; it contains NaN or inf")
    return arr


def _frame_series(times, values, name):
    """Frame times (1-D, at least 2, strictly increasing) and per-frame ``values``."""
    times = np.asarray(times, dtype=np.float64)
    values = np.asarray(values, dtype=np.float64)
    if times.ndim != 1 or times.size < 2:
        raise HarmtrackError(
            f"times must be a 1-D array of at least 2 frame times, got shape {times.shape}")
    if values.shape != times.shape:
        raise HarmtrackError(
            f"{name} must have the same shape as times {times.shape}, got {values.shape}")
    if not np.all(np.isfinite(times)) or np.any(np.diff(times) <= 0):
        raise HarmtrackError("times must be finite and strictly increasing")
    return times, values


def _rng(seed, stream):
    """Independent generator number ``stream`` derived from ``seed``."""
    return np.random.default_rng(np.random.SeedSequence(seed).spawn(stream + 1)[stream])


# ---------------------------------------------------------------------------
# f0 contours
# ---------------------------------------------------------------------------


def _smoothstep(u):
    u = np.clip(u, 0.0, 1.0)
    return u * u * (3.0 - 2.0 * u)


def _phrase_segments(duration_s, rng):
    """Voiced (start, end) spans of a speech-like phrase, in seconds."""
    lead = min(rng.uniform(0.05, 0.25), 0.15 * duration_s)
    end_limit = duration_s - min(0.05, 0.1 * duration_s)
    segments = []
    t = lead
    while True:
        length = rng.uniform(0.2, 0.8)
        if t + length > end_limit:
            length = end_limit - t
        if length <= 0 or (segments and length < 0.2):
            break
        segments.append((t, t + length))
        t += length + rng.uniform(0.05, 0.25)
    if not segments:  # too short for the scheme: voice the middle
        segments.append((0.1 * duration_s, 0.9 * duration_s))
    return segments


def _phrase_semitones(times, segments, rng):
    """Semitone offsets (re the base pitch) and voicing of a phrase."""
    st = np.zeros_like(times)
    voiced = np.zeros(times.shape, dtype=bool)
    first, last = segments[0][0], segments[-1][1]
    span = max(last - first, 1e-9)
    # slow declination: +1.5 st at the start of the phrase down to -1.5 st at its end
    st += 1.5 - 3.0 * np.clip((times - first) / span, 0.0, 1.0)
    # slow wander: smoothed noise, about 0.3 st rms
    wander = rng.standard_normal(times.size + 40)
    kernel = np.hanning(21)
    wander = np.convolve(wander, kernel / np.sqrt(np.sum(kernel ** 2)), mode="same")[20:-20]
    st += 0.3 * wander
    n_seg = len(segments)
    for j, (t0, t1) in enumerate(segments):
        in_seg = (times >= t0) & (times <= t1)
        voiced |= in_seg
        u = (times[in_seg] - t0) / max(t1 - t0, 1e-9)
        size = rng.uniform(2.0, 5.0)
        shape = rng.integers(3)
        if shape == 0:  # rise
            accent = size * (_smoothstep(u) - 0.5)
        elif shape == 1:  # fall
            accent = size * (0.5 - _smoothstep(u))
        else:  # rise-fall
            accent = size * (np.sin(np.pi * u) ** 2 - 0.4)
        if j == n_seg - 1:  # phrase-final fall over the last 60 % of the last segment
            accent = accent - rng.uniform(4.0, 7.0) * _smoothstep((u - 0.4) / 0.6)
        st[in_seg] += accent
    if not np.any(voiced):  # a segment narrower than one hop: voice its nearest frame
        voiced[np.argmin(np.abs(times - 0.5 * (segments[0][0] + segments[0][1])))] = True
    return st, voiced


def f0_contour(duration_s, *, hop_s=0.01, kind="phrase", f0_hz=120.0, seed=0):
    """Draw a frame-rate f0 contour with voicing.

    Parameters
    ----------
    duration_s : float
        Length of the contour in seconds, at least ``hop_s`` and at most 3600.
    hop_s : float, keyword-only
        Frame hop in seconds, in [0.001, 0.1].
    kind : {"phrase", "glide", "vibrato", "steady"}, keyword-only
        ``"phrase"``: speech-like; voiced segments of 0.2-0.8 s separated by
        unvoiced gaps of 0.05-0.25 s (plus leading and trailing unvoiced
        stretches; a single shorter segment when ``duration_s`` is too short), with a slow declination of 3 semitones over the phrase,
        rises and falls of 2-5 semitones on each segment, a slow wander and a
        phrase-final fall of 4-7 semitones.
        ``"glide"``: voiced throughout, gliding smoothly up an octave and back
        (raised-cosine in log frequency, peak at mid-duration).
        ``"vibrato"``: voiced throughout, 5.5 Hz, +-50 cent vibrato around
        ``f0_hz`` (random starting phase).
        ``"steady"``: voiced throughout at ``f0_hz``.
    f0_hz : float, keyword-only
        Base pitch of the speaker in Hz, in [20, 2000].
    seed : int, keyword-only
        Seed of the random choices (``"phrase"`` layout, vibrato phase).

    Returns
    -------
    times : ndarray, shape (T,)
        Frame times in seconds, ``times[t] = t * hop_s``, covering
        0..``duration_s`` (``T = floor(duration_s / hop_s) + 1``).
    f0 : ndarray, shape (T,)
        f0 in Hz, NaN where unvoiced. Voiced values are finite and lie in
        ``[f0_hz / 2.5, f0_hz * 2.5]``.
    """
    hop_s = _number("hop_s", hop_s, 0.001, 0.1, unit="s")
    duration_s = _number("duration_s", duration_s, hop_s, 3600.0, unit="s")
    kind = _choice("kind", kind, _CONTOUR_KINDS)
    f0_hz = _number("f0_hz", f0_hz, 20.0, 2000.0, unit="Hz")
    rng = np.random.default_rng(_seed(seed))

    n_frames = int(np.floor(duration_s / hop_s + 1e-9)) + 1
    times = np.arange(n_frames) * hop_s
    if kind == "phrase":
        segments = _phrase_segments(duration_s, rng)
        st, voiced = _phrase_semitones(times, segments, rng)
        f0 = f0_hz * 2.0 ** (st / 12.0)
    elif kind == "glide":
        voiced = np.ones(n_frames, dtype=bool)
        f0 = f0_hz * 2.0 ** (0.5 - 0.5 * np.cos(2.0 * np.pi * times / duration_s))
    elif kind == "vibrato":
        voiced = np.ones(n_frames, dtype=bool)
        phase = rng.uniform(0.0, 2.0 * np.pi)
        f0 = f0_hz * 2.0 ** (50.0 / 1200.0 * np.sin(2.0 * np.pi * 5.5 * times + phase))
    else:
        voiced = np.ones(n_frames, dtype=bool)
        f0 = np.full(n_frames, f0_hz)
    f0 = np.clip(f0, f0_hz / 2.5, f0_hz * 2.5)
    f0[~voiced] = np.nan
    return times, f0


# ---------------------------------------------------------------------------
# voice
# ---------------------------------------------------------------------------


def _formant_tracks(formants, t_ctrl, t0, t1):
    """Formant centre frequencies and bandwidths at the control times.

    Returns (freqs, bws), each (C, 3) in Hz, or (None, None) for a flat envelope.
    """
    if formants is None:
        return None, None
    names = (formants,) if isinstance(formants, str) else tuple(formants)
    if not names or not all(isinstance(n, str) and n in VOWEL_FORMANTS for n in names):
        opts = ", ".join(repr(v) for v in VOWEL_FORMANTS)
        raise HarmtrackError(
            f"formants must be None, one of {opts}, or a non-empty sequence of them, "
            f"got {formants!r}")
    freqs = np.array([VOWEL_FORMANTS[n][0] for n in names])
    bws = np.array([VOWEL_FORMANTS[n][1] for n in names])
    if len(names) == 1:
        return (np.broadcast_to(freqs, (t_ctrl.size, 3)),
                np.broadcast_to(bws, (t_ctrl.size, 3)))
    # vowel j is reached at the centre of the j-th of len(names) equal time spans;
    # formants move linearly between those anchors and hold beyond them
    anchors = t0 + (np.arange(len(names)) + 0.5) / len(names) * (t1 - t0)
    f = np.stack([np.interp(t_ctrl, anchors, freqs[:, i]) for i in range(3)], axis=1)
    b = np.stack([np.interp(t_ctrl, anchors, bws[:, i]) for i in range(3)], axis=1)
    return f, b


def _resonance_shape(f, fc, bw):
    """Magnitude of a two-pole resonance at ``f``, normalised to 1 at its peak."""
    hb2 = (0.5 * bw) ** 2
    num = fc * fc + hb2
    mag = num / np.sqrt((num - f * f) ** 2 + (bw * f) ** 2)
    peak = num / np.sqrt(hb2 * hb2 + bw * bw * fc * fc)
    return mag / peak


def _harmonic_gains(f0, fmt_f, fmt_b, sr, keep):
    """Linear gain of each harmonic for each f0 value.

    Parameters: f0 (C,) Hz; fmt_f, fmt_b (C, 3) Hz or None; keep (H,) bool mask.
    Returns (C, H).
    """
    k = np.arange(1, keep.size + 1, dtype=np.float64)
    freq = f0[:, None] * k[None, :]
    gain = np.broadcast_to(k ** -2.0, freq.shape).copy()  # -12 dB/octave tilt
    if fmt_f is not None:
        env = np.ones_like(freq)
        for i in range(3):
            env += _FORMANT_BOOST[i] * _resonance_shape(
                freq, fmt_f[:, i:i + 1], fmt_b[:, i:i + 1])
        gain *= env
    lo, hi = _TAPER_START_FRACTION * sr, _MAX_HARMONIC_FRACTION * sr
    taper = np.clip((hi - freq) / (hi - lo), 0.0, 1.0)
    gain *= 0.5 - 0.5 * np.cos(np.pi * taper)
    gain[:, ~keep] = 0.0
    return gain


def _harmonic_mask(harmonics, n_harm):
    k = np.arange(1, n_harm + 1)
    if isinstance(harmonics, str):
        _choice("harmonics", harmonics, _HARMONIC_SETS)
        if harmonics == "all":
            return np.ones(n_harm, dtype=bool)
        if harmonics == "odd":
            return k % 2 == 1
        return k >= 2
    ok = (isinstance(harmonics, (tuple, list)) and len(harmonics) == 2
          and all(isinstance(v, numbers.Integral) and not isinstance(v, bool)
                  for v in harmonics)
          and 1 <= harmonics[0] <= harmonics[1])
    if not ok:
        raise HarmtrackError(
            "harmonics must be 'all', 'odd', 'no_fundamental' or a pair of integers "
            f"(lo, hi) with 1 <= lo <= hi, got {harmonics!r}")
    return (k >= harmonics[0]) & (k <= harmonics[1])


def _runs(mask):
    """Start/stop indices (stop exclusive) of the True runs of a boolean array."""
    d = np.diff(np.concatenate(([0], mask.astype(np.int8), [0])))
    return np.flatnonzero(d == 1), np.flatnonzero(d == -1)


def _edge_ramp(mask, ramp):
    """Per-sample gain: 0 outside ``mask``, raised-cosine ramps of ``ramp`` samples
    inside each run's ends, 1 elsewhere in the run."""
    n = mask.size
    idx = np.arange(n)
    starts, stops = _runs(mask)
    if len(starts) == 0:
        return np.zeros(n)
    run_id = np.clip(np.searchsorted(starts, idx, side="right") - 1, 0, len(starts) - 1)
    dist = np.minimum(idx - starts[run_id], stops[run_id] - 1 - idx) + 0.5
    gain = 0.5 - 0.5 * np.cos(np.pi * np.clip(dist / ramp, 0.0, 1.0))
    gain[~mask] = 0.0
    return gain


def voice(times, f0, sr, *, seed=0, harmonics="all", formants="neutral",
          unvoiced="breath", jitter=0.0, shimmer=0.0, amplitude=0.3,
          return_amplitudes=False):
    """Render a frame-rate f0 contour as a speech-like voice.

    The voiced source is an additive sum of harmonics of the instantaneous f0,
    driven by a phase accumulator, with a glottal-like spectral tilt of
    -12 dB/octave (harmonic ``k`` has gain ``k**-2``) shaped by a formant
    envelope (three resonances on a flat floor). Harmonics stop at
    ``0.45 * sr`` (fading out smoothly from ``0.40 * sr``), so nothing aliases.
    Each voiced stretch starts and ends with a 10 ms raised-cosine ramp placed
    inside the stretch.

    Parameters
    ----------
    times : array_like, shape (T,)
        Frame times in seconds, strictly increasing, T >= 2.
    f0 : array_like, shape (T,)
        f0 in Hz at each frame, NaN where unvoiced. Voiced values must lie in
        [20, 0.45 * sr) Hz.
    sr : int
        Sample rate in Hz, in [1000, 384000].
    seed : int, keyword-only
        Seed of the harmonic phases, jitter, shimmer and breath noise.
    harmonics : {"all", "odd", "no_fundamental"} or (int, int), keyword-only
        Which harmonics sound: all, odd ones only, all but the first, or
        ``(lo, hi)`` for harmonics lo..hi inclusive (1-based).
    formants : str, sequence of str or None, keyword-only
        A vowel name from :data:`VOWEL_FORMANTS` (``"neutral"``, ``"a"``,
        ``"e"``, ``"i"``, ``"o"``, ``"u"``), a sequence of them (vowel ``j`` of
        ``J`` is reached at the centre of the ``j``-th of ``J`` equal spans of
        the signal, formants moving linearly in between), or None for a flat
        envelope (pure -12 dB/octave tilt).
    unvoiced : {"breath", "silence"}, keyword-only
        ``"breath"``: every unvoiced gap between two voiced stretches holds a
        fricative-like burst of noise high-passed at 2 kHz (a quarter of the
        sample rate if lower), 25 dB (+-3 dB at random) below the RMS of the
        voiced part, with 10 ms tapered ends; leading and trailing unvoiced
        stretches stay silent. ``"silence"``: unvoiced samples are exactly 0.
    jitter : float, keyword-only
        Relative standard deviation of the f0 of each glottal cycle, in
        [0, 0.05]. The true f0 (the contour) is the mean around which cycles
        vary.
    shimmer : float, keyword-only
        Relative standard deviation of the amplitude of each glottal cycle, in
        [0, 0.3], varying smoothly from cycle to cycle.
    amplitude : float, keyword-only
        Peak absolute value of the output, in (0, 1].
    return_amplitudes : bool, keyword-only
        Also return the true harmonic amplitudes.

    Returns
    -------
    y : ndarray of float64, shape (N,)
        The signal. Sample ``n`` is at time ``times[0] + n / sr``, and
        ``N = round((times[-1] - times[0]) * sr) + 1``, so ``y`` covers
        ``times[0]``..``times[-1]``. A sample is voiced when its nearest frame
        is voiced; the f0 between frames is interpolated linearly in log
        frequency.
    amps : ndarray of float64, shape (T, H)
        Only with ``return_amplitudes=True``. ``amps[t, k - 1]`` is the linear
        amplitude (sinusoid peak, in the units of ``y``) of harmonic ``k`` at
        frame ``t``, including onset/offset ramps but not shimmer; 0 where the
        harmonic is absent, NaN on unvoiced frames.
        ``H = floor(0.45 * sr / min(voiced f0))`` (at least 1).
    """
    sr = _sample_rate(sr)
    times, f0 = _frame_series(times, f0, "f0")
    voiced_f = ~np.isnan(f0)
    fv = f0[voiced_f]
    f0_max = _MAX_HARMONIC_FRACTION * sr
    if np.any(~np.isfinite(fv)) or np.any(fv < 20.0) or np.any(fv >= f0_max):
        bad = fv[~np.isfinite(fv) | (fv < 20.0) | (fv >= f0_max)][0]
        raise HarmtrackError(
            f"voiced f0 values must lie in [20, {f0_max:g}) Hz for sr={sr}, got {float(bad):g}; "
            "use NaN for unvoiced frames")
    seed = _seed(seed)
    _choice("unvoiced", unvoiced, _UNVOICED_KINDS)
    jitter = _number("jitter", jitter, 0.0, 0.05)
    shimmer = _number("shimmer", shimmer, 0.0, 0.3)
    amplitude = _number("amplitude", amplitude, 0.0, 1.0, lo_open=True)
    n_harm = max(1, int(np.floor(f0_max / fv.min()))) if fv.size else 1
    keep = _harmonic_mask(harmonics, n_harm)

    n_samp = int(round((times[-1] - times[0]) * sr)) + 1
    t_samp = times[0] + np.arange(n_samp) / sr
    # voicing per sample: nearest frame
    mask = np.interp(t_samp, times, voiced_f.astype(np.float64)) > 0.5
    y = np.zeros(n_samp)
    n_frames = times.size
    amps = np.full((n_frames, n_harm), np.nan)
    frame_samples = np.clip(np.round((times - times[0]) * sr).astype(np.int64), 0, n_samp - 1)

    if fv.size:
        # unvoiced frames take the f0 of the nearest voiced frame, so the f0 is
        # held (not bent toward the next stretch) at the edges of voiced stretches
        vidx = np.flatnonzero(voiced_f)
        pos = np.searchsorted(vidx, np.arange(n_frames))
        left = vidx[np.clip(pos - 1, 0, vidx.size - 1)]
        right = vidx[np.clip(pos, 0, vidx.size - 1)]
        nearest = np.where(np.abs(np.arange(n_frames) - left)
                           <= np.abs(right - np.arange(n_frames)), left, right)
        logf = np.log(f0[nearest])

        def f0_at(t):
            return np.exp(np.interp(t, times, logf))

        # amplitudes on a 1 ms control grid, interpolated linearly per sample
        step = max(1, int(round(_CONTROL_S * sr)))
        n_ctrl = (n_samp - 1) // step + 2
        t_ctrl = times[0] + np.arange(n_ctrl) * step / sr
        fmt_f, fmt_b = _formant_tracks(formants, t_ctrl, times[0], times[-1])
        gains = _harmonic_gains(f0_at(t_ctrl), fmt_f, fmt_b, sr, keep)

        f0_s = f0_at(t_samp)
        env = _edge_ramp(mask, _RAMP_S * sr)
        rng_phase, rng_jit, rng_shim, rng_breath = (_rng(seed, i) for i in range(4))
        phases = rng_phase.uniform(0.0, 2.0 * np.pi, n_harm)
        start_cycle = rng_phase.uniform()
        cycles = start_cycle + np.concatenate(([0.0], np.cumsum(f0_s[:-1]) / sr))
        if jitter > 0:
            dev = rng_jit.standard_normal(int(cycles[-1]) + 2)
            f0_s = f0_s * np.maximum(1.0 + jitter * dev[cycles.astype(np.int64)], 0.5)
            cycles = start_cycle + np.concatenate(([0.0], np.cumsum(f0_s[:-1]) / sr))
        if shimmer > 0:
            dev = rng_shim.standard_normal(int(cycles[-1]) + 2)
            ci = cycles.astype(np.int64)
            frac = cycles - ci
            env = env * np.maximum(1.0 + shimmer * (dev[ci] * (1 - frac) + dev[ci + 1] * frac),
                                   0.0)

        # harmonic k is Im(c_k z^k) with z = exp(2 pi i cycles), c_k = exp(i phase_k);
        # powers of z come from repeated multiplication (no per-harmonic sine), and
        # the gains, linear within each control block, enter through two
        # block-wise matrix products
        rot = np.exp(1j * phases)
        w_block = np.arange(step) / step
        chunk = max(step, (4_000_000 // n_harm) // step * step)
        for s0 in range(0, n_samp, chunk):
            s1 = min(s0 + chunk, n_samp)
            if not np.any(env[s0:s1] > 0):
                continue
            kmax = min(n_harm, int(np.floor(f0_max / f0_s[s0:s1].min())))
            cols = np.flatnonzero(keep[:kmax])
            if cols.size == 0:
                continue
            n_blk = -(-(s1 - s0) // step)
            m = n_blk * step
            cyc = cycles[s0:s0 + m]
            if cyc.size < m:
                cyc = np.pad(cyc, (0, m - cyc.size), mode="edge")
            z = np.exp(2j * np.pi * (cyc - np.floor(cyc)))
            parts = np.empty((cols.size, m))
            power = np.ones(m, dtype=np.complex128)
            j = 0
            for k in range(1, cols[-1] + 2):
                power *= z
                if keep[k - 1]:
                    parts[j] = (power * rot[k - 1]).imag
                    j += 1
            parts = parts.reshape(cols.size, n_blk, step)
            b0 = s0 // step
            y_lo = np.einsum("kbj,bk->bj", parts, gains[b0:b0 + n_blk][:, cols], optimize=True)
            y_hi = np.einsum("kbj,bk->bj", parts, gains[b0 + 1:b0 + n_blk + 1][:, cols],
                             optimize=True)
            out = (y_lo * (1.0 - w_block) + y_hi * w_block).reshape(m)
            y[s0:s1] = env[s0:s1] * out[: s1 - s0]

        # truth at the frames: the same interpolated gains and ramp
        ci = frame_samples // step
        w = ((frame_samples - ci * step) / step)[:, None]
        g = gains[ci] * (1.0 - w) + gains[ci + 1] * w
        ramp = _edge_ramp(mask, _RAMP_S * sr)[frame_samples]
        amps = g * ramp[:, None]
        amps[~voiced_f] = np.nan

        if unvoiced == "breath":
            voiced_rms = np.sqrt(np.mean(y[mask] ** 2)) if np.any(mask) else 0.0
            starts, stops = _runs(~mask)
            interior = (starts > 0) & (stops < n_samp)
            if voiced_rms > 0 and np.any(interior):
                cutoff = min(_BREATH_HIGHPASS_HZ, 0.25 * sr)
                sos = scipy.signal.butter(4, cutoff, btype="highpass", fs=sr, output="sos")
                noise = scipy.signal.sosfilt(sos, rng_breath.standard_normal(n_samp))
                noise /= np.sqrt(np.mean(noise ** 2))
                level = voiced_rms * 10.0 ** (_BREATH_DB / 20.0)
                burst = np.zeros(n_samp)
                taper = max(1, int(round(_RAMP_S * sr)))
                for a, b in zip(starts[interior], stops[interior]):
                    length = b - a
                    alpha = min(1.0, 2.0 * taper / length)
                    db = rng_breath.uniform(-3.0, 3.0)
                    burst[a:b] = scipy.signal.windows.tukey(length, alpha) * 10 ** (db / 20)
                y += level * burst * noise

        peak = np.max(np.abs(y))
        if peak > 0:
            y *= amplitude / peak
            amps *= amplitude / peak

    if return_amplitudes:
        return y, amps
    return y


# ---------------------------------------------------------------------------
# degradations
# ---------------------------------------------------------------------------


def _active_mask(y):
    """Samples whose local power is within 40 dB of the loudest stretch."""
    w = min(_ACTIVE_WINDOW, y.size)
    c = np.concatenate(([0.0], np.cumsum(y * y)))
    half = w // 2
    lo = np.clip(np.arange(y.size) - half, 0, y.size)
    hi = np.clip(np.arange(y.size) - half + w, 0, y.size)
    power = (c[hi] - c[lo]) / np.maximum(hi - lo, 1)
    top = power.max()
    return power >= top * 10.0 ** (_ACTIVE_FLOOR_DB / 10.0) if top > 0 else power > 0


def add_noise(y, snr_db, *, color="white", seed=0, ref="active"):
    """Add stationary noise at a given signal-to-noise ratio.

    Parameters
    ----------
    y : array_like, shape (N,)
        Clean signal.
    snr_db : float
        Wanted SNR in dB, in [-60, 120]: ``10 * log10(P_signal / P_noise)``,
        where ``P_noise`` is the mean noise power over the whole signal.
    color : {"white", "pink", "brown"}, keyword-only
        Noise spectrum: flat, 1/f power or 1/f**2 power (the coloured ones are
        made by shaping the FFT of white Gaussian noise; no DC).
    seed : int, keyword-only
        Seed of the noise.
    ref : {"active", "all"}, keyword-only
        How ``P_signal`` is measured: ``"active"`` over the samples where the
        signal is active (local power, averaged over 512 samples, within 40 dB
        of the loudest stretch), so silent lead-ins and pauses do not count;
        ``"all"`` over the whole signal.

    Returns
    -------
    ndarray of float64, shape (N,)
        ``y`` plus the scaled noise.
    """
    y = _signal("y", y)
    snr_db = _number("snr_db", snr_db, -60.0, 120.0, unit="dB")
    color = _choice("color", color, _NOISE_COLORS)
    rng = np.random.default_rng(_seed(seed))
    ref = _choice("ref", ref, ("active", "all"))

    sel = _active_mask(y) if ref == "active" else np.ones(y.size, dtype=bool)
    p_sig = np.mean(y[sel] ** 2)
    if not p_sig > 0:
        raise HarmtrackError("y is silent (all zeros): an SNR cannot be set; pass a non-zero signal")
    noise = rng.standard_normal(y.size)
    if color != "white" and y.size > 1:
        spec = np.fft.rfft(noise)
        f = np.arange(spec.size, dtype=np.float64)
        slope = 0.5 if color == "pink" else 1.0
        shape = np.zeros_like(f)
        shape[1:] = f[1:] ** -slope
        noise = np.fft.irfft(spec * shape, n=y.size)
    p_noise = np.mean(noise ** 2)
    if not p_noise > 0:  # one-sample coloured noise: fall back to the white draw
        noise, p_noise = np.ones(1), 1.0
    noise *= np.sqrt(p_sig / (p_noise * 10.0 ** (snr_db / 10.0)))
    return y + noise


def telephone(y, sr):
    """Band-limit a signal to the telephone band, 300-3400 Hz.

    A 6th-order Butterworth band-pass run forward and backward (zero phase,
    so timing is unchanged). The band edges are designed so that the overall
    two-pass response is -3 dB at 300 Hz and 3400 Hz.

    Parameters
    ----------
    y : array_like, shape (N,)
        Signal.
    sr : int
        Sample rate in Hz, in [8000, 384000].

    Returns
    -------
    ndarray of float64, shape (N,)
        The band-limited signal, same sample rate.
    """
    y = _signal("y", y)
    sr = _sample_rate(sr, lo=8000)
    order = 3  # prototype order; the band-pass is twice that
    # two passes square the magnitude: place the prototype edge where
    # |H|^2 = 1/sqrt(2), i.e. at Omega_c = (sqrt(2) - 1) ** (1 / (2 * order))
    omega_c = (np.sqrt(2.0) - 1.0) ** (1.0 / (2 * order))
    w_lo, w_hi = (2.0 * sr * np.tan(np.pi * f / sr) for f in (300.0, 3400.0))
    bw = (w_hi - w_lo) / omega_c
    centre2 = w_lo * w_hi
    e_hi = 0.5 * bw + np.sqrt(0.25 * bw * bw + centre2)
    e_lo = e_hi - bw
    edges = [sr / np.pi * np.arctan(w / (2.0 * sr)) for w in (e_lo, e_hi)]
    sos = scipy.signal.butter(order, edges, btype="bandpass", fs=sr, output="sos")
    padlen = 3 * (2 * len(sos) + 1)
    return scipy.signal.sosfiltfilt(sos, y, padlen=min(padlen, y.size - 1))


def room_impulse_response(sr, *, rt60_s=0.5, drr_db=0.0, seed=0):
    """Synthetic room impulse response: direct path plus a decaying noise tail.

    Parameters
    ----------
    sr : int
        Sample rate in Hz, in [1000, 384000].
    rt60_s : float, keyword-only
        Reverberation time (60 dB energy decay) in seconds, in [0.01, 10].
    drr_db : float, keyword-only
        Direct-to-reverberant energy ratio in dB, in [-40, 40].
    seed : int, keyword-only
        Seed of the tail noise.

    Returns
    -------
    ndarray of float64, shape (L,)
        ``h[0] = 1`` is the direct path; ``h[1:]`` is Gaussian noise under an
        exponential envelope that falls 60 dB in ``rt60_s``, scaled so that
        ``sum(h[1:] ** 2) = 10 ** (-drr_db / 10)``.
        ``L = ceil(rt60_s * sr) + 1``.
    """
    sr = _sample_rate(sr)
    rt60_s = _number("rt60_s", rt60_s, 0.01, 10.0, unit="s")
    drr_db = _number("drr_db", drr_db, -40.0, 40.0, unit="dB")
    rng = np.random.default_rng(_seed(seed))
    n_tail = int(np.ceil(rt60_s * sr))
    t = np.arange(1, n_tail + 1) / sr
    tail = rng.standard_normal(n_tail) * np.exp(-_LN_1000 * t / rt60_s)
    tail *= np.sqrt(10.0 ** (-drr_db / 10.0) / np.sum(tail ** 2))
    return np.concatenate(([1.0], tail))


def reverberate(y, sr, *, rt60_s=0.5, drr_db=0.0, seed=0):
    """Convolve a signal with a synthetic room impulse response.

    Parameters
    ----------
    y : array_like, shape (N,)
        Dry signal.
    sr : int
        Sample rate in Hz, in [1000, 384000].
    rt60_s : float, keyword-only
        Reverberation time in seconds, in [0.01, 10].
    drr_db : float, keyword-only
        Direct-to-reverberant energy ratio in dB, in [-40, 40].
    seed : int, keyword-only
        Seed of the impulse response (see :func:`room_impulse_response`).

    Returns
    -------
    ndarray of float64, shape (N,)
        The reverberant signal, aligned with ``y`` (the direct path is not
        delayed), cut to the input length and rescaled to the peak absolute
        value of ``y`` (all zeros if ``y`` is).
    """
    y = _signal("y", y)
    h = room_impulse_response(sr, rt60_s=rt60_s, drr_db=drr_db, seed=seed)
    wet = scipy.signal.fftconvolve(y, h)[: y.size]
    peak_in, peak_out = np.max(np.abs(y)), np.max(np.abs(wet))
    if peak_out == 0:
        return np.zeros_like(y)
    return wet * (peak_in / peak_out)


# ---------------------------------------------------------------------------
# stationary tones
# ---------------------------------------------------------------------------


def harmonic_tone(duration_s, sr, *, f0_hz, amplitudes, phases=None, seed=0):
    """Stationary sum of harmonics.

    ``y[n] = sum_k amplitudes[k-1] * sin(2 pi k f0_hz n / sr + phases[k-1])``.

    Parameters
    ----------
    duration_s : float
        Length in seconds, in (0, 3600].
    sr : int
        Sample rate in Hz, in [1000, 384000].
    f0_hz : float, keyword-only
        Fundamental frequency in Hz, in (0, sr / 2).
    amplitudes : array_like, shape (K,)
        Linear amplitude of harmonics 1..K (0 = absent), finite and >= 0.
        Every harmonic with a non-zero amplitude must lie below sr / 2.
    phases : array_like, shape (K,), optional, keyword-only
        Starting phases in radians; drawn uniformly in [0, 2 pi) from ``seed``
        when None.
    seed : int, keyword-only
        Seed of the random phases.

    Returns
    -------
    ndarray of float64, shape (round(duration_s * sr),)
    """
    duration_s = _number("duration_s", duration_s, 0.0, 3600.0, unit="s", lo_open=True)
    sr = _sample_rate(sr)
    f0_hz = _number("f0_hz", f0_hz, 0.0, sr / 2.0, unit="Hz", lo_open=True, hi_open=True)
    amps = np.asarray(amplitudes, dtype=np.float64)
    if amps.ndim != 1 or amps.size == 0 or not np.all(np.isfinite(amps)) or np.any(amps < 0):
        raise HarmtrackError(
            "amplitudes must be a non-empty 1-D sequence of finite values >= 0, "
            f"got {amplitudes!r}")
    k = np.arange(1, amps.size + 1)
    too_high = (amps > 0) & (k * f0_hz >= sr / 2.0)
    if np.any(too_high):
        kk = int(k[too_high][0])
        raise HarmtrackError(
            f"harmonic {kk} of f0_hz={f0_hz:g} ({kk * f0_hz:g} Hz) is at or above sr/2 = "
            f"{sr / 2:g} Hz; give it amplitude 0 or use fewer than "
            f"{int(np.ceil(sr / 2 / f0_hz))} harmonics")
    if phases is None:
        ph = np.random.default_rng(_seed(seed)).uniform(0.0, 2.0 * np.pi, amps.size)
    else:
        _seed(seed)
        ph = np.asarray(phases, dtype=np.float64)
        if ph.shape != amps.shape or not np.all(np.isfinite(ph)):
            raise HarmtrackError(
                f"phases must be finite and match amplitudes in shape {amps.shape}, "
                f"got {np.shape(phases)}")
    n = int(round(duration_s * sr))
    if n < 1:
        raise HarmtrackError(
            f"duration_s={duration_s!r} gives no sample at sr={sr}; use at least {1 / sr:g} s")
    y = np.zeros(n)
    t = np.arange(n) / sr
    for kk in np.flatnonzero(amps > 0):
        cyc = (kk + 1) * f0_hz * t
        y += amps[kk] * np.sin(2.0 * np.pi * (cyc - np.floor(cyc)) + ph[kk])
    return y


# ---------------------------------------------------------------------------
# files
# ---------------------------------------------------------------------------


def write_wav(path, y, sr):
    """Write a 16-bit PCM WAV file atomically.

    The samples are scaled by 32767, rounded and written to a temporary file
    in the target folder, which then replaces ``path``; readers never see a
    half-written file.

    Parameters
    ----------
    path : str or os.PathLike
        Target file; its folder must exist.
    y : array_like, shape (N,) or (N, C)
        Samples in [-1, 1] (values beyond are clipped, with a warning).
    sr : int
        Sample rate in Hz, in [1000, 384000].

    Returns
    -------
    pathlib.Path
        The written path.
    """
    import soundfile

    path = Path(path)
    sr = _sample_rate(sr)
    arr = np.asarray(y)
    if arr.dtype.kind not in "biuf" or arr.ndim not in (1, 2) or arr.shape[0] == 0:
        raise HarmtrackError(
            "y must be a non-empty real array of shape (N,) or (N, channels), "
            f"got dtype {arr.dtype} and shape {arr.shape}")
    arr = arr.astype(np.float64, copy=False)
    if not np.all(np.isfinite(arr)):
        raise HarmtrackError("y must be finite; it contains NaN or inf")
    peak = np.max(np.abs(arr))
    if peak > 1.0:
        warn(f"write_wav: peak {peak:.3g} exceeds 1.0; samples clipped to [-1, 1]")
    pcm = np.clip(np.round(arr * 32767.0), -32768, 32767).astype(np.int16)
    folder = path.parent
    if not folder.is_dir():
        raise HarmtrackError(f"folder {str(folder)!r} does not exist; create it first")
    fd, tmp = tempfile.mkstemp(dir=folder, prefix=f".{path.name}.", suffix=".tmp")
    os.close(fd)
    try:
        soundfile.write(tmp, pcm, sr, subtype="PCM_16", format="WAV")
        mode = path.stat().st_mode & 0o777 if path.exists() else 0o644
        os.chmod(tmp, mode)
        os.replace(tmp, path)
    except BaseException:
        try:
            os.unlink(tmp)
        except OSError:
            pass
        raise
    return path


# ---------------------------------------------------------------------------
# demo scenario
# ---------------------------------------------------------------------------


def _demo_contour(times, seed):
    """f0 of the demo phrase: four voiced stretches around a 140 Hz base."""
    from scipy.interpolate import PchipInterpolator

    base = 140.0
    # (start s, end s, [(position 0..1, semitones re base), ...])
    stretches = [
        (0.16, 0.62, [(0.0, -1.0), (0.6, 1.5), (1.0, 3.0)]),  # glide up
        (0.72, 1.28, [(0.0, 2.5), (0.5, 1.0), (1.0, -1.5)]),  # glide down
        (1.38, 2.02, [(0.0, -1.0), (0.35, -0.5), (1.0, 5.0)]),  # rise
        (2.12, 2.78, [(0.0, 2.0), (0.3, 1.5), (1.0, -5.5)]),  # phrase-final fall
    ]
    rng = np.random.default_rng(seed)
    wander = np.convolve(rng.standard_normal(times.size + 30), np.hanning(15), "same")[15:-15]
    wander *= 0.15 / np.std(wander)
    f0 = np.full(times.shape, np.nan)
    for t0, t1, knots in stretches:
        pos, st = np.array(knots).T
        sel = (times >= t0 - 1e-9) & (times <= t1 + 1e-9)
        u = (times[sel] - t0) / (t1 - t0)
        decl = -1.0 * times[sel] / times[-1]  # 1 st declination over the phrase
        f0[sel] = base * 2.0 ** ((PchipInterpolator(pos, st)(u) + decl + wander[sel]) / 12.0)
    return f0


def demo_voice(seed=0):
    """The demo scenario: a short spoken-like phrase, slightly reverberant and noisy.

    Three seconds at 16 kHz: four voiced stretches around a 140 Hz base pitch
    (a glide up, a glide down, a rise and a phrase-final fall) on changing
    vowels, with breath noise in the gaps, mild jitter and shimmer, a small
    room (RT60 0.3 s, direct-to-reverberant ratio +3 dB) and white noise at
    30 dB SNR (re the active signal).

    Parameters
    ----------
    seed : int
        Seed of every random choice; the same seed gives identical samples.

    Returns
    -------
    y : ndarray of float64, shape (48001,)
        The signal, peak about 0.5; sample ``n`` is at ``n / sr`` seconds.
    sr : int
        Sample rate, 16000 Hz.
    times : ndarray, shape (301,)
        Frame times 0, 0.01, ..., 3.0 s.
    f0 : ndarray, shape (301,)
        True f0 in Hz at each frame, NaN where unvoiced.
    """
    seed = _seed(seed)
    sr = 16000
    times = np.arange(301) * 0.01
    f0 = _demo_contour(times, seed)
    y = voice(times, f0, sr, seed=seed, formants=("e", "a", "i", "o", "a", "u"),
              unvoiced="breath", jitter=0.004, shimmer=0.04, amplitude=0.5)
    y = reverberate(y, sr, rt60_s=0.3, drr_db=3.0, seed=seed + 1)
    y = add_noise(y, 30.0, color="white", seed=seed + 2, ref="active")
    return y, sr, times, f0


def speakers_recording(duration_s, *, sr=16000, seed=0, snr_db=20.0):
    """A long recording of phrases by five speakers, with pauses, in white noise.

    Phrases of 2 to 5 s (the ``"phrase"`` contour) at base pitches cycling
    through 85, 140, 250, 110 and 200 Hz, on random vowels with 0.5 % jitter
    and 5 % shimmer, separated by 0.2 to 0.8 s of silence; white noise at
    ``snr_db`` re the active signal.  Used by the streaming tests and benchmark.

    Returns
    -------
    ndarray of float64, shape (round(duration_s * sr),)
    """
    seed = _seed(seed)
    _number("duration_s", duration_s, 0.0, 36000.0, unit="s", lo_open=True)
    rng = np.random.default_rng(seed)
    parts, t, j = [], 0.0, 0
    while t < duration_s:
        d = float(rng.uniform(2.0, 5.0))
        times, f0 = f0_contour(d, hop_s=0.01, kind="phrase",
                               f0_hz=(85.0, 140.0, 250.0, 110.0, 200.0)[j % 5], seed=seed + j)
        vowels = tuple(rng.choice(["a", "e", "i", "o", "u"], size=max(2, round(d / 0.5))))
        parts.append(voice(times, f0, sr, seed=seed + j, formants=vowels, jitter=0.005,
                           shimmer=0.05))
        parts.append(np.zeros(int(rng.uniform(0.2, 0.8) * sr)))
        t += d
        j += 1
    y = np.concatenate(parts)[:int(round(duration_s * sr))]
    return add_noise(y, snr_db, color="white", seed=seed + 99, ref="active")
