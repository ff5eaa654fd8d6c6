"""Content negotiation of an analysis: the JSON document, or a FHIR R4 Bundle on request."""

from __future__ import annotations

import json
from typing import Any

from flask import Response, current_app, jsonify, request

from schemas.fhir import FHIR_JSON, fhir_bundle
from schemas.requests import AnalysisRequest

JSON_MEDIA_TYPE = "application/json"


def wants_fhir() -> bool:
    """True when the client's ``Accept`` prefers ``application/fhir+json`` to JSON.

    With no ``Accept`` (or ``*/*``) the answer stays the JSON document.
    """
    best = request.accept_mimetypes.best_match([JSON_MEDIA_TYPE, FHIR_JSON],
                                               default=JSON_MEDIA_TYPE)
    return best == FHIR_JSON


def analysis_response(document: dict[str, Any], loaded: AnalysisRequest | None) -> Response:
    """The JSON document, or its FHIR Bundle when the client asked for ``application/fhir+json``."""
    if not wants_fhir():
        response = jsonify(document)
    else:
        start = None
        if loaded is not None and loaded.recording is not None and loaded.recording.start_time:
            start = loaded.recording.start_time.isoformat()
        text = json.dumps(fhir_bundle(document, effective=start), allow_nan=False)
        response = current_app.response_class(text, mimetype=FHIR_JSON)
    response.vary.add("Accept")
    return response
