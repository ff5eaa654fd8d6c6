"""Beat detector: simulated and handcrafted traces with known beat times, invariances, errors.

Simulated recordings (the simulation package) give the true J instant of every beat. Two
properties need a beat whose shape the test controls exactly, and keep a handcrafted
sum-of-Gaussians complex: one complex at a quarter of the others' amplitude (a simulated
beat cannot be scaled alone: the support's response spreads it into its neighbours), and a
shape that does not change with the preceding interval, or changes by a set law (the
simulator's complexes shift with the interval by its own, milder physics).
"""

import numpy as np
import pytest
from scipy import signal

from features.beats import MIN_DURATION_S, detect_beats
from features.errors import InvalidInputError
from simulation import SimulationSettings, simulate

# Wave offsets from J (s), relative amplitudes and widths (s) of an H-I-J-K-L
# complex; J largest and positive, I and K the troughs around it, 40-90 ms
# away (Inan et al. 2015, IEEE JBHI 19(4):1414, Fig. 1; values from memory).
WAVES = ((-0.10, 0.25, 0.020), (-0.05, -0.6, 0.018), (0.0, 1.0, 0.020),
         (0.065, -0.8, 0.022), (0.14, 0.3, 0.030))


def _simulated(fs=250.0, seed=0, **settings):
    """One simulated seated force channel (2 min, 70 bpm, SNR 10 dB) and its true J times."""
    rec = simulate(SimulationSettings(duration_s=120.0, fs_hz=fs, heart_rate_bpm=70.0,
                                      seed=seed, **settings))
    return rec.channels[0], rec.truth.j_times_s


def _gaussian_trace(fs=250.0, dur=120.0, hr=70.0, snr_db=10.0, seed=0, jitter=0.05, gains=None,
                    waves=WAVES):
    """Sum-of-Gaussians beats of one fixed shape at known J times, noise at a set SNR."""
    rng = np.random.default_rng(seed)
    period = 60.0 / hr
    times = [1.0]
    while times[-1] < dur - 1.5:
        times.append(times[-1] + period * (1 + jitter * np.sin(2 * np.pi * 0.25 * times[-1])))
    times = np.asarray(times)
    t = np.arange(int(dur * fs)) / fs
    x = np.zeros_like(t)
    g = np.ones(times.size) if gains is None else gains(times.size)
    for dt, a, w in waves:
        x += a * (g * np.exp(-0.5 * ((t[:, None] - times[None, :] - dt) / w) ** 2)).sum(axis=1)
    sos = signal.butter(4, [1, 20], btype="band", fs=fs, output="sos")
    noise = rng.standard_normal(t.size)
    p_sig = np.mean(signal.sosfiltfilt(sos, x) ** 2)
    p_noise = np.mean(signal.sosfiltfilt(sos, noise) ** 2)
    noise *= np.sqrt(p_sig / p_noise / 10 ** (snr_db / 10))
    breathing = 5.0 * np.sin(2 * np.pi * 0.25 * t)
    return x + noise + breathing + 600.0, times


def _matched(det, ref, tol=0.15):
    idx = np.clip(np.searchsorted(det, ref), 1, max(det.size - 1, 1))
    near = np.minimum(np.abs(det[idx - 1] - ref), np.abs(det[np.minimum(idx, det.size - 1)] - ref))
    return near <= tol


def test_simulated_trace_finds_every_beat_at_its_j_time():
    x, ref = _simulated()
    d = detect_beats(x, 250.0)
    assert d.has_beats and d.polarity == 1
    assert d.times_s.size == ref.size
    assert np.all(_matched(d.times_s, ref))
    # Intervals to within a few ms of the truth (the acceptance target is 6 ms).
    err = np.abs(np.diff(d.times_s) - np.diff(ref))
    assert np.mean(err) < 0.004
    assert np.all((d.confidence >= 0) & (d.confidence <= 1))
    assert np.median(d.confidence) > 0.7


def test_inverted_trace_is_detected_with_negative_polarity_and_same_times():
    x, ref = _simulated(seed=1)
    up = detect_beats(x, 250.0)
    down = detect_beats(-x, 250.0)
    assert down.polarity == -1 and up.polarity == 1
    np.testing.assert_allclose(down.times_s, up.times_s, atol=1e-9)


@pytest.mark.parametrize("sign", [1, -1])
def test_polarity_follows_the_leading_j_wave_on_a_ringing_support(sign):
    # A lightly damped support rings after J: on the simulator's "ringing" preset K is
    # deeper than J and L nearly as high (f_n 6 Hz, damping ratio 0.07).
    x, ref = _simulated(seed=7, support="ringing")
    d = detect_beats(sign * x, 250.0)
    assert d.polarity == sign
    # J times, not K times: within 20 ms of the truth.
    assert np.all(_matched(d.times_s, ref, tol=0.02))


def _soft(fs, hr, seed, damping):
    """A soft support resonating at 4 Hz (a mattress on a frame), 2 min, 10 dB."""
    rec = simulate(SimulationSettings(duration_s=120.0, fs_hz=fs, heart_rate_bpm=hr, seed=seed,
                                      support_natural_hz=4.0, support_damping_ratio=damping))
    return rec.channels[0], rec.truth.j_times_s


@pytest.mark.parametrize("seed", [3, 4])
@pytest.mark.parametrize("sign", [1, -1])
def test_fiducial_stays_on_j_on_a_soft_ringing_support(seed, sign):
    # A soft, lightly damped support (f_n 4 Hz, damping ratio 0.08; issue 12: a 3.5-5 Hz
    # body-on-support resonance) rings with K deeper and L higher than J; J is still the
    # first large wave of the complex (Inan et al. 2015, Fig. 1). The detector used to time
    # the beats on K (a constant offset of about 120 ms). Every beat within 20 ms of the
    # truth J: the I-J and J-K spacings here are about 90 and 120 ms, so 20 ms cannot reach
    # another wave.
    x, ref = _soft(250.0, 75.0, seed, 0.08)
    d = detect_beats(sign * x, 250.0)
    assert d.polarity == sign
    hit = _matched(d.times_s, ref, tol=0.02)
    assert hit.mean() >= 0.95  # the beat acceptance of issue 12, per case


@pytest.mark.parametrize("seed", [0, 1, 2])
def test_soft_ringing_support_keeps_one_beat_per_complex(seed):
    # At 60 bpm a 4-Hz ring places a wave of the complex's own shape 0.5 s after J, so the
    # matched picks came twice a beat and the rhythm gate refused them all (no beat). Issue
    # 12 acceptance: Se and PPV at least 0.95 per case, interval error under 8 ms on
    # 3.5-5 Hz supports (matching within 150 ms as in validation/cohort.py).
    x, ref = _soft(100.0, 60.0, 40 + seed, 0.08)
    d = detect_beats(x, 100.0)
    assert d.has_beats
    assert _matched(d.times_s, ref).mean() >= 0.95
    assert _matched(ref, d.times_s).mean() >= 0.95
    ok = _matched(d.times_s, ref, tol=0.02)
    assert ok.mean() >= 0.95
    nearest = d.times_s[np.argmin(np.abs(d.times_s[None, :] - ref[:, None]), axis=1)]
    err = np.abs(np.diff(nearest) - np.diff(ref))[ok[1:] & ok[:-1]]
    assert np.mean(err) < 0.008


@pytest.mark.parametrize("fs", [50.0, 100.0, 500.0, 1000.0])
def test_sampling_rate_change_keeps_beats(fs):
    x, ref = _simulated(fs=fs, seed=2)
    d = detect_beats(x, fs)
    assert np.all(_matched(d.times_s, ref))
    assert d.times_s.size == ref.size


def test_amplitude_scaling_and_time_shift():
    x, ref = _simulated(seed=3)
    base = detect_beats(x, 250.0)
    scaled = detect_beats(x * 1e-4, 250.0)
    np.testing.assert_allclose(scaled.times_s, base.times_s, atol=1e-9)
    shift = 250  # one second
    shifted = detect_beats(np.concatenate((np.full(shift, x[0]), x)), 250.0)
    inner = shifted.times_s[(shifted.times_s > 3) & (shifted.times_s < 115)] - 1.0
    ref_inner = base.times_s[(base.times_s > 2) & (base.times_s < 114)]
    np.testing.assert_allclose(inner, ref_inner, atol=0.002)


def test_noise_alone_has_no_beat_evidence():
    rng = np.random.default_rng(4)
    d = detect_beats(rng.standard_normal(250 * 120), 250.0)
    assert not d.has_beats
    assert d.polarity == 0
    assert np.all(d.confidence == 0)


def test_masked_span_holds_no_beat():
    x, ref = _simulated(seed=5)
    usable = np.ones(x.size, dtype=bool)
    usable[250 * 40 : 250 * 50] = False
    d = detect_beats(x, 250.0, usable=usable)
    assert not np.any((d.times_s > 40 - 0.25) & (d.times_s < 50 + 0.35))
    # Beats either side fall in different runs.
    before = d.run_ids[d.times_s < 40]
    after = d.run_ids[d.times_s > 50]
    assert np.unique(before).size == 1 and np.unique(after).size == 1
    assert before[0] != after[0]


def test_missed_beat_search_recovers_a_weak_beat():
    # One complex at a quarter of the others' amplitude: below the normal
    # amplitude level, so only the search of the two-median gap can find it.
    def gains(n):
        g = np.ones(n)
        g[60] = 0.25
        return g

    x, ref = _gaussian_trace(seed=6, snr_db=20, gains=gains)
    d = detect_beats(x, 250.0)
    assert d.n_recovered >= 1
    assert np.all(_matched(d.times_s, ref))


def test_too_short_trace_is_rejected():
    with pytest.raises(InvalidInputError, match=r"`trace` must be at least 10 s long; got 5.00 s"):
        detect_beats(np.zeros(int(5 * 250)), 250.0)
    assert MIN_DURATION_S == 10.0


def test_rate_out_of_range_is_rejected():
    with pytest.raises(InvalidInputError, match=r"`fs_hz` must be between 50 and 2000 Hz; got 20"):
        detect_beats(np.zeros(20 * 30), 20.0)


def test_non_finite_is_rejected():
    x = np.zeros(250 * 20)
    x[7] = np.nan
    with pytest.raises(InvalidInputError, match=r"`trace` must hold finite numbers only"):
        detect_beats(x, 250.0)


def test_mask_length_is_checked():
    with pytest.raises(InvalidInputError,
                       match=r"`usable` must have the length of `trace` \(5000\)"):
        detect_beats(np.zeros(5000), 250.0, usable=np.ones(10, dtype=bool))


def test_two_d_trace_is_rejected():
    with pytest.raises(InvalidInputError, match=r"`trace` must be 1-D"):
        detect_beats(np.zeros((2, 5000)), 250.0)


def test_flat_trace_returns_no_beats():
    d = detect_beats(np.full(250 * 30, 3.0), 250.0)
    assert d.times_s.size == 0 and not d.has_beats
    assert "no_signal_in_beat_band" in d.flags


def _shape_changing_trace(fs=250.0, dur=150.0, seed=4, snr_db=15.0):
    """Irregular beats whose complex shortens after a short preceding interval.

    Each complex is scaled in time about its I wave by 0.6 + 0.4 x (preceding interval /
    mean interval): ejection shortens with filling time (Weissler et al., Circulation
    37:149, 1968; the beat-by-beat form is ours), so J moves within the complex. The true
    J of each beat is the maximum of its noise-free sum of Gaussians (scipy.optimize).
    """
    from scipy import optimize

    rng = np.random.default_rng(seed)
    intervals = np.exp(rng.normal(np.log(0.75), 0.2, int(dur / 0.6)))
    onsets = 1.0 + np.concatenate(([0.0], np.cumsum(intervals)))
    onsets = onsets[onsets < dur - 1.5]
    prev = np.r_[intervals[0], intervals][: onsets.size]
    scale = np.clip(0.6 + 0.4 * prev / intervals.mean(), 0.6, 1.4)
    t = np.arange(int(dur * fs)) / fs
    x = np.zeros_like(t)
    anchor = WAVES[1][0]  # the I wave
    j_true = np.empty(onsets.size)
    for b, (on, s) in enumerate(zip(onsets, scale, strict=True)):
        waves = [(on + anchor + s * (dt - anchor), a, w) for dt, a, w in WAVES]
        sl = slice(max(0, int((on - 0.4) * fs)), min(t.size, int((on + 0.5) * fs)))
        for c, a, w in waves:
            x[sl] += a * np.exp(-0.5 * ((t[sl] - c) / w) ** 2)

        def minus(tt, waves=waves):
            return -sum(a * np.exp(-0.5 * ((tt - c) / w) ** 2) for c, a, w in waves)

        j_true[b] = optimize.minimize_scalar(
            minus, bounds=(on - 0.03, on + 0.03), method="bounded",
            options={"xatol": 1e-7}).x
    sos = signal.butter(4, [1, 20], btype="band", fs=fs, output="sos")
    noise = rng.standard_normal(t.size)
    p_sig = np.mean(signal.sosfiltfilt(sos, x) ** 2)
    noise *= np.sqrt(p_sig / np.mean(signal.sosfiltfilt(sos, noise) ** 2) / 10 ** (snr_db / 10))
    return x + noise + 600.0, j_true


def test_j_timing_trend_with_the_preceding_interval_is_removed(monkeypatch):
    # Known answer: the true J peak of every beat (optimised on the noise-free formula).
    # The template match times the complex as a whole; with the trend removed, the beat
    # intervals must be closer to the truth than without it, and within 3 ms.
    import features.beats as beats_module

    x, j_true = _shape_changing_trace()
    with_trend = detect_beats(x, 250.0)
    monkeypatch.setattr(beats_module, "TREND_Z", np.inf)
    without = detect_beats(x, 250.0)

    def interval_mae(d):
        ok = _matched(d.times_s, j_true, tol=0.05)
        assert ok.all() and d.times_s.size == j_true.size
        return float(np.mean(np.abs(np.diff(d.times_s) - np.diff(j_true))))

    assert "j_timing_trend_with_preceding_interval_removed" in with_trend.flags
    assert "j_timing_trend_with_preceding_interval_removed" not in without.flags
    assert interval_mae(with_trend) < 0.7 * interval_mae(without)
    assert interval_mae(with_trend) < 0.003


def test_a_fixed_beat_shape_loses_nothing_to_the_trend_step(monkeypatch):
    # One shape for every beat: whatever slope the test claims is small, and the beat
    # intervals against the known J times must not get worse by more than 0.1 ms.
    import features.beats as beats_module

    for seed, jitter in ((0, 0.05), (2, 0.1), (3, 0.1)):
        x, ref = _gaussian_trace(seed=seed, jitter=jitter)
        monkeypatch.setattr(beats_module, "TREND_Z", 2.0)
        a = detect_beats(x, 250.0)
        monkeypatch.setattr(beats_module, "TREND_Z", np.inf)
        b = detect_beats(x, 250.0)
        assert a.times_s.size == b.times_s.size == ref.size
        mae_a = np.mean(np.abs(np.diff(a.times_s) - np.diff(ref)))
        mae_b = np.mean(np.abs(np.diff(b.times_s) - np.diff(ref)))
        assert mae_a < mae_b + 1e-4, (seed, mae_a, mae_b)


def test_window_sums_match_their_definition():
    # Definition in the docstring: csum[min(i - centre + m, n)] - csum[max(i - centre, 0)].
    from features.beats import _window_sums

    rng = np.random.default_rng(7)
    for n in (1, 5, 101, 1000):
        csum = np.concatenate(([0.0], np.cumsum(rng.standard_normal(n))))
        for m in (1, 10, 200):
            for centre in (0, m // 2, m - 1):
                i = np.arange(n)
                want = (csum[np.clip(i - centre + m, 0, n)] - csum[np.clip(i - centre, 0, n)])
                assert np.array_equal(_window_sums(csum, centre, m), want), (n, m, centre)


@pytest.mark.parametrize("seed", [101, 102])
def test_beats_next_to_a_large_posture_step_are_kept(seed):
    # A sensor that sees breathing swings and two posture steps 30 times the cardiac wave
    # (simulation.front_ends, "swings"; issue 12: such swings lost 4-9 % of the beats). The
    # steps are smooth (0.5 s), so the beat band beside them stays quiet, yet the broadband
    # movement mask took about 5 s around each. With the quiet part given back, at most the
    # beats inside the steps themselves (two or three each) are lost: Se >= 0.97, and what
    # is found is still right (PPV >= 0.985, the beat acceptance of issue 12).
    from features import ChannelInput, analyze
    from simulation.front_ends import sensor_trace

    rec = simulate(SimulationSettings(duration_s=180.0, breathing_rate_per_min=5.0, seed=seed))
    trace = sensor_trace(rec, "swings")
    res = analyze([ChannelInput(samples=trace.samples, label="x", quantity=trace.quantity,
                                unit=trace.unit, coupling=trace.coupling)], rec.fs_hz)
    ref = rec.truth.j_times_s
    assert _matched(res.beats.times_s, ref).mean() >= 0.97
    assert _matched(ref, res.beats.times_s).mean() >= 0.985


@pytest.mark.parametrize("seed", [65, 1065, 2065])
def test_beats_do_not_slip_onto_the_ring_of_a_soft_support(seed):
    # validation/cohort.py's soft_ringing case (4-Hz support, damping ratio 0.08, 75 bpm,
    # 3 min) on its three draws. The match is nearly as good one ring period (about 250 ms)
    # from J, and the picks used to slip there in places: a ring wave of the previous beat
    # and one of this beat picked instead of its J (Se 0.968, PPV 0.947 on seed 1065).
    # Issue 12, every case: Se and PPV at least 0.95 (150-ms matching, the ANSI/AAMI EC57
    # window, from memory), the fiducial on J (within 20 ms, less than the I-J or J-K
    # spacing).
    rec = simulate(SimulationSettings(duration_s=180.0, heart_rate_bpm=75.0, seed=seed,
                                      support_natural_hz=4.0, support_damping_ratio=0.08))
    ref = rec.truth.j_times_s
    d = detect_beats(rec.channels[0], rec.fs_hz)
    assert _matched(d.times_s, ref).mean() >= 0.95
    assert _matched(ref, d.times_s).mean() >= 0.95
    assert _matched(d.times_s, ref, tol=0.02).mean() >= 0.95


def _slip_repair_by_definition(beats, corr, ref, level):
    # The rule of _repair_slips's docstring, one position at a time in plain Python.
    out, replaced, i = beats.tolist(), 0, 1
    while i + 2 < len(out):
        a, b, c, d = out[i - 1: i + 3]
        m = float(ref[i])
        if 1.8 * m <= d - a <= 2.2 * m and all(abs(v - m) > 0.2 * m for v in (b - a, c - b,
                                                                              d - c)):
            lo, hi = int(np.ceil((a + d) / 2 - 0.2 * m)), int(np.floor((a + d) / 2 + 0.2 * m))
            j = lo + int(np.argmax(corr[lo: hi + 1]))
            if corr[j] >= level:
                out[i: i + 2] = [j]
                replaced += 1
        i += 1
    return out, replaced


def test_slip_repair_follows_its_rule_pick_by_pick():
    from features.beats import RHYTHM_STEP, _reference_interval, _repair_slips

    assert RHYTHM_STEP == 0.2  # the definition above spells it out
    rng = np.random.default_rng(12)
    seen = 0
    for _ in range(300):
        n = int(rng.integers(6, 60))
        # intervals mostly regular, with halves, 1.3-1.4x and 0.6-0.7x ones mixed in
        iv = rng.choice([0.5, 1.0, 1.0, 1.0, 0.6, 1.4, 0.7, 1.3], size=n) * 100
        beats = np.cumsum(iv + rng.normal(0, 5, n)).astype(np.intp) + 200
        corr = rng.uniform(0, 1, beats[-1] + 300)
        amp = rng.uniform(0.2, 2, corr.size)
        score = corr[beats] * np.minimum(amp[beats] / np.median(amp[beats]), 1.5)
        ref = _reference_interval(beats, score >= 0.75 * np.median(score), 125.0) * 125.0
        got, n_got = _repair_slips(beats, corr, amp, 125.0, 0.5)
        want, n_want = _slip_repair_by_definition(beats, corr, ref, 0.5)
        assert got.tolist() == want and n_got == n_want
        seen += n_got
    assert seen > 50  # the random trains do exercise replacements


@pytest.mark.parametrize("count", [7, 8, 1200])
def test_template_lanes_give_numpy_median_of_the_epochs(count: int) -> None:
    from features._numeric import lane_median
    from features.beats import _epochs, _lanes

    rng = np.random.default_rng(count)
    comp = rng.standard_normal(5000)
    centres = np.sort(rng.choice(np.arange(50, 4940), size=count, replace=False))
    half = (44, 56)
    np.testing.assert_array_equal(_lanes(comp, centres, half), _epochs(comp, centres, half).T)
    # Reference: numpy.median across the epochs. Bit-equal, since the same order statistics
    # and the same mean of the two middle ones are taken (odd and even counts, and a count
    # past lane_median's sorting limit).
    np.testing.assert_array_equal(lane_median(_lanes(comp, centres, half)),
                                  np.median(_epochs(comp, centres, half), axis=0))


def test_a_given_trace_median_is_the_one_computed_here() -> None:
    # The engine hands the detector the median it already took of the fused trace; the
    # detection must be the one the detector gives when it takes that median itself.
    x, _ = _simulated(seed=3)
    x = x + 40.0  # an offset the median removal has to take out
    usable = np.ones(x.size, dtype=bool)
    usable[9000:9500] = False
    own = detect_beats(x, 250.0, usable=usable)
    given = detect_beats(x, 250.0, usable=usable, trace_median=float(np.median(x)))
    assert own.has_beats and own.times_s.size > 100
    for name in ("times_s", "confidence", "correlation", "amplitude", "run_ids", "template"):
        np.testing.assert_array_equal(getattr(given, name), getattr(own, name))
    assert (given.period_s, given.evidence, given.flags) == (own.period_s, own.evidence,
                                                             own.flags)


@pytest.mark.parametrize("sign", [1, -1])
def test_match_at_chosen_samples_is_the_full_match_read_there(sign: int) -> None:
    # Step 6 reads the core template's correlation at the candidates only, so it is
    # computed there by direct dot products instead of over the whole trace by FFT blocks.
    # The two must agree to rounding (FFT error ~ 1e-15 of the window's scale; 1e-12 is
    # that with room to spare), the ends (window partly outside the trace) included.
    from features.beats import _match, _match_at, _Matcher

    rng = np.random.default_rng(11)
    comp = rng.standard_normal(20000)
    comp[5000:5200] = 0.0  # a silent stretch: denominator under the floor, correlation 0
    template = rng.standard_normal(45)
    matcher = _Matcher(comp, 101)
    full, _ = _match(matcher, sign, template, 19)
    at = np.r_[0, 1, 5, 18, 19, rng.integers(0, comp.size, 300), 5100, comp.size - 30,
               comp.size - 2, comp.size - 1].astype(np.intp)
    np.testing.assert_allclose(_match_at(matcher, sign, template, 19, at), full[at],
                               rtol=0, atol=1e-12)
    assert _match_at(matcher, sign, template, 19, np.array([5100]))[0] == 0.0


def test_matcher_running_sums_are_numpys_cumsums() -> None:
    from features.beats import _Matcher

    # The two running sums (of the component and of its square) are taken as one complex
    # running sum. Each part is added as a float of its own, in order, so they are the
    # numbers of numpy.cumsum of each (bit for bit with numpy 2.4 on x86-64). The bound
    # allowed is that of any running sum of n terms, n eps sum|x| (common practice), so a
    # numpy that orders its additions otherwise still passes.
    comp = np.random.default_rng(4).standard_normal(20_001) * 3.0
    m = _Matcher(comp, 101)
    for got, terms in ((m.c1, comp), (m.c2, np.square(comp))):
        want = np.concatenate(([0.0], np.cumsum(terms)))
        bound = terms.size * np.finfo(float).eps * np.concatenate(([0.0], np.cumsum(np.abs(terms))))
        assert np.all(np.abs(got - want) <= bound)
