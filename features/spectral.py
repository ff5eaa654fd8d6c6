"""Spectral kernels: Lomb-Scargle power and Welch spectra.

Lomb-Scargle (shared by the variability and modulation stages):

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
.. [4] Welch PD. The use of the fast Fourier transform for the estimation of
   power spectra: a method based on time averaging over short, modified
   periodograms. IEEE Transactions on Audio and Electroacoustics
   15(2):70-73, 1967. doi:10.1109/TAU.1967.1161901

Welch spectra (shared by the conditioning, respiration and modulation stages):
:func:`welch_spectra` is the estimator of :func:`scipy.signal.welch`,
:func:`scipy.signal.csd` and :func:`scipy.signal.coherence` with a periodic
Hann window, constant detrending, "density" scaling and mean averaging, with
the same arithmetic in the same order (so the same numbers, bit for bit on
the inputs tested), but every segment transformed by one batched real FFT
instead of one call per segment, and the spectra of both series computed
once for the auto- and cross-spectra together.
"""

from __future__ import annotations

import functools
from dataclasses import dataclass

import numpy as np
import scipy.fft
from numpy.typing import NDArray
from scipy import signal

from features._numeric import mean, median_1d, windows

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
    """Rows ``first * ratio**k``, ``k < count``, by doubling (error ~ log2(count) eps).

    Columns ``[m, 2m)`` are columns ``[0, m)`` times ``ratio**m`` (itself squared from the
    last step), laid out column by column so that each step is one vectorised product:
    numpy's running product (``cumprod``) multiplies one element after another, four
    times as long for 340 samples and 32 columns (numpy 2.4, x86-64).
    """
    out = np.empty((count, first.size), dtype=np.complex128)
    out[0] = first
    filled = 1
    step = ratio
    while filled < count:
        take = min(filled, count - filled)
        np.multiply(out[:take], step[None, :], out=out[filled:filled + take])
        filled += take
        if filled < count:
            step = step * step
    return out.T


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
    dw = median_1d(steps)
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


# --------------------------------------------------------------------------
# Welch spectra


@dataclass(frozen=True)
class WelchSpectra:
    """Welch estimates of one or two series on one frequency grid.

    Attributes
    ----------
    frequencies_hz
        ``nfft // 2 + 1`` frequencies, 0 to Nyquist, Hz.
    psd_x, psd_y
        One-sided power spectral densities (squared units per Hz); ``psd_y`` is None
        without a second series.
    csd_xy
        One-sided cross spectral density ``mean(Y conj(X))`` (the convention of
        :func:`scipy.signal.csd` for ``csd(x, y)``); None without a second series.
    n_segments
        Segments averaged.
    """

    frequencies_hz: FloatArray
    psd_x: FloatArray
    psd_y: FloatArray | None
    csd_xy: NDArray[np.complex128] | None
    n_segments: int

    def coherence(self) -> FloatArray:
        """Magnitude-squared coherence ``|Pxy|**2 / Pxx / Pyy`` (NaN where 0/0)."""
        if self.csd_xy is None or self.psd_y is None:
            raise ValueError("coherence needs two series")
        out: FloatArray = np.abs(self.csd_xy) ** 2 / self.psd_x / self.psd_y
        return out


@functools.lru_cache(maxsize=64)
def _density_window(n: int, fs_hz: float) -> FloatArray:
    """Periodic Hann window scaled to a power spectral density, as scipy scales it.

    ``scipy.signal.ShortTimeFFT`` multiplies the window by
    ``1 / sqrt(sum(|w|**2) / T)`` (a Python ``sum``, ``T = 1 / fs``); the same
    expression is evaluated here so that the scaled window is the same to the bit.
    The returned array is read-only (it is shared between calls).
    """
    win = signal.get_window("hann", n)
    fac = 1 / np.sqrt(sum(win.real**2 + win.imag**2) / (1 / fs_hz))
    out: FloatArray = win * fac
    out.setflags(write=False)
    return out


def _segment_spectra(x: FloatArray, win: FloatArray, hop: int, count: int, nfft: int
                     ) -> NDArray[np.complex128]:
    """Real FFTs (``nfft`` points) of the mean-removed, windowed segments of ``x``.

    ``x`` is 1-D (``count`` segments of ``win.size`` samples, ``hop`` apart) or 2-D
    (one segment per row, the whole row); the result has one row per segment.
    """
    n = win.size
    if x.ndim == 1:
        segs = windows(x, n, hop)[:count]
    else:
        segs = x
    segs = segs - mean(segs, axis=-1, keepdims=True)
    out: NDArray[np.complex128] = scipy.fft.rfft(segs * win, n=nfft, axis=-1)
    return out


def welch_spectra(
    x: FloatArray, fs_hz: float, *, segment_n: int, overlap_n: int, nfft: int | None = None,
    y: FloatArray | None = None,
) -> WelchSpectra:
    """Welch power (and, with ``y``, cross) spectral densities with a periodic Hann window.

    Parameters
    ----------
    x
        Series, 1-D (at least ``segment_n`` samples), or 2-D with rows of exactly
        ``segment_n`` samples, each row one segment whose spectrum is returned
        unaveraged (``scipy.signal.periodogram`` of each row).
    fs_hz
        Sampling rate, Hz (positive).
    segment_n
        Samples per segment (at least 1).
    overlap_n
        Samples shared by consecutive segments, 0 to ``segment_n - 1``.
    nfft
        FFT length (at least ``segment_n``); ``segment_n`` when None.
    y
        Optional second 1-D series of the same length as ``x``.

    Returns
    -------
    WelchSpectra

    Raises
    ------
    ValueError
        When a length rule above is broken.

    Notes
    -----
    Same estimator and arithmetic as :func:`scipy.signal.welch` /
    :func:`scipy.signal.csd` (scipy 1.17, ``window="hann"``, ``detrend="constant"``,
    ``scaling="density"``, ``average="mean"``) for inputs at least one segment long:

    1. ``K = (n - overlap_n) // (segment_n - overlap_n)`` segments starting every
       ``segment_n - overlap_n`` samples from the first (the tail is dropped).
    2. Each segment minus its mean, times the scaled window of
       :func:`_density_window`, real FFT of ``nfft`` points.
    3. ``|X|**2`` (``Y conj(X)`` for the cross spectrum) arranged frequency by
       segment, every bin but 0 (and Nyquist for even ``nfft``) doubled.
    4. Mean over segments along the contiguous axis (numpy's pairwise sum, as scipy).
    """
    x = np.asarray(x, dtype=np.float64)
    nfft = segment_n if nfft is None else int(nfft)
    hop = segment_n - overlap_n
    if not 0 <= overlap_n < segment_n or nfft < segment_n:
        raise ValueError("`overlap_n` must be in [0, segment_n) and `nfft` >= `segment_n`.")
    if x.ndim == 2:
        if x.shape[-1] != segment_n or y is not None:
            raise ValueError("2-D `x` needs rows of `segment_n` samples and no `y`.")
        count = x.shape[0]
    else:
        if x.shape[0] < segment_n:
            raise ValueError("`x` must hold at least `segment_n` samples.")
        count = (x.shape[0] - overlap_n) // hop
    win = _density_window(segment_n, fs_hz)
    freqs = np.asarray(scipy.fft.rfftfreq(nfft, 1 / fs_hz))
    stop = -1 if nfft % 2 == 0 else None
    sx = _segment_spectra(x, win, hop, count, nfft)
    pxx = sx.real**2 + sx.imag**2
    pxx[..., 1:stop] *= 2
    if x.ndim == 2:
        return WelchSpectra(freqs, pxx, None, None, int(count))
    psd_x = mean(np.ascontiguousarray(pxx.T), axis=-1)
    if y is None:
        return WelchSpectra(freqs, psd_x, None, None, int(count))
    y = np.asarray(y, dtype=np.float64)
    if y.shape != x.shape:
        raise ValueError("`y` must have the shape of `x`.")
    sy = _segment_spectra(y, win, hop, count, nfft)
    pyy = sy.real**2 + sy.imag**2
    pyy[..., 1:stop] *= 2
    pxy = sy * sx.conj()
    pxy[..., 1:stop] *= 2
    return WelchSpectra(freqs, psd_x, mean(np.ascontiguousarray(pyy.T), axis=-1),
                        mean(np.ascontiguousarray(pxy.T), axis=-1), int(count))


def welch_psd_padded(x: FloatArray, fs_hz: float, *, segment_n: int, overlap_n: int,
                     nfft: int) -> tuple[FloatArray, FloatArray]:
    """``welch_spectra(x, ...)``'s frequencies and ``psd_x`` for a 1-D ``x`` and an
    ``nfft`` at least ``2 segment_n - 1``, to rounding, at the cost of short transforms.

    The periodogram of a segment zero-padded to ``nfft`` points is the transform of the
    segment's autocorrelation (lags ``-(segment_n - 1) ... segment_n - 1``), exactly when
    ``nfft >= 2 segment_n - 1`` (no lag wraps onto another). So the segments' periodograms
    are summed on the shortest grid that holds those lags (``M`` points, a fast length of
    at least ``2 segment_n - 1``), the sum is taken back to the summed autocorrelation (one
    inverse transform of ``M`` points), and that is transformed once on the ``nfft`` grid:
    one transform of ``nfft`` points instead of one per segment. The sums are the same up
    to their order, so the estimate differs from :func:`welch_spectra`'s by rounding
    (relative to its largest value); values that are zero in exact arithmetic come out as
    rounding-sized numbers of either sign and are set to zero where negative.

    A 2-D ``x`` gives one PSD per row (rows x frequencies), each the same numbers as the
    row alone (with scipy 1.17's pocketfft on x86-64; to rounding where a back end's
    batched transform rounds otherwise), with the rows' transforms made together.
    """
    x = np.asarray(x, dtype=np.float64)
    hop = segment_n - overlap_n
    if x.ndim not in (1, 2) or x.shape[-1] < segment_n or not 0 <= overlap_n < segment_n \
            or nfft < 2 * segment_n - 1:
        raise ValueError("1-D or 2-D `x` of at least `segment_n` samples, `overlap_n` in "
                         "[0, segment_n) and `nfft` >= 2 segment_n - 1 are needed.")
    count = (x.shape[-1] - overlap_n) // hop
    short = scipy.fft.next_fast_len(2 * segment_n - 1, real=True)
    win = _density_window(segment_n, fs_hz)
    if x.ndim == 1:
        sx = _segment_spectra(x, win, hop, count, short)
    else:  # every row's segments as the rows of one array (one segment per row)
        segs = np.concatenate([windows(np.ascontiguousarray(r), segment_n, hop)[:count]
                               for r in x])
        sx = _segment_spectra(segs, win, hop, segs.shape[0], short).reshape(
            x.shape[0], count, -1)
    lags = scipy.fft.irfft((sx.real**2 + sx.imag**2).sum(axis=-2), short)
    wrapped = np.zeros((*x.shape[:-1], nfft))
    wrapped[..., :segment_n] = lags[..., :segment_n]
    wrapped[..., nfft - segment_n + 1:] = lags[..., short - segment_n + 1:]
    psd = scipy.fft.rfft(wrapped).real
    np.maximum(psd, 0.0, out=psd)
    psd[..., 1:-1 if nfft % 2 == 0 else None] *= 2
    psd /= count
    return np.asarray(scipy.fft.rfftfreq(nfft, 1 / fs_hz)), psd
