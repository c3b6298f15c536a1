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

Streaming (:class:`FixedLagDecoder`) decides frame ``t`` once frame ``t + lag``
has arrived: the best path to frame ``t + lag`` traced back ``lag`` steps, and
the posterior from the forward pass up to ``t`` and a backward pass from
``t + lag``.  The recursions are the offline ones, step for step, so a stream
flushed before ``lag`` frames gives the offline result exactly.
"""

from __future__ import annotations

import math

import numpy as np
from numba import njit

__all__ = ["transition_params", "viterbi", "voicing_posterior", "FixedLagDecoder"]


def transition_params(*, hop_s: float, smoothing: float, glide_oct_s: float,
                      voiced_run_s: float) -> tuple[float, float, float]:
    """(pitch-change coefficient ``a``, switch log-potential, stay log-potential)."""
    a = smoothing / (2.0 * glide_oct_s**2 * hop_s)
    p_switch = -math.expm1(-hop_s / voiced_run_s)
    return a, math.log(p_switch), -hop_s / voiced_run_s


@njit(cache=True, nogil=True)
def _viterbi_init(lf_t, ev_t, unv_t, delta):
    K = lf_t.shape[0]
    for j in range(K + 1):
        delta[j] = -np.inf
    for j in range(K):
        if not math.isnan(lf_t[j]):
            delta[j] = ev_t[j]
    delta[K] = unv_t


@njit(cache=True, nogil=True)
def _viterbi_step(lf_prev, lf_t, ev_t, unv_t, a, log_switch, log_stay, delta, new, back_t):
    """One frame of the Viterbi recursion: ``delta`` (S,) updated in place,
    back pointers into ``back_t`` (S,)."""
    K = lf_t.shape[0]
    for j in range(K):
        if math.isnan(lf_t[j]):
            new[j] = -np.inf
            back_t[j] = K
            continue
        best = delta[K] + log_switch
        arg = K
        for i in range(K):
            if math.isnan(lf_prev[i]):
                continue
            d = lf_t[j] - lf_prev[i]
            v = delta[i] + log_stay - a * d * d
            if v > best:
                best = v
                arg = i
        new[j] = best + ev_t[j]
        back_t[j] = arg
    best = delta[K] + log_stay
    arg = K
    for i in range(K):
        v = delta[i] + log_switch
        if v > best:
            best = v
            arg = i
    new[K] = best + unv_t
    back_t[K] = arg
    # renormalise to keep numbers small
    m = new.max()
    for j in range(K + 1):
        delta[j] = new[j] - m


@njit(cache=True, nogil=True)
def _argmax(delta):
    s = 0
    for j in range(1, delta.shape[0]):
        if delta[j] > delta[s]:
            s = j
    return s


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
    delta = np.empty(K + 1)
    new = np.empty(K + 1)
    _viterbi_init(lf[0], ev[0], unv[0], delta)
    for t in range(1, T):
        _viterbi_step(lf[t - 1], lf[t], ev[t], unv[t], a, log_switch, log_stay, delta, new,
                      back[t])
    s = _argmax(delta)
    path[T - 1] = s
    for t in range(T - 1, 0, -1):
        s = back[t, s]
        path[t - 1] = s
    return path


@njit(cache=True, nogil=True)
def _emission_row(lf_t, ev_t, unv_t, em_t):
    """Emission potentials of one frame, scaled by the frame's largest."""
    K = lf_t.shape[0]
    m = unv_t
    for j in range(K):
        if not math.isnan(lf_t[j]) and ev_t[j] > m:
            m = ev_t[j]
    for j in range(K):
        em_t[j] = 0.0 if math.isnan(lf_t[j]) else math.exp(ev_t[j] - m)
    em_t[K] = math.exp(unv_t - m)


@njit(cache=True, nogil=True)
def _transition(lf_prev, lf_t, a, stay, switch, tr):
    """Transition potentials (S, S) from the frame of ``lf_prev`` to that of ``lf_t``."""
    K = lf_t.shape[0]
    tr[:, :] = 0.0
    for i in range(K):
        if math.isnan(lf_prev[i]):
            continue
        for j in range(K):
            if not math.isnan(lf_t[j]):
                d = lf_t[j] - lf_prev[i]
                tr[i, j] = stay * math.exp(-a * d * d)
        tr[i, K] = switch
    for j in range(K):
        tr[K, j] = switch
    tr[K, K] = stay


@njit(cache=True, nogil=True)
def _forward_step(alpha_prev, tr, em_t, alpha_t):
    S = alpha_t.shape[0]
    tot = 0.0
    for j in range(S):
        acc = 0.0
        for i in range(S):
            acc += alpha_prev[i] * tr[i, j]
        acc *= em_t[j]
        alpha_t[j] = acc
        tot += acc
    if tot <= 0.0:
        # every path died (cannot happen with the unvoiced state): restart
        for j in range(S):
            alpha_t[j] = em_t[j]
        tot = alpha_t.sum()
    for j in range(S):
        alpha_t[j] /= tot


@njit(cache=True, nogil=True)
def _backward_step(tr, em_t, beta, nb):
    """``beta`` of frame t (in place) from that of frame t + 1, whose transition
    and emissions are ``tr`` and ``em_t``."""
    S = beta.shape[0]
    tot = 0.0
    for i in range(S):
        acc = 0.0
        for j in range(S):
            acc += tr[i, j] * em_t[j] * beta[j]
        nb[i] = acc
        tot += acc
    for i in range(S):
        beta[i] = nb[i] / tot


@njit(cache=True, nogil=True)
def _voiced_share(alpha_t, beta):
    S = beta.shape[0]
    post_tot = 0.0
    for j in range(S):
        post_tot += alpha_t[j] * beta[j]
    return 1.0 - alpha_t[S - 1] * beta[S - 1] / post_tot


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
        _emission_row(lf[t], ev[t], unv[t], em[t])
    # transition matrices between frames t-1 and t: tr[t, i, j]
    tr = np.zeros((T, S, S))
    for t in range(1, T):
        _transition(lf[t - 1], lf[t], a, stay, switch, tr[t])
    alpha = np.zeros((T, S))
    for j in range(S):
        alpha[0, j] = em[0, j]
    z = alpha[0].sum()
    for j in range(S):
        alpha[0, j] /= z
    for t in range(1, T):
        _forward_step(alpha[t - 1], tr[t], em[t], alpha[t])
    beta = np.ones(S)
    nb = np.empty(S)
    for t in range(T - 1, -1, -1):
        out[t] = _voiced_share(alpha[t], beta)
        if t == 0:
            break
        _backward_step(tr[t], em[t], beta, nb)
    return out


@njit(cache=True, nogil=True)
def _lag_push(lf, ev, unv, a, log_switch, log_stay, lag, t0, delta, new, back_r, lf_r, em_r,
              alpha_r, tr, beta, nb, out_state, out_prob):
    """Frames ``t0 .. t0 + F - 1`` (rows of ``lf``, ``ev``, ``unv``) into the fixed-lag
    decoder whose rings (``lag + 1`` rows, row ``t % (lag + 1)`` for frame ``t``)
    hold the frames before (``tr``: the transition potentials into each); decisions
    for the frames ``lag`` behind each new one go to ``out_state`` / ``out_prob``.
    Returns their number."""
    R = lag + 1
    K = lf.shape[1]
    S = K + 1
    stay = math.exp(log_stay)
    switch = math.exp(log_switch)
    n_out = 0
    for f in range(lf.shape[0]):
        t = t0 + f
        r = t % R
        if t == 0:
            _viterbi_init(lf[f], ev[f], unv[f], delta)
            _emission_row(lf[f], ev[f], unv[f], em_r[r])
            z = 0.0
            for j in range(S):
                alpha_r[r, j] = em_r[r, j]
                z += em_r[r, j]
            for j in range(S):
                alpha_r[r, j] /= z
        else:
            rp = (t - 1) % R
            _viterbi_step(lf_r[rp], lf[f], ev[f], unv[f], a, log_switch, log_stay, delta, new,
                          back_r[r])
            _emission_row(lf[f], ev[f], unv[f], em_r[r])
            _transition(lf_r[rp], lf[f], a, stay, switch, tr[r])
            _forward_step(alpha_r[rp], tr[r], em_r[r], alpha_r[r])
        for j in range(K):
            lf_r[r, j] = lf[f, j]
        if t >= lag:
            u = t - lag
            s = _argmax(delta)
            for j in range(S):
                beta[j] = 1.0
            for tau in range(t, u, -1):
                s = back_r[tau % R, s]
                _backward_step(tr[tau % R], em_r[tau % R], beta, nb)
            out_state[n_out] = s
            out_prob[n_out] = _voiced_share(alpha_r[u % R], beta)
            n_out += 1
    return n_out


@njit(cache=True, nogil=True)
def _lag_flush(a, log_switch, log_stay, lag, t_end, delta, back_r, lf_r, em_r, alpha_r, tr, beta,
               nb, out_state, out_prob):
    """Decisions for the last ``min(lag, t_end)`` frames at the end of the stream
    (as the offline recursions end).  Returns their number."""
    R = lag + 1
    S = delta.shape[0]
    first = max(0, t_end - lag)
    n = t_end - first
    s = _argmax(delta)
    for j in range(S):
        beta[j] = 1.0
    for tau in range(t_end - 1, first - 1, -1):
        out_state[tau - first] = s
        out_prob[tau - first] = _voiced_share(alpha_r[tau % R], beta)
        if tau == 0:
            break
        s = back_r[tau % R, s]
        _backward_step(tr[tau % R], em_r[tau % R], beta, nb)
    return n


class FixedLagDecoder:
    """Viterbi path and voicing posteriors, decided ``lag`` frames behind the input.

    Parameters
    ----------
    n_candidates : int
        Candidates per frame ``K`` (the lattice has ``K + 1`` states).
    a, log_switch, log_stay : float
        From :func:`transition_params`.
    lag : int
        Frames of look-ahead before a frame is decided (>= 1).

    Notes
    -----
    Memory is ``O(lag * K**2)``, whatever the length of the stream.
    """

    def __init__(self, n_candidates: int, a: float, log_switch: float, log_stay: float, *,
                 lag: int):
        if lag < 1:
            raise ValueError("lag must be at least one frame")
        K, S, R = int(n_candidates), int(n_candidates) + 1, int(lag) + 1
        self.K, self.lag = K, int(lag)
        self._params = (float(a), float(log_switch), float(log_stay))
        self._delta = np.empty(S)
        self._new = np.empty(S)
        self._back = np.zeros((R, S), dtype=np.int64)
        self._lf = np.full((R, K), np.nan)
        self._em = np.zeros((R, S))
        self._alpha = np.zeros((R, S))
        self._tr = np.zeros((R, S, S))  # transition into each frame of the ring
        self._beta = np.ones(S)
        self._nb = np.empty(S)
        self.frames_in = 0
        self.frames_out = 0

    def push(self, lf: np.ndarray, ev: np.ndarray, unv: np.ndarray):
        """Add frames; returns ``(state, voiced_prob)`` of the frames now decided
        (frames ``frames_out`` onwards, in order)."""
        F = lf.shape[0]
        state = np.empty(F, dtype=np.int64)
        prob = np.empty(F)
        n = _lag_push(np.ascontiguousarray(lf, dtype=np.float64),
                      np.ascontiguousarray(ev, dtype=np.float64),
                      np.ascontiguousarray(unv, dtype=np.float64), *self._params, self.lag,
                      self.frames_in, self._delta, self._new, self._back, self._lf, self._em,
                      self._alpha, self._tr, self._beta, self._nb, state, prob)
        self.frames_in += F
        self.frames_out += n
        return state[:n], prob[:n]

    def flush(self):
        """Decisions for the frames still pending at the end of the stream."""
        n_max = min(self.lag, self.frames_in)
        state = np.empty(n_max, dtype=np.int64)
        prob = np.empty(n_max)
        if self.frames_in == 0:
            return state, prob
        n = _lag_flush(*self._params, self.lag, self.frames_in, self._delta, self._back,
                       self._lf, self._em, self._alpha, self._tr, self._beta, self._nb,
                       state, prob)
        self.frames_out += n
        return state[:n], prob[:n]
