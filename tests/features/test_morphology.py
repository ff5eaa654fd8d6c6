"""Tests of features.morphology (beat-ensemble template, H-I-J-K-L waves, wavelet signature)."""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy import optimize

from features.errors import InvalidInputError
from features.morphology import _wavelet_signature, beat_morphology

# Analytic beat: a sum of Gaussians (centre s, amplitude, width s), J-positive, in N.
# Wave order and signs follow the H-I-J-K-L convention of Starr et al. 1939 and
# Inan et al. 2015 (IEEE JBHI 19(4):1414, Fig. 1) (from memory); the numbers are ours.
WAVES = {
    "H": (-0.13, 0.25, 0.018),
    "I": (-0.07, -0.45, 0.015),
    "J": (0.0, 1.0, 0.018),
    "K": (0.085, -0.6, 0.02),
    "L": (0.17, 0.3, 0.025),
}


def beat_shape(t: np.ndarray | float, waves: dict = WAVES) -> np.ndarray:
    t = np.asarray(t, dtype=float)
    return sum(a * np.exp(-0.5 * ((t - m) / s) ** 2) for m, a, s in waves.values())


def analytic_extrema(waves: dict = WAVES) -> dict[str, tuple[float, float]]:
    """Exact extremum (time s, value) of the analytic beat near each Gaussian centre."""
    out = {}
    for name, (m, a, _) in waves.items():
        sign = 1.0 if a > 0 else -1.0
        res = optimize.minimize_scalar(
            lambda t, sg=sign: -sg * float(beat_shape(t, waves)), bounds=(m - 0.015, m + 0.015),
            method="bounded", options={"xatol": 1e-7},
        )
        out[name] = (float(res.x), float(beat_shape(res.x, waves)))
    return out


def recording(fs, *, duration_s=60.0, hr_bpm=60.0, noise=0.03, rr_jitter_s=0.03,
              modulation=0.0, seed=0, waves=WAVES, drift=0.0):
    """Beats at jittered intervals, optional amplitude modulation at 0.25 Hz, white noise."""
    rng = np.random.default_rng(seed)
    n = int(duration_s * fs)
    t = np.arange(n) / fs
    rr = 60.0 / hr_bpm + rr_jitter_s * rng.standard_normal(int(duration_s * hr_bpm / 60) + 5)
    j_peak = analytic_extrema(waves)["J"][0]
    onsets = 0.5 + np.cumsum(rr)
    onsets = onsets[onsets < duration_s - 0.7]
    x = np.zeros(n)
    for b in onsets:
        sl = slice(max(0, int((b - 0.5) * fs)), min(n, int((b + 0.6) * fs)))
        x[sl] += (1.0 + modulation * np.sin(2 * np.pi * 0.25 * b)) * beat_shape(t[sl] - b, waves)
    x += noise * rng.standard_normal(n) + drift * np.sin(2 * np.pi * 0.25 * t)
    return x, onsets + j_peak


TRUE = analytic_extrema()
TRUE_IJ_MS = 1e3 * (TRUE["J"][0] - TRUE["I"][0])
TRUE_JK_MS = 1e3 * (TRUE["K"][0] - TRUE["J"][0])
TRUE_IJ_AMP = TRUE["J"][1] - TRUE["I"][1]
TRUE_JK_AMP = TRUE["J"][1] - TRUE["K"][1]


# --------------------------------------------------------------------------- analytic template


@pytest.mark.parametrize("fs", [100.0, 250.0, 500.0, 1000.0])
def test_waves_of_analytic_beat_with_noise_and_jitter(fs):
    # Known answer: the extrema of the analytic sum of Gaussians (scipy.optimize on the
    # formula). Noise 3 % of J, RR jitter 30 ms, plus a 0.25 Hz breathing drift of 0.5 N
    # that the per-epoch detrend must remove.
    x, beats = recording(fs, drift=0.5, seed=int(fs))
    r = beat_morphology(x, fs, beats, body_mass_kg=70.0)
    assert r.beats_used >= 50
    for name in "HIJKL":
        w = r.wave(name)
        assert w is not None and w.time_ms is not None
        # Sub-sample localisation: within 2 ms of the exact extremum at every rate.
        assert w.time_ms == pytest.approx(1e3 * TRUE[name][0], abs=2.0), name
        # Signed amplitudes from the baseline (the analytic beat rests at 0): within 5 % of J.
        assert w.amplitude == pytest.approx(TRUE[name][1], abs=0.05), name
    assert r.ij_interval_ms == pytest.approx(TRUE_IJ_MS, abs=2.0)
    assert r.jk_interval_ms == pytest.approx(TRUE_JK_MS, abs=2.0)
    assert r.ij_amplitude == pytest.approx(TRUE_IJ_AMP, rel=0.03)
    assert r.jk_amplitude == pytest.approx(TRUE_JK_AMP, rel=0.03)
    assert r.ij_amplitude_per_kg == pytest.approx(r.ij_amplitude / 70.0)
    assert r.template_correlation_median > 0.9
    assert 0.5 < r.confidence <= 1.0


def test_detector_time_jitter_is_tolerated():
    # Beat times given with 3 ms (SD) detector error: the template smears but the waves stay
    # within 3 ms and the amplitudes within 8 % (a Gaussian of width 18 ms convolved with
    # 3 ms jitter keeps sqrt(18^2/(18^2+3^2)) = 98.6 % of its peak: analytic).
    rng = np.random.default_rng(5)
    x, beats = recording(250.0, seed=5)
    r = beat_morphology(x, 250.0, beats + 0.003 * rng.standard_normal(beats.size))
    assert r.ij_interval_ms == pytest.approx(TRUE_IJ_MS, abs=3.0)
    assert r.jk_interval_ms == pytest.approx(TRUE_JK_MS, abs=3.0)
    assert r.jk_amplitude == pytest.approx(TRUE_JK_AMP, rel=0.08)


def test_j_width_is_the_half_height_width_above_the_i_k_line():
    # Hand-computed: I and K are equal Gaussians (-0.5 N) far from J, so the I-K line is
    # flat at -0.5 N. J (1 N, sigma 12 ms) stands 1.5 N above it; half height is at
    # -0.5 + 0.75 = 0.25 N, reached where exp(-t^2 / (2 s^2)) = 0.25, i.e.
    # t = +/- s sqrt(2 ln 4) = +/- 12 x 1.6651 ms: width = 39.96 ms.
    waves = {
        "H": (-0.17, 0.2, 0.012),
        "I": (-0.09, -0.5, 0.010),
        "J": (0.0, 1.0, 0.012),
        "K": (0.09, -0.5, 0.010),
        "L": (0.17, 0.2, 0.012),
    }
    x, beats = recording(1000.0, noise=0.002, waves=waves, seed=3)
    r = beat_morphology(x, 1000.0, beats)
    assert r.j_width_ms == pytest.approx(2 * 12.0 * np.sqrt(2 * np.log(4.0)), abs=1.0)


def test_beat_to_beat_jk_cv_follows_a_known_modulation():
    # Amplitudes scaled by 1 + m sin(2 pi 0.25 t) sampled at beat times: the SD of a sinusoid
    # is m / sqrt(2), so the CV is 100 m / sqrt(2) = 14.14 % for m = 0.2 (analytic).
    x, beats = recording(250.0, duration_s=120.0, modulation=0.2, noise=0.01, rr_jitter_s=0.1)
    r = beat_morphology(x, 250.0, beats)
    assert r.jk_amplitude_cv_pct == pytest.approx(100 * 0.2 / np.sqrt(2), abs=1.5)
    assert r.beat_jk_amplitudes.size == r.beat_times_s.size >= 100
    onsets = r.beat_times_s - TRUE["J"][0]
    expected = TRUE_JK_AMP * (1.0 + 0.2 * np.sin(2 * np.pi * 0.25 * onsets))
    assert np.max(np.abs(r.beat_jk_amplitudes - expected)) < 0.05 * TRUE_JK_AMP


# --------------------------------------------------------------------------- properties


def test_amplitude_scaling_and_time_shift():
    x, beats = recording(250.0, seed=11)
    base = beat_morphology(x, 250.0, beats)
    scaled = beat_morphology(3.0 * x, 250.0, beats)
    shifted = beat_morphology(np.concatenate((np.zeros(125), x)), 250.0, beats + 0.5)
    # Amplitudes are linear in the signal, intervals and the signature are not changed.
    assert scaled.jk_amplitude == pytest.approx(3.0 * base.jk_amplitude, rel=1e-9)
    assert scaled.ij_interval_ms == pytest.approx(base.ij_interval_ms, abs=1e-9)
    assert np.allclose(scaled.wavelet_signature, base.wavelet_signature, atol=1e-12)
    assert shifted.jk_amplitude == pytest.approx(base.jk_amplitude, rel=1e-6)
    assert shifted.jk_interval_ms == pytest.approx(base.jk_interval_ms, abs=1e-6)


_PROPERTY_BASE = recording(250.0, duration_s=30.0, seed=12)


@settings(max_examples=15, deadline=None)
@given(scale=st.floats(0.01, 100.0), offset=st.floats(-1e3, 1e3), lead=st.integers(0, 250))
def test_property_gain_offset_and_shift(scale, offset, lead):
    # Amplitudes scale with the gain, a constant offset and a time shift change nothing.
    x, beats = _PROPERTY_BASE
    base = beat_morphology(x, 250.0, beats)
    y = np.concatenate((np.zeros(lead), scale * x + offset))
    r = beat_morphology(y, 250.0, beats + lead / 250.0)
    assert r.jk_amplitude == pytest.approx(scale * base.jk_amplitude, rel=1e-6)
    assert r.ij_amplitude == pytest.approx(scale * base.ij_amplitude, rel=1e-6)
    assert r.ij_interval_ms == pytest.approx(base.ij_interval_ms, abs=1e-6)


def test_wavelet_signature_is_sampling_rate_invariant():
    # The same noise-free beat sampled at 100, 250, 500 and 1000 Hz must give the same
    # signature (template resampled to 250 Hz first): every level within 0.01 of the 1 kHz
    # one.
    sigs = {}
    for fs in (100.0, 250.0, 500.0, 1000.0):
        x, beats = recording(fs, noise=0.0, rr_jitter_s=0.02, seed=1, duration_s=30.0)
        sigs[fs] = np.asarray(beat_morphology(x, fs, beats).wavelet_signature)
    for fs in (100.0, 250.0, 500.0):
        assert np.max(np.abs(sigs[fs] - sigs[1000.0])) < 0.01, fs
    assert sigs[1000.0].sum() == pytest.approx(1.0)


@pytest.mark.parametrize("freq_hz, level", [(5.5, 5), (11.0, 4), (2.8, 6)])
def test_wavelet_signature_levels_map_to_dyadic_bands(freq_hz, level):
    # Dyadic band of detail level j at rate fs: fs / 2^(j+1) to fs / 2^j (common practice;
    # Percival & Walden 2000, Wavelet Methods for Time Series Analysis, ch. 5). A sinusoid
    # at the geometric centre of a band puts most detail energy in that level, at any input
    # rate.
    for fs in (125.0, 500.0):
        t = np.arange(int(0.8 * fs) + 1) / fs
        sig, bands, flags = _wavelet_signature(np.sin(2 * np.pi * freq_hz * t), fs)
        assert not flags
        assert bands[level - 1][0] < freq_hz < bands[level - 1][1]
        assert int(np.argmax(sig)) == level - 1
        assert sig[level - 1] > 0.6


# --------------------------------------------------------------------------- gating, masks


def test_too_few_confident_beats_gives_none_with_reason():
    x, beats = recording(250.0, duration_s=60.0)
    conf = np.full(beats.size, 0.2)
    conf[:9] = 0.9  # nine confident beats: one short of the minimum of 10
    r = beat_morphology(x, 250.0, beats, beat_confidence=conf)
    assert r.jk_amplitude is None and r.wavelet_signature is None and r.template is None
    assert r.confidence == 0.0
    assert "too_few_confident_beats" in r.flags


def test_masked_artifacts_do_not_reach_the_template():
    x, beats = recording(250.0, duration_s=60.0, seed=4)
    clean = beat_morphology(x, 250.0, beats)
    usable = np.ones(x.size, dtype=bool)
    usable[5000:9000] = False
    y = x.copy()
    y[5000:9000] = 1e4 * np.sin(np.arange(4000) * 0.7)  # movement artifact, masked
    r = beat_morphology(y, 250.0, beats, usable=usable)
    assert r.beats_used < clean.beats_used
    assert "beats_excluded_from_template" in r.flags
    assert r.jk_amplitude == pytest.approx(clean.jk_amplitude, rel=0.02)
    # Every beat kept has its whole epoch (J - 0.35 s to J + 0.45 s) outside the masked span.
    t = r.beat_times_s
    assert np.all(((t + 0.45) * 250 < 5000) | ((t - 0.35) * 250 >= 9000))
    assert np.any((t > 5000 / 250 - 2) & (t < 5000 / 250))


# --------------------------------------------------------------------------- simulator


def test_simulated_recordings_match_the_noise_free_template():
    # Truth: the simulator's noise-free ensemble template of each recording (mean of
    # the noise-free cardiac component over its normal beats at their true J). Acceptance
    # from the project brief: intervals within 10 ms, amplitudes within 15 %. Default
    # 180-s recording at the default 10 dB SNR, on every support preset including the
    # lightly damped "ringing" one, where each beat rides on the previous beat's ringing.
    from simulation import SimulationSettings, simulate

    for seed, support in ((1, "cushion"), (2, "firm"), (3, "rigid"), (4, "ringing")):
        rec = simulate(SimulationSettings(seed=seed, support=support))
        x = np.sum(rec.channels, axis=0)
        truth = rec.truth.ensemble_template
        r = beat_morphology(x - np.median(x), rec.fs_hz, rec.truth.j_times_s,
                            body_mass_kg=rec.truth.body_mass_kg)
        assert r.ij_interval_ms == pytest.approx(truth.i_j_interval_ms, abs=10.0), support
        assert r.jk_interval_ms == pytest.approx(truth.j_k_interval_ms, abs=10.0), support
        assert r.ij_amplitude == pytest.approx(truth.i_j_amplitude, rel=0.15), support
        assert r.jk_amplitude == pytest.approx(truth.j_k_amplitude, rel=0.15), support


def _mean_se(noise: float, duration_s: float, seeds=range(4)) -> dict[str, float]:
    out: dict[str, list[float]] = {"ij": [], "jk": [], "jka": []}
    for seed in seeds:
        x, beats = recording(250.0, duration_s=duration_s, noise=noise, rr_jitter_s=0.03,
                             seed=100 + seed)
        r = beat_morphology(x, 250.0, beats)
        out["ij"].append(r.ij_interval_se_ms)
        out["jk"].append(r.jk_interval_se_ms)
        out["jka"].append(r.jk_amplitude_se)
    return {k: float(np.mean(v)) for k, v in out.items()}


def test_split_ensemble_standard_error_follows_the_standard_error_of_a_mean():
    # Textbook statistics: the standard error of an average of n beats with independent
    # noise falls as 1/sqrt(n) and grows in proportion to the noise SD. Four times the
    # beats should halve it and four times the noise should multiply it by about four;
    # the bounds allow for the spread of a 6-group estimate averaged over 4 seeds.
    short, long = _mean_se(0.3, 60.0), _mean_se(0.3, 240.0)
    for key in short:
        assert 1.3 < short[key] / long[key] < 3.2, (key, short[key], long[key])
    quiet, loud = _mean_se(0.1, 120.0), _mean_se(0.4, 120.0)
    for key in quiet:
        assert 2.0 < loud[key] / quiet[key] < 8.0, (key, quiet[key], loud[key])


def test_measure_confidences_fall_with_noise_and_stay_within_the_family_confidence():
    x1, b1 = recording(250.0, noise=0.03, seed=11)
    x2, b2 = recording(250.0, noise=0.5, seed=11)
    quiet, loud = beat_morphology(x1, 250.0, b1), beat_morphology(x2, 250.0, b2)
    for name in ("ij_interval", "jk_interval", "ij_amplitude", "jk_amplitude"):
        cq, cl = getattr(quiet, f"{name}_confidence"), getattr(loud, f"{name}_confidence")
        assert 0.0 <= cl < cq <= quiet.confidence, name
        assert cl <= loud.confidence, name


def test_broad_trough_under_heavy_noise_is_placed_near_its_true_time():
    # Known answer (scipy.optimize on the analytic formula): a broad, shallow I wave
    # (40 ms SD instead of 15 ms) under noise of 60 % of the I depth per sample; 120 beats.
    # Without the 25 Hz low-pass of the template the trough is placed by the residual
    # noise (several ms off); with it the I-J interval stays within 4 ms.
    waves = {**WAVES, "I": (-0.085, -0.45, 0.04)}
    truth = analytic_extrema(waves)
    errors = []
    for seed in range(5):
        x, beats = recording(250.0, duration_s=120.0, noise=0.27, seed=200 + seed,
                             waves=waves)
        r = beat_morphology(x, 250.0, beats)
        errors.append(r.ij_interval_ms - 1e3 * (truth["J"][0] - truth["I"][0]))
    assert np.max(np.abs(errors)) < 4.0, errors


# --------------------------------------------------------------------------- errors


def _ok():
    x, beats = recording(100.0, duration_s=20.0)
    return x, beats


@pytest.mark.parametrize(
    "kwargs, field, match",
    [
        ({"fs_hz": 20.0}, "fs_hz", r"`fs_hz` must be between 50 and 2000 Hz; got 20"),
        ({"signal": np.zeros((2, 500))}, "signal", r"`signal` must be 1-D; got 2"),
        ({"signal": np.zeros(50)}, "signal", r"`signal` must hold at least 1 s"),
        ({"beat_times_s": [3.0, 2.0]}, "beat_times_s", r"strictly increasing"),
        ({"beat_confidence": [1.0]}, "beat_confidence", r"length of `beat_times_s`"),
        ({"usable": np.ones(10, bool)}, "usable", r"`usable` must have the length"),
        ({"body_mass_kg": 0.0}, "body_mass_kg", r"between 2 and 400 kg; got 0"),
        ({"min_beat_confidence": 2.0}, "min_beat_confidence", r"between 0 and 1; got 2"),
        ({"amplitude_unit": ""}, "amplitude_unit", r"must be a non-empty string; got ''"),
    ],
)
def test_invalid_input(kwargs, field, match):
    x, beats = _ok()
    args = {"signal": x, "fs_hz": 100.0, "beat_times_s": beats}
    args.update(kwargs)
    with pytest.raises(InvalidInputError, match=match) as info:
        beat_morphology(args.pop("signal"), args.pop("fs_hz"), args.pop("beat_times_s"), **args)
    assert info.value.field == field


def test_confidence_outside_unit_interval_and_nan_samples_are_rejected():
    x, beats = _ok()
    with pytest.raises(InvalidInputError, match=r"must lie in \[0, 1\]"):
        beat_morphology(x, 100.0, beats, beat_confidence=np.full(beats.size, 1.5))
    y = x.copy()
    y[10] = np.nan
    with pytest.raises(InvalidInputError, match=r"must be finite where `usable` is True"):
        beat_morphology(y, 100.0, beats)
    usable = np.ones(x.size, dtype=bool)
    usable[10] = False
    assert beat_morphology(y, 100.0, beats, usable=usable).jk_amplitude is not None


def test_signature_band_labels_name_the_nominal_detail_bands():
    from features.morphology import SIGNATURE_BAND_LABELS, SIGNATURE_FS_HZ, SIGNATURE_LEVELS

    # Level j of a dyadic (stationary) wavelet transform spans fs/2**(j+1) to fs/2**j
    # (Mallat, A Wavelet Tour of Signal Processing, 3rd ed., 2009; from memory). The labels
    # are rounded by hand to 2-4 significant digits (at most 0.2 % off); 1 % allows that.
    assert len(SIGNATURE_BAND_LABELS) == SIGNATURE_LEVELS
    for j, label in enumerate(SIGNATURE_BAND_LABELS, start=1):
        low, high = (float(v) for v in label.split("-"))
        assert low == pytest.approx(SIGNATURE_FS_HZ / 2 ** (j + 1), rel=0.01)
        assert high == pytest.approx(SIGNATURE_FS_HZ / 2**j, rel=0.01)


def test_epoch_rows_are_the_spline_interpolant_of_map_coordinates():
    from scipy import ndimage

    from features.morphology import _spline_rows

    rng = np.random.default_rng(7)
    coeffs = ndimage.spline_filter1d(rng.standard_normal(300_000), order=3, mode="mirror")
    n_pre, width = 88, 202
    centres = rng.uniform(n_pre + 5, coeffs.size - width, 400)
    # Centres just below powers of two: their last coordinates cross the power, where the
    # sum drops a bit and each point has a fraction of its own (the rows read otherwise).
    powers = 2.0 ** np.arange(8, 19)
    near = (powers[:, None] - rng.uniform(1.0, width, (powers.size, 8))).ravel()
    centres = np.concatenate((centres, near[near > n_pre + 5]))
    last = width - 1 - n_pre
    assert np.any((centres + last) - last != centres)  # the case is exercised
    got, scratch = np.empty((centres.size, width)), np.empty((centres.size, width))
    _spline_rows(coeffs, centres, n_pre, got, scratch)
    coords = centres[:, None] + np.arange(-n_pre, last + 1, dtype=float)[None, :]
    # Reference: scipy.ndimage.map_coordinates on the same coordinates.
    want = ndimage.map_coordinates(coeffs, coords.reshape(1, -1), order=3, mode="mirror",
                                   prefilter=False).reshape(centres.size, width)
    # The same weights and four-term sum in the same order: equal bit for bit where the
    # compiler keeps a * b + c as two roundings; a fused multiply-add moves each of the
    # four terms by at most an ulp of the largest coefficient times its weight (<= 1).
    scale = np.abs(coeffs).max()
    np.testing.assert_allclose(got, want, rtol=0, atol=4 * np.finfo(float).eps * scale)


@pytest.mark.parametrize("n_beats", [1, 2, 7, 40, 341, 1001, 1500, 6001, 7000])
def test_template_spread_is_the_median_absolute_deviation_of_numpy(n_beats):
    from features.morphology import _TRIM_PROPORTION, _lane_mad, _ordered_lanes

    rng = np.random.default_rng(n_beats)
    # Lanes of every kind the selection must survive: symmetric, tied, heavily skewed (the
    # partitioned rows' shortcut does not hold there), and mostly one value.
    epochs = np.column_stack((
        rng.standard_normal(n_beats),
        rng.integers(-2, 3, n_beats).astype(float),
        rng.exponential(1.0, n_beats) ** 4,
        np.where(rng.random(n_beats) < 0.7, 0.0, 100 * rng.standard_normal(n_beats)),
        np.r_[np.full(n_beats - n_beats // 2, 1.0), 1e3 * rng.random(n_beats // 2)],
    ))
    cut = int(_TRIM_PROPORTION * n_beats)
    mid = ((n_beats - 1) // 2, n_beats // 2)
    rows = _ordered_lanes(epochs, (cut, n_beats - cut - 1, *mid))
    centre = np.median(epochs, axis=0)
    got = _lane_mad(rows, centre, cut)
    # Reference: numpy.median of the absolute deviations. The same order statistics of the
    # same differences, and the same mean of the two middle ones: equal bit for bit.
    want = np.median(np.abs(epochs - centre), axis=0)
    np.testing.assert_array_equal(got, want)


@pytest.mark.parametrize("n_beats", [7, 1001, 6001, 9000])
def test_ordered_lanes_hold_numpy_sorts_order_statistics(n_beats):
    """Sorted (up to ``_SORTED_BEATS_UP_TO`` beats) or selected one order statistic at a
    time (beyond): the asked positions hold ``numpy.sort``'s values exactly, and every
    value between two of them lies between them."""
    from features.morphology import _ordered_lanes

    rng = np.random.default_rng(n_beats)
    epochs = np.column_stack((rng.standard_normal(n_beats),
                              rng.integers(-2, 3, n_beats).astype(float),
                              rng.exponential(1.0, n_beats) ** 4))
    kth = (n_beats // 5, n_beats - n_beats // 5 - 1, (n_beats - 1) // 2, n_beats // 2)
    rows = _ordered_lanes(epochs, kth)
    want = np.sort(epochs.T, axis=1)
    stops = sorted(set(kth))
    np.testing.assert_array_equal(rows[:, stops], want[:, stops])
    assert (rows[:, : stops[0]] <= rows[:, [stops[0]]]).all()
    assert (rows[:, stops[-1]:] >= rows[:, [stops[-1]]]).all()
    for a, b in zip(stops[:-1], stops[1:], strict=True):
        span = rows[:, a:b + 1]
        assert (span >= rows[:, [a]]).all() and (span <= rows[:, [b]]).all()


@pytest.mark.parametrize("n_beats", [40, 1001, 6001, 9000])
def test_robust_template_is_scipys_trimmed_mean_and_mad(n_beats):
    """Against scipy.stats: ``trim_mean(epochs, 0.2, axis=0)`` less its median, and
    ``median_abs_deviation(epochs, axis=0, scale="normal")``'s median over samples / sqrt(n)
    (the template's standard error)."""
    from scipy import stats

    from features.morphology import _robust_template

    rng = np.random.default_rng(n_beats)
    t = np.linspace(-0.35, 0.45, 201)
    epochs = beat_shape(t)[None, :] + rng.standard_t(3, (n_beats, t.size))
    template, se = _robust_template(epochs)
    want = stats.trim_mean(epochs, 0.2, axis=0)
    want = want - np.median(want)
    # The same kept values summed in another order: each sum is within n_kept rounding
    # steps of the largest kept magnitude (a bound on naive summation; numpy's pairwise
    # sum is tighter), and the median is one of those means.
    kept = n_beats - 2 * int(0.2 * n_beats)
    bound = 2 * kept * np.finfo(float).eps * np.abs(epochs).max()
    np.testing.assert_allclose(template, want, rtol=0, atol=2 * bound)
    mad = stats.median_abs_deviation(epochs, axis=0, scale="normal")
    # MAD_TO_SD is 1.4826, scipy's "normal" scale 1 / Phi^-1(3/4) = 1.482602...: a
    # relative difference under 2e-6.
    assert se == pytest.approx(np.median(mad) / np.sqrt(n_beats), rel=2e-6)


@pytest.mark.parametrize("fs", [100.0, 250.0, 499.0])
def test_beat_extrema_are_least_squares_parabolas_at_each_centre(fs):
    from features.morphology import _BEAT_SEARCH_S, _beat_extrema, _fit_half_width

    rng = np.random.default_rng(int(fs))
    width = round(0.8 * fs) + 1
    t = np.arange(width) / fs - 0.35
    jitter = rng.normal(0.0, 0.004, 60)
    epochs = np.array([beat_shape(t - dt) for dt in jitter])
    epochs += 0.05 * rng.standard_normal(epochs.shape)
    epochs[:3, 1] = 9.0  # a maximum against the epoch's start: the fit's window moves in
    # Centres of every wave, a maximum next to the epoch's start and a minimum near its end.
    centres = [int(np.argmin(np.abs(t - m))) for m, _, _ in WAVES.values()] + [2, width - 3]
    signs = [1 if a > 0 else -1 for _, a, _ in WAVES.values()] + [1, -1]
    got_off, got_val = _beat_extrema(epochs, centres, signs, fs)
    h_search, h = max(1, round(_BEAT_SEARCH_S * fs)), _fit_half_width(fs)
    for w, (i, sign) in enumerate(zip(centres, signs, strict=True)):
        for b, row in enumerate(sign * epochs):
            lo, hi = max(1, i - h_search), min(width - 2, i + h_search)
            k = lo + int(np.argmax(row[lo : hi + 1]))
            kc = min(max(k, h), width - 1 - h)
            u = np.arange(-h, h + 1)
            # Reference: numpy.polyfit, degree 2, on the 2h + 1 samples around the maximum.
            c, bb, a = np.polyfit(u, row[kc + u], 2)
            d = float(np.clip(-bb / (2 * c), -h, h)) if c < 0 else 0.0
            value = a + bb * d + c * d * d if c < 0 else row[kc]
            # pinv and polyfit's least squares solve the same 3 x 3 system by different
            # factorisations: rounding of a few ulps of the samples.
            np.testing.assert_allclose(got_off[w, b], k - i + (kc - k) + d, rtol=0, atol=1e-9)
            np.testing.assert_allclose(got_val[w, b], sign * value, rtol=1e-9, atol=1e-12)
