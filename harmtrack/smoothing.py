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


@njit(cache=True, nogil=True)
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


@njit(cache=True, nogil=True)
def voicing_posterior(lf, ev, unv, a, log_switch, log_stay):
    """Posterior probability of the voiced states, per frame (forward-backward).

    Same lattice and potentials as :func:`viterbi`.  The recursions run on
    potentials scaled per frame (linear domain), so each frame costs the
    exponentials of its transition matrix and emissions, and no logarithms.

    Returns
    -------
    ndarray, shape (T,)
    """
    T, K = lf.shape
    S = K + 1
    out = np.zeros(T)
    if T == 0:
        return out
    stay = math.exp(log_stay)
    switch = math.exp(log_switch)
    em = np.zeros((T, S))
    for t in range(T):
        m = unv[t]
        for j in range(K):
            if not math.isnan(lf[t, j]) and ev[t, j] > m:
                m = ev[t, j]
        for j in range(K):
            em[t, j] = 0.0 if math.isnan(lf[t, j]) else math.exp(ev[t, j] - m)
        em[t, K] = math.exp(unv[t] - m)
    # transition matrices between frames t-1 and t: tr[t, i, j]
    tr = np.zeros((T, S, S))
    for t in range(1, T):
        for i in range(K):
            if math.isnan(lf[t - 1, i]):
                continue
            for j in range(K):
                if not math.isnan(lf[t, j]):
                    d = lf[t, j] - lf[t - 1, i]
                    tr[t, i, j] = stay * math.exp(-a * d * d)
            tr[t, i, K] = switch
        for j in range(K):
            tr[t, K, j] = switch
        tr[t, K, K] = stay
    alpha = np.zeros((T, S))
    for j in range(S):
        alpha[0, j] = em[0, j]
    z = alpha[0].sum()
    for j in range(S):
        alpha[0, j] /= z
    for t in range(1, T):
        tot = 0.0
        for j in range(S):
            acc = 0.0
            for i in range(S):
                acc += alpha[t - 1, i] * tr[t, i, j]
            acc *= em[t, j]
            alpha[t, j] = acc
            tot += acc
        if tot <= 0.0:
            # every path died (cannot happen with the unvoiced state): restart
            for j in range(S):
                alpha[t, j] = em[t, j]
            tot = alpha[t].sum()
        for j in range(S):
            alpha[t, j] /= tot
    beta = np.ones(S)
    nb = np.empty(S)
    for t in range(T - 1, -1, -1):
        post_tot = 0.0
        for j in range(S):
            post_tot += alpha[t, j] * beta[j]
        out[t] = 1.0 - alpha[t, K] * beta[K] / post_tot
        if t == 0:
            break
        tot = 0.0
        for i in range(S):
            acc = 0.0
            for j in range(S):
                acc += tr[t, i, j] * em[t, j] * beta[j]
            nb[i] = acc
            tot += acc
        for i in range(S):
            beta[i] = nb[i] / tot
    return out
