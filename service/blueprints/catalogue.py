"""The catalogue of features: names, families, units and definitions."""

from __future__ import annotations

from flask import Blueprint, Response, jsonify

from features.engine import FEATURE_SET_VERSION
from schemas.catalogue import FEATURES, CatalogueSchema

blueprint = Blueprint("catalogue", __name__)


@blueprint.get("/features")
def list_features() -> Response:
    """Every feature the engine reports, from the engine's own catalogue."""
    document = {"feature_set_version": FEATURE_SET_VERSION, "features": FEATURES}
    return jsonify(CatalogueSchema().dump(document))
