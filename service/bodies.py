"""Reading request bodies: strict JSON, or a multipart CSV upload."""

from __future__ import annotations

import functools
import json
from typing import Any, NoReturn

import numpy as np
import orjson
from flask import current_app, request
from werkzeug.exceptions import BadRequest, RequestEntityTooLarge, UnsupportedMediaType

from schemas.requests import AnalysisRequest, AnalysisRequestSchema
from service.uploads import upload_request_body

JSON_MEDIA_TYPE = "application/json"
MULTIPART_MEDIA_TYPE = "multipart/form-data"


def _reject_constant(name: str) -> NoReturn:
    raise ValueError(f"{name} is not a JSON number")


#: Bodies with fewer opening brackets than this cannot nest past the standard parser's
#: recursion limit (about 1000, less the stack of the request), so the fast parser may
#: answer for them.
_FAST_MAX_BRACKETS = 500


def _opening_brackets(data: bytes) -> int:
    """How many ``[`` and ``{`` bytes ``data`` holds (numpy: bytes.count is a third as fast)."""
    octets = np.frombuffer(data, dtype=np.uint8)
    return int(np.count_nonzero(octets == ord("["))) + int(np.count_nonzero(octets == ord("{")))


def parse_json(data: bytes) -> Any:
    """Parse JSON bytes (RFC 8259) as :func:`json.loads` would, refusing NaN and Infinity.

    orjson parses first (about four times faster on a body of 75,000 numbers, the same
    floats to the bit). Whatever it refuses (bad JSON, NaN, a number past float64,
    nesting beyond its limit, but also UTF-16 bodies and lone surrogate escapes, which
    the standard parser accepts) goes to :func:`json.loads`, which gives the error its
    usual message, or the document. Bodies with many brackets skip orjson: its nesting
    limit (1024) is above the standard parser's, whose error must stay the same.
    One difference remains: an integer beyond 64 bits comes back as the nearest float
    rather than an int (the value a float64 sample gets from either).

    Raises
    ------
    werkzeug.exceptions.BadRequest
        When the body is not valid UTF-8 JSON or nests too deeply.
    """
    if _opening_brackets(data) < _FAST_MAX_BRACKETS:
        try:
            return orjson.loads(data)
        except orjson.JSONDecodeError:
            pass
    try:
        return json.loads(data, parse_constant=_reject_constant)
    except UnicodeDecodeError:
        raise BadRequest(
            "The body must be JSON encoded as UTF-8; got bytes that are not."
        ) from None
    except json.JSONDecodeError as error:
        raise BadRequest(
            f"The body must be valid JSON; got an error at line {error.lineno}, "
            f"column {error.colno}: {error.msg}."
        ) from None
    except ValueError as error:
        raise BadRequest(f"The body must be valid JSON; got {error}.") from None
    except RecursionError:
        raise BadRequest(
            "The body must be valid JSON of modest depth; got one nested too deeply."
        ) from None


def read_json() -> Any:
    """Parse the body as JSON (RFC 8259, :func:`parse_json`), refusing NaN and Infinity.

    Raises
    ------
    werkzeug.exceptions.BadRequest
        When the body is not valid UTF-8 JSON or nests too deeply.
    werkzeug.exceptions.RequestEntityTooLarge
        When the body exceeds ``MAX_CONTENT_LENGTH`` (raised by Werkzeug).
    """
    data = request.get_data(cache=False)
    limit = current_app.config.get("MAX_CONTENT_LENGTH")
    if request.content_length is None and limit is not None and len(data) >= limit:
        # A streamed (chunked) body is cut at the limit by Werkzeug without an
        # error; one more byte on the wire means it was larger.
        if request.environ["wsgi.input"].read(1):
            raise RequestEntityTooLarge()
    return parse_json(data)


def request_schema() -> AnalysisRequestSchema:
    """The request schema with this app's caps on samples and channels (the one factory).

    Built once per pair of caps and reused (a schema holds no state between loads):
    building one, and the nested schemas it builds on its first load, copies every
    declared field, about a sixth of the load of a 5-minute request.
    """
    config = current_app.config
    return _request_schema(config["HEARTSWAY_MAX_SAMPLES"], config["HEARTSWAY_MAX_CHANNELS"])


@functools.lru_cache(maxsize=16)
def _request_schema(max_samples: int, max_channels: int) -> AnalysisRequestSchema:
    return AnalysisRequestSchema(max_samples=max_samples, max_channels=max_channels)


def read_analysis_request() -> AnalysisRequest:
    """Load the analysis request from a JSON body or a multipart upload of a trace file.

    The schema comes from :func:`request_schema`, so every view applies the same caps.

    Raises
    ------
    werkzeug.exceptions.UnsupportedMediaType
        For any other media type, or a body with a Content-Encoding.
    schemas.errors.SchemaValidationError
        When the content breaks the contract.
    """
    coding = request.headers.get("Content-Encoding", "identity").strip().lower()
    if coding != "identity":
        # Compressed bodies are refused rather than inflated: a few kB of gzip can
        # expand to gigabytes, past every limit on the body as sent.
        raise UnsupportedMediaType(
            "The body must be sent uncompressed (no Content-Encoding); got Content-Encoding "
            f"{coding[:32]!r}."
        )
    mimetype = request.mimetype
    schema = request_schema()
    loaded: AnalysisRequest
    if mimetype == JSON_MEDIA_TYPE:
        loaded = schema.load(read_json())
        return loaded
    if mimetype == MULTIPART_MEDIA_TYPE:
        # Every trace file format, CSV included, is read in service/uploads.py.
        form = {key: request.form[key] for key in request.form}
        loaded = schema.load(upload_request_body(request.files.getlist("file"), form,
                                                 max_samples=schema.max_samples))
        return loaded
    raise UnsupportedMediaType(
        f"The body must be {JSON_MEDIA_TYPE} or {MULTIPART_MEDIA_TYPE} (a CSV `file`); "
        f"got {mimetype or 'no media type'}."
    )
