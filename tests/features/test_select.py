"""Tests of the bracketed exact median against numpy.median."""

from __future__ import annotations

import numpy as np
import pytest

from features._select import median


@pytest.mark.parametrize("n", [7, 49_999, 50_000, 50_001, 300_000, 1_000_001])
@pytest.mark.parametrize("kind", ["normal", "sorted", "reversed", "ties", "drift",
                                  "sample_ordered"])
def test_median_equals_numpy_median(n: int, kind: str) -> None:
    rng = np.random.default_rng(n)
    x = rng.standard_normal(n)
    if kind == "sorted":
        x.sort()
    elif kind == "reversed":
        x = np.sort(x)[::-1].copy()
    elif kind == "ties":
        x = np.round(x * 3) / 3  # a handful of distinct values, the median among ties
    elif kind == "drift":
        x = x + np.linspace(0, 50, n)  # a trace with a slow trend, like a baseline drift
    elif kind == "sample_ordered":
        # the sampled positions all hold the largest values: the bracket misses and the
        # fallback answers
        step = n // 2000 if n >= 50_000 else 1
        x[::step] = 1e6 + np.arange(x[::step].size)
    # reference library: numpy.median; the same order statistics, so the same number
    assert median(x) == float(np.median(x))


@pytest.mark.parametrize("n", [1, 2, 3, 10, 11, 101, 1000, 1001])
def test_short_median_and_middle_quantile_equal_numpy(n: int) -> None:
    from features._select import quantile_half

    rng = np.random.default_rng(n + 5)
    for _ in range(50):
        x = rng.standard_normal(n) * 10.0 ** rng.uniform(-3, 3)
        ints = rng.integers(0, 400, n)
        # reference library: numpy.median and numpy.quantile(..., 0.5) (linear method);
        # the same elements and the same arithmetic, so the same numbers
        assert median(x) == float(np.median(x))
        assert median(ints) == float(np.median(ints))
        assert quantile_half(x) == float(np.quantile(x, 0.5))
