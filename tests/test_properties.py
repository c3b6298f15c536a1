"""Property-based checks of :func:`harmtrack.track` over f0, level and sample rate."""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

import harmtrack
from harmtrack import synth

# Levels up to 10 (and 10 x 100 when scaled) are intended here: float input above full
# scale is legal, so the clipping warning is silenced for this module.
pytestmark = pytest.mark.filterwarnings("ignore:.*looks clipped:harmtrack.HarmtrackWarning")

SAMPLE_RATES = [8000, 11025, 16000, 22050, 44100, 48000, 96000, 192000]

PROPERTY_SETTINGS = settings(derandomize=True, max_examples=20, deadline=None, database=None)


@st.composite
def tones(draw):
    """A stationary harmonic tone with its parameters."""
    sr = draw(st.sampled_from(SAMPLE_RATES))
    f0 = draw(st.floats(80.0, 600.0))
    scale = 10.0 ** draw(st.floats(-3.0, 1.0))  # amplitude scale 1e-3 .. 10
    duration = draw(st.floats(0.4, 0.6))
    n_harm = draw(st.integers(2, 6))
    seed = draw(st.integers(0, 2**16))
    amps = scale * 0.7 ** np.arange(n_harm)
    y = synth.harmonic_tone(duration, sr, f0_hz=f0, amplitudes=amps, seed=seed)
    return y, sr, f0, amps


def _track(y, sr):
    return harmtrack.track(y, sr, preset="voice")


@PROPERTY_SETTINGS
@given(tone=tones())
def test_tone_is_tracked_within_10_cents(tone, cents):
    y, sr, f0, _ = tone
    tr = _track(y, sr)
    err = np.abs(cents(tr.f0_hz, f0))
    err[~tr.voiced] = np.inf  # an unvoiced frame counts as a miss
    assert np.median(err) <= 10.0, (sr, f0, float(np.median(err)), float(tr.voiced.mean()))


@PROPERTY_SETTINGS
@given(tone=tones())
def test_times_stay_within_the_signal(tone):
    y, sr, _, _ = tone
    tr = _track(y, sr)
    duration = y.size / sr
    hop = 0.01
    assert tr.times[0] == 0.0
    np.testing.assert_allclose(np.diff(tr.times), hop, rtol=1e-9)
    # the last frame centre is the last sample or before it, and less than a hop before it
    assert tr.times[-1] <= (y.size - 1) / sr + 1e-9 <= duration
    assert tr.times[-1] > (y.size - 1) / sr - hop
    for arr in (tr.f0_hz, tr.voiced, tr.voicing_prob, tr.model_order, tr.hnr_db):
        assert arr.shape == tr.times.shape
    assert tr.harmonic_amplitudes.shape == (tr.times.size, 30)


@PROPERTY_SETTINGS
@given(tone=tones(), log_c=st.floats(-2.0, 2.0))
def test_scaling_input_scales_amplitudes_only(tone, log_c, cents):
    y, sr, _, _ = tone
    c = 10.0 ** log_c
    a = _track(y, sr)
    b = _track(c * y, sr)
    assert np.array_equal(a.voiced, b.voiced)
    assert np.array_equal(np.isnan(a.f0_hz), np.isnan(b.f0_hz))
    v = a.voiced
    df0 = np.abs(cents(b.f0_hz[v], a.f0_hz[v]))
    assert np.all(df0 <= 0.01), float(df0.max())  # cents
    A, B = a.harmonic_amplitudes, b.harmonic_amplitudes
    assert np.array_equal(np.isnan(A), np.isnan(B))
    assert np.array_equal(A == 0.0, B == 0.0)
    pos = A > 0
    ddb = np.abs(20.0 * np.log10(B[pos] / (c * A[pos])))
    assert np.all(ddb <= 0.1), float(ddb.max())  # dB


@PROPERTY_SETTINGS
@given(tone=tones(), noise_seed=st.integers(0, 1000))
def test_two_runs_give_identical_tracks(tone, noise_seed):
    y, sr, _, _ = tone
    y = synth.add_noise(y, 20.0, seed=noise_seed)
    a = _track(y, sr)
    b = _track(y.copy(), sr)
    for field in ("times", "f0_hz", "voiced", "voicing_prob", "harmonic_amplitudes",
                  "model_order", "hnr_db"):
        x, z = getattr(a, field), getattr(b, field)
        assert np.array_equal(x, z, equal_nan=x.dtype.kind == "f"), field
    assert a.settings == b.settings
