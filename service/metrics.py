"""Prometheus metrics at ``/metrics``: requests, latency, analysis time, samples processed.

Under gunicorn the workers are separate processes, so the counts live in
prometheus_client's multiprocess mode: every worker writes its values to files
in ``PROMETHEUS_MULTIPROC_DIR`` and a scrape, answered by any worker, adds them
all up. :func:`prepare_multiprocess_dir` (called by :mod:`service.gunicorn_conf`
when gunicorn reads its settings, before the app is loaded) makes a fresh
directory for each master and removes it when the master exits.

prometheus_client picks its storage when first imported, so this module imports
it only inside functions, after the directory has been set.

Metrics
-------
``heartsway_http_requests_total{route, method, status}``
    Requests answered (route is the matched rule, ``unmatched`` for a 404).
``heartsway_http_request_duration_seconds{route}``
    Time from the start of the request to its response.
``heartsway_analysis_duration_seconds``
    Time of one engine call (``features.analyze``).
``heartsway_samples_processed_total``
    Samples analysed, all channels together.
"""

from __future__ import annotations

import atexit
import os
import shutil
import tempfile
import threading
import time
from typing import Any

from flask import Blueprint, Flask, Response, g, request

MULTIPROC_VARIABLE = "PROMETHEUS_MULTIPROC_DIR"
#: Latency buckets, s: from a health check to a long analysis.
LATENCY_BUCKETS_S = (0.005, 0.01, 0.025, 0.05, 0.1, 0.25, 0.5, 1.0, 2.5, 5.0, 10.0, 30.0, 60.0)
#: Engine time buckets, s.
ANALYSIS_BUCKETS_S = (0.05, 0.1, 0.25, 0.5, 1.0, 2.5, 5.0, 10.0, 30.0, 60.0)

blueprint = Blueprint("metrics", __name__)
_LOCK = threading.Lock()
_METRICS: dict[str, Any] = {}


def prepare_multiprocess_dir() -> str:
    """Point ``PROMETHEUS_MULTIPROC_DIR`` at a fresh temporary directory (unless set).

    The directory is removed when the process that made it exits; forked
    workers inherit the variable and never remove it.

    Returns
    -------
    str
        The directory in use.
    """
    given = os.environ.get(MULTIPROC_VARIABLE)
    if given:
        return given
    path = tempfile.mkdtemp(prefix="heartsway-metrics-")
    os.environ[MULTIPROC_VARIABLE] = path
    owner = os.getpid()

    def remove() -> None:
        if os.getpid() == owner:
            shutil.rmtree(path, ignore_errors=True)

    atexit.register(remove)
    return path


def child_exit(server: Any, worker: Any) -> None:
    """gunicorn hook: a worker died; drop its live-gauge files (its counts stay)."""
    if os.environ.get(MULTIPROC_VARIABLE):
        from prometheus_client import multiprocess

        multiprocess.mark_process_dead(worker.pid)


def _metrics() -> dict[str, Any]:
    with _LOCK:
        if not _METRICS:
            from prometheus_client import CollectorRegistry, Counter, Histogram

            # Multiprocess mode reads the files at scrape time; otherwise a private
            # registry (not the global one, so that many apps in one process can coexist).
            registry = None if os.environ.get(MULTIPROC_VARIABLE) else CollectorRegistry()
            _METRICS.update(
                registry=registry,
                requests=Counter("heartsway_http_requests", "HTTP requests answered.",
                                 ("route", "method", "status"), registry=registry),
                latency=Histogram("heartsway_http_request_duration_seconds",
                                  "Time to answer a request, s.", ("route",),
                                  buckets=LATENCY_BUCKETS_S, registry=registry),
                analysis=Histogram("heartsway_analysis_duration_seconds",
                                   "Time of one engine call, s.",
                                   buckets=ANALYSIS_BUCKETS_S, registry=registry),
                samples=Counter("heartsway_samples_processed",
                                "Samples analysed, all channels together.", registry=registry),
            )
        return _METRICS


def record_analysis(duration_s: float, n_samples: int) -> None:
    """Count one engine call (a no-op in processes without metrics, such as the CLI)."""
    if _METRICS:
        _METRICS["analysis"].observe(duration_s)
        _METRICS["samples"].inc(n_samples)


def _route() -> str:
    return request.url_rule.rule if request.url_rule is not None else "unmatched"


def _start() -> None:
    g.metrics_started = time.perf_counter()


def _finish(response: Response) -> Response:
    metrics = _metrics()
    elapsed = time.perf_counter() - g.get("metrics_started", time.perf_counter())
    route = _route()
    metrics["requests"].labels(route, request.method, str(response.status_code)).inc()
    metrics["latency"].labels(route).observe(elapsed)
    return response


@blueprint.get("/metrics")
def scrape() -> Response:
    """The metrics in the Prometheus text format (summed over every worker process)."""
    from prometheus_client import CONTENT_TYPE_LATEST, CollectorRegistry, generate_latest

    metrics = _metrics()
    registry = metrics["registry"]
    if registry is None:
        from prometheus_client import multiprocess

        registry = CollectorRegistry()
        multiprocess.MultiProcessCollector(registry)
    return Response(generate_latest(registry), headers={"Content-Type": CONTENT_TYPE_LATEST})


def init_app(app: Flask) -> None:
    """Count every request of ``app`` and serve ``/metrics``."""
    _metrics()
    app.before_request(_start)
    app.after_request(_finish)
    app.register_blueprint(blueprint)
