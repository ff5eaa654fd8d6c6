"""The engine's entry point: channels in, a feature result out.

``analyze`` chains the stages, each in its own module: conditioning (units,
kinetic form, mains hum, static load), fusion (channels to one trace, centre
of pressure), artifact masking, beat detection, interval screening, heart
rate, variability, and (when available) morphology and respiration.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass, replace
from typing import TYPE_CHECKING

import numpy as np

from features import __version__
from features._numeric import median_1d
from features.artifacts import ArtifactMask, mask_artifacts
from features.beats import BeatDetection, detect_beats
from features.conditioning import ChannelInput, ConditionedInput, condition_channels
from features.errors import InvalidInputError
from features.filters import FloatArray
from features.fusion import FusionResult, fuse_channels
from features.heart_rate import HeartRateResult, heart_rate
from features.intervals import (
    IntervalLabels,
    IntervalSeries,
    classify_intervals,
    intervals_from_beats,
)
from features.limits import (
    DEFAULT_PLACEMENT,
    DEFAULT_RATE_RANGE_BPM,
    MAINS_AUTO,
    MAX_BODY_MASS_KG,
    MIN_BODY_MASS_KG,
    PLACEMENTS,
)
from features.modulation import ModulationResult, respiratory_modulation
from features.morphology import MorphologyResult, beat_morphology
from features.quality import (
    OccupancyResult,
    QualityResult,
    check_signal_present,
    load_never_occupied,
    occupancy,
    signal_quality,
)
from features.respiration import RespirationResult, breathing
from features.variability import VariabilityResult, heart_rate_variability

if TYPE_CHECKING:
    from features.feature_vector import FeatureVector
    from features.windows import WindowedAnalysis

FEATURE_SET_VERSION = "6"
"""Changes whenever the definition of any emitted feature changes."""

MOVEMENT_PAD_S = 0.5
"""Masked time added either side of a movement. A seated body settles within a few
tenths of a second after a fidget (support damping ratio 0.2-0.5 at 4-8 Hz gives a
decay time constant 1/(zeta*omega) under 0.2 s; textbook mass-spring-damper); the beat
stage bridges masked spans, so the wavelet filters add no further leakage."""


GAPS_WARNING = "samples are missing (dropouts); those spans are masked as gaps"
"""The warning (and window flag) of a recording with missing samples."""


@dataclass(frozen=True)
class Subject:
    """Who sat on the support. Every field is optional."""

    body_mass_kg: float | None = None
    age_years: float | None = None
    sex: str | None = None


@dataclass(frozen=True)
class Recording:
    """Where and how the trace was taken. Identifiers are never logged."""

    placement: str = DEFAULT_PLACEMENT
    posture: str | None = None
    start_time: str | None = None
    device_id: str | None = None


@dataclass(frozen=True)
class Options:
    """Analysis options, in physical units.

    Attributes
    ----------
    mains_hz
        One of ``features.limits.MAINS_HZ`` to remove that hum, ``MAINS_AUTO`` to detect
        it, None to skip.
    empty_load_kg
        Load of the empty support (0 for a tared plate).
    rate_range_bpm
        Plausible heart-rate range.
    window_s
        Also analyse consecutive windows of this length (s), ``features.limits.MIN_WINDOW_S``
        to ``MAX_WINDOW_S``, at most the recording length
        (:func:`features.windows.analyze_windows`); None for none.
    window_overlap_s
        Overlap of consecutive windows (s), at least 0 and less than ``window_s``.
    keep_fused_trace
        Keep the fused trace the stages analysed in ``AnalysisResult.fused_trace`` (for
        drawing it); off by default, since it is as long as the recording.
    """

    mains_hz: float | str | None = MAINS_AUTO
    empty_load_kg: float = 0.0
    rate_range_bpm: tuple[float, float] = DEFAULT_RATE_RANGE_BPM
    window_s: float | None = None
    window_overlap_s: float = 0.0
    keep_fused_trace: bool = False


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
class AnalysisResult:
    """Everything the engine computed for one recording.

    Callers draw and dump from this alone; nothing recomputes a stage.

    Attributes
    ----------
    feature_vector
        Every catalogue feature read from this result
        (:func:`features.feature_vector.feature_vector`), computed once by the engine.
    windows
        The analysis of consecutive windows when ``Options.window_s`` was given, else None.
    fused_trace
        The fused trace the stages analysed (unit ``input.amplitude_unit``, sampled at
        ``input.sampling_rate_hz``) when ``Options.keep_fused_trace``, else None.
    """

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
    feature_vector: FeatureVector
    windows: WindowedAnalysis | None
    fused_trace: FloatArray | None
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
    """Analyse one recording of equal-length channels (1 to ``MAX_CHANNELS``).

    Parameters
    ----------
    channels
        1 to ``features.limits.MAX_CHANNELS`` :class:`features.conditioning.ChannelInput`,
        equal length.
    fs_hz
        Sampling rate, Hz, within ``features.limits.MIN_FS_HZ`` to ``MAX_FS_HZ``.
    subject, recording, options
        Optional metadata and options.

    Returns
    -------
    AnalysisResult
        With the feature vector, the windows when ``options.window_s`` is set and the
        fused trace when ``options.keep_fused_trace``.

    Raises
    ------
    InvalidInputError
        When any input breaks a documented rule (the field is named), the window
        settings included.
    UnusableSignalError
        When the trace itself shows that no feature can be computed: every channel flat
        or clipped (``reason`` one of :data:`features.errors.UNUSABLE_REASONS`; see
        :func:`features.quality.check_signal_present`). An empty support is a valid
        result (``occupancy.occupied`` False), not this error.
    """
    subject = subject or Subject()
    recording = recording or Recording()
    options = options or Options()
    _check_metadata(subject, recording)

    cond = condition_channels(channels, fs_hz, mains_hz=options.mains_hz,
                              empty_load_kg=options.empty_load_kg)
    check_signal_present(cond.raw_signals, unloaded=cond.occupancy_from_load is False,
                         ranges=cond.raw_ranges)
    # The centre of pressure needs calibrated cells that carry the weight.
    force_only = all(q == "force" for q in cond.quantities) and set(cond.couplings) == {"dc"}
    fusion = fuse_channels(
        cond.signals, fs_hz, units=cond.units,
        positions_m=cond.positions_m if force_only else None,
        static_n=cond.baseline_si if force_only and cond.positions_m is not None else None,
        static_fs_hz=cond.baseline_fs_hz, with_confidence=False,
    )
    # A load that never reaches an occupant's level does not mask the record: the beats
    # are looked for, and a heartbeat found against it is reported as a disagreement. A
    # load that shows an occupant for part of the record (a calibrated load, someone
    # getting in or out) masks the rest as an empty support.
    empty_throughout = load_never_occupied(cond.load_trace_n)
    load_n = None if empty_throughout else cond.load_trace_n
    mask: ArtifactMask = mask_artifacts(fusion.fused, fs_hz, load_n=load_n,
                                        load_fs_hz=cond.baseline_fs_hz,
                                        raw_signals=cond.raw_signals, pad_s=MOVEMENT_PAD_S,
                                        gap=cond.gap, raw_ranges=cond.raw_ranges)
    centre = median_1d(fusion.fused)  # for breathing too when unmasked (else it bridges)
    beats = detect_beats(fusion.fused, fs_hz, usable=mask.usable,
                         rate_range_bpm=options.rate_range_bpm,
                         recoverable=mask.motion_only(fs_hz), trace_median=centre)
    series = intervals_from_beats(beats.times_s, run_ids=beats.run_ids)
    labels = classify_intervals(series.times_s, series.intervals_ms)
    occupied = occupancy(cond.occupancy_from_load, cond.supported_mass_kg, beats)
    hr = heart_rate(beats, series, labels, occupied=occupied.occupied)
    hrv = heart_rate_variability(series.times_s, series.intervals_ms, labels.labels)
    # The load gives a mass only where it is itself the evidence of an occupant.
    mass, mass_source = _body_mass(subject, cond.supported_mass_kg,
                                   bool(occupied.occupied and occupied.from_load))
    morph = beat_morphology(  # the trace in the beats' polarity, no copy when recorded
        -fusion.fused if beats.polarity == -1 else fusion.fused, fs_hz, beats.times_s,
        beat_confidence=beats.confidence, usable=mask.usable, body_mass_kg=mass,
        amplitude_unit=fusion.unit,
    )
    # No occupant (no heartbeat and no load, or an empty load without a heartbeat): no
    # breathing either, as when the empty support was masked before the beats.
    resp_usable = mask.usable if occupied.occupied is not False else \
        np.zeros_like(mask.usable)
    resp = breathing(fusion.fused, fs_hz, usable=resp_usable,
                     cop_signal=fusion.cop_respiratory_m, cop_fs_hz=fusion.cop_fs_hz,
                     trace_median=centre if resp_usable.all() else None)
    modulation = respiratory_modulation(
        resp.breathing_signal, resp.breathing_fs_hz,
        beat_times_s=beats.times_s, breath_times_s=resp.breath_times_s,
        interval_ms=labels.nn_intervals_ms, interval_times_s=labels.nn_times_s,
        beat_amplitudes=morph.beat_jk_amplitudes, amplitude_times_s=morph.beat_times_s,
        cardiac_amplitude=morph.jk_amplitude,
        explained_fraction=labels.fraction_explained,
    )

    quality = signal_quality(mask, beats, load_empty_throughout=empty_throughout)
    # The feature vector reads the finished result (so it is filled in last, over an empty
    # one), and each window is an analyze call of its own (without windows): both modules
    # import this one, hence the imports here.
    from features.feature_vector import FeatureVector, feature_vector
    from features.windows import analyze_windows

    stages = AnalysisResult(
        input=_input_summary(cond, fusion, fs_hz),
        quality=quality,
        occupancy=occupied,
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
        warnings=_warnings(mask, beats, subject, cond),
        feature_vector=FeatureVector(FEATURE_SET_VERSION, ()),
        windows=None,
        fused_trace=fusion.fused if options.keep_fused_trace else None,
    )
    windows = None
    if options.window_s is not None:
        windows = analyze_windows(channels, fs_hz, window_s=options.window_s,
                                  overlap_s=options.window_overlap_s, subject=subject,
                                  recording=recording, options=options)
    return replace(stages, feature_vector=feature_vector(stages), windows=windows)


def _warnings(mask: ArtifactMask, beats: BeatDetection, subject: Subject,
              cond: ConditionedInput) -> tuple[str, ...]:
    """Plain-language warnings about the recording as a whole."""
    warnings: list[str] = []
    if mask.usable_fraction < 0.5:
        warnings.append("less than half of the recording is usable")
    if cond.gap is not None:
        warnings.append(GAPS_WARNING)
    if not beats.has_beats:
        warnings.append("no repeating heartbeat waveform was found")
    stated = subject.body_mass_kg
    supported = cond.supported_mass_kg
    if stated is not None and supported is not None and abs(supported - stated) > 0.25 * stated:
        warnings.append("the load on the support differs from the stated body mass by over 25%")
    return tuple(warnings)


def _input_summary(cond: ConditionedInput, fusion: FusionResult, fs_hz: float) -> InputSummary:
    """What the conditioning and fusion stages made of the input."""
    n_samples = int(cond.signals.shape[1])
    return InputSummary(
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


def _check_metadata(subject: Subject, recording: Recording) -> None:
    m = subject.body_mass_kg
    if m is not None and not (np.isfinite(m) and MIN_BODY_MASS_KG <= m <= MAX_BODY_MASS_KG):
        raise InvalidInputError(
            "subject.body_mass_kg", f"`subject.body_mass_kg` must be between "
            f"{MIN_BODY_MASS_KG:g} and {MAX_BODY_MASS_KG:g} kg; got {m}."
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
