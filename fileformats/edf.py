"""EDF, EDF+ (continuous) and BDF files, read with edfio."""

from __future__ import annotations

import io

import numpy as np

from fileformats.errors import UnreadableFileError, optional_module
from fileformats.raw import RawTrace, unique_labels


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
    edfio = optional_module("edfio", "BDF" if bdf else "EDF")
    reader = edfio.read_bdf if bdf else edfio.read_edf
    try:
        edf = reader(io.BytesIO(data), lazy_load_data=False)
        continuous = edf.is_continuous if hasattr(edf, "is_continuous") else True
    except Exception as error:  # noqa: BLE001 - edfio raises plain ValueErrors and others
        kind = "BDF" if bdf else "EDF"
        raise UnreadableFileError(
            "file", f"`file` must be a readable {kind} file; got one that edfio refuses "
            f"({type(error).__name__})."
        ) from None
    if not continuous:
        raise UnreadableFileError(
            "file", "`file` must be a continuous EDF+ record (EDF+C); got a discontinuous "
            "one (EDF+D): export the continuous stretches separately."
        )
    signals = list(edf.signals)
    if not signals:
        raise UnreadableFileError("file", "`file` must hold at least one signal; got none.")
    flags = ("edf_annotations_ignored",) if edf.annotations else ()
    return RawTrace(
        labels=unique_labels([s.label for s in signals]),
        samples=tuple(np.asarray(s.data, dtype=np.float64) for s in signals),
        units=tuple(s.physical_dimension.strip() or None for s in signals),
        rates_hz=tuple(float(s.sampling_frequency) for s in signals),
        flags=flags,
    )
