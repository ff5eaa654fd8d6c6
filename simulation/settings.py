"""Settings of one simulated recording, checked on construction.

The simulator is not part of the engine and imports nothing from it: a setting out of range
raises :class:`SettingsError` (a ``ValueError`` naming the setting in ``field``), with the
engine's message template.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

__all__ = ["SUPPORTS", "SettingsError", "SimulationSettings"]

#: Names of the support presets (see :func:`simulation.support.support_preset`).
SUPPORTS = ("cushion", "firm", "ringing", "rigid")
_QUANTITIES = ("acceleration", "force")


class SettingsError(ValueError):
    """A simulation setting breaks its documented rule.

    Parameters
    ----------
    field
        Name of the offending setting, for example ``"fs_hz"``.
    message
        Full sentence: the rule, the value received and how to fix it.
    """

    def __init__(self, field: str, message: str) -> None:
        super().__init__(message)
        self.field = field
        self.message = message


def _in_range(name: str, value: float, low: float, high: float, unit: str) -> None:
    if not (isinstance(value, int | float) and math.isfinite(value) and low <= value <= high):
        raise SettingsError(
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
    support_natural_hz, support_damping_ratio : float or None
        Natural frequency (1-60 Hz) and damping ratio (0.02-2) that replace the preset's,
        for example 4 Hz for a soft mattress on a frame; None keeps the preset's value. Not
        allowed with the rigid support.
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
    support_natural_hz: float | None = None
    support_damping_ratio: float | None = None
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
            raise SettingsError(
                "polarity", f"`polarity` must be -1 or 1; got {self.polarity!r}."
            )
        if self.support not in SUPPORTS:
            raise SettingsError(
                "support", f"`support` must be one of {', '.join(SUPPORTS)}; got {self.support!r}."
            )
        if self.support_natural_hz is not None:
            _in_range("support_natural_hz", self.support_natural_hz, 1.0, 60.0, " Hz")
        if self.support_damping_ratio is not None:
            _in_range("support_damping_ratio", self.support_damping_ratio, 0.02, 2.0, "")
        if self.support == "rigid" and (self.support_natural_hz is not None
                                        or self.support_damping_ratio is not None):
            raise SettingsError(
                "support", "`support` must not be 'rigid' when support_natural_hz or "
                "support_damping_ratio is set; got 'rigid'."
            )
        _in_range("movement_count", self.movement_count, 0, 50, "")
        _in_range("posture_change_count", self.posture_change_count, 0, 20, "")
        _in_range("ectopic_fraction", self.ectopic_fraction, 0.0, 0.3, "")
        if self.n_channels not in (1, 4):
            raise SettingsError(
                "n_channels", f"`n_channels` must be 1 or 4; got {self.n_channels!r}."
            )
        if self.quantity not in _QUANTITIES:
            raise SettingsError(
                "quantity",
                f"`quantity` must be one of {', '.join(_QUANTITIES)}; got {self.quantity!r}.",
            )
        if self.body_mass_kg is not None:
            _in_range("body_mass_kg", self.body_mass_kg, 20.0, 300.0, " kg")
        if self.quantity == "acceleration" and (self.n_channels != 1 or self.body_mass_kg is None):
            raise SettingsError(
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
                raise SettingsError(
                    name,
                    f"`{name}` must be a channel index from 0 to {self.n_channels - 1}; "
                    f"got {index!r}.",
                )
        _in_range("noisy_channel_gain_db", self.noisy_channel_gain_db, 0.0, 40.0, " dB")
        if self.adc_step is not None and not self.adc_step > 0:
            raise SettingsError(
                "adc_step", f"`adc_step` must be positive; got {self.adc_step!r}."
            )
        if self.clip_range is not None and not self.clip_range[0] < self.clip_range[1]:
            raise SettingsError(
                "clip_range", f"`clip_range` must be (low, high) with low < high; "
                f"got {self.clip_range!r}."
            )
        for name in ("movement_spans_s", "breathing_pause_spans_s"):
            for start, end in getattr(self, name):
                if not 0.0 <= start < end <= self.duration_s:
                    raise SettingsError(
                        name,
                        f"`{name}` must hold spans with 0 <= start < end <= duration_s "
                        f"({self.duration_s:g} s); got ({start!r}, {end!r}).",
                    )
        for when in self.posture_change_times_s:
            if not 0.0 <= when <= self.duration_s:
                raise SettingsError(
                    "posture_change_times_s",
                    f"`posture_change_times_s` must lie in [0, {self.duration_s:g}] s; "
                    f"got {when!r}.",
                )
