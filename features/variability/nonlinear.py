"""Nonlinear heart-rate variability: Poincare SD1/SD2, sample entropy, DFA alpha1/alpha2.

On an NN series as described in :mod:`features.variability`; templates and boxes only
use mutually adjacent intervals.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
from numpy.typing import ArrayLike, NDArray

from features._numeric import mean, std
from features.catalogue import NONNEGATIVE, REF_BRENNAN, REF_PENG, REF_RICHMAN, FeatureDefinition
from features.intervals import (
    adjacent_to_previous,
    run_ids_from_adjacency,
    validate_interval_series,
)
from features.variability._shared import _adjacent_pairs, _entry, _fin

__all__ = ["CATALOGUE", "NonlinearResult", "nonlinear"]

# Sample entropy: m = 2, r = 0.2 SD (Richman & Moorman 2000); N > 200
# (Yentes et al. 2013).
_SAMPEN_M = 2
_SAMPEN_R_SD = 0.2
_SAMPEN_MIN_INTERVALS = 200
# DFA scale ranges of Peng et al. (1995), beats.
_DFA_ALPHA1_SCALES = tuple(range(4, 17))
_DFA_ALPHA2_SCALES = tuple(range(16, 65))
# Largest box at most a tenth of the data (Hardstone et al. 2012).
_DFA_MIN_BOXES = 10


@dataclass(frozen=True)
class NonlinearResult:
    """Poincare, sample-entropy and DFA measures of an NN series.

    Attributes
    ----------
    sd1_ms, sd2_ms
        Poincare plot SDs across and along the line of identity.
    sd1_sd2_ratio
        ``sd1 / sd2``.
    sample_entropy
        SampEn(m=2, r=0.2 SD), natural log, dimensionless.
    dfa_alpha1, dfa_alpha2
        DFA scaling exponents over 4-16 and 16-64 beats.
    n_intervals
        NN intervals given.
    n_pairs
        Adjacent pairs used for SD1/SD2.
    confidence
        ``min(1, n_pairs / 200) * (n_pairs / (n_intervals - 1))``.
    flags
        Reasons for None values and anything adapted.
    """

    sd1_ms: float | None
    sd2_ms: float | None
    sd1_sd2_ratio: float | None
    sample_entropy: float | None
    dfa_alpha1: float | None
    dfa_alpha2: float | None
    n_intervals: int
    n_pairs: int
    confidence: float
    flags: tuple[str, ...]



_SAMPEN_PAIR_BUDGET = 1 << 18
"""Most candidate template pairs counted one by one (:func:`_match_counts_sorted`); more
go to the block count (:func:`_match_counts_blocked`). On the benchmark suite's series
of 15, 30 and 60 minutes (1020, 2041 and 4082 intervals; 55 000, 226 000 and 909 000
candidate pairs; numpy 2.4, this machine) the pair count took 1.1, 2.8 and 11 ms against
4.4-4.8, 7.1-9.4 and 14-17 ms for the block count (two runs); the budget keeps the pair
count's temporaries near 10 MB, which leaves the hour to the block count."""


def _sample_entropy(
    nn: NDArray[np.float64], runs: NDArray[np.int64], r: float, m: int
) -> tuple[float | None, str | None]:
    """SampEn from templates that lie inside one run of adjacent intervals.

    Counts pairs of templates within Chebyshev distance ``r`` (inclusive),
    self-matches excluded: one by one among the pairs that a sort on the first
    value leaves as candidates when they are few (:func:`_match_counts_sorted`),
    else by range counts over ranks (:func:`_match_counts_blocked`, m = 2); both
    give the same integer counts.
    """
    n = nn.size
    starts = np.arange(n - m)
    if starts.size == 0:
        return None, "sample_entropy_no_templates"
    # template i uses intervals i..i+m, all in the same run
    ok = runs[starts] == runs[starts + m]
    starts = starts[ok]
    if starts.size < 2:
        return None, "sample_entropy_no_templates"
    emb = nn[starts[:, None] + np.arange(m + 1)[None, :]]
    counts = _match_counts_sorted(emb, r, m)
    count_b, count_a = _match_counts_blocked(nn, starts, r) if counts is None else counts
    if count_a == 0 or count_b == 0:
        return None, "sample_entropy_no_matches"
    return float(-math.log(count_a / count_b)), None


def _match_counts_sorted(emb: NDArray[np.float64], r: float, m: int) -> tuple[int, int] | None:
    """Pairs of templates (rows of ``emb``, ``m + 1`` values) within Chebyshev distance
    ``r`` on their first ``m`` values and on all ``m + 1``, each pair once; None when
    more than ``_SAMPEN_PAIR_BUDGET`` pairs are candidates.

    Sorted on the first value, a template's candidates are the templates after it whose
    first value lies within ``r`` (a window found by bisection, a little wider); every
    candidate is then tested with the distance ``|x_i - x_j| <= r`` on each value, as the
    plain count over all pairs tests it.
    """
    order = np.argsort(emb[:, 0], kind="stable")
    x = emb[order]
    first = x[:, 0]
    n = first.size
    # widened by far more than the rounding of first + r, so that no pair at the edge is lost
    pad = 1e-9 * (float(np.abs(first).max()) + r)
    window_end = np.searchsorted(first, first + (r + pad), side="right")
    per_row = window_end - np.arange(n) - 1
    total = int(per_row.sum())
    if total > _SAMPEN_PAIR_BUDGET:
        return None
    i, j = _flat_ranges(np.arange(n) + 1, per_row)
    # value by value, the pairs that fail one test leaving before the next is gathered
    cols = [np.ascontiguousarray(x[:, c]) for c in range(m + 1)]
    keep = np.abs(cols[0][i] - cols[0][j]) <= r
    for c in cols[1:m]:
        keep &= np.abs(c[i] - c[j]) <= r
    i, j = i[keep], j[keep]
    return int(i.size), int(np.count_nonzero(np.abs(cols[m][i] - cols[m][j]) <= r))


def _flat_ranges(start: NDArray[np.intp], width: NDArray[np.intp]
                 ) -> tuple[NDArray[np.intp], NDArray[np.intp]]:
    """The ranges ``start[i] ... start[i] + width[i] - 1`` laid end to end: for each member
    the index ``i`` of its range and its own value."""
    owner = np.repeat(np.arange(start.size), width)
    return owner, start[owner] + np.arange(owner.size) - np.repeat(np.cumsum(width) - width,
                                                                    width)


def _rank_windows(
    v: NDArray[np.float64], r: float
) -> tuple[NDArray[np.intp], NDArray[np.intp], NDArray[np.intp]]:
    """Rank of each value (stable sort) and the rank range ``[lo, hi)`` of the values
    with ``|v_j - v_i| <= r``, decided exactly as that test rounds.

    ``v_j - v_i`` rounds monotonically in ``v_j``, so the values that pass form one run of
    the sorted order. Bisection at ``v_i -+ r`` widened and narrowed by a pad far above
    rounding leaves a thin strip at each end (almost always empty), below and above the
    ties of ``v_i`` (which pass), whose members are tested one by one: within a strip the
    test is monotone, failures then passes below, passes then failures above.
    """
    n = v.size
    order = np.argsort(v, kind="stable")
    s = v[order]
    rank = np.empty(n, dtype=np.intp)
    rank[order] = np.arange(n)
    pad = 1e-9 * (float(np.abs(s).max()) + r)
    ends = []
    # bounds for the sorted values (sorted needles bisect fastest), then back to v's order;
    # each strip stays on its side of the value's own ties (the pad can exceed a tiny r)
    for start, stop in (
        (np.searchsorted(s, s - (r + pad)),
         np.minimum(np.searchsorted(s, s - (r - pad)), np.searchsorted(s, s))),
        (np.maximum(np.searchsorted(s, s + (r - pad), "right"), np.searchsorted(s, s, "right")),
         np.searchsorted(s, s + (r + pad), "right")),
    ):
        width = stop - start
        owner, k = _flat_ranges(start, width)
        passed = np.bincount(owner[np.abs(s[k] - s[owner]) <= r], minlength=n)
        ends.append((start, width, passed))
    (lo_start, lo_width, lo_passed), (hi_start, _, hi_passed) = ends
    # in the low strip the failures come first, in the high strip the passes
    lo, hi = lo_start + lo_width - lo_passed, hi_start + hi_passed
    return rank, lo[rank], hi[rank]


def _match_counts_blocked(
    values: NDArray[np.float64], starts: NDArray[np.intp], r: float
) -> tuple[int, int]:
    """The counts of :func:`_match_counts_sorted` for m = 2, templates
    ``values[starts + (0, 1, 2)]``, without testing every candidate pair.

    Every template's neighbourhood is a box of rank ranges, one per value, the ranks
    and ranges those of ``values`` (:func:`_rank_windows`; a template's values are among
    them), so both counts are sums of range counts over integer ranks.
    With the templates in order of their first value the first range is a run of
    positions; the positions are cut into blocks of ``b``, near sqrt(n). A block that a
    run covers whole is counted from the block's number of members below each rank of
    the second value (length m) and, for length m + 1, from its table of members below
    each pair of local ranks of the second and third values; a block that a run meets in
    part is tested member by member. Time O(n^2 / b + n b), memory O(n + b^2). Each
    template counts itself once, which the pair counts take off.
    """
    n, n_values = starts.size, values.size
    value_rank, value_lo, value_hi = _rank_windows(values, r)
    # templates in order of the rank of their first value: position = order of that rank
    at = starts[np.argsort(value_rank[starts])][:, None] + np.arange(3)[None, :]
    rank, lo, hi = ([w[at[:, k]] for k in range(3)] for w in (value_rank, value_lo, value_hi))
    # the first value's range as positions: templates whose first value ranks below it
    lo[0], hi[0] = (np.searchsorted(rank[0], bound) for bound in (lo[0], hi[0]))
    b = max(16, 1 << int(round(math.log2(math.sqrt(n)))))
    count_b = count_a = 0
    for start in range(0, n, b):
        stop = min(start + b, n)
        ry, rz = rank[1][start:stop], rank[2][start:stop]
        # windows that hold the whole block: lo <= start and hi >= stop (both rise with position)
        first, last = np.searchsorted(hi[0], stop), np.searchsorted(lo[0], start, side="right")
        if last > first:
            # members with rank below each rank of the second (third) value
            below_y = np.r_[0, np.cumsum(np.bincount(ry, minlength=n_values))]
            below_z = np.r_[0, np.cumsum(np.bincount(rz, minlength=n_values))]
            py = [below_y[bound[1][first:last]] for bound in (lo, hi)]
            pz = [below_z[bound[2][first:last]] for bound in (lo, hi)]
            count_b += int((py[1] - py[0]).sum())
            # members below local ranks (p, q) of the second and third values
            table = np.bincount(
                below_y[ry] * (b + 1) + below_z[rz] + (b + 2),
                minlength=(b + 1) * (b + 1),
            ).reshape(b + 1, b + 1).cumsum(axis=0).cumsum(axis=1).ravel()
            rows = [p * (b + 1) for p in py]
            count_a += int((table[rows[1] + pz[1]] - table[rows[0] + pz[1]]
                            - table[rows[1] + pz[0]] + table[rows[0] + pz[0]]).sum())
        # windows that meet the block in part
        near = np.arange(np.searchsorted(hi[0], start, side="right"),
                         np.searchsorted(lo[0], stop))
        near = near[(lo[0][near] > start) | (hi[0][near] < stop)]
        if near.size:
            pos = np.arange(start, stop)
            inside = ((pos >= lo[0][near, None]) & (pos < hi[0][near, None])
                      & (ry >= lo[1][near, None]) & (ry < hi[1][near, None]))
            count_b += int(inside.sum())
            inside &= (rz >= lo[2][near, None]) & (rz < hi[2][near, None])
            count_a += int(inside.sum())
    return (count_b - n) // 2, (count_a - n) // 2


def _run_bounds(runs: NDArray[np.int64]) -> tuple[NDArray[np.intp], NDArray[np.intp]]:
    """Start index and length of each run of equal run ids."""
    run_start = np.flatnonzero(np.concatenate(([True], runs[1:] != runs[:-1])))
    return run_start, np.diff(np.concatenate((run_start, [runs.size])))


def _dfa_fluctuations(
    profile: NDArray[np.float64], runs: NDArray[np.int64], scales: Sequence[int]
) -> tuple[NDArray[np.float64], int]:
    """RMS linear-detrended fluctuation per box size; boxes stay in one run.

    Returns F(n) per scale and the number of boxes at the largest scale.
    """
    run_start, run_len = _run_bounds(runs)
    fluct = np.zeros(len(scales))
    boxes_at_largest = 0
    for j, size in enumerate(scales):
        per_run = run_len // size
        n_boxes = int(per_run.sum())
        if j == len(scales) - 1:
            boxes_at_largest = n_boxes
        if n_boxes == 0:
            fluct[j] = 0.0
            continue
        if run_start.size == 1:
            # one run (no gaps): the boxes tile the profile from its start
            y = profile[: n_boxes * size].reshape(n_boxes, size)
        else:
            # start index of every box, forward from each run's start
            owner = np.repeat(np.arange(run_start.size), per_run)
            first_box = np.cumsum(per_run) - per_run
            within = np.arange(n_boxes) - np.repeat(first_box, per_run)
            box_start = run_start[owner] + within * size
            y = profile[box_start[:, None] + np.arange(size)[None, :]]
        x = np.arange(size, dtype=float) - (size - 1) / 2.0
        yc = y - mean(y, axis=1, keepdims=True)
        slope = (yc @ x) / float(x @ x)
        resid = yc - slope[:, None] * x[None, :]
        fluct[j] = math.sqrt(float(mean(resid**2)))
    return fluct, boxes_at_largest


def _dfa_alpha(
    profile: NDArray[np.float64], runs: NDArray[np.int64], scales: Sequence[int], name: str
) -> tuple[float | None, str | None]:
    # Too few boxes of the largest size: no exponent, and no fluctuations to compute
    # (the count is the one _dfa_fluctuations reports).
    _, run_len = _run_bounds(runs)
    if int((run_len // scales[-1]).sum()) < _DFA_MIN_BOXES:
        return None, f"{name}_needs_{_DFA_MIN_BOXES * scales[-1]}_adjacent_intervals"
    fluct, _ = _dfa_fluctuations(profile, runs, scales)
    if np.any(fluct <= 0):
        return None, f"{name}_zero_fluctuation"
    return _fin(_line_slope(np.log(np.asarray(scales, dtype=float)), np.log(fluct))), None


def _line_slope(x: NDArray[np.float64], y: NDArray[np.float64]) -> float:
    """Least-squares slope of ``y`` on ``x``: ``numpy.polyfit(x, y, 1)[0]`` to rounding, in
    closed form (``sum (x - mean x)(y - mean y) / sum (x - mean x)^2``) rather than
    polyfit's scaled SVD solve (numpy 2.4, 13 points: 3.8 against 12.6 us)."""
    xc = x - mean(x)
    return float(xc @ (y - mean(y)) / (xc @ xc))


def nonlinear(times_s: ArrayLike, nn_ms: ArrayLike) -> NonlinearResult:
    """Poincare SD1/SD2, sample entropy and DFA alpha1/alpha2.

    Parameters
    ----------
    times_s, nn_ms
        The NN series, as for :func:`features.variability.time_domain`.

    Returns
    -------
    NonlinearResult
        Minimum lengths (None plus flag when not met):

        - SD1, SD2: two adjacent pairs (a sample SD needs two values;
          ``"poincare_needs_2_adjacent_pairs"``). SD1 is SDSD / sqrt(2)
          (Brennan et al. 2001), so it is as reliable as SDSD.
        - Sample entropy: 200 intervals in runs of at least m + 1 = 3
          adjacent intervals (Yentes et al. 2013 advise N > 200 for m = 2;
          ``"sample_entropy_needs_200_intervals"``).
        - DFA: at least 10 boxes of the largest size, i.e. 160 adjacent
          intervals for alpha1 and 640 for alpha2 (largest window at most a
          tenth of the data, Hardstone et al. 2012;
          ``"dfa_alpha1_needs_160_adjacent_intervals"``).

    Raises
    ------
    InvalidInputError
        If the series breaks a rule of
        :func:`features.intervals.validate_interval_series`.

    Notes
    -----
    1. Poincare (Brennan et al. 2001, eqs. 7-8): for adjacent pairs
       ``(x_i, x_{i+1})``, SD1 is the sample SD (ddof=1) of
       ``(x_i - x_{i+1}) / sqrt(2)`` and SD2 that of
       ``(x_i + x_{i+1}) / sqrt(2)``.
    2. Sample entropy (Richman & Moorman 2000): m = 2, r = 0.2 times the
       sample SD (ddof=1) of the NN series, Chebyshev distance, a match when
       distance <= r, self-matches excluded, the same N - m template starts
       for lengths m and m + 1. ``SampEn = -ln(A / B)``. Departure: templates
       must lie inside one run of adjacent intervals. Pairs are counted one
       by one among the candidates left by a sort on the first value when
       there are at most ``_SAMPEN_PAIR_BUDGET`` of them, else as range
       counts over the ranks of the three values in blocks (time
       O(n^2 / b + n b) with b near sqrt(n), memory O(n + b^2)); the counts
       are the same integers either way. No matches gives None
       (``"sample_entropy_no_matches"``) rather than infinity.
    3. DFA (Peng et al. 1995): profile ``y(k) = cumsum(x - mean(x))``;
       non-overlapping boxes of n beats placed forward from the start of each
       run (the remainder of a run is dropped); least-squares line removed
       in each box; ``F(n)`` the RMS of all residuals; alpha is the slope of
       ``log F`` against ``log n`` over every integer n in 4-16 (alpha1) and
       16-64 (alpha2). Departure: with gaps, boxes never straddle a gap (the
       profile's jump across a gap is a constant within every box, which
       the detrending removes).

    References
    ----------
    .. [1] M. Brennan, M. Palaniswami, P. Kamen, "Do existing measures of
       Poincare plot geometry reflect nonlinear features of heart rate
       variability?", IEEE Transactions on Biomedical Engineering
       48(11):1342-1347, 2001. doi:10.1109/10.959330
    .. [2] J. S. Richman, J. R. Moorman, "Physiological time-series analysis
       using approximate entropy and sample entropy", American Journal of
       Physiology - Heart and Circulatory Physiology 278(6):H2039-H2049,
       2000. doi:10.1152/ajpheart.2000.278.6.H2039
    .. [3] C.-K. Peng, S. Havlin, H. E. Stanley, A. L. Goldberger,
       "Quantification of scaling exponents and crossover phenomena in
       nonstationary heartbeat time series", Chaos 5(1):82-87, 1995.
       doi:10.1063/1.166141
    .. [4] J. M. Yentes, N. Hunt, K. K. Schmid, J. P. Kaipust, D. McGrath,
       N. Stergiou, "The appropriate use of approximate entropy and sample
       entropy with short data sets", Annals of Biomedical Engineering
       41(2):349-365, 2013. doi:10.1007/s10439-012-0668-3
    .. [5] R. Hardstone, S.-S. Poil, G. Schiavone, R. Jansen, V. V. Nikulin,
       H. D. Mansvelder, K. Linkenkaer-Hansen, "Detrended fluctuation
       analysis: a scale-free view on neuronal oscillations", Frontiers in
       Physiology 3:450, 2012. doi:10.3389/fphys.2012.00450
    """
    times, nn = validate_interval_series(times_s, nn_ms)
    return _nonlinear(times, nn)


def _nonlinear(times: NDArray[np.float64], nn: NDArray[np.float64]) -> NonlinearResult:
    n = nn.size
    flags: list[str] = []
    adjacent = adjacent_to_previous(times, nn)
    runs = run_ids_from_adjacency(adjacent)
    earlier, later = _adjacent_pairs(times, nn)
    n_pairs = earlier.size

    sd1 = sd2 = ratio = None
    if n_pairs >= 2:
        sd1 = _fin(std((earlier - later) / math.sqrt(2.0), ddof=1))
        sd2 = _fin(std((earlier + later) / math.sqrt(2.0), ddof=1))
        if sd1 is not None and sd2 is not None and sd2 > 0:
            ratio = sd1 / sd2
        else:
            flags.append("sd1_sd2_ratio_undefined_zero_sd2")
    else:
        flags.append("poincare_needs_2_adjacent_pairs")

    sampen = None
    run_len = np.bincount(runs) if n else np.zeros(0, dtype=np.int64)
    in_long_runs = int(run_len[run_len >= _SAMPEN_M + 1].sum())
    if in_long_runs < _SAMPEN_MIN_INTERVALS:
        flags.append(f"sample_entropy_needs_{_SAMPEN_MIN_INTERVALS}_intervals")
    else:
        sd = float(std(nn, ddof=1))
        if sd == 0.0:
            flags.append("sample_entropy_zero_variance")
        else:
            sampen, reason = _sample_entropy(nn, runs, _SAMPEN_R_SD * sd, _SAMPEN_M)
            if reason:
                flags.append(reason)

    alpha1 = alpha2 = None
    if n:
        profile = np.cumsum(nn - nn.mean())
        alpha1, reason1 = _dfa_alpha(profile, runs, _DFA_ALPHA1_SCALES, "dfa_alpha1")
        alpha2, reason2 = _dfa_alpha(profile, runs, _DFA_ALPHA2_SCALES, "dfa_alpha2")
        flags.extend(r for r in (reason1, reason2) if r)
    else:
        flags.extend(("no_intervals",))
    if n and int(np.count_nonzero(~adjacent)) > 1:
        flags.append("series_has_gaps")
    adjacency = n_pairs / (n - 1) if n > 1 else 0.0
    return NonlinearResult(
        sd1_ms=sd1,
        sd2_ms=sd2,
        sd1_sd2_ratio=ratio,
        sample_entropy=sampen,
        dfa_alpha1=alpha1,
        dfa_alpha2=alpha2,
        n_intervals=n,
        n_pairs=n_pairs,
        confidence=float(min(1.0, n_pairs / _SAMPEN_MIN_INTERVALS) * adjacency),
        flags=tuple(flags),
    )


# --------------------------------------------------------------------------- catalogue

_NL = "nonlinear"
CATALOGUE: tuple[FeatureDefinition, ...] = (
    _entry("sd1_ms", _NL, "sd1_ms", "ms",
           "Poincare plot SD1: spread of adjacent NN pairs across the line of identity.",
           NONNEGATIVE, REF_BRENNAN, ("poincare",)),
    _entry("sd2_ms", _NL, "sd2_ms", "ms",
           "Poincare plot SD2: spread of adjacent NN pairs along the line of identity.",
           NONNEGATIVE, REF_BRENNAN, ("poincare",)),
    _entry("sample_entropy", _NL, "sample_entropy", None,
           f"Sample entropy SampEn(m={_SAMPEN_M}, r={_SAMPEN_R_SD:g} SD) of the NN series, "
           f"natural log (needs {_SAMPEN_MIN_INTERVALS} intervals).", NONNEGATIVE, REF_RICHMAN),
    _entry("dfa_alpha1", _NL, "dfa_alpha1", None,
           f"Short-term ({_DFA_ALPHA1_SCALES[0]}-{_DFA_ALPHA1_SCALES[-1]} beats) scaling "
           "exponent of detrended fluctuation analysis of the NN series.", (None, None),
           REF_PENG),
)
"""Catalogue entries of the nonlinear family (see :mod:`features.catalogue`)."""
