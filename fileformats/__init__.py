"""Trace files of the field into engine inputs: EDF/EDF+ and BDF, WFDB, NumPy, Parquet, CSV.

A small library beside the engine: it reads a file (a path, or its bytes) into
:class:`TraceFile`, whose ``channels`` are :class:`features.ChannelInput` ready for
:func:`features.analyze`. It knows no web framework and no schema library.

Catalogue
---------
read_trace(source, *, format, channels, fs_hz, quantity, unit, lazy) -> TraceFile
    Read one recording; channels selected by label; units from the file's header; with
    ``lazy`` an EDF path gives channels read window by window (fileformats.edf.EdfRow).
detect_format(name, head) -> str
    The format of a file from its first bytes and, failing that, its name.
detect_file_format(path) -> str
    The same for a file on disk (its first 16 bytes are read).
FORMATS
    The formats read, sorted.
normalise_unit(text) -> str | None
    A header's unit spelling as one of the engine's units, or None.
UnreadableFileError
    The file breaks a rule of its format or of the selection (an ``InvalidInputError``).

Where each format keeps what
----------------------------
=========  ===========================  ============================  =====================
format     channel labels               units                         sampling rate
=========  ===========================  ============================  =====================
edf, bdf   signal labels                physical dimension            per signal (header)
wfdb       signal names (``.hea``)      units (``.hea``)              record line (``.hea``)
npz        array names                  none                          ``sampling_rate_hz``
npy        ``channel_1`` ...            none                          none
parquet    column names                 column metadata ``unit``      file metadata
csv        header row                   none                          none
=========  ===========================  ============================  =====================
"""

from fileformats.errors import UnreadableFileError
from fileformats.reading import (
    FORMATS,
    Source,
    TraceFile,
    detect_file_format,
    detect_format,
    read_trace,
)
from fileformats.units import normalise_unit, quantity_of_unit

__all__ = [
    "FORMATS",
    "Source",
    "TraceFile",
    "UnreadableFileError",
    "detect_file_format",
    "detect_format",
    "normalise_unit",
    "quantity_of_unit",
    "read_trace",
]
