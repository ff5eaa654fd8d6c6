"""The feature catalogue: one table for ``GET /v1/features`` and for ``feature_vector``.

Each entry names a scalar of the analysis response (by its dotted path), its family,
its unit (UCUM symbols: ``/min``, ``ms``, ``ms2``, ``%``; null when dimensionless) and a
plain definition.
"""

# TODO(lead): move this table into features/ (next to FEATURE_SET_VERSION) once the
# engine keeps its own catalogue; the service and the vector then read it from there.

from __future__ import annotations

from dataclasses import dataclass

from marshmallow import Schema, fields


@dataclass(frozen=True)
class FeatureEntry:
    """One feature of the vector."""

    name: str
    family: str
    unit: str | None
    path: str
    definition: str


_TASK_FORCE = "(Task Force of the ESC and NASPE, Circulation 93:1043-1065, 1996)"

FEATURES: tuple[FeatureEntry, ...] = (
    FeatureEntry("heart_rate_mean_bpm", "heart_rate", "/min", "heart_rate.mean_bpm",
                 "Mean heart rate from the accepted beat-to-beat intervals."),
    FeatureEntry("heart_rate_median_bpm", "heart_rate", "/min", "heart_rate.median_bpm",
                 "Median heart rate from the accepted beat-to-beat intervals."),
    FeatureEntry("mean_nn_ms", "variability", "ms", "variability.time_domain.mean_nn_ms",
                 f"Mean of the normal-to-normal (NN) intervals {_TASK_FORCE}."),
    FeatureEntry("sdnn_ms", "variability", "ms", "variability.time_domain.sdnn_ms",
                 f"Standard deviation of the NN intervals {_TASK_FORCE}."),
    FeatureEntry("rmssd_ms", "variability", "ms", "variability.time_domain.rmssd_ms",
                 "Root mean square of the differences of successive NN intervals "
                 f"{_TASK_FORCE}."),
    FeatureEntry("sdsd_ms", "variability", "ms", "variability.time_domain.sdsd_ms",
                 "Standard deviation of the differences of successive NN intervals "
                 f"{_TASK_FORCE}."),
    FeatureEntry("pnn50_pct", "variability", "%", "variability.time_domain.pnn50_pct",
                 f"Share of successive NN differences larger than 50 ms {_TASK_FORCE}."),
    FeatureEntry("pnn20_pct", "variability", "%", "variability.time_domain.pnn20_pct",
                 "Share of successive NN differences larger than 20 ms."),
    FeatureEntry("cvnn_pct", "variability", "%", "variability.time_domain.cvnn_pct",
                 "SDNN divided by the mean NN interval."),
    FeatureEntry("vlf_power_ms2", "variability", "ms2",
                 "variability.frequency_domain.vlf_power_ms2",
                 f"Power of the NN series in the very-low-frequency band {_TASK_FORCE}."),
    FeatureEntry("lf_power_ms2", "variability", "ms2",
                 "variability.frequency_domain.lf_power_ms2",
                 f"Power of the NN series in the low-frequency band, 0.04-0.15 Hz {_TASK_FORCE}."),
    FeatureEntry("hf_power_ms2", "variability", "ms2",
                 "variability.frequency_domain.hf_power_ms2",
                 f"Power of the NN series in the high-frequency band, 0.15-0.4 Hz {_TASK_FORCE}."),
    FeatureEntry("lf_hf_ratio", "variability", None, "variability.frequency_domain.lf_hf_ratio",
                 "LF power divided by HF power."),
    FeatureEntry("sd1_ms", "variability", "ms", "variability.nonlinear.sd1_ms",
                 "Poincare plot SD1: spread across the identity line (short-term variability)."),
    FeatureEntry("sd2_ms", "variability", "ms", "variability.nonlinear.sd2_ms",
                 "Poincare plot SD2: spread along the identity line (long-term variability)."),
    FeatureEntry("sample_entropy", "variability", None, "variability.nonlinear.sample_entropy",
                 "Sample entropy of the NN series (Richman and Moorman, Am J Physiol 278:"
                 "H2039-H2049, 2000)."),
    FeatureEntry("dfa_alpha1", "variability", None, "variability.nonlinear.dfa_alpha1",
                 "Short-term scaling exponent of detrended fluctuation analysis of the NN "
                 "series (Peng et al., Chaos 5:82-87, 1995)."),
    FeatureEntry("ij_interval_ms", "morphology", "ms", "morphology.ij_interval_ms",
                 "Time from the I to the J extremum of the ensemble beat."),
    FeatureEntry("jk_interval_ms", "morphology", "ms", "morphology.jk_interval_ms",
                 "Time from the J to the K extremum of the ensemble beat."),
    FeatureEntry("j_width_ms", "morphology", "ms", "morphology.j_width_ms",
                 "Full width of the J wave at half its height above the I-K line."),
    FeatureEntry("jk_amplitude_cv_pct", "morphology", "%", "morphology.jk_amplitude_cv_pct",
                 "Beat-to-beat coefficient of variation of the J-K amplitude."),
    FeatureEntry("respiration_rate_per_min", "respiration", "/min", "respiration.rate_per_min",
                 "Breathing rate: 60 over the median breath-to-breath interval."),
    FeatureEntry("breath_interval_cv_pct", "respiration", "%", "respiration.interval_cv_pct",
                 "Coefficient of variation of the breath-to-breath intervals."),
    FeatureEntry("rsa_ms", "respiration", "ms", "respiration.modulation.rsa_ms",
                 "Respiratory sinus arrhythmia, peak to trough: median over breaths of the "
                 "longest minus the shortest beat interval (Grossman et al., Psychophysiology "
                 "27:702-714, 1990)."),
    FeatureEntry("respiratory_amplitude_index", "respiration", None,
                 "respiration.modulation.amplitude_index",
                 "Depth of the breathing modulation of the beat amplitude: (max - min) / mean "
                 "of its first-harmonic fit over the breathing phase."),
    FeatureEntry("usable_fraction", "quality", None, "quality.usable_fraction",
                 "Fraction of the recording not masked as movement or other artifact."),
)


class FeatureSchema(Schema):
    """One feature: where it sits in an analysis, what it means, its unit."""

    name = fields.String(required=True, metadata={"description": "Name in the feature vector."})
    family = fields.String(required=True, metadata={"description": "Feature family."})
    unit = fields.String(
        required=True,
        allow_none=True,
        metadata={"description": "Unit (UCUM symbol); null when dimensionless."},
    )
    path = fields.String(
        required=True, metadata={"description": "Dotted path of the value in an analysis."}
    )
    definition = fields.String(required=True, metadata={"description": "Plain definition."})


class CatalogueSchema(Schema):
    """Body of ``GET /v1/features``."""

    feature_set_version = fields.String(required=True)
    features = fields.List(fields.Nested(FeatureSchema), required=True)
