"""Accuracy of the frame estimator and of the tracker.

* precision of :func:`harmtrack.tracker.estimate_frame` against the Cramér-Rao
  bound, with the bound itself checked against the exact Fisher information;
* harmonic amplitudes of :func:`harmtrack.track` against the synthesised truth;
* missing fundamentals / missing low harmonics scored with ``mir_eval.melody``;
* agreement with ``librosa.pyin`` on clean voices;
* voicing decisions on silence, noise and tones.
"""

from __future__ import annotations

import librosa
import mir_eval
import numpy as np
import pytest

import harmtrack
from harmtrack import synth
from harmtrack.nls import crlb_f0
from harmtrack.tracker import estimate_frame

SR = 16000

# Two stationary test signals for the precision study (amplitudes are linear peaks).
CONFIG_A = dict(f0_hz=187.3, amplitudes=np.array([1.0, 0.8, 0.6, 0.4, 0.2]), n=800)
CONFIG_B = dict(f0_hz=123.4, amplitudes=0.85 ** np.arange(8), n=1200)
CONFIGS = {"A": CONFIG_A, "B": CONFIG_B}


# ---------------------------------------------------------------------------
# helpers
# ---------------------------------------------------------------------------


def _harmonic_frame(f0_hz, amplitudes, phases, n, sr=SR):
    """``x[n] = sum_k A_k cos(k w n + phi_k)``, ``n = 0 .. N-1``, ``w = 2 pi f0 / sr``."""
    w = 2.0 * np.pi * f0_hz / sr
    k = np.arange(1, len(amplitudes) + 1)[:, None]
    t = np.arange(n)[None, :]
    return np.sum(np.asarray(amplitudes)[:, None] * np.cos(k * w * t + np.asarray(phases)[:, None]),
                  axis=0)


def _exact_crlb_f0_hz(f0_hz, amplitudes, phases, n, noise_var, sr=SR):
    """CRLB std of f0 (Hz) from the exact, finite-N Fisher information matrix.

    Parameters ``theta = (w, A_1..A_K, phi_1..phi_K)`` of the real harmonic model
    ``s[n] = sum_k A_k cos(k w n + phi_k)`` in white Gaussian noise of variance
    ``sigma^2``.  Fisher information of a deterministic signal in white Gaussian
    noise: ``I = J^T J / sigma^2`` with ``J[n, i] = ds[n] / dtheta_i``
    (S. M. Kay, Fundamentals of Statistical Signal Processing: Estimation Theory,
    1993, ch. 3).  The bound on ``w`` is ``[I^-1]_00``.
    """
    a = np.asarray(amplitudes, dtype=np.float64)
    ph = np.asarray(phases, dtype=np.float64)
    w = 2.0 * np.pi * f0_hz / sr
    K = a.size
    t = np.arange(n, dtype=np.float64)
    k = np.arange(1, K + 1)[:, None]
    theta = k * w * t[None, :] + ph[:, None]  # (K, N)
    J = np.empty((n, 1 + 2 * K))
    J[:, 0] = -np.sum(a[:, None] * k * t[None, :] * np.sin(theta), axis=0)  # d/dw
    J[:, 1:1 + K] = np.cos(theta).T  # d/dA_k
    J[:, 1 + K:] = (-a[:, None] * np.sin(theta)).T  # d/dphi_k
    fim = J.T @ J / noise_var
    var_w = np.linalg.inv(fim)[0, 0]
    return float(np.sqrt(var_w) * sr / (2.0 * np.pi))


def _noise_var(amplitudes, snr_db):
    """White-noise variance giving ``snr_db`` re the mean power ``sum A_k^2 / 2``."""
    p_sig = 0.5 * float(np.sum(np.asarray(amplitudes) ** 2))
    return p_sig / 10.0 ** (snr_db / 10.0)


# ---------------------------------------------------------------------------
# a. precision at the Cramér-Rao bound
# ---------------------------------------------------------------------------


@pytest.mark.parametrize("name", ["A", "B"])
def test_crlb_formula_matches_exact_fisher_information(name):
    cfg = CONFIGS[name]
    rng = np.random.default_rng(11)
    sigma2 = 0.37
    bound = crlb_f0(cfg["amplitudes"], cfg["n"], sigma2, SR)
    assert np.isfinite(bound) and bound > 0
    for _ in range(5):
        phases = rng.uniform(0.0, 2.0 * np.pi, cfg["amplitudes"].size)
        exact = _exact_crlb_f0_hz(cfg["f0_hz"], cfg["amplitudes"], phases, cfg["n"], sigma2)
        # Asymptotic CRLB 24 sigma^2 / (N (N^2 - 1) sum k^2 A_k^2) on w:
        # Christensen & Jakobsson, Multi-Pitch Estimation (2009), ch. 2;
        # checked here against the exact Fisher information (Kay 1993, ch. 3).
        assert bound == pytest.approx(exact, rel=0.05), (bound, exact, phases)


def test_crlb_scales_with_noise_and_length():
    # The bound's std grows as sigma and falls as N^-3/2 (Christensen & Jakobsson 2009,
    # ch. 2): doubling sigma doubles it, N -> 2N divides it by about 2^1.5.
    a = CONFIG_A["amplitudes"]
    b1 = crlb_f0(a, 800, 1.0, SR)
    assert crlb_f0(a, 800, 4.0, SR) == pytest.approx(2.0 * b1, rel=1e-12)
    assert crlb_f0(a, 1600, 1.0, SR) == pytest.approx(b1 / 2.0 ** 1.5, rel=1e-3)


CRLB_CASES = [("A", 0.0), ("A", 10.0), ("A", 20.0), ("A", 30.0), ("B", 10.0), ("B", 30.0)]


@pytest.mark.parametrize("name,snr_db", CRLB_CASES)
def test_estimate_frame_reaches_crlb(name, snr_db):
    cfg = CONFIGS[name]
    f0, amps, n = cfg["f0_hz"], cfg["amplitudes"], cfg["n"]
    draws = 250
    sigma2 = _noise_var(amps, snr_db)
    rng = np.random.default_rng([int(snr_db), n, 7])
    est = np.empty(draws)
    for d in range(draws):
        phases = rng.uniform(0.0, 2.0 * np.pi, amps.size)
        x = _harmonic_frame(f0, amps, phases, n) + rng.normal(0.0, np.sqrt(sigma2), n)
        est[d] = estimate_frame(x, SR, fmin_hz=60.0, fmax_hz=500.0)[0]
    assert np.all(np.isfinite(est)), f"{np.sum(~np.isfinite(est))} of {draws} frames gave no f0"
    err = est - f0
    bound = crlb_f0(amps, n, sigma2, SR)
    rmse = float(np.sqrt(np.mean(err**2)))
    bias = float(np.mean(err))
    ratio = rmse / bound
    # CRLB: Christensen & Jakobsson, Multi-Pitch Estimation (2009), ch. 2 (the NLS
    # estimator is asymptotically efficient).  Measured ratios lie near 1.0-1.1.
    assert ratio <= 1.3, f"RMSE {rmse:.4g} Hz = {ratio:.3f} x CRLB {bound:.4g} Hz"
    # An RMSE far below the bound would mean the noise model of this test is wrong
    # (with 250 draws the RMSE estimate has a relative sd of about 4.5 %).
    assert ratio >= 0.8, f"RMSE {rmse:.4g} Hz = {ratio:.3f} x CRLB {bound:.4g} Hz"
    # Bias: the standard error of the mean is CRLB / sqrt(250) ~ 0.063 CRLB.
    assert abs(bias) <= 0.25 * bound, f"bias {bias:.4g} Hz vs CRLB {bound:.4g} Hz"


def test_estimate_frame_amplitudes_and_order(cents):
    # Nearly noise-free frame (80 dB SNR): the NLS fit recovers f0, the order and the
    # amplitudes.  The f0 refinement leaves an error of about 1 mHz here (measured),
    # hence 0.05 cent rather than the bound's ~1e-4 cent.
    amps = CONFIG_A["amplitudes"]
    x = _harmonic_frame(CONFIG_A["f0_hz"], amps, [0.3, 1.1, 2.0, 4.0, 5.5], CONFIG_A["n"])
    x = x + np.random.default_rng(3).normal(0.0, 1e-4, x.size)
    f0, order, got = estimate_frame(x, SR, fmin_hz=60.0, fmax_hz=500.0, max_harmonics=12)
    assert abs(cents(f0, CONFIG_A["f0_hz"])) < 0.05
    assert order == 5
    assert got.shape == (12,)
    np.testing.assert_allclose(20 * np.log10(got[:5] / amps), 0.0, atol=0.01)  # dB
    assert np.all(got[5:] == 0.0)


# ---------------------------------------------------------------------------
# b. harmonic amplitudes from the tracker
# ---------------------------------------------------------------------------

TRUE_AMPS = 0.3 * np.array([1.0, 0.0, 0.5, 0.0, 0.25, 0.3])
PRESENT = np.flatnonzero(TRUE_AMPS > 0)
ABSENT = np.flatnonzero(TRUE_AMPS == 0)


@pytest.mark.parametrize("f0_hz", [140.0, 211.7])
@pytest.mark.parametrize("prewhiten", [True, False])
def test_track_harmonic_amplitudes(f0_hz, prewhiten):
    y = synth.harmonic_tone(1.5, SR, f0_hz=f0_hz, amplitudes=TRUE_AMPS, seed=3)
    y = synth.add_noise(y, 30.0, seed=4, ref="all")
    tr = harmtrack.track(y, SR, prewhiten=prewhiten)
    v = tr.voiced
    assert v.mean() >= 0.95
    A = tr.harmonic_amplitudes[v]
    assert A.shape[1] == 30
    med = np.median(A[:, PRESENT], axis=0)
    err_db = 20.0 * np.log10(med / TRUE_AMPS[PRESENT])
    assert np.all(np.abs(err_db) <= 0.5), dict(zip(PRESENT + 1, np.round(err_db, 3)))
    # present harmonics are reported on (nearly) every voiced frame
    assert np.all(np.mean(A[:, PRESENT] > 0, axis=0) >= 0.98)
    # absent harmonics 2 and 4 are exactly 0 on >= 98 % of the voiced frames
    zero_share = np.mean(A[:, ABSENT] == 0.0, axis=0)
    assert np.all(zero_share >= 0.98), dict(zip(ABSENT + 1, zero_share))
    # harmonics above the sixth are absent too (inside the band they read 0)
    above = A[:, 6:]
    inband = np.isfinite(above)
    assert np.mean(above[inband] == 0.0) >= 0.98


# ---------------------------------------------------------------------------
# c. missing harmonics: raw pitch accuracy (mir_eval.melody) and octave errors
# ---------------------------------------------------------------------------


def _score_against_truth(times, f0_true, tr):
    """mir_eval.melody raw pitch accuracy and the number of octave errors."""
    ref = np.where(np.isnan(f0_true), 0.0, f0_true)
    est = np.where(tr.voiced, tr.f0_hz, 0.0)
    # mir_eval.melody.to_cent_voicing: (ref_voicing, ref_cent, est_voicing, est_cent)
    ref_v, ref_c, est_v, est_c = mir_eval.melody.to_cent_voicing(times, ref, tr.times, est)
    # mir_eval.melody raw pitch accuracy (50-cent tolerance)
    rpa = float(mir_eval.melody.raw_pitch_accuracy(ref_v, ref_c, est_v, est_c))
    both = tr.voiced & ~np.isnan(f0_true)
    octave = np.abs(np.log2(tr.f0_hz[both] / f0_true[both]))
    return rpa, int(np.sum(octave > 0.8)), octave


@pytest.mark.parametrize("harmonics", ["no_fundamental", (3, 10), "odd"], ids=str)
@pytest.mark.parametrize("kind", ["glide", "vibrato"])
@pytest.mark.parametrize("base_hz", [110.0, 165.0, 220.0])
def test_missing_harmonics(harmonics, kind, base_hz):
    times, f0 = synth.f0_contour(2.0, kind=kind, f0_hz=base_hz, seed=1)
    y = synth.voice(times, f0, SR, seed=2, harmonics=harmonics, unvoiced="silence")
    tr = harmtrack.track(y, SR)
    assert len(tr) == len(times)
    np.testing.assert_allclose(tr.times, times, atol=1e-9)
    rpa, n_octave, octave = _score_against_truth(times, f0, tr)
    worst = np.argsort(-octave)[:5]
    detail = f"rpa={rpa:.3f}, octave errors={n_octave}, worst |log2 ratio|={np.round(octave[worst], 3)}"
    assert rpa >= 0.98, detail
    assert n_octave == 0, detail


# ---------------------------------------------------------------------------
# d. agreement with librosa.pyin on clean voices
# ---------------------------------------------------------------------------

PYIN_VOICES = [(1, 100.0), (2, 150.0), (3, 220.0)]


@pytest.fixture(scope="module")
def pyin_runs():
    out = {}
    for seed, base in PYIN_VOICES:
        times, f0 = synth.f0_contour(2.0, kind="phrase", f0_hz=base, seed=seed)
        y = synth.voice(times, f0, SR, seed=seed)
        # librosa.pyin, centred frames: frame i is centred at i * hop_length samples
        fp, vflag, vprob = librosa.pyin(y, fmin=50, fmax=800, sr=SR, frame_length=1024,
                                        hop_length=160)
        out[(seed, base)] = (fp, vflag, vprob, harmtrack.track(y, SR))
    return out


@pytest.mark.parametrize("seed,base_hz", PYIN_VOICES)
def test_agrees_with_pyin_on_clean_voices(pyin_runs, seed, base_hz, cents):
    fp, vflag, vprob, tr = pyin_runs[(seed, base_hz)]
    n = min(fp.size, len(tr))
    assert abs(fp.size - len(tr)) <= 1
    # Confident pyin frames: voiced flag and voiced probability >= 0.5.  With these
    # pyin settings the voiced probability of a clean 100 Hz voice peaks near 0.7
    # (measured), so a 0.9 threshold would leave almost no frames to compare.
    conf = vflag[:n] & (vprob[:n] >= 0.5) & tr.voiced[:n]
    assert conf.sum() >= 60, f"only {conf.sum()} frames to compare"
    dev = np.abs(cents(tr.f0_hz[:n][conf], fp[:n][conf]))
    share = float(np.mean(dev <= 50.0))
    assert share >= 0.98, f"{share:.3f} within 50 cents; worst {np.sort(dev)[-5:]}"


# ---------------------------------------------------------------------------
# e. voicing
# ---------------------------------------------------------------------------


def _check_track_consistency(tr):
    assert np.all(np.isfinite(tr.voicing_prob))
    assert np.all((tr.voicing_prob >= 0.0) & (tr.voicing_prob <= 1.0))
    assert np.array_equal(np.isnan(tr.f0_hz), ~tr.voiced)
    assert np.all(np.isnan(tr.harmonic_amplitudes[~tr.voiced]))
    assert np.all(tr.model_order[~tr.voiced] == 0)


def test_silence_is_unvoiced():
    tr = harmtrack.track(np.zeros(2 * SR), SR)
    _check_track_consistency(tr)
    assert not tr.voiced.any()
    assert np.all(np.isnan(tr.f0_hz))


@pytest.mark.parametrize("level", [0.5, -0.25])
def test_constant_signal_is_unvoiced(level):
    # A constant has no period (common practice); nor may the ends of the
    # recording, where frames run past it, pass for one.
    tr = harmtrack.track(np.full(2 * SR, level), SR)
    _check_track_consistency(tr)
    assert not tr.voiced.any()


def test_offset_does_not_move_the_pitch(cents):
    y = synth.harmonic_tone(1.0, SR, f0_hz=180.0, amplitudes=[0.2, 0.1, 0.05], seed=2)
    a = harmtrack.track(y, SR)
    b = harmtrack.track(y + 0.3, SR)
    both = a.voiced & b.voiced
    assert both.mean() >= 0.95
    assert np.max(np.abs(cents(b.f0_hz[both], a.f0_hz[both]))) < 0.01


@pytest.mark.parametrize("seed", [0, 1, 2])
def test_white_noise_is_unvoiced(seed):
    y = 0.1 * np.random.default_rng(seed).standard_normal(3 * SR)
    tr = harmtrack.track(y, SR)
    _check_track_consistency(tr)
    assert tr.voiced.mean() <= 0.02
    assert np.median(tr.voicing_prob) <= 0.1


@pytest.mark.parametrize("f0_hz", [95.0, 155.0, 310.0])
def test_tone_is_voiced(f0_hz, cents):
    amps = 0.2 * np.array([1.0, 0.7, 0.5, 0.3, 0.2])
    y = synth.harmonic_tone(2.0, SR, f0_hz=f0_hz, amplitudes=amps, seed=1)
    tr = harmtrack.track(y, SR)
    _check_track_consistency(tr)
    assert tr.voiced.mean() >= 0.95
    assert np.median(tr.voicing_prob) >= 0.9
    err = np.abs(cents(tr.f0_hz[tr.voiced], f0_hz))
    assert np.median(err) <= 1.0
