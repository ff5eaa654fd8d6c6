"""The catalogue of features: names, families, units and definitions."""

from __future__ import annotations

from flask import Blueprint, Response, jsonify

import features
from schemas.catalogue import CatalogueSchema

blueprint = Blueprint("catalogue", __name__)


@blueprint.get("/features")
def list_features() -> Response:
    """Every feature the engine reports, from the engine's own catalogue."""
    # TODO(lead): the single source is expected in features (a tuple of frozen
    # records with name, family, unit and definition, plus FEATURE_SET_VERSION);
    # until it lands the catalogue is empty.
    entries = getattr(features, "FEATURE_CATALOGUE", ())
    version = getattr(features, "FEATURE_SET_VERSION", features.__version__)
    return jsonify(CatalogueSchema().dump({"feature_set_version": version, "features": entries}))
