"""Tests of features.modulation (respiratory modulation of the heartbeat)."""

from __future__ import annotations

import numpy as np
import pytest
from scipy import signal as sps
from scipy import stats

from features.errors import InvalidInputError
from features.modulation import respiratory_modulation

FS = 10.0  # breathing-signal rate used throughout


def sine_breathing(duration_s, rate_hz=0.25, amplitude=1.0):
    t = np.arange(int(duration_s * FS)) / FS
    return amplitude * np.sin(2 * np.pi * rate_hz * t)


def beats_from_intervals(first_s, interval_fn, duration_s):
    """Beat times where each interval (ms) is interval_fn(time of the beat it ends at)."""
    times, ivs = [first_s], [np.nan]
    while times[-1] < duration_s - 2.0:
        iv = float(interval_fn(times[-1]))
        times.append(times[-1] + iv / 1e3)
        ivs.append(iv)
    return np.array(times), np.array(ivs)


# --------------------------------------------------------------------------- RSA


def test_rsa_is_twice_the_amplitude_of_the_breathing_locked_sinusoid():
    # Cosinor fit (Nelson, Tong, Lee & Halberg 1979, Chronobiologia 6:305, from memory) on
    # the breathing phase: intervals 900 + 30 cos(phase + 0.7) ms plus a slow linear drift
    # of 0.5 ms/s. Peak-to-trough (Grossman, van Beek & Wientjes 1990) of a sinusoid of
    # amplitude 30 is 60 ms (hand-computed); the cubic trend holds the drift exactly, and the
    # noise-free fit leaves no residual, so only rounding separates the two.
    breaths = np.arange(0.0, 240.0, 4.0)
    beats = np.arange(0.37, 238.0, 0.9)
    phase = 2 * np.pi * (beats % 4.0) / 4.0
    iv = 900.0 + 30.0 * np.cos(phase + 0.7) + 0.5 * beats
    r = respiratory_modulation(sine_breathing(240), FS, beat_times_s=beats,
                               breath_times_s=breaths, interval_ms=iv)
    assert r.rsa_ms == pytest.approx(60.0, abs=1e-6)  # rounding of the least squares


def test_rsa_fit_bridges_a_gap_in_the_beats():
    # A 40-s stretch without beats (a masked movement) leaves pieces of the slow trend with
    # no data; the fit must still stand on the rest: 900 + 30 cos(phase) ms gives 60 ms
    # peak to trough (hand-computed), noise-free, so only rounding separates them.
    breaths = np.arange(0.0, 240.0, 4.0)
    beats = np.arange(0.37, 238.0, 0.9)
    beats = beats[(beats < 100.0) | (beats > 140.0)]
    iv = 900.0 + 30.0 * np.cos(2 * np.pi * (beats % 4.0) / 4.0)
    r = respiratory_modulation(sine_breathing(240), FS, beat_times_s=beats,
                               breath_times_s=breaths, interval_ms=iv, interval_times_s=beats)
    assert r.rsa_ms == pytest.approx(60.0, abs=1e-6)  # rounding of the least squares


def test_rsa_without_respiratory_modulation_reads_near_zero():
    # No RSA at all: intervals 900 ms plus a 0.05-Hz rhythm of 40 ms and beat-to-beat jitter
    # of SD 20 ms (seeded), with breathing at 0.25 Hz. Issue 12 acceptance: bias within 5 ms
    # at true amplitudes 0-20 ms. The per-breath longest-minus-shortest interval reads
    # about 40-50 ms on this series (the expected range of 4 normal draws of SD 20 ms is
    # 2.06 SD, Tippett 1925 tables, from memory), which is the bias this check guards.
    rng = np.random.default_rng(11)
    beats = np.arange(0.37, 298.0, 0.9)
    iv = 900.0 + 40.0 * np.sin(2 * np.pi * 0.05 * beats) + 20.0 * rng.standard_normal(
        beats.size)
    r = respiratory_modulation(sine_breathing(300), FS, beat_times_s=beats,
                               breath_times_s=np.arange(0.0, 300.0, 4.0), interval_ms=iv)
    assert r.rsa_ms is not None and r.rsa_ms <= 5.0


def test_rsa_confidence_is_low_where_breathing_cannot_be_told_from_the_rhythm():
    # The same 30-ms modulation sampled at under two beats per breath (heart 50 /min,
    # breathing 30 /min: below the beat series' Nyquist rate, Shannon sampling) and a
    # breathing rhythm inside the 0.04-0.15 Hz LF band (Task Force 1996), where the
    # baroreflex rhythm shares its frequency: neither can be trusted.
    beats = np.arange(0.37, 298.0, 1.2)
    fast = respiratory_modulation(sine_breathing(300, 0.5), FS, beat_times_s=beats,
                                  breath_times_s=np.arange(0.0, 300.0, 2.0),
                                  interval_ms=1200.0 + 15.0 * np.cos(np.pi * beats))
    assert fast.rsa_confidence < 0.1
    assert "rsa_not_separable_from_other_rhythms" in fast.flags
    beats = np.arange(0.37, 298.0, 0.9)
    slow = respiratory_modulation(sine_breathing(300, 0.06), FS, beat_times_s=beats,
                                  breath_times_s=np.arange(0.0, 300.0, 1 / 0.06),
                                  interval_ms=900.0 + 15.0 * np.sin(2 * np.pi * 0.06 * beats))
    steady = respiratory_modulation(sine_breathing(300, 0.25), FS, beat_times_s=beats,
                                    breath_times_s=np.arange(0.0, 300.0, 4.0),
                                    interval_ms=900.0 + 15.0 * np.sin(np.pi / 2 * beats))
    assert slow.rsa_confidence < 0.5 < steady.rsa_confidence


def test_rsa_of_a_sinusoidal_interval_series():
    # Intervals 900 + 40 sin(2 pi 0.2 t) ms, t the start of each interval: peak to trough
    # 80 ms (Grossman et al. 1990; hand-computed). Each interval is dated by its end, one
    # interval (0.86-0.94 s) later, so its breathing phase jitters by at most
    # 2 pi 0.2 x 0.04 s = 0.05 rad, which shrinks the fitted amplitude by under 0.2 %.
    beats, iv = beats_from_intervals(0.3, lambda t: 900 + 40 * np.sin(2 * np.pi * 0.2 * t), 300)
    r = respiratory_modulation(sine_breathing(300, 0.2), FS, beat_times_s=beats,
                               breath_times_s=np.arange(0.0, 300.0, 5.0), interval_ms=iv)
    assert r.rsa_ms == pytest.approx(80.0, abs=1.0)  # the phase jitter above, with margin
    assert r.rsa_confidence > 0.9


def test_rsa_standard_error_is_the_spread_of_the_estimate():
    # Cosinor theory (Nelson et al. 1979, from memory): with white noise of SD s on N
    # intervals whose phases cover the cycle evenly, var a = var b = 2 s^2 / N, so the
    # peak-to-trough 2 sqrt(a^2 + b^2) has standard error 2 s sqrt(2 / N). Over 40 seeded
    # recordings of a 60-ms RSA with 20-ms jitter the estimates' SD must match the SE the
    # fit reports and the theory. Tolerances: the SD of 40 draws is itself uncertain by
    # 1 / sqrt(2 x 39) = 11 % (25 % is over two of those); the reported SE differs from
    # the theory by the trend columns the fit spends (about one per breath, 10 %) and the
    # residual SD's own spread (4 %), hence 15 %.
    beats = np.arange(0.37, 298.0, 0.9)
    phase = 2 * np.pi * (beats % 4.0) / 4.0
    est, se = [], []
    for seed in range(40):
        noise = 20.0 * np.random.default_rng(seed).standard_normal(beats.size)
        r = respiratory_modulation(sine_breathing(300), FS, beat_times_s=beats,
                                   breath_times_s=np.arange(0.0, 300.0, 4.0),
                                   interval_ms=900.0 + 30.0 * np.cos(phase) + noise)
        est.append(r.rsa_ms)
        se.append(r.rsa_se_ms)
    theory = 2.0 * 20.0 * np.sqrt(2.0 / (beats.size - 1))
    assert np.mean(se) == pytest.approx(theory, rel=0.15)
    assert np.std(est, ddof=1) == pytest.approx(np.mean(se), rel=0.25)


def test_rsa_halves_disagree_when_the_modulation_changes():
    # RSA of 80 ms peak to trough in the first half and 20 ms in the second (noise-free):
    # the halves' difference is 60 ms (hand-computed), while a steady 50 ms gives 0; the
    # tolerance is the halves' split at the middle interval, which lands within one breath
    # of the change at 150 s and mixes up to one breath of the other depth into each half
    # (1/37 of either half: under 2 ms here).
    beats = np.arange(0.37, 298.0, 0.9)
    phase = 2 * np.pi * (beats % 4.0) / 4.0
    depth = np.where(beats < 150.0, 40.0, 10.0)
    kw = dict(beat_times_s=beats, breath_times_s=np.arange(0.0, 300.0, 4.0))
    changed = respiratory_modulation(sine_breathing(300), FS,
                                     interval_ms=900.0 + depth * np.cos(phase), **kw)
    steady = respiratory_modulation(sine_breathing(300), FS,
                                    interval_ms=900.0 + 25.0 * np.cos(phase), **kw)
    assert changed.rsa_half_difference_ms == pytest.approx(60.0, abs=3.0)
    assert steady.rsa_half_difference_ms == pytest.approx(0.0, abs=1e-6)  # rounding


def test_rsa_halves_lost_in_noise_do_not_agree_at_zero():
    # No RSA and 20 ms of beat-to-beat noise: both halves' debiased RSA is often 0, and a
    # difference of those would say "the halves agree exactly". The halves' sinusoids
    # differ by their noise instead. Each half's a and b have variance about
    # sigma^2 / (m / 2) (m intervals, sum of cos^2 about m / 2: ordinary least squares),
    # so each coefficient of the difference has variance 4 sigma^2 / m, and
    # 2 |ab_early - ab_late| has RMS 2 sqrt(8 / m) sigma (about 8.8 ms here, m = 165) and
    # median 0.83 x that (a Rayleigh length: sqrt(ln 4 / 2)).
    beats = np.arange(0.37, 298.0, 0.9)
    m = beats.size // 2
    diffs = []
    for seed in range(40):
        noise = 20.0 * np.random.default_rng(seed).standard_normal(beats.size)
        r = respiratory_modulation(sine_breathing(300), FS, beat_times_s=beats,
                                   breath_times_s=np.arange(0.0, 300.0, 4.0),
                                   interval_ms=900.0 + noise)
        diffs.append(r.rsa_half_difference_ms)
    expected = np.sqrt(np.log(4.0) / 2.0) * 2.0 * np.sqrt(8.0 / m) * 20.0
    # 40 draws: the sample median's spread is about 0.12 x its value (asymptotic variance
    # of a median, 1 / (4 n f^2), for this Rayleigh), and the trend takes a few degrees of
    # freedom of each half: a band of +/-35 %
    assert 0.65 * expected < np.median(diffs) < 1.35 * expected, (np.median(diffs), expected)


def test_closed_form_cosinor_matches_scipy_least_squares():
    # The normal equations with the trend partialled out (Frisch-Waugh) give the same
    # coefficients and covariance s^2 (X'X)^-1 as a full least-squares solve
    # (scipy.linalg.lstsq) on [sinusoids, trend]; 1e-8 relative covers the conditioning of
    # the spline Gram matrix (about 1e3) at double precision.
    from scipy import linalg

    from features.modulation import _partial_fit

    rng = np.random.default_rng(3)
    t = np.sort(rng.uniform(0.0, 60.0, 80))
    phi = 2 * np.pi * t / 4.0
    x = np.column_stack((np.cos(phi), np.sin(phi)))
    trend = np.column_stack([np.exp(-0.5 * ((t - c) / 6.0) ** 2) for c in range(0, 61, 6)])
    y = 900.0 + 20.0 * x[:, 0] - 5.0 * x[:, 1] + 10.0 * rng.standard_normal(t.size)
    got = _partial_fit(x, trend, y)
    assert got is not None
    design = np.column_stack((x, trend))
    coef, res, *_ = linalg.lstsq(design, y)
    s2 = float(res) / (t.size - design.shape[1])
    cov = s2 * np.linalg.inv(design.T @ design)[:2, :2]
    np.testing.assert_allclose(got[0], coef[:2], rtol=1e-8)
    np.testing.assert_allclose(got[1], cov, rtol=1e-8, atol=1e-11)  # plus the 1e-12 ridge


@pytest.mark.parametrize("seed", [0, 1, 2])
def test_tiled_trend_factor_matches_one_dense_qr(seed):
    # The factor built tile by tile equals the trailing block of one Householder QR of the
    # whole [trend, columns] (numpy.linalg.qr, mode "r") up to row signs, so their Gram
    # matrices agree; 1e-10 relative covers rounding in reflections applied in another order
    # (a few hundred rows, spline conditioning about 1e2).
    from scipy.interpolate import BSpline

    from features.modulation import _QR_TILE_ROWS, _trend_residual_factor

    rng = np.random.default_rng(seed)
    t = np.sort(rng.uniform(0.0, 300.0, 400))
    t = t[(t < 100.0) | (t > 130.0)]  # a gap, as a masked movement leaves
    assert t.size > 3 * _QR_TILE_ROWS  # several tiles
    inner = np.linspace(t[0], t[-1], 70)[1:-1]
    knots = np.concatenate(([t[0]] * 4, inner, [t[-1]] * 4))
    trend = BSpline.design_matrix(t, knots, 3).toarray()
    trend = trend[:, np.count_nonzero(trend, axis=0) >= 2]
    cols = np.column_stack((np.cos(t), np.sin(t), 900.0 + 30.0 * rng.standard_normal(t.size)))
    got = _trend_residual_factor(trend, cols)
    assert got is not None
    k = trend.shape[1]
    want = np.linalg.qr(np.column_stack((trend, cols)), mode="r")[k:, k:]
    np.testing.assert_allclose(got.T @ got, want.T @ want, rtol=1e-10)


def test_tiled_trend_factor_flags_a_rank_deficient_trend():
    # Two equal trend columns: the rank rule of numpy.linalg.lstsq rejects the trend.
    from features.modulation import _trend_residual_factor

    t = np.linspace(0.0, 10.0, 50)
    trend = np.column_stack((np.ones_like(t), t, t))
    assert _trend_residual_factor(trend, np.column_stack((np.cos(t), np.sin(t)))) is None


# --------------------------------------------------------------------------- amplitude index


@pytest.mark.parametrize("noise, tol", [(0.0, 1e-6), (0.3, 0.03)])
def test_amplitude_index_of_a_known_modulation(noise, tol):
    # Amplitudes 10 (1 + 0.1 cos(breathing phase + 0.3)): (max - min) / mean = (11 - 9) / 10
    # = 0.2 (hand-computed), whatever the phase lag.
    rng = np.random.default_rng(3)
    beats = np.arange(0.4, 300.0, 0.8)
    amps = 10 * (1 + 0.1 * np.cos(2 * np.pi * beats / 4.0 + 0.3))
    amps += noise * rng.standard_normal(beats.size)
    r = respiratory_modulation(sine_breathing(300), FS, beat_times_s=beats,
                               breath_times_s=np.arange(0.0, 300.0, 4.0), beat_amplitudes=amps)
    assert r.amplitude_index == pytest.approx(0.2, abs=tol)
    assert r.amplitude_confidence > 0.5


# --------------------------------------------------------------------------- timing share


def test_timing_share_of_a_pure_breathing_modulation_agrees_with_welch():
    # All interval variance at 0.25 Hz: the share within +/-0.05 Hz is close to 100 %. The
    # reference is scipy.signal.welch of the interval series resampled evenly at 4 Hz.
    beats, iv = beats_from_intervals(0.5, lambda t: 1000 + 50 * np.sin(2 * np.pi * 0.25 * t), 300)
    r = respiratory_modulation(sine_breathing(300), FS, beat_times_s=beats,
                               breath_times_s=np.arange(0.0, 300.0, 4.0), interval_ms=iv)
    grid = np.arange(beats[1], beats[-1], 0.25)
    f, p = sps.welch(np.interp(grid, beats[1:], iv[1:]), fs=4.0, nperseg=512)
    ref = 100 * p[np.abs(f - 0.25) <= 0.05].sum() / p[(f >= 0.04) & (f <= 0.5)].sum()
    assert r.timing_modulation_pct > 95.0
    assert r.timing_modulation_pct == pytest.approx(ref, abs=5.0)


def test_timing_share_of_white_interval_noise_is_the_band_fraction():
    # White noise has a flat spectrum: the share is the band width over the total width,
    # 0.1 / (0.5 - 0.04) = 21.7 % for 1000-ms beats (Nyquist 0.5 Hz) (analytic); one
    # realisation of 600 s scatters by about +/-15 % of that.
    rng = np.random.default_rng(7)
    beats = np.arange(0.5, 600.0, 1.0)
    iv = 1000 + 30 * rng.standard_normal(beats.size)
    r = respiratory_modulation(sine_breathing(600), FS, beat_times_s=beats,
                               breath_times_s=np.arange(0.0, 600.0, 4.0), interval_ms=iv)
    assert r.timing_modulation_pct == pytest.approx(100 * 0.1 / 0.46, rel=0.3)


def test_breathing_above_the_beat_series_nyquist_is_not_reported():
    # 40 beats/min sample the interval series at 0.67 Hz (Nyquist 0.33 Hz): a 0.35-Hz
    # breathing component cannot be resolved (sampling theorem).
    beats = np.arange(0.5, 300.0, 1.5)
    r = respiratory_modulation(sine_breathing(300, 0.35), FS, beat_times_s=beats,
                               breath_times_s=np.arange(0.0, 300.0, 1 / 0.35))
    assert r.timing_modulation_pct is None
    assert "breathing_above_beat_series_nyquist" in r.flags


# --------------------------------------------------------------------------- coherence


def _band_noise(rng, n):
    sos = sps.butter(4, (0.15, 0.35), btype="bandpass", fs=FS, output="sos")
    return sps.sosfiltfilt(sos, rng.standard_normal(n))


def test_coherence_of_coupled_half_coupled_and_independent_series():
    # Magnitude-squared coherence (Carter 1987, Proc IEEE 75:236): for x = y + y2 with y2
    # independent of y and of the same spectrum, |Sxy|^2 / (Sxx Syy) = Syy / (2 Syy) = 0.5
    # (analytic); x = y gives 1; x independent of y gives about 1 / K (estimator bias).
    rng = np.random.default_rng(11)
    n = int(600 * FS)
    t = np.arange(n) / FS
    y, y2 = _band_noise(rng, n), _band_noise(rng, n)
    breaths = np.arange(0.0, 600.0, 4.0)
    results = {}
    for name, drive in (("full", y), ("half", y + y2), ("none", y2)):
        scale = 40 / np.std(drive)
        beats, iv = beats_from_intervals(0.5, lambda s, d=drive, k=scale: 1000 + k * np.interp(
            s, t, d), 600)
        results[name] = respiratory_modulation(y, FS, beat_times_s=beats, breath_times_s=breaths,
                                               interval_ms=iv)
    assert results["full"].coherence > 0.9
    assert results["half"].coherence == pytest.approx(0.5, abs=0.2)
    assert results["none"].coherence < 0.25
    assert results["full"].coherence_segments >= 30


# --------------------------------------------------------------------------- baseline


def test_baseline_modulation_ratio_hand_computed():
    # Breathing sine of amplitude 1.5 N: per-breath max - min = 3 N; cardiac amplitude 6 N:
    # ratio 3 / 6 = 0.5.
    beats = np.arange(0.5, 120.0, 0.9)
    r = respiratory_modulation(sine_breathing(120, amplitude=1.5), FS, beat_times_s=beats,
                               breath_times_s=np.arange(0.0, 120.0, 4.0), cardiac_amplitude=6.0)
    assert r.baseline_modulation_ratio == pytest.approx(0.5, abs=0.005)


# --------------------------------------------------------------------------- simulator


def test_indices_rank_the_simulated_modulation_depths():
    # Eight simulated recordings (the simulation package) with set rsa_depth_ms and
    # sv_modulation in shuffled pairings; the full chain (breath times from the breathing
    # stage, J-K amplitudes from the morphology stage, truth beat times) must rank them:
    # Spearman rho >= 0.8 (scipy.stats.spearmanr; project acceptance).
    from features.morphology import beat_morphology
    from features.respiration import breathing
    from simulation import SimulationSettings, simulate

    rsa_set = [0.0, 15.0, 30.0, 45.0, 60.0, 80.0, 100.0, 130.0]
    sv_set = [0.25, 0.04, 0.16, 0.0, 0.3, 0.08, 0.2, 0.12]
    rsa_out, amp_out = [], []
    for i in range(8):
        rec = simulate(SimulationSettings(seed=20 + i, duration_s=120.0,
                                          rsa_depth_ms=rsa_set[i], sv_modulation=sv_set[i]))
        x = np.sum(rec.channels, axis=0)
        x = x - np.median(x)
        beats = rec.truth.j_times_s
        m = beat_morphology(x, rec.fs_hz, beats)
        b = breathing(x, rec.fs_hz)
        r = respiratory_modulation(b.breathing_signal, b.breathing_fs_hz, beat_times_s=beats,
                                   breath_times_s=b.breath_times_s,
                                   beat_amplitudes=m.beat_jk_amplitudes,
                                   amplitude_times_s=m.beat_times_s)
        rsa_out.append(r.rsa_ms)
        amp_out.append(r.amplitude_index)
    assert stats.spearmanr(rsa_set, rsa_out).statistic >= 0.8
    assert stats.spearmanr(sv_set, amp_out).statistic >= 0.8


def test_engine_rsa_over_a_sweep_of_simulated_depths():
    # Issue 12 acceptance: across true peak-to-trough RSA of 0, 5, 10, 20, 40, 80, 120 ms
    # (the simulator's rsa_depth_ms, everything else at its defaults) the engine's rsa_ms is
    # within 5 ms of the truth at 0-20 ms and ranks the sweep with Spearman rho >= 0.95
    # (scipy.stats.spearmanr). The peak-valley reading gave 39-47 ms at 0-20 ms here.
    from features import ChannelInput, Subject, analyze
    from simulation import SimulationSettings, simulate

    depths = [0.0, 5.0, 10.0, 20.0, 40.0, 80.0, 120.0]
    got = []
    for i, depth in enumerate(depths):
        rec = simulate(SimulationSettings(seed=70 + i, duration_s=180.0, rsa_depth_ms=depth))
        channels = [ChannelInput(samples=x, label=lab, quantity=rec.quantity, unit=rec.unit)
                    for x, lab in zip(rec.channels, rec.labels, strict=True)]
        fv = analyze(channels, rec.fs_hz,
                     subject=Subject(body_mass_kg=rec.truth.body_mass_kg)).feature_vector
        got.append(fv.get("rsa_ms").value)
    assert all(v is not None for v in got)
    small = [v - d for v, d in zip(got, depths, strict=True) if d <= 20.0]
    assert abs(float(np.mean(small))) <= 5.0, small
    assert max(abs(e) for e in small) <= 10.0, small  # the RSA tolerance of issue 12
    assert stats.spearmanr(depths, got).statistic >= 0.95


def test_rsa_is_not_measured_when_a_fifth_of_the_intervals_are_unexplained():
    # The sinus-rhythm condition of MIN_EXPLAINED_FRACTION (0.8; common practice: HRV
    # studies commonly exclude recordings with more than a fifth of their intervals edited):
    # the same 60-ms modulation is measured at 0.8 and withheld with its reason at 0.79,
    # while the indices that do not rest on the sinus rhythm's timing stay.
    breaths = np.arange(0.0, 240.0, 4.0)
    beats = np.arange(0.37, 238.0, 0.9)
    iv = 900.0 + 30.0 * np.cos(2 * np.pi * (beats % 4.0) / 4.0 + 0.7)
    common = {"beat_times_s": beats, "breath_times_s": breaths, "interval_ms": iv,
              "beat_amplitudes": 1.0 + 0.1 * np.cos(2 * np.pi * (beats % 4.0) / 4.0)}
    kept = respiratory_modulation(sine_breathing(240), FS, explained_fraction=0.8, **common)
    cut = respiratory_modulation(sine_breathing(240), FS, explained_fraction=0.79, **common)
    assert kept.rsa_ms == pytest.approx(60.0, abs=1e-6)
    assert cut.rsa_ms is None and cut.rsa_confidence == 0.0 and cut.rsa_se_ms is None
    assert "too_many_unexplained_intervals_for_rsa" in cut.flags
    assert cut.amplitude_index == pytest.approx(kept.amplitude_index)


def test_engine_withholds_rsa_in_an_irregular_rhythm_and_keeps_it_around_ectopic_beats():
    # The simulator's irregular rhythm adds no RSA; read as a sinus rhythm its intervals gave
    # RSA of 15-90 ms at confidences up to 0.94 (75 test-range recordings). The interval
    # screen (the 20 % rule of Malik et al. 1989) explains about 60 % of its intervals, so
    # RSA is null with the reason. A 12 %-ectopic sinus rhythm (about 75 % of intervals
    # normal, the rest premature beats and their pauses) keeps its RSA: within the 10-ms
    # tolerance of issue 12 of the simulator's 40 ms.
    from features import ChannelInput, Subject, analyze
    from simulation import SimulationSettings, simulate

    def run(**kw):
        rec = simulate(SimulationSettings(seed=5, duration_s=240.0, **kw))
        channels = [ChannelInput(samples=x, label=lab, quantity=rec.quantity, unit=rec.unit)
                    for x, lab in zip(rec.channels, rec.labels, strict=True)]
        return analyze(channels, rec.fs_hz,
                       subject=Subject(body_mass_kg=rec.truth.body_mass_kg))

    irregular = run(irregular_rhythm=True)
    rsa = irregular.feature_vector.get("rsa_ms")
    assert rsa.value is None and rsa.confidence == 0.0
    assert rsa.reason == "too_many_unexplained_intervals_for_rsa"
    ectopic = run(ectopic_fraction=0.12, rsa_depth_ms=40.0)
    assert ectopic.interval_labels.fraction_normal < 0.8
    assert abs(ectopic.feature_vector.get("rsa_ms").value - 40.0) <= 10.0


# --------------------------------------------------------------------------- edge cases, errors


def test_too_few_breaths_gives_none_with_reason():
    beats = np.arange(0.5, 60.0, 0.9)
    r = respiratory_modulation(sine_breathing(60), FS, beat_times_s=beats,
                               breath_times_s=[0.0, 4.0, 8.0, 12.0])
    assert r.rsa_ms is None and r.amplitude_index is None and r.coherence is None
    assert r.confidence == 0.0 and r.flags == ("too_few_breaths",)


def test_breaths_across_gaps_or_unusable_signal_are_dropped():
    beats = np.arange(0.5, 200.0, 0.9)
    breaths = np.concatenate((np.arange(0.0, 100.0, 4.0), np.arange(120.0, 200.0, 4.0)))
    y = sine_breathing(200)
    y[int(150 * FS) : int(160 * FS)] = np.nan
    r = respiratory_modulation(y, FS, beat_times_s=beats, breath_times_s=breaths)
    # Kept: every cycle except the 24-s one across the gap (96 -> 120 s, longer than twice
    # the 4-s median) and the cycles overlapping the NaN span 150-160 s.
    n_cycles = breaths.size - 1
    gap = 1
    nan_cycles = int(np.sum((breaths[1:] > 150.0) & (breaths[:-1] < 160.0)))
    assert r.breaths_used == n_cycles - gap - nan_cycles
    assert "breath_cycles_excluded" in r.flags


@pytest.mark.parametrize(
    "kwargs, field, match",
    [
        ({"fs_hz": 0.5}, "fs_hz", r"`fs_hz` must be between 1 and 2000 Hz; got 0.5"),
        ({"y": np.zeros((2, 100))}, "breathing_signal", r"must be 1-D with at least 2 samples"),
        ({"beat_times_s": [2.0, 1.0]}, "beat_times_s", r"strictly increasing"),
        ({"breath_times_s": [0.0, np.nan]}, "breath_times_s", r"finite and strictly"),
        ({"interval_ms": [800.0]}, "interval_ms", r"length of `beat_times_s` \(3\); got 1"),
        ({"interval_ms": [np.nan, -5.0, 800.0]}, "interval_ms", r"must be positive"),
        ({"interval_ms": [800.0], "interval_times_s": [1.0, 2.0]}, "interval_ms",
         r"length of `interval_times_s` \(2\); got 1"),
        ({"beat_amplitudes": [1.0]}, "beat_amplitudes", r"length of its times \(3\); got 1"),
        ({"cardiac_amplitude": 0.0}, "cardiac_amplitude", r"must be positive; got 0"),
        ({"explained_fraction": 1.5}, "explained_fraction", r"number from 0 to 1; got 1.5"),
    ],
)
def test_invalid_input(kwargs, field, match):
    args = {"y": np.zeros(100), "fs_hz": FS, "beat_times_s": [1.0, 2.0, 3.0],
            "breath_times_s": [0.0, 4.0]}
    args.update(kwargs)
    with pytest.raises(InvalidInputError, match=match) as info:
        respiratory_modulation(args.pop("y"), args.pop("fs_hz"), **args)
    assert info.value.field == field


def test_segment_peak_to_peak_equals_numpy_ptp() -> None:
    from features.modulation import _segment_ptp

    rng = np.random.default_rng(4)
    x = rng.standard_normal(500)
    a = np.sort(rng.integers(0, 490, 40))
    b = np.minimum(a + rng.integers(1, 30, 40), x.size)
    b[-1] = x.size  # a segment that ends at the last sample
    # reference library: numpy.ptp of each slice
    ref = np.array([np.ptp(x[i:j]) for i, j in zip(a, b, strict=True)])
    np.testing.assert_array_equal(_segment_ptp(x, a, b), ref)


def test_rsa_halves_wald_statistic_is_chi_square_when_steady():
    # A steady 50 ms RSA with 20 ms of beat-to-beat noise: the halves' Wald statistic is
    # chi-square with 2 degrees of freedom (mean 2; Wald 1943, any regression text), so over
    # 60 noise draws its mean is 2 within the sampling spread of a mean of 60 chi-square(2)
    # values (SD 2 / sqrt(60) = 0.26; a band of about 2.5 of them, and the trend taking a
    # few degrees of freedom of each half). The same series whose depth drops from 80 to
    # 20 ms at the middle gives a statistic far beyond any chi-square(2) quantile.
    beats = np.arange(0.37, 298.0, 0.9)
    phase = 2 * np.pi * (beats % 4.0) / 4.0
    kw = dict(beat_times_s=beats, breath_times_s=np.arange(0.0, 300.0, 4.0))
    wald = []
    for seed in range(60):
        noise = 20.0 * np.random.default_rng(seed).standard_normal(beats.size)
        r = respiratory_modulation(sine_breathing(300), FS,
                                   interval_ms=900.0 + 25.0 * np.cos(phase) + noise, **kw)
        wald.append(r.rsa_half_wald)
    assert 1.35 < np.mean(wald) < 2.65, np.mean(wald)
    depth = np.where(beats < 150.0, 40.0, 10.0)
    noise = 5.0 * np.random.default_rng(99).standard_normal(beats.size)
    changed = respiratory_modulation(sine_breathing(300), FS,
                                     interval_ms=900.0 + depth * np.cos(phase) + noise, **kw)
    # chi-square(2) exceeds 2 ln(1e6) = 27.6 with probability 1e-6
    assert changed.rsa_half_wald > 2.0 * np.log(1e6)
