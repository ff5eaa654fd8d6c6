"""Small numeric kernels shared by the stages: medians and quantiles, robust spread,
parabolic peaks, runs.

The medians give the value ``numpy.median`` gives (the same order statistics, and the mean
of the two middle ones for an even count, computed as numpy does), and the quantile the
value of ``numpy.quantile`` (linear method), without their per-call overhead (argument
normalisation, a NaN check by a second reduction), which dominated the many medians of
short arrays the stages take. The order statistics are selected by a partition about one
pivot (:func:`_order_pair`); the next order statistic, when wanted, is the smallest value
above it. numpy's partition about several pivots at once, which ``numpy.median`` uses, costs
several times as much on long arrays, since one pivot is the case numpy hands to its
vectorised selection (x86-simd-sort's AVX2 and AVX-512 quickselect, numpy >= 2.0).
"""

from __future__ import annotations

from typing import Any

import numpy as np
from numpy.typing import ArrayLike, NDArray

__all__ = ["MAD_TO_SD", "clip", "count_in", "lane_median", "mean", "median_1d", "quantile",
           "robust_sd", "runs", "std", "vertex_offset", "windows"]

MAD_TO_SD = 1.4826
"""Normal consistency constant of the median absolute deviation, 1 / Phi^-1(3/4)
(= 1.482602...): ``MAD_TO_SD * MAD`` estimates the standard deviation of normal data.
Rousseeuw PJ, Croux C. Alternatives to the median absolute deviation. Journal of the
American Statistical Association 88(424):1273-1283, 1993. doi:10.1080/01621459.1993.10476408.
The four-digit value is the one in common use (it is scipy.stats.median_abs_deviation's
``scale="normal"`` rounded)."""


SORTED_LANES_UP_TO = 1000
"""Longest lane :func:`lane_median` (and array :func:`median_1d` and :func:`quantile`) sorts;
a one-pivot partition wins on longer ones."""


def mean(a: NDArray[Any], axis: int | None = None, keepdims: bool = False) -> Any:
    """``numpy.mean(a, axis, keepdims=keepdims)`` of a float (or complex) array, the same
    value: numpy's sum along the axis divided by the count, without the wrapper (3.2
    against 0.8 us for 300 values, numpy 2.4), which counted at the dozens of means per
    recording. Not for integer or boolean arrays (numpy sums those as float64)."""
    count = a.size if axis is None else a.shape[axis]
    total: Any = np.add.reduce(a, axis=axis, keepdims=keepdims)  # type: ignore[call-overload]
    return total / count


def std(a: NDArray[np.float64], axis: int | None = None, ddof: int = 0) -> Any:
    """``numpy.std(a, axis, ddof=ddof)`` of a float64 array, the same value: numpy's steps
    (numpy 2.4 ``_methods._var``: the sum with kept dimensions over the count, the
    deviations squared in place, their sum over ``max(count - ddof, 0)``, the square root)
    without the wrapper, some 8 us a call against 2 for the arithmetic on a few hundred
    values."""
    count = a.size if axis is None else a.shape[axis]
    centre = np.add.reduce(a, axis=axis, keepdims=True)
    centre /= count
    dev = a - centre
    np.multiply(dev, dev, out=dev)
    total: Any = np.add.reduce(dev, axis=axis)
    return np.sqrt(total / max(count - ddof, 0))


def clip(value: Any, low: float, high: float) -> float:
    """``float(numpy.clip(value, low, high))`` of one number, the same value (NaN stays NaN),
    by Python's ``min`` and ``max`` (0.1 against 4 us a call)."""
    return min(max(float(value), low), high)


def windows(a: NDArray[Any], width: int, step: int = 1) -> NDArray[Any]:
    """``sliding_window_view(a, width, axis=-1)[..., ::step, :]``, read-only: the same view
    (for a 1-D array, ``sliding_window_view(a, width)[::step]``).

    A contiguous array gets it from the ndarray constructor (about 1 us against 6 for
    numpy's ``sliding_window_view``, which the stages call a dozen times per recording);
    anything else from ``sliding_window_view`` itself.
    """
    n = a.shape[-1] if a.ndim else 0
    if not a.flags.c_contiguous or not 0 < width <= n or step < 1:
        return np.lib.stride_tricks.sliding_window_view(a, width, axis=-1)[..., ::step, :]
    item = a.itemsize
    view: NDArray[Any] = np.ndarray((*a.shape[:-1], (n - width) // step + 1, width),
                                    dtype=a.dtype, buffer=a,
                                    strides=(*a.strides[:-1], item * step, item))
    view.flags.writeable = False
    return view


def count_in(flags: NDArray[np.bool_], lo: ArrayLike, hi: ArrayLike) -> NDArray[np.intp]:
    """How many of ``flags`` are True in each span ``[lo, hi)`` (indices 0 to ``flags.size``).

    The differences ``c[hi] - c[lo]`` of the running count ``c = numpy.concatenate(([0],
    numpy.cumsum(flags)))``, the same integers, from a binary search of the True positions
    instead of a running count of every sample and its int64 array (numpy 2.4: 6 against
    20 us for the 37 500 samples of a 5-minute record at 125 Hz and 350 beats); the stages
    count masked samples around a few hundred beats or breaths of a long mask.
    """
    at = np.flatnonzero(flags)
    return np.asarray(np.searchsorted(at, hi) - np.searchsorted(at, lo))


def median_1d(x: NDArray[np.float64]) -> float:
    """``numpy.median`` of a 1-D numeric array, the same value (NaN when any sample is NaN).

    The middle order statistic(s) by :func:`_order_pair`; an empty or multi-dimensional
    array goes to ``numpy.median`` itself (NaN and its warning).
    """
    n = x.size
    if n == 0 or x.ndim != 1:
        return float(np.median(x))
    lo, hi = (n - 1) // 2, n // 2
    lower, upper = _order_pair(x, lo, hi)
    return lower if lo == hi else float((lower + upper) / 2.0)


def quantile(x: NDArray[np.float64], q: float) -> float:
    """``numpy.quantile(x, q)`` (linear method) of a 1-D array, the same number (NaN when any
    sample is NaN).

    numpy's steps for one ``q`` (numpy 2.4): the virtual index ``(n - 1) q``, the order
    statistics at its floor and the next (both the largest from the last index on), and
    its interpolation, from the upper one when the fraction ``g`` is at least 1/2
    (``upper - (upper - lower) (1 - g)``, else ``lower + (upper - lower) g``); the order
    statistics by :func:`_order_pair`.
    """
    n = x.size
    if n == 0 or x.ndim != 1 or not 0.0 <= q <= 1.0:
        return float(np.quantile(x, q))
    virtual = (n - 1) * q
    lo = min(int(np.floor(virtual)), n - 1)
    hi = lo if virtual >= n - 1 else lo + 1
    lower, upper = _order_pair(x, lo, hi)
    g = virtual - np.floor(virtual) if virtual < n - 1 else 0.0
    diff = upper - lower
    return float(upper - diff * (1 - g)) if g >= 0.5 else float(lower + diff * g)


def _order_pair(x: NDArray[np.float64], lo: int, hi: int) -> tuple[float, float]:
    """Order statistics ``lo`` and ``hi`` (``lo <= hi <= lo + 1 < x.size + 1``) of a
    non-empty 1-D array, both NaN when it holds a NaN.

    One partition about ``lo``; the order statistic ``lo + 1`` is the smallest value above
    it. NaN sorts last, so a NaN is at ``lo`` or above it, where the largest value shows it.
    Measured against numpy's partition about (lo, lo + 1, n - 1), numpy 2.4, AVX-512:
    37 500 values 38 against 220 us, 75 000 130 against 730, 7.2 million 15 against 72 ms.
    Up to ``SORTED_LANES_UP_TO`` values the array is sorted instead (350 values: 1.5
    against 4.0 us for the partition and the two reductions).
    """
    if x.size <= SORTED_LANES_UP_TO:  # one call: a sort of a short array costs less
        s = np.sort(x)
        if np.isnan(s[-1]):
            return float("nan"), float("nan")
        return float(s[lo]), float(s[hi])
    part = np.partition(x, lo)
    lower = float(part[lo])
    rest = part[lo + 1:]
    if not rest.size:
        return lower, lower
    if np.isnan(rest.max()):
        return float("nan"), float("nan")
    return lower, (float(rest.min()) if hi > lo else lower)


def lane_median(a: NDArray[np.float64]) -> NDArray[np.float64]:
    """``numpy.median(a, axis=-1)`` of a float array with a non-empty last axis, the same
    values (NaN in a lane holding NaN).

    Up to ``SORTED_LANES_UP_TO`` samples the lanes are sorted (for many short lanes a sort
    costs less than numpy's partition: numpy 2.4 on x86-64, 201 lanes of 250 samples,
    0.2 ms against 1.3 ms for ``numpy.median``); longer lanes are partitioned about the
    lower middle, whose upper neighbour is the smallest value above it (as in
    :func:`_order_pair`).
    """
    n = a.shape[-1]
    lo, hi = (n - 1) // 2, n // 2
    if n <= SORTED_LANES_UP_TO:
        s = np.sort(a, axis=-1)
        med = s[..., lo] if lo == hi else (s[..., lo] + s[..., hi]) / 2.0
        return np.where(np.isnan(s[..., n - 1]), np.nan, med)
    part = np.partition(a, lo, axis=-1)
    rest = part[..., lo + 1:]
    med = part[..., lo] if lo == hi else (part[..., lo] + rest.min(axis=-1)) / 2.0
    return np.where(np.isnan(rest.max(axis=-1)), np.nan, med)


def robust_sd(x: ArrayLike, axis: int | None = None) -> NDArray[np.float64] | float:
    """Robust standard deviation ``MAD_TO_SD * median(|x - median(x)|)`` along ``axis``.

    Parameters
    ----------
    x
        Real samples.
    axis
        Axis to reduce; None reduces all and returns a float.
    """
    v = np.asarray(x, dtype=np.float64)
    if axis is None and v.size:
        v = v.reshape(-1)
        return float(MAD_TO_SD * median_1d(np.abs(v - median_1d(v))))
    if axis is None:  # empty: numpy's NaN and warning
        return float(MAD_TO_SD * np.median(np.abs(v - np.median(v))))
    if not v.size:
        med = np.median(v, axis=axis, keepdims=True)
        return np.asarray(MAD_TO_SD * np.median(np.abs(v - med), axis=axis))
    lanes = np.moveaxis(v, axis, -1)  # the medians along the axis by lane_median
    med = lane_median(lanes)
    return np.asarray(MAD_TO_SD * lane_median(np.abs(lanes - med[..., None])))


def vertex_offset(a: ArrayLike, b: ArrayLike, c: ArrayLike) -> NDArray[np.float64]:
    """Offset of the vertex of the parabola through (-1, a), (0, b), (1, c), in samples.

    ``0.5 (a - c) / (a - 2 b + c)`` where the parabola opens downwards (a maximum at the
    middle sample), 0 elsewhere; three-point parabolic interpolation of a peak. Callers
    clip the offset to [-0.5, 0.5] when they need it inside the middle sample.
    """
    a_, b_, c_ = (np.asarray(v, dtype=np.float64) for v in (a, b, c))
    den = a_ - 2 * b_ + c_
    peak = den < 0
    out: NDArray[np.float64] = np.where(peak, 0.5 * (a_ - c_) / np.where(peak, den, -1.0), 0.0)
    return out


def runs(mask: ArrayLike) -> tuple[NDArray[np.intp], NDArray[np.intp]]:
    """Start and end (exclusive) indices of the runs of True in ``mask`` (1-D)."""
    padded = np.concatenate(([False], np.asarray(mask, dtype=bool), [False]))
    change = np.flatnonzero(padded[1:] != padded[:-1])  # alternately rises and falls
    return change[0::2], change[1::2]
