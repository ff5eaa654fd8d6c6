"""The night summary: what one windowed analysis of a whole night says, in plain measures.

Public API
----------
summarize_night(windowed) -> NightSummary
    Occupied span and duration, bed exits, heart rate across the night, the Task Force
    long-term variability measures, breathing, breathing pauses, movement and the usable
    share, each a :class:`features.feature_vector.FeatureValue` (value, unit, confidence,
    reason when None).
NIGHT_MEASURES
    The catalogue of the summary's measures (name, unit, definition, reference), in output
    order; ``docs/night.md`` is generated from it.
night_catalogue_markdown() -> str
    The catalogue as the Markdown text of ``docs/night.md``.

The summary reads only what :func:`features.windows.analyze_windows` kept of each window
(the feature vector, the occupancy and the masked segments): nothing is recomputed from the
samples. It has no sleep staging and no composite score; the breathing pauses are
observations of the signal, not a diagnosis of anything.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np

from features.feature_vector import FeatureValue, value_named, values_by_name
from features.limits import S_PER_HOUR, SHORT_TERM_S
from features.windows import WindowedAnalysis, WindowResult

__all__ = [
    "MIN_BED_EXIT_S",
    "MIN_SEGMENTS",
    "MIN_SEGMENT_USABLE_FRACTION",
    "MOVEMENT_KINDS",
    "NIGHT_MEASURES",
    "SEGMENT_S",
    "BedExit",
    "NightMeasure",
    "NightSummary",
    "night_catalogue_markdown",
    "summarize_night",
]

SEGMENT_S = SHORT_TERM_S
"""Segment length of the Task Force long-term measures and of the 5-minute heart-rate means
(s): "the mean NN intervals calculated over short periods, usually 5 min" (Task Force 1996,
time-domain methods)."""
MIN_SEGMENTS = 3
"""Fewest 5-minute segments behind SDANN and the SDNN index. NeuroKit2's ``hrv_time`` asks
for the same (its ``_sdann`` returns NaN below 3 windows); a standard deviation of two means
says little."""
MIN_SEGMENT_USABLE_FRACTION = 0.5
"""A 5-minute segment enters the lowest and highest heart rate, SDANN and the SDNN index
only when at least half of it is usable (heartsway definition: a 5-minute mean should rest on
most of its 5 minutes, not on a few beats between movements)."""
MIN_BED_EXIT_S = 60.0
"""Shortest unoccupied stretch between occupied ones that counts as a bed exit (s). Turning
over, sitting on the edge of the bed or reaching for the floor can take the load off the
frame for some seconds without anyone leaving; a minute is longer than such shifts and still
far shorter than any trip out of the room (heartsway definition)."""

_GAP_TOLERANCE_S = 1e-6  # stretches closer than this are one (sums of window starts)
MOVEMENT_KINDS = ("movement", "posture_change")
"""Masked segment kinds (``features.artifacts``) counted as movement stretches."""
_TASK_FORCE = (
    "Task Force of the European Society of Cardiology and the North American Society of "
    "Pacing and Electrophysiology. Heart rate variability: standards of measurement, "
    "physiological interpretation and clinical use. Circulation 93(5):1043-1065, 1996. "
    "doi:10.1161/01.CIR.93.5.1043"
)
_OURS = "heartsway definition"


@dataclass(frozen=True)
class NightMeasure:
    """One entry of the night catalogue: name (with unit suffix), UCUM unit, definition."""

    name: str
    unit: str | None
    definition: str
    reference: str


NIGHT_MEASURES: tuple[NightMeasure, ...] = (
    NightMeasure("occupied_start_s", "s",
                 "Time of the first occupied moment, from the first sample of the recording.",
                 _OURS),
    NightMeasure("occupied_end_s", "s",
                 "Time of the last occupied moment, from the first sample of the recording.",
                 _OURS),
    NightMeasure("occupied_duration_s", "s",
                 "Total occupied time: the windows' time less their empty-support segments "
                 "(a load below the occupant mass bound); windows without load information "
                 "count whole by their occupancy.", _OURS),
    NightMeasure("bed_exit_count", None,
                 f"Unoccupied stretches of at least {MIN_BED_EXIT_S:g} s between occupied "
                 "ones (before the first and after the last occupied moment do not count); "
                 "a stretch that holds a failed window is not counted.", _OURS),
    NightMeasure("heart_rate_mean_bpm", "/min",
                 "Mean of the occupied windows' heart_rate_mean_bpm weighted by their usable "
                 "time: beats per minute over the usable occupied time.", _OURS),
    NightMeasure("heart_rate_lowest_5min_bpm", "/min",
                 "Lowest heart_rate_mean_bpm of an occupied 300-s window at least half "
                 "usable; needs 300-s windows.", _OURS),
    NightMeasure("heart_rate_lowest_5min_start_s", "s",
                 "Start of that window, from the first sample of the recording.", _OURS),
    NightMeasure("heart_rate_highest_5min_bpm", "/min",
                 "Highest heart_rate_mean_bpm of an occupied 300-s window at least half "
                 "usable; needs 300-s windows.", _OURS),
    NightMeasure("heart_rate_highest_5min_start_s", "s",
                 "Start of that window, from the first sample of the recording.", _OURS),
    NightMeasure("sdann_ms", "ms",
                 "SDANN: sample standard deviation (ddof=1) of the mean NN intervals of the "
                 "5-minute segments (occupied 300-s windows without overlap, at least half "
                 f"usable; at least {MIN_SEGMENTS}).", _TASK_FORCE),
    NightMeasure("sdnn_index_ms", "ms",
                 "SDNN index: mean of the SDNNs of the same 5-minute segments.", _TASK_FORCE),
    NightMeasure("rmssd_median_ms", "ms",
                 "Median over the occupied windows of their RMSSD (rmssd_ms).", _TASK_FORCE),
    NightMeasure("sdnn_median_ms", "ms",
                 "Median over the occupied windows of their SDNN (sdnn_ms); SDNN grows with "
                 "the window length, so compare nights analysed with equal windows.",
                 _TASK_FORCE),
    NightMeasure("breathing_rate_median_per_min", "/min",
                 "Median over the occupied windows of breathing_rate_per_min.", _OURS),
    NightMeasure("breathing_rate_lowest_per_min", "/min",
                 "Lowest breathing_rate_per_min of an occupied window.", _OURS),
    NightMeasure("breathing_rate_highest_per_min", "/min",
                 "Highest breathing_rate_per_min of an occupied window.", _OURS),
    NightMeasure("breathing_pauses_per_hour", "/h",
                 "Breathing pauses seen in the signal (each window's breathing_pauses_per_hour, "
                 "10 s or more) per usable occupied hour: the windows' rates weighted by their "
                 "usable time. A signal observation, not a diagnosis.", _OURS),
    NightMeasure("movement_per_hour", "/h",
                 "Masked movement and posture-change stretches (joined across window "
                 "boundaries) whose middle lies in occupied time, per occupied hour.", _OURS),
    NightMeasure("usable_fraction", None,
                 "Share of the occupied time not masked as movement or another artifact.",
                 _OURS),
)


@dataclass(frozen=True)
class BedExit:
    """One bed exit: the unoccupied stretch between two occupied ones (s, recording clock).

    ``confidence`` is the lower of the occupancy confidences of the windows on either side.
    """

    start_s: float
    end_s: float
    duration_s: float
    confidence: float


@dataclass(frozen=True)
class NightSummary:
    """The night summary.

    Attributes
    ----------
    measures
        One :class:`FeatureValue` per entry of :data:`NIGHT_MEASURES`, in that order.
    bed_exits
        The exits counted in ``bed_exit_count``, in time order.
    occupied_spans_s
        The occupied stretches as (start, end), s; stretches apart by less than
        :data:`MIN_BED_EXIT_S` are joined.
    window_s, overlap_s
        Window length and overlap of the windowed analysis (s).
    n_windows, n_occupied_windows, n_failed_windows
        Windows in all, judged occupied, and without an analysis.
    unknown_s
        Time whose occupancy nobody knows: failed windows and the unanalysed tail (s).
    flags
        What the summary adapted or could not do, sorted.
    """

    measures: tuple[FeatureValue, ...]
    bed_exits: tuple[BedExit, ...]
    occupied_spans_s: tuple[tuple[float, float], ...]
    window_s: float
    overlap_s: float
    n_windows: int
    n_occupied_windows: int
    n_failed_windows: int
    unknown_s: float
    flags: tuple[str, ...]

    def get(self, name: str) -> FeatureValue:
        """Return the measure called ``name``.

        Raises
        ------
        KeyError
            When ``name`` is not in :data:`NIGHT_MEASURES`.
        """
        return value_named(self.measures, name)

    def as_dict(self) -> dict[str, float | None]:
        """Name -> value (None when not computed), in catalogue order."""
        return values_by_name(self.measures)


def summarize_night(windowed: WindowedAnalysis) -> NightSummary:
    """Summarise a night from its windowed analysis.

    Parameters
    ----------
    windowed
        The result of :func:`features.windows.analyze_windows` over the night.

    Returns
    -------
    NightSummary
        Every measure of :data:`NIGHT_MEASURES`; a value that cannot be computed honestly is
        None with a reason (``"no_window_analysed"``, ``"never_occupied"``,
        ``"no_occupied_window_with_value"``, ``"needs_300_s_windows"``,
        ``"needs_300_s_windows_without_overlap"``, ``"needs_3_segments"``).

    Notes
    -----
    1. Each window owns its time from its start to the next window's start (its whole span
       when windows do not overlap; the last window to its end), so overlapping windows
       never count time twice. A failed window's time, and the unanalysed tail, is unknown.
    2. Occupied time of a window with load information (``occupancy.from_load`` not None)
       that is not unoccupied as a whole: its own time less its ``empty_support``
       segments, so occupancy changes are placed to the engine's mask resolution, not to
       the window. A window whose load says empty throughout is masked nowhere (the beats
       are still looked for), so its own ``occupancy.occupied`` decides it. Without load
       information the whole window counts by ``occupancy.occupied`` (unknown when None).
    3. Occupied stretches apart by less than :data:`MIN_BED_EXIT_S` are joined; the gaps
       left, when they hold no unknown time, are the bed exits.
    4. Per-window values come from the windows' feature vectors (values and confidences as
       the engine reported them). A window enters the heart-rate, variability and breathing
       measures when it is occupied (``occupancy.occupied``) and the value is not None.
    5. The 5-minute measures need 300-s windows (within one sample); SDANN and the SDNN
       index also need windows without overlap, as the Task Force segments are consecutive.
       They are None with a reason otherwise, never approximated from windows of another
       length. Missing segments (movement, exits, failed windows) are skipped, as a Holter
       analysis skips noisy segments.
    6. Confidences: the mean (weighted as the value is) of the confidences of the windows'
       values that a measure uses; the occupancy measures use the windows' occupancy
       confidences, reduced by the share of unknown time inside the occupied span.

    References
    ----------
    .. [1] Task Force of the European Society of Cardiology and the North American Society
       of Pacing and Electrophysiology, "Heart rate variability: standards of measurement,
       physiological interpretation and clinical use", Circulation 93(5):1043-1065, 1996,
       doi:10.1161/01.CIR.93.5.1043 (SDANN, SDNN index, 5-minute segments).
    """
    windows = windowed.windows
    owned = _owned_spans(windows)
    occupied, unknown, confidences = _occupancy_timeline(windows, owned)
    unknown_s = _total(unknown) + float(windowed.unanalysed_tail_s)
    spans = _join(occupied, MIN_BED_EXIT_S)
    flags: set[str] = set()
    if windowed.n_failed:
        flags.add("windows_failed")
    if windowed.unanalysed_tail_s > 0:
        flags.add("tail_not_analysed")

    values: dict[str, FeatureValue] = {}
    analysed = any(w.error is None for w in windows)
    empty_reason = "no_window_analysed" if not analysed else "never_occupied"
    occ_s = _total(occupied)
    if not occupied:
        for name in ("occupied_start_s", "occupied_end_s", "bed_exit_count"):
            values[name] = _none(name, empty_reason)
        values["occupied_duration_s"] = (_value("occupied_duration_s", 0.0, _mean(
            [w.occupancy.confidence for w in windows if w.occupancy is not None]))
            if analysed else _none("occupied_duration_s", empty_reason))
        exits: tuple[BedExit, ...] = ()
    else:
        start, end = occupied[0][0], occupied[-1][1]
        unknown_inside = _total(_clip(unknown, start, end)) / max(end - start, 1e-12)
        occ_conf = _weighted(confidences, occupied)
        values["occupied_start_s"] = _value("occupied_start_s", start,
                                            _confidence_at(confidences, start))
        values["occupied_end_s"] = _value("occupied_end_s", end,
                                          _confidence_at(confidences, end - 1e-9))
        values["occupied_duration_s"] = _value("occupied_duration_s", occ_s,
                                               occ_conf * (1.0 - unknown_inside))
        exits, skipped = _bed_exits(spans, unknown, confidences)
        if skipped:
            flags.add("bed_exit_count_excludes_stretches_of_unknown_occupancy")
        values["bed_exit_count"] = _value(
            "bed_exit_count", float(len(exits)),
            (min(e.confidence for e in exits) if exits else occ_conf) * (1.0 - unknown_inside))

    sitting = [w for w in windows if w.error is None and w.occupancy is not None
               and w.occupancy.occupied and w.feature_vector is not None]
    values.update(_heart_rate(sitting, windowed, empty_reason if not sitting else None))
    values.update(_long_term(sitting, windowed, empty_reason if not sitting else None))
    values.update(_medians(sitting, empty_reason if not sitting else None))
    values.update(_per_hour_and_usable(windows, owned, occupied, sitting,
                                       empty_reason if not occupied else None))
    measures = tuple(values[m.name] for m in NIGHT_MEASURES)
    return NightSummary(
        measures=measures, bed_exits=exits, occupied_spans_s=tuple(spans),
        window_s=float(windowed.window_s), overlap_s=float(windowed.overlap_s),
        n_windows=len(windows), n_occupied_windows=len(sitting),
        n_failed_windows=int(windowed.n_failed), unknown_s=unknown_s,
        flags=tuple(sorted(flags)),
    )


def night_catalogue_markdown() -> str:
    """The text of ``docs/night.md``: every night measure with unit, definition, reference.

    Regenerate the document with ``python tests/test_night_doc.py``; the test in
    that file fails while the two differ.
    """
    lines = [
        "# Night summary",
        "",
        "<!-- Generated by features.night.night_catalogue_markdown(); do not edit by hand. -->",
        "",
        "`features.night.summarize_night(windowed)` turns the windowed analysis of a whole "
        "night (`features.analyze_windows`) into the measures below, each with a value (or "
        "null with a reason), its unit and a confidence in [0, 1], plus the list of bed "
        "exits (start, end, duration). Times are seconds from the first sample of the "
        "recording. These are plain measures of the signal: no sleep staging, no composite "
        "score, and the breathing pauses are observations of the trace, not a diagnosis. "
        "heartsway is not a medical device; defer to clinicians and local regulation.",
        "",
        "## Rules",
        "",
        "- Occupied time comes from each window's empty-support mask (the load below the "
        "occupant mass bound), so lying down, leaving and getting up are placed to about a "
        "second, not to the window; a window without load information counts whole by its "
        "occupancy, and a failed window's time is unknown (never occupied, never empty).",
        f"- A bed exit is an unoccupied stretch of at least {MIN_BED_EXIT_S:g} s between "
        "occupied ones: turning over, sitting on the edge of the bed or reaching for the "
        "floor can take the load off the frame for some seconds without anyone leaving; a "
        "minute is longer than such shifts and far shorter than any trip out of the room.",
        f"- The 5-minute measures (lowest and highest heart rate, SDANN, SDNN index) use "
        f"windows of {SEGMENT_S:g} s (`window_s=300`, the default of a night job) that are "
        f"at least {MIN_SEGMENT_USABLE_FRACTION:g} usable. With windows of another length "
        "they are null with reason `needs_300_s_windows`, and SDANN and the SDNN index are "
        "null with `needs_300_s_windows_without_overlap` when windows overlap (the Task "
        "Force segments are consecutive): they are never approximated from other windows. "
        f"SDANN and the SDNN index need at least {MIN_SEGMENTS} segments.",
        "- Per-window values are read from the windows' feature vectors (`docs/features.md`), "
        "with their confidences; a measure's confidence is the mean of those it uses.",
        "",
        "## Measures",
        "",
    ]
    for i, m in enumerate(NIGHT_MEASURES, start=1):
        lines += [
            f"### {i}. `{m.name}`",
            "",
            f"- Definition: {m.definition}",
            f"- Unit: {'dimensionless' if m.unit is None else '`' + m.unit + '`'}",
            f"- Reference: {m.reference}",
            "",
        ]
    return "\n".join(lines)


# --------------------------------------------------------------------------- kernels

Spans = list[tuple[float, float]]


def _unit(name: str) -> str | None:
    for m in NIGHT_MEASURES:
        if m.name == name:
            return m.unit
    raise KeyError(name)


def _value(name: str, value: float | None, confidence: float) -> FeatureValue:
    if value is None or not math.isfinite(value):
        return _none(name, "not_finite")
    return FeatureValue(name, float(value), _unit(name),
                        float(min(1.0, max(0.0, confidence))), None)


def _none(name: str, reason: str) -> FeatureValue:
    return FeatureValue(name, None, _unit(name), 0.0, reason)


def _mean(values: Sequence[float]) -> float:
    return float(np.mean(values)) if len(values) else 0.0


def _owned_spans(windows: Sequence[WindowResult]) -> list[tuple[float, float]]:
    """Each window's own time: to the next window's start, the last to its end."""
    spans = []
    for k, w in enumerate(windows):
        end = w.end_s if k + 1 == len(windows) else min(w.end_s, windows[k + 1].start_s)
        spans.append((w.start_s, end))
    return spans


def _occupancy_timeline(
    windows: Sequence[WindowResult], owned: Sequence[tuple[float, float]],
) -> tuple[Spans, Spans, list[tuple[float, float, float]]]:
    """Occupied and unknown stretches (merged) and (start, end, confidence) per window."""
    occupied: Spans = []
    unknown: Spans = []
    confidences = []
    for w, (a, b) in zip(windows, owned, strict=True):
        occ = w.occupancy
        if w.error is not None or occ is None:
            unknown.append((a, b))
            continue
        confidences.append((a, b, float(occ.confidence)))
        if occ.from_load is not None and occ.occupied is not False:
            # A load that says empty for part of the window masks that part as
            # empty_support; one that says empty throughout masks nothing (the beats are
            # still looked for), and then the window's own decision stands.
            empty = [(s.start_s, s.end_s) for s in w.segments if s.kind == "empty_support"]
            occupied += _subtract([(a, b)], _clip(_merge(empty), a, b))
        elif occ.from_load is not None:
            continue
        elif occ.occupied is None:
            unknown.append((a, b))
        elif occ.occupied:
            occupied.append((a, b))
    return _merge(occupied), _merge(unknown), confidences


def _merge(spans: Sequence[tuple[float, float]]) -> Spans:
    out: Spans = []
    for a, b in sorted(s for s in spans if s[1] > s[0]):
        if out and a <= out[-1][1] + _GAP_TOLERANCE_S:
            out[-1] = (out[-1][0], max(out[-1][1], b))
        else:
            out.append((a, b))
    return out


def _join(spans: Sequence[tuple[float, float]], gap_s: float) -> Spans:
    """Merged stretches with gaps shorter than ``gap_s`` closed."""
    out: Spans = []
    for a, b in spans:
        if out and a - out[-1][1] < gap_s:
            out[-1] = (out[-1][0], b)
        else:
            out.append((a, b))
    return out


def _clip(spans: Sequence[tuple[float, float]], lo: float, hi: float) -> Spans:
    return [(max(a, lo), min(b, hi)) for a, b in spans if min(b, hi) > max(a, lo)]


def _subtract(spans: Sequence[tuple[float, float]],
              holes: Sequence[tuple[float, float]]) -> Spans:
    out: Spans = []
    for a, b in spans:
        cur = a
        for h0, h1 in holes:
            if h1 <= cur or h0 >= b:
                continue
            if h0 > cur:
                out.append((cur, h0))
            cur = max(cur, h1)
        if cur < b:
            out.append((cur, b))
    return out


def _total(spans: Sequence[tuple[float, float]]) -> float:
    return float(sum(b - a for a, b in spans))


def _confidence_at(confidences: Sequence[tuple[float, float, float]], t: float) -> float:
    for a, b, c in confidences:
        if a <= t < b:
            return c
    return 0.0


def _weighted(confidences: Sequence[tuple[float, float, float]],
              spans: Sequence[tuple[float, float]]) -> float:
    """Window confidences weighted by how much of ``spans`` each window holds."""
    weights = [(_total(_clip(spans, a, b)), c) for a, b, c in confidences]
    total = sum(w for w, _ in weights)
    return float(sum(w * c for w, c in weights) / total) if total > 0 else 0.0


def _bed_exits(spans: Sequence[tuple[float, float]], unknown: Sequence[tuple[float, float]],
               confidences: Sequence[tuple[float, float, float]]) -> tuple[
                   tuple[BedExit, ...], int]:
    exits = []
    skipped = 0
    for (_, a), (b, _) in zip(spans[:-1], spans[1:], strict=True):
        if _clip(unknown, a, b):
            skipped += 1
            continue
        conf = min(_confidence_at(confidences, a - 1e-9), _confidence_at(confidences, b))
        exits.append(BedExit(start_s=a, end_s=b, duration_s=b - a, confidence=conf))
    return tuple(exits), skipped


def _feature(w: WindowResult, name: str) -> tuple[float, float] | None:
    """(value, confidence) of one feature of a window, None when the value is None."""
    assert w.feature_vector is not None
    f = w.feature_vector.get(name)
    return None if f.value is None else (float(f.value), float(f.confidence))


def _usable_s(w: WindowResult) -> float:
    return float(w.usable_fraction or 0.0) * (w.end_s - w.start_s)


def _is_5min(windowed: WindowedAnalysis) -> bool:
    return abs(windowed.window_s - SEGMENT_S) <= 1.0 / windowed.fs_hz


def _heart_rate(sitting: Sequence[WindowResult], windowed: WindowedAnalysis,
                reason: str | None) -> dict[str, FeatureValue]:
    names = ("heart_rate_mean_bpm", "heart_rate_lowest_5min_bpm",
             "heart_rate_lowest_5min_start_s", "heart_rate_highest_5min_bpm",
             "heart_rate_highest_5min_start_s")
    rows = [(w, v) for w in sitting if (v := _feature(w, "heart_rate_mean_bpm")) is not None]
    weights = np.array([_usable_s(w) for w, _ in rows])
    if reason or not rows or weights.sum() <= 0:
        return {n: _none(n, reason or "no_occupied_window_with_value") for n in names}
    rates = np.array([v[0] for _, v in rows])
    confs = np.array([v[1] for _, v in rows])
    # Each window's rate is its beats over its usable time, so the usable-time-weighted
    # mean is all beats over all usable occupied time (heartsway definition of the night's
    # mean rate).
    out = {"heart_rate_mean_bpm": _value("heart_rate_mean_bpm",
                                         float(np.sum(weights * rates) / weights.sum()),
                                         float(np.sum(weights * confs) / weights.sum()))}
    segments = [(w, v) for w, v in rows
                if (w.usable_fraction or 0.0) >= MIN_SEGMENT_USABLE_FRACTION]
    if not _is_5min(windowed):
        why = "needs_300_s_windows"
    elif not segments:
        why = "no_occupied_window_with_value"
    else:
        low = min(segments, key=lambda r: r[1][0])
        high = max(segments, key=lambda r: r[1][0])
        for tag, (w, (rate, c)) in (("lowest", low), ("highest", high)):
            out[f"heart_rate_{tag}_5min_bpm"] = _value(f"heart_rate_{tag}_5min_bpm", rate, c)
            out[f"heart_rate_{tag}_5min_start_s"] = _value(f"heart_rate_{tag}_5min_start_s",
                                                           w.start_s, c)
        return out
    for n in names[1:]:
        out[n] = _none(n, why)
    return out


def _long_term(sitting: Sequence[WindowResult], windowed: WindowedAnalysis,
               reason: str | None) -> dict[str, FeatureValue]:
    """SDANN and SDNN index over 5-minute segments (Task Force 1996, time-domain methods)."""
    names = ("sdann_ms", "sdnn_index_ms")
    if reason:
        return {n: _none(n, reason) for n in names}
    if not _is_5min(windowed):
        return {n: _none(n, "needs_300_s_windows") for n in names}
    if windowed.overlap_s > 0:
        return {n: _none(n, "needs_300_s_windows_without_overlap") for n in names}
    means, sds, confs = [], [], []
    for w in sitting:
        if (w.usable_fraction or 0.0) < MIN_SEGMENT_USABLE_FRACTION:
            continue
        mean, sd = _feature(w, "mean_nn_ms"), _feature(w, "sdnn_ms")
        if mean is None or sd is None:
            continue
        means.append(mean[0])
        sds.append(sd[0])
        confs.append(min(mean[1], sd[1]))
    if len(means) < MIN_SEGMENTS:
        return {n: _none(n, f"needs_{MIN_SEGMENTS}_segments") for n in names}
    conf = _mean(confs)
    # Task Force 1996: SDANN = SD of the 5-min mean NN intervals; SDNN index = mean of the
    # 5-min SDNNs. Sample SD (ddof=1), as pyHRV (pyhrv.utils.std) and NeuroKit2 (_sdann).
    return {"sdann_ms": _value("sdann_ms", float(np.std(means, ddof=1)), conf),
            "sdnn_index_ms": _value("sdnn_index_ms", float(np.mean(sds)), conf)}


def _medians(sitting: Sequence[WindowResult], reason: str | None) -> dict[str, FeatureValue]:
    out: dict[str, FeatureValue] = {}
    for name, source in (("rmssd_median_ms", "rmssd_ms"), ("sdnn_median_ms", "sdnn_ms"),
                         ("breathing_rate_median_per_min", "breathing_rate_per_min")):
        rows = [v for w in sitting if (v := _feature(w, source)) is not None]
        if reason or not rows:
            out[name] = _none(name, reason or "no_occupied_window_with_value")
            continue
        out[name] = _value(name, float(np.median([v for v, _ in rows])),
                           _mean([c for _, c in rows]))
    rows = [v for w in sitting if (v := _feature(w, "breathing_rate_per_min")) is not None]
    for name, pick in (("breathing_rate_lowest_per_min", min),
                       ("breathing_rate_highest_per_min", max)):
        if reason or not rows:
            out[name] = _none(name, reason or "no_occupied_window_with_value")
        else:
            rate, c = pick(rows, key=lambda r: r[0])
            out[name] = _value(name, rate, c)
    return out


def _per_hour_and_usable(windows: Sequence[WindowResult], owned: Sequence[tuple[float, float]],
                         occupied: Sequence[tuple[float, float]],
                         sitting: Sequence[WindowResult],
                         reason: str | None) -> dict[str, FeatureValue]:
    names = ("breathing_pauses_per_hour", "movement_per_hour", "usable_fraction")
    if reason:
        return {n: _none(n, reason) for n in names}
    out: dict[str, FeatureValue] = {}
    rows = [(w, v) for w in sitting
            if (v := _feature(w, "breathing_pauses_per_hour")) is not None]
    weights = np.array([_usable_s(w) for w, _ in rows])
    if not rows or weights.sum() <= 0:
        out["breathing_pauses_per_hour"] = _none("breathing_pauses_per_hour",
                                                 "no_occupied_window_with_value")
    else:
        # Each window's rate is pauses per usable hour (features.respiration; the 10-s
        # criterion of the AASM scoring manual), so weighting by usable time gives all
        # pauses over all usable occupied hours. An observation of the signal only.
        rates = np.array([v[0] for _, v in rows])
        confs = np.array([v[1] for _, v in rows])
        out["breathing_pauses_per_hour"] = _value(
            "breathing_pauses_per_hour", float(np.sum(weights * rates) / weights.sum()),
            float(np.sum(weights * confs) / weights.sum()))

    masked: Spans = []
    moving: Spans = []
    quality = []
    for w, (a, b) in zip(windows, owned, strict=True):
        if w.error is not None:
            continue
        masked += _clip([(s.start_s, s.end_s) for s in w.segments], a, b)
        moving += _clip([(s.start_s, s.end_s) for s in w.segments if s.kind in MOVEMENT_KINDS],
                        a, b)
        if w.feature_vector is not None and _total(_clip(occupied, a, b)) > 0:
            quality.append(w.feature_vector.get("usable_fraction").confidence)
    occ_s = _total(occupied)
    conf = _mean(quality)
    # Masked movement and posture-change segments of features.artifacts, joined where a
    # window boundary cut one in two (heartsway definition).
    stretches = [(a + b) / 2.0 for a, b in _merge(moving)]
    inside = sum(any(a <= t < b for a, b in occupied) for t in stretches)
    out["movement_per_hour"] = _value("movement_per_hour", inside / (occ_s / S_PER_HOUR), conf)
    usable = _total(_subtract(list(occupied), _merge(masked)))
    out["usable_fraction"] = _value("usable_fraction", usable / occ_s, conf)
    return out
