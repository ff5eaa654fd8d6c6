"""Tests for features.conditioning: validation, SI units, differentiator, mains hum, load."""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy import signal

from features.conditioning import (
    MAX_DURATION_S,
    MIN_DURATION_S,
    ChannelInput,
    CountsScale,
    condition_channels,
    si_factor,
    valid_units,
)
from features.errors import InvalidInputError
from features.limits import MAX_CHANNELS

FS = 250.0


def _t(duration_s: float = 60.0, fs: float = FS) -> np.ndarray:
    return np.arange(int(duration_s * fs)) / fs


def _force(samples: np.ndarray, label: str = "c0", **kw: object) -> ChannelInput:
    return ChannelInput(samples, label, "force", "N", **kw)  # type: ignore[arg-type]


def _interior(x: np.ndarray, fs: float = FS, edge_s: float = 5.0) -> np.ndarray:
    e = int(edge_s * fs)
    return x[..., e:-e]


# ----------------------------------------------------------------------------- units


@pytest.mark.parametrize(("quantity", "unit", "factor"), [
    # NIST SP 811 (2008), Appendix B.9, "force": 1 lbf = 4.448 221 615 260 5 N (exact).
    ("force", "lbf", 4.4482216152605),
    # NIST SP 811 (2008), Appendix B.9: 1 kgf = 9.806 65 N (exact).
    ("force", "kgf", 9.80665),
    # SI prefix kilo = 1e3 (NIST SP 811, Table 5).
    ("force", "kN", 1.0e3),
    # NIST SP 811 (2008), Appendix B.8: standard acceleration of gravity 9.806 65 m/s^2.
    ("acceleration", "g", 9.80665),
    ("acceleration", "mg", 9.80665e-3),
    ("acceleration", "m/s^2", 1.0),
    ("acceleration", "m/s2", 1.0),
    # SI prefixes milli = 1e-3, micro = 1e-6 (NIST SP 811, Table 5).
    ("velocity", "mm/s", 1.0e-3),
    ("displacement", "mm", 1.0e-3),
    ("displacement", "um", 1.0e-6),
])
def test_unit_factors_match_nist_sp811(quantity: str, unit: str, factor: float) -> None:
    assert si_factor(quantity, unit) == pytest.approx(factor, rel=1e-15)


@pytest.mark.parametrize(("unit", "factor"), [("lbf", 4.4482216152605), ("kN", 1.0e3),
                                              ("kgf", 9.80665)])
def test_force_sine_is_converted_end_to_end(unit: str, factor: float) -> None:
    t = _t()
    x = np.sin(2 * np.pi * 5.0 * t)
    out = condition_channels([ChannelInput(x, "c0", "force", unit)], FS, mains_hz=None)
    # Factors: NIST SP 811 (2008), Appendix B.9 (see test above).
    np.testing.assert_allclose(_interior(out.signals[0]), _interior(factor * x),
                               atol=1e-3 * factor)
    assert out.units == ("N",)


def test_counts_are_scaled_with_offset() -> None:
    t = _t()
    counts = np.round(1000.0 + 400.0 * np.sin(2 * np.pi * 3.0 * t)).astype(np.int16)
    chan = ChannelInput(counts, "a0", "acceleration", "counts",
                        counts_scale=CountsScale("mg", 0.5, offset_counts=1000.0))
    out = condition_channels([chan], FS, mains_hz=None)
    # value = (counts - 1000) * 0.5 mg; 1 mg = 9.80665e-3 m/s^2 (NIST SP 811, B.8).
    expected = (counts.astype(float) - 1000.0) * 0.5 * 9.80665e-3
    expected -= expected.mean()  # the static part is removed by design
    amp = 400.0 * 0.5 * 9.80665e-3
    np.testing.assert_allclose(_interior(out.signals[0], edge_s=20.0),
                               _interior(expected, edge_s=20.0), atol=2e-3 * amp)


def test_valid_units_are_sorted_and_include_counts() -> None:
    units = valid_units("force")
    assert units == sorted(units)
    assert "counts" in units and "lbf" in units


# ----------------------------------------------------------------------------- differentiator


@pytest.mark.parametrize("freq_hz", [1.0, 5.0, 12.0, 20.0])
def test_velocity_differentiator_matches_analytic_derivative(freq_hz: float) -> None:
    t = _t()
    v = 1e-3 * np.sin(2 * np.pi * freq_hz * t)
    out = condition_channels([ChannelInput(v, "v0", "velocity", "m/s")], FS, mains_hz=None)
    # d/dt sin(2 pi f t) = 2 pi f cos(2 pi f t) (calculus); 1 % of the amplitude.
    expected = 1e-3 * 2 * np.pi * freq_hz * np.cos(2 * np.pi * freq_hz * t)
    amp = 1e-3 * 2 * np.pi * freq_hz
    np.testing.assert_allclose(_interior(out.signals[0]), _interior(expected), atol=0.01 * amp)
    assert out.units == ("m/s^2",)
    assert any("differentiated_1x" in f for f in out.flags)


def test_displacement_is_differentiated_twice() -> None:
    t = _t()
    f = 4.0
    d = np.sin(2 * np.pi * f * t)
    out = condition_channels([ChannelInput(d, "d0", "displacement", "mm")], FS, mains_hz=None)
    # d2/dt2 sin(2 pi f t) = -(2 pi f)^2 sin(2 pi f t) (calculus); mm -> m (SI prefix).
    amp = 1e-3 * (2 * np.pi * f) ** 2
    np.testing.assert_allclose(_interior(out.signals[0]), _interior(-amp * d), atol=0.01 * amp)


def test_differentiator_removes_content_above_its_stop_band() -> None:
    t = _t()
    v = np.sin(2 * np.pi * 60.0 * t)
    out = condition_channels([ChannelInput(v, "v0", "velocity", "m/s")], FS, mains_hz=None)
    # 60 Hz is above the documented 35 Hz stop edge: the unfiltered derivative would have
    # amplitude 2*pi*60 = 377 m/s^2 (calculus).
    assert np.abs(_interior(out.signals[0])).max() < 1e-3 * 2 * np.pi * 60.0


# ----------------------------------------------------------------------------- mains hum


def _welch_db(x: np.ndarray, fs: float) -> tuple[np.ndarray, np.ndarray]:
    f, p = signal.welch(x, fs=fs, nperseg=int(8 * fs))
    return f, 10 * np.log10(p)


@pytest.mark.parametrize("mains", [50, 60])
def test_mains_hum_is_removed_and_cardiac_band_kept(mains: int) -> None:
    fs = 500.0
    t = _t(120.0, fs)
    rng = np.random.default_rng(11)
    body = rng.standard_normal(t.size)
    hum = 5.0 * np.sin(2 * np.pi * mains * t) + 1.0 * np.sin(2 * np.pi * 3 * mains * t + 0.3)
    out = condition_channels([_force(700.0 + body + hum)], fs)
    assert out.mains_hz_removed == mains
    assert f"mains_hum_detected_{mains}hz" in out.flags
    f, before = _welch_db(body + hum, fs)
    _, after = _welch_db(out.signals[0], fs)
    # Attenuation >= 30 dB at the fundamental and 3rd harmonic, < 0.5 dB change at
    # 1-20 Hz, both measured with scipy.signal.welch (reference library).
    for h in (mains, 3 * mains):
        at = np.argmin(np.abs(f - h))
        assert before[at] - after[at] >= 30.0
    band = (f >= 1.0) & (f <= 20.0)
    assert np.abs(after[band] - before[band]).max() < 0.5


def test_no_hum_means_no_notch() -> None:
    rng = np.random.default_rng(2)
    out = condition_channels([_force(rng.standard_normal(int(60 * FS)))], FS)
    assert out.mains_hz_removed is None
    assert "mains_hum_not_detected" in out.flags


def test_mains_skipped_when_rate_too_low() -> None:
    fs = 100.0  # 50 Hz is at Nyquist: fs must exceed 2 * (50 + 5) Hz.
    x = np.random.default_rng(3).standard_normal(int(60 * fs))
    out = condition_channels([_force(x)], fs, mains_hz=50)
    assert out.mains_hz_removed is None
    assert "mains_removal_skipped_rate_too_low" in out.flags


# ----------------------------------------------------------------------------- static load


def _plate(mass_kg: float, duration_s: float = 60.0, fs: float = FS) -> list[ChannelInput]:
    t = _t(duration_s, fs)
    rng = np.random.default_rng(5)
    share = np.array([0.4, 0.3, 0.2, 0.1])
    out = []
    for i, s in enumerate(share):
        x = s * mass_kg * 9.80665 + 0.5 * np.sin(2 * np.pi * 1.2 * t + i) \
            + 0.05 * rng.standard_normal(t.size)
        out.append(ChannelInput(x, f"cell{i}", "force", "N"))
    return out


def test_static_load_and_supported_mass() -> None:
    out = condition_channels(_plate(80.0), FS, mains_hz=None, empty_load_kg=5.0)
    # Static force of each cell = share * m * g (statics), g = 9.80665 m/s^2 (NIST SP 811).
    for got, share in zip(out.static_load_n, (0.4, 0.3, 0.2, 0.1), strict=True):
        assert got == pytest.approx(share * 80.0 * 9.80665, abs=0.1)
    assert out.supported_mass_kg == pytest.approx(75.0, abs=0.05)
    assert out.occupancy_from_load is True
    assert out.load_trace_n is not None
    assert np.median(out.load_trace_n) == pytest.approx(75.0 * 9.80665, abs=1.0)


def test_empty_plate_is_not_occupied() -> None:
    out = condition_channels(_plate(0.0), FS, mains_hz=None)
    assert out.occupancy_from_load is False


def test_implausible_load_gives_none_with_reason() -> None:
    out = condition_channels(_plate(500.0), FS, mains_hz=None)
    assert out.occupancy_from_load is None
    assert "load_above_plausible_occupant_mass" in out.flags


def test_no_force_channel_gives_no_load() -> None:
    x = np.random.default_rng(1).standard_normal(int(30 * FS))
    out = condition_channels([ChannelInput(x, "a", "acceleration", "g")], FS, mains_hz=None)
    assert out.supported_mass_kg is None and out.load_trace_n is None
    assert out.occupancy_from_load is None
    assert out.static_load_n == (None,)


def test_load_trace_follows_occupant_leaving() -> None:
    t = _t(120.0)
    x = np.where(t < 60.0, 70.0 * 9.80665, 0.0) + 0.2 * np.sin(2 * np.pi * 1.1 * t)
    out = condition_channels([_force(x)], FS, mains_hz=None)
    load = out.load_trace_n
    assert load is not None
    times = (np.arange(load.size) + 0.5) / out.baseline_fs_hz
    assert np.all(load[(times > 5) & (times < 55)] > 60 * 9.80665)
    assert np.all(load[times > 65] < 5 * 9.80665)


def test_static_part_removed_and_respiration_kept() -> None:
    t = _t(120.0)
    resp = 3.0 * np.sin(2 * np.pi * 0.25 * t)
    out = condition_channels([_force(600.0 + resp)], FS, mains_hz=None)
    y = _interior(out.signals[0], edge_s=20.0)
    # Complement of a forward-backward 2nd-order Butterworth low-pass at 0.05 Hz:
    # |H|^2 = 1/(1 + (f/fc)^4) (Butterworth 1930), gain 1 - 1/626 at 0.25 Hz.
    np.testing.assert_allclose(y, _interior(resp, edge_s=20.0), atol=0.03 * 3.0)
    base = _interior(out.baseline_si[0], fs=out.baseline_fs_hz, edge_s=20.0)
    assert np.allclose(base, 600.0, atol=0.1)


def test_raw_signals_are_read_only_views_without_copy() -> None:
    x = np.random.default_rng(0).standard_normal(int(30 * FS))
    out = condition_channels([_force(x)], FS, mains_hz=None)
    assert np.shares_memory(out.raw_signals[0], x)
    assert not out.raw_signals[0].flags.writeable
    assert out.signals.dtype == np.float64 and out.signals.shape == (1, x.size)


def test_raw_ranges_are_the_samples_extremes_where_exact() -> None:
    rng = np.random.default_rng(1)
    n = int(30 * FS)
    floats = 700.0 + rng.standard_normal(n)
    float32 = floats.astype(np.float32)
    counts = rng.integers(-30_000, 30_000, n).astype(np.int16)
    wide = rng.integers(-(2**60), 2**60, n).astype(np.int64)
    gappy = floats.copy()
    gappy[500:510] = np.nan
    chans = [_force(floats, "a"), _force(float32, "b"),
             ChannelInput(counts, "c", "force", "counts", counts_scale=CountsScale("N", 0.01)),
             ChannelInput(wide, "d", "force", "counts", counts_scale=CountsScale("N", 1e-15)),
             _force(gappy, "e")]
    out = condition_channels(chans, FS, mains_hz=None)
    want = [(float(x.min()), float(x.max())) for x in (floats, float32, counts)]
    # a 64-bit integer range need not be exact as floats, and a channel with a gap has
    # none: those two are None (the artifact stage reduces them itself)
    assert out.raw_ranges == (*want, None, None)


@settings(max_examples=8, deadline=None)
@given(scale=st.floats(min_value=1e-3, max_value=1e3))
def test_conditioning_is_linear_in_amplitude(scale: float) -> None:
    fs = 100.0
    x = np.random.default_rng(7).standard_normal(int(MIN_DURATION_S * fs))
    a = condition_channels([_force(x)], fs, mains_hz=None).signals[0]
    b = condition_channels([_force(scale * x)], fs, mains_hz=None).signals[0]
    np.testing.assert_allclose(b, scale * a, rtol=1e-9, atol=1e-12 * scale)


# ----------------------------------------------------------------------------- errors


def _ok(n: int = int(30 * FS)) -> np.ndarray:
    return np.zeros(n)


def test_error_sampling_rate() -> None:
    with pytest.raises(InvalidInputError, match=r"`fs_hz` must be between 50 and 2000 Hz; got 20"):
        condition_channels([_force(_ok())], 20.0)


def test_error_channel_count() -> None:
    with pytest.raises(InvalidInputError, match=r"`channels` must hold 1 to 8 channels; got 0"):
        condition_channels([], FS)
    too_many = [_force(_ok(), label=f"c{i}") for i in range(MAX_CHANNELS + 1)]
    with pytest.raises(InvalidInputError, match=r"1 to 8 channels; got 9"):
        condition_channels(too_many, FS)


def test_error_not_a_channel() -> None:
    with pytest.raises(InvalidInputError, match=r"`channels\[0\]` must be a ChannelInput"):
        condition_channels([np.zeros(10)], FS)  # type: ignore[list-item]


def test_error_unequal_lengths() -> None:
    chans = [_force(_ok(), label="a"), _force(_ok(int(31 * FS)), label="b")]
    with pytest.raises(InvalidInputError, match=r"`channels\[1\].samples` must have the same "
                                                r"length as channels\[0\].samples \(7500"):
        condition_channels(chans, FS)


def test_error_duplicate_labels() -> None:
    with pytest.raises(InvalidInputError, match=r"`channels\[1\].label` must be unique; got 'a'"):
        condition_channels([_force(_ok(), label="a"), _force(_ok(), label="a")], FS)


def test_error_unknown_quantity() -> None:
    chan = ChannelInput(_ok(), "a", "pressure", "Pa")
    with pytest.raises(InvalidInputError, match=r"`channels\[0\].quantity` must be one of "
                                                r"\['acceleration', 'displacement', 'force', "
                                                r"'velocity'\]; got 'pressure'"):
        condition_channels([chan], FS)


def test_error_unit_not_valid_for_quantity_lists_sorted_choices() -> None:
    chans = [_force(_ok(), label="a"), _force(_ok(), label="b"),
             ChannelInput(_ok(), "c", "force", "m/s")]
    with pytest.raises(InvalidInputError, match=r"`channels\[2\].unit` must be one of \['N', "
                                                r"'counts', 'kN', 'kgf', 'lbf'\] for quantity "
                                                r"'force'; got 'm/s'") as info:
        condition_channels(chans, FS)
    assert info.value.field == "channels[2].unit"


def test_error_counts_rules() -> None:
    with pytest.raises(InvalidInputError, match=r"`channels\[0\].counts_scale` must be a "
                                                r"CountsScale when unit is 'counts'"):
        condition_channels([ChannelInput(_ok(), "a", "force", "counts", 2.5)], FS)  # type: ignore[arg-type]
    with pytest.raises(InvalidInputError, match=r"`channels\[0\].counts_scale` must be None "
                                                r"unless unit is 'counts'"):
        condition_channels([_force(_ok(), counts_scale=CountsScale("N", 1.0))], FS)
    with pytest.raises(InvalidInputError, match=r"`channels\[0\].counts_scale.unit` must be one "
                                                r"of \['N', 'kN', 'kgf', 'lbf'\]"):
        condition_channels([ChannelInput(_ok(), "a", "force", "counts",
                                         CountsScale("g", 1.0))], FS)
    with pytest.raises(InvalidInputError, match=r"per_count` must be a finite non-zero number"):
        condition_channels([ChannelInput(_ok(), "a", "force", "counts",
                                         CountsScale("N", 0.0))], FS)


def test_error_infinite_samples_report_first_index_and_count() -> None:
    x = _ok()
    x[[100, 205, 300, 400]] = [np.inf, np.nan, -np.inf, np.inf]  # NaN is a gap, not refused
    with pytest.raises(InvalidInputError, match=r"`channels\[0\].samples` must not hold "
                                                r"infinity \(a missing sample is NaN\); got 3 "
                                                r"infinite sample\(s\), the first at index 100"):
        condition_channels([_force(x)], FS)


def test_error_samples_not_1d_or_not_numeric() -> None:
    with pytest.raises(InvalidInputError, match=r"`channels\[0\].samples` must be 1-D"):
        condition_channels([_force(np.zeros((2, 5000)))], FS)
    with pytest.raises(InvalidInputError, match=r"must hold real numbers"):
        condition_channels([_force(np.array(["a"] * 8000))], FS)


def test_error_too_short_and_too_long() -> None:
    with pytest.raises(InvalidInputError, match=r"must span at least 20 s .*got 10 s"):
        condition_channels([_force(_ok(int(10 * FS)))], FS)
    long = np.zeros(int(MAX_DURATION_S * 50) + 50, dtype=np.int8)
    with pytest.raises(InvalidInputError, match=r"must span at most 86400 s \(24 h\)"):
        condition_channels([_force(long)], 50.0)


def test_error_positions_for_some_channels_only() -> None:
    chans = [_force(_ok(), label="a", position_m=(0.0, 0.0)), _force(_ok(), label="b")]
    with pytest.raises(InvalidInputError, match=r"`channels\[1\].position_m` must be given for "
                                                r"every channel or for none"):
        condition_channels(chans, FS)
    with pytest.raises(InvalidInputError, match=r"must be a pair of finite numbers"):
        condition_channels([_force(_ok(), position_m=(0.0, np.nan))], FS)


def test_error_mains_and_empty_load() -> None:
    with pytest.raises(InvalidInputError, match=r"`mains_hz` must be one of 'auto', 50, 60 or "
                                                r"None; got 55"):
        condition_channels([_force(_ok())], FS, mains_hz=55)  # type: ignore[arg-type]
    with pytest.raises(InvalidInputError, match=r"`empty_load_kg` must be a finite mass >= 0"):
        condition_channels([_force(_ok())], FS, empty_load_kg=-1.0)


def test_absurd_sample_magnitude_is_rejected() -> None:
    from features.conditioning import MAX_SAMPLE_MAGNITUDE, ChannelInput, condition_channels
    from features.errors import InvalidInputError

    x = np.zeros(250 * 30)
    x[11] = 1e160  # squares of such values overflow float64 (IEEE 754 max ~1.8e308)
    with pytest.raises(InvalidInputError, match=r"magnitudes of at most 1e\+12 .* index 11"):
        condition_channels([ChannelInput(samples=x, label="a", quantity="force", unit="N")],
                           250.0)
    assert MAX_SAMPLE_MAGNITUDE == 1e12


# ----------------------------------------------------------------------------- coupling


def test_coupling_defaults_to_dc_only_for_calibrated_force() -> None:
    x = 700.0 + 0.1 * np.sin(2 * np.pi * 1.2 * _t())
    chans = [_force(x, "n"),
             ChannelInput(x, "c", "force", "counts", CountsScale("N", 1.0)),
             ChannelInput(x, "u", "force", "counts"),
             ChannelInput(x, "a", "acceleration", "m/s2")]
    out = condition_channels(chans, FS)
    assert out.couplings == ("dc", "dc", "ac", "ac")
    # Counts of unknown scale keep their unit; only the two calibrated cells carry load.
    assert out.units == ("N", "N", "counts", "m/s^2")
    assert out.static_load_n[2] is None and out.static_load_n[3] is None
    # M = F / g (Newton's second law at rest): two cells of 700 N, standard gravity
    # 9.80665 m/s^2 (NIST SP 811, B.8). The static level is a median of 0.1 s block
    # means, which a 0.1 N sine can move by at most 0.1 N per cell: 0.2 N / g = 0.02 kg.
    assert out.supported_mass_kg == pytest.approx(1400.0 / 9.80665, abs=0.02)


def test_ac_force_channel_gives_no_load_evidence() -> None:
    x = 700.0 + 0.1 * np.sin(2 * np.pi * 1.2 * _t())
    out = condition_channels([_force(x, coupling="ac")], FS)
    assert out.couplings == ("ac",)
    assert out.supported_mass_kg is None
    assert out.load_trace_n is None
    assert out.occupancy_from_load is None
    assert out.static_load_n == (None,)


@pytest.mark.parametrize(("chan", "message"), [
    (ChannelInput(_t(), "a", "force", "N", coupling="DC"),
     r"`channels\[0\].coupling` must be one of \['ac', 'dc'\] or None; got 'DC'"),
    (ChannelInput(_t(), "a", "acceleration", "g", coupling="dc"),
     r"`channels\[0\].coupling` may be 'dc' only for a force channel .*got quantity "
     r"'acceleration'. Use 'ac'"),
    (ChannelInput(_t(), "a", "force", "counts", coupling="dc"),
     r"`channels\[0\].coupling` may be 'dc' only with a calibrated scale; got unit 'counts' "
     r"without counts_scale"),
])
def test_error_coupling_rules(chan: ChannelInput, message: str) -> None:
    with pytest.raises(InvalidInputError, match=message) as info:
        condition_channels([chan], FS)
    assert info.value.field == "channels[0].coupling"


def test_per_quantity_tables_cover_every_quantity_of_the_limits():
    # The conditioning tables are keyed by quantity name; every quantity the schemas accept
    # (features.limits.QUANTITIES) must have a row, and no other name may.
    from features.conditioning import _DERIVATIVES, _KINETIC_UNIT
    from features.limits import QUANTITIES

    assert set(_KINETIC_UNIT) == set(QUANTITIES)
    assert set(_DERIVATIVES) == set(QUANTITIES)
    # a = dv/dt = d2x/dt2 (kinematics, any mechanics textbook); force and acceleration are
    # already kinetic. Newton's second law puts force in N, the others become m/s^2.
    assert _DERIVATIVES == {"force": 0, "acceleration": 0, "velocity": 1, "displacement": 2}
    assert _KINETIC_UNIT["force"] == "N"
    assert {_KINETIC_UNIT[q] for q in QUANTITIES if q != "force"} == {"m/s^2"}
