"""Unit spellings found in file headers, as the engine's units."""

from __future__ import annotations

from features.limits import COUNTS_UNIT, QUANTITIES
from features.limits import units_of as valid_units

#: Header spellings (compared after stripping) -> the engine's unit.
_ALIASES = {
    "N": "N", "n": "N", "newton": "N", "Newton": "N",
    "kN": "kN", "kgf": "kgf", "lbf": "lbf",
    "m/s^2": "m/s^2", "m/s2": "m/s^2", "m/s\u00b2": "m/s^2", "m s-2": "m/s^2",
    "g": "g", "mg": "mg",
    "m/s": "m/s", "mm/s": "mm/s",
    "m": "m", "mm": "mm", "um": "um", "\u00b5m": "um", "\u03bcm": "um",
}


def normalise_unit(text: str | None) -> str | None:
    """The engine's unit for a header's spelling of it, or None when it is not one.

    Parameters
    ----------
    text
        The unit as written in the file (``"N"``, ``"m/s2"``, ``"\u00b5m"`` ...).

    Returns
    -------
    str or None
        One of the engine's units (``features.conditioning.valid_units``), or None
        for an empty or unknown spelling (``"mV"``, ``"uV"``, ``""``).
    """
    if text is None:
        return None
    return _ALIASES.get(text.strip())


def quantity_of_unit(unit: str) -> str | None:
    """The quantity a physical unit measures (``"N"`` -> ``"force"``), or None."""
    for quantity in QUANTITIES:
        if unit in valid_units(quantity) and unit != COUNTS_UNIT:
            return quantity
    return None
