"""Prometheus metrics: every request counted once, also across two gunicorn workers."""

from __future__ import annotations

import os
import re
import threading
import urllib.request
from pathlib import Path

from gunicorn_run import gunicorn
from prometheus_client.parser import text_string_to_metric_families

from service.demo import demo_request_body


def _samples(text: str) -> dict[tuple[str, tuple[tuple[str, str], ...]], float]:
    # Parsed with prometheus_client's own text-format parser (the exposition format spec).
    out = {}
    for family in text_string_to_metric_families(text):
        for sample in family.samples:
            out[(sample.name, tuple(sorted(sample.labels.items())))] = sample.value
    return out


def _count(samples, route, status, method="GET"):
    key = ("heartsway_http_requests_total",
           (("method", method), ("route", route), ("status", status)))
    return samples.get(key, 0.0)


def test_in_process_counts_requests_latency_and_samples(client):
    before = _samples(client.get("/metrics").get_data(as_text=True))
    for _ in range(3):
        assert client.get("/healthz").status_code == 200
    assert client.get("/no/such/path").status_code == 404
    body = demo_request_body()
    assert client.post("/v1/analyses", json=body).status_code == 200
    response = client.get("/metrics")
    assert response.status_code == 200
    # The Prometheus text exposition format (its media type names a version).
    assert re.match(r"text/plain; version=\d", response.headers["Content-Type"])
    after = _samples(response.get_data(as_text=True))
    assert _count(after, "/healthz", "200") - _count(before, "/healthz", "200") == 3
    assert _count(after, "unmatched", "404") - _count(before, "unmatched", "404") == 1
    assert _count(after, "/v1/analyses", "200", "POST") - \
        _count(before, "/v1/analyses", "200", "POST") == 1
    n = sum(len(c["samples"]) for c in body["channels"])
    key = ("heartsway_samples_processed_total", ())
    assert after[key] - before.get(key, 0.0) == n
    count = ("heartsway_analysis_duration_seconds_count", ())
    assert after[count] - before.get(count, 0.0) == 1
    latency = ("heartsway_http_request_duration_seconds_count", (("route", "/healthz"),))
    assert after[latency] - before.get(latency, 0.0) == 3


def test_two_gunicorn_workers_count_every_request_once(tmp_path):
    folder = tmp_path / "metrics"
    folder.mkdir()
    n_threads, per_thread = 8, 15
    with gunicorn(tmp_path, workers=2, env={"PROMETHEUS_MULTIPROC_DIR": str(folder)}) as (
        base, master
    ):
        def hammer():
            for _ in range(per_thread):
                request = urllib.request.Request(base + "/healthz",
                                                 headers={"Connection": "close"})
                with urllib.request.urlopen(request, timeout=10) as response:
                    assert response.status == 200

        def worker_pids() -> set[int]:
            # each process that counted something keeps its own file, named by its pid
            return {int(m.group(1)) for p in folder.iterdir()
                    if (m := re.search(r"_(\d+)\.db$", p.name))} - {master.pid}

        # Rounds of 120 requests until both workers have served some: the kernel hands a
        # connection to whichever worker waits on the socket, and one quick worker can
        # take a whole round of health checks on a lightly loaded machine.
        sent = 0
        for _ in range(20):
            threads = [threading.Thread(target=hammer) for _ in range(n_threads)]
            for thread in threads:
                thread.start()
            for thread in threads:
                thread.join(timeout=60)
            sent += n_threads * per_thread
            if len(worker_pids()) == 2:
                break
        # Scrape several times: whichever worker answers, the sum is the same.
        scrapes = []
        for _ in range(4):
            with urllib.request.urlopen(base + "/metrics", timeout=10) as response:
                scrapes.append(_samples(response.read().decode()))
        served_by = worker_pids()
    # The 1 health check of the start-up wait plus those sent here, counted once each.
    expected = 1 + sent
    for samples in scrapes:
        assert _count(samples, "/healthz", "200") == expected
    # Scrapes count themselves: the k-th scrape sees k-1 earlier ones.
    assert [_count(s, "/metrics", "200") for s in scrapes] == [0, 1, 2, 3]
    # Both workers served requests (each keeps its own file, named by its pid).
    assert len(served_by) == 2, sorted(os.listdir(folder))


def test_the_directory_made_for_gunicorn_is_removed_at_exit(tmp_path):
    probe = (
        "import os, service.gunicorn_conf as c; print(c.metrics_dir); "
        "assert os.path.isdir(c.metrics_dir)"
    )
    import subprocess
    import sys

    env = {k: v for k, v in os.environ.items() if k != "PROMETHEUS_MULTIPROC_DIR"}
    done = subprocess.run([sys.executable, "-c", probe], cwd=Path(__file__).parents[2], env=env,
                          capture_output=True, text=True, timeout=60, check=True)
    made = Path(done.stdout.strip())
    assert made.name.startswith("heartsway-metrics-")
    assert not made.exists()
