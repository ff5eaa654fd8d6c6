"""What each reader hands back before selection and unit resolution."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from numpy.typing import NDArray

from fileformats.errors import UnreadableFileError

#: Widest sample the readers accept, bytes (float64 and int64; no float128 or complex).
MAX_ITEMSIZE = 8


@dataclass(frozen=True)
class RawTrace:
    """Every signal of one file, as read.

    Attributes
    ----------
    labels
        Signal labels, in file order (unique: readers number repeats).
    samples
        One float64 array per label, in the header's physical unit.
    units
        Unit per label as written in the file, None when the format has none.
    rates_hz
        Sampling rate per label, None when the format does not carry it.
    flags
        Anything the reader adapted (for example ``"edf_annotations_ignored"``).
    """

    labels: tuple[str, ...]
    samples: tuple[NDArray[np.float64], ...]
    units: tuple[str | None, ...]
    rates_hz: tuple[float | None, ...]
    flags: tuple[str, ...] = ()


def unique_labels(labels: list[str]) -> tuple[str, ...]:
    """Strip labels, name empty ones ``channel_<k>`` and number repeats (``a``, ``a_2``)."""
    out: list[str] = []
    for k, label in enumerate(labels, start=1):
        name = label.strip() or f"channel_{k}"
        base, n = name, 1
        while name in out:
            n += 1
            name = f"{base}_{n}"
        out.append(name)
    return tuple(out)


def finite_float64(array: np.ndarray, what: str) -> NDArray[np.float64]:
    """``array`` as float64, refusing other dtypes than integers and floats of up to 64 bits,
    and any value that is not finite (``what`` names the array in messages).

    Raises
    ------
    UnreadableFileError
        Naming the dtype, or the index of the first non-finite value.
    """
    if array.dtype.kind not in "iuf" or array.dtype.itemsize > MAX_ITEMSIZE:
        raise UnreadableFileError(
            "file", f"`file` must hold integer or floating-point samples of at most "
            f"{MAX_ITEMSIZE * 8} bits; {what} has dtype {array.dtype}."
        )
    # A signalling NaN warns "invalid value encountered in cast" when widened; the check
    # below refuses every non-finite value with its index, so the warning is not needed.
    with np.errstate(invalid="ignore", over="ignore"):
        out = np.asarray(array, dtype=np.float64)
    bad = np.flatnonzero(~np.isfinite(out))
    if bad.size:
        raise UnreadableFileError(
            "file", f"`file` must hold finite numbers; {what} has a non-finite value at "
            f"index {int(bad[0])}."
        )
    return out
