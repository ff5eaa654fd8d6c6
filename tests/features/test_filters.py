"""Tests of the shared filter helpers."""

from __future__ import annotations

import numpy as np
import pytest
import scipy.signal

from features.filters import (
    bandpass,
    block_centres,
    block_means,
    bridge_masked,
    butter_sos,
    lowpass,
    polyphase_fir,
    subtract_block_series,
)


@pytest.mark.parametrize(("order", "cutoff", "btype", "fs"),
                         [(2, 0.05, "lowpass", 10.0), (2, (1.5, 16.0), "bandpass", 250.0),
                          (4, (0.1, 0.7), "bandpass", 12.5), (2, 0.3, "highpass", 100.0)])
def test_cached_design_is_scipy_butter(order: int, cutoff: float | tuple[float, float],
                                       btype: str, fs: float) -> None:
    # reference library: scipy.signal.butter, second-order sections
    ref = scipy.signal.butter(order, cutoff, btype=btype, fs=fs, output="sos")
    got = butter_sos(order, cutoff, btype, fs)
    np.testing.assert_array_equal(got, ref)
    assert not got.flags.writeable
    assert butter_sos(order, cutoff, btype, fs) is got


def test_filters_equal_scipy_sosfiltfilt_with_even_padding() -> None:
    rng = np.random.default_rng(5)
    x = np.cumsum(rng.standard_normal(5000))
    # reference library: scipy.signal.sosfiltfilt with even extension (padlen as documented:
    # two periods of the lowest cutoff)
    sos = scipy.signal.butter(2, 0.5, btype="lowpass", fs=10.0, output="sos")
    np.testing.assert_array_equal(
        lowpass(x, 10.0, 0.5), scipy.signal.sosfiltfilt(sos, x, padtype="even", padlen=40))
    sos = scipy.signal.butter(2, (1.5, 16.0), btype="bandpass", fs=250.0, output="sos")
    np.testing.assert_array_equal(
        bandpass(x, 250.0, (1.5, 16.0)),
        scipy.signal.sosfiltfilt(sos, x, padtype="even", padlen=334))


@pytest.mark.parametrize("padtype", ["odd", "even", None])
@pytest.mark.parametrize("padlen", [None, 37])
@pytest.mark.parametrize("loop", ["scipy's compiled loop", "the loop, two series at a time",
                                  "sosfilt itself"])
def test_cached_filtfilt_equals_scipy_sosfiltfilt(padtype: str | None, padlen: int | None,
                                                  loop: str, monkeypatch) -> None:
    import features.filters as filters
    from features.filters import butter_filtfilt

    if loop == "sosfilt itself":  # the road taken where the compiled loop is not found
        monkeypatch.setattr(filters, "_SOSFILT_LOOP", None)
    elif filters._SOSFILT_LOOP is None:  # a scipy without the private loop: nothing to test
        pytest.skip("this scipy has no compiled section loop under the name the filters use")
    elif loop == "the loop, two series at a time":
        if not filters._PAIRS:
            pytest.skip("on this machine the paired series do not round as sosfilt does")
    else:
        monkeypatch.setattr(filters, "_PAIRS", False)
    rng = np.random.default_rng(6)
    x = np.cumsum(rng.standard_normal((3, 2000)), axis=-1)
    design = (4, (0.1, 0.7), "bandpass", 10.0)
    sos = scipy.signal.butter(4, (0.1, 0.7), btype="bandpass", fs=10.0, output="sos")
    # reference library: scipy.signal.sosfiltfilt (the same steps, so equal to the bit)
    for axis, data in ((-1, x), (0, x.T), (-1, x[0]), (1, np.stack((x.T, x.T[::-1])))):
        ref = scipy.signal.sosfiltfilt(sos, data, axis=axis, padtype=padtype, padlen=padlen)
        got = butter_filtfilt(data, design, axis=axis, padtype=padtype, padlen=padlen)
        np.testing.assert_array_equal(got, ref)


def test_a_compiled_loop_that_disagrees_with_sosfilt_is_not_used(monkeypatch) -> None:
    import scipy.signal._sosfilt as compiled

    import features.filters as filters

    def wrong(sos, x, zi):  # leaves the signal unfiltered
        return None

    monkeypatch.setattr(compiled, "_sosfilt", wrong)
    assert filters._sosfilt_loop() is None


def test_paired_series_that_disagree_with_sosfilt_are_not_used() -> None:
    import features.filters as filters

    if filters._SOSFILT_LOOP is None:
        pytest.skip("this scipy has no compiled section loop under the name the filters use")

    def rounding_differently(sos, x, zi):  # the real loop, one last-place unit off
        filters._SOSFILT_LOOP(sos, x, zi)
        x *= 1.0 + 2.0**-52

    assert filters._pairs_agree(rounding_differently) is False
    assert filters._pairs_agree(None) is False


def test_paired_series_keep_odd_counts_and_axes() -> None:
    # Five series (two pairs and one with zeros) along either axis: each as if alone.
    from features.filters import butter_filtfilt

    rng = np.random.default_rng(8)
    x = np.cumsum(rng.standard_normal((5, 3000)), axis=-1)
    design = (2, (1.0, 20.0), "bandpass", 125.0)
    alone = np.stack([butter_filtfilt(row, design) for row in x])
    np.testing.assert_array_equal(butter_filtfilt(x, design), alone)
    np.testing.assert_array_equal(butter_filtfilt(x.T, design, axis=0), alone.T)


def test_cached_filtfilt_refuses_a_trace_shorter_than_its_padding() -> None:
    from features.filters import butter_filtfilt

    with pytest.raises(ValueError, match="greater than padlen"):
        butter_filtfilt(np.zeros(20), (2, 0.5, "lowpass", 10.0), padlen=20)


@pytest.mark.parametrize("factor", [2, 3, 7, 8, 25])
def test_block_means_equal_numpy_mean_of_blocks(factor: int) -> None:
    from features.filters import block_means

    rng = np.random.default_rng(factor)
    x = rng.standard_normal((3, 10_007)) * 1e3
    m = x.shape[-1] // factor
    # reference library: numpy.mean over the reshaped blocks; the same sums below 8
    # samples a block (so equal), summed by numpy.einsum in another order from 8 on (a
    # few units in the last place of means of order 1e2-1e3: atol 1e-12)
    ref = x[:, : m * factor].reshape(3, m, factor).mean(axis=-1)
    if factor < 8:
        np.testing.assert_array_equal(block_means(x, factor), ref)
        np.testing.assert_array_equal(block_means(x[0], factor), ref[0])
    np.testing.assert_allclose(block_means(x, factor), ref, rtol=1e-13, atol=1e-12)
    np.testing.assert_allclose(block_means(x[0], factor), ref[0], rtol=1e-13, atol=1e-12)
    ints = rng.integers(-1000, 1000, 10_007)
    np.testing.assert_array_equal(block_means(ints, factor),
                                  ints[: m * factor].reshape(m, factor).mean(axis=-1))


@pytest.mark.parametrize("factor", [1, 2, 3, 4, 25, 100])
@pytest.mark.parametrize("extra", [0, 1, 7])
def test_block_series_subtraction_is_numpy_interp(factor: int, extra: int) -> None:
    # Reference: numpy.interp of the block series at every sample (end values held), as
    # the function documents. The blockwise form does numpy.interp's own arithmetic in the
    # same order, so the result is the same to the bit (the property under test: stages
    # that use it must not change their numbers).
    rng = np.random.default_rng(factor + extra)
    x = np.cumsum(rng.standard_normal(40 * factor + extra)) * 1e3 + 5e4
    slow = block_means(x, factor)
    want = x - np.interp(np.arange(x.size, dtype=np.float64), block_centres(slow.size, factor),
                         slow)
    got = x.copy()
    subtract_block_series(got, slow, factor)
    np.testing.assert_array_equal(got, want)


def test_bridged_spans_are_numpy_interp_over_the_usable_samples() -> None:
    # Reference: numpy.interp at every masked sample over all usable samples (a straight
    # line between the usable samples around a span, the end value held beyond the first
    # and last), as the function documents. Interpolating from the span borders alone is
    # the same arithmetic on the same neighbours, so the values are the same to the bit
    # (the property under test). Masks include spans at both ends and single samples.
    rng = np.random.default_rng(21)
    for _ in range(300):
        n = int(rng.integers(2, 80))
        x = rng.standard_normal(n) * 10.0 ** rng.uniform(-3, 3)
        usable = rng.random(n) < rng.uniform(0.05, 0.95)
        if usable.all() or not usable.any():
            continue
        idx = np.flatnonzero(usable)
        want = np.where(usable, x, np.interp(np.arange(n), idx, x[idx]))
        np.testing.assert_array_equal(bridge_masked(x, usable), want)
    assert not bridge_masked(np.ones(4), np.zeros(4, bool)).any()


@pytest.mark.parametrize(("up", "down"), [(5, 4), (1, 2), (1, 8), (25, 48)])
def test_cached_polyphase_design_is_resample_polys_own(up: int, down: int) -> None:
    x = np.random.default_rng(up * 100 + down).standard_normal(3001)
    # reference library: scipy.signal.resample_poly with its default Kaiser design; the
    # same filter taps, so the same numbers
    np.testing.assert_array_equal(
        scipy.signal.resample_poly(x, up, down, window=polyphase_fir(up, down)),
        scipy.signal.resample_poly(x, up, down))
    assert polyphase_fir(up, down) is polyphase_fir(up, down)  # designed once


@pytest.mark.parametrize("target,fs", [(125.0, 250.0), (125.0, 100.0), (125.0, 1000.0),
                                       (250.0, 100.0), (125.0, 333.3), (250.0, 250.0)])
def test_rate_ratio_is_the_limited_fraction(target: float, fs: float) -> None:
    from fractions import Fraction

    from features.filters import rate_ratio

    # reference: the standard library's Fraction.limit_denominator(1000)
    want = Fraction(target / fs).limit_denominator(1000)
    assert rate_ratio(target, fs) == (want.numerator, want.denominator)
