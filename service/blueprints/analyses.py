"""Analyses: a trace in, heart-health features out."""

from __future__ import annotations

from typing import Any

from flask import Blueprint, Response, current_app, jsonify

from schemas.requests import AnalysisRequestSchema
from service.analysis import run_analysis
from service.bodies import read_analysis_request
from service.deadline import run_with_deadline

blueprint = Blueprint("analyses", __name__)


@blueprint.post("/analyses")
def create_analysis() -> Response:
    """Analyse a trace sent as JSON or as a CSV upload."""
    config = current_app.config
    schema = AnalysisRequestSchema(
        max_samples=config["HEARTSWAY_MAX_SAMPLES"],
        max_channels=config["HEARTSWAY_MAX_CHANNELS"],
    )

    def work() -> dict[str, Any]:
        return run_analysis(read_analysis_request(schema))

    # Reading the body, validation, the engine and the dump: all within the limit.
    return jsonify(run_with_deadline(config["HEARTSWAY_MAX_COMPUTE_S"], work))
