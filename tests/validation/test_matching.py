"""Beat matching on handcrafted cases with counts worked out by hand.

The rule under test is the ANSI/AAMI EC57 beat-by-beat comparison: a detection within the
tolerance window of a reference beat matches it, one to one (ANSI/AAMI EC57:2012, sec. 4;
150 ms window from memory). Se = TP/(TP+FN), +P = TP/(TP+FP) (EC57 definitions).
"""

from __future__ import annotations

import numpy as np
import pytest

from validation.matching import mask_spans, match_beats


def test_perfect_detection() -> None:
    ref = np.arange(1.0, 11.0)
    m = match_beats(ref, ref + 0.02)
    assert (m.true_positives, m.false_negatives, m.false_positives) == (10, 0, 0)
    assert m.sensitivity == 1.0 and m.positive_predictivity == 1.0
    assert m.interval_mae_ms == pytest.approx(0.0, abs=1e-9)
    assert m.tolerance_ms == 150.0


def test_counts_by_hand() -> None:
    # Reference 1..6 s. Detections: 1.05 (TP), 2.2 (outside 150 ms of 2 -> FP, beat 2 FN),
    # 3.0 (TP), 3.1 (second detection near beat 3 -> FP), 5.14 (TP), 6.151 (just outside -> FP,
    # beat 6 FN). Beat 4 has nothing -> FN.
    ref = np.array([1.0, 2.0, 3.0, 4.0, 5.0, 6.0])
    det = np.array([1.05, 2.2, 3.0, 3.1, 5.14, 6.151])
    m = match_beats(ref, det, tolerance_ms=150.0)
    assert (m.true_positives, m.false_negatives, m.false_positives) == (3, 3, 3)
    assert m.sensitivity == pytest.approx(0.5)
    assert m.positive_predictivity == pytest.approx(0.5)
    np.testing.assert_array_equal(m.matched_reference, [0, 2, 4])
    np.testing.assert_array_equal(m.matched_detection, [0, 2, 4])


def test_closest_pair_wins_and_is_one_to_one() -> None:
    # Two reference beats 0.2 s apart and one detection between them, closer to the second:
    # it matches the second only (one detection cannot count twice).
    m = match_beats(np.array([1.0, 1.2]), np.array([1.13]))
    assert (m.true_positives, m.false_negatives, m.false_positives) == (1, 1, 0)
    np.testing.assert_array_equal(m.matched_reference, [1])


def test_tolerance_is_a_parameter() -> None:
    ref = np.array([1.0, 2.0, 3.0])
    det = ref + 0.08
    assert match_beats(ref, det, tolerance_ms=100.0).true_positives == 3
    assert match_beats(ref, det, tolerance_ms=50.0).true_positives == 0


def test_interval_error_by_hand() -> None:
    # Reference intervals 1.0 s; detections off by +0, +20, -10, +30 ms: detected intervals
    # 1.020, 0.970, 1.040 -> absolute errors 20, 30, 40 ms -> mean 30 ms.
    ref = np.array([1.0, 2.0, 3.0, 4.0])
    det = np.array([1.0, 2.02, 2.99, 4.03])
    m = match_beats(ref, det)
    assert m.n_interval_pairs == 3
    assert m.interval_mae_ms == pytest.approx(30.0)


def test_interval_error_skips_broken_pairs() -> None:
    # Beat 3 missed: only the pairs (1,2) and (4,5) count; an extra detection between 4 and 5
    # breaks that pair too, leaving one pair with error 10 ms.
    ref = np.array([1.0, 2.0, 3.0, 4.0, 5.0])
    det = np.array([1.0, 2.01, 4.0, 4.5, 5.0])
    m = match_beats(ref, det)
    assert (m.true_positives, m.false_negatives, m.false_positives) == (4, 1, 1)
    assert m.n_interval_pairs == 1
    assert m.interval_mae_ms == pytest.approx(10.0)


def test_excluded_spans_with_margin() -> None:
    # Span 10-12 s, margin 1 s -> 9-13 s masked. Reference beats 9.5, 10.5, 12.5 drop out;
    # detections at 11.0 (inside) are ignored; 13.5 (outside, unmatched) is a FP.
    ref = np.array([8.0, 9.5, 10.5, 12.5, 14.0])
    det = np.array([8.0, 11.0, 13.5, 14.0])
    m = match_beats(ref, det, exclude_spans_s=[(10.0, 12.0)], margin_s=1.0)
    assert (m.true_positives, m.false_negatives, m.false_positives) == (2, 0, 1)
    assert m.n_reference_excluded == 3 and m.n_detection_excluded == 1


def test_empty_inputs() -> None:
    m = match_beats(np.zeros(0), np.zeros(0))
    assert m.sensitivity is None and m.positive_predictivity is None
    assert m.interval_mae_ms is None
    m = match_beats(np.zeros(0), np.array([1.0, 2.0]))
    assert (m.false_positives, m.positive_predictivity) == (2, 0.0)


def test_mask_spans() -> None:
    t = np.array([0.0, 0.9, 1.5, 3.2])
    np.testing.assert_array_equal(mask_spans(t, [(1.0, 2.0)], margin_s=0.2),
                                  [False, True, True, False])


@pytest.mark.parametrize(("kw", "match"), [({"tolerance_ms": 0.0}, "`tolerance_ms` must"),
                                           ({"margin_s": -1.0}, "`margin_s` must")])
def test_invalid_arguments(kw: dict[str, float], match: str) -> None:
    with pytest.raises(ValueError, match=match):
        match_beats(np.array([1.0]), np.array([1.0]), **kw)
