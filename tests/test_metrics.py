"""Tests of harmtrack.metrics: frame-level scores of an f0 track against a reference."""

from __future__ import annotations

import math

import numpy as np
import pytest

from harmtrack import metrics
from harmtrack.errors import HarmtrackError

HOP = 0.01


def _random_pair(seed: int, n: int = 400, *, unvoiced_as_nan: bool = False):
    """A random reference and a noisy estimate on one grid, binary voicing."""
    rng = np.random.default_rng(seed)
    times = np.arange(n) * HOP
    ref = 80.0 * 2.0 ** rng.uniform(0.0, 3.0, n)
    ref[rng.random(n) < rng.uniform(0.0, 0.6)] = 0.0
    # estimate: cents noise of various sizes, some octave and fifth errors, voicing flips
    cents = rng.normal(0.0, rng.uniform(5.0, 80.0), n)
    jump = rng.choice([0.0, 1200.0, -1200.0, 700.0, 2400.0], size=n,
                      p=[0.8, 0.07, 0.06, 0.04, 0.03])
    base = np.where(ref > 0, ref, 80.0 * 2.0 ** rng.uniform(0.0, 3.0, n))
    est = base * 2.0 ** ((cents + jump) / 1200.0)
    est[rng.random(n) < rng.uniform(0.0, 0.4)] = 0.0
    if unvoiced_as_nan:
        return times, np.where(ref > 0, ref, np.nan), np.where(est > 0, est, np.nan)
    return times, ref, est


def _with_zeros(f0):
    return np.where(np.isfinite(f0) & (f0 > 0), f0, 0.0)


# ---------------------------------------------------------------------------
# agreement with an independent implementation
# Source of the reference values: mir_eval.melody (to_cent_voicing,
# raw_pitch_accuracy, raw_chroma_accuracy, voicing_recall, voicing_false_alarm),
# the standard melody-extraction evaluation, fed zeros for unvoiced frames.
# ---------------------------------------------------------------------------


def _mir_eval_scores(times, ref, est):
    mel = pytest.importorskip("mir_eval.melody")
    ref_v, ref_c, est_v, est_c = mel.to_cent_voicing(
        times, _with_zeros(ref), times, _with_zeros(est))
    return {
        "raw_pitch_accuracy": mel.raw_pitch_accuracy(ref_v, ref_c, est_v, est_c),
        "raw_chroma_accuracy": mel.raw_chroma_accuracy(ref_v, ref_c, est_v, est_c),
        "voicing_recall": mel.voicing_recall(ref_v, est_v),
        "voicing_false_alarm": mel.voicing_false_alarm(ref_v, est_v),
    }


@pytest.mark.parametrize("seed", range(40))
def test_matches_mir_eval_on_random_tracks(seed):
    times, ref, est = _random_pair(seed, unvoiced_as_nan=bool(seed % 2))
    ours = metrics.compare(times, ref, times, est)
    theirs = _mir_eval_scores(times, ref, est)
    for key, value in theirs.items():
        assert ours[key] == pytest.approx(float(value), abs=1e-9), key


@pytest.mark.filterwarnings("ignore:.*melody has no voiced frames:UserWarning")
@pytest.mark.parametrize("case", ["all_unvoiced_ref", "all_voiced_ref", "all_unvoiced_est"])
def test_matches_mir_eval_on_degenerate_voicing(case):
    times, ref, est = _random_pair(7)
    ref = np.abs(ref) + 100.0  # all voiced
    if case == "all_unvoiced_ref":
        ref[:] = 0.0
    if case == "all_unvoiced_est":
        est[:] = 0.0
    ours = metrics.compare(times, ref, times, est)
    theirs = _mir_eval_scores(times, ref, est)
    for key, value in theirs.items():
        assert ours[key] == pytest.approx(float(value), abs=1e-9), key


# ---------------------------------------------------------------------------
# hand-computed cases
# ---------------------------------------------------------------------------


def test_gross_pitch_error_and_voicing_decision_error_by_hand():
    times = np.arange(8) * HOP
    ref = np.array([100.0, 100.0, 100.0, 100.0, 200.0, np.nan, np.nan, 150.0])
    est = np.array([101.0, 125.0, 50.0, 119.0, 0.0, 300.0, np.nan, 150.0])
    # frame: ref / est -> verdict
    # 0: 100 / 101  both voiced, |101/100 - 1| = 0.01        -> fine, 17.23 cents
    # 1: 100 / 125  both voiced, 0.25 > 0.2                   -> gross
    # 2: 100 / 50   both voiced, 0.50 > 0.2                   -> gross
    # 3: 100 / 119  both voiced, 0.19 <= 0.2                  -> fine, 301.15 cents
    # 4: 200 / 0    ref voiced, est unvoiced                  -> voicing miss
    # 5: nan / 300  ref unvoiced, est voiced                  -> false alarm
    # 6: nan / nan  both unvoiced                             -> agree
    # 7: 150 / 150  both voiced, exact                        -> fine, 0 cents
    # voiced in both: frames 0, 1, 2, 3, 7 = 5; gross: 1, 2   -> GPE = 2 / 5 = 0.4
    # decisions differ: frames 4, 5 of 8                      -> VDE = 2 / 8 = 0.25
    # fine error: mean(1200 log2(1.01), 1200 log2(1.19), 0) over 3 frames
    # raw pitch: ref voiced 0,1,2,3,4,7 = 6; within 50 cents: 0, 7 -> 2 / 6
    # raw chroma: adds frame 2 (exactly one octave)            -> 3 / 6
    # voicing recall: est voiced on 5 of 6 ref-voiced frames   -> 5 / 6
    # false alarm: est voiced on 1 of 2 ref-unvoiced frames    -> 1 / 2
    s = metrics.compare(times, ref, times, est)
    assert s["gross_pitch_error"] == pytest.approx(0.4, abs=1e-12)
    assert s["voicing_decision_error"] == pytest.approx(0.25, abs=1e-12)
    fine = (1200 * math.log2(1.01) + 1200 * math.log2(1.19) + 0.0) / 3
    assert s["fine_pitch_error_cents"] == pytest.approx(fine, rel=1e-12)
    assert s["raw_pitch_accuracy"] == pytest.approx(2 / 6, abs=1e-12)
    assert s["raw_chroma_accuracy"] == pytest.approx(3 / 6, abs=1e-12)
    assert s["voicing_recall"] == pytest.approx(5 / 6, abs=1e-12)
    assert s["voicing_false_alarm"] == pytest.approx(1 / 2, abs=1e-12)
    assert (s["frames"], s["ref_voiced_frames"], s["est_voiced_frames"], s["both_voiced_frames"]) \
        == (8, 6, 6, 5)


def test_unvoiced_estimate_counts_as_a_raw_pitch_miss():
    times = np.arange(4) * HOP
    ref = np.full(4, 200.0)
    est = np.array([200.0, np.nan, 0.0, -200.0])
    # only frame 0 is voiced in the estimate; NaN, 0 and negative are unvoiced: 1 / 4
    assert metrics.compare(times, ref, times, est)["raw_pitch_accuracy"] == pytest.approx(0.25)


def test_no_frame_voiced_in_both_gives_nan_pitch_errors():
    times = np.arange(3) * HOP
    s = metrics.compare(times, [100.0, 0.0, 100.0], times, [0.0, 100.0, 0.0])
    assert math.isnan(s["gross_pitch_error"]) and math.isnan(s["fine_pitch_error_cents"])
    assert s["voicing_decision_error"] == 1.0


def test_fifty_cents_is_not_a_hit():
    times = np.arange(2) * HOP
    ref = np.array([100.0, 100.0])
    est = ref * 2.0 ** (np.array([49.9, 50.1]) / 1200.0)
    # 49.9 cents is a hit, 50.1 is not: 1 / 2
    assert metrics.compare(times, ref, times, est)["raw_pitch_accuracy"] == pytest.approx(0.5)


# ---------------------------------------------------------------------------
# resampling onto the reference grid
# ---------------------------------------------------------------------------


def test_nearest_resampling_from_a_finer_grid():
    ref_t = np.arange(5) * 0.01
    est_t = np.arange(10) * 0.005 + 0.001
    est_f = 100.0 + np.arange(10)
    got = metrics.resample_nearest(est_t, est_f, ref_t)
    # the nearest estimate frames of 0, 10, 20, 30, 40 ms are those at 1, 11, 21, 31, 41 ms,
    # indices 0, 2, 4, 6, 8
    np.testing.assert_array_equal(got, est_f[[0, 2, 4, 6, 8]])


def test_nearest_resampling_leaves_uncovered_times_unvoiced():
    est_t = np.array([0.0, 0.01, 0.02])
    est_f = np.array([100.0, 110.0, 120.0])
    got = metrics.resample_nearest(est_t, est_f, np.array([0.004, 0.006, 0.02, 0.026, 0.5]))
    # half a hop is 5 ms: 0.026 and 0.5 are farther than that from every frame
    np.testing.assert_array_equal(got, [100.0, 110.0, 120.0, np.nan, np.nan])


def test_identical_grids_need_no_resampling():
    times, ref, est = _random_pair(3, unvoiced_as_nan=True)
    np.testing.assert_array_equal(metrics.resample_nearest(times, est, times), est)
    np.testing.assert_array_equal(metrics.resample_linear(times, est, times), est)


def test_linear_resampling_interpolates_log_frequency_inside_voiced_spans():
    est_t = np.array([0.0, 0.01, 0.02, 0.03])
    est_f = np.array([100.0, 400.0, np.nan, 200.0])
    got = metrics.resample_linear(est_t, est_f, np.array([0.005, 0.012, 0.018, 0.027]))
    # 5 ms: halfway between 100 and 400 in log2 -> 200; 12 ms: nearest frame (10 ms) is voiced
    # but its right neighbour is not -> 400; 18 ms: nearest frame (20 ms) unvoiced -> nan;
    # 27 ms: nearest frame 30 ms voiced, left neighbour unvoiced -> 200
    np.testing.assert_allclose(got, [200.0, 400.0, np.nan, 200.0], rtol=1e-12)
    s = metrics.compare([0.005], [200.0], est_t, est_f, method="linear")
    assert s["raw_pitch_accuracy"] == 1.0


def test_compare_on_shifted_grid():
    ref_t = np.arange(100) * 0.01
    ref_f = np.full(100, 150.0)
    est_t = ref_t + 0.002
    s = metrics.compare(ref_t, ref_f, est_t, ref_f)
    assert s["raw_pitch_accuracy"] == 1.0 and s["voicing_decision_error"] == 0.0


@pytest.mark.parametrize("bad", [
    dict(ref_times=[0.0, 0.02, 0.01], ref_f0=[1.0, 2.0, 3.0]),
    dict(ref_times=[0.0, 0.01], ref_f0=[1.0, 2.0, 3.0]),
    dict(ref_times=[], ref_f0=[]),
    dict(method="cubic"),
])
def test_invalid_arguments_raise(bad):
    args = dict(ref_times=[0.0, 0.01, 0.02], ref_f0=[100.0, 100.0, 100.0],
                est_times=[0.0, 0.01, 0.02], est_f0=[100.0, 0.0, 100.0])
    args.update(bad)
    method = args.pop("method", "nearest")
    with pytest.raises(HarmtrackError):
        metrics.compare(args["ref_times"], args["ref_f0"], args["est_times"], args["est_f0"],
                        method=method)
