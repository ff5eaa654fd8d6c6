"""Tests for features.artifacts: injected movement, steps, clipping, flat lines, empty support."""

from __future__ import annotations

from functools import cache

import numpy as np
import pytest

from features.artifacts import Segment, mask_artifacts
from features.errors import InvalidInputError
from simulation import SimulatedRecording, SimulationSettings, simulate

FS = 250.0
G = 9.80665  # standard gravity, m/s^2 (NIST SP 811, 2008, B.8)
DURATION_S = 300.0
LOAD_FS = 10.0


@cache
def _simulated(seed: int) -> SimulatedRecording:
    """A quiet seated recording on four load cells: a 75 kg occupant, cushion, SNR 10 dB."""
    return simulate(SimulationSettings(duration_s=DURATION_S, fs_hz=FS, n_channels=4,
                                       body_mass_kg=75.0, seed=seed))


def _j_amplitude_n(seed: int) -> float:
    """J amplitude of the simulated beat (noise-free template), N: the scale of the injections."""
    template = _simulated(seed).truth.template
    assert template is not None
    return next(w.amplitude for w in template.waves if w.name == "J")


def _record(seed: int = 0) -> tuple[np.ndarray, list[np.ndarray], np.ndarray]:
    """Fused trace, four raw load-cell traces (N) and a 10 Hz occupant load trace.

    The cells and their static load come from the simulator; the fused trace is the summed
    load less its static part (the plain sum is what fusion gives four equal cells).
    """
    rec = _simulated(seed)
    raw = [np.array(c) for c in rec.channels]
    fused = np.sum(raw, axis=0) - rec.truth.static_load_n
    load = np.full(int(DURATION_S * LOAD_FS), rec.truth.static_load_n)
    return fused, raw, load


def _spans(mask: object, kind: str) -> list[Segment]:
    return [s for s in mask.segments if s.kind == kind]  # type: ignore[attr-defined]


def test_clean_record_is_almost_unmasked() -> None:
    fused, raw, load = _record()
    mask = mask_artifacts(fused, FS, load_n=load, load_fs_hz=LOAD_FS, raw_signals=raw)
    # Requirement of the stage: false-mask fraction < 2 % on a clean record.
    assert mask.usable_fraction > 0.98
    assert mask.usable.shape == fused.shape and mask.usable.dtype == bool
    assert 0.0 <= mask.confidence <= 1.0


def _inject(seed: int = 1) -> tuple[np.ndarray, list[np.ndarray], np.ndarray]:
    fused, raw, load = _record(seed)
    rng = np.random.default_rng(100 + seed)
    i = lambda s: int(s * FS)  # noqa: E731
    # Movement: 3 s of broadband motion, rms three J amplitudes (over ten times the
    # cardiac rms), 60-63 s.
    burst = 3.0 * _j_amplitude_n(seed) * rng.standard_normal(i(3.0))
    fused[i(60):i(63)] += burst
    for r in raw:
        r[i(60):i(63)] += burst
    # Posture change at 120 s: 50 N moves from cell 0 to cell 1 (total unchanged).
    raw[0][i(120):] += 50.0
    raw[1][i(120):] -= 50.0
    # Clipping: cell 2 saturates at a rail above its whole range for 180-180.5 s.
    rail = raw[2].max() + 5.0
    raw[2][i(180):i(180.5)] = rail
    # Flat line: cell 3 holds its value for 240-241 s (a dropout).
    raw[3][i(240):i(241)] = raw[3][i(240)]
    # Empty support: occupant off the support for 270-285 s.
    t_load = np.arange(load.size) / LOAD_FS
    load[(t_load >= 270.0) & (t_load < 285.0)] = 0.5 * G
    return fused, raw, load


def test_injected_events_are_found_within_tolerance() -> None:
    fused, raw, load = _inject()
    mask = mask_artifacts(fused, FS, load_n=load, load_fs_hz=LOAD_FS, raw_signals=raw)

    move = _spans(mask, "movement")
    # Movement span: the burst, padded by 1 s, widened by at most the 1 s envelope and
    # one 0.25 s block on each side (documented construction).
    assert any(s.start_s <= 60.0 and s.end_s >= 63.0 for s in move)
    hit = [s for s in move if s.start_s < 63.0 and s.end_s > 60.0]
    assert all(s.start_s >= 60.0 - 2.5 and s.end_s <= 63.0 + 2.5 for s in hit)

    post = _spans(mask, "posture_change")
    assert len(post) == 1
    # A sharp step: the window before it, the window after it and half a window on each
    # side (Notes, step 5), so 1.5 s either side of the step at 120 s.
    assert post[0].start_s <= 120.0 <= post[0].end_s
    assert post[0].start_s >= 118.0 and post[0].end_s <= 122.0

    clip = _spans(mask, "clipping")
    assert len(clip) == 1
    assert clip[0].start_s == pytest.approx(180.0, abs=1 / FS)
    assert clip[0].end_s == pytest.approx(180.5, abs=1 / FS)

    flat = _spans(mask, "flat_line")
    assert len(flat) == 1
    assert flat[0].start_s == pytest.approx(240.0, abs=1 / FS)
    assert flat[0].end_s == pytest.approx(241.0, abs=1 / FS)

    empty = _spans(mask, "empty_support")
    assert len(empty) == 1
    # 10 Hz load samples (0.1 s) plus the 1 s padding.
    assert empty[0].start_s == pytest.approx(269.0, abs=0.11)
    assert empty[0].end_s == pytest.approx(286.0, abs=0.11)

    # Nothing else of note is masked: outside the injected spans (with the tolerances
    # above) at most 2 % of the record.
    t = np.arange(fused.size) / FS
    allowed = np.zeros(fused.size, dtype=bool)
    for a, b in [(57.5, 65.5), (117, 123), (180, 180.5), (240, 241), (269, 286)]:
        allowed |= (t >= a) & (t < b)
    assert np.mean(~mask.usable & ~allowed) < 0.02
    assert [s.start_s for s in mask.segments] == sorted(s.start_s for s in mask.segments)


@pytest.mark.parametrize("factor", [1e-3, 1e3])
def test_mask_is_scale_invariant(factor: float) -> None:
    fused, raw, load = _inject(seed=2)
    a = mask_artifacts(fused, FS, raw_signals=raw)
    b = mask_artifacts(fused * factor, FS, raw_signals=[r * factor for r in raw])
    np.testing.assert_array_equal(a.usable, b.usable)
    assert [s.kind for s in a.segments] == [s.kind for s in b.segments]


def test_time_shift_moves_the_movement_segment() -> None:
    fused, _, _ = _record(seed=3)
    rng = np.random.default_rng(7)
    burst = 3.0 * _j_amplitude_n(3) * rng.standard_normal(int(2 * FS))
    one, two = fused.copy(), fused.copy()
    one[int(100 * FS):int(102 * FS)] += burst
    two[int(150 * FS):int(152 * FS)] += burst
    m1 = _spans(mask_artifacts(one, FS), "movement")
    m2 = _spans(mask_artifacts(two, FS), "movement")
    assert len(m1) == len(m2) == 1
    # 0.25 s envelope blocks: the shifted span moves by 50 s within one block.
    assert m2[0].start_s - m1[0].start_s == pytest.approx(50.0, abs=0.25)


def test_short_flat_run_is_not_masked() -> None:
    fused, raw, _ = _record(seed=4)
    raw[0][int(100 * FS):int(100.1 * FS)] = raw[0][int(100 * FS)]  # 0.1 s < 0.25 s
    mask = mask_artifacts(fused, FS, raw_signals=raw)
    assert not _spans(mask, "flat_line")


def test_flat_fused_without_raw_is_masked() -> None:
    fused, _, _ = _record(seed=5)
    fused[int(50 * FS):int(52 * FS)] = 0.0
    mask = mask_artifacts(fused, FS)
    flat = _spans(mask, "flat_line")
    assert len(flat) == 1
    assert flat[0].start_s == pytest.approx(50.0, abs=1 / FS)
    assert flat[0].end_s == pytest.approx(52.0, abs=1 / FS)
    assert "clipping_and_flat_checked_on_fused" in mask.flags


def test_dead_raw_channel_is_ignored_not_masking_everything() -> None:
    fused, raw, _ = _record(seed=6)
    raw[2] = np.zeros_like(raw[2])
    mask = mask_artifacts(fused, FS, raw_signals=raw)
    assert "channels[2]_mostly_flat_or_clipped_ignored" in mask.flags
    assert mask.usable_fraction > 0.98


def test_all_flat_trace_is_unusable() -> None:
    mask = mask_artifacts(np.zeros(int(30 * FS)), FS)
    assert mask.usable_fraction == 0.0
    assert mask.movement_threshold_ratio is None


def test_empty_support_with_full_rate_load() -> None:
    fused, _, _ = _record(seed=8)
    load = np.full(fused.size, 70.0 * G)
    load[: int(30 * FS)] = 0.0
    mask = mask_artifacts(fused, FS, load_n=load, pad_s=0.0)
    empty = _spans(mask, "empty_support")
    assert len(empty) == 1 and empty[0].start_s == 0.0
    assert empty[0].end_s == pytest.approx(30.0, abs=1 / FS)


# ----------------------------------------------------------------------------- errors


def test_error_rules() -> None:
    fused, raw, load = _record(seed=9)
    with pytest.raises(InvalidInputError, match=r"`fs_hz` must be between 50 and 2000 Hz"):
        mask_artifacts(fused, 5000.0)
    with pytest.raises(InvalidInputError, match=r"`fused` must be 1-D; got shape \(2, "):
        mask_artifacts(np.stack([fused, fused]), FS)
    with pytest.raises(InvalidInputError, match=r"`fused` must be at least 20 s long; got 4.00 s"):
        mask_artifacts(fused[:1000], FS)
    bad = fused.copy()
    bad[10] = np.inf
    with pytest.raises(InvalidInputError,
                       match=r"`fused` must hold finite numbers only; got 1 NaN or inf, the first "
                             r"at index 10"):
        mask_artifacts(bad, FS)
    with pytest.raises(InvalidInputError, match=r"`fused` must hold real numbers; got dtype bool"):
        mask_artifacts(fused > 0, FS)
    with pytest.raises(InvalidInputError, match=r"`raw_signals\[1\]` must be a real 1-D array "
                                                r"of 75000 samples"):
        mask_artifacts(fused, FS, raw_signals=[raw[0], raw[1][:-5]])
    with pytest.raises(InvalidInputError, match=r"`raw_signals` must hold at least one channel"):
        mask_artifacts(fused, FS, raw_signals=[])
    with pytest.raises(InvalidInputError, match=r"`load_fs_hz` must divide fs_hz by a whole"):
        mask_artifacts(fused, FS, load_n=load, load_fs_hz=7.3)
    with pytest.raises(InvalidInputError, match=r"`load_n` must cover the record"):
        mask_artifacts(fused, FS, load_n=load[:100], load_fs_hz=LOAD_FS)
    with pytest.raises(InvalidInputError, match=r"`movement_k` must be a finite number > 0"):
        mask_artifacts(fused, FS, movement_k=0.0)
    with pytest.raises(InvalidInputError, match=r"`pad_s` must be a finite number >= 0"):
        mask_artifacts(fused, FS, pad_s=-1.0)
    with pytest.raises(InvalidInputError, match=r"`min_flat_s` must be between 0.01 and 10 s"):
        mask_artifacts(fused, FS, min_flat_s=20.0)
    with pytest.raises(InvalidInputError, match=r"`min_occupant_kg` must be a finite number > 0"):
        mask_artifacts(fused, FS, min_occupant_kg=float("nan"))


def test_brief_clipping_of_wave_tips_is_flagged_not_masked() -> None:
    # An ADC range just above the static load cuts the tip of every J wave for
    # a few samples: the beats stay usable (the rest of the complex times them),
    # so nothing is masked, but the clipping is reported.
    fused, raw, load = _record(seed=3)
    top = float(np.quantile(raw[0], 0.995))
    clipped = [np.minimum(raw[0], top)] + raw[1:]
    mask = mask_artifacts(fused, FS, load_n=load, load_fs_hz=LOAD_FS, raw_signals=clipped)
    assert not _spans(mask, "clipping")
    assert "brief_clipping_not_masked" in mask.flags
    assert mask.usable_fraction > 0.98


def test_long_clipping_run_is_masked() -> None:
    fused, raw, load = _record(seed=4)
    held = raw[1].copy()
    held[int(100 * FS) : int(100.2 * FS)] = held.max() + 1.0  # 0.2 s at full scale
    held[int(200 * FS) : int(200.01 * FS)] = held.max()  # a 10 ms tip: brief
    mask = mask_artifacts(fused, FS, load_n=load, load_fs_hz=LOAD_FS,
                          raw_signals=[raw[0], held, raw[2], raw[3]])
    clip = _spans(mask, "clipping")
    assert len(clip) == 1 and clip[0].start_s == pytest.approx(100.0, abs=1 / FS)


def test_motion_only_marks_movement_and_posture_but_not_clipping() -> None:
    # Hand-built mask of 10 s at 10 Hz: movement 1-3 s, posture change 5-6 s, clipping
    # 2-2.5 s (inside the movement). Only motion may leave beats intact under it, so the
    # clipped half-second stays out; the sample counts follow from the spans by hand.
    from features.artifacts import ArtifactMask

    usable = np.ones(100, dtype=bool)
    usable[10:30] = False
    usable[50:60] = False
    mask = ArtifactMask(usable=usable, usable_fraction=float(usable.mean()),
                        segments=(Segment("movement", 1.0, 3.0), Segment("clipping", 2.0, 2.5),
                                  Segment("posture_change", 5.0, 6.0)),
                        movement_threshold_ratio=2.0, confidence=1.0, flags=())
    only = mask.motion_only(10.0)
    assert only.sum() == 20 + 10 - 5
    assert not only[20:25].any() and only[10:20].all() and only[25:30].all()
    assert only[50:60].all() and not only[usable].any()


@pytest.mark.parametrize(("n", "length"), [(75_000, 32), (300_001, 125), (70_000, 7)])
def test_block_std_equals_numpy_std_of_the_centred_blocks(n: int, length: int) -> None:
    from features.artifacts import _block_std

    rng = np.random.default_rng(n)
    x = 5.0 + 3.0 * rng.standard_normal(n)
    m = n // length
    blocks = x[: m * length].reshape(m, length)
    # Reference: numpy.std of each block less its mean (the kernel's definition). The
    # kernel sums the deviations from each block's first sample (shifted data): with that
    # sample a few SD from the block's mean, the two sums cancel by a factor of about ten
    # at most, so a few hundred units in the last place at worst; rtol 1e-13. The chunks
    # (2**16 samples) split these traces, so a chunk boundary is covered.
    want = np.std(blocks - blocks.mean(axis=1, keepdims=True), axis=1)
    np.testing.assert_allclose(_block_std(x, length), want, rtol=1e-13)
    # An offset of a million (a raw load cell's reading) is removed by the shift itself,
    # before any sum; adding it rounds each sample by up to half an ulp of 1e6 (6e-11, 2e-11
    # of the SD of 3), hence rtol 1e-9.
    np.testing.assert_allclose(_block_std(x + 1.0e6, length), want, rtol=1e-9)
    ints = rng.integers(-2000, 2000, size=n, dtype=np.int16)
    blocks_i = ints[: m * length].astype(np.float64).reshape(m, length)
    np.testing.assert_allclose(_block_std(ints, length), np.std(
        blocks_i - blocks_i.mean(axis=1, keepdims=True), axis=1), rtol=1e-13)


@pytest.mark.parametrize("level", [0.1, 1.0 / 3.0, 12345.678, -7.77e5, 3.3e-7])
def test_block_std_of_a_constant_block_is_exactly_zero(level: float) -> None:
    from features.artifacts import _block_std

    # A flat line is found where a block's spread is at most 1e-4 of the median one,
    # which is 0 when most blocks are flat: a constant block must give 0 exactly, not a
    # rounding residue (every deviation from the block's first sample is exactly 0).
    x = np.full(75_000, level)
    x[40_000:] += np.random.default_rng(3).standard_normal(35_000)
    got = _block_std(x, 32)
    assert np.all(got[: 40_000 // 32] == 0.0)
    assert np.all(got[40_000 // 32 + 1:] > 0.0)


def test_clipping_and_flat_runs_match_a_direct_scan_of_each_extreme() -> None:
    from features.artifacts import _BRIEF_CLIP_S, _MIN_CLIP_S, _MIN_CLIP_SAMPLES, _flat_and_clipping

    fs = 250.0
    rng = np.random.default_rng(11)
    x = rng.standard_normal(20_000)
    hi, lo = 10.0, -10.0
    # clipped stretches at the maximum and the minimum, brief and long, and flat lines
    for start, length, value in [(1000, 2, hi), (2000, 3, hi), (3000, 9, hi), (4000, 40, hi),
                                 (5000, 300, lo), (6000, 5, lo), (7000, 12, lo),
                                 (8000, 120, 0.5), (9000, 30, -0.25), (12_000, 70, hi)]:
        x[start:start + length] = value
    got = _flat_and_clipping([x], fs, 0.25, flags := [])

    # Reference: the definition, scanned directly: maximal runs of samples equal to each
    # extreme (numpy.diff of the padded mask), kept from min_clip samples, brief ones
    # (under _BRIEF_CLIP_S) only counted; flat lines are runs of equal samples elsewhere.
    def runs_of(mask: np.ndarray) -> list[tuple[int, int]]:
        d = np.diff(np.concatenate(([0], mask.astype(np.int8), [0])))
        return list(zip(np.flatnonzero(d == 1).tolist(), np.flatnonzero(d == -1).tolist(),
                        strict=True))

    min_clip = max(_MIN_CLIP_SAMPLES, int(np.ceil(_MIN_CLIP_S * fs)))
    brief = max(min_clip + 1, int(np.ceil(_BRIEF_CLIP_S * fs)))
    want = [("clipping", a, b) for v in (hi, lo) for a, b in runs_of(x == v)
            if b - a >= brief]
    n_brief = sum(1 for v in (hi, lo) for a, b in runs_of(x == v) if min_clip <= b - a < brief)
    clip_got = [s for s in got if s[0] == "clipping"]
    assert clip_got == want
    # the stretches of 3, 9 (at the maximum), 5 and 12 samples (at the minimum) are brief
    assert n_brief == 4 and "brief_clipping_not_masked" in flags
    flat_got = {(a, b) for k, a, b in got if k == "flat_line"}
    # a flat line from 0.25 s (63 samples at 250 Hz): the 120-sample stretch, not the 30
    assert (8000, 8120) in flat_got and not any(a <= 9000 < b for a, b in flat_got)


def test_known_raw_ranges_give_the_mask_the_ranges_would_be_read_for() -> None:
    # The engine hands the channels' (min, max) from the sample checks to the artifact
    # stage; with them or without, the same mask (clipping at a rail, a flat dropout),
    # for float cells and for integer counts.
    fused, raw, load = _inject()
    counts = [np.round(r * 100.0).astype(np.int32) for r in raw]
    for cells in (raw, counts):
        ranges = [(float(c.min()), float(c.max())) for c in cells]
        plain = mask_artifacts(fused, FS, load_n=load, load_fs_hz=LOAD_FS, raw_signals=cells)
        known = mask_artifacts(fused, FS, load_n=load, load_fs_hz=LOAD_FS, raw_signals=cells,
                               raw_ranges=ranges)
        some = mask_artifacts(fused, FS, load_n=load, load_fs_hz=LOAD_FS, raw_signals=cells,
                              raw_ranges=[ranges[0], None, ranges[2], None])
        for got in (known, some):
            assert got.segments == plain.segments and got.flags == plain.flags
            assert np.array_equal(got.usable, plain.usable)
        assert any(s.kind == "clipping" for s in plain.segments)
        assert any(s.kind == "flat_line" for s in plain.segments)
    with pytest.raises(InvalidInputError, match="raw_ranges"):
        mask_artifacts(fused, FS, raw_signals=raw, raw_ranges=[(0.0, 1.0)])
    # a range that is not finite leaves the samples' own check in place
    bad = [r.copy() for r in raw]
    bad[1][100] = np.inf
    with pytest.raises(InvalidInputError, match=r"raw_signals\[1\]"):
        mask_artifacts(fused, FS, raw_signals=bad,
                       raw_ranges=[(float(b.min()), float(b.max())) for b in bad])


def test_segments_wholly_inside_a_gap_are_dropped_and_the_rest_kept() -> None:
    from features.artifacts import _outside_gaps

    # Reference: the definition, a span goes when every one of its samples lies in a gap
    # (counted directly per span), gaps themselves stay; overlapping gaps and spans that
    # straddle a gap's edge included.
    n = 5000
    rng = np.random.default_rng(9)
    gaps = [("gap", 100, 300), ("gap", 250, 400), ("gap", 4000, 4100)]
    spans = gaps + [("flat_line", int(a), int(a + w))
                    for a, w in zip(rng.integers(0, 4800, 300), rng.integers(1, 200, 300),
                                    strict=True)]
    in_gap = np.zeros(n, dtype=bool)
    for _, a, b in gaps:
        in_gap[a:b] = True
    want = [s for s in spans if s[0] == "gap" or not in_gap[s[1]:s[2]].all()]
    got = _outside_gaps(spans, gaps, n)
    assert got == want and len(want) < len(spans)
