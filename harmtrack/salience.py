"""Harmonic-summation evidence over a logarithmic f0 grid, and candidate picking.

For every frame and every grid frequency ``f`` the power of the windowed spectrum
is summed over the harmonics ``k f`` (``k = 1 .. L``) for every model order ``L``
at once.  Under the asymptotic (well-separated harmonics) approximation of the
weighted nonlinear least-squares (NLS) harmonic fit, the summed power is the
energy the order-``L`` harmonic model explains, so each grid point gets a
penalised-likelihood score with its own best order:

.. math::

    \\mathrm{ev}(f) = \\frac{N_e}{2}\\ln R
        - \\min_{L \\ge 1}\\Big[\\frac{N_e}{2}\\ln\\big(R - \\tfrac{2}{\\sum w}
          \\textstyle\\sum_{k \\le L} |X_w(k f)|^2\\big) + L\\ln N_e
          + \\tfrac{3}{2}\\ln N_e\\Big]

with ``R = sum(w x^2)`` the weighted frame energy and ``N_e = (sum w)^2 / sum(w^2)``
the window's effective sample count.  The residual ``R - E_L`` actually used is
``max(R - E_L, rho R) + mu E_L``: the floor ``rho`` and the mismatch share
``mu`` (``tracker.RESIDUAL_FLOOR``, ``tracker.MISMATCH``) stop the approximate fit
from claiming more precision than it has, which at a high SNR would otherwise
let sub-harmonic combs win by soaking up leakage.  ``ev`` is an approximate log Bayes factor
of "harmonic source at f" against "noise only": an absent fundamental costs one
harmonic's penalty, a sub-octave pays for twice the amplitudes, an octave above
loses the energy of the odd partials.  A compressed salience (sum of harmonic
magnitudes, not powers) supplies a second candidate so that one dominant partial
cannot hide a full harmonic series.

The spectrum is first resampled onto a fine logarithmic frequency axis, on
which the harmonics of every grid frequency sit at fixed offsets
``1200 log2(k)`` cents: the sum over harmonics becomes a sum of shifted copies
(subharmonic summation), read from contiguous memory.

References
----------
M. G. Christensen and A. Jakobsson, *Multi-Pitch Estimation*, Morgan & Claypool,
2009 (harmonic summation as approximate NLS; MAP order-selection rule).
D. J. Hermes, "Measurement of pitch by subharmonic summation", JASA 83(1), 1988.
"""

from __future__ import annotations

import math
from typing import NamedTuple

import numpy as np
from numba import njit

#: Floating-point licences of the hot kernels: no NaN or infinity, no signed
#: zero (so min/max vectorise), but no reassociation, no fused multiply-add and
#: no approximate division: those would let results depend on how a kernel was
#: inlined into its caller, so two processes (or a fresh compilation and a
#: cached one) could disagree in the last bit and, rarely, in a decision.
_FASTMATH = {"nnan", "ninf", "nsz"}

__all__ = ["log_grid", "HarmonicTables", "harmonic_tables", "pick_candidates", "evidence_map"]


def log_grid(fmin_hz: float, fmax_hz: float, cents: float) -> np.ndarray:
    """Logarithmically spaced f0 grid from ``fmin_hz`` to ``fmax_hz``, ``cents`` apart."""
    n = int(math.floor(1200.0 * math.log2(fmax_hz / fmin_hz) / cents)) + 1
    return fmin_hz * 2.0 ** (np.arange(n) * cents / 1200.0)


#: Sub-steps of the fine log-frequency axis per grid step: with a 10-cent grid the
#: harmonics are read within 2.5 cents of their exact frequency, and each fine
#: point holds the peak power within +-5 cents (see :func:`_log_spectrum`).
FINE_STEPS = 2


#: Harmonics summed by the compressed salience: the low partials, where one strong
#: component must not outweigh a series.
COMPRESSED_HARMONICS = 10


class HarmonicTables(NamedTuple):
    """Lookup tables of the harmonic summation (see :func:`harmonic_tables`)."""

    sp_idx: np.ndarray   # (J,) nearest FFT bin of each fine log-frequency point
    sp_w: np.ndarray     # (J, 3) quadratic interpolation weights of bins idx-1, idx, idx+1
    h_phase: np.ndarray  # (H,) fine sub-step of harmonic k's offset
    h_shift: np.ndarray  # (H,) whole grid steps of harmonic k's offset
    gend: np.ndarray     # (H,) number of grid points whose harmonic k lies in the band
    lmax: np.ndarray     # (G,) highest harmonic inside the band, per grid point


def harmonic_tables(grid_hz: np.ndarray, *, df: float, band_hz: float,
                    max_harmonics: int) -> HarmonicTables:
    """Tables for :func:`pick_candidates` on the log grid ``grid_hz``.

    The fine axis has ``FINE_STEPS`` points per grid step, from ``grid_hz[0]`` up
    to the band edge.  Fine point ``j`` (frequency ``grid_hz[0] * 2**(j c / 1200)``)
    is read from the power spectrum (bin width ``df``) by three-point quadratic
    interpolation, which keeps the error at a spectral peak far below linear
    interpolation's.  Harmonic ``k`` of grid point ``g`` is fine point
    ``FINE_STEPS * g + round(FINE_STEPS * 1200 log2(k) / c)``.
    """
    G = grid_hz.size
    c = 1200.0 * math.log2(grid_hz[1] / grid_hz[0]) if G > 1 else 10.0
    fine_c = c / FINE_STEPS
    n_oct = math.log2(band_hz / grid_hz[0])
    J = int(math.floor(1200.0 * n_oct / fine_c)) + 2
    k = np.arange(1, max_harmonics + 1)
    off = np.round(FINE_STEPS * 1200.0 * np.log2(k) / c).astype(np.int64)
    h_shift, h_phase = np.divmod(off, FINE_STEPS)
    lmax = np.minimum(max_harmonics, np.floor(band_hz / grid_hz)).astype(np.int64)
    lmax = np.maximum(lmax, 1)
    gend = np.array([np.count_nonzero(lmax >= kk) for kk in k], dtype=np.int64)
    # every fine point read must exist
    need = (FINE_STEPS * (gend - 1 + h_shift) + h_phase)[gend > 0]  # harmonics read at all
    J = max(J, int(need.max()) + 1)
    pos = grid_hz[0] * 2.0 ** (np.arange(J) * fine_c / 1200.0) / df
    sp_idx = np.maximum(np.round(pos).astype(np.int64), 1)
    d = pos - sp_idx
    sp_w = np.stack([0.5 * d * (d - 1.0), 1.0 - d * d, 0.5 * d * (d + 1.0)], axis=-1)
    return HarmonicTables(sp_idx, sp_w, h_phase, h_shift, gend, lmax)


@njit(cache=True, nogil=True, fastmath=_FASTMATH)
def _log_spectrum(p, sp_idx, sp_w, n_phase, plog, mlog, lin, pooled):
    """Power and magnitude on the fine log axis, split by sub-step: ``plog[phase, m]``.

    Each fine point holds the largest interpolated power within half a grid
    step (``n_phase // 2`` fine points) of it.  A harmonic series whose f0 falls
    between two grid points is then read at its peaks from the nearer one, so
    the evidence of neighbouring grid points does not swing with the alignment
    of the true f0 to the grid (which would otherwise let a better-aligned
    sub-harmonic win on clean input).  ``lin`` and ``pooled`` are zero-filled
    scratch arrays of length ``plog.shape[1] * n_phase + 2 * (n_phase // 2)``.
    """
    r = n_phase // 2
    for j in range(sp_idx.shape[0]):
        i = sp_idx[j]
        lin[j + r] = max(0.0, p[i - 1] * sp_w[j, 0] + p[i] * sp_w[j, 1] + p[i + 1] * sp_w[j, 2])
    n = lin.shape[0]
    for j in range(r, n - r):
        pooled[j] = lin[j]
    for q in range(1, r + 1):
        for j in range(r, n - r):
            pooled[j] = max(pooled[j], max(lin[j - q], lin[j + q]))
    M = plog.shape[1]
    for ph in range(n_phase):
        prow = plog[ph]
        mrow = mlog[ph]
        for m in range(M):
            v = pooled[m * n_phase + ph + r]
            prow[m] = v
            mrow[m] = math.sqrt(v)


@njit(cache=True, nogil=True, fastmath=_FASTMATH)
def _frame_costs(p, r_tot, tab_idx, tab_w, h_phase, h_shift, gend, n_phase, G,
                 norm, n_eff, pen_h, floor_rel, mismatch, plog, mlog, lin, pooled):
    """Penalised residual and harmonic magnitude sum of one frame on the whole grid.

    Returns ``low`` (G,), the smallest ``residual * exp(2 L pen_h / N_e)`` over the
    orders ``L`` (so that the evidence is ``(N_e/2) ln(R / low) - pen_f``), and
    ``comp`` (G,), the compressed salience (sum of harmonic magnitudes over the
    first ``COMPRESSED_HARMONICS`` harmonics).  Leaves the
    frame's log-frequency spectrum in ``plog`` / ``mlog`` for :func:`_best_order`.
    """
    _log_spectrum(p, tab_idx, tab_w, n_phase, plog, mlog, lin, pooled)
    r32 = np.float32(r_tot)
    floor32 = np.float32(r_tot * floor_rel)
    norm32 = np.float32(norm)
    mis32 = np.float32(mismatch * norm)
    # local accumulators and 1-D row views let the compiler vectorise the inner loop
    acc = np.zeros(G, dtype=np.float32)
    comp = np.zeros(G, dtype=np.float32)
    low = np.full(G, np.float32(3e38), dtype=np.float32)
    qk = 1.0
    q = math.exp(2.0 * pen_h / n_eff)
    for k in range(h_phase.shape[0]):
        qk *= q
        q32 = np.float32(qk)
        pr = plog[h_phase[k], h_shift[k]:]
        if k < COMPRESSED_HARMONICS:
            mr = mlog[h_phase[k], h_shift[k]:]
            for g in range(gend[k]):
                comp[g] += mr[g]
        for g in range(gend[k]):
            ek = acc[g] + pr[g]
            acc[g] = ek
            low[g] = min(low[g], (max(r32 - ek * norm32, floor32) + mis32 * ek) * q32)
    return low, comp


@njit(cache=True, nogil=True)
def _evidence(low_g, c0, half, pen_f):
    return c0 - (half * math.log(low_g) + pen_f)


@njit(cache=True, nogil=True)
def _best_order(g, r_tot, plog, h_phase, h_shift, gend, norm, n_eff, pen_h, floor_rel, mismatch):
    """Model order that minimises the penalised cost at grid point ``g``."""
    q = math.exp(2.0 * pen_h / n_eff)
    floor_abs = r_tot * floor_rel
    e = 0.0
    qk = 1.0
    best = 1e300
    best_l = 1
    for k in range(h_phase.shape[0]):
        if g >= gend[k]:
            break
        qk *= q
        e += plog[h_phase[k], g + h_shift[k]]
        res = (max(r_tot - e * norm, floor_abs) + mismatch * e * norm) * qk
        if res < best:
            best = res
            best_l = k + 1
    return best_l


@njit(cache=True, nogil=True)
def _parabolic(ym, y0, yp):
    """Vertex offset (in grid steps, within +-0.5) and height of a 3-point parabola."""
    den = ym - 2.0 * y0 + yp
    if den >= 0.0:
        return 0.0, y0
    d = 0.5 * (ym - yp) / den
    if d > 0.5:
        d = 0.5
    elif d < -0.5:
        d = -0.5
    return d, y0 - 0.25 * (ym - yp) * d


@njit(cache=True, nogil=True)
def _peak(low, g, c0, half, pen_f):
    """Sub-grid offset and height of the evidence peak at grid point ``g``."""
    e0 = _evidence(low[g], c0, half, pen_f)
    if g == 0 or g == low.shape[0] - 1:
        return 0.0, e0
    return _parabolic(_evidence(low[g - 1], c0, half, pen_f), e0,
                      _evidence(low[g + 1], c0, half, pen_f))


@njit(cache=True, nogil=True)
def _scratch(n_phase, J):
    # single precision: twice the SIMD width in the summation; the residual floor
    # (>= 1e-3 of the frame energy) keeps the cancellation error far below it
    m = J // n_phase + 2
    r = n_phase // 2
    return (np.zeros((n_phase, m), dtype=np.float32), np.zeros((n_phase, m), dtype=np.float32),
            np.zeros(m * n_phase + 2 * r, dtype=np.float32),
            np.zeros(m * n_phase + 2 * r, dtype=np.float32))


@njit(cache=True, nogil=True)
def pick_candidates(P, R, tab_idx, tab_w, h_phase, h_shift, gend, n_phase, log2_grid,
                    norm, n_eff, pen_h, pen_f, floor_rel, mismatch, K):
    """Top-``K`` f0 candidates of every frame from the harmonic evidence.

    Parameters
    ----------
    P : ndarray, shape (T, B)
        Power spectra of the (windowed) frames.
    R : ndarray, shape (T,)
        Weighted frame energies ``sum(w * x**2)``.
    tab_idx, tab_w, h_phase, h_shift, gend, n_phase :
        Fields of :class:`HarmonicTables` and ``FINE_STEPS``.
    log2_grid : ndarray, shape (G,)
        log2 of the grid frequencies.
    norm, n_eff, pen_h, pen_f, floor_rel, mismatch : float
        Energy scale ``2 / sum(w)``, effective sample count, penalty per
        harmonic, penalty for the frequency, residual floor relative to ``R``,
        share of the explained energy counted as unexplained.
    K : int
        Candidates per frame: the ``K - 1`` strongest local maxima of the
        evidence plus the strongest maximum of the compressed salience.

    Returns
    -------
    cand_log2f : ndarray, shape (T, K)
        log2 of candidate f0 (Hz), NaN where a frame has fewer candidates.
    cand_ev : ndarray, shape (T, K)
        Evidence (approximate log Bayes factor against noise) of each candidate.
    cand_order : ndarray of int64, shape (T, K)
        Model order chosen for each candidate.
    best_ev : ndarray, shape (T,)
        Largest evidence in the frame.
    """
    T = P.shape[0]
    G = log2_grid.shape[0]
    cand_f = np.full((T, K), np.nan)
    cand_ev = np.full((T, K), -np.inf)
    cand_o = np.zeros((T, K), dtype=np.int64)
    best_ev = np.full(T, -np.inf)
    plog, mlog, lin, pooled = _scratch(n_phase, tab_idx.shape[0])
    step = log2_grid[1] - log2_grid[0] if G > 1 else 1.0
    half = 0.5 * n_eff
    for t in range(T):
        if not (R[t] > 0.0):
            continue
        low, comp = _frame_costs(P[t], R[t], tab_idx, tab_w, h_phase, h_shift, gend, n_phase, G,
                                 norm, n_eff, pen_h, floor_rel, mismatch, plog, mlog, lin, pooled)
        c0 = half * math.log(R[t])
        # Local maxima of the evidence (minima of ``low``), strongest first,
        # inserted into a short sorted list; logarithms only where needed.
        n_found = 0
        for g in range(G):
            if g > 0 and low[g] > low[g - 1]:
                continue
            if g < G - 1 and low[g] >= low[g + 1]:
                continue
            d, h = _peak(low, g, c0, half, pen_f)
            pos = n_found
            while pos > 0 and cand_ev[t, pos - 1] < h:
                pos -= 1
            if pos < K - 1:
                last = min(n_found, K - 2)
                for j in range(last, pos, -1):
                    cand_ev[t, j] = cand_ev[t, j - 1]
                    cand_f[t, j] = cand_f[t, j - 1]
                    cand_o[t, j] = cand_o[t, j - 1]
                cand_ev[t, pos] = h
                cand_f[t, pos] = log2_grid[g] + d * step
                cand_o[t, pos] = g
                if n_found < K - 1:
                    n_found += 1
        if n_found > 0:
            best_ev[t] = cand_ev[t, 0]
        # Strongest compressed-salience peak, unless already a candidate.
        gbest = 0
        for g in range(1, G):
            if comp[g] > comp[gbest]:
                gbest = g
        lf = log2_grid[gbest]
        dup = False
        for j in range(n_found):
            if abs(cand_f[t, j] - lf) < 2.5 * step:
                dup = True
        if not dup:
            d, h = _peak(low, gbest, c0, half, pen_f)
            cand_f[t, n_found] = lf + d * step
            cand_ev[t, n_found] = h
            cand_o[t, n_found] = gbest
        # grid indices -> model orders
        for j in range(K):
            if not math.isnan(cand_f[t, j]):
                cand_o[t, j] = _best_order(cand_o[t, j], R[t], plog, h_phase, h_shift, gend, norm,
                                           n_eff, pen_h, floor_rel, mismatch)
    return cand_f, cand_ev, cand_o, best_ev


@njit(cache=True, nogil=True)
def evidence_map(P, R, mag_ref, tab_idx, tab_w, h_phase, h_shift, gend, n_phase, G, norm, n_eff,
                 pen_h, pen_f, floor_rel, mismatch):
    """Full (T, G) evidence, order and compressed-salience maps (for figures and tests)."""
    T = P.shape[0]
    ev = np.full((T, G), -np.inf)
    order = np.zeros((T, G), dtype=np.int64)
    sal = np.zeros((T, G))
    plog, mlog, lin, pooled = _scratch(n_phase, tab_idx.shape[0])
    half = 0.5 * n_eff
    for t in range(T):
        if R[t] > 0.0:
            low, comp = _frame_costs(P[t], R[t], tab_idx, tab_w, h_phase, h_shift, gend, n_phase,
                                     G, norm, n_eff, pen_h, floor_rel, mismatch, plog, mlog, lin, pooled)
            c0 = half * math.log(R[t])
            for g in range(G):
                ev[t, g] = _evidence(low[g], c0, half, pen_f)
                sal[t, g] = comp[g] / mag_ref[t]
                order[t, g] = _best_order(g, R[t], plog, h_phase, h_shift, gend, norm, n_eff,
                                          pen_h, floor_rel, mismatch)
    return ev, order, sal
