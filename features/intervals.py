"""Beat-to-beat intervals: forming them from beat times and screening them.

An interval series is two equal-length sequences: ``times_s`` (the time of
each interval's END beat, seconds) and ``intervals_ms``. Interval ``i`` is
adjacent to interval ``i - 1`` exactly when it starts where the previous one
ended, ``times_s[i] - intervals_ms[i] / 1000 == times_s[i - 1]`` within
1e-6 s. Adjacency is always derived this way, never stored, so a series with
gaps (beats lost to movement, rejected intervals) needs no extra bookkeeping.

Public functions
----------------
intervals_from_beats
    Consecutive differences of beat times, only within one usable run.
classify_intervals
    Label each interval "normal", "ectopic" or "artifact" against a running
    local median and return the normal-to-normal (NN) series.
adjacent_to_previous
    The adjacency rule above as a boolean array.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
from numpy.typing import ArrayLike, NDArray

from features.errors import InvalidInputError
from features.limits import DEFAULT_RATE_RANGE_BPM, MS_PER_MIN

__all__ = [
    "ADJACENCY_TOLERANCE_S",
    "IntervalLabels",
    "IntervalSeries",
    "LABELS",
    "adjacent_to_previous",
    "classify_intervals",
    "intervals_from_beats",
]

#: Two intervals are adjacent when the later one starts within this many
#: seconds of the earlier one's end beat.
ADJACENCY_TOLERANCE_S = 1e-6

#: The three labels :func:`classify_intervals` can give, sorted.
LABELS = ("artifact", "ectopic", "normal")

# Physiological range of a single interval: the default heart-rate range (30-200
# beats/min, common practice for adult HRV editing) as intervals.
_DEFAULT_RANGE_MS = (MS_PER_MIN / DEFAULT_RATE_RANGE_BPM[1], MS_PER_MIN / DEFAULT_RATE_RANGE_BPM[0])
# Fewer in-range neighbours than this and the local median is not trusted.
_MIN_REFERENCE_NEIGHBOURS = 3


@dataclass(frozen=True)
class IntervalSeries:
    """Intervals between consecutive beats of the same usable run.

    Attributes
    ----------
    times_s
        Time of each interval's end beat, seconds, strictly increasing.
    intervals_ms
        Interval durations, milliseconds, all positive.
    n_intervals
        Number of intervals.
    n_runs
        Number of stretches of mutually adjacent intervals.
    flags
        Anything adapted, e.g. ``"beats_in_single_beat_runs_dropped"``.
    """

    times_s: tuple[float, ...]
    intervals_ms: tuple[float, ...]
    n_intervals: int
    n_runs: int
    flags: tuple[str, ...]


@dataclass(frozen=True)
class IntervalLabels:
    """Screening result of :func:`classify_intervals`.

    Attributes
    ----------
    labels
        One of ``"normal"``, ``"ectopic"``, ``"artifact"`` per input interval.
    reasons
        Why each label was given: ``"within_tolerance"``, ``"premature_beat"``,
        ``"compensatory_pause"``, ``"extra_beat"``, ``"missed_beat"``,
        ``"unexplained_short"``, ``"unexplained_long"``, ``"out_of_range"`` or
        ``"unscreened_short_run"``.
    n_normal, n_ectopic, n_artifact
        Label counts.
    fraction_normal
        ``n_normal / n_intervals``; None when there are no intervals.
    fraction_explained (property)
        ``(n_normal + n_ectopic) / n_intervals``: the share that is sinus rhythm or a
        premature beat with its compensatory pause; None when there are no intervals.
    nn_times_s, nn_intervals_ms
        The normal intervals only (the NN series). Adjacency in the NN series
        follows the usual rule, so removing an interval opens a gap.
    confidence
        Fraction of intervals whose label rests on a rule that could be
        applied: out of range, or judged against a local median of at least
        three in-range neighbours; in [0, 1], 0 when there are no intervals.
    flags
        ``"no_intervals"``, ``"unscreened_short_runs"``.
    """

    labels: tuple[str, ...]
    reasons: tuple[str, ...]
    n_normal: int
    n_ectopic: int
    n_artifact: int
    fraction_normal: float | None
    nn_times_s: tuple[float, ...]
    nn_intervals_ms: tuple[float, ...]
    confidence: float
    flags: tuple[str, ...]

    @property
    def fraction_explained(self) -> float | None:
        """``(n_normal + n_ectopic) / n_intervals``; None when there are no intervals."""
        return (self.n_normal + self.n_ectopic) / len(self.labels) if self.labels else None


# --------------------------------------------------------------------------
# validation shared with features.variability


def _as_1d_finite(values: ArrayLike, field: str) -> NDArray[np.float64]:
    try:
        arr = np.asarray(values, dtype=float)
    except (TypeError, ValueError) as exc:
        raise InvalidInputError(
            field, f"`{field}` must be a sequence of numbers; got {type(values).__name__}."
        ) from exc
    if arr.ndim != 1:
        raise InvalidInputError(field, f"`{field}` must be one-dimensional; got shape {arr.shape}.")
    bad = np.flatnonzero(~np.isfinite(arr))
    if bad.size:
        raise InvalidInputError(
            field,
            f"`{field}` must contain only finite values; got {arr[bad[0]]} at index {bad[0]}.",
        )
    return arr


def _check_increasing(times: NDArray[np.float64], field: str) -> None:
    steps = np.diff(times)
    bad = np.flatnonzero(steps <= 0)
    if bad.size:
        i = int(bad[0]) + 1
        raise InvalidInputError(
            field,
            f"`{field}` must be strictly increasing; got {times[i]} after {times[i - 1]} "
            f"at index {i}.",
        )


def validate_interval_series(
    times_s: ArrayLike, intervals_ms: ArrayLike
) -> tuple[NDArray[np.float64], NDArray[np.float64]]:
    """Check an interval series and return it as float arrays.

    Parameters
    ----------
    times_s
        End-beat times, seconds, strictly increasing, finite.
    intervals_ms
        Interval durations, milliseconds, positive, finite, same length.

    Returns
    -------
    times, intervals
        1-D float arrays.

    Raises
    ------
    InvalidInputError
        On a rule broken: not 1-D, lengths differ, non-finite values,
        non-positive intervals, times not strictly increasing, or an interval
        reaching back before the previous interval's end beat.
    """
    times = _as_1d_finite(times_s, "times_s")
    intervals = _as_1d_finite(intervals_ms, "intervals_ms")
    if intervals.shape != times.shape:
        raise InvalidInputError(
            "intervals_ms",
            f"`intervals_ms` must have the same length as `times_s` ({times.size}); "
            f"got {intervals.size}.",
        )
    bad = np.flatnonzero(intervals <= 0)
    if bad.size:
        raise InvalidInputError(
            "intervals_ms",
            f"`intervals_ms` must be positive (milliseconds); got {intervals[bad[0]]} "
            f"at index {bad[0]}.",
        )
    _check_increasing(times, "times_s")
    if times.size > 1:
        starts = times[1:] - intervals[1:] / 1000.0
        bad = np.flatnonzero(starts < times[:-1] - ADJACENCY_TOLERANCE_S)
        if bad.size:
            i = int(bad[0]) + 1
            raise InvalidInputError(
                "intervals_ms",
                "`intervals_ms` must not start before the previous interval's end beat; "
                f"got interval {i} starting at {starts[i - 1]:.6f} s, before "
                f"{times[i - 1]:.6f} s. Check that intervals are in milliseconds.",
            )
    return times, intervals


def adjacent_to_previous(
    times_s: NDArray[np.float64], intervals_ms: NDArray[np.float64]
) -> NDArray[np.bool_]:
    """Whether each interval starts exactly where the previous one ended.

    Parameters
    ----------
    times_s
        End-beat times, seconds (already validated).
    intervals_ms
        Interval durations, milliseconds (already validated).

    Returns
    -------
    numpy.ndarray of bool
        Same length as the input; element 0 is always False.
    """
    adjacent = np.zeros(times_s.size, dtype=bool)
    if times_s.size > 1:
        starts = times_s[1:] - intervals_ms[1:] / 1000.0
        adjacent[1:] = np.abs(starts - times_s[:-1]) <= ADJACENCY_TOLERANCE_S
    return adjacent


def run_ids_from_adjacency(adjacent: NDArray[np.bool_]) -> NDArray[np.int64]:
    """Number the stretches of mutually adjacent intervals 0, 1, 2, ..."""
    return np.cumsum(~adjacent) - 1


# --------------------------------------------------------------------------
# intervals_from_beats


def intervals_from_beats(
    beat_times_s: ArrayLike, *, run_ids: ArrayLike | None = None
) -> IntervalSeries:
    """Intervals between consecutive beats, never across a run boundary.

    Parameters
    ----------
    beat_times_s
        J-peak times, seconds, finite and strictly increasing.
    run_ids
        Optional integer label of the usable run each beat belongs to, same
        length as ``beat_times_s``. An interval is formed between beats ``k``
        and ``k + 1`` only when both carry the same run id. Without it every
        pair of consecutive beats forms an interval.

    Returns
    -------
    IntervalSeries
        ``times_s`` holds the later beat of each pair, ``intervals_ms`` the
        difference in milliseconds.

    Raises
    ------
    InvalidInputError
        If ``beat_times_s`` is not 1-D, not finite or not strictly
        increasing, or ``run_ids`` is not integer or has another length.

    Notes
    -----
    1. Differences of consecutive beat times, times 1000.
    2. Pairs whose beats carry different run ids are dropped.
    3. Runs of a single beat contribute no interval; the flag
       ``"beats_in_single_beat_runs_dropped"`` says when that happened.
    """
    beats = _as_1d_finite(beat_times_s, "beat_times_s")
    _check_increasing(beats, "beat_times_s")
    if run_ids is None:
        runs = np.zeros(beats.size, dtype=np.int64)
    else:
        raw = np.asarray(run_ids)
        if raw.ndim != 1 or raw.size != beats.size:
            raise InvalidInputError(
                "run_ids",
                f"`run_ids` must be one-dimensional with the length of `beat_times_s` "
                f"({beats.size}); got shape {raw.shape}.",
            )
        if raw.size and not np.issubdtype(raw.dtype, np.integer):
            raise InvalidInputError(
                "run_ids", f"`run_ids` must hold integers; got dtype {raw.dtype}."
            )
        runs = raw.astype(np.int64)
    flags: list[str] = []
    if beats.size < 2:
        return IntervalSeries((), (), 0, 0, ("too_few_beats",))
    same_run = runs[1:] == runs[:-1]
    times = beats[1:][same_run]
    intervals = (np.diff(beats) * 1000.0)[same_run]
    # a beat that shares its run id with neither neighbour is isolated
    shares = np.zeros(beats.size, dtype=bool)
    shares[1:] |= same_run
    shares[:-1] |= same_run
    if not shares.all():
        flags.append("beats_in_single_beat_runs_dropped")
    adjacent = adjacent_to_previous(times, intervals)
    n_runs = int(np.count_nonzero(~adjacent)) if times.size else 0
    return IntervalSeries(
        times_s=tuple(times.tolist()),  # Python floats, as float() of each
        intervals_ms=tuple(intervals.tolist()),
        n_intervals=int(times.size),
        n_runs=n_runs,
        flags=tuple(flags),
    )


# --------------------------------------------------------------------------
# classify_intervals


def _local_reference_ms(
    intervals: NDArray[np.float64],
    run_ids: NDArray[np.int64],
    usable: NDArray[np.bool_],
    half_window: int,
) -> tuple[NDArray[np.float64], NDArray[np.int64]]:
    """Median of the usable neighbours of each interval within its own run.

    Returns the median (NaN where no neighbour exists) and the neighbour
    count. The centre interval itself is left out of its own reference.
    """
    n = intervals.size
    offsets = np.concatenate([np.arange(-half_window, 0), np.arange(1, half_window + 1)])
    idx = np.arange(n)[:, None] + offsets[None, :]
    inside = (idx >= 0) & (idx < n)
    safe = np.clip(idx, 0, n - 1)
    valid = inside & (run_ids[safe] == run_ids[:, None]) & usable[safe]
    values = np.where(valid, intervals[safe], np.inf)
    values.sort(axis=1)  # invalid entries (inf) go last
    count = valid.sum(axis=1)
    lo = np.clip((count - 1) // 2, 0, values.shape[1] - 1)
    hi = np.clip(count // 2, 0, values.shape[1] - 1)
    rows = np.arange(n)
    median = np.full(n, np.nan)
    has = count > 0
    median[has] = 0.5 * (values[rows[has], lo[has]] + values[rows[has], hi[has]])
    return median, count


def classify_intervals(
    times_s: ArrayLike,
    intervals_ms: ArrayLike,
    *,
    max_relative_deviation: float = 0.2,
    compensation_tolerance: float = 0.2,
    range_ms: tuple[float, float] = _DEFAULT_RANGE_MS,
    median_window_beats: int = 11,
) -> IntervalLabels:
    """Label each interval normal, ectopic or artifact; return the NN series.

    Parameters
    ----------
    times_s
        End-beat time of each interval, seconds, strictly increasing.
    intervals_ms
        Interval durations, milliseconds, positive.
    max_relative_deviation
        An interval differing from its local median by more than this
        fraction is suspect; in (0, 1). Default 0.2: the 20 % rule of Malik
        et al. (1989) and Kamath & Fallen (1995).
    compensation_tolerance
        How far, in local medians, the sum of a short interval and the next
        may be from two medians (ectopic beat with compensatory pause) and a
        long interval from two medians (missed beat); in (0, 1). Default 0.2.
    range_ms
        ``(low, high)`` physiological range, milliseconds; intervals outside
        are artifacts. Default (300, 2000), i.e. 200 to 30 beats/min.
    median_window_beats
        Width of the running-median window, odd, in beats, >= 3. Default 11
        (five neighbours each side).

    Returns
    -------
    IntervalLabels
        Labels, reasons, counts, NN series, confidence and flags.

    Raises
    ------
    InvalidInputError
        If the series breaks a rule of :func:`validate_interval_series`, or
        an option is out of its range.

    Notes
    -----
    1. Intervals outside ``range_ms`` are artifacts ("out_of_range").
    2. Each remaining interval gets a reference: the median of the in-range
       intervals within ``median_window_beats`` around it, inside its own
       run of adjacent intervals, itself excluded. With fewer than three such
       neighbours (runs shorter than four intervals) nothing can be judged
       and the interval is excluded as ``"unscreened_short_run"``.
    3. Relative deviation ``d = (RR - M) / M``. ``|d| <= max_relative_deviation``
       is normal.
    4. A short interval (``d < -max_relative_deviation``) is paired with the
       next adjacent in-range interval; with ``S`` their sum:
       ``|S / M - 2| <= compensation_tolerance`` is a premature beat with a
       compensatory pause, and both of the beat's intervals are "ectopic";
       ``S / M <= 1 + max_relative_deviation`` is an extra (false) beat
       splitting one interval, and both are "artifact"; otherwise the short
       interval alone is an artifact ("unexplained_short").
    5. A long interval (``d > max_relative_deviation``) is an artifact:
       "missed_beat" when ``RR / M >= 2 - compensation_tolerance``,
       "unexplained_long" otherwise.

    Departures from the papers: Malik et al. compare with the previous
    interval; we compare with a running median of neighbours (as Lipponen &
    Tarvainen 2019 do with their medians), so that one bad interval does not
    also condemn the next. The pattern rules of steps 4-5 follow the beat
    classes of Lipponen & Tarvainen (ectopic short-long, missed, extra) but
    with fixed rather than adaptive thresholds. By timing alone, an
    interpolated ectopic beat (short-short) looks like an extra beat, and a
    J peak found early looks like a premature beat; the labels name the
    timing pattern. A fixed 20 % threshold will reject genuine sinus
    intervals in subjects with very large respiratory sinus arrhythmia.

    References
    ----------
    .. [1] M. Malik, T. Farrell, T. Cripps, A. J. Camm, "Heart rate
       variability in relation to prognosis after myocardial infarction:
       selection of optimal processing techniques", European Heart Journal
       10(12):1060-1074, 1989.
    .. [2] M. V. Kamath, E. L. Fallen, "Correction of the heart rate
       variability signal for ectopics and missing beats", in M. Malik,
       A. J. Camm (eds.), Heart Rate Variability, Futura, 1995, pp. 75-85.
    .. [3] J. A. Lipponen, M. P. Tarvainen, "A robust algorithm for heart rate
       variability time series artefact correction using novel beat
       classification", Journal of Medical Engineering & Technology
       43(3):173-181, 2019. doi:10.1080/03091902.2019.1640306
    """
    times, intervals = validate_interval_series(times_s, intervals_ms)
    _check_fraction(max_relative_deviation, "max_relative_deviation")
    _check_fraction(compensation_tolerance, "compensation_tolerance")
    low_ms, high_ms = _check_range(range_ms)
    if (
        isinstance(median_window_beats, bool)
        or not isinstance(median_window_beats, int | np.integer)
        or median_window_beats < 3
        or median_window_beats % 2 == 0
    ):
        raise InvalidInputError(
            "median_window_beats",
            f"`median_window_beats` must be an odd integer >= 3; got {median_window_beats!r}.",
        )
    n = intervals.size
    if n == 0:
        return IntervalLabels((), (), 0, 0, 0, None, (), (), 0.0, ("no_intervals",))

    adjacent = adjacent_to_previous(times, intervals)
    runs = run_ids_from_adjacency(adjacent)
    in_range = (intervals >= low_ms) & (intervals <= high_ms)
    reference, n_ref = _local_reference_ms(intervals, runs, in_range, int(median_window_beats) // 2)
    screenable = in_range & (n_ref >= _MIN_REFERENCE_NEIGHBOURS)

    labels = np.full(n, "normal", dtype=object)
    reasons = np.full(n, "within_tolerance", dtype=object)
    labels[~in_range] = "artifact"
    reasons[~in_range] = "out_of_range"
    unscreened = in_range & ~screenable
    labels[unscreened] = "artifact"
    reasons[unscreened] = "unscreened_short_run"

    ratio = np.ones(n)
    ratio[screenable] = intervals[screenable] / reference[screenable]
    suspect = screenable & (np.abs(ratio - 1.0) > max_relative_deviation)
    # the next interval, when adjacent and in range, can complete a pattern
    next_ok = np.zeros(n, dtype=bool)
    next_ok[:-1] = adjacent[1:] & in_range[1:]

    decided = np.zeros(n, dtype=bool)
    for i in np.flatnonzero(suspect):
        if decided[i]:
            continue
        decided[i] = True
        labels[i] = "artifact"
        if ratio[i] > 1.0:
            long_enough = ratio[i] >= 2.0 - compensation_tolerance
            reasons[i] = "missed_beat" if long_enough else "unexplained_long"
            continue
        reasons[i] = "unexplained_short"
        if not next_ok[i] or decided[i + 1]:
            continue
        pair = (intervals[i] + intervals[i + 1]) / reference[i]
        if abs(pair - 2.0) <= compensation_tolerance:
            labels[i], reasons[i] = "ectopic", "premature_beat"
            labels[i + 1], reasons[i + 1] = "ectopic", "compensatory_pause"
            decided[i + 1] = True
        elif pair <= 1.0 + max_relative_deviation:
            reasons[i] = "extra_beat"
            labels[i + 1], reasons[i + 1] = "artifact", "extra_beat"
            decided[i + 1] = True

    normal = labels == "normal"
    n_normal = int(np.count_nonzero(normal))
    n_ectopic = int(np.count_nonzero(labels == "ectopic"))
    flags = ("unscreened_short_runs",) if unscreened.any() else ()
    return IntervalLabels(
        labels=tuple(labels.tolist()),  # the object arrays hold Python str
        reasons=tuple(reasons.tolist()),
        n_normal=n_normal,
        n_ectopic=n_ectopic,
        n_artifact=n - n_normal - n_ectopic,
        fraction_normal=n_normal / n,
        nn_times_s=tuple(times[normal].tolist()),
        nn_intervals_ms=tuple(intervals[normal].tolist()),
        confidence=float(np.count_nonzero(screenable | ~in_range)) / n,
        flags=flags,
    )


def _check_fraction(value: float, field: str) -> None:
    if isinstance(value, bool) or not isinstance(value, int | float) or not 0 < value < 1:
        raise InvalidInputError(
            field, f"`{field}` must be a number strictly between 0 and 1; got {value!r}."
        )


def _check_range(range_ms: Sequence[float]) -> tuple[float, float]:
    try:
        low, high = (float(v) for v in range_ms)
    except (TypeError, ValueError) as exc:
        raise InvalidInputError(
            "range_ms", f"`range_ms` must be a pair (low, high) in milliseconds; got {range_ms!r}."
        ) from exc
    if not (np.isfinite(low) and np.isfinite(high) and 0 < low < high):
        raise InvalidInputError(
            "range_ms",
            f"`range_ms` must satisfy 0 < low < high (milliseconds); got {range_ms!r}.",
        )
    return low, high
