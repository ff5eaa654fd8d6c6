"""EDF, EDF+ (continuous) and BDF files, read with edfio."""

from __future__ import annotations

import io
import os
import warnings
from collections.abc import Callable
from typing import Any

import numpy as np

from fileformats.bounds import check_samples, resolve_limit
from fileformats.errors import UnreadableFileError, optional_module
from fileformats.raw import RawTrace, samples_float64, unique_labels

#: Bytes of each signal's header fields before "samples per data record" (label,
#: transducer, physical dimension, physical min and max, digital min and max, prefiltering):
#: EDF specification (Kemp et al. 1992), header record layout.
_BEFORE_SAMPLES_PER_RECORD = 16 + 80 + 8 + 8 + 8 + 8 + 8 + 80


def _header_int(data: bytes, start: int, width: int, name: str) -> int:
    try:
        return int(data[start:start + width].decode("ascii").strip())
    except (UnicodeDecodeError, ValueError):
        raise UnreadableFileError(
            "file", f"`file` must have an integer in the header field {name!r}; got "
            f"{data[start:start + width][:width]!r}."
        ) from None


def check_header(data: bytes, *, bdf: bool, max_samples: int,
                 file_length: int | None = None) -> None:
    """Refuse an EDF/BDF file whose header declares too many samples or another length.

    Parameters
    ----------
    data
        The whole file.
    bdf
        True for 24-bit samples (3 bytes), else 16-bit (2 bytes).
    max_samples
        Most samples over all signals.
    file_length
        Length of the whole file, bytes, when ``data`` holds only its header (a file
        opened by :func:`open_edf`); ``len(data)`` when None.

    Raises
    ------
    UnreadableFileError
        When the header is short or malformed, declares more than ``max_samples``
        samples (data records times samples per record), or a length other than
        the file's: a header whose record count disagrees with the file is refused,
        never "updated".
    """
    kind = "BDF" if bdf else "EDF"
    length = len(data) if file_length is None else file_length
    if len(data) < 256:
        raise UnreadableFileError(
            "file", f"`file` must start with the 256-byte {kind} header; got {len(data)} bytes."
        )
    header_bytes = _header_int(data, 184, 8, "number of bytes in header record")
    records = _header_int(data, 236, 8, "number of data records")
    signals = _header_int(data, 252, 4, "number of signals")
    if signals < 1 or header_bytes != 256 * (signals + 1) or header_bytes > len(data):
        raise UnreadableFileError(
            "file", f"`file` must have a header of 256 bytes per signal plus 256 ({kind}); its "
            f"header declares {signals} signals in {header_bytes} bytes of a {length}-byte "
            "file."
        )
    start = 256 + signals * _BEFORE_SAMPLES_PER_RECORD
    per_record = [_header_int(data, start + 8 * k, 8, "samples per data record")
                  for k in range(signals)]
    if records < 1 or min(per_record) < 1:
        raise UnreadableFileError(
            "file", f"`file` must declare at least one data record and one sample per record "
            f"for every signal; its header declares {records} records."
        )
    check_samples(records * sum(per_record), max_samples, "its header")
    width = 3 if bdf else 2
    expected = header_bytes + records * sum(per_record) * width
    if length != expected:
        raise UnreadableFileError(
            "file", f"`file` must be as long as its header declares ({records} data records: "
            f"{expected} bytes); got {length} bytes."
        )


def read_edf(data: bytes, *, bdf: bool = False, max_samples: int | None = None) -> RawTrace:
    """Read every ordinary signal of an EDF/EDF+C (or BDF/BDF+C) file.

    Parameters
    ----------
    data
        The whole file.
    bdf
        True for BioSemi's 24-bit variant.
    max_samples
        Most samples over all signals (the service's ``HEARTSWAY_MAX_SAMPLES`` when None).

    Returns
    -------
    RawTrace
        Labels, physical samples, physical dimensions and per-signal rates; the
        EDF+ annotation signal is left out (edfio reads it as annotations).

    Raises
    ------
    UnreadableFileError
        When edfio cannot parse the file, the header declares more samples than
        ``max_samples`` or a length other than the file's (:func:`check_header`), or
        it is a discontinuous EDF+D record (gaps between data records would silently
        shift the beats).
    """
    check_header(data, bdf=bdf, max_samples=resolve_limit(max_samples))
    edfio = optional_module("edfio", "BDF" if bdf else "EDF")
    reader = edfio.read_bdf if bdf else edfio.read_edf
    # read_bdf takes no lazy_load_data (edfio 0.4); a stream is read eagerly.
    return _edfio_trace(
        lambda: reader(io.BytesIO(data)),
        lambda _, signals: tuple(samples_float64(np.asarray(s.data), f"signal {k + 1}")
                                 for k, s in enumerate(signals)),
        "BDF" if bdf else "EDF",
    )


def _edfio_trace(read: Callable[[], Any],
                 samples_of: Callable[[Any, list[Any]], tuple[Any, ...]], kind: str) -> RawTrace:
    """The RawTrace of the file edfio's ``read()`` opens, its samples by ``samples_of``.

    The header's lengths were checked before; what edfio still warns about (a start date
    that differs from the EDF+ one, ...) becomes a flag. A discontinuous EDF+D record is
    refused (gaps between data records would silently shift the beats).
    """
    try:
        with warnings.catch_warnings(record=True) as caught:
            warnings.simplefilter("always")
            edf = read()
            continuous = edf.is_continuous if hasattr(edf, "is_continuous") else True
            signals = list(edf.signals)
            samples = samples_of(edf, signals) if signals else ()
            annotated = bool(edf.annotations)
    except UnreadableFileError:
        raise
    except Exception as error:  # noqa: BLE001 - edfio raises plain ValueErrors and others
        raise UnreadableFileError(
            "file", f"`file` must be a readable {kind} file; got one that edfio refuses "
            f"({type(error).__name__})."
        ) from None
    if not continuous:
        raise UnreadableFileError(
            "file", "`file` must be a continuous EDF+ record (EDF+C); got a discontinuous "
            "one (EDF+D): export the continuous stretches separately."
        )
    if not signals:
        raise UnreadableFileError("file", "`file` must hold at least one signal; got none.")
    flags = ("edf_annotations_ignored",) * annotated + ("edf_header_warning",) * bool(caught)
    return RawTrace(
        labels=unique_labels([s.label for s in signals]),
        samples=samples,
        units=tuple(s.physical_dimension.strip() or None for s in signals),
        rates_hz=tuple(float(s.sampling_frequency) for s in signals),
        flags=flags,
    )


class EdfRow:
    """One EDF signal read on demand: ``len`` and contiguous slices, each read from the file.

    What :func:`features.windows.analyze_windows` needs of a channel's samples, so a whole
    night is never in memory at once (``benchmarks/night.py`` measures the difference).
    A slice returns the physical values as float64, equal to those :func:`read_edf` reads.
    """

    def __init__(self, signal: object, n_samples: int) -> None:
        self._signal = signal
        self.size = n_samples
        self.fs_hz = float(signal.sampling_frequency)  # type: ignore[attr-defined]

    def __len__(self) -> int:
        return self.size

    def __getitem__(self, item: slice) -> np.ndarray:
        if not isinstance(item, slice):
            raise TypeError("an EDF row is read by contiguous slices only")
        start, stop, step = item.indices(self.size)
        if step != 1:
            raise TypeError("an EDF row is read by contiguous slices only")
        if stop <= start:
            return np.empty(0, dtype=np.float64)
        data = self._signal.get_data_slice(start / self.fs_hz,  # type: ignore[attr-defined]
                                           stop / self.fs_hz)
        return np.asarray(data, dtype=np.float64)[: stop - start]


def open_edf(path: str | os.PathLike[str], *, bdf: bool = False,
             max_samples: int | None = None) -> RawTrace:
    """Read the header of an EDF/EDF+C file; the samples stay in the file.

    As :func:`read_edf`, but each signal's ``samples`` is an :class:`EdfRow` whose slices
    read only the samples asked for. The header is checked first (:func:`check_header`,
    against ``max_samples`` and the file's length). A BDF file is read whole: edfio 0.4
    reads BDF samples eagerly (``read_bdf`` takes no ``lazy_load_data``).

    Raises
    ------
    UnreadableFileError
        As :func:`read_edf`.
    """
    path = os.fspath(path)
    try:
        length = os.path.getsize(path)
        with open(path, "rb") as handle:
            head = handle.read(256)
            signals = int(head[252:256].decode("ascii").strip()) if len(head) == 256 else 0
            head += handle.read(256 * max(0, min(signals, 4096)))
    except (OSError, UnicodeDecodeError, ValueError):
        head, length = b"", 0
    check_header(head, bdf=bdf, max_samples=resolve_limit(max_samples), file_length=length)
    if bdf:
        with open(path, "rb") as handle:
            return read_edf(handle.read(), bdf=True, max_samples=max_samples)
    edfio = optional_module("edfio", "EDF")
    return _edfio_trace(
        lambda: edfio.read_edf(path, lazy_load_data=True),
        lambda edf, signals: tuple(EdfRow(s, int(round(s.sampling_frequency * edf.duration)))
                                   for s in signals),
        "EDF",
    )
