"""Axis ticks at round numbers, computed directly (the pictures' own, cheap tick locator).

matplotlib's automatic locator and formatter (``AutoLocator``, ``ScalarFormatter``) and its
tick artists were about half of the report's drawing time; the report needs only round
ticks inside the view and their labels, which this module computes in a few array
operations. The choice of step is that of matplotlib's ``MaxNLocator`` with steps
1, 2, 2.5 and 5 per decade (the steps ``AutoLocator`` uses): the smallest such step that
leaves at most ``max_ticks`` intervals across the view, or a smaller one when that step
would leave fewer than two ticks inside it.
"""

from __future__ import annotations

import math

import numpy as np

__all__ = ["MINUS", "nice_ticks", "tick_labels"]

#: Steps per decade, as matplotlib's ``AutoLocator``.
STEPS = (1.0, 2.0, 2.5, 5.0, 10.0)
#: Fewest ticks wanted inside the view.
MIN_TICKS = 2
#: The minus sign of a label (U+2212, as matplotlib's ``axes.unicode_minus``).
MINUS = "\u2212"


def nice_ticks(lo: float, hi: float, *, max_ticks: int) -> np.ndarray:
    """Round tick positions inside ``[lo, hi]``.

    Parameters
    ----------
    lo, hi
        The view's limits (either order; equal limits give the one value).
    max_ticks
        Most intervals wanted across the view (at least 1).

    Returns
    -------
    numpy.ndarray
        Increasing multiples of the step inside the view, at least two of them when the
        view is wider than zero.
    """
    lo, hi = (float(lo), float(hi)) if lo <= hi else (float(hi), float(lo))
    if not (math.isfinite(lo) and math.isfinite(hi)):
        return np.empty(0)
    if hi - lo <= 1e-12 * max(abs(lo), abs(hi), 1e-300):
        return np.array([lo])
    raw = (hi - lo) / max(1, int(max_ticks))
    scale = 10.0 ** math.floor(math.log10(raw))
    steps = [s * scale for s in (0.1 * STEPS[-2], *STEPS)]  # 0.5 a decade down first
    first = next(k for k, step in enumerate(steps) if step >= raw * (1 - 1e-12))
    ticks = np.empty(0)
    for step in reversed(steps[:first + 1]):
        # Multiples of the step by integers: no sum of steps accumulates rounding errors.
        slack = 1e-10 * step
        k = np.arange(math.ceil((lo - slack) / step), math.floor((hi + slack) / step) + 1)
        ticks = k * step
        if ticks.size >= MIN_TICKS:
            break
    return ticks


def _decimals(step: float) -> int:
    """Fewest decimals that write multiples of ``step`` exactly (0 to 12)."""
    for d in range(13):
        if abs(round(step, d) - step) <= 1e-9 * step:
            return d
    return 12


def tick_labels(ticks: np.ndarray) -> list[str]:
    """Labels of evenly spaced ``ticks``: as many decimals as the step needs, a true minus.

    Values of a million and more, or a step under 1e-5, are written in scientific notation
    with the digits the step needs.
    """
    ticks = np.asarray(ticks, dtype=np.float64)
    if ticks.size == 0:
        return []
    step = float(np.min(np.diff(ticks))) if ticks.size > 1 else abs(float(ticks[0])) or 1.0
    biggest = float(np.max(np.abs(ticks)))
    if biggest >= 1e6 or step < 1e-5:
        digits = max(0, math.floor(math.log10(biggest or 1.0)) - math.floor(math.log10(step)))
        text = [f"{v:.{min(digits, 12)}e}" for v in ticks]
    else:
        d = _decimals(step)
        text = [f"{v:.{d}f}" for v in ticks]
    out = []
    for t in text:
        if t.startswith("-") and float(t) == 0.0:
            t = t[1:]  # -0.0 is written 0.0
        out.append(t.replace("-", MINUS))
    return out
