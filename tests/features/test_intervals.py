"""Tests of features.intervals: forming and screening beat-to-beat intervals."""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from features.errors import InvalidInputError
from features.intervals import (
    IntervalLabels,
    adjacent_to_previous,
    classify_intervals,
    intervals_from_beats,
    validate_interval_series,
)


def _series(rr_ms: list[float] | np.ndarray, start_s: float = 0.0) -> tuple[np.ndarray, np.ndarray]:
    rr = np.asarray(rr_ms, dtype=float)
    return start_s + np.cumsum(rr) / 1000.0, rr


def _non_normal(result: IntervalLabels) -> dict[int, tuple[str, str]]:
    return {
        i: (lab, why)
        for i, (lab, why) in enumerate(zip(result.labels, result.reasons, strict=True))
        if lab != "normal"
    }


# ---------------------------------------------------------------- intervals_from_beats


def test_intervals_from_beats_differences_in_ms():
    beats = [0.0, 0.8, 1.65, 2.43]
    s = intervals_from_beats(beats)
    assert s.intervals_ms == pytest.approx((800.0, 850.0, 780.0))
    assert s.times_s == (0.8, 1.65, 2.43)
    assert s.n_intervals == 3 and s.n_runs == 1 and s.flags == ()


def test_intervals_from_beats_never_crosses_runs():
    # beats 0-2 in run 7, beat 3 alone in run 8, beats 4-5 in run 9
    beats = [0.0, 1.0, 2.0, 3.0, 5.0, 6.0]
    s = intervals_from_beats(beats, run_ids=[7, 7, 7, 8, 9, 9])
    assert s.times_s == (1.0, 2.0, 6.0)
    assert s.intervals_ms == pytest.approx((1000.0, 1000.0, 1000.0))
    assert s.n_runs == 2
    assert "beats_in_single_beat_runs_dropped" in s.flags
    # the adjacency rule sees the gap between the two runs
    adj = adjacent_to_previous(np.array(s.times_s), np.array(s.intervals_ms))
    assert adj.tolist() == [False, True, False]


def test_intervals_from_beats_too_few_beats():
    for beats in ([], [1.0]):
        s = intervals_from_beats(beats)
        assert s.n_intervals == 0 and s.times_s == () and "too_few_beats" in s.flags


def test_intervals_round_trip_adjacency_within_tolerance():
    # end-beat time minus interval must give the previous end beat (1e-6 s rule)
    rng = np.random.default_rng(3)
    beats = np.cumsum(0.6 + 0.4 * rng.random(500)) + 12345.678
    s = intervals_from_beats(beats)
    adj = adjacent_to_previous(np.array(s.times_s), np.array(s.intervals_ms))
    assert adj[1:].all()


def test_intervals_from_beats_rejects_unsorted():
    with pytest.raises(InvalidInputError, match="`beat_times_s` must be strictly increasing"):
        intervals_from_beats([0.0, 1.0, 1.0, 2.0])


def test_intervals_from_beats_rejects_non_finite():
    with pytest.raises(InvalidInputError, match="`beat_times_s` must contain only finite"):
        intervals_from_beats([0.0, np.nan, 2.0])


def test_intervals_from_beats_rejects_2d():
    with pytest.raises(InvalidInputError, match="`beat_times_s` must be one-dimensional"):
        intervals_from_beats([[0.0, 1.0], [2.0, 3.0]])


def test_intervals_from_beats_rejects_run_ids_length():
    with pytest.raises(
        InvalidInputError, match="`run_ids` must be one-dimensional with the length"
    ):
        intervals_from_beats([0.0, 1.0, 2.0], run_ids=[0, 0])


def test_intervals_from_beats_rejects_float_run_ids():
    with pytest.raises(InvalidInputError, match="`run_ids` must hold integers"):
        intervals_from_beats([0.0, 1.0, 2.0], run_ids=[0.0, 0.5, 1.0])


# ---------------------------------------------------------------- series validation


def test_series_rejects_length_mismatch():
    with pytest.raises(InvalidInputError, match="`intervals_ms` must have the same length"):
        validate_interval_series([1.0, 2.0], [1000.0])


def test_series_rejects_non_positive_interval():
    with pytest.raises(InvalidInputError, match="`intervals_ms` must be positive"):
        validate_interval_series([1.0, 2.0], [1000.0, 0.0])


def test_series_rejects_non_increasing_times():
    with pytest.raises(InvalidInputError, match="`times_s` must be strictly increasing"):
        validate_interval_series([2.0, 1.0], [1000.0, 1000.0])


def test_series_rejects_overlapping_intervals():
    # second interval (1.5 s) would start at 0.5 s, before the first end beat at 1.0 s;
    # typical of intervals given in seconds or of mixed-up units
    with pytest.raises(InvalidInputError, match="must not start before the previous interval"):
        validate_interval_series([1.0, 2.0], [1000.0, 1500.0])


# ---------------------------------------------------------------- classify_intervals

# Handcrafted series: a steady 800 ms sinus rhythm (75 beats/min) with one
# event each. Expected labels follow the definitions in the docstring, which
# in turn follow the beat classes of Lipponen JA, Tarvainen MP. A robust algorithm
# for heart rate variability time series artefact correction using novel beat
# classification. J Med Eng Technol 2019;43(3):173-181 (doi:10.1080/03091902.2019.1640306;
# citation from memory): premature short + compensatory long (ectopic), about
# twice the median (missed beat), a split interval (extra beat).


def test_premature_beat_with_compensatory_pause_is_ectopic():
    rr = [800.0] * 30
    # full compensatory pause: coupling 560 ms + pause 1040 ms = 2 x 800 ms. A ventricular
    # premature beat leaves the sinus node undisturbed, so the beats either side of it are
    # two sinus cycles apart (from memory: Goldberger AL et al. Goldberger's Clinical
    # Electrocardiography, 9th ed., Elsevier 2018, ventricular arrhythmias chapter; a
    # textbook fact, common practice). The 70 % coupling interval is our choice.
    rr[12], rr[13] = 560.0, 1040.0
    res = classify_intervals(*_series(rr))
    assert _non_normal(res) == {
        12: ("ectopic", "premature_beat"),
        13: ("ectopic", "compensatory_pause"),
    }
    assert (res.n_normal, res.n_ectopic, res.n_artifact) == (28, 2, 0)
    assert res.fraction_normal == pytest.approx(28 / 30)
    # both intervals of the ectopic beat leave the NN series, which now has a gap
    assert len(res.nn_intervals_ms) == 28
    adj = adjacent_to_previous(np.array(res.nn_times_s), np.array(res.nn_intervals_ms))
    assert int((~adj).sum()) == 2  # start of series + the gap


def test_incomplete_compensation_still_ectopic_within_tolerance():
    rr = [800.0] * 30
    # atrial premature beat resetting the sinus node, so the pause is less than
    # compensatory (from memory: the same textbook, supraventricular arrhythmias; common
    # practice): sum 1.85 medians, within the module's 0.2-median tolerance of 2
    rr[12], rr[13] = 600.0, 880.0
    res = classify_intervals(*_series(rr))
    assert res.labels[12] == res.labels[13] == "ectopic"


def test_missed_beat_is_artifact():
    rr = [800.0] * 30
    rr[15] = 1600.0  # one undetected beat: twice the median (Lipponen & Tarvainen 2019, above)
    res = classify_intervals(*_series(rr))
    assert _non_normal(res) == {15: ("artifact", "missed_beat")}


def test_extra_beat_is_artifact():
    rr = [800.0] * 30
    # a false beat splitting one 800 ms interval into two that sum to it (Lipponen &
    # Tarvainen 2019, above: "extra beat")
    rr[15], rr[16] = 350.0, 450.0
    res = classify_intervals(*_series(rr))
    assert _non_normal(res) == {15: ("artifact", "extra_beat"), 16: ("artifact", "extra_beat")}


def test_out_of_range_is_artifact():
    rr = [800.0] * 30
    # 30-200 beats/min is the module's plausible range for a resting adult (common
    # practice, not from a standard)
    rr[5] = 250.0  # 240 beats/min: outside 30-200 beats/min
    rr[20] = 2100.0  # below 30 beats/min
    res = classify_intervals(*_series(rr))
    assert res.labels[5] == res.labels[20] == "artifact"
    assert res.reasons[5] == res.reasons[20] == "out_of_range"


def test_moderate_sinus_variation_is_normal():
    # respiratory sinus arrhythmia of +-10 %, well inside the 20 % rule of Malik M,
    # Farrell T, Cripps T, Camm AJ. Heart rate variability in relation to prognosis after
    # myocardial infarction: selection of optimal processing techniques. Eur Heart J
    # 1989;10(12):1060-1074 (citation from memory)
    t = np.arange(60)
    rr = 900.0 + 90.0 * np.sin(2 * np.pi * t / 5.0)
    res = classify_intervals(*_series(rr))
    assert res.n_normal == 60 and res.confidence == 1.0


def test_unexplained_short_and_long():
    rr = [800.0] * 30
    rr[10] = 600.0  # short, next normal: sum 1.75 medians, neither pattern
    rr[20] = 1100.0  # 1.375 medians: too long for sinus, too short for a missed beat
    res = classify_intervals(*_series(rr))
    assert res.reasons[10] == "unexplained_short" and res.labels[11] == "normal"
    assert res.reasons[20] == "unexplained_long"


def test_pattern_never_pairs_across_a_gap():
    rr = np.full(30, 800.0)
    rr[12], rr[13] = 560.0, 1040.0
    t, rr = _series(rr)
    t[13:] += 5.0  # a 5 s gap between interval 12 and 13: no longer adjacent
    res = classify_intervals(t, rr)
    # without its adjacent successor the short interval is unexplained, and the
    # long one (after the gap) is judged on its own
    assert res.reasons[12] == "unexplained_short"
    assert res.reasons[13] == "unexplained_long"


def test_reference_stays_inside_run():
    # two runs at very different rates; the rate step falls exactly on the gap
    t1, rr1 = _series([600.0] * 15)
    t2, rr2 = _series([1000.0] * 15, start_s=t1[-1] + 30.0)
    res = classify_intervals(np.r_[t1, t2], np.r_[rr1, rr2])
    assert res.n_normal == 30


def test_short_runs_are_not_screened():
    t1, rr1 = _series([800.0] * 20)
    t2, rr2 = _series([800.0, 800.0, 800.0], start_s=t1[-1] + 10.0)  # a 3-interval run
    res = classify_intervals(np.r_[t1, t2], np.r_[rr1, rr2])
    assert res.reasons[-3:] == ("unscreened_short_run",) * 3
    assert res.labels[-3:] == ("artifact",) * 3
    assert "unscreened_short_runs" in res.flags
    assert res.confidence == pytest.approx(20 / 23)


def test_empty_and_tiny_inputs():
    res = classify_intervals([], [])
    assert res.labels == () and res.fraction_normal is None and res.flags == ("no_intervals",)
    assert res.confidence == 0.0
    res = classify_intervals([0.8], [800.0])
    assert res.labels == ("artifact",) and res.reasons == ("unscreened_short_run",)


@pytest.mark.parametrize("value", [0.0, 1.0, -0.1, True, "0.2"])
def test_rejects_bad_relative_deviation(value):
    t, rr = _series([800.0] * 10)
    with pytest.raises(InvalidInputError, match="`max_relative_deviation` must be a number"):
        classify_intervals(t, rr, max_relative_deviation=value)


def test_rejects_bad_compensation_tolerance():
    t, rr = _series([800.0] * 10)
    with pytest.raises(InvalidInputError, match="`compensation_tolerance` must be a number"):
        classify_intervals(t, rr, compensation_tolerance=1.5)


@pytest.mark.parametrize("value", [(2000.0, 300.0), (0.0, 2000.0), (300.0,), "x"])
def test_rejects_bad_range(value):
    t, rr = _series([800.0] * 10)
    with pytest.raises(InvalidInputError, match="`range_ms` must"):
        classify_intervals(t, rr, range_ms=value)


@pytest.mark.parametrize("value", [1, 4, 10, 2.0])
def test_rejects_bad_median_window(value):
    t, rr = _series([800.0] * 10)
    with pytest.raises(InvalidInputError, match="`median_window_beats` must be an odd integer"):
        classify_intervals(t, rr, median_window_beats=value)


# ---------------------------------------------------------------- properties


@settings(max_examples=40, deadline=None)
@given(
    scale=st.floats(min_value=0.5, max_value=1.1),
    shift=st.floats(min_value=-1e4, max_value=1e5),
    seed=st.integers(min_value=0, max_value=2**16),
)
def test_labels_invariant_to_rate_scaling_and_time_shift(scale, shift, seed):
    # The rules are relative to the local median, so scaling every interval by
    # the same factor (1800 ms stays below 2000 ms) and shifting the clock
    # must not change any label.
    rng = np.random.default_rng(seed)
    rr = 900.0 + 40.0 * rng.standard_normal(80)
    rr[20], rr[21] = 620.0, 1180.0
    rr[50] = 1800.0
    t, rr = _series(rr)
    base = classify_intervals(t, rr)
    scaled = classify_intervals(shift + t * scale, rr * scale)
    assert scaled.labels == base.labels
