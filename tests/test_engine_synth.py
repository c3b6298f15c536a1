"""The engine synthesiser: speed conversions, rpm profiles and the rendered sound.

* :func:`firing_hz` / :func:`rpm_from_firing` against hand-worked values;
* option validation;
* shapes and behaviour of :func:`rpm_profile`;
* determinism;
* the rendered spectrum, measured with ``scipy.signal.welch`` and a plain
  long-window FFT (numpy), against the firing frequency and against the
  returned true engine-order amplitudes.
"""

from __future__ import annotations

import time

import numpy as np
import pytest
import scipy.signal

from harmtrack.engine_synth import (
    demo_engine,
    engine,
    firing_hz,
    rpm_from_firing,
    rpm_profile,
)
from harmtrack.errors import HarmtrackError

SR = 16000


def _steady(rpm, duration_s=3.0, hop_s=0.01):
    """Frame times and an exactly constant rpm curve (no wander)."""
    times = np.arange(int(round(duration_s / hop_s)) + 1) * hop_s
    return times, np.full(times.size, float(rpm))


def _welch_db(y, nperseg=16000):
    f, p = scipy.signal.welch(y, fs=SR, nperseg=nperseg)
    return f, 10.0 * np.log10(p + 1e-300)


def _level_at(f, p_db, freqs):
    """Welch level (dB) at the bins nearest ``freqs`` (max over +-1 bin)."""
    df = f[1] - f[0]
    idx = np.rint(np.asarray(freqs) / df).astype(int)
    return np.array([p_db[i - 1:i + 2].max() for i in idx])


# ---------------------------------------------------------------------------
# speed <-> firing frequency
# ---------------------------------------------------------------------------


def test_firing_hz_hand_worked_values():
    # 4-stroke: rpm / 60 * cylinders / 2; 2-stroke: rpm / 60 * cylinders
    assert firing_hz(3000.0, cylinders=4, strokes=4) == pytest.approx(100.0)  # 50 rev/s * 2
    assert firing_hz(1800.0, cylinders=6, strokes=4) == pytest.approx(90.0)  # 30 rev/s * 3
    assert firing_hz(6000.0, cylinders=2, strokes=2) == pytest.approx(200.0)  # 100 rev/s * 2
    assert firing_hz(600.0, cylinders=1, strokes=4) == pytest.approx(5.0)  # every 2nd rev
    assert isinstance(firing_hz(3000, cylinders=4, strokes=4), float)


def test_firing_hz_arrays_and_inverse_round_trip():
    rpm = np.array([[250.0, 900.0], [1500.0, 7200.5]])
    for cylinders in (1, 3, 6, 8, 24):
        for strokes in (2, 4):
            f = firing_hz(rpm, cylinders=cylinders, strokes=strokes)
            assert f.shape == rpm.shape
            back = rpm_from_firing(f, cylinders=cylinders, strokes=strokes)
            np.testing.assert_allclose(back, rpm, rtol=1e-12)
    assert rpm_from_firing(90.0, cylinders=6, strokes=4) == pytest.approx(1800.0)
    assert rpm_from_firing(200.0, cylinders=2, strokes=2) == pytest.approx(6000.0)


@pytest.mark.parametrize("kwargs", [
    dict(cylinders=0, strokes=4),
    dict(cylinders=25, strokes=4),
    dict(cylinders=4.5, strokes=4),
    dict(cylinders=True, strokes=4),
    dict(cylinders=4, strokes=3),
    dict(cylinders=4, strokes=1),
])
def test_firing_hz_rejects_bad_engine_layout(kwargs):
    with pytest.raises(HarmtrackError):
        firing_hz(1000.0, **kwargs)
    with pytest.raises(HarmtrackError):
        rpm_from_firing(50.0, **kwargs)


@pytest.mark.parametrize("rpm", [-1000.0, 0.0, np.nan, np.inf, [900.0, -5.0], []])
def test_firing_hz_rejects_bad_speed(rpm):
    with pytest.raises(HarmtrackError, match="rpm"):
        firing_hz(rpm, cylinders=4, strokes=4)
    with pytest.raises(ValueError):  # HarmtrackError is a ValueError
        rpm_from_firing(rpm, cylinders=4, strokes=4)


def test_error_messages_are_one_line_and_name_the_value():
    with pytest.raises(HarmtrackError) as err:
        firing_hz(1000.0, cylinders=25, strokes=4)
    msg = str(err.value)
    assert "\n" not in msg and "cylinders" in msg and "25" in msg and "[1, 24]" in msg


# ---------------------------------------------------------------------------
# rpm profiles
# ---------------------------------------------------------------------------


def test_rpm_profile_shapes_and_steady_wander():
    times, rpm = rpm_profile(4.0, kind="steady", rpm=900.0, hop_s=0.01, seed=3)
    assert times.shape == rpm.shape == (401,)
    np.testing.assert_allclose(np.diff(times), 0.01)
    assert times[0] == 0.0 and times[-1] == pytest.approx(4.0)
    dev = rpm / 900.0 - 1.0
    assert np.max(np.abs(dev)) == pytest.approx(0.005, rel=1e-9)  # +-0.5 % wander
    assert np.std(dev) > 0.0005  # it does wander
    assert np.max(np.abs(np.diff(rpm))) < 0.02 * 900.0 * 0.01  # slow: < 2 % per second


def test_rpm_profile_ramp_is_smooth_and_monotone():
    times, rpm = rpm_profile(5.0, kind="ramp", rpm=800.0, rpm_end=3200.0, hop_s=0.02)
    assert times.shape == rpm.shape == (251,)
    assert rpm[0] == pytest.approx(800.0) and rpm[-1] == pytest.approx(3200.0)
    assert np.all(np.diff(rpm) > 0)
    # smooth: starts and ends with zero slope
    assert rpm[1] - rpm[0] < 0.01 * (rpm[126] - rpm[125])
    _, down = rpm_profile(2.0, kind="ramp", rpm=3000.0, rpm_end=1000.0)
    assert np.all(np.diff(down) < 0)
    _, default = rpm_profile(2.0, kind="ramp", rpm=1000.0)
    assert default[-1] == pytest.approx(2000.0)


def test_rpm_profile_genset_scenario():
    times, rpm = rpm_profile(6.0, kind="genset", seed=1)
    assert np.all(np.abs(rpm[times < 0.5] - 250.0) < 0.03 * 250.0)  # cranking
    assert np.all(np.diff(rpm[(times > 0.6) & (times < 1.4)]) > 0)  # run-up
    steady = rpm[(times >= 1.6) & (times < 3.5)]
    assert np.all(np.abs(steady - 1500.0) < 0.004 * 1500.0)
    dip = rpm[(times > 3.5) & (times < 4.0)].min()
    assert 0.03 < 1.0 - dip / 1500.0 < 0.05  # ~4 % load dip
    assert abs(rpm[460] - 1500.0) < 0.006 * 1500.0  # 4.6 s: governor recovered within ~1 s
    # durations scale with the duration
    times2, rpm2 = rpm_profile(12.0, kind="genset", seed=1)
    assert np.all(np.abs(rpm2[times2 < 1.0] - 250.0) < 0.03 * 250.0)
    assert rpm2[times2 > 7.0].min() < 0.97 * 1500.0


@pytest.mark.parametrize("kwargs", [
    dict(kind="idle"),
    dict(rpm=-900.0),
    dict(rpm=0.0),
    dict(kind="ramp", rpm_end=-10.0),
    dict(kind="steady", rpm_end=2000.0),
    dict(hop_s=0.5),
    dict(seed=-1),
])
def test_rpm_profile_validation(kwargs):
    with pytest.raises(HarmtrackError):
        rpm_profile(2.0, **kwargs)
    with pytest.raises(HarmtrackError):
        rpm_profile(0.5, kind="genset")


# ---------------------------------------------------------------------------
# engine: validation, determinism, speed
# ---------------------------------------------------------------------------


@pytest.mark.parametrize("kwargs", [
    dict(cylinders=0),
    dict(cylinders=25),
    dict(strokes=3),
    dict(weak_cylinder=4),
    dict(weak_cylinder=-1),
    dict(weak_db=3.0),
    dict(cylinder_spread_db=-1.0),
    dict(resonances=((10000.0, 0.2),)),
    dict(resonances=((500.0,),)),
    dict(highpass_hz=9000.0),
    dict(noise_snr_db=500.0),
    dict(noise_color="blue"),
    dict(amplitude=0.0),
    dict(max_order=0),
])
def test_engine_validation(kwargs):
    times, rpm = _steady(900.0, duration_s=0.5)
    with pytest.raises(HarmtrackError):
        engine(times, rpm, SR, **kwargs)


def test_engine_rejects_bad_speed_curves():
    times, rpm = _steady(900.0, duration_s=0.5)
    with pytest.raises(HarmtrackError, match="rpm"):
        engine(times, -rpm, SR)
    with pytest.raises(HarmtrackError, match="shape"):
        engine(times, rpm[:-1], SR)
    with pytest.raises(HarmtrackError, match="firing frequency"):
        engine(times, np.full(times.size, 60000.0), SR, cylinders=12, strokes=2)


def test_determinism():
    a = rpm_profile(3.0, kind="genset", seed=7)
    b = rpm_profile(3.0, kind="genset", seed=7)
    np.testing.assert_array_equal(a[1], b[1])
    times, rpm = a
    kw = dict(cylinders=6, highpass_hz=100.0, noise_snr_db=20.0, return_orders=True, seed=5)
    y1, t1 = engine(times, rpm, SR, **kw)
    y2, t2 = engine(times, rpm, SR, **kw)
    np.testing.assert_array_equal(y1, y2)
    np.testing.assert_array_equal(t1["order_amplitudes"], t2["order_amplitudes"])
    y3 = engine(times, rpm, SR, **{**kw, "seed": 6, "return_orders": False})
    assert not np.array_equal(y1, y3)
    assert not np.array_equal(a[1], rpm_profile(3.0, kind="genset", seed=8)[1])
    d1, d2 = demo_engine(seed=0), demo_engine(seed=0)
    np.testing.assert_array_equal(d1[0], d2[0])


def test_output_layout_peak_and_snr():
    times, rpm = rpm_profile(2.0, kind="ramp", rpm=900.0, rpm_end=1800.0)
    clean = engine(times, rpm, SR, amplitude=0.5, seed=2)
    assert clean.shape == (2 * SR + 1,)
    assert np.max(np.abs(clean)) == pytest.approx(0.5)
    assert abs(np.mean(clean)) < 1e-12
    noisy = engine(times, rpm, SR, amplitude=0.5, seed=2, noise_snr_db=15.0)
    noise = noisy - clean
    snr = 10.0 * np.log10(np.mean(clean ** 2) / np.mean(noise ** 2))
    assert snr == pytest.approx(15.0, abs=0.01)


def test_render_60_s_is_fast():
    times, rpm = rpm_profile(60.0, kind="steady", rpm=1500.0)
    engine(times[:50], rpm[:50], SR)  # warm-up (first-call overheads)
    t0 = time.perf_counter()
    y = engine(times, rpm, SR, cylinders=6, highpass_hz=120.0)
    elapsed = time.perf_counter() - t0
    assert y.size == 60 * SR + 1
    assert elapsed < 2.0, f"60 s at 16 kHz took {elapsed:.2f} s"


# ---------------------------------------------------------------------------
# engine: spectrum against outside references (scipy.signal.welch, numpy FFT)
# ---------------------------------------------------------------------------


def test_welch_peaks_at_multiples_of_the_firing_frequency():
    # outside reference: scipy.signal.welch power spectrum of the rendered sound
    times, rpm = _steady(1500.0, duration_s=4.0)
    fire = firing_hz(1500.0, cylinders=4, strokes=4)  # 50 Hz
    y = engine(times, rpm, SR, cylinders=4, strokes=4, cylinder_spread_db=0.0)
    f, p_db = _welch_db(y)
    peaks, _ = scipy.signal.find_peaks(p_db)
    peaks = peaks[(f[peaks] > 20.0) & (f[peaks] < 4000.0)]
    top = peaks[np.argsort(p_db[peaks])[::-1][:15]]
    ratio = f[top] / fire
    np.testing.assert_allclose(ratio, np.rint(ratio), atol=0.03)
    # every firing harmonic up to 2 kHz stands far above the spectrum between them
    harm = _level_at(f, p_db, fire * np.arange(1, 41))
    between = _level_at(f, p_db, fire * (np.arange(1, 41) + 0.5))
    assert np.all(harm - between > 40.0)


def test_dead_cylinder_raises_the_half_orders():
    # outside reference: scipy.signal.welch; 4-cylinder 4-stroke at 1200 rpm:
    # order 1 = 20 Hz, firing (order 2) = 40 Hz, half orders at 10, 30, 50, ... Hz
    times, rpm = _steady(1200.0, duration_s=4.0)
    kw = dict(cylinders=4, strokes=4, cylinder_spread_db=0.0, seed=1)
    healthy = engine(times, rpm, SR, **kw)
    dead = engine(times, rpm, SR, weak_cylinder=2, weak_db=-np.inf, **kw)
    half_orders = np.arange(0.5, 40.0, 1.0)  # 0.5, 1.5, ... (never a firing multiple)
    non_firing = np.array([q for q in np.arange(0.5, 40.0, 0.5) if q % 2 != 0])
    levels = {}
    for name, y in (("healthy", healthy), ("dead", dead)):
        f, p_db = _welch_db(y)
        firing = _level_at(f, p_db, 20.0 * np.arange(2.0, 40.0, 2.0)).max()
        levels[name] = (_level_at(f, p_db, 20.0 * half_orders).max() - firing,
                        _level_at(f, p_db, 20.0 * non_firing).max() - firing)
    assert levels["dead"][0] > -20.0  # clear energy at the half orders
    assert levels["healthy"][0] < levels["dead"][0] - 30.0
    assert levels["healthy"][1] < levels["dead"][1] - 30.0


@pytest.mark.parametrize("kwargs", [
    dict(cylinders=4, strokes=4),
    dict(cylinders=6, strokes=4, highpass_hz=120.0, seed=3),
    dict(cylinders=4, strokes=4, weak_cylinder=1, weak_db=-12.0, cylinder_spread_db=0.0),
    dict(cylinders=3, strokes=2, cylinder_spread_db=2.0, resonances=((400.0, 0.1),)),
    dict(cylinders=8, strokes=4, resonances=None, highpass_hz=60.0),
])
def test_true_orders_match_a_long_fft(kwargs):
    # outside reference: a plain 2 s Hann-windowed FFT (numpy.fft.rfft); amplitude
    # of a sinusoid at an exact bin is 2 |X| / sum(w). At 1200 rpm every order
    # (multiples of 10 Hz) falls on a bin of the 0.5 Hz grid.
    times, rpm = _steady(1200.0, duration_s=3.0)
    y, truth = engine(times, rpm, SR, return_orders=True, max_order=30, **kwargs)
    seg = y[int(0.5 * SR):int(2.5 * SR)]
    w = np.hanning(seg.size + 1)[:-1]  # periodic Hann
    spec = np.fft.rfft(seg * w)
    freqs = truth["order_numbers"] * 20.0
    measured = 2.0 * np.abs(spec[np.rint(freqs / 0.5).astype(int)]) / np.sum(w)
    true = truth["order_amplitudes"][150]
    strongest = np.argsort(true)[::-1][:8]
    assert np.all(true[strongest] > 0.0)
    err_db = 20.0 * np.log10(measured[strongest] / true[strongest])
    assert np.max(np.abs(err_db)) < 0.5, err_db


def test_truth_dictionary():
    times, rpm = rpm_profile(2.0, kind="ramp", rpm=1000.0, rpm_end=2000.0)
    _, truth = engine(times, rpm, SR, cylinders=6, strokes=4, max_order=12,
                      cylinder_spread_db=0.0, return_orders=True)
    np.testing.assert_array_equal(truth["order_numbers"], np.arange(1, 25) / 2.0)
    assert truth["order_amplitudes"].shape == (times.size, 24)
    np.testing.assert_allclose(truth["firing_hz"], rpm / 20.0)  # 6 cyl 4-stroke: rpm/60*3
    np.testing.assert_allclose(truth["rotation_hz"], rpm / 60.0)
    assert truth["firing_order"] == 3.0
    # identical cylinders: only multiples of the firing order (3) carry energy
    amps = truth["order_amplitudes"]
    firing_cols = truth["order_numbers"] % 3.0 == 0
    assert np.max(amps[:, ~firing_cols]) < 1e-9 * np.max(amps[:, firing_cols])
    # 2-stroke: whole orders only
    _, t2 = engine(times, rpm, SR, cylinders=2, strokes=2, max_order=5, return_orders=True)
    np.testing.assert_array_equal(t2["order_numbers"], np.arange(1.0, 6.0))
    # orders at or above the Nyquist frequency are NaN
    _, t3 = engine(times, rpm, 2000, cylinders=1, max_order=100, resonances=None,
                   return_orders=True)
    assert np.isnan(t3["order_amplitudes"][-1, -1]) and np.isfinite(t3["order_amplitudes"][0, 0])


def test_demo_engine():
    y, sr, truth = demo_engine(seed=0)
    assert sr == 16000 and y.shape == (6 * 16000 + 1,)
    assert truth["cylinders"] == 6 and truth["strokes"] == 4
    assert truth["order_amplitudes"].shape == (601, 48)
    assert truth["events"]["load_step_s"] == pytest.approx(3.5)
    # at rated speed the firing fundamental (order 3, 75 Hz) is weak next to
    # its harmonics (high-pass at 120 Hz)
    frame = int(round(2.5 / 0.01))
    amps = dict(zip(truth["order_numbers"], truth["order_amplitudes"][frame], strict=True))
    assert truth["firing_hz"][frame] == pytest.approx(75.0, rel=0.01)
    assert 20.0 * np.log10(amps[3.0] / max(amps[6.0], amps[9.0], amps[12.0])) < -20.0
