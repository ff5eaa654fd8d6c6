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

from features.engine import Options
from fileformats import UnreadableFileError, detect_file_format, detect_format, read_trace
from schemas.csv_input import csv_request_body
from schemas.engine_inputs import EngineCall, engine_inputs
from schemas.file_input import (
    FILE_ONLY_FIELDS,
    FileUploadFormSchema,
    file_request_body,
    select_channels,
    split_list,
)
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


#: Name of a night job's stored JSON body (a file upload keeps its own name).
JSON_INPUT_NAME = "input.json"


def night_call(path: Path, form: Mapping[str, Any], *, max_samples: int,
               max_channels: int) -> EngineCall:
    """The engine inputs of a night job's stored input: a JSON body or a trace file.

    An EDF or BDF file is opened by its header and its samples are read window by window
    (``fileformats.read_trace(..., lazy=True)``); the channels are those the same file
    gives through :func:`path_request_body` and the request schema (equal samples, labels,
    quantities and units; default options). Other formats and JSON bodies are read whole
    through the request schema (``max_samples``, ``max_channels``).

    Raises
    ------
    schemas.errors.SchemaValidationError, fileformats.UnreadableFileError
        For the form or the file.
    """
    from schemas.requests import AnalysisRequestSchema
    from service.bodies import parse_json

    schema = AnalysisRequestSchema(max_samples=max_samples, max_channels=max_channels)
    if path.name == JSON_INPUT_NAME:
        try:
            data = path.read_bytes()
        except OSError as error:
            raise UnreadableFileError(
                "file", "`file` must be a readable stored input; got one that is not "
                f"({type(error).__name__}).") from None
        return engine_inputs(schema.load(parse_json(data)))
    fields = {k: v for k, v in form.items() if v is not None}
    settings = FileUploadFormSchema().load(fields)
    fmt = settings.get("format") or detect_file_format(path)
    if fmt not in ("edf", "bdf"):
        return engine_inputs(schema.load(path_request_body(path, fields,
                                                           max_samples=max_samples)))
    trace = read_trace(path, format=fmt, channels=settings["channels"] or None,
                       fs_hz=settings.get("sampling_rate_hz"), quantity=settings.get("quantity"),
                       unit=settings.get("unit"), lazy=True,
                       max_samples=max_samples)
    if len(trace.channels) > max_channels:
        raise UnreadableFileError("channels", f"`channels` must be at most {max_channels}; got "
                                              f"{len(trace.channels)} (select some).")
    return EngineCall(channels=trace.channels, fs_hz=trace.fs_hz, subject=None, recording=None,
                      options=Options())

