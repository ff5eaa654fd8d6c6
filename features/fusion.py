"""Channel fusion: one trace with the strongest cardiac component, and the centre of pressure.

``fuse_channels`` weights and sign-aligns the conditioned channels by their
cardiac-band signal-to-noise ratio (maximum-ratio combining) and, for load cells
with known positions, computes the centre of pressure (CoP) trajectory, its
cardiac-band excursion and its respiratory-band component.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
import scipy.fft
from numpy.typing import ArrayLike, NDArray
from scipy.linalg import blas

from features._checks import check_2d, check_sampling_rate
from features._numeric import MAD_TO_SD, clip, count_in, lane_median, median_1d, robust_sd
from features.errors import InvalidInputError
from features.filters import FloatArray, bandpass, block_centres, block_factor, block_means
from features.limits import MIN_DURATION_S, MIN_OCCUPANT_KG, STANDARD_GRAVITY_M_S2

#: Analysis rate for the weights and the cardiac band, Hz (block means; at least 2.5x the
#: band top).
ANALYSIS_FS_HZ = 100.0
#: Window of the autocorrelation estimates, s (several beats even at 30 bpm).
WINDOW_S = 10.0
#: At most this many windows (1 h of them, evenly spaced) are analysed for the weights.
MAX_ANALYSIS_WINDOWS = 360
#: Heart-period lags searched, s (200 to 30 bpm).
LAG_RANGE_S = (0.3, 2.0)
#: Largest periodic fraction of band power credited to one channel (SNR cap of 19).
MAX_PERIODIC_FRACTION = 0.95
#: Below this combined SNR no channel shows a heartbeat and equal weights are used.
MIN_SNR = 0.05
#: Respiratory band of the CoP, Hz (3 to 60 breaths/min).
RESPIRATORY_BAND_HZ = (0.05, 1.0)
#: Rate of the CoP trajectory, Hz (block means; 10x the top of the respiratory band).
COP_FS_HZ = 10.0
#: CoP is undefined where the total force is below the lightest plausible occupant.
_MIN_TOTAL_FORCE_N = MIN_OCCUPANT_KG * STANDARD_GRAVITY_M_S2
#: Standard error of the median over that of the mean for normal data, sqrt(pi/2).
_SE_MEDIAN = 1.2533


@dataclass(frozen=True)
class FusionResult:
    """Fused trace, the weights behind it and the centre of pressure.

    Attributes
    ----------
    fused
        (n,) float64, ``sum_i weights[i] * signals[i] / (channel_scales[i] or 1)``.
    weights
        Signed weight per channel; sum of ``|w|`` equals the number of channels.
    method
        ``"passthrough"``, ``"maximum_ratio_combining"`` or ``"equal_weights"``.
    unit
        Unit of ``fused``: the common channel unit, or ``"a.u."`` for mixed units.
    channel_snr
        Cardiac-band SNR (periodic over aperiodic power) per channel, None when not
        estimated (single channel) or the channel is dead.
    channel_scales
        Robust cardiac-band scale per channel used to normalise mixed units, else None.
    heart_lag_s
        Median heart-period lag of the autocorrelation, s; None for one channel.
    cop_m
        (m, 2) CoP trajectory in m at ``cop_fs_hz`` (about ``COP_FS_HZ``); NaN where the
        support is empty.
    cop_fs_hz
        Rate of ``cop_m`` and ``cop_respiratory_m``, Hz.
    cop_respiratory_m
        (m, 2) CoP band-passed to ``RESPIRATORY_BAND_HZ``, m; NaN where empty.
    cop_cardiac_excursion_mm
        Median over 10 s windows of the radial RMS of the ``band_hz`` CoP, mm.
    confidence
        Median periodic fraction of the fused cardiac-band power at the heart lag, [0, 1];
        None when not asked for (``with_confidence=False``).
    flags
        Adaptations and reasons for None values.
    """

    fused: FloatArray
    weights: tuple[float, ...]
    method: str
    unit: str
    channel_snr: tuple[float | None, ...]
    channel_scales: tuple[float, ...] | None
    heart_lag_s: float | None
    cop_m: FloatArray | None
    cop_fs_hz: float | None
    cop_respiratory_m: FloatArray | None
    cop_cardiac_excursion_mm: float | None
    confidence: float | None
    flags: tuple[str, ...]


def fuse_channels(signals: ArrayLike, fs_hz: float, *, units: Sequence[str] | None = None,
                  positions_m: ArrayLike | None = None, static_n: ArrayLike | None = None,
                  static_fs_hz: float | None = None,
                  band_hz: tuple[float, float] = (1.0, 20.0),
                  with_confidence: bool = True) -> FusionResult:
    """Combine conditioned channels so that the cardiac component is strongest.

    Parameters
    ----------
    signals
        (n_channels, n) conditioned traces (1 to ``features.limits.MAX_CHANNELS``
        channels, static part removed), or a 1-D trace for a single channel. Finite values
        only.
    fs_hz
        Sampling rate, Hz, within ``features.limits.MIN_FS_HZ`` to ``MAX_FS_HZ``.
    units
        Unit per channel (``ConditionedInput.units``). None means one common, unnamed
        unit: weights are computed as for equal units and ``unit`` is ``"a.u."``.
    positions_m
        (n_channels, 2) sensor positions in m for the CoP; needs force channels and
        ``static_n``.
    static_n
        Static force per cell that was removed from ``signals``, N: (n_channels,) or a
        slow trace (n_channels, k) at ``static_fs_hz`` (``ConditionedInput.baseline_si``).
    static_fs_hz
        Rate of a 2-D ``static_n``, Hz; sample ``j`` is the mean of a block centred at
        ``(j + 0.5) / static_fs_hz - 0.5 / fs_hz`` s.
    band_hz
        Cardiac band (low, high) in Hz, ``0 < low < high <= 40``.
    with_confidence
        Estimate ``FusionResult.confidence`` (one more pass of autocorrelations over up to
        ``MAX_ANALYSIS_WINDOWS`` windows). The engine reads nothing of it and passes
        False; with one channel and no positions it then skips the cardiac band of step 1
        as well, which only the weights, the confidence and the CoP read.

    Returns
    -------
    FusionResult

    Raises
    ------
    InvalidInputError
        Bad shapes, non-finite samples, a record under ``MIN_DURATION_S``, a bad band,
        or positions/static forces that do not match the channels.

    Notes
    -----
    1. Block-mean the channels to about ``ANALYSIS_FS_HZ`` and band-pass to ``band_hz``.
       Steps 2-4 use at most ``MAX_ANALYSIS_WINDOWS`` windows, evenly spaced.
       For mixed units, divide each channel by its robust scale (``MAD_TO_SD`` x MAD).
    2. In 10 s windows, compute each channel's unbiased autocorrelation ``r(k)`` by
       FFT. The heart-period lag ``T`` of a window is the peak within 0.3-2 s of the
       sum of ``r(k) / r(0)`` over the channels; with three or more live channels,
       over the other channels only (leave one out, so that a noise channel cannot
       choose a lag that flatters it).
    3. A periodic (cardiac) component of period ``T`` keeps its power at lag ``T``
       while band-limited noise has decorrelated, so the periodic fraction
       ``q = r(T) / r(0)`` estimates SNR / (1 + SNR). Its median over windows (robust
       to movement) is shrunk by two standard errors of the median
       (1.2533 x ``MAD_TO_SD`` x MAD / sqrt(windows)) and clipped to [0, 0.95], so that a
       pure-noise channel ends at or near zero. With ``P`` the median window power,
       ``P_s = q P`` and ``P_n = P - P_s``.
    4. The sign of a channel is the sign of the median zero-lag correlation with the
       highest-SNR channel; all signs flip if needed so that the weights sum to a
       positive value (the weighted majority keeps its recorded polarity).
    5. Maximum-ratio combining [1]: ``w_i = sign_i * sqrt(P_s,i) / P_n,i``, the
       weights that maximise the output SNR for one common waveform in independent
       noise. Weights are scaled so that ``sum |w_i| = n_channels``: equal channels
       give the plain sum (four load cells sum to the total force, in N).
       Departure from [1]: amplitude and noise come from the autocorrelation above,
       not from a known pilot, and correlated noise between channels is ignored.
    6. CoP [2]: ``CoP(t) = sum_i F_i(t) p_i / sum_i F_i(t)`` on block means (to about
       ``COP_FS_HZ``) of the total force ``F_i = signals_i + static_i``; undefined
       (NaN) where the total is below ``MIN_OCCUPANT_KG * g``. Its respiratory
       component is that trajectory band-passed to ``RESPIRATORY_BAND_HZ``.
    7. The cardiac excursion is the median, over the 10 s windows fully occupied, of
       the radial RMS of the CoP's ``band_hz`` component, taken to first order: with
       ``S_i`` the window's mean total force per cell, ``S = sum_i S_i`` and
       ``c = sum_i S_i p_i / S``, ``CoP - c = sum_i (p_i - c) dF_i / S + O(dF^2 / S^2)``
       for force changes ``dF_i``, so the band-passed CoP is
       ``sum_i (p_i - c) cardiac_i / S`` with ``cardiac_i`` the step-1 band of cell
       ``i``. Cardiac forces are of the order of 1 % of the body weight, so the neglected
       term is about 1 % of the excursion; a window's sway of ``c`` (millimetres against
       lever arms of decimetres) adds less, and a load swinging by 10 % with breathing
       within the window moves the result by about 1 % (tests/features/test_fusion.py,
       against the exact lever rule band-passed by scipy). This reuses the step-1 band
       instead of band-passing the CoP again.

    References
    ----------
    .. [1] D. G. Brennan, "Linear diversity combining techniques", Proceedings of
       the IRE, 47(6), 1075-1102, 1959. DOI 10.1109/JRPROC.1959.275173.
    .. [2] D. A. Winter, "Biomechanics and Motor Control of Human Movement", 4th ed.,
       Wiley, 2009 (centre of pressure from force-plate load cells).
       DOI 10.1002/9780470549148.
    """
    fs = check_sampling_rate(fs_hz)
    x = check_2d(signals, fs, name="signals", min_duration_s=MIN_DURATION_S)
    n_ch = x.shape[0]
    unit_list = _check_units(units, n_ch)
    band = _check_band(band_hz)
    flags: list[str] = []
    mixed = unit_list is not None and len(set(unit_list)) > 1
    unit = unit_list[0] if unit_list is not None and not mixed else "a.u."
    if unit_list is None:
        flags.append("fusion_units_not_given")

    factor = max(1, int(fs // max(ANALYSIS_FS_HZ, 2.5 * band[1])))
    fs_a = fs / factor
    if band[1] >= 0.5 * fs_a:
        raise InvalidInputError("band_hz", f"`band_hz` upper edge must be below {0.5 * fs_a:g} "
                                f"Hz at fs_hz={fs:g}; got {band[1]:g}.")
    conf: float | None = None
    if n_ch == 1 and not with_confidence and positions_m is None:
        cardiac = cardiac_force = np.empty((1, 0))  # read by nothing below
    else:
        cardiac = bandpass(block_means(x, factor), fs_a, band, axis=-1)
        cardiac_force = cardiac  # in the channels' units, before any scale normalisation

    if n_ch == 1:
        weights = np.ones(1)
        scales = None
        snr: tuple[float | None, ...] = (None,)
        lag_s = None
        method = "passthrough"
        fused = np.array(x[0], dtype=np.float64)
        if with_confidence:
            conf = _periodic_fraction(cardiac[0][None], fs_a)
    else:
        scales_arr = None
        if mixed:
            scales_arr = _robust_scale(cardiac)
            safe = np.where(scales_arr > 0.0, scales_arr, 1.0)
            cardiac = cardiac / safe[:, None]
            flags.append("fusion_mixed_units_scale_normalised")
        weights, snr_arr, lag_s, method = _mrc_weights(cardiac, fs_a, flags)
        eff = weights if scales_arr is None else np.where(
            scales_arr > 0.0, weights / np.where(scales_arr > 0.0, scales_arr, 1.0), 0.0)
        fused = _weighted_sum(x, eff)
        if with_confidence:
            conf = _periodic_fraction((weights @ cardiac)[None], fs_a)
        scales = None if scales_arr is None else tuple(float(s) for s in scales_arr)
        snr = tuple(None if not math.isfinite(v) else float(v) for v in snr_arr)

    cop = _cop(x, fs, cardiac_force, fs_a, positions_m, static_n, static_fs_hz, unit_list,
               flags)
    return FusionResult(
        fused=fused, weights=tuple(float(w) for w in weights), method=method, unit=unit,
        channel_snr=snr, channel_scales=scales, heart_lag_s=lag_s,
        cop_m=cop[0], cop_fs_hz=cop[3],
        cop_respiratory_m=cop[1], cop_cardiac_excursion_mm=cop[2],
        confidence=conf, flags=tuple(flags),
    )


# ----------------------------------------------------------------------------- validation


def _check_units(units: Sequence[str] | None, n_ch: int) -> list[str] | None:
    if units is None:
        return None
    out = list(units)
    if len(out) != n_ch or not all(isinstance(u, str) and u for u in out):
        raise InvalidInputError("units", f"`units` must hold one non-empty string per channel "
                                f"({n_ch}); got {units!r}.")
    return out


def _check_band(band_hz: tuple[float, float]) -> tuple[float, float]:
    try:
        low, high = (float(v) for v in band_hz)
    except (TypeError, ValueError):
        raise InvalidInputError("band_hz", "`band_hz` must be a pair (low, high) in Hz; got "
                                f"{band_hz!r}.") from None
    if not (math.isfinite(low) and math.isfinite(high) and 0.0 < low < high <= 40.0):
        raise InvalidInputError("band_hz", "`band_hz` must satisfy 0 < low < high <= 40 Hz; got "
                                f"({low:g}, {high:g}).")
    return low, high


# ----------------------------------------------------------------------------- kernels


#: Samples per BLAS axpy call: below OpenBLAS's threading threshold (10,000), so
#: that no call waits for a second thread on shared cores. The arithmetic per
#: sample (one fused multiply-add where the library uses one) does not change.
_AXPY_CHUNK = 8192


def _weighted_sum(x: FloatArray, weights: FloatArray) -> FloatArray:
    """``weights @ x`` accumulated one channel at a time (BLAS axpy, no temporaries)."""
    fused = x[0] * weights[0]
    n = fused.shape[0]
    for i in range(1, x.shape[0]):
        a = float(weights[i])
        for s in range(0, n, _AXPY_CHUNK):
            fused[s:s + _AXPY_CHUNK] = blas.daxpy(x[i, s:s + _AXPY_CHUNK],
                                                  fused[s:s + _AXPY_CHUNK], a=a)
    return np.asarray(fused)


def _robust_scale(x: FloatArray) -> FloatArray:
    return np.asarray(robust_sd(x, axis=-1))


def _windows(x: FloatArray, fs_a: float, max_windows: int | None = None) -> FloatArray:
    """(n_ch, m) -> (n_ch, n_win, L) non-overlapping windows of ``WINDOW_S``.

    With ``max_windows``, at most that many windows, evenly spaced over the record.
    """
    length = int(round(WINDOW_S * fs_a))
    count = x.shape[-1] // length
    win = x[:, : count * length].reshape(x.shape[0], count, length)
    if max_windows is not None and count > max_windows:
        win = win[:, np.linspace(0, count - 1, max_windows).astype(np.intp)]
    return win


def _autocorr(w: FloatArray, max_lag: int) -> FloatArray:
    """Unbiased autocorrelation along the last axis for lags 0..max_lag (one channel at
    a time, so that only one channel's spectra are held)."""
    length = w.shape[-1]
    # Lags up to max_lag only: with nfft >= length + max_lag the circular wrap-around
    # (lag nfft - k) falls outside the window, so these lags equal the linear ones.
    nfft = scipy.fft.next_fast_len(length + max_lag, real=True)
    out = np.empty((*w.shape[:-1], max_lag + 1))
    norm = length - np.arange(max_lag + 1)
    for i in range(w.shape[0]):
        spec = scipy.fft.rfft(w[i], nfft, axis=-1)
        power = np.abs(spec)
        power *= power
        out[i] = scipy.fft.irfft(power, nfft, axis=-1)[..., : max_lag + 1] / norm
    return out


def _heart_lags(r: FloatArray, fs_a: float, *, leave_one_out: bool = False
                ) -> tuple[FloatArray, NDArray[np.intp]]:
    """Per window, the lag (index) of the summed normalised autocorrelation peak.

    With ``leave_one_out`` the lag for channel ``i`` comes from the other channels
    only, so that a channel's own noise cannot pick the lag that flatters it; the
    result then has one row of lags per channel, shape (n_ch, n_win).
    """
    lo = int(round(LAG_RANGE_S[0] * fs_a))
    r0 = r[..., 0]
    norm = np.divide(r, r0[..., None], out=np.zeros_like(r), where=r0[..., None] > 0.0)
    summed = norm.sum(axis=0)
    if leave_one_out:
        others = summed[None, :, lo:] - norm[:, :, lo:]
        return r0, lo + np.argmax(others, axis=-1)
    return r0, lo + np.argmax(summed[:, lo:], axis=-1)


def _mrc_weights(cardiac: FloatArray, fs_a: float, flags: list[str]
                 ) -> tuple[FloatArray, FloatArray, float | None, str]:
    n_ch = cardiac.shape[0]
    win = _windows(cardiac, fs_a, MAX_ANALYSIS_WINDOWS)
    r = _autocorr(win, int(round(LAG_RANGE_S[1] * fs_a)))
    # Each window's energy, read again below for the zero-lag correlations.
    energy = np.einsum("cwl,cwl->cw", win, win)
    total = lane_median(energy / win.shape[-1])
    dead = total <= 0.0
    loo = int(np.count_nonzero(~dead)) >= 3
    r0, lag = _heart_lags(r, fs_a, leave_one_out=loo)
    if not loo:
        lag = np.broadcast_to(lag, r0.shape)
    rt = np.take_along_axis(r, lag[..., None], axis=-1)[..., 0]
    frac = np.divide(rt, r0, out=np.zeros_like(rt), where=r0 > 0.0)
    med = lane_median(frac)
    se = _SE_MEDIAN * MAD_TO_SD * lane_median(np.abs(frac - med[:, None])) \
        / np.sqrt(frac.shape[-1])
    frac_hat = np.clip(med - 2.0 * se, 0.0, MAX_PERIODIC_FRACTION)
    ps = frac_hat * total
    pn = total - ps
    snr = np.where(dead, np.nan, ps / np.where(pn > 0.0, pn, 1.0))
    lag_s = float(np.median(lag) / fs_a)
    if dead.all() or np.nanmax(snr) < MIN_SNR:
        flags.append("no_cardiac_periodicity_equal_weights")
        return np.ones(n_ch), snr, lag_s, "equal_weights"
    ref = int(np.nanargmax(snr))
    cross = np.einsum("cwl,wl->cw", win, win[ref])
    denom = np.sqrt(energy * energy[ref][None, :])
    corr = np.divide(cross, denom, out=np.zeros_like(cross), where=denom > 0.0)
    sign = np.where(lane_median(corr) < 0.0, -1.0, 1.0)
    raw = np.where(dead, 0.0, sign * np.sqrt(ps) / np.where(pn > 0.0, pn, np.inf))
    if raw.sum() < 0.0:
        # Polarity is relative: keep the weighted majority of channels as recorded.
        raw, sign = -raw, -sign
    for i in np.flatnonzero(dead):
        flags.append(f"channels[{i}]_dead_weight_zero")
    weak = ~dead & (snr < MIN_SNR)
    for i in np.flatnonzero((sign < 0.0) & ~weak & ~dead):
        flags.append(f"channels[{i}]_inverted")
    for i in np.flatnonzero(weak):
        flags.append(f"channels[{i}]_low_cardiac_snr")
    weights = raw * (n_ch / np.sum(np.abs(raw)))
    return weights, snr, lag_s, "maximum_ratio_combining"


def _periodic_fraction(cardiac: FloatArray, fs_a: float) -> float:
    """Median over windows of r(T)/r(0) at the trace's own heart lag, in [0, 1]."""
    win = _windows(cardiac, fs_a, MAX_ANALYSIS_WINDOWS)
    r = _autocorr(win, int(round(LAG_RANGE_S[1] * fs_a)))
    r0, lag = _heart_lags(r, fs_a)
    rt = np.take_along_axis(r[0], lag[:, None], axis=-1)[:, 0]
    frac = np.divide(rt, r0[0], out=np.zeros_like(rt), where=r0[0] > 0.0)
    return clip(median_1d(frac), 0.0, 1.0)


def _cop(x: FloatArray, fs: float, cardiac: FloatArray, fs_a: float,
         positions_m: ArrayLike | None, static_n: ArrayLike | None,
         static_fs_hz: float | None, units: list[str] | None, flags: list[str]
         ) -> tuple[FloatArray | None, FloatArray | None, float | None, float | None]:
    """CoP trajectory, its respiratory band (both at ~COP_FS_HZ) and the cardiac excursion."""
    if positions_m is None:
        return None, None, None, None
    n_ch = x.shape[0]
    pos = np.asarray(positions_m, dtype=np.float64)
    if pos.shape != (n_ch, 2) or not np.isfinite(pos).all():
        raise InvalidInputError("positions_m", f"`positions_m` must be a finite ({n_ch}, 2) "
                                f"array in m; got shape {pos.shape}.")
    if units is not None and any(u != "N" for u in units):
        flags.append("cop_needs_force_channels")
        return None, None, None, None
    if units is None:
        flags.append("cop_assumes_force_channels")
    if static_n is None:
        flags.append("cop_needs_static_force")
        return None, None, None, None
    factor = block_factor(fs, COP_FS_HZ)
    fs_c = fs / factor
    m = x.shape[1] // factor
    total = block_means(x, factor) + _static_at(static_n, static_fs_hz, fs, factor, n_ch, m)
    force = total.sum(axis=0)
    valid = force >= _MIN_TOTAL_FORCE_N
    if not valid.any():
        flags.append("cop_support_empty")
        return None, None, None, None
    safe = np.where(valid, force, 1.0)
    at_centres = (pos.T @ total) / safe  # (2, m), block k centred at block_centres(m)[k]
    # Onto the grid k / fs_c of the result (a block's centre is half a block later, 48 ms
    # at 10 Hz): interpolated over the occupied blocks only.
    centres = block_centres(m, factor)
    grid = np.arange(m, dtype=np.float64) * factor
    filled_t = np.stack([np.interp(grid, centres[valid], row[valid]) for row in at_centres])
    cop = np.ascontiguousarray(filled_t.T)
    cop[~valid] = np.nan
    resp = np.ascontiguousarray(bandpass(filled_t, fs_c, RESPIRATORY_BAND_HZ).T)
    resp[~valid] = np.nan
    excursion = None
    if valid.mean() < 0.5:
        flags.append("cop_support_mostly_empty_no_excursion")
    else:
        excursion = _cardiac_excursion_mm(cardiac, fs_a, total, valid, fs_c, pos)
        if excursion is None:
            flags.append("cop_no_fully_occupied_window_no_excursion")
    return cop, resp, excursion, fs_c


def _cardiac_excursion_mm(cardiac: FloatArray, fs_a: float, total: FloatArray,
                          valid: NDArray[np.bool_], fs_c: float, pos: FloatArray
                          ) -> float | None:
    """Median radial RMS of the first-order cardiac-band CoP over fully occupied windows."""
    win = _windows(cardiac, fs_a)  # (n_ch, n_win, L)
    m = total.shape[1]
    # Each window's span on the CoP grid, by time (the two rates need not divide).
    edges = np.round(np.arange(win.shape[1] + 1) * (win.shape[2] / fs_a) * fs_c)
    edges = np.minimum(edges.astype(np.int64), m)
    lengths = np.diff(edges)
    cum_force = np.concatenate((np.zeros((total.shape[0], 1)), np.cumsum(total, axis=1)),
                               axis=1)
    full = (lengths > 0) & (count_in(~valid, edges[:-1], edges[1:]) == 0)
    if not full.any():
        return None
    keep = np.flatnonzero(full)
    s_i = (cum_force[:, edges[1:][keep]] - cum_force[:, edges[:-1][keep]]) / lengths[keep]
    s = s_i.sum(axis=0)  # (k,) mean total force of each kept window
    centre = (pos.T @ s_i) / s  # (2, k)
    lever = (pos[:, :, None] - centre[None, :, :]) / s  # (n_ch, 2, k)
    # (k, 2, n_ch) @ (k, n_ch, L): each kept window's two CoP axes, one small product a
    # window; the radial mean square summed in one pass
    band_cop = np.matmul(lever.transpose(2, 1, 0), win[:, keep].transpose(1, 0, 2))
    rms = np.sqrt(np.einsum("kal,kal->k", band_cop, band_cop) / band_cop.shape[-1])
    return float(1000.0 * median_1d(rms))


def _static_at(static_n: ArrayLike, static_fs_hz: float | None, fs: float, factor: int,
               n_ch: int, m: int) -> FloatArray:
    st = np.asarray(static_n, dtype=np.float64)
    if st.shape == (n_ch,):
        if not np.isfinite(st).all():
            raise InvalidInputError("static_n", "`static_n` must be finite.")
        return st[:, None]
    if st.ndim != 2 or st.shape[0] != n_ch or st.shape[1] < 2 or not np.isfinite(st).all():
        raise InvalidInputError("static_n", f"`static_n` must be finite, shape ({n_ch},) or "
                                f"({n_ch}, k >= 2); got shape {st.shape}.")
    rate = None if static_fs_hz is None else float(static_fs_hz)
    if rate is None or not (math.isfinite(rate) and 0.0 < rate <= fs):
        raise InvalidInputError("static_fs_hz", "`static_fs_hz` must be a rate in Hz, "
                                f"0 < static_fs_hz <= fs_hz, for a 2-D static_n; got "
                                f"{static_fs_hz!r}.")
    at = block_centres(m, factor)
    slow_at = (np.arange(st.shape[1]) + 0.5) * (fs / rate) - 0.5
    return np.stack([np.interp(at, slow_at, row) for row in st])
