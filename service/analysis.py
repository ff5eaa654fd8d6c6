"""The one road through the engine: typed request in, one engine call, result out, dump.

:func:`analyze_request` runs the engine once and returns its result, which carries
everything the callers draw or dump (the feature vector, the windows when the request
asks for them, the fused trace when the caller keeps it); :func:`dump_analysis` turns
that result into the JSON document. The API (``POST /v1/analyses`` and
``POST /v1/reports``), ``heartsway analyze`` (with ``--plot``), ``heartsway batch`` and
``heartsway demo`` all go this way, so a recording gets the same numbers from each.
A night job goes through :func:`analyze_night`: the same engine window by window
(:func:`features.windows.iter_windows`, as :func:`features.windows.analyze_windows` runs
it), then :func:`features.night.summarize_night`.
"""

from __future__ import annotations

import dataclasses
import time
from collections.abc import Callable, Iterator
from typing import Any

import features
from features.engine import AnalysisResult
from features.night import NightSummary, summarize_night
from features.windows import WindowedAnalysis, WindowResult, collect_windows, iter_windows
from schemas.engine_inputs import EngineCall, engine_inputs
from schemas.requests import AnalysisRequest
from schemas.responses import AnalysisReport, dump_report
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


def analyze_request_windows(request: AnalysisRequest) -> WindowedAnalysis:
    """Only the windows of ``request`` (its ``options.window_s`` and ``window_overlap_s``).

    For a table of windows (``heartsway batch --window-s``), which has no use for the
    analysis of the whole recording that :func:`analyze_request` also runs: the same
    :func:`features.analyze_windows` that the engine runs for ``include=windows``.

    Raises
    ------
    features.errors.InvalidInputError
        From the engine, for the service to map to problem details; also when the request
        asks for no windows.
    """
    call = engine_inputs(request)
    options = call.options
    if options.window_s is None:
        raise features.InvalidInputError(
            "options.window_s", "`options.window_s` must be given for an analysis of windows; "
            "got none.")
    started = time.perf_counter()
    windowed = features.analyze_windows(call.channels, call.fs_hz, window_s=options.window_s,
                                        overlap_s=options.window_overlap_s,
                                        subject=call.subject, recording=call.recording,
                                        options=options)
    record_analysis(time.perf_counter() - started, sum(c.samples.size for c in call.channels))
    return windowed


def dump_analysis(result: AnalysisResult, request: AnalysisRequest) -> dict[str, Any]:
    """The JSON document of ``result``, with the parts ``request`` asked for."""
    report = AnalysisReport(result=result, include=request.options.include)
    return dump_report(report)


def run_analysis(request: AnalysisRequest) -> dict[str, Any]:
    """Run the engine once on ``request`` and dump its result (:func:`analyze_request`).

    Raises
    ------
    features.errors.InvalidInputError, features.errors.UnusableSignalError
        From the engine, for the service to map to problem details.
    """
    return dump_analysis(analyze_request(request), request)


def night_windows(call: EngineCall, *, window_s: float,
                  overlap_s: float = 0.0) -> tuple[int, Iterator[WindowResult]]:
    """The windows of a night, checked now and analysed as they are drawn.

    Returns the number of windows and the iterator of :func:`features.windows.iter_windows`
    over ``call``'s channels (sliced window by window: a lazily read file stays in the file).

    Raises
    ------
    features.errors.InvalidInputError
        At once, for the call (rate, channels, window length, options).
    """
    windows = iter_windows(call.channels, call.fs_hz, window_s=window_s, overlap_s=overlap_s,
                           subject=call.subject, recording=call.recording,
                           options=call.options)
    n = len(call.channels[0].samples)
    n_win = round(window_s * call.fs_hz)
    n_step = n_win - round(overlap_s * call.fs_hz)
    return (n - n_win) // n_step + 1, windows


def analyze_night(call: EngineCall, *, window_s: float, overlap_s: float = 0.0,
                  on_window: Callable[[int, int], None] | None = None,
                  ) -> tuple[WindowedAnalysis, NightSummary]:
    """Run the engine over a night window by window, then summarise it (a night job's road).

    The windows are those of :func:`features.windows.analyze_windows` on the same channels
    (the same function underneath); ``on_window(done, total)`` is called after each one
    and may raise to stop the night.

    Raises
    ------
    features.errors.InvalidInputError
        For the call (see :func:`night_windows`).
    """
    total, windows = night_windows(call, window_s=window_s, overlap_s=overlap_s)
    done: list[WindowResult] = []
    started = time.perf_counter()
    for window in windows:
        done.append(window)
        if on_window is not None:
            on_window(len(done), total)
    windowed = collect_windows(done, len(call.channels[0].samples), call.fs_hz,
                               window_s=window_s, overlap_s=overlap_s)
    n_samples = sum(len(c.samples) for c in call.channels)
    record_analysis(time.perf_counter() - started, n_samples)
    return windowed, summarize_night(windowed)
