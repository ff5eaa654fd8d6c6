"""The engine's limits, choice lists and physical constants, defined once.

Every stage of the engine, the request schemas (``schemas/``) and the file readers
(``fileformats/``) import these names rather than writing the numbers again, so that a
limit changes in one place. Choice lists are sorted tuples.
"""

from __future__ import annotations

from types import MappingProxyType

__all__ = [
    "COUNTS_UNIT",
    "COUPLINGS",
    "DEFAULT_MAX_SAMPLES",
    "DEFAULT_PLACEMENT",
    "DEFAULT_QUANTITY",
    "DEFAULT_RATE_RANGE_BPM",
    "DEFAULT_UNIT",
    "MAINS_AUTO",
    "MAINS_HZ",
    "MAX_BODY_MASS_KG",
    "MAX_CHANNELS",
    "MAX_DURATION_S",
    "MAX_FS_HZ",
    "MAX_OCCUPANT_KG",
    "MAX_RATE_BPM",
    "MAX_SAMPLE_MAGNITUDE",
    "MAX_WINDOW_S",
    "MIN_BODY_MASS_KG",
    "MIN_DURATION_S",
    "MIN_FS_HZ",
    "MIN_OCCUPANT_KG",
    "MIN_RATE_BPM",
    "MIN_WINDOW_S",
    "MS_PER_MIN",
    "PLACEMENTS",
    "QUANTITIES",
    "SHORT_TERM_S",
    "S_PER_HOUR",
    "STANDARD_GRAVITY_M_S2",
    "UNIT_FACTORS",
    "resolve_coupling",
    "mains_choices",
    "units_of",
    "units_text",
]

#: Milliseconds per minute: a rate in /min is MS_PER_MIN over an interval in ms.
MS_PER_MIN = 60_000.0
#: Seconds per hour: a count per hour is the count over the time in s over S_PER_HOUR.
S_PER_HOUR = 3600.0

#: Standard acceleration of gravity, m/s^2 (3rd CGPM, 1901; NIST SP 811, 2008, B.8).
STANDARD_GRAVITY_M_S2 = 9.80665

#: Accepted sampling rates, Hz. Below 50 Hz the J wave (energy up to ~20 Hz) is not
#: resolved; above 2000 Hz nothing in the cardiac band is gained.
MIN_FS_HZ = 50.0
MAX_FS_HZ = 2000.0
#: Most channels in one recording (the load cells or sensors of one support).
MAX_CHANNELS = 8
#: Default cap on the samples of one request or file, all channels together (about 1.1 h
#: of four channels at 250 Hz); the service's ``HEARTSWAY_MAX_SAMPLES`` sets its own, and
#: the file readers check what a file declares against it before reading data.
DEFAULT_MAX_SAMPLES = 4_000_000

#: Shortest record accepted, s: about 10 beats at 30 bpm and one slow breath
#: (6 breaths/min is a 10 s cycle), so every later stage has something to work on.
MIN_DURATION_S = 20.0
#: Longest record accepted, s (24 h): one day of monitoring.
MAX_DURATION_S = 86_400.0

#: Largest sample magnitude accepted (in the channel's unit): far beyond any force or
#: acceleration sensor, and far from float64 overflow in the squares and spectra the
#: stages compute.
MAX_SAMPLE_MAGNITUDE = 1e12

#: Stated body mass accepted, kg (common practice). The engine and the request schema
#: said 2-400 kg, the morphology stage 1-500 kg; 2-400 is kept because it is the range
#: the published API contract already states, it covers a term newborn (the WHO growth
#: standards put the 3rd percentile of birth weight near 2.5 kg, from memory) to the
#: heaviest adults seen in clinical practice, and a value outside it is far more often a
#: unit slip (grams, pounds) than a person.
MIN_BODY_MASS_KG = 2.0
MAX_BODY_MASS_KG = 400.0

#: Plausible occupant mass bounds for the load, kg (common practice). Below 10 kg the
#: load is an object, a pet or calibration drift rather than a person; above 350 kg it
#: is beyond the heaviest adults seen in clinical practice and points to a calibration
#: or tare problem.
MIN_OCCUPANT_KG = 10.0
MAX_OCCUPANT_KG = 350.0

#: Widest heart-rate search range a caller may ask for, bpm. The beat detector and the
#: feature catalogue used 20-300, the request schema 20-250; 20-300 is kept (common
#: practice): 300 bpm is the ventricular rate of atrial flutter with 1:1 conduction and
#: of infant supraventricular tachycardia, 20 bpm a deep bradycardia, and narrowing the
#: range would have changed the catalogue's valid ranges.
MIN_RATE_BPM = 20.0
MAX_RATE_BPM = 300.0
#: Default heart-rate search range, bpm: resting adults (common practice).
DEFAULT_RATE_RANGE_BPM = (30.0, 200.0)

#: Length of one analysis window, s: the shortest holds about 30 beats and a few breaths.
MIN_WINDOW_S = 30.0
MAX_WINDOW_S = 3600.0
#: The short-term recording of heart-rate variability, s: 5 min (Task Force of the ESC and
#: NASPE, Circulation 93(5):1043-1065, 1996, "short-term recordings (2 to 5 min)" and the
#: 5-min segments of SDANN and the SDNN index).
SHORT_TERM_S = 300.0

#: Where the sensors sit.
PLACEMENTS = ("bed", "other", "platform", "seat")
#: Placement of a recording whose caller does not say.
DEFAULT_PLACEMENT = "seat"
#: What a channel measures.
QUANTITIES = ("acceleration", "displacement", "force", "velocity")
#: Quantity and unit of a channel whose form or file does not say (a load cell in newtons).
DEFAULT_QUANTITY = "force"
DEFAULT_UNIT = "N"
#: Mains frequencies whose hum can be removed, Hz.
MAINS_HZ = (50, 60)
#: The mains setting that detects the hum's frequency (one of ``MAINS_HZ``) from the trace.
MAINS_AUTO = "auto"
#: Unit of a channel recorded in ADC counts (it then needs a counts scale).
COUNTS_UNIT = "counts"
#: How a channel is coupled to the occupant's static weight, sorted. ``dc``: a calibrated
#: load cell that carries the whole weight (or its share with the other ``dc`` cells): its
#: static level measures the supported mass. ``ac``: anything else (film or piezoelectric
#: sensors, pneumatic or hydraulic pads, a strain strip under one leg, accelerometers,
#: AC-coupled front ends, counts of unknown scale): only its changes are used, never its
#: level. Default: ``dc`` for force in a force unit or in counts with a scale, else ``ac``.
COUPLINGS = ("ac", "dc")

#: Multiplicative factor from each accepted unit to the SI unit of its quantity. Factors
#: from NIST SP 811 (2008), Appendix B.8/B.9: 1 lbf = 4.448 221 615 260 5 N;
#: 1 kgf = g_n x 1 kg; 1 g = g_n (so 1 mg = 9.806 65e-3 m/s^2, "mg" meaning milli-g
#: here, not milligram).
UNIT_FACTORS = MappingProxyType({
    "force": MappingProxyType({"N": 1.0, "kN": 1.0e3, "lbf": 4.4482216152605,
                               "kgf": STANDARD_GRAVITY_M_S2}),
    "acceleration": MappingProxyType({"m/s2": 1.0, "m/s^2": 1.0, "g": STANDARD_GRAVITY_M_S2,
                                      "mg": STANDARD_GRAVITY_M_S2 * 1.0e-3}),
    "velocity": MappingProxyType({"m/s": 1.0, "mm/s": 1.0e-3}),
    "displacement": MappingProxyType({"m": 1.0, "mm": 1.0e-3, "um": 1.0e-6}),
})


def units_of(quantity: str) -> list[str]:
    """Sorted units accepted for ``quantity``, :data:`COUNTS_UNIT` included."""
    return sorted([*UNIT_FACTORS[quantity], COUNTS_UNIT])


def resolve_coupling(quantity: str, unit: str, has_scale: bool, coupling: str | None) -> str:
    """The channel's coupling: as given, else ``dc`` only for calibrated force (see COUPLINGS)."""
    if coupling is not None:
        return coupling
    calibrated = unit != COUNTS_UNIT or has_scale
    return "dc" if quantity == "force" and calibrated else "ac"


def units_text() -> str:
    """The physical units of each quantity, for messages and descriptions:
    ``"acceleration g, m/s2, m/s^2, mg; displacement m, mm, um; ..."``."""
    return "; ".join(f"{q} {', '.join(sorted(UNIT_FACTORS[q]))}" for q in QUANTITIES)


def mains_choices(none: str = "None") -> str:
    """The accepted mains settings, for messages: ``"'auto', 50, 60 or None"`` (``none``
    names the empty setting as the caller's language spells it, ``null`` in JSON)."""
    return ", ".join([repr(MAINS_AUTO), *map(str, MAINS_HZ)]) + f" or {none}"
