"""CSV traces (one column per channel, a header row) into analysis request bodies.

The API's multipart upload and the CLI's ``analyze FILE`` both go through
:func:`csv_request_body` and then :class:`schemas.requests.AnalysisRequestSchema`,
so a CSV gives the same engine inputs, and the same numbers, by either road.
"""

from __future__ import annotations

import re
from typing import Any

import numpy as np
from marshmallow import Schema, ValidationError, fields, post_load
from marshmallow.validate import Length, OneOf, Range

from features.limits import (
    DEFAULT_MAX_SAMPLES,
    DEFAULT_QUANTITY,
    DEFAULT_UNIT,
    MAX_CHANNELS,
    MAX_FS_HZ,
    MIN_FS_HZ,
    QUANTITIES,
)
from fileformats.arrays import csv_rows, csv_table
from fileformats.bounds import check_samples
from fileformats.errors import UnreadableFileError
from fileformats.raw import TIME_COLUMN, on_time_grid
from schemas.requests import INCLUDE_PARTS

_NUMPY_POSITION = re.compile(r"at row (\d+), column (\d+)")


def read_csv_channels(text: str, *, field: str = "file",
                      max_samples: int = DEFAULT_MAX_SAMPLES) -> tuple[list[str], np.ndarray]:
    """Parse a CSV trace into channel labels and a (samples, channels) float64 array.

    :func:`read_csv_table` without the ``time_s`` column.
    """
    labels, data, _ = read_csv_table(text, field=field, max_samples=max_samples)
    return labels, data


def read_csv_table(text: str, *, field: str = "file", max_samples: int = DEFAULT_MAX_SAMPLES
                   ) -> tuple[list[str], np.ndarray, np.ndarray | None]:
    """Parse a CSV trace into channel labels, a (samples, channels) float64 array and the
    ``time_s`` column (None without one).

    Parameters
    ----------
    text
        Comma-separated values: a header row of labels, then one row per
        sample. An empty cell is a sample the device lost (NaN, a gap for the engine).
        A ``time_s`` column holds times, not a channel.
    field
        Name used in error messages.
    max_samples
        Most samples over all channel columns: the lines below the header times
        the channel columns are checked before any number is parsed.

    Returns
    -------
    labels, samples, times
        The channel labels, a 2-D array with one column per label, and the times.

    Raises
    ------
    marshmallow.ValidationError
        When the header is missing or empty, a row is not numeric, the rows
        differ in length, there are no data rows or too many channels, or the
        lines could hold more than ``max_samples`` samples.
    """
    text = text.lstrip("\ufeff")
    header, _, rest = text.partition("\n")
    labels = [label.strip() for label in header.strip().split(",")]
    if not header.strip() or any(not label for label in labels):
        raise ValidationError(
            {field: [f"`{field}` must start with a header row naming every column; "
                     f"got {header.strip()[:40]!r}."]}
        )
    if not rest.strip():
        raise ValidationError({field: [f"`{field}` must hold at least one data row; got none."]})
    keep = [i for i, label in enumerate(labels) if label.lower() != TIME_COLUMN]
    try:
        check_samples(csv_rows(rest) * len(keep), max_samples, "its lines")
    except UnreadableFileError as error:
        raise ValidationError({field: [error.message.replace("`file`", f"`{field}`")]}) from None
    try:
        data = csv_table(rest, len(labels))
    except ValueError as error:
        where = _NUMPY_POSITION.search(str(error))
        position = (
            f" (line {int(where.group(1)) + 2}, column {where.group(2)})" if where else ""
        )
        raise ValidationError(
            {field: [f"`{field}` must hold one number per column in every row below the "
                     f"header{position}; got a row that does not."]}
        ) from None
    if data.size == 0:
        raise ValidationError({field: [f"`{field}` must hold at least one data row; got none."]})
    if data.shape[1] != len(labels):
        raise ValidationError(
            {field: [f"`{field}` must have as many columns in each row as in the header "
                     f"({len(labels)}); got {data.shape[1]}."]}
        )
    if not 1 <= len(keep) <= MAX_CHANNELS:
        raise ValidationError(
            {field: [f"`{field}` must have 1 to {MAX_CHANNELS} channel columns besides "
                     f"`{TIME_COLUMN}`; got {len(keep)}."]}
        )
    times = [i for i in range(len(labels)) if i not in keep]
    return [labels[i] for i in keep], data[:, keep], data[:, times[0]] if times else None


class CsvUploadFormSchema(Schema):
    """Form fields sent beside the CSV ``file`` in a multipart upload."""

    sampling_rate_hz = fields.Float(
        validate=Range(min=MIN_FS_HZ, max=MAX_FS_HZ),
        metadata={"description": (
            f"Sampling rate of every column, {MIN_FS_HZ:g}-{MAX_FS_HZ:g} Hz; may be left out "
            f"when the file has a `{TIME_COLUMN}` column, which then gives it.")},
    )
    quantity = fields.String(
        load_default=DEFAULT_QUANTITY,
        validate=OneOf(QUANTITIES, error=f"Must be one of: {', '.join(sorted(QUANTITIES))}."),
        metadata={"description": "Quantity of every column."},
    )
    unit = fields.String(
        load_default=DEFAULT_UNIT,
        validate=Length(min=1, max=16),
        metadata={"description": "Unit of every column."},
    )
    include = fields.String(
        load_default="",
        metadata={
            "description": (
                "Comma-separated bulky parts to add: " + ", ".join(sorted(INCLUDE_PARTS)) + "."
            )
        },
    )

    @post_load
    def _split_include(self, data: dict[str, Any], **kwargs: Any) -> dict[str, Any]:
        parts = [part.strip() for part in data["include"].split(",") if part.strip()]
        data["include"] = parts
        return data


def csv_request_body(text: str, form: dict[str, Any], *,
                     max_samples: int = DEFAULT_MAX_SAMPLES) -> dict[str, Any]:
    """Build the body of an analysis request from a CSV text and its form fields.

    Parameters
    ----------
    text
        The CSV file's text.
    form
        Form fields as strings (see :class:`CsvUploadFormSchema`).
    max_samples
        Most samples over all channels (:func:`read_csv_channels`).

    Returns
    -------
    dict
        A body for :class:`schemas.requests.AnalysisRequestSchema`, whose
        ``samples`` are numpy arrays.

    Raises
    ------
    marshmallow.ValidationError
        Naming every offending form field and the file.
    """
    errors: dict[str, Any] = {}
    try:
        settings = CsvUploadFormSchema().load(form)
    except ValidationError as error:
        errors.update(error.messages_dict)
        settings = None
    try:
        labels, data, times = read_csv_table(text, max_samples=max_samples)
    except ValidationError as error:
        errors.update(error.messages_dict)
    if errors or settings is None:
        raise ValidationError(errors)
    rate = settings.get("sampling_rate_hz")
    columns = tuple(np.ascontiguousarray(data[:, i]) for i in range(len(labels)))
    if times is not None:
        try:
            rate, columns = on_time_grid(times, columns, rate, max_samples)
        except UnreadableFileError as error:
            raise ValidationError({"file": [error.message]}) from None
    elif rate is None:
        # Content, not form: only a CSV file lacks its rate, so the message says so.
        raise ValidationError({"sampling_rate_hz": [
            f"`sampling_rate_hz` must be given for a CSV file without a `{TIME_COLUMN}` "
            "column, which does not carry its rate; got none."]})
    body: dict[str, Any] = {
        "sampling_rate_hz": rate,
        "channels": [
            {
                "label": label,
                "quantity": settings["quantity"],
                "unit": settings["unit"],
                "samples": column,
            }
            for label, column in zip(labels, columns, strict=True)
        ],
    }
    if settings["include"]:
        body["options"] = {"include": settings["include"]}
    return body
