"""The heartsway command line: analyze FILE agrees with the API; demo; errors."""

from __future__ import annotations

import json

import numpy as np
import pytest
from service_contract import multipart

from service.cli import main
from service.demo import demo_request_body


@pytest.fixture(scope="module")
def demo_csv(tmp_path_factory):
    body = demo_request_body()
    path = tmp_path_factory.mktemp("csv") / "evening.csv"
    columns = np.column_stack([c["samples"] for c in body["channels"]])
    lines = [",".join(c["label"] for c in body["channels"])]
    lines += [",".join(f"{v:.3f}" for v in row) for row in columns]
    path.write_text("\n".join(lines) + "\n", encoding="utf-8")
    return path, body


def test_analyze_gives_the_same_numbers_as_the_api(demo_csv, client, capsys):
    path, body = demo_csv
    assert main(["analyze", str(path), "--rate", "250", "--include", "beats"]) == 0
    from_cli = json.loads(capsys.readouterr().out)
    response = client.post(
        "/v1/analyses",
        **multipart({"sampling_rate_hz": "250", "include": "beats"}, path.read_bytes()),
    )
    from_api = response.get_json()
    assert response.status_code == 200
    for key in ("feature_vector", "heart_rate", "variability", "quality", "beats", "input"):
        assert from_cli[key] == from_api[key], key
    assert from_cli["notice"] == from_api["notice"]


def test_analyze_reports_bad_input_on_stderr_with_exit_2(tmp_path, capsys):
    path = tmp_path / "bad.csv"
    path.write_text("a,b\n1,2\n3\n", encoding="utf-8")
    assert main(["analyze", str(path), "--rate", "10"]) == 2
    error = json.loads(capsys.readouterr().err)
    assert {e["field"] for e in error["errors"]} == {"file", "sampling_rate_hz"}


def test_analyze_of_a_stuck_sensor_is_exit_3_with_the_api_problem(tmp_path, capsys):
    # 30 s of a load cell reading 700 N without the least change: stuck or disconnected.
    # The engine's UnusableSignalError takes the same row of service/problem_table.py on
    # the CLI as on the API (tests/service/test_service_errors.py): type, title, reason.
    path = tmp_path / "stuck.csv"
    path.write_text("seat\n" + "700\n" * (250 * 30), encoding="utf-8")
    assert main(["analyze", str(path), "--rate", "250"]) == 3
    problem = json.loads(capsys.readouterr().err)
    assert problem["type"] == "tag:heartsway.dev,2026:problem/unusable-signal"
    assert problem["status"] == 422
    assert problem["reason"] == "flat_signal"


def test_analyze_of_a_missing_file_is_exit_2(tmp_path, capsys):
    assert main(["analyze", str(tmp_path / "none.csv"), "--rate", "250"]) == 2
    problem = json.loads(capsys.readouterr().err)
    assert problem["type"] == "tag:heartsway.dev,2026:problem/validation-error"
    assert [e["field"] for e in problem["errors"]] == ["file"]
    assert "none.csv" in problem["errors"][0]["detail"]


def test_demo_prints_an_analysis(capsys):
    assert main(["demo"]) == 0
    answer = json.loads(capsys.readouterr().out)
    assert answer["notice"].startswith("heartsway is not a medical device")
    assert len(answer["input"]["channels"]) == 4


def test_demo_request_is_a_valid_request_body(capsys):
    from schemas.requests import AnalysisRequestSchema

    assert main(["demo", "--request"]) == 0
    body = json.loads(capsys.readouterr().out)
    request = AnalysisRequestSchema().load(body)
    assert request.recording.placement == "seat"
    assert [c.label for c in request.channels] == [
        "front_left", "front_right", "rear_left", "rear_right"
    ]


def test_demo_against_no_service_is_exit_4(capsys):
    assert main(["demo", "--url", "http://127.0.0.1:9", "--wait", "0"]) == 4
    assert "No service answered" in capsys.readouterr().err


def test_serve_builds_the_gunicorn_command(monkeypatch):
    import service.cli as cli

    seen = {}

    def fake_execve(path, args, env):
        seen.update(path=path, args=args, env=env)

    monkeypatch.setattr(cli.os, "execve", fake_execve)
    assert main(["serve", "--host", "127.0.0.1", "--port", "8123", "--workers", "3",
                 "--job-workers", "0"]) == 0
    assert seen["args"][1:] == ["-m", "gunicorn", *cli.GUNICORN_ARGS]
    assert seen["env"]["HEARTSWAY_BIND"] == "127.0.0.1:8123"
    assert seen["env"]["HEARTSWAY_WORKERS"] == "3"


def test_serve_starts_job_workers_beside_gunicorn(monkeypatch, tmp_path):
    import service.cli as cli

    seen = {}

    def fake_supervise(command, job_workers, env):
        seen.update(command=command, job_workers=job_workers, env=env)
        return 0

    monkeypatch.setattr(cli, "_supervise", fake_supervise)
    monkeypatch.setenv("HEARTSWAY_DATA_DIR", str(tmp_path / "data"))
    assert main(["serve", "--port", "8124", "--job-workers", "2"]) == 0
    assert seen["command"][1:] == ["-m", "gunicorn", *cli.GUNICORN_ARGS]
    assert seen["job_workers"] == 2 and seen["env"]["HEARTSWAY_BIND"] == "127.0.0.1:8124"
    assert (tmp_path / "data").is_dir()
    assert main(["serve", "--job-workers", "-1"]) == 2
