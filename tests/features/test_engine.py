"""End-to-end engine checks: truth from the physics simulator, invariances, errors, fuzzing."""

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from hypothesis.extra.numpy import arrays

from features import ChannelInput, InvalidInputError, UnusableSignalError, analyze
from features.engine import Options, Subject
from features.limits import DEFAULT_RATE_RANGE_BPM
from simulation import SimulationSettings, simulate


def _channels(rec, scale=1.0, offset=0.0):
    return [
        ChannelInput(samples=scale * ch + offset, label=lab, quantity=rec.quantity, unit=rec.unit,
                     position_m=None if rec.positions_m is None else rec.positions_m[i])
        for i, (ch, lab) in enumerate(zip(rec.channels, rec.labels, strict=True))
    ]


@pytest.fixture(scope="module")
def armchair():
    return simulate(SimulationSettings(duration_s=120.0, n_channels=4, seed=11))


def test_heart_rate_and_beats_match_the_simulated_truth(armchair):
    r = analyze(_channels(armchair), armchair.fs_hz, subject=Subject(body_mass_kg=75.0))
    truth = armchair.truth
    assert r.heart_rate.mean_bpm == pytest.approx(truth.heart_rate_bpm, abs=1.0)
    assert r.heart_rate.confidence >= 0.5
    assert r.occupancy.occupied is True
    # Supported mass from the static load: M = F / g (Newton's second law at rest).
    assert r.occupancy.supported_mass_kg == pytest.approx(75.0, rel=0.02)
    ref = truth.j_times_s
    near = np.min(np.abs(r.beats.times_s[:, None] - ref[None, :]), axis=0)
    # AAMI EC57-style matching with a 150 ms window (from memory): every beat found.
    assert np.mean(near <= 0.15) >= 0.98
    assert r.variability.time_domain.sdnn_ms is not None


def test_empty_support_gives_no_heart_rate(armchair):
    empty = simulate(SimulationSettings(duration_s=120.0, n_channels=4, body_mass_kg=None,
                                        seed=12))
    r = analyze(_channels(empty), empty.fs_hz)
    assert r.heart_rate.mean_bpm is None and r.heart_rate.reason == "empty_support"
    assert r.occupancy.occupied is False
    assert r.heart_rate.confidence < 0.3


def test_pure_noise_accelerometer_gives_no_heart_rate():
    rng = np.random.default_rng(5)
    ch = ChannelInput(samples=rng.standard_normal(250 * 60) * 0.01, label="acc",
                      quantity="acceleration", unit="m/s2")
    r = analyze([ch], 250.0)
    assert r.heart_rate.mean_bpm is None
    assert r.occupancy.occupied is False
    assert r.heart_rate.confidence < 0.3


def test_scale_offset_and_polarity_leave_beat_times_unchanged(armchair):
    base = analyze(_channels(armchair), armchair.fs_hz)
    scaled = analyze(_channels(armchair, scale=3.0), armchair.fs_hz)
    np.testing.assert_allclose(scaled.beats.times_s, base.beats.times_s, atol=1e-6)
    one = simulate(SimulationSettings(duration_s=90.0, seed=13))
    up = analyze(_channels(one), one.fs_hz)
    inv = simulate(SimulationSettings(duration_s=90.0, seed=13, polarity=-1))
    down = analyze(_channels(inv), inv.fs_hz)
    assert up.beats.polarity == 1 and down.beats.polarity == -1
    assert abs(up.beats.times_s.size - down.beats.times_s.size) <= 1
    gap = np.min(np.abs(up.beats.times_s[:, None] - down.beats.times_s[None, :]), axis=1)
    assert np.median(gap) < 0.005


def test_morphology_and_respiration_are_reported(armchair):
    r = analyze(_channels(armchair), armchair.fs_hz)
    t = armchair.truth.template
    assert r.morphology.ij_interval_ms == pytest.approx(t.i_j_interval_ms, abs=10.0)
    assert r.morphology.jk_interval_ms == pytest.approx(t.j_k_interval_ms, abs=10.0)
    assert r.respiration.rate_per_min == pytest.approx(armchair.truth.breathing_rate_per_min,
                                                       abs=1.0)


def test_unequal_channels_are_rejected():
    a = ChannelInput(samples=np.zeros(250 * 30), label="a", quantity="force", unit="N")
    b = ChannelInput(samples=np.zeros(250 * 31), label="b", quantity="force", unit="N")
    with pytest.raises(InvalidInputError, match="length") as info:
        analyze([a, b], 250.0)
    assert info.value.field.startswith("channels")


def test_infinite_samples_are_rejected_with_the_field_named():
    x = np.ones(250 * 30)
    x[100] = -np.inf  # NaN is a missing sample (a gap); infinity is no measurement at all
    with pytest.raises(InvalidInputError, match="infinity") as info:
        analyze([ChannelInput(samples=x, label="a", quantity="force", unit="N")], 250.0)
    assert info.value.field == "channels[0].samples"


def test_rate_out_of_range_is_rejected():
    ch = ChannelInput(samples=np.zeros(40 * 30), label="a", quantity="force", unit="N")
    with pytest.raises(InvalidInputError, match="50 and 2000 Hz"):
        analyze([ch], 40.0)


def test_unknown_unit_is_rejected():
    ch = ChannelInput(samples=np.zeros(250 * 30), label="a", quantity="force", unit="stone")
    with pytest.raises(InvalidInputError, match="unit"):
        analyze([ch], 250.0)


def test_bad_body_mass_is_rejected():
    ch = ChannelInput(samples=np.zeros(250 * 30), label="a", quantity="force", unit="N")
    with pytest.raises(InvalidInputError, match=r"`subject.body_mass_kg` must be between 2 and"):
        analyze([ch], 250.0, subject=Subject(body_mass_kg=-3.0))


def test_too_short_trace_is_rejected():
    ch = ChannelInput(samples=np.zeros(250 * 5), label="a", quantity="force", unit="N")
    with pytest.raises(InvalidInputError, match="20"):
        analyze([ch], 250.0)


@settings(max_examples=25, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(
    x=arrays(np.float64, st.integers(50 * 20, 50 * 24),
             elements=st.floats(-1e6, 1e6, allow_nan=False, allow_infinity=False)),
    quantity=st.sampled_from(["force", "acceleration"]),
)
def test_any_finite_input_gives_a_result_or_a_documented_error(x, quantity):
    unit = "N" if quantity == "force" else "m/s2"
    try:
        r = analyze([ChannelInput(samples=x, label="a", quantity=quantity, unit=unit)], 50.0,
                    options=Options(mains_hz=None))
    except (InvalidInputError, UnusableSignalError):
        return
    assert 0.0 <= r.heart_rate.confidence <= 1.0
    lo, hi = DEFAULT_RATE_RANGE_BPM  # the detector's default search range
    assert r.heart_rate.mean_bpm is None or lo <= r.heart_rate.mean_bpm <= hi
    assert 0.0 <= r.quality.usable_fraction <= 1.0


def test_measured_load_is_reported_as_the_body_mass_when_none_is_stated(armchair):
    # No stated mass on an occupied force plate: the per-kilogram amplitudes use the load, so
    # the reported body mass must be that load, not the missing stated one.
    r = analyze(_channels(armchair), armchair.fs_hz)
    assert r.occupancy.occupied is True
    assert r.body_mass_source == "load"
    assert r.body_mass_kg is not None
    # The simulated person weighs 75 kg; M = F / g at rest (Newton's second law), 2 % for the
    # static-load estimate over the recording as in the test above.
    assert r.body_mass_kg == pytest.approx(75.0, rel=0.02)
    assert r.body_mass_kg == r.occupancy.supported_mass_kg


# A trace that carries no waveform at all is an unusable signal, not an empty support:
# a sensor whose output never changes (or changes by one quantisation step) or that sits at
# its range limits most of the time measures nothing (common practice).


def _force(x, label="a"):
    return ChannelInput(samples=x, label=label, quantity="force", unit="N")


def test_constant_channels_are_an_unusable_flat_signal():
    chans = [_force(np.full(250 * 30, 700.0), "a"), _force(np.zeros(250 * 30), "b")]
    with pytest.raises(UnusableSignalError, match="constant or toggles") as info:
        analyze(chans, 250.0)
    assert info.value.reason == "flat_signal"


def test_an_all_zero_force_plate_is_an_empty_support_not_an_unusable_signal():
    # A tared plate that reads nothing holds nobody: a valid answer (occupancy false).
    r = analyze([_force(np.zeros(250 * 30))], 250.0)
    assert r.occupancy.occupied is False
    assert r.heart_rate.mean_bpm is None and r.heart_rate.reason == "empty_support"


def test_a_channel_toggling_by_one_step_is_an_unusable_flat_signal():
    rng = np.random.default_rng(4)
    counts = 2048.0 + rng.integers(0, 2, 250 * 30)  # ADC noise of one count, nothing else
    with pytest.raises(UnusableSignalError) as info:
        analyze([_force(counts)], 250.0)
    assert info.value.reason == "flat_signal"


def test_channels_held_at_their_limits_are_an_unusable_clipped_signal(armchair):
    # Clipping every channel between its 30th and 70th percentiles leaves 60 % of the
    # samples at a limit: more than half, as from a saturated amplifier.
    chans = []
    for ch in _channels(armchair):
        lo, hi = np.percentile(ch.samples, [30, 70])
        chans.append(ChannelInput(samples=np.clip(ch.samples, lo, hi), label=ch.label,
                                  quantity=ch.quantity, unit=ch.unit, position_m=ch.position_m))
    with pytest.raises(UnusableSignalError, match="lowest or highest value") as info:
        analyze(chans, armchair.fs_hz)
    assert info.value.reason == "clipped_signal"


def test_one_live_channel_is_enough(armchair):
    chans = _channels(armchair)
    dead = ChannelInput(samples=np.zeros_like(chans[0].samples), label=chans[0].label,
                        quantity=chans[0].quantity, unit=chans[0].unit)
    r = analyze([dead, *[ChannelInput(samples=c.samples, label=c.label, quantity=c.quantity,
                                      unit=c.unit) for c in chans[1:]]], armchair.fs_hz)
    assert r.heart_rate.mean_bpm == pytest.approx(armchair.truth.heart_rate_bpm, abs=1.0)


def test_the_unusable_reasons_are_the_two_tested_above():
    from features.errors import UNUSABLE_REASONS

    assert UNUSABLE_REASONS == ("clipped_signal", "flat_signal")


def test_a_load_that_says_empty_against_a_heartbeat_is_a_disagreement(armchair):
    # A calibrated-looking scale that is wrong by 100x: the load reads 0.75 kg, under the
    # occupant bound, while the heartbeat is plain. The beats must still be looked for.
    chans = _channels(armchair, scale=0.01)
    r = analyze(chans, armchair.fs_hz)
    assert r.occupancy.from_load is False
    assert r.occupancy.from_heartbeat is True
    assert r.occupancy.occupied is True
    assert "load_and_heartbeat_disagree" in r.occupancy.flags
    assert r.occupancy.confidence < 0.5
    assert r.quality.usable_fraction > 0.9  # not masked as an empty support
    assert "load_says_empty_whole_record_not_masked" in r.quality.flags
    # The simulator's truth rate; 1 /min as in the calibrated case above.
    assert r.heart_rate.mean_bpm == pytest.approx(armchair.truth.heart_rate_bpm, abs=1.0)


def test_ac_coupled_cells_take_occupancy_from_the_heartbeat(armchair):
    chans = [ChannelInput(samples=c.samples, label=c.label, quantity=c.quantity, unit=c.unit,
                          position_m=c.position_m, coupling="ac") for c in _channels(armchair)]
    r = analyze(chans, armchair.fs_hz)
    assert r.occupancy.from_load is None
    assert r.occupancy.supported_mass_kg is None
    assert r.occupancy.occupied is True
    assert r.body_mass_kg is None  # no weight is claimed from an ac sensor
    assert r.heart_rate.mean_bpm == pytest.approx(armchair.truth.heart_rate_bpm, abs=1.0)


def test_an_empty_support_reports_no_breathing_either():
    # Four cells under an empty plate: the load says empty throughout, so nothing is
    # masked before the beats are looked for; no heartbeat is found, and the centre of
    # pressure's drift must not pass for an occupant's breathing.
    rec = simulate(SimulationSettings(duration_s=120.0, n_channels=4, body_mass_kg=None,
                                      seed=47))
    r = analyze(_channels(rec), rec.fs_hz)
    assert r.occupancy.occupied is False
    assert r.heart_rate.mean_bpm is None
    assert r.respiration.rate_per_min is None
    assert r.respiration.confidence < 0.5


def test_a_load_beyond_any_occupant_gives_no_mass_and_no_error(armchair):
    # A scale 2000x too large: 150 t on the plate. The load is implausible (above
    # MAX_OCCUPANT_KG), so it is not a body mass; the engine once passed it to the
    # per-kilogram amplitudes and failed with a 422 about body_mass_kg.
    r = analyze(_channels(armchair, scale=2000.0), armchair.fs_hz)
    assert r.occupancy.from_load is None
    assert "load_above_plausible_occupant_mass" in r.input.flags
    assert r.body_mass_kg is None
    assert r.occupancy.occupied is True  # from the heartbeat
    assert r.heart_rate.mean_bpm == pytest.approx(armchair.truth.heart_rate_bpm, abs=1.0)
