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

import functools
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


#: Output samples per block of the blocked transform (a multiple of any ``2**level`` used).
_SWT_BLOCK = 1 << 17


def swt_component(
    x: ArrayLike, *, levels: tuple[int, ...], wavelet: str = WAVELET
) -> NDArray[np.float64]:
    """MODWT-style MRA component of ``x`` made of the given detail levels only.

    The trace is reflected at both ends up to a length that is a multiple of
    ``2**max(levels)`` (plus one filter length of margin, which keeps the
    circular wrap of the transform away from the data), transformed,
    reconstructed from the chosen details alone, and cut back.

    Long traces are transformed in blocks of ``_SWT_BLOCK`` output samples:
    the transform and its inverse together are a circular shift-invariant
    filter whose reach is ``2 (L - 1) (2**J - 1)`` samples (``L`` the filter
    length, ``J`` the top level), so each block is computed on a window of the
    padded trace extended circularly by at least that reach on both sides (a
    multiple of ``2**J``, keeping the dyadic alignment) and its centre kept.
    The result equals the whole-trace transform to rounding, at a cost linear
    in length and with the coefficient arrays of one block in memory.
    """
    data = np.asarray(x, dtype=np.float64)
    n = data.size
    top = max(levels)
    block = 2**top
    filt = pywt.Wavelet(wavelet).dec_len
    margin = min(n - 1, (filt - 1) * (block - 1) + 1)
    total = n + 2 * margin
    padded_len = int(math.ceil(total / block) * block)
    extra = padded_len - total
    padded = np.pad(data, (margin, margin + extra), mode="reflect")
    reach = int(math.ceil((2 * (filt - 1) * (block - 1) + 1) / block) * block)
    step = max(block, _SWT_BLOCK // block * block)
    if padded_len <= step + 2 * reach:
        out = _mra(padded, levels, top, wavelet)
    else:
        out = np.empty(padded_len)
        for a in range(0, padded_len, step):
            b = min(a + step, padded_len)
            b_win = int(math.ceil((b - a) / block) * block) + a
            window = np.take(padded, np.arange(a - reach, b_win + reach), mode="wrap")
            out[a:b] = _mra(window, levels, top, wavelet)[reach : reach + b - a]
    return np.ascontiguousarray(out[margin : margin + n])


def _mra(padded: NDArray[np.float64], levels: tuple[int, ...], top: int, wavelet: str
         ) -> NDArray[np.float64]:
    """Circular SWT of ``padded`` reconstructed from the ``levels`` details alone."""
    coeffs = pywt.swt(padded, wavelet, level=top, trim_approx=True, norm=True)
    # coeffs = [cA_top, cD_top, cD_top-1, ..., cD_1]; one zero array stands for every
    # dropped level (the inverse does not write into its inputs).
    zero = np.zeros_like(coeffs[0])
    keep = set(levels)
    kept = [zero] + [c if top - i in keep else zero for i, c in enumerate(coeffs[1:])]
    return _iswt(kept, wavelet)


@functools.lru_cache(maxsize=8)
def _inverse_wavelet(wavelet: str) -> pywt.Wavelet:
    """The filter bank scaled by sqrt(2), as ``pywt.iswt(..., norm=True)`` scales it."""
    base = pywt.Wavelet(wavelet)
    scaled = pywt.Wavelet(base.name + "r", [np.asarray(f) * np.sqrt(2) for f in base.filter_bank])
    scaled.orthogonal = base.orthogonal
    scaled.biorthogonal = base.biorthogonal
    return scaled


def _iswt(coeffs: list[NDArray[np.float64]], wavelet: str) -> NDArray[np.float64]:
    """``pywt.iswt(coeffs, wavelet, norm=True)`` for ``trim_approx`` coefficients.

    The same steps as PyWavelets' implementation (per level and phase: inverse DWT,
    periodization, of the even and the odd subsequences, the odd result shifted
    right by one, their mean), with strided slices where it gathers and scatters
    through index arrays; the same numbers.
    """
    out = np.array(coeffs[0], dtype=np.float64, copy=True)
    details = coeffs[1:]
    wav = _inverse_wavelet(wavelet)
    for j in range(len(details), 0, -1):
        step = 2 ** (j - 1)
        c_d = details[-j]
        for first in range(step):
            x1 = pywt.idwt(out[first::2 * step], c_d[first::2 * step], wav, "periodization")
            x2 = pywt.idwt(out[first + step::2 * step], c_d[first + step::2 * step], wav,
                           "periodization")
            out[first::step] = (x1 + np.roll(x2, 1)) / 2.0
    return out
