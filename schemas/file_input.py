"""Trace files other than CSV (EDF, BDF, WFDB, NumPy, Parquet) into analysis request bodies.

The multipart upload, ``heartsway analyze FILE`` and ``heartsway batch`` all go
through :func:`file_request_body` (or, for CSV, :func:`schemas.csv_input.csv_request_body`)
and then :class:`schemas.requests.AnalysisRequestSchema`: one road, the same numbers.
"""

from __future__ import annotations

from collections.abc import Mapping
from typing import Any

import numpy as np
from marshmallow import Schema, ValidationError, fields, post_load
from marshmallow.validate import Length, OneOf, Range

from features.limits import DEFAULT_MAX_SAMPLES, MAX_FS_HZ, MIN_FS_HZ, QUANTITIES
from fileformats import FORMATS, Source, read_trace
from schemas.requests import INCLUDE_PARTS

#: Form fields that only the file road knows (the CSV form refuses them).
FILE_ONLY_FIELDS = ("channels", "format")


def split_list(text: str) -> list[str]:
    """``"a, b,,c"`` -> ``["a", "b", "c"]``."""
    return [part.strip() for part in text.split(",") if part.strip()]


class FileUploadFormSchema(Schema):
    """Form fields sent beside a trace ``file`` of any format."""

    sampling_rate_hz = fields.Float(
        validate=Range(min=MIN_FS_HZ, max=MAX_FS_HZ),
        metadata={"description": (
            f"Sampling rate, {MIN_FS_HZ:g}-{MAX_FS_HZ:g} Hz: required when the format does not "
            "carry it (CSV, .npy, .npz or Parquet without it); else it must agree with the file."
        )},
    )
    format = fields.String(
        validate=OneOf(FORMATS, error=f"Must be one of: {', '.join(FORMATS)}."),
        metadata={"description": "The file's format; detected from content and name if absent."},
    )
    channels = fields.String(
        load_default="",
        metadata={"description": "Comma-separated labels of the channels to analyse (all "
                                 "when absent)."},
    )
    quantity = fields.String(
        validate=OneOf(QUANTITIES, error=f"Must be one of: {', '.join(sorted(QUANTITIES))}."),
        metadata={"description": "Quantity of every selected channel (else from its unit)."},
    )
    unit = fields.String(
        validate=Length(min=1, max=16),
        metadata={"description": "Unit of every selected channel (else from the header; N "
                                 "when the format has none)."},
    )
    include = fields.String(
        load_default="",
        metadata={"description": "Comma-separated bulky parts to add: "
                                 + ", ".join(sorted(INCLUDE_PARTS)) + "."},
    )

    @post_load
    def _lists(self, data: dict[str, Any], **kwargs: Any) -> dict[str, Any]:
        data["channels"] = split_list(data["channels"])
        data["include"] = split_list(data["include"])
        return data


def file_request_body(source: Source, form: Mapping[str, Any], *, name: str | None = None,
                      max_samples: int = DEFAULT_MAX_SAMPLES) -> dict[str, Any]:
    """Build the body of an analysis request from a trace file and its form fields.

    Parameters
    ----------
    source
        A path, the file's bytes, or file names -> bytes (a WFDB record); see
        :func:`fileformats.read_trace`.
    form
        Form fields as strings (see :class:`FileUploadFormSchema`).
    name
        The file's name when ``source`` is bytes.
    max_samples
        Most samples over all signals of the file (``HEARTSWAY_MAX_SAMPLES``, or a
        job's own limit): a file declaring more is refused before its data is read.

    Returns
    -------
    dict
        A body for :class:`schemas.requests.AnalysisRequestSchema` whose ``samples``
        are numpy arrays.

    Raises
    ------
    marshmallow.ValidationError
        For offending form fields.
    fileformats.UnreadableFileError
        For the file (an ``InvalidInputError`` naming ``file``, ``channels``,
        ``sampling_rate_hz`` or ``unit``).
    """
    settings = FileUploadFormSchema().load(dict(form))
    trace = read_trace(
        source,
        format=settings.get("format"),
        name=name,
        channels=settings["channels"] or None,
        fs_hz=settings.get("sampling_rate_hz"),
        quantity=settings.get("quantity"),
        unit=settings.get("unit"),
        max_samples=max_samples,
    )
    body: dict[str, Any] = {
        "sampling_rate_hz": trace.fs_hz,
        "channels": [
            {
                "label": channel.label,
                "quantity": channel.quantity,
                "unit": channel.unit,
                "samples": np.ascontiguousarray(channel.samples, dtype=np.float64),
            }
            for channel in trace.channels
        ],
    }
    if settings["include"]:
        body["options"] = {"include": settings["include"]}
    return body


def select_channels(body: dict[str, Any], labels: list[str]) -> dict[str, Any]:
    """Keep the channels of ``body`` named in ``labels``, in that order.

    Raises
    ------
    marshmallow.ValidationError
        Naming ``channels`` when a label is not among the body's channels.
    """
    if not labels:
        return body
    by_label = {channel["label"]: channel for channel in body["channels"]}
    missing = [label for label in labels if label not in by_label]
    if missing:
        raise ValidationError({"channels": [
            f"`channels` must be labels in the file ({', '.join(sorted(by_label)[:20])}); "
            f"got {', '.join(repr(m) for m in missing[:5])}."
        ]})
    return {**body, "channels": [by_label[label] for label in dict.fromkeys(labels)]}
