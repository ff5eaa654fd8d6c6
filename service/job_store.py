"""Night jobs: where they live (the job records, the queue, the files) and the record's moves.

Two backends, chosen by ``HEARTSWAY_QUEUE_URL``:

* unset (the default): an embedded SQLite file, ``$HEARTSWAY_DATA_DIR/jobs.sqlite3``
  (write-ahead log, so the API and the workers of one machine share it); no server;
* ``postgresql://user@host:port/db``: a PostgreSQL server, for workers on several machines
  (which then share ``HEARTSWAY_DATA_DIR`` too, for the uploads and results).

The queue is Huey's SQL storage (``huey.contrib.sql_huey.SqlHuey``, peewee underneath,
``FOR UPDATE SKIP LOCKED`` on PostgreSQL); the job records are a table of ours in the same
database (:class:`JobRecord`): status, progress, attempts, owner, idempotency key, and the
lease of the worker running it. Huey delivers each message to one worker and retries a task
that raised; it does not acknowledge, so a message whose worker dies is gone from its queue.
The lease covers that: a running job's worker renews ``lease_expires_at`` every
``lease_s / 3`` s; any worker's reaper (:func:`reap_expired`) puts a job whose lease ran out
back on the queue (or ends it ``failed`` after :data:`MAX_ATTEMPTS`). See README "Night jobs".

Files: ``$HEARTSWAY_DATA_DIR/jobs/<id>/`` (mode 0700) holds the upload and the result
(mode 0600). Nothing here logs samples, labels, subject fields or device ids.
"""

from __future__ import annotations

import hashlib
import json
import os
import secrets
import shutil
import threading
import time
from dataclasses import dataclass
from datetime import UTC, datetime
from pathlib import Path
from typing import Any

from peewee import (
    CharField,
    DoubleField,
    IntegerField,
    Model,
    PostgresqlDatabase,
    SqliteDatabase,
    TextField,
)
from playhouse.db_url import connect as connect_url

from schemas.jobs import JobSchema

#: Attempts a job gets (a worker that died or an unexpected error counts one) before it
#: ends ``failed``.
MAX_ATTEMPTS = 3
#: Default lease of a running job (s): a dead worker's job runs again after at most this
#: plus one reaper round.
DEFAULT_LEASE_S = 30.0
#: Default retention of jobs and their files (hours, HEARTSWAY_JOB_RETENTION_H).
DEFAULT_RETENTION_H = 72.0
ENDED = ("succeeded", "failed", "cancelled")
RESULT_NAME = "result.json"
_DATABASE_FILE = "jobs.sqlite3"


@dataclass(frozen=True)
class JobSettings:
    """Where the jobs live and how long leases and records last."""

    data_dir: Path
    queue_url: str | None = None
    lease_s: float = DEFAULT_LEASE_S
    retention_h: float = DEFAULT_RETENTION_H

    @classmethod
    def from_env(cls, env: dict[str, str] | None = None) -> JobSettings:
        """The settings of the environment (``HEARTSWAY_DATA_DIR``, ``HEARTSWAY_QUEUE_URL``,
        ``HEARTSWAY_JOB_LEASE_S``, ``HEARTSWAY_JOB_RETENTION_H``)."""
        e = dict(os.environ if env is None else env)
        return cls(
            data_dir=Path(e.get("HEARTSWAY_DATA_DIR") or ".heartsway-data").resolve(),
            queue_url=e.get("HEARTSWAY_QUEUE_URL") or None,
            lease_s=_positive(e, "HEARTSWAY_JOB_LEASE_S", DEFAULT_LEASE_S),
            retention_h=_positive(e, "HEARTSWAY_JOB_RETENTION_H", DEFAULT_RETENTION_H),
        )


def _positive(env: dict[str, str], name: str, default: float) -> float:
    text = env.get(name)
    if not text:
        return default
    try:
        value = float(text)
    except ValueError:
        raise ValueError(f"`{name}` must be a positive number; got {text!r}.") from None
    if not 0 < value < float("inf"):
        raise ValueError(f"`{name}` must be a positive number; got {text!r}.")
    return value


class JobRecord(Model):
    """One job: the API's view of it and the worker's lease."""

    id = CharField(primary_key=True, max_length=32)
    owner = CharField(max_length=64, index=True)
    idempotency_key = CharField(max_length=255, null=True)
    status = CharField(max_length=16, index=True)
    created_at = DoubleField()
    started_at = DoubleField(null=True)
    finished_at = DoubleField(null=True)
    attempts = IntegerField(default=0)
    windows_done = IntegerField(default=0)
    windows_total = IntegerField(null=True)
    window_s = DoubleField()
    window_overlap_s = DoubleField()
    input_name = CharField(max_length=255)
    form = TextField()
    callback_url = TextField(null=True)
    problem = TextField(null=True)
    worker_token = CharField(max_length=32, null=True)
    lease_expires_at = DoubleField(null=True)

    class Meta:
        table_name = "heartsway_jobs"
        indexes = ((("owner", "idempotency_key"), True),)


class JobStore:
    """The job records and files of one data directory and queue URL (one per process)."""

    def __init__(self, settings: JobSettings) -> None:
        self.settings = settings
        self.root = settings.data_dir / "jobs"
        self.root.mkdir(parents=True, exist_ok=True, mode=0o700)
        os.chmod(settings.data_dir, 0o700)
        os.chmod(self.root, 0o700)
        url = settings.queue_url
        if url is None:
            self.database: Any = SqliteDatabase(
                str(settings.data_dir / _DATABASE_FILE),
                pragmas={"journal_mode": "wal", "busy_timeout": 30000, "synchronous": "normal"},
            )
        else:
            self.database = connect_url(url)
            if not isinstance(self.database, PostgresqlDatabase):
                raise ValueError("`HEARTSWAY_QUEUE_URL` must be a postgresql:// URL (or unset for "
                                 "the embedded SQLite store); got another scheme.")
        meta = type("Meta", (), {"database": self.database, "table_name": "heartsway_jobs"})
        self.Job: Any = type("Job", (JobRecord,), {"Meta": meta})
        with self.database.connection_context():
            self.database.create_tables([self.Job], safe=True)
        if url is None:
            db_file = settings.data_dir / _DATABASE_FILE
            for path in (db_file, Path(f"{db_file}-wal"), Path(f"{db_file}-shm")):
                if path.exists():
                    os.chmod(path, 0o600)

    # -- files ---------------------------------------------------------------

    def job_dir(self, job_id: str) -> Path:
        return self.root / job_id

    def result_path(self, job_id: str) -> Path:
        return self.job_dir(job_id) / RESULT_NAME

    def input_path(self, record: Any) -> Path:
        return self.job_dir(record.id) / record.input_name

    def delete_files(self, job_id: str, *, keep_result: bool = False) -> None:
        folder = self.job_dir(job_id)
        if not keep_result:
            shutil.rmtree(folder, ignore_errors=True)
            return
        for path in folder.glob("*"):
            if path.name != RESULT_NAME:
                path.unlink(missing_ok=True)

    # -- records -------------------------------------------------------------

    def create(self, *, owner: str, idempotency_key: str | None, window_s: float,
               window_overlap_s: float, input_name: str, form: dict[str, Any],
               callback_url: str | None, job_id: str) -> Any:
        """Insert a queued job (its files are already in :meth:`job_dir`)."""
        return self.Job.create(
            id=job_id, owner=owner, idempotency_key=idempotency_key, status="queued",
            created_at=time.time(), window_s=window_s, window_overlap_s=window_overlap_s,
            input_name=input_name, form=json.dumps(form), callback_url=callback_url,
        )

    def get(self, job_id: str, owner: str | None = None) -> Any | None:
        query = self.Job.select().where(self.Job.id == job_id)
        if owner is not None:
            query = query.where(self.Job.owner == owner)
        return query.first()

    def by_idempotency_key(self, owner: str, key: str) -> Any | None:
        return (self.Job.select()
                .where((self.Job.owner == owner) & (self.Job.idempotency_key == key)).first())

    def claim(self, job_id: str, token: str) -> Any | None:
        """Mark a queued job running for the worker holding ``token``; None if not queued."""
        now = time.time()
        changed = (self.Job.update(status="running", worker_token=token,
                                   attempts=self.Job.attempts + 1,
                                   lease_expires_at=now + self.settings.lease_s,
                                   started_at=now, windows_done=0)
                   .where((self.Job.id == job_id) & (self.Job.status == "queued")).execute())
        return self.get(job_id) if changed == 1 else None

    def renew(self, job_id: str, token: str) -> bool:
        """Extend the lease; False when the job is no longer this worker's (cancelled, reaped)."""
        changed = (self.Job.update(lease_expires_at=time.time() + self.settings.lease_s)
                   .where((self.Job.id == job_id) & (self.Job.worker_token == token)
                          & (self.Job.status == "running")).execute())
        return bool(changed == 1)

    def progress(self, job_id: str, token: str, done: int, total: int) -> bool:
        """Record windows done; False when the job is no longer this worker's."""
        changed = (self.Job.update(windows_done=done, windows_total=total)
                   .where((self.Job.id == job_id) & (self.Job.worker_token == token)
                          & (self.Job.status == "running")).execute())
        return bool(changed == 1)

    def finish(self, job_id: str, token: str, status: str,
               problem: dict[str, Any] | None = None) -> bool:
        """End a running job held by ``token``; False when it was not (the end is not ours)."""
        changed = (self.Job.update(status=status, finished_at=time.time(), worker_token=None,
                                   lease_expires_at=None,
                                   problem=None if problem is None else json.dumps(problem))
                   .where((self.Job.id == job_id) & (self.Job.worker_token == token)
                          & (self.Job.status == "running")).execute())
        return bool(changed == 1)

    def requeue(self, job_id: str, token: str) -> bool:
        """Give a running job back to the queue (before a retry)."""
        changed = (self.Job.update(status="queued", worker_token=None, lease_expires_at=None)
                   .where((self.Job.id == job_id) & (self.Job.worker_token == token)
                          & (self.Job.status == "running")).execute())
        return bool(changed == 1)

    def fail_queued(self, job_id: str, problem: dict[str, Any]) -> bool:
        changed = (self.Job.update(status="failed", finished_at=time.time(),
                                   problem=json.dumps(problem))
                   .where((self.Job.id == job_id) & (self.Job.status == "queued")).execute())
        return bool(changed == 1)

    def cancel_and_delete(self, job_id: str) -> None:
        """Delete the record and files; a worker holding it notices at its next window."""
        self.Job.delete().where(self.Job.id == job_id).execute()
        self.delete_files(job_id)

    def expired(self) -> list[str]:
        """Ids of running jobs whose lease ran out (their worker is gone or stuck)."""
        now = time.time()
        rows = (self.Job.select(self.Job.id)
                .where((self.Job.status == "running") & (self.Job.lease_expires_at < now)))
        return [row.id for row in rows]

    def take_back(self, job_id: str) -> Any | None:
        """Turn an expired running job back to queued (once: the first reaper wins)."""
        now = time.time()
        changed = (self.Job.update(status="queued", worker_token=None, lease_expires_at=None)
                   .where((self.Job.id == job_id) & (self.Job.status == "running")
                          & (self.Job.lease_expires_at < now)).execute())
        return self.get(job_id) if changed == 1 else None

    def purge(self) -> int:
        """Delete jobs older than the retention, with their files; how many went."""
        cutoff = time.time() - self.settings.retention_h * 3600.0
        old = [row.id for row in self.Job.select(self.Job.id)
               .where(self.Job.created_at < cutoff)]
        for job_id in old:
            self.cancel_and_delete(job_id)
        return len(old)


def new_job_id() -> str:
    """A random job id: 128 bits from the OS's generator, as 32 hex digits."""
    return secrets.token_hex(16)


def owner_of(api_key: str | None) -> str:
    """The owner recorded for a key: its SHA-256 (the key itself is never stored); ``-``
    when the service runs without keys."""
    if not api_key:
        return "-"
    return hashlib.sha256(api_key.encode("utf-8")).hexdigest()


def write_private(path: Path, data: bytes) -> None:
    """Write ``data`` to ``path`` atomically, readable by the service's user only (0600)."""
    tmp = path.with_name(f".{path.name}.{secrets.token_hex(4)}.tmp")
    fd = os.open(tmp, os.O_WRONLY | os.O_CREAT | os.O_EXCL, 0o600)
    with os.fdopen(fd, "wb") as handle:
        handle.write(data)
        handle.flush()
        os.fsync(handle.fileno())
    os.replace(tmp, path)


_STORES: dict[tuple[int, JobSettings], JobStore] = {}
_LOCK = threading.Lock()


def store_for(settings: JobSettings) -> JobStore:
    """The process's store for ``settings`` (a fresh one after a fork)."""
    key = (os.getpid(), settings)
    with _LOCK:
        if key not in _STORES:
            _STORES[key] = JobStore(settings)
        return _STORES[key]


def _iso(moment: float | None) -> str | None:
    if moment is None:
        return None
    return datetime.fromtimestamp(moment, UTC).isoformat(timespec="milliseconds").replace(
        "+00:00", "Z")


def job_document(record: Any) -> dict[str, Any]:
    """The job document of a record (``GET /v1/jobs/{id}``, callbacks)."""
    total = record.windows_total
    progress = 1.0 if record.status == "succeeded" else (
        record.windows_done / total if total else 0.0)
    document: dict[str, Any] = JobSchema().dump({
        "id": record.id, "status": record.status, "progress": progress,
        "windows_done": record.windows_done, "windows_total": total,
        "created_at": _iso(record.created_at), "started_at": _iso(record.started_at),
        "finished_at": _iso(record.finished_at), "attempts": record.attempts,
        "window_s": record.window_s, "window_overlap_s": record.window_overlap_s,
        "problem": None if record.problem is None else json.loads(record.problem),
    })
    return document
