"""RFC 9457 problem details: one set of error handlers for the whole service.

Plain HTTP errors (400, 401, 404, 405, 413, 415, 500, and 503 from /readyz) use the type
``about:blank`` with the status phrase as title, as RFC 9457 section 4.2.1
describes. Problems of our own domain (validation, unusable signal, compute time)
come from the one table in :mod:`service.problem_table`, which the CLI and the batch
read too; their types are ``tag:`` URIs (RFC 4151). Responses never carry a stack trace.
"""

from __future__ import annotations

from http import HTTPStatus
from typing import Any

from flask import Flask, Response, current_app, json, request
from werkzeug.exceptions import HTTPException

from service.deadline import ComputeTimeExceeded
from service.logs import current_request_id, logger, sanitised_stack
from service.problem_table import PROBLEM_TABLE, describe, row_of

PROBLEM_MEDIA_TYPE = "application/problem+json"


#: Titles from RFC 9110 section 15 where Python's phrases still use older names.
_TITLES = {413: "Content Too Large", 422: "Unprocessable Content"}


def problem(
    status: int,
    detail: str,
    *,
    type_: str = "about:blank",
    title: str | None = None,
    headers: dict[str, str] | None = None,
    **members: Any,
) -> Response:
    """Build a problem-details response."""
    body: dict[str, Any] = {
        "type": type_,
        "title": title or _TITLES.get(status) or HTTPStatus(status).phrase,
        "status": status,
        "detail": detail,
        "request_id": current_request_id(),
    }
    body.update(members)
    response = Response(
        json.dumps(body), status=status, mimetype=PROBLEM_MEDIA_TYPE, headers=headers
    )
    return response


def _http_error(error: HTTPException) -> Response:
    status = error.code or 500
    headers = {}
    detail = error.description or HTTPStatus(status).description
    if status == 405:
        allowed = ", ".join(sorted(getattr(error, "valid_methods", None) or []))
        headers["Allow"] = allowed
        detail = f"The method {request.method} is not allowed on this path; use one of: {allowed}."
    elif status == 413:
        limit = current_app.config["MAX_CONTENT_LENGTH"]
        sent = request.content_length
        detail = f"The body must be at most {limit} bytes; got " + (
            f"{sent} bytes." if sent is not None else "more."
        )
    elif status == 415 and request.headers.get("Content-Encoding"):
        # RFC 9110 section 15.5.16: name the codings accepted (none but identity).
        headers["Accept-Encoding"] = "identity"
    elif status == 404:
        detail = "No resource at this path; the contract is at /openapi.yaml."
    return problem(status, detail, headers=headers)


def _tabled(error: Exception) -> Response:
    """The answer the problem table gives ``error`` (service/problem_table.py)."""
    if isinstance(error, ComputeTimeExceeded):
        logger.warning(
            "compute_time_exceeded",
            extra={
                "fields": {
                    "request_id": current_request_id(),
                    "limit_s": error.limit_s,
                    "elapsed_s": round(error.elapsed_s, 3),
                }
            },
        )
    described = describe(error)
    row = described.row
    return problem(row.status, described.detail, type_=row.type_uri, title=row.title,
                   **described.members)


def _unexpected(error: Exception) -> Response:
    if isinstance(error, HTTPException):
        return _http_error(error)
    # The record carries the type and the frames only, not the exception: no
    # handler, ours or one an operator adds, can render its message.
    logger.error(
        "unhandled_error",
        extra={
            "fields": {
                "request_id": current_request_id(),
                "exception": type(error).__name__,
                "stack": sanitised_stack(error.__traceback__),
            }
        },
    )
    row = row_of(error)  # the table's last row: 500, about:blank, no details
    return problem(
        row.status,
        "The server met an unexpected error; it has been logged under the request id.",
        type_=row.type_uri,
        title=row.title,
    )


def init_app(app: Flask) -> None:
    """Register the handlers on ``app``."""
    app.register_error_handler(HTTPException, _http_error)
    for row in PROBLEM_TABLE:
        if row.exception is not Exception:
            app.register_error_handler(row.exception, _tabled)
    # Anything else: logged by type and frames only, answered 500 without details.
    app.register_error_handler(Exception, _unexpected)
