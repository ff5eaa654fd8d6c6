"""Response schemas: the engine's result dataclasses into JSON.

:class:`AnalysisResponseSchema` dumps an :class:`AnalysisReport` (the engine
result plus the request's ``include`` set and an id). It reads the result by
attribute, so this module never imports the engine. The bulky parts (beats,
windows, template, signals) appear only when the request asked for them.

``NaN`` and infinities never reach JSON: the last step of the dump walks the
document, replaces any non-finite number by ``null`` and names where it did so
in ``warnings``.
"""

from __future__ import annotations

import math
import uuid
from dataclasses import dataclass, field
from typing import Any

import numpy as np
from marshmallow import Schema, fields, missing, post_dump

from features.artifacts import KINDS
from schemas.catalogue import FeatureValueSchema, dump_feature_values

#: The caution carried by every analysis.
NOTICE = (
    "heartsway is not a medical device and this analysis is not a diagnosis. The values are "
    "estimates from a force or motion trace, for research and wellness monitoring; each comes "
    "with a confidence and may be wrong. Decisions about a person's health belong to qualified "
    "clinicians, under the regulation that applies where the person lives."
)

@dataclass(frozen=True)
class AnalysisReport:
    """What the service dumps: the engine result, what was asked for, and an id."""

    result: Any
    include: frozenset[str] = frozenset()
    analysis_id: str = field(default_factory=lambda: str(uuid.uuid4()))


# --------------------------------------------------------------------------
# Fields
# --------------------------------------------------------------------------


class Number(fields.Float):
    """A float (numpy scalars included) or null; non-finite values are fixed at the end."""

    def __init__(self, **kwargs: Any) -> None:
        kwargs.setdefault("allow_none", True)
        super().__init__(**kwargs)

    def _serialize(self, value: Any, attr: str | None, obj: Any, **kwargs: Any) -> Any:
        return None if value is None else float(value)


class NumberList(fields.Field[Any]):
    """A sequence or 1-D array of floats, dumped in one numpy call."""

    def __init__(self, **kwargs: Any) -> None:
        metadata = {"type": "array", "items": {"type": ["number", "null"]}}
        metadata.update(kwargs.pop("metadata", {}))
        super().__init__(metadata=metadata, **kwargs)

    def _serialize(self, value: Any, attr: str | None, obj: Any, **kwargs: Any) -> Any:
        return np.asarray(value, dtype=np.float64).reshape(-1).tolist()


def _strings(**kwargs: Any) -> fields.List[Any]:
    return fields.List(fields.String(), **kwargs)


def _flags() -> fields.List[Any]:
    return _strings(
        required=True, metadata={"description": "Names of anything the engine adapted or lacked."}
    )


def _confidence() -> Number:
    return Number(required=True, allow_none=False, metadata={"description": "Confidence, 0-1."})


# --------------------------------------------------------------------------
# Families
# --------------------------------------------------------------------------


class ChannelSummarySchema(Schema):
    label = fields.String(required=True)
    weight = Number(required=True, metadata={"description": "Weight in the fused trace."})


class InputSummarySchema(Schema):
    duration_s = Number(required=True)
    sampling_rate_hz = Number(required=True)
    n_samples = fields.Integer(required=True)
    channels = fields.Method("_channels", required=True, metadata={
        "type": "array", "items": {"$ref": "#/components/schemas/ChannelSummary"}
    })
    fusion_method = fields.String(required=True)
    amplitude_unit = fields.String(required=True)
    mains_hz_removed = Number(required=True)
    cop_cardiac_excursion_mm = Number(required=True)
    flags = _flags()

    def _channels(self, obj: Any) -> list[dict[str, Any]]:
        pairs = zip(obj.channel_labels, obj.channel_weights, strict=True)
        return [{"label": label, "weight": float(weight)} for label, weight in pairs]


class SegmentSchema(Schema):
    start_s = Number(required=True)
    end_s = Number(required=True)
    kind = fields.String(required=True, metadata={
        "description": "Why it is masked: " + ", ".join(sorted(KINDS)) + " (gap: samples the "
                       "device lost, with the filters' settling either side)."})


class QualitySchema(Schema):
    usable_fraction = Number(required=True)
    segments = fields.List(fields.Nested(SegmentSchema), required=True)
    confidence = _confidence()
    flags = _flags()


class OccupancySchema(Schema):
    occupied = fields.Boolean(required=True, allow_none=True)
    supported_mass_kg = Number(required=True)
    from_load = fields.Boolean(required=True, allow_none=True)
    from_heartbeat = fields.Boolean(required=True)
    confidence = _confidence()
    flags = _flags()


class HeartRateSchema(Schema):
    mean_bpm = Number(required=True)
    median_bpm = Number(required=True)
    envelope_bpm = Number(required=True, metadata={"description": "Rate from the trace envelope."})
    intervals_used = fields.Integer(required=True)
    confidence = _confidence()
    reason = fields.String(
        required=True, allow_none=True, metadata={"description": "Why mean_bpm is null, if it is."}
    )
    flags = _flags()


class BeatsSchema(Schema):
    """Beats (``include`` has ``beats``): J-wave times and the intervals between them."""

    times_s = NumberList(required=True, attribute="beats.times_s")
    confidence = NumberList(required=True, attribute="beats.confidence")
    polarity = fields.Integer(required=True, attribute="beats.polarity")
    interval_times_s = NumberList(required=True, attribute="intervals.times_s")
    intervals_ms = NumberList(required=True, attribute="intervals.intervals_ms")
    labels = _strings(required=True, attribute="interval_labels.labels")
    n_candidates = fields.Integer(required=True, attribute="beats.n_candidates")
    n_rejected = fields.Integer(required=True, attribute="beats.n_rejected")
    n_recovered = fields.Integer(required=True, attribute="beats.n_recovered")
    flags = _strings(required=True, attribute="beats.flags")


class TemplateSchema(Schema):
    """Ensemble beat (``include`` has ``template``), J-positive."""

    samples = NumberList(required=True, attribute="template")
    fs_hz = Number(required=True, attribute="template_fs_hz")
    start_s = Number(
        attribute="template_start_s",
        metadata={"description": "Time of the first sample relative to J, s (with morphology)."},
    )


class TimeDomainSchema(Schema):
    mean_nn_ms = Number(required=True)
    sdnn_ms = Number(required=True)
    rmssd_ms = Number(required=True)
    sdsd_ms = Number(required=True)
    pnn50_pct = Number(required=True)
    pnn20_pct = Number(required=True)
    cvnn_pct = Number(required=True)
    mean_hr_bpm = Number(required=True)
    sd_hr_bpm = Number(required=True)
    n_intervals = fields.Integer(required=True)
    duration_s = Number(required=True)
    confidence = _confidence()
    flags = _flags()


class FrequencyDomainSchema(Schema):
    vlf_power_ms2 = Number(required=True)
    lf_power_ms2 = Number(required=True)
    hf_power_ms2 = Number(required=True)
    total_power_ms2 = Number(required=True)
    lf_hf_ratio = Number(required=True)
    lf_nu = Number(required=True)
    hf_nu = Number(required=True)
    lf_peak_hz = Number(required=True)
    hf_peak_hz = Number(required=True)
    vlf_band_hz = NumberList(required=True)
    lf_band_hz = NumberList(required=True)
    hf_band_hz = NumberList(required=True)
    n_intervals = fields.Integer(required=True)
    duration_s = Number(required=True)
    confidence = _confidence()
    flags = _flags()


class NonlinearSchema(Schema):
    sd1_ms = Number(required=True)
    sd2_ms = Number(required=True)
    sd1_sd2_ratio = Number(required=True)
    sample_entropy = Number(required=True)
    dfa_alpha1 = Number(required=True)
    dfa_alpha2 = Number(required=True)
    n_intervals = fields.Integer(required=True)
    confidence = _confidence()
    flags = _flags()


class VariabilitySchema(Schema):
    time_domain = fields.Nested(TimeDomainSchema, required=True)
    frequency_domain = fields.Nested(FrequencyDomainSchema, required=True)
    nonlinear = fields.Nested(NonlinearSchema, required=True)
    n_intervals_total = fields.Integer(required=True)
    n_nn_used = fields.Integer(required=True)
    fraction_rejected = Number(required=True)
    confidence = _confidence()
    flags = _flags()


class SignalsSchema(Schema):
    """Spectra and series (``include`` has ``signals``)."""

    psd_frequencies_hz = NumberList(
        required=True, attribute="variability.frequency_domain.frequencies_hz"
    )
    psd_ms2_per_hz = NumberList(
        required=True, attribute="variability.frequency_domain.psd_ms2_per_hz"
    )
    nn_times_s = NumberList(required=True, attribute="interval_labels.nn_times_s")
    nn_intervals_ms = NumberList(required=True, attribute="interval_labels.nn_intervals_ms")
    breathing_signal = NumberList(
        attribute="respiration.breathing_signal",
        metadata={"description": "The breathing signal (with respiration), dimensionless."},
    )
    breathing_fs_hz = Number(attribute="respiration.breathing_fs_hz")
    breath_times_s = NumberList(attribute="respiration.breath_times_s")


class WaveSchema(Schema):
    """One located wave of the beat ensemble (H, I, J, K, L)."""

    name = fields.String(required=True)
    time_ms = Number(required=True, metadata={"description": "Time from the J wave, ms."})
    amplitude = Number(required=True)
    prominence = Number(required=True)
    location_sd_ms = Number(required=True)
    confidence = _confidence()


class MorphologySchema(Schema):
    """Waveform morphology of the beat ensemble."""

    amplitude_unit = fields.String(required=True)
    beats_offered = fields.Integer(required=True)
    beats_used = fields.Integer(required=True)
    waves = fields.List(fields.Nested(WaveSchema), required=True)
    i_amplitude = Number(required=True)
    j_amplitude = Number(required=True)
    k_amplitude = Number(required=True)
    ij_amplitude = Number(required=True)
    jk_amplitude = Number(required=True)
    ij_amplitude_per_kg = Number(required=True)
    jk_amplitude_per_kg = Number(required=True)
    ij_interval_ms = Number(required=True)
    jk_interval_ms = Number(required=True)
    ik_interval_ms = Number(required=True)
    hj_interval_ms = Number(required=True)
    j_width_ms = Number(required=True)
    template_correlation_median = Number(required=True)
    jk_amplitude_cv_pct = Number(required=True)
    wavelet_signature = fields.Method(
        "_signature",
        required=True,
        metadata={"type": ["array", "null"], "items": {"type": "number"}},
    )
    confidence = _confidence()
    flags = _flags()

    def _signature(self, obj: Any) -> list[float] | None:
        value = obj.wavelet_signature
        return None if value is None else [float(v) for v in value]


class ModulationSchema(Schema):
    """Respiratory modulation of the heartbeat."""

    rsa_ms = Number(required=True, metadata={"description": "Respiratory sinus arrhythmia, ms."})
    rsa_confidence = _confidence()
    amplitude_index = Number(required=True)
    amplitude_confidence = _confidence()
    timing_modulation_pct = Number(required=True)
    baseline_modulation_ratio = Number(required=True)
    cardiorespiratory_coherence = Number(required=True, attribute="coherence", metadata={
        "description": "Magnitude-squared coherence of the interval series and the breathing "
                       "signal at the breathing frequency (catalogue: cardiorespiratory_coherence)."
    })
    breaths_used = fields.Integer(required=True)
    confidence = _confidence()
    flags = _flags()


class RespirationSchema(Schema):
    """Breathing: rate, regularity, pauses, and how it modulates the heartbeat."""

    source = fields.String(required=True)
    rate_per_min = Number(required=True)
    counted_rate_per_min = Number(required=True)
    spectral_rate_per_min = Number(required=True)
    breath_count = fields.Integer(required=True)
    interval_sd_s = Number(required=True)
    interval_cv_pct = Number(required=True)
    rise_time_s = Number(required=True)
    fall_time_s = Number(required=True)
    rise_fall_ratio = Number(required=True)
    breathing_amplitude = Number(required=True)
    pause_count = fields.Integer(required=True, allow_none=True)
    pause_spans_s = fields.Method("_pauses", required=True, metadata={
        "type": "array", "items": {"type": "array", "items": {"type": "number"}},
    })
    pauses_per_hour = Number(required=True)
    longest_pause_s = Number(required=True)
    usable_duration_s = Number(required=True)
    modulation = fields.Nested(
        ModulationSchema,
        required=True,
        metadata={"description": "Each index is null (with a flag) when breathing or beats "
                                 "are too few."},
    )
    confidence = _confidence()
    flags = _flags()

    def _pauses(self, obj: Any) -> list[list[float]]:
        return [[float(start), float(end)] for start, end in obj.pause_spans_s]


# --------------------------------------------------------------------------
# The analysis
# --------------------------------------------------------------------------


def replace_non_finite(node: Any, path: str, found: list[str]) -> Any:
    if isinstance(node, float):
        if math.isfinite(node):
            return node
        found.append(path)
        return None
    if isinstance(node, dict):
        return {
            k: replace_non_finite(v, f"{path}.{k}" if path else k, found) for k, v in node.items()
        }
    if isinstance(node, list):
        return [replace_non_finite(v, f"{path}[{i}]", found) for i, v in enumerate(node)]
    return node


class WindowErrorSchema(Schema):
    """Why one window has no analysis."""

    kind = fields.String(required=True)
    code = fields.String(required=True)
    message = fields.String(required=True)


class WindowVectorSchema(Schema):
    """A window's feature vector."""

    feature_set_version = fields.String(required=True)
    features = fields.List(fields.Nested(FeatureValueSchema), required=True)


class WindowSchema(Schema):
    """One window of a windowed analysis."""

    index = fields.Integer(required=True)
    start_s = Number(required=True)
    end_s = Number(required=True)
    feature_vector = fields.Nested(WindowVectorSchema, required=True, allow_none=True)
    confidence = Number(required=True)
    usable_fraction = Number(required=True)
    flags = fields.List(fields.String(), required=True)
    error = fields.Nested(WindowErrorSchema, required=True, allow_none=True)


class WindowsSchema(Schema):
    """Consecutive windows over the recording."""

    window_s = Number(required=True)
    overlap_s = Number(required=True)
    step_s = Number(required=True)
    unanalysed_tail_s = Number(required=True, metadata={
        "description": "Time after the last whole window, not analysed (s)."})
    n_failed = fields.Integer(required=True)
    flags = fields.List(fields.String(), required=True)
    windows = fields.List(fields.Nested(WindowSchema), required=True)


class AnalysisResponseSchema(Schema):
    """Body of a 200 answer to ``POST /v1/analyses``."""

    analysis_id = fields.String(required=True, metadata={"description": "UUID of this analysis."})
    engine_version = fields.String(required=True, attribute="result.engine_version")
    feature_set_version = fields.String(required=True, attribute="result.feature_set_version")
    input = fields.Nested(InputSummarySchema, required=True, attribute="result.input")
    quality = fields.Nested(QualitySchema, required=True, attribute="result.quality")
    occupancy = fields.Nested(OccupancySchema, required=True, attribute="result.occupancy")
    heart_rate = fields.Nested(HeartRateSchema, required=True, attribute="result.heart_rate")
    beats = fields.Method("_beats", metadata={
        "description": "Present when `include` has `beats`.",
        "allOf": [{"$ref": "#/components/schemas/Beats"}],
    })
    variability = fields.Nested(VariabilitySchema, required=True, attribute="result.variability")
    morphology = fields.Nested(MorphologySchema, required=True, attribute="result.morphology",
                               metadata={"description": "Waveform morphology."})
    respiration = fields.Method("_respiration", required=True, metadata={
        "description": "Respiration, with the respiratory modulation of the heartbeat.",
        "allOf": [{"$ref": "#/components/schemas/Respiration"}],
    })
    template = fields.Method("_template", metadata={
        "description": "Present when `include` has `template`.",
        "allOf": [{"$ref": "#/components/schemas/Template"}],
    })
    signals = fields.Method("_signals", metadata={
        "description": "Present when `include` has `signals`.",
        "allOf": [{"$ref": "#/components/schemas/Signals"}],
    })
    windows = fields.Method("_windows", metadata={
        "description": (
            "Present when `include` has `windows` (with `options.window_s`): the analysis "
            "of consecutive windows, each with its own feature vector."
        ),
        "allOf": [{"$ref": "#/components/schemas/Windows"}],
    })
    feature_vector = fields.Method("_feature_vector", required=True, metadata={
        "type": "object",
        "description": (
            "Every catalogue feature (GET /v1/features) in catalogue order, each with its "
            "value (null with a reason when it cannot be computed), unit and confidence."
        ),
        "properties": {
            "feature_set_version": {"type": "string"},
            "features": {"type": "array",
                         "items": {"$ref": "#/components/schemas/FeatureValue"}},
        },
        "required": ["feature_set_version", "features"],
    })
    warnings = fields.Method("_warnings", required=True, metadata={
        "type": "array", "items": {"type": "string"},
    })
    notice = fields.Constant(NOTICE, required=True, dump_only=True, metadata={
        "type": "string", "description": "The caution that comes with every analysis."
    })

    # -- parts ------------------------------------------------------------

    def _asked(self, report: AnalysisReport, part: str) -> bool:
        return part in report.include

    def _beats(self, report: AnalysisReport) -> Any:
        if not self._asked(report, "beats"):
            return missing
        return _BEATS.dump(report.result)

    def _template(self, report: AnalysisReport) -> Any:
        if not self._asked(report, "template"):
            return missing
        morphology = report.result.morphology
        if morphology.template is not None:
            return _TEMPLATE.dump(morphology)
        return _TEMPLATE.dump(report.result.beats)

    def _signals(self, report: AnalysisReport) -> Any:
        if not self._asked(report, "signals"):
            return missing
        return _SIGNALS.dump(report.result)

    def _windows(self, report: AnalysisReport) -> Any:
        if not self._asked(report, "windows") or report.result.windows is None:
            return missing
        return _WINDOWS.dump(report.result.windows)

    def _respiration(self, report: AnalysisReport) -> Any:
        # The engine keeps the modulation beside the respiration; the response nests it.
        document: dict[str, Any] = _RESPIRATION.dump(report.result.respiration)
        document["modulation"] = _MODULATION.dump(report.result.modulation)
        return document

    def _feature_vector(self, report: AnalysisReport) -> dict[str, Any]:
        vector = report.result.feature_vector
        return {
            "feature_set_version": vector.feature_set_version,
            "features": dump_feature_values(vector.features),
        }

    def _warnings(self, report: AnalysisReport) -> list[str]:
        return [str(w) for w in report.result.warnings]

    @post_dump
    def _finish(self, data: dict[str, Any], **kwargs: Any) -> dict[str, Any]:
        warnings = list(data.get("warnings", []))
        found: list[str] = []
        data = replace_non_finite(data, "", found)
        if found:
            shown = ", ".join(found[:10]) + (" and more" if len(found) > 10 else "")
            warnings.append(f"non-finite values replaced by null at: {shown}")
        data["warnings"] = warnings
        return data


# Schemas hold no state between dumps: one instance of each serves every analysis
# (building them anew was most of the dump of a 5-minute analysis).
_BEATS = BeatsSchema()
_TEMPLATE = TemplateSchema()
_SIGNALS = SignalsSchema()
_WINDOWS = WindowsSchema()
_RESPIRATION = RespirationSchema()
_MODULATION = ModulationSchema()
_RESPONSE = AnalysisResponseSchema()


def dump_report(report: AnalysisReport) -> dict[str, Any]:
    """The JSON document of ``report`` (:class:`AnalysisResponseSchema`, built once)."""
    document: dict[str, Any] = _RESPONSE.dump(report)
    return document
