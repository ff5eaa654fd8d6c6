"""Tests of features.respiration (breathing rate, breath timing, pauses)."""

from __future__ import annotations

import dataclasses

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy import signal as sps

from features.errors import InvalidInputError
from features.filters import bridge_masked
from features.respiration import breathing


def phase_signal(periods_s, fs, *, amplitude=1.0, lead_s=0.0):
    """Sinusoidal breathing whose k-th cycle lasts periods_s[k] (phase continuous)."""
    edges = np.concatenate(([0.0], np.cumsum(periods_s))) + lead_s
    t = np.arange(int(edges[-1] * fs)) / fs
    k = np.clip(np.searchsorted(edges, t, side="right") - 1, 0, len(periods_s) - 1)
    phase = 2 * np.pi * (k + (t - edges[k]) / np.asarray(periods_s)[k])
    x = amplitude * np.sin(phase)
    x[t < lead_s] = 0.0
    return x


def with_pause(fs, pause_s, *, rate_hz=0.25, before_s=120.0, after_s=120.0, seed=0):
    """Sinusoidal breathing, a flat span of pause_s starting at a zero crossing, breathing."""
    rng = np.random.default_rng(seed)
    n_before, n_after = int(before_s * rate_hz), int(after_s * rate_hz)
    a = np.sin(2 * np.pi * rate_hz * np.arange(int(n_before / rate_hz * fs)) / fs)
    b = np.sin(2 * np.pi * rate_hz * np.arange(int(n_after / rate_hz * fs)) / fs)
    x = np.concatenate((a, np.zeros(int(pause_s * fs)), b))
    return x + 0.02 * rng.standard_normal(x.size), a.size / fs


# --------------------------------------------------------------------------- rate


@pytest.mark.parametrize("fs", [10.0, 100.0, 250.0, 1000.0])
def test_rate_of_a_sinusoid_by_counting_and_by_spectrum(fs):
    # Known answer: 0.25 Hz = 15 breaths/min. The spectral estimate is also checked against
    # the peak of scipy.signal.welch on the raw signal (reference library).
    rng = np.random.default_rng(int(fs))
    t = np.arange(int(300 * fs)) / fs
    x = 2.0 * np.sin(2 * np.pi * 0.25 * t) + 0.2 * rng.standard_normal(t.size)
    r = breathing(x, fs)
    assert r.rate_per_min == pytest.approx(15.0, abs=0.1)
    assert r.spectral_rate_per_min == pytest.approx(15.0, abs=0.1)
    f, p = sps.welch(x, fs=fs, nperseg=int(64 * fs), nfft=int(2 ** np.ceil(np.log2(512 * fs))))
    band = (f >= 0.1) & (f <= 0.7)
    assert r.spectral_rate_per_min == pytest.approx(60 * f[band][np.argmax(p[band])], abs=0.15)
    assert r.breath_count == pytest.approx(75, abs=1)  # 300 s x 0.25 Hz
    assert r.confidence > 0.9
    # Robust amplitude 1.4826 MAD of a sine of amplitude A: median |sin| = sin(pi/4), so
    # 1.4826 x 0.7071 x 2.0 = 2.097 (hand-computed).
    assert r.breathing_amplitude == pytest.approx(2.097, rel=0.03)


@settings(max_examples=15, deadline=None)
@given(rate=st.floats(8.0, 30.0), gain=st.floats(1e-3, 1e3), offset=st.floats(-1e4, 1e4))
def test_property_rate_ignores_gain_and_offset(rate, gain, offset):
    # Any rate inside the 6-42/min band is recovered within 0.3/min, whatever the gain and
    # the static offset (a load cell carries the body weight).
    fs = 20.0
    t = np.arange(int(180 * fs)) / fs
    r = breathing(gain * np.sin(2 * np.pi * rate / 60 * t) + offset, fs)
    assert r.rate_per_min == pytest.approx(rate, abs=0.3)
    assert r.spectral_rate_per_min == pytest.approx(rate, abs=0.3)


def test_spectral_rate_matches_welch_on_a_two_tone_signal():
    # Analytic: 0.2 Hz (amplitude 1) plus a weaker 0.45 Hz (0.5): the peak is the 0.2 Hz one,
    # and scipy.signal.welch (reference library) agrees on where it is.
    fs = 20.0
    t = np.arange(int(240 * fs)) / fs
    x = np.sin(2 * np.pi * 0.2 * t) + 0.5 * np.sin(2 * np.pi * 0.45 * t + 1.0)
    r = breathing(x, fs)
    f, p = sps.welch(x, fs=fs, nperseg=int(64 * fs), nfft=8192)
    assert r.spectral_rate_per_min == pytest.approx(12.0, abs=0.1)
    assert r.spectral_rate_per_min == pytest.approx(60 * f[np.argmax(p)], abs=0.2)


def test_breath_interval_variability_hand_computed():
    # Blocks of ten 3.5-s cycles and ten 4.5-s cycles: mean 4.0 s, every deviation 0.5 s, so
    # the SD (ddof=1) over n intervals is 0.5 sqrt(n / (n - 1)) and the CV about 12.5 %.
    # Median interval 4.0 s -> 15 breaths/min. (Blocks, not alternation: alternating cycles
    # put sidebands at 0.125 Hz, on the filter's lower edge, which shrinks the deviations.)
    periods = ([3.5] * 10 + [4.5] * 10) * 4
    x = phase_signal(periods, 50.0)
    r = breathing(x, 50.0)
    n = r.breath_count - 1
    assert r.interval_sd_s == pytest.approx(0.5 * np.sqrt(n / (n - 1)), abs=0.03)
    assert r.interval_cv_pct == pytest.approx(12.5, abs=0.8)
    assert r.counted_rate_per_min == pytest.approx(15.0, abs=0.5)
    # The spectrum has two peaks here (13.3 and 17.1 per min) and reports one of them, so the
    # fused rate lies between it and the count; still within 1/min of 60 / mean cycle.
    assert r.rate_per_min == pytest.approx(15.0, abs=1.0)


def test_rise_fall_ratio_of_an_asymmetric_breath():
    # Raised-cosine rise over 2.25 s, fall over 3.75 s (10 breaths/min): rise / fall = 0.6.
    # At this rate the 0.7-Hz band keeps the first four harmonics; the documented pull toward
    # 1 is allowed for by the tolerance. A sinusoid must read 1.
    fs = 50.0
    rise = 0.5 - 0.5 * np.cos(np.pi * np.arange(int(2.25 * fs)) / (2.25 * fs))
    fall = 0.5 + 0.5 * np.cos(np.pi * np.arange(int(3.75 * fs)) / (3.75 * fs))
    r = breathing(np.tile(np.concatenate((rise, fall)), 40), fs)
    assert r.rise_fall_ratio == pytest.approx(0.6, abs=0.08)
    assert r.rise_time_s + r.fall_time_s == pytest.approx(6.0, abs=0.15)
    sine = breathing(np.sin(2 * np.pi * np.arange(int(240 * fs)) / (6.0 * fs)), fs)
    assert sine.rise_fall_ratio == pytest.approx(1.0, abs=0.05)


def test_centre_of_pressure_is_used_when_it_breathes_more_clearly():
    rng = np.random.default_rng(2)
    fs = 50.0
    t = np.arange(int(180 * fs)) / fs
    trace = 0.05 * np.sin(2 * np.pi * 0.3 * t) + rng.standard_normal(t.size)
    cop = 0.004 * np.sin(2 * np.pi * 0.3 * t) + 0.0005 * rng.standard_normal(t.size)
    r = breathing(trace, fs, cop_signal=cop)
    assert r.source == "centre_of_pressure"
    assert "breathing_from_centre_of_pressure" in r.flags
    assert r.rate_per_min == pytest.approx(18.0, abs=0.3)
    assert breathing(trace, fs).source == "trace"


def test_centre_of_pressure_at_its_own_rate_with_two_axes_and_empty_spans():
    # The breathing axis (fore-aft) is picked from a 2-axis trajectory sampled at 125 Hz
    # while the trace runs at 250 Hz; NaN (empty support) samples are unusable.
    rng = np.random.default_rng(8)
    t = np.arange(int(180 * 250.0)) / 250.0
    trace = rng.standard_normal(t.size)
    tc = np.arange(int(180 * 125.0)) / 125.0
    cop = np.column_stack((0.001 * rng.standard_normal(tc.size),
                           0.004 * np.sin(2 * np.pi * 0.2 * tc)))
    cop[: int(10 * 125.0)] = np.nan
    r = breathing(trace, 250.0, cop_signal=cop, cop_fs_hz=125.0)
    assert r.source == "centre_of_pressure"
    assert r.rate_per_min == pytest.approx(12.0, abs=0.3)
    assert np.all(np.isnan(r.breathing_signal[: int(9 * r.breathing_fs_hz)]))
    assert r.usable_duration_s == pytest.approx(170.0, abs=1.0)


# --------------------------------------------------------------------------- pauses


def test_aasm_ten_second_criterion_12_s_counted_9_s_not():
    # AASM Manual for the Scoring of Sleep and Associated Events: an adult apnoea lasts
    # >= 10 s (from memory). A 12-s flat span is counted, a 9-s one is not.
    fs = 100.0
    x12, start = with_pause(fs, 12.0)
    r12 = breathing(x12, fs)
    assert r12.pause_count == 1
    a, b = r12.pause_spans_s[0]
    assert a == pytest.approx(start, abs=0.5) and b - a == pytest.approx(12.0, abs=0.6)
    assert r12.pauses_per_hour == pytest.approx(3600.0 / r12.usable_duration_s, rel=1e-9)
    assert "pauses_are_signal_observations_not_diagnosis" in r12.flags
    x9, _ = with_pause(fs, 9.0)
    r9 = breathing(x9, fs)
    assert r9.pause_count == 0 and r9.pause_spans_s == ()


def test_masked_spans_are_never_counted_as_pauses():
    fs = 100.0
    x, start = with_pause(fs, 15.0)
    usable = np.ones(x.size, dtype=bool)
    i0 = int((start - 1.0) * fs)
    usable[i0 : i0 + int(17.0 * fs)] = False  # the whole pause is masked (movement)
    r = breathing(x, fs, usable=usable)
    assert r.pause_count == 0
    usable = np.ones(x.size, dtype=bool)
    usable[int((start + 11.0) * fs) : int((start + 25.0) * fs)] = False  # pause end masked
    r = breathing(x, fs, usable=usable)
    assert r.pause_count == 0
    assert "pause_not_counted_touches_mask_or_edge" in r.flags
    assert np.isnan(r.breathing_signal[int((start + 15.0) * r.breathing_fs_hz)])


def test_two_pauses_are_counted_with_spans():
    fs = 50.0
    x1, s1 = with_pause(fs, 20.0, before_s=100.0, after_s=0.0, seed=1)
    x2, s2 = with_pause(fs, 14.0, before_s=100.0, after_s=100.0, seed=2)
    r = breathing(np.concatenate((x1, x2)), fs)
    assert r.pause_count == 2
    durations = [b - a for a, b in r.pause_spans_s]
    assert durations == pytest.approx([20.0, 14.0], abs=0.6)
    assert r.longest_pause_s == pytest.approx(20.0, abs=0.6)


def test_pause_detection_is_refused_when_band_noise_hides_pauses():
    # Band noise with SD 0.15 of a unit sine swings by about 6 SD = 0.9 over a breath
    # window, above the 25 % x 2 = 0.5 pause threshold: no honest pause count exists.
    rng = np.random.default_rng(9)
    fs = 20.0
    x, _ = with_pause(fs, 15.0)
    sos = sps.butter(4, (0.1, 0.7), btype="bandpass", fs=fs, output="sos")
    noise = sps.sosfiltfilt(sos, rng.standard_normal(x.size))
    noisy = breathing(x + 0.15 * noise / np.std(noise), fs)
    assert noisy.pause_count is None and noisy.pauses_per_hour is None
    assert "pause_detection_noise_limited" in noisy.flags
    assert noisy.rate_per_min == pytest.approx(15.0, abs=0.3)  # the rate is still fine
    clean = breathing(x + 0.01 * noise / np.std(noise), fs)
    assert clean.pause_count == 1


# --------------------------------------------------------------------------- simulator


def test_simulated_pauses_found_from_the_centre_of_pressure():
    # Truth: the simulator's breathing_pause_spans_s (15-s pauses). With four load cells the
    # centre of pressure is the load-weighted mean of the cell positions (moment balance on
    # a rigid plate, common practice); its sway carries breathing. At the default 10 dB the
    # summed load's breathing band is noise limited, the centre of pressure is not. Each
    # true pause must overlap a detected one, with no detection elsewhere.
    from simulation import SimulationSettings, simulate

    rec = simulate(SimulationSettings(seed=6, n_channels=4, breathing_pause_count=2,
                                      duration_s=300.0))
    loads = np.asarray(rec.channels)
    cop = (loads.T @ np.asarray(rec.positions_m)) / loads.sum(axis=0)[:, None]
    total = loads.sum(axis=0)
    assert "pause_detection_noise_limited" in breathing(total, rec.fs_hz).flags
    r = breathing(total, rec.fs_hz, cop_signal=cop)
    truth = rec.truth.breathing_pause_spans_s
    assert r.source == "centre_of_pressure"
    assert r.pause_count == len(truth) == 2
    for (a, b), (ta, tb) in zip(r.pause_spans_s, sorted(truth), strict=True):
        assert a < tb and b > ta  # overlap
        assert b - a == pytest.approx(tb - ta, abs=3.0)


def test_simulated_breathing_rate_within_one_per_minute():
    # Normal adult resting breathing rate 12-20 per minute (common practice): the
    # simulator's default lies in it, and the estimate is within 1 breath/min of its truth
    # (project acceptance) on the summed load of default recordings.
    from simulation import SimulationSettings, simulate

    assert 12.0 <= SimulationSettings().breathing_rate_per_min <= 20.0
    for seed, rate in ((1, 12.0), (2, 16.0), (3, 20.0)):
        rec = simulate(SimulationSettings(seed=seed, breathing_rate_per_min=rate))
        r = breathing(np.sum(rec.channels, axis=0), rec.fs_hz)
        assert r.rate_per_min == pytest.approx(rec.truth.breathing_rate_per_min, abs=1.0)
        assert r.spectral_rate_per_min == pytest.approx(rec.truth.breathing_rate_per_min,
                                                        abs=1.0)


# --------------------------------------------------------------------------- edge cases, errors


def test_too_little_usable_signal_gives_none_with_reason():
    fs = 50.0
    x = np.sin(2 * np.pi * 0.25 * np.arange(int(60 * fs)) / fs)
    usable = np.zeros(x.size, dtype=bool)
    usable[: int(10 * fs)] = True
    r = breathing(x, fs, usable=usable)
    assert r.rate_per_min is None and r.pause_count is None and r.confidence == 0.0
    assert "too_little_usable_signal" in r.flags


def test_flat_signal_has_no_rate():
    r = breathing(np.zeros(3000), 50.0)
    assert r.rate_per_min is None and r.confidence == 0.0
    assert "no_breathing_signal" in r.flags


@pytest.mark.parametrize(
    "kwargs, field, match",
    [
        ({"fs_hz": 1.0}, "fs_hz", r"`fs_hz` must be between 2 and 2000 Hz; got 1"),
        ({"x": np.zeros((2, 3000))}, "signal_or_lowband", r"must be 1-D; got 2"),
        ({"x": np.zeros(500)}, "signal_or_lowband", r"must last at least 20 s \(1000 samples\)"),
        ({"usable": np.ones(5, bool)}, "usable", r"`usable` must have the length"),
        ({"cop_signal": np.ones(5)}, "cop_signal", r"must span the signal's 60 s within 1 s"),
        ({"cop_signal": np.ones((3000, 4))}, "cop_signal", r"shape \(m,\) or \(m, k\) with k <= 3"),
        ({"cop_signal": np.ones(3000), "cop_fs_hz": 0.0}, "cop_fs_hz", r"between 2 and 2000 Hz"),
        ({"pause_threshold_pct": 80.0}, "pause_threshold_pct", r"between 10 and 50 %; got 80"),
        ({"x": np.full(3000, np.nan)}, "signal_or_lowband", r"must be finite"),
    ],
)
def test_invalid_input(kwargs, field, match):
    args = {"x": np.zeros(3000), "fs_hz": 50.0}  # 60 s
    args.update(kwargs)
    with pytest.raises(InvalidInputError, match=match) as info:
        breathing(args.pop("x"), args.pop("fs_hz"), **args)
    assert info.value.field == field


def test_non_finite_samples_are_refused_only_where_usable() -> None:
    # The rule of `usable`: samples outside it are not read, so NaN there is accepted;
    # a NaN inside it is refused with the rule's message.
    fs = 20.0
    x = np.sin(2 * np.pi * 0.25 * np.arange(int(120 * fs)) / fs)
    x[100] = np.nan
    with pytest.raises(InvalidInputError, match=r"must be finite where `usable` is True"):
        breathing(x, fs)
    usable = np.ones(x.size, dtype=bool)
    usable[95:106] = False
    assert breathing(x, fs, usable=usable).rate_per_min is not None


def test_window_nanmedian_equals_numpy_nanmedian() -> None:
    from features.respiration import _window_nanmedian

    rng = np.random.default_rng(11)
    v = rng.standard_normal(300)
    v[rng.random(300) < 0.3] = np.nan
    v[100:120] = np.nan  # a stretch where whole windows are empty
    for half in (0, 1, 6):
        # reference library: numpy.nanmedian of each window (NaN where it holds none)
        ref = np.array([np.nanmedian(w) if np.isfinite(w).any() else np.nan
                        for w in (v[max(0, k - half):k + half + 1] for k in range(v.size))])
        np.testing.assert_array_equal(_window_nanmedian(v, half), ref)


def test_cached_decimation_filter_is_resample_polys_own() -> None:
    from features.respiration import _decimation_fir

    x = np.cumsum(np.random.default_rng(2).standard_normal(5000))
    for q in (12, 25, 100):
        # reference library: scipy.signal.resample_poly with its default Kaiser design
        np.testing.assert_array_equal(
            sps.resample_poly(x, 1, q, padtype="line", window=_decimation_fir(q)),
            sps.resample_poly(x, 1, q, padtype="line"))


def test_breath_peaks_and_troughs_equal_argmax_and_argmin_per_breath() -> None:
    from features.respiration import _peaks_and_troughs

    rng = np.random.default_rng(8)
    y = np.round(3.0 * np.sin(np.arange(2000) * 0.05) + rng.standard_normal(2000))  # ties
    rises = np.unique(rng.integers(0, 2000, 40))
    # reference library: numpy.argmax / numpy.argmin (first occurrence) on each breath
    peaks = [a + int(np.argmax(y[a:b])) for a, b in zip(rises[:-1], rises[1:], strict=True)]
    troughs = [p + int(np.argmin(y[p:b])) for p, b in zip(peaks, rises[1:], strict=True)]
    got_p, got_t = _peaks_and_troughs(y, rises)
    np.testing.assert_array_equal(got_p, peaks)
    np.testing.assert_array_equal(got_t, troughs)


# --------------------------------------------------------------------------- fused rate


def test_reported_rate_is_the_mean_of_two_agreeing_estimates():
    # Smart Fusion (Karlen et al., IEEE TBME 60(7):1946-1953, 2013): the reported rate is the
    # mean of the estimates when they agree. Breath periods alternate 3.6 s / 4.4 s: the
    # median interval gives one rate, the spectral peak another near 15/min.
    fs = 25.0
    x = phase_signal([3.6, 4.4] * 40, fs)
    r = breathing(x, fs)
    assert r.counted_rate_per_min is not None and r.spectral_rate_per_min is not None
    assert r.rate_per_min == pytest.approx(
        0.5 * (r.counted_rate_per_min + r.spectral_rate_per_min), abs=1e-12)
    assert 13.5 <= r.rate_per_min <= 16.7  # between 60/4.4 and 60/3.6 (hand-computed)


def test_estimates_that_disagree_by_more_than_4_per_min_sd_give_no_rate():
    # Karlen et al. 2013 discard the fused estimate when the SD of the estimates exceeds
    # 4 breaths/min (limit from memory). 240 s of slow breathing (9/min, amplitude 1) then
    # 120 s of fast shallow breathing (30/min, amplitude 0.8): the slow part holds 3.3x the
    # energy, so the spectral peak is near 9/min, while the fast part gives 60 of the 96
    # intervals, so the median interval is 2 s (30/min). SD = 21 / sqrt(2) > 4.
    fs = 25.0
    slow = phase_signal([60 / 9] * 36, fs)
    fast = 0.8 * phase_signal([2.0] * 60, fs)
    r = breathing(np.concatenate((slow, fast)), fs)
    assert r.counted_rate_per_min == pytest.approx(30.0, abs=1.0)
    assert r.spectral_rate_per_min == pytest.approx(9.0, abs=1.0)
    assert r.rate_per_min is None and r.confidence == 0.0
    assert "breathing_rate_estimates_disagree" in r.flags


@pytest.mark.parametrize("q, n", [(5, 1001), (25, 75_000), (100, 30_001), (25, 7)])
def test_decimate_matches_resample_poly(q, n):
    # Reference: scipy.signal.resample_poly(x, 1, q, padtype="line") with the same FIR. The
    # polyphase product sums the taps in another order: differences of a few ulps of the
    # largest output, so 1e-13 of it.
    from features.respiration import _decimate, _decimation_fir

    x = np.cumsum(np.random.default_rng(q + n).standard_normal(n)) + 5.0
    want = sps.resample_poly(x, 1, q, padtype="line", window=_decimation_fir(q))
    got = _decimate(x, q)
    assert got.shape == want.shape
    np.testing.assert_allclose(got, want, rtol=0, atol=1e-13 * np.abs(want).max())


def test_a_given_trace_median_is_the_one_computed_here():
    # The engine passes the fused trace's median when no sample is masked; with masked
    # samples the stage's own median is of the bridged trace. Either way the result must be
    # the one the stage gives when it takes the median itself, field for field.
    fs = 50.0
    rng = np.random.default_rng(7)
    x = 3.0 + phase_signal([4.0] * 60, fs) + 0.05 * rng.standard_normal(int(240 * fs))
    usable = np.ones(x.size, dtype=bool)
    usable[3000:3400] = False
    bridged = bridge_masked(x, usable)
    for mask, centre in ((None, float(np.median(x))), (usable, float(np.median(bridged)))):
        own = breathing(x, fs, usable=mask)
        given = breathing(x, fs, usable=mask, trace_median=centre)
        assert own.rate_per_min is not None
        for f in dataclasses.fields(own):
            a, b = getattr(given, f.name), getattr(own, f.name)
            if isinstance(a, np.ndarray):
                np.testing.assert_array_equal(a, b)
            else:
                assert a == b, f.name


def test_both_centre_of_pressure_axes_filtered_together_are_each_axis_alone() -> None:
    # The two axes of the centre of pressure go through the breathing filters as the rows
    # of one array; the same numbers as each axis through its own filters (the gap makes
    # the bridged samples of both axes part of the check).
    from features.respiration import _breathing_band, _cop_candidates

    rng = np.random.default_rng(4)
    t = np.arange(3000) / 10.0
    cop = np.stack((0.01 * np.sin(2 * np.pi * 0.25 * t), 0.004 * np.cos(2 * np.pi * 0.25 * t)),
                   axis=1) + 1e-4 * rng.standard_normal((3000, 2))
    cop[1200:1260] = np.nan
    got = _cop_candidates(cop, 10.0, 3000, 10.0)
    assert len(got) == 2
    for axis in range(2):
        col = cop[:, axis]
        m = np.isfinite(col)
        band, low, fs_c, m_c = _breathing_band(bridge_masked(col, m), 10.0, m)
        np.testing.assert_array_equal(got[axis][0], band)
        np.testing.assert_array_equal(got[axis][1], low)
        np.testing.assert_array_equal(got[axis][2], m_c)
