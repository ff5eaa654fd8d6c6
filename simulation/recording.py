"""Recording: sensor front end, noise, sampling, and the simulate entry point.

Public API
----------
simulate(settings) -> SimulatedRecording
    One recording: channels plus :class:`SimulationTruth`.
SimulatedRecording, SimulationTruth, ArtifactSpan, BeatTemplate, WaveMark
    The result and its truth. The beat templates are read from the noise-free recoil at
    the internal rate (waves labelled H, I, J, K, L), so they live here with the sampling.

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

from simulation.physiology import (
    blood_momentum,
    lung_volume,
    make_beats,
    make_breathing,
    pick_spans,
    systole_s,
)
from simulation.settings import SimulationSettings
from simulation.support import (
    STANDARD_GRAVITY_M_S2,
    lever_rule_shares,
    support_preset,
    support_response,
)

__all__ = [
    "ArtifactSpan",
    "BeatTemplate",
    "SimulatedRecording",
    "SimulationTruth",
    "WaveMark",
    "simulate",
]

_CELL_LABELS = ("front_left", "front_right", "rear_left", "rear_right")
_INTERNAL_MIN_HZ = 2000.0
_SNR_BAND_HZ = (1.0, 20.0)
_REFERENCE_MASS_KG = 70.0


# ---------------------------------------------------------------------------------------------
# Result types
# ---------------------------------------------------------------------------------------------


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


# ---------------------------------------------------------------------------------------------
# Sensor front end and truth read-out (private)
# ---------------------------------------------------------------------------------------------


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
    SettingsError
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

    breathing = make_breathing(s, rng)
    beat_rng = np.random.default_rng([s.seed, 1])
    electrical, volumes, kinds = make_beats(s, beat_rng, breathing)
    intervals = np.diff(electrical, append=electrical[-1] + 60.0 / s.heart_rate_bpm)
    rate_bpm = 60.0 / np.maximum(np.r_[intervals[:1], intervals[:-1]], 0.25)
    lvet, pep = systole_s(rate_bpm)
    lvet = np.where(np.array(kinds) == "ectopic", 0.8 * lvet, lvet)
    lvet = lvet * np.clip(1.0 + 0.03 * beat_rng.standard_normal(lvet.size), 0.9, 1.1)
    onsets = electrical + pep
    preset = support_preset(s.support, body_mass_kg=mass, natural_hz=s.support_natural_hz,
                            damping_ratio=s.support_damping_ratio)

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
    lvet0, pep0 = systole_s(np.array([s.heart_rate_bpm]))
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
    lung = lung_volume(breathing, t)
    resp_force = s.respiration_force_n * (lung / s.tidal_volume_l - 0.5)
    cop = np.tile(np.asarray(s.centre_of_pressure_m, dtype=float), (n, 1))
    cop[:, 1] += s.respiration_sway_m * (lung / s.tidal_volume_l - 0.5)
    static_scale = np.ones(n)
    mov_rng = np.random.default_rng([s.seed, 2])
    spans: list[ArtifactSpan] = []
    explicit = [(a, b) for a, b in s.movement_spans_s]
    posture_times = list(s.posture_change_times_s)
    posture_spans = [(p - 1.0, p + 2.0) for p in posture_times]
    movement = pick_spans(mov_rng, s.movement_count, (1.0, 6.0), s.duration_s,
                           explicit + posture_spans, 8.0)
    extra_posture = pick_spans(mov_rng, s.posture_change_count, (3.0, 3.0), s.duration_s,
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
