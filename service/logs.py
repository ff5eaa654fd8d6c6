"""Structured JSON log lines with a request id.

One line per request (method, route, status, duration, body size) and one
per unexpected error. Nothing from the body goes into a log line: no samples,
no subject fields, no device ids; an exception is logged as its type and a
stack of ``file:line in function`` frames, never its message. The request id
comes from ``X-Request-ID`` when the client sends a well-formed one, otherwise
it is generated, and it is echoed in the response.
"""

from __future__ import annotations

import json
import logging
import os
import re
import sys
import time
import traceback
import uuid
from pathlib import Path
from types import TracebackType
from typing import Any

from flask import Flask, Response, g, request

LOGGER_NAME = "heartsway.service"
REQUEST_ID_HEADER = "X-Request-ID"
_REQUEST_ID = re.compile(r"^[A-Za-z0-9._-]{1,64}$")

logger = logging.getLogger(LOGGER_NAME)


class JsonFormatter(logging.Formatter):
    """Render a record as one JSON object: time, level, logger, event and its fields."""

    def format(self, record: logging.LogRecord) -> str:
        line: dict[str, Any] = {
            "time": time.strftime("%Y-%m-%dT%H:%M:%S", time.gmtime(record.created))
            + f".{int(record.msecs):03d}Z",
            "level": record.levelname.lower(),
            "logger": record.name,
            "event": record.getMessage(),
        }
        line.update(getattr(record, "fields", {}))
        if record.exc_info and record.exc_info[0] is not None:
            # The type and where it was raised, never the message: an exception's
            # text can quote the values (samples, identifiers) it was raised on.
            line["exception"] = record.exc_info[0].__name__
            line["stack"] = sanitised_stack(record.exc_info[2])
        return json.dumps(line, default=str, allow_nan=False)


def sanitised_stack(trace: TracebackType | None) -> list[str]:
    """Frames of a traceback as ``path:line in function``, without messages or locals.

    Paths are shortened to the part below ``site-packages`` or the repository
    (the last three components at most), so no home directory is logged either.
    """
    frames = []
    for frame in traceback.extract_tb(trace):
        parts = Path(frame.filename).parts
        if "site-packages" in parts:
            parts = parts[parts.index("site-packages") + 1 :]
        frames.append(f"{'/'.join(parts[-3:])}:{frame.lineno} in {frame.name}")
    return frames


def configure_logging(level: str) -> None:
    """Send the service logger's lines, as JSON, to standard error (once per process)."""
    if not any(getattr(h, "_heartsway", False) for h in logger.handlers):
        handler = logging.StreamHandler(sys.stderr)
        handler.setFormatter(JsonFormatter())
        handler._heartsway = True  # type: ignore[attr-defined]
        logger.addHandler(handler)
    logger.setLevel(level.upper())
    logger.propagate = False


def current_request_id() -> str:
    """The id of the request being served (generated on first use)."""
    if "request_id" not in g:
        sent = request.headers.get(REQUEST_ID_HEADER, "")
        g.request_id = sent if _REQUEST_ID.match(sent) else uuid.uuid4().hex
    return str(g.request_id)


def _start() -> None:
    g.started = time.perf_counter()
    current_request_id()


def _finish(response: Response) -> Response:
    request_id = current_request_id()
    response.headers[REQUEST_ID_HEADER] = request_id
    elapsed_ms = (time.perf_counter() - g.get("started", time.perf_counter())) * 1000.0
    logger.info(
        "request",
        extra={
            "fields": {
                "request_id": request_id,
                "method": request.method,
                # The matched route, not the raw path: nothing a client typed.
                "route": request.url_rule.rule if request.url_rule else None,
                "status": response.status_code,
                "duration_ms": round(elapsed_ms, 1),
                "bytes_in": request.content_length,
                # The serving process: tells gunicorn's workers apart (no person in it).
                "pid": os.getpid(),
            }
        },
    )
    return response


def init_app(app: Flask) -> None:
    """Attach request ids and the per-request log line to ``app``."""
    configure_logging(app.config["HEARTSWAY_LOG_LEVEL"])
    app.before_request(_start)
    app.after_request(_finish)
