"""WFDB records (a ``.hea`` header and its signal files), read with the wfdb package."""

from __future__ import annotations

import os
import threading
import uuid
from collections.abc import Mapping
from pathlib import Path

import numpy as np

from fileformats.errors import UnreadableFileError, optional_module
from fileformats.raw import RawTrace, unique_labels

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


def _to_raw(record: object) -> RawTrace:
    signal = getattr(record, "p_signal", None)
    if signal is None or np.asarray(signal).ndim != 2 or np.asarray(signal).shape[1] == 0:
        raise UnreadableFileError("file", "`file` must be a WFDB record with at least one "
                                  "signal; got one without.")
    data = np.asarray(signal, dtype=np.float64)
    names = list(getattr(record, "sig_name", None) or [])
    names += [""] * (data.shape[1] - len(names))
    units = list(getattr(record, "units", None) or [])
    units += [None] * (data.shape[1] - len(units))
    fs = float(record.fs)  # type: ignore[attr-defined]
    return RawTrace(
        labels=unique_labels(names),
        samples=tuple(np.ascontiguousarray(data[:, k]) for k in range(data.shape[1])),
        units=tuple((u or "").strip() or None for u in units),
        rates_hz=(fs,) * data.shape[1],
    )


def _read(record_name: str) -> RawTrace:
    wfdb = optional_module("wfdb", "WFDB")
    try:
        record = wfdb.rdrecord(record_name, physical=True, return_res=64)
    except Exception as error:  # noqa: BLE001 - wfdb raises many kinds
        raise UnreadableFileError(
            "file", "`file` must be a readable WFDB record (a .hea header and the signal "
            f"files it names); got one that wfdb refuses ({type(error).__name__})."
        ) from None
    return _to_raw(record)


def read_wfdb_path(path: str | os.PathLike[str]) -> RawTrace:
    """Read a WFDB record on disk from its ``.hea`` (or ``.dat``) path or its record name.

    Raises
    ------
    UnreadableFileError
        When the header or a signal file is missing or malformed.
    """
    p = Path(path)
    if p.suffix in {".hea", ".dat"}:
        p = p.with_suffix("")
    return _read(str(p))


def read_wfdb_files(files: Mapping[str, bytes]) -> RawTrace:
    """Read a WFDB record from its files in memory (an upload): name -> content.

    Exactly one ``.hea`` must be among ``files``; the signal files it names must
    be there too, under the names the header gives.

    Raises
    ------
    UnreadableFileError
        When there is not exactly one header, or wfdb cannot read the record.
    """
    fsspec = optional_module("fsspec", "WFDB")
    headers = sorted(name for name in files if name.endswith(".hea"))
    if len(headers) != 1:
        raise UnreadableFileError(
            "file", "`file` must include exactly one WFDB header (.hea) beside its signal "
            f"files; got {len(headers)}."
        )
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
