"""The night summary (features.night) on hand-made windowed analyses with known answers."""

from __future__ import annotations

import importlib.util
from pathlib import Path

import numpy as np
import pytest

from features.artifacts import Segment
from features.engine import OccupancyResult
from features.feature_vector import FEATURE_NAMES, FeatureValue, FeatureVector
from features.night import MIN_BED_EXIT_S, NIGHT_MEASURES, summarize_night
from features.windows import WindowedAnalysis, WindowError, WindowResult

FS = 250.0
OCCUPIED = OccupancyResult(True, 75.0, True, True, 0.95, ())
EMPTY = OccupancyResult(False, 0.0, False, False, 0.95, ())
NO_LOAD = OccupancyResult(True, None, None, True, 0.7, ("no_load_information",))


def _vector(**values: float) -> FeatureVector:
    """A feature vector with the given values (confidence 0.8), every other one None."""
    return FeatureVector("test", tuple(
        FeatureValue(n, values.get(n), None, 0.8 if n in values else 0.0,
                     None if n in values else "not_computed")
        for n in FEATURE_NAMES))


def _window(k: int, *, window_s: float = 300.0, step_s: float | None = None,
            occupancy: OccupancyResult | None = OCCUPIED, usable: float = 1.0,
            segments: tuple[Segment, ...] = (), failed: bool = False,
            **values: float) -> WindowResult:
    start = k * (step_s or window_s)
    if failed:
        return WindowResult(k, start, start + window_s, None, 0.0, None, (),
                            WindowError("UnusableSignalError", "no_signal", "test"))
    defaults = {"heart_rate_mean_bpm": 60.0, "mean_nn_ms": 1000.0, "sdnn_ms": 50.0,
                "rmssd_ms": 30.0, "breathing_rate_per_min": 14.0,
                "breathing_pauses_per_hour": 0.0, "usable_fraction": usable}
    if occupancy is EMPTY:
        defaults = {"usable_fraction": usable}
    defaults.update(values)
    return WindowResult(k, start, start + window_s, _vector(**defaults), 0.8, usable, (),
                        None, occupancy, segments)


def _empty_window(k: int) -> WindowResult:
    return _window(k, occupancy=EMPTY, usable=0.0,
                   segments=(Segment("empty_support", k * 300.0, k * 300.0 + 300.0),))


def _night(windows: list[WindowResult], *, window_s: float = 300.0,
           overlap_s: float = 0.0) -> WindowedAnalysis:
    step = window_s - overlap_s
    failed = sum(w.error is not None for w in windows)
    duration = windows[-1].end_s if windows else window_s
    return WindowedAnalysis(window_s, overlap_s, step, FS, duration, tuple(windows), 0.0,
                            failed, "test", ())


def _value(summary, name):
    return summary.get(name).value


def test_every_measure_once_in_catalogue_order() -> None:
    summary = summarize_night(_night([_window(k) for k in range(4)]))
    assert [m.name for m in summary.measures] == [m.name for m in NIGHT_MEASURES]
    assert len({m.name for m in NIGHT_MEASURES}) == len(NIGHT_MEASURES)


def test_one_exit_inside_a_window_is_placed_to_its_segment() -> None:
    # Empty, occupied x4 with a 150-s empty support in window 2, empty: the exit is the
    # empty-support segment itself, not the whole window.
    windows = [_empty_window(0), _window(1),
               _window(2, usable=0.5, segments=(Segment("empty_support", 700.0, 850.0),)),
               _window(3), _window(4), _empty_window(5)]
    summary = summarize_night(_night(windows))
    assert _value(summary, "occupied_start_s") == 300.0
    assert _value(summary, "occupied_end_s") == 1500.0
    # 1200 s of occupied windows less the 150-s exit; sums of exact binary fractions.
    assert _value(summary, "occupied_duration_s") == pytest.approx(1050.0, abs=1e-9)
    assert _value(summary, "bed_exit_count") == 1.0
    (exit_,) = summary.bed_exits
    assert (exit_.start_s, exit_.end_s, exit_.duration_s) == (700.0, 850.0, 150.0)
    assert summary.occupied_spans_s == ((300.0, 700.0), (850.0, 1500.0))


def test_exit_across_whole_windows_and_the_start_and_end_are_not_exits() -> None:
    windows = [_empty_window(0), _window(1, segments=(Segment("empty_support", 500.0, 600.0),)),
               _empty_window(2), _window(3, segments=(Segment("empty_support", 900.0, 950.0),)),
               _window(4), _empty_window(5)]
    summary = summarize_night(_night(windows))
    assert [(e.start_s, e.end_s) for e in summary.bed_exits] == [(500.0, 950.0)]
    assert _value(summary, "bed_exit_count") == 1.0


def test_unloading_shorter_than_the_exit_rule_is_not_an_exit() -> None:
    short = MIN_BED_EXIT_S / 2
    windows = [_window(0), _window(1, segments=(Segment("empty_support", 400.0, 400.0 + short),)),
               _window(2)]
    summary = summarize_night(_night(windows))
    assert _value(summary, "bed_exit_count") == 0.0
    assert summary.bed_exits == ()
    # The unloaded seconds are still not occupied time (900 s less the short stretch).
    assert _value(summary, "occupied_duration_s") == pytest.approx(900.0 - short, abs=1e-9)
    assert summary.occupied_spans_s == ((0.0, 900.0),)


def test_a_failed_window_between_occupied_ones_is_not_counted_as_an_exit() -> None:
    windows = [_window(0), _window(1, failed=True), _window(2)]
    summary = summarize_night(_night(windows))
    assert _value(summary, "bed_exit_count") == 0.0
    assert "bed_exit_count_excludes_stretches_of_unknown_occupancy" in summary.flags
    assert "windows_failed" in summary.flags
    assert summary.unknown_s == 300.0
    # Unknown time inside the occupied span lowers the occupancy confidences.
    assert summary.get("occupied_duration_s").confidence < 0.95


def test_empty_night() -> None:
    summary = summarize_night(_night([]))
    for m in summary.measures:
        assert m.value is None and m.reason == "no_window_analysed" and m.confidence == 0.0


def test_all_windows_failed() -> None:
    summary = summarize_night(_night([_window(k, failed=True) for k in range(3)]))
    assert all(m.reason == "no_window_analysed" for m in summary.measures)
    assert summary.n_failed_windows == 3


def test_never_occupied_night_has_zero_occupied_time_and_no_rates() -> None:
    summary = summarize_night(_night([_empty_window(k) for k in range(4)]))
    assert _value(summary, "occupied_duration_s") == 0.0
    for m in summary.measures:
        if m.name != "occupied_duration_s":
            assert m.value is None and m.reason == "never_occupied", m.name


def test_mean_heart_rate_is_beats_over_usable_time() -> None:
    # 5 usable minutes at 60/min and 2.5 usable minutes at 90/min: 300 + 225 beats over
    # 7.5 min = 70/min (the definition of a mean rate: beats per unit time).
    windows = [_window(0, heart_rate_mean_bpm=60.0), _window(1, usable=0.5,
                                                             heart_rate_mean_bpm=90.0)]
    summary = summarize_night(_night(windows))
    assert _value(summary, "heart_rate_mean_bpm") == pytest.approx(70.0, rel=1e-12)


def test_lowest_and_highest_5_minutes_skip_mostly_masked_windows() -> None:
    windows = [_window(0, heart_rate_mean_bpm=62.0), _window(1, heart_rate_mean_bpm=55.0),
               _window(2, usable=0.3, heart_rate_mean_bpm=40.0),
               _window(3, heart_rate_mean_bpm=71.0)]
    summary = summarize_night(_night(windows))
    assert _value(summary, "heart_rate_lowest_5min_bpm") == 55.0
    assert _value(summary, "heart_rate_lowest_5min_start_s") == 300.0
    assert _value(summary, "heart_rate_highest_5min_bpm") == 71.0
    assert _value(summary, "heart_rate_highest_5min_start_s") == 900.0


def test_5_minute_measures_need_300_s_windows() -> None:
    summary = summarize_night(_night([_window(k, window_s=120.0) for k in range(10)],
                                     window_s=120.0))
    for name in ("heart_rate_lowest_5min_bpm", "sdann_ms", "sdnn_index_ms"):
        assert summary.get(name).reason == "needs_300_s_windows"
    assert _value(summary, "heart_rate_mean_bpm") == 60.0


def test_sdann_needs_windows_without_overlap_and_three_segments() -> None:
    over = summarize_night(_night([_window(k, step_s=150.0) for k in range(6)],
                                  overlap_s=150.0))
    assert over.get("sdann_ms").reason == "needs_300_s_windows_without_overlap"
    # Overlapping windows own only their step: six windows 150 s apart cover 0-1050 s.
    assert _value(over, "occupied_duration_s") == pytest.approx(1050.0, abs=1e-9)
    two = summarize_night(_night([_window(0), _window(1)]))
    assert two.get("sdann_ms").reason == "needs_3_segments"


def test_movement_split_by_a_window_boundary_counts_once() -> None:
    windows = [_window(0, segments=(Segment("movement", 298.0, 300.0),)),
               _window(1, segments=(Segment("movement", 300.0, 303.0),
                                    Segment("posture_change", 500.0, 503.0))),
               _window(2), _window(3)]
    summary = summarize_night(_night(windows))
    # Two stretches in 1200 s (one hour is 3600 s): 6 per hour.
    assert _value(summary, "movement_per_hour") == pytest.approx(6.0, rel=1e-12)
    # 8 masked seconds of 1200.
    assert _value(summary, "usable_fraction") == pytest.approx(1 - 8 / 1200, rel=1e-12)


def test_window_without_load_counts_whole_by_its_occupancy() -> None:
    windows = [_window(k, occupancy=NO_LOAD) for k in range(3)]
    summary = summarize_night(_night(windows))
    assert _value(summary, "occupied_duration_s") == 900.0
    assert summary.get("occupied_duration_s").confidence == pytest.approx(0.7)


def test_breathing_median_range_and_pauses() -> None:
    windows = [_window(0, breathing_rate_per_min=12.0, breathing_pauses_per_hour=12.0),
               _window(1, breathing_rate_per_min=16.0, breathing_pauses_per_hour=0.0),
               _window(2, breathing_rate_per_min=13.0, breathing_pauses_per_hour=24.0)]
    summary = summarize_night(_night(windows))
    assert _value(summary, "breathing_rate_median_per_min") == 13.0
    assert _value(summary, "breathing_rate_lowest_per_min") == 12.0
    assert _value(summary, "breathing_rate_highest_per_min") == 16.0
    # 1 + 0 + 2 pauses in 15 usable minutes = 12 per hour.
    assert _value(summary, "breathing_pauses_per_hour") == pytest.approx(12.0, rel=1e-12)


# --------------------------------------------------------------------------- pyHRV


def _long_nn_series() -> np.ndarray:
    # NN series (about 60 min) from the MIT-BIH Normal Sinus Rhythm Database (PhysioNet),
    # shipped in the pyHRV wheel (pyhrv/files/SampleNNISeriesLong.npy).
    spec = importlib.util.find_spec("pyhrv")
    if spec is None or not spec.submodule_search_locations:
        pytest.skip("pyhrv is not installed (pip install -e '.[test]')")
    path = Path(spec.submodule_search_locations[0]) / "files" / "SampleNNISeriesLong.npy"
    return np.load(path).astype(float)


@pytest.fixture()
def pyhrv_time_domain():
    # pyhrv imports biosppy, which needs peakutils (a test extra in pyproject.toml)
    return pytest.importorskip("pyhrv.time_domain")


def test_sdann_and_sdnn_index_against_pyhrv(pyhrv_time_domain) -> None:
    td = pyhrv_time_domain
    nn = _long_nn_series()
    # pyHRV's own 5-minute segmentation (pyhrv.utils.segmentation, full=True as in sdann),
    # one window per segment with the segment's mean NN and SDNN (ddof=1, Task Force 1996).
    segments, ok = td.pyhrv.utils.segmentation(nn, full=True, duration=300, warn=False)
    assert ok and len(segments) == 12
    windows = [_window(k, mean_nn_ms=float(np.mean(s)), sdnn_ms=float(np.std(s, ddof=1)))
               for k, s in enumerate(segments)]
    summary = summarize_night(_night(windows))
    # Same definitions, same numbers; rtol covers summation order (pyhrv.utils.std sums
    # squares in a Python list, numpy pairwise) on ~400 terms of size 1e5.
    np.testing.assert_allclose(_value(summary, "sdann_ms"),
                               td.sdann(nn, full=True)["sdann"], rtol=1e-10)
    np.testing.assert_allclose(_value(summary, "sdnn_index_ms"),
                               td.sdnn_index(nn, full=True)["sdnn_index"], rtol=1e-10)
