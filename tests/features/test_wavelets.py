"""Tests of the blocked stationary-wavelet component against PyWavelets on the whole trace."""

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


@pytest.mark.parametrize("n", [1250, 20_001, 65_536])
@pytest.mark.parametrize("levels", [(3, 4, 5), (2, 3), (1,)])
def test_blocked_equals_whole_trace(monkeypatch: pytest.MonkeyPatch, n: int,
                                    levels: tuple[int, ...]) -> None:
    rng = np.random.default_rng(n)
    x = np.cumsum(rng.standard_normal(n)) * 0.01 + rng.standard_normal(n)
    monkeypatch.setattr(wavelets, "_SWT_BLOCK", 4096)  # many blocks, ends included
    got = wavelets.swt_component(x, levels=levels)
    ref = _whole_trace_component(x, levels)
    np.testing.assert_allclose(got, ref, rtol=0, atol=1e-12 * np.abs(ref).max())
