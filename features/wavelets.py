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

from features._correlate import BlockSpectra

WAVELET = "sym4"


@dataclass(frozen=True)
class LevelBand:
    """Nominal pass band of one detail level of a dyadic wavelet transform."""

    level: int
    low_hz: float
    high_hz: float


@functools.lru_cache(maxsize=64)
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

    The trace is reflected at both ends by one reach of the transform, transformed,
    reconstructed from the chosen details alone, and cut back.

    The forward SWT and its inverse (``norm=True``, the inverse averaging over every
    decimation phase) together are the MODWT multiresolution component: a linear,
    shift-invariant filter of the input, zero-phase, whose reach is
    ``(L - 1) (2**J - 1)`` samples on each side (``L`` the filter length, ``J`` the
    top level) [1]_ (Percival & Walden 2000, ch. 5; Nason & Silverman 1995). Its
    impulse response is taken once per level set and wavelet from the transform
    itself (:func:`_mra_kernel`) and applied by FFT overlap-save
    (:class:`features._correlate.BlockSpectra`) to the reflected trace, at a cost of
    ``n log(kernel)``. This is the transform of the trace reflected by
    ``(L - 1)(2**J - 1) + 1`` samples at each end up to a multiple of ``2**J`` and
    treated as circular (the circular wrap never reaches the data), to rounding
    (``tests/features/test_wavelets.py``). Traces shorter than the reach take that
    transform itself.

    References
    ----------
    .. [1] Percival DB, Walden AT. Wavelet Methods for Time Series Analysis.
       Cambridge University Press, 2000. doi:10.1017/CBO9780511841040
    .. [2] Nason GP, Silverman BW. The stationary wavelet transform and some
       statistical applications. In: Wavelets and Statistics, Lecture Notes in
       Statistics 103:281-299, Springer, 1995. doi:10.1007/978-1-4612-2544-7_17
    """
    data = np.asarray(x, dtype=np.float64)
    n = data.size
    top = max(levels)
    reach = _reach(top, wavelet)
    if n - 1 < reach + 1:
        return _circular_component(data, levels, wavelet)
    kernel = _mra_kernel(tuple(sorted(set(levels))), wavelet)
    padded = np.pad(data, (reach, reach), mode="reflect")
    # out[i] = sum_k kernel[k] padded[i + 2 reach - k]: the reversed kernel correlated
    # with the reflected trace from its first sample (centre 0)
    return BlockSpectra(padded, kernel.size).correlate(kernel[::-1], 0)[:n]


def _reach(top: int, wavelet: str) -> int:
    """One-sided reach of the MRA filter of levels up to ``top``, samples."""
    return int((pywt.Wavelet(wavelet).dec_len - 1) * (2**top - 1))


def _circular_component(data: NDArray[np.float64], levels: tuple[int, ...], wavelet: str
                        ) -> NDArray[np.float64]:
    """The component by the transform itself, on the reflected trace made circular."""
    n = data.size
    top = max(levels)
    block = 2**top
    margin = min(n - 1, _reach(top, wavelet) + 1)
    padded_len = int(math.ceil((n + 2 * margin) / block) * block)
    padded = np.pad(data, (margin, padded_len - n - margin), mode="reflect")
    return np.ascontiguousarray(_mra(padded, levels, top, wavelet)[margin : margin + n])


@functools.lru_cache(maxsize=16)
def _mra_kernel(levels: tuple[int, ...], wavelet: str) -> NDArray[np.float64]:
    """Impulse response of the MRA component of ``levels`` (``2 reach + 1`` taps, read-only).

    The component of a unit impulse on a circular trace long enough that the response
    does not wrap: the transform is shift-invariant, so this is its response to any
    sample.
    """
    top = max(levels)
    reach = _reach(top, wavelet)
    size = int(math.ceil((4 * reach + 2) / 2**top) * 2**top)
    impulse = np.zeros(size)
    impulse[size // 2] = 1.0
    response = _mra(impulse, levels, top, wavelet)
    kernel = np.array(response[size // 2 - reach : size // 2 + reach + 1])
    kernel.setflags(write=False)
    return kernel


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
