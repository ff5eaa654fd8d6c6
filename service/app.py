"""The application factory."""

from __future__ import annotations

import io
from collections.abc import Mapping
from typing import IO, Any

from flask import Flask, Request
from flask.json.provider import DefaultJSONProvider

from service import access, logs, metrics, problems
from service.blueprints import analyses, catalogue, health, meta, page, reports
from service.config import load_config


class StrictJSONProvider(DefaultJSONProvider):
    """Flask's JSON provider, refusing NaN and Infinity (they are not JSON)."""

    sort_keys = False

    def dumps(self, obj: Any, **kwargs: Any) -> str:
        kwargs.setdefault("allow_nan", False)
        return super().dumps(obj, **kwargs)


class InMemoryRequest(Request):
    """A request whose uploaded files stay in memory (bounded by MAX_CONTENT_LENGTH).

    Werkzeug spools large uploads to a temporary file; health data must not
    touch the disk.
    """

    def _get_file_stream(
        self,
        total_content_length: int | None,
        content_type: str | None,
        filename: str | None = None,
        content_length: int | None = None,
    ) -> IO[bytes]:
        return io.BytesIO()


def create_app(config: Mapping[str, Any] | None = None) -> Flask:
    """Build the heartsway service.

    Parameters
    ----------
    config
        Settings that override the defaults and the ``HEARTSWAY_*``
        environment; see :data:`service.config.DEFAULTS` for the keys.

    Returns
    -------
    flask.Flask
        The WSGI application.
    """
    app = Flask("service", static_folder=None)
    app.json_provider_class = StrictJSONProvider
    app.json = StrictJSONProvider(app)
    app.request_class = InMemoryRequest
    app.config.update(load_config(config))
    app.url_map.strict_slashes = True

    logs.init_app(app)
    metrics.init_app(app)
    access.init_app(app)
    problems.init_app(app)
    app.register_blueprint(health.blueprint)
    app.register_blueprint(meta.blueprint)
    app.register_blueprint(catalogue.blueprint, url_prefix="/v1")
    app.register_blueprint(analyses.blueprint, url_prefix="/v1")
    app.register_blueprint(reports.blueprint, url_prefix="/v1")
    app.register_blueprint(page.blueprint)
    return app
