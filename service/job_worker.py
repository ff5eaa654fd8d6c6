"""Night job workers: Huey's consumer running :func:`run_job`, with the lease kept alive.

``heartsway worker`` runs :func:`run_worker` (one consumer, one job at a time);
``heartsway serve`` starts ``--job-workers`` of them beside the API. Each worker:

1. takes a message from Huey's queue (one worker per message, ``FOR UPDATE SKIP LOCKED`` on
   PostgreSQL, an immediate transaction on SQLite) and claims the job record (queued ->
   running, attempts + 1, a fresh lease held by a random token);
2. reads the stored input window by window (:func:`service.uploads.night_call`), runs
   :func:`service.analysis.analyze_night`, recording windows done after each window (and
   stopping when the record is gone: the job was deleted);
3. writes the night document to ``result.json`` (0600, written whole then renamed: one
   result per job whatever the attempt) and ends the record ``succeeded`` if the lease is
   still its own; deletes the upload; queues the callback;
4. on an error of the input (a 422 row of the problem table) ends it ``failed`` with that
   problem at once; on any other error gives it back and lets Huey retry it (at most
   :data:`service.job_store.MAX_ATTEMPTS` attempts, then ``failed``).

Beside the consumer, a maintenance thread renews the lease of the job in hand every
``lease_s / 3`` s, and every ``lease_s / 3`` s takes back jobs whose lease expired (their
worker died: SIGKILL, power loss) and once an hour purges jobs past the retention.
"""

from __future__ import annotations

import hashlib
import hmac
import json
import logging
import secrets
import threading
import time
import urllib.error
import urllib.request
from typing import Any

from huey.contrib.sql_huey import SqlHuey

from features import __version__ as ENGINE_VERSION
from features.limits import MAX_CHANNELS
from schemas.jobs import night_document
from service.allocator import tune_allocator
from service.analysis import analyze_night
from service.job_store import (
    MAX_ATTEMPTS,
    JobSettings,
    JobStore,
    job_document,
    store_for,
    write_private,
)
from service.logs import logger
from service.problem_table import describe
from service.uploads import night_call

#: Samples a night job may hold, all channels together: 24 h of 8 channels at 2000 Hz
#: (the engine's channel and rate limits); the upload's byte limit usually binds first.
JOB_MAX_SAMPLES = 24 * 3600 * 2000 * 8
#: Callback attempts and the first back-off (s, doubled after each failure by Huey).
CALLBACK_ATTEMPTS = 5
CALLBACK_FIRST_DELAY_S = 2.0
SIGNATURE_HEADER = "Heartsway-Signature"
_PURGE_EVERY_S = 3600.0


class JobGone(Exception):
    """The job was deleted or taken back while this worker ran it: stop without a trace."""


class CallbackFailed(Exception):
    """The callback's receiver did not answer 2xx: Huey tries again later."""


class RetryJob(Exception):
    """An unexpected error: Huey runs the job again (the original is not chained: its
    message may quote input)."""


def callback_signature(secret: str, body: bytes) -> str:
    """``sha256=<hex>``: HMAC-SHA256 (RFC 2104) of the body under the shared secret."""
    return "sha256=" + hmac.new(secret.encode("utf-8"), body, hashlib.sha256).hexdigest()


class _NoRedirect(urllib.request.HTTPRedirectHandler):
    def redirect_request(self, *args: Any, **kwargs: Any) -> None:
        return None  # a listed host must not send the callback on to another one


def post_callback(url: str, body: bytes, secret: str, timeout_s: float = 10.0) -> bool:
    """POST the signed job document; True on a 2xx answer."""
    request = urllib.request.Request(url, data=body, method="POST", headers={
        "Content-Type": "application/json",
        SIGNATURE_HEADER: callback_signature(secret, body),
    })
    opener = urllib.request.build_opener(_NoRedirect)
    try:
        with opener.open(request, timeout=timeout_s) as answer:
            return bool(200 <= answer.status < 300)
    except (urllib.error.URLError, OSError, ValueError):
        return False


class JobQueue:
    """The Huey instance of one store, with the night-job and callback tasks registered."""

    def __init__(self, store: JobStore) -> None:
        self.store = store
        self.huey = SqlHuey(name="heartsway-jobs", database=store.database, results=False,
                            utc=True)
        self.run_task = self.huey.task(retries=MAX_ATTEMPTS - 1, retry_delay=1,
                                       name="run_night_job")(self._run)
        self.callback_task = self.huey.task(
            retries=CALLBACK_ATTEMPTS - 1, retry_delay=CALLBACK_FIRST_DELAY_S, retry_backoff=2,
            name="send_job_callback")(self._callback)
        self.current: tuple[str, str] | None = None

    # -- producer side ---------------------------------------------------------------

    def enqueue(self, job_id: str) -> None:
        self.run_task(job_id)

    # -- tasks -----------------------------------------------------------------------

    def _run(self, job_id: str) -> None:
        token = secrets.token_hex(8)
        record = self.store.claim(job_id, token)
        if record is None:
            return  # deleted, or another worker has it
        self.current = (job_id, token)
        started = time.perf_counter()
        try:
            document = self._analyse(record, token)
        except JobGone:
            return
        except Exception as error:  # noqa: BLE001 - every error ends or retries the job
            self._failed(record, token, error)
            return
        finally:
            self.current = None
        path = self.store.result_path(job_id)
        write_private(path, json.dumps(document, allow_nan=False).encode("utf-8"))
        if self.store.finish(job_id, token, "succeeded"):
            self.store.delete_files(job_id, keep_result=True)
            self._log("job_succeeded", job_id, record.attempts, time.perf_counter() - started)
            self._announce(job_id)

    def _analyse(self, record: Any, token: str) -> dict[str, Any]:
        form = json.loads(record.form)
        call = night_call(self.store.input_path(record), form, max_samples=JOB_MAX_SAMPLES,
                          max_channels=MAX_CHANNELS)

        def on_window(done: int, total: int) -> None:
            if not self.store.progress(record.id, token, done, total):
                raise JobGone()

        windowed, summary = analyze_night(call, window_s=record.window_s,
                                          overlap_s=record.window_overlap_s,
                                          on_window=on_window)
        return night_document(record.id, ENGINE_VERSION, windowed, summary)

    def _failed(self, record: Any, token: str, error: Exception) -> None:
        problem = describe(error)
        final = problem.row.status == 422 or record.attempts >= MAX_ATTEMPTS
        self._log("job_attempt_failed", record.id, record.attempts, None,
                  error=type(error).__name__, final=final)
        if final:
            if self.store.finish(record.id, token, "failed", problem.body()):
                self.store.delete_files(record.id)
                self._announce(record.id)
            return
        if self.store.requeue(record.id, token):
            raise RetryJob(type(error).__name__) from None

    def _callback(self, job_id: str) -> None:
        record = self.store.get(job_id)
        if record is None or not record.callback_url:
            return
        body = json.dumps(job_document(record), allow_nan=False).encode("utf-8")
        if not post_callback(record.callback_url, body, callback_secret()):
            self._log("callback_failed", job_id, record.attempts, None)
            raise CallbackFailed()  # Huey retries: 2, 4, 8, 16 s later
        self._log("callback_delivered", job_id, record.attempts, None)

    def _announce(self, job_id: str) -> None:
        record = self.store.get(job_id)
        if record is not None and record.callback_url:
            self.callback_task(job_id)

    # -- maintenance -----------------------------------------------------------------

    def reap_expired(self) -> int:
        """Put running jobs whose lease expired back on the queue (or fail them after
        :data:`MAX_ATTEMPTS`); how many were taken back."""
        taken = 0
        for job_id in self.store.expired():
            record = self.store.take_back(job_id)
            if record is None:
                continue
            taken += 1
            if record.attempts >= MAX_ATTEMPTS:
                problem = {"type": "about:blank", "title": "Internal Server Error",
                           "status": 500,
                           "detail": f"The job's worker stopped answering on each of its "
                                     f"{record.attempts} attempts."}
                if self.store.fail_queued(job_id, problem):
                    self.store.delete_files(job_id)
                    self._announce(job_id)
            else:
                self._log("job_taken_back", job_id, record.attempts, None)
                self.enqueue(job_id)
        return taken

    def maintain(self, stop: threading.Event) -> None:
        """Renew the lease in hand, take back expired jobs, purge old ones, until ``stop``."""
        beat = self.store.settings.lease_s / 3.0
        last_purge = 0.0
        while not stop.wait(beat):
            try:
                current = self.current
                if current is not None:
                    self.store.renew(*current)
                self.reap_expired()
                if time.monotonic() - last_purge > _PURGE_EVERY_S:
                    self.store.purge()
                    last_purge = time.monotonic()
            except Exception as error:  # noqa: BLE001 - the thread must outlive a bad round
                logger.warning("job_maintenance_error",
                               extra={"fields": {"exception": type(error).__name__}})

    @staticmethod
    def _log(event: str, job_id: str, attempt: int, seconds: float | None,
             **more: Any) -> None:
        fields: dict[str, Any] = {"job_id": job_id, "attempt": attempt, **more}
        if seconds is not None:
            fields["seconds"] = round(seconds, 3)
        logger.info(event, extra={"fields": fields})


def callback_secret() -> str:
    import os

    return os.environ.get("HEARTSWAY_CALLBACK_SECRET", "")


_QUEUES: dict[int, JobQueue] = {}


def queue_for(settings: JobSettings) -> JobQueue:
    """The process's job queue for ``settings``."""
    store = store_for(settings)
    key = id(store)
    if key not in _QUEUES:
        _QUEUES[key] = JobQueue(store)
    return _QUEUES[key]


def run_worker(settings: JobSettings | None = None) -> None:
    """Run one job worker until SIGINT/SIGTERM (``heartsway worker``)."""
    tune_allocator()  # before any night is read (service.allocator)
    settings = settings or JobSettings.from_env()
    queue = queue_for(settings)
    logging.getLogger("huey").setLevel(logging.WARNING)
    stop = threading.Event()
    thread = threading.Thread(target=queue.maintain, args=(stop,), daemon=True,
                              name="job-maintenance")
    thread.start()
    queue.reap_expired()
    consumer = queue.huey.create_consumer(workers=1, worker_type="thread", periodic=False,
                                          initial_delay=0.1, backoff=1.15, max_delay=1.0)
    try:
        consumer.run()
    finally:
        stop.set()
