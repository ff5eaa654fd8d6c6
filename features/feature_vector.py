"""The feature vector: one flat, ordered, versioned list of named scalars for ML pipelines.

Public API
----------
FEATURES
    The catalogue: a tuple of :class:`FeatureDefinition`, in vector order. The service serves
    it at ``GET /v1/features``; ``docs/features.md`` is generated from it.
FEATURE_SET_VERSION
    Version of the catalogue (defined in :mod:`features.engine`); it changes whenever the
    definition of any feature changes.
feature_vector(result) -> FeatureVector
    Every catalogue entry, in catalogue order, read from one :class:`AnalysisResult`.
feature_definition(name) -> FeatureDefinition
    The catalogue entry called ``name``.
catalogue_markdown() -> str
    The catalogue as the Markdown text of ``docs/features.md``.

Conventions
-----------
Names are stable snake_case with the unit as a suffix (``_bpm``, ``_ms``, ``_ms2``, ``_pct``,
``_per_min``, ``_per_hour``, ``_s``); dimensionless features have none. Units are UCUM
symbols (``/min``, ``ms``, ``ms2``, ``%``, ``/h``, ``s``), None when dimensionless. Two units
depend on the input and are written as templates in the catalogue: ``{amplitude_unit}`` (the
unit of the fused trace, ``InputSummary.amplitude_unit``: ``N``, ``m/s^2`` or ``a.u.``) and
``{amplitude_unit}/kg``; :func:`feature_vector` fills them in.
"""

from __future__ import annotations

import hashlib
import math
import re
from dataclasses import dataclass
from typing import Any

from features.engine import FEATURE_SET_VERSION, AnalysisResult

__all__ = [
    "AMPLITUDE_UNIT",
    "FEATURES",
    "FEATURE_NAMES",
    "FEATURE_SET_VERSION",
    "FeatureDefinition",
    "FeatureValue",
    "FeatureVector",
    "catalogue_fingerprint",
    "catalogue_markdown",
    "feature_definition",
    "feature_vector",
]

AMPLITUDE_UNIT = "{amplitude_unit}"
"""Unit template of the amplitudes, filled with ``InputSummary.amplitude_unit``."""

OUTSIDE_VALID_RANGE = "outside_valid_range"
"""Reason of a value that was computed but lies outside its feature's valid range."""
NOT_FINITE = "not_finite"
"""Reason of a value that was computed as NaN or infinity."""
NOT_COMPUTED = "not_computed"
"""Reason when the family names no more specific one."""

_REASON_WORDS = ("needs", "too_", "no_", "not_found", "undefined", "limited", "zero", "flat")


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


@dataclass(frozen=True)
class FeatureValue:
    """One feature of one analysis.

    Attributes
    ----------
    name, unit
        As in the catalogue, with the unit template filled in.
    value
        Finite float inside the valid range, or None.
    confidence
        In [0, 1]; 0 when ``value`` is None.
    reason
        Why ``value`` is None (a flag of the family, ``"outside_valid_range"``,
        ``"not_finite"`` or ``"not_computed"``); None when there is a value.
    """

    name: str
    value: float | None
    unit: str | None
    confidence: float
    reason: str | None


@dataclass(frozen=True)
class FeatureVector:
    """All catalogue features of one analysis, in catalogue order."""

    feature_set_version: str
    features: tuple[FeatureValue, ...]

    def get(self, name: str) -> FeatureValue:
        """Return the feature called ``name``.

        Raises
        ------
        KeyError
            When ``name`` is not in the catalogue.
        """
        for feature in self.features:
            if feature.name == name:
                return feature
        raise KeyError(name)

    def as_dict(self) -> dict[str, float | None]:
        """Name -> value (None when not computed), in catalogue order."""
        return {f.name: f.value for f in self.features}


# --------------------------------------------------------------------------- the catalogue

_TASK_FORCE = (
    "Task Force of the European Society of Cardiology and the North American Society of "
    "Pacing and Electrophysiology. Heart rate variability: standards of measurement, "
    "physiological interpretation and clinical use. Circulation 93(5):1043-1065, 1996. "
    "doi:10.1161/01.CIR.93.5.1043"
)
_LOMB = (
    "Lomb NR. Least-squares frequency analysis of unequally spaced data. Astrophysics and "
    "Space Science 39:447-462, 1976. doi:10.1007/BF00648343; bands of " + _TASK_FORCE
)
_BRENNAN = (
    "Brennan M, Palaniswami M, Kamen P. Do existing measures of Poincare plot geometry reflect "
    "nonlinear features of heart rate variability? IEEE Transactions on Biomedical "
    "Engineering 48(11):1342-1347, 2001. doi:10.1109/10.959330"
)
_RICHMAN = (
    "Richman JS, Moorman JR. Physiological time-series analysis using approximate entropy "
    "and sample entropy. American Journal of Physiology 278(6):H2039-H2049, 2000. "
    "doi:10.1152/ajpheart.2000.278.6.H2039"
)
_PENG = (
    "Peng CK, Havlin S, Stanley HE, Goldberger AL. Quantification of scaling exponents and "
    "crossover phenomena in nonstationary heartbeat time series. Chaos 5(1):82-87, 1995. "
    "doi:10.1063/1.166141"
)
_INAN = (
    "Inan OT, Migeotte PF, Park KS, et al. Ballistocardiography and seismocardiography: a "
    "review of recent advances. IEEE Journal of Biomedical and Health Informatics "
    "19(4):1414-1427, 2015. doi:10.1109/JBHI.2014.2361732"
)
_PYWT = (
    "Nason GP, Silverman BW. The stationary wavelet transform and some statistical "
    "applications. In: Wavelets and Statistics, Lecture Notes in Statistics 103:281-299, "
    "Springer, 1995. doi:10.1007/978-1-4612-2544-7_17"
)
_WELCH = (
    "Welch PD. The use of fast Fourier transform for the estimation of power spectra. IEEE "
    "Transactions on Audio and Electroacoustics 15(2):70-73, 1967. "
    "doi:10.1109/TAU.1967.1161901"
)
_KARLEN = (
    "Karlen W, Raman S, Ansermino JM, Dumont GA. Multiparameter respiratory rate estimation "
    "from the photoplethysmogram. IEEE Transactions on Biomedical Engineering "
    "60(7):1946-1953, 2013. doi:10.1109/TBME.2013.2246160"
)
_AASM = (
    "Berry RB et al. The AASM Manual for the Scoring of Sleep and Associated Events, version "
    "2.x. American Academy of Sleep Medicine, 2012 onward (10-s duration criterion only)"
)
_GROSSMAN = (
    "Grossman P, van Beek J, Wientjes C. A comparison of three quantification methods for "
    "estimation of respiratory sinus arrhythmia. Psychophysiology 27(6):702-714, 1990. "
    "doi:10.1111/j.1469-8986.1990.tb03198.x"
)
_CARTER = (
    "Carter GC. Coherence and time delay estimation. Proceedings of the IEEE 75(2):236-255, "
    "1987. doi:10.1109/PROC.1987.13723"
)
_OURS = "heartsway definition"

# Bounds that follow from the definitions. Heart rate: the widest rate_range_bpm the beat
# detector accepts (20-300 bpm), hence NN intervals of 200-3000 ms. Wave intervals: the
# search windows of features.morphology widened by 16 ms (the two +/-8 ms parabola
# refinements). Breathing rate: the 0.1-0.7 Hz breathing band.
_HR = (20.0, 300.0)
_NN = (200.0, 3000.0)
_NONNEG: tuple[float | None, float | None] = (0.0, None)
_PCT = (0.0, 100.0)
_UNIT = (0.0, 1.0)
_BREATH = (6.0, 42.0)

_HR_FLAGS = ("heart_rate.flags",)
_TD = "variability.time_domain"
_FD = "variability.frequency_domain"
_NL = "variability.nonlinear"
_MO = "morphology"
_RE = "respiration"
_MD = "modulation"


def _hr(name: str, attr: str, text: str) -> FeatureDefinition:
    return FeatureDefinition(name, "heart_rate", "/min", text, _HR, _OURS, f"heart_rate.{attr}",
                             "heart_rate.confidence", (), _HR_FLAGS)


def _var(name: str, block: str, attr: str, unit: str | None, text: str,
         rng: tuple[float | None, float | None], ref: str,
         keys: tuple[str, ...] = ()) -> FeatureDefinition:
    return FeatureDefinition(name, "variability", unit, text, rng, ref, f"{block}.{attr}",
                             f"{block}.confidence", (), (f"{block}.flags", "variability.flags"),
                             keys)


def _morph(name: str, attr: str, unit: str | None, text: str,
           rng: tuple[float | None, float | None], waves: tuple[str, ...],
           ref: str = _INAN, conf: str = "confidence") -> FeatureDefinition:
    return FeatureDefinition(name, "morphology", unit, text, rng, ref, f"{_MO}.{attr}",
                             f"{_MO}.{conf}", waves, (f"{_MO}.flags",))


def _resp(name: str, attr: str, unit: str | None, text: str,
          rng: tuple[float | None, float | None], ref: str) -> FeatureDefinition:
    return FeatureDefinition(name, "respiration", unit, text, rng, ref, f"{_RE}.{attr}",
                             f"{_RE}.confidence", (), (f"{_RE}.flags",))


def _mod(name: str, attr: str, conf: str, unit: str | None, text: str,
         rng: tuple[float | None, float | None], ref: str, key: str) -> FeatureDefinition:
    return FeatureDefinition(name, "modulation", unit, text, rng, ref, f"{_MD}.{attr}",
                             f"{_MD}.{conf}", (), (f"{_MD}.flags",), (key,))


_SIGNATURE_BANDS = ("62.5-125", "31.25-62.5", "15.6-31.25", "7.8-15.6", "3.9-7.8", "1.95-3.9")

FEATURES: tuple[FeatureDefinition, ...] = (
    _hr("heart_rate_mean_bpm", "mean_bpm",
        "60000 divided by the mean of the beat-to-beat intervals kept (normal and "
        "ectopic-like, not those screened out as detection errors)."),
    _hr("heart_rate_median_bpm", "median_bpm",
        "60000 divided by the median of the same intervals."),
    _var("mean_nn_ms", _TD, "mean_nn_ms", "ms",
         "Mean of the normal-to-normal (NN) intervals.", _NN, _TASK_FORCE),
    _var("sdnn_ms", _TD, "sdnn_ms", "ms",
         "Sample standard deviation (ddof=1) of the NN intervals.", (0.0, 1400.0), _TASK_FORCE),
    _var("rmssd_ms", _TD, "rmssd_ms", "ms",
         "Root mean square of the differences of adjacent NN intervals.", (0.0, 2800.0),
         _TASK_FORCE),
    _var("sdsd_ms", _TD, "sdsd_ms", "ms",
         "Sample standard deviation of the differences of adjacent NN intervals.",
         (0.0, 2800.0), _TASK_FORCE),
    _var("pnn50_pct", _TD, "pnn50_pct", "%",
         "Share of adjacent-NN differences larger than 50 ms.", _PCT, _TASK_FORCE),
    _var("pnn20_pct", _TD, "pnn20_pct", "%",
         "Share of adjacent-NN differences larger than 20 ms.", _PCT, _TASK_FORCE),
    _var("cvnn_pct", _TD, "cvnn_pct", "%",
         "SDNN divided by the mean NN interval, in %.", _NONNEG, _TASK_FORCE),
    _var("vlf_power_ms2", _FD, "vlf_power_ms2", "ms2",
         "Lomb-Scargle power of the NN series in 0.0033-0.04 Hz (needs 300 s).", _NONNEG,
         _LOMB, ("vlf",)),
    _var("lf_power_ms2", _FD, "lf_power_ms2", "ms2",
         "Lomb-Scargle power of the NN series in 0.04-0.15 Hz (needs 120 s).", _NONNEG, _LOMB,
         ("lf",)),
    _var("hf_power_ms2", _FD, "hf_power_ms2", "ms2",
         "Lomb-Scargle power of the NN series in 0.15-0.4 Hz (needs 60 s).", _NONNEG, _LOMB,
         ("hf",)),
    _var("lf_hf_ratio", _FD, "lf_hf_ratio", None,
         "LF power divided by HF power.", _NONNEG, _TASK_FORCE, ("lf_hf_ratio", "lf", "hf")),
    _var("sd1_ms", _NL, "sd1_ms", "ms",
         "Poincare plot SD1: spread of adjacent NN pairs across the line of identity.",
         _NONNEG, _BRENNAN, ("poincare",)),
    _var("sd2_ms", _NL, "sd2_ms", "ms",
         "Poincare plot SD2: spread of adjacent NN pairs along the line of identity.",
         _NONNEG, _BRENNAN, ("poincare",)),
    _var("sample_entropy", _NL, "sample_entropy", None,
         "Sample entropy SampEn(m=2, r=0.2 SD) of the NN series, natural log (needs 200 "
         "intervals).", _NONNEG, _RICHMAN),
    _var("dfa_alpha1", _NL, "dfa_alpha1", None,
         "Short-term (4-16 beats) scaling exponent of detrended fluctuation analysis of the "
         "NN series.", (None, None), _PENG),
    _morph("ij_interval_ms", "ij_interval_ms", "ms",
           "Time from the I-wave minimum to the J-wave maximum of the beat-ensemble template.",
           (24.0, 166.0), ("I", "J"),
           conf="ij_interval_confidence"),
    _morph("jk_interval_ms", "jk_interval_ms", "ms",
           "Time from the J-wave maximum to the K-wave minimum of the template.",
           (24.0, 216.0), ("J", "K"),
           conf="jk_interval_confidence"),
    _morph("ik_interval_ms", "ik_interval_ms", "ms",
           "Time from the I-wave minimum to the K-wave minimum of the template.",
           (48.0, 382.0), ("I", "J", "K")),
    _morph("hj_interval_ms", "hj_interval_ms", "ms",
           "Time from the H-wave maximum to the J-wave maximum of the template.",
           (18.0, 332.0), ("H", "I", "J")),
    _morph("j_width_ms", "j_width_ms", "ms",
           "Full width of the J wave at half its height above the line joining the I and K "
           "extrema.", (0.0, 382.0), ("I", "J", "K")),
    _morph("ij_amplitude", "ij_amplitude", AMPLITUDE_UNIT,
           "Peak-to-peak amplitude J minus I of the template, in the input's amplitude unit.",
           (0.0, None), ("I", "J"),
           conf="ij_amplitude_confidence"),
    _morph("jk_amplitude", "jk_amplitude", AMPLITUDE_UNIT,
           "Peak-to-peak amplitude J minus K of the template, in the input's amplitude unit.",
           (0.0, None), ("J", "K"),
           conf="jk_amplitude_confidence"),
    _morph("ij_amplitude_per_kg", "ij_amplitude_per_kg", AMPLITUDE_UNIT + "/kg",
           "ij_amplitude divided by the body mass (stated, else the measured load); None "
           "without a mass.", (0.0, None), ("I", "J"),
           conf="ij_amplitude_confidence"),
    _morph("jk_amplitude_per_kg", "jk_amplitude_per_kg", AMPLITUDE_UNIT + "/kg",
           "jk_amplitude divided by the body mass (stated, else the measured load); None "
           "without a mass.", (0.0, None), ("J", "K"),
           conf="jk_amplitude_confidence"),
    _morph("template_correlation", "template_correlation_median", None,
           "Median Pearson correlation of the template beats with the template.",
           (-1.0, 1.0), (), _OURS),
    _morph("jk_amplitude_cv_pct", "jk_amplitude_cv_pct", "%",
           "Coefficient of variation (SD, ddof=1, over the mean) of the per-beat J-K "
           "amplitudes of the beats correlating >= 0.5 with the template.", _NONNEG, ("J", "K"),
           _OURS),
    *(
        _morph(f"wavelet_energy_d{k + 1}", f"wavelet_signature[{k}]", None,
               f"Share of the template's stationary-wavelet detail energy in level d{k + 1} "
               f"({band} Hz; template resampled to 250 Hz, sym4, 6 levels; the six shares sum "
               "to 1).", _UNIT, (), _PYWT)
        for k, band in enumerate(_SIGNATURE_BANDS)
    ),
    _resp("breathing_rate_per_min", "rate_per_min", "/min",
          "Breathing rate: mean of breathing_rate_counted_per_min and "
          "breathing_rate_spectral_per_min when their SD is at most 4 per min (Smart Fusion), "
          "else None.", _BREATH, _KARLEN),
    _resp("breathing_rate_counted_per_min", "counted_rate_per_min", "/min",
          "Breathing rate by counting: 60 over the median interval between breaths detected "
          "with hysteresis on the 0.1-0.7 Hz band of the trace.", _BREATH, _OURS),
    _resp("breathing_rate_spectral_per_min", "spectral_rate_per_min", "/min",
          "Breathing rate at the Welch spectral peak of the breathing band.", _BREATH, _WELCH),
    _resp("breath_interval_cv_pct", "interval_cv_pct", "%",
          "Coefficient of variation of the breath-to-breath intervals.", _NONNEG, _OURS),
    _resp("breathing_rise_fall_ratio", "rise_fall_ratio", None,
          "Median rise (trough to peak) time over median fall time of the breathing signal; "
          "not an inspiration/expiration ratio, since the sign of a force trace does not tell "
          "them apart.", (0.0, None), _OURS),
    _resp("breathing_amplitude", "breathing_amplitude", AMPLITUDE_UNIT,
          "Robust amplitude (1.4826 x MAD) of the breathing signal; None when the breathing "
          "signal came from the centre of pressure (another unit).", _NONNEG, _OURS),
    _resp("breathing_pauses_per_hour", "pauses_per_hour", "/h",
          "Breathing pauses of 10 s or more (swing below 25 % of the surrounding baseline) per "
          "usable hour; a signal observation, not a diagnosis.", _NONNEG, _AASM),
    _mod("rsa_ms", "rsa_ms", "rsa_confidence", "ms",
         "Respiratory sinus arrhythmia, peak-to-trough: median over breaths of the longest "
         "minus the shortest NN interval ending within the breath.", _NONNEG, _GROSSMAN, "rsa"),
    _mod("amplitude_index", "amplitude_index", "amplitude_confidence", None,
         "Respiratory modulation of beat amplitude: (max - min) / mean of the first-harmonic "
         "fit of the per-beat J-K amplitudes against breathing phase.", _NONNEG, _OURS,
         "amplitude"),
    _mod("timing_modulation_pct", "timing_modulation_pct", "timing_confidence", "%",
         "Share of the NN-series Lomb-Scargle power within 0.05 Hz of the breathing frequency "
         "(of the power from 0.04 Hz to the beat-series Nyquist frequency).", _PCT, _LOMB,
         "timing"),
    _mod("baseline_modulation_ratio", "baseline_modulation_ratio", "baseline_confidence", None,
         "Median per-breath peak-to-trough of the breathing signal over the J-K amplitude; "
         "None when the breathing signal came from the centre of pressure.", _NONNEG, _OURS,
         "baseline"),
    _mod("cardiorespiratory_coherence", "coherence", "coherence_confidence", None,
         "Magnitude-squared coherence of the 4-Hz NN series and the breathing signal at the "
         "breathing frequency (Welch, 32-s Hann segments).", _UNIT, _CARTER, "coherence"),
    FeatureDefinition("usable_fraction", "quality", None,
                      "Fraction of the recording not masked as movement or another artifact.",
                      _UNIT, _OURS, "quality.usable_fraction", "quality.confidence", (),
                      ("quality.flags",)),
)

FEATURE_NAMES: tuple[str, ...] = tuple(d.name for d in FEATURES)

# Features whose unit is the unit of the breathing signal: None when it is not the trace's.
_BREATHING_SIGNAL_UNIT = frozenset({"breathing_amplitude", "baseline_modulation_ratio"})
_INDEX = re.compile(r"^(\w+)\[(\d+)\]$")


def feature_definition(name: str) -> FeatureDefinition:
    """Return the catalogue entry called ``name``.

    Raises
    ------
    KeyError
        When ``name`` is not in the catalogue.
    """
    for d in FEATURES:
        if d.name == name:
            return d
    raise KeyError(name)


def feature_vector(result: AnalysisResult) -> FeatureVector:
    """Read every catalogue feature from one analysis, in catalogue order.

    Parameters
    ----------
    result
        The result of :func:`features.engine.analyze`.

    Returns
    -------
    FeatureVector
        One :class:`FeatureValue` per catalogue entry, always all of them, in the order of
        :data:`FEATURES`, with ``feature_set_version`` of the result.

    Notes
    -----
    1. The value is read at the entry's ``path``. It is kept when it is a finite number
       inside ``valid_range`` (inclusive); otherwise it becomes None with reason
       ``"not_finite"`` or ``"outside_valid_range"``.
    2. A value the engine left None gets as reason the heart-rate result's ``reason`` (for
       heart-rate features), else the first flag of the entry's flag tuples that names the
       feature (starts with its stem, for example ``sdnn`` for ``sdnn_ms``), else the first
       flag that reads as a reason (contains ``needs``, ``too_few``, ``no_``,
       ``not_found``, ``undefined``, ``limited`` or ``zero``), else ``"not_computed"``.
    3. Confidence is read at ``confidence_path`` and clipped to [0, 1]; for morphology
       features that depend on located waves it is capped by the lowest confidence of those
       waves (a missing wave counts 0). A None value has confidence 0.
    4. The unit template ``{amplitude_unit}`` becomes ``result.input.amplitude_unit``. When
       the breathing signal came from the centre of pressure (``respiration.source``), the
       two features measured in its unit (``breathing_amplitude``,
       ``baseline_modulation_ratio``) are None with reason
       ``"breathing_from_centre_of_pressure"``, so that a feature's unit never changes
       between analyses of one input.
    """
    unit = result.input.amplitude_unit
    from_cop = getattr(result.respiration, "source", "trace") != "trace"
    values = []
    for d in FEATURES:
        resolved = None if d.unit is None else d.unit.replace(AMPLITUDE_UNIT, unit)
        if from_cop and d.name in _BREATHING_SIGNAL_UNIT:
            values.append(FeatureValue(d.name, None, resolved, 0.0,
                                       "breathing_from_centre_of_pressure"))
            continue
        value, reason = _value(d, result)
        confidence = 0.0 if value is None else _confidence(d, result)
        values.append(FeatureValue(d.name, value, resolved, confidence, reason))
    return FeatureVector(feature_set_version=result.feature_set_version, features=tuple(values))


def catalogue_fingerprint() -> str:
    """SHA-256 (hex) of the catalogue's names, units, definitions, ranges and paths."""
    text = "\n".join(
        "|".join((d.name, d.family, str(d.unit), d.definition, repr(d.valid_range), d.path,
                  d.confidence_path, ",".join(d.confidence_waves)))
        for d in FEATURES
    )
    return hashlib.sha256(text.encode("utf-8")).hexdigest()


def catalogue_markdown() -> str:
    """The text of ``docs/features.md``: every feature with definition, unit, range, reference.

    Regenerate the document with ``python tests/test_feature_list_doc.py``; the test in that
    file fails while the two differ.
    """
    lines = [
        "# Feature catalogue",
        "",
        "<!-- Generated by features.feature_vector.catalogue_markdown(); do not edit by hand."
        " -->",
        "",
        f"Feature set version: **{FEATURE_SET_VERSION}** ({len(FEATURES)} features; "
        f"catalogue fingerprint `{catalogue_fingerprint()[:16]}`).",
        "",
        "`features.feature_vector.feature_vector(result)` returns every feature below, in this "
        "order, with a value (a finite number inside the valid range, or null with a reason), "
        "its unit and a confidence in [0, 1]. Units are UCUM symbols; `{amplitude_unit}` is "
        "the unit of the fused input trace (`N`, `m/s^2`, or `a.u.` for mixed inputs). A "
        "computed value outside the valid range is reported as null with reason "
        "`outside_valid_range`. The version changes whenever a definition does.",
        "",
    ]
    family = None
    for i, d in enumerate(FEATURES, start=1):
        if d.family != family:
            family = d.family
            lines += [f"## {family.replace('_', ' ').capitalize()}", ""]
        conf = f"`{d.confidence_path}`"
        if d.confidence_waves:
            conf += f", capped by the confidence of waves {', '.join(d.confidence_waves)}"
        lines += [
            f"### {i}. `{d.name}`",
            "",
            f"- Definition: {d.definition}",
            f"- Unit: {'dimensionless' if d.unit is None else '`' + d.unit + '`'}",
            f"- Valid range: {_range_text(d.valid_range)}"
            + ("" if d.unit is None or d.valid_range == (None, None) else f" {d.unit}"),
            f"- Source: `{d.path}`; confidence: {conf}",
            f"- Reference: {d.reference}",
            "",
        ]
    return "\n".join(lines)


# --------------------------------------------------------------------------- kernels


def _range_text(rng: tuple[float | None, float | None]) -> str:
    lo, hi = rng
    if lo is None and hi is None:
        return "unbounded"
    if hi is None:
        return f">= {lo:g}"
    if lo is None:
        return f"<= {hi:g}"
    return f"{lo:g} to {hi:g}"


def _get(obj: Any, path: str) -> Any:
    """Follow a dotted attribute path; ``name[k]`` indexes a sequence (None when absent)."""
    for part in path.split("."):
        m = _INDEX.match(part)
        obj = getattr(obj, m.group(1) if m else part, None)
        if m and obj is not None:
            k = int(m.group(2))
            obj = obj[k] if k < len(obj) else None
        if obj is None:
            return None
    return obj


def _value(d: FeatureDefinition, result: AnalysisResult) -> tuple[float | None, str | None]:
    raw = _get(result, d.path)
    if raw is None:
        return None, _reason(d, result)
    value = float(raw)
    if not math.isfinite(value):
        return None, NOT_FINITE
    lo, hi = d.valid_range
    if (lo is not None and value < lo) or (hi is not None and value > hi):
        return None, OUTSIDE_VALID_RANGE
    return value, None


def _reason(d: FeatureDefinition, result: AnalysisResult) -> str:
    if d.family == "heart_rate" and result.heart_rate.reason:
        return str(result.heart_rate.reason)
    flags = [str(f) for p in d.flags_paths for f in (_get(result, p) or ())]
    stem = re.sub(r"_(ms2|ms|bpm|pct|per_min|per_hour|s)$", "", d.path.rsplit(".", 1)[-1])
    for key in d.reason_keys or (_INDEX.sub(r"\1", stem),):
        named = re.compile(rf"(^|_){re.escape(key)}(_|$)")
        for f in flags:
            if named.search(f):
                return f
    # Then a flag that explains the whole family (it names no single feature), then any.
    reasons = [f for f in flags if any(w in f for w in _REASON_WORDS)]
    for f in reasons:
        if "_needs_" not in f and "_for_" not in f:
            return f
    return reasons[0] if reasons else NOT_COMPUTED


def _confidence(d: FeatureDefinition, result: AnalysisResult) -> float:
    raw = _get(result, d.confidence_path)
    c = float(raw) if raw is not None and math.isfinite(float(raw)) else 0.0
    for name in d.confidence_waves:
        wave = result.morphology.wave(name)
        c = min(c, 0.0 if wave is None or wave.time_ms is None else float(wave.confidence))
    return min(1.0, max(0.0, c))
