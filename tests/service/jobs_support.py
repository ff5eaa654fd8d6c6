"""Helpers of the night-job tests: short simulated nights, draining the queue in the test's
process, a real PostgreSQL server, worker and service processes."""

from __future__ import annotations

import os
import shutil
import signal
import socket
import subprocess
import sys
import tempfile
import time
from collections.abc import Iterator
from contextlib import contextmanager
from datetime import UTC, datetime, timedelta
from pathlib import Path

import pytest

from simulation.night import NightSettings, write_night

ROOT = Path(__file__).resolve().parents[2]
#: The shortest night the simulator scales (it refuses less): 40 minutes, 8 windows of 5 min.
NIGHT_S = 2400.0
PG_BIN_DIRS = sorted(Path("/usr/lib/postgresql").glob("*/bin"), reverse=True)


def write_short_night(path: Path, *, fs_hz: float = 100.0, seed: int = 1):  # noqa: ANN201
    """A 40-minute simulated night as EDF (lies down, leaves the bed once, gets up)."""
    return write_night(NightSettings.scaled(NIGHT_S, fs_hz=fs_hz, seed=seed), str(path),
                       file_format="edf")


def drain(queue, *, limit: int = 50) -> int:  # noqa: ANN001
    """Run the queue's messages in this process until none is left, retries scheduled for
    later run at once as if their time had come; how many ran."""
    ran = 0
    for _ in range(limit):
        message = queue.huey.dequeue()
        when = None
        if message is None:
            later = datetime.now(UTC).replace(tzinfo=None) + timedelta(hours=1)  # Huey's UTC
            due = queue.huey.read_schedule(later)
            if not due:
                return ran
            message, rest = due[0], due[1:]
            for task in rest:
                queue.huey.add_schedule(task)
            when = message.eta
        try:
            queue.huey.execute(message, timestamp=when)
        except Exception:  # noqa: BLE001, S110 - Huey schedules the retry itself
            pass
        ran += 1
    return ran


def free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return int(s.getsockname()[1])


def child_env(data_dir: Path, **more: str) -> dict[str, str]:
    env = dict(os.environ)
    env.update(PYTHONPATH=str(ROOT), HEARTSWAY_DATA_DIR=str(data_dir),
               HEARTSWAY_JOB_LEASE_S="2", HEARTSWAY_LOG_LEVEL="INFO")
    env.pop("HEARTSWAY_QUEUE_URL", None)
    env.update(more)
    return env


def start_worker(env: dict[str, str], log: Path) -> subprocess.Popen[bytes]:
    with log.open("ab") as handle:
        return subprocess.Popen([sys.executable, "-m", "service.cli", "worker"], env=env,
                                stdout=handle, stderr=subprocess.STDOUT, cwd=ROOT)


def stop(process: subprocess.Popen[bytes], sig: int = signal.SIGTERM) -> None:
    if process.poll() is None:
        process.send_signal(sig)
        try:
            process.wait(timeout=30)
        except subprocess.TimeoutExpired:
            process.kill()
            process.wait()


def wait_until(predicate, timeout_s: float, what: str, poll_s: float = 0.1):  # noqa: ANN001, ANN201
    deadline = time.monotonic() + timeout_s
    while time.monotonic() < deadline:
        value = predicate()
        if value:
            return value
        time.sleep(poll_s)
    pytest.fail(f"{what} did not happen within {timeout_s:g} s")


def _pg_bin() -> Path | None:
    for folder in PG_BIN_DIRS:
        if (folder / "initdb").exists():
            return folder
    return None


@contextmanager
def postgres_server() -> Iterator[str]:
    """Start a throw-away PostgreSQL cluster on a free port; yield its URL.

    Run as root, the cluster belongs to the ``postgres`` user (PostgreSQL refuses to run as
    root), in a folder of its own under the system's temporary directory (pytest's are
    closed to other users). Fails (never skips) when no server can be started:
    `.ci/install-test-tools` installs it.
    """
    folder = _pg_bin()
    if folder is None:
        pytest.fail("the PostgreSQL tests need initdb and pg_ctl (Debian's postgresql package; "
                    "`make test` installs it when run as root)")
    tmp = Path(tempfile.mkdtemp(prefix="heartsway-pg-"))
    data = tmp / "pgdata"
    data.mkdir(mode=0o700)
    port = free_port()
    as_user: list[str] = []
    if os.geteuid() == 0:
        shutil.chown(tmp, "postgres")
        shutil.chown(data, "postgres")
        as_user = ["runuser", "-u", "postgres", "--"]
    for step in (
        [str(folder / "initdb"), "-D", str(data), "-U", "postgres", "--auth=trust", "-E",
         "UTF8"],
        [str(folder / "pg_ctl"), "-D", str(data), "-w", "-l", str(tmp / "server.log"), "-o",
         f"-p {port} -k {tmp} -c listen_addresses=127.0.0.1 -c fsync=off", "start"],
    ):
        done = subprocess.run([*as_user, *step], capture_output=True, text=True)
        if done.returncode != 0:
            shutil.rmtree(tmp, ignore_errors=True)
            pytest.fail(f"PostgreSQL could not be started ({Path(step[0]).name}): "
                        f"{(done.stderr or done.stdout)[-400:]}")
    try:
        yield f"postgresql://postgres@127.0.0.1:{port}/postgres"
    finally:
        subprocess.run([*as_user, str(folder / "pg_ctl"), "-D", str(data), "-m", "immediate",
                        "stop"], capture_output=True)
        shutil.rmtree(tmp, ignore_errors=True)
