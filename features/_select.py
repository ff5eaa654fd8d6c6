"""The exact median of a long array by selecting within a bracket found on a sample.

``numpy.median`` partitions the whole array; on millions of samples that is the
slowest step of bringing a trace to the detector's working rate. The median is one
(or two) order statistics, so it is enough to partition the few values between two
bounds that bracket it: the bounds come from a regular sample of the array, one pass
counts the values below the lower bound and gathers those inside, and the
statistics are selected among those. The answer is the same element(s), so the same
number as ``numpy.median`` (the mean of the two middle elements for an even length,
computed as numpy does, ``(a + b) / 2``). When the bracket misses (a sample
unrepresentative of the array), ``numpy.median`` is used.

Short arrays (the beat detector takes a dozen medians of a few hundred values per
call) skip numpy's general reduction machinery: one ``numpy.partition`` at the
middle rank(s), the same arithmetic on the same elements.
"""

from __future__ import annotations

import numpy as np
from numpy.typing import ArrayLike, NDArray

#: Below this length numpy's own partition is as fast.
_MIN_LENGTH = 50_000
#: Values taken for the bracket (every ``n // _SAMPLE``-th).
_SAMPLE = 2_000
#: Half-width of the bracket, in sample ranks: the median's rank within a regular sample
#: of 2000 is off by more than 150 only for arrays ordered against the sampling
#: (a binomial rank has standard deviation about 22 here, so 150 is about 7 of them).
_MARGIN = 150


def median(x: ArrayLike) -> float:
    """``float(numpy.median(x))`` for finite values, the same number.

    Empty or multi-dimensional input goes to ``numpy.median`` itself.
    """
    v = np.asarray(x)
    n = v.size
    if v.ndim != 1 or n == 0:
        return float(np.median(v))
    if n >= _MIN_LENGTH:
        return _bracketed_median(v)
    h = n // 2
    if n % 2:
        return float(np.partition(v, h)[h])
    part = np.partition(v, (h - 1, h))
    return float((part[h - 1] + part[h]) / 2.0)


def quantile_half(x: ArrayLike) -> float:
    """``float(numpy.quantile(x, 0.5))`` (linear method) for finite values, the same number.

    For an even length numpy interpolates halfway from the lower to the upper middle
    element as ``upper - (upper - lower) * 0.5``, which can differ in the last bit from the
    median's ``(lower + upper) / 2``; that form is kept.
    """
    v = np.asarray(x)
    n = v.size
    if v.ndim != 1 or n == 0:
        return float(np.quantile(v, 0.5))
    h = n // 2
    if n % 2:
        return float(np.partition(v, h)[h])
    part = np.partition(v, (h - 1, h))
    lower, upper = part[h - 1], part[h]
    return float(upper - (upper - lower) * 0.5)


def _bracketed_median(x: NDArray[np.float64]) -> float:
    """The median of a long 1-D array by selection within a bracket (see the module)."""
    n = x.size
    sample = np.sort(x[:: n // _SAMPLE])
    mid = sample.size // 2
    lo_v, hi_v = sample[max(0, mid - _MARGIN)], sample[min(sample.size - 1, mid + _MARGIN)]
    below = int(np.count_nonzero(x < lo_v))
    inside = x[(x >= lo_v) & (x <= hi_v)]
    ranks = (n // 2 - 1, n // 2) if n % 2 == 0 else (n // 2, n // 2)
    first, last = ranks[0] - below, ranks[1] - below
    if first < 0 or last >= inside.size:
        return float(np.median(x))
    part = np.partition(inside, (first, last))
    if n % 2:
        return float(part[first])
    return float((part[first] + part[last]) / 2.0)
