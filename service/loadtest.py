"""Load and fault checks on loopback: gunicorn on 127.0.0.1, an open-loop client.

``python -m service.loadtest`` starts the service under gunicorn on a free
loopback port, warms it up, then sends analyses of the demo trace (and
health and catalogue requests) at a fixed rate for a fixed time, checks every
answer (status 200 and, for an analysis, the very feature vector of the
warm-up's answer), and prints a JSON report: requests sent, errors by kind,
latency percentiles, and the resident memory of each worker before and after::

    python -m service.loadtest --duration 600 --rate 3    # a ten-minute soak

The tests in ``tests/service/test_reliability_load.py`` run the same code for
about half a minute. Nothing here leaves the loopback interface.
"""

from __future__ import annotations

import argparse
import http.client
import json
import os
import signal
import socket
import subprocess
import sys
import threading
import time
from collections import Counter
from collections.abc import Callable, Iterator, Mapping, Sequence
from concurrent.futures import ThreadPoolExecutor
from contextlib import contextmanager
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

ROOT = Path(__file__).resolve().parent.parent
HOST = "127.0.0.1"
GUNICORN_ARGS = ["--config", "python:service.gunicorn_conf", "service:create_app()"]


def free_port() -> int:
    """A TCP port free on the loopback interface right now."""
    with socket.socket() as probe:
        probe.bind((HOST, 0))
        return int(probe.getsockname()[1])


def rss_kib(pid: int) -> int:
    """Resident set size of a process in KiB (Linux ``/proc``)."""
    for line in Path(f"/proc/{pid}/status").read_text().splitlines():
        if line.startswith("VmRSS:"):
            return int(line.split()[1])
    raise ValueError(f"no VmRSS for pid {pid}")


def children(pid: int) -> list[int]:
    """Direct child processes of ``pid`` (Linux ``/proc``)."""
    found: list[int] = []
    for task in Path(f"/proc/{pid}/task").iterdir():
        text = (task / "children").read_text().split()
        found.extend(int(p) for p in text)
    return sorted(found)


@dataclass
class Server:
    """A gunicorn master serving the app on loopback."""

    process: subprocess.Popen[bytes]
    port: int
    log_path: Path

    @property
    def base(self) -> str:
        return f"http://{HOST}:{self.port}"

    def workers(self) -> list[int]:
        return children(self.process.pid)

    def log(self) -> str:
        return self.log_path.read_text(encoding="utf-8", errors="replace")

    def wait_for_workers(self, count: int, timeout_s: float = 30.0,
                         exclude: Sequence[int] = ()) -> list[int]:
        """Wait until ``count`` workers run, none of them in ``exclude``, and answer."""
        deadline = time.monotonic() + timeout_s
        while time.monotonic() < deadline:
            pids = self.workers()
            if len(pids) == count and not set(pids) & set(exclude):
                return pids
            time.sleep(0.1)
        raise TimeoutError(f"expected {count} workers, have {self.workers()}")


@contextmanager
def serve(
    log_dir: Path,
    env: Mapping[str, str] | None = None,
    extra_args: Sequence[str] = (),
    cwd: Path = ROOT,
    start_timeout_s: float = 60.0,
) -> Iterator[Server]:
    """Run gunicorn with the service's own config on a free loopback port.

    ``env`` adds to (or overrides) this process's environment; ``extra_args``
    go before the application (for example ``--worker-class sync``). On exit
    the master gets SIGTERM, then SIGKILL after 30 s.
    """
    port = free_port()
    environment = {**os.environ, "HEARTSWAY_BIND": f"{HOST}:{port}", **(env or {})}
    environment["PYTHONPATH"] = str(ROOT) + os.pathsep + environment.get("PYTHONPATH", "")
    command = [sys.executable, "-m", "gunicorn", "--no-control-socket", *extra_args,
               *GUNICORN_ARGS]
    log_path = log_dir / f"gunicorn-{port}.log"
    with log_path.open("wb") as log:
        process = subprocess.Popen(command, cwd=cwd, env=environment, stdout=log,
                                   stderr=subprocess.STDOUT, start_new_session=True)
    server = Server(process=process, port=port, log_path=log_path)
    try:
        deadline = time.monotonic() + start_timeout_s
        while True:
            try:
                status, _ = request(server.base, "GET", "/healthz", timeout_s=1.0)
                if status == 200:
                    break
            except OSError:
                pass
            if process.poll() is not None or time.monotonic() > deadline:
                raise RuntimeError(f"gunicorn did not start:\n{server.log()[-3000:]}")
            time.sleep(0.2)
        yield server
    finally:
        if process.poll() is None:
            process.send_signal(signal.SIGTERM)
            try:
                process.wait(timeout=30)
            except subprocess.TimeoutExpired:
                process.kill()
                process.wait(timeout=10)


def request(base: str, method: str, path: str, body: bytes | None = None,
            headers: Mapping[str, str] | None = None,
            timeout_s: float = 30.0) -> tuple[int, bytes]:
    """One HTTP request on a fresh connection; (status, body)."""
    host, port = base.removeprefix("http://").split(":")
    connection = http.client.HTTPConnection(host, int(port), timeout=timeout_s)
    try:
        connection.request(method, path, body=body,
                           headers={"Connection": "close", **(headers or {})})
        response = connection.getresponse()
        return response.status, response.read()
    finally:
        connection.close()


@dataclass(frozen=True)
class Call:
    """One kind of request in the mix, and how to tell a right answer."""

    name: str
    method: str
    path: str
    body: bytes | None = None
    headers: Mapping[str, str] = field(default_factory=dict)
    check: Callable[[bytes], bool] = lambda body: True


@dataclass
class Outcome:
    """What happened to one request."""

    name: str
    started_s: float
    elapsed_s: float
    status: int | None
    error: str | None


@dataclass
class LoadReport:
    """Figures of one load run."""

    duration_s: float
    rate_per_s: float
    outcomes: list[Outcome]

    @property
    def sent(self) -> int:
        return len(self.outcomes)

    def failures(self) -> list[Outcome]:
        return [o for o in self.outcomes if o.error is not None]

    def summary(self) -> dict[str, Any]:
        latencies = sorted(o.elapsed_s for o in self.outcomes if o.error is None)

        def pct(q: float) -> float | None:
            if not latencies:
                return None
            return round(latencies[min(len(latencies) - 1, int(q * len(latencies)))], 3)

        return {
            "duration_s": self.duration_s,
            "rate_per_s": self.rate_per_s,
            "sent": self.sent,
            "by_kind": dict(Counter(o.name for o in self.outcomes)),
            "errors": len(self.failures()),
            "errors_by_kind": dict(Counter(str(o.error) for o in self.failures())),
            "latency_s": {"p50": pct(0.5), "p95": pct(0.95), "max": pct(1.0)},
        }


def run_load(base: str, mix: Sequence[Call], *, rate_per_s: float, duration_s: float,
             max_in_flight: int = 32, timeout_s: float = 60.0,
             during: Callable[[float], None] | None = None) -> LoadReport:
    """Send the calls of ``mix`` in turn at a fixed rate (open loop) for ``duration_s``.

    Each request is judged right only if its status is 200 and ``check``
    accepts its body. ``during(elapsed_s)`` is called about every 50 ms from
    the scheduling thread (to inject a fault at a chosen moment).
    """
    outcomes: list[Outcome] = []
    lock = threading.Lock()
    origin = time.monotonic()

    def send(call: Call) -> None:
        started = time.monotonic()
        status: int | None = None
        error: str | None = None
        try:
            status, body = request(base, call.method, call.path, call.body,
                                   call.headers, timeout_s)
            if status != 200:
                error = f"status {status}"
            elif not call.check(body):
                error = "wrong answer"
        except (OSError, http.client.HTTPException) as failure:
            error = type(failure).__name__
        with lock:
            outcomes.append(Outcome(call.name, started - origin, time.monotonic() - started,
                                    status, error))

    interval = 1.0 / rate_per_s
    with ThreadPoolExecutor(max_workers=max_in_flight) as pool:
        index = 0
        next_at = origin
        while (now := time.monotonic()) - origin < duration_s:
            if now >= next_at:
                pool.submit(send, mix[index % len(mix)])
                index += 1
                next_at += interval
            if during is not None:
                during(now - origin)
            time.sleep(min(0.05, max(0.0, next_at - time.monotonic())))
    outcomes.sort(key=lambda o: o.started_s)
    return LoadReport(duration_s=duration_s, rate_per_s=rate_per_s, outcomes=outcomes)


def demo_mix(base: str) -> list[Call]:
    """Analyses of the demo trace (answers checked against a reference), health, catalogue."""
    from service.demo import demo_request_body

    body = json.dumps(demo_request_body()).encode()
    headers = {"Content-Type": "application/json"}
    status, answer = request(base, "POST", "/v1/analyses", body, headers)
    if status != 200:
        raise RuntimeError(f"reference analysis failed with {status}")
    reference = json.loads(answer)["feature_vector"]

    def same_features(text: bytes) -> bool:
        return bool(json.loads(text)["feature_vector"] == reference)

    def healthy(text: bytes) -> bool:
        return bool(json.loads(text)["status"] == "ok")

    analysis = Call("analysis", "POST", "/v1/analyses", body, headers, same_features)
    return [
        analysis,
        Call("healthz", "GET", "/healthz", check=healthy),
        analysis,
        Call("features", "GET", "/v1/features"),
    ]


def analyses_by_worker(server: Server) -> Counter[int]:
    """Analyses answered so far by each worker, from the service's JSON request lines."""
    served: Counter[int] = Counter()
    for line in server.log().splitlines():
        if not line.startswith("{"):
            continue
        try:
            entry = json.loads(line)
        except ValueError:
            continue
        if entry.get("event") == "request" and entry.get("route") == "/v1/analyses":
            served[int(entry.get("pid", 0))] += 1
    return served


def warm_up(server: Server, mix: list[Call], rate_per_s: float, pids: list[int], *,
            round_s: float = 5.0, steady_kib: int = 2048, min_analyses: int = 8,
            max_rounds: int = 10) -> LoadReport:
    """Send the mix in short rounds until every worker is warm and its memory steady.

    Which worker accepts a request is up to the kernel, and each worker thread that
    first runs an analysis brings its own allocator arena and caches, so one fixed
    warm-up can leave a worker cold (seen twice: 88 MB against its twin's 110 MB,
    then +19 MB during the measured load). A worker that served no analysis in a
    round also shows a steady memory, so steadiness alone is not enough: the rounds
    stop when every worker has answered at least ``min_analyses`` analyses (counted
    from the request log lines, which carry the worker's pid) and every worker's RSS
    changed by less than ``steady_kib`` in the last round, or after ``max_rounds``.
    The returned report holds every round.
    """
    combined = LoadReport(duration_s=0.0, rate_per_s=rate_per_s, outcomes=[])
    previous = {pid: rss_kib(pid) for pid in pids}
    for _ in range(max_rounds):
        report = run_load(server.base, mix, rate_per_s=rate_per_s, duration_s=round_s)
        combined.outcomes.extend(report.outcomes)
        combined.duration_s += report.duration_s
        current = {pid: rss_kib(pid) for pid in pids}
        served = analyses_by_worker(server)
        steady = all(abs(current[pid] - previous[pid]) < steady_kib for pid in pids)
        warm = all(served[pid] >= min_analyses for pid in pids)
        previous = current
        if steady and warm:
            break
    return combined


def soak(duration_s: float, rate_per_s: float, workers: int, log_dir: Path) -> dict[str, Any]:
    """Start a server, warm it up, run the demo mix, report figures and memory."""
    env = {"HEARTSWAY_WORKERS": str(workers), "HEARTSWAY_MAX_REQUESTS": "0"}
    with serve(log_dir, env) as server:
        pids = server.wait_for_workers(workers)
        mix = demo_mix(server.base)
        warm = warm_up(server, mix, rate_per_s, pids)
        before = {pid: rss_kib(pid) for pid in pids}
        report = run_load(server.base, mix, rate_per_s=rate_per_s, duration_s=duration_s)
        after = {pid: rss_kib(pid) for pid in server.workers()}
        summary = report.summary()
        summary["warm_up_errors"] = len(warm.failures())
        summary["workers"] = workers
        summary["rss_kib_before"] = before
        summary["rss_kib_after"] = after
        summary["same_workers"] = sorted(before) == sorted(after)
        return summary


def main(argv: list[str] | None = None) -> int:
    """Run a soak on loopback and print its figures as JSON; exit 1 on any error."""
    import tempfile

    parser = argparse.ArgumentParser(prog="python -m service.loadtest", description=__doc__,
                                     formatter_class=argparse.RawDescriptionHelpFormatter)
    parser.add_argument("--duration", type=float, default=600.0, help="seconds (default 600)")
    parser.add_argument("--rate", type=float, default=3.0, help="requests per second")
    parser.add_argument("--workers", type=int, default=2)
    args = parser.parse_args(argv)
    # gunicorn's own log goes to a scratch directory (it holds no request data).
    with tempfile.TemporaryDirectory() as scratch:
        summary = soak(args.duration, args.rate, args.workers, Path(scratch))
    json.dump(summary, sys.stdout, indent=2)
    sys.stdout.write("\n")
    return 0 if summary["errors"] == 0 and summary["warm_up_errors"] == 0 else 1


if __name__ == "__main__":
    raise SystemExit(main())
