"""NumPy ``.npy`` and ``.npz`` files, and Parquet tables (pyarrow)."""

from __future__ import annotations

import io

import numpy as np

from fileformats.errors import UnreadableFileError, optional_module
from fileformats.raw import RawTrace, unique_labels

#: Names of the scalar that carries the sampling rate in an ``.npz`` or in Parquet metadata.
RATE_KEYS = ("sampling_rate_hz", "fs_hz")
#: A column (any case) of time stamps, not a channel (as in CSV).
TIME_COLUMN = "time_s"


def _numeric(array: np.ndarray, what: str) -> np.ndarray:
    if array.dtype.kind not in "iuf":
        raise UnreadableFileError(
            "file", f"`file` must hold integer or floating-point samples; {what} has dtype "
            f"{array.dtype}."
        )
    return np.asarray(array, dtype=np.float64)


def read_npy(data: bytes) -> RawTrace:
    """A 1-D array (one channel) or a 2-D array of shape (samples, channels).

    Raises
    ------
    UnreadableFileError
        For a file that is not an ``.npy`` array (objects are never unpickled), or
        of another shape.
    """
    try:
        array = np.load(io.BytesIO(data), allow_pickle=False)
    except (ValueError, OSError, EOFError):
        raise UnreadableFileError(
            "file", "`file` must be a NumPy .npy array without Python objects; got one "
            "that is not."
        ) from None
    if array.ndim == 1:
        array = array[:, None]
    if array.ndim != 2:
        raise UnreadableFileError(
            "file", "`file` must hold a 1-D array or a 2-D array of shape (samples, "
            f"channels); got {array.ndim} dimensions."
        )
    array = _numeric(array, "the array")
    n = array.shape[1]
    return RawTrace(
        labels=tuple(f"channel_{k}" for k in range(1, n + 1)),
        samples=tuple(np.ascontiguousarray(array[:, k]) for k in range(n)),
        units=(None,) * n,
        rates_hz=(None,) * n,
    )


def read_npz(data: bytes) -> RawTrace:
    """One 1-D array per channel, named by its label; an optional 0-d ``sampling_rate_hz``.

    Raises
    ------
    UnreadableFileError
        For a file that is not an ``.npz`` archive of plain arrays, or arrays of
        another shape.
    """
    try:
        with np.load(io.BytesIO(data), allow_pickle=False) as archive:
            arrays = {name: archive[name] for name in archive.files}
    except (ValueError, OSError, EOFError):
        raise UnreadableFileError(
            "file", "`file` must be a NumPy .npz archive of plain arrays; got one that is not."
        ) from None
    rate = None
    for key in RATE_KEYS:
        if key in arrays:
            value = arrays.pop(key)
            if value.ndim != 0 or value.dtype.kind not in "iuf":
                raise UnreadableFileError(
                    "file", f"`{key}` in the .npz must be a single number (0-d array); got "
                    f"shape {value.shape}."
                )
            rate = float(value)
    bad = sorted(name for name, a in arrays.items() if a.ndim != 1)
    if bad:
        raise UnreadableFileError(
            "file", "`file` must hold one 1-D array per channel; got other shapes for "
            f"{', '.join(bad[:5])}."
        )
    if not arrays:
        raise UnreadableFileError("file", "`file` must hold at least one channel; got none.")
    labels = list(arrays)
    return RawTrace(
        labels=unique_labels(labels),
        samples=tuple(_numeric(arrays[name], f"array {name!r}") for name in labels),
        units=(None,) * len(labels),
        rates_hz=(rate,) * len(labels),
    )


def read_parquet(data: bytes) -> RawTrace:
    """A table with one numeric column per channel (``time_s`` dropped).

    A column's field metadata ``unit`` gives its unit; the file's key-value
    metadata ``sampling_rate_hz`` (or ``fs_hz``) gives the rate.

    Raises
    ------
    UnreadableFileError
        For a file pyarrow cannot read, or a column that is not numeric or has nulls.
    """
    pa = optional_module("pyarrow", "Parquet")
    pq = optional_module("pyarrow.parquet", "Parquet")
    try:
        table = pq.read_table(pa.BufferReader(data))
    except (pa.ArrowException, OSError, ValueError):
        raise UnreadableFileError(
            "file", "`file` must be a readable Parquet file; got one that pyarrow refuses."
        ) from None
    metadata = {k.decode("utf-8", "replace"): v.decode("utf-8", "replace")
                for k, v in (table.schema.metadata or {}).items()}
    rate = None
    for key in RATE_KEYS:
        if key in metadata:
            try:
                rate = float(metadata[key])
            except ValueError:
                raise UnreadableFileError(
                    "file", f"`{key}` in the Parquet metadata must be a number; got "
                    f"{metadata[key][:20]!r}."
                ) from None
    labels, samples, units = [], [], []
    for field, column in zip(table.schema, table.columns, strict=True):
        if field.name.lower() == TIME_COLUMN:
            continue
        if not (pa.types.is_integer(field.type) or pa.types.is_floating(field.type)):
            raise UnreadableFileError(
                "file", f"`file` must hold numeric columns; column {field.name!r} is "
                f"{field.type}."
            )
        if column.null_count:
            raise UnreadableFileError(
                "file", f"`file` must have no missing values; column {field.name!r} has "
                f"{column.null_count}."
            )
        meta = {k.decode(): v.decode() for k, v in (field.metadata or {}).items()}
        labels.append(field.name)
        samples.append(np.asarray(column.to_numpy(), dtype=np.float64))
        units.append(meta.get("unit"))
    if not labels:
        raise UnreadableFileError("file", "`file` must hold at least one channel column; "
                                  "got none.")
    return RawTrace(
        labels=unique_labels(labels),
        samples=tuple(samples),
        units=tuple(units),
        rates_hz=(rate,) * len(labels),
    )


def read_csv(data: bytes) -> RawTrace:
    """Comma-separated text: a header row of labels, one column per channel (``time_s`` dropped).

    The same rules as the service's CSV upload (``schemas.csv_input``), in the
    library: numbers parsed by ``numpy.loadtxt``.

    Raises
    ------
    UnreadableFileError
        For text that is not UTF-8, a missing header, or rows that are not all numbers.
    """
    try:
        text = data.decode("utf-8").lstrip("\ufeff")
    except UnicodeDecodeError:
        raise UnreadableFileError(
            "file", "`file` must be CSV text encoded as UTF-8; got bytes that are not."
        ) from None
    header, _, rest = text.partition("\n")
    names = [label.strip() for label in header.strip().split(",")]
    if not header.strip() or any(not name for name in names):
        raise UnreadableFileError(
            "file", "`file` must start with a header row naming every column; got "
            f"{header.strip()[:40]!r}."
        )
    try:
        table = np.loadtxt(io.StringIO(rest), delimiter=",", dtype=np.float64, ndmin=2)
    except ValueError:
        raise UnreadableFileError(
            "file", "`file` must hold one number per column in every row below the header; "
            "got a row that does not."
        ) from None
    if table.size == 0 or table.shape[1] != len(names):
        raise UnreadableFileError(
            "file", f"`file` must have data rows of {len(names)} numbers (one per header "
            "column); got none or rows of another length."
        )
    keep = [k for k, name in enumerate(names) if name.lower() != TIME_COLUMN]
    return RawTrace(
        labels=unique_labels([names[k] for k in keep]),
        samples=tuple(np.ascontiguousarray(table[:, k]) for k in keep),
        units=(None,) * len(keep),
        rates_hz=(None,) * len(keep),
    )
