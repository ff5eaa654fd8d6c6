"""Dropouts: samples a device lost, and time columns that place the samples it kept.

Recordings from real devices have holes (a radio link drops packets, a logger skips a
buffer). They arrive as missing values (``NaN``; ``null`` in JSON, an empty CSV cell) or
as jumps in a time column. This module holds the one rule for both:

fill_gaps(samples) -> (filled, gap)
    Missing samples replaced by a straight line between their neighbours, and where they
    were; the conditioning stage filters the filled trace and the artifact stage masks the
    gap (kind ``"gap"``) with :data:`GAP_PAD_S` either side.
time_grid(time_s, *, fs_hz, field, max_length) -> TimeGrid
    Check a time column for a uniform rate, place each row on the sample grid (whole
    missing samples become gaps) and give the rate when none was sent.
spread_on_grid(values, grid) -> samples with NaN at the missing positions.

Infinity is never a dropout: it is refused wherever samples are read.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from numpy.typing import ArrayLike, NDArray

from features.errors import InvalidInputError
from features.limits import MAX_FS_HZ, MIN_DURATION_S, MIN_FS_HZ

__all__ = [
    "GAP_PAD_S",
    "TIME_STEP_TOLERANCE",
    "TimeGrid",
    "check_enough_samples",
    "fill_gaps",
    "spread_on_grid",
    "time_grid",
]

GAP_PAD_S = 1.0
"""Masked time added either side of a gap, s. The filled stretch is a straight line, so
every filter that runs across it answers its edges (a kink, the hum and heartbeat that
stop) for about the length of its impulse response on either side: the mains notch (stop
band +-0.5 Hz, cosine taper over 1 Hz) rings for about 1 / 1 Hz = 1 s, the movement
envelope averages over 1 s, and a beat complex with its template reaches about 0.6 s.
One second covers the longest of these; the beat stage zeroes another 0.1 s of its
wavelet band next to any masked span."""

TIME_STEP_TOLERANCE = 0.01
"""A time column is uniform when each step is within +-1 % of one sample step, or of a
whole number of steps (a dropout). A sampler's crystal is off by tens of ppm (common
practice: +-20 to +-100 ppm parts), far inside this; 1 % leaves room for time stamps
written with a few digits to spare (at 1000 Hz, to the 10 microseconds), and refuses a
device that samples irregularly (steps that vary by several percent), whose trace would
need resampling that the engine does not do. A jump of k steps may be off by 1 % of its
length, i.e. to the nearest sample from 50 steps up: clocks drift over long holes too."""


@dataclass(frozen=True)
class TimeGrid:
    """Where the rows of a time column sit on a uniform sample grid.

    Attributes
    ----------
    fs_hz
        The sampling rate: the one sent, or the rows' span over their time (Hz).
    positions
        (rows,) int64, the sample index of each row, from 0, strictly increasing.
    length
        Samples on the grid, rows and missing samples together (``positions[-1] + 1``).
    missing
        Samples the column skips (``length - rows``).
    """

    fs_hz: float
    positions: NDArray[np.int64]
    length: int
    missing: int


def fill_gaps(samples: ArrayLike) -> tuple[NDArray[np.float64], NDArray[np.bool_]]:
    """Replace missing samples (NaN) by a straight line between their neighbours.

    Parameters
    ----------
    samples
        1-D real samples; NaN marks a missing sample. Must hold at least one number.

    Returns
    -------
    filled, gap
        float64 samples without NaN (the input itself, as float64, when nothing is
        missing) and the (n,) boolean mask of the samples that were missing.

    Notes
    -----
    Inside the trace, a gap is bridged linearly from the sample before it to the one
    after it (``numpy.interp``); a gap at either end holds the nearest sample. A line
    adds no frequency the filters would ring at beyond the kinks at its ends, which
    :data:`GAP_PAD_S` masks; the samples themselves are never analysed (they are masked).
    """
    x = np.asarray(samples)
    if x.dtype.kind != "f":
        return np.asarray(x, dtype=np.float64), np.zeros(x.shape[0], dtype=bool)
    gap = np.isnan(x)
    if not gap.any():
        return np.asarray(x, dtype=np.float64), gap
    kept = np.flatnonzero(~gap)
    out = np.array(x, dtype=np.float64)
    out[gap] = np.interp(np.flatnonzero(gap), kept, out[kept])
    return out, gap


def time_grid(time_s: ArrayLike, *, fs_hz: float | None = None, field: str = "time_s",
              max_length: int) -> TimeGrid:
    """Check a time column and place its rows on a uniform sample grid.

    Parameters
    ----------
    time_s
        (rows,) time of each row, s, finite and strictly increasing; at least 2 rows.
    fs_hz
        The sampling rate sent with the samples, Hz, or None to take it from the column.
    field
        Name of the column in messages.
    max_length
        Most samples the grid may hold (rows and missing samples), checked before any
        array of that length is made.

    Returns
    -------
    TimeGrid

    Raises
    ------
    InvalidInputError
        ``field`` named: a non-finite or non-increasing time, a step that is neither one
        sample step nor a whole number of them (within :data:`TIME_STEP_TOLERANCE`), a
        rate outside ``MIN_FS_HZ``-``MAX_FS_HZ``, or a grid longer than ``max_length``.

    Notes
    -----
    1. The sample step ``d`` is ``1 / fs_hz`` when a rate is sent, else the median step.
    2. Each step is ``r = step / d`` sample steps; ``k = round(r)`` must be at least 1 and
       ``|r - k| <= TIME_STEP_TOLERANCE * k``. ``k - 1`` samples are missing after the row.
    3. Without a sent rate the rate is the grid's samples over the column's span,
       ``(positions[-1]) / (t[-1] - t[0])``: the mean step, which rounding of the printed
       stamps does not bias as it does the median.
    """
    t = np.asarray(time_s, dtype=np.float64)
    if t.ndim != 1 or t.shape[0] < 2:
        raise InvalidInputError(field, f"`{field}` must hold a time for each of at least 2 "
                                f"rows; got {t.shape[0] if t.ndim == 1 else t.shape} rows.")
    bad = np.flatnonzero(~np.isfinite(t))
    if bad.size:
        raise InvalidInputError(field, f"`{field}` must hold a finite time in every row; got "
                                f"{bad.size} empty or non-finite, the first in row {bad[0]}.")
    steps = np.diff(t)
    back = np.flatnonzero(steps <= 0)
    if back.size:
        k = int(back[0])
        raise InvalidInputError(field, f"`{field}` must increase from row to row; got "
                                f"{t[k]:g} s then {t[k + 1]:g} s at rows {k}-{k + 1} "
                                "(counting from 0).")
    step = 1.0 / float(fs_hz) if fs_hz is not None else float(np.median(steps))
    ratio = steps / step
    whole = np.rint(ratio)
    off = np.abs(ratio - whole) > TIME_STEP_TOLERANCE * np.maximum(whole, 1.0)
    off |= whole < 1
    if off.any():
        k = int(np.argmax(off))
        basis = ("1 / sampling_rate_hz" if fs_hz is not None else "the median step")
        raise InvalidInputError(
            field, f"`{field}` must advance by one sample step ({basis}, {step * 1e3:.6g} ms) "
            f"within {TIME_STEP_TOLERANCE:.0%}, or by a whole number of steps where samples "
            f"are missing; got {steps[k] * 1e3:.6g} ms ({ratio[k]:.3g} steps) at rows "
            f"{k}-{k + 1}. Resample the trace to a uniform rate, or write the times with more "
            "digits.")
    length = int(whole.sum()) + 1
    if length > max_length:
        raise InvalidInputError(field, f"`{field}` must span at most {max_length} samples with "
                                f"its missing ones; got {length}. Split the recording.")
    positions = np.concatenate(([0], np.cumsum(whole, dtype=np.int64)))
    rate = float(fs_hz) if fs_hz is not None else (length - 1) / float(t[-1] - t[0])
    if not (math.isfinite(rate) and MIN_FS_HZ <= rate <= MAX_FS_HZ):
        raise InvalidInputError(field, f"`{field}` must give a sampling rate between "
                                f"{MIN_FS_HZ:g} and {MAX_FS_HZ:g} Hz; got {rate:g} Hz.")
    return TimeGrid(fs_hz=rate, positions=positions, length=length,
                    missing=length - int(t.shape[0]))


def spread_on_grid(values: ArrayLike, grid: TimeGrid) -> NDArray[np.float64]:
    """``values`` (one per row) at their grid positions, NaN at the missing samples."""
    v = np.asarray(values, dtype=np.float64)
    if grid.missing == 0:
        return v
    out = np.full(grid.length, np.nan)
    out[grid.positions] = v
    return out


def check_enough_samples(gap: NDArray[np.bool_], fs_hz: float, field: str) -> None:
    """Refuse a trace whose received samples span less than ``MIN_DURATION_S``.

    A trace mostly of gaps is analysed (its features come back null with reasons), but with
    less than the shortest analysable record of real samples nothing at all can be.
    """
    kept_s = float(np.count_nonzero(~gap)) / fs_hz
    if kept_s < MIN_DURATION_S:
        raise InvalidInputError(
            field, f"`{field}` must hold at least {MIN_DURATION_S:g} s of samples besides its "
            f"gaps; got {kept_s:g} s ({int(np.count_nonzero(gap))} of {gap.size} samples "
            "missing).")
