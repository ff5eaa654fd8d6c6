"""Small numeric kernels shared by the stages: medians and quantiles, robust spread,
parabolic peaks, runs.

The medians give the value ``numpy.median`` gives (the same order statistics, and the mean
of the two middle ones for an even count, computed as numpy does), and the quantile the
value of ``numpy.quantile`` (linear method), without their per-call overhead (argument
normalisation, a NaN check by a second reduction), which dominated the many medians of
short arrays the stages take. On a long array (a night's trace) the order statistics are
selected within a bracket found on a regular sample of the array: one pass counts the
values below the lower bound and gathers those inside, and the wanted order statistic(s)
are selected among the few gathered, instead of partitioning millions of values. The
answer is the same element(s), so the same number; when the bracket misses (a sample
unrepresentative of the array) the whole array is partitioned.
"""

from __future__ import annotations

import numpy as np
from numpy.typing import ArrayLike, NDArray

__all__ = ["MAD_TO_SD", "lane_median", "median_1d", "quantile", "robust_sd", "runs",
           "vertex_offset"]

MAD_TO_SD = 1.4826
"""Normal consistency constant of the median absolute deviation, 1 / Phi^-1(3/4)
(= 1.482602...): ``MAD_TO_SD * MAD`` estimates the standard deviation of normal data.
Rousseeuw PJ, Croux C. Alternatives to the median absolute deviation. Journal of the
American Statistical Association 88(424):1273-1283, 1993. doi:10.1080/01621459.1993.10476408.
The four-digit value is the one in common use (it is scipy.stats.median_abs_deviation's
``scale="normal"`` rounded)."""


SORTED_LANES_UP_TO = 1000
"""Longest lane :func:`lane_median` sorts; numpy's partition wins on longer ones."""


BRACKET_FROM = 50_000
"""Shortest array :func:`median_1d` brackets; below it one partition is as fast."""
_BRACKET_SAMPLE = 2_000
"""Values taken for the bracket (every ``n // _BRACKET_SAMPLE``-th)."""
_BRACKET_MARGIN = 150
"""Half-width of the bracket in sample ranks: the median's rank within a regular sample of
2000 is off by more than 150 only for arrays ordered against the sampling (a binomial rank
has standard deviation about 22 here, so 150 is about 7 of them)."""


def median_1d(x: NDArray[np.float64]) -> float:
    """``numpy.median`` of a 1-D numeric array, the same value (NaN when any sample is NaN).

    One partition that places the middle order statistic(s) and the largest sample (NaN
    sorts last, so it tells whether any is present), as ``numpy.median`` does, without its
    wrapper; from ``BRACKET_FROM`` samples a selection within a bracket (see the module); an
    empty or multi-dimensional array goes to ``numpy.median`` itself (NaN and its warning).
    """
    n = x.size
    if n == 0 or x.ndim != 1:
        return float(np.median(x))
    if n >= BRACKET_FROM:
        return _bracketed_median(x)
    lo, hi = (n - 1) // 2, n // 2
    part = np.partition(x, (lo, hi, n - 1) if hi < n - 1 else (lo, hi))
    if np.isnan(part[n - 1]):
        return float("nan")
    return float(part[lo]) if lo == hi else float((part[lo] + part[hi]) / 2.0)


def quantile(x: NDArray[np.float64], q: float) -> float:
    """``numpy.quantile(x, q)`` (linear method) of a 1-D array, the same number (NaN when any
    sample is NaN).

    numpy's steps for one ``q`` (numpy 2.4): the virtual index ``(n - 1) q``, the order
    statistics at its floor and the next (both the largest from the last index on), and
    its interpolation, from the upper one when the fraction ``g`` is at least 1/2
    (``upper - (upper - lower) (1 - g)``, else ``lower + (upper - lower) g``); the order
    statistics selected within a bracket from ``BRACKET_FROM`` samples, as for
    :func:`median_1d`.
    """
    n = x.size
    if n == 0 or x.ndim != 1 or not 0.0 <= q <= 1.0:
        return float(np.quantile(x, q))
    virtual = (n - 1) * q
    lo = min(int(np.floor(virtual)), n - 1)
    hi = lo if virtual >= n - 1 else lo + 1
    pair = _bracketed(x, lo, hi) if n >= BRACKET_FROM else None
    if pair is None:
        part = np.partition(x, (lo, hi, n - 1) if hi < n - 1 else (lo, hi))
        if np.isnan(part[n - 1]):
            return float("nan")
        pair = float(part[lo]), float(part[hi])
    lower, upper = pair
    g = virtual - np.floor(virtual) if virtual < n - 1 else 0.0
    diff = upper - lower
    return float(upper - diff * (1 - g)) if g >= 0.5 else float(lower + diff * g)


def _bracketed_median(x: NDArray[np.float64]) -> float:
    """The median of a long 1-D array by selection within a bracket (see the module)."""
    n = x.size
    pair = _bracketed(x, (n - 1) // 2, n // 2)
    if pair is None:
        return float(np.median(x))
    lower, upper = pair
    return lower if (n - 1) // 2 == n // 2 else float((lower + upper) / 2.0)


def _bracketed(x: NDArray[np.float64], lo: int, hi: int) -> tuple[float, float] | None:
    """Order statistics ``lo <= hi`` of a long 1-D array selected within a bracket of the
    values of a regular sample around their ranks (see the module); both NaN when the
    array holds NaN, None when the bracket misses them."""
    n = x.size
    sample = np.sort(x[:: n // _BRACKET_SAMPLE])
    if np.isnan(sample[-1]):
        return float("nan"), float("nan")
    lo_v = sample[max(0, lo * sample.size // n - _BRACKET_MARGIN)]
    hi_v = sample[min(sample.size - 1, hi * sample.size // n + _BRACKET_MARGIN)]
    below = int(np.count_nonzero(x < lo_v))
    inside = x[(x >= lo_v) & (x <= hi_v)]
    if below + inside.size + int(np.count_nonzero(x > hi_v)) != n:
        return float("nan"), float("nan")  # a NaN is in none of the three
    if lo - below < 0 or hi - below >= inside.size:
        return None
    part = np.partition(inside, (lo - below, hi - below))
    return float(part[lo - below]), float(part[hi - below])


def lane_median(a: NDArray[np.float64]) -> NDArray[np.float64]:
    """``numpy.median(a, axis=-1)`` of a float array with a non-empty last axis, the same
    values (NaN in a lane holding NaN), from one sort of the lanes.

    For many short lanes a sort costs less than numpy's partition (numpy 2.4 on x86-64:
    201 lanes of 250 samples, 0.2 ms against 1.3 ms for ``numpy.median``); past
    ``SORTED_LANES_UP_TO`` samples a lane goes to ``numpy.median``.
    """
    n = a.shape[-1]
    if n > SORTED_LANES_UP_TO:
        return np.asarray(np.median(a, axis=-1), dtype=np.float64)
    s = np.sort(a, axis=-1)
    lo, hi = (n - 1) // 2, n // 2
    med = s[..., lo] if lo == hi else (s[..., lo] + s[..., hi]) / 2.0
    return np.where(np.isnan(s[..., n - 1]), np.nan, med)


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
    if axis is None:
        return float(MAD_TO_SD * np.median(np.abs(v - np.median(v))))
    med = np.median(v, axis=axis, keepdims=True)
    return np.asarray(MAD_TO_SD * np.median(np.abs(v - med), axis=axis))


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
