"""Simulated validation cohort: run the engine and the naive baseline on varied recordings.

Usage::

    python -m validation.cohort [--quick] [--seed N] [--json PATH]

Each case is a recording from :func:`simulation.simulate` with known truth. The
engine (``features.analyze``) and the baseline (:mod:`validation.baseline`) run on the same
channels; their beats are matched to the truth J times with :func:`validation.matching.
match_beats` (tolerance 150 ms).

Scoring rule for artifacts: reference beats inside a truth movement or posture span widened
by 1 s on each side are excluded from the reference (the engine is expected not to report
beats there), and detections inside the same widened spans are ignored; a detection counts as
a false positive only when it lies outside every widened span.

Heart-rate error is the reported mean rate minus the truth rate (60 / mean J-J interval of
the truth beats). Calibration: among occupied cases whose heart-rate confidence is at least
0.5, the fraction with |error| <= 3 bpm. Empty cases (no occupant) are checked for: heart
rate None, occupancy False, heart-rate confidence below 0.3.
"""

from __future__ import annotations

import argparse
import dataclasses
import json
import math
import sys
import time
from collections.abc import Callable, Sequence
from dataclasses import dataclass

import numpy as np

from features import ChannelInput, Subject, analyze
from simulation import SimulatedRecording, SimulationSettings, simulate
from simulation.front_ends import sensor_trace
from validation.baseline import detect_beats_baseline
from validation.matching import BeatMatch, match_beats

__all__ = [
    "CaseResult",
    "CaseSpec",
    "CohortReport",
    "DetectorOutcome",
    "baseline_detector",
    "build_cases",
    "engine_detector",
    "format_report",
    "main",
    "run_cohort",
]

TOLERANCE_MS = 150.0
MARGIN_S = 1.0
HR_TOLERANCE_BPM = 3.0
CONFIDENT = 0.5
EMPTY_CONFIDENCE_MAX = 0.3
#: Beat acceptance of issue 12: pooled Se and PPV, mean interval error, every case's Se and
#: PPV, and the interval error of cases on supports resonating at 3.5-5 Hz.
BEAT_LINE = 0.985
INTERVAL_LINE_MS = 4.5
CASE_LINE = 0.95
SOFT_SUPPORT_HZ = (3.5, 5.0)
SOFT_INTERVAL_LINE_MS = 8.0


@dataclass(frozen=True)
class CaseSpec:
    """One cohort case: a name, a short description and the simulation settings.

    ``with_subject`` False means the engine is given no body-mass metadata. ``sensor``
    names a kind of real sensor (``simulation.front_ends.SENSOR_KINDS``) that the
    simulated channels pass through before both detectors see them; None keeps the
    simulator's calibrated load cells.
    """

    name: str
    conditions: str
    settings: SimulationSettings
    with_subject: bool = True
    sensor: str | None = None


@dataclass(frozen=True)
class DetectorOutcome:
    """What a detector reports on one recording (None where it reports nothing)."""

    beat_times_s: np.ndarray
    mean_bpm: float | None
    confidence: float | None = None
    occupied: bool | None = None
    usable_fraction: float | None = None
    error: str | None = None


Detector = Callable[[SimulatedRecording, bool], DetectorOutcome]


@dataclass(frozen=True)
class CaseResult:
    """Scores of the engine and the baseline on one case."""

    name: str
    conditions: str
    empty: bool
    n_reference: int
    truth_bpm: float | None
    engine_se: float | None
    engine_ppv: float | None
    engine_interval_mae_ms: float | None
    engine_hr_error_bpm: float | None
    engine_hr_confidence: float | None
    engine_occupied: bool | None
    engine_usable_fraction: float | None
    engine_error: str | None
    engine_tp: int
    engine_fn: int
    engine_fp: int
    baseline_se: float | None
    baseline_ppv: float | None
    baseline_hr_error_bpm: float | None
    baseline_interval_mae_ms: float | None
    snr_db: float | None
    beats_baseline: bool | None
    baseline_tp: int
    baseline_fn: int
    baseline_fp: int
    seconds: float
    support_natural_hz: float | None = None


@dataclass(frozen=True)
class CohortReport:
    """All case results plus pooled summaries.

    Pooled Se and PPV sum TP, FN and FP over the occupied cases. ``calibration_fraction`` is
    the fraction of confident (HR confidence >= 0.5) occupied cases with |HR error| <= 3 bpm;
    None when no case is confident. The empty-case fields count cases meeting each check.
    """

    seed: int
    quick: bool
    engine_name: str
    tolerance_ms: float
    margin_s: float
    cases: tuple[CaseResult, ...]
    engine_se: float | None
    engine_ppv: float | None
    engine_interval_mae_ms: float | None
    engine_mean_abs_hr_error_bpm: float | None
    baseline_se: float | None
    baseline_ppv: float | None
    baseline_mean_abs_hr_error_bpm: float | None
    n_confident: int
    n_confident_within_tolerance: int
    calibration_fraction: float | None
    n_empty: int
    n_empty_hr_none: int
    n_empty_unoccupied: int
    n_empty_low_confidence: int
    n_errors: int
    n_beats_baseline: int
    n_compared: int
    worst_se_snr3: float | None
    worst_ppv_snr3: float | None
    misses: tuple[str, ...] = ()


# ---------------------------------------------------------------------------------------------
# Detectors
# ---------------------------------------------------------------------------------------------


def baseline_detector(recording: SimulatedRecording, with_subject: bool) -> DetectorOutcome:
    """Run the naive baseline; it ignores metadata and reports no confidence."""
    result = detect_beats_baseline(recording.channels, recording.fs_hz)
    return DetectorOutcome(beat_times_s=result.beat_times_s, mean_bpm=result.mean_bpm)


def engine_detector(recording: SimulatedRecording, with_subject: bool) -> DetectorOutcome:
    """Adapter to the engine entry point ``features.analyze`` (the only place that knows it).

    The channels are passed with their labels, quantity, unit and cell positions; the body
    mass is passed as subject metadata unless ``with_subject`` is False. Engine exceptions
    are recorded in ``error`` (class name and reason) instead of propagating, so one failing
    case does not hide the rest of the table.
    """
    positions = recording.positions_m
    channels = [
        ChannelInput(
            samples=samples,
            label=label,
            quantity=recording.quantity,
            unit=recording.unit,
            position_m=positions[i] if positions is not None else None,
        )
        for i, (samples, label) in enumerate(zip(recording.channels, recording.labels,
                                                   strict=True))
    ]
    subject = None
    mass = recording.truth.body_mass_kg
    if with_subject and mass is not None:
        subject = Subject(body_mass_kg=mass)
    try:
        result = analyze(channels, recording.fs_hz, subject=subject)
    except Exception as exc:  # recorded in the table, see docstring
        reason = getattr(exc, "reason", None) or getattr(exc, "field", None)
        return DetectorOutcome(
            beat_times_s=np.zeros(0), mean_bpm=None,
            error=f"{type(exc).__name__}" + (f"({reason})" if reason else ""),
        )
    beats = getattr(result, "beats", None)
    times = getattr(beats, "times_s", None) if beats is not None else None
    heart = getattr(result, "heart_rate", None)
    occupancy = getattr(result, "occupancy", None)
    quality = getattr(result, "quality", None)
    return DetectorOutcome(
        beat_times_s=np.zeros(0) if times is None else np.asarray(times, dtype=float),
        mean_bpm=getattr(heart, "mean_bpm", None),
        confidence=getattr(heart, "confidence", None),
        occupied=getattr(occupancy, "occupied", None),
        usable_fraction=getattr(quality, "usable_fraction", None),
    )


# ---------------------------------------------------------------------------------------------
# Cases
# ---------------------------------------------------------------------------------------------


def build_cases(*, quick: bool = False, seed: int = 0) -> tuple[CaseSpec, ...]:
    """The cohort: about 70 deterministic cases of 2-5 min (quick: 12 cases of 2 min).

    Case ``i`` uses simulation seed ``seed * 1000 + i``; durations cycle through 120, 180,
    240 and 300 s.
    """
    rows: list[tuple[str, str, dict[str, object], bool, str | None]] = []

    def add(name: str, conditions: str, with_subject: bool = True,
            sensor: str | None = None, **kw: object) -> None:
        rows.append((name, conditions, kw, with_subject, sensor))

    for bpm in (40, 55, 68, 85, 100, 120):
        add(f"rate_{bpm}", f"{bpm} bpm", heart_rate_bpm=float(bpm))
    for fs in (100, 500, 1000):
        add(f"fs_{fs}", f"{fs} Hz", fs_hz=float(fs))
    add("fs_100_fast", "100 Hz, 110 bpm", fs_hz=100.0, heart_rate_bpm=110.0)
    for snr in (20, 10, 6, 3, 0):
        add(f"snr_{snr}", f"SNR {snr} dB", snr_db=float(snr))
    add("inverted", "inverted polarity", polarity=-1)
    add("inverted_4cell", "4 cells, all inverted", polarity=-1, n_channels=4)
    add("ringing", "ringing support", support="ringing")
    add("ringing_fast", "ringing support, 100 bpm", support="ringing", heart_rate_bpm=100.0)
    add("firm", "firm support", support="firm")
    add("rigid_low_snr", "rigid support, 6 dB", support="rigid", snr_db=6.0)
    add("movement", "3 movement bursts", movement_count=3)
    add("posture", "2 posture changes", posture_change_count=2)
    add("movement_posture", "movement x2 + posture x1", movement_count=2,
        posture_change_count=1)
    add("movement_4cell", "4 cells, movement x3", movement_count=3, n_channels=4)
    add("ectopic_5", "5 % ectopic", ectopic_fraction=0.05)
    add("ectopic_12", "12 % ectopic", ectopic_fraction=0.12)
    add("irregular", "irregular rhythm 75 bpm", irregular_rhythm=True, heart_rate_bpm=75.0)
    add("irregular_fast", "irregular rhythm 105 bpm", irregular_rhythm=True,
        heart_rate_bpm=105.0)
    add("cells_4", "4 cells", n_channels=4)
    add("cells_4_inv", "4 cells, one inverted", n_channels=4, inverted_channel=1)
    add("cells_4_inv_noisy", "4 cells, one inverted, one noisy", n_channels=4,
        inverted_channel=2, noisy_channel=0)
    add("cells_4_low_snr", "4 cells, one inverted, 3 dB", n_channels=4, inverted_channel=3,
        snr_db=3.0)
    add("accel", "accelerometer", quantity="acceleration")
    add("accel_inverted", "accelerometer, inverted", quantity="acceleration", polarity=-1)
    add("mains_50", "50 Hz hum", mains_hz=50.0, mains_amplitude=1.0)
    add("mains_60_4cell", "4 cells, 60 Hz hum", mains_hz=60.0, n_channels=4)
    add("floor", "floor vibration", floor_vibration=True)
    add("apnoea", "2 breathing pauses", breathing_pause_count=2)
    add("strong_rsa", "RSA 150 ms, slow breathing", rsa_depth_ms=150.0,
        breathing_rate_per_min=8.0)
    add("sv_mod", "SV modulation 0.3", sv_modulation=0.3)
    add("light", "50 kg, low SV", body_mass_kg=50.0, stroke_volume_ml=50.0)
    add("heavy", "130 kg", body_mass_kg=130.0)
    add("adc", "quantised, clipped", adc_step=0.05, clip_range=(0.0, 740.0))
    add("hard_mix", "4 cells, 3 dB, ringing, movement, ectopic", n_channels=4, snr_db=3.0,
        support="ringing", movement_count=2, ectopic_fraction=0.05, inverted_channel=0)
    add("no_subject", "no body-mass metadata", with_subject=False)
    add("no_subject_4cell", "no metadata, 4 cells", with_subject=False, n_channels=4)
    add("no_subject_low_snr", "no metadata, 3 dB", with_subject=False, snr_db=3.0)
    add("empty_4cell", "empty, 4 cells", body_mass_kg=None, n_channels=4)
    add("empty_single", "empty, single", body_mass_kg=None)
    add("empty_4cell_floor", "empty, 4 cells, floor vibration", body_mass_kg=None,
        n_channels=4, floor_vibration=True)
    add("empty_single_mains", "empty, single, 50 Hz hum", body_mass_kg=None, mains_hz=50.0)
    add("empty_single_noisy", "empty, single, noisy", body_mass_kg=None, snr_db=0.0)
    # Real kinds of sensor (issue 12): counts of unknown scale, no body mass given.
    add("sensor_uncalibrated", "uncalibrated counts", with_subject=False,
        sensor="uncalibrated")
    add("sensor_ac_coupled", "AC-coupled counts, 0.3 Hz", with_subject=False,
        sensor="ac_coupled", heart_rate_bpm=58.0)
    add("sensor_film", "film (dF/dt), counts", with_subject=False, sensor="film",
        heart_rate_bpm=82.0)
    add("sensor_one_corner", "one corner cell of four, counts", with_subject=False,
        sensor="one_corner", n_channels=4)
    add("sensor_two_waves", "two comparable waves, 95 bpm", with_subject=False,
        sensor="two_waves", heart_rate_bpm=95.0)
    add("sensor_two_waves_slow", "two comparable waves, ringing, 62 bpm",
        with_subject=False, sensor="two_waves", heart_rate_bpm=62.0, support="ringing")
    add("sensor_swings", "breathing and posture swings 30x", with_subject=False,
        sensor="swings", breathing_rate_per_min=8.0)
    add("empty_uncalibrated", "empty, uncalibrated counts", with_subject=False,
        sensor="uncalibrated", body_mass_kg=None)
    add("empty_film", "empty, film (dF/dt)", with_subject=False, sensor="film",
        body_mass_kg=None, snr_db=0.0)
    # Soft supports (issue 12): a body on a soft mattress on a frame resonates at 3.5-5 Hz,
    # lightly damped ones ring after every beat with waves as large as J.
    add("soft_mattress", "soft support 4 Hz, zeta 0.3", support_natural_hz=4.0,
        support_damping_ratio=0.3)
    add("soft_3_5_fast", "soft support 3.5 Hz, zeta 0.25, 100 Hz, 90 bpm", fs_hz=100.0,
        heart_rate_bpm=90.0, support_natural_hz=3.5, support_damping_ratio=0.25)
    add("soft_5_low_snr", "soft support 5 Hz, zeta 0.3, 6 dB", support_natural_hz=5.0,
        support_damping_ratio=0.3, snr_db=6.0)
    add("soft_ringing", "soft ringing support 4 Hz, zeta 0.08, 75 bpm", heart_rate_bpm=75.0,
        support_natural_hz=4.0, support_damping_ratio=0.08)
    add("soft_ringing_slow", "soft ringing 4 Hz, zeta 0.08, 100 Hz, 60 bpm", fs_hz=100.0,
        heart_rate_bpm=60.0, support_natural_hz=4.0, support_damping_ratio=0.08)
    add("soft_ringing_4cell", "4 cells, soft ringing 4.5 Hz, zeta 0.1, movement",
        n_channels=4, support_natural_hz=4.5, support_damping_ratio=0.1, movement_count=2)
    # Heavy, slow or fast breathing and restless sitters (issue 12).
    add("breathing_heavy_slow", "heavy slow breathing, 6 /min, 12 N", breathing_rate_per_min=6.0,
        respiration_force_n=12.0, tidal_volume_l=1.2)
    add("breathing_fast", "fast breathing 32 /min, 100 bpm", breathing_rate_per_min=32.0,
        heart_rate_bpm=100.0)
    add("restless", "restless: movement x6, posture x3", movement_count=6,
        posture_change_count=3)
    add("sensor_swings_slow", "breathing and posture swings 30x, 5 /min",
        with_subject=False, sensor="swings", breathing_rate_per_min=5.0)

    if quick:
        keep = ("rate_68", "fs_100", "snr_3", "inverted", "ringing", "movement_posture",
                "ectopic_12", "irregular", "cells_4_inv_noisy", "accel", "empty_4cell",
                "empty_single")
        rows = [row for row in rows if row[0] in keep]
    durations = (120.0, 180.0, 240.0, 300.0)
    cases = []
    for i, (name, conditions, kw, with_subject, sensor) in enumerate(rows):
        duration = 120.0 if quick else durations[i % len(durations)]
        settings = SimulationSettings(duration_s=duration, seed=seed * 1000 + i,
                                      **kw)  # type: ignore[arg-type]
        cases.append(CaseSpec(name, f"{conditions}; {duration:.0f} s", settings, with_subject,
                              sensor))
    return tuple(cases)


# ---------------------------------------------------------------------------------------------
# Running and scoring
# ---------------------------------------------------------------------------------------------


def _hr_error(reported: float | None, truth: float | None) -> float | None:
    if reported is None or truth is None or not math.isfinite(reported):
        return None
    return float(reported - truth)


def _f1(m: BeatMatch) -> float:
    den = 2 * m.true_positives + m.false_positives + m.false_negatives
    return 2 * m.true_positives / den if den else 0.0


def _beats_baseline(m_eng: BeatMatch, m_base: BeatMatch, hr_eng: float | None,
                    hr_base: float | None) -> bool:
    """True when the engine is better on at least one score and worse on none.

    Scores: beat F1 (2TP / (2TP + FP + FN)), |HR error| and interval MAE. "Worse" allows
    for ties within 0.002 F1, 0.1 bpm and 0.1 ms; a missing engine value is worse, a
    missing baseline value is beaten by any engine value.
    """
    pairs: list[tuple[float | None, float | None, float]] = [
        (-_f1(m_eng), -_f1(m_base), 0.002),
        (None if hr_eng is None else abs(hr_eng), None if hr_base is None else abs(hr_base), 0.1),
        (m_eng.interval_mae_ms, m_base.interval_mae_ms, 0.1),
    ]
    better = False
    for e, b, tie in pairs:
        if e is None:
            return False
        if b is None or e < b - tie:
            better = True
        elif e > b + tie:
            return False
    return better


def _score_case(spec: CaseSpec, engine: Detector | None) -> CaseResult:
    started = time.perf_counter()
    rec = simulate(spec.settings)
    if spec.sensor is not None:
        rec = _as_sensor(rec, spec.sensor)
    truth = rec.truth
    spans = [(a.start_s, a.end_s) for a in truth.artifact_spans]
    empty = truth.body_mass_kg is None
    reference = truth.j_times_s

    eng = engine(rec, spec.with_subject) if engine is not None else None
    base = baseline_detector(rec, spec.with_subject)
    m_base = match_beats(reference, base.beat_times_s, tolerance_ms=TOLERANCE_MS,
                         exclude_spans_s=spans, margin_s=MARGIN_S)
    if eng is not None:
        m_eng = match_beats(reference, eng.beat_times_s, tolerance_ms=TOLERANCE_MS,
                            exclude_spans_s=spans, margin_s=MARGIN_S)
    return CaseResult(
        name=spec.name,
        conditions=spec.conditions,
        empty=empty,
        n_reference=int(m_base.true_positives + m_base.false_negatives),
        truth_bpm=truth.heart_rate_bpm,
        engine_se=m_eng.sensitivity if eng is not None else None,
        engine_ppv=m_eng.positive_predictivity if eng is not None else None,
        engine_interval_mae_ms=m_eng.interval_mae_ms if eng is not None else None,
        engine_hr_error_bpm=_hr_error(eng.mean_bpm, truth.heart_rate_bpm) if eng else None,
        engine_hr_confidence=eng.confidence if eng is not None else None,
        engine_occupied=eng.occupied if eng is not None else None,
        engine_usable_fraction=eng.usable_fraction if eng is not None else None,
        engine_error=eng.error if eng is not None else None,
        engine_tp=m_eng.true_positives if eng is not None else 0,
        engine_fn=m_eng.false_negatives if eng is not None else 0,
        engine_fp=m_eng.false_positives if eng is not None else 0,
        baseline_se=m_base.sensitivity,
        baseline_ppv=m_base.positive_predictivity,
        baseline_hr_error_bpm=_hr_error(base.mean_bpm, truth.heart_rate_bpm),
        baseline_interval_mae_ms=m_base.interval_mae_ms,
        snr_db=spec.settings.snr_db,
        beats_baseline=(None if eng is None or empty else _beats_baseline(m_eng, m_base,
                        _hr_error(eng.mean_bpm, truth.heart_rate_bpm),
                        _hr_error(base.mean_bpm, truth.heart_rate_bpm))),
        baseline_tp=m_base.true_positives,
        baseline_fn=m_base.false_negatives,
        baseline_fp=m_base.false_positives,
        seconds=time.perf_counter() - started,
        support_natural_hz=spec.settings.support_natural_hz,
    )


def _as_sensor(rec: SimulatedRecording, kind: str) -> SimulatedRecording:
    """The recording as one channel of the named kind of sensor (counts, no positions)."""
    trace = sensor_trace(rec, kind)
    return dataclasses.replace(rec, channels=(trace.samples,), labels=(f"sensor_{kind}",),
                               quantity=trace.quantity, unit=trace.unit, positions_m=None)


def _ratio(num: int, den: int) -> float | None:
    return num / den if den else None


def _mean_abs(values: Sequence[float | None]) -> float | None:
    vals = [abs(v) for v in values if v is not None]
    return float(np.mean(vals)) if vals else None


def run_cohort(
    quick: bool = False,
    seed: int = 0,
    *,
    engine: Detector | None | str = "auto",
    cases: Sequence[CaseSpec] | None = None,
) -> CohortReport:
    """Simulate the cohort, run the detectors and score them.

    Parameters
    ----------
    quick : bool
        12 cases of 2 min instead of the full cohort.
    seed : int
        Cohort seed (case ``i`` uses ``seed * 1000 + i``).
    engine : callable, None or "auto"
        Detector standing in for the engine; "auto" uses :func:`engine_detector` (the
        engine, ``features.analyze``); None runs the baseline only.
    cases : sequence of CaseSpec, optional
        Run these instead of :func:`build_cases`.

    Returns
    -------
    CohortReport
        Per-case rows and pooled summaries.
    """
    if engine == "auto":
        engine = engine_detector
    detector: Detector | None = engine if callable(engine) else None
    engine_name = "none" if detector is None else getattr(detector, "__name__", "engine")
    specs = tuple(cases) if cases is not None else build_cases(quick=quick, seed=seed)
    results = tuple(_score_case(spec, detector) for spec in specs)
    occupied = [r for r in results if not r.empty]
    empty = [r for r in results if r.empty]
    confident = [
        r for r in occupied
        if r.engine_hr_confidence is not None and r.engine_hr_confidence >= CONFIDENT
    ]
    within = [
        r for r in confident
        if r.engine_hr_error_bpm is not None and abs(r.engine_hr_error_bpm) <= HR_TOLERANCE_BPM
    ]
    e_tp = sum(r.engine_tp for r in occupied)
    b_tp = sum(r.baseline_tp for r in occupied)
    intervals = [r.engine_interval_mae_ms for r in occupied if r.engine_interval_mae_ms is not None]
    return CohortReport(
        seed=seed,
        quick=quick,
        engine_name=engine_name,
        tolerance_ms=TOLERANCE_MS,
        margin_s=MARGIN_S,
        cases=results,
        engine_se=_ratio(e_tp, e_tp + sum(r.engine_fn for r in occupied)) if detector else None,
        engine_ppv=_ratio(e_tp, e_tp + sum(r.engine_fp for r in occupied)) if detector else None,
        engine_interval_mae_ms=float(np.mean(intervals)) if intervals else None,
        engine_mean_abs_hr_error_bpm=_mean_abs([r.engine_hr_error_bpm for r in occupied]),
        baseline_se=_ratio(b_tp, b_tp + sum(r.baseline_fn for r in occupied)),
        baseline_ppv=_ratio(b_tp, b_tp + sum(r.baseline_fp for r in occupied)),
        baseline_mean_abs_hr_error_bpm=_mean_abs([r.baseline_hr_error_bpm for r in occupied]),
        n_confident=len(confident),
        n_confident_within_tolerance=len(within),
        calibration_fraction=_ratio(len(within), len(confident)),
        n_empty=len(empty),
        n_empty_hr_none=sum(1 for r in empty if detector and r.engine_hr_error_bpm is None
                            and r.engine_error is None),
        n_empty_unoccupied=sum(1 for r in empty if r.engine_occupied is False),
        n_empty_low_confidence=sum(
            1 for r in empty
            if r.engine_hr_confidence is not None and r.engine_hr_confidence < EMPTY_CONFIDENCE_MAX
        ),
        n_errors=sum(1 for r in results if r.engine_error is not None),
        n_beats_baseline=sum(1 for r in occupied if r.beats_baseline),
        n_compared=sum(1 for r in occupied if r.beats_baseline is not None),
        worst_se_snr3=_worst([r.engine_se for r in occupied if _snr_at_least(r, 3.0)]),
        worst_ppv_snr3=_worst([r.engine_ppv for r in occupied if _snr_at_least(r, 3.0)]),
        misses=tuple(_case_misses(occupied)) if detector else (),
    )


def _soft(r: CaseResult) -> bool:
    f = r.support_natural_hz
    return f is not None and SOFT_SUPPORT_HZ[0] <= f <= SOFT_SUPPORT_HZ[1]


def _case_misses(occupied: Sequence[CaseResult]) -> list[str]:
    """Every occupied case under a beat line of issue 12, with the lines it misses."""
    out = []
    for r in occupied:
        why = []
        for label, value in (("Se", r.engine_se), ("PPV", r.engine_ppv)):
            if value is not None and value < BEAT_LINE:
                why.append(f"{label} {value:.3f} < {CASE_LINE if value < CASE_LINE else BEAT_LINE}")
        ibi_line = SOFT_INTERVAL_LINE_MS if _soft(r) else INTERVAL_LINE_MS
        if r.engine_interval_mae_ms is not None and r.engine_interval_mae_ms > ibi_line:
            why.append(f"interval {r.engine_interval_mae_ms:.1f} ms > {ibi_line:g}")
        if r.engine_se is None or r.engine_tp == 0:
            why.append("no beat matched")
        if why:
            out.append(f"{r.name}: {'; '.join(why)}")
    return out


def _snr_at_least(r: CaseResult, snr_db: float) -> bool:
    return r.snr_db is None or r.snr_db >= snr_db


def _worst(values: Sequence[float | None]) -> float | None:
    kept = [v for v in values if v is not None]
    return min(kept) if kept else None


# ---------------------------------------------------------------------------------------------
# Output
# ---------------------------------------------------------------------------------------------


def _f(value: float | None, fmt: str) -> str:
    return "-" if value is None else format(value, fmt)


def _b(value: bool | None) -> str:
    return "-" if value is None else ("yes" if value else "no")


def format_report(report: CohortReport) -> str:
    """The cohort table and summaries as text (no raw samples)."""
    head = (f"{'case':<20} {'conditions':<50} {'n':>4} | {'Se':>5} {'PPV':>5} {'IBIms':>6} "
            f"{'HRerr':>6} {'conf':>5} {'occ':>4} {'usable':>6} | {'bSe':>5} {'bPPV':>5} "
            f"{'bHRerr':>6} {'bIBIms':>6} {'win':>4} | note")
    lines = [
        f"Validation cohort (seed {report.seed}{', quick' if report.quick else ''}); engine: "
        f"{report.engine_name}; match tolerance {report.tolerance_ms:.0f} ms; artifact margin "
        f"{report.margin_s:.0f} s",
        head,
        "-" * len(head),
    ]
    for r in report.cases:
        lines.append(
            f"{r.name:<20} {r.conditions[:50]:<50} {r.n_reference:>4} | "
            f"{_f(r.engine_se, '.3f'):>5} {_f(r.engine_ppv, '.3f'):>5} "
            f"{_f(r.engine_interval_mae_ms, '.1f'):>6} {_f(r.engine_hr_error_bpm, '+.1f'):>6} "
            f"{_f(r.engine_hr_confidence, '.2f'):>5} {_b(r.engine_occupied):>4} "
            f"{_f(r.engine_usable_fraction, '.2f'):>6} | "
            f"{_f(r.baseline_se, '.3f'):>5} {_f(r.baseline_ppv, '.3f'):>5} "
            f"{_f(r.baseline_hr_error_bpm, '+.1f'):>6} {_f(r.baseline_interval_mae_ms, '.1f'):>6} "
            f"{_b(r.beats_baseline):>4} | {r.engine_error or ''}"
        )
    lines.append("-" * len(head))
    lines.append(
        f"{'OVERALL (occupied)':<20} {'pooled TP/FN/FP; mean |HR err|; mean IBI MAE':<50} "
        f"{'':>4} | {_f(report.engine_se, '.3f'):>5} {_f(report.engine_ppv, '.3f'):>5} "
        f"{_f(report.engine_interval_mae_ms, '.1f'):>6} "
        f"{_f(report.engine_mean_abs_hr_error_bpm, '.1f'):>6} {'':>5} {'':>4} {'':>6} | "
        f"{_f(report.baseline_se, '.3f'):>5} {_f(report.baseline_ppv, '.3f'):>5} "
        f"{_f(report.baseline_mean_abs_hr_error_bpm, '.1f'):>6} |"
    )
    lines.append("")
    lines.append(
        f"Calibration: {report.n_confident_within_tolerance}/{report.n_confident} occupied "
        f"cases with HR confidence >= {CONFIDENT} have |HR error| <= {HR_TOLERANCE_BPM:.0f} bpm"
        f" ({_f(report.calibration_fraction, '.2f')})."
    )
    lines.append(
        f"Empty support ({report.n_empty} cases): heart rate None {report.n_empty_hr_none}, "
        f"occupancy False {report.n_empty_unoccupied}, HR confidence < {EMPTY_CONFIDENCE_MAX} "
        f"{report.n_empty_low_confidence}."
    )
    for r in report.cases:
        if r.empty:
            lines.append(
                f"  {r.name:<20} HR None: {_b(r.engine_hr_error_bpm is None)}; occupied False:"
                f" {_b(None if r.engine_occupied is None else not r.engine_occupied)}; "
                f"confidence < {EMPTY_CONFIDENCE_MAX}: "
                f"{_b(None if r.engine_hr_confidence is None else r.engine_hr_confidence < 0.3)}"
            )
    lines.append(
        f"Engine beats the baseline (better on beat F1, |HR error| or interval MAE, worse on "
        f"none) on {report.n_beats_baseline}/{report.n_compared} occupied cases."
    )
    lines.append(
        f"Worst per-case Se / PPV among cases with SNR >= 3 dB (or no noise): "
        f"{_f(report.worst_se_snr3, '.3f')} / {_f(report.worst_ppv_snr3, '.3f')}."
    )
    soft = [r for r in report.cases if _soft(r) and not r.empty]
    soft_ibi = [r.engine_interval_mae_ms for r in soft if r.engine_interval_mae_ms is not None]
    lines.append(
        f"Beat lines (issue 12): pooled Se and PPV >= {BEAT_LINE}, mean interval error <= "
        f"{INTERVAL_LINE_MS:g} ms, every case's Se and PPV >= {CASE_LINE}, cases on supports "
        f"at {SOFT_SUPPORT_HZ[0]:g}-{SOFT_SUPPORT_HZ[1]:g} Hz under {SOFT_INTERVAL_LINE_MS:g} ms "
        f"(worst of {len(soft)}: {_f(max(soft_ibi, default=None), '.1f')} ms). "
        f"Cases under a line ({len(report.misses)}; a case under {BEAT_LINE} but at least "
        f"{CASE_LINE} misses only the pooled aim):"
    )
    lines += [f"  {m}" for m in report.misses] or ["  none"]
    lines.append(f"Engine errors: {report.n_errors}.")
    return "\n".join(lines)


def _to_jsonable(value: object) -> object:
    if isinstance(value, float) and not math.isfinite(value):
        return None
    if isinstance(value, np.generic):
        return value.item()
    return value


def report_to_dict(report: CohortReport) -> dict[str, object]:
    """Plain-JSON form of the report."""
    data = dataclasses.asdict(report)
    data["cases"] = [{k: _to_jsonable(v) for k, v in c.items()} for c in data["cases"]]
    return {k: (_to_jsonable(v) if k != "cases" else v) for k, v in data.items()}


def main(argv: Sequence[str] | None = None) -> int:
    """Command-line entry point; prints the table, optionally writes JSON."""
    parser = argparse.ArgumentParser(prog="python -m validation.cohort", description=__doc__,
                                     formatter_class=argparse.RawDescriptionHelpFormatter)
    parser.add_argument("--quick", action="store_true", help="12 short cases")
    parser.add_argument("--seed", type=int, default=0, help="cohort seed (default 0)")
    parser.add_argument("--json", metavar="PATH", help="write the report as JSON")
    parser.add_argument("--baseline-only", action="store_true", help="skip the engine")
    args = parser.parse_args(argv)
    report = run_cohort(quick=args.quick, seed=args.seed,
                        engine=None if args.baseline_only else "auto")
    print(format_report(report))
    if args.json:
        with open(args.json, "w", encoding="utf-8") as fh:
            json.dump(report_to_dict(report), fh, indent=2)
    return 0


if __name__ == "__main__":
    sys.exit(main())
