"""WFDB records (a ``.hea`` header and its signal files), read with the wfdb package."""

from __future__ import annotations

import os
import re
import threading
import uuid
import warnings
from collections.abc import Mapping
from pathlib import Path

import numpy as np

from fileformats.bounds import check_samples, resolve_limit
from fileformats.errors import UnreadableFileError, optional_module
from fileformats.raw import RawTrace, samples_float64, unique_labels

#: Longest header read, bytes (a header names at most a few hundred signals).
MAX_HEADER_BYTES = 1 << 20
#: Signal formats whose file size does not bound the sample count: FLAC-compressed
#: (508, 516, 524) and the null signal (0), per the WFDB signal(5) format table.
_UNBOUNDED_FORMATS = {0, 508, 516, 524}
#: "format[xsamples-per-frame][:skew][+offset]" (header(5)).
_FORMAT = re.compile(r"^(\d+)(?:x(\d+))?(?::\d+)?(?:\+\d+)?$")

#: Uploaded records are read from fsspec's in-process memory filesystem (never the disk).
_MEMORY_PROTOCOL = "memory://"
_SETUP = threading.Lock()


def _enable_memory_paths() -> None:
    # wfdb opens paths that start with one of its "cloud" protocols through fsspec;
    # adding fsspec's in-memory protocol lets an upload be read without a temp file.
    _coreio = optional_module("wfdb.io._coreio", "WFDB")

    with _SETUP:
        if _MEMORY_PROTOCOL not in _coreio.CLOUD_PROTOCOLS:
            _coreio.CLOUD_PROTOCOLS.append(_MEMORY_PROTOCOL)


def _header_lines(text: str) -> list[list[str]]:
    return [line.split() for line in text.splitlines()
            if line.strip() and not line.lstrip().startswith("#")]


def _bad_header(detail: str) -> UnreadableFileError:
    return UnreadableFileError("file", f"`file` must have a WFDB header (.hea) that {detail}.")


def declared_samples(header: str, signal_bytes: Mapping[str, int]) -> int:
    """Samples a WFDB header declares over all signals (an upper bound), from its text alone.

    Parameters
    ----------
    header
        The ``.hea`` text.
    signal_bytes
        Size of each signal file at hand, by name (bounds a header without a sample
        count: no uncompressed format packs more than one sample per byte).

    Raises
    ------
    UnreadableFileError
        When the record line or a signal line is malformed, or the count is missing
        for a format whose file size does not bound it.

    Notes
    -----
    Header format: PhysioNet header(5). Record line: ``name[/segments] signals
    [fs [samples [time [date]]]]``; signal line: ``file format[xframe][:skew][+offset]
    ...``. Samples = samples per signal x sum of samples per frame.
    """
    lines = _header_lines(header)
    if not lines or len(lines[0]) < 2:
        raise _bad_header("starts with a record line (name and number of signals)")
    record = lines[0]
    try:
        signals = int(record[1])
        samples = int(record[3]) if len(record) > 3 else None
        segments = int(record[0].split("/")[1]) if "/" in record[0] else None
    except (ValueError, IndexError):
        raise _bad_header("gives integers for the number of signals and samples") from None
    if signals < 0 or (samples is not None and samples < 0):
        raise _bad_header("declares counts of 0 or more")
    if segments is not None:
        # A multi-segment record: its record line's sample count covers every segment.
        if samples is None:
            raise _bad_header("declares the sample count of a multi-segment record")
        return samples * signals
    if len(lines) < 1 + signals:
        raise _bad_header(f"has a line for each of its {signals} signals")
    frames, formats = 0, set()
    for line in lines[1:1 + signals]:
        match = _FORMAT.match(line[1]) if len(line) > 1 else None
        if match is None:
            raise _bad_header("gives each signal's file and format")
        formats.add(int(match.group(1)))
        frames += int(match.group(2) or 1)
    if samples is None:
        if formats & _UNBOUNDED_FORMATS:
            raise _bad_header("declares its sample count (needed for formats "
                              f"{', '.join(str(f) for f in sorted(formats & _UNBOUNDED_FORMATS))})")
        return sum(signal_bytes.values())
    return samples * frames


def _check(header: str, signal_bytes: Mapping[str, int], max_samples: int | None) -> None:
    check_samples(declared_samples(header, signal_bytes), resolve_limit(max_samples),
                  "its header")


def _to_raw(record: object) -> RawTrace:
    signal = getattr(record, "p_signal", None)
    if signal is None or np.asarray(signal).ndim != 2 or np.asarray(signal).shape[1] == 0:
        raise UnreadableFileError("file", "`file` must be a WFDB record with at least one "
                                  "signal; got one without.")
    data = samples_float64(np.asarray(signal), "the record")
    # A header may leave names and units out (wfdb gives None): "" numbers the channel.
    names = [str(n or "") for n in getattr(record, "sig_name", None) or []]
    names += [""] * (data.shape[1] - len(names))
    units = [str(u or "") for u in getattr(record, "units", None) or []]
    units += [""] * (data.shape[1] - len(units))
    fs = float(record.fs)  # type: ignore[attr-defined]
    return RawTrace(
        labels=unique_labels(names),
        samples=tuple(np.ascontiguousarray(data[:, k]) for k in range(data.shape[1])),
        units=tuple(u.strip() or None for u in units),
        rates_hz=(fs,) * data.shape[1],
    )


def _read(record_name: str) -> RawTrace:
    wfdb = optional_module("wfdb", "WFDB")
    try:
        with warnings.catch_warnings():
            # The header was checked before; a warning of wfdb's is not the caller's.
            warnings.simplefilter("ignore")
            record = wfdb.rdrecord(record_name, physical=True, return_res=64)
    except Exception as error:  # noqa: BLE001 - wfdb raises many kinds
        raise UnreadableFileError(
            "file", "`file` must be a readable WFDB record (a .hea header and the signal "
            f"files it names); got one that wfdb refuses ({type(error).__name__})."
        ) from None
    return _to_raw(record)


def read_wfdb_path(path: str | os.PathLike[str], *, max_samples: int | None = None) -> RawTrace:
    """Read a WFDB record on disk from its ``.hea`` (or ``.dat``) path or its record name.

    Parameters
    ----------
    path
        The header, a signal file beside it, or the record name.
    max_samples
        Most samples over all signals (the service's ``HEARTSWAY_MAX_SAMPLES`` when None).

    Raises
    ------
    UnreadableFileError
        When the header or a signal file is missing or malformed, or the header
        declares more than ``max_samples`` samples.
    """
    p = Path(path)
    if p.suffix in {".hea", ".dat"}:
        p = p.with_suffix("")
    header = p.with_name(p.name + ".hea")
    try:
        with header.open("rb") as stream:
            text = stream.read(MAX_HEADER_BYTES + 1)
    except OSError as error:
        raise UnreadableFileError(
            "file", f"`file` must be a readable WFDB header; got {header.name!r} "
            f"({type(error).__name__})."
        ) from None
    sizes = {f.name: f.stat().st_size for f in p.parent.iterdir()
             if f.is_file() and f.suffix != ".hea" and f.name.startswith(p.name)}
    _check(_decode_header(text), sizes, max_samples)
    return _read(str(p))


def _decode_header(data: bytes) -> str:
    if len(data) > MAX_HEADER_BYTES:
        raise _bad_header(f"is at most {MAX_HEADER_BYTES} bytes")
    # The record and signal lines are ASCII; comments may be in any 8-bit encoding.
    return data.decode("latin-1")


def read_wfdb_files(files: Mapping[str, bytes], *, max_samples: int | None = None) -> RawTrace:
    """Read a WFDB record from its files in memory (an upload): name -> content.

    Exactly one ``.hea`` must be among ``files``; the signal files it names must
    be there too, under the names the header gives.

    Raises
    ------
    UnreadableFileError
        When there is not exactly one header, it declares more than ``max_samples``
        samples (the service's ``HEARTSWAY_MAX_SAMPLES`` when None), or wfdb cannot
        read the record.
    """
    fsspec = optional_module("fsspec", "WFDB")
    headers = sorted(name for name in files if name.endswith(".hea"))
    if len(headers) != 1:
        raise UnreadableFileError(
            "file", "`file` must include exactly one WFDB header (.hea) beside its signal "
            f"files; got {len(headers)}."
        )
    _check(_decode_header(bytes(files[headers[0]])),
           {name: len(content) for name, content in files.items() if name != headers[0]},
           max_samples)
    _enable_memory_paths()
    memory = fsspec.filesystem("memory")
    folder = f"/heartsway-{uuid.uuid4().hex}"
    try:
        for name, content in files.items():
            memory.pipe(f"{folder}/{Path(name).name}", bytes(content))
        record = Path(headers[0]).name.removesuffix(".hea")
        return _read(f"{_MEMORY_PROTOCOL}{folder.lstrip('/')}/{record}")
    finally:
        if memory.exists(folder):
            memory.rm(folder, recursive=True)
