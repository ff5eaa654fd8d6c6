"""The engine's entry point: channels in, a feature result out.

``analyze`` chains the stages, each in its own module: conditioning (units,
kinetic form, mains hum, static load), fusion (channels to one trace, centre
of pressure), artifact masking, beat detection, interval screening, heart
rate, variability, and (when available) morphology and respiration.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np

from features import __version__
from features.artifacts import ArtifactMask, Segment, mask_artifacts
from features.beats import BeatDetection, detect_beats
from features.conditioning import ChannelInput, condition_channels
from features.errors import InvalidInputError
from features.fusion import fuse_channels
from features.heart_rate import HeartRateResult, heart_rate
from features.intervals import (
    IntervalLabels,
    IntervalSeries,
    classify_intervals,
    intervals_from_beats,
)
from features.modulation import ModulationResult, respiratory_modulation
from features.morphology import MorphologyResult, beat_morphology
from features.respiration import RespirationResult, breathing
from features.variability import VariabilityResult, heart_rate_variability

FEATURE_SET_VERSION = "3"
"""Changes whenever the definition of any emitted feature changes."""

PLACEMENTS = ("bed", "other", "platform", "seat")

MOVEMENT_PAD_S = 0.5
"""Masked time added either side of a movement. A seated body settles within a few
tenths of a second after a fidget (support damping ratio 0.2-0.5 at 4-8 Hz gives a
decay time constant 1/(zeta*omega) under 0.2 s; textbook mass-spring-damper); the beat
stage bridges masked spans, so the wavelet filters add no further leakage."""


@dataclass(frozen=True)
class Subject:
    """Who sat on the support. Every field is optional."""

    body_mass_kg: float | None = None
    age_years: float | None = None
    sex: str | None = None


@dataclass(frozen=True)
class Recording:
    """Where and how the trace was taken. Identifiers are never logged."""

    placement: str = "seat"
    posture: str | None = None
    start_time: str | None = None
    device_id: str | None = None


@dataclass(frozen=True)
class Options:
    """Analysis options, in physical units.

    Attributes
    ----------
    mains_hz
        50 or 60 to remove that hum, "auto" to detect it, None to skip.
    empty_load_kg
        Load of the empty support (0 for a tared plate).
    rate_range_bpm
        Plausible heart-rate range.
    """

    mains_hz: float | str | None = "auto"
    empty_load_kg: float = 0.0
    rate_range_bpm: tuple[float, float] = (30.0, 200.0)


@dataclass(frozen=True)
class InputSummary:
    """What the engine received and how it combined the channels."""

    duration_s: float
    sampling_rate_hz: float
    n_samples: int
    channel_labels: tuple[str, ...]
    channel_weights: tuple[float, ...]
    fusion_method: str
    amplitude_unit: str
    mains_hz_removed: float | None
    cop_cardiac_excursion_mm: float | None
    flags: tuple[str, ...]


@dataclass(frozen=True)
class QualityResult:
    """Usable share of the recording and the masked segments."""

    usable_fraction: float
    segments: tuple[Segment, ...]
    confidence: float
    flags: tuple[str, ...]


@dataclass(frozen=True)
class OccupancyResult:
    """Whether someone sat on the support, from the load and the heartbeat.

    Attributes
    ----------
    occupied
        True, False, or None when neither load nor heartbeat can tell.
    supported_mass_kg
        Static load over standard gravity, less the empty load; None without
        force channels.
    from_load, from_heartbeat
        The two independent pieces of evidence (None when not available).
    confidence
        0.95 when both agree, 0.7 when only one is available, 0.4 when they
        disagree (``occupied`` is then True: a heartbeat or a load is there, and the
        flag ``load_and_heartbeat_disagree`` says which evidence is missing), 0.0
        when neither is. Only ``dc`` channels give load evidence.
    """

    occupied: bool | None
    supported_mass_kg: float | None
    from_load: bool | None
    from_heartbeat: bool
    confidence: float
    flags: tuple[str, ...]


@dataclass(frozen=True)
class AnalysisResult:
    """Everything the engine computed for one recording."""

    input: InputSummary
    quality: QualityResult
    occupancy: OccupancyResult
    heart_rate: HeartRateResult
    beats: BeatDetection
    intervals: IntervalSeries
    interval_labels: IntervalLabels
    variability: VariabilityResult
    morphology: MorphologyResult
    respiration: RespirationResult
    modulation: ModulationResult
    body_mass_kg: float | None
    body_mass_source: str | None
    warnings: tuple[str, ...]
    engine_version: str = __version__
    feature_set_version: str = FEATURE_SET_VERSION


def analyze(
    channels: Sequence[ChannelInput],
    fs_hz: float,
    *,
    subject: Subject | None = None,
    recording: Recording | None = None,
    options: Options | None = None,
) -> AnalysisResult:
    """Analyse one recording of one to eight equal-length channels.

    Parameters
    ----------
    channels
        One to eight :class:`features.conditioning.ChannelInput`, equal length.
    fs_hz
        Sampling rate in Hz, 50 to 2000.
    subject, recording, options
        Optional metadata and options.

    Returns
    -------
    AnalysisResult

    Raises
    ------
    InvalidInputError
        When any input breaks a documented rule (the field is named).
    """
    subject = subject or Subject()
    recording = recording or Recording()
    options = options or Options()
    _check_metadata(subject, recording)

    cond = condition_channels(channels, fs_hz, mains_hz=options.mains_hz,
                              empty_load_kg=options.empty_load_kg)
    # The centre of pressure needs calibrated cells that carry the weight.
    force_only = all(q == "force" for q in cond.quantities) and \
        all(c == "dc" for c in cond.couplings)
    fusion = fuse_channels(
        cond.signals, fs_hz, units=cond.units,
        positions_m=cond.positions_m if force_only else None,
        static_n=cond.baseline_si if force_only and cond.positions_m is not None else None,
        static_fs_hz=cond.baseline_fs_hz,
    )
    # A load that says "empty" for the whole record does not mask it: the beats are
    # looked for, and a heartbeat found against it is reported as a disagreement.
    load_n = cond.load_trace_n if cond.occupancy_from_load is not False else None
    mask: ArtifactMask = mask_artifacts(fusion.fused, fs_hz, load_n=load_n,
                                        load_fs_hz=cond.baseline_fs_hz,
                                        raw_signals=cond.raw_signals, pad_s=MOVEMENT_PAD_S)
    beats = detect_beats(fusion.fused, fs_hz, usable=mask.usable,
                         rate_range_bpm=options.rate_range_bpm)
    series = intervals_from_beats(beats.times_s, run_ids=beats.run_ids)
    labels = classify_intervals(series.times_s, series.intervals_ms)
    occupancy = _occupancy(cond.occupancy_from_load, cond.supported_mass_kg, beats)
    hr = heart_rate(beats, series, labels, occupied=occupancy.occupied)
    hrv = heart_rate_variability(series.times_s, series.intervals_ms, labels.labels)
    # The load gives a mass only where it is itself the evidence of an occupant.
    mass, mass_source = _body_mass(subject, cond.supported_mass_kg,
                                   bool(occupancy.occupied and occupancy.from_load))
    morph = beat_morphology(
        fusion.fused * (beats.polarity or 1), fs_hz, beats.times_s,
        beat_confidence=beats.confidence, usable=mask.usable, body_mass_kg=mass,
        amplitude_unit=fusion.unit,
    )
    # No occupant (no heartbeat and no load, or an empty load without a heartbeat): no
    # breathing either, as when the empty support was masked before the beats.
    resp_usable = mask.usable if occupancy.occupied is not False else \
        np.zeros_like(mask.usable)
    resp = breathing(fusion.fused, fs_hz, usable=resp_usable,
                     cop_signal=fusion.cop_respiratory_m, cop_fs_hz=fusion.cop_fs_hz)
    modulation = respiratory_modulation(
        resp.breathing_signal, resp.breathing_fs_hz,
        beat_times_s=beats.times_s, breath_times_s=resp.breath_times_s,
        interval_ms=labels.nn_intervals_ms, interval_times_s=labels.nn_times_s,
        beat_amplitudes=morph.beat_jk_amplitudes, amplitude_times_s=morph.beat_times_s,
        cardiac_amplitude=morph.jk_amplitude,
    )

    warnings: list[str] = []
    if mask.usable_fraction < 0.5:
        warnings.append("less than half of the recording is usable")
    if not beats.has_beats:
        warnings.append("no repeating heartbeat waveform was found")
    mass = subject.body_mass_kg
    if mass is not None and cond.supported_mass_kg is not None and \
            abs(cond.supported_mass_kg - mass) > 0.25 * mass:
        warnings.append("the load on the support differs from the stated body mass by over 25%")

    n_samples = int(cond.signals.shape[1])
    quality = QualityResult(
        usable_fraction=mask.usable_fraction,
        segments=mask.segments,
        confidence=float(mask.usable_fraction * (1.0 if beats.has_beats else 0.2)),
        flags=_quality_flags(mask.flags, cond.occupancy_from_load),
    )
    summary = InputSummary(
        duration_s=n_samples / fs_hz,
        sampling_rate_hz=float(fs_hz),
        n_samples=n_samples,
        channel_labels=cond.labels,
        channel_weights=tuple(float(w) for w in fusion.weights),
        fusion_method=fusion.method,
        amplitude_unit=fusion.unit,
        mains_hz_removed=cond.mains_hz_removed,
        cop_cardiac_excursion_mm=fusion.cop_cardiac_excursion_mm,
        flags=tuple(cond.flags) + tuple(fusion.flags),
    )
    return AnalysisResult(
        input=summary,
        quality=quality,
        occupancy=occupancy,
        heart_rate=hr,
        beats=beats,
        intervals=series,
        interval_labels=labels,
        variability=hrv,
        morphology=morph,
        respiration=resp,
        modulation=modulation,
        body_mass_kg=mass,
        body_mass_source=mass_source,
        warnings=tuple(warnings),
    )


def _quality_flags(mask_flags: Sequence[str], from_load: bool | None) -> tuple[str, ...]:
    """The mask's flags; a load that said "empty" throughout is named, not masked."""
    if from_load is not False:
        return tuple(mask_flags)
    kept = [f for f in mask_flags if f != "empty_support_not_checked_no_load"]
    return (*kept, "load_says_empty_whole_record_not_masked")


def _check_metadata(subject: Subject, recording: Recording) -> None:
    m = subject.body_mass_kg
    if m is not None and not (np.isfinite(m) and 2.0 <= m <= 400.0):
        raise InvalidInputError(
            "subject.body_mass_kg", f"`subject.body_mass_kg` must be between 2 and 400 kg; got {m}."
        )
    if recording.placement not in PLACEMENTS:
        raise InvalidInputError(
            "recording.placement",
            f"`recording.placement` must be one of {', '.join(PLACEMENTS)}; "
            f"got {recording.placement!r}.",
        )


def _body_mass(subject: Subject, supported_mass_kg: float | None,
               occupied: bool | None) -> tuple[float | None, str | None]:
    """Mass for the per-kilogram amplitudes: the stated one, else the measured load."""
    if subject.body_mass_kg is not None:
        return float(subject.body_mass_kg), "subject"
    if occupied and supported_mass_kg is not None and supported_mass_kg > 0:
        return float(supported_mass_kg), "load"
    return None, None


def _occupancy(from_load: bool | None, mass_kg: float | None,
               beats: BeatDetection) -> OccupancyResult:
    from_beat = bool(beats.has_beats)
    flags: list[str] = []
    if from_load is None:
        occupied: bool | None = from_beat
        conf = 0.7
        flags.append("no_load_information")
    elif from_load == from_beat:
        occupied, conf = from_load, 0.95
    else:
        # A heartbeat is direct evidence of an occupant; a load that says "empty"
        # against it (an uncalibrated or partial load) is reported, not trusted. No
        # heartbeat under a load keeps the load's answer. Both with low confidence.
        occupied, conf = True, 0.4
        flags.append("load_and_heartbeat_disagree")
    return OccupancyResult(occupied=occupied, supported_mass_kg=mass_kg, from_load=from_load,
                           from_heartbeat=from_beat, confidence=conf, flags=tuple(flags))
