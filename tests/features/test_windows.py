"""Windowed analysis: the window grid, lazy slicing, per-window errors and the rules."""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np
import pytest

from features.conditioning import ChannelInput
from features.errors import InvalidInputError
from features.feature_vector import FEATURE_NAMES
from features.windows import analyze_windows, iter_windows
from simulation import SimulationSettings, simulate

FS = 250.0


def _channels(samples: Sequence[object], unit: str = "N") -> list[ChannelInput]:
    return [ChannelInput(samples=s, label=f"cell_{i}", quantity="force", unit=unit)
            for i, s in enumerate(samples)]


@pytest.fixture(scope="module")
def recording() -> tuple[np.ndarray, float]:
    rec = simulate(SimulationSettings(duration_s=200.0, fs_hz=FS, seed=31))
    assert rec.truth.heart_rate_bpm is not None
    return rec.channels[0], rec.truth.heart_rate_bpm


class _Guarded:
    """A 1-D sequence that refuses any read longer than ``limit`` samples, and logs reads."""

    def __init__(self, data: np.ndarray, limit: int) -> None:
        self.data, self.limit, self.reads = data, limit, []  # type: ignore[var-annotated]

    def __len__(self) -> int:
        return int(self.data.size)

    def __getitem__(self, item: slice) -> np.ndarray:
        if not isinstance(item, slice):
            raise TypeError("only slices may be read")
        start, stop, _ = item.indices(self.data.size)
        if stop - start > self.limit:
            raise AssertionError(f"read of {stop - start} samples")
        self.reads.append((start, stop))
        return self.data[item]


# --------------------------------------------------------------------------- the grid


def test_window_grid_overlap_and_dropped_tail(recording: tuple[np.ndarray, float]) -> None:
    x, truth_bpm = recording
    out = analyze_windows(_channels([x]), FS, window_s=60.0, overlap_s=30.0)
    # Hand count: starts every 30 s while start + 60 <= 200 -> 0, 30, ..., 120 (5 windows);
    # the last ends at 180 s, leaving a 20-s tail.
    assert [(w.start_s, w.end_s) for w in out.windows] == [
        (0.0, 60.0), (30.0, 90.0), (60.0, 120.0), (90.0, 150.0), (120.0, 180.0)]
    assert out.step_s == 30.0 and out.unanalysed_tail_s == pytest.approx(20.0)
    assert "tail_not_analysed" in out.flags and out.n_failed == 0
    for w in out.windows:
        assert w.error is None and w.feature_vector is not None
        assert tuple(f.name for f in w.feature_vector.features) == FEATURE_NAMES
        assert 0.0 <= w.confidence <= 1.0 and w.usable_fraction == pytest.approx(1.0)
        # Truth of the simulator; 3 bpm is the heart-rate acceptance line of issue 1.
        hr = w.feature_vector.get("heart_rate_mean_bpm").value
        assert hr is not None and abs(hr - truth_bpm) <= 3.0


def test_exact_fit_has_no_tail(recording: tuple[np.ndarray, float]) -> None:
    x, _ = recording
    out = analyze_windows(_channels([x[: int(100 * FS)]]), FS, window_s=50.0)
    assert len(out.windows) == 2 and out.unanalysed_tail_s == 0.0 and out.flags == ()


def test_slices_are_read_one_window_at_a_time(recording: tuple[np.ndarray, float]) -> None:
    x, _ = recording
    guarded = [_Guarded(x, limit=int(40 * FS)), _Guarded(x.copy(), limit=int(40 * FS))]
    out = analyze_windows(_channels(guarded), FS, window_s=40.0)
    assert len(out.windows) == 5
    for g in guarded:
        assert g.reads == [(int(k * 40 * FS), int((k + 1) * 40 * FS)) for k in range(5)]


def test_memory_mapped_input_gives_the_same_features(
    recording: tuple[np.ndarray, float], tmp_path: object
) -> None:
    x, _ = recording
    path = f"{tmp_path}/trace.f64"
    mm = np.memmap(path, dtype=np.float64, mode="w+", shape=x.shape)
    mm[:] = x
    mm.flush()
    ro = np.memmap(path, dtype=np.float64, mode="r", shape=x.shape)
    a = analyze_windows(_channels([ro]), FS, window_s=100.0)
    b = analyze_windows(_channels([x]), FS, window_s=100.0)
    assert [w.feature_vector for w in a.windows] == [w.feature_vector for w in b.windows]


def test_iter_windows_checks_before_the_first_window(recording: tuple[np.ndarray, float]) -> None:
    x, _ = recording
    with pytest.raises(InvalidInputError, match="`window_s` must be between"):
        iter_windows(_channels([x]), FS, window_s=5.0)  # raises without iterating
    it = iter_windows(_channels([x]), FS, window_s=100.0)
    assert next(it).index == 0 and next(it).index == 1
    with pytest.raises(StopIteration):
        next(it)


# --------------------------------------------------------------------------- errors


def test_bad_samples_in_one_window_are_recorded_not_raised(
    recording: tuple[np.ndarray, float],
) -> None:
    x = recording[0].copy()
    x[int(130 * FS)] = np.inf  # infinity is refused (a missing sample, NaN, is a gap)
    out = analyze_windows(_channels([x]), FS, window_s=60.0)
    assert [w.error is None for w in out.windows] == [True, True, False]
    bad = out.windows[2]
    assert bad.error is not None and bad.error.kind == "InvalidInputError"
    assert bad.error.code == "channels[0].samples" and bad.feature_vector is None
    assert bad.confidence == 0.0 and bad.usable_fraction is None
    assert out.n_failed == 1 and "windows_failed" in out.flags


def test_errors_about_the_call_are_raised(recording: tuple[np.ndarray, float]) -> None:
    x, _ = recording
    with pytest.raises(InvalidInputError, match=r"`channels\[0\].unit` must be one of") as info:
        analyze_windows(_channels([x], unit="furlong"), FS, window_s=60.0)
    assert info.value.field == "channels[0].unit"


def test_empty_support_windows_have_low_confidence() -> None:
    rec = simulate(SimulationSettings(duration_s=120.0, fs_hz=FS, seed=32, body_mass_kg=None))
    out = analyze_windows(_channels([rec.channels[0]]), FS, window_s=60.0)
    assert len(out.windows) == 2
    for w in out.windows:
        assert w.error is None and w.confidence < 0.3
        assert w.feature_vector is not None
        assert w.feature_vector.get("heart_rate_mean_bpm").value is None


@pytest.mark.parametrize(
    ("kwargs", "field", "match"),
    [
        ({"window_s": 10.0}, "window_s", r"`window_s` must be between 30 and 3600 s; got 10\."),
        ({"window_s": 4000.0}, "window_s", r"must be between 30 and 3600 s; got 4000\."),
        ({"window_s": float("nan")}, "window_s", r"`window_s` must be a finite number"),
        ({"window_s": "long"}, "window_s", r"`window_s` must be a number of seconds"),
        ({"window_s": 60.0, "overlap_s": 60.0}, "overlap_s",
         r"`overlap_s` must be at least 0 s and less than `window_s` \(60 s\); got 60\."),
        ({"window_s": 60.0, "overlap_s": -1.0}, "overlap_s", r"at least 0 s .* got -1\."),
        ({"window_s": 300.0}, "window_s",
         r"`window_s` must be at most the recording length \(200 s\); got 300\."),
    ],
)
def test_window_rules(recording: tuple[np.ndarray, float], kwargs: dict[str, object],
                      field: str, match: str) -> None:
    x, _ = recording
    with pytest.raises(InvalidInputError, match=match) as info:
        analyze_windows(_channels([x]), FS, **kwargs)  # type: ignore[arg-type]
    assert info.value.field == field


def test_channel_rules(recording: tuple[np.ndarray, float]) -> None:
    x, _ = recording
    with pytest.raises(InvalidInputError, match=r"`channels\[1\].samples` must have the same "
                                                r"length as channels\[0\].samples \(50000"):
        analyze_windows(_channels([x, x[:-1]]), FS, window_s=60.0)
    with pytest.raises(InvalidInputError, match=r"`channels\[0\].samples` must be a 1-D array"):
        analyze_windows(_channels([np.stack([x, x])]), FS, window_s=60.0)
    with pytest.raises(InvalidInputError, match=r"`channels` must hold 1 to 8 channels; got 0"):
        analyze_windows([], FS, window_s=60.0)
    with pytest.raises(InvalidInputError, match=r"`fs_hz` must be between 50 and 2000 Hz"):
        analyze_windows(_channels([x]), 10.0, window_s=60.0)


def test_windows_keep_occupancy_and_segments_on_the_recording_clock() -> None:
    # A 4-s movement at 130-134 s (the simulator's truth) falls in the third 60-s window;
    # its masked segment must be reported at 130 s, not at 10 s from the window start.
    rec = simulate(SimulationSettings(duration_s=200.0, fs_hz=FS, seed=31,
                                      movement_spans_s=((130.0, 134.0),)))
    out = analyze_windows(_channels([rec.channels[0]]), FS, window_s=60.0)
    for w in out.windows:
        assert w.occupancy is not None and w.occupancy.occupied  # 75 kg on the plate
        for s in w.segments:
            assert w.start_s <= s.start_s < s.end_s <= w.end_s
    moves = [s for s in out.windows[2].segments if s.kind == "movement"]
    # The engine pads a movement by MOVEMENT_PAD_S (0.5 s) and finds its edges to its
    # 0.25-s envelope blocks over 1 s: allow 2 s either side.
    assert any(s.start_s <= 134.0 and s.end_s >= 130.0 and abs(s.start_s - 130.0) <= 2.0
               for s in moves), moves
    assert not any(s.kind == "movement" for w in out.windows[:2] for s in w.segments)
