"""Respiration from the low band of the force trace: rate, breath timing and breathing pauses.

Public function
---------------
breathing
    Breathing signal, breaths by hysteresis, rate by counting and by spectrum,
    breath-to-breath variability, rise/fall time ratio and pauses of 10 s or more.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
from numpy.typing import ArrayLike, NDArray
from scipy import signal as sps
from scipy import stats

from features.errors import InvalidInputError

__all__ = ["RespirationResult", "breathing"]

BAND_HZ = (0.1, 0.7)
"""Breathing band (Hz): 6 to 42 breaths/min."""
TARGET_FS_HZ = 10.0
"""Approximate rate the trace is decimated to before filtering (Hz)."""
HYSTERESIS = 0.3
"""Schmitt-trigger thresholds, +/- this times the robust breathing amplitude."""
PAUSE_MIN_S = 10.0
"""Shortest pause counted (s): the adult apnoea duration criterion of the AASM manual."""
MIN_DURATION_S = 20.0

_BASELINE_BLOCK_S = 10.0
_BASELINE_SPAN_S = 120.0
_WELCH_SEGMENT_S = 64.0
_MIN_WELCH_RUN_S = 20.0


@dataclass(frozen=True, eq=False)
class RespirationResult:
    """Respiration family result; None means not computed honestly (see ``flags``).

    Attributes
    ----------
    confidence, flags
        Family confidence in [0, 1] and quality flags.
    source
        ``"trace"`` or ``"centre_of_pressure"``: the input the breathing signal came from.
    rate_per_min
        Breathing rate from counting: 60 / median breath interval (breaths/min).
    spectral_rate_per_min
        Breathing rate at the Welch spectral peak within the band (breaths/min).
    breath_count
        Breaths detected (rising hysteresis crossings).
    breath_times_s
        Instants of the rising crossings (s from the first sample; read-only array).
    interval_sd_s, interval_cv_pct
        SD (ddof=1) and coefficient of variation of the breath intervals used.
    rise_time_s, fall_time_s, rise_fall_ratio
        Median trough-to-peak and peak-to-trough times of the breathing signal and their
        ratio. A force sensor does not tell inspiration from expiration by sign, so this is
        reported as rise/fall and not as an inspiration/expiration ratio.
    breathing_amplitude
        Robust amplitude of the breathing signal (1.4826 x MAD), in the input's unit.
    pause_count, pause_spans_s, pauses_per_hour, longest_pause_s
        Breathing pauses of >= 10 s: spans where the breathing amplitude stays below
        ``pause_threshold_pct`` of the surrounding baseline. A signal observation, not a
        diagnosis of apnoea.
    pause_threshold_pct
        The threshold used (% of the baseline amplitude).
    usable_duration_s
        Usable time analysed (s).
    breathing_signal, breathing_fs_hz
        The band-passed breathing signal (NaN where unusable; read-only array) and its rate.
    """

    confidence: float
    flags: tuple[str, ...]
    source: str
    breathing_fs_hz: float
    usable_duration_s: float
    pause_threshold_pct: float
    rate_per_min: float | None = None
    spectral_rate_per_min: float | None = None
    breath_count: int = 0
    breath_times_s: NDArray[np.float64] = field(
        default_factory=lambda: _frozen(np.empty(0)), repr=False
    )
    interval_sd_s: float | None = None
    interval_cv_pct: float | None = None
    rise_time_s: float | None = None
    fall_time_s: float | None = None
    rise_fall_ratio: float | None = None
    breathing_amplitude: float | None = None
    pause_count: int | None = None
    pause_spans_s: tuple[tuple[float, float], ...] = ()
    pauses_per_hour: float | None = None
    longest_pause_s: float | None = None
    breathing_signal: NDArray[np.float64] = field(
        default_factory=lambda: _frozen(np.empty(0)), repr=False
    )


def breathing(
    signal_or_lowband: ArrayLike,
    fs_hz: float,
    *,
    usable: ArrayLike | None = None,
    cop_signal: ArrayLike | None = None,
    pause_threshold_pct: float = 25.0,
) -> RespirationResult:
    """Measure breathing from the low band of a force trace.

    Parameters
    ----------
    signal_or_lowband
        1-D force trace (any rate) or its already low-passed band; at least 20 s.
    fs_hz
        Sampling rate of ``signal_or_lowband`` (Hz), 2 to 2000.
    usable
        Boolean mask of the samples that may be used, same length; all usable when None.
    cop_signal
        Optional centre-of-pressure trajectory (one axis, any unit), same length and rate.
        Used instead of the trace when its breathing band is more concentrated (Notes, 1).
    pause_threshold_pct
        A pause is where the breathing amplitude stays below this share (10 to 50 %) of the
        surrounding baseline amplitude.

    Returns
    -------
    RespirationResult

    Raises
    ------
    InvalidInputError
        For a non-1-D input, fewer than 20 s of samples, a sampling rate out of range,
        non-finite usable samples, mismatched lengths, or a threshold out of range.

    Notes
    -----
    1. The trace (masked samples bridged linearly, median removed) is decimated by an
       integer factor to about 10 Hz (``scipy.signal.resample_poly``, anti-alias FIR) and
       band-passed 0.1-0.7 Hz with a 4th-order Butterworth filter run forward and backward
       (zero phase). A decimated sample is usable only when all its source samples are. When
       ``cop_signal`` is given it is processed alike, and the candidate with the larger share
       of band power within +/-0.05 Hz of its Welch peak is kept (flag when the centre of
       pressure wins; its amplitudes are then in its own unit).
    2. Breaths: the signal is divided by its robust amplitude A = 1.4826 x MAD over usable
       samples (A is 1.05 times the amplitude of a sinusoid). A Schmitt trigger with thresholds
       +0.3 and -0.3 marks a breath each time the signal rises above +0.3 after having been
       below -0.3; the breath instant is the interpolated upward crossing of +0.3. The
       trigger state is reset across masked samples.
    3. Rate by counting = 60 / median breath interval, over intervals with no masked sample
       and no pause inside. Spectral rate = Welch peak (Hann, 64 s segments or the longest
       usable run if shorter but >= 20 s, 50 % overlap, 8x zero padding, PSDs of the usable
       runs averaged by segment count) in 0.1-0.7 Hz, refined by a parabola.
       Confidence = clip(1 - |counted - spectral| / 3 per min, 0, 1) x min(1, intervals / 10)
       x sqrt(usable fraction); 0 when either rate is missing.
    4. Rise/fall: within each breath cycle the peak is the maximum and the trough the
       minimum after it (sample resolution of the ~10-Hz signal); rise = trough to next peak,
       fall = peak to trough; ratio of the medians, from >= 5 pairs. The 0.7-Hz upper band
       edge removes the higher harmonics that carry the asymmetry, so the ratio is drawn
       toward 1 at fast rates: a true 0.6 reads about 0.74 at 15/min and 0.67 at 10/min.
    5. Pauses: baseline amplitude = median, over the 10-s blocks within +/-60 s, of each
       block's 90th percentile of |signal| (blocks at least half usable). A pause is a run
       of usable samples with |signal| below ``pause_threshold_pct`` of the baseline lasting
       >= 10 s, bounded by breathing on both sides (runs touching masked samples or the ends
       of the recording are not counted, and flagged). Run edges fall where the last breath
       drops below the threshold, so a flat span reads about 0.3 s longer than it is for a
       25 % threshold at 15 breaths/min. Pauses per hour = count / usable hours.

    The 10-s criterion is the adult apnoea duration criterion of the AASM scoring manual;
    the amplitude rule here is our own signal criterion on a force trace, not the manual's
    airflow-sensor rule, so counts are signal observations and not a diagnosis.

    References
    ----------
    .. [1] Berry RB, Brooks R, Gamaldo CE, et al. "The AASM Manual for the Scoring of Sleep
       and Associated Events: Rules, Terminology and Technical Specifications", version 2.x.
       American Academy of Sleep Medicine, Darien, IL (from memory).
    .. [2] Welch PD. "The use of fast Fourier transform for the estimation of power spectra:
       a method based on time averaging over short, modified periodograms." IEEE Transactions
       on Audio and Electroacoustics 15(2):70-73, 1967. doi:10.1109/TAU.1967.1161901
    """
    x, fs, mask, cop, thr_pct = _validate(
        signal_or_lowband, fs_hz, usable, cop_signal, pause_threshold_pct
    )
    flags: list[str] = []
    y, fs_b, mask_b = _breathing_band(x, fs, mask)
    source = "trace"
    if cop is not None:
        y_cop, _, _ = _breathing_band(cop, fs, mask)
        if _concentration(y_cop, fs_b, mask_b) > _concentration(y, fs_b, mask_b):
            y, source = y_cop, "centre_of_pressure"
            flags.append("breathing_from_centre_of_pressure")
    usable_s = float(mask_b.sum() / fs_b)
    if usable_s < MIN_DURATION_S:
        flags.append("too_little_usable_signal")
        return RespirationResult(
            confidence=0.0, flags=tuple(flags), source=source, breathing_fs_hz=fs_b,
            usable_duration_s=usable_s, pause_threshold_pct=thr_pct,
            breathing_signal=_frozen(np.where(mask_b, y, np.nan)),
        )
    amp = float(1.4826 * stats.median_abs_deviation(y[mask_b]))
    if amp <= 0:
        flags.append("no_breathing_signal")
        amp_z = np.zeros_like(y)
    else:
        amp_z = y / amp
    rises, rise_idx = _schmitt_rises(amp_z, fs_b, mask_b)
    spans, pause_flags = _pauses(y, fs_b, mask_b, thr_pct / 100.0)
    flags.extend(pause_flags)
    intervals, valid = _breath_intervals(rises, rise_idx, mask_b, spans, fs_b)
    rate = None
    sd = cv = None
    if intervals.size >= 2:
        rate = 60.0 / float(np.median(intervals))
        sd = float(np.std(intervals, ddof=1))
        cv = 100.0 * sd / float(np.mean(intervals))
    else:
        flags.append("too_few_breaths")
    spectral = _spectral_rate_per_min(y, fs_b, mask_b)
    if spectral is None:
        flags.append("no_spectral_peak")
    rise_t, fall_t = _rise_fall(y, fs_b, rise_idx, valid)
    ratio = None
    if rise_t is None or fall_t is None or fall_t <= 0:
        flags.append("too_few_breaths_for_rise_fall")
    else:
        ratio = rise_t / fall_t
    confidence = 0.0
    if rate is not None and spectral is not None:
        c_agree = float(np.clip(1.0 - abs(rate - spectral) / 3.0, 0.0, 1.0))
        confidence = c_agree * min(1.0, intervals.size / 10.0) * np.sqrt(mask_b.mean())
    if spans:
        flags.append("pauses_are_signal_observations_not_diagnosis")
    if usable_s < 3600.0:
        flags.append("pauses_per_hour_extrapolated_from_under_1_h")
    durations = [b - a for a, b in spans]
    return RespirationResult(
        confidence=float(confidence),
        flags=tuple(flags),
        source=source,
        breathing_fs_hz=fs_b,
        usable_duration_s=usable_s,
        pause_threshold_pct=thr_pct,
        rate_per_min=rate,
        spectral_rate_per_min=spectral,
        breath_count=int(rises.size),
        breath_times_s=_frozen(rises),
        interval_sd_s=sd,
        interval_cv_pct=cv,
        rise_time_s=rise_t,
        fall_time_s=fall_t,
        rise_fall_ratio=ratio,
        breathing_amplitude=amp if amp > 0 else None,
        pause_count=len(spans),
        pause_spans_s=tuple(spans),
        pauses_per_hour=len(spans) / (usable_s / 3600.0),
        longest_pause_s=max(durations) if durations else None,
        breathing_signal=_frozen(np.where(mask_b, y, np.nan)),
    )


# --------------------------------------------------------------------------- validation


def _validate(
    sig: ArrayLike,
    fs_hz: float,
    usable: ArrayLike | None,
    cop_signal: ArrayLike | None,
    pause_threshold_pct: float,
) -> tuple[
    NDArray[np.float64], float, NDArray[np.bool_], NDArray[np.float64] | None, float
]:
    try:
        fs = float(fs_hz)
    except (TypeError, ValueError):
        raise InvalidInputError("fs_hz", f"`fs_hz` must be a number; got {fs_hz!r}.") from None
    if not (np.isfinite(fs) and 2.0 <= fs <= 2000.0):
        raise InvalidInputError("fs_hz", f"`fs_hz` must be between 2 and 2000 Hz; got {fs_hz}.")
    x = np.asarray(sig, dtype=float)
    if x.ndim != 1:
        raise InvalidInputError(
            "signal_or_lowband", f"`signal_or_lowband` must be 1-D; got {x.ndim} dimensions."
        )
    if x.size < MIN_DURATION_S * fs:
        raise InvalidInputError(
            "signal_or_lowband",
            f"`signal_or_lowband` must last at least {MIN_DURATION_S:g} s "
            f"({int(np.ceil(MIN_DURATION_S * fs))} samples); got {x.size}.",
        )
    mask = np.ones(x.size, dtype=bool) if usable is None else np.asarray(usable, dtype=bool)
    if mask.shape != x.shape:
        raise InvalidInputError(
            "usable", f"`usable` must have the length of the signal ({x.size}); got {mask.size}."
        )
    if not np.all(np.isfinite(x[mask])):
        raise InvalidInputError(
            "signal_or_lowband",
            "`signal_or_lowband` must be finite where `usable` is True; got NaN or infinity.",
        )
    cop = None
    if cop_signal is not None:
        cop = np.asarray(cop_signal, dtype=float)
        if cop.shape != x.shape:
            raise InvalidInputError(
                "cop_signal",
                f"`cop_signal` must have the length of the signal ({x.size}); got {cop.size}.",
            )
        if not np.all(np.isfinite(cop[mask])):
            raise InvalidInputError(
                "cop_signal", "`cop_signal` must be finite where `usable` is True; got NaN."
            )
        cop = _bridge(cop, mask)
    thr = float(pause_threshold_pct)
    if not (np.isfinite(thr) and 10.0 <= thr <= 50.0):
        raise InvalidInputError(
            "pause_threshold_pct",
            f"`pause_threshold_pct` must be between 10 and 50 %; got {pause_threshold_pct}.",
        )
    return _bridge(x, mask), fs, mask, cop, thr


def _bridge(x: NDArray[np.float64], mask: NDArray[np.bool_]) -> NDArray[np.float64]:
    """Replace masked samples by linear interpolation between usable ones."""
    if mask.all():
        return x
    idx = np.flatnonzero(mask)
    if idx.size == 0:
        return np.zeros_like(x)
    out = x.copy()
    bad = np.flatnonzero(~mask)
    out[bad] = np.interp(bad, idx, x[idx])
    return out


def _frozen(a: NDArray[np.float64]) -> NDArray[np.float64]:
    out = np.array(a, dtype=float)
    out.setflags(write=False)
    return out


def _runs(flag: NDArray[np.bool_]) -> NDArray[np.int64]:
    """(start, stop) index pairs of the runs of True in ``flag`` (stop exclusive)."""
    d = np.diff(np.concatenate(([0], flag.astype(np.int8), [0])))
    return np.column_stack((np.flatnonzero(d == 1), np.flatnonzero(d == -1)))


# --------------------------------------------------------------------------- kernels


def _breathing_band(
    x: NDArray[np.float64], fs: float, mask: NDArray[np.bool_]
) -> tuple[NDArray[np.float64], float, NDArray[np.bool_]]:
    q = max(1, int(fs // TARGET_FS_HZ))
    x0 = x - np.median(x)
    if q > 1:
        y = sps.resample_poly(x0, 1, q, padtype="line")
        n_b = y.size
        pad = n_b * q - mask.size
        blocks = np.concatenate((mask, np.zeros(pad, dtype=bool))).reshape(n_b, q)
        mask_b = np.asarray(blocks.all(axis=1), dtype=bool)
        if pad and mask[-(q - pad):].all():
            mask_b[-1] = True
    else:
        y, mask_b = x0, mask.copy()
    fs_b = fs / q
    sos = sps.butter(4, BAND_HZ, btype="bandpass", fs=fs_b, output="sos")
    return sps.sosfiltfilt(sos, y), fs_b, mask_b


def _welch_psd(
    y: NDArray[np.float64], fs: float, mask: NDArray[np.bool_]
) -> tuple[NDArray[np.float64], NDArray[np.float64]] | None:
    runs = _runs(mask)
    lengths = runs[:, 1] - runs[:, 0] if runs.size else np.empty(0, dtype=np.int64)
    if lengths.size == 0 or lengths.max() < _MIN_WELCH_RUN_S * fs:
        return None
    nper = int(min(_WELCH_SEGMENT_S * fs, lengths.max()))
    nfft = int(2 ** np.ceil(np.log2(8 * nper)))
    total: NDArray[np.float64] | None = None
    weight = 0
    freqs = np.empty(0)
    for (a, b), n in zip(runs, lengths, strict=True):
        if n < nper:
            continue
        freqs, p = sps.welch(y[a:b], fs=fs, window="hann", nperseg=nper, noverlap=nper // 2,
                             nfft=nfft, detrend="constant")
        k = 1 + (n - nper) // (nper // 2)
        total = p * k if total is None else total + p * k
        weight += k
    assert total is not None
    return freqs, total / weight


def _spectral_rate_per_min(
    y: NDArray[np.float64], fs: float, mask: NDArray[np.bool_]
) -> float | None:
    est = _welch_psd(y, fs, mask)
    if est is None:
        return None
    f, p = est
    band = np.flatnonzero((f >= BAND_HZ[0]) & (f <= BAND_HZ[1]))
    i = int(band[np.argmax(p[band])])
    if i in (band[0], band[-1]) or p[i] <= 0:
        return None
    a, b, c = p[i - 1], p[i], p[i + 1]
    den = a - 2 * b + c
    d = 0.0 if den == 0 else float(np.clip(0.5 * (a - c) / den, -0.5, 0.5))
    return 60.0 * float(f[i] + d * (f[1] - f[0]))


def _concentration(y: NDArray[np.float64], fs: float, mask: NDArray[np.bool_]) -> float:
    """Share of in-band Welch power within +/-0.05 Hz of the peak (0 when not estimable)."""
    est = _welch_psd(y, fs, mask)
    if est is None:
        return 0.0
    f, p = est
    band = (f >= BAND_HZ[0]) & (f <= BAND_HZ[1])
    if p[band].sum() <= 0:
        return 0.0
    fp = f[band][np.argmax(p[band])]
    near = band & (np.abs(f - fp) <= 0.05)
    return float(p[near].sum() / p[band].sum())


def _schmitt_rises(
    z: NDArray[np.float64], fs: float, mask: NDArray[np.bool_]
) -> tuple[NDArray[np.float64], NDArray[np.int64]]:
    """Times (s) and sample indices of the upward crossings of +HYSTERESIS after -HYSTERESIS."""
    ev = np.where(z > HYSTERESIS, 1, np.where(z < -HYSTERESIS, -1, 0)).astype(np.int8)
    ev[~mask] = 2  # reset marker
    idx = np.where(ev != 0, np.arange(ev.size), 0)
    np.maximum.accumulate(idx, out=idx)
    state = ev[idx]
    state[(idx == 0) & (ev[0] == 0)] = 0
    k = np.flatnonzero((state[1:] == 1) & (state[:-1] == -1)) + 1
    a, b = z[k - 1], z[k]
    frac = np.clip((HYSTERESIS - a) / np.where(b - a == 0, 1.0, b - a), 0.0, 1.0)
    return (k - 1 + frac) / fs, k.astype(np.int64)


def _breath_intervals(
    rises: NDArray[np.float64],
    rise_idx: NDArray[np.int64],
    mask: NDArray[np.bool_],
    pauses: list[tuple[float, float]],
    fs: float,
) -> tuple[NDArray[np.float64], NDArray[np.bool_]]:
    """Intervals between consecutive rises with no masked sample and no pause inside."""
    if rises.size < 2:
        return np.empty(0), np.zeros(0, dtype=bool)
    bad = np.concatenate(([0], np.cumsum(~mask)))
    valid = (bad[rise_idx[1:] + 1] - bad[rise_idx[:-1]]) == 0
    for a, b in pauses:
        valid &= ~((rises[:-1] < b) & (rises[1:] > a))
    return np.diff(rises)[valid], valid


def _rise_fall(
    y: NDArray[np.float64], fs: float, rise_idx: NDArray[np.int64], valid: NDArray[np.bool_]
) -> tuple[float | None, float | None]:
    if valid.size == 0:
        return None, None
    peaks, troughs = [], []
    for a, b in zip(rise_idx[:-1], rise_idx[1:], strict=True):
        p = a + int(np.argmax(y[a:b]))
        peaks.append(p)
        troughs.append(p + int(np.argmin(y[p:b])))
    pk, tr = np.asarray(peaks), np.asarray(troughs)
    fall = (tr - pk)[valid]
    both = valid[:-1] & valid[1:]
    rise = (pk[1:] - tr[:-1])[both]
    if rise.size < 5 or fall.size < 5:
        return None, None
    return float(np.median(rise)) / fs, float(np.median(fall)) / fs


def _pauses(
    y: NDArray[np.float64], fs: float, mask: NDArray[np.bool_], fraction: float
) -> tuple[list[tuple[float, float]], list[str]]:
    nb = max(1, round(_BASELINE_BLOCK_S * fs))
    n_blocks = -(-y.size // nb)
    a = np.abs(y)
    level = np.full(n_blocks, np.nan)
    for k in range(n_blocks):
        seg, m = a[k * nb : (k + 1) * nb], mask[k * nb : (k + 1) * nb]
        if m.mean() >= 0.5:
            level[k] = np.percentile(seg[m], 90)
    half = round(_BASELINE_SPAN_S / _BASELINE_BLOCK_S / 2)
    base = np.full(n_blocks, np.nan)
    for k in range(n_blocks):
        w = level[max(0, k - half) : k + half + 1]
        if np.isfinite(w).any():
            base[k] = np.nanmedian(w)
    base_s = np.repeat(base, nb)[: y.size]
    low = mask & np.isfinite(base_s) & (a < fraction * np.nan_to_num(base_s, nan=0.0))
    spans: list[tuple[float, float]] = []
    flags: list[str] = []
    for start, stop in _runs(low):
        if (stop - start) / fs < PAUSE_MIN_S:
            continue
        bounded = start > 0 and stop < y.size and mask[start - 1] and mask[stop]
        if not bounded:
            flags.append("pause_not_counted_touches_mask_or_edge")
            continue
        spans.append((float(start / fs), float(stop / fs)))
    return spans, sorted(set(flags))
