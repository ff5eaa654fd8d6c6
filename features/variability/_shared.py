"""Helpers shared by the variability families: the short-term length, finite floats,
adjacent pairs."""

from __future__ import annotations

import math

import numpy as np
from numpy.typing import NDArray

from features.catalogue import FeatureDefinition
from features.intervals import adjacent_to_previous
from features.limits import SHORT_TERM_S

# Task Force (1996) short-term standard: 5-min recordings.
_SHORT_TERM_S = SHORT_TERM_S


def _fin(value: float | np.floating) -> float | None:
    """A Python float when finite, else None (callers flag the reason)."""
    v = float(value)
    return v if math.isfinite(v) else None


def _adjacent_pairs(
    times: NDArray[np.float64], nn: NDArray[np.float64]
) -> tuple[NDArray[np.float64], NDArray[np.float64]]:
    """(earlier, later) values of every adjacent pair of intervals."""
    adjacent = adjacent_to_previous(times, nn)
    later = np.flatnonzero(adjacent)
    return nn[later - 1], nn[later]


def _entry(name: str, block: str, attr: str, unit: str | None, text: str,
           rng: tuple[float | None, float | None], ref: str,
           keys: tuple[str, ...] = ()) -> FeatureDefinition:
    """Catalogue entry of a variability feature read at ``variability.<block>.<attr>``."""
    path = f"variability.{block}"
    return FeatureDefinition(name, "variability", unit, text, rng, ref, f"{path}.{attr}",
                             f"{path}.confidence", (), (f"{path}.flags", "variability.flags"),
                             keys)
