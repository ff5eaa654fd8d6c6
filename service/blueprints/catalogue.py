"""The catalogue of features: names, families, units, definitions and references."""

from __future__ import annotations

from flask import Blueprint, Response, jsonify

from features.engine import FEATURE_SET_VERSION
from schemas.catalogue import catalogue_document

blueprint = Blueprint("catalogue", __name__)


@blueprint.get("/features")
def list_features() -> Response:
    """Every feature the engine reports, from the engine's own catalogue."""
    return jsonify(catalogue_document(FEATURE_SET_VERSION))
