"""The feature catalogue and the feature vector as JSON.

The table itself is the engine's (:data:`features.feature_vector.FEATURES`): one
source for ``GET /v1/features``, the analysis response's ``feature_vector`` and
``docs/features.md``.
"""

from __future__ import annotations

from collections.abc import Iterable
from typing import Any

from marshmallow import Schema, fields

from features.feature_vector import FEATURES, FeatureDefinition

__all__ = ["FEATURES", "CatalogueSchema", "FeatureSchema", "FeatureValueSchema",
           "dump_feature_values"]


class FeatureSchema(Schema):
    """One entry of the catalogue."""

    name = fields.String(required=True, metadata={"description": "Name in the feature vector."})
    family = fields.String(required=True, metadata={"description": "Feature family."})
    unit = fields.String(
        required=True,
        allow_none=True,
        metadata={"description": (
            "Unit; null when dimensionless. `{amplitude_unit}` stands for the unit of the "
            "fused trace (N, m/s^2, or a.u. for mixed channels)."
        )},
    )
    definition = fields.String(required=True, metadata={"description": "Plain definition."})
    valid_range = fields.Method("_range", required=True, metadata={
        "type": "array",
        "items": {"type": ["number", "null"]},
        "minItems": 2,
        "maxItems": 2,
        "description": "[low, high] of plausible values; null where open.",
    })
    reference = fields.String(required=True, metadata={"description": "Source of the definition."})
    tolerance = fields.Float(required=True, metadata={
        "minimum": 0,
        "description": (
            "The error the confidence speaks of: for a calibrated feature the confidence is "
            "the estimated probability that |reported - true| <= tolerance."
        ),
    })
    tolerance_unit = fields.String(required=True, metadata={
        "description": (
            "The feature's own unit for an absolute tolerance (`1` when dimensionless; "
            "percentage points for a feature measured in %), or `%` of the true value when "
            "`tolerance_relative` is true."
        ),
    })
    tolerance_relative = fields.Boolean(required=True, metadata={
        "description": "True when the tolerance is a percentage of the true value."
    })
    confidence_calibrated = fields.Boolean(required=True, metadata={
        "description": (
            "True when the confidence is a fitted probability of lying within the "
            "tolerance; false when it is the family's own score (it ranks, but is not a "
            "probability)."
        ),
    })
    path = fields.String(
        required=True, metadata={"description": "Dotted path of the value in the engine result."}
    )

    def _range(self, entry: FeatureDefinition) -> list[float | None]:
        return [entry.valid_range[0], entry.valid_range[1]]


class CatalogueSchema(Schema):
    """``GET /v1/features``."""

    feature_set_version = fields.String(required=True)
    features = fields.List(fields.Nested(FeatureSchema), required=True)


class FeatureValueSchema(Schema):
    """One value of the feature vector."""

    name = fields.String(required=True)
    value = fields.Float(required=True, allow_none=True)
    unit = fields.String(required=True, allow_none=True)
    confidence = fields.Float(required=True, metadata={"minimum": 0, "maximum": 1})
    reason = fields.String(
        required=True, allow_none=True,
        metadata={"description": "Why the value is null (or was set aside); null otherwise."},
    )


def _number(value: Any) -> float | None:
    return None if value is None else float(value)


def _text(value: Any) -> str | None:
    return None if value is None else str(value)


def dump_feature_values(values: Iterable[Any]) -> list[dict[str, Any]]:
    """The feature values as :class:`FeatureValueSchema` dumps them, member for member.

    Written out because the schema adds nothing to five attributes read and converted:
    through marshmallow the feature vector of a 5-minute analysis cost as much as the
    rest of its dump.
    """
    return [{"name": _text(v.name), "value": _number(v.value), "unit": _text(v.unit),
             "confidence": _number(v.confidence), "reason": _text(v.reason)} for v in values]


def catalogue_document(version: str) -> dict[str, Any]:
    """The catalogue as the service serves it."""
    out: dict[str, Any] = CatalogueSchema().dump({"feature_set_version": version,
                                                  "features": FEATURES})
    return out
