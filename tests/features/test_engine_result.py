"""The engine's result carries what callers draw or dump: feature vector, windows, fused trace."""

from __future__ import annotations

import importlib

import numpy as np
import pytest

from features import ChannelInput, InvalidInputError, analyze, analyze_windows
from features.conditioning import condition_channels
from features.engine import Options
from features.feature_vector import FEATURE_NAMES
from features.fusion import fuse_channels
from simulation import SimulationSettings, simulate

DURATION_S = 100.0
# The modules themselves: the package re-exports a function under the first one's name.
feature_vector_module = importlib.import_module("features.feature_vector")
windows_module = importlib.import_module("features.windows")


@pytest.fixture(scope="module")
def recording():
    return simulate(SimulationSettings(duration_s=DURATION_S, fs_hz=250.0, n_channels=4,
                                       seed=41))


def _channels(rec):
    return [ChannelInput(samples=ch, label=lab, quantity=rec.quantity, unit=rec.unit,
                         position_m=None if rec.positions_m is None else rec.positions_m[i])
            for i, (ch, lab) in enumerate(zip(rec.channels, rec.labels, strict=True))]


@pytest.fixture(scope="module")
def plain(recording):
    return analyze(_channels(recording), recording.fs_hz)


def _values(vector):
    return [np.nan if f.value is None else f.value for f in vector.features]


def _counting(monkeypatch, module, name):
    calls = []
    real = getattr(module, name)

    def counted(*args, **kwargs):
        calls.append(kwargs.get("options"))
        return real(*args, **kwargs)

    monkeypatch.setattr(module, name, counted)
    return calls


def test_the_feature_vector_comes_with_the_result(recording, plain):
    vector = plain.feature_vector
    assert tuple(f.name for f in vector.features) == FEATURE_NAMES
    assert vector.feature_set_version == plain.feature_set_version
    # Simulated at the truth's heart rate (simulation): the vector holds the
    # engine's estimate of it, within the 1 bpm of the engine's end-to-end test.
    assert vector.get("heart_rate_mean_bpm").value == pytest.approx(
        recording.truth.heart_rate_bpm, abs=1.0)
    assert plain.windows is None and plain.fused_trace is None


def test_the_engine_computes_each_feature_vector_once(monkeypatch, recording):
    calls = _counting(monkeypatch, feature_vector_module, "feature_vector")
    analyze(_channels(recording), recording.fs_hz)
    assert len(calls) == 1
    calls.clear()
    result = analyze(_channels(recording), recording.fs_hz, options=Options(window_s=30.0))
    assert result.windows is not None
    # One for the whole recording and one for each window, none again afterwards.
    assert len(calls) == 1 + len(result.windows.windows)


def test_windows_asked_of_analyze_are_those_of_analyze_windows(recording, plain):
    channels = _channels(recording)
    result = analyze(channels, recording.fs_hz,
                     options=Options(window_s=30.0, window_overlap_s=10.0))
    alone = analyze_windows(channels, recording.fs_hz, window_s=30.0, overlap_s=10.0)
    windowed = result.windows
    # The grid of analyze_windows (Notes 1): starts every 30 - 10 = 20 s while a whole
    # 30-s window fits in 100 s, so at 0, 20, 40, 60 s, and the 10 s after 90 s left over.
    assert [w.start_s for w in windowed.windows] == [0.0, 20.0, 40.0, 60.0]
    assert windowed.unanalysed_tail_s == pytest.approx(10.0, abs=0.5 / recording.fs_hz)
    assert windowed.step_s == alone.step_s and windowed.n_failed == alone.n_failed
    for mine, theirs in zip(windowed.windows, alone.windows, strict=True):
        # The same engine calls on the same slices; the fusion's BLAS weighted sum may
        # round differently with memory alignment, by a few ulps (tests/features/test_fusion.py).
        np.testing.assert_allclose(_values(mine.feature_vector), _values(theirs.feature_vector),
                                   rtol=1e-9)
    # Asking for windows leaves the whole-recording numbers as they are.
    np.testing.assert_allclose(_values(result.feature_vector), _values(plain.feature_vector),
                               rtol=1e-9)


def test_windows_are_analysed_without_windows_or_a_kept_trace(monkeypatch, recording):
    calls = _counting(monkeypatch, windows_module, "analyze")
    result = analyze(_channels(recording), recording.fs_hz,
                     options=Options(window_s=30.0, keep_fused_trace=True))
    assert len(calls) == len(result.windows.windows) == 3
    assert all(o.window_s is None and not o.keep_fused_trace for o in calls)
    assert result.fused_trace is not None


def test_the_kept_fused_trace_is_the_trace_of_the_first_stages(recording, plain):
    channels = _channels(recording)
    result = analyze(channels, recording.fs_hz, options=Options(keep_fused_trace=True))
    # The conditioning and fusion stages run on their own, as analyze chains them
    # (features/engine.py: force channels with positions, static load for the centre
    # of pressure).
    cond = condition_channels(channels, recording.fs_hz, mains_hz="auto", empty_load_kg=0.0)
    fusion = fuse_channels(cond.signals, recording.fs_hz, units=cond.units,
                           positions_m=cond.positions_m, static_n=cond.baseline_si,
                           static_fs_hz=cond.baseline_fs_hz)
    assert result.fused_trace.shape == (result.input.n_samples,)
    assert result.input.amplitude_unit == fusion.unit
    # BLAS weighted sum in the fusion: a few ulps with memory alignment, as above.
    np.testing.assert_allclose(result.fused_trace, fusion.fused, rtol=1e-12, atol=1e-12)
    np.testing.assert_allclose(_values(result.feature_vector), _values(plain.feature_vector),
                               rtol=1e-9)


@pytest.mark.parametrize(("options", "match"), [
    (Options(window_s=10.0), r"`window_s` must be between 30 and 3600 s; got 10\."),
    (Options(window_s=200.0),
     r"`window_s` must be at most the recording length \(100 s\); got 200\."),
    (Options(window_s=60.0, window_overlap_s=60.0),
     r"`overlap_s` must be at least 0 s and less than `window_s` \(60 s\); got 60\."),
])
def test_window_options_break_their_rules_loudly(recording, options, match):
    with pytest.raises(InvalidInputError, match=match):
        analyze(_channels(recording), recording.fs_hz, options=options)
