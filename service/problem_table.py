"""The one table of problems: which error becomes which answer, for the API, the CLI and batch.

Each row names an exception type and what every road makes of it: the HTTP status,
the RFC 9457 problem type and title (``service.problems``), the exit code of
``heartsway analyze`` (``service.cli``) and the kind written in the ``error`` column
of a ``heartsway batch`` table (``service.batch``). :func:`describe` finds the row of
an error (the most derived type listed wins) and the members of its problem body.

Problem types of the service's own domain are ``tag:`` URIs (RFC 4151) under
:data:`schemas.identifiers.PROBLEM_TYPE_PREFIX`; docs/identifiers.md lists them.
Errors of no listed type fall to the last row (a 500 whose message is never shown).
This module knows no web framework, so the CLI and the batch workers import it freely.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any

from features.errors import InvalidInputError, UnusableSignalError
from fileformats import UnreadableFileError
from schemas.errors import SchemaValidationError, flatten_errors, pointer_of
from schemas.identifiers import PROBLEM_TYPE_PREFIX
from service.deadline import ComputeTimeExceeded
from service.job_errors import JobNotFinishedError, StorageFullError

VALIDATION_TYPE = PROBLEM_TYPE_PREFIX + "validation-error"
UNUSABLE_SIGNAL_TYPE = PROBLEM_TYPE_PREFIX + "unusable-signal"
COMPUTE_TIME_TYPE = PROBLEM_TYPE_PREFIX + "compute-time-exceeded"
JOB_NOT_FINISHED_TYPE = PROBLEM_TYPE_PREFIX + "job-not-finished"
STORAGE_FULL_TYPE = PROBLEM_TYPE_PREFIX + "storage-full"
VALIDATION_TITLE = "Request validation failed"

#: Exit codes of ``heartsway`` (documented in service/cli.py and DEVELOPERS.md).
EXIT_OK, EXIT_FAILURE, EXIT_BAD_INPUT, EXIT_UNUSABLE_SIGNAL, EXIT_NO_SERVICE = 0, 1, 2, 3, 4


@dataclass(frozen=True)
class ProblemRow:
    """One exception type and its answer on every road."""

    exception: type[BaseException]
    status: int
    type_uri: str
    title: str
    exit_code: int
    row_kind: str


#: Most derived first where types nest (UnreadableFileError is an InvalidInputError).
PROBLEM_TABLE: tuple[ProblemRow, ...] = (
    ProblemRow(SchemaValidationError, 422, VALIDATION_TYPE, VALIDATION_TITLE,
               EXIT_BAD_INPUT, "validation-error"),
    ProblemRow(UnreadableFileError, 422, VALIDATION_TYPE, VALIDATION_TITLE,
               EXIT_BAD_INPUT, "unreadable-file"),
    ProblemRow(InvalidInputError, 422, VALIDATION_TYPE, VALIDATION_TITLE,
               EXIT_BAD_INPUT, "validation-error"),
    ProblemRow(UnusableSignalError, 422, UNUSABLE_SIGNAL_TYPE, "The trace holds no usable signal",
               EXIT_UNUSABLE_SIGNAL, "unusable-signal"),
    ProblemRow(ComputeTimeExceeded, 503, COMPUTE_TIME_TYPE, "Compute time limit exceeded",
               EXIT_FAILURE, "compute-time-exceeded"),
    ProblemRow(JobNotFinishedError, 409, JOB_NOT_FINISHED_TYPE, "The job has not succeeded",
               EXIT_FAILURE, "job-not-finished"),
    ProblemRow(StorageFullError, 507, STORAGE_FULL_TYPE, "Insufficient storage",
               EXIT_FAILURE, "storage-full"),
    ProblemRow(Exception, 500, "about:blank", "Internal Server Error", EXIT_FAILURE, "error"),
)
_ROWS = {row.exception: row for row in PROBLEM_TABLE}


@dataclass(frozen=True)
class Problem:
    """An error as the table describes it: its row, the detail and the extra body members."""

    row: ProblemRow
    detail: str
    members: dict[str, Any] = field(default_factory=dict)

    def body(self) -> dict[str, Any]:
        """The RFC 9457 members: type, title, status, detail, then the extra ones."""
        return {"type": self.row.type_uri, "title": self.row.title, "status": self.row.status,
                "detail": self.detail, **self.members}

    def short(self) -> str:
        """One line for a batch table: the row kind, the field or reason, the message."""
        errors = self.members.get("errors")
        if errors:
            where, detail = errors[0]["field"], errors[0]["detail"]
        else:
            where, detail = self.members.get("reason"), self.detail
        return ": ".join(str(part) for part in (self.row.row_kind, where, detail) if part)


def row_of(error: BaseException) -> ProblemRow:
    """The table's row for ``error``: that of its most derived listed type."""
    for cls in type(error).__mro__:
        if cls in _ROWS:
            return _ROWS[cls]
    return _ROWS[Exception]


def validation_detail(errors: list[dict[str, str]]) -> str:
    """The detail of a validation problem naming its fields."""
    fields = sorted({e["field"] for e in errors})
    return f"The request breaks {len(errors)} rule(s), in: {', '.join(fields)}."


def describe(error: BaseException) -> Problem:
    """The problem ``error`` makes on every road (see the module docstring).

    The message of an error of no listed type is never shown: it may quote input.
    """
    row = row_of(error)
    if isinstance(error, SchemaValidationError):
        errors = flatten_errors(error.messages)
        return Problem(row, validation_detail(errors), {"errors": errors})
    if isinstance(error, InvalidInputError):
        name = error.field or "body"
        errors = [{"field": name, "pointer": pointer_of(name), "detail": error.message}]
        return Problem(row, validation_detail(errors), {"errors": errors})
    if isinstance(error, UnusableSignalError):
        return Problem(row, error.message, {"reason": error.reason})
    if isinstance(error, ComputeTimeExceeded):
        return Problem(
            row,
            f"The analysis must finish within {error.limit_s:g} s on this service; it was "
            f"stopped after {error.elapsed_s:.1f} s. Send a shorter trace or fewer channels.",
            {"limit_s": error.limit_s},
        )
    if isinstance(error, JobNotFinishedError):
        return Problem(row, "The job's result exists once it has succeeded; its status is "
                            f"{error.status}.")
    if isinstance(error, StorageFullError):
        return Problem(row, "The service cannot store this upload now (its job store is full "
                            "or not writable); try again later or send a smaller file.")
    return Problem(row, f"An unexpected {type(error).__name__} stopped the analysis.")
