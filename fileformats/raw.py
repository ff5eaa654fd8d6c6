"""What each reader hands back before selection and unit resolution."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from numpy.typing import NDArray

from features.errors import InvalidInputError
from features.gaps import spread_on_grid, time_grid
from fileformats.errors import UnreadableFileError

#: A column (any case) of time stamps, not a channel: CSV, NPZ and Parquet.
TIME_COLUMN = "time_s"

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
    times_s
        The file's ``time_s`` column, one time per row (CSV, NPZ, Parquet), or None.
    """

    labels: tuple[str, ...]
    samples: tuple[NDArray[np.float64], ...]
    units: tuple[str | None, ...]
    rates_hz: tuple[float | None, ...]
    flags: tuple[str, ...] = ()
    times_s: NDArray[np.float64] | None = None


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


def samples_float64(array: np.ndarray, what: str) -> NDArray[np.float64]:
    """``array`` as float64, refusing other dtypes than integers and floats of up to 64 bits,
    and any infinite value (``what`` names the array in messages). NaN is a sample the
    device lost (a dropout; WFDB's invalid-sample value reads as NaN): it is kept, and the
    engine masks it as a gap.

    Raises
    ------
    UnreadableFileError
        Naming the dtype, or the index of the first infinite value.
    """
    if array.dtype.kind not in "iuf" or array.dtype.itemsize > MAX_ITEMSIZE:
        raise UnreadableFileError(
            "file", f"`file` must hold integer or floating-point samples of at most "
            f"{MAX_ITEMSIZE * 8} bits; {what} has dtype {array.dtype}."
        )
    # A signalling NaN warns "invalid value encountered in cast" when widened; it becomes a
    # quiet NaN, a lost sample like any other, so the warning is not needed.
    with np.errstate(invalid="ignore", over="ignore"):
        out = np.asarray(array, dtype=np.float64)
    bad = np.flatnonzero(np.isinf(out))
    if bad.size:
        raise UnreadableFileError(
            "file", f"`file` must not hold infinity (a lost sample is NaN or empty); {what} "
            f"has an infinite value at index {int(bad[0])}."
        )
    return out


def on_time_grid(times_s: np.ndarray, samples: tuple[NDArray[np.float64], ...],
                 fs_hz: float | None, max_samples: int
                 ) -> tuple[float, tuple[NDArray[np.float64], ...]]:
    """The rate a ``time_s`` column gives (or checks) and the samples on its uniform grid,
    NaN where the column skips whole samples (:func:`features.gaps.time_grid`).

    Raises
    ------
    UnreadableFileError
        With the time-column rule broken (field ``time_s``).
    """
    try:
        grid = time_grid(times_s, fs_hz=fs_hz, field=TIME_COLUMN,
                         max_length=max_samples // max(1, len(samples)))
    except InvalidInputError as error:
        raise UnreadableFileError(TIME_COLUMN, error.message) from None
    return grid.fs_hz, tuple(spread_on_grid(x, grid) for x in samples)
