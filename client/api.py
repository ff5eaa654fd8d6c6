"""The client: JSON and multipart requests over urllib, retried on 503."""

from __future__ import annotations

import json
import os
import sys
import time
import urllib.error
import urllib.request
import uuid
from collections.abc import Callable, Iterator, Mapping, Sequence
from dataclasses import dataclass
from email.utils import parsedate_to_datetime
from pathlib import Path
from typing import Any

FHIR_JSON = "application/fhir+json"
IMAGE_TYPES = {"png": "image/png", "svg": "image/svg+xml"}
#: Longest wait honoured from a ``Retry-After`` header, s.
MAX_RETRY_AFTER_S = 30.0
#: The service's own problem types (``ApiError.problem["type"]``): ``tag:`` URIs
#: (RFC 4151), identifiers only, never fetched (docs/identifiers.md).
VALIDATION_ERROR = "tag:heartsway.dev,2026:problem/validation-error"
UNUSABLE_SIGNAL = "tag:heartsway.dev,2026:problem/unusable-signal"
COMPUTE_TIME_EXCEEDED = "tag:heartsway.dev,2026:problem/compute-time-exceeded"
JOB_NOT_FINISHED = "tag:heartsway.dev,2026:problem/job-not-finished"
STORAGE_FULL = "tag:heartsway.dev,2026:problem/storage-full"


@dataclass(frozen=True)
class Feature:
    """One feature of the feature vector: value (None with a reason), unit, confidence."""

    name: str
    value: float | None
    unit: str | None
    confidence: float
    reason: str | None


@dataclass(frozen=True)
class Analysis:
    """An analysis answer.

    Attributes
    ----------
    analysis_id, engine_version, feature_set_version
        As in the answer.
    heart_rate_bpm, heart_rate_confidence
        ``heart_rate.mean_bpm`` (None when not computed) and its confidence.
    breathing_rate_per_min
        ``respiration.rate_per_min``, None when not computed.
    features
        The feature vector, in catalogue order.
    warnings, notice
        As in the answer.
    document
        The whole JSON answer.
    """

    analysis_id: str
    engine_version: str
    feature_set_version: str
    heart_rate_bpm: float | None
    heart_rate_confidence: float
    breathing_rate_per_min: float | None
    features: tuple[Feature, ...]
    warnings: tuple[str, ...]
    notice: str
    document: dict[str, Any]

    def feature(self, name: str) -> Feature:
        """The feature called ``name``.

        Raises
        ------
        KeyError
            When the vector has no such feature.
        """
        for item in self.features:
            if item.name == name:
                return item
        raise KeyError(name)

    @classmethod
    def from_document(cls, document: dict[str, Any]) -> Analysis:
        vector = document["feature_vector"]
        respiration = document.get("respiration") or {}
        return cls(
            analysis_id=str(document["analysis_id"]),
            engine_version=str(document["engine_version"]),
            feature_set_version=str(vector["feature_set_version"]),
            heart_rate_bpm=document["heart_rate"]["mean_bpm"],
            heart_rate_confidence=float(document["heart_rate"]["confidence"]),
            breathing_rate_per_min=respiration.get("rate_per_min"),
            features=tuple(Feature(f["name"], f["value"], f["unit"], float(f["confidence"]),
                                   f["reason"]) for f in vector["features"]),
            warnings=tuple(document.get("warnings", ())),
            notice=str(document["notice"]),
            document=document,
        )


class ApiError(Exception):
    """The service answered with an error (RFC 9457 problem details when it could).

    Attributes
    ----------
    status
        HTTP status.
    problem
        The problem document (``type``, ``title``, ``detail``, ``errors`` ...), or
        ``{"detail": text}`` when the body was not JSON. ``type`` is ``about:blank``
        for plain HTTP errors, else :data:`VALIDATION_ERROR`, :data:`UNUSABLE_SIGNAL`
        (with a ``reason``) or :data:`COMPUTE_TIME_EXCEEDED`.
    """

    def __init__(self, status: int, problem: dict[str, Any]) -> None:
        super().__init__(f"HTTP {status}: {problem.get('detail') or problem.get('title')}")
        self.status = status
        self.problem = problem


class ServiceUnavailable(ApiError):
    """503 on every attempt."""


def _multipart(fields: Mapping[str, str], files: Sequence[tuple[str, bytes]]) -> tuple[bytes, str]:
    boundary = uuid.uuid4().hex
    chunks: list[bytes] = []
    for name, value in fields.items():
        chunks.append(f'--{boundary}\r\nContent-Disposition: form-data; name="{name}"\r\n\r\n'
                      .encode() + value.encode("utf-8") + b"\r\n")
    for filename, data in files:
        safe = filename.replace('"', "_").replace("\r", "_").replace("\n", "_")
        chunks.append(f'--{boundary}\r\nContent-Disposition: form-data; name="file"; '
                      f'filename="{safe}"\r\nContent-Type: application/octet-stream\r\n\r\n'
                      .encode() + data + b"\r\n")
    chunks.append(f"--{boundary}--\r\n".encode())
    return b"".join(chunks), f"multipart/form-data; boundary={boundary}"


def _retry_after(value: str | None, default_s: float) -> float:
    if not value:
        return default_s
    try:
        seconds = float(value)
    except ValueError:
        try:
            seconds = parsedate_to_datetime(value).timestamp() - time.time()
        except (TypeError, ValueError):
            return default_s
    return min(max(seconds, 0.0), MAX_RETRY_AFTER_S)


class HeartswayClient:
    """Client of one heartsway service.

    Parameters
    ----------
    base_url
        For example ``"http://127.0.0.1:8000"``.
    api_key
        Sent as ``Authorization: Bearer <key>`` when given (else ``HEARTSWAY_API_KEY``
        from the environment, if set).
    timeout_s
        Socket timeout of one attempt, s.
    retries
        Further attempts after a 503 (the service is busy or an analysis ran out of
        time); 0 for none.
    backoff_s
        Wait before the first retry, s, doubled each time; a ``Retry-After`` header
        (capped at 30 s) takes precedence.
    """

    def __init__(self, base_url: str, *, api_key: str | None = None, timeout_s: float = 120.0,
                 retries: int = 3, backoff_s: float = 0.5) -> None:
        if retries < 0:
            raise ValueError(f"`retries` must be 0 or more; got {retries}.")
        self.base_url = base_url.rstrip("/")
        self.api_key = api_key if api_key is not None else os.environ.get("HEARTSWAY_API_KEY")
        self.timeout_s = timeout_s
        self.retries = retries
        self.backoff_s = backoff_s

    def _request(self, method: str, path: str, *, body: Any = None,
                 content_type: str | None = None, accept: str = "application/json",
                 extra_headers: Mapping[str, str] | None = None) -> bytes:
        headers = {"Accept": accept, **(extra_headers or {})}
        if content_type:
            headers["Content-Type"] = content_type
        if self.api_key:
            headers["Authorization"] = f"Bearer {self.api_key}"
        wait = self.backoff_s
        for attempt in range(self.retries + 1):
            data = body() if callable(body) else body  # a stream is made afresh per attempt
            request = urllib.request.Request(self.base_url + path, data=data, headers=headers,
                                             method=method)
            try:
                with urllib.request.urlopen(request, timeout=self.timeout_s) as response:
                    data: bytes = response.read()
                    return data
            except urllib.error.HTTPError as error:
                text = error.read()
                try:
                    problem = json.loads(text)
                except ValueError:
                    problem = {"detail": text.decode("utf-8", "replace")[:500]}
                if error.code != 503:
                    raise ApiError(error.code, problem) from None
                if attempt == self.retries:
                    raise ServiceUnavailable(503, problem) from None
                time.sleep(_retry_after(error.headers.get("Retry-After"), wait))
                wait *= 2
        raise AssertionError("not reached")

    def _json(self, method: str, path: str, **kwargs: Any) -> Any:
        return json.loads(self._request(method, path, **kwargs))

    def health(self) -> dict[str, Any]:
        """``GET /healthz``."""
        result: dict[str, Any] = self._json("GET", "/healthz")
        return result

    def features(self) -> dict[str, Any]:
        """``GET /v1/features``: the feature catalogue."""
        result: dict[str, Any] = self._json("GET", "/v1/features")
        return result

    def analyze(self, body: Mapping[str, Any]) -> Analysis:
        """``POST /v1/analyses`` with a JSON body (see the README for its members)."""
        document = self._json("POST", "/v1/analyses", body=json.dumps(body).encode(),
                              content_type="application/json")
        return Analysis.from_document(document)

    def _file_body(self, path: str | Path, fields: Mapping[str, Any]) -> tuple[bytes, str]:
        p = Path(path)
        parts = [p]
        if p.suffix.lower() == ".hea":
            # A WFDB record: the header and the signal files it names.
            names = {line.split()[0] for line in p.read_text(encoding="ascii").splitlines()[1:]
                     if line.strip() and not line.startswith("#")}
            parts += [p.with_name(name) for name in sorted(names)]
        form = {k: str(v) for k, v in fields.items() if v is not None and v != ""}
        return _multipart(form, [(part.name, part.read_bytes()) for part in parts])

    def analyze_file(self, path: str | Path, *, sampling_rate_hz: float | None = None,
                     channels: Sequence[str] = (), quantity: str | None = None,
                     unit: str | None = None, include: Sequence[str] = ()) -> Analysis:
        """``POST /v1/analyses`` with a trace file: CSV, EDF/BDF, WFDB (``.hea``), NumPy, Parquet.

        ``sampling_rate_hz`` is needed only for formats that do not carry it.
        """
        body, content_type = self._file_body(path, {
            "sampling_rate_hz": sampling_rate_hz, "channels": ",".join(channels),
            "quantity": quantity, "unit": unit, "include": ",".join(include)})
        document = self._json("POST", "/v1/analyses", body=body, content_type=content_type)
        return Analysis.from_document(document)

    def fhir_bundle(self, body: Mapping[str, Any]) -> dict[str, Any]:
        """``POST /v1/analyses`` answered as a FHIR R4 Bundle of Observations."""
        result: dict[str, Any] = self._json("POST", "/v1/analyses",
                                            body=json.dumps(body).encode(),
                                            content_type="application/json", accept=FHIR_JSON)
        return result

    def report(self, body: Mapping[str, Any], *, image_format: str = "png") -> bytes:
        """``POST /v1/reports``: the report image, ``"png"`` or ``"svg"``."""
        if image_format not in IMAGE_TYPES:
            raise ValueError(f"`image_format` must be one of png, svg; got {image_format!r}.")
        return self._request("POST", "/v1/reports", body=json.dumps(body).encode(),
                             content_type="application/json", accept=IMAGE_TYPES[image_format])

    # -- night jobs ------------------------------------------------------------------

    def submit(self, path_or_body: str | Path | Mapping[str, Any], *, window_s: float = 300.0,
               window_overlap_s: float = 0.0, callback_url: str | None = None,
               idempotency_key: str | None = None, sampling_rate_hz: float | None = None,
               channels: Sequence[str] = (), quantity: str | None = None,
               unit: str | None = None, file_format: str | None = None) -> Job:
        """``POST /v1/jobs``: queue a whole night (a trace file, streamed, or a JSON body).

        The file is sent as it is read, never held whole in memory. ``idempotency_key``
        (sent as ``Idempotency-Key``) makes a retried submission return the first job.
        """
        settings = {"window_s": window_s, "window_overlap_s": window_overlap_s,
                    "callback_url": callback_url}
        headers = {"Idempotency-Key": idempotency_key} if idempotency_key else {}
        if isinstance(path_or_body, Mapping):
            body = {**path_or_body, **{k: v for k, v in settings.items() if v is not None}}
            document = self._json("POST", "/v1/jobs", body=json.dumps(body).encode(),
                                  content_type="application/json", extra_headers=headers)
            return Job(self, document)
        fields = {**settings, "sampling_rate_hz": sampling_rate_hz,
                  "channels": ",".join(channels), "quantity": quantity, "unit": unit,
                  "format": file_format}
        form = {k: str(v) for k, v in fields.items() if v is not None and v != ""}
        make, length, content_type = _multipart_stream(form, Path(path_or_body))
        headers["Content-Length"] = str(length)
        document = self._json("POST", "/v1/jobs", body=make, content_type=content_type,
                              extra_headers=headers)
        return Job(self, document)

    def job(self, job_id: str) -> Job:
        """``GET /v1/jobs/{id}``: a job submitted earlier."""
        return Job(self, self._json("GET", f"/v1/jobs/{job_id}"))


_CHUNK = 1 << 20


def _multipart_stream(fields: Mapping[str, str], path: Path
                      ) -> tuple[Callable[[], Iterator[bytes]], int, str]:
    """A multipart body read from ``path`` as it is sent: (chunk maker, length, type)."""
    boundary = uuid.uuid4().hex
    head = b"".join(f'--{boundary}\r\nContent-Disposition: form-data; name="{name}"\r\n\r\n'
                    .encode() + value.encode("utf-8") + b"\r\n" for name, value in fields.items())
    safe = path.name.replace('"', "_").replace("\r", "_").replace("\n", "_")
    head += (f'--{boundary}\r\nContent-Disposition: form-data; name="file"; filename="{safe}"'
             f"\r\nContent-Type: application/octet-stream\r\n\r\n").encode()
    tail = f"\r\n--{boundary}--\r\n".encode()
    size = path.stat().st_size

    def chunks() -> Iterator[bytes]:
        yield head
        with path.open("rb") as handle:
            while block := handle.read(_CHUNK):
                yield block
        yield tail

    return chunks, len(head) + size + len(tail), f"multipart/form-data; boundary={boundary}"


class Job:
    """A night job on the service: its document, refreshed by :meth:`refresh` and
    :meth:`wait`, its result by :meth:`result`.

    Attributes
    ----------
    id, status, progress
        As in the last job document fetched.
    document
        That document.
    """

    def __init__(self, client: HeartswayClient, document: dict[str, Any]) -> None:
        self._client = client
        self.document = document

    @property
    def id(self) -> str:
        return str(self.document["id"])

    @property
    def status(self) -> str:
        return str(self.document["status"])

    @property
    def progress(self) -> float:
        return float(self.document["progress"])

    def refresh(self) -> Job:
        """Fetch the job document again."""
        self.document = self._client._json("GET", f"/v1/jobs/{self.id}")
        return self

    def wait(self, *, timeout_s: float | None = None, poll_s: float = 1.0,
             progress: bool | None = None) -> Job:
        """Poll until the job ends (succeeded, failed or cancelled).

        ``progress`` draws a bar on stderr; by default when stderr is a terminal.

        Raises
        ------
        TimeoutError
            When ``timeout_s`` passes first.
        """
        show = sys.stderr.isatty() if progress is None else progress
        deadline = None if timeout_s is None else time.monotonic() + timeout_s
        while self.refresh().status not in JOB_ENDED:
            if show:
                _bar(self.progress, self.status)
            if deadline is not None and time.monotonic() >= deadline:
                raise TimeoutError(f"job {self.id} still {self.status} after {timeout_s:g} s")
            time.sleep(poll_s)
        if show:
            _bar(self.progress, self.status)
            sys.stderr.write("\n")
        return self

    def result(self, *, fhir: bool = False) -> dict[str, Any]:
        """``GET /v1/jobs/{id}/result``: the night document (or its FHIR R4 Bundle).

        Raises
        ------
        ApiError
            409 while the job has not succeeded.
        """
        accept = FHIR_JSON if fhir else "application/json"
        result: dict[str, Any] = self._client._json("GET", f"/v1/jobs/{self.id}/result",
                                                    accept=accept)
        return result

    def delete(self) -> None:
        """``DELETE /v1/jobs/{id}``: cancel the job and delete its files."""
        self._client._request("DELETE", f"/v1/jobs/{self.id}")


#: Statuses after which a job changes no more.
JOB_ENDED = ("succeeded", "failed", "cancelled")
_BAR_WIDTH = 30


def _bar(fraction: float, status: str) -> None:
    filled = int(round(_BAR_WIDTH * min(max(fraction, 0.0), 1.0)))
    sys.stderr.write(f"\r[{'#' * filled}{'.' * (_BAR_WIDTH - filled)}] "
                     f"{100 * fraction:5.1f} % {status:<10}")
    sys.stderr.flush()
