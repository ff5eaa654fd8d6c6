"""Waveform morphology of the body-recoil beat: H, I, J, K, L waves of the ensemble template.

Public function
---------------
beat_morphology
    Beat-ensemble template, wave locations with per-wave confidence, amplitudes, intervals,
    J-wave width, beat-to-beat agreement, per-beat J-K amplitudes and a stationary-wavelet
    shape signature that is comparable across sampling rates.
"""

from __future__ import annotations

import functools
import warnings
from dataclasses import dataclass, field

import numpy as np
import pywt
from numpy.typing import ArrayLike, NDArray
from scipy import ndimage, signal

from features._checks import check_between, check_sampling_rate, check_usable, finite_where
from features._numeric import MAD_TO_SD, clip, lane_median, mean, median_1d, std, windows
from features.catalogue import (
    AMPLITUDE_UNIT,
    NONNEGATIVE,
    REF_INAN,
    REF_OURS,
    REF_PYWT,
    UNIT_INTERVAL,
    FeatureDefinition,
    with_tolerance,
)
from features.errors import InvalidInputError
from features.filters import bridge_masked, frozen, lowpass, polyphase_fir, rate_ratio
from features.limits import MAX_BODY_MASS_KG, MIN_BODY_MASS_KG
from features.wavelets import WAVELET, detail_bands

__all__ = ["CATALOGUE", "MorphologyResult", "WaveLocation", "beat_morphology"]

EPOCH_START_S = -0.35
"""Start of each beat epoch relative to the J peak (s)."""
EPOCH_END_S = 0.45
"""End of each beat epoch relative to the J peak (s)."""
MIN_TEMPLATE_BEATS = 10
"""Fewest confident, fully usable beats from which a template is built."""
SIGNATURE_FS_HZ = 250.0
"""Reference rate the template is resampled to before the wavelet signature (Hz)."""
ANALYSIS_FS_HZ = 250.0
"""Traces sampled at twice this rate or more are decimated by an integer factor to at least
this rate before the epochs are read (Hz)."""
SIGNATURE_WAVELET = WAVELET
SIGNATURE_LEVELS = 6
WAVE_LOWPASS_HZ = 25.0
"""Cut-off of the zero-phase low-pass applied to the template before its waves are located (Hz)."""
SPLIT_GROUPS = 6
"""Interleaved beat groups whose separate templates give the standard errors (at most)."""
INTERVAL_SE_SCALE_MS = 5.0
"""Standard error of an interval at which its precision factor is 1/2 (ms)."""
AMPLITUDE_SE_SCALE_PCT = 7.5
"""Relative standard error of an amplitude at which its precision factor is 1/2 (%)."""

_TRIM_PROPORTION = 0.2  # cut from each end by the trimmed mean
_SORTED_BEATS_UP_TO = 6000
"""Beats up to which the lanes are sorted rather than partitioned (:func:`_ordered_lanes`).
numpy 2.4's sort on an AVX-512 machine, 201 lanes of real epochs: sorted against
partitioned one order statistic at a time 2.3 against 3.4 ms at 4000 beats, 5.5 against 4.9
at 8000, 12.8 against 8.2 at 16 329."""
_BEAT_SEARCH_S = 0.03  # half-width of the per-beat search around each template wave
_MIN_BEAT_CORRELATION = 0.5  # per-beat amplitudes kept only from beats this like the template
_FIT_HALF_WIDTH_S = 0.008  # half-width of the least-squares parabola at each extremum
_SPLINE_MARGIN = 4  # samples beyond the epoch that must also be usable (spline support)
_EPOCH_CHUNK = 512  # beats interpolated per call (in cache: 2 h at 250 Hz, 36 -> 32 ms)

# (name, sign, anchor wave, window start s, window end s) relative to the anchor's time.
_WAVE_RULES: tuple[tuple[str, int, str | None, float, float], ...] = (
    ("J", +1, None, -0.06, 0.06),
    ("I", -1, "J", -0.15, -0.04),
    ("H", +1, "I", -0.15, -0.01),
    ("K", -1, "J", 0.04, 0.20),
    ("L", +1, "K", 0.02, 0.20),
)


@dataclass(frozen=True)
class WaveLocation:
    """One wave of the template.

    Attributes
    ----------
    name
        Wave letter: ``"H"``, ``"I"``, ``"J"``, ``"K"`` or ``"L"``.
    time_ms
        Time of the extremum relative to the aligned J instants (ms); None when not found.
    amplitude
        Signed template value at the extremum, from the template baseline, in the result's
        ``amplitude_unit``; None when not found.
    prominence
        Prominence of the extremum on the template (``scipy.signal.peak_prominences``), in
        ``amplitude_unit``; None when not found.
    location_sd_ms
        Robust spread (``MAD_TO_SD`` x MAD) of the wave time over individual beats (ms).
    confidence
        In [0, 1]: prominence-to-noise factor times location-consistency factor (see Notes of
        :func:`beat_morphology`).
    """

    name: str
    time_ms: float | None
    amplitude: float | None
    prominence: float | None
    location_sd_ms: float | None
    confidence: float


@dataclass(frozen=True, eq=False)
class MorphologyResult:
    """Morphology family result. Amplitudes are in ``amplitude_unit``; None means not computed
    honestly, and ``flags`` says why.

    Attributes
    ----------
    confidence, flags
        Family confidence in [0, 1] and quality flags.
    beats_offered, beats_used
        Beats given, and confident fully-usable beats averaged into the template.
    template, template_fs_hz, template_start_s
        Robust-average template (baseline subtracted, read-only array) sampled at
        ``template_fs_hz`` starting ``template_start_s`` before J; None when not built.
    template_noise
        Standard error of the template (median over samples of the beat-to-beat robust spread
        divided by sqrt(beats_used)).
    waves
        The five :class:`WaveLocation` in the order H, I, J, K, L.
    i_amplitude, j_amplitude, k_amplitude
        Signed wave amplitudes from the template baseline.
    ij_amplitude, jk_amplitude
        Peak-to-peak J - I and J - K.
    ij_amplitude_per_kg, jk_amplitude_per_kg
        The same divided by body mass (unit ``amplitude_unit``/kg); None without body mass.
    ij_interval_ms, jk_interval_ms, ik_interval_ms, hj_interval_ms
        Time between the wave extrema (ms).
    j_width_ms
        Full width of J at half its height above the straight line joining I and K (ms).
    template_correlation_median
        Median Pearson correlation of the template beats with the template.
    beat_times_s, beat_jk_amplitudes
        Per-beat J - K amplitude of every fully usable beat that correlates with the template
        at >= 0.5, and the J time of that beat (read-only arrays).
    jk_amplitude_cv_pct
        Coefficient of variation of ``beat_jk_amplitudes`` (SD with ddof=1 over the mean, %).
    wavelet_signature, wavelet_bands_hz
        Share of the template's wavelet-detail energy in each stationary-wavelet detail level
        (finest first; sums to 1) and the nominal frequency band of each level (Hz).
    ij_interval_se_ms, jk_interval_se_ms, ij_amplitude_se, jk_amplitude_se
        Standard errors of the two intervals (ms) and the two peak-to-peak amplitudes
        (``amplitude_unit``) from the split-ensemble spread (Notes, step 10); None when a
        group template lacks one of the waves.
    ij_interval_confidence, jk_interval_confidence, ij_amplitude_confidence, \
jk_amplitude_confidence
        Family confidence times the measure's precision factor (Notes, step 10), in [0, 1].
    """

    confidence: float
    flags: tuple[str, ...]
    amplitude_unit: str
    beats_offered: int
    beats_used: int
    template: NDArray[np.float64] | None = field(default=None, repr=False)
    template_fs_hz: float | None = None
    template_start_s: float = EPOCH_START_S
    template_noise: float | None = None
    waves: tuple[WaveLocation, ...] = ()
    i_amplitude: float | None = None
    j_amplitude: float | None = None
    k_amplitude: float | None = None
    ij_amplitude: float | None = None
    jk_amplitude: float | None = None
    ij_amplitude_per_kg: float | None = None
    jk_amplitude_per_kg: float | None = None
    ij_interval_ms: float | None = None
    jk_interval_ms: float | None = None
    ik_interval_ms: float | None = None
    hj_interval_ms: float | None = None
    j_width_ms: float | None = None
    template_correlation_median: float | None = None
    jk_amplitude_cv_pct: float | None = None
    beat_times_s: NDArray[np.float64] = field(
        default_factory=lambda: frozen(np.empty(0)), repr=False
    )
    beat_jk_amplitudes: NDArray[np.float64] = field(
        default_factory=lambda: frozen(np.empty(0)), repr=False
    )
    wavelet_signature: tuple[float, ...] | None = None
    wavelet_bands_hz: tuple[tuple[float, float], ...] = ()
    ij_interval_se_ms: float | None = None
    jk_interval_se_ms: float | None = None
    ij_amplitude_se: float | None = None
    jk_amplitude_se: float | None = None
    ij_interval_confidence: float = 0.0
    jk_interval_confidence: float = 0.0
    ij_amplitude_confidence: float = 0.0
    jk_amplitude_confidence: float = 0.0

    def wave(self, name: str) -> WaveLocation | None:
        """Return the wave called ``name`` (``"H"`` ... ``"L"``), or None if absent."""
        for w in self.waves:
            if w.name == name:
                return w
        return None


def beat_morphology(
    signal: ArrayLike,
    fs_hz: float,
    beat_times_s: ArrayLike,
    *,
    beat_confidence: ArrayLike | None = None,
    usable: ArrayLike | None = None,
    body_mass_kg: float | None = None,
    amplitude_unit: str = "N",
    min_beat_confidence: float = 0.5,
) -> MorphologyResult:
    """Measure the H-I-J-K-L morphology of the beat-ensemble template.

    Parameters
    ----------
    signal
        1-D fused force trace in ``amplitude_unit``, polarity corrected so that J is positive.
        At least 1 s long, finite where ``usable``.
    fs_hz
        Sampling rate, Hz, within ``features.limits.MIN_FS_HZ`` to ``MAX_FS_HZ``.
    beat_times_s
        J-peak instants (s from the first sample), sub-sample precision, increasing.
    beat_confidence
        Per-beat confidence in [0, 1], same length as ``beat_times_s``; all 1 when None.
    usable
        Boolean mask, same length as ``signal``; True where the sample may be used. All usable
        when None.
    body_mass_kg
        Body mass (kg), within ``features.limits.MIN_BODY_MASS_KG`` to
        ``MAX_BODY_MASS_KG``; enables the per-kilogram amplitudes.
    amplitude_unit
        Unit of ``signal`` (for example ``"N"``), copied into the result.
    min_beat_confidence
        Beats with confidence below this (0 to 1) are not averaged into the template.

    Returns
    -------
    MorphologyResult
        With None values, confidence 0 and a reason flag when fewer than 10 confident fully
        usable beats exist or J cannot be located.

    Raises
    ------
    InvalidInputError
        For a non-1-D or too short signal, a sampling rate out of range, non-finite or
        unsorted beat times, arrays of mismatched length, a confidence outside [0, 1], a
        body mass out of range or an empty amplitude unit.

    Notes
    -----
    1. A trace sampled at 500 Hz or more is first decimated by the integer factor
       q = floor(fs_hz / 250) (``scipy.signal.resample_poly``, linear-phase anti-alias FIR,
       no delay), so epochs are read at 250-499 Hz: the recoil waves carry their energy
       below about 25 Hz and the wavelet signature below is computed at 250 Hz anyway;
       ``template_fs_hz`` reports the rate used. Epochs run from J - 0.35 s to J + 0.45 s
       on a grid of one sample at that rate. The beat times
       are sub-sample, so each epoch is read from the cubic B-spline interpolant of the trace,
       which aligns all beats on J exactly: every sample of an epoch shares the beat's
       fractional offset, so an epoch is four gathers of the spline coefficients weighted
       by the cubic B-spline basis at that offset (the values of
       ``scipy.ndimage.map_coordinates``, order 3, on the same coordinates).
       Masked samples are bridged linearly before the spline is built; a beat is used only
       when its epoch plus a 4-sample spline margin lies wholly in usable samples.
    2. A straight line fitted by least squares is removed from each epoch (breathing baseline).
    3. Template = 20 % trimmed mean (``scipy.stats.trim_mean``, 20 % cut at each end) over the
       confident beats (confidence >= ``min_beat_confidence``). Its baseline, the median of the
       template, is subtracted; signed amplitudes are measured from it. Template noise =
       median over samples of ``MAD_TO_SD`` x MAD across beats, divided by sqrt(beats).
    4. Waves are located on the template low-passed at 25 Hz (zero-phase Butterworth,
       order 2 forward and backward, skipped when 25 Hz is above 0.45 fs_hz): the recoil
       waves carry their energy below about 20 Hz (common practice: BCG is band-limited to
       about 0.5-25 Hz), while the template's residual noise is broadband, so on a noisy
       template a broad, flat I or K trough is otherwise placed by the noise (cut-offs of
       20-30 Hz gave the same acceptance on the project's simulated cohort). The low-pass
       flattens narrow waves, so only the times come from it: each amplitude is the vertex
       value of the same parabola fitted to the full-band template at that sample, and the
       J width, ``template`` and the wavelet signature use the full band. In order and by
       sign: J = largest local maximum within +/-60 ms of
       the aligned instant; I = deepest local minimum 40-150 ms before J; H = largest local
       maximum 10-150 ms before I; K = deepest local minimum 40-200 ms after J; L = largest
       local maximum 20-200 ms after K. A wave whose window holds no local extremum of the
       right sign is reported missing. Times and values are refined by parabolic
       interpolation: a parabola fitted by least squares to the samples within +/-8 ms of
       the extreme sample (at least its two neighbours, so at 100 Hz it is the classic
       three-point parabola). The wider fit is our departure: on a noisy template of a broad
       wave the three-point vertex follows the sample noise.
    5. Wave confidence = clip((P / noise - 3) / 7, 0, 1) x 1 / (1 + (sd / 20 ms)^2), with P
       the prominence on the template and sd the robust spread of the same extremum's time
       over single beats (searched within +/-30 ms of the template wave).
    6. J width: the reference line joins the I and K extrema; the J height h is measured above
       it; the width is the time between the crossings of line + h / 2 on either side of J
       (linear interpolation between samples).
    7. Per-beat J - K amplitudes: on every fully usable beat whose correlation with the
       template is >= 0.5 (not only the confident ones), J and K are the extrema within
       +/-30 ms of the template's J and K, refined by the same parabola.
    8. Wavelet signature: the template is resampled to 250 Hz (``scipy.signal.resample_poly``
       with the rational ratio 250 / fs_hz), padded symmetrically to a multiple of 2**6
       samples, and decomposed with ``pywt.swt`` (wavelet ``sym4``, 6 levels, ``norm=True``
       so the decomposition preserves energy). The signature is the share of detail energy,
       counted over the unpadded samples, in each level d1 (62.5-125 Hz) ... d6
       (1.95-3.9 Hz). Fixing the analysis rate fixes the band of every level, so the same
       beat shape sampled at 100 to 1000 Hz gives the same signature.
    9. Family confidence = min(1, beats/30) x clip(median correlation, 0, 1) x mean of the
       I, J and K wave confidences (a missing wave counts 0).
    10. Precision of the I-J and J-K intervals and amplitudes: the template beats are dealt
        into k = min(6, max(2, beats // 5)) interleaved groups (beat 0, k, 2k, ... in the
        first); each group's template is built and its waves located as above; the standard
        error of the full template's measure is the groups' sample SD divided by sqrt(k).
        Precision factor = 1 / (1 + (SE / s)^2) with s = 5 ms for intervals and 7.5 % of
        the value for amplitudes: half the precision the project states for these measures
        (10 ms, 15 %), so the factor is 1/2 when the 95 % interval (+/- 2 SE) spans that
        bound. Each measure's confidence is the family confidence times
        its factor (0 when a group lacks I, J or K). This is a split-sample (k-fold)
        estimate of the sampling error of an ensemble average; it sees noise and beat-to-beat
        variation, not a bias common to all beats (such as overlapping responses of
        successive beats on a ringing support).

    The wave letters follow Gordon (1877) and the nomenclature of Starr et al. (1939); the
    windows are our reading of the typical wave timing in Inan et al. (2015) (from memory).

    References
    ----------
    .. [1] Inan OT, Migeotte PF, Park KS, Etemadi M, Tavakolian K, Casanella R, Zanetti J,
       Tank J, Funtova I, Prisk GK, Di Rienzo M. "Ballistocardiography and
       seismocardiography: a review of recent advances." IEEE Journal of Biomedical and
       Health Informatics 19(4):1414-1427, 2015. doi:10.1109/JBHI.2014.2361732
    .. [2] Starr I, Rawson AJ, Schroeder HA, Joseph NR. "Studies on the estimation of cardiac
       output in man, and of abnormalities in cardiac function, from the heart's recoil and
       the blood's impacts; the ballistocardiogram." American Journal of Physiology
       127:1-28, 1939 (from memory).
    .. [3] Gordon JW. "Certain molar movements of the human body produced by the circulation
       of the blood." Journal of Anatomy and Physiology 11:533-536, 1877 (from memory).
    .. [4] Lee GR, Gommers R, Waselewski F, Wohlfahrt K, O'Leary A. "PyWavelets: a Python
       package for wavelet analysis." Journal of Open Source Software 4(36):1237, 2019.
       doi:10.21105/joss.01237
    """
    x, fs, beats, conf, mask = _validate(
        signal, fs_hz, beat_times_s, beat_confidence, usable, body_mass_kg, min_beat_confidence
    )
    if not isinstance(amplitude_unit, str) or not amplitude_unit.strip():
        raise InvalidInputError(
            "amplitude_unit", f"`amplitude_unit` must be a non-empty string; got "
            f"{amplitude_unit!r}."
        )
    flags: list[str] = []
    offered = int(beats.size)
    x, fs, mask = _to_analysis_rate(x, fs, mask)
    epochs, inside = _epochs(x, fs, beats, mask)
    chosen = inside & (conf >= min_beat_confidence)
    if int(chosen.sum()) < MIN_TEMPLATE_BEATS:
        return _empty(amplitude_unit, offered, int(chosen.sum()), "too_few_confident_beats")
    template_epochs = epochs if chosen.all() else epochs[chosen]
    template, noise = _robust_template(template_epochs)
    tau_s = (np.arange(template.size) + round(EPOCH_START_S * fs)) / fs
    waves, found, k = _template_and_split_waves(template, template_epochs, tau_s, fs, noise)
    by_name = {w.name: w for w in waves}
    if by_name["J"].time_ms is None:
        return _empty(amplitude_unit, offered, int(chosen.sum()), "j_wave_not_found")
    flags.extend(f"{w.name.lower()}_wave_not_found" for w in waves if w.time_ms is None)
    # One correlation per usable beat; the template's beats are among them.
    inside_epochs = epochs if inside.all() else epochs[inside]
    corr_inside = _correlations(inside_epochs, template)
    corr_template = corr_inside[chosen[inside]]
    beat_t, beat_jk, cv, jk_flags = _per_beat_jk(inside_epochs, beats[inside], corr_inside,
                                                 tau_s, fs, by_name)
    flags.extend(jk_flags)
    signature, bands, sig_flags = _wavelet_signature(template, fs)
    flags.extend(sig_flags)
    amp = {n: by_name[n].amplitude for n in "HIJKL"}
    t_ms = {n: by_name[n].time_ms for n in "HIJKL"}
    ij = _diff(amp["J"], amp["I"])
    jk = _diff(amp["J"], amp["K"])
    wave_conf = np.mean([by_name[n].confidence for n in "IJK"])
    r_med = median_1d(corr_template)
    confidence = min(1.0, chosen.sum() / 30.0) * clip(r_med, 0.0, 1.0) * wave_conf
    if offered - int(chosen.sum()) > 0:
        flags.append("beats_excluded_from_template")
    se = _split_standard_errors(found, k)
    family = clip(confidence, 0.0, 1.0)
    precision = {
        "ij_interval": _precision(se["ij_interval"], INTERVAL_SE_SCALE_MS),
        "jk_interval": _precision(se["jk_interval"], INTERVAL_SE_SCALE_MS),
        "ij_amplitude": _precision(_relative_pct(se["ij_amplitude"], ij), AMPLITUDE_SE_SCALE_PCT),
        "jk_amplitude": _precision(_relative_pct(se["jk_amplitude"], jk), AMPLITUDE_SE_SCALE_PCT),
    }
    return MorphologyResult(
        confidence=family,
        flags=tuple(flags),
        amplitude_unit=amplitude_unit,
        beats_offered=offered,
        beats_used=int(chosen.sum()),
        template=frozen(template),
        template_fs_hz=fs,
        template_start_s=float(tau_s[0]),
        template_noise=noise,
        waves=waves,
        i_amplitude=amp["I"],
        j_amplitude=amp["J"],
        k_amplitude=amp["K"],
        ij_amplitude=ij,
        jk_amplitude=jk,
        ij_amplitude_per_kg=_per_kg(ij, body_mass_kg),
        jk_amplitude_per_kg=_per_kg(jk, body_mass_kg),
        ij_interval_ms=_diff(t_ms["J"], t_ms["I"]),
        jk_interval_ms=_diff(t_ms["K"], t_ms["J"]),
        ik_interval_ms=_diff(t_ms["K"], t_ms["I"]),
        hj_interval_ms=_diff(t_ms["J"], t_ms["H"]),
        j_width_ms=_j_width_ms(template, tau_s, by_name),
        template_correlation_median=r_med,
        jk_amplitude_cv_pct=cv,
        beat_times_s=frozen(beat_t),
        beat_jk_amplitudes=frozen(beat_jk),
        wavelet_signature=signature,
        wavelet_bands_hz=bands,
        ij_interval_se_ms=se["ij_interval"],
        jk_interval_se_ms=se["jk_interval"],
        ij_amplitude_se=se["ij_amplitude"],
        jk_amplitude_se=se["jk_amplitude"],
        ij_interval_confidence=family * precision["ij_interval"],
        jk_interval_confidence=family * precision["jk_interval"],
        ij_amplitude_confidence=family * precision["ij_amplitude"],
        jk_amplitude_confidence=family * precision["jk_amplitude"],
    )


# --------------------------------------------------------------------------- validation


def _validate(
    signal: ArrayLike,
    fs_hz: float,
    beat_times_s: ArrayLike,
    beat_confidence: ArrayLike | None,
    usable: ArrayLike | None,
    body_mass_kg: float | None,
    min_beat_confidence: float,
) -> tuple[NDArray[np.float64], float, NDArray[np.float64], NDArray[np.float64], NDArray[np.bool_]]:
    fs = check_sampling_rate(fs_hz)
    x = np.asarray(signal, dtype=float)
    if x.ndim != 1:
        raise InvalidInputError("signal", f"`signal` must be 1-D; got {x.ndim} dimensions.")
    if x.size < fs:
        raise InvalidInputError(
            "signal", f"`signal` must hold at least 1 s ({int(np.ceil(fs))} samples); "
            f"got {x.size}."
        )
    mask = check_usable(usable, x.size, of="signal")
    if not finite_where(x, mask):
        raise InvalidInputError(
            "signal", "`signal` must be finite where `usable` is True; got NaN or infinity."
        )
    beats = np.asarray(beat_times_s, dtype=float).reshape(-1)
    if beats.size and (not np.all(np.isfinite(beats)) or np.any(np.diff(beats) <= 0)):
        raise InvalidInputError(
            "beat_times_s", "`beat_times_s` must be finite and strictly increasing (s); got "
            "values that are not."
        )
    if beat_confidence is None:
        conf = np.ones(beats.size)
    else:
        conf = np.asarray(beat_confidence, dtype=float).reshape(-1)
        if conf.size != beats.size:
            raise InvalidInputError(
                "beat_confidence", f"`beat_confidence` must have the length of `beat_times_s` "
                f"({beats.size}); got {conf.size}."
            )
        if np.any(~np.isfinite(conf)) or np.any((conf < 0) | (conf > 1)):
            raise InvalidInputError(
                "beat_confidence", "`beat_confidence` must lie in [0, 1]; got values outside."
            )
    if body_mass_kg is not None:
        check_between(body_mass_kg, name="body_mass_kg", low=MIN_BODY_MASS_KG,
                      high=MAX_BODY_MASS_KG, unit="kg")
    if not 0.0 <= float(min_beat_confidence) <= 1.0:
        raise InvalidInputError(
            "min_beat_confidence",
            f"`min_beat_confidence` must be between 0 and 1; got {min_beat_confidence}.",
        )
    if not mask.all():
        x = bridge_masked(x, mask)
    return x, fs, beats, conf, mask


def _to_analysis_rate(
    x: NDArray[np.float64], fs: float, mask: NDArray[np.bool_]
) -> tuple[NDArray[np.float64], float, NDArray[np.bool_]]:
    """Decimate by q = floor(fs / 250) when q >= 2 (Notes, step 1); a decimated sample is
    usable when all q source samples are."""
    q = int(fs // ANALYSIS_FS_HZ)
    if q < 2:
        return x, fs, mask
    y = np.asarray(signal.resample_poly(x, 1, q, window=polyphase_fir(1, q)), dtype=float)
    n_full = x.size // q
    ok = np.ones(y.size, dtype=bool)
    ok[:n_full] = mask[: n_full * q].reshape(n_full, q).all(axis=1)
    if y.size > n_full:
        ok[n_full:] = mask[n_full * q :].all()
    return y, fs / q, ok


def _diff(a: float | None, b: float | None) -> float | None:
    return None if a is None or b is None else float(a - b)


def _per_kg(value: float | None, mass_kg: float | None) -> float | None:
    return None if value is None or mass_kg is None else value / float(mass_kg)


def _empty(unit: str, offered: int, used: int, reason: str) -> MorphologyResult:
    return MorphologyResult(
        confidence=0.0, flags=(reason,), amplitude_unit=unit, beats_offered=offered,
        beats_used=used,
    )


# --------------------------------------------------------------------------- kernels


def _epochs(
    x: NDArray[np.float64], fs: float, beats: NDArray[np.float64], mask: NDArray[np.bool_]
) -> tuple[NDArray[np.float64], NDArray[np.bool_]]:
    """Detrended epochs (beats x samples) read from the spline interpolant; inside-mask flags.

    A row whose flag is False repeats the first usable beat's epoch, a placeholder that
    keeps every row where it was (the projection below is a BLAS product, whose rounding
    can depend on a row's place in the block).
    """
    n_pre, n_post = round(-EPOCH_START_S * fs), round(EPOCH_END_S * fs)
    width = n_pre + n_post + 1
    centre = beats * fs
    lo = np.floor(centre - n_pre).astype(np.int64) - _SPLINE_MARGIN
    hi = np.ceil(centre + n_post).astype(np.int64) + _SPLINE_MARGIN
    inside = (lo >= 0) & (hi < x.size)
    if not mask.all():  # no masked sample from lo to hi
        masked = np.flatnonzero(~mask)
        inside &= np.searchsorted(masked, lo) == np.searchsorted(masked, hi, side="right")
    if not inside.any():
        return np.empty((beats.size, width)), inside
    coeffs = ndimage.spline_filter1d(x, order=3, mode="mirror")
    if not inside.all():
        centre = np.where(inside, centre, centre[np.argmax(inside)])
    offsets = np.arange(-n_pre, n_post + 1, dtype=float)
    oc = offsets - mean(offsets)
    ep = np.empty((centre.size, width))
    scratch = np.empty((min(centre.size, _EPOCH_CHUNK), width))
    for a in range(0, centre.size, _EPOCH_CHUNK):  # bounded memory for long recordings
        e = ep[a : a + _EPOCH_CHUNK]
        s = scratch[: e.shape[0]]
        _spline_rows(coeffs, centre[a : a + _EPOCH_CHUNK], n_pre, e, s)
        e -= mean(e, axis=1, keepdims=True)
        e -= np.multiply(((e @ oc) / np.dot(oc, oc))[:, None], oc[None, :], out=s)
    return ep, inside


def _spline_rows(
    coeffs: NDArray[np.float64], centre: NDArray[np.float64], n_pre: int,
    out: NDArray[np.float64], scratch: NDArray[np.float64],
) -> None:
    """Cubic B-spline interpolant with coefficients ``coeffs`` at ``centre[r] + o``, o = -n_pre,
    -n_pre + 1, ... (one row of ``out`` per centre, in samples): the values of
    ``scipy.ndimage.map_coordinates(coeffs, ..., order=3, mode="mirror", prefilter=False)``.

    Every point of a row shares the fractional part of its centre, so a row is four
    coefficient gathers weighted by the basis at that fraction (the weights and the sum
    in the order scipy uses, so the same numbers). The centres must keep the spline's
    support inside ``coeffs`` (``_SPLINE_MARGIN``). A row whose last coordinate is not
    exact in floating point (the sum crossed a power of two and dropped the centre's last
    bit) has fractions of its own: it is read by ``map_coordinates`` itself. ``scratch``
    is working space of the shape of ``out``.
    """
    width = out.shape[1]
    base = np.floor(centre)
    y = centre - base  # exact
    z = 1.0 - y
    w1 = (y * y * (y - 2.0) * 3.0 + 4.0) / 6.0
    w2 = (z * z * (z - 2.0) * 3.0 + 4.0) / 6.0
    w0 = z * z * z / 6.0
    w3 = 1.0 - w0 - w1 - w2
    g = windows(coeffs, width + 3)[base.astype(np.int64) - (n_pre + 1)]
    np.multiply(g[:, :width], w0[:, None], out=out)
    for j, w in ((1, w1), (2, w2), (3, w3)):
        out += np.multiply(g[:, j : j + width], w[:, None], out=scratch)
    last = width - 1 - n_pre
    rounded = (centre + last) - last != centre
    if rounded.any():
        coords = centre[rounded, None] + np.arange(-n_pre, last + 1, dtype=float)[None, :]
        out[rounded] = ndimage.map_coordinates(coeffs, coords.reshape(1, -1), order=3,
                                               mode="mirror", prefilter=False).reshape(-1, width)


def _parabola_rows(
    y: NDArray[np.float64], k: NDArray[np.int64], h: int, sign: int = 1,
    rows: NDArray[np.int64] | None = None,
) -> tuple[NDArray[np.float64], NDArray[np.float64]]:
    """Vertex of a least-squares parabola around the maximum at ``k[r]`` of row ``rows[r]``
    of ``sign * y`` (``rows`` = 0, 1, ... when None).

    Fit ``r`` is made over samples ``k[r] - h ... k[r] + h`` (the window is moved inside the
    row if needed); with h = 1 this is three-point parabolic interpolation. Returns the vertex
    offset from ``k`` (samples, clipped to the window) and the vertex value. A fit without a
    maximum (curvature >= 0) falls back to the sample itself. The sign is applied to the
    fitted samples only (exact), not to every row. Through ``rows``, extrema of several
    rows of one array (or several of one row) are fitted in one call.
    """
    # np.minimum/np.maximum rather than np.clip: the same values, without clip's per-call
    # overhead, which counted at the dozens of calls per recording
    width = y.shape[1]
    kc = np.minimum(np.maximum(k, h), width - 1 - h)
    first = (np.arange(k.size) if rows is None else rows) * width + kc
    seg = np.ascontiguousarray(y).reshape(-1)[first[:, None] + np.arange(-h, h + 1)]
    if sign != 1:
        seg *= sign
    a, b, c = _parabola_solver(h) @ seg.T
    good = c < 0
    d = np.where(good, np.minimum(np.maximum(-b / (2.0 * np.where(good, c, -1.0)), -h), h),
                 0.0)
    value = np.where(good, a + b * d + c * d**2, seg[:, h])
    return np.asarray((kc - k) + d, dtype=float), np.asarray(value, dtype=float)


@functools.lru_cache(maxsize=16)
def _parabola_solver(h: int) -> NDArray[np.float64]:
    """Least-squares solver (pseudo-inverse, read-only) of a parabola on offsets -h..h."""
    u = np.arange(-h, h + 1)
    return frozen(np.linalg.pinv(np.column_stack((np.ones(u.size), u, u**2)).astype(float)))


def _fit_half_width(fs: float) -> int:
    """Half-width (samples) of the least-squares parabola: 8 ms, at least 1 sample."""
    return max(1, round(_FIT_HALF_WIDTH_S * fs))


def _template_and_split_waves(
    template: NDArray[np.float64], epochs: NDArray[np.float64], tau_s: NDArray[np.float64],
    fs: float, noise: float,
) -> tuple[tuple[WaveLocation, ...],
           dict[str, tuple[NDArray[np.int64], NDArray[np.float64], NDArray[np.float64]]], int]:
    """The template's waves (:func:`_locate_waves`), and the waves of it and of the ``k``
    split ensembles' templates (:func:`_split_templates`, for step 6's standard errors) as
    :func:`_wave_rows` of one stack, template first: one low-pass and one search for all."""
    parts = _split_templates(epochs)
    rows = np.concatenate((template[None, :], parts))
    views = _wave_view(rows, fs)
    found = _wave_rows(views, tau_s, fs, rows, "HIJKL")
    return _locate_waves(views[0], found, fs, epochs, noise), found, parts.shape[0]


def _locate_waves(
    located: NDArray[np.float64],
    rows: dict[str, tuple[NDArray[np.int64], NDArray[np.float64], NDArray[np.float64]]],
    fs: float,
    epochs: NDArray[np.float64],
    noise: float,
) -> tuple[WaveLocation, ...]:
    """The template's waves: ``located`` is its low-passed view and ``rows`` the
    :func:`_wave_rows` of a stack whose first row is the template."""
    found = {name: (int(i[0]), float(t[0]), float(v[0]))
             for name, (i, t, v) in rows.items() if i[0] >= 0}
    present = [(name, sign) for name, sign, _, _, _ in _WAVE_RULES if name in found]
    sds_ms = _location_sds_ms(epochs, [found[name][0] for name, _ in present],
                              [sign for _, sign in present], fs)
    out = {name: WaveLocation(name, None, None, None, None, 0.0)
           for name, _, _, _, _ in _WAVE_RULES if name not in found}
    # the prominences of the waves of each sign in one call (each peak's on its own)
    proms: dict[str, float] = {}
    for sign in (1, -1):
        names = [name for name, s in present if s == sign]
        if names:
            values = signal.peak_prominences(sign * located, [found[n][0] for n in names])[0]
            proms.update(zip(names, (float(v) for v in values), strict=True))
    for (name, _), sd in zip(present, sds_ms, strict=True):
        _, t_s, value = found[name]
        prom = proms[name]
        sd_ms = float(sd)
        snr = prom / noise if noise > 0 else np.inf
        c = clip((snr - 3.0) / 7.0, 0.0, 1.0) / (1.0 + (sd_ms / 20.0) ** 2)
        out[name] = WaveLocation(name, 1e3 * t_s, value, prom, sd_ms, float(c))
    return tuple(out[n] for n in "HIJKL")


def _wave_view(template: NDArray[np.float64], fs: float) -> NDArray[np.float64]:
    """The template (or rows of templates) low-passed at 25 Hz, as waves are located on."""
    if WAVE_LOWPASS_HZ >= 0.45 * fs:
        return template
    return lowpass(template, fs, WAVE_LOWPASS_HZ, order=2, axis=-1)


def _wave_rows(located: NDArray[np.float64], tau_s: NDArray[np.float64], fs: float,
               raw: NDArray[np.float64], names: str
               ) -> dict[str, tuple[NDArray[np.int64], NDArray[np.float64], NDArray[np.float64]]]:
    """Sample index, time (s) and value of each wave found by the rules of step 4, for each
    row of ``located`` (low-passed templates) and ``raw`` (the same rows unfiltered).

    Index and time come from ``located``, the value from the same parabola fitted to
    ``raw`` at that index. Per wave: index (-1 where the row lacks it), time (s) and value
    (NaN where it lacks it). A wave is the most extreme local extremum of its sign inside
    its window (the first such sample on a tie), as in step 4.
    """
    n_rows = located.shape[0]
    h = _fit_half_width(fs)
    pair = np.concatenate((located, raw))  # fits on both in one call
    found: dict[str, tuple[NDArray[np.int64], NDArray[np.float64], NDArray[np.float64]]] = {}
    for name, sign, anchor, lo, hi in _WAVE_RULES:
        if name not in names or (anchor is not None and anchor not in found):
            continue
        t0 = np.zeros(n_rows) if anchor is None else found[anchor][1]  # NaN: no window
        s = sign * located
        mid, left, right = s[:, 1:-1], s[:, :-2], s[:, 2:]
        cand = np.zeros(s.shape, dtype=bool)
        cand[:, 1:-1] = (mid >= left) & (mid >= right) & (mid > np.minimum(left, right))
        cand &= (tau_s[None, :] >= (t0 + lo)[:, None]) & (tau_s[None, :] <= (t0 + hi)[:, None])
        ok = cand.any(axis=1)
        idx = np.where(ok, np.argmax(np.where(cand, s, -np.inf), axis=1), -1)
        t = np.full(n_rows, np.nan)
        value = np.full(n_rows, np.nan)
        if ok.any():
            k = idx[ok]
            at = np.flatnonzero(ok)
            off, val = _parabola_rows(pair, np.concatenate((k, k)), h, sign,
                                      np.concatenate((at, n_rows + at)))
            t[ok] = tau_s[k] + off[: k.size] / fs
            value[ok] = sign * val[k.size :]
        found[name] = (idx, t, value)
    return found


def _split_templates(epochs: NDArray[np.float64]) -> NDArray[np.float64]:
    """Templates (:func:`_trimmed_mean`) of ``k`` interleaved groups of the beats (every
    k-th beat), ``SPLIT_GROUPS`` of them when there are at least five beats a group."""
    k = max(2, min(SPLIT_GROUPS, epochs.shape[0] // 5))
    return np.array([_trimmed_mean(epochs[g::k]) for g in range(k)])


def _split_standard_errors(
    rows: dict[str, tuple[NDArray[np.int64], NDArray[np.float64], NDArray[np.float64]]],
    k: int,
) -> dict[str, float | None]:
    """Standard errors of the I-J, J-K intervals (ms) and amplitudes from split ensembles:
    ``rows`` is :func:`_wave_rows` of a stack whose last ``k`` rows are
    :func:`_split_templates`."""
    w = {name: tuple(a[-k:] for a in rows[name]) for name in "IJK" if name in rows}
    if len(w) < 3 or any((w[name][0] < 0).any() for name in "IJK"):
        return dict.fromkeys(("ij_interval", "jk_interval", "ij_amplitude", "jk_amplitude"))
    (_, t_i, v_i), (_, t_j, v_j), (_, t_k, v_k) = w["I"], w["J"], w["K"]
    table = np.column_stack((1e3 * (t_j - t_i), 1e3 * (t_k - t_j), v_j - v_i, v_j - v_k))
    # Each group holds 1/k of the beats: the full template's SE is the groups' SD / sqrt(k).
    sd = std(table, axis=0, ddof=1) / np.sqrt(k)
    return {key: float(v) for key, v in zip(
        ("ij_interval", "jk_interval", "ij_amplitude", "jk_amplitude"), sd, strict=True)}


def _relative_pct(se: float | None, value: float | None) -> float | None:
    if se is None or value is None or value <= 0:
        return None
    return 100.0 * se / value


def _precision(se: float | None, scale: float) -> float:
    """1 / (1 + (se / scale)^2); 0 when the standard error is unknown."""
    return 0.0 if se is None else 1.0 / (1.0 + (se / scale) ** 2)


def _beat_extrema(
    epochs: NDArray[np.float64], centres: list[int], signs: list[int], fs: float
) -> tuple[NDArray[np.float64], NDArray[np.float64]]:
    """Per-beat sub-sample offset (samples, from the centre) and value of the extremum of
    each sign near each centre: rows (centres x beats).

    One fit per centre: a single gather for all centres cost more on long recordings
    (8164 beats: 2.8 ms against 0.7 ms for five gathers).
    """
    width = epochs.shape[1]
    h = max(1, round(_BEAT_SEARCH_S * fs))
    offsets, values = [], []
    for i, sign in zip(centres, signs, strict=True):
        lo, hi = max(1, i - h), min(width - 2, i + h)
        seg = epochs[:, lo : hi + 1]  # the first maximum of sign * seg
        k = (np.argmax(seg, axis=1) if sign > 0 else np.argmin(seg, axis=1)) + lo
        off, value = _parabola_rows(epochs, k, _fit_half_width(fs), sign)
        offsets.append(k - i + off)
        values.append(sign * value)
    return np.array(offsets), np.array(values)


def _location_sds_ms(epochs: NDArray[np.float64], centres: list[int], signs: list[int],
                     fs: float) -> NDArray[np.float64]:
    """Robust spread (``MAD_TO_SD`` x MAD, ms) over beats of each extremum's time."""
    if not centres:
        return np.empty(0)
    off, _ = _beat_extrema(epochs, centres, signs, fs)
    med = lane_median(off)
    return 1e3 * MAD_TO_SD * lane_median(np.abs(off - med[:, None])) / fs


def _trimmed_mean(epochs: NDArray[np.float64]) -> NDArray[np.float64]:
    """20 % trimmed mean over beats minus its median (the template of step 3, no noise).

    Each sample's beats are ordered as one contiguous row (:func:`_ordered_lanes`).
    """
    n = epochs.shape[0]
    cut = int(_TRIM_PROPORTION * n)
    ordered = _ordered_lanes(epochs, (cut, n - cut - 1))
    template = mean(ordered[:, cut : n - cut], axis=1)
    return np.asarray(template - median_1d(template), dtype=float)


def _ordered_lanes(epochs: NDArray[np.float64], kth: tuple[int, ...]) -> NDArray[np.float64]:
    """The beats of each sample as one contiguous row (samples x beats), each row's order
    statistics ``kth`` in place and every value between two of them in between.

    Up to ``_SORTED_BEATS_UP_TO`` beats the rows are sorted (a sort costs less than
    selection there); beyond, the order statistics are selected one at a time
    (:func:`_select`).
    """
    lanes = epochs.T.copy()  # a copy (C order) ordered in place
    if epochs.shape[0] <= _SORTED_BEATS_UP_TO:
        lanes.sort(axis=1)
    else:
        _select(lanes, sorted(set(kth)), 0, lanes.shape[1])
    return lanes


def _select(lanes: NDArray[np.float64], kth: list[int], start: int, stop: int) -> None:
    """Put the order statistics ``kth`` (ascending, within ``start ... stop - 1``) of every
    row of ``lanes[:, start:stop]`` in place, with one single-pivot partition each: the
    middle one over the whole span, then the others within the side they fall on.

    numpy's partition with several pivots at once is the same order statistics at several
    times the cost (201 lanes of real epochs, 16 329 beats: 48 against 8 ms, numpy 2.4),
    as a single pivot is the case numpy hands to its vectorised selection where the CPU
    has one.
    """
    if not kth:
        return
    m = len(kth) // 2
    k = kth[m]
    lanes[:, start:stop].partition(k - start, axis=1)
    _select(lanes, kth[:m], start, k)
    _select(lanes, kth[m + 1:], k + 1, stop)


def _robust_template(epochs: NDArray[np.float64]) -> tuple[NDArray[np.float64], float]:
    """20 % trimmed-mean template minus its median, and its standard error.

    The same as ``scipy.stats.trim_mean(epochs, 0.2, axis=0)`` and
    ``scipy.stats.median_abs_deviation(epochs, axis=0)``, computed on the
    transposed (one contiguous row per sample) epochs ordered once
    (:func:`_ordered_lanes`) for the trimmed range, the median (the centre the
    MAD reuses) and the MAD itself (selected with the help of that order,
    :func:`_lane_mad`).
    """
    n = epochs.shape[0]
    cut = int(_TRIM_PROPORTION * n)
    mid = ((n - 1) // 2, n // 2)
    rows = _ordered_lanes(epochs, (cut, n - cut - 1, *mid))
    template = mean(rows[:, cut : n - cut], axis=1)
    template = template - median_1d(template)
    centre = rows[:, mid[0]] if n % 2 else (rows[:, mid[0]] + rows[:, mid[1]]) / 2.0
    spread = MAD_TO_SD * _lane_mad(rows, centre, cut)
    return template, float(median_1d(spread) / np.sqrt(n))


def _lane_mad(rows: NDArray[np.float64], centre: NDArray[np.float64], cut: int
              ) -> NDArray[np.float64]:
    """``numpy.median(numpy.abs(rows - centre[:, None]), axis=1)``, the same values, for
    finite rows ordered by :func:`_ordered_lanes` with order statistics ``cut`` and
    ``n - 1 - cut`` (n beats) in place and ``centre`` their medians.

    Sorted rows: the distances below the centre fall and those above rise, so the middle
    distances are selected from two sorted runs (:func:`_two_run_median`) without sorting
    them. Partitioned rows: every beat outside positions ``cut ... n - 1 - cut`` is at
    least D = the nearer of those two order statistics away from the centre, so when the
    middle distances of the positions between are at most D they are the row's, and only
    those positions are partitioned (a row where they exceed D takes all of its beats).
    """
    n = rows.shape[1]
    if n <= _SORTED_BEATS_UP_TO:
        return _two_run_median(rows, centre)
    lo, hi = (n - 1) // 2, n // 2
    inner = np.abs(rows[:, cut : n - cut] - centre[:, None])
    inner.partition(lo, axis=1)  # one pivot (see _select); the next is the least above it
    upper = inner[:, lo] if lo == hi else inner[:, lo + 1:].min(axis=1)
    mad = inner[:, lo] if lo == hi else (inner[:, lo] + upper) / 2.0
    near = np.minimum(centre - rows[:, cut], rows[:, n - 1 - cut] - centre)
    far = upper > near
    if far.any():
        mad[far] = np.median(np.abs(rows[far] - centre[far, None]), axis=1)
    return np.asarray(mad, dtype=float)


def _two_run_median(rows: NDArray[np.float64], centre: NDArray[np.float64]
                    ) -> NDArray[np.float64]:
    """Median of ``|rows - centre[:, None]|`` along each sorted row, by a vectorised binary
    search: the distances of the samples below the centre, read leftwards, and of the
    others, read rightwards, are two ascending runs, and the k-th smallest distance is the
    larger of the last ones taken when the k + 1 smallest are split between the runs.
    ``centre - r`` below the centre is ``|r - centre|`` exactly (rounding is symmetric)."""
    n_rows, n = rows.shape
    flat = rows.reshape(-1)
    below = np.count_nonzero(rows < centre[:, None], axis=1)  # length of run A
    start_b = np.arange(n_rows) * n + below  # run A is flat[start_b - 1 - j], B flat[start_b + j]
    k = (n - 1) // 2
    # a = how many of the k + 1 smallest come from run A; every index read below stays in
    # [-1, flat.size) (numpy reads -1 as the last), and a lane whose search has ended reads
    # values it ignores.
    lo = np.maximum(0, k + 1 - (n - below))
    hi = np.minimum(k + 1, below)
    for _ in range(int((hi - lo).max()).bit_length()):
        mid = (lo + hi) >> 1
        active = lo < hi
        more = (centre - flat[start_b - 1 - mid]) < (flat[start_b + k - mid] - centre)
        lo = np.where(more & active, mid + 1, lo)
        hi = np.where(more | ~active, hi, mid)
    a = lo
    last_a = np.minimum(start_b - a, flat.size - 1)  # run A's (a-1)-th, read when a > 0
    kth = np.maximum(np.where(a > 0, centre - flat[last_a], -np.inf),
                     np.where(a <= k, flat[start_b + k - a] - centre, -np.inf))
    if n % 2:
        return np.asarray(kth, dtype=float)
    after = np.minimum(start_b + k + 1 - a, flat.size - 1)  # run B's next, read if any
    nxt = np.minimum(np.where(a < below, centre - flat[start_b - 1 - a], np.inf),
                     np.where(k + 1 - a < n - below, flat[after] - centre, np.inf))
    return np.asarray((kth + nxt) / 2.0, dtype=float)


def _per_beat_jk(
    epochs: NDArray[np.float64],
    beats: NDArray[np.float64],
    correlations: NDArray[np.float64],
    tau_s: NDArray[np.float64],
    fs: float,
    waves: dict[str, WaveLocation],
) -> tuple[NDArray[np.float64], NDArray[np.float64], float | None, list[str]]:
    """Times, J - K amplitudes and their CV (%) for beats correlating >= 0.5 with the template
    (``correlations``, one per row of ``epochs``)."""
    keep = correlations >= _MIN_BEAT_CORRELATION
    jk = _beat_jk(epochs[keep], tau_s, fs, waves)
    if jk is None:
        return np.empty(0), np.empty(0), None, ["k_wave_not_found_per_beat"]
    t = beats[keep]
    if jk.size < 3 or np.mean(jk) <= 0:
        return t, jk, None, ["too_few_beats_for_amplitude_cv"]
    return t, jk, float(100.0 * std(jk, ddof=1) / np.mean(jk)), []


def _beat_jk(
    epochs: NDArray[np.float64],
    tau_s: NDArray[np.float64],
    fs: float,
    waves: dict[str, WaveLocation],
) -> NDArray[np.float64] | None:
    j, k = waves["J"].time_ms, waves["K"].time_ms
    if k is None or j is None:
        return None
    if epochs.shape[0] == 0:
        return np.empty(0)
    ij = int(np.argmin(np.abs(tau_s - j / 1e3)))
    ik = int(np.argmin(np.abs(tau_s - k / 1e3)))
    _, (jv, kv) = _beat_extrema(epochs, [ij, ik], [+1, -1], fs)
    return np.asarray(jv - kv, dtype=float)


def _correlations(epochs: NDArray[np.float64], template: NDArray[np.float64]) -> NDArray[
    np.float64
]:
    """Pearson correlation of each epoch (row) with the template.

    The epochs of :func:`_epochs` have had a least-squares line removed (step 2), so their
    means are zero but for rounding and they are not centred again (a copy of every epoch
    on long recordings); the row norms are read without forming the squares.
    """
    if epochs.shape[0] == 0:
        return np.empty(0)
    t = template - mean(template)
    den = np.sqrt(np.einsum("ij,ij->i", epochs, epochs)) * np.linalg.norm(t)
    num = epochs @ t
    return np.asarray(np.divide(num, den, out=np.zeros_like(num), where=den > 0), dtype=float)


def _j_width_ms(
    template: NDArray[np.float64], tau_s: NDArray[np.float64], waves: dict[str, WaveLocation]
) -> float | None:
    wi, wj, wk = waves["I"], waves["J"], waves["K"]
    if wi.time_ms is None or wk.time_ms is None or wj.time_ms is None:
        return None
    assert wi.amplitude is not None and wk.amplitude is not None and wj.amplitude is not None
    ti, tj, tk = wi.time_ms / 1e3, wj.time_ms / 1e3, wk.time_ms / 1e3
    line = wi.amplitude + (wk.amplitude - wi.amplitude) * (tau_s - ti) / (tk - ti)
    height = wj.amplitude - float(np.interp(tj, tau_s, line))
    if height <= 0:
        return None
    above = template - line - 0.5 * height
    j_idx = int(np.argmin(np.abs(tau_s - tj)))
    left = _crossing(above, tau_s, j_idx, -1, ti)
    right = _crossing(above, tau_s, j_idx, +1, tk)
    if left is None or right is None:
        return None
    return 1e3 * (right - left)


def _crossing(
    y: NDArray[np.float64], tau_s: NDArray[np.float64], start: int, step: int, limit_s: float
) -> float | None:
    """Time where ``y`` first falls to <= 0 walking from ``start`` by ``step``, before limit."""
    i = start
    while 0 <= i + step < y.size and (tau_s[i + step] - limit_s) * step <= 0:
        if y[i + step] <= 0 < y[i]:
            a, b = y[i], y[i + step]
            return float(tau_s[i] + (tau_s[i + step] - tau_s[i]) * a / (a - b))
        i += step
    return None


def _wavelet_signature(
    template: NDArray[np.float64], fs: float
) -> tuple[tuple[float, ...] | None, tuple[tuple[float, float], ...], list[str]]:
    up, down = rate_ratio(SIGNATURE_FS_HZ, fs)
    if up == down:  # resample_poly returns a copy
        y = template.copy()
    else:
        y = signal.resample_poly(template, up, down, padtype="line",
                                 window=polyphase_fir(up, down))
    fs_ref = fs * up / down
    block = 2**SIGNATURE_LEVELS
    n = y.size
    total = -(-n // block) * block
    pad_left = (total - n) // 2
    pad_right = total - n - pad_left
    if max(pad_left, pad_right) <= n:  # numpy.pad(y, ..., mode="symmetric"), without its
        # per-call set-up: each end mirrored with its edge sample repeated
        yp = np.concatenate((y[:pad_left][::-1], y, y[n - pad_right:][::-1]))
    else:
        yp = np.pad(y, (pad_left, pad_right), mode="symmetric")
    flags: list[str] = []
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        coeffs = pywt.swt(yp, SIGNATURE_WAVELET, level=SIGNATURE_LEVELS, trim_approx=True,
                          norm=True)
    if caught:
        flags.append("wavelet_signature_library_warning")
    details = coeffs[1:][::-1]  # swt gives [cA_n, cD_n, ..., cD_1]; reorder finest first
    span = slice(pad_left, pad_left + n)
    energy = np.array([float(np.sum(d[span] ** 2)) for d in details])
    bands = tuple((b.low_hz, b.high_hz) for b in detail_bands(fs_ref, SIGNATURE_LEVELS))
    if energy.sum() <= 0:
        flags.append("wavelet_signature_zero_energy")
        return None, bands, flags
    return tuple(float(e) for e in energy / energy.sum()), bands, flags


# --------------------------------------------------------------------------- catalogue

_WINDOWS_S = {name: (start, end) for name, _, _, start, end in _WAVE_RULES}
_J_MINUS_I_S = (-_WINDOWS_S["I"][1], -_WINDOWS_S["I"][0])
_I_MINUS_H_S = (-_WINDOWS_S["H"][1], -_WINDOWS_S["H"][0])
_K_MINUS_J_S = _WINDOWS_S["K"]


def _interval_range_ms(*legs: tuple[float, float]) -> tuple[float, float]:
    """Valid range of a wave interval made of ``legs`` (search windows, s): their sum,
    widened by two parabola half-widths per leg (each end moves by at most one when
    refined), in ms, rounded to 1 us."""
    slack_ms = len(legs) * 2e3 * _FIT_HALF_WIDTH_S
    low = 1e3 * sum(leg[0] for leg in legs) - slack_ms
    high = 1e3 * sum(leg[1] for leg in legs) + slack_ms
    return round(low, 3), round(high, 3)


_IK_RANGE_MS = _interval_range_ms(_J_MINUS_I_S, _K_MINUS_J_S)
# Nominal detail bands of the signature levels at SIGNATURE_FS_HZ (features.wavelets.
# detail_bands), as written in the catalogue (rounded by hand; a test checks them).
SIGNATURE_BAND_LABELS = ("62.5-125", "31.25-62.5", "15.6-31.25", "7.8-15.6", "3.9-7.8",
                         "1.95-3.9")


def _entry(name: str, attr: str, unit: str | None, text: str,
           rng: tuple[float | None, float | None], waves: tuple[str, ...],
           ref: str = REF_INAN, conf: str = "confidence") -> FeatureDefinition:
    return FeatureDefinition(name, "morphology", unit, text, rng, ref, f"morphology.{attr}",
                             f"morphology.{conf}", waves, ("morphology.flags",))


CATALOGUE: tuple[FeatureDefinition, ...] = (
    _entry("ij_interval_ms", "ij_interval_ms", "ms",
           "Time from the I-wave minimum to the J-wave maximum of the beat-ensemble template.",
           _interval_range_ms(_J_MINUS_I_S), ("I", "J"), conf="ij_interval_confidence"),
    _entry("jk_interval_ms", "jk_interval_ms", "ms",
           "Time from the J-wave maximum to the K-wave minimum of the template.",
           _interval_range_ms(_K_MINUS_J_S), ("J", "K"), conf="jk_interval_confidence"),
    _entry("ik_interval_ms", "ik_interval_ms", "ms",
           "Time from the I-wave minimum to the K-wave minimum of the template.",
           _IK_RANGE_MS, ("I", "J", "K")),
    _entry("hj_interval_ms", "hj_interval_ms", "ms",
           "Time from the H-wave maximum to the J-wave maximum of the template.",
           _interval_range_ms(_I_MINUS_H_S, _J_MINUS_I_S), ("H", "I", "J")),
    _entry("j_width_ms", "j_width_ms", "ms",
           "Full width of the J wave at half its height above the line joining the I and K "
           "extrema.", (0.0, _IK_RANGE_MS[1]), ("I", "J", "K")),
    _entry("ij_amplitude", "ij_amplitude", AMPLITUDE_UNIT,
           "Peak-to-peak amplitude J minus I of the template, in the input's amplitude unit.",
           (0.0, None), ("I", "J"), conf="ij_amplitude_confidence"),
    _entry("jk_amplitude", "jk_amplitude", AMPLITUDE_UNIT,
           "Peak-to-peak amplitude J minus K of the template, in the input's amplitude unit.",
           (0.0, None), ("J", "K"), conf="jk_amplitude_confidence"),
    _entry("ij_amplitude_per_kg", "ij_amplitude_per_kg", AMPLITUDE_UNIT + "/kg",
           "ij_amplitude divided by the body mass (stated, else the measured load); None "
           "without a mass.", (0.0, None), ("I", "J"), conf="ij_amplitude_confidence"),
    _entry("jk_amplitude_per_kg", "jk_amplitude_per_kg", AMPLITUDE_UNIT + "/kg",
           "jk_amplitude divided by the body mass (stated, else the measured load); None "
           "without a mass.", (0.0, None), ("J", "K"), conf="jk_amplitude_confidence"),
    _entry("template_correlation", "template_correlation_median", None,
           "Median Pearson correlation of the template beats with the template.",
           (-1.0, 1.0), (), REF_OURS),
    _entry("jk_amplitude_cv_pct", "jk_amplitude_cv_pct", "%",
           "Coefficient of variation (SD, ddof=1, over the mean) of the per-beat J-K "
           f"amplitudes of the beats correlating >= {_MIN_BEAT_CORRELATION:g} with the "
           "template.", NONNEGATIVE, ("J", "K"), REF_OURS),
    *(
        _entry(f"wavelet_energy_d{k + 1}", f"wavelet_signature[{k}]", None,
               f"Share of the template's stationary-wavelet detail energy in level d{k + 1} "
               f"({band} Hz; template resampled to {SIGNATURE_FS_HZ:g} Hz, "
               f"{SIGNATURE_WAVELET}, {SIGNATURE_LEVELS} levels; the six shares sum to 1).",
               UNIT_INTERVAL, (), REF_PYWT)
        for k, band in enumerate(SIGNATURE_BAND_LABELS)
    ),
)
"""Catalogue entries of the morphology family (see :mod:`features.catalogue`)."""

TOLERANCES: dict[str, tuple[float, str, str]] = {
    "ij_interval_ms": (10.0, "abs", "issue 12's bound for the I-J interval"),
    "jk_interval_ms": (10.0, "abs", "issue 12's bound for the J-K interval"),
    "ik_interval_ms": (10.0, "abs", "as the I-J and J-K intervals"),
    "hj_interval_ms": (10.0, "abs", "as the I-J and J-K intervals"),
    "j_width_ms": (10.0, "abs", "as the wave intervals"),
    "ij_amplitude": (15.0, "rel", "issue 12's bound for wave amplitudes"),
    "jk_amplitude": (15.0, "rel", "issue 12's bound for wave amplitudes"),
    "ij_amplitude_per_kg": (15.0, "rel", "as the amplitude it divides"),
    "jk_amplitude_per_kg": (15.0, "rel", "as the amplitude it divides"),
    "template_correlation": (0.05, "abs", "a twentieth of its range"),
    "jk_amplitude_cv_pct": (5.0, "abs", "5 percentage points"),
    **{f"wavelet_energy_d{k + 1}": (0.05, "abs", "five hundredths of a share that sums to 1")
       for k in range(len(SIGNATURE_BAND_LABELS))},
}
"""Tolerance of each morphology feature: (value, ``"abs"`` or ``"rel"``, why)."""
CATALOGUE = with_tolerance(CATALOGUE, TOLERANCES)
