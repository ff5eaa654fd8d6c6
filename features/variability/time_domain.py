"""Time-domain heart-rate variability (Task Force of the ESC and NASPE, 1996).

Mean NN, SDNN, RMSSD, SDSD, pNN50, pNN20, CVNN, mean and SD of heart rate, on an NN
series as described in :mod:`features.variability`.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from numpy.typing import ArrayLike, NDArray

from features._numeric import std
from features.catalogue import (
    MS_PER_MIN,
    NN_RANGE_MS,
    NONNEGATIVE,
    PERCENT,
    REF_TASK_FORCE,
    FeatureDefinition,
)
from features.intervals import validate_interval_series
from features.variability._shared import _SHORT_TERM_S, _adjacent_pairs, _entry, _fin

__all__ = ["CATALOGUE", "TimeDomainResult", "time_domain"]

#: Thresholds of the NN50 and NN20 counts, ms (Task Force 1996).
_NN50_MS = 50.0
_NN20_MS = 20.0


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
    hr = MS_PER_MIN / nn
    mean_hr = _fin(hr.mean()) if n else None
    if n == 0:
        flags.append("no_intervals")
    sdnn = cvnn = sd_hr = None
    if n >= 2:
        sdnn = _fin(std(nn, ddof=1))
        cvnn = None if (sdnn is None or mean_nn is None) else 100.0 * sdnn / mean_nn
        sd_hr = _fin(std(hr, ddof=1))
    else:
        flags.append("sdnn_needs_2_intervals")
    rmssd = pnn50 = pnn20 = sdsd = None
    if n_diff >= 1:
        rmssd = _fin(np.sqrt(np.mean(diffs**2)))
        absd = np.abs(diffs)
        pnn50 = 100.0 * float(np.count_nonzero(absd > _NN50_MS)) / n_diff
        pnn20 = 100.0 * float(np.count_nonzero(absd > _NN20_MS)) / n_diff
    else:
        flags.append("rmssd_needs_1_adjacent_pair")
    if n_diff >= 2:
        sdsd = _fin(std(diffs, ddof=1))
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


# --------------------------------------------------------------------------- catalogue

_TD = "time_domain"
# Bounds: a difference of two NN intervals is at most the width of NN_RANGE_MS; the SD of
# values inside it at most half that width (Popoviciu's inequality, population SD).
_NN_SPAN_MS = NN_RANGE_MS[1] - NN_RANGE_MS[0]
CATALOGUE: tuple[FeatureDefinition, ...] = (
    _entry("mean_nn_ms", _TD, "mean_nn_ms", "ms",
           "Mean of the normal-to-normal (NN) intervals.", NN_RANGE_MS, REF_TASK_FORCE),
    _entry("sdnn_ms", _TD, "sdnn_ms", "ms",
           "Sample standard deviation (ddof=1) of the NN intervals.", (0.0, _NN_SPAN_MS / 2),
           REF_TASK_FORCE),
    _entry("rmssd_ms", _TD, "rmssd_ms", "ms",
           "Root mean square of the differences of adjacent NN intervals.", (0.0, _NN_SPAN_MS),
           REF_TASK_FORCE),
    _entry("sdsd_ms", _TD, "sdsd_ms", "ms",
           "Sample standard deviation of the differences of adjacent NN intervals.",
           (0.0, _NN_SPAN_MS), REF_TASK_FORCE),
    _entry("pnn50_pct", _TD, "pnn50_pct", "%",
           f"Share of adjacent-NN differences larger than {_NN50_MS:g} ms.", PERCENT,
           REF_TASK_FORCE),
    _entry("pnn20_pct", _TD, "pnn20_pct", "%",
           f"Share of adjacent-NN differences larger than {_NN20_MS:g} ms.", PERCENT,
           REF_TASK_FORCE),
    _entry("cvnn_pct", _TD, "cvnn_pct", "%",
           "SDNN divided by the mean NN interval, in %.", NONNEGATIVE, REF_TASK_FORCE),
)
"""Catalogue entries of the time-domain family (see :mod:`features.catalogue`)."""
