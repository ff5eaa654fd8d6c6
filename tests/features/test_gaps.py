"""Dropouts: the gap fill, the time-column rule and the engine on traces with gaps."""

from __future__ import annotations

import numpy as np
import pytest
from scipy.interpolate import make_interp_spline

from features.conditioning import ChannelInput
from features.engine import GAPS_WARNING, analyze
from features.errors import InvalidInputError
from features.gaps import GAP_PAD_S, TIME_STEP_TOLERANCE, fill_gaps, spread_on_grid, time_grid
from simulation import SimulationSettings, simulate

FS = 250.0


@pytest.fixture(scope="module")
def seated() -> tuple[np.ndarray, float]:
    rec = simulate(SimulationSettings(duration_s=120.0, fs_hz=FS, seed=41))
    assert rec.truth.heart_rate_bpm is not None
    return np.asarray(rec.channels[0], dtype=np.float64), rec.truth.heart_rate_bpm


def _analyze(x: np.ndarray):
    return analyze([ChannelInput(samples=x, label="cell", quantity="force", unit="N")], FS)


# --------------------------------------------------------------------------- fill_gaps


def test_fill_is_the_straight_line_between_neighbours() -> None:
    rng = np.random.default_rng(5)
    x = rng.normal(size=400)
    x[[0, 1, 50, 51, 52, 200, 399]] = np.nan
    got, gap = fill_gaps(x)
    kept = np.flatnonzero(~np.isnan(x))
    # Reference: scipy's linear spline through the kept samples (scipy.interpolate.
    # make_interp_spline, k=1), held constant beyond the first and last kept sample.
    spline = make_interp_spline(kept, x[kept], k=1)
    where = np.clip(np.arange(400), kept[0], kept[-1])
    # rtol: two evaluation orders of the same line (de Boor against numpy.interp)
    np.testing.assert_allclose(got, spline(where), rtol=1e-12, atol=1e-15)
    assert gap.tolist() == np.isnan(x).tolist()


def test_fill_leaves_complete_and_integer_traces_alone() -> None:
    x = np.arange(10, dtype=np.int16)
    got, gap = fill_gaps(x)
    assert got.dtype == np.float64 and not gap.any()
    np.testing.assert_array_equal(got, x)


# --------------------------------------------------------------------------- time_grid


def test_time_column_with_a_two_sample_jump_is_a_gap() -> None:
    t = np.arange(20) / 100.0
    t = np.delete(t, [7, 8])          # rows 7 and 8 lost: a step of 3 sample steps
    grid = time_grid(t, max_length=10_000)
    assert grid.length == 20 and grid.missing == 2
    assert grid.positions.tolist() == [0, 1, 2, 3, 4, 5, 6, *range(9, 20)]
    # The rate is the grid's samples over the column's span: 19 steps in 0.19 s.
    assert grid.fs_hz == pytest.approx(100.0, rel=1e-12)  # rtol: float division of 0.19
    spread = spread_on_grid(np.arange(18.0), grid)
    assert np.isnan(spread[[7, 8]]).all() and spread[9] == 7.0


def test_time_column_gives_the_rate_through_rounded_stamps() -> None:
    # 300 Hz stamps printed to the microsecond (3333.33... us steps rounded): each step is
    # off by under 1 us, 0.03 % of a step, within the 1 % rule; the rate comes out exact to
    # the rounding over the span (1 us over 10 s: 1e-7 relative).
    t = np.round(np.arange(3000) / 300.0, 6)
    grid = time_grid(t, max_length=10_000)
    assert grid.missing == 0
    assert grid.fs_hz == pytest.approx(300.0, rel=1e-6)


def test_jitter_inside_the_tolerance_is_accepted_and_beyond_refused() -> None:
    rng = np.random.default_rng(2)
    steps = 0.01 * (1 + rng.uniform(-0.5, 0.5, 99) * TIME_STEP_TOLERANCE)
    t = np.concatenate(([0.0], np.cumsum(steps)))
    assert time_grid(t, fs_hz=100.0, max_length=1000).missing == 0
    t[50:] += 0.003  # one step of 1.3 sample steps
    with pytest.raises(InvalidInputError, match=r"`time_s` must advance by one sample step "
                                                r"\(1 / sampling_rate_hz, 10 ms\) within 1%.* "
                                                r"at rows 49-50") as info:
        time_grid(t, fs_hz=100.0, max_length=1000)
    assert info.value.field == "time_s"


@pytest.mark.parametrize(
    ("times", "match"),
    [
        ([0.0, 0.01, 0.01, 0.02], r"`time_s` must increase from row to row; got 0.01 s then "
                                  r"0.01 s at rows 1-2"),
        ([0.0, 0.02, 0.01, 0.03], r"must increase from row to row"),
        ([0.0, 0.01, np.nan, 0.03], r"must hold a finite time in every row; got 1 empty"),
        ([0.0], r"at least 2 rows"),
        ([0.0, 0.1, 0.2], r"sampling rate between 50 and 2000 Hz; got 10 Hz"),
    ],
)
def test_time_column_rules(times: list[float], match: str) -> None:
    with pytest.raises(InvalidInputError, match=match):
        time_grid(times, max_length=1000)


def test_time_column_jump_bounded_before_allocating() -> None:
    with pytest.raises(InvalidInputError, match=r"at most 1000 samples with its missing ones; "
                                                r"got 100000001"):
        time_grid([0.0, 0.01, 0.02, 0.03, 1e6], max_length=1000)


# --------------------------------------------------------------------------- the engine


def test_one_missing_sample_is_a_padded_gap_segment(seated) -> None:
    x, truth_bpm = seated
    x = x.copy()
    x[int(60 * FS)] = np.nan
    result = _analyze(x)
    gaps = [s for s in result.quality.segments if s.kind == "gap"]
    assert len(gaps) == 1
    # 1 sample at 60 s, padded by GAP_PAD_S either side, on the sample grid (1/FS).
    assert gaps[0].start_s == pytest.approx(60.0 - GAP_PAD_S, abs=1 / FS)
    assert gaps[0].end_s == pytest.approx(60.0 + GAP_PAD_S + 1 / FS, abs=1 / FS)
    assert GAPS_WARNING in result.warnings and "gaps_masked" in result.quality.flags
    assert "missing_samples_filled" in result.input.flags
    # The simulator's truth: one sample missing changes the mean rate by far less than
    # the 1-bpm agreement the engine keeps on complete seated records (docs/validation.md).
    assert result.heart_rate.mean_bpm == pytest.approx(truth_bpm, abs=1.0)


def test_no_interval_spans_a_gap(seated) -> None:
    x, _ = seated
    x = x.copy()
    a, b = int(50.3 * FS), int(52.1 * FS)  # 1.8 s lost: about two beats at 68 bpm
    x[a:b] = np.nan
    result = _analyze(x)
    ends = np.asarray(result.intervals.times_s)
    starts = ends - np.asarray(result.intervals.intervals_ms) / 1000.0
    # Task Force 1996: an interval is between two consecutive detected beats; one across
    # a dropout would hold the missing beats and read as a long pause.
    straddles = (starts < a / FS) & (ends > b / FS)
    assert not straddles.any()
    assert (ends < a / FS).sum() > 30 and (starts > b / FS).sum() > 30  # beats on both sides
    assert max(result.intervals.intervals_ms) < 60_000 / 68 * 1.5


def test_mostly_gaps_is_answered_with_nulls_and_reasons(seated) -> None:
    x, _ = seated
    x = x.copy()
    x[int(25 * FS):] = np.nan  # 25 s of samples left of 120 s
    result = _analyze(x)
    assert result.quality.usable_fraction < 25 / 120
    assert "less than half of the recording is usable" in result.warnings
    for feature in result.feature_vector.features:
        assert feature.value is not None or feature.reason


def test_nothing_left_besides_gaps_is_an_input_error(seated) -> None:
    x, _ = seated
    x = x.copy()
    x[int(15 * FS):] = np.nan
    with pytest.raises(InvalidInputError, match=r"`channels\[0\].samples` must hold at least "
                                                r"20 s of samples besides its gaps; got 15 s"):
        _analyze(x)


def test_gaps_in_different_channels_mask_their_union(seated) -> None:
    x, _ = seated
    a, b = x.copy(), x.copy()
    a[int(30 * FS):int(31 * FS)] = np.nan
    b[int(80 * FS):int(82 * FS)] = np.nan
    result = analyze([ChannelInput(samples=a, label="a", quantity="force", unit="N"),
                      ChannelInput(samples=b, label="b", quantity="force", unit="N")], FS)
    gaps = [(s.start_s, s.end_s) for s in result.quality.segments if s.kind == "gap"]
    # abs: the sample grid, 1/FS
    np.testing.assert_allclose(gaps, [(29.0, 32.0), (79.0, 83.0)], atol=1 / FS)
