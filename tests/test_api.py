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
