"""The small HTML page: drop a trace file, see the report image and the feature table."""

from __future__ import annotations

from functools import cache
from pathlib import Path

from flask import Blueprint, Response

from features.limits import MAX_FS_HZ, MIN_FS_HZ

STATIC = Path(__file__).resolve().parents[1] / "static"

blueprint = Blueprint("page", __name__)

#: The page loads only its own script and style and talks only to this service.
_POLICY = ("default-src 'none'; script-src 'self'; style-src 'self'; img-src 'self' blob:; "
           "connect-src 'self'; form-action 'none'; base-uri 'none'; frame-ancestors 'none'")


#: Placeholders of index.html and what they become: the engine's limits, so that the page
#: states the rule the service enforces.
_PAGE_VALUES = {"{{MIN_FS_HZ}}": f"{MIN_FS_HZ:g}", "{{MAX_FS_HZ}}": f"{MAX_FS_HZ:g}"}


@cache
def _read(name: str) -> bytes:
    body = (STATIC / name).read_bytes()
    if name == "index.html":
        text = body.decode("utf-8")
        for token, value in _PAGE_VALUES.items():
            text = text.replace(token, value)
        body = text.encode("utf-8")
    return body


def _static(name: str, mimetype: str) -> Response:
    # Three small files, read once and held in memory (no open file per response).
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
