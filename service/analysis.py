"""One analysis: typed request in, JSON document out (shared by the API and the CLI)."""

from __future__ import annotations

import time
from typing import Any

import features
from schemas.engine_inputs import engine_inputs
from schemas.requests import AnalysisRequest
from schemas.responses import AnalysisReport, AnalysisResponseSchema
from service.metrics import record_analysis


def run_analysis(request: AnalysisRequest) -> dict[str, Any]:
    """Run the engine once on ``request`` and dump its result.

    Raises
    ------
    features.errors.InvalidInputError, features.errors.UnusableSignalError
        From the engine, for the service to map to problem details.
    """
    call = engine_inputs(request)
    started = time.perf_counter()
    result = features.analyze(
        call.channels,
        call.fs_hz,
        subject=call.subject,
        recording=call.recording,
        options=call.options,
    )
    windows = None
    if call.window_s is not None:
        windows = features.analyze_windows(
            call.channels, call.fs_hz, window_s=call.window_s,
            overlap_s=call.window_overlap_s, subject=call.subject,
            recording=call.recording, options=call.options,
        )
    record_analysis(time.perf_counter() - started, sum(c.samples.size for c in call.channels))
    report = AnalysisReport(result=result, include=request.options.include, windows=windows)
    document: dict[str, Any] = AnalysisResponseSchema().dump(report)
    return document
