"""Heart-rate variability of a normal-to-normal (NN) interval series.

Measures of the Task Force of the ESC and NASPE (1996) in the time and
frequency domains, and the Poincare, sample-entropy and DFA measures in the
nonlinear family. Input is an interval series as described in
:mod:`features.intervals`: end-beat times in seconds and intervals in
milliseconds, possibly with gaps. Successive differences, Poincare pairs,
entropy templates and DFA boxes only ever use mutually adjacent intervals.

Public functions
----------------
time_domain
    Mean NN, SDNN, RMSSD, SDSD, pNN50, pNN20, CVNN, mean and SD of heart rate.
frequency_domain
    Lomb-Scargle PSD; VLF, LF, HF and total power, LF/HF, normalised units,
    peak frequencies.
nonlinear
    Poincare SD1/SD2, sample entropy, DFA alpha1 and alpha2.
heart_rate_variability
    All three families on the normal intervals of a labelled series.

Every value is a finite float or None; None always comes with a flag naming
the reason. Every measure costs O(n) or O(n log n) in the series length
(sample entropy: a k-d tree pair count, see :func:`nonlinear`).
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
from numpy.typing import ArrayLike, NDArray
from scipy.spatial import cKDTree

from features.errors import InvalidInputError
from features.intervals import (
    LABELS,
    IntervalLabels,
    adjacent_to_previous,
    run_ids_from_adjacency,
    validate_interval_series,
)
from features.spectral import lomb_scargle_power

__all__ = [
    "FrequencyDomainResult",
    "NonlinearResult",
    "TimeDomainResult",
    "VariabilityResult",
    "frequency_domain",
    "heart_rate_variability",
    "nonlinear",
    "time_domain",
]

# Task Force (1996) short-term standard: 5-min recordings.
_SHORT_TERM_S = 300.0
# Task Force (1996) band edges, Hz.
_VLF_BAND_HZ = (0.0033, 0.04)
_LF_BAND_HZ = (0.04, 0.15)
_HF_BAND_HZ = (0.15, 0.4)
# Task Force (1996), "Frequency domain methods": about 1 min for HF, 2 min for
# LF; VLF from recordings of 5 min or less is "a dubious measure".
_MIN_DURATION_S = {"vlf": 300.0, "lf": 120.0, "hf": 60.0}
# Frequency grid: points per 1/T, T the segment length. VanderPlas (2018)
# suggests 5-10 per peak width to locate peaks; band integrals of the
# smooth periodogram need fewer: with 4, a sinusoid anywhere in a band
# integrated to within 2 % of A^2/2 at every frequency we tried, at half
# the cost of 8.
_OVERSAMPLING = 4
# A segment with less data than this fraction of its span is skipped.
_MIN_SEGMENT_COVERAGE = 0.5
# Sample entropy: m = 2, r = 0.2 SD (Richman & Moorman 2000); N > 200
# (Yentes et al. 2013).
_SAMPEN_M = 2
_SAMPEN_R_SD = 0.2
_SAMPEN_MIN_INTERVALS = 200
# DFA scale ranges of Peng et al. (1995), beats.
_DFA_ALPHA1_SCALES = tuple(range(4, 17))
_DFA_ALPHA2_SCALES = tuple(range(16, 65))
# Largest box at most a tenth of the data (Hardstone et al. 2012).
_DFA_MIN_BOXES = 10


# --------------------------------------------------------------------------
# results


@dataclass(frozen=True)
class TimeDomainResult:
    """Task Force (1996) time-domain measures of an NN series.

    Attributes
    ----------
    mean_nn_ms
        Mean NN interval.
    sdnn_ms
        Sample standard deviation of NN intervals (ddof=1).
    rmssd_ms
        Root mean square of successive differences of adjacent NN intervals.
    sdsd_ms
        Sample standard deviation (ddof=1) of those successive differences.
    pnn50_pct, pnn20_pct
        Percentage of successive differences larger than 50 ms (20 ms), of
        all successive differences.
    cvnn_pct
        ``100 * sdnn / mean_nn``.
    mean_hr_bpm, sd_hr_bpm
        Mean and sample SD (ddof=1) of instantaneous heart rate ``60000 / NN``.
    n_intervals
        NN intervals used.
    n_successive_differences
        Adjacent pairs used for RMSSD, SDSD and pNNx.
    duration_s
        Time covered by the NN intervals (their sum).
    confidence
        ``min(1, duration_s / 300) * (n_successive_differences / (n - 1))``.
    flags
        Reasons for None values and anything adapted.
    """

    mean_nn_ms: float | None
    sdnn_ms: float | None
    rmssd_ms: float | None
    sdsd_ms: float | None
    pnn50_pct: float | None
    pnn20_pct: float | None
    cvnn_pct: float | None
    mean_hr_bpm: float | None
    sd_hr_bpm: float | None
    n_intervals: int
    n_successive_differences: int
    duration_s: float
    confidence: float
    flags: tuple[str, ...]


@dataclass(frozen=True)
class FrequencyDomainResult:
    """Task Force (1996) frequency-domain measures from a Lomb-Scargle PSD.

    Attributes
    ----------
    vlf_power_ms2, lf_power_ms2, hf_power_ms2
        Integral of the PSD over each band.
    total_power_ms2
        Integral from the low VLF edge to the high HF edge.
    lf_hf_ratio
        ``lf_power / hf_power``.
    lf_nu, hf_nu
        Normalised units: ``100 * LF / (total - VLF)`` and likewise for HF,
        with ``total - VLF`` the integral from the VLF high edge to the HF
        high edge (so it needs no VLF-length recording).
    lf_peak_hz, hf_peak_hz
        Frequency of the PSD maximum inside LF and HF.
    vlf_band_hz, lf_band_hz, hf_band_hz
        Bands used, Hz.
    frequencies_hz, psd_ms2_per_hz
        The (segment-averaged) one-sided PSD on its frequency grid; empty
        when no spectrum could be formed.
    n_intervals
        NN intervals used.
    n_segments
        Segments averaged (see Notes of :func:`frequency_domain`).
    segment_s
        Length of each segment, seconds.
    duration_s
        Time covered by the NN intervals of the segments used.
    confidence
        ``min(1, duration_s / 300) * coverage``, ``coverage`` being
        ``duration_s`` over the total span of the segments used.
    flags
        Reasons for None values, e.g. ``"lf_needs_120_s"``.
    """

    vlf_power_ms2: float | None
    lf_power_ms2: float | None
    hf_power_ms2: float | None
    total_power_ms2: float | None
    lf_hf_ratio: float | None
    lf_nu: float | None
    hf_nu: float | None
    lf_peak_hz: float | None
    hf_peak_hz: float | None
    vlf_band_hz: tuple[float, float]
    lf_band_hz: tuple[float, float]
    hf_band_hz: tuple[float, float]
    frequencies_hz: tuple[float, ...]
    psd_ms2_per_hz: tuple[float, ...]
    n_intervals: int
    n_segments: int
    segment_s: float
    duration_s: float
    confidence: float
    flags: tuple[str, ...]


@dataclass(frozen=True)
class NonlinearResult:
    """Poincare, sample-entropy and DFA measures of an NN series.

    Attributes
    ----------
    sd1_ms, sd2_ms
        Poincare plot SDs across and along the line of identity.
    sd1_sd2_ratio
        ``sd1 / sd2``.
    sample_entropy
        SampEn(m=2, r=0.2 SD), natural log, dimensionless.
    dfa_alpha1, dfa_alpha2
        DFA scaling exponents over 4-16 and 16-64 beats.
    n_intervals
        NN intervals given.
    n_pairs
        Adjacent pairs used for SD1/SD2.
    confidence
        ``min(1, n_pairs / 200) * (n_pairs / (n_intervals - 1))``.
    flags
        Reasons for None values and anything adapted.
    """

    sd1_ms: float | None
    sd2_ms: float | None
    sd1_sd2_ratio: float | None
    sample_entropy: float | None
    dfa_alpha1: float | None
    dfa_alpha2: float | None
    n_intervals: int
    n_pairs: int
    confidence: float
    flags: tuple[str, ...]


@dataclass(frozen=True)
class VariabilityResult:
    """All HRV families computed on the normal intervals of a series.

    Attributes
    ----------
    time_domain, frequency_domain, nonlinear
        The family results.
    n_intervals_total
        Intervals given, of any label.
    n_nn_used
        Normal intervals used.
    fraction_rejected
        ``1 - n_nn_used / n_intervals_total``; None with no intervals.
    duration_s
        Time covered by the NN intervals.
    confidence
        ``fraction_normal * min(1, n_nn_used / 200) * min(1, duration_s / 300)``.
    flags
        Flags of this wrapper (``"no_intervals"``, ``"no_normal_intervals"``).
    """

    time_domain: TimeDomainResult
    frequency_domain: FrequencyDomainResult
    nonlinear: NonlinearResult
    n_intervals_total: int
    n_nn_used: int
    fraction_rejected: float | None
    duration_s: float
    confidence: float
    flags: tuple[str, ...]


# --------------------------------------------------------------------------
# helpers


def _fin(value: float | np.floating) -> float | None:
    """A Python float when finite, else None (callers flag the reason)."""
    v = float(value)
    return v if math.isfinite(v) else None


def _adjacent_pairs(
    times: NDArray[np.float64], nn: NDArray[np.float64]
) -> tuple[NDArray[np.float64], NDArray[np.float64]]:
    """(earlier, later) values of every adjacent pair of intervals."""
    adjacent = adjacent_to_previous(times, nn)
    later = np.flatnonzero(adjacent)
    return nn[later - 1], nn[later]


# --------------------------------------------------------------------------
# time domain


def time_domain(times_s: ArrayLike, nn_ms: ArrayLike) -> TimeDomainResult:
    """Task Force (1996) time-domain measures.

    Parameters
    ----------
    times_s
        End-beat time of each NN interval, seconds, strictly increasing.
    nn_ms
        NN intervals, milliseconds, positive.

    Returns
    -------
    TimeDomainResult
        None for a measure that needs more data: SDNN, CVNN, SD of HR need
        two intervals (flag ``"sdnn_needs_2_intervals"``); RMSSD and pNNx one
        adjacent pair (``"rmssd_needs_1_adjacent_pair"``); SDSD two pairs
        (``"sdsd_needs_2_adjacent_pairs"``).

    Raises
    ------
    InvalidInputError
        If the series breaks a rule of
        :func:`features.intervals.validate_interval_series`.

    Notes
    -----
    1. Mean and sample SD (ddof=1) of the NN intervals; CVNN is their ratio
       in percent.
    2. Successive differences only between adjacent intervals (see
       :mod:`features.intervals`); RMSSD is their root mean square, SDSD
       their sample SD (ddof=1).
    3. NN50 (NN20) counts differences with absolute value strictly greater
       than 50 ms (20 ms). Departure: the Task Force divides by "the total
       number of all NN intervals"; we divide by the number of successive
       differences, since with gaps the two counts are unrelated (Mietus et
       al. 2002 define pNNx over differences too). For a gap-free series of
       N intervals our value is the Task Force value times ``N / (N - 1)``.
    4. Heart rate is the instantaneous rate ``60000 / NN`` per interval;
       mean and sample SD (ddof=1).
    5. The flag ``"shorter_than_300_s"`` marks recordings shorter than the
       Task Force short-term standard of 5 min.

    References
    ----------
    .. [1] Task Force of the European Society of Cardiology and the North
       American Society of Pacing and Electrophysiology, "Heart rate
       variability: standards of measurement, physiological interpretation
       and clinical use", Circulation 93(5):1043-1065, 1996.
       doi:10.1161/01.CIR.93.5.1043
    .. [2] J. E. Mietus, C.-K. Peng, I. Henry, R. L. Goldsmith,
       A. L. Goldberger, "The pNNx files: re-examining a widely used heart
       rate variability measure", Heart 88(4):378-380, 2002.
       doi:10.1136/heart.88.4.378
    """
    times, nn = validate_interval_series(times_s, nn_ms)
    return _time_domain(times, nn)


def _time_domain(times: NDArray[np.float64], nn: NDArray[np.float64]) -> TimeDomainResult:
    n = nn.size
    flags: list[str] = []
    duration = float(nn.sum()) / 1000.0
    if duration < _SHORT_TERM_S:
        flags.append("shorter_than_300_s")
    earlier, later = _adjacent_pairs(times, nn)
    diffs = later - earlier
    n_diff = diffs.size

    mean_nn = _fin(nn.mean()) if n else None
    hr = 60000.0 / nn
    mean_hr = _fin(hr.mean()) if n else None
    if n == 0:
        flags.append("no_intervals")
    sdnn = cvnn = sd_hr = None
    if n >= 2:
        sdnn = _fin(nn.std(ddof=1))
        cvnn = None if (sdnn is None or mean_nn is None) else 100.0 * sdnn / mean_nn
        sd_hr = _fin(hr.std(ddof=1))
    else:
        flags.append("sdnn_needs_2_intervals")
    rmssd = pnn50 = pnn20 = sdsd = None
    if n_diff >= 1:
        rmssd = _fin(np.sqrt(np.mean(diffs**2)))
        absd = np.abs(diffs)
        pnn50 = 100.0 * float(np.count_nonzero(absd > 50.0)) / n_diff
        pnn20 = 100.0 * float(np.count_nonzero(absd > 20.0)) / n_diff
    else:
        flags.append("rmssd_needs_1_adjacent_pair")
    if n_diff >= 2:
        sdsd = _fin(diffs.std(ddof=1))
    else:
        flags.append("sdsd_needs_2_adjacent_pairs")
    adjacency = n_diff / (n - 1) if n > 1 else 0.0
    confidence = min(1.0, duration / _SHORT_TERM_S) * adjacency
    return TimeDomainResult(
        mean_nn_ms=mean_nn,
        sdnn_ms=sdnn,
        rmssd_ms=rmssd,
        sdsd_ms=sdsd,
        pnn50_pct=pnn50,
        pnn20_pct=pnn20,
        cvnn_pct=cvnn,
        mean_hr_bpm=mean_hr,
        sd_hr_bpm=sd_hr,
        n_intervals=n,
        n_successive_differences=n_diff,
        duration_s=duration,
        confidence=float(confidence),
        flags=tuple(flags),
    )


# --------------------------------------------------------------------------
# frequency domain


def _check_band(band: Sequence[float], field: str) -> tuple[float, float]:
    try:
        low, high = (float(v) for v in band)
    except (TypeError, ValueError) as exc:
        raise InvalidInputError(
            field, f"`{field}` must be a pair (low, high) in Hz; got {band!r}."
        ) from exc
    if not (math.isfinite(low) and math.isfinite(high) and 0 < low < high):
        raise InvalidInputError(field, f"`{field}` must satisfy 0 < low < high (Hz); got {band!r}.")
    return low, high


def lomb_psd_ms2_per_hz(
    times_s: NDArray[np.float64],
    values_ms: NDArray[np.float64],
    frequencies_hz: NDArray[np.float64],
    mean_step_s: float,
) -> NDArray[np.float64]:
    """One-sided Lomb-Scargle PSD scaled so its integral is the variance.

    ``PSD(f) = 2 * P(f) * mean_step_s`` where ``P`` is
    :func:`scipy.signal.lombscargle` (default "power" normalisation, computed
    by :func:`features.spectral.lomb_scargle_power`) of the mean-removed
    values and ``mean_step_s`` the mean sampling step (the mean NN interval
    in seconds). For even sampling ``P`` equals the classical
    periodogram ``|sum y exp(-i w t)|**2 / N`` at the Fourier frequencies, so
    the integral of the PSD from 0 to the Nyquist frequency ``1 / (2 dt)``
    is the variance (Parseval); a sinusoid of amplitude A integrates to
    ``A**2 / 2`` over its peak.
    """
    centred = values_ms - values_ms.mean()
    power = lomb_scargle_power(times_s, centred, frequencies_hz)
    return np.asarray(2.0 * power * mean_step_s, dtype=float)


def _band_integral(
    freqs: NDArray[np.float64], psd: NDArray[np.float64], band: tuple[float, float]
) -> float:
    inside = (freqs >= band[0] - 1e-12) & (freqs <= band[1] + 1e-12)
    f, p = freqs[inside], psd[inside]
    if f.size < 2:
        return 0.0
    return float(np.sum(0.5 * (p[1:] + p[:-1]) * np.diff(f)))


def _min_duration_s(name: str, band: tuple[float, float], default: tuple[float, float]) -> float:
    """Task Force minimum, lengthened in proportion when a band starts lower."""
    return _MIN_DURATION_S[name] * max(1.0, default[0] / band[0])


def frequency_domain(
    times_s: ArrayLike,
    nn_ms: ArrayLike,
    *,
    vlf_band_hz: tuple[float, float] = _VLF_BAND_HZ,
    lf_band_hz: tuple[float, float] = _LF_BAND_HZ,
    hf_band_hz: tuple[float, float] = _HF_BAND_HZ,
    segment_s: float = _SHORT_TERM_S,
) -> FrequencyDomainResult:
    """Task Force (1996) spectral measures from a Lomb-Scargle periodogram.

    Parameters
    ----------
    times_s
        End-beat time of each NN interval, seconds, strictly increasing.
    nn_ms
        NN intervals, milliseconds, positive.
    vlf_band_hz, lf_band_hz, hf_band_hz
        ``(low, high)`` band edges in Hz, ordered and not overlapping
        (``vlf_high <= lf_low``, ``lf_high <= hf_low``). Defaults are the Task
        Force bands 0.0033-0.04, 0.04-0.15 and 0.15-0.4 Hz. A caller may pass
        the breathing band as ``hf_band_hz`` (and narrow ``lf_band_hz`` to
        keep them apart).
    segment_s
        Length of the segments averaged for long recordings, seconds, >= 60.
        Default 300, the Task Force short-term standard.

    Returns
    -------
    FrequencyDomainResult
        A band measure whose minimum length is not met is None with a flag
        such as ``"lf_needs_120_s"``.

    Raises
    ------
    InvalidInputError
        If the series breaks a rule of
        :func:`features.intervals.validate_interval_series`, a band is not
        ``0 < low < high``, bands overlap or are out of order, or
        ``segment_s < 60``.

    Notes
    -----
    1. The span from the first interval's start beat to the last end beat,
       ``T``, is cut into ``k = max(1, floor(T / segment_s))`` equal segments
       (each between ``segment_s`` and ``2 * segment_s`` long when
       ``k > 1``). Segments whose NN intervals cover less than half their
       span are skipped (flag ``"sparse_segments_skipped"``).
    2. In each segment the NN values at their end-beat times are mean-removed
       and passed to the Lomb-Scargle periodogram (the power of
       :func:`scipy.signal.lombscargle`, computed by the factorised kernel of
       :mod:`features.spectral`), on a grid from the VLF
       low edge to the HF high edge with step ``1 / (4 L)`` (``L`` the
       segment length) plus the band edges.
    3. Scaling: ``PSD = 2 * P * mean(NN) / 1000`` (ms^2/Hz), so that the
       integral of the PSD over frequency equals the variance (Parseval; see
       :func:`lomb_psd_ms2_per_hz`). Segment PSDs are averaged with weights
       equal to the time their NN intervals cover (Welch's averaging applied
       to Lomb-Scargle periodograms).
    4. Band powers are trapezoid integrals of the PSD over each band (ms^2);
       total power spans the VLF low edge to the HF high edge.
    5. Minimum durations (time covered by NN intervals, and segment length),
       from the Task Force: HF about 1 min, LF about 2 min; VLF from 5 min or
       less "should be avoided", so VLF and total power need 300 s. For a
       band starting below its default low edge, the minimum grows in
       proportion (the Task Force asks for about ten cycles of the band's
       lowest frequency).
    6. Peaks are the grid frequencies of the PSD maximum inside LF and HF;
       ``"lf_peak_at_band_edge"`` (or HF) flags a maximum on an edge, i.e. no
       interior peak.

    Lomb-Scargle works on the uneven beat times directly, avoiding the
    interpolation and resampling that bias HRV spectra (Clifford &
    Tarassenko 2005). Gaps are allowed but they leak power
    across frequencies; ``confidence`` falls with the fraction of the span
    not covered.

    References
    ----------
    .. [1] Task Force of the ESC and NASPE, "Heart rate variability:
       standards of measurement, physiological interpretation and clinical
       use", Circulation 93(5):1043-1065, 1996. doi:10.1161/01.CIR.93.5.1043
    .. [2] N. R. Lomb, "Least-squares frequency analysis of unequally spaced
       data", Astrophysics and Space Science 39:447-462, 1976.
       doi:10.1007/BF00648343
    .. [3] J. D. Scargle, "Studies in astronomical time series analysis. II.
       Statistical aspects of spectral analysis of unevenly spaced data",
       The Astrophysical Journal 263:835-853, 1982. doi:10.1086/160554
    .. [4] G. D. Clifford, L. Tarassenko, "Quantifying errors in spectral
       estimates of HRV due to beat replacement and resampling", IEEE
       Transactions on Biomedical Engineering 52(4):630-638, 2005.
    .. [5] J. T. VanderPlas, "Understanding the Lomb-Scargle periodogram",
       The Astrophysical Journal Supplement Series 236:16, 2018.
       doi:10.3847/1538-4365/aab766
    """
    times, nn = validate_interval_series(times_s, nn_ms)
    vlf = _check_band(vlf_band_hz, "vlf_band_hz")
    lf = _check_band(lf_band_hz, "lf_band_hz")
    hf = _check_band(hf_band_hz, "hf_band_hz")
    if vlf[1] > lf[0]:
        raise InvalidInputError(
            "lf_band_hz",
            f"`lf_band_hz` must start at or above the VLF high edge {vlf[1]} Hz; got {lf!r}.",
        )
    if lf[1] > hf[0]:
        raise InvalidInputError(
            "hf_band_hz",
            f"`hf_band_hz` must start at or above the LF high edge {lf[1]} Hz; got {hf!r}. "
            "Pass a narrower `lf_band_hz` to move the HF band down.",
        )
    if (
        isinstance(segment_s, bool)
        or not isinstance(segment_s, int | float)
        or not (math.isfinite(segment_s) and segment_s >= 60)
    ):
        raise InvalidInputError(
            "segment_s", f"`segment_s` must be a number of seconds >= 60; got {segment_s!r}."
        )
    return _frequency_domain(times, nn, vlf, lf, hf, float(segment_s))


def _segment_spectra(
    times: NDArray[np.float64],
    nn: NDArray[np.float64],
    f_low: float,
    f_high: float,
    edges_hz: Sequence[float],
    segment_s: float,
) -> tuple[NDArray[np.float64], NDArray[np.float64], int, float, float, float, bool]:
    """Average Lomb-Scargle PSD over equal segments (Notes 1-3)."""
    start = float(times[0] - nn[0] / 1000.0)
    span = float(times[-1]) - start
    k = max(1, int(span // segment_s))
    length = span / k
    seg = np.minimum(((times - start) / length).astype(np.int64), k - 1)
    step = 1.0 / (_OVERSAMPLING * length)
    grid = np.arange(f_low, f_high + 0.5 * step, step)
    grid = np.unique(np.concatenate([grid[grid <= f_high], np.asarray(edges_hz, dtype=float)]))
    total = np.zeros(grid.size)
    weight_sum = 0.0
    used = 0
    skipped = False
    bounds = np.searchsorted(seg, np.arange(k + 1))
    for s in range(k):
        lo, hi = int(bounds[s]), int(bounds[s + 1])
        covered = float(nn[lo:hi].sum()) / 1000.0
        if hi - lo < 3 or covered < _MIN_SEGMENT_COVERAGE * length:
            skipped = True
            continue
        if np.ptp(nn[lo:hi]) == 0.0:
            psd = np.zeros(grid.size)
        else:
            psd = lomb_psd_ms2_per_hz(times[lo:hi], nn[lo:hi], grid, covered / (hi - lo))
        total += covered * psd
        weight_sum += covered
        used += 1
    if used == 0:
        return grid, np.zeros(0), 0, length, 0.0, 0.0, skipped
    return grid, total / weight_sum, used, length, weight_sum, used * length, skipped


def _empty_frequency(
    n: int,
    bands: tuple[tuple[float, float], tuple[float, float], tuple[float, float]],
    segment_s: float,
    flags: list[str],
) -> FrequencyDomainResult:
    vlf, lf, hf = bands
    return FrequencyDomainResult(
        None, None, None, None, None, None, None, None, None,
        vlf, lf, hf, (), (), n, 0, segment_s, 0.0, 0.0, tuple(flags),
    )  # fmt: skip


def _frequency_domain(
    times: NDArray[np.float64],
    nn: NDArray[np.float64],
    vlf: tuple[float, float],
    lf: tuple[float, float],
    hf: tuple[float, float],
    segment_s: float,
) -> FrequencyDomainResult:
    n = nn.size
    flags: list[str] = []
    bands = (vlf, lf, hf)
    if n < 3:
        flags.append("too_few_intervals")
        return _empty_frequency(n, bands, segment_s, flags)
    edges = (*vlf, *lf, *hf)
    freqs, psd, n_seg, length, covered, span, skipped = _segment_spectra(
        times, nn, vlf[0], hf[1], edges, segment_s
    )
    if skipped:
        flags.append("sparse_segments_skipped")
    if n_seg == 0:
        flags.append("no_segment_with_enough_data")
        return _empty_frequency(n, bands, segment_s, flags)
    available = min(length, covered)

    def band_power(
        name: str, band: tuple[float, float], default: tuple[float, float]
    ) -> float | None:
        need = _min_duration_s(name, band, default)
        if available + 1e-9 < need:
            flags.append(f"{name}_needs_{math.ceil(need - 1e-6)}_s")
            return None
        return _band_integral(freqs, psd, band)

    vlf_p = band_power("vlf", vlf, _VLF_BAND_HZ)
    lf_p = band_power("lf", lf, _LF_BAND_HZ)
    hf_p = band_power("hf", hf, _HF_BAND_HZ)
    total = None
    if vlf_p is None:
        flags.append("total_power_needs_vlf")
    else:
        total = _band_integral(freqs, psd, (vlf[0], hf[1]))
    lf_hf = lf_nu = hf_nu = None
    if lf_p is not None and hf_p is not None:
        if hf_p > 0:
            lf_hf = lf_p / hf_p
        else:
            flags.append("lf_hf_ratio_undefined_zero_hf")
        above_vlf = _band_integral(freqs, psd, (vlf[1], hf[1]))
        if above_vlf > 0:
            lf_nu = 100.0 * lf_p / above_vlf
            hf_nu = 100.0 * hf_p / above_vlf
        else:
            flags.append("normalised_units_undefined_zero_power")

    def peak(name: str, band: tuple[float, float], power: float | None) -> float | None:
        if power is None:
            return None
        inside = np.flatnonzero((freqs >= band[0] - 1e-12) & (freqs <= band[1] + 1e-12))
        if power <= 0 or inside.size == 0:
            flags.append(f"{name}_peak_undefined_zero_power")
            return None
        best = inside[int(np.argmax(psd[inside]))]
        if best in (inside[0], inside[-1]):
            flags.append(f"{name}_peak_at_band_edge")
        return float(freqs[best])

    lf_peak = peak("lf", lf, lf_p)
    hf_peak = peak("hf", hf, hf_p)
    coverage = min(1.0, covered / span) if span > 0 else 0.0
    return FrequencyDomainResult(
        vlf_power_ms2=vlf_p,
        lf_power_ms2=lf_p,
        hf_power_ms2=hf_p,
        total_power_ms2=total,
        lf_hf_ratio=lf_hf,
        lf_nu=lf_nu,
        hf_nu=hf_nu,
        lf_peak_hz=lf_peak,
        hf_peak_hz=hf_peak,
        vlf_band_hz=vlf,
        lf_band_hz=lf,
        hf_band_hz=hf,
        frequencies_hz=tuple(float(v) for v in freqs),
        psd_ms2_per_hz=tuple(float(v) for v in psd),
        n_intervals=n,
        n_segments=n_seg,
        segment_s=float(length),
        duration_s=float(covered),
        confidence=float(min(1.0, covered / _SHORT_TERM_S) * coverage),
        flags=tuple(flags),
    )


# --------------------------------------------------------------------------
# nonlinear


def _sample_entropy(
    nn: NDArray[np.float64], runs: NDArray[np.int64], r: float, m: int
) -> tuple[float | None, str | None]:
    """SampEn from templates that lie inside one run of adjacent intervals.

    Counts pairs of templates within Chebyshev distance ``r`` (inclusive)
    with a k-d tree (memory O(n)); self-matches excluded.
    """
    n = nn.size
    starts = np.arange(n - m)
    if starts.size == 0:
        return None, "sample_entropy_no_templates"
    # template i uses intervals i..i+m, all in the same run
    ok = runs[starts] == runs[starts + m]
    starts = starts[ok]
    if starts.size < 2:
        return None, "sample_entropy_no_templates"
    emb = nn[starts[:, None] + np.arange(m + 1)[None, :]]
    b_tree = cKDTree(emb[:, :m])
    a_tree = cKDTree(emb)
    count_b = (int(b_tree.count_neighbors(b_tree, r, p=np.inf)) - starts.size) // 2
    count_a = (int(a_tree.count_neighbors(a_tree, r, p=np.inf)) - starts.size) // 2
    if count_a == 0 or count_b == 0:
        return None, "sample_entropy_no_matches"
    return float(-math.log(count_a / count_b)), None


def _dfa_fluctuations(
    profile: NDArray[np.float64], runs: NDArray[np.int64], scales: Sequence[int]
) -> tuple[NDArray[np.float64], int]:
    """RMS linear-detrended fluctuation per box size; boxes stay in one run.

    Returns F(n) per scale and the number of boxes at the largest scale.
    """
    run_start = np.flatnonzero(np.r_[True, runs[1:] != runs[:-1]])
    run_len = np.diff(np.r_[run_start, runs.size])
    fluct = np.zeros(len(scales))
    boxes_at_largest = 0
    for j, size in enumerate(scales):
        per_run = run_len // size
        n_boxes = int(per_run.sum())
        if j == len(scales) - 1:
            boxes_at_largest = n_boxes
        if n_boxes == 0:
            fluct[j] = 0.0
            continue
        if run_start.size == 1:
            # one run (no gaps): the boxes tile the profile from its start
            y = profile[: n_boxes * size].reshape(n_boxes, size)
        else:
            # start index of every box, forward from each run's start
            owner = np.repeat(np.arange(run_start.size), per_run)
            first_box = np.cumsum(per_run) - per_run
            within = np.arange(n_boxes) - np.repeat(first_box, per_run)
            box_start = run_start[owner] + within * size
            y = profile[box_start[:, None] + np.arange(size)[None, :]]
        x = np.arange(size, dtype=float) - (size - 1) / 2.0
        yc = y - y.mean(axis=1, keepdims=True)
        slope = (yc @ x) / float(x @ x)
        resid = yc - slope[:, None] * x[None, :]
        fluct[j] = math.sqrt(float(np.mean(resid**2)))
    return fluct, boxes_at_largest


def _dfa_alpha(
    profile: NDArray[np.float64], runs: NDArray[np.int64], scales: Sequence[int], name: str
) -> tuple[float | None, str | None]:
    fluct, boxes = _dfa_fluctuations(profile, runs, scales)
    if boxes < _DFA_MIN_BOXES:
        return None, f"{name}_needs_{_DFA_MIN_BOXES * scales[-1]}_adjacent_intervals"
    if np.any(fluct <= 0):
        return None, f"{name}_zero_fluctuation"
    slope = np.polyfit(np.log(np.asarray(scales, dtype=float)), np.log(fluct), 1)[0]
    return _fin(slope), None


def nonlinear(times_s: ArrayLike, nn_ms: ArrayLike) -> NonlinearResult:
    """Poincare SD1/SD2, sample entropy and DFA alpha1/alpha2.

    Parameters
    ----------
    times_s
        End-beat time of each NN interval, seconds, strictly increasing.
    nn_ms
        NN intervals, milliseconds, positive.

    Returns
    -------
    NonlinearResult
        Minimum lengths (None plus flag when not met):

        - SD1, SD2: two adjacent pairs (a sample SD needs two values;
          ``"poincare_needs_2_adjacent_pairs"``). SD1 is SDSD / sqrt(2)
          (Brennan et al. 2001), so it is as reliable as SDSD.
        - Sample entropy: 200 intervals in runs of at least m + 1 = 3
          adjacent intervals (Yentes et al. 2013 advise N > 200 for m = 2;
          ``"sample_entropy_needs_200_intervals"``).
        - DFA: at least 10 boxes of the largest size, i.e. 160 adjacent
          intervals for alpha1 and 640 for alpha2 (largest window at most a
          tenth of the data, Hardstone et al. 2012;
          ``"dfa_alpha1_needs_160_adjacent_intervals"``).

    Raises
    ------
    InvalidInputError
        If the series breaks a rule of
        :func:`features.intervals.validate_interval_series`.

    Notes
    -----
    1. Poincare (Brennan et al. 2001, eqs. 7-8): for adjacent pairs
       ``(x_i, x_{i+1})``, SD1 is the sample SD (ddof=1) of
       ``(x_i - x_{i+1}) / sqrt(2)`` and SD2 that of
       ``(x_i + x_{i+1}) / sqrt(2)``.
    2. Sample entropy (Richman & Moorman 2000): m = 2, r = 0.2 times the
       sample SD (ddof=1) of the NN series, Chebyshev distance, a match when
       distance <= r, self-matches excluded, the same N - m template starts
       for lengths m and m + 1. ``SampEn = -ln(A / B)``. Departure: templates
       must lie inside one run of adjacent intervals. Pairs are counted with
       a k-d tree (:meth:`scipy.spatial.cKDTree.count_neighbors`), O(n)
       memory and roughly O(n log n) time for r = 0.2 SD; no matches gives
       None (``"sample_entropy_no_matches"``) rather than infinity.
    3. DFA (Peng et al. 1995): profile ``y(k) = cumsum(x - mean(x))``;
       non-overlapping boxes of n beats placed forward from the start of each
       run (the remainder of a run is dropped); least-squares line removed
       in each box; ``F(n)`` the RMS of all residuals; alpha is the slope of
       ``log F`` against ``log n`` over every integer n in 4-16 (alpha1) and
       16-64 (alpha2). Departure: with gaps, boxes never straddle a gap (the
       profile's jump across a gap is a constant within every box, which
       the detrending removes).

    References
    ----------
    .. [1] M. Brennan, M. Palaniswami, P. Kamen, "Do existing measures of
       Poincare plot geometry reflect nonlinear features of heart rate
       variability?", IEEE Transactions on Biomedical Engineering
       48(11):1342-1347, 2001. doi:10.1109/10.959330
    .. [2] J. S. Richman, J. R. Moorman, "Physiological time-series analysis
       using approximate entropy and sample entropy", American Journal of
       Physiology - Heart and Circulatory Physiology 278(6):H2039-H2049,
       2000. doi:10.1152/ajpheart.2000.278.6.H2039
    .. [3] C.-K. Peng, S. Havlin, H. E. Stanley, A. L. Goldberger,
       "Quantification of scaling exponents and crossover phenomena in
       nonstationary heartbeat time series", Chaos 5(1):82-87, 1995.
       doi:10.1063/1.166141
    .. [4] J. M. Yentes, N. Hunt, K. K. Schmid, J. P. Kaipust, D. McGrath,
       N. Stergiou, "The appropriate use of approximate entropy and sample
       entropy with short data sets", Annals of Biomedical Engineering
       41(2):349-365, 2013. doi:10.1007/s10439-012-0668-3
    .. [5] R. Hardstone, S.-S. Poil, G. Schiavone, R. Jansen, V. V. Nikulin,
       H. D. Mansvelder, K. Linkenkaer-Hansen, "Detrended fluctuation
       analysis: a scale-free view on neuronal oscillations", Frontiers in
       Physiology 3:450, 2012. doi:10.3389/fphys.2012.00450
    """
    times, nn = validate_interval_series(times_s, nn_ms)
    return _nonlinear(times, nn)


def _nonlinear(times: NDArray[np.float64], nn: NDArray[np.float64]) -> NonlinearResult:
    n = nn.size
    flags: list[str] = []
    adjacent = adjacent_to_previous(times, nn)
    runs = run_ids_from_adjacency(adjacent)
    earlier, later = _adjacent_pairs(times, nn)
    n_pairs = earlier.size

    sd1 = sd2 = ratio = None
    if n_pairs >= 2:
        sd1 = _fin(np.std((earlier - later) / math.sqrt(2.0), ddof=1))
        sd2 = _fin(np.std((earlier + later) / math.sqrt(2.0), ddof=1))
        if sd1 is not None and sd2 is not None and sd2 > 0:
            ratio = sd1 / sd2
        else:
            flags.append("sd1_sd2_ratio_undefined_zero_sd2")
    else:
        flags.append("poincare_needs_2_adjacent_pairs")

    sampen = None
    run_len = np.bincount(runs) if n else np.zeros(0, dtype=np.int64)
    in_long_runs = int(run_len[run_len >= _SAMPEN_M + 1].sum())
    if in_long_runs < _SAMPEN_MIN_INTERVALS:
        flags.append(f"sample_entropy_needs_{_SAMPEN_MIN_INTERVALS}_intervals")
    else:
        sd = float(nn.std(ddof=1))
        if sd == 0.0:
            flags.append("sample_entropy_zero_variance")
        else:
            sampen, reason = _sample_entropy(nn, runs, _SAMPEN_R_SD * sd, _SAMPEN_M)
            if reason:
                flags.append(reason)

    alpha1 = alpha2 = None
    if n:
        profile = np.cumsum(nn - nn.mean())
        alpha1, reason1 = _dfa_alpha(profile, runs, _DFA_ALPHA1_SCALES, "dfa_alpha1")
        alpha2, reason2 = _dfa_alpha(profile, runs, _DFA_ALPHA2_SCALES, "dfa_alpha2")
        flags.extend(r for r in (reason1, reason2) if r)
    else:
        flags.extend(("no_intervals",))
    if n and int(np.count_nonzero(~adjacent)) > 1:
        flags.append("series_has_gaps")
    adjacency = n_pairs / (n - 1) if n > 1 else 0.0
    return NonlinearResult(
        sd1_ms=sd1,
        sd2_ms=sd2,
        sd1_sd2_ratio=ratio,
        sample_entropy=sampen,
        dfa_alpha1=alpha1,
        dfa_alpha2=alpha2,
        n_intervals=n,
        n_pairs=n_pairs,
        confidence=float(min(1.0, n_pairs / _SAMPEN_MIN_INTERVALS) * adjacency),
        flags=tuple(flags),
    )


# --------------------------------------------------------------------------
# wrapper


def heart_rate_variability(
    times_s: ArrayLike,
    intervals_ms: ArrayLike,
    labels: IntervalLabels | Sequence[str],
) -> VariabilityResult:
    """Time, frequency and nonlinear HRV of the normal intervals only.

    Parameters
    ----------
    times_s
        End-beat time of each interval, seconds, strictly increasing.
    intervals_ms
        All intervals, milliseconds, positive.
    labels
        The :class:`~features.intervals.IntervalLabels` of this series from
        :func:`~features.intervals.classify_intervals`, or one label per
        interval from ``("artifact", "ectopic", "normal")``.

    Returns
    -------
    VariabilityResult
        The three family results on the NN series, counts and confidence.

    Raises
    ------
    InvalidInputError
        If the series breaks a rule of
        :func:`features.intervals.validate_interval_series`, ``labels`` has
        another length, or holds an unknown label.

    Notes
    -----
    1. Keep the intervals labelled "normal"; removing the others opens gaps
       that the adjacency rule sees, so no difference spans a removed beat.
    2. Run :func:`time_domain`, :func:`frequency_domain` and
       :func:`nonlinear` with their defaults.
    3. ``confidence = fraction_normal * min(1, n_nn / 200) *
       min(1, duration_s / 300)``: the share of intervals kept, the NN count
       against the largest short-term minimum used here (200, sample
       entropy), and the time covered against the Task Force 5-min standard.
       A heuristic from measurable evidence, not a calibrated probability.
    """
    times, intervals = validate_interval_series(times_s, intervals_ms)
    names = labels.labels if isinstance(labels, IntervalLabels) else labels
    if isinstance(names, str):
        raise InvalidInputError(
            "labels", f"`labels` must be a sequence of labels, not one string; got {names!r}."
        )
    names = tuple(names)
    if len(names) != intervals.size:
        raise InvalidInputError(
            "labels",
            f"`labels` must have one label per interval ({intervals.size}); got {len(names)}.",
        )
    unknown = sorted({str(v) for v in names} - set(LABELS))
    if unknown:
        raise InvalidInputError(
            "labels",
            f"`labels` must hold only {', '.join(repr(v) for v in LABELS)}; got {unknown[0]!r}.",
        )
    keep = np.array([v == "normal" for v in names], dtype=bool)
    nn_times, nn = times[keep], intervals[keep]
    n_total, n_nn = intervals.size, int(keep.sum())
    flags: list[str] = []
    if n_total == 0:
        flags.append("no_intervals")
    elif n_nn == 0:
        flags.append("no_normal_intervals")
    fraction_normal = n_nn / n_total if n_total else 0.0
    duration = float(nn.sum()) / 1000.0
    confidence = (
        fraction_normal
        * min(1.0, n_nn / _SAMPEN_MIN_INTERVALS)
        * min(1.0, duration / _SHORT_TERM_S)
    )
    return VariabilityResult(
        time_domain=_time_domain(nn_times, nn),
        frequency_domain=_frequency_domain(
            nn_times, nn, _VLF_BAND_HZ, _LF_BAND_HZ, _HF_BAND_HZ, _SHORT_TERM_S
        ),
        nonlinear=_nonlinear(nn_times, nn),
        n_intervals_total=n_total,
        n_nn_used=n_nn,
        fraction_rejected=(1.0 - fraction_normal) if n_total else None,
        duration_s=duration,
        confidence=float(confidence),
        flags=tuple(flags),
    )
