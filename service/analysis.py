"""The one road through the engine: typed request in, one engine call, result out, dump.

:func:`analyze_request` runs the engine once and returns its result, which carries
everything the callers draw or dump (the feature vector, the windows when the request
asks for them, the fused trace when the caller keeps it); :func:`dump_analysis` turns
that result into the JSON document. The API (``POST /v1/analyses`` and
``POST /v1/reports``), ``heartsway analyze`` (with ``--plot``), ``heartsway batch`` and
``heartsway demo`` all go this way, so a recording gets the same numbers from each.
"""

from __future__ import annotations

import dataclasses
import time
from typing import Any

import features
from features.engine import AnalysisResult
from schemas.engine_inputs import engine_inputs
from schemas.requests import AnalysisRequest
from schemas.responses import AnalysisReport, AnalysisResponseSchema
from service.metrics import record_analysis


def ask_for_windows(body: dict[str, Any], window_s: float,
                    overlap_s: float = 0.0) -> dict[str, Any]:
    """``body`` (a request body, not yet loaded) asking for windows of ``window_s`` s too.

    For the command line, whose file forms have no window fields: the body's
    ``options.include`` gains ``windows`` and its ``options.window_s`` and
    ``options.window_overlap_s`` are set; the request schema then checks them.
    """
    options = dict(body.get("options") or {})
    include = list(options.get("include") or [])
    if "windows" not in include:
        include.append("windows")
    options.update(include=include, window_s=window_s, window_overlap_s=overlap_s)
    return {**body, "options": options}


def analyze_request(request: AnalysisRequest, *, keep_fused_trace: bool = False) -> AnalysisResult:
    """Run the engine once on ``request``.

    Parameters
    ----------
    request
        A validated request. With ``windows`` in its ``include``, the result carries the
        analysis of windows of ``options.window_s`` too.
    keep_fused_trace
        Keep the fused trace in the result (``AnalysisResult.fused_trace``), for a picture.

    Raises
    ------
    features.errors.InvalidInputError, features.errors.UnusableSignalError
        From the engine, for the service to map to problem details.
    """
    call = engine_inputs(request)
    options = call.options
    if keep_fused_trace:
        options = dataclasses.replace(options, keep_fused_trace=True)
    started = time.perf_counter()
    result = features.analyze(call.channels, call.fs_hz, subject=call.subject,
                              recording=call.recording, options=options)
    record_analysis(time.perf_counter() - started, sum(c.samples.size for c in call.channels))
    return result


def dump_analysis(result: AnalysisResult, request: AnalysisRequest) -> dict[str, Any]:
    """The JSON document of ``result``, with the parts ``request`` asked for."""
    report = AnalysisReport(result=result, include=request.options.include)
    document: dict[str, Any] = AnalysisResponseSchema().dump(report)
    return document


def run_analysis(request: AnalysisRequest) -> dict[str, Any]:
    """Run the engine once on ``request`` and dump its result (:func:`analyze_request`).

    Raises
    ------
    features.errors.InvalidInputError, features.errors.UnusableSignalError
        From the engine, for the service to map to problem details.
    """
    return dump_analysis(analyze_request(request), request)
