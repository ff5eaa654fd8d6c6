"""Physics-based simulator of seated body-recoil (ballistocardiogram) traces with known truth.

Scenario used for the defaults: an assisted-living provider has a plate with four load cells
under a resident's armchair, and a short seated trace (2-5 min) is recorded each evening. The
simulator produces that trace from the mechanics of ejection, blood momentum and the support,
together with everything the engine is supposed to recover (beat times, wave intervals and
amplitudes, breathing, movement spans).

Public API
----------
SimulationSettings
    Frozen dataclass of every knob (physical units in the names).
simulate(settings) -> SimulatedRecording
    One recording: channels plus :class:`SimulationTruth`.
blood_momentum(onset_times_s, fs_hz, *, n_samples, stroke_volumes_ml, systole_durations_s)
    Momentum of the arterial blood and its rate of change (the rigid-support force).
support_response(momentum_rate_n, fs_hz, *, body_mass_kg, stiffness_n_per_m, damping_n_s_per_m)
    Dynamic support force of the body on a mass-spring-damper support.
support_preset(name, *, body_mass_kg) -> SupportPreset
    Named support presets ("rigid", "firm", "cushion", "ringing") as k, c, f_n, zeta.
lever_rule_shares(positions_m, centre_of_pressure_m)
    Share of a vertical load carried by each of four equal load cells under a rigid plate.

Sign convention
---------------
Vertical axis positive upward (headward for a seated person). With ``F_s`` the upward support
reaction, Newton's second law for the closed system body + blood reads
``d(p_body + p_blood)/dt = F_s - M g``. A headward recoil of the body (the J wave) therefore
*unloads* the seat. Ballistocardiography plots the recoil with headward positive (Starr 1939;
Inan et al. 2015, Fig. 1), and the engine expects J positive in a normally wired channel, so a
channel reports ``share * M g`` (the static load, compression positive) plus
``polarity * share * f_bcg`` with ``f_bcg = -(F_s - M g)`` (the headward recoil force).
``polarity = -1`` (or an inverted cell) flips the dynamic, AC-coupled part only: the cardiac,
respiratory and movement components. The static load, its posture steps and the tare stay
compression positive, so the sign of the static load is no cue for polarity.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from scipy import signal

from features.errors import InvalidInputError

__all__ = [
    "STANDARD_GRAVITY_M_S2",
    "BLOOD_DENSITY_KG_M3",
    "ARTERIAL_SEGMENTS",
    "ArterialSegment",
    "ArtifactSpan",
    "BeatTemplate",
    "BloodMomentum",
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

#: Standard acceleration of gravity, m/s^2 (3rd CGPM, 1901).
STANDARD_GRAVITY_M_S2 = 9.80665
#: Density of whole blood, kg/m^3 (common practice, 1050-1060).
BLOOD_DENSITY_KG_M3 = 1060.0

_SUPPORTS = ("cushion", "firm", "ringing", "rigid")
_QUANTITIES = ("acceleration", "force")
_CELL_LABELS = ("front_left", "front_right", "rear_left", "rear_right")
_INTERNAL_MIN_HZ = 2000.0
_SNR_BAND_HZ = (1.0, 20.0)
_REFERENCE_MASS_KG = 70.0


# ---------------------------------------------------------------------------------------------
# Result and settings types
# ---------------------------------------------------------------------------------------------


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
class SupportPreset:
    """Mass-spring-damper constants of a support for a given body mass.

    ``stiffness_n_per_m`` is None for the rigid support.
    """

    name: str
    natural_hz: float | None
    damping_ratio: float | None
    stiffness_n_per_m: float | None
    damping_n_s_per_m: float | None


@dataclass(frozen=True)
class BloodMomentum:
    """Vertical momentum of the arterial blood (upward positive) and its rate of change."""

    momentum_kg_m_s: np.ndarray
    rate_n: np.ndarray
    fs_hz: float


@dataclass(frozen=True)
class ArtifactSpan:
    """A span of the truth where the trace is not cardiac: ``kind`` is movement or posture."""

    kind: str
    start_s: float
    end_s: float


@dataclass(frozen=True)
class WaveMark:
    """One labelled wave of the beat template.

    ``time_s`` is measured from the ejection onset; ``amplitude`` is in the recording unit
    (N for force, m/s^2 for acceleration), in the J-positive convention.
    """

    name: str
    time_s: float
    amplitude: float


@dataclass(frozen=True)
class BeatTemplate:
    """Noise-free response to one normal beat at the mean rate, aligned on J.

    Attributes
    ----------
    samples : np.ndarray
        Template at the recording rate, summed over channels, J-positive convention.
    fs_hz : float
        Sampling rate of ``samples``, Hz.
    j_index : int
        Index of the J wave in ``samples`` (J lies on this sample to within 1/2000 s).
    waves : tuple of WaveMark
        H, I, J, K, L in that order.
    i_j_interval_ms, j_k_interval_ms : float
        Intervals between the I and J, J and K extremes, ms.
    i_j_amplitude, j_k_amplitude : float
        Peak-to-peak amplitudes I-J and J-K in ``unit``.
    unit : str
        "N" or "m/s^2".
    """

    samples: np.ndarray
    fs_hz: float
    j_index: int
    waves: tuple[WaveMark, ...]
    i_j_interval_ms: float
    j_k_interval_ms: float
    i_j_amplitude: float
    j_k_amplitude: float
    unit: str


@dataclass(frozen=True)
class SimulationTruth:
    """Everything the simulator knows about a recording.

    Beat arrays are aligned: entry ``k`` of ``electrical_times_s``, ``onset_times_s``,
    ``j_times_s``, ``beat_kinds`` and ``stroke_volumes_ml`` is the same beat. Only beats whose
    J wave falls inside the recording are listed. Arrays at ``fs`` have the channel length.

    Attributes
    ----------
    body_mass_kg : float or None
        None for an empty support.
    electrical_times_s : np.ndarray
        Electrical activation (R wave) of each beat, s.
    onset_times_s : np.ndarray
        Ejection onset (aortic valve opening), s: electrical time + pre-ejection period.
    j_times_s : np.ndarray
        Time of the J wave of each beat in the noise-free summed trace, s (sub-sample).
    beat_kinds : tuple of str
        "normal", "ectopic" (premature) for each beat.
    stroke_volumes_ml : np.ndarray
        Stroke volume of each beat, mL.
    heart_rate_bpm : float or None
        Realised mean rate, 60 / mean J-J interval.
    artifact_spans : tuple of ArtifactSpan
        Movement and posture-change spans.
    breathing_l : np.ndarray
        Noise-free lung volume above end-expiration, L, at fs.
    breath_onset_times_s : np.ndarray
        Start of each inspiration, s.
    breathing_rate_per_min : float
        Realised mean rate, 60 / mean breath duration (pauses excluded).
    breathing_pause_spans_s : tuple of (float, float)
        Spans without breathing.
    rsa_depth_ms, sv_modulation : float
        Settings used (peak-to-trough RSA in ms, fractional SV modulation amplitude).
    template : BeatTemplate or None
        Response to one isolated normal beat at the mean rate; None for an empty support.
    ensemble_template : BeatTemplate or None
        Mean of the noise-free cardiac component over the normal beats, aligned on their
        true J instants (see Notes of :func:`simulate`, step 5): what a perfect ensemble
        average of this recording shows. It differs from ``template`` where one beat's
        response still rings when the next begins (a lightly damped support at a fast
        rate); None for an empty support or with fewer than 3 normal beats.
    cardiac_signal : np.ndarray
        Noise-free cardiac component of the summed channels, recording unit, J-positive.
    blood_momentum_kg_m_s : np.ndarray
        Vertical blood momentum at fs (upward positive), kg m/s.
    clean_channels : tuple of np.ndarray
        Each channel without sensor noise, hum, floor vibration or ADC effects.
    snr_db : float or None
        SNR setting (None = noise free).
    static_load_n : float
        Static load of the occupant on the plate before any posture change, N (0 if empty).
    """

    body_mass_kg: float | None
    electrical_times_s: np.ndarray
    onset_times_s: np.ndarray
    j_times_s: np.ndarray
    beat_kinds: tuple[str, ...]
    stroke_volumes_ml: np.ndarray
    heart_rate_bpm: float | None
    artifact_spans: tuple[ArtifactSpan, ...]
    breathing_l: np.ndarray
    breath_onset_times_s: np.ndarray
    breathing_rate_per_min: float | None
    breathing_pause_spans_s: tuple[tuple[float, float], ...]
    rsa_depth_ms: float
    sv_modulation: float
    template: BeatTemplate | None
    ensemble_template: BeatTemplate | None
    cardiac_signal: np.ndarray
    blood_momentum_kg_m_s: np.ndarray
    clean_channels: tuple[np.ndarray, ...]
    snr_db: float | None
    static_load_n: float


@dataclass(frozen=True)
class SimulatedRecording:
    """A simulated recording: what a sensor would deliver, plus the truth.

    ``channels`` hold force in N including the static load, or acceleration in m/s^2 including
    1 g. ``positions_m`` gives (x, y) of each load cell (x to the right, y forward), or None.
    """

    channels: tuple[np.ndarray, ...]
    fs_hz: float
    labels: tuple[str, ...]
    quantity: str
    unit: str
    positions_m: tuple[tuple[float, float], ...] | None
    truth: SimulationTruth
    settings: SimulationSettings


def _in_range(name: str, value: float, low: float, high: float, unit: str) -> None:
    if not (isinstance(value, int | float) and math.isfinite(value) and low <= value <= high):
        raise InvalidInputError(
            name, f"`{name}` must be between {low:g} and {high:g}{unit}; got {value!r}."
        )


@dataclass(frozen=True)
class SimulationSettings:
    """Settings of one simulated recording (defaults: the evening armchair trace).

    Parameters
    ----------
    duration_s : float
        Length, 10-1800 s (default 180).
    fs_hz : float
        Output sampling rate, 50-2000 Hz (default 250).
    heart_rate_bpm : float
        Mean heart rate, 30-200 bpm (default 68).
    rsa_depth_ms : float
        Respiratory sinus arrhythmia, peak-to-trough change of the beat interval over a
        breath, 0-400 ms (default 40).
    sv_modulation : float
        Amplitude of the respiratory stroke-volume change as a fraction of the mean, 0-0.5
        (SV falls on inspiration; default 0.05).
    stroke_volume_ml : float
        Mean stroke volume, 10-200 mL (default 70).
    lf_variability : float
        Amplitude of the slow (0.04 and 0.1 Hz) beat-interval modulation as a fraction, 0-0.2.
    breathing_rate_per_min : float
        Mean breathing rate, 3-40 per min (default 14).
    breathing_variability : float
        Coefficient of variation of breath duration, 0-0.5 (default 0.12).
    tidal_volume_l : float
        Mean tidal volume, 0.1-3 L (default 0.5).
    breathing_pause_count : int
        Number of randomly placed pauses without breathing, 0-20.
    breathing_pause_s : float
        Duration of each random pause, 5-60 s (default 15).
    breathing_pause_spans_s : tuple of (start_s, end_s)
        Explicit pauses, in addition to the random ones.
    respiration_force_n : float
        Peak-to-peak respiratory force on the summed load, 0-50 N (weight shifting onto the
        backrest, armrests and feet with each breath; default 1.5).
    respiration_sway_m : float
        Peak-to-peak fore-aft sway of the centre of pressure with breathing, 0-0.05 m.
    snr_db : float or None
        Cardiac-to-noise ratio, dB, -20 to 60, or None for no sensor noise. Definition in
        :func:`simulate`, Notes.
    polarity : int
        +1 normal (J positive), -1 inverted dynamic part.
    support : str
        "rigid", "firm", "cushion" or "ringing" (see :func:`support_preset`).
    movement_count : int
        Random fidgeting bursts, 1-6 s each (0-50).
    movement_spans_s : tuple of (start_s, end_s)
        Explicit fidgeting bursts.
    posture_change_count : int
        Random posture changes (0-20).
    posture_change_times_s : tuple of float
        Explicit posture changes.
    ectopic_fraction : float
        Probability that a beat is premature, 0-0.3.
    irregular_rhythm : bool
        Random beat intervals (AF-like; no RSA, stroke volume follows the filling time).
    n_channels : int
        1 (one summed load) or 4 (four corner cells).
    quantity : str
        "force" or "acceleration" (one accelerometer; needs ``n_channels=1`` and a body mass).
    body_mass_kg : float or None
        Occupant mass, 20-300 kg; None for an empty support.
    mains_hz : float or None
        Mains hum frequency (50 or 60 Hz typically), or None.
    mains_amplitude : float
        Hum amplitude in the channel unit (default 0.3).
    floor_vibration : bool
        Add footstep transients from the floor.
    inverted_channel : int or None
        Index of one load cell whose dynamic part is wired inverted.
    noisy_channel : int or None
        Index of one load cell with extra noise.
    noisy_channel_gain_db : float
        Extra noise power of that cell, 0-40 dB (default 20).
    adc_step : float or None
        Quantisation step in the channel unit.
    clip_range : (float, float) or None
        ADC range in the channel unit; samples outside are clipped.
    plate_size_m : (float, float)
        Width (x) and depth (y) of the plate; cells sit at the corners (default 0.5 x 0.5).
    centre_of_pressure_m : (float, float)
        Mean centre of pressure of the occupant (default 0, -0.03).
    seed : int
        Seed of ``np.random.default_rng``.
    """

    duration_s: float = 180.0
    fs_hz: float = 250.0
    heart_rate_bpm: float = 68.0
    rsa_depth_ms: float = 40.0
    sv_modulation: float = 0.05
    stroke_volume_ml: float = 70.0
    lf_variability: float = 0.03
    breathing_rate_per_min: float = 14.0
    breathing_variability: float = 0.12
    tidal_volume_l: float = 0.5
    breathing_pause_count: int = 0
    breathing_pause_s: float = 15.0
    breathing_pause_spans_s: tuple[tuple[float, float], ...] = ()
    respiration_force_n: float = 1.5
    respiration_sway_m: float = 0.006
    snr_db: float | None = 10.0
    polarity: int = 1
    support: str = "cushion"
    movement_count: int = 0
    movement_spans_s: tuple[tuple[float, float], ...] = ()
    posture_change_count: int = 0
    posture_change_times_s: tuple[float, ...] = ()
    ectopic_fraction: float = 0.0
    irregular_rhythm: bool = False
    n_channels: int = 1
    quantity: str = "force"
    body_mass_kg: float | None = 75.0
    mains_hz: float | None = None
    mains_amplitude: float = 0.3
    floor_vibration: bool = False
    inverted_channel: int | None = None
    noisy_channel: int | None = None
    noisy_channel_gain_db: float = 20.0
    adc_step: float | None = None
    clip_range: tuple[float, float] | None = None
    plate_size_m: tuple[float, float] = (0.5, 0.5)
    centre_of_pressure_m: tuple[float, float] = (0.0, -0.03)
    seed: int = 0

    def __post_init__(self) -> None:
        _in_range("duration_s", self.duration_s, 10.0, 1800.0, " s")
        _in_range("fs_hz", self.fs_hz, 50.0, 2000.0, " Hz")
        _in_range("heart_rate_bpm", self.heart_rate_bpm, 30.0, 200.0, " bpm")
        _in_range("rsa_depth_ms", self.rsa_depth_ms, 0.0, 400.0, " ms")
        _in_range("sv_modulation", self.sv_modulation, 0.0, 0.5, "")
        _in_range("stroke_volume_ml", self.stroke_volume_ml, 10.0, 200.0, " mL")
        _in_range("lf_variability", self.lf_variability, 0.0, 0.2, "")
        _in_range("breathing_rate_per_min", self.breathing_rate_per_min, 3.0, 40.0, " per min")
        _in_range("breathing_variability", self.breathing_variability, 0.0, 0.5, "")
        _in_range("tidal_volume_l", self.tidal_volume_l, 0.1, 3.0, " L")
        _in_range("breathing_pause_count", self.breathing_pause_count, 0, 20, "")
        _in_range("breathing_pause_s", self.breathing_pause_s, 5.0, 60.0, " s")
        _in_range("respiration_force_n", self.respiration_force_n, 0.0, 50.0, " N")
        _in_range("respiration_sway_m", self.respiration_sway_m, 0.0, 0.05, " m")
        if self.snr_db is not None:
            _in_range("snr_db", self.snr_db, -20.0, 60.0, " dB")
        if self.polarity not in (-1, 1):
            raise InvalidInputError(
                "polarity", f"`polarity` must be -1 or 1; got {self.polarity!r}."
            )
        if self.support not in _SUPPORTS:
            raise InvalidInputError(
                "support", f"`support` must be one of {', '.join(_SUPPORTS)}; got {self.support!r}."
            )
        _in_range("movement_count", self.movement_count, 0, 50, "")
        _in_range("posture_change_count", self.posture_change_count, 0, 20, "")
        _in_range("ectopic_fraction", self.ectopic_fraction, 0.0, 0.3, "")
        if self.n_channels not in (1, 4):
            raise InvalidInputError(
                "n_channels", f"`n_channels` must be 1 or 4; got {self.n_channels!r}."
            )
        if self.quantity not in _QUANTITIES:
            raise InvalidInputError(
                "quantity",
                f"`quantity` must be one of {', '.join(_QUANTITIES)}; got {self.quantity!r}.",
            )
        if self.body_mass_kg is not None:
            _in_range("body_mass_kg", self.body_mass_kg, 20.0, 300.0, " kg")
        if self.quantity == "acceleration" and (self.n_channels != 1 or self.body_mass_kg is None):
            raise InvalidInputError(
                "quantity",
                "`quantity` must be 'force' unless n_channels is 1 and body_mass_kg is set; "
                f"got 'acceleration' with n_channels={self.n_channels}, "
                f"body_mass_kg={self.body_mass_kg}.",
            )
        if self.mains_hz is not None:
            _in_range("mains_hz", self.mains_hz, 1.0, 1000.0, " Hz")
        for name in ("inverted_channel", "noisy_channel"):
            index = getattr(self, name)
            if index is not None and not (isinstance(index, int) and 0 <= index < self.n_channels):
                raise InvalidInputError(
                    name,
                    f"`{name}` must be a channel index from 0 to {self.n_channels - 1}; "
                    f"got {index!r}.",
                )
        _in_range("noisy_channel_gain_db", self.noisy_channel_gain_db, 0.0, 40.0, " dB")
        if self.adc_step is not None and not self.adc_step > 0:
            raise InvalidInputError(
                "adc_step", f"`adc_step` must be positive; got {self.adc_step!r}."
            )
        if self.clip_range is not None and not self.clip_range[0] < self.clip_range[1]:
            raise InvalidInputError(
                "clip_range", f"`clip_range` must be (low, high) with low < high; "
                f"got {self.clip_range!r}."
            )
        for name in ("movement_spans_s", "breathing_pause_spans_s"):
            for start, end in getattr(self, name):
                if not 0.0 <= start < end <= self.duration_s:
                    raise InvalidInputError(
                        name,
                        f"`{name}` must hold spans with 0 <= start < end <= duration_s "
                        f"({self.duration_s:g} s); got ({start!r}, {end!r}).",
                    )
        for when in self.posture_change_times_s:
            if not 0.0 <= when <= self.duration_s:
                raise InvalidInputError(
                    "posture_change_times_s",
                    f"`posture_change_times_s` must lie in [0, {self.duration_s:g}] s; "
                    f"got {when!r}.",
                )


# ---------------------------------------------------------------------------------------------
# Physics kernels
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
    InvalidInputError
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
        raise InvalidInputError(
            "stroke_volumes_ml",
            "`stroke_volumes_ml` and `systole_durations_s` must have one entry per onset; got "
            f"{volumes.size} and {durations.size} for {onsets.size} onsets.",
        )
    if not (fs_hz > 0 and n_samples > 0):
        raise InvalidInputError(
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


def support_preset(name: str, *, body_mass_kg: float) -> SupportPreset:
    """Mass-spring-damper constants of a named support for a given occupant.

    Parameters
    ----------
    name : str
        "rigid" (no compliance), "firm" (f_n 25 Hz, zeta 0.6), "cushion" (f_n 9 Hz,
        zeta 0.35, close to the seated whole-body vertical resonance) or "ringing"
        (f_n 6 Hz, zeta 0.07: a springy chair that rings after each beat).
    body_mass_kg : float
        Mass carried by the support, kg (> 0).

    Returns
    -------
    SupportPreset
        ``k = m (2 pi f_n)^2`` and ``c = 2 zeta sqrt(k m)``; None for the rigid support.

    Raises
    ------
    InvalidInputError
        Unknown name or non-positive mass.

    Notes
    -----
    Natural frequency ``f_n = sqrt(k/m) / (2 pi)`` and damping ratio ``zeta = c / (2 sqrt(k m))``
    of a single-degree-of-freedom oscillator (W. T. Thomson, M. D. Dahleh, "Theory of Vibration
    with Applications", 5th ed., Prentice Hall, 1998, ch. 2).
    """
    table = {"firm": (25.0, 0.6), "cushion": (9.0, 0.35), "ringing": (6.0, 0.07)}
    if name not in _SUPPORTS:
        raise InvalidInputError(
            "support", f"`support` must be one of {', '.join(_SUPPORTS)}; got {name!r}."
        )
    if not body_mass_kg > 0:
        raise InvalidInputError(
            "body_mass_kg", f"`body_mass_kg` must be positive; got {body_mass_kg!r}."
        )
    if name == "rigid":
        return SupportPreset(name, None, None, None, None)
    natural_hz, zeta = table[name]
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


# ---------------------------------------------------------------------------------------------
# Generators (private)
# ---------------------------------------------------------------------------------------------


@dataclass(frozen=True)
class _Breathing:
    starts_s: np.ndarray  # start of each breath (inspiration onset)
    durations_s: np.ndarray
    volumes_l: np.ndarray
    pauses: tuple[tuple[float, float], ...]


def _pick_spans(
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


def _make_breathing(s: SimulationSettings, rng: np.random.Generator) -> _Breathing:
    period = 60.0 / s.breathing_rate_per_min
    pauses = list(s.breathing_pause_spans_s)
    pauses += _pick_spans(
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
    return _Breathing(np.array(starts), np.array(durations), volumes, tuple(pauses))


def _lung_volume(b: _Breathing, t: np.ndarray) -> np.ndarray:
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


def _make_beats(
    s: SimulationSettings, rng: np.random.Generator, breathing: _Breathing
) -> tuple[np.ndarray, np.ndarray, list[str]]:
    """Electrical beat times, stroke volumes and kinds, from -1.5 s to the end + 1 s."""
    ibi0 = 60.0 / s.heart_rate_bpm
    phases = rng.uniform(0.0, 2 * np.pi, 2)

    def resp_drive(t: float) -> float:
        vol = float(_lung_volume(breathing, np.array([t]))[0])
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
                interval = pending_pause
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


def _band_power(x: np.ndarray, fs_hz: float, band_hz: tuple[float, float]) -> float:
    spectrum = np.fft.rfft(x)
    freqs = np.fft.rfftfreq(x.size, 1.0 / fs_hz)
    sel = (freqs >= band_hz[0]) & (freqs <= band_hz[1])
    return float(2.0 * np.sum(np.abs(spectrum[sel]) ** 2) / x.size**2)


def _sensor_noise(rng: np.random.Generator, n: int, fs_hz: float, band_power: float) -> np.ndarray:
    """White (60 % of in-band power) plus 1/f (40 %) noise with an exact in-band power."""
    white = rng.standard_normal(n)
    spectrum = np.fft.rfft(rng.standard_normal(n))
    freqs = np.fft.rfftfreq(n, 1.0 / fs_hz)
    spectrum[1:] /= np.sqrt(freqs[1:])
    spectrum[0] = 0.0
    pink = np.fft.irfft(spectrum, n)
    noise = np.sqrt(0.6 / _band_power(white, fs_hz, _SNR_BAND_HZ)) * white
    noise += np.sqrt(0.4 / _band_power(pink, fs_hz, _SNR_BAND_HZ)) * pink
    scaled: np.ndarray = noise * np.sqrt(band_power / _band_power(noise, fs_hz, _SNR_BAND_HZ))
    return scaled


def _burst(
    rng: np.random.Generator, n: int, fs_hz: float, band_hz: tuple[float, float]
) -> np.ndarray:
    """Unit-rms band-limited noise under a Tukey envelope."""
    sos = signal.butter(2, [band_hz[0], min(band_hz[1], 0.45 * fs_hz)], "bandpass", fs=fs_hz,
                        output="sos")
    pad = int(fs_hz)
    x = signal.sosfilt(sos, rng.standard_normal(n + pad))[pad:]
    x /= np.std(x) + 1e-12
    return np.asarray(x * signal.windows.tukey(n, 0.3))


def _find_peak(x: np.ndarray, lo: int, hi: int, fs_hz: float, sign: float) -> tuple[float, float]:
    """Extreme of ``sign * x`` in [lo, hi) with parabolic interpolation: (time s, value)."""
    lo = max(lo, 1)
    hi = min(hi, x.size - 1)
    seg = sign * x[lo:hi]
    i = lo + int(np.argmax(seg))
    y0, y1, y2 = sign * x[i - 1], sign * x[i], sign * x[i + 1]
    denom = y0 - 2 * y1 + y2
    delta = 0.0 if denom == 0 else float(np.clip(0.5 * (y0 - y2) / denom, -0.5, 0.5))
    value = y1 - 0.25 * (y0 - y2) * delta
    return (i + delta) / fs_hz, sign * value


def _label_waves(x: np.ndarray, onset_index: int, fs_hz: float) -> tuple[WaveMark, ...]:
    def at(sec: float) -> int:
        return int(round(sec * fs_hz))

    t_j, a_j = _find_peak(x, onset_index + at(0.05), onset_index + at(0.35), fs_hz, 1.0)
    j = at(t_j)
    t_i, a_i = _find_peak(x, j - at(0.15), j, fs_hz, -1.0)
    i = at(t_i)
    t_h, a_h = _find_peak(x, i - at(0.15), i, fs_hz, 1.0)
    t_k, a_k = _find_peak(x, j + 1, j + at(0.15), fs_hz, -1.0)
    k = at(t_k)
    t_l, a_l = _find_peak(x, k + 1, k + at(0.2), fs_hz, 1.0)
    t0 = onset_index / fs_hz
    return tuple(
        WaveMark(name, t - t0, a)
        for name, t, a in (("H", t_h, a_h), ("I", t_i, a_i), ("J", t_j, a_j), ("K", t_k, a_k),
                           ("L", t_l, a_l))
    )


def _template_from_waves(samples: np.ndarray, fs: float, j_index: int,
                         waves: tuple[WaveMark, ...], to_unit: float, unit: str) -> BeatTemplate:
    w = {m.name: m for m in waves}
    return BeatTemplate(
        samples=samples,
        fs_hz=fs,
        j_index=j_index,
        waves=tuple(WaveMark(m.name, m.time_s, m.amplitude * to_unit) for m in waves),
        i_j_interval_ms=1e3 * (w["J"].time_s - w["I"].time_s),
        j_k_interval_ms=1e3 * (w["K"].time_s - w["J"].time_s),
        i_j_amplitude=(w["J"].amplitude - w["I"].amplitude) * to_unit,
        j_k_amplitude=(w["J"].amplitude - w["K"].amplitude) * to_unit,
        unit=unit,
    )


def _ensemble_template(cardiac_int: np.ndarray, fs_int: float, factor: int,
                       j_times: np.ndarray, onsets: np.ndarray, kinds: list[str],
                       to_unit: float,
                       unit: str) -> BeatTemplate | None:
    """Mean noise-free recoil over the normal beats, aligned on their true J (step 5)."""
    pre, post = int(round(0.35 * fs_int)), int(round(0.5 * fs_int))
    pre -= pre % factor
    post -= post % factor
    offsets = np.arange(-pre, post + 1) / fs_int
    normal = np.array([k == "normal" for k in kinds], dtype=bool)
    t_end = (cardiac_int.size - 1) / fs_int
    ok = normal & (j_times - 0.35 >= 0.0) & (j_times + 0.5 <= t_end)
    if int(ok.sum()) < 3:
        return None
    grid = np.arange(cardiac_int.size) / fs_int
    mean = np.zeros(offsets.size)
    for tj in j_times[ok]:
        mean += np.interp(tj + offsets, grid, cardiac_int)
    mean /= float(ok.sum())
    onset_index = pre - int(round(0.2 * fs_int))  # J is searched 0.05-0.35 s after "onset"
    waves = _label_waves(mean, onset_index, fs_int)
    # Times from the mean ejection onset of the averaged beats, as for the isolated beat.
    shift = float(np.mean(j_times[ok] - onsets[ok])) - next(
        m.time_s for m in waves if m.name == "J")
    waves = tuple(WaveMark(m.name, m.time_s + shift, m.amplitude) for m in waves)
    fs = fs_int / factor
    samples = _decimate(mean, factor) * to_unit
    return _template_from_waves(samples, fs, pre // factor, waves, to_unit, unit)


def _systole_s(rate_bpm: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Ejection time and pre-ejection period from the rate (Weissler et al. 1968, men)."""
    lvet = np.clip(0.413 - 0.0017 * rate_bpm, 0.16, 0.40)
    pep = np.clip(0.131 - 0.0004 * rate_bpm, 0.06, 0.13)
    return lvet, pep


def _decimate(x: np.ndarray, factor: int) -> np.ndarray:
    if factor == 1:
        return x.copy()
    return np.asarray(signal.resample_poly(x, 1, factor))


# ---------------------------------------------------------------------------------------------
# simulate
# ---------------------------------------------------------------------------------------------


def simulate(settings: SimulationSettings) -> SimulatedRecording:
    """Synthesise one seated recording with its truth.

    Parameters
    ----------
    settings : SimulationSettings
        Every knob, validated on construction.

    Returns
    -------
    SimulatedRecording
        Channels, metadata and :class:`SimulationTruth`.

    Raises
    ------
    InvalidInputError
        Raised by :class:`SimulationSettings` for settings out of range.

    Notes
    -----
    1. Breathing: breaths of random duration (CV ``breathing_variability``) and tidal volume
       (CV 10 %), 40 % inspiration and 60 % expiration with raised-cosine volume, pauses held
       at end-expiration. The drive ``r = 2 V / V_T - 1`` (about -1..1) modulates the heart.
    2. Rhythm: electrical beats from beat intervals ``IBI = 60/HR (1 + slow) - RSA/2 r + e``
       (slow: 0.1 and 0.04 Hz sines; e: 4 ms jitter), so inspiration shortens the interval by
       ``rsa_depth_ms`` peak to trough. Ectopic beats come at 60 % of the interval, eject 45 %
       of SV and are followed by a full compensatory pause (the beat after is potentiated,
       +15 %). Irregular rhythm: log-normal intervals (sigma 0.22), no RSA, SV following the
       previous interval (Frank-Starling).
    3. Systolic time intervals from the rate (Weissler): ejection onset = electrical time +
       PEP; ejection time LVET, with 3 % beat-to-beat jitter (so beat shapes vary).
    4. Blood momentum of the lumped arterial path (:func:`blood_momentum`) at an internal rate
       ``m * fs`` >= 2 kHz; ``dp_blood/dt`` passes through the support
       (:func:`support_response`) to give the dynamic support force.
    5. The recoil force ``f_bcg = -(F_s - M g)`` is decimated to fs with a linear-phase
       polyphase filter (no delay). Each beat's J time is the local maximum of the noise-free
       internal-rate recoil near the template J, refined by a parabola (sub-sample). The
       ensemble template is the mean over normal beats of the noise-free internal-rate recoil
       read at J - 0.35 s ... J + 0.5 s (linear interpolation on the >= 2 kHz grid), with
       its waves labelled by the same rule as the isolated template.
    6. Static load ``M g`` (g = 9.80665 m/s^2) split among cells by the lever rule at the
       centre of pressure, which sways fore-aft with breathing; a respiratory force
       ``respiration_force_n`` peak-to-peak follows lung volume on the summed load.
    7. Movement: bursts of band-limited (0.3-15 Hz) force, 15-60 N rms, with independent parts
       per cell. Posture change: a step of the static load (+-4 %) and of the centre of pressure
       (up to 4 cm) inside a 2-3.5 s burst. Both are recorded as artifact spans.
    8. Noise: per channel, white (60 %) + 1/f (40 %). SNR is defined on the summed channels as
       ``10 log10(P_c / P_n)`` with P_c the power of the noise-free cardiac component
       (``truth.cardiac_signal``) and P_n the power of the sensor noise, both restricted to
       1-20 Hz (periodogram, rectangular band). Cells get equal noise power; the noisy cell
       gets ``noisy_channel_gain_db`` more, which lowers the summed SNR. For an empty support
       the noise is the one a 70 kg occupant at the same SNR would have had.
    9. Optional mains hum (sampled as is, so it aliases when above fs/2 as with a
       sensor without anti-alias filter), floor footsteps (damped 12-25 Hz transients),
       quantisation and clipping.
    10. Acceleration: the centre-of-mass acceleration ``a = f_bcg / M`` (Newton's second law)
        plus 1 g at rest, in m/s^2.
    Simplification: the whole body mass is taken to rest on the plate (feet on a footrest
    of the chair).

    References
    ----------
    .. [1] O. T. Inan et al., "Ballistocardiography and seismocardiography: a review of recent
       advances", IEEE J. Biomed. Health Inform. 19(4):1414-1427, 2015,
       doi:10.1109/JBHI.2014.2361732.
    .. [2] A. M. Weissler, W. S. Harris, C. D. Schoenfeld, "Systolic time intervals in heart
       failure in man", Circulation 37:149-159, 1968, doi:10.1161/01.CIR.37.2.149.
    .. [3] I. Starr et al., Am. J. Physiol. 127:1-28, 1939 (see :func:`blood_momentum`).
    """
    s = settings
    rng = np.random.default_rng(s.seed)
    fs = float(s.fs_hz)
    factor = max(1, int(math.ceil(_INTERNAL_MIN_HZ / fs)))
    fs_int = fs * factor
    n = int(round(s.duration_s * fs))
    n_int = n * factor
    t = np.arange(n) / fs
    occupied = s.body_mass_kg is not None
    mass = _REFERENCE_MASS_KG if s.body_mass_kg is None else float(s.body_mass_kg)
    to_unit = 1.0 / mass if s.quantity == "acceleration" else 1.0
    unit = "m/s^2" if s.quantity == "acceleration" else "N"

    breathing = _make_breathing(s, rng)
    beat_rng = np.random.default_rng([s.seed, 1])
    electrical, volumes, kinds = _make_beats(s, beat_rng, breathing)
    intervals = np.diff(electrical, append=electrical[-1] + 60.0 / s.heart_rate_bpm)
    rate_bpm = 60.0 / np.maximum(np.r_[intervals[:1], intervals[:-1]], 0.25)
    lvet, pep = _systole_s(rate_bpm)
    lvet = np.where(np.array(kinds) == "ectopic", 0.8 * lvet, lvet)
    lvet = lvet * np.clip(1.0 + 0.03 * beat_rng.standard_normal(lvet.size), 0.9, 1.1)
    onsets = electrical + pep
    preset = support_preset(s.support, body_mass_kg=mass)

    def recoil(onset_s: np.ndarray, sv: np.ndarray, et: np.ndarray, length: int) -> tuple[
        np.ndarray, np.ndarray
    ]:
        bm = blood_momentum(onset_s, fs_int, n_samples=length, stroke_volumes_ml=sv,
                            systole_durations_s=et)
        dyn = support_response(bm.rate_n, fs_int, body_mass_kg=mass,
                               stiffness_n_per_m=preset.stiffness_n_per_m,
                               damping_n_s_per_m=preset.damping_n_s_per_m)
        return -dyn, bm.momentum_kg_m_s

    # Template: one normal beat at the mean rate, J placed on the output grid.
    lvet0, pep0 = _systole_s(np.array([s.heart_rate_bpm]))
    n_tpl = int(round(1.5 * fs_int))
    probe, _ = recoil(np.array([0.4]), np.array([s.stroke_volume_ml]), lvet0, n_tpl)
    waves0 = _label_waves(probe, int(round(0.4 * fs_int)), fs_int)
    j_offset = waves0[2].time_s
    j_probe = 0.4 + j_offset
    j_target = math.ceil(j_probe * fs) / fs
    onset_tpl = 0.4 + (j_target - j_probe)
    tpl_int, _ = recoil(np.array([onset_tpl]), np.array([s.stroke_volume_ml]), lvet0, n_tpl)
    waves = _label_waves(tpl_int, int(round(onset_tpl * fs_int)), fs_int)
    tpl_fs = _decimate(tpl_int, factor) * to_unit
    j_index = int(round(j_target * fs))
    lo, hi = max(0, j_index - int(0.35 * fs)), min(tpl_fs.size, j_index + int(0.5 * fs))
    template = _template_from_waves(tpl_fs[lo:hi], fs, j_index - lo, waves, to_unit, unit)

    # Whole-record cardiac force.
    cardiac_int, momentum_int = recoil(onsets, volumes, lvet, n_int)
    j_times = np.empty(onsets.size)
    for k, on in enumerate(onsets):
        centre = int(round((on + j_offset) * fs_int))
        half = int(0.06 * fs_int)
        if centre - half < 1 or centre + half > n_int - 1:
            j_times[k] = on + j_offset
        else:
            j_times[k], _ = _find_peak(cardiac_int, centre - half, centre + half, fs_int, 1.0)
    keep = (j_times >= 0.0) & (j_times < s.duration_s) & occupied
    ensemble = (_ensemble_template(cardiac_int, fs_int, factor, j_times, onsets, kinds,
                                   to_unit, unit)
                if occupied else None)
    cardiac = _decimate(cardiac_int, factor) * to_unit
    momentum = _decimate(momentum_int, factor)
    if not occupied:
        cardiac_ref = cardiac
        cardiac = np.zeros(n)
        momentum = np.zeros(n)
    else:
        cardiac_ref = cardiac

    # Channels layout.
    if s.n_channels == 4:
        half_w, half_d = 0.5 * s.plate_size_m[0], 0.5 * s.plate_size_m[1]
        positions = np.array([[-half_w, half_d], [half_w, half_d], [-half_w, -half_d],
                              [half_w, -half_d]])
        labels: tuple[str, ...] = _CELL_LABELS
    else:
        positions = np.zeros((1, 2))
        labels = ("accelerometer",) if s.quantity == "acceleration" else ("seat_load",)

    # Breathing and static load.
    lung = _lung_volume(breathing, t)
    resp_force = s.respiration_force_n * (lung / s.tidal_volume_l - 0.5)
    cop = np.tile(np.asarray(s.centre_of_pressure_m, dtype=float), (n, 1))
    cop[:, 1] += s.respiration_sway_m * (lung / s.tidal_volume_l - 0.5)
    static_scale = np.ones(n)
    mov_rng = np.random.default_rng([s.seed, 2])
    spans: list[ArtifactSpan] = []
    explicit = [(a, b) for a, b in s.movement_spans_s]
    posture_times = list(s.posture_change_times_s)
    posture_spans = [(p - 1.0, p + 2.0) for p in posture_times]
    movement = _pick_spans(mov_rng, s.movement_count, (1.0, 6.0), s.duration_s,
                           explicit + posture_spans, 8.0)
    extra_posture = _pick_spans(mov_rng, s.posture_change_count, (3.0, 3.0), s.duration_s,
                                explicit + posture_spans + movement, 8.0)
    posture_times += [a + 1.0 for a, _ in extra_posture]
    dyn_channels = np.zeros((s.n_channels, n))
    for a, b in sorted(explicit + movement):
        i0, i1 = int(a * fs), min(n, int(math.ceil(b * fs)))
        amp = mov_rng.uniform(15.0, 60.0)
        common = amp * _burst(mov_rng, i1 - i0, fs, (0.3, 15.0))
        for c in range(s.n_channels):
            own = 0.4 * amp * _burst(mov_rng, i1 - i0, fs, (0.3, 15.0)) if s.n_channels > 1 else 0
            dyn_channels[c, i0:i1] += common / s.n_channels + own
        spans.append(ArtifactSpan("movement", float(a), float(b)))
    for p in sorted(posture_times):
        ip = int(p * fs)
        step = mov_rng.uniform(-0.04, 0.04)
        static_scale[ip:] *= 1.0 + step
        cop[ip:] += mov_rng.uniform(-0.04, 0.04, 2)
        start, end = p - mov_rng.uniform(0.5, 1.0), p + mov_rng.uniform(1.5, 2.5)
        i0, i1 = max(0, int(start * fs)), min(n, int(math.ceil(end * fs)))
        amp = mov_rng.uniform(20.0, 50.0)
        common = amp * _burst(mov_rng, i1 - i0, fs, (0.3, 10.0))
        for c in range(s.n_channels):
            own = 0.4 * amp * _burst(mov_rng, i1 - i0, fs, (0.3, 10.0)) if s.n_channels > 1 else 0
            dyn_channels[c, i0:i1] += common / s.n_channels + own
        spans.append(ArtifactSpan("posture", float(max(0.0, start)), float(min(s.duration_s,
                                                                                end))))
    spans.sort(key=lambda sp: sp.start_s)

    static_n = mass * STANDARD_GRAVITY_M_S2 if occupied else 0.0
    if s.n_channels == 4:
        shares_t = lever_rule_shares(positions, cop)
        shares0 = lever_rule_shares(positions, np.asarray(s.centre_of_pressure_m, dtype=float))
    else:
        shares_t = np.ones((n, 1))
        shares0 = np.ones(1)
    tare = mov_rng.normal(0.0, 1.0, s.n_channels) if not occupied else np.zeros(s.n_channels)
    polarity = np.full(s.n_channels, float(s.polarity))
    if s.inverted_channel is not None:
        polarity[s.inverted_channel] *= -1.0
    clean = []
    for c in range(s.n_channels):
        dynamic = shares0[c] * cardiac
        if occupied:
            dynamic = dynamic + to_unit * (shares0[c] * resp_force + dyn_channels[c])
        if s.quantity == "acceleration":
            static = STANDARD_GRAVITY_M_S2 * static_scale
        else:
            static = static_n * static_scale * shares_t[:, c] + tare[c]
        clean.append(static + polarity[c] * dynamic)

    # Noise.
    noisy = []
    p_cardiac = _band_power(cardiac_ref, fs, _SNR_BAND_HZ)
    noise_rng = np.random.default_rng([s.seed, 3])
    for c in range(s.n_channels):
        x = clean[c].copy()
        if s.snr_db is not None:
            p_noise = p_cardiac / 10.0 ** (s.snr_db / 10.0) / s.n_channels
            if s.noisy_channel == c:
                p_noise *= 10.0 ** (s.noisy_channel_gain_db / 10.0)
            x += _sensor_noise(noise_rng, n, fs, p_noise)
        if s.mains_hz is not None:
            x += s.mains_amplitude * np.sin(2 * np.pi * s.mains_hz * t + noise_rng.uniform(0, 6.3))
        if s.floor_vibration:
            for when in np.sort(noise_rng.uniform(0, s.duration_s, int(s.duration_s / 8))):
                i0 = int(when * fs)
                tt = np.arange(min(n - i0, int(0.5 * fs))) / fs
                f0 = noise_rng.uniform(12.0, min(25.0, 0.4 * fs))
                x[i0:i0 + tt.size] += (to_unit * noise_rng.uniform(0.5, 3.0) / s.n_channels
                                       * np.exp(-tt / 0.08) * np.sin(2 * np.pi * f0 * tt))
        if s.adc_step is not None:
            x = np.round(x / s.adc_step) * s.adc_step
        if s.clip_range is not None:
            x = np.clip(x, s.clip_range[0], s.clip_range[1])
        noisy.append(x)

    lung_fs = lung
    in_rec = (breathing.starts_s >= 0.0) & (breathing.starts_s < s.duration_s)
    breath_rate = (60.0 / float(np.mean(breathing.durations_s[in_rec]))
                   if np.any(in_rec) else None)
    kept_j = j_times[keep]
    truth = SimulationTruth(
        body_mass_kg=s.body_mass_kg,
        electrical_times_s=electrical[keep],
        onset_times_s=onsets[keep],
        j_times_s=kept_j,
        beat_kinds=tuple(k for k, flag in zip(kinds, keep, strict=True) if flag),
        stroke_volumes_ml=volumes[keep],
        heart_rate_bpm=(60.0 / float(np.mean(np.diff(kept_j))) if kept_j.size > 1 else None),
        artifact_spans=tuple(spans),
        breathing_l=lung_fs if occupied else np.zeros(n),
        breath_onset_times_s=breathing.starts_s[in_rec] if occupied else np.zeros(0),
        breathing_rate_per_min=breath_rate if occupied else None,
        breathing_pause_spans_s=breathing.pauses if occupied else (),
        rsa_depth_ms=s.rsa_depth_ms,
        sv_modulation=s.sv_modulation,
        template=template if occupied else None,
        ensemble_template=ensemble,
        cardiac_signal=cardiac,
        blood_momentum_kg_m_s=momentum,
        clean_channels=tuple(clean),
        snr_db=s.snr_db,
        static_load_n=static_n,
    )
    return SimulatedRecording(
        channels=tuple(noisy),
        fs_hz=fs,
        labels=labels,
        quantity=s.quantity,
        unit=unit,
        positions_m=(tuple((float(x), float(y)) for x, y in positions)
                     if s.n_channels == 4 else None),
        truth=truth,
        settings=s,
    )
