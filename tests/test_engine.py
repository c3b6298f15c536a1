"""Engine presets: firing frequency <-> rpm, rpm tracking, orders and uneven firing."""

from __future__ import annotations

import subprocess
import sys

import numpy as np
import pytest

import harmtrack
from harmtrack import engine_synth as es
from harmtrack import machinery
from harmtrack.errors import HarmtrackError
from harmtrack.io import read_labels

SR = 16000


# --- firing frequency (common practice: 4-stroke rpm/60*C/2, 2-stroke rpm/60*C) ---

@pytest.mark.parametrize("rpm,cyl,strokes,hz", [
    (3000.0, 4, 4, 100.0),   # hand-worked: 50 rev/s, 2 firings per revolution
    (1500.0, 6, 4, 75.0),    # 25 rev/s x 3
    (600.0, 8, 4, 40.0),     # 10 rev/s x 4
    (6000.0, 1, 2, 100.0),   # single-cylinder 2-stroke fires every revolution
    (1800.0, 3, 2, 90.0),    # 30 rev/s x 3
])
def test_firing_formula_hand_worked(rpm, cyl, strokes, hz):
    assert machinery.firing_hz(rpm, cylinders=cyl, strokes=strokes) == pytest.approx(hz, rel=1e-12)
    assert machinery.rpm_from_firing(hz, cylinders=cyl, strokes=strokes) == pytest.approx(rpm)
    assert machinery.firing_hz_per_rpm(cylinders=cyl, strokes=strokes) * rpm == pytest.approx(hz)


def _engine(cyl, *, kind="ramp", rpm=800.0, rpm_end=4000.0, dur=3.0, dead=None, snr=5.0,
            hp=150.0, seed=0, orders=False):
    t, r = es.rpm_profile(dur, kind=kind, rpm=rpm, rpm_end=rpm_end if kind == "ramp" else None,
                          hop_s=0.01, seed=seed)
    out = es.engine(t, r, SR, cylinders=cyl, strokes=4, seed=seed, weak_cylinder=dead,
                    weak_db=-np.inf, highpass_hz=hp, noise_snr_db=snr, noise_color="white",
                    return_orders=orders)
    return out, r


def _within(tr, rpm_true, tol=0.01):
    n = min(len(tr), rpm_true.size)
    return float(np.mean(np.abs(tr.rpm[:n] / rpm_true[:n] - 1.0) < tol))


@pytest.mark.parametrize("cyl", [4, 6, 8])
def test_rpm_on_ramps_with_weak_fundamental(cyl):
    # The check: 800 -> 4000 rpm, fundamental high-passed, white noise at 5 dB SNR:
    # rpm within 1 % of the truth on >= 98 % of frames.
    y, r = _engine(cyl)
    tr = harmtrack.track(y, SR, preset="engine", cylinders=cyl, rpm_min=800, rpm_max=4000)
    assert _within(tr, r) >= 0.98


def test_fast_run_up_keeps_lock():
    # 800 -> 4000 rpm in 1.6 s: the smoothstep ramp peaks at 1.5 * 3200 / 1.6 = 3000 rpm/s.
    for cyl in (4, 6, 8):
        y, r = _engine(cyl, dur=1.6)
        tr = harmtrack.track(y, SR, preset="engine", cylinders=cyl, rpm_min=800, rpm_max=4000)
        assert _within(tr, r, tol=2 ** (50 / 1200) - 1) >= 0.98  # within 50 cents


@pytest.mark.parametrize("cyl", [4, 6, 8])
@pytest.mark.parametrize("rpm", [1200.0, 3000.0])
def test_dead_cylinder_flagged_healthy_not(cyl, rpm):
    # The check: a dead cylinder is flagged on >= 90 % of frames, a healthy
    # engine (cylinders spread by 1 dB) on <= 2 %.
    y, r = _engine(cyl, kind="steady", rpm=rpm, dead=0)
    tr = harmtrack.track(y, SR, preset="engine", cylinders=cyl, rpm_min=800, rpm_max=4000)
    assert np.mean(tr.uneven_flag) >= 0.90
    assert _within(tr, r, tol=2 ** (50 / 1200) - 1) >= 0.95  # no lock onto a half order
    y, r = _engine(cyl, kind="steady", rpm=rpm)
    tr = harmtrack.track(y, SR, preset="engine", cylinders=cyl, rpm_min=800, rpm_max=4000)
    assert np.mean(tr.uneven_flag) <= 0.02


@pytest.mark.parametrize("cyl,rpm", [(4, 1500.0), (6, 2400.0)])
def test_order_amplitudes_match_generator(cyl, rpm):
    # The generator's closed-form order amplitudes (exact for a steady engine) against
    # the measured ones: every order within 30 dB of the strongest has its level (median
    # over frames) within 1 dB, and 95 % of its single-frame values too.
    (y, truth), r = _engine(cyl, kind="steady", rpm=rpm, dead=None, snr=40.0, hp=None,
                            orders=True)
    tr = harmtrack.track(y, SR, preset="engine", cylinders=cyl, rpm_min=800, rpm_max=4000,
                         max_order=12)
    K = tr.order_numbers.size
    assert np.array_equal(tr.order_numbers, truth["order_numbers"][:K])
    true_db = 20 * np.log10(truth["order_amplitudes"][:, :K])
    est_db = tr.order_amplitudes_db()
    mid = slice(50, len(tr) - 50)  # away from the ends, where windows run off the record
    ref = np.nanmax(true_db[mid])
    strong = true_db[mid] > ref - 30.0
    err = np.abs(est_db[mid] - true_db[mid])
    cols = np.nonzero(np.all(strong, axis=0))[0]
    assert cols.size >= 6
    level = np.abs(np.median(est_db[mid][:, cols], axis=0) - np.median(true_db[mid][:, cols], axis=0))
    assert level.max() < 1.0
    assert np.quantile(err[:, cols], 0.95) < 1.0


def test_api_fields_and_summary():
    y, r = _engine(4, kind="steady", rpm=2000.0)
    tr = harmtrack.track(y, SR, preset="engine", cylinders=4, rpm_min=800, rpm_max=4000)
    assert tr.is_engine
    np.testing.assert_allclose(tr.rpm, tr.f0_hz * 30.0)  # 4 cylinders, 4-stroke: rpm = 30 f
    assert tr.order_amplitudes.shape == (len(tr), 24)
    assert tr.order_numbers[0] == 0.5 and tr.order_numbers[-1] == 12.0
    s = tr.summary()
    assert abs(s["rpm_mean"] / 2000.0 - 1) < 0.01
    assert s["strongest_orders"][0] in (2.0, 4.0, 6.0)  # a firing order
    assert 0.0 <= s["flagged_fraction"] <= 0.02


@pytest.mark.parametrize("opts,needle", [
    (dict(cylinders=0), "cylinders=0"),
    (dict(cylinders=25), "cylinders=25"),
    (dict(cylinders=4, strokes=3), "strokes=3"),
    (dict(cylinders=4, rpm_min=3000, rpm_max=1000), "rpm_min=3000"),
    (dict(cylinders=24, rpm_max=60000), "rpm_max=60000"),
    (dict(cylinders=1, rpm_min=20, rpm_max=100), "rpm_min=20"),
    (dict(), "cylinders"),
])
def test_bad_engine_settings(opts, needle):
    y = np.random.default_rng(0).standard_normal(SR)
    with pytest.raises(HarmtrackError) as err:
        harmtrack.track(y, SR, preset="engine", **opts)
    assert needle in str(err.value) and "\n" not in str(err.value)


def test_engine_options_need_engine_preset():
    with pytest.raises(HarmtrackError, match="engine preset"):
        harmtrack.track(np.zeros(SR), SR, preset="voice", cylinders=4)


def test_cli_engine_end_to_end(tmp_path):
    y, r = _engine(6, kind="steady", rpm=1800.0, dead=1)
    from harmtrack.synth import write_wav

    wav = write_wav(tmp_path / "eng.wav", y, SR)
    out = tmp_path / "eng.csv"
    cmd = [sys.executable, "-m", "harmtrack", "track", str(wav), "-o", str(out), "--preset",
           "engine", "--cylinders", "6", "--strokes", "4", "--rpm-min", "500", "--rpm-max", "6500"]
    res = subprocess.run(cmd, capture_output=True, text=True)
    assert res.returncode == 0, res.stderr
    assert "rpm" in res.stdout and "flagged" in res.stdout
    cols, prov = read_labels(out)
    assert prov["settings"]["cylinders"] == 6
    assert abs(np.nanmedian(cols["rpm"]) / 1800.0 - 1) < 0.01
    assert np.mean(cols["uneven_flag"]) >= 0.9
    assert "order_3" in cols and "order_1.5_db" in cols
    bad = subprocess.run(cmd[:-6] + ["--cylinders", "30"], capture_output=True, text=True)
    assert bad.returncode == 2 and len(bad.stderr.strip().splitlines()) == 1
    assert "cylinders=30" in bad.stderr


def test_largest_model_order_with_a_low_range():
    # 100 harmonics of a 30 Hz grid point reach past the search band: the tables must
    # stop at the band instead of reading past the spectrum.
    t, r = es.rpm_profile(2.0, kind="steady", rpm=1500.0, hop_s=0.01)
    y = es.engine(t, r, SR, cylinders=4, noise_snr_db=20.0)
    tr = harmtrack.track(y, SR, preset="engine", cylinders=4, rpm_min=800, rpm_max=4000,
                         max_harmonics=100)
    assert abs(np.nanmedian(tr.rpm) / 1500.0 - 1) < 0.01
    tr = harmtrack.track(y, SR, fmin=30.0, fmax=200.0, max_harmonics=100)
    assert abs(np.nanmedian(tr.f0_hz) / 50.0 - 1) < 0.01  # 4 cylinders at 1500 rpm fire at 50 Hz


def test_order_amplitudes_of_a_known_periodic_signal():
    # Cycle harmonics of known amplitude: a window of whole cycles puts every other
    # harmonic on a zero of the Hann window's transform (Harris 1978, Table I: Hann
    # sidelobes fall on whole bins), so each amplitude is read without leakage.
    sr, cyc = 8000.0, 12.5
    n = int(4.0 * sr)
    t = np.arange(n) / sr
    amps = {1: 0.02, 2: 0.1, 3: 0.005, 4: 0.3, 8: 0.2, 9: 0.01}
    z = sum(a * np.cos(2 * np.pi * k * cyc * t + 0.3 * k) for k, a in amps.items())
    z = z + 1e-4 * np.random.default_rng(0).standard_normal(n)
    centres = np.array([0.0, 0.12, 2.0, 3.9]) * sr  # windows at the ends move inwards
    out = machinery.order_amplitudes(z, sr, cyc, centres, n_harmonics=10, cycles=4)
    short = machinery.order_amplitudes(z[:1000], sr, cyc, centres[:1], n_harmonics=10, cycles=4)
    assert np.all(np.isnan(short))  # shorter than one window of 4 cycles (0.32 s)
    for row in out:
        for k, a in amps.items():
            assert 20 * np.log10(row[k - 1] / a) == pytest.approx(0.0, abs=0.1)
        absent = [k for k in range(1, 11) if k not in amps]
        assert np.all(row[np.array(absent) - 1] < 1e-3)
    # one cylinder of four silent: index = -10 log10(3) dB for identical pulses
    # (three equal firing-order sums against one unit non-firing sum per harmonic)
    k = np.arange(1, 41)
    a = np.where(k % 4 == 0, 3.0, 1.0)[None, :]
    assert machinery.uneven_index_db(a, 4)[0] == pytest.approx(-10 * np.log10(3.0), abs=1e-9)
    assert np.isnan(machinery.uneven_index_db(a, 1)[0])


def test_engine_labels_round_trip_in_every_format(tmp_path):
    from harmtrack.io import write_labels

    y, r = _engine(4, kind="steady", rpm=2000.0, dead=0, dur=1.5)
    tr = harmtrack.track(y, SR, preset="engine", cylinders=4, rpm_min=800, rpm_max=4000,
                         max_order=4)
    back = {fmt: read_labels(write_labels(tr, tmp_path / f"e.{fmt}"))[0]
            for fmt in ("npz", "csv", "json")}
    assert set(back["npz"]) == set(back["csv"]) == set(back["json"])
    np.testing.assert_array_equal(back["npz"]["order_1.5"], tr.order_amplitudes[:, 2])
    np.testing.assert_array_equal(back["npz"]["uneven_flag"], tr.uneven_flag)
    np.testing.assert_allclose(back["csv"]["rpm"], tr.rpm, atol=0.005)
    np.testing.assert_allclose(back["csv"]["order_2_db"], back["npz"]["order_2_db"], atol=0.005)


@pytest.mark.parametrize("cyl", [4, 6])
def test_no_engine_heard_in_noise_or_silence(cyl):
    # Noise alone, and digital silence after an engine stops, must not read as an
    # engine: the voicing prior counts once per frame length, like the evidence.
    rng = np.random.default_rng(cyl)
    noise = 0.05 * rng.standard_normal(4 * SR)
    tr = harmtrack.track(noise, SR, preset="engine", cylinders=cyl, rpm_min=200, rpm_max=2000)
    assert np.mean(tr.voiced) <= 0.02
    y, _ = _engine(cyl, kind="steady", rpm=1500.0, dur=3.0)
    y = np.concatenate([y, np.zeros(4 * SR)])
    tr = harmtrack.track(y, SR, preset="engine", cylinders=cyl, rpm_min=800, rpm_max=4000)
    assert np.mean(tr.voiced[:250]) >= 0.95
    assert np.mean(tr.voiced[350:]) <= 0.02


def test_steady_engines_across_the_speed_range_are_heard():
    # A steady engine is a stationary comb of lines; the noise floor must not take
    # it for noise at any speed (50 Hz firing, 1500 rpm x 4 cylinders, once vanished).
    for rpm in np.arange(900.0, 3901.0, 150.0):
        t, r = es.rpm_profile(1.5, kind="steady", rpm=rpm, hop_s=0.01, seed=1)
        y = es.engine(t, r, SR, cylinders=4, strokes=4, seed=1, highpass_hz=150.0,
                      noise_snr_db=10.0, noise_color="white")
        tr = harmtrack.track(y, SR, preset="engine", cylinders=4, rpm_min=800, rpm_max=4000)
        assert _within(tr, r) >= 0.95, rpm
