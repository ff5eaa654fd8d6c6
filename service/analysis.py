"""One analysis: typed request in, JSON document out (shared by the API and the CLI)."""

from __future__ import annotations

from typing import Any

import features
from schemas.engine_inputs import engine_inputs
from schemas.requests import AnalysisRequest
from schemas.responses import AnalysisReport, AnalysisResponseSchema


class EngineUnavailableError(RuntimeError):
    """The engine's entry point is not importable (answered with 503)."""


def run_analysis(request: AnalysisRequest) -> dict[str, Any]:
    """Run the engine once on ``request`` and dump its result.

    Raises
    ------
    features.errors.InvalidInputError, features.errors.UnusableSignalError
        From the engine, for the service to map to problem details.
    """
    analyze = getattr(features, "analyze", None)
    if analyze is None:  # TODO: drop once features.analyze is exported.
        raise EngineUnavailableError("The analysis engine is not loaded yet; retry later.")
    call = engine_inputs(request)
    result = analyze(
        call.channels,
        call.fs_hz,
        subject=call.subject,
        recording=call.recording,
        options=call.options,
    )
    report = AnalysisReport(result=result, include=request.options.include)
    document: dict[str, Any] = AnalysisResponseSchema().dump(report)
    return document
