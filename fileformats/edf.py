"""EDF, EDF+ (continuous) and BDF files, read with edfio."""

from __future__ import annotations

import io
import os
from typing import Any

import numpy as np

from fileformats.errors import UnreadableFileError, optional_module
from fileformats.raw import RawTrace, unique_labels


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


def open_edf(path: str | os.PathLike[str], *, bdf: bool = False) -> RawTrace:
    """Read the header of an EDF/EDF+C (or BDF/BDF+C) file; the samples stay in the file.

    As :func:`read_edf`, but each signal's ``samples`` is an :class:`EdfRow` whose slices
    read only the samples asked for.

    Raises
    ------
    UnreadableFileError
        As :func:`read_edf`.
    """
    edf: Any = _open(os.fspath(path), bdf=bdf, lazy=True)
    signals = list(edf.signals)
    rows = tuple(EdfRow(s, int(round(s.sampling_frequency * edf.duration))) for s in signals)
    return _raw_trace(edf, signals, rows)


def _open(source: object, *, bdf: bool, lazy: bool) -> object:
    """edfio's file object (samples loaded or not); an UnreadableFileError if it refuses."""
    edfio = optional_module("edfio", "BDF" if bdf else "EDF")
    reader = edfio.read_bdf if bdf else edfio.read_edf
    try:
        edf = reader(source, lazy_load_data=lazy)
        # Reading the header of each signal now, so that a broken one fails here.
        _ = [(s.label, s.sampling_frequency) for s in edf.signals]
        return edf
    except Exception as error:  # noqa: BLE001 - edfio raises plain ValueErrors and others
        kind = "BDF" if bdf else "EDF"
        raise UnreadableFileError(
            "file", f"`file` must be a readable {kind} file; got one that edfio refuses "
            f"({type(error).__name__})."
        ) from None


def _raw_trace(edf: Any, signals: list[Any], samples: tuple[Any, ...]) -> RawTrace:
    continuous = edf.is_continuous if hasattr(edf, "is_continuous") else True
    if not continuous:
        raise UnreadableFileError(
            "file", "`file` must be a continuous EDF+ record (EDF+C); got a discontinuous "
            "one (EDF+D): export the continuous stretches separately."
        )
    if not signals:
        raise UnreadableFileError("file", "`file` must hold at least one signal; got none.")
    flags = ("edf_annotations_ignored",) if edf.annotations else ()
    return RawTrace(
        labels=unique_labels([s.label for s in signals]),
        samples=samples,
        units=tuple(s.physical_dimension.strip() or None for s in signals),
        rates_hz=tuple(float(s.sampling_frequency) for s in signals),
        flags=flags,
    )


def read_edf(data: bytes, *, bdf: bool = False) -> RawTrace:
    """Read every ordinary signal of an EDF/EDF+C (or BDF/BDF+C) file.

    Parameters
    ----------
    data
        The whole file.
    bdf
        True for BioSemi's 24-bit variant.

    Returns
    -------
    RawTrace
        Labels, physical samples, physical dimensions and per-signal rates; the
        EDF+ annotation signal is left out (edfio reads it as annotations).

    Raises
    ------
    UnreadableFileError
        When edfio cannot parse the file, or it is a discontinuous EDF+D record
        (gaps between data records would silently shift the beats).
    """
    edf: Any = _open(io.BytesIO(data), bdf=bdf, lazy=False)
    signals = list(edf.signals)
    return _raw_trace(edf, signals,
                      tuple(np.asarray(s.data, dtype=np.float64) for s in signals))
