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
the window's effective sample count.  ``ev`` is an approximate log Bayes factor
of "harmonic source at f" against "noise only": an absent fundamental costs one
harmonic's penalty, a sub-octave pays for twice the amplitudes, an octave above
loses the energy of the odd partials.  A compressed salience (sum of harmonic
magnitudes, not powers) supplies a second candidate so that one dominant partial
cannot hide a full harmonic series.

References
----------
M. G. Christensen and A. Jakobsson, *Multi-Pitch Estimation*, Morgan & Claypool,
2009 (harmonic summation as approximate NLS; MAP order-selection rule).
D. J. Hermes, "Measurement of pitch by subharmonic summation", JASA 83(1), 1988.
"""

from __future__ import annotations

import math

import numpy as np
from numba import njit

__all__ = ["log_grid", "harmonic_tables", "pick_candidates", "evidence_map"]


def log_grid(fmin_hz: float, fmax_hz: float, cents: float) -> np.ndarray:
    """Logarithmically spaced f0 grid from ``fmin_hz`` to ``fmax_hz``, ``cents`` apart."""
    n = int(math.floor(1200.0 * math.log2(fmax_hz / fmin_hz) / cents)) + 1
    return fmin_hz * 2.0 ** (np.arange(n) * cents / 1200.0)


def harmonic_tables(grid_hz: np.ndarray, *, df: float, band_hz: float, max_harmonics: int):
    """Bin positions of the harmonics of every grid frequency.

    The power at harmonic ``k`` is read from the spectrum by three-point
    (quadratic Lagrange) interpolation around the nearest bin, which keeps the
    error at a spectral peak far below the linear interpolation's.

    Returns
    -------
    idx : ndarray of int64, shape (G, H)
        Nearest FFT bin of harmonic ``k`` of grid point ``g`` (column ``k - 1``).
    frac : ndarray, shape (G, H, 3)
        Interpolation weights of bins ``idx - 1``, ``idx``, ``idx + 1``.
    lmax : ndarray of int64, shape (G,)
        Highest harmonic below ``band_hz`` (at most ``max_harmonics``).
    """
    k = np.arange(1, max_harmonics + 1)
    pos = grid_hz[:, None] * k[None, :] / df
    idx = np.maximum(np.round(pos).astype(np.int64), 1)
    d = pos - idx
    frac = np.stack([0.5 * d * (d - 1.0), 1.0 - d * d, 0.5 * d * (d + 1.0)], axis=-1)
    lmax = np.minimum(max_harmonics, np.floor(band_hz / grid_hz)).astype(np.int64)
    lmax = np.maximum(lmax, 1)
    return idx, frac, lmax


@njit(cache=True)
def _frame_evidence(p, r_tot, mag_ref, idx, frac, lmax, norm, n_eff, pen_h, pen_f, floor_rel,
                    ev, order, sal):
    """Evidence, best order and compressed salience of one frame (see module notes)."""
    G = idx.shape[0]
    q = math.exp(2.0 * pen_h / n_eff)
    half = 0.5 * n_eff
    c0 = half * math.log(r_tot)
    floor_abs = r_tot * floor_rel
    for g in range(G):
        e = 0.0
        s = 0.0
        mult = 1.0
        best = 1e300
        best_l = 1
        for k in range(lmax[g]):
            i = idx[g, k]
            pk = p[i - 1] * frac[g, k, 0] + p[i] * frac[g, k, 1] + p[i + 1] * frac[g, k, 2]
            if pk < 0.0:
                pk = 0.0
            e += pk
            s += math.sqrt(pk)
            mult *= q
            res = r_tot - e * norm
            if res < floor_abs:
                res = floor_abs
            res *= mult
            if res < best:
                best = res
                best_l = k + 1
        ev[g] = c0 - (half * math.log(best) + pen_f)
        order[g] = best_l
        sal[g] = s / mag_ref


@njit(cache=True)
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


@njit(cache=True)
def pick_candidates(P, R, mag_ref, idx, frac, lmax, log2_grid, norm, n_eff, pen_h, pen_f,
                    floor_rel, K):
    """Top-``K`` f0 candidates of every frame from the harmonic evidence.

    Parameters
    ----------
    P : ndarray, shape (T, B)
        Power spectra of the (windowed) frames.
    R : ndarray, shape (T,)
        Weighted frame energies ``sum(w * x**2)``.
    mag_ref : ndarray, shape (T,)
        Per-frame magnitude reference for the compressed salience (> 0).
    idx, frac, lmax : ndarray
        From :func:`harmonic_tables`.
    log2_grid : ndarray, shape (G,)
        log2 of the grid frequencies.
    norm, n_eff, pen_h, pen_f, floor_rel : float
        Energy scale ``2 / sum(w)``, effective sample count, penalty per
        harmonic, penalty for the frequency, residual floor relative to ``R``.
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
    G = idx.shape[0]
    cand_f = np.full((T, K), np.nan)
    cand_ev = np.full((T, K), -np.inf)
    cand_o = np.zeros((T, K), dtype=np.int64)
    best_ev = np.full(T, -np.inf)
    ev = np.empty(G)
    order = np.empty(G, dtype=np.int64)
    sal = np.empty(G)
    step = log2_grid[1] - log2_grid[0] if G > 1 else 1.0
    for t in range(T):
        if not (R[t] > 0.0):
            continue
        _frame_evidence(P[t], R[t], mag_ref[t], idx, frac, lmax, norm, n_eff, pen_h, pen_f,
                        floor_rel, ev, order, sal)
        # Local maxima of the evidence, strongest first (insertion into a short list).
        n_found = 0
        for g in range(G):
            left = ev[g - 1] if g > 0 else -np.inf
            right = ev[g + 1] if g < G - 1 else -np.inf
            if ev[g] >= left and ev[g] > right:
                if g > 0 and g < G - 1:
                    d, h = _parabolic(left, ev[g], right)
                else:
                    d, h = 0.0, ev[g]
                # insert into sorted list of length K - 1
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
                    cand_o[t, pos] = order[g]
                    if n_found < K - 1:
                        n_found += 1
        if n_found > 0:
            best_ev[t] = cand_ev[t, 0]
        # Strongest compressed-salience peak, unless already a candidate.
        gbest = 0
        for g in range(1, G):
            if sal[g] > sal[gbest]:
                gbest = g
        lf = log2_grid[gbest]
        dup = False
        for j in range(n_found):
            if abs(cand_f[t, j] - lf) < 2.5 * step:
                dup = True
        if not dup:
            if gbest > 0 and gbest < G - 1:
                d, h = _parabolic(ev[gbest - 1], ev[gbest], ev[gbest + 1])
            else:
                d, h = 0.0, ev[gbest]
            cand_f[t, n_found] = lf + d * step
            cand_ev[t, n_found] = h
            cand_o[t, n_found] = order[gbest]
    return cand_f, cand_ev, cand_o, best_ev


@njit(cache=True)
def evidence_map(P, R, mag_ref, idx, frac, lmax, norm, n_eff, pen_h, pen_f, floor_rel):
    """Full (T, G) evidence, order and compressed-salience maps (for figures and tests)."""
    T = P.shape[0]
    G = idx.shape[0]
    ev = np.full((T, G), -np.inf)
    order = np.zeros((T, G), dtype=np.int64)
    sal = np.zeros((T, G))
    for t in range(T):
        if R[t] > 0.0:
            _frame_evidence(P[t], R[t], mag_ref[t], idx, frac, lmax, norm, n_eff, pen_h, pen_f,
                            floor_rel, ev[t], order[t], sal[t])
    return ev, order, sal
