"""Tests of features.variability against hand arithmetic, analytic spectra,
published DFA exponents and reference libraries (NeuroKit2, hrv-analysis,
nolds) on real NN series shipped in the pyHRV wheel."""

from __future__ import annotations

import dataclasses
import importlib.util
import math
from pathlib import Path

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from features.errors import InvalidInputError
from features.intervals import classify_intervals
from features.variability import (
    FrequencyDomainResult,
    NonlinearResult,
    TimeDomainResult,
    VariabilityResult,
    frequency_domain,
    heart_rate_variability,
    lomb_psd_ms2_per_hz,
    nonlinear,
    time_domain,
)

# ------------------------------------------------------------------ helpers


def _series(rr_ms, start_s: float = 0.0) -> tuple[np.ndarray, np.ndarray]:
    rr = np.asarray(rr_ms, dtype=float)
    return start_s + np.cumsum(rr) / 1000.0, rr


def _modulated(
    duration_s: float, components, mean_ms: float = 800.0, noise_ms: float = 0.0, seed: int = 0
) -> tuple[np.ndarray, np.ndarray]:
    """Beat series whose interval ending at time t is mean + sum A sin(2 pi f t)."""
    rng = np.random.default_rng(seed)
    times, rr = [], []
    t = 0.0
    while t < duration_s:
        v = mean_ms + sum(a * math.sin(2 * math.pi * f * t) for a, f in components)
        v += noise_ms * rng.standard_normal() if noise_ms else 0.0
        t += v / 1000.0
        times.append(t)
        rr.append(v)
    return np.array(times), np.array(rr)


def _pyhrv_sample(name: str) -> np.ndarray:
    # NN series from the MIT-BIH Normal Sinus Rhythm Database (PhysioNet), shipped
    # in the pyHRV wheel (pyhrv/files/, see pyhrv.utils.load_sample_nni). pyhrv
    # itself is not imported: its import fails on a missing dependency.
    # The database: Moody GB, Mark RG. The impact of the MIT-BIH Arrhythmia Database.
    # IEEE Eng Med Biol Mag 2001;20(3):45-50; and Goldberger AL, Amaral LAN, Glass L,
    # et al. PhysioBank, PhysioToolkit, and PhysioNet: components of a new research
    # resource for complex physiologic signals. Circulation 2000;101(23):e215-e220.
    spec = importlib.util.find_spec("pyhrv")
    assert spec is not None and spec.submodule_search_locations
    path = Path(spec.submodule_search_locations[0]) / "files" / f"{name}.npy"
    return np.load(path).astype(float)


def _assert_clean(result) -> None:
    """Every numeric field is a finite float/int or None (NaN/inf-free rule)."""
    for field in dataclasses.fields(result):
        value = getattr(result, field.name)
        if dataclasses.is_dataclass(value):
            _assert_clean(value)
        elif isinstance(value, float):
            assert math.isfinite(value), field.name
        elif isinstance(value, tuple) and value and isinstance(value[0], float):
            assert all(math.isfinite(v) for v in value), field.name
        if field.name == "confidence":
            assert 0.0 <= value <= 1.0


@pytest.fixture(scope="module")
def nsr_short():
    x = _pyhrv_sample("SampleNNISeriesShort")
    return _series(x)


@pytest.fixture(scope="module")
def nsr_long():
    x = _pyhrv_sample("SampleNNISeriesLong")
    return _series(x)


# ------------------------------------------------------------------ time domain, by hand

# Eight NN intervals, ms. Hand arithmetic from the Task Force (1996) definitions:
#   sum 6560, mean 820; deviations -20 30 -40 80 0 -60 20 -10, squares sum 13400
#   SDNN = sqrt(13400 / 7) = 43.7526 ms (sample SD, n - 1)
#   successive differences 50 -70 120 -80 -60 80 -30, squares sum 39100
#   RMSSD = sqrt(39100 / 7) = 74.7376 ms
#   mean difference 10/7; SDSD = sqrt((39100 - 7 (10/7)^2) / 6) = sqrt(6514.29) = 80.7111 ms
#   |diff| > 50 ms: 70 120 80 60 80 -> 5 of 7 (50 itself is not "more than 50")
#   pNN50 = 71.4286 %, pNN20 = 7/7 = 100 %; CVNN = 100 * 43.7526 / 820 = 5.3357 %
HAND_NN = [800.0, 850.0, 780.0, 900.0, 820.0, 760.0, 840.0, 810.0]


def test_time_domain_hand_example():
    r = time_domain(*_series(HAND_NN))
    assert r.mean_nn_ms == pytest.approx(820.0)
    assert r.sdnn_ms == pytest.approx(43.7526, rel=1e-5)
    assert r.rmssd_ms == pytest.approx(74.7376, rel=1e-5)
    assert r.sdsd_ms == pytest.approx(80.7111, rel=1e-5)
    assert r.pnn50_pct == pytest.approx(500.0 / 7.0)
    assert r.pnn20_pct == pytest.approx(100.0)
    assert r.cvnn_pct == pytest.approx(5.3357, rel=1e-4)
    # mean of 60000/NN, by hand: 75 + 70.588 + 76.923 + 66.667 + 73.171 + 78.947
    #   + 71.429 + 74.074 = 586.799, / 8 = 73.350 beats/min
    assert r.mean_hr_bpm == pytest.approx(73.350, rel=1e-4)
    assert r.n_intervals == 8 and r.n_successive_differences == 7
    assert "shorter_than_300_s" in r.flags
    _assert_clean(r)


def test_time_domain_hand_example_with_gap():
    # the same intervals with a 5 s gap before the fifth: the -80 ms difference
    # (900 -> 820) no longer exists. By hand: differences 50 -70 120 -60 80 -30,
    # squares 2500 4900 14400 3600 6400 900 = 32700; RMSSD = sqrt(32700/6) = 73.8241;
    # > 50 ms: 70 120 60 80 -> pNN50 = 4/6 = 66.667 %
    t, rr = _series(HAND_NN)
    t[4:] += 5.0
    r = time_domain(t, rr)
    assert r.n_successive_differences == 6
    assert r.rmssd_ms == pytest.approx(73.8241, rel=1e-5)
    assert r.pnn50_pct == pytest.approx(400.0 / 6.0)
    assert r.sdnn_ms == pytest.approx(43.7526, rel=1e-5)  # SDNN ignores adjacency


def test_time_domain_empty_and_too_short():
    r = time_domain([], [])
    assert r.mean_nn_ms is None and r.sdnn_ms is None and r.rmssd_ms is None
    assert {"no_intervals", "sdnn_needs_2_intervals", "rmssd_needs_1_adjacent_pair"} <= set(r.flags)
    assert r.confidence == 0.0
    r = time_domain([0.8], [800.0])
    assert r.mean_nn_ms == 800.0 and r.sdnn_ms is None and "sdnn_needs_2_intervals" in r.flags
    r = time_domain(*_series([800.0, 820.0]))
    assert r.rmssd_ms == pytest.approx(20.0) and r.sdsd_ms is None
    assert "sdsd_needs_2_adjacent_pairs" in r.flags
    _assert_clean(r)


# ---------------------------------------------------------- against NeuroKit2 / hrv-analysis


def test_time_domain_against_neurokit2(nsr_short):
    nk = pytest.importorskip("neurokit2")
    t, x = nsr_short
    ref = nk.hrv_time({"RRI": x, "RRI_Time": t}, sampling_rate=1000).iloc[0]
    r = time_domain(t, x)
    # neurokit2.hrv_time: MeanNN, SDNN (ddof=1), RMSSD, SDSD (ddof=1) - same definitions
    assert r.mean_nn_ms == pytest.approx(ref["HRV_MeanNN"], rel=1e-12)
    assert r.sdnn_ms == pytest.approx(ref["HRV_SDNN"], rel=1e-12)
    assert r.rmssd_ms == pytest.approx(ref["HRV_RMSSD"], rel=1e-12)
    assert r.sdsd_ms == pytest.approx(ref["HRV_SDSD"], rel=1e-12)
    assert r.cvnn_pct == pytest.approx(100.0 * ref["HRV_CVNN"], rel=1e-12)
    # neurokit2 divides NN50 by the number of intervals (Task Force wording), we by
    # the number of differences: ours = theirs * N / (N - 1)
    n = x.size
    assert r.pnn50_pct == pytest.approx(ref["HRV_pNN50"] * n / (n - 1), rel=1e-12)
    assert r.pnn20_pct == pytest.approx(ref["HRV_pNN20"] * n / (n - 1), rel=1e-12)


def test_time_domain_gaps_against_neurokit2(nsr_short):
    # neurokit2.hrv_time with RRI_Time keeps only successive differences of
    # consecutive intervals (intervals_successive); drop three intervals to open gaps
    nk = pytest.importorskip("neurokit2")
    t, x = nsr_short
    keep = np.ones(x.size, dtype=bool)
    keep[[40, 41, 150, 260]] = False
    t, x = t[keep], x[keep]
    ref = nk.hrv_time({"RRI": x, "RRI_Time": t}, sampling_rate=1000).iloc[0]
    r = time_domain(t, x)
    assert r.n_successive_differences == x.size - 1 - 3
    assert r.rmssd_ms == pytest.approx(ref["HRV_RMSSD"], rel=1e-12)
    assert r.sdsd_ms == pytest.approx(ref["HRV_SDSD"], rel=1e-12)


def test_time_domain_against_hrvanalysis(nsr_short):
    hrva = pytest.importorskip("hrvanalysis")
    t, x = nsr_short
    ref = hrva.get_time_domain_features(list(x))
    r = time_domain(t, x)
    # hrvanalysis.get_time_domain_features: sdnn ddof=1, rmssd, pnni_50 over N-1
    assert r.sdnn_ms == pytest.approx(ref["sdnn"], rel=1e-12)
    assert r.rmssd_ms == pytest.approx(ref["rmssd"], rel=1e-12)
    assert r.pnn50_pct == pytest.approx(ref["pnni_50"], rel=1e-12)
    assert r.pnn20_pct == pytest.approx(ref["pnni_20"], rel=1e-12)
    assert r.mean_hr_bpm == pytest.approx(ref["mean_hr"], rel=1e-12)
    # hrvanalysis uses ddof=0 for sdsd and std_hr; convert ours (ddof=1)
    m = x.size - 1
    assert r.sdsd_ms * math.sqrt((m - 1) / m) == pytest.approx(ref["sdsd"], rel=1e-12)
    n = x.size
    assert r.sd_hr_bpm * math.sqrt((n - 1) / n) == pytest.approx(ref["std_hr"], rel=1e-12)


def test_poincare_against_neurokit2_and_hrvanalysis(nsr_short):
    nk = pytest.importorskip("neurokit2")
    hrva = pytest.importorskip("hrvanalysis")
    t, x = nsr_short
    r = nonlinear(t, x)
    ref = nk.hrv_nonlinear({"RRI": x, "RRI_Time": t}, sampling_rate=1000).iloc[0]
    # neurokit2._hrv_nonlinear_poincare: Brennan (2001) eq. 7, ddof=1, adjacent pairs
    assert r.sd1_ms == pytest.approx(ref["HRV_SD1"], rel=1e-12)
    assert r.sd2_ms == pytest.approx(ref["HRV_SD2"], rel=1e-12)
    assert r.sd1_sd2_ratio == pytest.approx(ref["HRV_SD1SD2"], rel=1e-12)
    pp = hrva.get_poincare_plot_features(list(x))
    # hrvanalysis.get_poincare_plot_features: sd1 from var(diff) - identical;
    # sd2 from 2 SDNN^2 - SDSD^2 / 2, which differs from the pair form by
    # end-point terms of order 1/N (N = 337 here): 0.5 % tolerance
    assert r.sd1_ms == pytest.approx(pp["sd1"], rel=1e-12)
    assert r.sd2_ms == pytest.approx(pp["sd2"], rel=5e-3)


def test_sample_entropy_against_references(nsr_short, nsr_long):
    nolds = pytest.importorskip("nolds")
    nk = pytest.importorskip("neurokit2")
    hrva = pytest.importorskip("hrvanalysis")
    for t, x in (nsr_short, (nsr_long[0][:1500], nsr_long[1][:1500])):
        r = nonlinear(t, x)
        r_tol = 0.2 * x.std(ddof=1)
        # nolds.sampen with explicit tolerance r = 0.2 SD (ddof=1), closed=True (<= r,
        # as Richman & Moorman 2000): the same estimator, so agreement to rounding
        assert r.sample_entropy == pytest.approx(
            nolds.sampen(x, emb_dim=2, tolerance=r_tol, closed=True), rel=1e-10
        )
        # neurokit2.entropy_sample(dimension=2, tolerance=0.2 SD ddof=1)
        assert r.sample_entropy == pytest.approx(
            nk.entropy_sample(x, dimension=2, tolerance=r_tol)[0], rel=1e-10
        )
        # hrvanalysis.get_sampen calls nolds.sampen with its default tolerance
        # 0.1164 * (0.5627 ln 2 + 1.3334) SD = 0.2006 SD and strict "< r": a slightly
        # different r, so 2 % tolerance
        assert r.sample_entropy == pytest.approx(hrva.get_sampen(list(x))["sampen"], rel=2e-2)


def test_sample_entropy_seeded_noise_against_nolds():
    nolds = pytest.importorskip("nolds")
    rng = np.random.default_rng(11)
    x = 850.0 + 35.0 * rng.standard_normal(600)
    r = nonlinear(*_series(x))
    ref = nolds.sampen(x, emb_dim=2, tolerance=0.2 * x.std(ddof=1), closed=True)
    assert r.sample_entropy == pytest.approx(ref, rel=1e-10)  # nolds.sampen, same r
    # and near the theoretical value for i.i.d. Gaussian noise, -ln P(|X-Y| <= r) with
    # X - Y ~ N(0, 2 sigma^2), r = 0.2 sigma: P = erf(0.1) = 0.1125, SampEn = 2.18
    # (derived here from the definition; Richman & Moorman 2000 compare SampEn with
    # such analytic values for random numbers - from memory); 0.15 for N = 600
    assert r.sample_entropy == pytest.approx(-math.log(math.erf(0.1)), abs=0.15)


def _all_pairs_counts(emb, r):
    # The definition of Richman & Moorman 2000: pairs of templates (each pair once) within
    # Chebyshev distance r on the first two values (B) and on all three (A), every pair
    # tested, a few rows at a time.
    want_b = want_a = 0
    for i in range(0, emb.shape[0], 256):
        dist = np.abs(emb[i : i + 256, None, :] - emb[None, :, :])
        later = np.arange(emb.shape[0])[None, :] > np.arange(i, i + dist.shape[0])[:, None]
        close_b = (dist[..., :2].max(axis=-1) <= r) & later
        want_b += int(close_b.sum())
        want_a += int((close_b & (dist[..., 2] <= r)).sum())
    return want_b, want_a


@pytest.mark.parametrize("seed", [0, 1, 2])
def test_sample_entropy_pair_counts_equal_all_pairs(seed):
    # The sorted candidate count and the block count against a plain count over all pairs;
    # integer counts, so equality. Rounded values give ties and pairs exactly r apart, the
    # edge case; 3000 templates make 47 blocks of 64 (whole and part blocks both counted).
    nl = importlib.import_module("features.variability.nonlinear")

    rng = np.random.default_rng(seed)
    for n in (400, 3000):
        x = np.round(800.0 + 30.0 * rng.standard_normal(n))
        emb = np.column_stack((x[:-2], x[1:-1], x[2:]))
        for r in (0.2 * x.std(ddof=1), 6.0):  # 6: many pairs exactly r apart
            want = _all_pairs_counts(emb, r)
            assert nl._match_counts_blocked(x, np.arange(emb.shape[0]), r) == want
            if n == 400:
                assert nl._match_counts_sorted(emb, r, 2) == want


def test_sample_entropy_block_count_on_a_correlated_series():
    # Heart-like: a slow random walk plus beat-to-beat noise, not rounded, so the rank
    # windows' edge strips are tested against the same rounding as the plain count; a
    # tenth of the templates left out, as templates across gaps are.
    nl = importlib.import_module("features.variability.nonlinear")

    rng = np.random.default_rng(5)
    x = 850.0 + np.cumsum(rng.standard_normal(2500)) + 15.0 * rng.standard_normal(2500)
    starts = np.flatnonzero(rng.random(x.size - 2) > 0.1)
    emb = x[starts[:, None] + np.arange(3)[None, :]]
    r = 0.2 * x.std(ddof=1)
    assert nl._match_counts_blocked(x, starts, r) == _all_pairs_counts(emb, r)


@pytest.mark.parametrize("spread", [1e-6, 1e-9])
def test_sample_entropy_block_count_with_r_below_the_rounding_pad(spread):
    # Values near 1e6 with a spread so small that r (0.2 SD) is below the pad that guards
    # the rank ranges against rounding (1e-9 of the largest value): the edge strips then
    # reach across the value itself and must still give the all-pairs count.
    nl = importlib.import_module("features.variability.nonlinear")

    x = 1e6 + spread * np.random.default_rng(1).standard_normal(400)
    emb = np.column_stack((x[:-2], x[1:-1], x[2:]))
    r = 0.2 * x.std(ddof=1)
    assert nl._match_counts_blocked(x, np.arange(emb.shape[0]), r) == _all_pairs_counts(emb, r)


def test_sample_entropy_same_by_blocks_and_by_sorted_pairs(monkeypatch):
    # Over the candidate budget the block count is used; the counts are integers and
    # equal, so the two paths give the same float.
    nl = importlib.import_module("features.variability.nonlinear")

    rng = np.random.default_rng(4)
    x = 850.0 + 35.0 * rng.standard_normal(500)
    monkeypatch.setattr(nl, "_SAMPEN_PAIR_BUDGET", 1 << 40)
    by_pairs = nl.nonlinear(*_series(x)).sample_entropy
    monkeypatch.setattr(nl, "_SAMPEN_PAIR_BUDGET", 0)
    assert nl._match_counts_sorted(np.column_stack((x[:-2], x[1:-1], x[2:])), 7.0, 2) is None
    assert nl.nonlinear(*_series(x)).sample_entropy == by_pairs


def test_dfa_against_neurokit2():
    nk = pytest.importorskip("neurokit2")
    rng = np.random.default_rng(5)
    x = 800.0 + np.cumsum(rng.standard_normal(3000)) * 0.5 + 20.0 * rng.standard_normal(3000)
    r = nonlinear(*_series(x))
    # neurokit2.fractal_dfa(overlap=False): non-overlapping forward boxes, linear
    # detrending, RMS over boxes - Peng et al. (1995) as here
    ref1 = nk.fractal_dfa(x, scale=np.arange(4, 17), overlap=False)[0]
    ref2 = nk.fractal_dfa(x, scale=np.arange(16, 65), overlap=False)[0]
    assert r.dfa_alpha1 == pytest.approx(ref1, rel=1e-9)
    assert r.dfa_alpha2 == pytest.approx(ref2, rel=1e-9)


def test_dfa_line_slope_is_numpys_least_squares_fit() -> None:
    from features.variability.nonlinear import _line_slope

    # The exponent is the slope of log F(n) on log n. numpy.polyfit solves the same least
    # squares by a scaled SVD; the closed form rounds differently, a few units in the last
    # place on a dozen points, hence rel 1e-12.
    rng = np.random.default_rng(11)
    x = np.log(np.arange(4.0, 17.0))
    for _ in range(20):
        y = rng.uniform(0.3, 1.6) * x + rng.normal(0.0, 0.05, x.size) + rng.uniform(-3, 3)
        assert _line_slope(x, y) == pytest.approx(np.polyfit(x, y, 1)[0], rel=1e-12)


def test_dfa_on_integer_nsr_series_against_neurokit2(nsr_short):
    nk = pytest.importorskip("neurokit2")
    t, x = nsr_short
    ref = nk.fractal_dfa(x, scale=np.arange(4, 17), overlap=False)[0]
    # neurokit2 drops boxes whose residual variance is < 1e-8; with integer
    # millisecond data a few 4-beat boxes are exactly linear. Peng et al. average
    # every box, so the 4-beat fluctuation differs by ~0.6 %: tolerance 0.005
    assert nonlinear(t, x).dfa_alpha1 == pytest.approx(ref, abs=5e-3)


# ------------------------------------------------------------------ DFA published values


def _pink_noise(n: int, rng: np.random.Generator) -> np.ndarray:
    f = np.fft.rfftfreq(n)
    spec = rng.standard_normal(f.size) + 1j * rng.standard_normal(f.size)
    spec[0] = 0.0
    spec[1:] /= np.sqrt(f[1:])
    return np.fft.irfft(spec, n)


@pytest.mark.parametrize(
    ("kind", "expected"),
    # Peng et al. (1995), Chaos 5:82: alpha = 0.5 uncorrelated (white) noise,
    # 1.0 for 1/f noise, 1.5 for Brownian noise (integrated white noise)
    [("white", 0.5), ("pink", 1.0), ("brown", 1.5)],
)
def test_dfa_published_exponents(kind, expected):
    rng = np.random.default_rng({"white": 1, "pink": 2, "brown": 3}[kind])
    n = 8192
    z = {
        "white": lambda: rng.standard_normal(n),
        "pink": lambda: _pink_noise(n, rng),
        "brown": lambda: np.cumsum(rng.standard_normal(n)),
    }[kind]()
    x = 800.0 + 20.0 * z / z.std()
    r = nonlinear(*_series(x))
    # alpha2 (16-64 beats): within 0.1 of the theoretical exponent
    assert r.dfa_alpha2 == pytest.approx(expected, abs=0.1)
    # alpha1 (4-16 beats) carries the known small-scale upward bias of DFA-1 for
    # white noise (about +0.08, Kantelhardt et al. 2001, Physica A 295:441, from
    # memory): 0.15 tolerance
    assert r.dfa_alpha1 == pytest.approx(expected, abs=0.15)


# ------------------------------------------------------------------ frequency domain, analytic


def test_lomb_psd_parseval_even_and_uneven():
    # Parseval: the integral of a one-sided PSD from 0 to Nyquist is the variance
    # (common practice); Lomb-Scargle equals the classical periodogram for even
    # sampling (Lomb 1976; Scargle 1982), so the same scaling must hold.
    rng = np.random.default_rng(7)
    for jitter in (0.0, 60.0):
        rr = 800.0 + jitter * rng.standard_normal(600) + 40.0 * rng.standard_normal(600)
        t = np.cumsum(rr) / 1000.0
        dt = rr.mean() / 1000.0
        f = np.linspace(1e-4, 1.0 / (2.0 * dt), 6000)
        psd = lomb_psd_ms2_per_hz(t, rr, f, dt)
        assert float(np.trapezoid(psd, f)) == pytest.approx(rr.var(), rel=0.05)


def test_frequency_domain_sinusoids_have_power_a_squared_over_two():
    # A sinusoid of amplitude A has variance A^2/2 (common practice); one of 30 ms
    # at 0.10 Hz (LF) and one of 20 ms at 0.25 Hz (HF) on an 800 ms mean, 8 min
    t, rr = _modulated(480.0, [(30.0, 0.10), (20.0, 0.25)])
    r = frequency_domain(t, rr)
    assert r.lf_power_ms2 == pytest.approx(30.0**2 / 2, rel=0.03)
    assert r.hf_power_ms2 == pytest.approx(20.0**2 / 2, rel=0.03)
    assert r.vlf_power_ms2 == pytest.approx(0.0, abs=5.0)
    assert r.total_power_ms2 == pytest.approx(650.0, rel=0.03)
    assert r.lf_hf_ratio == pytest.approx(450.0 / 200.0, rel=0.05)
    # Task Force n.u.: LF / (total - VLF) * 100 = 450 / 650 * 100
    assert r.lf_nu == pytest.approx(100.0 * 450.0 / 650.0, rel=0.03)
    assert r.hf_nu == pytest.approx(100.0 * 200.0 / 650.0, rel=0.03)
    step = 1.0 / (4 * r.segment_s)  # the documented grid step
    assert r.lf_peak_hz == pytest.approx(0.10, abs=step)
    assert r.hf_peak_hz == pytest.approx(0.25, abs=step)
    assert r.n_segments == 1 and r.confidence == pytest.approx(1.0)
    _assert_clean(r)


def test_frequency_domain_long_recording_segments_and_noise():
    # 40 min: averaged over 8 segments of 300 s; white noise of SD 15 ms adds
    # 225 ms^2 spread evenly to Nyquist (1/(2 * 0.8 s) = 0.625 Hz), of which the
    # HF band 0.15-0.4 Hz holds 0.25/0.625 = 40 %: 90 ms^2 (analytic)
    t, rr = _modulated(2400.0, [(25.0, 0.08), (15.0, 0.3)], noise_ms=15.0, seed=4)
    r = frequency_domain(t, rr)
    assert r.n_segments == 8
    assert r.lf_power_ms2 == pytest.approx(25.0**2 / 2 + 225.0 * 0.11 / 0.625, rel=0.1)
    assert r.hf_power_ms2 == pytest.approx(15.0**2 / 2 + 225.0 * 0.25 / 0.625, rel=0.1)


def test_frequency_domain_with_gaps_keeps_band_power():
    # Two 30 s holes (movement) inside a 10 min recording: Lomb-Scargle needs no
    # interpolation; band power of the sinusoids should stay within 10 %
    t, rr = _modulated(600.0, [(30.0, 0.1), (20.0, 0.25)])
    keep = ~(((t > 100) & (t < 130)) | ((t > 400) & (t < 430)))
    r = frequency_domain(t[keep], rr[keep])
    assert r.lf_power_ms2 == pytest.approx(450.0, rel=0.1)
    assert r.hf_power_ms2 == pytest.approx(200.0, rel=0.1)
    assert r.confidence < 1.0


def test_frequency_domain_minimum_lengths():
    # Task Force (1996): about 1 min for HF, 2 min for LF; VLF needs more than 5 min
    t, rr = _modulated(90.0, [(20.0, 0.25)])
    r = frequency_domain(t, rr)
    assert r.hf_power_ms2 is not None
    assert r.lf_power_ms2 is None and "lf_needs_120_s" in r.flags
    assert r.vlf_power_ms2 is None and "vlf_needs_300_s" in r.flags
    assert r.total_power_ms2 is None and r.lf_nu is None and r.lf_peak_hz is None
    t, rr = _modulated(50.0, [(20.0, 0.25)])
    r = frequency_domain(t, rr)
    assert r.hf_power_ms2 is None and "hf_needs_60_s" in r.flags
    _assert_clean(r)


def test_frequency_domain_custom_breathing_band():
    # slow breathing at 0.12 Hz: move HF down to a breathing band 0.09-0.3 Hz
    t, rr = _modulated(300.0, [(25.0, 0.12)])
    r = frequency_domain(t, rr, lf_band_hz=(0.04, 0.09), hf_band_hz=(0.09, 0.3))
    assert r.hf_band_hz == (0.09, 0.3)
    assert r.hf_power_ms2 == pytest.approx(25.0**2 / 2, rel=0.05)
    assert r.hf_peak_hz == pytest.approx(0.12, abs=0.005)
    # minimum for a band starting at 0.09 Hz: 60 s * 0.15 / 0.09 = 100 s
    t, rr = _modulated(95.0, [(25.0, 0.12)])
    r = frequency_domain(t, rr, lf_band_hz=(0.04, 0.09), hf_band_hz=(0.09, 0.3))
    assert r.hf_power_ms2 is None and "hf_needs_100_s" in r.flags


def test_frequency_domain_too_few_and_constant():
    r = frequency_domain([], [])
    assert r.lf_power_ms2 is None and "too_few_intervals" in r.flags and r.confidence == 0.0
    t, rr = _series([800.0] * 400)  # no variability at all
    r = frequency_domain(t, rr)
    assert r.lf_power_ms2 == 0.0 and r.lf_hf_ratio is None and r.lf_peak_hz is None
    assert "lf_hf_ratio_undefined_zero_hf" in r.flags
    _assert_clean(r)


# ------------------------------------------------------------------ nonlinear minimum lengths


def test_nonlinear_minimum_lengths():
    rng = np.random.default_rng(2)
    r = nonlinear(*_series(800.0 + 30.0 * rng.standard_normal(150)))
    assert r.sd1_ms is not None
    assert r.sample_entropy is None and "sample_entropy_needs_200_intervals" in r.flags
    assert r.dfa_alpha1 is None and "dfa_alpha1_needs_160_adjacent_intervals" in r.flags
    assert r.dfa_alpha2 is None and "dfa_alpha2_needs_640_adjacent_intervals" in r.flags
    r = nonlinear(*_series([800.0, 810.0]))
    assert r.sd1_ms is None and "poincare_needs_2_adjacent_pairs" in r.flags
    r = nonlinear([], [])
    assert r.n_intervals == 0 and r.confidence == 0.0 and "no_intervals" in r.flags
    _assert_clean(r)


def test_nonlinear_respects_gaps():
    # a long run broken into runs of 10 intervals: no DFA box of 16 fits,
    # SD1 uses only the 9 pairs inside each run
    rng = np.random.default_rng(8)
    rr = 800.0 + 30.0 * rng.standard_normal(400)
    t, rr = _series(rr)
    t = t + 10.0 * (np.arange(rr.size) // 10)  # a 10 s gap every 10 intervals
    r = nonlinear(t, rr)
    assert r.n_pairs == 40 * 9
    assert r.dfa_alpha1 is None and "series_has_gaps" in r.flags
    # Brennan et al. (2001): SD1 = SDSD / sqrt(2) over the same adjacent pairs
    assert r.sd1_ms == pytest.approx(time_domain(t, rr).sdsd_ms / math.sqrt(2.0), rel=1e-12)


# ------------------------------------------------------------------ wrapper


def test_heart_rate_variability_uses_normal_intervals_only():
    rng = np.random.default_rng(9)
    rr = 900.0 + 25.0 * rng.standard_normal(400)
    rr[100], rr[101] = 600.0, 1200.0  # ectopic beat with compensatory pause
    rr[250] = 1800.0  # missed beat
    t, rr = _series(rr)
    labels = classify_intervals(t, rr)
    res = heart_rate_variability(t, rr, labels)
    assert isinstance(res, VariabilityResult)
    assert res.n_intervals_total == 400 and res.n_nn_used == labels.n_normal
    assert res.fraction_rejected == pytest.approx(1.0 - labels.n_normal / 400)
    # same numbers as running the family directly on the NN series
    direct = time_domain(labels.nn_times_s, labels.nn_intervals_ms)
    assert res.time_domain == direct
    assert labels.labels[100] == labels.labels[101] == "ectopic"
    assert labels.labels[250] == "artifact" and labels.n_normal == 397
    # no successive difference may span a removed interval: runs 0-99, 102-249,
    # 251-399 give 99 + 147 + 148 differences
    assert res.time_domain.n_successive_differences == 394
    # documented formula: fraction_normal * min(1, n/200) * min(1, duration/300)
    expected = labels.fraction_normal * min(1.0, res.duration_s / 300.0)
    assert res.confidence == pytest.approx(expected)
    assert isinstance(res.frequency_domain, FrequencyDomainResult)
    assert isinstance(res.nonlinear, NonlinearResult)
    assert isinstance(res.time_domain, TimeDomainResult)
    _assert_clean(res)


def test_heart_rate_variability_accepts_label_strings_and_empty():
    t, rr = _series(HAND_NN)
    res = heart_rate_variability(t, rr, ["normal"] * 7 + ["artifact"])
    assert res.n_nn_used == 7
    res = heart_rate_variability([], [], [])
    assert res.fraction_rejected is None and "no_intervals" in res.flags and res.confidence == 0.0
    res = heart_rate_variability(t, rr, ["ectopic"] * 8)
    assert "no_normal_intervals" in res.flags and res.time_domain.mean_nn_ms is None
    _assert_clean(res)


# ------------------------------------------------------------------ errors


def test_rejects_labels_length():
    t, rr = _series(HAND_NN)
    with pytest.raises(InvalidInputError, match="`labels` must have one label per interval"):
        heart_rate_variability(t, rr, ["normal"] * 3)


def test_rejects_unknown_label():
    t, rr = _series(HAND_NN)
    with pytest.raises(InvalidInputError, match="`labels` must hold only"):
        heart_rate_variability(t, rr, ["normal"] * 7 + ["noise"])


def test_rejects_single_string_labels():
    t, rr = _series(HAND_NN[:6])
    with pytest.raises(InvalidInputError, match="`labels` must be a sequence of labels"):
        heart_rate_variability(t, rr, "normal")


@pytest.mark.parametrize("band", [(0.4, 0.15), (-0.1, 0.4), (0.15,), "hf"])
def test_rejects_malformed_band(band):
    t, rr = _series(HAND_NN)
    with pytest.raises(InvalidInputError, match="`hf_band_hz` must"):
        frequency_domain(t, rr, hf_band_hz=band)


def test_rejects_overlapping_lf_hf():
    t, rr = _series(HAND_NN)
    with pytest.raises(InvalidInputError, match="`hf_band_hz` must start at or above the LF"):
        frequency_domain(t, rr, hf_band_hz=(0.1, 0.4))


def test_rejects_overlapping_vlf_lf():
    t, rr = _series(HAND_NN)
    with pytest.raises(InvalidInputError, match="`lf_band_hz` must start at or above the VLF"):
        frequency_domain(t, rr, lf_band_hz=(0.03, 0.15))


def test_rejects_short_segment():
    t, rr = _series(HAND_NN)
    with pytest.raises(InvalidInputError, match="`segment_s` must be a number of seconds >= 60"):
        frequency_domain(t, rr, segment_s=30)


@pytest.mark.parametrize("func", [time_domain, frequency_domain, nonlinear])
def test_families_reject_negative_intervals(func):
    with pytest.raises(InvalidInputError, match="`intervals_ms` must be positive"):
        func([1.0, 2.0], [1000.0, -5.0])


# ------------------------------------------------------------------ properties


@settings(max_examples=30, deadline=None)
@given(
    c=st.floats(min_value=0.5, max_value=2.0),
    seed=st.integers(min_value=0, max_value=2**16),
)
def test_scaling_intervals_scales_sd_measures(c, seed):
    # SDNN, RMSSD, SDSD, SD1, SD2 are homogeneous of degree 1 in the intervals;
    # CVNN, sample entropy (r scales with SD) and DFA exponents are scale-free
    # (definitions: Task Force 1996; Brennan 2001; Richman & Moorman 2000; Peng 1995).
    # pNNx thresholds are absolute, so they are left aside.
    rng = np.random.default_rng(seed)
    rr = 850.0 + 40.0 * rng.standard_normal(260)
    a_t, a = _series(rr)
    b_t, b = _series(rr * c)
    ta, tb = time_domain(a_t, a), time_domain(b_t, b)
    for name in ("sdnn_ms", "rmssd_ms", "sdsd_ms", "mean_nn_ms"):
        assert getattr(tb, name) == pytest.approx(c * getattr(ta, name), rel=1e-9)
    assert tb.cvnn_pct == pytest.approx(ta.cvnn_pct, rel=1e-9)
    na, nb = nonlinear(a_t, a), nonlinear(b_t, b)
    assert nb.sd1_ms == pytest.approx(c * na.sd1_ms, rel=1e-9)
    assert nb.sd2_ms == pytest.approx(c * na.sd2_ms, rel=1e-9)
    assert nb.dfa_alpha1 == pytest.approx(na.dfa_alpha1, rel=1e-9)
    assert nb.sample_entropy == pytest.approx(na.sample_entropy, rel=1e-9)


@settings(max_examples=20, deadline=None)
@given(
    shift=st.floats(min_value=-5e4, max_value=5e4),
    seed=st.integers(min_value=0, max_value=2**16),
)
def test_time_shift_invariance(shift, seed):
    # all measures depend on differences of times only (common practice)
    t, rr = _modulated(150.0, [(20.0, 0.25)], noise_ms=10.0, seed=seed)
    a = heart_rate_variability(t, rr, ["normal"] * rr.size)
    b = heart_rate_variability(t + shift, rr, ["normal"] * rr.size)
    assert b.time_domain == a.time_domain
    assert b.nonlinear == a.nonlinear
    assert b.frequency_domain.hf_power_ms2 == pytest.approx(
        a.frequency_domain.hf_power_ms2, rel=1e-6
    )
