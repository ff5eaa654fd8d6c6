"""Night jobs: the job settings sent beside a trace, the job document and the night document.

A job is a whole recording analysed in windows (``features.windows``) and summarised
(``features.night``) by a worker; ``POST /v1/jobs`` takes the same inputs as an analysis
plus :class:`JobSettingsSchema`'s fields.
"""

from __future__ import annotations

from collections.abc import Iterable
from typing import Any
from urllib.parse import urlsplit

from marshmallow import Schema, ValidationError, fields, post_dump, validates
from marshmallow.validate import OneOf, Range

from features.artifacts import Segment
from features.feature_vector import FeatureValue, FeatureVector
from features.limits import MAX_WINDOW_S, MIN_WINDOW_S
from features.night import BedExit, NightSummary
from features.quality import OccupancyResult
from features.windows import WindowedAnalysis, WindowError, WindowResult
from schemas.catalogue import FeatureValueSchema
from schemas.responses import (
    NOTICE,
    Number,
    OccupancySchema,
    SegmentSchema,
    WindowSchema,
    WindowsSchema,
    replace_non_finite,
)

#: Default window of a night job (s): the Task Force's 5-minute segment, which the night
#: summary's 5-minute measures need.
DEFAULT_JOB_WINDOW_S = 300.0
#: Job states, in the order a job passes through them (cancelled and failed end early).
JOB_STATUSES = ("queued", "running", "succeeded", "failed", "cancelled")
#: Members of a job request that are not members of an analysis request.
JOB_FIELDS = ("window_s", "window_overlap_s", "callback_url")


class JobSettingsSchema(Schema):
    """The job's own fields: the windows and where to announce the end.

    ``context_hosts`` (given to the constructor) lists the hosts callbacks may go to.
    """

    window_s = fields.Float(
        load_default=DEFAULT_JOB_WINDOW_S,
        validate=Range(min=MIN_WINDOW_S, max=MAX_WINDOW_S),
        metadata={"description": f"Window length, {MIN_WINDOW_S:g}-{MAX_WINDOW_S:g} s "
                                 f"(default {DEFAULT_JOB_WINDOW_S:g})."},
    )
    window_overlap_s = fields.Float(
        load_default=0.0, validate=Range(min=0.0),
        metadata={"description": "Overlap of consecutive windows, s (less than window_s)."},
    )
    callback_url = fields.String(
        load_default=None, allow_none=True,
        metadata={"description": "http(s) URL POSTed the job document when the job ends, "
                                 "signed with HMAC-SHA256 (header Heartsway-Signature); its "
                                 "host must be listed in HEARTSWAY_CALLBACK_HOSTS."},
    )

    def __init__(self, *, callback_hosts: Iterable[str] = (), **kwargs: Any) -> None:
        super().__init__(**kwargs)
        self.callback_hosts = tuple(callback_hosts)

    @validates("callback_url")
    def _callback(self, value: str | None, **kwargs: Any) -> None:
        if value is None:
            return
        parts = urlsplit(value)
        if parts.scheme not in ("http", "https") or not parts.hostname:
            raise ValidationError(
                f"`callback_url` must be an http or https URL; got {value[:80]!r}.")
        if not self.callback_hosts:
            raise ValidationError("`callback_url` must be left out: this service sends no "
                                  "callbacks (HEARTSWAY_CALLBACK_HOSTS is empty).")
        host = parts.hostname.lower()
        netloc = f"{host}:{parts.port}" if parts.port else host
        if host not in self.callback_hosts and netloc not in self.callback_hosts:
            raise ValidationError(
                "`callback_url` must point to a host this service lists "
                f"({', '.join(sorted(self.callback_hosts))}); got {netloc!r}.")


class JobSchema(Schema):
    """The job document (``GET /v1/jobs/{id}``)."""

    id = fields.String(required=True, metadata={"description": "Random job id (128 bits)."})
    status = fields.String(required=True, validate=OneOf(JOB_STATUSES))
    progress = Number(required=True, metadata={
        "description": "Windows done / windows total, 0-1 (0 before the total is known)."})
    windows_done = fields.Integer(required=True)
    windows_total = fields.Integer(required=True, allow_none=True)
    created_at = fields.String(required=True, metadata={"description": "ISO 8601, UTC."})
    started_at = fields.String(required=True, allow_none=True)
    finished_at = fields.String(required=True, allow_none=True)
    attempts = fields.Integer(required=True)
    window_s = Number(required=True)
    window_overlap_s = Number(required=True)
    problem = fields.Raw(required=True, allow_none=True, metadata={
        "description": "Why the job failed: an RFC 9457 problem as the API answers it (with "
                       "`errors` or `reason` as its type has); null otherwise.",
        "anyOf": [{"$ref": "#/components/schemas/Problem"}, {"type": "null"}]})
    notice = fields.Constant(NOTICE, required=True, dump_only=True)


class BedExitSchema(Schema):
    start_s = Number(required=True)
    end_s = Number(required=True)
    duration_s = Number(required=True)
    confidence = Number(required=True)


class NightSummarySchema(Schema):
    """The night summary (``features.night.NightSummary``)."""

    measures = fields.List(fields.Nested(FeatureValueSchema), required=True)
    bed_exits = fields.List(fields.Nested(BedExitSchema), required=True)
    occupied_spans_s = fields.List(fields.List(Number()), required=True)
    window_s = Number(required=True)
    overlap_s = Number(required=True)
    n_windows = fields.Integer(required=True)
    n_occupied_windows = fields.Integer(required=True)
    n_failed_windows = fields.Integer(required=True)
    unknown_s = Number(required=True)
    flags = fields.List(fields.String(), required=True)


class NightWindowSchema(WindowSchema):
    """One window of the night, with its occupancy and masked segments."""

    occupancy = fields.Nested(OccupancySchema, required=True, allow_none=True)
    segments = fields.List(fields.Nested(SegmentSchema), required=True)


class NightWindowsSchema(WindowsSchema):
    windows = fields.List(fields.Nested(NightWindowSchema), required=True)


class NightDocumentSchema(Schema):
    """The result of a night job (``GET /v1/jobs/{id}/result``)."""

    job_id = fields.String(required=True)
    engine_version = fields.String(required=True)
    feature_set_version = fields.String(required=True)
    duration_s = Number(required=True)
    sampling_rate_hz = Number(required=True, metadata={
        "description": "Sampling rate of the recording (Hz)."})
    summary = fields.Nested(NightSummarySchema, required=True)
    windows = fields.Nested(NightWindowsSchema, required=True)
    notice = fields.Constant(NOTICE, required=True, dump_only=True)

    @post_dump
    def _finite(self, data: dict[str, Any], **kwargs: Any) -> dict[str, Any]:
        # JSON has no NaN: a non-finite number leaves as null (as in an analysis).
        cleaned: dict[str, Any] = replace_non_finite(data, "", [])
        return cleaned


def night_document(job_id: str, engine_version: str, windowed: Any, summary: Any) -> dict[str, Any]:
    """Dump a windowed analysis and its night summary as the night document."""
    document: dict[str, Any] = NightDocumentSchema().dump({
        "job_id": job_id, "engine_version": engine_version,
        "feature_set_version": windowed.feature_set_version, "duration_s": windowed.duration_s,
        "sampling_rate_hz": windowed.fs_hz, "summary": summary, "windows": windowed,
    })
    return document


def night_from_document(document: dict[str, Any]) -> tuple[NightSummary, WindowedAnalysis]:
    """The night summary and windowed analysis a night document was dumped from.

    The night picture (:func:`service.night_report.draw_night`) reads these; rebuilding
    them from the stored result means a picture never reruns the analysis. A number the
    document holds as null (None, or NaN where the engine had a non-finite float) stays
    missing; nothing is filled in.
    """
    night = document["summary"]
    summary = NightSummary(
        measures=tuple(_feature_value(m) for m in night["measures"]),
        bed_exits=tuple(BedExit(start_s=e["start_s"], end_s=e["end_s"],
                                duration_s=e["duration_s"], confidence=e["confidence"])
                        for e in night["bed_exits"]),
        occupied_spans_s=tuple((a, b) for a, b in night["occupied_spans_s"]),
        window_s=night["window_s"], overlap_s=night["overlap_s"],
        n_windows=night["n_windows"], n_occupied_windows=night["n_occupied_windows"],
        n_failed_windows=night["n_failed_windows"], unknown_s=night["unknown_s"],
        flags=tuple(night["flags"]),
    )
    windows = document["windows"]
    windowed = WindowedAnalysis(
        window_s=windows["window_s"], overlap_s=windows["overlap_s"],
        step_s=windows["step_s"], fs_hz=document["sampling_rate_hz"],
        duration_s=document["duration_s"],
        windows=tuple(_window(w) for w in windows["windows"]),
        unanalysed_tail_s=windows["unanalysed_tail_s"], n_failed=windows["n_failed"],
        feature_set_version=document["feature_set_version"], flags=tuple(windows["flags"]),
    )
    return summary, windowed


def _feature_value(m: dict[str, Any]) -> FeatureValue:
    return FeatureValue(name=m["name"], value=m["value"], unit=m["unit"],
                        confidence=m["confidence"], reason=m["reason"])


def _window(w: dict[str, Any]) -> WindowResult:
    vector, error, occupancy = w["feature_vector"], w["error"], w["occupancy"]
    return WindowResult(
        index=w["index"], start_s=w["start_s"], end_s=w["end_s"],
        feature_vector=None if vector is None else FeatureVector(
            feature_set_version=vector["feature_set_version"],
            features=tuple(_feature_value(f) for f in vector["features"])),
        confidence=w["confidence"], usable_fraction=w["usable_fraction"],
        flags=tuple(w["flags"]),
        error=None if error is None else WindowError(
            kind=error["kind"], code=error["code"], message=error["message"]),
        occupancy=None if occupancy is None else OccupancyResult(
            occupied=occupancy["occupied"], supported_mass_kg=occupancy["supported_mass_kg"],
            from_load=occupancy["from_load"], from_heartbeat=occupancy["from_heartbeat"],
            confidence=occupancy["confidence"], flags=tuple(occupancy["flags"])),
        segments=tuple(Segment(kind=s["kind"], start_s=s["start_s"], end_s=s["end_s"])
                       for s in w["segments"]),
    )
