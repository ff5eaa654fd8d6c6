"""Small numeric kernels shared by the stages: robust spread, parabolic peaks, runs."""

from __future__ import annotations

import numpy as np
from numpy.typing import ArrayLike, NDArray

__all__ = ["MAD_TO_SD", "robust_sd", "runs", "vertex_offset"]

MAD_TO_SD = 1.4826
"""Normal consistency constant of the median absolute deviation, 1 / Phi^-1(3/4)
(= 1.482602...): ``MAD_TO_SD * MAD`` estimates the standard deviation of normal data.
Rousseeuw PJ, Croux C. Alternatives to the median absolute deviation. Journal of the
American Statistical Association 88(424):1273-1283, 1993. doi:10.1080/01621459.1993.10476408.
The four-digit value is the one in common use (it is scipy.stats.median_abs_deviation's
``scale="normal"`` rounded)."""


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
