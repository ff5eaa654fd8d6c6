"""The feature vector: one flat, ordered, versioned list of named scalars for ML pipelines.

Public API
----------
FEATURES
    The catalogue: a tuple of :class:`FeatureDefinition`, in vector order, assembled from
    the ``CATALOGUE`` that each family module declares next to its code. The service serves
    it at ``GET /v1/features``; ``docs/features.md`` is generated from it.
FEATURE_SET_VERSION
    Version of the catalogue (defined in :mod:`features.engine`); it changes whenever the
    definition of any feature changes.
feature_vector(result) -> FeatureVector
    Every catalogue entry, in catalogue order, read from one :class:`AnalysisResult`.
feature_definition(name) -> FeatureDefinition
    The catalogue entry called ``name``.
catalogue_markdown() -> str
    The catalogue as the Markdown text of ``docs/features.md``.

Conventions
-----------
Names are stable snake_case with the unit as a suffix (``_bpm``, ``_ms``, ``_ms2``, ``_pct``,
``_per_min``, ``_per_hour``, ``_s``); dimensionless features have none. Units are UCUM
symbols (``/min``, ``ms``, ``ms2``, ``%``, ``/h``, ``s``), None when dimensionless. Two units
depend on the input and are written as templates in the catalogue: ``{amplitude_unit}`` (the
unit of the fused trace, ``InputSummary.amplitude_unit``: ``N``, ``m/s^2`` or ``a.u.``) and
``{amplitude_unit}/kg``; :func:`feature_vector` fills them in.
"""

from __future__ import annotations

import functools
import hashlib
import math
import re
from collections.abc import Sequence
from dataclasses import dataclass, replace
from typing import Any

from features.calibration import calibrated_confidence, is_calibrated
from features.catalogue import AMPLITUDE_UNIT, FeatureDefinition
from features.engine import FEATURE_SET_VERSION, AnalysisResult
from features.heart_rate import CATALOGUE as HEART_RATE_CATALOGUE
from features.modulation import CATALOGUE as MODULATION_CATALOGUE
from features.morphology import CATALOGUE as MORPHOLOGY_CATALOGUE
from features.quality import CATALOGUE as QUALITY_CATALOGUE
from features.respiration import CATALOGUE as RESPIRATION_CATALOGUE
from features.variability import CATALOGUE as VARIABILITY_CATALOGUE

__all__ = [
    "AMPLITUDE_UNIT",
    "FEATURES",
    "FEATURE_NAMES",
    "FEATURE_SET_VERSION",
    "FeatureDefinition",
    "FeatureValue",
    "FeatureVector",
    "catalogue_fingerprint",
    "catalogue_markdown",
    "family_confidence",
    "feature_definition",
    "feature_vector",
]

OUTSIDE_VALID_RANGE = "outside_valid_range"
"""Reason of a value that was computed but lies outside its feature's valid range."""
NOT_FINITE = "not_finite"
"""Reason of a value that was computed as NaN or infinity."""
NOT_COMPUTED = "not_computed"
"""Reason when the family names no more specific one."""

_REASON_WORDS = ("needs", "too_", "no_", "not_found", "undefined", "limited", "zero", "flat")


@dataclass(frozen=True)
class FeatureValue:
    """One feature of one analysis.

    Attributes
    ----------
    name, unit
        As in the catalogue, with the unit template filled in.
    value
        Finite float inside the valid range, or None.
    confidence
        In [0, 1]; 0 when ``value`` is None.
    reason
        Why ``value`` is None (a flag of the family, ``"outside_valid_range"``,
        ``"not_finite"`` or ``"not_computed"``); None when there is a value.
    """

    name: str
    value: float | None
    unit: str | None
    confidence: float
    reason: str | None


@dataclass(frozen=True)
class FeatureVector:
    """All catalogue features of one analysis, in catalogue order."""

    feature_set_version: str
    features: tuple[FeatureValue, ...]

    def get(self, name: str) -> FeatureValue:
        """Return the feature called ``name``.

        Raises
        ------
        KeyError
            When ``name`` is not in the catalogue.
        """
        return value_named(self.features, name)

    def as_dict(self) -> dict[str, float | None]:
        """Name -> value (None when not computed), in catalogue order."""
        return values_by_name(self.features)


def value_named(values: Sequence[FeatureValue], name: str) -> FeatureValue:
    """The member of ``values`` called ``name``; KeyError when there is none (the lookup of
    :class:`FeatureVector` and :class:`features.night.NightSummary`)."""
    for value in values:
        if value.name == name:
            return value
    raise KeyError(name)


def values_by_name(values: Sequence[FeatureValue]) -> dict[str, float | None]:
    """Name -> value (None when not computed), in the order of ``values``."""
    return {v.name: v.value for v in values}


# --------------------------------------------------------------------------- the catalogue

FEATURES: tuple[FeatureDefinition, ...] = tuple(
    replace(d, confidence_calibrated=is_calibrated(d.name))
    for d in HEART_RATE_CATALOGUE
    + VARIABILITY_CATALOGUE
    + MORPHOLOGY_CATALOGUE
    + RESPIRATION_CATALOGUE
    + MODULATION_CATALOGUE
    + QUALITY_CATALOGUE
)
"""Every family's catalogue entries (declared next to its code), in vector order."""

FEATURE_NAMES: tuple[str, ...] = tuple(d.name for d in FEATURES)

# Features whose unit is the unit of the breathing signal: None when it is not the trace's.
_BREATHING_SIGNAL_UNIT = frozenset({"breathing_amplitude", "baseline_modulation_ratio"})
_INDEX = re.compile(r"^(\w+)\[(\d+)\]$")


def feature_definition(name: str) -> FeatureDefinition:
    """Return the catalogue entry called ``name``.

    Raises
    ------
    KeyError
        When ``name`` is not in the catalogue.
    """
    for d in FEATURES:
        if d.name == name:
            return d
    raise KeyError(name)


def feature_vector(result: AnalysisResult) -> FeatureVector:
    """Read every catalogue feature from one analysis, in catalogue order.

    Parameters
    ----------
    result
        The result of :func:`features.engine.analyze`.

    Returns
    -------
    FeatureVector
        One :class:`FeatureValue` per catalogue entry, always all of them, in the order of
        :data:`FEATURES`, with ``feature_set_version`` of the result.

    Notes
    -----
    1. The value is read at the entry's ``path``. It is kept when it is a finite number
       inside ``valid_range`` (inclusive); otherwise it becomes None with reason
       ``"not_finite"`` or ``"outside_valid_range"``.
    2. A value the engine left None gets as reason the heart-rate result's ``reason`` (for
       heart-rate features), else the first flag of the entry's flag tuples that names the
       feature (starts with its stem, for example ``sdnn`` for ``sdnn_ms``), else the first
       flag that reads as a reason (contains ``needs``, ``too_few``, ``no_``,
       ``not_found``, ``undefined``, ``limited`` or ``zero``), else ``"not_computed"``.
    3. The family confidence is read at ``confidence_path`` and clipped to [0, 1]; for
       morphology features that depend on located waves it is capped by the lowest
       confidence of those waves (a missing wave counts 0). For a feature with a fitted
       calibration model (:mod:`features.calibration`) the reported confidence is that
       model's P(|reported - true| <= tolerance) given the family confidence and the
       analysis's evidence; otherwise it is the family confidence. A None value has
       confidence 0.
    4. The unit template ``{amplitude_unit}`` becomes ``result.input.amplitude_unit``. When
       the breathing signal came from the centre of pressure (``respiration.source``), the
       two features measured in its unit (``breathing_amplitude``,
       ``baseline_modulation_ratio``) are None with reason
       ``"breathing_from_centre_of_pressure"``, so that a feature's unit never changes
       between analyses of one input.
    """
    unit = result.input.amplitude_unit
    from_cop = getattr(result.respiration, "source", "trace") != "trace"
    values = []
    memo: dict[str, float] = {}  # the analysis's evidence, read once for all calibrated features
    for d in FEATURES:
        resolved = None if d.unit is None else d.unit.replace(AMPLITUDE_UNIT, unit)
        if from_cop and d.name in _BREATHING_SIGNAL_UNIT:
            values.append(FeatureValue(d.name, None, resolved, 0.0,
                                       "breathing_from_centre_of_pressure"))
            continue
        value, reason = _value(d, result)
        confidence = 0.0 if value is None else _confidence(d, result, memo)
        values.append(FeatureValue(d.name, value, resolved, confidence, reason))
    return FeatureVector(feature_set_version=result.feature_set_version, features=tuple(values))


def catalogue_fingerprint() -> str:
    """SHA-256 (hex) of the catalogue's names, units, definitions, ranges and paths."""
    text = "\n".join(
        "|".join((d.name, d.family, str(d.unit), d.definition, repr(d.valid_range), d.path,
                  d.confidence_path, ",".join(d.confidence_waves), repr(d.tolerance),
                  d.tolerance_unit, d.tolerance_note))
        for d in FEATURES
    )
    return hashlib.sha256(text.encode("utf-8")).hexdigest()


def catalogue_markdown() -> str:
    """The text of ``docs/features.md``: every feature with definition, unit, range, reference.

    Regenerate the document with ``python tests/test_feature_list_doc.py``; the test in that
    file fails while the two differ.
    """
    lines = [
        "# Feature catalogue",
        "",
        "<!-- Generated by features.feature_vector.catalogue_markdown(); do not edit by hand."
        " -->",
        "",
        f"Feature set version: **{FEATURE_SET_VERSION}** ({len(FEATURES)} features; "
        f"catalogue fingerprint `{catalogue_fingerprint()[:16]}`).",
        "",
        "`features.feature_vector.feature_vector(result)` returns every feature below, in this "
        "order, with a value (a finite number inside the valid range, or null with a reason), "
        "its unit and a confidence in [0, 1]. Units are UCUM symbols; `{amplitude_unit}` is "
        "the unit of the fused input trace (`N`, `m/s^2`, or `a.u.` for mixed inputs). A "
        "computed value outside the valid range is reported as null with reason "
        "`outside_valid_range`. The version changes whenever a definition does.",
        "",
        "Each feature names a tolerance: an absolute one in the feature's own unit (for a "
        "feature measured in `%`, percentage points), or one relative to the true value "
        "(`%` of it, marked *relative*). Where the feature is marked *calibrated*, its "
        "confidence is the engine's estimate of the probability that the reported value "
        "lies within that tolerance of the truth, fitted on simulated recordings "
        "(`python -m validation.calibration --fit`; see docs/validation.md); elsewhere it is "
        "the family's own confidence, which ranks values but is not a probability.",
        "",
    ]
    family = None
    for i, d in enumerate(FEATURES, start=1):
        if d.family != family:
            family = d.family
            lines += [f"## {family.replace('_', ' ').capitalize()}", ""]
        conf = f"`{d.confidence_path}`"
        if d.confidence_waves:
            conf += f", capped by the confidence of waves {', '.join(d.confidence_waves)}"
        lines += [
            f"### {i}. `{d.name}`",
            "",
            f"- Definition: {d.definition}",
            f"- Unit: {'dimensionless' if d.unit is None else '`' + d.unit + '`'}",
            f"- Valid range: {_range_text(d.valid_range)}"
            + ("" if d.unit is None or d.valid_range == (None, None) else f" {d.unit}"),
            f"- Tolerance: {_tolerance_text(d)} ({d.tolerance_note})",
            f"- Source: `{d.path}`; confidence: "
            + (f"*calibrated*, P(within tolerance) from {conf} and the analysis's evidence"
               if d.confidence_calibrated else conf),
            f"- Reference: {d.reference}",
            "",
        ]
    return "\n".join(lines)


# --------------------------------------------------------------------------- kernels


def _tolerance_text(d: FeatureDefinition) -> str:
    if d.tolerance_relative:
        return f"{d.tolerance:g} % of the true value (relative)"
    unit = "" if d.tolerance_unit == "1" else f" {d.tolerance_unit}"
    return f"{d.tolerance:g}{unit}" + (" (percentage points)" if d.tolerance_unit == "%" else "")


def _range_text(rng: tuple[float | None, float | None]) -> str:
    lo, hi = rng
    if lo is None and hi is None:
        return "unbounded"
    if hi is None:
        return f">= {lo:g}"
    if lo is None:
        return f"<= {hi:g}"
    return f"{lo:g} to {hi:g}"


def _get(obj: Any, path: str) -> Any:
    """Follow a dotted attribute path; ``name[k]`` indexes a sequence (None when absent)."""
    for name, k in _steps(path):
        obj = getattr(obj, name, None)
        if k is not None and obj is not None:
            obj = obj[k] if k < len(obj) else None
        if obj is None:
            return None
    return obj


@functools.cache
def _steps(path: str) -> tuple[tuple[str, int | None], ...]:
    """The attribute names of a dotted path, each with its sequence index or None (the
    catalogue's few dozen paths, parsed once)."""
    steps = []
    for part in path.split("."):
        m = _INDEX.match(part)
        steps.append((m.group(1), int(m.group(2))) if m else (part, None))
    return tuple(steps)


def _value(d: FeatureDefinition, result: AnalysisResult) -> tuple[float | None, str | None]:
    raw = _get(result, d.path)
    if raw is None:
        return None, _reason(d, result)
    value = float(raw)
    if not math.isfinite(value):
        return None, NOT_FINITE
    lo, hi = d.valid_range
    if (lo is not None and value < lo) or (hi is not None and value > hi):
        return None, OUTSIDE_VALID_RANGE
    return value, None


def _reason(d: FeatureDefinition, result: AnalysisResult) -> str:
    if d.family == "heart_rate" and result.heart_rate.reason:
        return str(result.heart_rate.reason)
    flags = [str(f) for p in d.flags_paths for f in (_get(result, p) or ())]
    stem = re.sub(r"_(ms2|ms|bpm|pct|per_min|per_hour|s)$", "", d.path.rsplit(".", 1)[-1])
    for key in d.reason_keys or (_INDEX.sub(r"\1", stem),):
        named = re.compile(rf"(^|_){re.escape(key)}(_|$)")
        for f in flags:
            if named.search(f):
                return f
    # Then a flag that explains the whole family (it names no single feature), then any.
    reasons = [f for f in flags if any(w in f for w in _REASON_WORDS)]
    for f in reasons:
        if "_needs_" not in f and "_for_" not in f:
            return f
    return reasons[0] if reasons else NOT_COMPUTED


def family_confidence(d: FeatureDefinition, result: AnalysisResult) -> float:
    """The family's own confidence of feature ``d`` in [0, 1] (Notes of
    :func:`feature_vector`, step 3, before calibration)."""
    raw = _get(result, d.confidence_path)
    c = float(raw) if raw is not None and math.isfinite(float(raw)) else 0.0
    for name in d.confidence_waves:
        wave = result.morphology.wave(name)
        c = min(c, 0.0 if wave is None or wave.time_ms is None else float(wave.confidence))
    return min(1.0, max(0.0, c))


def _confidence(d: FeatureDefinition, result: AnalysisResult, memo: dict[str, float]
                ) -> float:
    c = family_confidence(d, result)
    if d.confidence_calibrated:
        c = calibrated_confidence(d.name, c, result, memo=memo)
    return c
