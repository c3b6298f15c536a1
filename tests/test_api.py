"""The public face: the package's documented example runs, the contract's names exist."""

from __future__ import annotations

import doctest

import numpy as np

import harmtrack


def test_package_docstring_example_runs():
    result = doctest.testmod(harmtrack)
    assert result.attempted > 0 and result.failed == 0


def test_public_names_and_track_fields():
    for name in harmtrack.__all__:
        assert getattr(harmtrack, name) is not None
    sr = 16000
    t = np.arange(sr // 2) / sr
    tr = harmtrack.track(0.3 * np.sin(2 * np.pi * 200.0 * t), sr)
    for field in ("times", "f0_hz", "voiced", "voicing_prob", "harmonic_amplitudes",
                  "model_order", "hnr_db"):
        assert getattr(tr, field).shape[0] == tr.times.shape[0]
    assert tr.frame_s > 0 and tr.settings["preset"] == "voice"
    assert tr.settings["frame_s"] == tr.frame_s


def test_unit_conversions():
    # MIDI note numbers: A4 = 440 Hz = note 69, 12 notes per octave (MIDI tuning
    # standard); cents: 1200 per octave.
    from harmtrack.result import hz_to_cents, hz_to_midi

    np.testing.assert_allclose(hz_to_midi([440.0, 880.0, 261.6255653]), [69.0, 81.0, 60.0],
                               atol=1e-6)
    np.testing.assert_allclose(hz_to_cents(20.0, ref_hz=10.0), 1200.0)
    assert np.isnan(hz_to_midi(np.nan))
    sr = 16000
    t = np.arange(sr // 2) / sr
    tr = harmtrack.track(0.3 * np.sin(2 * np.pi * 220.0 * t), sr)
    v = tr.voiced
    np.testing.assert_allclose(np.median(tr.f0_midi()[v]), 57.0, atol=0.01)  # A3
    db = tr.amplitudes_db()
    np.testing.assert_allclose(np.median(db[v, 0]), 20 * np.log10(0.3), atol=0.05)


def test_evidence_map_agrees_with_the_candidates():
    # The full evidence map (for figures) and the per-frame candidate search read
    # the same evidence: the best candidate sits at the map's maximum.
    import math

    from harmtrack import spectral, synth
    from harmtrack.config import make_config
    from harmtrack.salience import evidence_map
    from harmtrack.tracker import MISMATCH, RESIDUAL_FLOOR, Analyzer

    sr = 8000
    y = synth.harmonic_tone(0.5, sr, f0_hz=130.0, amplitudes=[0.3, 0.2, 0.1, 0.05], seed=3)
    rc = make_config("voice").resolve(sr)
    an = Analyzer.build(rc)
    starts = spectral.frame_starts(np.arange(10, 40), rc.hop, rc.frame_len)
    lf, ev_c, _, best = an.candidates(y, starts)
    P, R = spectral.windowed_spectra(y, starts, an.window, rc.nfft)
    pen = math.log(an.n_eff)
    ev, order, _ = evidence_map(P, R, np.ones(R.size), *an.kernel_tables, an.grid_hz.size,
                                an.norm, an.n_eff, pen, 1.5 * pen, RESIDUAL_FLOOR, MISMATCH)
    g = np.argmax(ev, axis=1)
    np.testing.assert_allclose(an.log2_grid[g], lf[:, 0], atol=0.5 * (an.log2_grid[1] - an.log2_grid[0]))
    assert np.all(best >= ev.max(axis=1) - 1e-6)  # the parabola's top is not below the grid's
    assert np.all(order[np.arange(g.size), g] >= 4)
