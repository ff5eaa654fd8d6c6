"""The typed client against the running service (gunicorn on loopback), and its retries."""

from __future__ import annotations

import json
import threading
from http.server import BaseHTTPRequestHandler, ThreadingHTTPServer

import pytest
from gunicorn_run import gunicorn
from trace_files import digital_trace, write_edf, write_wfdb

from client import (
    COMPUTE_TIME_EXCEEDED,
    UNUSABLE_SIGNAL,
    VALIDATION_ERROR,
    Analysis,
    ApiError,
    HeartswayClient,
    ServiceUnavailable,
)
from features.feature_vector import FEATURE_NAMES
from service.demo import demo_request_body


@pytest.fixture(scope="module")
def service(tmp_path_factory):
    with gunicorn(tmp_path_factory.mktemp("served"), workers=2) as (base, _):
        yield base


def test_analyze_typed_answer(service):
    api = HeartswayClient(service)
    assert api.health()["status"] == "ok"
    assert len(api.features()["features"]) == len(FEATURE_NAMES)
    analysis = api.analyze(demo_request_body())
    assert isinstance(analysis, Analysis)
    assert [f.name for f in analysis.features] == list(FEATURE_NAMES)
    # The demo armchair trace is simulated at about 66 bpm (service.demo); the client reads
    # the engine's estimate from the answer.
    assert analysis.heart_rate_bpm == analysis.feature("heart_rate_mean_bpm").value
    assert 55 < analysis.heart_rate_bpm < 80
    assert analysis.notice.startswith("heartsway is not a medical device")


def test_files_fhir_and_report(service, tmp_path):
    api = HeartswayClient(service)
    digital = digital_trace(seed=5)
    edf = api.analyze_file(write_edf(tmp_path / "a.edf", digital, 100.0))
    wfdb = api.analyze_file(write_wfdb(tmp_path, "a_w", digital, 100.0))
    # The same digital samples and gain in both files: only float64 rounding of the
    # physical values may differ, far below 1e-9 relative.
    assert edf.feature("sdnn_ms").value == pytest.approx(wfdb.feature("sdnn_ms").value, rel=1e-9)
    bundle = api.fhir_bundle(demo_request_body())
    assert bundle["resourceType"] == "Bundle" and bundle["type"] == "collection"
    assert api.report(demo_request_body(), image_format="svg").lstrip().startswith(b"<?xml")


def test_problems_become_api_errors(service):
    api = HeartswayClient(service, retries=0)
    with pytest.raises(ApiError) as caught:
        api.analyze({"sampling_rate_hz": 10})
    assert caught.value.status == 422
    assert caught.value.problem["type"] == VALIDATION_ERROR
    assert {e["field"] for e in caught.value.problem["errors"]} >= {"sampling_rate_hz"}


def test_the_clients_problem_types_are_the_services():
    # The client is standard library only, so it spells the URIs out; they must not drift.
    from client.api import JOB_NOT_FINISHED, STORAGE_FULL
    from service.problem_table import (
        COMPUTE_TIME_TYPE,
        JOB_NOT_FINISHED_TYPE,
        STORAGE_FULL_TYPE,
        UNUSABLE_SIGNAL_TYPE,
        VALIDATION_TYPE,
    )

    assert (VALIDATION_ERROR, UNUSABLE_SIGNAL, COMPUTE_TIME_EXCEEDED, JOB_NOT_FINISHED,
            STORAGE_FULL) == (VALIDATION_TYPE, UNUSABLE_SIGNAL_TYPE, COMPUTE_TIME_TYPE,
                              JOB_NOT_FINISHED_TYPE, STORAGE_FULL_TYPE)


class _Flaky(BaseHTTPRequestHandler):
    """Answers 503 (with Retry-After: 0) to the first `fail` POSTs, then a fixed analysis."""

    fail = 2
    calls: list[str] = []

    def do_POST(self):  # noqa: N802 - the http.server hook name
        self.rfile.read(int(self.headers["Content-Length"]))
        type(self).calls.append(self.path)
        if len(type(self).calls) <= type(self).fail:
            body = json.dumps({"type": "about:blank", "title": "Service Unavailable",
                               "status": 503, "detail": "busy"}).encode()
            self.send_response(503)
            self.send_header("Retry-After", "0")
            self.send_header("Content-Type", "application/problem+json")
        else:
            body = json.dumps({
                "analysis_id": "x", "engine_version": "0", "notice": "n", "warnings": [],
                "heart_rate": {"mean_bpm": 60.0, "confidence": 0.9},
                "feature_vector": {"feature_set_version": "1", "features": [
                    {"name": "heart_rate_mean_bpm", "value": 60.0, "unit": "/min",
                     "confidence": 0.9, "reason": None}]},
            }).encode()
            self.send_response(200)
            self.send_header("Content-Type", "application/json")
        self.send_header("Content-Length", str(len(body)))
        self.end_headers()
        self.wfile.write(body)

    def log_message(self, *args):
        pass


@pytest.fixture
def flaky():
    _Flaky.calls = []
    server = ThreadingHTTPServer(("127.0.0.1", 0), _Flaky)
    thread = threading.Thread(target=server.serve_forever, daemon=True)
    thread.start()
    yield f"http://127.0.0.1:{server.server_address[1]}"
    server.shutdown()
    server.server_close()
    thread.join(timeout=10)


def test_retries_on_503_then_succeeds(flaky):
    _Flaky.fail = 2
    analysis = HeartswayClient(flaky, retries=3, backoff_s=0.01).analyze({"x": 1})
    assert analysis.heart_rate_bpm == 60.0
    assert len(_Flaky.calls) == 3


def test_gives_up_after_the_retries(flaky):
    _Flaky.fail = 10
    with pytest.raises(ServiceUnavailable):
        HeartswayClient(flaky, retries=2, backoff_s=0.01).analyze({"x": 1})
    assert len(_Flaky.calls) == 3
