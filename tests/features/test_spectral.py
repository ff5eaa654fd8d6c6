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


# --------------------------------------------------------------------------
# Welch spectra


def _pair(n: int, seed: int) -> tuple[np.ndarray, np.ndarray]:
    rng = np.random.default_rng(seed)
    t = np.arange(n)
    x = np.cumsum(rng.standard_normal(n)) + 3.0 * np.sin(0.05 * t)
    y = 0.5 * x + rng.standard_normal(n) + 2.0
    return x, y


@pytest.mark.parametrize(
    ("n", "fs", "nper", "nover", "nfft"),
    [
        (3000, 10.0, 640, 320, 8192),  # features.respiration: 64-s segments at 10 Hz
        (2400, 4.0, 128, 64, None),  # features.modulation: 32-s segments at 4 Hz
        (1001, 12.5, 333, 100, 1000),  # odd FFT length, uneven overlap
        (500, 250.0, 500, 0, None),  # a single segment
    ],
)
def test_welch_spectra_match_scipy(n: int, fs: float, nper: int, nover: int,
                                   nfft: int | None) -> None:
    from features.spectral import welch_spectra

    x, y = _pair(n, seed=n)
    got = welch_spectra(x, fs, segment_n=nper, overlap_n=nover, nfft=nfft, y=y)
    kw = {"fs": fs, "window": "hann", "nperseg": nper, "noverlap": nover, "nfft": nfft,
          "detrend": "constant"}
    # reference library: scipy.signal.welch, scipy.signal.csd and scipy.signal.coherence
    # (identical to the bit with scipy 1.17; a tolerance keeps other versions passing)
    f, pxx = scipy.signal.welch(x, **kw)
    _, pyy = scipy.signal.welch(y, **kw)
    _, pxy = scipy.signal.csd(x, y, **kw)
    _, cxy = scipy.signal.coherence(x, y, **kw)
    np.testing.assert_array_equal(got.frequencies_hz, f)
    np.testing.assert_allclose(got.psd_x, pxx, rtol=1e-12)
    np.testing.assert_allclose(got.psd_y, pyy, rtol=1e-12)
    np.testing.assert_allclose(got.csd_xy, pxy, rtol=1e-12, atol=1e-12 * np.abs(pxy).max())
    np.testing.assert_allclose(got.coherence(), cxy, rtol=1e-10)
    assert got.n_segments == (n - nover) // (nper - nover)


@pytest.mark.parametrize(
    ("n", "fs", "nper", "nover", "nfft"),
    [
        (3000, 10.0, 640, 320, 8192),  # features.respiration: 64-s segments at 10 Hz, 5 min
        (36000, 10.0, 640, 320, 8192),  # the same over 1 h (111 segments)
        (700, 10.0, 200, 100, 399),  # the shortest grid allowed, odd (2 segment_n - 1)
        (640, 10.0, 640, 0, 2048),  # a single segment
    ],
)
def test_welch_psd_padded_matches_scipy(n: int, fs: float, nper: int, nover: int,
                                        nfft: int) -> None:
    from features.spectral import welch_psd_padded

    x, _ = _pair(n, seed=n)
    f, got = welch_psd_padded(x, fs, segment_n=nper, overlap_n=nover, nfft=nfft)
    # reference library: scipy.signal.welch. The segments' power is summed by another
    # route (their autocorrelation on a short grid, then one long transform), so the
    # estimate agrees to rounding: eps (2.2e-16) times the transforms' log2 length and the
    # segments summed is about 1e-14 of the largest value; 1e-12 leaves room for other
    # FFT back ends.
    fr, pxx = scipy.signal.welch(x, fs=fs, window="hann", nperseg=nper, noverlap=nover,
                                 nfft=nfft, detrend="constant")
    np.testing.assert_array_equal(f, fr)
    np.testing.assert_allclose(got, pxx, rtol=0, atol=1e-12 * pxx.max())
    assert (got >= 0).all()
    with pytest.raises(ValueError):
        welch_psd_padded(x, fs, segment_n=nper, overlap_n=nover, nfft=2 * nper - 2)
    # Rows: each row's estimate is the one of the row alone (the same transforms, made
    # together; the segments summed in the same order): equal to the bit with this
    # machine's pocketfft, and 1e-13 of the largest value leaves room for an FFT back end
    # whose batched transform rounds otherwise than its single one.
    y, _ = _pair(n, seed=n + 1)
    f2, rows = welch_psd_padded(np.stack((x, y)), fs, segment_n=nper, overlap_n=nover,
                                nfft=nfft)
    np.testing.assert_array_equal(f2, f)
    np.testing.assert_allclose(rows[0], got, rtol=0, atol=1e-13 * got.max())
    alone = welch_psd_padded(y, fs, segment_n=nper, overlap_n=nover, nfft=nfft)[1]
    np.testing.assert_allclose(rows[1], alone, rtol=0, atol=1e-13 * alone.max())


def test_welch_spectra_rows_match_scipy_periodogram() -> None:
    from features.spectral import welch_spectra

    rng = np.random.default_rng(7)
    rows = 5.0 + rng.standard_normal((16, 1000))
    # reference library: scipy.signal.periodogram (Hann, constant detrend), per row
    f, ref = scipy.signal.periodogram(rows, fs=250.0, window="hann", detrend="constant",
                                      axis=-1)
    got = welch_spectra(rows, 250.0, segment_n=1000, overlap_n=0)
    np.testing.assert_array_equal(got.frequencies_hz, f)
    np.testing.assert_allclose(got.psd_x, ref, rtol=1e-12)


def test_welch_density_of_a_sinusoid_integrates_to_its_power() -> None:
    from features.spectral import welch_spectra

    # Parseval: a one-sided density integrates to the mean square, A**2 / 2 for a
    # sinusoid of amplitude A (Welch 1967; the Hann window's leakage stays in band)
    fs, a = 10.0, 3.0
    t = np.arange(6000) / fs
    x = a * np.sin(2 * np.pi * 0.25 * t)
    est = welch_spectra(x, fs, segment_n=640, overlap_n=320)
    df = est.frequencies_hz[1] - est.frequencies_hz[0]
    assert float(est.psd_x.sum() * df) == pytest.approx(a**2 / 2, rel=0.01)
    assert est.frequencies_hz[np.argmax(est.psd_x)] == pytest.approx(0.25, abs=df)


def test_coherence_of_a_series_with_a_scaled_copy_is_one() -> None:
    from features.spectral import welch_spectra

    # |Pxy|^2 = Pxx Pyy exactly when y = c x (Carter 1987, eq. 1)
    x, _ = _pair(3000, seed=1)
    est = welch_spectra(x, 4.0, segment_n=128, overlap_n=64, y=-2.5 * x)
    np.testing.assert_allclose(est.coherence()[1:], 1.0, rtol=1e-9)


def test_welch_spectra_length_rules() -> None:
    from features.spectral import welch_spectra

    x = np.zeros(100)
    with pytest.raises(ValueError, match="overlap_n"):
        welch_spectra(x, 1.0, segment_n=10, overlap_n=10)
    with pytest.raises(ValueError, match="at least"):
        welch_spectra(x, 1.0, segment_n=200, overlap_n=0)
    with pytest.raises(ValueError, match="coherence needs two series"):
        welch_spectra(x, 1.0, segment_n=10, overlap_n=5).coherence()
