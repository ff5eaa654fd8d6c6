"""Privacy: no samples, subject fields, device ids or keys in any log line; nothing on disk."""

from __future__ import annotations

import io
import json
import logging
import os
import sys

import numpy as np
import pytest
from service_contract import multipart

from service import create_app
from service.demo import demo_request_body
from service.loadtest import request, serve
from service.logs import LOGGER_NAME, JsonFormatter

DEVICE_ID = "plate-SN-4471-XQ"
BODY_MASS_KG = 71.3
AGE_YEARS = 83.0
LABEL = "resident-room-12-front"
KEY = "key-0123456789abcdefXYZ"


def _private_body():
    body = demo_request_body()
    body["subject"] = {"body_mass_kg": BODY_MASS_KG, "age_years": AGE_YEARS, "sex": "female"}
    body["recording"]["device_id"] = DEVICE_ID
    body["recording"]["start_time"] = "2026-11-30T19:42:00+01:00"
    body["channels"][0]["label"] = LABEL
    return body


def _csv(body) -> bytes:
    columns = [np.asarray(c["samples"]) for c in body["channels"]]
    header = ",".join(c["label"] for c in body["channels"])
    rows = "\n".join(",".join(f"{v:.3f}" for v in row) for row in np.column_stack(columns))
    return f"{header}\n{rows}\n".encode()


def _secrets(body) -> list[str]:
    """Strings that must appear in no log line: identifiers, subject fields, sample values."""
    samples = body["channels"][0]["samples"]
    distinctive = sorted({f"{v}" for v in samples if len(f"{v}") >= 6})[:300]
    return [DEVICE_ID, LABEL, "71.3", "female", "2026-11-30", KEY, *distinctive]


def _full_requests(client, body, monkeypatch):
    """JSON, CSV upload, a schema error, an engine error, an unhandled error, a bad key."""
    import service.blueprints.analyses as analyses

    assert client.post("/v1/analyses", json=body,
                       headers={"Authorization": f"Bearer {KEY}"}).status_code == 200
    upload = multipart({"sampling_rate_hz": "250"}, _csv(body))
    assert client.post("/v1/analyses", headers={"Authorization": f"Bearer {KEY}"},
                       **upload).status_code == 200
    broken = {**body, "subject": {"body_mass_kg": "71.3"}}
    assert client.post("/v1/analyses", json=broken,
                       headers={"Authorization": f"Bearer {KEY}"}).status_code == 422
    short = {**body, "channels": [{**c, "samples": c["samples"][:1000]} for c in body["channels"]]}
    assert client.post("/v1/analyses", json=short,
                       headers={"Authorization": f"Bearer {KEY}"}).status_code == 422
    assert client.post("/v1/analyses", json=body,
                       headers={"Authorization": f"Bearer {KEY}-wrong"}).status_code == 401

    def explode(analysis_request):
        # An exception whose message quotes the very data it was raised on.
        sample = analysis_request.channels[0].samples[7]
        raise RuntimeError(f"cannot use {sample!r} from {DEVICE_ID} ({BODY_MASS_KG} kg)")

    monkeypatch.setattr(analyses, "run_analysis", explode)
    assert client.post("/v1/analyses", json=body,
                       headers={"Authorization": f"Bearer {KEY}"}).status_code == 500


@pytest.fixture
def every_log_line():
    """All records of every logger at DEBUG: as plain text (with any traceback
    rendered in full, so that an exception message would show) and, for the
    service's logger, as the JSON lines the service writes."""
    plain, structured = io.StringIO(), io.StringIO()
    handler = logging.StreamHandler(plain)
    handler.setLevel(logging.DEBUG)
    json_handler = logging.StreamHandler(structured)
    json_handler.setFormatter(JsonFormatter())
    service_logger = logging.getLogger(LOGGER_NAME)
    loggers = [logging.getLogger(), service_logger, logging.getLogger("werkzeug"),
               logging.getLogger("service"), logging.getLogger("gunicorn.error")]
    levels = [lg.level for lg in loggers]
    for lg in loggers:
        lg.addHandler(handler)
        lg.setLevel(logging.DEBUG)
    service_logger.addHandler(json_handler)
    try:
        yield lambda: (plain.getvalue(), structured.getvalue())
    finally:
        service_logger.removeHandler(json_handler)
        for lg, level in zip(loggers, levels, strict=True):
            lg.removeHandler(handler)
            lg.setLevel(level)


def test_no_health_data_in_any_log_line_in_process(monkeypatch, every_log_line, capfd):
    body = _private_body()
    app = create_app({"HEARTSWAY_LOG_LEVEL": "DEBUG", "HEARTSWAY_API_KEYS": (KEY,)})
    _full_requests(app.test_client(), body, monkeypatch)
    captured = capfd.readouterr()
    plain, structured = every_log_line()
    text = plain + structured + captured.out + captured.err
    json_lines = [json.loads(line) for line in structured.splitlines()]
    assert len(json_lines) >= 7  # one per request and the unhandled error, at least
    for secret in _secrets(body):
        assert secret not in text, secret
    # The unhandled error is logged by type and frames (file:line), never by message.
    error = next(line for line in json_lines if line["event"] == "unhandled_error")
    assert error["exception"] == "RuntimeError"
    assert any("test_reliability_privacy.py" in frame for frame in error["stack"])
    assert all(":" in frame and " in " in frame for frame in error["stack"])
    assert "cannot use" not in text and "traceback" not in error


def test_no_health_data_in_gunicorn_output(tmp_path):
    body = _private_body()
    env = {"HEARTSWAY_WORKERS": "1", "HEARTSWAY_LOG_LEVEL": "DEBUG", "HEARTSWAY_API_KEYS": KEY}
    with serve(tmp_path, env) as server:
        headers = {"Content-Type": "application/json", "Authorization": f"Bearer {KEY}"}
        status, _ = request(server.base, "POST", "/v1/analyses", json.dumps(body).encode(),
                            headers)
        assert status == 200
        status, _ = request(server.base, "POST", "/v1/analyses",
                            json.dumps({**body, "subject": {"age_years": "83"}}).encode(),
                            headers)
        assert status == 422
        log = server.log()
    assert '"event": "request"' in log
    for secret in _secrets(body):
        assert secret not in log, secret


_WRITE_FLAGS = os.O_WRONLY | os.O_RDWR | os.O_CREAT | os.O_APPEND


def test_no_request_data_is_written_to_disk(monkeypatch):
    """An audit hook (PEP 578) sees every file opened for writing while requests run."""
    written: list[str] = []
    watching = [False]

    def audit(event, args):
        if not watching[0]:
            return
        if event == "open":
            path, mode, flags = args
            writing = (isinstance(mode, str) and any(c in mode for c in "wax+")) or (
                mode is None and isinstance(flags, int) and flags & _WRITE_FLAGS)
            # Byte-code caches of modules imported lazily are not request data.
            if writing and "__pycache__" not in str(path):
                written.append(str(path))
        elif event in {"os.mkdir", "os.rename", "shutil.copyfile", "tempfile.mkstemp",
                       "tempfile.mkdtemp"}:
            written.append(f"{event} {args[0]}")

    sys.addaudithook(audit)
    body = _private_body()
    client = create_app({"HEARTSWAY_API_KEYS": (KEY,)}).test_client()
    watching[0] = True
    try:
        _full_requests(client, body, monkeypatch)
    finally:
        watching[0] = False
    assert written == []
