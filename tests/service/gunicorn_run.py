"""Start the service under gunicorn on 127.0.0.1 at a free port, for tests that need workers."""

from __future__ import annotations

import contextlib
import os
import signal
import socket
import subprocess
import sys
import time
import urllib.request
from collections.abc import Iterator
from pathlib import Path

ROOT = Path(__file__).resolve().parents[2]
BIN = Path(sys.executable).parent


def free_port() -> int:
    with socket.socket() as probe:
        probe.bind(("127.0.0.1", 0))
        return int(probe.getsockname()[1])


@contextlib.contextmanager
def gunicorn(tmp: Path, *, workers: int = 2, env: dict[str, str] | None = None
             ) -> Iterator[tuple[str, subprocess.Popen[bytes]]]:
    """Yield the base URL and the master process; stop it (SIGTERM) afterwards."""
    port = free_port()
    environment = {**os.environ, "HOME": str(tmp), "HEARTSWAY_BIND": f"127.0.0.1:{port}",
                   "HEARTSWAY_WORKERS": str(workers), **(env or {})}
    command = [sys.executable, "-m", "gunicorn", "--config", "python:service.gunicorn_conf",
               "--no-control-socket", "service:create_app()"]
    log = (tmp / "gunicorn.log").open("wb")
    process = subprocess.Popen(command, cwd=ROOT, env=environment, stdout=log,
                               stderr=subprocess.STDOUT, start_new_session=True)
    base = f"http://127.0.0.1:{port}"
    deadline = time.monotonic() + 60
    try:
        while True:
            try:
                with urllib.request.urlopen(base + "/healthz", timeout=1):
                    break
            except OSError:
                if process.poll() is not None or time.monotonic() > deadline:
                    output = (tmp / "gunicorn.log").read_text(errors="replace")
                    raise RuntimeError("gunicorn did not start: " + output[-2000:]) from None
                time.sleep(0.2)
        yield base, process
    finally:
        process.send_signal(signal.SIGTERM)
        try:
            process.wait(timeout=30)
        except subprocess.TimeoutExpired:
            process.kill()
            process.wait(timeout=10)
        log.close()
