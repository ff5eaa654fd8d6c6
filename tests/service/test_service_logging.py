"""Log lines: one JSON object per request, with a request id, and no health data."""

from __future__ import annotations

import json
import os

from service.demo import demo_request_body


def test_every_request_logs_one_json_line_with_its_id(client, log_lines):
    response = client.get("/healthz", headers={"X-Request-ID": "trace-42"})
    lines = log_lines()
    assert len(lines) == 1
    line = lines[0]
    assert line["event"] == "request"
    assert line["request_id"] == "trace-42" == response.headers["X-Request-ID"]
    assert line["route"] == "/healthz" and line["status"] == 200 and line["method"] == "GET"
    assert line["duration_ms"] >= 0
    assert line["pid"] == os.getpid()  # which worker served it (service.loadtest counts by it)


def test_no_samples_subject_or_device_id_reach_the_logs(client, log_lines):
    body = demo_request_body()
    body["subject"] = {"body_mass_kg": 71.3, "age_years": 83, "sex": "female"}
    body["recording"]["device_id"] = "plate-SN-4471-XQ"
    body["recording"]["start_time"] = "2026-11-30T19:42:00+01:00"
    body["channels"][0]["label"] = "resident-room-12-front"
    assert client.post("/v1/analyses", json=body).status_code == 200
    # A 422 and a 500 too: their error paths must not log the body either.
    broken = {**body, "subject": {"body_mass_kg": "71.3"}}
    assert client.post("/v1/analyses", json=broken).status_code == 422
    text = "\n".join(json.dumps(line) for line in log_lines())
    assert text
    for secret in ("plate-SN-4471-XQ", "71.3", "female", "2026-11-30", "resident-room-12"):
        assert secret not in text, secret
    for value in body["channels"][0]["samples"][:200]:
        assert f"{value}" not in text or len(f"{value}") < 6


def test_unexpected_error_is_logged_with_its_request_id(app, log_lines, monkeypatch):
    import service.blueprints.analyses as analyses

    def explode(request):
        raise RuntimeError("boom")

    monkeypatch.setattr(analyses, "run_analysis", explode)
    body = {"sampling_rate_hz": 100.0,
            "channels": [{"label": "a", "quantity": "force", "unit": "N", "samples": [1.0]}]}
    response = app.test_client().post("/v1/analyses", json=body)
    assert response.status_code == 500
    events = {line["event"]: line for line in log_lines()}
    assert events["unhandled_error"]["request_id"] == response.headers["X-Request-ID"]
    assert events["unhandled_error"]["exception"] == "RuntimeError"
