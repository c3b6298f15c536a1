"""Viterbi decoding and forward-backward voicing posteriors over the candidate lattice.

Each frame offers ``K`` voiced states (its f0 candidates) and one unvoiced state.
Log-potentials:

- emission: given per state by the caller;
- voiced -> voiced: ``-a * (log2 f_t - log2 f_{t-1})**2`` with
  ``a = smoothing / (2 * glide_oct_s**2 * dt)``, a Brownian-motion prior on
  log-f0 whose cost per second of a steady glide does not depend on the hop;
- voiced <-> unvoiced: ``log(1 - exp(-dt / run_s))``; staying: ``-dt / run_s``.

References
----------
A. J. Viterbi, "Error bounds for convolutional codes and an asymptotically optimum
decoding algorithm", IEEE Trans. Inf. Theory 13(2), 1967.
L. R. Rabiner, "A tutorial on hidden Markov models and selected applications in
speech recognition", Proc. IEEE 77(2), 1989 (forward-backward recursions).
"""

from __future__ import annotations

import math

import numpy as np
from numba import njit

__all__ = ["transition_params", "viterbi", "voicing_posterior"]


def transition_params(*, hop_s: float, smoothing: float, glide_oct_s: float,
                      voiced_run_s: float) -> tuple[float, float, float]:
    """(pitch-change coefficient ``a``, switch log-potential, stay log-potential)."""
    a = smoothing / (2.0 * glide_oct_s**2 * hop_s)
    p_switch = -math.expm1(-hop_s / voiced_run_s)
    return a, math.log(p_switch), -hop_s / voiced_run_s


@njit(cache=True)
def viterbi(lf, ev, unv, a, log_switch, log_stay):
    """Most likely state sequence.

    Parameters
    ----------
    lf : ndarray, shape (T, K)
        log2 f0 of each candidate; NaN marks an empty slot.
    ev : ndarray, shape (T, K)
        Emission log-potential of each voiced candidate.
    unv : ndarray, shape (T,)
        Emission log-potential of the unvoiced state.
    a, log_switch, log_stay : float
        From :func:`transition_params`.

    Returns
    -------
    path : ndarray of int64, shape (T,)
        Candidate index per frame, ``K`` for unvoiced.
    """
    T, K = lf.shape
    path = np.full(T, K, dtype=np.int64)
    if T == 0:
        return path
    back = np.zeros((T, K + 1), dtype=np.int64)
    delta = np.full(K + 1, -np.inf)
    new = np.empty(K + 1)
    for j in range(K):
        if not math.isnan(lf[0, j]):
            delta[j] = ev[0, j]
    delta[K] = unv[0]
    for t in range(1, T):
        for j in range(K):
            if math.isnan(lf[t, j]):
                new[j] = -np.inf
                back[t, j] = K
                continue
            best = delta[K] + log_switch
            arg = K
            for i in range(K):
                if math.isnan(lf[t - 1, i]):
                    continue
                d = lf[t, j] - lf[t - 1, i]
                v = delta[i] + log_stay - a * d * d
                if v > best:
                    best = v
                    arg = i
            new[j] = best + ev[t, j]
            back[t, j] = arg
        best = delta[K] + log_stay
        arg = K
        for i in range(K):
            v = delta[i] + log_switch
            if v > best:
                best = v
                arg = i
        new[K] = best + unv[t]
        back[t, K] = arg
        # renormalise to keep numbers small
        m = new.max()
        for j in range(K + 1):
            delta[j] = new[j] - m
    s = 0
    for j in range(1, K + 1):
        if delta[j] > delta[s]:
            s = j
    path[T - 1] = s
    for t in range(T - 1, 0, -1):
        s = back[t, s]
        path[t - 1] = s
    return path


@njit(cache=True)
def _lse(v, n):
    m = -np.inf
    for i in range(n):
        if v[i] > m:
            m = v[i]
    if m == -np.inf:
        return m
    s = 0.0
    for i in range(n):
        s += math.exp(v[i] - m)
    return m + math.log(s)


@njit(cache=True)
def _step(prev, lf_prev, lf_cur, a, log_switch, log_stay, K, out, tmp):
    """Sum-product transition from ``prev`` (frame t-1) to frame t, without emissions."""
    for j in range(K):
        if math.isnan(lf_cur[j]):
            out[j] = -np.inf
            continue
        n = 0
        tmp[n] = prev[K] + log_switch
        n += 1
        for i in range(K):
            if math.isnan(lf_prev[i]) or prev[i] == -np.inf:
                continue
            d = lf_cur[j] - lf_prev[i]
            tmp[n] = prev[i] + log_stay - a * d * d
            n += 1
        out[j] = _lse(tmp, n)
    tmp[0] = prev[K] + log_stay
    for i in range(K):
        tmp[i + 1] = prev[i] + log_switch
    out[K] = _lse(tmp, K + 1)


@njit(cache=True)
def voicing_posterior(lf, ev, unv, a, log_switch, log_stay):
    """Posterior probability of the voiced states, per frame (forward-backward).

    Same lattice and potentials as :func:`viterbi`.

    Returns
    -------
    ndarray, shape (T,)
    """
    T, K = lf.shape
    out = np.zeros(T)
    if T == 0:
        return out
    alpha = np.full((T, K + 1), -np.inf)
    tmp = np.empty(K + 2)
    pred = np.empty(K + 1)
    for j in range(K):
        if not math.isnan(lf[0, j]):
            alpha[0, j] = ev[0, j]
    alpha[0, K] = unv[0]
    for t in range(1, T):
        _step(alpha[t - 1], lf[t - 1], lf[t], a, log_switch, log_stay, K, pred, tmp)
        for j in range(K):
            alpha[t, j] = pred[j] + ev[t, j]
        alpha[t, K] = pred[K] + unv[t]
        m = _lse(alpha[t], K + 1)
        for j in range(K + 1):
            alpha[t, j] -= m
    beta = np.zeros(K + 1)
    nb = np.empty(K + 1)
    for t in range(T - 1, -1, -1):
        post = np.empty(K + 1)
        for j in range(K + 1):
            post[j] = alpha[t, j] + beta[j]
        z = _lse(post, K + 1)
        pu = math.exp(post[K] - z)
        out[t] = 1.0 - pu
        if t == 0:
            break
        # beta_{t-1}(i) = lse_j [ trans(i->j) + em_t(j) + beta_t(j) ]
        for i in range(K + 1):
            n = 0
            for j in range(K + 1):
                if j < K:
                    if math.isnan(lf[t, j]):
                        continue
                    em = ev[t, j]
                    if i < K:
                        if math.isnan(lf[t - 1, i]):
                            continue
                        d = lf[t, j] - lf[t - 1, i]
                        tr = log_stay - a * d * d
                    else:
                        tr = log_switch
                else:
                    em = unv[t]
                    tr = log_stay if i == K else log_switch
                tmp[n] = tr + em + beta[j]
                n += 1
            nb[i] = _lse(tmp, n) if n > 0 else -np.inf
        m = _lse(nb, K + 1)
        for i in range(K + 1):
            beta[i] = nb[i] - m if m != -np.inf else 0.0
    return out
