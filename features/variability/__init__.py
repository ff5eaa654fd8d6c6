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
the reason. Every measure costs O(n) or O(n log n) in the series length,
except sample entropy: O(n^1.5), a range count over ranks in blocks of about
sqrt(n) templates (see :func:`nonlinear`).
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
from numpy.typing import ArrayLike

from features.catalogue import FeatureDefinition, with_tolerance
from features.errors import InvalidInputError
from features.intervals import LABELS, IntervalLabels, validate_interval_series
from features.variability._shared import _SHORT_TERM_S
from features.variability.frequency_domain import (
    _HF_BAND_HZ,
    _LF_BAND_HZ,
    _VLF_BAND_HZ,
    FrequencyDomainResult,
    _frequency_domain,
    frequency_domain,
    lomb_psd_ms2_per_hz,
)
from features.variability.frequency_domain import CATALOGUE as _FREQUENCY_CATALOGUE
from features.variability.nonlinear import (
    _SAMPEN_MIN_INTERVALS,
    NonlinearResult,
    _nonlinear,
    nonlinear,
)
from features.variability.nonlinear import CATALOGUE as _NONLINEAR_CATALOGUE
from features.variability.time_domain import CATALOGUE as _TIME_CATALOGUE
from features.variability.time_domain import TimeDomainResult, _time_domain, time_domain

__all__ = [
    "CATALOGUE",
    "FrequencyDomainResult",
    "NonlinearResult",
    "TimeDomainResult",
    "VariabilityResult",
    "frequency_domain",
    "heart_rate_variability",
    "lomb_psd_ms2_per_hz",
    "nonlinear",
    "time_domain",
]


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
       A heuristic from measurable evidence, not a calibrated probability; the
       feature vector turns it, with the rest of the analysis's evidence, into each
       feature's calibrated confidence (:mod:`features.calibration`).
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


CATALOGUE: tuple[FeatureDefinition, ...] = (
    _TIME_CATALOGUE + _FREQUENCY_CATALOGUE + _NONLINEAR_CATALOGUE
)
"""Catalogue entries of the variability families, time domain first."""

TOLERANCES: dict[str, tuple[float, str, str]] = {
    "mean_nn_ms": (20.0, "abs", "2 /min of heart rate near 75 /min, the heart-rate bound"),
    "sdnn_ms": (10.0, "rel", "issue 12's bound for SDNN"),
    "rmssd_ms": (15.0, "rel", "issue 12's bound for RMSSD"),
    "sdsd_ms": (15.0, "rel", "as RMSSD, which it equals up to the mean difference"),
    "pnn50_pct": (10.0, "abs", "issue 12's bound for pNN50, 10 percentage points"),
    "pnn20_pct": (10.0, "abs", "as pNN50"),
    "cvnn_pct": (10.0, "rel", "as SDNN, of which it is a scaled copy"),
    "vlf_power_ms2": (25.0, "rel", "as LF and HF power"),
    "lf_power_ms2": (25.0, "rel", "issue 12's bound for LF power"),
    "hf_power_ms2": (25.0, "rel", "issue 12's bound for HF power"),
    "lf_hf_ratio": (35.0, "rel", "two 25 % errors in quadrature (25 x sqrt 2)"),
    "sd1_ms": (15.0, "rel", "as RMSSD: SD1 is RMSSD / sqrt 2 up to the mean difference"),
    "sd2_ms": (10.0, "rel", "as SDNN, which dominates it"),
    "sample_entropy": (15.0, "rel", "as RMSSD, the short-term variation it also reflects"),
    "dfa_alpha1": (0.1, "abs", "a tenth of the healthy value near 1 (common practice)"),
}
"""Tolerance of each variability feature: (value, ``"abs"`` or ``"rel"``, why)."""
CATALOGUE = with_tolerance(CATALOGUE, TOLERANCES)
