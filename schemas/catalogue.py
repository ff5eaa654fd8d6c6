"""Schema of the feature catalogue served at ``GET /v1/features``."""

from __future__ import annotations

from marshmallow import Schema, fields


class FeatureSchema(Schema):
    """One feature: where it sits in an analysis, what it means, its unit."""

    name = fields.String(required=True, metadata={"description": "Name in the feature vector."})
    family = fields.String(required=True, metadata={"description": "Feature family."})
    unit = fields.String(
        required=True,
        allow_none=True,
        metadata={"description": "Unit (UCUM-style symbol); null when dimensionless."},
    )
    definition = fields.String(required=True, metadata={"description": "Plain definition."})


class CatalogueSchema(Schema):
    """Body of ``GET /v1/features``."""

    feature_set_version = fields.String(required=True)
    features = fields.List(fields.Nested(FeatureSchema), required=True)
