"""Trace files into analysis request bodies: the one reader of the API, ``analyze`` and ``batch``.

CSV goes through :func:`schemas.csv_input.csv_request_body` (decoded here, once);
every other format through :func:`schemas.file_input.file_request_body`. The
multipart upload sends the file(s) as the form field ``file`` (a WFDB record as
several ``file`` parts: the ``.hea`` and the signal files it names). A file that
cannot be read is an :class:`fileformats.UnreadableFileError` on every road.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from pathlib import Path
from typing import Any

from werkzeug.datastructures import FileStorage

from fileformats import UnreadableFileError, detect_format
from schemas.csv_input import csv_request_body
from schemas.file_input import FILE_ONLY_FIELDS, file_request_body, select_channels, split_list
from schemas.requests import DEFAULT_MAX_SAMPLES


def _format_of(name: str, data: bytes, form: Mapping[str, Any], *, unknown_as_csv: bool) -> str:
    given = form.get("format")
    if given:
        return str(given)
    try:
        return detect_format(name, data[:16])
    except UnreadableFileError:
        if unknown_as_csv and not form.get("channels"):
            return "csv"
        raise


def _csv_body(data: bytes, form: Mapping[str, Any], max_samples: int) -> dict[str, Any]:
    try:
        text = data.decode("utf-8")
    except UnicodeDecodeError:
        raise UnreadableFileError(
            "file", "`file` must be CSV text encoded as UTF-8; got bytes that are not."
        ) from None
    csv_form = {k: v for k, v in form.items() if k not in FILE_ONLY_FIELDS and v is not None}
    body = csv_request_body(text, csv_form, max_samples=max_samples)
    return select_channels(body, split_list(str(form.get("channels") or "")))


def files_request_body(files: Mapping[str, bytes], form: Mapping[str, Any], *,
                       unknown_as_csv: bool = False,
                       max_samples: int = DEFAULT_MAX_SAMPLES) -> dict[str, Any]:
    """The request body for uploaded files (name -> content) and their form fields.

    With ``unknown_as_csv``, a single file whose content and name do not tell its
    format (and no ``format`` or ``channels`` field) is read as CSV, as uploads were
    before other formats were read. ``max_samples`` bounds every reader before it
    allocates (``HEARTSWAY_MAX_SAMPLES``).

    Raises
    ------
    marshmallow.ValidationError, fileformats.UnreadableFileError
        For the form or the file.
    """
    if not files:
        raise UnreadableFileError("file", "`file` must be a trace file part; got none.")
    if len(files) > 1 or any(name.endswith(".hea") for name in files):
        return file_request_body(dict(files), {**form, "format": form.get("format") or "wfdb"},
                                 max_samples=max_samples)
    name, data = next(iter(files.items()))
    fmt = _format_of(name, data, form, unknown_as_csv=unknown_as_csv)
    if fmt == "csv":
        return _csv_body(data, form, max_samples)
    return file_request_body(data, {**form, "format": fmt}, name=name, max_samples=max_samples)


def upload_request_body(uploads: Sequence[FileStorage], form: Mapping[str, Any], *,
                        max_samples: int = DEFAULT_MAX_SAMPLES) -> dict[str, Any]:
    """The request body of a multipart upload: its ``file`` parts and other form fields.

    A part named ``file`` sent without a filename arrives as a form field: it is
    taken as the file's text. A single upload whose format neither its content nor
    its name tells is read as CSV.

    Raises
    ------
    marshmallow.ValidationError, fileformats.UnreadableFileError
        For the form or the file (also when there is no ``file`` part).
    """
    fields = dict(form)
    files: dict[str, bytes] = {}
    for k, upload in enumerate(uploads):
        files[Path(upload.filename or f"file_{k}").name] = upload.read()
    if not files and isinstance(fields.get("file"), str):
        files["file"] = fields.pop("file").encode("utf-8")
    return files_request_body(files, fields, unknown_as_csv=True, max_samples=max_samples)


def path_request_body(path: str | Path, form: Mapping[str, Any], *,
                      max_samples: int = DEFAULT_MAX_SAMPLES) -> dict[str, Any]:
    """The request body for a file on disk (a WFDB record by its ``.hea``, ``.dat`` or name).

    Raises
    ------
    marshmallow.ValidationError, fileformats.UnreadableFileError
        For the form or the file.
    """
    p = Path(path)
    form = {k: v for k, v in form.items() if v is not None}
    wfdb = form.get("format") == "wfdb" or p.suffix.lower() in (".hea", ".dat") or (
        not p.exists() and p.with_suffix(".hea").exists()
    )
    if wfdb:
        return file_request_body(p, {**form, "format": "wfdb"}, max_samples=max_samples)
    try:
        data = p.read_bytes()
    except OSError as error:
        raise UnreadableFileError(
            "file", f"`file` must be a readable file; got {p.name!r} ({type(error).__name__})."
        ) from None
    return files_request_body({p.name: data}, form, max_samples=max_samples)
