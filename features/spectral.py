"""Lomb-Scargle periodogram kernel shared by the variability and modulation stages.

The classical Lomb-Scargle power at angular frequency ``w`` of a series
``y_n`` sampled at times ``t_n`` needs, per frequency, the sums
``sum y_n exp(i w t_n)`` and ``sum exp(2 i w t_n)``. Evaluated directly these
cost four trigonometric functions per sample and frequency, which dominated
the engine's time. On an evenly spaced frequency grid ``w_k = w_0 + k dw``
the angle-addition identity factorises the exponential:
``exp(i w_{jB+m} t) = exp(i (w_0 + jB dw) t) * exp(i m dw t)``, so with
``J`` block starts and ``B`` offsets the sums over samples become two complex
matrix products of an ``n x J`` and an ``n x B`` matrix of exactly computed
exponentials: ``n (J + B)`` exponentials instead of ``4 n J B`` trigonometric
calls, and no error grows along the grid (each factor is evaluated directly,
not by recurrence).

References
----------
.. [1] Lomb NR. Least-squares frequency analysis of unequally spaced data.
   Astrophysics and Space Science 39:447-462, 1976. doi:10.1007/BF00648343
.. [2] Scargle JD. Studies in astronomical time series analysis. II.
   Statistical aspects of spectral analysis of unevenly spaced data.
   The Astrophysical Journal 263:835-853, 1982. doi:10.1086/160554
.. [3] Press WH, Teukolsky SA, Vetterling WT, Flannery BP. Numerical Recipes,
   3rd ed., section 13.8 (trigonometric recurrences over a frequency grid).
   Cambridge University Press, 2007.
"""

from __future__ import annotations

import numpy as np
from numpy.typing import NDArray

FloatArray = NDArray[np.float64]

#: Frequencies per block of the factorised grid (offsets share one exponential matrix).
_BLOCK = 32
#: Samples per chunk of the sums (bounds the n x J exponential matrix).
_SAMPLE_CHUNK = 4096
#: Samples per matrix product (keeps each product below the BLAS threading size).
_PRODUCT_ROWS = 64


def _sums_direct(
    t: FloatArray, y: FloatArray, w: FloatArray
) -> tuple[NDArray[np.complex128], NDArray[np.complex128]]:
    """``sum y exp(i w t)`` and ``sum exp(2 i w t)`` evaluated directly."""
    sy = np.zeros(w.size, dtype=np.complex128)
    s2 = np.zeros(w.size, dtype=np.complex128)
    for a in range(0, t.size, _SAMPLE_CHUNK):
        e = _unit(np.outer(t[a : a + _SAMPLE_CHUNK], w))
        sy += y[a : a + _SAMPLE_CHUNK] @ e
        s2 += (e * e).sum(axis=0)
    return sy, s2


def _powers(first: NDArray[np.complex128], ratio: NDArray[np.complex128], count: int
            ) -> NDArray[np.complex128]:
    """Rows ``first * ratio**k``, ``k < count``, by a running product (error ~ count eps)."""
    out = np.empty((first.size, count), dtype=np.complex128)
    out[:, 0] = first
    out[:, 1:] = ratio[:, None]
    np.cumprod(out, axis=1, out=out)
    return out


def _unit(phase: FloatArray) -> NDArray[np.complex128]:
    return np.cos(phase) + 1j * np.sin(phase)


def _sums_grid(
    t: FloatArray, y: FloatArray, w0: float, dw: float, count: int
) -> tuple[NDArray[np.complex128], NDArray[np.complex128]]:
    """The same sums on the grid ``w0 + k dw``, ``k < count``, by the factorised product.

    Per sample, three exponentials are evaluated directly (``w0 t``, ``dw t``
    and ``B dw t``); the block starts and offsets are their running products
    (at most ``max(J, B)`` factors, so the error stays within a few hundred
    ulps). The sums over samples are batched matrix products over groups of
    ``_PRODUCT_ROWS`` samples (padding rows carry zero weight): products that
    small stay single-threaded in the BLAS library, whose threads cost far
    more than they save at this size when the cores are shared.
    """
    n_blocks = -(-count // _BLOCK)
    sy = np.zeros((n_blocks, _BLOCK), dtype=np.complex128)
    s2 = np.zeros((n_blocks, _BLOCK), dtype=np.complex128)
    rows = _PRODUCT_ROWS
    for a in range(0, t.size, _SAMPLE_CHUNK):
        ta = t[a : a + _SAMPLE_CHUNK]
        pad = (-ta.size) % rows
        groups = (ta.size + pad) // rows
        head = np.zeros((ta.size + pad, n_blocks), dtype=np.complex128)
        head[: ta.size] = _powers(_unit(w0 * ta), _unit((_BLOCK * dw) * ta), n_blocks)
        tail = np.ones((ta.size + pad, _BLOCK), dtype=np.complex128)
        tail[: ta.size] = _powers(np.ones(ta.size, dtype=np.complex128), _unit(dw * ta), _BLOCK)
        hy = head.copy()
        hy[: ta.size] *= y[a : a + _SAMPLE_CHUNK, None]
        tail3 = tail.reshape(groups, rows, _BLOCK)
        sy += (hy.reshape(groups, rows, n_blocks).transpose(0, 2, 1) @ tail3).sum(axis=0)
        h2 = (head * head).reshape(groups, rows, n_blocks)
        s2 += (h2.transpose(0, 2, 1) @ (tail3 * tail3)).sum(axis=0)
    return sy.ravel()[:count], s2.ravel()[:count]


def _grid_positions(w: FloatArray) -> tuple[float, float, NDArray[np.intp], NDArray[np.bool_]]:
    """Evenly spaced part of a sorted frequency array: start, step, indices, membership."""
    steps = np.diff(w)
    dw = float(np.median(steps))
    k = np.rint((w - w[0]) / dw).astype(np.intp)
    on = np.abs(w[0] + k * dw - w) <= 1e-9 * dw
    return float(w[0]), dw, k, on


def lomb_scargle_power(
    times_s: FloatArray, values: FloatArray, frequencies_hz: FloatArray
) -> FloatArray:
    """Lomb-Scargle power of ``values`` at ``frequencies_hz`` (no centring, no floating mean).

    Equals :func:`scipy.signal.lombscargle` with its default ``"power"``
    normalisation (``P = (YC**2 / CC + YS**2 / SS) * n / 2`` with the means of
    Scargle's time-offset form) to rounding, at any frequencies; the speed-up
    applies where they are evenly spaced (up to a few extra, such as band
    edges merged into the grid, evaluated directly).

    Parameters
    ----------
    times_s
        Sample times, s (1-D, finite, any order).
    values
        Sample values (same length; centre them first for a periodogram of the
        fluctuations).
    frequencies_hz
        Frequencies, Hz (1-D, sorted ascending, positive).

    Returns
    -------
    ndarray
        Power at each frequency, in squared units of ``values`` times ``n / 4``
        (the legacy scaling of :func:`scipy.signal.lombscargle`).

    Notes
    -----
    1. Times are taken relative to the first (the power does not depend on
       the time origin; this keeps the phases small).
    2. ``sum y exp(i w t)`` and ``sum exp(2 i w t)`` over samples, on the
       evenly spaced frequencies by the factorised product of the module
       notes, elsewhere directly.
    3. With ``m2`` the mean of ``exp(2 i w t)``, ``tau = arg(m2) / 2`` and
       ``YC + i YS = exp(-i tau) mean(y exp(i w t))``; ``CC = (1 + |m2|)/2``,
       ``SS = (1 - |m2|)/2`` (both floored at the float epsilon as scipy does).
    """
    t = np.asarray(times_s, dtype=np.float64)
    y = np.asarray(values, dtype=np.float64)
    f = np.asarray(frequencies_hz, dtype=np.float64)
    t = t - t[0]
    w = 2.0 * np.pi * f
    n = t.size
    sy = np.empty(w.size, dtype=np.complex128)
    s2 = np.empty(w.size, dtype=np.complex128)
    if w.size >= 2 * _BLOCK:
        w0, dw, k, on = _grid_positions(w)
        gy, g2 = _sums_grid(t, y, w0, dw, int(k[on].max()) + 1)
        sy[on], s2[on] = gy[k[on]], g2[k[on]]
    else:
        on = np.zeros(w.size, dtype=bool)
    if not on.all():
        sy[~on], s2[~on] = _sums_direct(t, y, w[~on])
    m2 = s2 / n
    rot = np.exp(-0.5j * np.angle(m2)) * (sy / n)
    mag = np.abs(m2)
    eps = np.finfo(np.float64).epsneg
    cc = np.maximum(0.5 * (1.0 + mag), eps)
    ss = np.maximum(0.5 * (1.0 - mag), eps)
    power: FloatArray = (rot.real**2 / cc + rot.imag**2 / ss) * (n / 2.0)
    return power
