"""Physics-based simulator of seated body-recoil (ballistocardiogram) traces with known truth.

Not part of the engine: the demo, the validation cohort, the benchmarks and the tests use it
for recordings whose beats, waves and breaths are known. It imports nothing from
``features`` (the layering test in ``tests/test_layering.py`` holds it to that).

Scenario used for the defaults: an assisted-living provider has a plate with four load cells
under a resident's armchair, and a short seated trace (2-5 min) is recorded each evening. The
simulator produces that trace from the mechanics of ejection, blood momentum and the support,
together with everything the engine is supposed to recover (beat times, wave intervals and
amplitudes, breathing, movement spans).

Modules
-------
settings
    SimulationSettings, a frozen dataclass of every knob (physical units in the names), and
    SettingsError, raised for a setting out of range.
physiology
    Heart timing, breathing and the blood's momentum: blood_momentum(onset_times_s, fs_hz, *,
    n_samples, stroke_volumes_ml, systole_durations_s), ArterialSegment, ARTERIAL_SEGMENTS.
support
    Support mechanics: support_preset(name, *, body_mass_kg), support_response(
    momentum_rate_n, fs_hz, *, body_mass_kg, stiffness_n_per_m, damping_n_s_per_m),
    lever_rule_shares(positions_m, centre_of_pressure_m), STANDARD_GRAVITY_M_S2.
recording
    Sensor front end, noise and sampling: simulate(settings) -> SimulatedRecording, with the
    result types SimulationTruth, BeatTemplate, WaveMark and ArtifactSpan.
"""

from simulation.physiology import (
    ARTERIAL_SEGMENTS,
    BLOOD_DENSITY_KG_M3,
    ArterialSegment,
    BloodMomentum,
    blood_momentum,
)
from simulation.recording import (
    ArtifactSpan,
    BeatTemplate,
    SimulatedRecording,
    SimulationTruth,
    WaveMark,
    simulate,
)
from simulation.settings import SettingsError, SimulationSettings
from simulation.support import (
    STANDARD_GRAVITY_M_S2,
    SupportPreset,
    lever_rule_shares,
    support_preset,
    support_response,
)

__all__ = [
    "STANDARD_GRAVITY_M_S2",
    "BLOOD_DENSITY_KG_M3",
    "ARTERIAL_SEGMENTS",
    "ArterialSegment",
    "ArtifactSpan",
    "BeatTemplate",
    "BloodMomentum",
    "SettingsError",
    "SimulatedRecording",
    "SimulationSettings",
    "SimulationTruth",
    "SupportPreset",
    "WaveMark",
    "blood_momentum",
    "lever_rule_shares",
    "simulate",
    "support_preset",
    "support_response",
]
