"""Tests of the stationary-wavelet component (a linear filter) against PyWavelets."""

from __future__ import annotations

import math

import numpy as np
import pytest
import pywt

import features.wavelets as wavelets


def _whole_trace_component(x: np.ndarray, levels: tuple[int, ...]) -> np.ndarray:
    # reference library: pywt.swt / pywt.iswt (norm=True) on the whole reflected trace,
    # the details outside `levels` and the approximation set to zero
    top = max(levels)
    block = 2**top
    margin = min(x.size - 1, (pywt.Wavelet("sym4").dec_len - 1) * (block - 1) + 1)
    padded_len = int(math.ceil((x.size + 2 * margin) / block) * block)
    padded = np.pad(x, (margin, padded_len - x.size - margin), mode="reflect")
    coeffs = pywt.swt(padded, "sym4", level=top, trim_approx=True, norm=True)
    kept = [np.zeros_like(coeffs[0])] + [
        c if top - i in levels else np.zeros_like(c) for i, c in enumerate(coeffs[1:])
    ]
    return pywt.iswt(kept, "sym4", norm=True)[margin : margin + x.size]


@pytest.mark.parametrize("n", [5, 100, 300, 1250, 20_001, 65_536])
@pytest.mark.parametrize("levels", [(3, 4, 5), (2, 3), (1,)])
def test_component_equals_whole_trace_transform(n: int, levels: tuple[int, ...]) -> None:
    rng = np.random.default_rng(n)
    x = np.cumsum(rng.standard_normal(n)) * 0.01 + rng.standard_normal(n)
    got = wavelets.swt_component(x, levels=levels)
    ref = _whole_trace_component(x, levels)
    # The filter route sums the same products in another order, through FFTs: each output
    # carries rounding of order eps * log2(FFT length) * (kernel l1 norm, under 4) * max|x|,
    # about 1e-14 * max|x| at worst; measured under 3e-16 * max|x| at these lengths (the
    # short traces, under one reach, take the transform itself). 1e-12 leaves room.
    np.testing.assert_allclose(got, ref, rtol=0, atol=1e-12 * np.abs(x).max())


@pytest.mark.parametrize("levels", [(3, 4, 5), (2, 3), (1,)])
def test_component_kernel_is_zero_phase_without_dc(levels: tuple[int, ...]) -> None:
    kernel = wavelets._mra_kernel(levels, "sym4")
    # The MODWT multiresolution details are zero-phase filters (Percival & Walden 2000,
    # section 5.5, from memory): a symmetric impulse response; the detail filters have
    # vanishing moments, so no constant passes (zero sum). Rounding of the ~10 transform
    # passes that made the kernel: 1e-14 on taps of size under 1.
    np.testing.assert_allclose(kernel, kernel[::-1], rtol=0, atol=1e-14)
    assert abs(kernel.sum()) < 1e-12
    assert kernel.size == 2 * (pywt.Wavelet("sym4").dec_len - 1) * (2 ** max(levels) - 1) + 1


@pytest.mark.parametrize("wavelet", ["sym4", "db2", "haar"])
@pytest.mark.parametrize("level", [1, 3, 5])
def test_inverse_transform_equals_pywt_iswt(wavelet: str, level: int) -> None:
    from features.wavelets import _iswt

    rng = np.random.default_rng(level)
    x = rng.standard_normal(2**level * 40)
    coeffs = pywt.swt(x, wavelet, level=level, trim_approx=True, norm=True)
    zero = np.zeros_like(coeffs[0])
    # every other detail level dropped, as the MRA component drops levels
    kept = [zero] + [c if i % 2 == 0 else zero for i, c in enumerate(coeffs[1:])]
    # reference library: PyWavelets pywt.iswt (norm=True); the same arithmetic, so equal
    np.testing.assert_array_equal(_iswt(kept, wavelet), pywt.iswt(kept, wavelet, norm=True))
    # all levels kept: perfect reconstruction (Percival & Walden 2000, MODWT, from memory)
    np.testing.assert_allclose(_iswt(list(coeffs), wavelet), x, atol=1e-10)
