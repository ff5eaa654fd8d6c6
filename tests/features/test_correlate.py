"""Tests of the shared-block sliding correlation against numpy's direct correlation."""

from __future__ import annotations

import numpy as np
import pytest

from features._correlate import BlockSpectra


def _direct(x: np.ndarray, template: np.ndarray, centre: int) -> np.ndarray:
    # reference library: numpy.convolve ("full", direct sums) of x with the reversed
    # template, cut at the alignment that puts template[centre] on each sample
    full = np.convolve(x, template[::-1], mode="full")
    first = template.size - 1 - centre
    return full[first: first + x.size]


@pytest.mark.parametrize("n", [50, 1000, 1019, 37_500])
def test_correlation_equals_direct_sums(n: int) -> None:
    rng = np.random.default_rng(n)
    x = rng.standard_normal(n)
    spectra = BlockSpectra(x, 101)
    # several templates through the same blocks: the full one, a core, a one-sample one
    for m, centre in ((101, 44), (45, 19), (101, 0), (101, 100), (1, 0)):
        t = rng.standard_normal(m)
        got = spectra.correlate(t, centre)
        # FFT products round differently from direct sums: errors of order
        # eps * log2(nfft) * sum|t| * max|x| (about 1e-13 here); 1e-11 leaves room.
        np.testing.assert_allclose(got, _direct(x, t, centre), rtol=0,
                                   atol=1e-11 * np.abs(t).sum() * np.abs(x).max())


def test_template_longer_than_the_blocks_allow_is_refused() -> None:
    spectra = BlockSpectra(np.ones(500), 21)
    with pytest.raises(ValueError, match="does not fit"):
        spectra.correlate(np.ones(22), 10)
    with pytest.raises(ValueError, match="does not fit"):
        spectra.correlate(np.ones(5), 5)
