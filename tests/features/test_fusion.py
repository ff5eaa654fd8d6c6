"""Tests for features.fusion: weights, sign alignment, units and the centre of pressure."""

from __future__ import annotations

import numpy as np
import pytest

from features.conditioning import ChannelInput, condition_channels
from features.errors import InvalidInputError
from features.fusion import fuse_channels
from simulation import SimulationSettings, simulate

FS = 250.0
G = 9.80665  # standard gravity, m/s^2 (NIST SP 811, 2008, B.8)


def _bcg(duration_s: float, fs: float = FS, seed: int = 0) -> np.ndarray:
    """Noise-free cardiac force of a simulated seated recording, in units of its J amplitude.

    The tests add their own channel noise to it, as fractions of the J wave.
    """
    rec = simulate(SimulationSettings(duration_s=duration_s, fs_hz=fs, snr_db=None, seed=seed))
    assert rec.truth.template is not None
    j_n = next(w.amplitude for w in rec.truth.template.waves if w.name == "J")
    return rec.truth.cardiac_signal / j_n


def test_inverted_channel_gets_negative_weight_and_noise_is_down_weighted() -> None:
    rng = np.random.default_rng(1)
    s = _bcg(120.0)
    noise = 0.3
    x = np.stack([s + noise * rng.standard_normal(s.size),
                  0.8 * s + noise * rng.standard_normal(s.size),
                  -s + noise * rng.standard_normal(s.size),
                  noise * rng.standard_normal(s.size)])
    res = fuse_channels(x, FS, units=["N"] * 4)
    w = np.array(res.weights)
    assert res.method == "maximum_ratio_combining"
    assert w[0] > 0 and w[1] > 0 and w[2] < 0
    assert abs(w[3]) < 0.2 * min(abs(w[:3]))
    # The scaling rule: sum |w| = number of channels.
    assert np.sum(np.abs(w)) == pytest.approx(4.0)
    assert "channels[2]_inverted" in res.flags
    # The fused trace must follow the cardiac waveform better than any single channel.
    corr = [np.corrcoef(c, s)[0, 1] for c in x[:3] * np.sign(w[:3, None])]
    assert np.corrcoef(res.fused, s)[0, 1] > max(corr)


def test_equal_channels_reduce_to_plain_sum() -> None:
    rng = np.random.default_rng(2)
    s = _bcg(120.0)
    x = np.stack([s + 0.2 * rng.standard_normal(s.size) for _ in range(4)])
    res = fuse_channels(x, FS, units=["N"] * 4)
    # Four identical load cells: weights 1, fused = total force (statics of a plate).
    np.testing.assert_allclose(res.weights, 1.0, atol=0.15)  # estimation noise, 12 windows
    assert np.sum(np.abs(res.weights)) == pytest.approx(4.0)
    np.testing.assert_allclose(res.fused, np.array(res.weights) @ x)
    assert res.unit == "N"
    assert np.std(res.fused - x.sum(axis=0)) < 0.1 * np.std(x.sum(axis=0))


def test_dead_channel_gets_zero_weight() -> None:
    rng = np.random.default_rng(3)
    s = _bcg(60.0)
    x = np.stack([s + 0.2 * rng.standard_normal(s.size), np.zeros(s.size)])
    res = fuse_channels(x, FS, units=["N", "N"])
    assert res.weights[1] == 0.0
    assert "channels[1]_dead_weight_zero" in res.flags
    assert res.channel_snr[1] is None


def test_single_channel_is_passed_through() -> None:
    s = _bcg(60.0) + 0.1 * np.random.default_rng(4).standard_normal(int(60 * FS))
    res = fuse_channels(s[None, :], FS, units=["N"])
    assert res.weights == (1.0,) and res.method == "passthrough"
    np.testing.assert_array_equal(res.fused, s)
    assert res.confidence is not None and res.confidence > 0.3


@pytest.mark.parametrize("n_ch", [1, 4])
def test_confidence_left_out_changes_nothing_else(n_ch: int) -> None:
    # The engine does not read the fusion's confidence and asks for none: every other
    # field must be what the full call gives, to the bit (the same arithmetic, skipped).
    rng = np.random.default_rng(5)
    s = _bcg(60.0)
    x = np.stack([(1.0 - 0.2 * i) * s + 0.2 * rng.standard_normal(s.size)
                  for i in range(n_ch)])
    full = fuse_channels(x, FS, units=["N"] * n_ch)
    lean = fuse_channels(x, FS, units=["N"] * n_ch, with_confidence=False)
    assert full.confidence is not None and lean.confidence is None
    np.testing.assert_array_equal(lean.fused, full.fused)
    assert (lean.weights, lean.method, lean.channel_snr, lean.heart_lag_s, lean.flags) == \
        (full.weights, full.method, full.channel_snr, full.heart_lag_s, full.flags)


def test_mixed_units_are_normalised_and_scale_free() -> None:
    rng = np.random.default_rng(5)
    s = _bcg(120.0)
    a = s + 0.3 * rng.standard_normal(s.size)
    b = 1e-3 * (s + 0.3 * rng.standard_normal(s.size))
    one = fuse_channels(np.stack([a, b]), FS, units=["N", "m/s^2"])
    two = fuse_channels(np.stack([a, 1000.0 * b]), FS, units=["N", "m/s^2"])
    assert one.unit == "a.u." and "fusion_mixed_units_scale_normalised" in one.flags
    np.testing.assert_allclose(one.weights, two.weights, rtol=1e-6)
    assert one.channel_scales is not None
    assert one.weights[0] == pytest.approx(one.weights[1], rel=0.3)


def test_no_heartbeat_gives_equal_weights_and_low_confidence() -> None:
    rng = np.random.default_rng(6)
    x = rng.standard_normal((3, int(60 * FS)))
    res = fuse_channels(x, FS, units=["N"] * 3)
    assert res.confidence is not None and res.confidence < 0.2


# ----------------------------------------------------------------------------- centre of pressure


def _plate_forces(mass_kg: float, at: tuple[float, float], size: tuple[float, float]
                  ) -> np.ndarray:
    """Lever rule: a point load on a rectangular plate with a load cell at each corner."""
    u, v = at[0] / size[0], at[1] / size[1]
    share = np.array([(1 - u) * (1 - v), u * (1 - v), (1 - u) * v, u * v])
    return mass_kg * G * share


CORNERS = [(0.0, 0.0), (2.0, 0.0), (0.0, 0.9), (2.0, 0.9)]


def test_cop_matches_lever_rule_on_static_load() -> None:
    rng = np.random.default_rng(7)
    n = int(60 * FS)
    static = _plate_forces(75.0, (1.3, 0.35), (2.0, 0.9))
    dyn = 0.05 * rng.standard_normal((4, n))
    res = fuse_channels(dyn, FS, units=["N"] * 4, positions_m=CORNERS, static_n=static)
    assert res.cop_m is not None
    # Lever rule (moment balance on a plate; Winter 2009, ch. on force plates).
    np.testing.assert_allclose(np.median(res.cop_m, axis=0), [1.3, 0.35], atol=1e-3)


def test_cop_through_conditioning_with_slow_baseline() -> None:
    n = int(60 * FS)
    t = np.arange(n) / FS
    static = _plate_forces(60.0, (0.5, 0.6), (2.0, 0.9))
    chans = [ChannelInput(static[i] + 0.3 * np.sin(2 * np.pi * 1.1 * t), f"c{i}", "force", "N",
                          position_m=CORNERS[i]) for i in range(4)]
    cond = condition_channels(chans, FS, mains_hz=None)
    res = fuse_channels(cond.signals, FS, units=cond.units, positions_m=cond.positions_m,
                        static_n=cond.baseline_si, static_fs_hz=cond.baseline_fs_hz)
    assert res.cop_m is not None
    # All four cells carry the same in-phase 1.1 Hz wiggle, so the CoP stays at the
    # static lever-rule point up to 0.3 * 4 / (60 g) of the cell span (< 2 mm).
    np.testing.assert_allclose(np.median(res.cop_m, axis=0), [0.5, 0.6], atol=2e-3)


def test_cop_cardiac_excursion_of_a_known_oscillation() -> None:
    n = int(120 * FS)
    t = np.arange(n) / FS
    static = _plate_forces(80.0, (1.0, 0.45), (2.0, 0.9))
    a = 2.0  # N, moved from the x=0 cells to the x=2 cells at 5 Hz
    osc = a * np.sin(2 * np.pi * 5.0 * t)
    dyn = np.stack([-osc / 2, osc / 2, -osc / 2, osc / 2])
    res = fuse_channels(dyn, FS, units=["N"] * 4, positions_m=CORNERS, static_n=static)
    # Lever rule: x = 2 m * (F_right / F_total); the moved force a sin(wt) shifts the
    # CoP by 2 * a / (m g) * sin(wt), RMS = 2 a / (m g sqrt(2)).
    expected_mm = 1000.0 * 2.0 * a / (80.0 * G * np.sqrt(2.0))
    assert res.cop_cardiac_excursion_mm == pytest.approx(expected_mm, rel=0.05)


def test_empty_plate_guards_divide_by_zero() -> None:
    rng = np.random.default_rng(8)
    dyn = 0.05 * rng.standard_normal((4, int(30 * FS)))
    res = fuse_channels(dyn, FS, units=["N"] * 4, positions_m=CORNERS, static_n=np.zeros(4))
    assert res.cop_m is None and "cop_support_empty" in res.flags


def test_partly_empty_plate_has_nan_cop_where_empty() -> None:
    n = int(60 * FS)
    t = np.arange(n) / FS
    load = np.where(t < 30.0, 1.0, 0.0)
    static = _plate_forces(70.0, (1.0, 0.45), (2.0, 0.9))
    dyn = static[:, None] * (load[None, :] - 1.0)
    res = fuse_channels(dyn, FS, units=["N"] * 4, positions_m=CORNERS, static_n=static)
    assert res.cop_m is not None and res.cop_fs_hz is not None
    times = np.arange(res.cop_m.shape[0]) / res.cop_fs_hz
    assert np.isnan(res.cop_m[times > 31.0]).all()
    np.testing.assert_allclose(res.cop_m[times < 29.0, 0], 1.0, atol=1e-6)
    np.testing.assert_allclose(res.cop_m[times < 29.0, 1], 0.45, atol=1e-6)


def test_cop_needs_force_channels() -> None:
    x = np.random.default_rng(9).standard_normal((2, int(30 * FS)))
    res = fuse_channels(x, FS, units=["m/s^2", "m/s^2"], positions_m=[(0, 0), (1, 0)],
                        static_n=[1.0, 1.0])
    assert res.cop_m is None and "cop_needs_force_channels" in res.flags


# ----------------------------------------------------------------------------- errors


def test_error_rules() -> None:
    x = np.zeros((2, int(30 * FS)))
    with pytest.raises(InvalidInputError, match=r"`fs_hz` must be between 50 and 2000 Hz"):
        fuse_channels(x, 10.0)
    with pytest.raises(InvalidInputError, match=r"`signals` must be a real \(n_channels, n\)"):
        fuse_channels(np.zeros((2, 2, 10)), FS)
    with pytest.raises(InvalidInputError, match=r"`signals` must hold 1 to 8 channels; got 9"):
        fuse_channels(np.zeros((9, int(30 * FS))), FS)
    with pytest.raises(InvalidInputError, match=r"`signals` must span at least 20 s; got 4 s"):
        fuse_channels(np.zeros((2, 1000)), FS)
    bad = x.copy()
    bad[0, 5] = np.nan
    with pytest.raises(InvalidInputError, match=r"`signals\[0\]` must be finite"):
        fuse_channels(bad, FS)
    with pytest.raises(InvalidInputError, match=r"`units` must hold one non-empty string per "
                                                r"channel \(2\)"):
        fuse_channels(x, FS, units=["N"])
    with pytest.raises(InvalidInputError, match=r"`band_hz` must satisfy 0 < low < high <= 40"):
        fuse_channels(x, FS, band_hz=(20.0, 1.0))
    with pytest.raises(InvalidInputError, match=r"`positions_m` must be a finite \(2, 2\)"):
        fuse_channels(x, FS, positions_m=[(0.0, 0.0)], static_n=[1.0, 1.0])
    with pytest.raises(InvalidInputError, match=r"`static_fs_hz` must be a rate in Hz"):
        fuse_channels(x, FS, positions_m=[(0, 0), (1, 0)], static_n=np.ones((2, 300)))


def test_weighted_sum_in_chunks_equals_the_matrix_product() -> None:
    from features.fusion import _weighted_sum

    rng = np.random.default_rng(9)
    x = rng.standard_normal((3, 30_001))
    w = np.array([0.7, -1.3, 0.25])
    # Reference: numpy's w @ x, the definition of the weighted sum. BLAS kernels differ by
    # processor (with or without fused multiply-add, in another summation order), so the
    # chunked axpy and the reference may each round once per channel differently: the bound
    # is a few units in the last place of the largest partial sum, 4 * eps * sum_i |w_i x_i|.
    ref = w @ x
    bound = 4 * np.finfo(float).eps * (np.abs(w) @ np.abs(x))
    # (30,001 samples span four chunks of _AXPY_CHUNK, so a chunk boundary that dropped or
    # repeated a sample would miss this bound by whole sample values)
    assert np.all(np.abs(_weighted_sum(x, w) - ref) <= bound)


def test_window_autocorrelation_equals_numpy_correlate() -> None:
    # Reference: numpy.correlate(x, x, "full") divided by the overlap length (the unbiased
    # estimate) for lags 0..max_lag; the FFT length only covers length + max_lag.
    from features.fusion import _autocorr

    rng = np.random.default_rng(21)
    w = rng.standard_normal((2, 3, 1250))
    r = _autocorr(w, 250)
    for c in range(2):
        for k in range(3):
            full = np.correlate(w[c, k], w[c, k], mode="full")[1249:1249 + 251]
            np.testing.assert_allclose(r[c, k], full / (1250 - np.arange(251)), atol=1e-12)


def test_cardiac_excursion_follows_the_exact_lever_rule_with_a_varying_load() -> None:
    # Reference: the CoP by the lever rule (Winter 2009) from the total cell forces,
    # band-passed 1-20 Hz with scipy.signal.sosfiltfilt (Butterworth, order 2), radial
    # RMS per 10-s window, median. The engine's first-order form must agree within 2 %
    # while the load on the plate swings by 10 % with breathing.
    from scipy import signal as sps

    n = int(120 * FS)
    t = np.arange(n) / FS
    static = _plate_forces(70.0, (0.8, 0.5), (2.0, 0.9))
    swing = 1.0 + 0.1 * np.sin(2 * np.pi * 0.25 * t)
    beat = 3.0 * np.sin(2 * np.pi * 6.0 * t) * (1.0 + 0.5 * np.sin(2 * np.pi * 0.2 * t))
    share = np.array([0.6, -0.2, 0.1, -0.5])
    total = static[:, None] * swing[None, :] + share[:, None] * beat[None, :]
    res = fuse_channels(total - static[:, None], FS, units=["N"] * 4, positions_m=CORNERS,
                        static_n=static)
    pos = np.asarray(CORNERS)
    cop = (pos.T @ total) / total.sum(axis=0)
    sos = sps.butter(2, (1.0, 20.0), btype="bandpass", fs=FS, output="sos")
    band = sps.sosfiltfilt(sos, cop, axis=-1)
    length = int(10 * FS)
    wins = band[:, : (n // length) * length].reshape(2, -1, length)
    expected_mm = 1000.0 * np.median(np.sqrt((wins ** 2).sum(axis=0).mean(axis=-1)))
    assert res.cop_cardiac_excursion_mm == pytest.approx(expected_mm, rel=0.02)


def test_cop_samples_sit_at_their_stated_times() -> None:
    # A slow sway moves the load between the x = 0 and x = 2 m cells; by the lever rule
    # (Winter 2009) x(t) = 2 m * F_right(t) / F_total. Sample k of cop_m must be the CoP
    # at k / cop_fs_hz s: a half-block offset (48 ms at 10 Hz) would be 3.8 mm off here.
    n = int(60 * FS)
    t = np.arange(n) / FS
    static = _plate_forces(70.0, (1.0, 0.45), (2.0, 0.9))
    total_n = 70.0 * G
    x_t = 1.0 + 0.05 * np.sin(2 * np.pi * 0.25 * t)
    right = total_n * x_t / 2.0
    forces = np.stack([(total_n - right) * 0.55, right * 0.55,
                       (total_n - right) * 0.45, right * 0.45])
    res = fuse_channels(forces - static[:, None], FS, units=["N"] * 4, positions_m=CORNERS,
                        static_n=static)
    assert res.cop_m is not None and res.cop_fs_hz is not None
    times = np.arange(res.cop_m.shape[0]) / res.cop_fs_hz
    inner = (times > 1.0) & (times < 59.0)
    expected = 1.0 + 0.05 * np.sin(2 * np.pi * 0.25 * times[inner])
    # block means and linear interpolation of a 0.25 Hz sway at 10 Hz: about 0.2 mm
    np.testing.assert_allclose(res.cop_m[inner, 0], expected, atol=5e-4)
