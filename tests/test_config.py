"""Settings: presets, overrides and validation (:mod:`harmtrack.config`)."""

from __future__ import annotations

import dataclasses
import math

import numpy as np
import pytest

import harmtrack
from harmtrack import HarmtrackError, TrackerConfig, make_config
from harmtrack.synth import harmonic_tone

# (option, bad value): every value lies outside the range documented on TrackerConfig
OUT_OF_RANGE = [
    ("fmin_hz", 0.5),
    ("fmin_hz", -100.0),
    ("fmax_hz", 50000.0),
    ("hop_s", 0.0005),
    ("hop_s", 0.5),
    ("hop_s", float("nan")),
    ("frame_s", 0.005),
    ("frame_s", 2.0),
    ("analysis_sr", 2000),
    ("analysis_sr", 200000),
    ("band_hz", 50.0),
    ("max_harmonics", 0),
    ("max_harmonics", 101),
    ("max_harmonics", 2.5),
    ("grid_cents", 0.5),
    ("grid_cents", 60.0),
    ("n_candidates", 1),
    ("n_candidates", 21),
    ("smoothing", -0.1),
    ("smoothing", 25.0),
    ("smoothing", float("inf")),
    ("glide_oct_s", 0.01),
    ("glide_oct_s", 30.0),
    ("voiced_run_s", 0.001),
    ("voiced_run_s", 11.0),
    ("voiced_prior", 0.0),
    ("voiced_prior", 1.0),
    ("voiced_prior", 1.5),
]


def _named(msg: str, name: str, value) -> bool:
    """The message names the option and shows the offending value."""
    return name in msg and (repr(value) in msg or f"{value:g}" in msg)


@pytest.mark.parametrize("name,value", OUT_OF_RANGE, ids=lambda v: str(v))
def test_out_of_range_value_is_rejected(name, value):
    with pytest.raises(HarmtrackError) as info:
        make_config("voice", **{name: value})
    assert _named(str(info.value), name, value), str(info.value)


@pytest.mark.parametrize("name,value", OUT_OF_RANGE, ids=lambda v: str(v))
def test_out_of_range_value_is_rejected_by_the_dataclass(name, value):
    with pytest.raises(HarmtrackError) as info:
        TrackerConfig(**{name: value})
    assert _named(str(info.value), name, value), str(info.value)


@pytest.mark.parametrize("name,value", [("hop_s", 0.5), ("smoothing", -1.0),
                                        ("max_harmonics", 0), ("voiced_prior", 1.0)])
def test_track_rejects_bad_options_before_analysis(name, value):
    with pytest.raises(HarmtrackError, match=name):
        harmtrack.track(np.zeros(8000), 16000, **{name: value})


def test_error_is_a_value_error():
    assert issubclass(HarmtrackError, ValueError)
    with pytest.raises(ValueError):
        make_config("voice", hop_s=-1.0)


@pytest.mark.parametrize("value", ["10", [1], True, 3j], ids=repr)
def test_non_numeric_values_are_rejected(value):
    # strings, lists, booleans and complex numbers are not whole numbers
    with pytest.raises(HarmtrackError, match="max_harmonics"):
        make_config("voice", max_harmonics=value)


@pytest.mark.parametrize("preset", ["opera", "Voice", "", 3, None])
def test_unknown_preset(preset):
    with pytest.raises(HarmtrackError) as info:
        make_config(preset)
    msg = str(info.value)
    assert repr(preset) in msg
    assert "singing" in msg and "voice" in msg  # lists what would work


def test_unknown_preset_through_track():
    with pytest.raises(HarmtrackError, match="opera"):
        harmtrack.track(np.zeros(8000), 16000, preset="opera")


def test_unknown_option():
    with pytest.raises(HarmtrackError, match="frame_ms"):
        make_config("voice", frame_ms=40)


@pytest.mark.parametrize("fmin,fmax", [(300.0, 200.0), (250.0, 250.0)])
def test_fmin_not_below_fmax(fmin, fmax):
    with pytest.raises(HarmtrackError) as info:
        make_config("voice", fmin_hz=fmin, fmax_hz=fmax)
    msg = str(info.value)
    assert f"fmin={fmin:g}" in msg and f"fmax={fmax:g}" in msg, msg
    with pytest.raises(HarmtrackError, match="fmin"):
        harmtrack.track(np.zeros(8000), 16000, fmin=fmin, fmax=fmax)


def test_fmax_above_band_for_8khz_input():
    # At 8 kHz the analysed band ends at 95 % of 4 kHz = 3800 Hz.
    y = harmonic_tone(0.5, 8000, f0_hz=200.0, amplitudes=[0.3, 0.2], seed=0)
    with pytest.raises(HarmtrackError) as info:
        harmtrack.track(y, 8000, preset="singing", fmax=3900.0)
    msg = str(info.value)
    assert "fmax=3900" in msg and "3800" in msg, msg
    with pytest.raises(HarmtrackError, match="fmax=3900"):
        make_config("singing", fmax_hz=3900.0).resolve(8000)
    # just below the band edge is accepted
    rc = make_config("singing", fmax_hz=3700.0).resolve(8000)
    assert rc.band_hz == pytest.approx(3800.0)
    # the same fmax is fine at a higher rate
    make_config("singing", fmax_hz=3900.0).resolve(16000)


def test_frame_too_short_for_fmin():
    # The frame must hold 1.5 periods of fmin: 20 ms holds only one period of 50 Hz.
    with pytest.raises(HarmtrackError) as info:
        make_config("voice", fmin_hz=50.0, frame_s=0.02).resolve(16000)
    msg = str(info.value)
    assert "fmin=50" in msg and "frame_s" in msg, msg
    with pytest.raises(HarmtrackError, match="fmin=50"):
        harmtrack.track(np.zeros(16000), 16000, fmin=50.0, frame_s=0.02)
    # exactly 1.5 periods is accepted
    rc = make_config("voice", fmin_hz=50.0, frame_s=0.03).resolve(16000)
    assert rc.frame_len == 480


@pytest.mark.parametrize("sr", [500.0, 500000.0])
def test_sample_rate_outside_supported_range(sr):
    with pytest.raises(HarmtrackError, match="sample rate"):
        make_config("voice").resolve(sr)


def _is_5_smooth(m):
    for p in (2, 3, 5):
        while m % p == 0:
            m //= p
    return m == 1


def test_voice_preset_resolves():
    cfg = make_config("voice")
    assert cfg.preset == "voice"
    assert (cfg.fmin_hz, cfg.fmax_hz) == (50.0, 800.0)  # documented speech range
    rc = cfg.resolve(16000)
    assert rc.sr == 16000 and rc.sr_in == 16000
    # automatic frame: max(30 ms, 2.5 periods of fmin) = 50 ms
    assert rc.frame_len == 800
    assert rc.hop == pytest.approx(160.0)
    assert rc.band_hz == pytest.approx(0.95 * 8000)
    # FFT size: the smallest 5-smooth length of at least twice the frame
    n = rc.nfft
    assert n >= 2 * rc.frame_len
    for p in (2, 3, 5):
        while n % p == 0:
            n //= p
    assert n == 1
    assert not any(_is_5_smooth(m) for m in range(2 * rc.frame_len, rc.nfft))
    # the candidate search runs on a copy decimated to the preset's search rate
    rs = rc.search()
    assert rs.sr == 8000 and rs.frame_len == 400 and rs.band_hz == pytest.approx(3800)
    # higher input rates are analysed at the preset's analysis rate
    rc48 = cfg.resolve(48000)
    assert rc48.sr == 16000 and rc48.sr_in == 48000
    # lower ones at their own rate
    rc8 = cfg.resolve(8000)
    assert rc8.sr == 8000 and rc8.frame_len == 400


def test_singing_preset_resolves():
    cfg = make_config("singing")
    assert cfg.preset == "singing"
    assert (cfg.fmin_hz, cfg.fmax_hz) == (60.0, 1600.0)  # documented singing range
    rc = cfg.resolve(44100)
    assert rc.sr == 22050
    frame_s = max(0.03, 2.5 / 60.0)
    n = int(round(frame_s * 22050))
    assert rc.frame_len == n + n % 2
    assert rc.frame_len % 2 == 0
    assert rc.band_hz == pytest.approx(0.95 * 11025)


@pytest.mark.parametrize("preset", sorted(harmtrack.PRESETS))
def test_every_preset_tracks_a_tone(preset):
    sr = 22050
    y = harmonic_tone(0.6, sr, f0_hz=247.0, amplitudes=[0.3, 0.2, 0.1, 0.05], seed=2)
    # a 247 Hz firing frequency is a 4-cylinder 4-stroke engine at 7410 rpm
    extra = dict(cylinders=4, rpm_min=3000, rpm_max=9000) if preset == "engine" else {}
    tr = harmtrack.track(y, sr, preset=preset, **extra)
    assert tr.settings["preset"] == preset
    v = tr.voiced
    assert v.mean() >= 0.9
    assert abs(1200 * math.log2(np.median(tr.f0_hz[v]) / 247.0)) < 5.0  # cents


def test_overrides_apply_and_none_is_ignored():
    cfg = make_config("singing", fmin_hz=None, fmax_hz=1000.0, smoothing=0.0, prewhiten=0)
    assert cfg.fmin_hz == 60.0 and cfg.fmax_hz == 1000.0
    assert cfg.smoothing == 0.0 and cfg.prewhiten is False
    assert make_config("voice", frame_s=0.04).auto_frame_s == pytest.approx(0.04)
    assert make_config("voice", max_harmonics=12.0).max_harmonics == 12
    d = make_config("voice").as_dict()
    assert d["frame_s"] == pytest.approx(0.05) and d["preset"] == "voice"


def test_config_is_frozen_and_presets_unchanged():
    cfg = make_config("voice", smoothing=2.0)
    with pytest.raises(dataclasses.FrozenInstanceError):
        cfg.smoothing = 3.0  # type: ignore[misc]
    assert harmtrack.PRESETS["voice"]["smoothing"] == 1.0
    assert make_config("voice").smoothing == 1.0
