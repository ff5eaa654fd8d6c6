"""The contract, served as YAML."""

from __future__ import annotations

from functools import cache

from flask import Blueprint, Response

blueprint = Blueprint("meta", __name__)

#: RFC 9512 media type for YAML.
YAML_MEDIA_TYPE = "application/yaml"


@cache
def _contract() -> str:
    # Imported here so that `python -m service.openapi` runs without a
    # half-imported copy of itself.
    from service.openapi import spec_yaml

    return spec_yaml()


@blueprint.get("/openapi.yaml")
def openapi_yaml() -> Response:
    """The OpenAPI 3.1 description of this service (the same text as the committed file)."""
    return Response(_contract(), mimetype=YAML_MEDIA_TYPE)
