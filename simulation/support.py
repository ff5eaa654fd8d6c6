"""Support mechanics: the seat as a mass-spring-damper, and the load cells under its plate.

Public API
----------
support_preset(name, *, body_mass_kg) -> SupportPreset
    Named support presets ("rigid", "firm", "cushion", "ringing") as k, c, f_n, zeta.
support_response(momentum_rate_n, fs_hz, *, body_mass_kg, stiffness_n_per_m, damping_n_s_per_m)
    Dynamic support force of the body on a mass-spring-damper support.
lever_rule_shares(positions_m, centre_of_pressure_m)
    Share of a vertical load carried by each of four equal load cells under a rigid plate.
STANDARD_GRAVITY_M_S2
    Standard acceleration of gravity (the static load is ``M g``).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from scipy import signal

from simulation.settings import SUPPORTS, SettingsError

__all__ = [
    "STANDARD_GRAVITY_M_S2",
    "SupportPreset",
    "lever_rule_shares",
    "support_preset",
    "support_response",
]

#: Standard acceleration of gravity, m/s^2 (3rd CGPM, 1901).
STANDARD_GRAVITY_M_S2 = 9.80665


@dataclass(frozen=True)
class SupportPreset:
    """Mass-spring-damper constants of a support for a given body mass.

    ``stiffness_n_per_m`` is None for the rigid support.
    """

    name: str
    natural_hz: float | None
    damping_ratio: float | None
    stiffness_n_per_m: float | None
    damping_n_s_per_m: float | None


def support_preset(name: str, *, body_mass_kg: float, natural_hz: float | None = None,
                   damping_ratio: float | None = None) -> SupportPreset:
    """Mass-spring-damper constants of a named support for a given occupant.

    Parameters
    ----------
    name : str
        "rigid" (no compliance), "firm" (f_n 25 Hz, zeta 0.6), "cushion" (f_n 9 Hz,
        zeta 0.35, close to the seated whole-body vertical resonance) or "ringing"
        (f_n 6 Hz, zeta 0.07: a springy chair that rings after each beat).
    body_mass_kg : float
        Mass carried by the support, kg (> 0).
    natural_hz, damping_ratio : float or None
        Replace the preset's natural frequency and damping ratio (ignored for "rigid").

    Returns
    -------
    SupportPreset
        ``k = m (2 pi f_n)^2`` and ``c = 2 zeta sqrt(k m)``; None for the rigid support.

    Raises
    ------
    SettingsError
        Unknown name or non-positive mass.

    Notes
    -----
    Natural frequency ``f_n = sqrt(k/m) / (2 pi)`` and damping ratio ``zeta = c / (2 sqrt(k m))``
    of a single-degree-of-freedom oscillator (W. T. Thomson, M. D. Dahleh, "Theory of Vibration
    with Applications", 5th ed., Prentice Hall, 1998, ch. 2).
    """
    table = {"firm": (25.0, 0.6), "cushion": (9.0, 0.35), "ringing": (6.0, 0.07)}
    if name not in SUPPORTS:
        raise SettingsError(
            "support", f"`support` must be one of {', '.join(SUPPORTS)}; got {name!r}."
        )
    if not body_mass_kg > 0:
        raise SettingsError(
            "body_mass_kg", f"`body_mass_kg` must be positive; got {body_mass_kg!r}."
        )
    if name == "rigid":
        return SupportPreset(name, None, None, None, None)
    natural_hz = table[name][0] if natural_hz is None else natural_hz
    zeta = table[name][1] if damping_ratio is None else damping_ratio
    k = body_mass_kg * (2.0 * math.pi * natural_hz) ** 2
    c = 2.0 * zeta * math.sqrt(k * body_mass_kg)
    return SupportPreset(name, natural_hz, zeta, k, c)


def support_response(
    momentum_rate_n: np.ndarray,
    fs_hz: float,
    *,
    body_mass_kg: float,
    stiffness_n_per_m: float | None,
    damping_n_s_per_m: float | None,
) -> np.ndarray:
    """Dynamic support force ``F_s - M g`` for a body on a mass-spring-damper support.

    Parameters
    ----------
    momentum_rate_n : array of float
        ``dp_blood/dt``, N (upward positive), sampled at ``fs_hz``.
    fs_hz : float
        Sampling rate, Hz; should be well above the natural frequency (>= 20x).
    body_mass_kg : float
        Mass of the body on the support, kg.
    stiffness_n_per_m, damping_n_s_per_m : float or None
        Support constants ``k`` and ``c``; ``k`` None means a rigid support.

    Returns
    -------
    np.ndarray
        Upward reaction minus the weight, N, same length as the input.

    Notes
    -----
    1. With x the body displacement (up), momentum conservation of body + blood gives
       ``M x'' + dp_blood/dt = F_s - M g = -k x - c x'``.
    2. Laplace: ``F_dyn(s) = (c s + k) / (M s^2 + c s + k) * D(s)`` with ``D = dp_blood/dt``;
       at low frequency, or for ``k -> inf``, ``F_dyn = D`` (rigid support).
    3. Discretised with the bilinear transform and run causally from rest.
    """
    rate = np.asarray(momentum_rate_n, dtype=float)
    if stiffness_n_per_m is None:
        return rate.copy()
    damping = 0.0 if damping_n_s_per_m is None else float(damping_n_s_per_m)
    b, a = signal.bilinear(
        [damping, stiffness_n_per_m], [body_mass_kg, damping, stiffness_n_per_m], fs=fs_hz
    )
    return np.asarray(signal.lfilter(b, a, rate))


def lever_rule_shares(
    positions_m: np.ndarray, centre_of_pressure_m: np.ndarray
) -> np.ndarray:
    """Share of a vertical load carried by each of four equal cells under a rigid plate.

    Parameters
    ----------
    positions_m : array (4, 2)
        Cell positions (x, y), m, symmetric about the origin (corners of a rectangle).
    centre_of_pressure_m : array (2,) or (n, 2)
        Point of application of the load, m.

    Returns
    -------
    np.ndarray
        Shares, shape (4,) or (n, 4); each row sums to 1.

    Notes
    -----
    A rigid plate on four equal springs stays plane, so the cell forces are linear in the cell
    coordinates: ``F_i = F (1/4 + x x_i / sum x_j^2 + y y_i / sum y_j^2)``. This meets force and
    moment equilibrium (any statics text, e.g. F. P. Beer, E. R. Johnston, "Vector Mechanics
    for Engineers: Statics") and the compatibility of the plane plate.
    """
    pos = np.asarray(positions_m, dtype=float)
    cop = np.atleast_2d(np.asarray(centre_of_pressure_m, dtype=float))
    sx = np.sum(pos[:, 0] ** 2)
    sy = np.sum(pos[:, 1] ** 2)
    shares = 0.25 + cop[:, :1] * pos[None, :, 0] / sx + cop[:, 1:2] * pos[None, :, 1] / sy
    result: np.ndarray = shares[0] if np.ndim(centre_of_pressure_m) == 1 else shares
    return result
