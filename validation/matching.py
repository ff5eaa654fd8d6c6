"""Beat-by-beat comparison of detected beat times with reference beat times.

The comparison follows the rule of ANSI/AAMI EC57 (testing and reporting performance results
of cardiac rhythm and ST-segment measurement algorithms): a detection matches a reference beat
when it lies within a tolerance window of it, each reference beat and each detection being
used at most once. EC57 uses 150 ms for QRS detection (from memory); here the tolerance is a
parameter, default 150 ms, and it is reported with every result.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np

__all__ = ["BeatMatch", "match_beats", "mask_spans"]


@dataclass(frozen=True)
class BeatMatch:
    """Outcome of matching detections to reference beats.

    Attributes
    ----------
    tolerance_ms : float
        Half-width of the matching window, ms.
    true_positives, false_negatives, false_positives : int
        Counts after exclusion of the masked spans.
    sensitivity : float or None
        TP / (TP + FN); None when there is no reference beat.
    positive_predictivity : float or None
        TP / (TP + FP); None when there is no detection.
    interval_mae_ms : float or None
        Mean absolute difference between detected and reference beat-to-beat intervals over
        consecutive matched pairs, ms; None when no such pair exists.
    n_interval_pairs : int
        Number of interval pairs behind ``interval_mae_ms``.
    matched_reference : np.ndarray
        Indices (into the given reference array) of matched reference beats.
    matched_detection : np.ndarray
        Indices (into the given detection array) of their detections, same order.
    n_reference_excluded, n_detection_excluded : int
        Beats and detections dropped because they fall inside a masked span.
    """

    tolerance_ms: float
    true_positives: int
    false_negatives: int
    false_positives: int
    sensitivity: float | None
    positive_predictivity: float | None
    interval_mae_ms: float | None
    n_interval_pairs: int
    matched_reference: np.ndarray
    matched_detection: np.ndarray
    n_reference_excluded: int
    n_detection_excluded: int


def mask_spans(
    times_s: np.ndarray, spans_s: Sequence[tuple[float, float]], *, margin_s: float = 0.0
) -> np.ndarray:
    """True for each time that lies inside any span widened by ``margin_s`` on both sides."""
    times = np.asarray(times_s, dtype=float)
    inside = np.zeros(times.shape, dtype=bool)
    for start, end in spans_s:
        inside |= (times >= start - margin_s) & (times <= end + margin_s)
    return inside


def match_beats(
    reference_s: np.ndarray,
    detected_s: np.ndarray,
    *,
    tolerance_ms: float = 150.0,
    exclude_spans_s: Sequence[tuple[float, float]] = (),
    margin_s: float = 1.0,
) -> BeatMatch:
    """Match detected beat times to reference beat times, one to one.

    Parameters
    ----------
    reference_s : array of float
        Reference beat times, s (any order).
    detected_s : array of float
        Detected beat times, s (any order).
    tolerance_ms : float
        A detection within this distance of a reference beat may match it, ms (> 0,
        default 150).
    exclude_spans_s : sequence of (start_s, end_s)
        Spans (movement, posture change) where no beat is expected. Reference beats inside a
        span widened by ``margin_s`` are dropped from the reference; detections there are
        dropped too (they are neither true nor false positives).
    margin_s : float
        Widening of each excluded span on both sides, s (default 1).

    Returns
    -------
    BeatMatch
        Counts, sensitivity, positive predictivity and interval error.

    Raises
    ------
    ValueError
        If ``tolerance_ms`` is not positive or ``margin_s`` is negative.

    Notes
    -----
    1. Drop masked reference beats and detections; sort both.
    2. List every (reference, detection) pair closer than the tolerance (two pointers).
    3. Accept pairs in order of increasing distance when neither member is taken yet
       (closest-first one-to-one assignment).
    4. Unmatched reference beats are false negatives, unmatched detections false positives.
    5. Interval error: for reference beats k and k+1 that are both matched, to detections that
       are themselves consecutive, take ``|(d[k+1] - d[k]) - (r[k+1] - r[k])|``; report the
       mean in ms.

    References
    ----------
    .. [1] ANSI/AAMI EC57:2012, "Testing and reporting performance results of cardiac rhythm
       and ST segment measurement algorithms", Association for the Advancement of Medical
       Instrumentation.
    """
    if not tolerance_ms > 0:
        raise ValueError(f"`tolerance_ms` must be positive; got {tolerance_ms!r}.")
    if not margin_s >= 0:
        raise ValueError(f"`margin_s` must be zero or positive; got {margin_s!r}.")
    ref_all = np.asarray(reference_s, dtype=float).ravel()
    det_all = np.asarray(detected_s, dtype=float).ravel()
    ref_keep = ~mask_spans(ref_all, exclude_spans_s, margin_s=margin_s)
    det_keep = ~mask_spans(det_all, exclude_spans_s, margin_s=margin_s)
    ref_index = np.flatnonzero(ref_keep)
    det_index = np.flatnonzero(det_keep)
    ref_index = ref_index[np.argsort(ref_all[ref_index], kind="stable")]
    det_index = det_index[np.argsort(det_all[det_index], kind="stable")]
    ref = ref_all[ref_index]
    det = det_all[det_index]
    tol = tolerance_ms / 1e3

    pairs: list[tuple[float, int, int]] = []
    j0 = 0
    for i, r in enumerate(ref):
        while j0 < det.size and det[j0] < r - tol:
            j0 += 1
        j = j0
        while j < det.size and det[j] <= r + tol:
            pairs.append((abs(det[j] - r), i, j))
            j += 1
    pairs.sort()
    ref_to_det = np.full(ref.size, -1)
    det_taken = np.zeros(det.size, dtype=bool)
    for _, i, j in pairs:
        if ref_to_det[i] < 0 and not det_taken[j]:
            ref_to_det[i] = j
            det_taken[j] = True

    matched = np.flatnonzero(ref_to_det >= 0)
    tp = int(matched.size)
    fn = int(ref.size - tp)
    fp = int(det.size - tp)
    consecutive = (np.diff(matched) == 1) & (np.diff(ref_to_det[matched]) == 1)
    k = matched[:-1][consecutive]
    errors = np.abs((det[ref_to_det[k + 1]] - det[ref_to_det[k]]) - (ref[k + 1] - ref[k]))
    return BeatMatch(
        tolerance_ms=float(tolerance_ms),
        true_positives=tp,
        false_negatives=fn,
        false_positives=fp,
        sensitivity=tp / (tp + fn) if tp + fn else None,
        positive_predictivity=tp / (tp + fp) if tp + fp else None,
        interval_mae_ms=float(1e3 * np.mean(errors)) if errors.size else None,
        n_interval_pairs=int(errors.size),
        matched_reference=ref_index[matched],
        matched_detection=det_index[ref_to_det[matched]],
        n_reference_excluded=int(ref_all.size - ref.size),
        n_detection_excluded=int(det_all.size - det.size),
    )
