"""Analyses: a trace in, heart-health features out."""

from __future__ import annotations

from typing import Any

from flask import Blueprint, Response, current_app

from schemas.requests import AnalysisRequest, AnalysisRequestSchema
from service.analysis import run_analysis
from service.bodies import read_analysis_request
from service.deadline import run_with_deadline
from service.fhir_output import analysis_response

blueprint = Blueprint("analyses", __name__)


@blueprint.post("/analyses")
def create_analysis() -> Response:
    """Analyse a trace sent as JSON or as a CSV upload."""
    config = current_app.config
    schema = AnalysisRequestSchema(
        max_samples=config["HEARTSWAY_MAX_SAMPLES"],
        max_channels=config["HEARTSWAY_MAX_CHANNELS"],
    )

    loaded: list[AnalysisRequest] = []

    def work() -> dict[str, Any]:
        loaded.append(read_analysis_request(schema))
        return run_analysis(loaded[0])

    # Reading the body, validation, the engine and the dump: all within the limit.
    document = run_with_deadline(config["HEARTSWAY_MAX_COMPUTE_S"], work)
    # JSON, or a FHIR R4 Bundle with `Accept: application/fhir+json` (service/fhir_output.py).
    return analysis_response(document, loaded[0] if loaded else None)
