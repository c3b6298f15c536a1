"""Framing, analysis windows, short-time spectra and noise prewhitening.

Pure functions on arrays.  Frame ``i`` is centred on sample ``round(i * hop)`` of
the (analysis-rate) signal; samples outside the signal count as zeros.
"""

from __future__ import annotations

from functools import lru_cache

import numpy as np
from numba import njit

__all__ = [
    "frame_count",
    "frame_starts",
    "frames",
    "frame_energies",
    "analysis_window",
    "window_properties",
    "windowed_spectra",
    "noise_floor_psd",
    "whitening_filter",
    "prewhiten",
    "floor_from_spectra",
    "decimator_taps",
    "decimate",
    "whiten_and_decimate",
    "fir_segment",
]


def frame_count(n_samples: int, hop: float) -> int:
    """Number of frames whose centres lie inside a signal of ``n_samples`` samples."""
    if n_samples <= 0:
        return 0
    return int(np.floor((n_samples - 1) / hop + 1e-9)) + 1


def frame_starts(indices: np.ndarray, hop: float, frame_len: int) -> np.ndarray:
    """First sample of each frame in ``indices`` (may be negative near the start)."""
    centres = np.round(np.asarray(indices) * hop).astype(np.int64)
    return centres - frame_len // 2


def frames(y: np.ndarray, starts: np.ndarray, frame_len: int) -> np.ndarray:
    """Gather frames ``y[s : s + frame_len]`` for each start, zero outside ``y``.

    Returns
    -------
    ndarray, shape (len(starts), frame_len)
    """
    out = np.empty((starts.shape[0], frame_len))
    _gather(np.ascontiguousarray(y, dtype=np.float64), np.asarray(starts, dtype=np.int64), out)
    return out


@njit(cache=True, nogil=True)
def _gather(y, starts, out):
    n = y.shape[0]
    F, L = out.shape
    for i in range(F):
        s = starts[i]
        for j in range(L):
            k = s + j
            out[i, j] = y[k] if 0 <= k < n else 0.0


def frame_energies(y: np.ndarray, starts: np.ndarray, frame_len: int) -> np.ndarray:
    """Energy of each frame ``y[s : s + frame_len]`` about its mean (zeros outside ``y``)."""
    out = np.empty(starts.shape[0])
    _frame_energies(np.ascontiguousarray(y, dtype=np.float64), np.asarray(starts, dtype=np.int64),
                    frame_len, out)
    return out


@njit(cache=True, nogil=True)
def _frame_energies(y, starts, frame_len, out):
    n = y.shape[0]
    for i in range(starts.shape[0]):
        s1 = 0.0
        s2 = 0.0
        for k in range(max(0, starts[i]), min(n, starts[i] + frame_len)):
            s1 += y[k]
            s2 += y[k] * y[k]
        out[i] = s2 - s1 * s1 / frame_len


@njit(cache=True, nogil=True)
def _window_frames(y, starts, window, buf, energy, demean):
    """Windowed frames (mean-removed if ``demean``) into the zero-padded ``buf``;
    weighted energies."""
    n = y.shape[0]
    F = starts.shape[0]
    L = window.shape[0]
    wsum = 0.0
    for j in range(L):
        wsum += window[j]
    for i in range(F):
        s = starts[i]
        m = 0.0
        for j in range(L):
            k = s + j
            v = y[k] if 0 <= k < n else 0.0
            buf[i, j] = v
            m += window[j] * v
        m = m / wsum if demean else 0.0
        e = 0.0
        for j in range(L):
            v = buf[i, j] - m
            e += window[j] * v * v
            buf[i, j] = window[j] * v
        for j in range(L, buf.shape[1]):
            buf[i, j] = 0.0
        energy[i] = e


@njit(cache=True, nogil=True)
def _abs2(spec, out):
    F, B = spec.shape
    for i in range(F):
        for j in range(B):
            z = spec[i, j]
            out[i, j] = z.real * z.real + z.imag * z.imag


def windowed_spectra(y: np.ndarray, starts: np.ndarray, window: np.ndarray, nfft: int, *,
                     demean: bool = True):
    """Power spectra and weighted energies of frames of ``y``.

    Each frame ``x = y[s : s + len(window)]`` (zeros outside ``y``) has its
    window-weighted mean removed (unless ``demean`` is false); the function
    returns ``|FFT(window * x)|^2`` over bins ``0 .. nfft/2`` and the weighted
    energy ``sum(window * x**2)``.

    Returns
    -------
    power : ndarray, shape (F, nfft // 2 + 1)
    energy : ndarray, shape (F,)
    """
    F = starts.shape[0]
    buf = np.empty((F, nfft))
    energy = np.empty(F)
    _window_frames(np.ascontiguousarray(y, dtype=np.float64), np.asarray(starts, dtype=np.int64),
                   window, buf, energy, demean)
    spec = np.fft.rfft(buf, axis=1)
    power = np.empty(spec.shape)
    _abs2(spec, power)
    return power, energy


#: Cosine-sum windows ``w[n] = sum_m (-1)^m a_m cos(2 pi m n / N)``, coefficients
#: as tabulated by Harris (1978).
COSINE_WINDOWS = {
    "hann": (0.5, 0.5),
    "hamming": (0.54, 0.46),
    "blackman": (0.42, 0.5, 0.08),
    "blackmanharris": (0.35875, 0.48829, 0.14128, 0.01168),
}


def analysis_window(frame_len: int, name: str = "hann") -> np.ndarray:
    """Periodic ("DFT-even") cosine-sum analysis window of ``frame_len`` samples.

    Parameters
    ----------
    frame_len : int
        Window length in samples.
    name : {"hann", "hamming", "blackman", "blackmanharris"}
        ``"blackmanharris"`` is the 4-term, -92 dB window.

    References
    ----------
    F. J. Harris, "On the use of windows for harmonic analysis with the discrete
    Fourier transform", Proc. IEEE 66(1), 51-83, 1978.
    """
    if name not in COSINE_WINDOWS:
        raise ValueError(f"unknown window {name!r}; choose one of {sorted(COSINE_WINDOWS)}")
    return _cosine_window(int(frame_len), name).copy()


@lru_cache(maxsize=32)
def _cosine_window(frame_len: int, name: str) -> np.ndarray:
    phase = 2.0 * np.pi * np.arange(frame_len) / frame_len
    w = np.zeros(frame_len)
    for m, a in enumerate(COSINE_WINDOWS[name]):
        w += (-1) ** m * a * np.cos(m * phase)
    return w


def window_properties(w: np.ndarray, *, oversample: int = 64) -> dict:
    """Figures of merit of a window, as tabulated for harmonic analysis.

    Returns
    -------
    dict
        ``coherent_gain`` (sum(w)/N), ``enbw_bins`` (equivalent noise bandwidth,
        N*sum(w**2)/sum(w)**2), ``scalloping_loss_db`` (loss at half a bin),
        ``bw_3db_bins`` (3 dB main-lobe width) and ``highest_sidelobe_db``.

    References
    ----------
    F. J. Harris, "On the use of windows for harmonic analysis with the discrete
    Fourier transform", Proc. IEEE 66(1), 51-83, 1978 (Table I).
    """
    w = np.asarray(w, dtype=np.float64)
    n = w.size
    nfft = n * oversample
    spec = np.abs(np.fft.rfft(w, nfft))
    spec /= spec[0]
    db = 20 * np.log10(np.maximum(spec, 1e-300))
    bins = np.arange(spec.size) / oversample
    # Main lobe ends at the first local minimum.
    d = np.diff(spec)
    first_min = int(np.argmax(d > 0))
    half_bin = np.abs(np.sum(w * np.exp(-1j * np.pi * np.arange(n) / n))) / np.sum(w)
    below = np.nonzero(db <= -3.0103)[0][0]
    # Linear interpolation of the -3 dB crossing.
    x0, x1 = bins[below - 1], bins[below]
    y0, y1 = db[below - 1], db[below]
    x3 = x0 + (-3.0103 - y0) * (x1 - x0) / (y1 - y0)
    return {
        "coherent_gain": float(np.sum(w) / n),
        "enbw_bins": float(n * np.sum(w**2) / np.sum(w) ** 2),
        "scalloping_loss_db": float(-20 * np.log10(half_bin)),
        "bw_3db_bins": float(2 * x3),
        "highest_sidelobe_db": float(np.max(db[first_min:])),
    }


def noise_floor_psd(
    y: np.ndarray, sr: float, *, frame_len: int, nfft: int, max_frames: int = 60,
    time_quantile: float = 0.2, smooth_hz: float = 400.0,
) -> tuple[np.ndarray, np.ndarray]:
    """Smoothed long-term noise floor of ``y``: a low quantile over time and frequency.

    Frames are Hann-windowed, half-overlapped; at most ``max_frames`` evenly spaced
    frames are used.  The per-bin ``time_quantile`` over frames keeps stationary
    noise and drops intermittent voicing; a running ``time_quantile`` over
    ``smooth_hz`` of frequency then removes steady spectral lines, and a moving
    average of the same width smooths the result.

    Returns
    -------
    floor : ndarray, shape (nfft // 2 + 1,)
        Power per bin, same scaling as :func:`windowed_spectra` with a Hann window.
    loud : ndarray, shape (nfft // 2 + 1,)
        Mean power spectrum of the loudest fifth of the frames, same scaling:
        the level the floor is to be compared with.
    """
    hop = frame_len // 2
    n_avail = max(1, 1 + (y.size - frame_len) // hop)
    pick = np.unique(np.linspace(0, n_avail - 1, min(n_avail, max_frames)).round().astype(np.int64))
    ps, _ = windowed_spectra(y, pick * hop, analysis_window(frame_len), nfft, demean=False)
    return floor_from_spectra(ps, sr, nfft=nfft, time_quantile=time_quantile, smooth_hz=smooth_hz)


#: Frames this far below the loudest (dB of frame power) count as digital silence
#: for the noise floor (16-bit quantisation noise lies about 100 dB below full scale).
SILENT_DB = 100.0


def floor_from_spectra(ps: np.ndarray, sr: float, *, nfft: int, time_quantile: float = 0.2,
                       smooth_hz: float = 400.0) -> tuple[np.ndarray, np.ndarray]:
    """The noise floor and loud-frame spectrum of :func:`noise_floor_psd` from the
    power spectra ``ps`` (F, nfft // 2 + 1) of the frames it picked."""
    tot = ps.sum(axis=1)
    # Digital silence (a muted start, zero padding) is no noise floor: frames more
    # than SILENT_DB below the loudest are left out, when any other remains.
    heard = tot > tot.max() * 10.0 ** (-SILENT_DB / 10.0)
    if np.any(heard) and not np.all(heard):
        ps, tot = ps[heard], tot[heard]
    loud = ps[tot >= _low_order_stat(tot, 0.8, axis=0)].mean(axis=0)
    floor = _low_order_stat(ps, time_quantile, axis=0)
    # The running quantile over frequency works on every step-th bin (a few bins
    # per window suffice for a curve this smooth) and is interpolated back.
    width = max(3, int(round(smooth_hz / (sr / nfft))) | 1)
    step = max(1, width // 8)
    coarse = floor[::step]
    w_c = max(3, (width // step) | 1)
    half = w_c // 2
    windows = np.lib.stride_tricks.sliding_window_view(np.pad(coarse, half, mode="edge"), w_c)
    coarse = _low_order_stat(windows, time_quantile, axis=1)
    csum = np.cumsum(np.pad(coarse, (half + 1, half), mode="edge"))
    coarse = (csum[w_c:] - csum[:-w_c]) / w_c
    bins = np.arange(floor.size)
    return np.interp(bins, bins[::step], coarse), loud


def _low_order_stat(a: np.ndarray, q: float, *, axis: int) -> np.ndarray:
    """The order statistic of rank ``floor(q * (n - 1))`` along ``axis`` (a quantile
    without interpolation, by partial sorting)."""
    k = int(q * (a.shape[axis] - 1))
    return np.take(np.partition(a, k, axis=axis), k, axis=axis)


def whitening_filter(floor: np.ndarray, *, n_taps: int = 129, max_gain_db: float = 30.0) -> np.ndarray:
    """Zero-phase FIR whose magnitude response is ``1 / sqrt(floor)``, normalised.

    The gain range is limited to ``max_gain_db`` so that empty bands (for example
    below a telephone channel's cut-off) are not boosted without bound.  The
    response is normalised to unit mean power gain, so white noise passes
    unchanged in level.  Design by frequency sampling: the inverse real FFT of
    the (zero-phase) magnitude, cut to ``n_taps`` around lag 0 and tapered with a
    Hann window.

    Returns
    -------
    ndarray, shape (n_taps,)
        Odd-length symmetric impulse response (linear phase, delay ``n_taps // 2``).
    """
    floor = np.asarray(floor, dtype=np.float64)
    n_taps = int(n_taps) | 1
    ref = np.max(floor)
    if not np.isfinite(ref) or ref <= 0:
        h = np.zeros(n_taps)
        h[n_taps // 2] = 1.0
        return h
    floor = np.maximum(floor, ref * 10 ** (-max_gain_db / 10))
    mag = 1.0 / np.sqrt(floor)
    mag /= np.sqrt(np.mean(mag**2))
    imp = np.fft.irfft(mag)
    half = n_taps // 2
    h = np.concatenate([imp[-half:], imp[: half + 1]])
    taper = 0.5 + 0.5 * np.cos(np.pi * np.arange(-half, half + 1) / (half + 1))
    return h * taper


def prewhiten(y: np.ndarray, h: np.ndarray, *, nfft: int = 8192) -> np.ndarray:
    """Filter ``y`` with the zero-phase FIR ``h`` (output aligned with the input).

    FFT overlap-add in blocks of ``nfft - len(h) + 1`` samples, so memory stays
    bounded.
    """
    if h.size == 1:
        return y * h[0]
    d = h.size // 2
    n = y.size
    # blocks of up to nfft samples, but no larger FFT than a short signal needs
    need = 1 << int(np.ceil(np.log2(n + h.size - 1)))
    nfft = max(min(int(nfft), need), 1 << int(np.ceil(np.log2(4 * h.size))))
    block = nfft - h.size + 1
    H = np.fft.rfft(h, nfft)
    full = np.zeros(n + h.size - 1)
    for b0 in range(0, n, block):
        seg = y[b0:b0 + block]
        out = np.fft.irfft(np.fft.rfft(seg, nfft) * H, nfft)[: seg.size + h.size - 1]
        full[b0:b0 + out.size] += out
    return full[d:d + n]


@lru_cache(maxsize=8)
def decimator_taps(factor: int, *, atten_db: float = 80.0) -> np.ndarray:
    """Low-pass FIR for decimation by ``factor``.

    A Kaiser-windowed sinc cut off at the output rate's Nyquist frequency, with
    its transition band from 0.475 to 0.525 of the output rate: what lies above
    0.525 x the output rate is at least ``atten_db`` down before it folds into
    the band kept (below 0.475 x the output rate, which is the search band).
    Odd length, symmetric (linear phase), unit gain at 0 Hz.

    References
    ----------
    J. F. Kaiser, "Nonrecursive digital filter design using the I0-sinh window
    function", Proc. IEEE ISCAS, 1974 (the window's length and shape from the
    attenuation and transition width).
    """
    if factor < 2:
        return np.ones(1)
    width = 0.05 / factor * 2.0 * np.pi  # transition width, rad/sample at the input rate
    n = int(np.ceil((atten_db - 7.95) / (2.285 * width))) + 1
    n += 1 - n % 2
    beta = 0.1102 * (atten_db - 8.7)
    k = np.arange(n) - (n - 1) / 2
    h = np.sinc(k / factor) / factor * np.kaiser(n, beta)
    h /= h.sum()
    h.setflags(write=False)
    return h


def decimate(y: np.ndarray, factor: int) -> np.ndarray:
    """``y`` low-passed with :func:`decimator_taps` and kept every ``factor``-th sample.

    Zero phase: output sample ``m`` is the filtered signal at input sample
    ``m * factor``; samples outside ``y`` count as zeros.  Output length
    ``ceil(len(y) / factor)``.
    """
    if factor < 2:
        return y
    y = np.ascontiguousarray(y, dtype=np.float64)
    h = decimator_taps(factor)
    if factor != 2:
        return np.ascontiguousarray(prewhiten(y, h)[::factor])
    return _decimate2(y, h)


def _decimate2(y: np.ndarray, h: np.ndarray, nfft: int = 8192) -> np.ndarray:
    """:func:`decimate` by 2 with FFT overlap-add, keeping only the even output
    samples: each block's filtered spectrum is folded onto half the length, so
    the inverse transform is half as long."""
    n, L, d = y.size, h.size, h.size // 2
    # one leading zero puts the zero-phase output sample 2m at the even index 2m + d + 1
    lead = 1 if d % 2 else 0
    x = np.concatenate([np.zeros(lead), y]) if lead else y
    block = nfft - L + 1
    block -= block % 2
    H = np.fft.rfft(h, nfft)
    half = nfft // 2
    out = np.zeros((x.size + L) // 2 + 1)
    for b0 in range(0, x.size, block):
        Z = np.fft.rfft(x[b0:b0 + block], nfft) * H
        # samples 2j of the block's output: the spectrum folded at half the length
        Zd = 0.5 * (Z[:half // 2 + 1] + np.conj(Z[half:half // 2 - 1:-1]))
        seg = np.fft.irfft(Zd, half)
        m = min(half, (x.size - b0 + L) // 2 + 1)
        out[b0 // 2:b0 // 2 + m] += seg[:m]
    first = (d + lead) // 2
    return np.ascontiguousarray(out[first:first + -(-n // 2)])


def fir_segment(x: np.ndarray, x0: int, n_total: int | None, h: np.ndarray, lo: int, hi: int,
                step: int = 1) -> np.ndarray:
    """Samples ``lo, lo + step, ... < hi`` of the zero-phase FIR ``h`` applied to a signal of
    which ``x`` holds samples ``x0 ..`` (the streaming form of :func:`prewhiten` and
    :func:`decimate`).

    The caller guarantees that ``x`` covers ``lo - len(h) // 2`` to
    ``hi - 1 + len(h) // 2``, or that the missing samples lie outside the signal
    (before 0, or at or after ``n_total`` when the signal's end is known); those
    count as zeros.
    """
    d = h.size // 2
    a, b = lo - d, hi + d
    seg = np.zeros(b - a)
    s0, s1 = max(a, x0), min(b, x0 + x.size)
    if n_total is not None:
        s1 = min(s1, n_total)
    if s1 > s0:
        seg[s0 - a:s1 - a] = x[s0 - x0:s1 - x0]
    out = np.convolve(seg, h[::-1], mode="valid")  # out[j] = filtered sample lo + j
    return np.ascontiguousarray(out[::step])


def whiten_and_decimate(y: np.ndarray, h: np.ndarray, nfft: int = 4096):
    """``(prewhiten(y, h), decimate(prewhiten(y, h), 2))`` in one pass.

    Each block's transform serves both outputs: multiplied by the whitening
    filter's response for the first, by that and the decimator's, folded onto
    half the length, for the second.  The decimated samples whose filter reaches
    past either end of the signal are computed directly from the whitened
    signal, so the result equals the two calls' up to rounding.
    """
    y = np.ascontiguousarray(y, dtype=np.float64)
    g = decimator_taps(2)
    n = y.size
    hg = np.convolve(h, g)
    Lh, L = h.size, hg.size
    dh, d = Lh // 2, L // 2
    if n < 4 * L or h.size % 2 == 0:
        yw = prewhiten(y, h)
        return yw, decimate(yw, 2)
    lead = 1 if d % 2 else 0
    x = np.concatenate([np.zeros(lead), y]) if lead else y
    block = nfft - L + 1
    block -= block % 2
    H = np.fft.rfft(h, nfft)
    HG = np.fft.rfft(hg, nfft)
    half = nfft // 2
    full_w = np.zeros(x.size + Lh)
    out = np.zeros((x.size + L) // 2 + 1)
    for b0 in range(0, x.size, block):
        X = np.fft.rfft(x[b0:b0 + block], nfft)
        seg_w = np.fft.irfft(X * H, nfft)
        m = min(nfft, x.size + Lh - b0)
        full_w[b0:b0 + m] += seg_w[:m]
        Z = X * HG
        Zd = 0.5 * (Z[:half // 2 + 1] + np.conj(Z[half:half // 2 - 1:-1]))
        seg = np.fft.irfft(Zd, half)
        m = min(half, (x.size - b0 + L) // 2 + 1)
        out[b0 // 2:b0 // 2 + m] += seg[:m]
    yw = np.ascontiguousarray(full_w[lead + dh:lead + dh + n])
    first = (d + lead) // 2
    ys = np.ascontiguousarray(out[first:first + -(-n // 2)])
    # ends: the decimator must see the whitened signal cut at the ends, as decimate does
    edge = g.size // 2 + dh
    k0 = -(-edge // 2) + 1
    ys[:k0] = fir_segment(yw, 0, n, g, 0, 2 * k0 - 1, 2)
    k1 = max(k0, (n - edge) // 2 - 1)
    ys[k1:] = fir_segment(yw, 0, n, g, 2 * k1, 2 * (ys.size - 1) + 1, 2)
    return yw, ys
