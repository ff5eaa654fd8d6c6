"""Physiology of the occupant: breathing, heart timing, and the blood's vertical momentum.

Public API
----------
blood_momentum(onset_times_s, fs_hz, *, n_samples, stroke_volumes_ml, systole_durations_s)
    Momentum of the arterial blood and its rate of change (the rigid-support force).
ArterialSegment, ARTERIAL_SEGMENTS
    The lumped arterial path whose flow pulses give the H, I, J, K and L waves.
BLOOD_DENSITY_KG_M3
    Density of whole blood.

The generators below (breaths, beats, systolic time intervals, random spans) serve
:func:`simulation.recording.simulate`, which draws them in a fixed order from seeded
generators; they are not re-exported by the package.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from simulation.settings import SettingsError, SimulationSettings

__all__ = [
    "ARTERIAL_SEGMENTS",
    "BLOOD_DENSITY_KG_M3",
    "ArterialSegment",
    "BloodMomentum",
    "blood_momentum",
]

#: Density of whole blood, kg/m^3 (common practice, 1050-1060).
BLOOD_DENSITY_KG_M3 = 1060.0


@dataclass(frozen=True)
class ArterialSegment:
    """One vessel of the lumped arterial path, seen along the vertical axis.

    Attributes
    ----------
    name : str
        Plain description of the vessel group.
    direction : int
        +1 when the flow runs headward (upward when seated), -1 footward.
    length_m : float
        Effective vertical length of the segment, m.
    flow_fraction : float
        Fraction of the stroke volume that passes through the segment.
    delay_s : float
        Transit delay of the flow pulse from the aortic valve to the segment, s.
    stretch : float
        Dispersion of the pulse: its duration is ``stretch`` times the ejection time.
    """

    name: str
    direction: int
    length_m: float
    flow_fraction: float
    delay_s: float
    stretch: float


#: Lumped arterial path of a seated adult (vertical components only). Lengths are effective
#: vertical lengths, not anatomical ones; the legs are near horizontal when seated, so only the
#: pelvic drop of the iliac arteries counts. The first entry is the footward shift of blood
#: from atria to ventricles late in diastole and during isovolumic contraction (it gives the
#: small H wave); the last is the early-diastolic backflow of the descending aorta. Values are
#: of the order given by anatomy texts (common practice) and were tuned so that the waves fall
#: at the textbook times (J about 0.2-0.25 s after the electrical beat).
ARTERIAL_SEGMENTS: tuple[ArterialSegment, ...] = (
    ArterialSegment("atrioventricular shift", -1, 0.05, 0.08, -0.090, 0.35),
    ArterialSegment("ascending aorta and arch", +1, 0.10, 1.00, 0.000, 1.00),
    ArterialSegment("head and arm branches", +1, 0.15, 0.20, 0.030, 1.10),
    ArterialSegment("descending thoracic and abdominal aorta", -1, 0.25, 0.75, 0.080, 0.75),
    ArterialSegment("iliac arteries (pelvic drop)", -1, 0.08, 0.30, 0.120, 0.90),
    ArterialSegment("descending aorta early-diastolic backflow", +1, 0.25, 0.10, 0.260, 0.60),
)


@dataclass(frozen=True)
class BloodMomentum:
    """Vertical momentum of the arterial blood (upward positive) and its rate of change."""

    momentum_kg_m_s: np.ndarray
    rate_n: np.ndarray
    fs_hz: float


# ---------------------------------------------------------------------------------------------
# Blood momentum
# ---------------------------------------------------------------------------------------------

#: Exponents of the ejection pulse u^a (1-u)^b: flow peaks at a/(a+b) = 0.3 of the ejection
#: time, the early-peaking skewed shape of aortic flow (common practice).
_PULSE_A, _PULSE_B = 1.5, 3.5
_PULSE_NORM = math.gamma(_PULSE_A + _PULSE_B + 2) / (
    math.gamma(_PULSE_A + 1) * math.gamma(_PULSE_B + 1)
)


def _pulse(u: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Unit-area flow shape on u in [0, 1] and its derivative d/du (zero outside)."""
    inside = (u >= 0.0) & (u <= 1.0)
    uc = np.where(inside, u, 0.0)
    shape = _PULSE_NORM * uc**_PULSE_A * (1.0 - uc) ** _PULSE_B
    slope = _PULSE_NORM * (
        _PULSE_A * uc ** (_PULSE_A - 1) * (1.0 - uc) ** _PULSE_B
        - _PULSE_B * uc**_PULSE_A * (1.0 - uc) ** (_PULSE_B - 1)
    )
    return np.where(inside, shape, 0.0), np.where(inside, slope, 0.0)


def blood_momentum(
    onset_times_s: np.ndarray,
    fs_hz: float,
    *,
    n_samples: int,
    stroke_volumes_ml: np.ndarray,
    systole_durations_s: np.ndarray,
    segments: tuple[ArterialSegment, ...] = ARTERIAL_SEGMENTS,
    density_kg_m3: float = BLOOD_DENSITY_KG_M3,
) -> BloodMomentum:
    """Vertical momentum of the arterial blood and its time derivative.

    Parameters
    ----------
    onset_times_s : array of float
        Ejection onsets, s (any real values; pulses outside the grid are cut).
    fs_hz : float
        Rate of the output grid, Hz (> 0). Sample ``n`` is at ``n / fs_hz``.
    n_samples : int
        Length of the output grid.
    stroke_volumes_ml : array of float
        Stroke volume of each beat, mL.
    systole_durations_s : array of float
        Left-ventricular ejection time of each beat, s.
    segments : tuple of ArterialSegment
        Lumped arterial path (default :data:`ARTERIAL_SEGMENTS`).
    density_kg_m3 : float
        Blood density (default 1060).

    Returns
    -------
    BloodMomentum
        ``momentum_kg_m_s`` (upward positive) and ``rate_n`` = its exact derivative, N.

    Raises
    ------
    SettingsError
        If the beat arrays differ in length or ``fs_hz``/``n_samples`` are not positive.

    Notes
    -----
    1. Flow through the aortic valve for one beat is ``Q(t) = SV / T g((t - t0) / T)`` with
       ``g(u) ~ u^1.5 (1 - u)^3.5`` of unit area, so the beat ejects exactly SV.
    2. In a rigid tube of length L carrying a flow Q the blood momentum is
       ``rho A L v = rho L Q``. Each segment carries ``fraction * Q`` delayed by its transit
       time and dispersed (stretched, volume kept); its vertical momentum is
       ``direction * rho * L * fraction * Q_seg``.
    3. The momentum is summed over segments and beats; the derivative is analytic, so the
       rigid-support force ``dp/dt`` is exact at every sample.
    Venous return is slow and is neglected; every segment's flow returns to zero, so the blood
    is at rest again between beats (the net impulse of a beat is zero).

    References
    ----------
    .. [1] I. Starr, A. J. Rawson, H. A. Schroeder, N. R. Joseph, "Studies on the estimation of
       cardiac output in man, and of abnormalities in cardiac function, from the heart's recoil
       and the blood's impacts; the ballistocardiogram", Am. J. Physiol. 127:1-28, 1939.
    .. [2] C.-S. Kim et al., "Ballistocardiogram: mechanism and potential for unobtrusive
       cardiovascular health monitoring", Sci. Rep. 6:31297, 2016, doi:10.1038/srep31297.
    """
    onsets = np.asarray(onset_times_s, dtype=float).ravel()
    volumes = np.asarray(stroke_volumes_ml, dtype=float).ravel() * 1e-6
    durations = np.asarray(systole_durations_s, dtype=float).ravel()
    if not (onsets.size == volumes.size == durations.size):
        raise SettingsError(
            "stroke_volumes_ml",
            "`stroke_volumes_ml` and `systole_durations_s` must have one entry per onset; got "
            f"{volumes.size} and {durations.size} for {onsets.size} onsets.",
        )
    if not (fs_hz > 0 and n_samples > 0):
        raise SettingsError(
            "fs_hz", f"`fs_hz` and `n_samples` must be positive; got {fs_hz!r}, {n_samples!r}."
        )
    momentum = np.zeros(n_samples)
    rate = np.zeros(n_samples)
    if onsets.size == 0:
        return BloodMomentum(momentum, rate, float(fs_hz))
    for seg in segments:
        starts = onsets + seg.delay_s
        spans = durations * seg.stretch
        width = int(math.ceil(spans.max() * fs_hz)) + 2
        first = np.floor(starts * fs_hz).astype(np.int64)
        index = first[:, None] + np.arange(width)[None, :]
        u = (index / fs_hz - starts[:, None]) / spans[:, None]
        shape, slope = _pulse(u)
        gain = seg.direction * density_kg_m3 * seg.length_m * seg.flow_fraction
        p_vals = gain * (volumes / spans)[:, None] * shape
        r_vals = gain * (volumes / spans**2)[:, None] * slope
        keep = (index >= 0) & (index < n_samples) & (u >= 0.0) & (u <= 1.0)
        momentum += np.bincount(index[keep], weights=p_vals[keep], minlength=n_samples)
        rate += np.bincount(index[keep], weights=r_vals[keep], minlength=n_samples)
    return BloodMomentum(momentum, rate, float(fs_hz))


# ---------------------------------------------------------------------------------------------
# Breathing and heart timing
# ---------------------------------------------------------------------------------------------


@dataclass(frozen=True)
class Breaths:
    """The breaths of one recording, with the pauses between them."""

    starts_s: np.ndarray  # start of each breath (inspiration onset)
    durations_s: np.ndarray
    volumes_l: np.ndarray
    pauses: tuple[tuple[float, float], ...]


def pick_spans(
    rng: np.random.Generator,
    count: int,
    length_s: tuple[float, float],
    duration_s: float,
    taken: list[tuple[float, float]],
    gap_s: float,
) -> list[tuple[float, float]]:
    spans: list[tuple[float, float]] = []
    for _ in range(count):
        for _attempt in range(200):
            length = rng.uniform(*length_s)
            start = rng.uniform(5.0, max(5.0, duration_s - length - 5.0))
            end = start + length
            if all(end + gap_s < a or start - gap_s > b for a, b in taken + spans):
                spans.append((start, end))
                break
    return spans


def make_breathing(s: SimulationSettings, rng: np.random.Generator) -> Breaths:
    period = 60.0 / s.breathing_rate_per_min
    pauses = list(s.breathing_pause_spans_s)
    pauses += pick_spans(
        rng, s.breathing_pause_count, (s.breathing_pause_s, s.breathing_pause_s),
        s.duration_s, list(pauses), 3.0 * period,
    )
    pauses.sort()
    starts, durations = [], []
    t = -rng.uniform(0.0, period)
    pending = list(pauses)
    while t < s.duration_s + period:
        if pending and t + 0.5 * period >= pending[0][0]:
            t = max(t, pending[0][1])
            pending.pop(0)
            continue
        d = period * float(np.clip(1.0 + s.breathing_variability * rng.standard_normal(), 0.5, 1.6))
        starts.append(t)
        durations.append(d)
        t += d
    n = len(starts)
    volumes = s.tidal_volume_l * np.clip(1.0 + 0.1 * rng.standard_normal(n), 0.6, 1.4)
    return Breaths(np.array(starts), np.array(durations), volumes, tuple(pauses))


def lung_volume(b: Breaths, t: np.ndarray) -> np.ndarray:
    """Lung volume above end-expiration (L): 40 % inspiration, 60 % expiration per breath."""
    k = np.searchsorted(b.starts_s, t, side="right") - 1
    valid = k >= 0
    kc = np.clip(k, 0, None)
    phase = (t - b.starts_s[kc]) / b.durations_s[kc]
    inside = valid & (phase <= 1.0)
    ph = np.clip(phase, 0.0, 1.0)
    rise = 0.5 * (1.0 - np.cos(np.pi * ph / 0.4))
    fall = 0.5 * (1.0 + np.cos(np.pi * (ph - 0.4) / 0.6))
    shape = np.where(ph < 0.4, rise, fall)
    return np.where(inside, b.volumes_l[kc] * shape, 0.0)


def make_beats(
    s: SimulationSettings, rng: np.random.Generator, breathing: Breaths
) -> tuple[np.ndarray, np.ndarray, list[str]]:
    """Electrical beat times, stroke volumes and kinds, from -1.5 s to the end + 1 s."""
    ibi0 = 60.0 / s.heart_rate_bpm
    phases = rng.uniform(0.0, 2 * np.pi, 2)

    def resp_drive(t: float) -> float:
        vol = float(lung_volume(breathing, np.array([t]))[0])
        return 2.0 * vol / s.tidal_volume_l - 1.0  # about -1 (expiration) .. +1 (inspiration)

    times: list[float] = []
    volumes: list[float] = []
    kinds: list[str] = []
    t = -1.5 + rng.uniform(0.0, ibi0)
    pending_pause = 0.0
    previous = ibi0
    while t < s.duration_s + 1.0:
        drive = resp_drive(t)
        if s.irregular_rhythm:
            sv = s.stroke_volume_ml * float(np.clip(0.55 + 0.45 * previous / ibi0, 0.4, 1.3))
            interval = ibi0 * float(np.clip(rng.lognormal(0.0, 0.22), 0.45, 2.0))
            kind = "normal"
        else:
            slow = s.lf_variability * (
                np.sin(2 * np.pi * 0.1 * t + phases[0])
                + 0.5 * np.sin(2 * np.pi * 0.04 * t + phases[1])
            )
            base = ibi0 * (1.0 + slow) - 0.5e-3 * s.rsa_depth_ms * drive
            base += 0.004 * rng.standard_normal()
            sv = s.stroke_volume_ml * (1.0 - s.sv_modulation * drive)
            kind = "normal"
            if pending_pause > 0.0:
                # This beat ends the compensatory pause (placed when the premature beat
                # was); the interval after it is an ordinary one.
                interval = base
                sv *= 1.15  # post-extrasystolic potentiation
                pending_pause = 0.0
            elif times and rng.uniform() < s.ectopic_fraction:
                interval = base
                kind = "ectopic"  # this beat comes early; the next interval compensates
            else:
                interval = base
        if kind == "ectopic":
            coupling = 0.6 * interval
            t_ectopic = times[-1] + coupling
            times.append(t_ectopic)
            volumes.append(0.45 * sv)
            kinds.append("ectopic")
            pending_pause = 2.0 * interval - coupling
            t = t_ectopic + pending_pause
            previous = coupling
            continue
        sv *= 1.0 + 0.03 * rng.standard_normal()
        times.append(t)
        volumes.append(sv)
        kinds.append(kind)
        previous = interval
        t += interval
    return np.array(times), np.array(volumes), kinds


def systole_s(rate_bpm: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Ejection time and pre-ejection period from the rate (Weissler et al. 1968, men)."""
    lvet = np.clip(0.413 - 0.0017 * rate_bpm, 0.16, 0.40)
    pep = np.clip(0.131 - 0.0004 * rate_bpm, 0.06, 0.13)
    return lvet, pep
