"""NumPy ``.npy`` and ``.npz`` files, and Parquet tables (pyarrow), read within the sample limit.

Each reader reads what the file declares before any data (:mod:`fileformats.bounds`):
an NPY header's shape and dtype, each NPZ member's NPY header and the zip directory's
sizes, Parquet metadata (row counts, column types, uncompressed sizes). A declared size
past the limit is refused before anything is decompressed or allocated.
"""

from __future__ import annotations

import io
import re
import struct
import tokenize
import warnings
import zipfile
import zlib
from typing import IO

import numpy as np
from numpy.lib import format as npy_format

from fileformats.bounds import (
    byte_cap,
    check_ratio,
    check_samples,
    product,
    read_capped,
    refuse_bytes,
    resolve_limit,
)
from fileformats.errors import UnreadableFileError, optional_module
from fileformats.parquet_pages import column_chunks, page_sizes
from fileformats.raw import (
    MAX_ITEMSIZE,
    TIME_COLUMN,
    RawTrace,
    samples_float64,
    unique_labels,
)

#: Names of the scalar that carries the sampling rate in an ``.npz`` or in Parquet metadata.
RATE_KEYS = ("sampling_rate_hz", "fs_hz")
#: An empty CSV cell (blank or spaces, next to a comma): a lost sample, read as NaN.
_EMPTY_CELL = re.compile(r"(?<=,)[ \t]*(?=,|\r?$)|^[ \t]*(?=,)", re.MULTILINE)
#: A blank line: in a one-column file, the empty cell of a lost sample.
_BLANK_LINE = re.compile(r"^[ \t]*(?=\r?$)", re.MULTILINE)
#: Longest NPY header read, bytes (numpy's own default for ``np.load``).
MAX_NPY_HEADER_BYTES = 10_000
#: What a broken NPY header or zip archive raises inside numpy and zipfile.
_BROKEN = (ValueError, SyntaxError, TypeError, OverflowError, EOFError, struct.error,
           zlib.error, zipfile.BadZipFile, zipfile.LargeZipFile, KeyError, IndexError,
           NotImplementedError, RecursionError, MemoryError, UnicodeDecodeError, OSError,
           tokenize.TokenError)


def _npy_header(stream: IO[bytes], what: str) -> tuple[tuple[int, ...], bool, np.dtype]:
    """Shape, Fortran order and dtype from an NPY header, refusing objects and odd dtypes."""
    try:
        with warnings.catch_warnings():
            # numpy warns about some odd headers (a DeprecationWarning for a dtype
            # spelling): such a header is refused, its warning with it.
            warnings.simplefilter("error")
            version = npy_format.read_magic(stream)
            if version == (1, 0):
                shape, fortran, dtype = npy_format.read_array_header_1_0(
                    stream, max_header_size=MAX_NPY_HEADER_BYTES)
            elif version == (2, 0):
                shape, fortran, dtype = npy_format.read_array_header_2_0(
                    stream, max_header_size=MAX_NPY_HEADER_BYTES)
            else:
                raise UnreadableFileError(
                    "file", f"`file` must be NPY format version 1.0 or 2.0; {what} is "
                    f"{version[0]}.{version[1]}."
                )
    except UnreadableFileError:
        raise
    except (*_BROKEN, Warning) as error:
        raise UnreadableFileError(
            "file", f"`file` must be a NumPy .npy array without Python objects; {what} has a "
            f"header that is not one ({type(error).__name__})."
        ) from None
    if dtype.hasobject or dtype.kind not in "iuf" or dtype.itemsize > MAX_ITEMSIZE:
        raise UnreadableFileError(
            "file", f"`file` must hold integer or floating-point samples of at most "
            f"{MAX_ITEMSIZE * 8} bits, without Python objects; {what} has dtype {dtype}."
        )
    if any(int(n) < 0 for n in shape):
        raise UnreadableFileError("file", f"`file` must declare sizes of 0 or more; {what} "
                                  f"declares shape {shape}.")
    return tuple(int(n) for n in shape), bool(fortran), dtype


def _array(buffer: bytes, shape: tuple[int, ...], fortran: bool, dtype: np.dtype,
           offset: int = 0) -> np.ndarray:
    flat = np.frombuffer(buffer, dtype=dtype, count=product(shape), offset=offset)
    return flat.reshape(shape, order="F" if fortran else "C")


def read_npy(data: bytes, *, max_samples: int | None = None) -> RawTrace:
    """A 1-D array (one channel) or a 2-D array of shape (samples, channels).

    Parameters
    ----------
    data
        The whole file.
    max_samples
        Most samples over all channels (the service's ``HEARTSWAY_MAX_SAMPLES`` when None).

    Raises
    ------
    UnreadableFileError
        For a file that is not an ``.npy`` array (objects are never unpickled), of
        another shape, whose data disagrees with its header, or whose header declares
        more than ``max_samples`` samples.
    """
    limit = resolve_limit(max_samples)
    stream = io.BytesIO(data)
    shape, fortran, dtype = _npy_header(stream, "the array")
    if len(shape) not in (1, 2):
        raise UnreadableFileError(
            "file", "`file` must hold a 1-D array or a 2-D array of shape (samples, "
            f"channels); got {len(shape)} dimensions."
        )
    check_samples(product(shape), limit, "its header")
    offset = stream.tell()
    size = product(shape) * dtype.itemsize
    if len(data) - offset != size:
        raise UnreadableFileError(
            "file", f"`file` must hold the {size} bytes of data its header declares (shape "
            f"{shape}, dtype {dtype}); got {len(data) - offset}."
        )
    array = _array(data, shape, fortran, dtype, offset)
    if array.ndim == 1:
        array = array[:, None]
    array = samples_float64(array, "the array")
    n = array.shape[1]
    return RawTrace(
        labels=tuple(f"channel_{k}" for k in range(1, n + 1)),
        samples=tuple(np.ascontiguousarray(array[:, k]) for k in range(n)),
        units=(None,) * n,
        rates_hz=(None,) * n,
    )


def _npz_members(archive: zipfile.ZipFile, limit: int) -> dict[str, np.ndarray]:
    infos = [info for info in archive.infolist() if not info.is_dir()]
    declared = sum(info.file_size for info in infos)
    if declared > byte_cap(limit):
        raise refuse_bytes(declared, limit, "its zip directory")
    check_ratio(declared, sum(info.compress_size for info in infos), "its zip directory")
    headers = []
    for info in infos:
        if info.flag_bits & 0x1:  # PKWARE APPNOTE.TXT 4.4.4: bit 0, encrypted
            raise UnreadableFileError(
                "file", "`file` must be a NumPy .npz archive without encryption; member "
                f"{info.filename[:40]!r} is encrypted."
            )
        if not info.filename.endswith(".npy"):
            raise UnreadableFileError(
                "file", "`file` must be a NumPy .npz archive holding only .npy members; got "
                f"a member {info.filename[:40]!r}."
            )
        with archive.open(info) as stream:
            headers.append(_npy_header(stream, f"member {info.filename[:40]!r}"))
    # The rate (a 0-d member under one of RATE_KEYS) is not a sample.
    declared = sum(product(shape) for info, (shape, _, _) in zip(infos, headers, strict=True)
                   if not (shape == () and info.filename[:-4] in RATE_KEYS))
    check_samples(declared, limit, "its array headers")
    arrays: dict[str, np.ndarray] = {}
    produced = 0
    for info, (shape, fortran, dtype) in zip(infos, headers, strict=True):
        name = info.filename[:-4]
        with archive.open(info) as stream:
            _npy_header(stream, f"member {info.filename[:40]!r}")
            size = product(shape) * dtype.itemsize
            where = f"member {info.filename[:40]!r}"
            produced += stream.tell()
            buffer = read_capped(stream, size, compressed=info.compress_size, where=where,
                                 produced_before=produced, max_samples=limit)
            produced += size
            if stream.read(1):
                raise UnreadableFileError(
                    "file", f"`file` must hold the data its headers declare; {where} holds "
                    "more."
                )
        arrays[name] = _array(buffer, shape, fortran, dtype)
    return arrays


def read_npz(data: bytes, *, max_samples: int | None = None) -> RawTrace:
    """One 1-D array per channel, named by its label; an optional 0-d ``sampling_rate_hz``
    and an optional 1-D ``time_s`` (one time per sample, s).

    Parameters
    ----------
    data
        The whole file.
    max_samples
        Most samples over all channels (the service's ``HEARTSWAY_MAX_SAMPLES`` when None).

    Raises
    ------
    UnreadableFileError
        For a file that is not an ``.npz`` archive of plain arrays, arrays of another
        shape, or one that declares (or expands to) more than the limit allows.

    Notes
    -----
    1. The zip directory's uncompressed sizes must fit the byte cap (``max_samples``
       at 8 bytes a sample) and the ratio cap, before any member is inflated.
    2. Each member's NPY header (shape and dtype, the first bytes of its stream) is
       read; their samples together must fit ``max_samples``.
    3. Each member is inflated in 1 MiB chunks, checked against the caps as it
       streams: a directory that lies is cut off.
    """
    limit = resolve_limit(max_samples)
    try:
        with zipfile.ZipFile(io.BytesIO(data)) as archive:
            arrays = _npz_members(archive, limit)
    except UnreadableFileError:
        raise
    except _BROKEN as error:
        raise UnreadableFileError(
            "file", "`file` must be a NumPy .npz archive of plain arrays; got one that is not "
            f"({type(error).__name__})."
        ) from None
    rate = None
    for key in RATE_KEYS:
        if key in arrays:
            value = arrays.pop(key)
            if value.ndim != 0:
                raise UnreadableFileError(
                    "file", f"`{key}` in the .npz must be a single number (0-d array); got "
                    f"shape {value.shape}."
                )
            rate = float(samples_float64(value.reshape(1), f"`{key}`")[0])
            if not np.isfinite(rate):
                raise UnreadableFileError("file", f"`{key}` in the .npz must be a number; "
                                          "got NaN.")
    times = _time_member(arrays)
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
        samples=tuple(samples_float64(arrays[name], f"array {name[:40]!r}") for name in labels),
        units=(None,) * len(labels),
        rates_hz=(rate,) * len(labels),
        times_s=times,
    )


def _time_member(arrays: dict[str, np.ndarray]) -> np.ndarray | None:
    """The ``time_s`` member of an archive (any case), taken out of the channels."""
    for name in list(arrays):
        if name.lower() == TIME_COLUMN:
            value = arrays.pop(name)
            if value.ndim != 1:
                raise UnreadableFileError("file", f"`{name}` in the .npz must be a 1-D array "
                                          f"of times; got shape {value.shape}.")
            return samples_float64(value, f"`{name}`")
    return None


def _text(value: bytes) -> str:
    return value.decode("utf-8", "replace")


def _parquet_plan(pf: object, pa: object, data: bytes,
                  limit: int) -> tuple[list[str], list[int], str | None]:
    """Channel columns, their field positions and the time column (or None), after the
    metadata and page checks."""
    metadata = pf.metadata  # type: ignore[attr-defined]
    schema = pf.schema_arrow  # type: ignore[attr-defined]
    names, positions = [], []
    time_name = None
    for k, field in enumerate(schema):
        if field.name.lower() == TIME_COLUMN:
            time_name = field.name
        if not (pa.types.is_integer(field.type) or pa.types.is_floating(field.type)):  # type: ignore[attr-defined]
            raise UnreadableFileError(
                "file", f"`file` must hold numeric columns; column {field.name[:40]!r} is "
                f"{field.type}."
            )
        if field.name != time_name:
            names.append(field.name)
            positions.append(k)
    if not names:
        raise UnreadableFileError("file", "`file` must hold at least one channel column; "
                                  "got none.")
    if len(set(names)) != len(names):
        raise UnreadableFileError("file", "`file` must name each column once; got repeated "
                                  "column names.")
    check_samples(metadata.num_rows * len(names), limit, "its metadata")
    rows = sum(metadata.row_group(i).num_rows for i in range(metadata.num_row_groups))
    if rows != metadata.num_rows or rows < 0:
        raise UnreadableFileError(
            "file", f"`file` must have row groups that add up to its row count "
            f"({metadata.num_rows}); they add up to {rows}."
        )
    wanted = set(names) | ({time_name} if time_name else set())
    chunks = [c for c in column_chunks(data) if c.name in wanted]
    uncompressed = sum(c.uncompressed_bytes for c in chunks)
    compressed = sum(c.compressed_bytes for c in chunks)
    if uncompressed > byte_cap(limit):
        raise refuse_bytes(uncompressed, limit, "its metadata")
    check_ratio(uncompressed, compressed, "its metadata")
    # The footer may understate what the pages hold: what pyarrow will inflate is what
    # each page header declares, so those are added up too, before any page is read.
    inflated = stored = 0
    for chunk in chunks:
        pages = page_sizes(data, chunk.first_page, chunk.compressed_bytes)
        inflated, stored = inflated + pages[0], stored + pages[1]
        if inflated > byte_cap(limit):
            raise refuse_bytes(inflated, limit, "its page headers")
    check_ratio(inflated, stored, "its page headers")
    return names, positions, time_name


def _parquet_columns(pf: object, names: list[str], limit: int) -> list[np.ndarray]:
    """Read the channel columns one row group at a time, within the caps."""
    metadata = pf.metadata  # type: ignore[attr-defined]
    parts: list[list[np.ndarray]] = [[] for _ in names]
    produced = rows = 0
    for i in range(metadata.num_row_groups):
        table = pf.read_row_group(i, columns=names, use_threads=False)  # type: ignore[attr-defined]
        produced += table.nbytes
        rows += table.num_rows
        if produced > byte_cap(limit):
            raise refuse_bytes(produced, limit, f"row groups 0-{i}")
        if rows > metadata.num_rows:
            raise UnreadableFileError(
                "file", f"`file` must hold the rows its metadata declares "
                f"({metadata.num_rows}); it holds more."
            )
        for k, name in enumerate(names):
            column = table.column(name)
            # A null is a lost sample: NaN (pyarrow widens an integer column that has one).
            values = column.to_numpy(zero_copy_only=False) if column.null_count else \
                column.to_numpy()
            parts[k].append(samples_float64(values, f"column {name[:40]!r}"))
    return [np.concatenate(p) if p else np.zeros(0) for p in parts]


def read_parquet(data: bytes, *, max_samples: int | None = None) -> RawTrace:
    """A table with one numeric column per channel and an optional ``time_s`` column.

    A column's field metadata ``unit`` gives its unit; the file's key-value
    metadata ``sampling_rate_hz`` (or ``fs_hz``) gives the rate, or else the ``time_s``
    column does (:func:`fileformats.read_trace`). A null is a lost sample (NaN).

    Parameters
    ----------
    data
        The whole file.
    max_samples
        Most samples over all channels (the service's ``HEARTSWAY_MAX_SAMPLES`` when None).

    Raises
    ------
    UnreadableFileError
        For a file pyarrow cannot read, a column that is not numeric, or metadata that
        declares more than the limit allows.

    Notes
    -----
    1. The footer (FileMetaData) alone is read first: column types, the row count
       times the channel columns against ``max_samples``, the channel columns'
       uncompressed sizes against the byte cap and the ratio cap.
    2. The page headers of the channel columns (:mod:`fileformats.parquet_pages`)
       are walked and their declared sizes checked the same way: a footer that
       understates its pages is caught before a page is inflated.
    3. Row groups are then read one at a time, with a running cap on the bytes they
       produce.
    """
    limit = resolve_limit(max_samples)
    pa = optional_module("pyarrow", "Parquet")
    pq = optional_module("pyarrow.parquet", "Parquet")
    try:
        pf = pq.ParquetFile(pa.BufferReader(data))
        names, positions, time_name = _parquet_plan(pf, pa, data, limit)
        columns = _parquet_columns(pf, names + ([time_name] if time_name else []), limit)
        samples = columns[:len(names)]
        schema = pf.schema_arrow
    except UnreadableFileError:
        raise
    except (pa.ArrowException, *_BROKEN) as error:
        raise UnreadableFileError(
            "file", "`file` must be a readable Parquet file; got one that pyarrow refuses "
            f"({type(error).__name__})."
        ) from None
    metadata = {_text(k): _text(v) for k, v in (schema.metadata or {}).items()}
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
    units = []
    for k in positions:
        meta = {_text(a): _text(b) for a, b in (schema.field(k).metadata or {}).items()}
        units.append(meta.get("unit"))
    return RawTrace(
        labels=unique_labels(names),
        samples=tuple(samples),
        units=tuple(units),
        rates_hz=(rate,) * len(names),
        times_s=columns[-1] if time_name else None,
    )


def csv_rows(text: str) -> int:
    """Data rows a CSV text can hold below its header (an upper bound: lines)."""
    return text.count("\n") + (0 if text.endswith("\n") else 1)


def csv_table(rest: str, columns: int) -> np.ndarray:
    """The rows below a CSV header of ``columns`` names as a 2-D float64 array
    (``numpy.loadtxt``); an empty cell is a lost sample (NaN). In a one-column file an
    empty cell is a blank line (the blank lines at the end are not rows); with more
    columns a blank line is skipped, as numpy does, and an empty cell sits by a comma.

    Raises
    ------
    ValueError
        numpy's, naming the row and column, for a cell that is not a number.
    """
    with warnings.catch_warnings():
        # Rows that are all comments or blank: numpy warns, and the callers refuse an
        # empty table with a reason.
        warnings.filterwarnings("ignore", "loadtxt: input contained no data", UserWarning)
        if columns == 1 and rest.strip():
            trimmed = rest.rstrip()
            filled = _BLANK_LINE.sub("nan", trimmed)
            if filled != trimmed:
                rest = filled + "\n"
        try:
            return np.loadtxt(io.StringIO(rest), delimiter=",", dtype=np.float64, ndmin=2)
        except ValueError:
            filled = _EMPTY_CELL.sub("nan", rest)
            if filled == rest:
                raise
        return np.loadtxt(io.StringIO(filled), delimiter=",", dtype=np.float64, ndmin=2)


def read_csv(data: bytes, *, max_samples: int | None = None) -> RawTrace:
    """Comma-separated text: a header row of labels, one column per channel, and an optional
    ``time_s`` column; an empty cell is a lost sample (NaN).

    The same rules as the service's CSV upload (``schemas.csv_input``), in the
    library: numbers parsed by ``numpy.loadtxt``, after the lines times the channel
    columns are checked against ``max_samples``.

    Raises
    ------
    UnreadableFileError
        For text that is not UTF-8, a missing header, rows that are not all numbers,
        or more rows than the limit allows.
    """
    limit = resolve_limit(max_samples)
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
    keep = [k for k, name in enumerate(names) if name.lower() != TIME_COLUMN]
    check_samples(csv_rows(rest) * len(keep), limit, "its lines")
    try:
        table = csv_table(rest, len(names))
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
    times = [k for k in range(len(names)) if k not in keep]
    return RawTrace(
        labels=unique_labels([names[k] for k in keep]),
        samples=tuple(samples_float64(np.ascontiguousarray(table[:, k]), f"column "
                                      f"{names[k][:40]!r}") for k in keep),
        units=(None,) * len(keep),
        rates_hz=(None,) * len(keep),
        times_s=np.ascontiguousarray(table[:, times[0]]) if times else None,
    )
