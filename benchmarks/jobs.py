"""A whole night through the jobs API, on the service as ``make run`` starts it.

Run: ``python -m benchmarks.jobs [--hours 8] [--fs 250] [--job-workers 1]``.

1. An 8-hour, 4-cell night (``simulation.night``: empty bed, lying down, one 10-minute bed
   exit, getting up) is written as EDF by a child process (``benchmarks.night --build``).
2. ``heartsway serve`` starts as ``make run`` does (gunicorn and ``--job-workers`` job
   workers on the embedded SQLite queue) with a fresh ``HEARTSWAY_DATA_DIR``.
3. The file goes up with ``HeartswayClient.submit`` (streamed) and the job is polled every
   0.25 s until it ends; the figure is the wall time from the start of the upload to
   ``succeeded``, and the job's peak resident set is the largest ``VmHWM`` of the worker
   processes (``/proc/<pid>/status``), read before the service stops.
4. The night summary is checked against the simulator's truth: the bed exit within one
   window (300 s) and the night's mean heart rate within 1 bpm (issue 11's acceptance,
   with 60 s as the time limit at 250 Hz and 1 GiB as the memory limit).
5. ``POST /v1/analyses`` of the demo evening is timed on the same service, one request at
   a time: 10 before the night is submitted (the service idle) and then back to back while
   the night runs; the figures are their medians and 95th percentiles, and the ratio of
   the busy median to the idle one, measured side by side in the one run.

The results as last measured are in ``benchmarks/README.md`` (section "Night jobs").
"""

from __future__ import annotations

import argparse
import json
import os
import platform
import signal
import socket
import subprocess
import sys
import tempfile
import time
import urllib.request
from pathlib import Path

from benchmarks.night import LIMIT_MIB, WINDOW_S, _child, _verdict

TIME_LIMIT_S = 60.0
ROOT = Path(__file__).resolve().parents[1]


def _free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return int(s.getsockname()[1])


def _children(pid: int) -> list[int]:
    found = []
    for entry in Path("/proc").iterdir():
        if not entry.name.isdigit():
            continue
        try:
            fields = (entry / "stat").read_text().rsplit(")", 1)[1].split()
        except OSError:
            continue
        if int(fields[1]) == pid:
            found.append(int(entry.name))
    return found


def _worker_hwm_mib(serve_pid: int) -> float:
    """Largest VmHWM among the ``heartsway worker`` children of the service (MiB)."""
    peak = 0.0
    for pid in _children(serve_pid):
        try:
            cmdline = Path(f"/proc/{pid}/cmdline").read_bytes().split(b"\0")
            if b"worker" not in cmdline:
                continue
            for line in Path(f"/proc/{pid}/status").read_text().splitlines():
                if line.startswith("VmHWM:"):
                    peak = max(peak, float(line.split()[1]) / 1024.0)
        except OSError:
            continue
    return peak


def _wait_up(url: str, limit_s: float = 60.0) -> None:
    deadline = time.monotonic() + limit_s
    while time.monotonic() < deadline:
        try:
            with urllib.request.urlopen(f"{url}/healthz", timeout=2):
                return
        except OSError:
            time.sleep(0.2)
    raise SystemExit(f"the service did not answer at {url} within {limit_s:g} s")


def _analysis_seconds(api: object, body: dict) -> float:
    started = time.perf_counter()
    api.analyze(body)  # type: ignore[attr-defined]
    return time.perf_counter() - started


def _quantiles(values: list[float]) -> dict:
    import numpy as np

    if not values:
        return {"n": 0}
    return {"n": len(values), "p50_s": float(np.percentile(values, 50)),
            "p95_s": float(np.percentile(values, 95))}


def run(hours: float, fs: float, seed: int, job_workers: int) -> dict:
    """Build the night, serve, submit, wait; the figures."""
    from client import HeartswayClient
    from service.demo import demo_request_body

    with tempfile.TemporaryDirectory() as tmp:
        path = os.path.join(tmp, "night.edf")
        meta = _child("--build", path, "--hours", str(hours), "--fs", str(fs),
                      "--seed", str(seed))
        port = _free_port()
        url = f"http://127.0.0.1:{port}"
        env = {**os.environ, "HEARTSWAY_DATA_DIR": os.path.join(tmp, "data"),
               "PYTHONPATH": str(ROOT)}
        env.pop("HEARTSWAY_QUEUE_URL", None)
        serve = subprocess.Popen(
            [sys.executable, "-m", "service.cli", "serve", "--port", str(port),
             "--job-workers", str(job_workers)],
            env=env, cwd=ROOT, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
        try:
            _wait_up(url)
            api = HeartswayClient(url, timeout_s=600)
            body = demo_request_body()
            idle = [_analysis_seconds(api, body) for _ in range(11)][1:]  # first warms up
            started = time.perf_counter()
            job = api.submit(path, window_s=WINDOW_S)
            uploaded = time.perf_counter() - started
            busy: list[float] = []
            while job.refresh().status in ("queued", "running"):
                busy.append(_analysis_seconds(api, body))
            seconds = time.perf_counter() - started
            hwm = _worker_hwm_mib(serve.pid)
            night = job.result() if job.status == "succeeded" else None
        finally:
            serve.send_signal(signal.SIGTERM)
            serve.wait(timeout=60)
    result = {"status": job.status, "seconds": seconds, "upload_s": uploaded,
              "worker_hwm_mib": hwm,
              "attempts": job.document["attempts"],
              "analyses_idle": _quantiles(idle), "analyses_while_night_runs": _quantiles(busy)}
    if night is not None:
        measures = {m["name"]: m["value"] for m in night["summary"]["measures"]}
        exits = [[e["start_s"], e["end_s"]] for e in night["summary"]["bed_exits"]]
        result["exit_err_s"], result["hr_err_bpm"] = _verdict(
            meta, {"exits": exits, "measures": measures})
        result["windows"] = len(night["windows"]["windows"])
    result["truth"] = meta["truth"]
    return result


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--hours", type=float, default=8.0)
    ap.add_argument("--fs", type=float, default=250.0)
    ap.add_argument("--seed", type=int, default=0)
    ap.add_argument("--job-workers", type=int, default=1)
    args = ap.parse_args(argv)
    print(f"machine: {platform.machine()} cpus={os.cpu_count()} "
          f"python={platform.python_version()}; {args.hours:g} h night, 4 cells, "
          f"{args.fs:g} Hz EDF, {WINDOW_S:g}-s windows, seed {args.seed}, "
          f"{args.job_workers} job worker(s)")
    r = run(args.hours, args.fs, args.seed, args.job_workers)
    exit_err, hr_err = r.get("exit_err_s"), r.get("hr_err_bpm")
    checks = {
        "succeeded": r["status"] == "succeeded",
        f"within {TIME_LIMIT_S:g} s": r["seconds"] <= TIME_LIMIT_S,
        "exit within one window": exit_err is not None and exit_err <= WINDOW_S,
        "mean heart rate within 1 bpm": hr_err is not None and hr_err <= 1.0,
        f"worker peak under {LIMIT_MIB:g} MiB": r["worker_hwm_mib"] < LIMIT_MIB,
    }
    print(json.dumps({k: v for k, v in r.items() if k != "truth"},
                     default=str))
    print(f"upload to succeeded: {r['seconds']:.1f} s (upload {r['upload_s']:.1f} s), "
          f"{r.get('windows', 0)} windows, attempts {r['attempts']}; worker peak resident "
          f"{r['worker_hwm_mib']:.0f} MiB; exit error "
          f"{'-' if exit_err is None else f'{exit_err:.1f} s'}, mean heart rate error "
          f"{'-' if hr_err is None else f'{hr_err:.2f} bpm'}")
    idle, busy = r["analyses_idle"], r["analyses_while_night_runs"]
    if idle.get("n") and busy.get("n"):
        print(f"POST /v1/analyses (demo evening): idle p50 {idle['p50_s']:.3f} s, p95 "
              f"{idle['p95_s']:.3f} s; while the night runs ({busy['n']} requests) p50 "
              f"{busy['p50_s']:.3f} s, p95 {busy['p95_s']:.3f} s; busy/idle median "
              f"{busy['p50_s'] / idle['p50_s']:.2f}x")
    for name, good in checks.items():
        print(f"  {'pass' if good else 'FAIL'}: {name}")
    from schemas.responses import NOTICE

    print(f"Caution: {NOTICE}")
    return 0 if all(checks.values()) else 1


if __name__ == "__main__":
    sys.exit(main())
