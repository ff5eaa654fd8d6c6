"""Heart rate and its confidence from the detected beats.

The confidence is built from evidence that can be measured on the trace:
the beats' agreement with their ensemble template, how many intervals passed
screening, how many there are, and whether the beat-based rate agrees with
the dominant period of the energy envelope, an estimate made without picking
beats (the agreement of independent estimators, as in Brueser et al. 2011).

References
----------
.. [1] Brueser C, Stadlthanner K, de Waele S, Leonhardt S. Adaptive
   beat-to-beat heart rate estimation in ballistocardiograms. IEEE
   Transactions on Information Technology in Biomedicine 15(5):778-786, 2011.
   doi:10.1109/TITB.2011.2128337
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from numpy.typing import NDArray

from features._numeric import median_1d
from features.beats import BeatDetection
from features.catalogue import (
    MS_PER_MIN,
    RATE_RANGE_BPM,
    REF_OURS,
    FeatureDefinition,
    with_tolerance,
)
from features.intervals import IntervalLabels, IntervalSeries

DETECTION_ERROR_REASONS = frozenset({"extra_beat", "missed_beat", "out_of_range"})
"""Interval reasons that point at a detection error rather than the rhythm."""

MIN_INTERVALS = 10
"""Fewest screened intervals for a heart rate: about 10 s of beats at 60 bpm."""

FULL_EVIDENCE_INTERVALS = 60
"""Intervals at which the count term of the confidence reaches 1 (one minute at 60 bpm)."""


@dataclass(frozen=True)
class HeartRateResult:
    """Mean heart rate over the usable parts of the recording.

    Attributes
    ----------
    mean_bpm
        60000 / mean of the intervals kept (normal and ectopic-like; not those
        flagged as detection errors), beats per minute; None with ``reason``.
    median_bpm
        60000 / median of the same intervals.
    envelope_bpm
        Rate of the dominant envelope period, found without picking beats.
    intervals_used
        Number of intervals behind ``mean_bpm``.
    confidence
        In [0, 1]; see :func:`heart_rate`.
    reason
        Why ``mean_bpm`` is None, else None.
    flags
        Conditions that lowered the confidence.
    """

    mean_bpm: float | None
    median_bpm: float | None
    envelope_bpm: float | None
    intervals_used: int
    confidence: float
    reason: str | None
    flags: tuple[str, ...]


def heart_rate(
    beats: BeatDetection,
    series: IntervalSeries,
    labels: IntervalLabels,
    *,
    occupied: bool | None,
) -> HeartRateResult:
    """Heart rate with a confidence built from measurable evidence.

    Parameters
    ----------
    beats
        Output of :func:`features.beats.detect_beats`.
    series, labels
        The interval series of those beats and its screening labels.
    occupied
        Occupancy decided from the load (False means an empty support: no
        heart rate is reported), or None when unknown.

    Returns
    -------
    HeartRateResult

    Notes
    -----
    The confidence is the product of four terms, each in [0, 1]:

    1. template agreement ``clip((r_med - 0.3) / 0.5)``, with ``r_med`` the
       median correlation of the beats with their template (0.3 is about
       what a noise peak reaches, 0.8 a clean beat);
    2. screening ``clip((f - 0.3) / 0.5)``, with ``f`` the fraction of
       intervals that were not detection errors;
    3. count ``min(1, n / FULL_EVIDENCE_INTERVALS)``;
    4. agreement ``exp(-(d / 0.05) ** 2)`` of the beat-based rate and the
       envelope rate, with ``d`` their relative difference (a 5 % gap gives
       0.37); 0.5 when the envelope shows no dominant period (an irregular
       rhythm has none), so agreement cannot be checked.

    No repeating beat waveform, an empty support, or fewer than
    ``MIN_INTERVALS`` intervals give None with a reason and confidence 0.
    """
    flags: list[str] = []
    env_bpm = 60.0 / beats.period_s if beats.period_s else None
    if occupied is False:
        return _none("empty_support", env_bpm)
    if not beats.has_beats:
        return _none("no_heartbeat_found", env_bpm)
    iv = np.asarray(series.intervals_ms, dtype=np.float64)
    reasons = labels.reasons
    keep = np.fromiter((r not in DETECTION_ERROR_REASONS for r in reasons), dtype=bool,
                       count=len(reasons))
    used: NDArray[np.float64] = iv[keep]
    if used.size < MIN_INTERVALS:
        return _none("too_few_intervals", env_bpm)
    mean_bpm = MS_PER_MIN / float(np.mean(used))
    median_bpm = MS_PER_MIN / median_1d(used)

    r_med = median_1d(beats.correlation) if beats.correlation.size else 0.0
    c_template = _clip01((r_med - 0.3) / 0.5)
    frac = used.size / max(iv.size, 1)
    c_screen = _clip01((frac - 0.3) / 0.5)
    c_count = min(1.0, used.size / FULL_EVIDENCE_INTERVALS)
    if env_bpm is None:
        c_agree = 0.5
        flags.append("no_envelope_period_to_compare")
    else:
        ratio = abs(mean_bpm - env_bpm) / mean_bpm
        c_agree = float(np.exp(-((ratio / 0.05) ** 2)))
        if c_agree < 0.5:
            flags.append("beat_and_envelope_rates_disagree")
    if c_template < 0.5:
        flags.append("weak_template_agreement")
    if c_screen < 0.5:
        flags.append("many_intervals_rejected")
    if c_count < 1.0:
        flags.append("few_intervals")
    confidence = c_template * c_screen * c_count * c_agree
    return HeartRateResult(
        mean_bpm=mean_bpm,
        median_bpm=median_bpm,
        envelope_bpm=env_bpm,
        intervals_used=int(used.size),
        confidence=float(confidence),
        reason=None,
        flags=tuple(flags),
    )


def _clip01(v: float) -> float:
    return float(min(1.0, max(0.0, v)))


def _none(reason: str, env_bpm: float | None) -> HeartRateResult:
    return HeartRateResult(
        mean_bpm=None, median_bpm=None, envelope_bpm=env_bpm, intervals_used=0,
        confidence=0.0, reason=reason, flags=(reason,),
    )


# --------------------------------------------------------------------------- catalogue


def _entry(name: str, attr: str, text: str) -> FeatureDefinition:
    return FeatureDefinition(name, "heart_rate", "/min", text, RATE_RANGE_BPM, REF_OURS,
                             f"heart_rate.{attr}", "heart_rate.confidence", (),
                             ("heart_rate.flags",))


CATALOGUE: tuple[FeatureDefinition, ...] = (
    _entry("heart_rate_mean_bpm", "mean_bpm",
           f"{MS_PER_MIN:g} divided by the mean of the beat-to-beat intervals kept (normal and "
           "ectopic-like, not those screened out as detection errors)."),
    _entry("heart_rate_median_bpm", "median_bpm",
           f"{MS_PER_MIN:g} divided by the median of the same intervals."),
)
"""Catalogue entries of the heart-rate family (see :mod:`features.catalogue`)."""

TOLERANCES: dict[str, tuple[float, str, str]] = {
    "heart_rate_mean_bpm": (2.0, "abs", "issue 12's bound for heart rate"),
    "heart_rate_median_bpm": (2.0, "abs", "as the mean rate"),
}
"""Tolerance of each heart-rate feature: (value, ``"abs"`` or ``"rel"``, why)."""
CATALOGUE = with_tolerance(CATALOGUE, TOLERANCES)
