"""The application factory."""

from __future__ import annotations

import io
import tempfile
from collections.abc import Mapping
from typing import IO, Any

from flask import Flask, Request, current_app
from flask.json.provider import DefaultJSONProvider

from service import access, logs, metrics, problems
from service.allocator import tune_allocator
from service.blueprints import analyses, catalogue, health, jobs, meta, page, reports
from service.config import load_config
from service.job_store import JobSettings


class StrictJSONProvider(DefaultJSONProvider):
    """Flask's JSON provider, refusing NaN and Infinity (they are not JSON)."""

    sort_keys = False

    def dumps(self, obj: Any, **kwargs: Any) -> str:
        kwargs.setdefault("allow_nan", False)
        return super().dumps(obj, **kwargs)


class InMemoryRequest(Request):
    """A request whose uploaded files stay in memory (bounded by MAX_CONTENT_LENGTH).

    Werkzeug spools large uploads to a temporary file; health data must not
    touch the disk, except a night job's file (``POST /v1/jobs``), which is written
    to the job store as it arrives (mode 0600, deleted with the request unless the
    job keeps it) and may be up to ``HEARTSWAY_MAX_UPLOAD_BYTES``.
    """

    def _is_job_upload(self) -> bool:
        return (self.method == "POST" and self.path == "/v1/jobs"
                and self.mimetype == "multipart/form-data")

    @property
    def max_content_length(self) -> int | None:
        if self._is_job_upload():
            limit: int = current_app.config["HEARTSWAY_MAX_UPLOAD_BYTES"]
            return limit
        return super().max_content_length

    def _get_file_stream(
        self,
        total_content_length: int | None,
        content_type: str | None,
        filename: str | None = None,
        content_length: int | None = None,
    ) -> IO[bytes]:
        if self._is_job_upload():
            settings: JobSettings = current_app.config["HEARTSWAY_JOBS"]
            spool = settings.data_dir / "uploads"
            spool.mkdir(parents=True, exist_ok=True, mode=0o700)
            # Mode 0600 (mkstemp); the name goes when the request closes it.
            return tempfile.NamedTemporaryFile(dir=spool, prefix="upload-")
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
    tune_allocator()  # in each worker before any request (service.allocator)
    app = Flask("service", static_folder=None)
    app.json_provider_class = StrictJSONProvider
    app.json = StrictJSONProvider(app)
    app.request_class = InMemoryRequest
    app.config.update(load_config(config))
    if app.config["HEARTSWAY_JOBS"] is None:
        app.config["HEARTSWAY_JOBS"] = JobSettings.from_env()
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
    app.register_blueprint(jobs.blueprint, url_prefix="/v1")
    app.register_blueprint(page.blueprint)
    return app
