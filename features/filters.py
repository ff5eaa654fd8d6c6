"""Zero-phase filter helpers shared by the conditioning, fusion and artifact stages.

Everything here is a pure function of its arguments. Long traces (8 h at 1000 Hz
is 28.8 million samples per channel) are handled in three ways that keep the cost
linear (or ``n log n`` for the FFT) and the memory at a few copies of one channel:

* slow components are estimated on block means (for example 0.1 s blocks, about
  10 Hz), filtered at that low rate and interpolated back in chunks;
* fixed frequency responses (notches, band-limited derivatives) are applied once
  in the frequency domain on a zero-padded FFT, which is exactly zero-phase;
* short IIR filters use :func:`scipy.signal.sosfiltfilt` (forward-backward,
  zero-phase) on the already decimated series.
"""

from __future__ import annotations

import functools
from collections.abc import Callable
from fractions import Fraction
from typing import cast

import numpy as np
import scipy.fft
from numpy.typing import NDArray
from scipy import signal

from features._numeric import windows

FloatArray = NDArray[np.float64]

#: Samples processed per chunk when a slow series is interpolated back to full rate.
_CHUNK = 1 << 20
_CACHE_CHUNK = 1 << 16
"""Samples per step of :func:`subtract_block_series`: its temporaries stay in cache (numpy 2.4,
x86-64: 2**16 ran several times faster than 2**20)."""


def block_factor(fs_hz: float, target_fs_hz: float) -> int:
    """Integer block length that brings ``fs_hz`` down to about ``target_fs_hz`` (at least 1)."""
    return max(1, int(fs_hz // target_fs_hz))


def block_means(x: NDArray[np.generic], factor: int) -> FloatArray:
    """Means of consecutive non-overlapping blocks of ``factor`` samples.

    The incomplete tail (fewer than ``factor`` samples) is dropped. Integer input
    is reduced in float64 without a full float64 copy. Float64 blocks of 8 samples or
    more are summed by ``numpy.einsum`` (vectorised along the short block axis, where
    ``numpy.mean`` steps through one block at a time): the same means to rounding (a
    few units in the last place, the summation order differs), several times faster.
    """
    x = np.asarray(x)
    m = x.shape[-1] // factor
    if factor == 1:
        return np.asarray(x[..., :m], dtype=np.float64)
    if factor < 8 and x.dtype == np.float64:
        # numpy sums fewer than 8 numbers one after the other: the same sum, added up
        # over strided slices instead of along a short axis (several times faster)
        xf = cast(FloatArray, x)  # the dtype test above narrows what mypy cannot
        total = xf[..., 0 : m * factor : factor].copy()
        for i in range(1, factor):
            total += xf[..., i : m * factor : factor]
        total /= factor
        return total
    shaped = x[..., : m * factor].reshape(*x.shape[:-1], m, factor)
    if x.dtype == np.float64:
        sums: FloatArray = np.einsum("...j->...", cast(FloatArray, shaped))
        sums /= factor
        return sums
    return np.asarray(shaped.mean(axis=-1, dtype=np.float64))


def block_centres(m: int, factor: int) -> FloatArray:
    """Sample index (fractional) at the centre of each of ``m`` blocks of ``factor`` samples."""
    return np.arange(m, dtype=np.float64) * factor + (factor - 1) / 2.0


@functools.lru_cache(maxsize=128)
def butter_sos(order: int, cutoff_hz: float | tuple[float, float], btype: str,
               fs_hz: float) -> FloatArray:
    """Butterworth design in second-order sections, designed once per argument set.

    The same as ``scipy.signal.butter(order, cutoff_hz, btype=btype, fs=fs_hz,
    output="sos")`` (the call is made once and its result kept), returned read-only
    because it is shared: pass ``sos.copy()`` to :func:`scipy.signal.sosfilt` and
    :func:`scipy.signal.sosfiltfilt`, which need a writable array. A design costs
    about a millisecond, and the engine asks for the same few designs many times.
    """
    sos = np.asarray(signal.butter(order, cutoff_hz, btype=btype, fs=fs_hz, output="sos"))
    sos.setflags(write=False)
    return sos


@functools.lru_cache(maxsize=128)
def rate_ratio(target_hz: float, fs_hz: float) -> tuple[int, int]:
    """``(up, down)``: ``target_hz / fs_hz`` as the fraction of denominator at most 1000
    nearest to it (``fractions.Fraction.limit_denominator``), once per pair of rates (a
    few tens of microseconds a call otherwise)."""
    frac = Fraction(target_hz / fs_hz).limit_denominator(1000)
    return frac.numerator, frac.denominator


@functools.lru_cache(maxsize=32)
def polyphase_fir(up: int, down: int) -> FloatArray:
    """The anti-alias FIR that ``scipy.signal.resample_poly(x, up, down)`` designs by default.

    ``firwin(20 max(up, down) + 1, 1 / max(up, down), window=("kaiser", 5.0))`` for a
    reduced ratio ``up / down``, designed once per rate pair and returned read-only;
    pass it as ``window=`` (resample_poly copies it) for the same numbers without the
    design's cost on every call.
    """
    rate = max(up, down)
    h = np.asarray(signal.firwin(2 * 10 * rate + 1, 1.0 / rate, window=("kaiser", 5.0)))
    h.setflags(write=False)
    return h


@functools.lru_cache(maxsize=128)
def _design_zi(order: int, cutoff_hz: float | tuple[float, float], btype: str,
               fs_hz: float) -> FloatArray:
    """``scipy.signal.sosfilt_zi`` of :func:`butter_sos`'s design, computed once (read-only)."""
    zi = np.asarray(signal.sosfilt_zi(butter_sos(order, cutoff_hz, btype, fs_hz).copy()))
    zi.setflags(write=False)
    return zi


@functools.lru_cache(maxsize=128)
def _design_loop_parts(order: int, cutoff_hz: float | tuple[float, float], btype: str,
                       fs_hz: float) -> tuple[FloatArray, int]:
    """:func:`butter_sos`'s design as the section loop takes it (a private writable copy:
    scipy's compiled loop takes no read-only array, and reads the sections without writing
    them) and scipy's default padding count ``3 (2 sections + 1 - trailing zeros)``, once
    per design."""
    sos = butter_sos(order, cutoff_hz, btype, fs_hz).copy()
    ntaps = 2 * sos.shape[0] + 1
    ntaps -= min(int((sos[:, 2] == 0).sum()), int((sos[:, 5] == 0).sum()))
    return sos, 3 * ntaps


def _along(a: NDArray[np.floating], index: slice, axis: int) -> NDArray[np.floating]:
    where = [slice(None)] * a.ndim
    where[axis] = index
    return a[tuple(where)]


def butter_filtfilt(x: NDArray[np.floating], design: tuple[int, float | tuple[float, float],
                                                           str, float], *,
                    axis: int = -1, padtype: str | None = "odd",
                    padlen: int | None = None) -> FloatArray:
    """``scipy.signal.sosfiltfilt(butter_sos(*design), x, ...)`` with the design's state cached.

    Parameters
    ----------
    x
        Trace(s), filtered along ``axis``; longer than the padding.
    design
        ``(order, cutoff_hz, btype, fs_hz)`` as for :func:`butter_sos`.
    axis, padtype, padlen
        As for :func:`scipy.signal.sosfiltfilt` (``padtype`` "odd", "even" or None).

    Returns
    -------
    ndarray
        The zero-phase filtered trace(s), the same numbers as scipy's.

    Notes
    -----
    The steps of scipy's ``sosfiltfilt`` (scipy 1.17), in order: extension of ``padlen``
    samples (``3 (2 sections + 1)`` by default) at each end, forward ``sosfilt`` from the
    steady state ``zi * x[0]``, backward from ``zi * y[-1]``, cut back. Only the steady
    state ``zi`` (``scipy.signal.sosfilt_zi``, one linear solve per section, which cost
    about a third of a short call) is kept between calls, with the design.
    """
    x = np.asarray(x)
    sos, default_edge = _design_loop_parts(*design)
    n_sections = sos.shape[0]
    edge = 0 if padtype is None else (default_edge if padlen is None else padlen)
    if x.shape[axis] <= edge:
        raise ValueError(f"The length of the input vector x must be greater than padlen, "
                         f"which is {edge}.")
    if padtype not in ("odd", "even", None):
        raise ValueError(f"`padtype` must be 'even', 'odd' or None; got {padtype!r}.")
    if _PAIRS and _SOSFILT_LOOP is not None and x.dtype == np.float64 and x.ndim >= 2 \
            and x.size >= 2 * x.shape[axis]:
        moved = np.moveaxis(x, axis, -1)
        rows = moved.reshape(-1, moved.shape[-1])
        out = _filtfilt_pairs(_SOSFILT_LOOP, sos, rows, _design_zi(*design),
                              edge if padtype is not None else 0, padtype)
        return np.moveaxis(out.reshape(moved.shape), -1, axis)
    ext = x
    if padtype is not None and edge > 0:
        left = _along(x, slice(edge, 0, -1), axis)
        right = _along(x, slice(-2, -(edge + 2), -1), axis)
        if padtype == "odd":
            left = 2 * _along(x, slice(0, 1), axis) - left
            right = 2 * _along(x, slice(-1, None), axis) - right
        elif padtype != "even":
            raise ValueError(f"`padtype` must be 'even', 'odd' or None; got {padtype!r}.")
        ext = np.concatenate((left, x, right), axis=axis)
    zi_shape = [1] * x.ndim
    zi_shape[axis] = 2
    zi = _design_zi(*design).reshape([n_sections, *zi_shape])
    y = _sosfilt(sos, ext, zi * _along(ext, slice(None, 1), axis), axis)
    y = _sosfilt(sos, _along(y, slice(None, None, -1), axis),
                 zi * _along(y, slice(-1, None), axis), axis)
    y = _along(y, slice(None, None, -1), axis)
    if edge > 0:
        y = _along(y, slice(edge, -edge), axis)
    return np.asarray(y)


def _filtfilt_pairs(loop: Callable[..., None], sos: FloatArray, rows: NDArray[np.floating],
                    zi: FloatArray, edge: int, padtype: str | None) -> FloatArray:
    """:func:`butter_filtfilt` of the rows of ``rows`` (series x samples), two at a time as
    the real and imaginary parts of one complex series through scipy's section loop, from
    the extension to the cut: the coefficients are real, so each row's numbers are those of
    the row alone (:func:`_pairs_agree` checks it on the machine at import); the pairs are
    packed once and unpacked once, and an odd last row is paired with zeros.

    The extension's samples and both passes' initial states are computed in real
    arithmetic (as the single-series road computes them) and copied in.
    """
    count, n = rows.shape
    packed = np.zeros(((count + 1) // 2, n + 2 * edge), dtype=np.complex128)
    _pack(rows, packed[:, edge:edge + n])
    first = rows[:, 0]
    if edge > 0:
        left = rows[:, edge:0:-1]
        right = rows[:, -2:-(edge + 2):-1]
        if padtype == "odd":
            left = 2 * rows[:, :1] - left
            right = 2 * rows[:, -1:] - right
        _pack(left, packed[:, :edge])
        _pack(right, packed[:, edge + n:])
        first = left[:, 0]
    sos_c = sos.astype(np.complex128)
    state = np.zeros((packed.shape[0], sos.shape[0], 2), dtype=np.complex128)
    # the steady state at the first sample, then at the forward pass's last
    loop(sos_c, packed, _pack(zi[None, :, :] * first[:, None, None], state))
    back = np.ascontiguousarray(packed[:, ::-1])
    last = _unpack(back[:, :1], count)[:, 0]
    loop(sos_c, back, _pack(zi[None, :, :] * last[:, None, None], np.zeros_like(state)))
    return _unpack(back[:, ::-1][:, edge:edge + n], count)


def _pack(values: NDArray[np.floating], into: NDArray[np.complex128]
          ) -> NDArray[np.complex128]:
    """Rows 0, 2, 4, ... of ``values`` into the real parts of ``into``'s rows and rows
    1, 3, ... into their imaginary parts (the last imaginary part stays as it is for an odd
    count); returns ``into``."""
    into.real = values[0::2]
    into.imag[: values.shape[0] // 2] = values[1::2]
    return into


def _unpack(pairs: NDArray[np.complex128], count: int) -> FloatArray:
    """The ``count`` real rows :func:`_pack` put into ``pairs``."""
    out = np.empty((count, *pairs.shape[1:]))
    out[0::2] = pairs.real
    out[1::2] = pairs.imag[: count // 2]
    return out


def _sosfilt(sos: FloatArray, x: NDArray[np.floating], zi: FloatArray, axis: int
             ) -> NDArray[np.floating]:
    """``scipy.signal.sosfilt(sos, x, axis=axis, zi=zi)[0]``, the same numbers.

    For float64 input, scipy's own compiled loop is called directly with the arrays laid
    out as ``sosfilt`` lays them out (the signals as C-ordered rows, a copy filtered in
    place; the states as (signals, sections, 2)): the wrapper's checks and reshaping cost
    some 40 us a call (numpy 2.4, scipy 1.17), several times the filtering of a short
    series, and the stages make a dozen such calls per recording. Elsewhere, or when that
    loop is not there (:data:`_SOSFILT_LOOP`), ``sosfilt`` itself.
    """
    if _SOSFILT_LOOP is None or x.dtype != np.float64 or zi.dtype != np.float64:
        return np.asarray(signal.sosfilt(sos, x, axis=axis, zi=zi)[0])
    return _by_loop(_SOSFILT_LOOP, sos, x, zi, axis)


def _by_loop(loop: Callable[..., None], sos: FloatArray, x: NDArray[np.floating],
             zi: FloatArray, axis: int) -> FloatArray:
    if x.ndim == 1:  # the same layout without the axis moves (two-thirds of a short call)
        line = np.array(x, dtype=np.float64)  # filtered in place
        loop(sos, line.reshape(1, -1), np.array(zi, dtype=np.float64).reshape(1, -1, 2))
        return line
    axis = axis % x.ndim
    last = axis == x.ndim - 1  # the usual case: no axis to move (numpy.moveaxis costs 5 us)
    state = np.array(zi.transpose((*range(1, x.ndim), 0, x.ndim)) if last else
                     np.moveaxis(zi, (0, axis + 1), (-2, -1)), dtype=np.float64, order="C")
    # filtered in place
    rows = np.array(x if last else np.moveaxis(x, axis, -1), dtype=np.float64, order="C")
    loop(sos, rows.reshape(-1, rows.shape[-1]), state.reshape(-1, sos.shape[0], 2))
    return rows if last else np.moveaxis(rows, -1, axis)


def _sosfilt_loop() -> Callable[..., None] | None:
    """scipy's compiled second-order-section loop (``scipy.signal._sosfilt._sosfilt``, a
    private name), if it is there and gives ``sosfilt``'s numbers on a check; else None."""
    try:
        from scipy.signal._sosfilt import _sosfilt as loop
    except ImportError:
        return None
    sos = np.asarray(signal.butter(2, (0.1, 0.3), btype="bandpass", output="sos"))
    x = np.cos(np.arange(3 * 40).reshape(3, 40) * 0.37)
    zi = np.sin(np.arange(sos.shape[0] * 2 * 40).reshape(sos.shape[0], 2, 40) * 0.11)
    try:
        same = np.array_equal(_by_loop(loop, sos, x, zi, 0),
                              signal.sosfilt(sos, x, axis=0, zi=zi)[0]) and \
            np.array_equal(_by_loop(loop, sos, x[:, 0], zi[:, :, 0], 0),  # one trace
                           signal.sosfilt(sos, x[:, 0], zi=zi[:, :, 0])[0])
    except (TypeError, ValueError):
        same = False
    return loop if same else None


def _pairs_agree(loop: Callable[..., None] | None) -> bool:
    """Whether :func:`_filtfilt_pairs` gives ``sosfiltfilt``'s numbers to the bit on this
    machine, for an odd count of series (a pair and one with zeros) and either padding.

    Every complex product of the loop is ``(a + 0i)(c + di) = ac - 0d + (ad + 0c)i``, whose
    parts are ``ac`` and ``ad`` to the bit (adding a zero product changes no finite sum),
    and its sums are taken part by part, wherever a complex product is computed as its four
    real products (x86-64 builds); a build that fuses a multiply with the following add
    (contracted floating-point arithmetic, as some other targets compile by default) rounds
    the two roads differently, and the series are then filtered one at a time.
    """
    if loop is None:
        return False
    sos = np.asarray(signal.butter(2, (0.02, 0.3), btype="bandpass", output="sos"))
    rng = np.random.default_rng(3)
    x = np.cumsum(rng.standard_normal((3, 500)), axis=-1) * 1e3
    zi = np.asarray(signal.sosfilt_zi(sos))
    try:
        return all(bool(np.array_equal(
            _filtfilt_pairs(loop, sos.copy(), x, zi, 30, padtype),
            signal.sosfiltfilt(sos, x, axis=-1, padtype=padtype, padlen=30)))
            for padtype in ("odd", "even"))
    except (TypeError, ValueError):
        return False


_SOSFILT_LOOP: Callable[..., None] | None = None
_SOSFILT_LOOP = _sosfilt_loop()
_PAIRS = _pairs_agree(_SOSFILT_LOOP)


def _padlen(n: int, fs_hz: float, cutoff_hz: float) -> int:
    # Two periods of the lowest cutoff keep the forward-backward edge transient
    # inside the padding; never more than the series allows.
    return int(min(n - 1, max(3, np.ceil(2.0 * fs_hz / cutoff_hz))))


def lowpass(x: NDArray[np.floating], fs_hz: float, cutoff_hz: float, *, order: int = 2,
            axis: int = -1) -> FloatArray:
    """Zero-phase Butterworth low-pass (forward-backward, effective order ``2 * order``).

    Even (mirror) extension at the ends: unlike odd extension it does not pivot on a
    noisy end sample. Within about ``1 / cutoff_hz`` of either end the output still
    carries the usual edge error of any filter (a fraction of a percent of the
    in-band oscillation amplitude for the 0.05 Hz baseline).
    """
    n = np.shape(x)[axis]
    if n < 2:
        return np.array(x, dtype=np.float64)
    return butter_filtfilt(x, (order, float(cutoff_hz), "lowpass", float(fs_hz)), axis=axis,
                           padtype="even", padlen=_padlen(n, fs_hz, cutoff_hz))


def bandpass(x: NDArray[np.floating], fs_hz: float, band_hz: tuple[float, float], *,
             order: int = 2, axis: int = -1) -> FloatArray:
    """Zero-phase Butterworth band-pass between ``band_hz[0]`` and ``band_hz[1]``."""
    low, high = band_hz
    n = np.shape(x)[axis]
    if n < 2:
        return np.zeros(np.shape(x), dtype=np.float64)
    return butter_filtfilt(x, (order, (float(low), float(high)), "bandpass", float(fs_hz)),
                           axis=axis, padtype="even", padlen=_padlen(n, fs_hz, low))


def highpass(x: NDArray[np.floating], fs_hz: float, cutoff_hz: float, *, order: int = 2,
             axis: int = -1) -> FloatArray:
    """Zero-phase Butterworth high-pass."""
    n = np.shape(x)[axis]
    if n < 2:
        return np.zeros(np.shape(x), dtype=np.float64)
    return butter_filtfilt(x, (order, float(cutoff_hz), "highpass", float(fs_hz)), axis=axis,
                           padtype="even", padlen=_padlen(n, fs_hz, cutoff_hz))


def subtract_block_series(row: FloatArray, slow: FloatArray, factor: int) -> None:
    """Subtract, in place, a block-rate series linearly interpolated to full rate.

    ``slow[k]`` is taken to sit at the centre of block ``k`` (see :func:`block_centres`);
    beyond the first and last centre the end values are held. Works in chunks so
    that no full-length temporary is created.
    """
    m, n = slow.shape[0], row.shape[0]
    centres = block_centres(m, factor)
    if m < 2 or n < m * factor:
        for start in range(0, n, _CHUNK):
            stop = min(n, start + _CHUNK)
            idx = np.arange(start, stop, dtype=np.float64)
            row[start:stop] -= np.interp(idx, centres, slow)
        return
    # Between centres k and k + 1 the samples sit at the same offsets t from centre k in
    # every block, so the line is slope_k * t + slow_k over a (blocks, factor) view:
    # numpy.interp's own arithmetic (slope (y1 - y0) / (x1 - x0), then slope * (x - x0)
    # + y0), without its search per sample.
    first = int(np.ceil(centres[0]))
    t = np.arange(factor, dtype=np.float64) + (first - centres[0])
    slope = np.diff(slow) / np.diff(centres)
    row[:first] -= slow[0]
    rows_per_chunk = max(1, _CACHE_CHUNK // factor)
    line = np.empty((min(rows_per_chunk, m - 1), factor))  # one buffer for every chunk
    for k0 in range(0, m - 1, rows_per_chunk):
        k1 = min(m - 1, k0 + rows_per_chunk)
        view = row[first + k0 * factor : first + k1 * factor].reshape(k1 - k0, factor)
        part = np.multiply(slope[k0:k1, None], t[None, :], out=line[: k1 - k0])
        part += slow[k0:k1, None]
        view -= part
    row[first + (m - 1) * factor :] -= slow[-1]


def raised_cosine_lowpass(freqs_hz: FloatArray, pass_hz: float, stop_hz: float) -> FloatArray:
    """Gain 1 up to ``pass_hz``, half-cosine taper to 0 at ``stop_hz``, 0 above."""
    t = np.clip((freqs_hz - pass_hz) / (stop_hz - pass_hz), 0.0, 1.0)
    return 0.5 * (1.0 + np.cos(np.pi * t))


def raised_cosine_notches(freqs_hz: FloatArray, centres_hz: list[float], *,
                          stop_halfwidth_hz: float, taper_hz: float) -> FloatArray:
    """Gain 0 within ``stop_halfwidth_hz`` of each centre, cosine taper back to 1 over
    ``taper_hz``, exactly 1 elsewhere."""
    gain = np.ones_like(freqs_hz)
    df = freqs_hz[1] - freqs_hz[0] if freqs_hz.shape[0] > 1 else 1.0
    reach = stop_halfwidth_hz + taper_hz
    for centre in centres_hz:
        lo = max(0, int(np.floor((centre - reach) / df)))
        hi = min(freqs_hz.shape[0], int(np.ceil((centre + reach) / df)) + 1)
        dist = np.abs(freqs_hz[lo:hi] - centre)
        t = np.clip((dist - stop_halfwidth_hz) / taper_hz, 0.0, 1.0)
        gain[lo:hi] *= 0.5 * (1.0 - np.cos(np.pi * t))
    return gain


def apply_frequency_response(row: FloatArray, fs_hz: float,
                             response: Callable[[FloatArray], NDArray[np.complexfloating]
                                                | FloatArray],
                             *, guard_s: float = 4.0, frame: int = 1 << 16) -> None:
    """Multiply the spectrum of ``row`` by ``response(freqs_hz)``, in place (overlap-save).

    The trace is cut into frames of ``frame`` samples that overlap by ``guard_s``
    seconds on each side; each frame is transformed, multiplied by the response
    sampled on the frame's frequency grid and transformed back, and only its
    central part is kept. The record is zero-extended beyond its ends. This equals
    one long linear convolution with the response's impulse response as long as
    that response has decayed within ``guard_s``, while short FFTs stay in cache
    and no full-length complex array is created. A real response is zero-phase;
    ``1j * 2 * pi * f`` is an exact derivative.
    """
    n = row.shape[0]
    guard = int(np.ceil(guard_s * fs_hz))
    size = max(frame, scipy.fft.next_fast_len(4 * guard, real=True))
    if n + 2 * guard <= size:
        size = scipy.fft.next_fast_len(n + 2 * guard, real=True)
    keep = size - 2 * guard
    gain = response(np.arange(size // 2 + 1, dtype=np.float64) * (fs_hz / size))
    per_group = max(1, _CHUNK // keep)
    left = np.zeros(guard)
    for a in range(0, n, per_group * keep):
        b = min(n, a + per_group * keep)
        frames = -(-(b - a) // keep)
        ext = np.zeros(frames * keep + 2 * guard)
        ext[:guard] = left
        tail = row[a: min(n, b + guard)]
        ext[guard: guard + tail.shape[0]] = tail
        view = windows(ext, size, keep)
        spectrum = scipy.fft.rfft(view, axis=-1)
        spectrum *= gain
        out = scipy.fft.irfft(spectrum, size, axis=-1)[:, guard: guard + keep]
        left = row[b - guard: b].copy() if b - guard >= a else ext[b - a: b - a + guard].copy()
        row[a:b] = out.reshape(-1)[: b - a]


def bridge_masked(x: FloatArray, usable: NDArray[np.bool_]) -> FloatArray:
    """Replace masked samples by a straight line between the usable ones around them.

    Stages that filter or transform a trace bridge masked spans first, so that a
    movement's energy cannot leak into the usable samples next to it. The input is
    returned as is when every sample is usable, and zeros when none is.
    """
    if usable.all():
        return x
    if not usable.any():
        return np.zeros_like(x)
    # numpy.interp over the usable samples that border a masked span gives the same values
    # as over all usable samples (a masked sample's usable neighbours, or the end value it
    # holds, are among them; the arithmetic is the same) without gathering every sample.
    change = np.flatnonzero(usable[1:] != usable[:-1])  # the sample before each change
    edges = np.unique(np.concatenate((change, change + 1)))
    edges = edges[usable[edges]]
    out = x.copy()
    bad = np.flatnonzero(~usable)
    out[bad] = np.interp(bad, edges, x[edges])
    return out


def frozen(a: NDArray[np.floating]) -> FloatArray:
    """A read-only float64 copy, for arrays held by frozen result dataclasses."""
    out = np.array(a, dtype=float)
    out.setflags(write=False)
    return out
