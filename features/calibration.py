"""Calibrated confidence: the probability that a reported value lies within its tolerance.

Every catalogue entry names a tolerance (``FeatureDefinition.tolerance``). For the features
listed in :data:`features.calibration_table.MODELS`, the confidence that
:func:`features.feature_vector.feature_vector` reports is the engine's estimate of
P(|reported - true| <= tolerance), from a logistic model of a few evidence quantities that
the engine has already measured (:func:`evidence`), mapped to probability by an isotonic
regression of the hits on the model's score. The coefficients were fitted offline on a
simulated training cohort by ``python -m validation.calibration --fit`` and are kept as data
in :mod:`features.calibration_table` with the fit's date, seeds and cohort sizes; applying
them is a dot product and a logistic function.

Every evidence quantity but the size of the value itself (:data:`SIGNED_EVIDENCE`) is
oriented so that a larger value is better evidence, and the fit constrains their
coefficients to be non-negative: the calibrated confidence never falls when evidence
improves (monotone by construction). A value whose family confidence is 0 (the
family found nothing it trusts) keeps confidence 0, and where no heartbeat was found the
family confidence stands.

A feature listed in :data:`features.calibration_table.LF_BAND_MODELS` (RSA) has a second
model, fitted on the training recordings whose breathing lies inside the LF band (below
0.15 Hz, 9 /min; Task Force 1996) and used for them: there the baroreflex rhythm shares the
breathing frequency, so the same evidence says less (a precise, regular fit can still have
measured the sum of the two rhythms), and one model for all breathing rates, fitted mostly on
faster breathing, was overconfident there (docs/validation.md). Each model is monotone in its
evidence; crossing 9 /min changes the model, not the evidence.

References
----------
Platt JC. Probabilistic outputs for support vector machines and comparisons to regularized
likelihood methods. In: Advances in Large Margin Classifiers, MIT Press, 61-74, 1999.

Efron B, Tibshirani RJ. An Introduction to the Bootstrap. Chapman & Hall, 1993 (ch. 11,
the jackknife; from memory).

Julien C. The enigma of Mayer waves: facts and models. Cardiovascular Research 70:12-21,
2006 (the baroreflex rhythm near 0.1 Hz in humans; from memory).

Niculescu-Mizil A, Caruana R. Predicting good probabilities with supervised learning.
Proceedings of the 22nd International Conference on Machine Learning (ICML), 625-632, 2005.
doi:10.1145/1102351.1102430
"""

from __future__ import annotations

import bisect
import math
from collections.abc import Mapping
from typing import TYPE_CHECKING

import numpy as np
from numpy.typing import NDArray

from features.calibration_table import LF_BAND_MODELS, MODELS
from features.modulation import LF_BAND_HZ

if TYPE_CHECKING:
    from features.engine import AnalysisResult

__all__ = [
    "EVIDENCE_NAMES",
    "SIGNED_EVIDENCE",
    "breathing_in_lf_band",
    "calibrated_confidence",
    "evidence",
    "is_calibrated",
    "isotonic_map",
    "logistic",
    "result_evidence",
]

EVIDENCE_NAMES = (
    "heuristic",
    "log_intervals",
    "log_usable_s",
    "beat_correlation",
    "template_correlation",
    "log_beat_evidence",
    "interval_consistency",
    "hr_agreement",
    "breath_agreement",
    "log_breaths",
    "breath_regularity",
    "template_snr",
    "sdnn_over_jitter",
    "rmssd_over_jitter",
    "ij_precision",
    "jk_precision",
    "rsa_over_jitter",
    "rsa_precision",
    "rsa_half_agreement",
    "rsa_half_consistency",
    "breathing_above_lf",
    "coherence",
    "normal_fraction",
    "log_sdnn",
    "log_rmssd",
    "log_rsa",
    "log_rmssd_sq",
    "rmssd_over_sdnn",
    "rsa_split_precision",
    "breathing_off_baroreflex",
)
"""Evidence quantities, each finite (see :func:`evidence` for their definitions); larger is
better evidence for all but :data:`SIGNED_EVIDENCE`."""

HALF_WALD_CAP = 20.0
"""Floor of ``rsa_half_consistency`` (p = e^-20): beyond it the halves plainly differ."""

BAROREFLEX_HZ = 0.1
"""Usual frequency of the baroreflex (Mayer-wave) rhythm of heart rate and blood pressure in
humans, about 0.1 Hz (Julien 2006; from memory), inside the LF band. Breathing near it
drives the same oscillation (slow breathing at about 6 /min resonates with the baroreflex
loop), so the respiratory and baroreflex parts of the heart-rate swing coincide."""

BAROREFLEX_SCALE_HZ = 0.05
"""Scale of ``breathing_off_baroreflex``: from :data:`BAROREFLEX_HZ` to the LF band's upper
edge (0.15 Hz, Task Force 1996), where the evidence reaches 1."""

SIGNED_EVIDENCE = frozenset({"log_rsa", "log_rmssd_sq", "rmssd_over_sdnn"})
"""Evidence whose direction is not known in advance (the size of the value itself, and
RMSSD's shape terms); the fit lets its coefficient take either sign."""


def logistic(z: float) -> float:
    """1 / (1 + exp(-z)), computed without overflow."""
    if z >= 0.0:
        return 1.0 / (1.0 + math.exp(-z))
    e = math.exp(z)
    return e / (1.0 + e)


def _num(x: object, default: float = 0.0) -> float:
    if x is None:
        return default
    v = float(x)  # type: ignore[arg-type]
    return v if math.isfinite(v) else default


def _log_ratio(num: object, den: object, floor: float) -> float:
    """log(num / max(den, floor)), 0 when num is missing or not positive; clipped to +-6."""
    n = _num(num)
    if n <= 0.0:
        return 0.0
    return max(-6.0, min(6.0, math.log(n / max(_num(den), floor))))


def _upper_median(values: NDArray[np.float64]) -> float:
    """The order statistic ``len // 2`` (the upper median), 0 for no values; one partition
    instead of a sort of Python floats."""
    v = np.asarray(values, dtype=np.float64)
    k = v.size // 2
    return float(np.partition(v, k)[k]) if v.size else 0.0


def evidence(result: AnalysisResult, heuristic: float) -> dict[str, float]:
    """The evidence quantities of one analysis, for one feature's family confidence.

    Parameters
    ----------
    result
        The analysis (its stages; the feature vector is not needed).
    heuristic
        The family's own confidence of the feature, in [0, 1].

    Returns
    -------
    dict
        One finite float per name of :data:`EVIDENCE_NAMES`:

        - ``heuristic``: the family confidence;
        - ``log_intervals``: log(1 + beat-to-beat intervals used for the heart rate);
        - ``log_usable_s``: log(1 + usable seconds of the recording);
        - ``beat_correlation``: median correlation of the detected beats with the detector's
          template (0 without beats);
        - ``template_correlation``: median correlation of the morphology beats with their
          ensemble template (0 when not built);
        - ``log_beat_evidence``: log(1 + the detector's rhythm evidence);
        - ``interval_consistency``: 1 - fraction of intervals screened out by the
          variability stage;
        - ``hr_agreement``: 1 / (1 + |mean-interval rate - envelope rate| / 1 /min), two
          independent heart-rate estimates (0 when either is missing);
        - ``breath_agreement``: the same for counted vs spectral breathing rate;
        - ``log_breaths``: log(1 + breaths counted);
        - ``breath_regularity``: 1 / (1 + breath-interval CV / 100 %);
        - ``template_snr``: log of the J - K amplitude over the template's standard error;
        - ``sdnn_over_jitter``, ``rmssd_over_jitter``, ``rsa_over_jitter``: log of SDNN,
          RMSSD and RSA over the spread of the J wave's location (the beat-timing jitter,
          floor 1 ms);
        - ``ij_precision``, ``jk_precision``: log of 10 ms over the interval's standard
          error (floor 0.1 ms; 0 when unknown);
        - ``rsa_precision``: log of 10 ms (RSA's tolerance) over RSA's standard error from
          the cosinor fit (floor 0.1 ms; 0 when unknown);
        - ``rsa_half_agreement``: log of 10 ms over the size of the difference between the
          sinusoids fitted to the first and to the second half of the intervals (floor
          0.1 ms; 0 when unknown): a modulation that holds through the recording against
          one that does not;
        - ``rsa_half_consistency``: log of the p-value of the halves' Wald test (chi-square,
          2 degrees of freedom: log p = -W / 2, floor -``HALF_WALD_CAP``; 0 when unknown):
          the halves' difference against their own noise, which the difference in ms alone
          cannot tell (29 ms apart is noise for halves with a 20-ms error, and a broken
          breathing phase for halves with a 3-ms one);
        - ``breathing_above_lf``: (breathing frequency - 0.04 Hz) / (0.15 Hz - 0.04 Hz)
          clipped to [0, 1] (``features.modulation.LF_BAND_HZ``, Task Force 1996): how far
          breathing stands above the low-frequency band, where the baroreflex rhythm shares
          its frequency (0 when unknown);
        - ``rsa_split_precision``: log of 10 ms over sqrt(SE^2 + (D / 2)^2), SE RSA's
          standard error from the cosinor fit and D the halves' difference (floor 0.1 ms; 0
          when SE is unknown, SE alone when D is): the fit's standard error assumes
          independent residuals, while a slow rhythm left in them (the baroreflex one when
          breathing lies in the LF band) moves the estimate between the halves, and half
          their difference is a second, one-sample estimate of the whole recording's
          error (the halves' errors are the whole's, split: a two-group jackknife,
          Efron and Tibshirani 1993, ch. 11, from memory);
        - ``breathing_off_baroreflex``: |breathing frequency - 0.1 Hz| / 0.05 Hz clipped to
          [0, 1] (:data:`BAROREFLEX_HZ`): 0 where breathing sits on the baroreflex rhythm
          and the two cannot be told apart, 1 from the LF band's upper edge (0 when
          unknown);
        - ``coherence``: cardiorespiratory coherence (0 when not computed);
        - ``normal_fraction``: share of the beat-to-beat intervals screened as normal;
        - ``log_sdnn``, ``log_rmssd``: log of the value in ms (floor 1 ms; a relative
          tolerance is easier to meet on a larger value);
        - ``log_rmssd_sq``: the square of ``log_rmssd``, so that the size can help up to a
          point and hurt beyond it (a relative tolerance is easier on a larger RMSSD, but
          an implausibly large one is mostly beats added or lost);
        - ``rmssd_over_sdnn``: log(RMSSD / SDNN) (each floored at 1 ms): near log sqrt(2)
          for intervals that change at random from beat to beat, far below it for a
          rhythm that changes smoothly (breathing, slower rhythms), so a high value points
          at beat-to-beat timing noise;
        - ``log_rsa``: log of RSA's fitted size in ms before the noise floor is removed,
          sqrt(RSA^2 + 2 SE^2) (floor 1 ms): the size the absolute tolerance must cover,
          which for an RSA debiased to 0 is that of its noise.
    """
    return {"heuristic": _clipped_heuristic(heuristic), **result_evidence(result)}


def _clipped_heuristic(heuristic: float) -> float:
    """The family confidence as the models read it: clipped to [0, 1], 0 when unknown."""
    return min(1.0, max(0.0, _num(heuristic)))


def result_evidence(result: AnalysisResult) -> dict[str, float]:
    """The quantities of :func:`evidence` that do not depend on the feature (all but
    ``heuristic``), the same for every feature of one analysis."""
    hr = result.heart_rate
    beats = result.beats
    mor = result.morphology
    resp = result.respiration
    td = result.variability.time_domain
    corr = beats.correlation
    jwave = mor.wave("J")
    jitter = None if jwave is None else jwave.location_sd_ms
    usable_s = _num(result.quality.usable_fraction) * _num(result.input.duration_s)
    rejected = _num(result.variability.fraction_rejected, 1.0)

    def agreement(a: object, b: object) -> float:
        if a is None or b is None:
            return 0.0
        return 1.0 / (1.0 + abs(_num(a) - _num(b)))

    def precision(se: object) -> float:
        return 0.0 if se is None else _log_ratio(10.0, se, 0.1)

    cv = resp.interval_cv_pct
    log_sdnn = math.log(max(1.0, _num(td.sdnn_ms)))
    log_rmssd = math.log(max(1.0, _num(td.rmssd_ms)))
    mod = result.modulation
    lf_lo, lf_hi = LF_BAND_HZ
    return {
        "log_intervals": math.log1p(max(0, hr.intervals_used)),
        "log_usable_s": math.log1p(max(0.0, usable_s)),
        "beat_correlation": _upper_median(corr),
        "template_correlation": _num(mor.template_correlation_median),
        "log_beat_evidence": math.log1p(max(0.0, _num(beats.evidence))),
        "interval_consistency": min(1.0, max(0.0, 1.0 - rejected)),
        "hr_agreement": agreement(hr.mean_bpm, hr.envelope_bpm),
        "breath_agreement": agreement(resp.counted_rate_per_min, resp.spectral_rate_per_min),
        "log_breaths": math.log1p(max(0, resp.breath_count)),
        "breath_regularity": 0.0 if cv is None else 1.0 / (1.0 + _num(cv) / 100.0),
        "template_snr": _log_ratio(mor.jk_amplitude, mor.jk_amplitude_se, 1e-12),
        "sdnn_over_jitter": _log_ratio(td.sdnn_ms, jitter, 1.0),
        "rmssd_over_jitter": _log_ratio(td.rmssd_ms, jitter, 1.0),
        "ij_precision": precision(mor.ij_interval_se_ms),
        "jk_precision": precision(mor.jk_interval_se_ms),
        "rsa_over_jitter": _log_ratio(mod.rsa_ms, jitter, 1.0),
        "rsa_precision": precision(mod.rsa_se_ms),
        "rsa_half_agreement": precision(mod.rsa_half_difference_ms),
        "rsa_half_consistency": (0.0 if mod.rsa_half_wald is None
                                 else -min(HALF_WALD_CAP, 0.5 * mod.rsa_half_wald)),
        "breathing_above_lf": min(1.0, max(0.0, (_num(mod.breathing_frequency_hz) - lf_lo)
                                                / (lf_hi - lf_lo))),
        "coherence": _num(mod.coherence),
        "normal_fraction": _num(result.interval_labels.fraction_normal),
        "log_sdnn": log_sdnn,
        "log_rmssd": log_rmssd,
        # RSA's size as fitted, before the noise floor is taken off (sqrt(rsa^2 + 2 se^2)
        # undoes features.modulation's debiasing): a value debiased to 0 under a wide
        # standard error is not a small RSA, only an unmeasured one.
        "log_rsa": math.log(max(1.0, math.hypot(_num(mod.rsa_ms),
                                                math.sqrt(2.0) * _num(mod.rsa_se_ms)))),
        "log_rmssd_sq": log_rmssd ** 2,
        "rmssd_over_sdnn": log_rmssd - log_sdnn,
        "rsa_split_precision": (
            0.0 if mod.rsa_se_ms is None
            else _log_ratio(10.0, math.hypot(_num(mod.rsa_se_ms),
                                             0.5 * _num(mod.rsa_half_difference_ms)), 0.1)),
        "breathing_off_baroreflex": (
            0.0 if mod.breathing_frequency_hz is None
            else min(1.0, abs(_num(mod.breathing_frequency_hz) - BAROREFLEX_HZ)
                     / BAROREFLEX_SCALE_HZ)),
    }


def breathing_in_lf_band(evidence: Mapping[str, float]) -> bool:
    """True when the evidence puts breathing below the LF band's upper edge (0.15 Hz) or
    does not know it: where a feature's LF-band model, if it has one, is fitted and used."""
    return evidence["breathing_above_lf"] < 1.0


def is_calibrated(name: str) -> bool:
    """True when the feature ``name`` has a fitted calibration model."""
    return name in MODELS


def calibrated_confidence(name: str, heuristic: float, result: AnalysisResult, *,
                          memo: dict[str, float] | None = None) -> float:
    """P(|reported - true| <= tolerance) of feature ``name`` in ``result``.

    Parameters
    ----------
    name
        Catalogue name of a feature with a model (:func:`is_calibrated`).
    heuristic
        The family's confidence of that feature, in [0, 1].
    result
        The analysis.
    memo
        An empty dict that the caller keeps across the features of one ``result``: the
        evidence that does not depend on the feature (:func:`result_evidence`) is stored in
        it at first use and read from it afterwards (the same numbers).

    Returns
    -------
    float
        From the feature's LF-band model where it has one and breathing lies below 0.15 Hz,
        else from its model. In [0, 1]; 0 when ``heuristic`` is 0. Where the analysis found
        no heartbeat (no beats, or occupancy not established) ``heuristic`` itself: the
        models were fitted on occupied recordings, and there the family confidences stay
        below 0.5 by the rules of the quality stage (issue 12: no confident value without a
        heartbeat).

    Raises
    ------
    KeyError
        When ``name`` has no model.
    """
    model = MODELS[name]
    if heuristic <= 0.0:
        return 0.0
    if not result.beats.has_beats or result.occupancy.occupied is not True:
        return min(1.0, heuristic)
    if memo is None:
        shared = result_evidence(result)
    else:
        if not memo:
            memo.update(result_evidence(result))
        shared = memo
    if name in LF_BAND_MODELS and breathing_in_lf_band(shared):
        model = LF_BAND_MODELS[name]
    h = _clipped_heuristic(heuristic)
    z = model.intercept
    for key, w in zip(model.inputs, model.coefficients, strict=True):
        z += w * (h if key == "heuristic" else shared[key])
    return isotonic_map(z, model.knot_scores, model.knot_probabilities)


def isotonic_map(z: float, scores: tuple[float, ...], probabilities: tuple[float, ...]
                 ) -> float:
    """The fitted isotonic map at score ``z``: linear between knots, constant beyond."""
    if z <= scores[0]:
        return probabilities[0]
    if z >= scores[-1]:
        return probabilities[-1]
    k = bisect.bisect_right(scores, z)
    z0, z1 = scores[k - 1], scores[k]
    p0, p1 = probabilities[k - 1], probabilities[k]
    return p0 + (p1 - p0) * (z - z0) / (z1 - z0)
