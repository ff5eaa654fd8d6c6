"""Nothing lost: real worker processes killed and restarted, on the embedded SQLite store
and on a real PostgreSQL server started here (no stand-in for either).

Issue 11's acceptance: a worker killed with SIGKILL mid-job -> another worker runs the job
again within 2 minutes and it succeeds with exactly one result; the service and its
workers stopped and started again -> queued and running jobs finish; 20 nights submitted
at once with 2 workers -> 20 succeeded, none lost, none duplicated.
"""

from __future__ import annotations

import json
import signal
import subprocess
import sys
import time
from concurrent.futures import ThreadPoolExecutor
from pathlib import Path

import pytest
from jobs_support import (
    ROOT,
    child_env,
    free_port,
    postgres_server,
    start_worker,
    stop,
    wait_until,
    write_short_night,
)

from client import HeartswayClient
from service.job_store import JobSettings, store_for

#: Issue 11: a killed worker's job runs again "within 2 minutes".
RERUN_LIMIT_S = 120.0
LEASE_S = "2"


@pytest.fixture(scope="module")
def slow_night(tmp_path_factory):
    """A night slow enough to be killed in the middle: 8 windows at 1000 Hz (about 40 ms each
    on a two-core machine in December 2026, 0.4 s when this test was written)."""
    path = tmp_path_factory.mktemp("slow") / "night.edf"
    write_short_night(path, fs_hz=1000.0, seed=3)
    return path


@pytest.fixture(scope="module")
def quick_night(tmp_path_factory):
    path = tmp_path_factory.mktemp("quick") / "night.edf"
    write_short_night(path, fs_hz=100.0, seed=4)
    return path


@pytest.fixture(params=["sqlite", "postgresql"])
def backend(request, tmp_path_factory):
    """(queue URL or None, data dir) of a fresh store of each kind."""
    data = tmp_path_factory.mktemp("data")
    if request.param == "sqlite":
        yield None, data
        return
    with postgres_server() as url:
        yield url, data


def _settings(url, data) -> JobSettings:  # noqa: ANN001
    return JobSettings(data_dir=data, queue_url=url, lease_s=float(LEASE_S))


def _env(url, data, **more):  # noqa: ANN001, ANN202
    extra = {"HEARTSWAY_QUEUE_URL": url} if url else {}
    return child_env(data, HEARTSWAY_JOB_LEASE_S=LEASE_S, **extra, **more)


def _serve(env, port, log: Path, job_workers: int = 1) -> subprocess.Popen[bytes]:  # noqa: ANN001
    with log.open("ab") as handle:
        process = subprocess.Popen(
            [sys.executable, "-m", "service.cli", "serve", "--port", str(port), "--workers",
             "1", "--job-workers", str(job_workers)],
            env=env, stdout=handle, stderr=subprocess.STDOUT, cwd=ROOT)
    api = HeartswayClient(f"http://127.0.0.1:{port}", retries=0, timeout_s=30)

    def up() -> bool:
        try:
            return bool(api.health())
        except OSError:
            return False

    wait_until(up, 30, "the service answering /healthz", poll_s=0.2)
    return process


def _results(data: Path) -> list[Path]:
    return sorted((data / "jobs").glob("*/result.json"))


def test_sigkill_mid_job_runs_again_with_one_result(backend, slow_night, tmp_path):
    url, data = backend
    settings = _settings(url, data)
    store = store_for(settings)
    env = _env(url, data)
    port = free_port()
    server = _serve(env, port, tmp_path / "serve.log", job_workers=0)  # the API alone
    first = start_worker(env, tmp_path / "worker-a.log")
    try:
        job = HeartswayClient(f"http://127.0.0.1:{port}").submit(slow_night)
        record = wait_until(
            lambda: (r := store.get(job.id)) is not None and r.status == "running"
            and r.windows_done >= 1 and r,
            60, "the first worker's first window", poll_s=0.02)
        first.send_signal(signal.SIGKILL)
        first.wait()
        killed_at = time.monotonic()
        assert store.get(job.id).status == "running"  # killed in the middle of the job
        second = start_worker(env, tmp_path / "worker-b.log")
        try:
            done = wait_until(
                lambda: (r := store.get(job.id)) is not None and r.status in (
                    "succeeded", "failed") and r,
                RERUN_LIMIT_S, "the job's second run")
        finally:
            stop(second)
    finally:
        stop(first)
        stop(server)
    assert record.windows_done < record.windows_total
    assert time.monotonic() - killed_at < RERUN_LIMIT_S
    assert done.status == "succeeded" and done.attempts == 2
    assert done.windows_done == done.windows_total == 8
    [result] = _results(data)  # exactly one result
    assert json.loads(result.read_text())["job_id"] == job.id
    assert [p.name for p in result.parent.iterdir()] == ["result.json"]  # upload deleted


def test_restart_of_service_and_workers_loses_nothing(backend, slow_night, quick_night,
                                                       tmp_path):
    url, data = backend
    store = store_for(_settings(url, data))
    env = _env(url, data)
    port = free_port()
    server = _serve(env, port, tmp_path / "serve-1.log")
    try:
        api = HeartswayClient(f"http://127.0.0.1:{port}")
        # Three slow nights ahead of the quick ones: about a second of work in all (the
        # engine takes some 40 ms a 1000-Hz window here), so that the stop below finds
        # jobs still queued however fast one night goes.
        jobs = [api.submit(slow_night), api.submit(slow_night), api.submit(slow_night),
                api.submit(quick_night), api.submit(quick_night)]
        wait_until(lambda: store.get(jobs[0].id).windows_done >= 1, 60, "the first job running")
    finally:
        stop(server)  # SIGTERM: the API and its worker go, one job running, two queued
    states = sorted(store.get(job.id).status for job in jobs)
    assert "queued" in states and "succeeded" not in states[:1]
    server = _serve(env, port, tmp_path / "serve-2.log")
    try:
        submit = subprocess.run(
            [sys.executable, "-m", "service.cli", "submit", str(quick_night), "--url",
             f"http://127.0.0.1:{port}", "--wait"],
            env=env, capture_output=True, text=True, timeout=RERUN_LIMIT_S, cwd=ROOT)
        assert submit.returncode == 0, submit.stderr[-500:]
        night = json.loads(submit.stdout)
        assert "not a medical device" in night["notice"]
        for job in jobs:
            job.wait(timeout_s=RERUN_LIMIT_S, poll_s=0.2)
            assert job.status == "succeeded", job.document
    finally:
        stop(server)
    assert len(_results(data)) == len(jobs) + 1
    assert {json.loads(p.read_text())["job_id"] for p in _results(data)} == {
        *(job.id for job in jobs), night["job_id"]}


def test_twenty_nights_two_workers_all_succeed_once(quick_night, tmp_path):
    data = tmp_path / "data"
    env = _env(None, data)
    port = free_port()
    server = _serve(env, port, tmp_path / "serve.log", job_workers=2)
    try:
        api = HeartswayClient(f"http://127.0.0.1:{port}")
        with ThreadPoolExecutor(max_workers=5) as pool:
            jobs = list(pool.map(lambda _: api.submit(quick_night), range(20)))
        for job in jobs:
            job.wait(timeout_s=RERUN_LIMIT_S, poll_s=0.25)
    finally:
        stop(server)
    assert [job.status for job in jobs] == ["succeeded"] * 20
    assert len({job.id for job in jobs}) == 20
    assert all(job.document["attempts"] == 1 for job in jobs)  # none ran twice
    assert len(_results(data)) == 20
    log = (tmp_path / "serve.log").read_text()
    assert log.count('"event": "job_succeeded"') == 20


def test_delete_of_a_running_job_stops_its_worker(slow_night, tmp_path):
    data = tmp_path / "data"
    store = store_for(_settings(None, data))
    env = _env(None, data)
    port = free_port()
    server = _serve(env, port, tmp_path / "serve.log")
    try:
        api = HeartswayClient(f"http://127.0.0.1:{port}")
        job = api.submit(slow_night)
        wait_until(lambda: (r := store.get(job.id)) is not None and r.windows_done >= 1, 60,
                   "the job running", poll_s=0.02)
        job.delete()
        follow = api.submit(slow_night)  # the worker is free again for the next job
        follow.wait(timeout_s=RERUN_LIMIT_S, poll_s=0.2)
    finally:
        stop(server)
    assert follow.status == "succeeded"
    assert store.get(job.id) is None and not (data / "jobs" / job.id).exists()
    assert _results(data) == [data / "jobs" / follow.id / "result.json"]
