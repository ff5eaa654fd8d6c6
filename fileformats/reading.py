"""One entry point over the readers: detection, channel selection, units and rate."""

from __future__ import annotations

import functools
import math
import os
from collections.abc import Callable, Mapping, Sequence
from dataclasses import dataclass
from pathlib import Path

from features.conditioning import ChannelInput, valid_units
from features.limits import COUNTS_UNIT, DEFAULT_QUANTITY, DEFAULT_UNIT, QUANTITIES
from fileformats import arrays, edf, wfdb_records
from fileformats.bounds import resolve_limit
from fileformats.errors import UnreadableFileError
from fileformats.raw import RawTrace, on_time_grid
from fileformats.units import normalise_unit, quantity_of_unit

#: The formats read, sorted.
FORMATS = ("bdf", "csv", "edf", "npy", "npz", "parquet", "wfdb")
_SUFFIXES = {
    ".bdf": "bdf", ".csv": "csv", ".txt": "csv", ".edf": "edf", ".npy": "npy", ".npz": "npz",
    ".parquet": "parquet", ".pq": "parquet", ".hea": "wfdb", ".dat": "wfdb",
}
_QUANTITIES = QUANTITIES

Source = str | os.PathLike[str] | bytes | Mapping[str, bytes]


@dataclass(frozen=True)
class TraceFile:
    """One recording read from a file, ready for :func:`features.analyze`.

    Attributes
    ----------
    format
        One of :data:`FORMATS`.
    channels
        The selected channels, in the order asked for (file order by default),
        each with its quantity and unit resolved.
    fs_hz
        Sampling rate of every selected channel, Hz.
    available_labels
        Every signal label in the file, in file order.
    unit_sources
        Per selected channel, where its unit came from: ``"header"``, ``"given"``
        or ``"default"`` (a format without units, and none given).
    flags
        Anything a reader adapted.
    """

    format: str
    channels: tuple[ChannelInput, ...]
    fs_hz: float
    available_labels: tuple[str, ...]
    unit_sources: tuple[str, ...]
    flags: tuple[str, ...]


def detect_format(name: str | None, head: bytes) -> str:
    """The format of a file from its first bytes, else from its name's suffix.

    Parameters
    ----------
    name
        File name (or None).
    head
        The first bytes of the file (16 are enough).

    Returns
    -------
    str
        One of :data:`FORMATS`.

    Raises
    ------
    UnreadableFileError
        When neither the content nor the name tells.
    """
    if head.startswith(b"\x93NUMPY"):
        return "npy"
    if head.startswith(b"PAR1"):
        return "parquet"
    if head.startswith(b"\xffBIOSEMI"):
        return "bdf"
    if head.startswith(b"0       "):
        return "edf"
    suffix = Path(name or "").suffix.lower()
    if head.startswith(b"PK\x03\x04") and suffix in ("", ".npz"):
        return "npz"
    if suffix in _SUFFIXES:
        return _SUFFIXES[suffix]
    raise UnreadableFileError(
        "file", "`file` must be one of " + ", ".join(FORMATS) + f" (by content or by "
        f"name); got {Path(name or '').suffix or 'a file without a suffix'} whose content "
        "is not recognised."
    )


def _raw(source: Source, fmt: str | None, name: str | None,
         max_samples: int | None, lazy: bool = False) -> tuple[str, RawTrace]:
    if isinstance(source, Mapping):
        files = dict(source)
        if fmt is None:
            fmt = "wfdb" if any(n.endswith(".hea") for n in files) else None
        if fmt == "wfdb":
            return fmt, wfdb_records.read_wfdb_files(files, max_samples=max_samples)
        if len(files) != 1:
            raise UnreadableFileError(
                "file", f"`file` must be one file (several only for a WFDB record); got "
                f"{len(files)}."
            )
        name, data = next(iter(files.items()))
        return _raw(data, fmt, name, max_samples)
    if isinstance(source, bytes | bytearray | memoryview):
        data = bytes(source)
        fmt = fmt or detect_format(name, data[:16])
        if fmt == "wfdb":
            raise UnreadableFileError(
                "file", "`file` must include the WFDB header (.hea) and its signal files; "
                "got a single file."
            )
        return fmt, _from_bytes(fmt, data, max_samples)
    path = Path(source)
    if fmt is None:
        if path.suffix.lower() in (".hea", ".dat") or (
            not path.exists() and path.with_suffix(".hea").exists()
        ):
            fmt = "wfdb"
    if fmt == "wfdb":
        return fmt, wfdb_records.read_wfdb_path(path, max_samples=max_samples)
    if lazy:
        fmt = fmt or detect_file_format(path)
        if fmt in ("edf", "bdf"):
            return fmt, edf.open_edf(path, bdf=fmt == "bdf", max_samples=max_samples)
    try:
        data = path.read_bytes()
    except OSError as error:
        raise UnreadableFileError(
            "file", f"`file` must be a readable file; got {path.name!r} "
            f"({type(error).__name__})."
        ) from None
    fmt = fmt or detect_format(path.name, data[:16])
    return fmt, _from_bytes(fmt, data, max_samples)


def detect_file_format(path: Path) -> str:
    """The format of the file at ``path`` from its first bytes, else its name's suffix.

    Raises
    ------
    UnreadableFileError
        When the file cannot be opened or its format is not recognised.
    """
    try:
        with path.open("rb") as handle:
            head = handle.read(16)
    except OSError as error:
        raise UnreadableFileError(
            "file", f"`file` must be a readable file; got {path.name!r} "
            f"({type(error).__name__})."
        ) from None
    return detect_format(path.name, head)


def _from_bytes(fmt: str, data: bytes, max_samples: int | None) -> RawTrace:
    readers: dict[str, Callable[..., RawTrace]] = {
        "bdf": functools.partial(edf.read_edf, bdf=True),
        "csv": arrays.read_csv,
        "edf": edf.read_edf,
        "npy": arrays.read_npy,
        "npz": arrays.read_npz,
        "parquet": arrays.read_parquet,
    }
    if fmt not in readers:
        raise UnreadableFileError(
            "format", f"`format` must be one of {', '.join(FORMATS)}; got {fmt!r}."
        )
    return readers[fmt](data, max_samples=max_samples)


def _select(raw: RawTrace, channels: Sequence[str] | None) -> list[int]:
    if not channels:
        return list(range(len(raw.labels)))
    wanted = list(channels)
    repeated = sorted({c for c in wanted if wanted.count(c) > 1})
    if repeated:
        raise UnreadableFileError(
            "channels", f"`channels` must name each channel once; got {', '.join(repeated)} "
            "more than once."
        )
    missing = [c for c in wanted if c not in raw.labels]
    if missing:
        shown = ", ".join(sorted(raw.labels)[:20])
        raise UnreadableFileError(
            "channels", f"`channels` must be labels in the file ({shown}); got "
            f"{', '.join(repr(m) for m in missing[:5])}."
        )
    return [raw.labels.index(c) for c in wanted]


def _rate(raw: RawTrace, picked: list[int], fs_hz: float | None) -> float | None:
    """The rate sent or carried in the header; None when only a time column can give it."""
    rates = {raw.rates_hz[k] for k in picked}
    if None in rates:
        if fs_hz is None and raw.times_s is None:
            raise UnreadableFileError(
                "sampling_rate_hz", "`sampling_rate_hz` must be given: this file carries "
                "neither its sampling rate nor a `time_s` column; got none."
            )
        return None if fs_hz is None else float(fs_hz)
    if len(rates) > 1:
        listed = ", ".join(f"{raw.labels[k]} {raw.rates_hz[k]:g} Hz" for k in picked)
        raise UnreadableFileError(
            "channels", "`channels` must share one sampling rate; got " + listed + " (select "
            "channels of one rate)."
        )
    rate = float(next(iter(rates)))  # type: ignore[arg-type]
    if fs_hz is not None and not math.isclose(float(fs_hz), rate, rel_tol=1e-9):
        raise UnreadableFileError(
            "sampling_rate_hz", f"`sampling_rate_hz` must match the rate in the file "
            f"({rate:g} Hz) or be left out; got {float(fs_hz):g}."
        )
    return rate


def _unit(raw: RawTrace, k: int, quantity: str | None, unit: str | None,
          default_quantity: str, default_unit: str) -> tuple[str, str, str]:
    label = raw.labels[k]
    if quantity is not None and quantity not in _QUANTITIES:
        raise UnreadableFileError(
            "quantity", f"`quantity` must be one of {', '.join(_QUANTITIES)}; got {quantity!r}."
        )
    if unit is not None:
        source, resolved = "given", unit
    elif raw.units[k] is not None:
        resolved = normalise_unit(raw.units[k])  # type: ignore[assignment]
        if resolved is None:
            known = sorted({u for q in _QUANTITIES for u in valid_units(q)} - {COUNTS_UNIT})
            raise UnreadableFileError(
                "unit", f"`unit` must be given for channel {label!r}: its header unit "
                f"{raw.units[k]!r} is not a unit of {', '.join(_QUANTITIES[:-1])} or "
                f"{_QUANTITIES[-1]} ({', '.join(known)}); got none."
            )
        source = "header"
    else:
        source, resolved = "default", default_unit
    q = quantity or quantity_of_unit(resolved) or default_quantity
    if source == "default" and quantity is not None:
        q = quantity
    return q, resolved, source


def read_trace(
    source: Source,
    *,
    format: str | None = None,
    name: str | None = None,
    channels: Sequence[str] | None = None,
    fs_hz: float | None = None,
    quantity: str | None = None,
    unit: str | None = None,
    default_quantity: str = DEFAULT_QUANTITY,
    default_unit: str = DEFAULT_UNIT,
    max_samples: int | None = None,
    lazy: bool = False,
) -> TraceFile:
    """Read one recording into engine channel inputs.

    Parameters
    ----------
    source
        A path (for WFDB, the ``.hea`` path or the record name), the file's bytes,
        or a mapping of file names to bytes (a WFDB header with its signal files).
    format
        One of :data:`FORMATS`; detected from the content and name when None.
    name
        File name of ``source`` when it is bytes (helps detection).
    channels
        Labels to analyse, in this order; every signal when None or empty.
    fs_hz
        Sampling rate in Hz, required for formats that do not carry one (npy, csv,
        an npz or Parquet file without it) unless the file has a ``time_s`` column; when
        the file has one, it must agree.
    quantity, unit
        Override the header for every selected channel. Without them a channel's
        unit comes from the header and its quantity from the unit; a format with
        no units gets ``default_quantity`` and ``default_unit``.
    default_quantity, default_unit
        For formats without units (npy, npz, csv, Parquet without metadata).
    max_samples
        Most samples over all signals of the file; the service's default
        (``HEARTSWAY_MAX_SAMPLES``) when None. A file that declares more (in its
        header, zip directory or metadata) is refused before its data is read.
    lazy
        For an EDF file given by its path: read the header only, and give each channel an
        :class:`fileformats.edf.EdfRow` whose slices read the file (the same values as
        reading it whole). Other formats and sources (BDF included) are read whole.

    Returns
    -------
    TraceFile

    Raises
    ------
    UnreadableFileError
        When the file is unreadable, a label is unknown, the rate is missing or
        ambiguous, or a header unit is not one the engine reads and none is given.

    Notes
    -----
    1. The format comes from ``format``, else the first bytes (NumPy, Parquet,
       BDF and EDF magic), else the name's suffix.
    2. The reader checks the sizes the file declares against ``max_samples``,
       then returns every signal with its header unit and rate.
    3. The selection keeps the labels asked for; all of them must share one rate.
    4. Units: ``unit`` if given, else the header's (normalised, ``m/s2`` ->
       ``m/s^2``), else the default; the quantity follows from the unit unless
       ``quantity`` is given. The engine checks the pair once more.
    5. A ``time_s`` column (CSV, NPZ, Parquet) places the rows on a uniform grid
       (:func:`features.gaps.time_grid`: steps within 1 % of one sample step, or whole
       numbers of steps where samples are missing, which become NaN, gaps for the engine)
       and gives the rate when neither the file nor ``fs_hz`` does.
    """
    fmt, raw = _raw(source, format, name, max_samples, lazy)
    picked = _select(raw, channels)
    rate = _rate(raw, picked, fs_hz)
    lengths = {raw.samples[k].size for k in picked}
    if len(lengths) > 1:
        raise UnreadableFileError(
            "channels", "`channels` must have equal lengths; got "
            + ", ".join(f"{raw.labels[k]} {raw.samples[k].size}" for k in picked) + "."
        )
    samples = tuple(raw.samples[k] for k in picked)
    if raw.times_s is not None:
        if raw.times_s.size != next(iter(lengths)):
            raise UnreadableFileError(
                "time_s", f"`time_s` must hold one time per sample ({next(iter(lengths))}); "
                f"got {raw.times_s.size}.")
        rate, samples = on_time_grid(raw.times_s, samples, rate,
                                     resolve_limit(max_samples))
    assert rate is not None  # _rate returns None only beside a time column
    built, sources = [], []
    for k, x in zip(picked, samples, strict=True):
        q, u, src = _unit(raw, k, quantity, unit, default_quantity, default_unit)
        built.append(ChannelInput(samples=x, label=raw.labels[k], quantity=q, unit=u))
        sources.append(src)
    return TraceFile(
        format=fmt,
        channels=tuple(built),
        fs_hz=rate,
        available_labels=raw.labels,
        unit_sources=tuple(sources),
        flags=raw.flags,
    )
