"""What each reader hands back before selection and unit resolution."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from numpy.typing import NDArray


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
