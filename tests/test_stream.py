"""Streaming: blocks of any size in, the offline track out after a fixed delay."""

from __future__ import annotations

import numpy as np
import pytest

import harmtrack
from harmtrack import engine_synth as es
from harmtrack import smoothing, synth
from harmtrack.errors import HarmtrackError, InputError
from harmtrack.stream import LATENCY_BUDGET_S, WARMUP_S, StreamTracker, concat_tracks

SR = 16000


def _long_recording(total_s, seed, snr_db, sr=SR):
    return synth.speakers_recording(total_s, sr=sr, seed=seed, snr_db=snr_db)


def _stream(y, sr, block, **kw):
    st = StreamTracker(sr, **kw)
    parts = [st.feed(y[i:i + block]) for i in range(0, y.size, block)] + [st.flush()]
    return concat_tracks(parts), st


def _agree(a, b):
    """Frames where both are unvoiced, or both voiced within 10 cents."""
    cents = np.abs(1200.0 * np.log2(a.f0_hz / b.f0_hz))
    return (~a.voiced & ~b.voiced) | (a.voiced & b.voiced & (cents <= 10.0))


@pytest.fixture(scope="module")
def long_voice():
    y = _long_recording(40.0, seed=2, snr_db=20.0)
    return y, harmtrack.track(y, SR)


@pytest.mark.parametrize("block", [160, 1601, 4097, 10**7])
def test_streaming_equals_offline(long_voice, block):
    # The check: >= 99 % of frames agree within 10 cents with track().
    y, off = long_voice
    tr, st = _stream(y, SR, block)
    assert len(tr) == len(off)
    np.testing.assert_array_equal(tr.times, off.times)
    assert np.mean(_agree(tr, off)) >= 0.99
    assert tr.harmonic_amplitudes.shape == off.harmonic_amplitudes.shape


def test_results_do_not_depend_on_the_block_size():
    y = _long_recording(12.0, seed=5, snr_db=25.0)
    ref, _ = _stream(y, SR, 10**7)
    assert np.mean(_agree(ref, harmtrack.track(y, SR))) >= 0.99  # so every block size agrees
    for block in (1, 7, 333):
        tr, _ = _stream(y, SR, block)
        for name in ("f0_hz", "voicing_prob", "harmonic_amplitudes", "hnr_db"):
            np.testing.assert_array_equal(getattr(tr, name), getattr(ref, name), err_msg=name)
        np.testing.assert_array_equal(tr.voiced, ref.voiced)


def test_other_input_rate_goes_through_the_stream_resampler():
    from harmtrack.audio import resample

    y = resample(_long_recording(15.0, seed=7, snr_db=25.0), SR, 44100)[0]
    off = harmtrack.track(y, 44100)
    tr, st = _stream(y, 44100, 4410)
    assert len(tr) == len(off)
    assert np.mean(_agree(tr, off)) >= 0.99
    assert st.latency_s <= LATENCY_BUDGET_S


@pytest.mark.parametrize("sr", [8000, 16000, 44100, 48000])
def test_default_voice_latency_within_budget(sr):
    st = StreamTracker(sr)
    assert 0.03 < st.latency_s <= LATENCY_BUDGET_S
    assert st.lag_frames >= 5


def test_frames_leave_within_the_stated_delay():
    y = _long_recording(6.0, seed=3, snr_db=30.0)
    st = StreamTracker(SR)
    block = 80  # 5 ms
    worst = 0.0
    for i in range(0, y.size, block):
        tr = st.feed(y[i:i + block])
        now = (i + min(block, y.size - i)) / SR
        for t in tr.times:
            if t > WARMUP_S:
                worst = max(worst, now - t)
    # a frame leaves with the first block that brings the input past t + latency
    assert worst <= st.latency_s + block / SR + 1e-9
    assert worst >= st.latency_s - 0.011  # and not much earlier (the delay is real)


def test_fixed_lag_decoder_matches_offline_when_the_lag_covers_the_stream():
    rng = np.random.default_rng(1)
    T, K = 300, 6
    lf = np.log2(rng.uniform(80, 300, (T, K)))
    lf[rng.random((T, K)) < 0.1] = np.nan
    lf[:, 0] = np.log2(150 * 2 ** (0.3 * np.sin(np.arange(T) / 30)))
    ev = rng.normal(0, 2, (T, K))
    ev[:, 0] += 3
    ev[120:160] -= 6
    unv = np.zeros(T)
    a, ls, lst = smoothing.transition_params(hop_s=0.01, smoothing=1.0, glide_oct_s=0.5,
                                             voiced_run_s=0.15)
    path = smoothing.viterbi(lf, ev, unv, a, ls, lst)
    prob = smoothing.voicing_posterior(lf, ev, unv, a, ls, lst)
    for lag, block in ((400, 1), (400, 37), (10, 1), (10, 64)):
        dec = smoothing.FixedLagDecoder(K, a, ls, lst, lag=lag)
        out = [dec.push(lf[i:i + block], ev[i:i + block], unv[i:i + block])
               for i in range(0, T, block)] + [dec.flush()]
        state = np.concatenate([o[0] for o in out])
        p = np.concatenate([o[1] for o in out])
        assert state.size == T
        if lag >= T:  # the offline recursions exactly
            np.testing.assert_array_equal(state, path)
            np.testing.assert_array_equal(p, prob)
        else:
            assert np.mean(state == path) >= 0.99
            assert np.max(np.abs(p - prob)) < 1e-3


def test_engine_stream_follows_a_steady_engine():
    t, r = es.rpm_profile(8.0, kind="steady", rpm=1200.0, hop_s=0.01, seed=0)
    y = es.engine(t, r, SR, cylinders=6, strokes=4, seed=0, weak_cylinder=0, weak_db=-np.inf,
                  highpass_hz=150.0, noise_snr_db=5.0, noise_color="white")
    kw = dict(preset="engine", cylinders=6, rpm_min=800, rpm_max=4000)
    off = harmtrack.track(y, SR, **kw)
    tr, st = _stream(y, SR, 2000, **kw)
    assert len(tr) == len(off) and tr.is_engine
    n = min(len(tr), r.size)
    assert np.mean(np.abs(tr.rpm[:n] / r[:n] - 1.0) < 0.01) >= 0.95
    assert np.mean(tr.uneven_flag) >= 0.9  # the dead cylinder, as offline
    assert tr.order_amplitudes.shape == off.order_amplitudes.shape
    assert st.latency_s < 3.0


def test_short_stream_and_empty_calls():
    y = _long_recording(0.2, seed=1, snr_db=30.0)[:3000]
    st = StreamTracker(SR)
    assert len(st.feed(np.zeros(0))) == 0
    first = st.feed(y)
    rest = st.flush()
    tr = concat_tracks([first, rest])
    assert len(tr) == len(harmtrack.track(y, SR))
    assert len(st.flush()) == 0  # a second flush gives nothing more


def test_bad_stream_input():
    st = StreamTracker(SR)
    with pytest.raises(InputError, match="1-D"):
        st.feed(np.zeros((2, 100)))
    with pytest.raises(InputError, match="non-finite"):
        st.feed(np.array([0.0, np.nan]))
    st.flush()
    with pytest.raises(HarmtrackError, match="ended"):
        st.feed(np.zeros(10))
    with pytest.raises(HarmtrackError, match="lag_s"):
        StreamTracker(SR, lag_s=0.0)
    with pytest.raises(HarmtrackError, match="fmin"):
        StreamTracker(SR, fmin=900.0, fmax=800.0)
    with pytest.raises(InputError, match="shorter than one analysis frame"):
        s2 = StreamTracker(SR)
        s2.feed(np.zeros(100))
        s2.flush()


def test_decimator_meets_its_design_and_the_one_pass_form_equals_two_steps():
    from harmtrack import spectral

    # Kaiser's design formulas (Kaiser 1974): 80 dB stopband from 0.525 x the output
    # rate; the passband (to 0.475 x) flat within the ripple of that attenuation.
    h = spectral.decimator_taps(2)
    H = np.abs(np.fft.rfft(h, 1 << 16))
    f = np.linspace(0.0, 1.0, H.size)  # x the input Nyquist; output Nyquist = 0.5
    assert np.max(np.abs(20 * np.log10(H[f <= 0.475]))) < 0.01
    assert 20 * np.log10(H[f >= 0.525].max()) < -79.0
    rng = np.random.default_rng(0)
    wf = spectral.whitening_filter(rng.uniform(0.5, 2.0, 401) ** 2, n_taps=129)
    for n in (900, 48000, 160001):
        x = rng.standard_normal(n)
        yw, ys = spectral.whiten_and_decimate(x, wf)
        yw0 = spectral.prewhiten(x, wf)
        np.testing.assert_allclose(yw, yw0, atol=1e-12)
        np.testing.assert_allclose(ys, spectral.decimate(yw0, 2), atol=1e-12)
        # and the streaming form, piece by piece
        pieces = [spectral.fir_segment(yw0, 0, n, h, lo, min(lo + 2000, 2 * ys.size - 1), 2)
                  for lo in range(0, 2 * ys.size - 1, 2000)]
        np.testing.assert_allclose(np.concatenate(pieces), ys, atol=1e-12)


def test_digital_silence_is_unvoiced_offline_and_streamed():
    # A muted start and zero padding at the end: nothing voiced there, and the
    # silence does not count as the recording's noise floor.
    y0 = synth.speakers_recording(4.0, seed=8, snr_db=30.0)
    y = np.concatenate([np.zeros(SR), y0, np.zeros(SR)])
    off = harmtrack.track(y, SR)
    tr, _ = _stream(y, SR, 800)
    for t in (off, tr):
        assert not np.any(t.voiced[:95]) and not np.any(t.voiced[-95:])
        assert np.mean(t.voiced[100:500]) > 0.5
