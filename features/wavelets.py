"""Stationary wavelet transform helpers shared by the beat and shape stages.

The stationary (undecimated) wavelet transform of PyWavelets with
``norm=True`` is the maximal-overlap DWT (MODWT) up to a per-level circular
shift; reconstructing from a subset of detail levels gives the MODWT
multiresolution analysis (MRA) component of those levels, zero-phase and
aligned with the input.

References
----------
.. [1] Percival DB, Walden AT. Wavelet Methods for Time Series Analysis.
   Cambridge University Press, 2000. doi:10.1017/CBO9780511841040
.. [2] Sadek I, Abdulrazak B. A comparison of three heart rate detection
   algorithms over ballistocardiogram signals. Biomedical Signal Processing
   and Control 70:103017, 2021. doi:10.1016/j.bspc.2021.103017
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
import pywt
from numpy.typing import ArrayLike, NDArray

WAVELET = "sym4"


@dataclass(frozen=True)
class LevelBand:
    """Nominal pass band of one detail level of a dyadic wavelet transform."""

    level: int
    low_hz: float
    high_hz: float


def detail_bands(fs_hz: float, max_level: int) -> tuple[LevelBand, ...]:
    """Nominal band of each detail level: level j spans fs/2**(j+1) to fs/2**j."""
    return tuple(
        LevelBand(j, fs_hz / 2.0 ** (j + 1), fs_hz / 2.0**j) for j in range(1, max_level + 1)
    )


def levels_for_band(fs_hz: float, band_hz: tuple[float, float]) -> tuple[int, ...]:
    """Detail levels whose nominal bands overlap ``band_hz`` by at least half an octave's worth.

    A level is kept when the overlap of its band with ``band_hz`` covers at
    least half of the level's own band (on a log-frequency scale), so that a
    level mostly outside the band is not kept for a sliver of overlap.
    """
    low, high = band_hz
    top = max(1, int(math.floor(math.log2(fs_hz / low))))
    kept = []
    for b in detail_bands(fs_hz, top):
        lo = max(b.low_hz, low)
        hi = min(b.high_hz, high)
        if hi > lo and math.log2(hi / lo) >= 0.5:
            kept.append(b.level)
    return tuple(kept)


def swt_component(
    x: ArrayLike, *, levels: tuple[int, ...], wavelet: str = WAVELET
) -> NDArray[np.float64]:
    """MODWT-style MRA component of ``x`` made of the given detail levels only.

    The trace is reflected at both ends up to a length that is a multiple of
    ``2**max(levels)`` (plus one filter length of margin, which keeps the
    circular wrap of the transform away from the data), transformed,
    reconstructed from the chosen details alone, and cut back.
    """
    data = np.asarray(x, dtype=np.float64)
    n = data.size
    top = max(levels)
    block = 2**top
    margin = min(n - 1, (pywt.Wavelet(wavelet).dec_len - 1) * (block - 1) + 1)
    total = n + 2 * margin
    padded_len = int(math.ceil(total / block) * block)
    extra = padded_len - total
    padded = np.pad(data, (margin, margin + extra), mode="reflect")
    coeffs = pywt.swt(padded, wavelet, level=top, trim_approx=True, norm=True)
    # coeffs = [cA_top, cD_top, cD_top-1, ..., cD_1]
    keep = set(levels)
    kept = [np.zeros_like(coeffs[0])]
    for i, c in enumerate(coeffs[1:]):
        level = top - i
        kept.append(c if level in keep else np.zeros_like(c))
    out = pywt.iswt(kept, wavelet, norm=True)
    return np.ascontiguousarray(out[margin : margin + n])
