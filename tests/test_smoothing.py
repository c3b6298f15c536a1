"""Viterbi decoding and voicing posteriors against brute-force references.

The references enumerate every state sequence of small lattices and apply the
definitions directly: the most probable sequence (A. J. Viterbi, IEEE Trans. Inf.
Theory 13(2), 1967) and the marginal state posteriors of forward-backward
(L. R. Rabiner, Proc. IEEE 77(2), 1989, eqs. 18-27).
"""

from __future__ import annotations

import itertools
import math

import numpy as np
import pytest

from harmtrack import smoothing


def _lattice(rng, T=6, K=3):
    lf = rng.uniform(6.5, 8.0, (T, K))
    lf[rng.random((T, K)) < 0.25] = np.nan
    ev = rng.normal(0.0, 4.0, (T, K))
    unv = rng.normal(0.0, 2.0, T)
    return lf, ev, unv


def _path_score(path, lf, ev, unv, a, log_switch, log_stay):
    K = lf.shape[1]
    score = 0.0
    for t, j in enumerate(path):
        if j < K:
            if math.isnan(lf[t, j]):
                return -math.inf
            score += ev[t, j]
        else:
            score += unv[t]
        if t:
            i = path[t - 1]
            if i < K and j < K:
                score += log_stay - a * (lf[t, j] - lf[t - 1, i]) ** 2
            elif i == K and j == K:
                score += log_stay
            else:
                score += log_switch
    return score


@pytest.mark.parametrize("seed", range(6))
def test_viterbi_finds_the_best_sequence(seed):
    rng = np.random.default_rng(seed)
    lf, ev, unv = _lattice(rng)
    a, lsw, lst = smoothing.transition_params(hop_s=0.01, smoothing=1.0, glide_oct_s=0.5,
                                              voiced_run_s=0.15)
    K = lf.shape[1]
    best = max(itertools.product(range(K + 1), repeat=lf.shape[0]),
               key=lambda p: _path_score(p, lf, ev, unv, a, lsw, lst))
    got = smoothing.viterbi(lf, ev, unv, a, lsw, lst)
    assert _path_score(tuple(got), lf, ev, unv, a, lsw, lst) == pytest.approx(
        _path_score(best, lf, ev, unv, a, lsw, lst), abs=1e-9)


@pytest.mark.parametrize("seed", range(6))
def test_voicing_posterior_equals_enumeration(seed):
    rng = np.random.default_rng(100 + seed)
    lf, ev, unv = _lattice(rng)
    a, lsw, lst = smoothing.transition_params(hop_s=0.01, smoothing=1.0, glide_oct_s=0.5,
                                              voiced_run_s=0.15)
    K = lf.shape[1]
    paths = list(itertools.product(range(K + 1), repeat=lf.shape[0]))
    scores = np.array([_path_score(p, lf, ev, unv, a, lsw, lst) for p in paths])
    w = np.exp(scores - scores.max())
    voiced = np.array([[j < K for j in p] for p in paths], dtype=float)
    expected = (w[:, None] * voiced).sum(axis=0) / w.sum()
    got = smoothing.voicing_posterior(lf, ev, unv, a, lsw, lst)
    np.testing.assert_allclose(got, expected, atol=1e-12)


def test_glide_cost_per_second_does_not_depend_on_the_hop():
    # A steady glide of r octaves per second costs r^2 / (2 sigma^2) nats per
    # second under the Brownian prior, whatever the hop.
    costs = []
    for hop in (0.005, 0.01, 0.02):
        a, _, _ = smoothing.transition_params(hop_s=hop, smoothing=1.0, glide_oct_s=0.5,
                                              voiced_run_s=0.15)
        step = 1.5 * hop  # 1.5 octaves per second
        costs.append(a * step**2 / hop)
    np.testing.assert_allclose(costs, costs[0], rtol=1e-12)
