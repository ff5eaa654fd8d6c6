"""Analyses: a trace in, heart-health features out."""

from __future__ import annotations

from typing import Any

from flask import Blueprint, Response, current_app

from schemas.requests import AnalysisRequest
from service.analysis import run_analysis
from service.bodies import read_analysis_request
from service.deadline import run_with_deadline
from service.fhir_output import analysis_response

blueprint = Blueprint("analyses", __name__)


def _read_and_analyse() -> tuple[AnalysisRequest, dict[str, Any]]:
    request = read_analysis_request()
    return request, run_analysis(request)


@blueprint.post("/analyses")
def create_analysis() -> Response:
    """Analyse a trace sent as JSON or as a trace file upload."""
    # Reading the body, validation, the engine and the dump: all within the limit.
    request, document = run_with_deadline(
        current_app.config["HEARTSWAY_MAX_COMPUTE_S"], _read_and_analyse
    )
    # JSON, or a FHIR R4 Bundle with `Accept: application/fhir+json` (service/fhir_output.py).
    return analysis_response(document, request)
