"""Load and faults against gunicorn on 127.0.0.1, bounded in count and time.

The figures printed here (``pytest -s``) are the ones in the README's
Reliability section; ``python -m service.loadtest --duration 600`` is the soak.
"""

from __future__ import annotations

import json
import os
import signal
import socket
import threading
import time

import pytest

from service.loadtest import demo_mix, request, rss_kib, run_load, serve, warm_up
from simulation import SimulationSettings, simulate

#: Moderate for two shared cores: one demo analysis (2 min, 4 channels) takes ~0.35 s.
RATE_PER_S = 3.0
LOAD_S = 30.0
#: Growth of a worker's resident memory allowed over the run (allocator noise).
RSS_GROWTH_KIB = 16 * 1024


def _small_body() -> bytes:
    recording = simulate(SimulationSettings(duration_s=25.0, fs_hz=50.0, n_channels=1, seed=8))
    return json.dumps({
        "sampling_rate_hz": recording.fs_hz,
        "channels": [{"label": "seat", "quantity": recording.quantity, "unit": recording.unit,
                      "samples": [round(float(v), 3) for v in recording.channels[0]]}],
    }).encode()


def _slow_post(port: int, body: bytes, duration_s: float, result: dict) -> None:
    """POST ``body`` in 20 pieces spread over ``duration_s``; store the status."""
    try:
        with socket.create_connection(("127.0.0.1", port), timeout=60) as sock:
            head = (f"POST /v1/analyses HTTP/1.1\r\nHost: 127.0.0.1\r\n"
                    f"Content-Type: application/json\r\nContent-Length: {len(body)}\r\n"
                    "Connection: close\r\n\r\n").encode()
            sock.sendall(head)
            step = -(-len(body) // 20)
            for i in range(0, len(body), step):
                sock.sendall(body[i:i + step])
                time.sleep(duration_s / 20)
            answer = b""
            while chunk := sock.recv(65536):
                answer += chunk
        result["status"] = int(answer.split(b" ", 2)[1])
        result["done_at"] = time.monotonic()
    except OSError as error:
        result["error"] = type(error).__name__


def test_load_at_a_moderate_rate_gives_no_errors_and_flat_memory(tmp_path):
    env = {"HEARTSWAY_WORKERS": "2", "HEARTSWAY_MAX_REQUESTS": "0"}
    with serve(tmp_path, env) as server:
        pids = server.wait_for_workers(2)
        mix = demo_mix(server.base)
        warm = warm_up(server, mix, RATE_PER_S, pids)
        before = {pid: rss_kib(pid) for pid in pids}
        report = run_load(server.base, mix, rate_per_s=RATE_PER_S, duration_s=LOAD_S)
        after = {pid: rss_kib(pid) for pid in server.workers()}
    summary = report.summary()
    print(f"\nload: {summary}\nrss KiB before {before} after {after}")
    assert warm.failures() == [] and report.failures() == []
    assert summary["sent"] >= RATE_PER_S * LOAD_S - 2
    assert sorted(after) == sorted(before)  # no worker died or was replaced
    for pid in before:
        assert after[pid] - before[pid] < RSS_GROWTH_KIB, (pid, before[pid], after[pid])


def test_a_killed_worker_is_replaced_and_only_its_own_requests_fail(tmp_path):
    env = {"HEARTSWAY_WORKERS": "2", "HEARTSWAY_THREADS": "4"}
    with serve(tmp_path, env) as server:
        pids = server.wait_for_workers(2)
        mix = demo_mix(server.base)
        victim = pids[0]
        killed_at: list[float] = []

        def kill(elapsed_s: float) -> None:
            if elapsed_s >= 4.0 and not killed_at:
                os.kill(victim, signal.SIGKILL)
                killed_at.append(elapsed_s)

        report = run_load(server.base, mix, rate_per_s=4.0, duration_s=12.0, during=kill)
        replaced = server.wait_for_workers(2, exclude=[victim])
    failures = report.failures()
    print(f"\nworker kill: {report.summary()} killed at {killed_at[0]:.2f} s, "
          f"workers {pids} -> {replaced}")
    assert victim not in replaced and len(replaced) == 2
    # Only requests already in flight on the killed worker may fail: at most its
    # thread count, all started before the kill, none with a wrong answer.
    assert len(failures) <= 4
    assert all(f.started_s <= killed_at[0] + 0.05 for f in failures), failures
    assert all(f.error != "wrong answer" for f in failures)
    after = [o for o in report.outcomes if o.started_s > killed_at[0] + 0.05]
    assert len(after) >= 25 and all(o.error is None for o in after)


def _serve_one_worker(tmp_path, env=None):
    settings = {"HEARTSWAY_WORKERS": "1", "HEARTSWAY_THREADS": "4", **(env or {})}
    return serve(tmp_path, settings)


def test_a_slow_client_does_not_block_the_others(tmp_path):
    # One worker on purpose: the protection under test is the worker's threads.
    # (With HEARTSWAY_THREADS=1, a sync worker, /healthz waits ~3.5 s here.)
    with _serve_one_worker(tmp_path) as server:
        slow: dict = {}
        sender = threading.Thread(target=_slow_post,
                                  args=(server.port, _small_body(), 4.0, slow))
        sender.start()
        time.sleep(0.5)
        latencies = []
        for _ in range(8):
            started = time.monotonic()
            status, _ = request(server.base, "GET", "/healthz", timeout_s=10)
            latencies.append(time.monotonic() - started)
            assert status == 200
        fast_done = time.monotonic()
        sender.join(timeout=30)
    print(f"\nslow client: healthz latencies {[round(x, 3) for x in latencies]}, "
          f"slow upload status {slow.get('status')}")
    assert max(latencies) < 1.0
    assert slow.get("status") == 200 and slow["done_at"] > fast_done


def test_sigterm_drains_the_in_flight_request_before_exit(tmp_path):
    with _serve_one_worker(tmp_path, env={"HEARTSWAY_GRACEFUL_TIMEOUT_S": "10"}) as server:
        slow: dict = {}
        sender = threading.Thread(target=_slow_post,
                                  args=(server.port, _small_body(), 3.0, slow))
        sender.start()
        time.sleep(1.0)
        server.process.send_signal(signal.SIGTERM)
        terminated_at = time.monotonic()
        sender.join(timeout=30)
        server.process.wait(timeout=15)
        exited_at = time.monotonic()
        with pytest.raises(OSError):
            request(server.base, "GET", "/healthz", timeout_s=2)
    print(f"\nsigterm: in-flight status {slow.get('status')}, "
          f"exit {exited_at - terminated_at:.2f} s after SIGTERM")
    assert slow.get("status") == 200, slow
    assert slow["done_at"] > terminated_at + 1.0  # it was really in flight at SIGTERM
    assert server.process.returncode == 0
