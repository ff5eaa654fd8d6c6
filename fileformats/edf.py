"""EDF, EDF+ (continuous) and BDF files, read with edfio."""

from __future__ import annotations

import io
import warnings

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


def check_header(data: bytes, *, bdf: bool, max_samples: int) -> None:
    """Refuse an EDF/BDF file whose header declares too many samples or another length.

    Parameters
    ----------
    data
        The whole file.
    bdf
        True for 24-bit samples (3 bytes), else 16-bit (2 bytes).
    max_samples
        Most samples over all signals.

    Raises
    ------
    UnreadableFileError
        When the header is short or malformed, declares more than ``max_samples``
        samples (data records times samples per record), or a length other than
        the file's: a header whose record count disagrees with the file is refused,
        never "updated".
    """
    kind = "BDF" if bdf else "EDF"
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
            f"header declares {signals} signals in {header_bytes} bytes of a {len(data)}-byte "
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
    if len(data) != expected:
        raise UnreadableFileError(
            "file", f"`file` must be as long as its header declares ({records} data records: "
            f"{expected} bytes); got {len(data)} bytes."
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
    try:
        # The header's lengths were checked above; what edfio still warns about (a
        # start date that differs from the EDF+ one, ...) becomes a flag.
        with warnings.catch_warnings(record=True) as caught:
            warnings.simplefilter("always")
            # read_bdf takes no lazy_load_data (edfio 0.4); a stream is read eagerly.
            edf = reader(io.BytesIO(data))
            continuous = edf.is_continuous if hasattr(edf, "is_continuous") else True
            signals = list(edf.signals)
            samples = tuple(samples_float64(np.asarray(s.data), f"signal {k + 1}")
                            for k, s in enumerate(signals))
            annotated = bool(edf.annotations)
    except UnreadableFileError:
        raise
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
