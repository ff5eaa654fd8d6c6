"""Analyses: a trace in, heart-health features out."""

from __future__ import annotations

from flask import Blueprint, Response, current_app, jsonify

from schemas.requests import AnalysisRequestSchema
from service.analysis import run_analysis
from service.bodies import read_analysis_request

blueprint = Blueprint("analyses", __name__)


@blueprint.post("/analyses")
def create_analysis() -> Response:
    """Analyse a trace sent as JSON or as a CSV upload."""
    schema = AnalysisRequestSchema(max_samples=current_app.config["HEARTSWAY_MAX_SAMPLES"])
    analysis_request = read_analysis_request(schema)
    return jsonify(run_analysis(analysis_request))
