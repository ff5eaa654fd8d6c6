"""Tests of the factorised Lomb-Scargle kernel."""

from __future__ import annotations

import numpy as np
import pytest
import scipy.signal

from features.spectral import lomb_scargle_power


def _series(n: int, t0: float, seed: int) -> tuple[np.ndarray, np.ndarray]:
    rng = np.random.default_rng(seed)
    t = t0 + np.cumsum(0.8 + 0.1 * rng.standard_normal(n))
    y = 40.0 * np.sin(2 * np.pi * 0.25 * t) + 10.0 * rng.standard_normal(n)
    return t, y - y.mean()


@pytest.mark.parametrize(("n", "t0"), [(5, 0.0), (370, 0.0), (400, 20_000.0), (5000, 3.0)])
@pytest.mark.parametrize(
    "freqs",
    [
        np.arange(0.04, 1.0, 0.001),  # the timing-share grid of features.modulation
        np.unique(np.concatenate([np.arange(0.0033, 0.4, 1 / 1200), [0.04, 0.15, 0.4]])),
        np.array([0.1, 0.25]),  # too few for the grid path: direct sums
    ],
)
def test_matches_scipy_lombscargle(n: int, t0: float, freqs: np.ndarray) -> None:
    t, y = _series(n, t0, seed=n)
    # reference library: scipy.signal.lombscargle, default "power" normalisation
    ref = scipy.signal.lombscargle(t, y, 2 * np.pi * freqs)
    got = lomb_scargle_power(t, y, freqs)
    np.testing.assert_allclose(got, ref, rtol=1e-8, atol=1e-10 * ref.max())


def test_noiseless_sinusoid_is_fitted_exactly() -> None:
    # Lomb (1976) / Scargle (1982, appendix): the periodogram is the least-squares
    # fit of a cos + b sin at each frequency; a noiseless sinusoid at that frequency
    # is fitted exactly, so the fitted power 2 (a YC + b YS) equals 2 mean(y^2), and
    # the "power" scaling of scipy.signal.lombscargle multiplies it by N / 4.
    rng = np.random.default_rng(3)
    t = np.sort(rng.uniform(0.0, 300.0, 400))
    y = 2.0 * np.cos(2 * np.pi * 0.2 * t + 0.7)
    p = lomb_scargle_power(t, y, np.array([0.2, 0.2005, 0.3]))
    assert p[0] == pytest.approx(400 / 2 * np.mean(y**2), rel=1e-9)
    assert p[2] < 0.05 * p[0]
