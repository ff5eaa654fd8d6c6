"""Night jobs: a whole recording queued, analysed window by window by a worker, summarised.

``POST /v1/jobs`` stores the input (a multipart ``file`` is streamed to disk as it arrives,
see :class:`service.app.InMemoryRequest`), checks it (format, header, rate, channels,
window length) and queues it; ``GET /v1/jobs/{id}`` is the job document,
``GET /v1/jobs/{id}/result`` the night document once the job succeeded,
``GET /v1/jobs/{id}/report`` its night picture (drawn from the stored result), and
``DELETE /v1/jobs/{id}`` cancels the job and deletes its files. Where the jobs live:
:mod:`service.job_store`; who runs them: :mod:`service.job_worker`.
"""

from __future__ import annotations

import json
import os
from pathlib import Path
from typing import Any

from flask import Blueprint, Response, current_app, jsonify, request
from peewee import IntegrityError
from werkzeug.exceptions import NotFound, RequestEntityTooLarge, UnsupportedMediaType

from schemas.errors import SchemaValidationError
from schemas.fhir import FHIR_JSON, fhir_bundle
from schemas.jobs import JOB_FIELDS, JobSettingsSchema, night_from_document
from service.analysis import night_windows
from service.blueprints.reports import negotiate_image
from service.bodies import JSON_MEDIA_TYPE, MULTIPART_MEDIA_TYPE, read_json
from service.fhir_output import wants_fhir
from service.job_errors import JobNotFinishedError, StorageFullError
from service.job_store import (
    JobSettings,
    JobStore,
    job_document,
    new_job_id,
    owner_of,
    store_for,
    write_private,
)
from service.job_worker import JOB_MAX_SAMPLES, queue_for
from service.night_report import draw_night
from service.uploads import JSON_INPUT_NAME, night_call

blueprint = Blueprint("jobs", __name__)

IDEMPOTENCY_HEADER = "Idempotency-Key"
_MAX_IDEMPOTENCY_KEY = 255
#: Form fields of a trace file that the job keeps for its worker.
_FILE_FORM_FIELDS = ("sampling_rate_hz", "format", "channels", "quantity", "unit")


def job_settings() -> JobSettings:
    settings: JobSettings = current_app.config["HEARTSWAY_JOBS"]
    return settings


def _store() -> JobStore:
    try:
        return store_for(job_settings())
    except OSError:
        # HEARTSWAY_DATA_DIR cannot be made or written (full, read-only): a problem, not 500.
        raise StorageFullError() from None


def _owner() -> str:
    if not current_app.config["HEARTSWAY_API_KEYS"]:
        return owner_of(None)
    _, _, token = request.headers.get("Authorization", "").partition(" ")
    return owner_of(token.strip())


def _record_or_404(job_id: str) -> Any:
    record = _store().get(job_id, _owner()) if len(job_id) <= 64 else None
    if record is None:
        raise NotFound()
    return record


def _job_answer(record: Any, status: int) -> Response:
    response = jsonify(job_document(record))
    response.status_code = status
    response.headers["Location"] = f"/v1/jobs/{record.id}"
    return response


def _settings(values: dict[str, Any]) -> dict[str, Any]:
    schema = JobSettingsSchema(callback_hosts=current_app.config["HEARTSWAY_CALLBACK_HOSTS"])
    loaded: dict[str, Any] = schema.load({k: values[k] for k in JOB_FIELDS if k in values})
    return loaded


def _stored_input(folder: Path) -> tuple[str, dict[str, Any], dict[str, Any]]:
    """Store the request's trace in ``folder``: (input file name, file form, job settings)."""
    mimetype = request.mimetype
    if mimetype == JSON_MEDIA_TYPE:
        limit = current_app.config["MAX_CONTENT_LENGTH"]
        if request.content_length is not None and request.content_length > limit:
            raise RequestEntityTooLarge()
        body = read_json()
        if not isinstance(body, dict):
            raise SchemaValidationError({"_schema": ["The body must be a JSON object."]})
        settings = _settings(body)
        body = {k: v for k, v in body.items() if k not in JOB_FIELDS}
        write_private(folder / JSON_INPUT_NAME, json.dumps(body, allow_nan=False).encode())
        return JSON_INPUT_NAME, {}, settings
    if mimetype != MULTIPART_MEDIA_TYPE:
        raise UnsupportedMediaType(
            f"The body must be {JSON_MEDIA_TYPE} or {MULTIPART_MEDIA_TYPE} (a trace `file`); "
            f"got {mimetype or 'no media type'}.")
    uploads = request.files.getlist("file")  # streamed to disk by InMemoryRequest
    form = {key: request.form[key] for key in request.form}
    settings = _settings(form)
    if len(uploads) != 1:
        raise SchemaValidationError({"file": [
            f"`file` must be one trace file part (a WFDB record is not read by jobs); got "
            f"{len(uploads)}."]})
    upload = uploads[0]
    suffix = Path(upload.filename or "").suffix.lower()
    name = "input" + (suffix if suffix.isascii() and len(suffix) <= 10 and
                      suffix[1:].isalnum() else "")
    spooled = getattr(upload.stream, "name", None)
    if isinstance(spooled, str):
        os.link(spooled, folder / name)  # the spooled part becomes the job's input
    else:
        write_private(folder / name, upload.stream.read())
    os.chmod(folder / name, 0o600)
    return name, {k: form[k] for k in _FILE_FORM_FIELDS if k in form}, settings


@blueprint.post("/jobs")
def create_job() -> Response:
    """Queue a whole recording for a windowed analysis and its night summary."""
    store, owner = _store(), _owner()
    key = request.headers.get(IDEMPOTENCY_HEADER)
    if key is not None:
        if not 1 <= len(key) <= _MAX_IDEMPOTENCY_KEY:
            raise SchemaValidationError({"Idempotency-Key": [
                f"`Idempotency-Key` must be 1 to {_MAX_IDEMPOTENCY_KEY} characters; got "
                f"{len(key)}."]})
        earlier = store.by_idempotency_key(owner, key)
        if earlier is not None:
            return _job_answer(earlier, 202)
    job_id = new_job_id()
    folder = store.job_dir(job_id)
    try:
        folder.mkdir(mode=0o700)
        name, form, settings = _stored_input(folder)
        config = current_app.config
        call = night_call(folder / name, form, max_samples=JOB_MAX_SAMPLES,
                          max_channels=config["HEARTSWAY_MAX_CHANNELS"])
        night_windows(call, window_s=settings["window_s"],
                      overlap_s=settings["window_overlap_s"])
        queue = queue_for(job_settings())
        try:
            with store.database.atomic():
                record = store.create(owner=owner, idempotency_key=key, job_id=job_id,
                                      window_s=settings["window_s"],
                                      window_overlap_s=settings["window_overlap_s"],
                                      input_name=name, form=form,
                                      callback_url=settings["callback_url"])
                queue.enqueue(job_id)  # in the same transaction: queued record <=> message
        except IntegrityError:
            earlier = store.by_idempotency_key(owner, key) if key is not None else None
            if earlier is None:
                raise
            store.delete_files(job_id)  # the same key raced in: answer the first job
            return _job_answer(earlier, 202)
    except OSError:
        # Writing the upload or the record failed (ENOSPC, EDQUOT, EROFS, EACCES ...): the
        # store cannot take it now. The input's own errors are UnreadableFileError (422).
        store.delete_files(job_id)
        raise StorageFullError() from None
    except BaseException:
        store.delete_files(job_id)
        raise
    finally:
        _close_uploads()
    return _job_answer(record, 202)


def _close_uploads() -> None:
    """Close the spooled parts now (their names go with them), whatever happened."""
    if request.mimetype == MULTIPART_MEDIA_TYPE:
        for upload in request.files.getlist("file"):
            upload.close()


@blueprint.get("/jobs/<job_id>")
def get_job(job_id: str) -> Response:
    """The job document: status, progress, attempts, times, the problem when it failed."""
    return jsonify(job_document(_record_or_404(job_id)))


def _result_text(job_id: str) -> str:
    """The stored night document of a succeeded job (409 before then, 404 when gone)."""
    record = _record_or_404(job_id)
    if record.status != "succeeded":
        raise JobNotFinishedError(record.status)
    try:
        return _store().result_path(job_id).read_text(encoding="utf-8")
    except OSError:
        raise NotFound() from None  # deleted meanwhile


@blueprint.get("/jobs/<job_id>/result")
def get_job_result(job_id: str) -> Response:
    """The night document (or its summary as a FHIR R4 Bundle) once the job succeeded."""
    text = _result_text(job_id)
    if not wants_fhir():
        response = current_app.response_class(text, mimetype=JSON_MEDIA_TYPE)
    else:
        night = json.loads(text)
        summary_as_analysis = {
            "analysis_id": job_id, "engine_version": night["engine_version"],
            "notice": night["notice"],
            "feature_vector": {"feature_set_version": night["feature_set_version"],
                               "features": night["summary"]["measures"]},
        }
        response = current_app.response_class(
            json.dumps(fhir_bundle(summary_as_analysis), allow_nan=False), mimetype=FHIR_JSON)
    response.vary.add("Accept")
    return response


@blueprint.get("/jobs/<job_id>/report")
def get_job_report(job_id: str) -> Response:
    """The night picture (PNG or SVG by ``Accept``) once the job succeeded.

    Drawn from the stored night document (:func:`schemas.jobs.night_from_document`): the
    analysis is not run again.
    """
    negotiated = negotiate_image()
    if isinstance(negotiated, Response):
        return negotiated
    media_type, image_format = negotiated
    summary, windowed = night_from_document(json.loads(_result_text(job_id)))
    response = Response(draw_night(summary, windowed, image_format=image_format),
                        mimetype=media_type)
    response.vary.add("Accept")
    return response


@blueprint.delete("/jobs/<job_id>")
def delete_job(job_id: str) -> Response:
    """Cancel the job (a worker running it stops at its next window) and delete its files."""
    record = _record_or_404(job_id)
    _store().cancel_and_delete(record.id)
    return Response(status=204)
