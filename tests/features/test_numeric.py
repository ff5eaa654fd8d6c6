"""The shared numeric kernels: robust spread, parabolic peak, runs of True."""

from __future__ import annotations

import numpy as np
import pytest
from scipy import stats
from scipy.special import ndtri

from features._numeric import (
    MAD_TO_SD,
    SORTED_LANES_UP_TO,
    clip,
    lane_median,
    mean,
    median_1d,
    quantile,
    robust_sd,
    runs,
    std,
    vertex_offset,
    windows,
)


def test_mad_to_sd_is_the_normal_consistency_constant() -> None:
    # 1 / Phi^-1(3/4) (Rousseeuw & Croux 1993); the constant is written with four decimals,
    # so it agrees to 5e-5 / 1.48 = 3.4e-5 relative.
    assert MAD_TO_SD == pytest.approx(1.0 / ndtri(0.75), rel=3.4e-5)


def test_robust_sd_matches_scipy_median_abs_deviation() -> None:
    rng = np.random.default_rng(3)
    x = rng.standard_normal((4, 301)) * np.array([[1.0], [2.0], [0.5], [10.0]])
    # scipy.stats.median_abs_deviation with scale="normal" divides by Phi^-1(3/4) exactly;
    # the four-decimal constant differs from it by at most 3.4e-5 relative (test above).
    want = stats.median_abs_deviation(x, axis=1, scale="normal")
    np.testing.assert_allclose(robust_sd(x, axis=1), want, rtol=3.4e-5)
    assert robust_sd(x[0]) == pytest.approx(float(want[0]), rel=3.4e-5)


@pytest.mark.parametrize("shape,axis", [((4, 301), -1), ((4, 30_000), -1), ((30_000, 3), 0),
                                        ((2, 5, 1200), 1)])
def test_robust_sd_along_an_axis_is_numpys_median_arithmetic(shape, axis) -> None:
    # Reference: numpy.median along the axis, the same order statistics and arithmetic,
    # so equal to the bit; a lane holding NaN gives NaN as numpy's does.
    rng = np.random.default_rng(len(shape) + shape[0])
    x = rng.standard_normal(shape) * 10.0
    x.flat[7] = np.nan
    med = np.median(x, axis=axis, keepdims=True)
    want = MAD_TO_SD * np.median(np.abs(x - med), axis=axis)
    np.testing.assert_array_equal(robust_sd(x, axis=axis), want)


def test_robust_sd_of_a_constant_is_zero() -> None:
    assert robust_sd(np.full(50, 3.0)) == 0.0


@pytest.mark.parametrize("vertex", [-0.45, -0.2, 0.0, 0.1, 0.37])
def test_vertex_offset_finds_the_vertex_of_a_sampled_parabola(vertex: float) -> None:
    # Three samples of y = 2 - 3 (x - vertex)^2 at x = -1, 0, 1: the three-point formula is
    # exact for a parabola (it is the parabola through the points); 1e-12 allows rounding.
    y = 2.0 - 3.0 * (np.array([-1.0, 0.0, 1.0]) - vertex) ** 2
    assert float(vertex_offset(*y)) == pytest.approx(vertex, abs=1e-12)


def test_vertex_offset_is_zero_without_a_maximum() -> None:
    # A straight line and an upward parabola have no maximum at the middle sample.
    np.testing.assert_array_equal(vertex_offset([0.0, 1.0], [1.0, 0.0], [2.0, 1.0]), [0.0, 0.0])


def test_runs_of_true_match_the_edges_of_the_mask() -> None:
    rng = np.random.default_rng(12)
    for mask in (rng.random(500) < 0.7, np.ones(10, bool), np.zeros(10, bool),
                 np.zeros(0, bool)):
        # reference: numpy.diff of the 0/1 mask padded with zeros gives +1 at each run's
        # start and -1 one past its end (common practice)
        edges = np.diff(mask.astype(np.int8), prepend=np.int8(0), append=np.int8(0))
        starts, ends = runs(mask)
        np.testing.assert_array_equal(starts, np.flatnonzero(edges == 1))
        np.testing.assert_array_equal(ends, np.flatnonzero(edges == -1))


@pytest.mark.parametrize("n", [1, 2, 3, 4, 7, 10, 57, 200, 201, SORTED_LANES_UP_TO + 1,
                               SORTED_LANES_UP_TO + 2, 30_000])
def test_medians_equal_numpy_median(n: int) -> None:
    # Reference: numpy.median. The helpers take the same order statistics and average the
    # two middle ones as numpy does, so the values are the same to the bit (the property
    # they promise; numpy's median involves no processor-dependent kernel). Ties (rounded
    # values) and NaN (numpy.median gives NaN) are included.
    rng = np.random.default_rng(n)
    lanes = rng.standard_normal((6, n)) * 1e3
    lanes[1] = np.round(lanes[1] / 300.0)
    lanes[2, n // 2] = np.nan
    for lane in lanes:
        got, want = median_1d(lane), float(np.median(lane))
        assert got == want or (np.isnan(got) and np.isnan(want))
    np.testing.assert_array_equal(lane_median(lanes), np.median(lanes, axis=-1))


def test_median_1d_of_an_empty_array_warns_as_numpy_does() -> None:
    # numpy.median of an empty array is NaN with a RuntimeWarning ("Mean of empty slice").
    with pytest.warns(RuntimeWarning):
        assert np.isnan(median_1d(np.empty(0)))


def _hard_array(n: int, kind: str, seed: int) -> np.ndarray:
    """Arrays whose orderings or values a selection could trip on (presorted, reversed,
    ties, a trend, a regular comb of outliers, NaN, infinity, integers)."""
    rng = np.random.default_rng(seed)
    x = rng.standard_normal(n)
    if kind == "sorted":
        x.sort()
    elif kind == "reversed":
        x = np.sort(x)[::-1].copy()
    elif kind == "ties":
        x = np.round(x * 3) / 3  # a handful of distinct values, the answer among ties
    elif kind == "drift":
        x = x + np.linspace(0, 50, n)  # a slow trend, like a baseline drift
    elif kind == "comb":
        # every (n // 2000)-th value among the largest: a regular comb of outliers
        step = max(1, n // 2000)
        x[::step] = 1e6 + np.arange(x[::step].size)
    elif kind == "nan" and n > 3:
        x[(n * 2) // 3 + 1] = np.nan  # above the middle: found by the largest value
    elif kind == "inf":
        x[n // 2] = np.inf
    elif kind == "integers":
        x = rng.integers(0, 400, n)
    return x


@pytest.mark.parametrize("n", [7, 49_999, 50_000, 300_000, 1_000_001])
@pytest.mark.parametrize("kind", ["normal", "sorted", "reversed", "ties", "drift",
                                  "comb", "nan", "integers"])
def test_long_medians_equal_numpy_median(n: int, kind: str) -> None:
    # Reference: numpy.median. The one-pivot selection takes the same order statistics, so
    # the same number to the bit.
    x = _hard_array(n, kind, n)
    got, want = median_1d(x), float(np.median(x))
    assert got == want or (np.isnan(got) and np.isnan(want)), (got, want)


@pytest.mark.parametrize("n", [1, 2, 3, 10, 11, 101, 1000, 1001])
def test_middle_quantile_equals_numpy_quantile(n: int) -> None:
    # Reference: numpy.quantile(..., 0.5), linear method; the same elements and arithmetic.
    rng = np.random.default_rng(n + 5)
    for _ in range(50):
        x = rng.standard_normal(n) * 10.0 ** rng.uniform(-3, 3)
        assert quantile(x, 0.5) == float(np.quantile(x, 0.5))


@pytest.mark.parametrize("n", [1, 2, 3, 10, 101, 49_999, 50_000, 300_001])
@pytest.mark.parametrize("kind", ["normal", "sorted", "reversed", "ties", "drift",
                                  "comb", "nan", "inf"])
def test_quantiles_equal_numpy_quantile(n: int, kind: str) -> None:
    # Reference: numpy.quantile, linear method (the default). The same order statistics
    # (one pivot, then the smallest value above it) and numpy's own interpolation steps, so the
    # same number to the bit, at the ends (0, 1), at the middle and in between.
    x = _hard_array(n, kind, n + 11)
    for q in (0.0, 0.05, 1 / 3, 0.5, 0.9, 0.95, 0.99, 1.0):
        with np.errstate(invalid="ignore"):  # inf - inf in the interpolation, as numpy
            got, want = quantile(x, q), float(np.quantile(x, q))
        assert got == want or (np.isnan(got) and np.isnan(want)), (q, got, want)


@pytest.mark.parametrize("shape,axis,keepdims", [((1,), None, False), ((300,), None, False),
                                                 ((7, 33), 1, True), ((40, 16), 0, False),
                                                 ((3, 4, 5), -1, False)])
def test_mean_equals_numpy_mean(shape, axis, keepdims) -> None:
    # Reference: numpy.mean, whose value for a float array is numpy's sum along the axis
    # divided by the count: the same operations, so equal to the bit (and complex too).
    rng = np.random.default_rng(len(shape) * 10 + shape[0])
    a = rng.standard_normal(shape) * 10.0 ** rng.uniform(-3, 3, shape)
    for x in (a, a + 1j * a[::-1]):
        got, want = mean(x, axis, keepdims), np.mean(x, axis=axis, keepdims=keepdims)
        assert np.shape(got) == np.shape(want)
        np.testing.assert_array_equal(got, want)


@pytest.mark.parametrize("shape,axis", [((2,), None), ((301,), None), ((40, 7), 0),
                                        ((40, 7), 1), ((3, 5, 9), -1), ((40, 7), None)])
@pytest.mark.parametrize("ddof", [0, 1])
def test_std_equals_numpy_std(shape: tuple[int, ...], axis: int | None, ddof: int) -> None:
    # reference library: numpy.std, to the bit (the same steps; a moved offset and scale
    # keep the cancellation of the mean in play)
    rng = np.random.default_rng(11)
    for _ in range(20):
        x = rng.standard_normal(shape) * rng.uniform(0.01, 1e3) + rng.uniform(-1e4, 1e4)
        np.testing.assert_array_equal(std(x, axis=axis, ddof=ddof), np.std(x, axis=axis, ddof=ddof))


@pytest.mark.parametrize("width,step", [(1, 1), (5, 1), (5, 3), (64, 7), (200, 200)])
def test_windows_equal_numpys_sliding_window_view(width: int, step: int) -> None:
    # reference library: numpy.lib.stride_tricks.sliding_window_view, on a contiguous array,
    # a read-only one and a strided one (which goes to numpy itself)
    x = np.arange(200.0) ** 1.5
    frozen = x.copy()
    frozen.flags.writeable = False
    for a in (x, frozen, x[::2]):
        if width > a.size:
            continue
        ref = np.lib.stride_tricks.sliding_window_view(a, width)[::step]
        got = windows(a, width, step)
        assert got.shape == ref.shape and not got.flags.writeable
        np.testing.assert_array_equal(got, ref)


@pytest.mark.parametrize("value", [-2.5, -0.0, 0.0, 0.3, 1.0, 7.0, float("nan"), float("inf"),
                                   np.float64(0.42)])
def test_clip_equals_numpy_clip(value: float) -> None:
    # reference library: numpy.clip of one number (NaN stays NaN)
    ref = float(np.clip(value, 0.0, 1.0))
    got = clip(value, 0.0, 1.0)
    assert type(got) is float
    assert got == ref or (np.isnan(ref) and np.isnan(got))


@pytest.mark.parametrize("share", [0.0, 0.01, 0.5, 1.0])
def test_count_in_is_the_running_count_difference(share: float) -> None:
    from features._numeric import count_in

    # Reference: the definition, numpy's running count with a leading 0 read at the
    # span ends; integers, so equal exactly. Spans at the ends, empty and reversed too.
    rng = np.random.default_rng(int(share * 100))
    flags = rng.random(5000) < share
    c = np.concatenate(([0], np.cumsum(flags)))
    lo = rng.integers(0, flags.size + 1, 300)
    hi = np.clip(lo + rng.integers(-3, 400, 300), 0, flags.size)
    lo[:3], hi[:3] = (0, 0, flags.size), (flags.size, 0, flags.size)
    assert np.array_equal(count_in(flags, lo, hi), c[hi] - c[lo])
    # the running count itself, at each index inclusive: spans from 0 to index + 1
    at = rng.integers(0, flags.size, 50)
    assert np.array_equal(count_in(flags, 0, at + 1), np.cumsum(flags)[at])
    assert count_in(np.zeros(0, dtype=bool), [0], [0]).tolist() == [0]
