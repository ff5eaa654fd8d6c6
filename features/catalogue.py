"""The feature catalogue's vocabulary: the entry type, shared ranges and citations.

Each family module declares its own catalogue entries (a ``CATALOGUE`` tuple of
:class:`FeatureDefinition`) next to the code that computes them, with the numbers in
their prose formatted from the constants that code uses; :mod:`features.feature_vector`
assembles them into ``FEATURES``. This module imports nothing from the engine, so that
every family can import it.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, replace

from features.limits import MAX_RATE_BPM, MIN_RATE_BPM, MS_PER_MIN

__all__ = [
    "AMPLITUDE_UNIT",
    "FeatureDefinition",
    "MS_PER_MIN",
    "NN_RANGE_MS",
    "NONNEGATIVE",
    "PERCENT",
    "RATE_RANGE_BPM",
    "REF_AASM",
    "REF_BRENNAN",
    "REF_CARTER",
    "REF_COSINOR",
    "REF_GROSSMAN",
    "REF_INAN",
    "REF_KARLEN",
    "REF_LOMB",
    "REF_OURS",
    "REF_PENG",
    "REF_PYWT",
    "REF_RICHMAN",
    "REF_TASK_FORCE",
    "REF_WELCH",
    "UNIT_INTERVAL",
    "with_tolerance",
]

AMPLITUDE_UNIT = "{amplitude_unit}"
"""Unit template of the amplitudes, filled with ``InputSummary.amplitude_unit``."""

# Bounds that follow from the definitions. Heart rate: the widest rate_range_bpm the beat
# detector accepts, hence NN intervals of 60000/300 to 60000/20 ms.
RATE_RANGE_BPM = (MIN_RATE_BPM, MAX_RATE_BPM)
NN_RANGE_MS = (MS_PER_MIN / MAX_RATE_BPM, MS_PER_MIN / MIN_RATE_BPM)
NONNEGATIVE: tuple[float | None, float | None] = (0.0, None)
PERCENT = (0.0, 100.0)
UNIT_INTERVAL = (0.0, 1.0)


@dataclass(frozen=True)
class FeatureDefinition:
    """One entry of the catalogue.

    Attributes
    ----------
    name
        Stable snake_case name with the unit suffix, unique in the catalogue.
    family
        ``"heart_rate"``, ``"variability"``, ``"morphology"``, ``"respiration"``,
        ``"modulation"`` or ``"quality"``.
    unit
        UCUM symbol, ``"{amplitude_unit}"``-style template, or None when dimensionless.
    definition
        Plain sentence: what the number is and how it is obtained.
    valid_range
        (low, high), either end None when unbounded, inclusive. A computed value outside it
        is reported as None with reason ``"outside_valid_range"``.
    reference
        Citation of the method, or ``"heartsway definition"`` for our own.
    path
        Dotted attribute path of the value in :class:`features.engine.AnalysisResult`; a
        trailing ``[k]`` indexes a tuple.
    confidence_path
        Dotted path of the confidence in [0, 1] that goes with the value.
    confidence_waves
        Morphology waves whose own confidences cap the confidence (the value depends on
        where they were located), for example ``("I", "J")``.
    flags_paths
        Dotted paths of the flag tuples that explain a missing value.
    reason_keys
        Words that a flag explaining this feature's absence contains (between underscores),
        for example ``("lf",)`` for ``"lf_needs_120_s"``; the path's last name without its
        unit suffix when empty.
    tolerance, tolerance_unit, tolerance_relative, tolerance_note
        The error the confidence speaks of: the confidence of a calibrated feature is the
        probability that |reported - true| <= ``tolerance``. ``tolerance_unit`` is the
        feature's own unit for an absolute tolerance (``"1"`` when dimensionless; for a
        feature measured in ``%``, percentage points), or ``"%"`` with
        ``tolerance_relative`` True for one relative to the true value.
        ``tolerance_note`` says why it is that size. Set with :func:`with_tolerance`.
    confidence_calibrated
        True when the reported confidence is a fitted probability of lying within the
        tolerance (:mod:`features.calibration`); set when the catalogue is assembled.
    """

    name: str
    family: str
    unit: str | None
    definition: str
    valid_range: tuple[float | None, float | None]
    reference: str
    path: str
    confidence_path: str
    confidence_waves: tuple[str, ...] = ()
    flags_paths: tuple[str, ...] = ()
    reason_keys: tuple[str, ...] = ()
    tolerance: float = math.nan
    tolerance_unit: str = ""
    tolerance_relative: bool = False
    tolerance_note: str = ""
    confidence_calibrated: bool = False


def with_tolerance(
    entries: tuple[FeatureDefinition, ...],
    tolerances: dict[str, tuple[float, str, str]],
) -> tuple[FeatureDefinition, ...]:
    """The entries with their tolerances set from ``name -> (tolerance, kind, note)``.

    ``kind`` is ``"abs"`` (in the feature's own unit) or ``"rel"`` (% of the true value).
    Every entry must have one, and every tolerance an entry (KeyError otherwise).
    """
    missing = sorted({d.name for d in entries} ^ set(tolerances))
    if missing:
        raise KeyError(f"tolerance table and catalogue differ: {missing}")
    out = []
    for d in entries:
        tol, kind, note = tolerances[d.name]
        relative = kind == "rel"
        unit = "%" if relative else (d.unit or "1")
        out.append(replace(d, tolerance=float(tol), tolerance_unit=unit,
                           tolerance_relative=relative, tolerance_note=note))
    return tuple(out)


# --------------------------------------------------------------------------- citations

REF_TASK_FORCE = (
    "Task Force of the European Society of Cardiology and the North American Society of "
    "Pacing and Electrophysiology. Heart rate variability: standards of measurement, "
    "physiological interpretation and clinical use. Circulation 93(5):1043-1065, 1996. "
    "doi:10.1161/01.CIR.93.5.1043"
)
REF_LOMB = (
    "Lomb NR. Least-squares frequency analysis of unequally spaced data. Astrophysics and "
    "Space Science 39:447-462, 1976. doi:10.1007/BF00648343; bands of " + REF_TASK_FORCE
)
REF_BRENNAN = (
    "Brennan M, Palaniswami M, Kamen P. Do existing measures of Poincare plot geometry reflect "
    "nonlinear features of heart rate variability? IEEE Transactions on Biomedical "
    "Engineering 48(11):1342-1347, 2001. doi:10.1109/10.959330"
)
REF_RICHMAN = (
    "Richman JS, Moorman JR. Physiological time-series analysis using approximate entropy "
    "and sample entropy. American Journal of Physiology 278(6):H2039-H2049, 2000. "
    "doi:10.1152/ajpheart.2000.278.6.H2039"
)
REF_PENG = (
    "Peng CK, Havlin S, Stanley HE, Goldberger AL. Quantification of scaling exponents and "
    "crossover phenomena in nonstationary heartbeat time series. Chaos 5(1):82-87, 1995. "
    "doi:10.1063/1.166141"
)
REF_INAN = (
    "Inan OT, Migeotte PF, Park KS, et al. Ballistocardiography and seismocardiography: a "
    "review of recent advances. IEEE Journal of Biomedical and Health Informatics "
    "19(4):1414-1427, 2015. doi:10.1109/JBHI.2014.2361732"
)
REF_PYWT = (
    "Nason GP, Silverman BW. The stationary wavelet transform and some statistical "
    "applications. In: Wavelets and Statistics, Lecture Notes in Statistics 103:281-299, "
    "Springer, 1995. doi:10.1007/978-1-4612-2544-7_17"
)
REF_WELCH = (
    "Welch PD. The use of fast Fourier transform for the estimation of power spectra. IEEE "
    "Transactions on Audio and Electroacoustics 15(2):70-73, 1967. "
    "doi:10.1109/TAU.1967.1161901"
)
REF_KARLEN = (
    "Karlen W, Raman S, Ansermino JM, Dumont GA. Multiparameter respiratory rate estimation "
    "from the photoplethysmogram. IEEE Transactions on Biomedical Engineering "
    "60(7):1946-1953, 2013. doi:10.1109/TBME.2013.2246160"
)
REF_AASM = (
    "Berry RB et al. The AASM Manual for the Scoring of Sleep and Associated Events, version "
    "2.x. American Academy of Sleep Medicine, 2012 onward (10-s duration criterion only)"
)
REF_GROSSMAN = (
    "Grossman P, van Beek J, Wientjes C. A comparison of three quantification methods for "
    "estimation of respiratory sinus arrhythmia. Psychophysiology 27(6):702-714, 1990. "
    "doi:10.1111/j.1469-8986.1990.tb03198.x"
)
REF_COSINOR = (
    "Nelson W, Tong YL, Lee JK, Halberg F. Methods for cosinor-rhythmometry. Chronobiologia "
    "6(4):305-323, 1979"
)
REF_CARTER = (
    "Carter GC. Coherence and time delay estimation. Proceedings of the IEEE 75(2):236-255, "
    "1987. doi:10.1109/PROC.1987.13723"
)
REF_OURS = "heartsway definition"
