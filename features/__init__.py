"""heartsway feature engine: heart-health features from body-recoil force traces.

A pure library (numpy, scipy, PyWavelets): no web framework, no I/O.

Catalogue of the public functions, by family
--------------------------------------------
entry point
    analyze(channels, fs_hz, *, subject, recording, options) -> AnalysisResult
conditioning
    condition_channels(channels, fs_hz, *, mains_hz, empty_load_kg) -> ConditionedInput
lost samples (gaps)
    fill_gaps(samples) -> (filled, gap); time_grid(time_s, *, fs_hz, max_length) -> TimeGrid
fusion
    fuse_channels(signals, fs_hz, *, units, positions_m, static_n, ...) -> FusionResult
artifacts
    mask_artifacts(fused, fs_hz, *, load_n, raw_signals, ...) -> ArtifactMask
beats
    detect_beats(trace, fs_hz, *, usable, rate_range_bpm) -> BeatDetection
intervals
    intervals_from_beats(beat_times_s, *, run_ids) -> IntervalSeries
    classify_intervals(times_s, intervals_ms, ...) -> IntervalLabels
heart rate
    heart_rate(beats, series, labels, *, occupied) -> HeartRateResult
variability
    heart_rate_variability(times_s, intervals_ms, labels) -> VariabilityResult
    time_domain, frequency_domain, nonlinear
morphology
    beat_morphology(signal, fs_hz, beat_times_s, *, ...) -> MorphologyResult
respiration
    breathing(signal, fs_hz, *, usable, cop_signal, ...) -> RespirationResult
    respiratory_modulation(breathing_signal, fs_hz, *, beat_times_s, ...) -> ModulationResult
feature vector
    feature_vector(result) -> FeatureVector; FEATURES, the catalogue
windows
    analyze_windows(channels, fs_hz, *, window_s, overlap_s, ...) -> WindowedAnalysis
    iter_windows(...) -> iterator of WindowResult
night
    summarize_night(windowed) -> NightSummary; NIGHT_MEASURES, the catalogue
"""

__version__ = "0.1.0"

from features.artifacts import ArtifactMask, Segment, mask_artifacts
from features.beats import BeatDetection, detect_beats
from features.conditioning import ChannelInput, ConditionedInput, CountsScale, condition_channels
from features.engine import (
    AnalysisResult,
    Options,
    Recording,
    Subject,
    analyze,
)
from features.errors import EngineError, InvalidInputError, UnusableSignalError
from features.feature_vector import FEATURES, FeatureVector, feature_vector
from features.fusion import FusionResult, fuse_channels
from features.gaps import TimeGrid, fill_gaps, time_grid
from features.heart_rate import HeartRateResult, heart_rate
from features.intervals import (
    IntervalLabels,
    IntervalSeries,
    classify_intervals,
    intervals_from_beats,
)
from features.modulation import ModulationResult, respiratory_modulation
from features.morphology import MorphologyResult, beat_morphology
from features.night import NIGHT_MEASURES, NightSummary, summarize_night
from features.respiration import RespirationResult, breathing
from features.variability import (
    VariabilityResult,
    frequency_domain,
    heart_rate_variability,
    nonlinear,
    time_domain,
)
from features.windows import WindowedAnalysis, analyze_windows, iter_windows

__all__ = [
    "FEATURES", "FeatureVector", "ModulationResult", "MorphologyResult", "RespirationResult",
    "WindowedAnalysis", "analyze_windows", "beat_morphology", "breathing", "feature_vector",
    "iter_windows", "respiratory_modulation", "NIGHT_MEASURES", "NightSummary", "summarize_night",
    "AnalysisResult", "ArtifactMask", "BeatDetection", "ChannelInput", "ConditionedInput",
    "CountsScale", "EngineError", "FusionResult", "HeartRateResult", "IntervalLabels",
    "IntervalSeries", "InvalidInputError", "Options", "Recording", "Segment", "Subject",
    "UnusableSignalError", "VariabilityResult", "analyze", "classify_intervals",
    "condition_channels", "detect_beats", "frequency_domain", "fuse_channels", "heart_rate",
    "heart_rate_variability", "intervals_from_beats", "mask_artifacts", "nonlinear",
    "time_domain", "TimeGrid", "fill_gaps", "time_grid",
]
