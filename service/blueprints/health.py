"""Liveness and readiness."""

from __future__ import annotations

from flask import Blueprint, Response, jsonify

import features
from service.problems import problem

blueprint = Blueprint("health", __name__)


def engine_ready() -> bool:
    """True when the engine's entry point is importable."""
    return callable(getattr(features, "analyze", None))


@blueprint.get("/healthz")
def healthz() -> Response:
    """Liveness: the process answers HTTP."""
    return jsonify(status="ok", version=features.__version__)


@blueprint.get("/readyz")
def readyz() -> Response:
    """Readiness: the engine is loaded and can take analyses."""
    if not engine_ready():
        return problem(503, "The analysis engine is not loaded yet; retry later.")
    return jsonify(status="ready", version=features.__version__)
