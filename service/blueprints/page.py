"""The small HTML page: drop a trace file, see the report image and the feature table (or,
for a night, follow its job and see the night picture and summary); or run the demo evening."""

from __future__ import annotations

import json
from functools import cache
from pathlib import Path

from flask import Blueprint, Response

from features.limits import MAX_FS_HZ, MIN_FS_HZ
from service.demo import demo_request_body

STATIC = Path(__file__).resolve().parents[1] / "static"

blueprint = Blueprint("page", __name__)

#: The page loads only its own script and style and talks only to this service.
_POLICY = ("default-src 'none'; script-src 'self'; style-src 'self'; img-src 'self' blob:; "
           "connect-src 'self'; form-action 'none'; base-uri 'none'; frame-ancestors 'none'")


#: Placeholders of index.html and what they become: the engine's limits, so that the page
#: states the rule the service enforces.
_PAGE_VALUES = {"{{MIN_FS_HZ}}": f"{MIN_FS_HZ:g}", "{{MAX_FS_HZ}}": f"{MAX_FS_HZ:g}"}


#: The demo evening's request body, served beside the page for its demo button.
DEMO_NAME = "demo.json"


@cache
def _read(name: str) -> bytes:
    if name == DEMO_NAME:
        return json.dumps(demo_request_body(), allow_nan=False).encode("utf-8")
    body = (STATIC / name).read_bytes()
    if name == "index.html":
        text = body.decode("utf-8")
        for token, value in _PAGE_VALUES.items():
            text = text.replace(token, value)
        body = text.encode("utf-8")
    return body


def _static(name: str, mimetype: str) -> Response:
    # Four small files, read (or made) once and held in memory (no open file per response).
    response = Response(_read(name), mimetype=mimetype)
    response.cache_control.max_age = 300
    response.headers["Content-Security-Policy"] = _POLICY
    response.headers["X-Content-Type-Options"] = "nosniff"
    return response


@blueprint.get("/")
def index() -> Response:
    """The page (the service's only HTML)."""
    return _static("index.html", "text/html")


@blueprint.get("/static/page.js")
def script() -> Response:
    return _static("page.js", "text/javascript")


@blueprint.get("/static/page.css")
def style() -> Response:
    return _static("page.css", "text/css")


@blueprint.get("/static/demo.json")
def demo_body() -> Response:
    """The demo evening as the body of an analysis (invented data, :mod:`service.demo`)."""
    return _static(DEMO_NAME, "application/json")
