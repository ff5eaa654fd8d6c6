"""Respiratory modulation of the heartbeat: timing (RSA), amplitude, baseline and coupling.

Public function
---------------
respiratory_modulation
    Peak-to-trough respiratory sinus arrhythmia, depth of the beat-amplitude modulation at the
    breathing rhythm, share of interval power at the breathing frequency, breathing baseline
    relative to the cardiac amplitude, and interval-breathing coherence.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import cast

import numpy as np
from numpy.typing import ArrayLike, NDArray
from scipy.interpolate import BSpline

from features._checks import check_sampling_rate
from features._numeric import clip, count_in, median_1d, runs, std
from features.catalogue import (
    NONNEGATIVE,
    PERCENT,
    REF_CARTER,
    REF_COSINOR,
    REF_GROSSMAN,
    REF_LOMB,
    REF_OURS,
    UNIT_INTERVAL,
    FeatureDefinition,
    with_tolerance,
)
from features.errors import InvalidInputError
from features.limits import SHORT_TERM_S
from features.spectral import lomb_scargle_power, welch_spectra

__all__ = ["CATALOGUE", "ModulationResult", "respiratory_modulation"]

MIN_BREATHS = 5
"""Fewest usable breath cycles for the per-breath indices."""
MIN_BEATS = 20
"""Fewest usable intervals or amplitudes for the beat-series indices."""
MIN_EXPLAINED_FRACTION = 0.8
"""Smallest share of the beat-to-beat intervals that the interval screen explains (labels
normal, or ectopic: a premature beat and its compensatory pause, around which the sinus
rhythm runs on) for RSA to be measured. RSA is the sinus node's respiratory modulation:
where more than a fifth of the intervals fit neither (an irregular rhythm, beats missed or
added), no sinus rhythm is left to fit. The 20 % is common practice (heart-rate-variability
studies commonly exclude recordings with more than a fifth of their intervals edited; the
Task Force of 1996 asks for sinus rhythm); counting ectopic beats with their pause as
explained is our departure: on the cohort's 12 %-ectopic recordings RSA read 38.5 and
37.5 ms against a true 40 ms from the NN series, while the irregular rhythms left 61-69 %
of their intervals explained."""
BAND_HALF_WIDTH_HZ = 0.05
"""Half-width of the band around the breathing frequency (Hz)."""
TOTAL_BAND_LOW_HZ = 0.04
"""Lower edge of the interval-spectrum total band (Hz)."""
RESAMPLE_FS_HZ = 4.0
"""Rate of the evenly resampled interval series for coherence (Hz)."""
COHERENCE_SEGMENT_S = 32.0

_MAX_GAP_S = 3.0

MIN_SIGNAL_FS_HZ = 1.0
"""Lowest rate of the breathing signal accepted (Hz): breathing stays below 0.7 Hz."""


@dataclass(frozen=True)
class ModulationResult:
    """Respiratory-modulation family result; None means not computed honestly (see ``flags``).

    Attributes
    ----------
    confidence, flags
        Family confidence (mean of the confidences of the indices computed) and flags.
    breathing_frequency_hz
        1 / median breath interval (Hz) of the breaths given.
    breaths_used
        Breath cycles kept (no gap, no unusable breathing sample).
    rsa_ms, rsa_confidence
        Peak-to-trough respiratory sinus arrhythmia (ms): twice the amplitude of the
        intervals' sinusoid of the breathing phase, slower rhythms removed.
    rsa_se_ms, rsa_half_difference_ms, rsa_half_wald
        Standard error of ``rsa_ms`` from the fit, the peak-to-trough size of the
        difference between the sinusoids fitted to the first and to the second half of the
        intervals (ms: amplitude and phase compared), and that difference over its noise
        (Wald statistic, chi-square with 2 degrees of freedom for a steady modulation);
        evidence for the calibrated confidence (:mod:`features.calibration`), not part of
        the API.
    amplitude_index, amplitude_confidence
        Relative peak-to-peak depth of the beat-amplitude modulation locked to the breathing
        cycle (dimensionless; 0.1 means amplitudes swing +/-5 % about the mean).
    timing_modulation_pct, timing_confidence
        Share of the interval-series Lomb-Scargle power within +/-0.05 Hz of the breathing
        frequency, of the power from 0.04 Hz to the beat-series Nyquist frequency (%).
    baseline_modulation_ratio, baseline_confidence
        Median per-breath peak-to-trough of the breathing signal over the cardiac amplitude.
    coherence, coherence_confidence, coherence_segments
        Magnitude-squared coherence of the 4-Hz interval series and the breathing signal at
        the breathing spectral peak, and the Welch segments behind it.
    """

    confidence: float
    flags: tuple[str, ...]
    breathing_frequency_hz: float | None = None
    breaths_used: int = 0
    rsa_ms: float | None = None
    rsa_confidence: float = 0.0
    rsa_se_ms: float | None = None
    rsa_half_difference_ms: float | None = None
    rsa_half_wald: float | None = None
    amplitude_index: float | None = None
    amplitude_confidence: float = 0.0
    timing_modulation_pct: float | None = None
    timing_confidence: float = 0.0
    baseline_modulation_ratio: float | None = None
    baseline_confidence: float = 0.0
    coherence: float | None = None
    coherence_confidence: float = 0.0
    coherence_segments: int = 0


def respiratory_modulation(
    breathing_signal: ArrayLike,
    fs_hz: float,
    *,
    beat_times_s: ArrayLike,
    breath_times_s: ArrayLike,
    interval_ms: ArrayLike | None = None,
    interval_times_s: ArrayLike | None = None,
    beat_amplitudes: ArrayLike | None = None,
    amplitude_times_s: ArrayLike | None = None,
    cardiac_amplitude: float | None = None,
    explained_fraction: float | None = None,
) -> ModulationResult:
    """Quantify how breathing modulates the timing and the strength of the heartbeat.

    Parameters
    ----------
    breathing_signal
        1-D band-limited breathing signal (for example ``RespirationResult.breathing_signal``),
        NaN where unusable; sample 0 is at t = 0 s, the origin of all times here.
    fs_hz
        Sampling rate of ``breathing_signal`` (Hz), from ``MIN_SIGNAL_FS_HZ`` to
        ``features.limits.MAX_FS_HZ``.
    beat_times_s
        Beat instants (s), strictly increasing.
    breath_times_s
        Breath instants (s), one per breath at the same phase (for example
        ``RespirationResult.breath_times_s``), strictly increasing.
    interval_ms
        Beat intervals (ms), NaN when rejected. Without ``interval_times_s`` the same length
        as ``beat_times_s``, entry k being the interval ending at beat k. When None:
        differences of ``beat_times_s``, with the first and any interval longer than
        1.8 x the median set to NaN.
    interval_times_s
        Time of each interval's end beat (s), same length as ``interval_ms``, for example
        the NN series ``IntervalLabels.nn_times_s`` with ``nn_intervals_ms``.
    beat_amplitudes
        Per-beat amplitudes (for example J-K, any unit), NaN when not measured.
    amplitude_times_s
        Instants of ``beat_amplitudes`` (s), same length; ``beat_times_s`` when None.
    cardiac_amplitude
        Cardiac amplitude in the unit of ``breathing_signal`` for the baseline index; the
        median of ``beat_amplitudes`` when None.
    explained_fraction
        Share of all beat-to-beat intervals the interval screen labels normal or ectopic
        (``IntervalLabels.fraction_explained``), in [0, 1]; below
        ``MIN_EXPLAINED_FRACTION`` RSA is not measured (Notes, step 2). Not checked when
        None.

    Returns
    -------
    ModulationResult

    Raises
    ------
    InvalidInputError
        For a non-1-D breathing signal, a sampling rate out of range, unsorted or non-finite
        times, mismatched lengths or a non-positive cardiac amplitude.

    Notes
    -----
    1. Breath cycles are the spans between consecutive breath instants; a cycle is kept when
       it lasts at most twice the median cycle (no pause or missed breath inside) and the
       breathing signal has no NaN in it. Breathing frequency f_b = 1 / median cycle.
    2. ``rsa_ms`` (peak-to-trough of the respiratory-locked part of the interval series; a
       cosinor fit, Nelson et al. 1979, with the breathing phase in place of clock time):
       each valid interval ending inside a kept cycle gets the breathing phase
       phi = 2 pi (t - start) / (cycle length). Per segment of ``TIMING_SEGMENT_S``, least
       squares of the intervals on cos(phi), sin(phi) and a cubic B-spline trend
       (``scipy.interpolate.BSpline``, knots ``RSA_TREND_KNOT_CYCLES`` median cycles apart)
       that carries the non-respiratory part (slower rhythms, drift) and is too coarse to
       follow the breathing rhythm; the segments' (a, b) are pooled by inverse variance.
       Peak-to-trough = 2 x amplitude, the amplitude debiased for noise as
       sqrt(max(0, a^2 + b^2 - var a - var b)), so that a series without RSA reads about 0
       rather than the size of its jitter; ``rsa_se_ms`` = 2 sqrt((var a + var b) / 2).
       The normal equations are solved with the trend partialled out (Frisch-Waugh), no
       general least-squares solver. The same fit with one sinusoid for the intervals
       before the middle one and another after gives ``rsa_half_difference_ms``, twice the
       length of the difference of the halves' (a, b): compared before any debiasing, so
       that two halves both lost in noise differ by their noise instead of agreeing at 0.
       Needs >= 5 breaths and 20 intervals, and, when ``explained_fraction`` is given, at
       least ``MIN_EXPLAINED_FRACTION`` of all intervals normal or ectopic (else None with
       flag ``too_many_unexplained_intervals_for_rsa``: an irregular rhythm leaves no sinus
       rhythm whose respiratory modulation could be told from the rest).
       This departs from the peak-valley method of Grossman et al. 1990 (longest minus
       shortest interval per breath), which also collects beat-to-beat jitter, slower
       rhythms and detection noise and reads 30-40 ms on series without any RSA; for a
       sinusoidal modulation the two agree. Confidence = min(1, breaths / 20) x the
       probability that a normal error of the fit's standard error stays within
       ``RSA_TOLERANCE_MS`` x the separation factors of :func:`_rsa_separation` (breathing
       inside the LF band, fewer than three beats per breath, irregular breath cycles);
       flag ``rsa_not_separable_from_other_rhythms`` when the confidence is under half its
       breath-count ceiling.
    3. ``amplitude_index``: each amplitude in a kept cycle gets the breathing phase
       phi = 2 pi (t - start) / (cycle length); the least-squares fit
       A = a0 + a1 cos(phi) + a2 sin(phi) gives the first-harmonic (breathing-frequency)
       spectral amplitude in the breathing-phase domain, and the index is
       2 sqrt(a1^2 + a2^2) / a0, the (max - min) / mean of the fitted modulation. Its
       standard error se = 2 s_res sqrt(2 / N) / a0 sets the confidence
       min(1, N / 60) / (1 + (se / 0.02)^2).
    4. ``timing_modulation_pct``: Lomb-Scargle periodogram (the power of
       ``scipy.signal.lombscargle``, by :mod:`features.spectral`; mean removed) of the
       valid intervals at their beat times, in consecutive segments of ``TIMING_SEGMENT_S``
       summed with weights by their interval counts (linear cost on long records),
       on a 0.001-Hz grid from 0.04 Hz to the beat-series Nyquist
       frequency 1 / (2 x mean interval), capped at 1 Hz; power within f_b +/- 0.05 Hz
       over the total, in %. None when
       f_b + 0.05 Hz exceeds the Nyquist frequency. Confidence = min(1, intervals / 120) x
       clip(1 - CV_breath / 0.4, 0, 1), since a drifting breathing rate leaves the band.
    5. ``baseline_modulation_ratio``: median per-cycle (max - min) of the breathing signal
       divided by the cardiac amplitude. Meaningful only when both are in one unit (the
       trace); confidence = min(1, cycles / 10).
    6. ``coherence``: valid intervals are interpolated linearly onto a 4-Hz grid (grid points
       more than 3 s from a valid interval are unusable) and the breathing signal is
       interpolated onto the same grid; on the longest stretch usable in both,
       the coherence of ``scipy.signal.coherence`` (Hann, 32-s segments, 50 % overlap;
       computed by :func:`features.spectral.welch_spectra`, same numbers) is read at the
       frequency of the breathing auto-spectrum peak within f_b +/- 0.05 Hz. Needs >= 3
       segments; confidence = min(1, segments / 10). With K segments an uncoupled pair still
       reads about 1 / K on average (estimator bias).

    References
    ----------
    .. [1] Grossman P, van Beek J, Wientjes C. "A comparison of three quantification methods
       for estimation of respiratory sinus arrhythmia." Psychophysiology 27(6):702-714,
       1990. doi:10.1111/j.1469-8986.1990.tb03198.x
    .. [2] Grossman P, Taylor EW. "Toward understanding respiratory sinus arrhythmia:
       relations to cardiac vagal tone, evolution and biobehavioral functions." Biological
       Psychology 74(2):263-285, 2007. doi:10.1016/j.biopsycho.2005.11.014
    .. [3] Lomb NR. "Least-squares frequency analysis of unequally spaced data." Astrophysics
       and Space Science 39:447-462, 1976. doi:10.1007/BF00648343
    .. [4] Carter GC. "Coherence and time delay estimation." Proceedings of the IEEE
       75(2):236-255, 1987. doi:10.1109/PROC.1987.13723
    .. [5] Saul JP, Berger RD, Albrecht P, Stein SP, Chen MH, Cohen RJ. "Transfer function
       analysis of the circulation: unique insights into cardiovascular regulation."
       American Journal of Physiology 261:H1231-H1245, 1991 (from memory).
    .. [6] Nelson W, Tong YL, Lee JK, Halberg F. "Methods for cosinor-rhythmometry."
       Chronobiologia 6(4):305-323, 1979 (from memory).
    """
    y, fs, iv_t, breaths, iv, amps, amp_t, card = _validate(
        breathing_signal, fs_hz, beat_times_s, breath_times_s, interval_ms, interval_times_s,
        beat_amplitudes, amplitude_times_s, cardiac_amplitude,
    )
    if explained_fraction is not None and not (
            isinstance(explained_fraction, (int, float)) and 0.0 <= explained_fraction <= 1.0):
        raise InvalidInputError(
            "explained_fraction", f"`explained_fraction` must be a number from 0 to 1; got "
            f"{explained_fraction!r}.")
    flags: list[str] = []
    if breaths.size < MIN_BREATHS + 1:
        return ModulationResult(confidence=0.0, flags=("too_few_breaths",))
    cycles = np.diff(breaths)
    f_b = 1.0 / median_1d(cycles)
    starts, ends = _kept_cycles(y, fs, breaths)
    if starts.size < cycles.size:
        flags.append("breath_cycles_excluded")
    if starts.size < MIN_BREATHS:
        return ModulationResult(
            confidence=0.0, flags=(*flags, "too_few_usable_breaths"),
            breathing_frequency_hz=f_b, breaths_used=int(starts.size),
        )
    ok_iv = np.isfinite(iv)
    if explained_fraction is not None and explained_fraction < MIN_EXPLAINED_FRACTION:
        rsa = _RsaEstimate(None, None, None, None, 0.0,
                           ("too_many_unexplained_intervals_for_rsa",))
    else:
        rsa = _rsa(iv_t[ok_iv], iv[ok_iv], starts, ends)
    flags.extend(rsa.flags)
    amp_index, c_amp = (None, 0.0)
    if amps is not None:
        ok = np.isfinite(amps)
        amp_index, c_amp = _amplitude_index(amp_t[ok], amps[ok], starts, ends)
    if amp_index is None:
        flags.append("no_amplitude_modulation_index")
    cv_breath = float(std(ends - starts) / np.mean(ends - starts))
    timing, c_timing, t_flag = _timing_share(iv_t[ok_iv], iv[ok_iv], f_b, cv_breath)
    flags.extend(t_flag)
    if card is None and amps is not None and np.isfinite(amps).sum() >= MIN_BEATS:
        card = median_1d(amps[~np.isnan(amps)])  # numpy.nanmedian's value
    baseline, c_base = None, 0.0
    if card is not None and card > 0:
        swings = _cycle_swings(y, fs, starts, ends)
        baseline = median_1d(swings) / card
        c_base = min(1.0, starts.size / 10.0)
    else:
        flags.append("no_cardiac_amplitude_for_baseline_index")
    coh, c_coh, k_seg, c_flag = _coherence(y, fs, iv_t[ok_iv], iv[ok_iv], f_b)
    flags.extend(c_flag)
    confs = [c for v, c in ((rsa.rsa_ms, rsa.confidence), (amp_index, c_amp), (timing, c_timing),
                            (baseline, c_base), (coh, c_coh)) if v is not None]
    return ModulationResult(
        confidence=float(np.mean(confs)) if confs else 0.0,
        flags=tuple(flags),
        breathing_frequency_hz=f_b,
        breaths_used=int(starts.size),
        rsa_ms=rsa.rsa_ms,
        rsa_confidence=rsa.confidence,
        rsa_se_ms=rsa.se_ms,
        rsa_half_difference_ms=rsa.half_difference_ms,
        rsa_half_wald=rsa.half_wald,
        amplitude_index=amp_index,
        amplitude_confidence=c_amp,
        timing_modulation_pct=timing,
        timing_confidence=c_timing,
        baseline_modulation_ratio=baseline,
        baseline_confidence=c_base,
        coherence=coh,
        coherence_confidence=c_coh,
        coherence_segments=k_seg,
    )


# --------------------------------------------------------------------------- validation


def _times(name: str, value: ArrayLike) -> NDArray[np.float64]:
    t = np.asarray(value, dtype=float).reshape(-1)
    if not np.all(np.isfinite(t)) or np.any(np.diff(t) <= 0):
        raise InvalidInputError(
            name, f"`{name}` must be finite and strictly increasing (s); got values that are not."
        )
    return t


def _validate(
    breathing_signal: ArrayLike,
    fs_hz: float,
    beat_times_s: ArrayLike,
    breath_times_s: ArrayLike,
    interval_ms: ArrayLike | None,
    interval_times_s: ArrayLike | None,
    beat_amplitudes: ArrayLike | None,
    amplitude_times_s: ArrayLike | None,
    cardiac_amplitude: float | None,
) -> tuple[
    NDArray[np.float64], float, NDArray[np.float64], NDArray[np.float64], NDArray[np.float64],
    NDArray[np.float64] | None, NDArray[np.float64], float | None,
]:
    fs = check_sampling_rate(fs_hz, low=MIN_SIGNAL_FS_HZ)
    y = np.asarray(breathing_signal, dtype=float)
    if y.ndim != 1 or y.size < 2:
        raise InvalidInputError(
            "breathing_signal", f"`breathing_signal` must be 1-D with at least 2 samples; got "
            f"shape {y.shape}."
        )
    beats = _times("beat_times_s", beat_times_s)
    breaths = _times("breath_times_s", breath_times_s)
    iv_t = beats
    if interval_ms is None:
        iv = np.concatenate(([np.nan], 1e3 * np.diff(beats)))
        if beats.size > 2:
            iv[iv > 1.8 * np.nanmedian(iv)] = np.nan
    else:
        iv = np.asarray(interval_ms, dtype=float).reshape(-1)
        if interval_times_s is not None:
            iv_t = _times("interval_times_s", interval_times_s)
        if iv.size != iv_t.size:
            name = "beat_times_s" if interval_times_s is None else "interval_times_s"
            raise InvalidInputError(
                "interval_ms", f"`interval_ms` must have the length of `{name}` "
                f"({iv_t.size}); got {iv.size}."
            )
        if np.any(iv[np.isfinite(iv)] <= 0):
            raise InvalidInputError("interval_ms", "`interval_ms` must be positive (ms).")
    amps = None
    amp_t = beats
    if beat_amplitudes is not None:
        amps = np.asarray(beat_amplitudes, dtype=float).reshape(-1)
        if amplitude_times_s is not None:
            amp_t = _times("amplitude_times_s", amplitude_times_s)
        if amps.size != amp_t.size:
            raise InvalidInputError(
                "beat_amplitudes", f"`beat_amplitudes` must have the length of its times "
                f"({amp_t.size}); got {amps.size}."
            )
    card = None
    if cardiac_amplitude is not None:
        card = float(cardiac_amplitude)
        if not (np.isfinite(card) and card > 0):
            raise InvalidInputError(
                "cardiac_amplitude",
                f"`cardiac_amplitude` must be positive; got {cardiac_amplitude}.",
            )
    return y, fs, iv_t, breaths, iv, amps, amp_t, card


# --------------------------------------------------------------------------- kernels


def _kept_cycles(
    y: NDArray[np.float64], fs: float, breaths: NDArray[np.float64]
) -> tuple[NDArray[np.float64], NDArray[np.float64]]:
    starts, ends = breaths[:-1], breaths[1:]
    keep = (ends - starts) <= 2.0 * median_1d(ends - starts)
    a = np.clip(np.floor(starts * fs).astype(np.int64), 0, y.size)
    b = np.clip(np.ceil(ends * fs).astype(np.int64) + 1, 0, y.size)
    keep &= count_in(~np.isfinite(y), a, b) == 0
    keep &= (a < y.size) & (b > a + 1)
    return starts[keep], ends[keep]


def _cycle_segments(
    y: NDArray[np.float64], fs: float, starts: NDArray[np.float64], ends: NDArray[np.float64]
) -> list[NDArray[np.float64]]:
    out = []
    for s, e in zip(starts, ends, strict=True):
        a, b = int(np.floor(s * fs)), min(y.size, int(np.ceil(e * fs)) + 1)
        out.append(y[a:b])
    return out


def _cycle_swings(
    y: NDArray[np.float64], fs: float, starts: NDArray[np.float64], ends: NDArray[np.float64]
) -> NDArray[np.float64]:
    """``nanmax - nanmin`` of each cycle's segment (:func:`_cycle_segments`), in one pass."""
    a = np.floor(starts * fs).astype(np.int64)
    b = np.minimum(y.size, np.ceil(ends * fs).astype(np.int64) + 1)
    if a.size == 0 or np.any(a < 0) or np.any(b <= a):
        return np.array([np.nanmax(seg) - np.nanmin(seg)
                         for seg in _cycle_segments(y, fs, starts, ends)])
    return _segment_ptp(y, a, b, np.fmax, np.fmin)


def _segment_ptp(x: NDArray[np.float64], a: NDArray[np.int64], b: NDArray[np.int64],
                 top: np.ufunc = np.maximum, bottom: np.ufunc = np.minimum
                 ) -> NDArray[np.float64]:
    """``top(x[a:b]) - bottom(x[a:b])`` per segment, ``0 <= a < b <= x.size`` (reduceat)."""
    ext = np.append(x, 0.0)  # lets an end index equal x.size
    idx = np.column_stack((a, b)).ravel()
    out: NDArray[np.float64] = top.reduceat(ext, idx)[::2] - bottom.reduceat(ext, idx)[::2]
    return out


@dataclass(frozen=True)
class _RsaEstimate:
    """RSA (ms), its standard error (ms), the size of the difference between the two
    halves' sinusoids (ms) and its Wald statistic, confidence and flags; the numbers None
    when not computed."""

    rsa_ms: float | None
    se_ms: float | None
    half_difference_ms: float | None
    half_wald: float | None
    confidence: float
    flags: tuple[str, ...]


def _rsa(
    t: NDArray[np.float64],
    iv: NDArray[np.float64],
    starts: NDArray[np.float64],
    ends: NDArray[np.float64],
) -> _RsaEstimate:
    """Respiratory-locked peak-to-trough RSA by a cosinor fit against the breathing phase.

    Per segment of ``TIMING_SEGMENT_S``: least squares of the intervals inside kept cycles on
    cos(phi), sin(phi) and a cubic B-spline trend with knots ``RSA_TREND_KNOT_CYCLES`` median
    cycles apart (the non-respiratory part: slower rhythms and drift). The segments' (a, b)
    are pooled by inverse variance; peak-to-trough = 2 sqrt(max(0, a^2 + b^2 - var a -
    var b)) (the noise floor of a fitted amplitude removed); its standard error sets the
    confidence with the separation factors of :func:`_rsa_separation`. The same fit with
    one sinusoid for the intervals before the middle beat and one after gives the two
    halves' sinusoids, whose difference tells a modulation that holds from one that does
    not.
    """
    phi, inside = _phase(t, starts, ends)
    t, iv, phi = t[inside], iv[inside], phi[inside]
    k_breath = np.unique(np.searchsorted(starts, t, side="right") - 1)
    if k_breath.size < MIN_BREATHS or iv.size < MIN_BEATS:
        return _RsaEstimate(None, None, None, None, 0.0, ("too_few_breaths_for_rsa",))
    cycle_s = median_1d(ends - starts)
    knot_s = RSA_TREND_KNOT_CYCLES * cycle_s
    late = np.arange(iv.size) >= iv.size // 2
    fits = [f for f in (_cosinor_segment(t[seg], iv[seg], phi[seg], knot_s, late[seg])
                        for seg in _segments(t)) if f is not None]
    if not fits:
        return _RsaEstimate(None, None, None, None, 0.0, ("rsa_fit_underdetermined",))
    ab, cov = _pool([(v[:2], c[:2, :2]) for v, c in fits])
    floor = float(cov[0, 0] + cov[1, 1])
    rsa = 2.0 * math.sqrt(max(0.0, float(ab @ ab) - floor))
    se = 2.0 * math.sqrt(0.5 * floor)
    halves = [_pool([(v[k:k + 2], c[k:k + 2, k:k + 2]) for v, c in fits
                     if np.isfinite(c[k, k])]) for k in (2, 4)]
    # The halves compared as fitted sinusoids (amplitude and phase), not as debiased
    # amplitudes: two halves both lost in noise would both read 0 and agree perfectly.
    half_diff = half_wald = None
    if all(np.isfinite(h[1]).all() for h in halves):
        delta = halves[0][0] - halves[1][0]
        half_diff = 2.0 * float(np.hypot(*delta))
        # Wald statistic of "both halves have the same sinusoid": chi-square with 2 degrees
        # of freedom when they do (the halves are disjoint intervals; the covariance their
        # shared trend adds between them is left out).
        half_wald = float(delta @ np.linalg.solve(halves[0][1] + halves[1][1], delta))
    beats_per_breath = iv.size / k_breath.size
    f_b = 1.0 / cycle_s
    cv_breath = float(std(ends - starts) / np.mean(ends - starts))
    within = math.erf(RSA_TOLERANCE_MS / (math.sqrt(2.0) * se)) if se > 0 else 1.0
    ceiling = min(1.0, k_breath.size / 20.0)
    conf = ceiling * within * _rsa_separation(f_b, beats_per_breath, cv_breath)
    flags = () if conf >= 0.5 * ceiling else ("rsa_not_separable_from_other_rhythms",)
    return _RsaEstimate(rsa, se, half_diff, half_wald, float(conf), flags)


def _pool(fits: list[tuple[NDArray[np.float64], NDArray[np.float64]]]
          ) -> tuple[NDArray[np.float64], NDArray[np.float64]]:
    """(a, b) and its 2 x 2 covariance from fits pooled by inverse variance; NaN without a
    fit."""
    if not fits:
        return np.full(2, np.nan), np.full((2, 2), np.nan)
    info = sum(np.linalg.inv(c) for _, c in fits)
    cov = np.linalg.inv(info)
    return cov @ sum(np.linalg.inv(c) @ v for v, c in fits), cov


def _cosinor_segment(
    t: NDArray[np.float64], iv: NDArray[np.float64], phi: NDArray[np.float64], knot_s: float,
    late: NDArray[np.bool_],
) -> tuple[NDArray[np.float64], NDArray[np.float64]] | None:
    """Cosinor fits of one segment: ``iv ~ a cos(phi) + b sin(phi) + trend(t)``, and the
    same with separate (a, b) before and after the recording's middle (``late``).

    Returns the six coefficients (a, b, a_early, b_early, a_late, b_late) and their 6 x 6
    covariance (block-diagonal between the two fits; a half with too few intervals has an
    infinite variance), or None when the whole fit is underdetermined. The normal equations
    are solved in closed form by partialling out the trend (Frisch-Waugh): one QR
    factorisation of ``[trend, halves' sinusoids, intervals]`` gives the triangular factor
    of those columns' residuals on the trend (:func:`_trend_residual_factor`), from which
    both fits' small systems follow (:func:`_factor_fit`); the whole fit's sinusoids are the
    sums of the halves' (``c = c e + c late``).
    """
    n_inner = max(0, int(np.floor((t[-1] - t[0]) / knot_s)) - 1)
    inner = np.linspace(t[0], t[-1], n_inner + 2)[1:-1]
    knots = np.concatenate(([t[0]] * 4, inner, [t[-1]] * 4))
    trend = BSpline.design_matrix(t, knots, 3).toarray()
    # A piece of trend inside a gap (a masked movement, breaths left out) has no data.
    trend = trend[:, np.count_nonzero(trend, axis=0) >= 2]
    c, s = np.cos(phi), np.sin(phi)
    e = ~late
    dof = iv.size - trend.shape[1] - 2
    if dof < MIN_BEATS // 2:
        return None
    with_halves = (min(int(e.sum()), int(late.sum())) >= MIN_BEATS // 2
                   and dof - 2 >= MIN_BEATS // 2)
    if not with_halves:
        whole, halves = _partial_fit(np.column_stack((c, s)), trend, iv), None
    else:
        split = np.column_stack((c * e, s * e, c * late, s * late))
        r = _trend_residual_factor(trend, np.column_stack((split, iv)))
        if r is None:
            return None
        # residuals of (c, s, iv) are those of (c e + c late, s e + s late, iv)
        whole_r = _r_factor(r @ _WHOLE_FROM_HALVES)
        whole = _factor_fit(whole_r, float(c @ c + s @ s), dof)
        halves = _factor_fit(r, float(np.sum(split**2)), dof - 2)
    if whole is None:
        return None
    coef = np.full(6, np.nan)
    cov = np.diag([0.0, 0.0] + [np.inf] * 4)
    coef[:2], cov[:2, :2] = whole
    if halves is not None:
        coef[2:], cov[2:, 2:] = halves
    return coef, cov


_WHOLE_FROM_HALVES = np.array([[1.0, 0.0, 0.0], [0.0, 1.0, 0.0], [1.0, 0.0, 0.0],
                               [0.0, 1.0, 0.0], [0.0, 0.0, 1.0]])
"""Columns (c, s, iv) as sums of the columns (c e, s e, c late, s late, iv)."""


def _partial_fit(
    x: NDArray[np.float64], trend: NDArray[np.float64], y: NDArray[np.float64],
) -> tuple[NDArray[np.float64], NDArray[np.float64]] | None:
    """Coefficients of ``x`` in the least squares of ``y`` on ``[x, trend]`` and their
    covariance, with the trend partialled out (Frisch-Waugh): the triangular factor of
    ``x`` and ``y`` less their projections on the trend (:func:`_trend_residual_factor`),
    then the small normal equations of ``x`` (:func:`_factor_fit`). None when the trend or
    the sinusoids left after it are rank-deficient, or fewer than ``MIN_BEATS // 2``
    degrees of freedom remain."""
    dof = y.size - x.shape[1] - trend.shape[1]
    if dof < MIN_BEATS // 2:
        return None
    r = _trend_residual_factor(trend, np.column_stack((x, y)))
    if r is None:
        return None
    return _factor_fit(r, float(np.sum(x**2)), dof)


_QR_TILE_ROWS = 64
"""Rows of the trend merged per step of :func:`_trend_residual_factor` (keeps each small QR
below the size at which the BLAS library starts threads)."""


def _trend_residual_factor(
    trend: NDArray[np.float64], cols: NDArray[np.float64]
) -> NDArray[np.float64] | None:
    """Upper-triangular ``R`` with ``R.T @ R`` the Gram matrix of ``cols`` less their
    projections on the trend, or None when the trend is rank-deficient.

    The Householder QR of ``[trend, cols]`` (:func:`numpy.linalg.qr`, ``mode="r"``), taken
    in tiles of ``_QR_TILE_ROWS`` rows: each tile is factored together with the rows of
    the factor so far that later rows still reach, and the rows of the trend's columns
    that no later row touches are final (the rows come in time order and a B-spline row
    spans four adjacent columns, so a tile reaches a few dozen columns). This is the
    factor a QR of the whole matrix gives, up to the signs of its rows and to rounding
    (a QR updated by appended rows; Golub and Van Loan, Matrix Computations, 4th ed.,
    Johns Hopkins University Press, 2013, chapters 5 and 6). The trend block's diagonal gives
    the rank; the trailing block factors the residuals, as the trend's Q would, keeping
    the trend's conditioning rather than squaring it as its Gram matrix would, and Q is
    never formed.
    """
    n, k = trend.shape
    d = cols.shape[1]
    nonzero = trend != 0
    any_nz = nonzero.any(axis=1)
    first = np.where(any_nz, np.argmax(nonzero, axis=1), k)
    last = np.where(any_nz, k - 1 - np.argmax(nonzero[:, ::-1], axis=1), -1)
    # the first trend column that rows from i on reach
    reach = np.minimum.accumulate(first[::-1])[::-1]
    diag = np.zeros(k)
    carry = np.zeros((0, d))  # rows of the factor not yet final, columns [lo, hi) + cols
    lo = hi = 0
    for a in range(0, n, _QR_TILE_ROWS):
        b = min(n, a + _QR_TILE_ROWS)
        new_hi = max(hi, int(last[a:b].max()) + 1)
        block = np.zeros((carry.shape[0] + b - a, new_hi - lo + d))
        block[: carry.shape[0], : hi - lo] = carry[:, : hi - lo]
        block[: carry.shape[0], new_hi - lo:] = carry[:, hi - lo:]
        block[carry.shape[0]:, : new_hi - lo] = trend[a:b, lo:new_hi]
        block[carry.shape[0]:, new_hi - lo:] = cols[a:b]
        r = _r_factor(block)
        if r.shape[0] < r.shape[1]:  # fewer rows than columns so far: the rest are zero
            r = np.vstack((r, np.zeros((r.shape[1] - r.shape[0], r.shape[1]))))
        done = (min(int(reach[b]), new_hi) if b < n else new_hi) - lo
        diag[lo:lo + done] = np.diag(r)[:done]
        carry = r[done:, done:]
        lo, hi = lo + done, new_hi
    d_abs = np.abs(diag)
    # the rank rule of numpy.linalg.lstsq (rcond = eps x the larger dimension), on R
    if d_abs.size and d_abs.min() <= d_abs.max() * np.finfo(float).eps * max(trend.shape):
        return None
    if lo < k:  # trend columns that no row reaches
        return None
    return carry  # d x d once every trend column is final


def _r_factor(m: NDArray[np.float64]) -> NDArray[np.float64]:
    """The R of the Householder QR of ``m`` (:func:`numpy.linalg.qr`, ``mode="r"``)."""
    return cast("NDArray[np.float64]", np.linalg.qr(m, mode="r"))


def _factor_fit(
    r: NDArray[np.float64], sum_sq_x: float, dof: int
) -> tuple[NDArray[np.float64], NDArray[np.float64]] | None:
    """Least squares of the last residual column on the others, from their triangular
    factor ``r`` (:func:`_trend_residual_factor`): coefficients and covariance
    ``s^2 (X'X)^-1``; None when the sinusoids keep no part the trend cannot carry
    (``sum_sq_x``: their sum of squares before the trend was removed)."""
    k = r.shape[1] - 1
    r_xx = r[:k, :k]
    s_xx = r_xx.T @ r_xx
    # the sinusoids must keep a part the trend cannot carry
    if np.linalg.eigvalsh(s_xx).min() <= 1e-12 * sum_sq_x:
        return None
    inv = np.linalg.inv(s_xx)
    coef = inv @ (r_xx.T @ r[:k, k])
    # the residual sum of squares is the square of the last diagonal entry of the factor
    s2 = float(r[k, k]) ** 2 / dof
    # a perfect fit keeps an invertible covariance
    return coef, s2 * inv + np.eye(k) * 1e-12


def _rsa_separation(f_b: float, beats_per_breath: float, cv_breath: float) -> float:
    """How far breathing stands apart from the rhythms the fit cannot tell it from (0..1).

    Breathing inside the low-frequency band (``LF_BAND_HZ``, Task Force 1996) shares its
    frequency with the baroreflex rhythm, which the trend cannot take out; with fewer than
    three beats per breath the intervals sample the breathing rhythm near their Nyquist
    frequency (two beats per breath), where phase and amplitude are poorly determined; and
    breath cycles that vary by more than ``RSA_STEADY_BREATH_CV`` (coefficient of variation)
    give a breathing phase that is itself uncertain (split or merged breaths), reaching 0 at
    ``RSA_STEADY_BREATH_CV`` + 0.25.
    """
    lo, hi = LF_BAND_HZ
    in_lf = clip((f_b - lo) / (hi - lo), 0.0, 1.0)
    sampled = clip(beats_per_breath - 2.0, 0.0, 1.0)
    steady = clip(1.0 - (cv_breath - RSA_STEADY_BREATH_CV) / 0.25, 0.0, 1.0)
    return in_lf * sampled * steady


def _phase(
    t: NDArray[np.float64], starts: NDArray[np.float64], ends: NDArray[np.float64]
) -> tuple[NDArray[np.float64], NDArray[np.bool_]]:
    k = np.searchsorted(starts, t, side="right") - 1
    inside = k >= 0
    kk = np.clip(k, 0, starts.size - 1)
    inside &= t < ends[kk]
    phi = 2.0 * np.pi * (t - starts[kk]) / (ends[kk] - starts[kk])
    return phi, inside


def _amplitude_index(
    t: NDArray[np.float64],
    a: NDArray[np.float64],
    starts: NDArray[np.float64],
    ends: NDArray[np.float64],
) -> tuple[float | None, float]:
    phi, inside = _phase(t, starts, ends)
    phi, a = phi[inside], a[inside]
    if a.size < MIN_BEATS:
        return None, 0.0
    design = np.column_stack((np.ones_like(phi), np.cos(phi), np.sin(phi)))
    coef, *_ = np.linalg.lstsq(design, a, rcond=None)
    a0, a1, a2 = (float(c) for c in coef)
    if a0 <= 0:
        return None, 0.0
    index = 2.0 * float(np.hypot(a1, a2)) / a0
    resid = a - design @ coef
    s_res = float(np.sqrt(np.sum(resid**2) / max(1, a.size - 3)))
    se = 2.0 * s_res * np.sqrt(2.0 / a.size) / a0
    conf = min(1.0, a.size / 60.0) / (1.0 + (se / 0.02) ** 2)
    return index, float(conf)


RSA_TREND_KNOT_CYCLES = 1.0
"""Knot spacing of the RSA fit's cubic B-spline trend, in median breath cycles (our choice):
it follows rhythms below about f_b / 3 and cannot follow the breathing rhythm itself."""
RSA_TOLERANCE_MS = 10.0
"""Tolerance on RSA (ms) that its confidence speaks of (issue 12: RSA within 10 ms)."""
RSA_STEADY_BREATH_CV = 0.15
"""Breath-cycle coefficient of variation up to which the breathing phase is fully trusted
(our choice: the simulator's steady breathing reads 0.09-0.13 from detected breaths)."""
LF_BAND_HZ = (0.04, 0.15)
"""Low-frequency band of heart-rate variability (Hz), Task Force 1996."""


TIMING_SEGMENT_S = SHORT_TERM_S
"""Long series are split into consecutive segments of this length (the Task Force
short-term recording) and their periodograms summed, which keeps the cost linear."""


def _segments(t: NDArray[np.float64]) -> list[slice]:
    span = float(t[-1] - t[0])
    k = max(1, int(span // TIMING_SEGMENT_S))
    edges = np.searchsorted(t, t[0] + span * np.arange(1, k) / k)
    bounds = np.concatenate(([0], edges, [t.size]))
    return [slice(int(a), int(b)) for a, b in zip(bounds[:-1], bounds[1:], strict=True)
            if b - a >= MIN_BEATS]


def _timing_share(
    t: NDArray[np.float64], iv: NDArray[np.float64], f_b: float, cv_breath: float
) -> tuple[float | None, float, list[str]]:
    if iv.size < MIN_BEATS:
        return None, 0.0, ["too_few_intervals_for_timing_index"]
    nyquist = min(1.0, 1e3 / (2.0 * float(np.mean(iv))))
    if f_b + BAND_HALF_WIDTH_HZ > nyquist:
        return None, 0.0, ["breathing_above_beat_series_nyquist"]
    f = np.arange(TOTAL_BAND_LOW_HZ, nyquist, 0.001)
    p = np.zeros(f.size)
    for seg in _segments(t):
        ts, ys = t[seg], iv[seg]
        p += lomb_scargle_power(ts, ys - ys.mean(), f) * ys.size
    total = float(p.sum())
    if total <= 0:
        return None, 0.0, ["flat_interval_series"]
    band = np.abs(f - f_b) <= BAND_HALF_WIDTH_HZ
    conf = min(1.0, iv.size / 120.0) * clip(1.0 - cv_breath / 0.4, 0.0, 1.0)
    return 100.0 * float(p[band].sum()) / total, conf, []


def _coherence(
    y: NDArray[np.float64], fs: float, t: NDArray[np.float64], iv: NDArray[np.float64],
    f_b: float,
) -> tuple[float | None, float, int, list[str]]:
    if iv.size < MIN_BEATS:
        return None, 0.0, 0, ["too_few_intervals_for_coherence"]
    grid = np.arange(np.ceil(t[0] * RESAMPLE_FS_HZ), np.floor(t[-1] * RESAMPLE_FS_HZ) + 1)
    grid = grid / RESAMPLE_FS_HZ
    tach = np.interp(grid, t, iv)
    k = np.clip(np.searchsorted(t, grid), 1, t.size - 1)
    near = np.minimum(np.abs(grid - t[k - 1]), np.abs(t[k] - grid))
    ok = near <= _MAX_GAP_S
    ty = np.arange(y.size) / fs
    finite = np.isfinite(y)
    if finite.sum() < 2:
        return None, 0.0, 0, ["no_usable_breathing_signal_for_coherence"]
    br = np.interp(grid, ty[finite], y[finite])
    a = np.clip(np.floor(grid * fs).astype(np.int64), 0, y.size - 1)
    ok &= count_in(~finite, a, np.minimum(a + 2, y.size)) == 0
    ok &= grid <= ty[-1]
    run_a, run_b = runs(ok)
    if run_a.size == 0:
        return None, 0.0, 0, ["no_common_stretch_for_coherence"]
    j = int(np.argmax(run_b - run_a))
    sl = slice(run_a[j], run_b[j])
    nper = int(COHERENCE_SEGMENT_S * RESAMPLE_FS_HZ)
    n = run_b[j] - run_a[j]
    k_seg = 0 if n < nper else 1 + (n - nper) // (nper // 2)
    if k_seg < 3:
        return None, 0.0, int(k_seg), ["stretch_too_short_for_coherence"]
    if np.ptp(tach[sl]) == 0 or np.ptp(br[sl]) == 0:
        return None, 0.0, int(k_seg), ["flat_series_for_coherence"]
    est = welch_spectra(tach[sl], RESAMPLE_FS_HZ, segment_n=nper, overlap_n=nper // 2,
                        y=br[sl])
    with np.errstate(invalid="ignore", divide="ignore"):  # 0/0 in empty bins -> NaN, checked
        cxy = est.coherence()
    f, pyy = est.frequencies_hz, est.psd_y
    assert pyy is not None
    band = np.flatnonzero(np.abs(f - f_b) <= BAND_HALF_WIDTH_HZ)
    if band.size == 0:
        band = np.array([int(np.argmin(np.abs(f - f_b)))])
    i = int(band[np.argmax(pyy[band])])
    value = float(cxy[i]) if np.isfinite(cxy[i]) else None
    if value is None:
        return None, 0.0, int(k_seg), ["coherence_undefined"]
    return value, min(1.0, k_seg / 10.0), int(k_seg), []


# --------------------------------------------------------------------------- catalogue


def _entry(name: str, attr: str, conf: str, unit: str | None, text: str,
           rng: tuple[float | None, float | None], ref: str, key: str) -> FeatureDefinition:
    return FeatureDefinition(name, "modulation", unit, text, rng, ref, f"modulation.{attr}",
                             f"modulation.{conf}", (), ("modulation.flags",), (key,))


CATALOGUE: tuple[FeatureDefinition, ...] = (
    _entry("rsa_ms", "rsa_ms", "rsa_confidence", "ms",
           "Respiratory sinus arrhythmia, peak-to-trough: twice the amplitude of the "
           "least-squares sinusoid of the breathing phase in the NN intervals, fitted with a "
           f"cubic B-spline trend (knots {RSA_TREND_KNOT_CYCLES:g} breath cycle apart) that "
           "takes out slower rhythms; amplitude debiased for noise.", NONNEGATIVE,
           REF_COSINOR + "; peak-to-trough as in " + REF_GROSSMAN, "rsa"),
    _entry("amplitude_index", "amplitude_index", "amplitude_confidence", None,
           "Respiratory modulation of beat amplitude: (max - min) / mean of the first-harmonic "
           "fit of the per-beat J-K amplitudes against breathing phase.", NONNEGATIVE,
           REF_OURS, "amplitude"),
    _entry("timing_modulation_pct", "timing_modulation_pct", "timing_confidence", "%",
           f"Share of the NN-series Lomb-Scargle power within {BAND_HALF_WIDTH_HZ:g} Hz of the "
           f"breathing frequency (of the power from {TOTAL_BAND_LOW_HZ:g} Hz to the "
           "beat-series Nyquist frequency).", PERCENT, REF_LOMB, "timing"),
    _entry("baseline_modulation_ratio", "baseline_modulation_ratio", "baseline_confidence",
           None,
           "Median per-breath peak-to-trough of the breathing signal over the J-K amplitude; "
           "None when the breathing signal came from the centre of pressure.", NONNEGATIVE,
           REF_OURS, "baseline"),
    _entry("cardiorespiratory_coherence", "coherence", "coherence_confidence", None,
           f"Magnitude-squared coherence of the {RESAMPLE_FS_HZ:g}-Hz NN series and the "
           "breathing signal at the breathing frequency (Welch, "
           f"{COHERENCE_SEGMENT_S:g}-s Hann segments).", UNIT_INTERVAL, REF_CARTER,
           "coherence"),
)
"""Catalogue entries of the respiratory-modulation family (see :mod:`features.catalogue`)."""

TOLERANCES: dict[str, tuple[float, str, str]] = {
    "rsa_ms": (10.0, "abs", "issue 12's bound for RSA"),
    "amplitude_index": (0.05, "abs", "5 % of stroke volume, the size of a small modulation"),
    "timing_modulation_pct": (5.0, "abs", "5 percentage points"),
    "baseline_modulation_ratio": (25.0, "rel", "as the spectral powers"),
    "cardiorespiratory_coherence": (0.1, "abs", "a tenth of its range"),
}
"""Tolerance of each modulation feature: (value, ``"abs"`` or ``"rel"``, why)."""
CATALOGUE = with_tolerance(CATALOGUE, TOLERANCES)
