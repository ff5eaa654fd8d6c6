"""Windowed analysis of long recordings: the engine on consecutive windows, one vector each.

Public functions
----------------
analyze_windows(channels, fs_hz, *, window_s, overlap_s, subject, recording, options)
    Every window analysed, collected into a :class:`WindowedAnalysis`.
iter_windows(channels, fs_hz, *, window_s, overlap_s, subject, recording, options)
    The same windows one at a time (a generator), for callers that stream the results.
collect_windows(windows, n_samples, fs_hz, *, window_s, overlap_s)
    The :class:`WindowedAnalysis` of windows that :func:`iter_windows` yielded.
"""

from __future__ import annotations

import math
from collections.abc import Iterable, Iterator, Sequence
from dataclasses import dataclass, replace
from typing import Any

import numpy as np

from features._checks import check_sampling_rate
from features.artifacts import Segment
from features.conditioning import ChannelInput
from features.engine import (
    FEATURE_SET_VERSION,
    AnalysisResult,
    Options,
    Recording,
    Subject,
    analyze,
)
from features.errors import InvalidInputError, UnusableSignalError
from features.feature_vector import FeatureVector
from features.limits import MAX_CHANNELS, MAX_WINDOW_S, MIN_WINDOW_S
from features.quality import OccupancyResult

__all__ = [
    "MAX_WINDOW_S",
    "MIN_WINDOW_S",
    "WindowError",
    "WindowResult",
    "WindowedAnalysis",
    "analyze_windows",
    "collect_windows",
    "iter_windows",
]


# Error fields that describe the call rather than the samples of one window: raised at once,
# since every window would fail alike.
_CALL_FIELDS = ("fs_hz", "channels", "mains_hz", "empty_load_kg", "rate_range_bpm")
_CALL_PREFIXES = ("subject.", "recording.", "options.")


@dataclass(frozen=True)
class WindowError:
    """Why one window has no analysis.

    Attributes
    ----------
    kind
        ``"InvalidInputError"`` or ``"UnusableSignalError"``.
    code
        The error's ``field`` (invalid input) or ``reason`` (unusable signal).
    message
        The engine's message; sample indices in it count from the window start.
    """

    kind: str
    code: str
    message: str


@dataclass(frozen=True)
class WindowResult:
    """One analysed window.

    Attributes
    ----------
    index
        Position of the window, from 0.
    start_s, end_s
        Span of the window from the first sample of the recording (s); ``end_s`` is the time
        of the sample after the last one in the window.
    feature_vector
        The window's :class:`features.feature_vector.FeatureVector`; None when ``error``.
    confidence
        Mean of the heart-rate, variability, morphology, respiration and respiratory-
        modulation family confidences of the window, in [0, 1]; 0 when ``error``.
    usable_fraction
        Share of the window not masked as artifact; None when ``error``.
    flags
        The engine's warnings for the window; :data:`features.engine.GAPS_WARNING` when it
        holds samples the device lost (their ``segments`` of kind ``"gap"``).
    error
        Set when the engine raised for this window, else None.
    occupancy
        The engine's :class:`features.engine.OccupancyResult` for the window; None when
        ``error``.
    segments
        The engine's masked segments of the window (``QualityResult.segments``), with their
        times moved to the recording's clock (window start added); empty when ``error``.
    """

    index: int
    start_s: float
    end_s: float
    feature_vector: FeatureVector | None
    confidence: float
    usable_fraction: float | None
    flags: tuple[str, ...]
    error: WindowError | None = None
    occupancy: OccupancyResult | None = None
    segments: tuple[Segment, ...] = ()


@dataclass(frozen=True)
class WindowedAnalysis:
    """All windows of one recording.

    Attributes
    ----------
    window_s, overlap_s, step_s
        Window length, overlap and step between window starts (s), as realised on the
        sample grid (rounded to whole samples).
    fs_hz, duration_s
        Sampling rate (Hz) and length of the whole recording (s).
    windows
        The windows in time order; all have length ``window_s``.
    unanalysed_tail_s
        Time after the end of the last window (s): a tail shorter than a window is dropped
        (flag ``"tail_not_analysed"``), so every window has the same length and its
        duration-dependent features (VLF power, pauses per hour) stay comparable.
    n_failed
        Windows whose analysis raised (their ``error`` is set).
    feature_set_version
        Version of the catalogue behind every window's vector.
    flags
        ``"tail_not_analysed"`` and ``"windows_failed"`` when they apply.
    """

    window_s: float
    overlap_s: float
    step_s: float
    fs_hz: float
    duration_s: float
    windows: tuple[WindowResult, ...]
    unanalysed_tail_s: float
    n_failed: int
    feature_set_version: str
    flags: tuple[str, ...]


def analyze_windows(
    channels: Sequence[ChannelInput],
    fs_hz: float,
    *,
    window_s: float,
    overlap_s: float = 0.0,
    subject: Subject | None = None,
    recording: Recording | None = None,
    options: Options | None = None,
) -> WindowedAnalysis:
    """Analyse a long recording in consecutive windows of equal length.

    Parameters
    ----------
    channels
        1 to ``features.limits.MAX_CHANNELS`` :class:`features.conditioning.ChannelInput`
        of equal length. Their ``samples`` may be numpy arrays, ``numpy.memmap`` arrays or
        any 1-D sequence that supports ``len`` and slicing; they are sliced one window at a
        time and never copied or concatenated whole.
    fs_hz
        Sampling rate, Hz, within ``features.limits.MIN_FS_HZ`` to ``MAX_FS_HZ``.
    window_s
        Window length (s), within ``features.limits.MIN_WINDOW_S`` to ``MAX_WINDOW_S``, at
        most the recording length.
    overlap_s
        Overlap of consecutive windows (s), at least 0 and less than ``window_s``.
    subject, recording, options
        Passed to :func:`features.engine.analyze` for every window, with the options'
        ``window_s`` and ``keep_fused_trace`` turned off (a window has no windows).

    Returns
    -------
    WindowedAnalysis

    Raises
    ------
    InvalidInputError
        For a window length or overlap out of range, channels of unequal length, or any
        error of :func:`features.engine.analyze` about the call itself (sampling rate,
        channel metadata, subject, recording, options), which would fail every window.
        Errors about the samples of one window, and :class:`UnusableSignalError`, are
        recorded in that window's ``error`` instead.

    Notes
    -----
    1. Window ``k`` spans samples ``k * S`` to ``k * S + W`` with ``W = round(window_s *
       fs_hz)`` and ``S = W - round(overlap_s * fs_hz)``; windows are made while they fit
       inside the recording. The shorter tail is dropped and reported
       (``unanalysed_tail_s``).
    2. Each window is a slice of every channel (a view for numpy and memory-mapped
       arrays) handed to :func:`features.engine.analyze`; its result is reduced to the
       feature vector, the window confidence and the usable fraction before the next window
       is read, so memory is bounded by one window's analysis whatever the recording
       length. Windows are analysed independently: nothing carries over between them
       (each finds its own beat template, polarity and breathing baseline).
    3. Measured with ``python -m benchmarks.windows`` (x86-64, 2 shared cores, Python 3.11,
       numpy 2.4): an 8-hour, 1000-Hz, 4-channel float32 trace (439 MiB file), 96 windows
       of 5 min, takes 27 s wall / 25 s CPU (about 0.3 s a window). Peak traced allocation
       (``tracemalloc``) 31 MiB; peak resident set (``ru_maxrss``) 151 MiB when each window
       is read from the file as it comes, 586 MiB with one ``numpy.memmap`` over the whole
       file, the difference being the file's pages left mapped (reclaimable page cache),
       not memory held by the analysis. At 250 Hz, 1, 2, 4 and 8 h take 2.6, 5.3, 10.0 and
       19.4 s of CPU: time grows as length^0.96, linearly.
    """
    windows = iter_windows(channels, fs_hz, window_s=window_s, overlap_s=overlap_s,
                           subject=subject, recording=recording, options=options)
    return collect_windows(windows, _length(channels), fs_hz, window_s=window_s,
                           overlap_s=overlap_s)


def collect_windows(windows: Iterable[WindowResult], n_samples: int, fs_hz: float, *,
                    window_s: float, overlap_s: float = 0.0) -> WindowedAnalysis:
    """The :class:`WindowedAnalysis` of the windows :func:`iter_windows` yielded.

    For callers that watch the windows go by (a night job reports its progress) and then
    want what :func:`analyze_windows` returns; ``n_samples`` is the length of the channels.
    """
    done = tuple(windows)
    fs = float(fs_hz)
    n = int(n_samples)
    n_win, n_step = _grid(window_s, overlap_s, fs)
    covered = done[-1].end_s if done else 0.0
    tail = max(0.0, n / fs - covered)
    failed = sum(w.error is not None for w in done)
    flags = []
    if tail > 0:
        flags.append("tail_not_analysed")
    if failed:
        flags.append("windows_failed")
    return WindowedAnalysis(
        window_s=n_win / fs, overlap_s=(n_win - n_step) / fs, step_s=n_step / fs, fs_hz=fs,
        duration_s=n / fs, windows=done, unanalysed_tail_s=tail, n_failed=failed,
        feature_set_version=FEATURE_SET_VERSION, flags=tuple(flags),
    )


def iter_windows(
    channels: Sequence[ChannelInput],
    fs_hz: float,
    *,
    window_s: float,
    overlap_s: float = 0.0,
    subject: Subject | None = None,
    recording: Recording | None = None,
    options: Options | None = None,
) -> Iterator[WindowResult]:
    """Yield the windows of :func:`analyze_windows` one at a time.

    Parameters, Raises and Notes are those of :func:`analyze_windows`; the input is checked
    before the first window is yielded. Holding no list of results, this keeps memory at one
    window's analysis for recordings of any length.
    """
    fs = check_sampling_rate(fs_hz)
    _check_channels(channels)
    n = _length(channels)
    n_win, n_step = _grid(window_s, overlap_s, fs)
    if n_win > n:
        raise InvalidInputError(
            "window_s", f"`window_s` must be at most the recording length ({n / fs:g} s); "
            f"got {window_s:g}. Use a shorter window or analyse the whole recording."
        )
    if options is not None:
        options = replace(options, window_s=None, keep_fused_trace=False)
    return _windows(channels, fs, n, n_win, n_step, subject, recording, options)


# --------------------------------------------------------------------------- validation


def _check_channels(channels: Sequence[ChannelInput]) -> None:
    if isinstance(channels, str | bytes) or not isinstance(channels, Sequence):
        raise InvalidInputError(
            "channels", f"`channels` must be a sequence of ChannelInput; got "
            f"{type(channels).__name__}."
        )
    if not 1 <= len(channels) <= MAX_CHANNELS:
        raise InvalidInputError(
            "channels", f"`channels` must hold 1 to {MAX_CHANNELS} channels; got {len(channels)}."
        )
    for i, ch in enumerate(channels):
        if not isinstance(ch, ChannelInput):
            raise InvalidInputError(
                f"channels[{i}]", f"`channels[{i}]` must be a ChannelInput; got "
                f"{type(ch).__name__}."
            )
        ndim = getattr(ch.samples, "ndim", 1)
        if ndim != 1 or not hasattr(ch.samples, "__len__") or not hasattr(
                ch.samples, "__getitem__"):
            raise InvalidInputError(
                f"channels[{i}].samples", f"`channels[{i}].samples` must be a 1-D array or "
                f"sequence that supports len() and slicing; got {type(ch.samples).__name__}"
                + (f" with {ndim} dimensions." if ndim != 1 else ".")
            )
    n = len(channels[0].samples)  # type: ignore[arg-type]
    for i, ch in enumerate(channels[1:], start=1):
        m = len(ch.samples)  # type: ignore[arg-type]
        if m != n:
            raise InvalidInputError(
                f"channels[{i}].samples", f"`channels[{i}].samples` must have the same length "
                f"as channels[0].samples ({n} samples); got {m}."
            )


def _length(channels: Sequence[ChannelInput]) -> int:
    return int(len(channels[0].samples))  # type: ignore[arg-type]


def _grid(window_s: float, overlap_s: float, fs: float) -> tuple[int, int]:
    """Window and step lengths in samples, after checking both against their rules."""
    w = _number("window_s", window_s)
    if not MIN_WINDOW_S <= w <= MAX_WINDOW_S:
        raise InvalidInputError(
            "window_s", f"`window_s` must be between {MIN_WINDOW_S:g} and {MAX_WINDOW_S:g} s; "
            f"got {window_s:g}."
        )
    o = _number("overlap_s", overlap_s)
    if not 0.0 <= o < w:
        raise InvalidInputError(
            "overlap_s", f"`overlap_s` must be at least 0 s and less than `window_s` "
            f"({w:g} s); got {overlap_s:g}."
        )
    n_win = round(w * fs)
    n_step = n_win - round(o * fs)
    if n_step < 1:
        raise InvalidInputError(
            "overlap_s", f"`overlap_s` must leave a step of at least one sample "
            f"({1.0 / fs:g} s) at {fs:g} Hz; got {overlap_s:g} with window_s {w:g}."
        )
    return n_win, n_step


def _number(name: str, value: Any) -> float:
    try:
        out = float(value)
    except (TypeError, ValueError):
        raise InvalidInputError(name, f"`{name}` must be a number of seconds; got {value!r}.") \
            from None
    if not math.isfinite(out):
        raise InvalidInputError(name, f"`{name}` must be a finite number of seconds; got "
                                      f"{value!r}.")
    return out


def _is_call_error(field: str) -> bool:
    """True for an error about the call (metadata, rate, options), not one window's samples."""
    if field in _CALL_FIELDS or field.startswith(_CALL_PREFIXES):
        return True
    return field.startswith("channels[") and not field.endswith(".samples")


# --------------------------------------------------------------------------- kernels


def _windows(
    channels: Sequence[ChannelInput],
    fs: float,
    n: int,
    n_win: int,
    n_step: int,
    subject: Subject | None,
    recording: Recording | None,
    options: Options | None,
) -> Iterator[WindowResult]:
    for k, a in enumerate(range(0, n - n_win + 1, n_step)):
        b = a + n_win
        sliced = [replace(ch, samples=ch.samples[a:b]) for ch in channels]  # type: ignore[index]
        try:
            result = analyze(sliced, fs, subject=subject, recording=recording, options=options)
        except InvalidInputError as exc:
            if _is_call_error(exc.field):
                raise
            yield _failed(k, a, b, fs, WindowError("InvalidInputError", exc.field, exc.message))
            continue
        except UnusableSignalError as exc:
            yield _failed(k, a, b, fs, WindowError("UnusableSignalError", exc.reason,
                                                   exc.message))
            continue
        yield _summary(k, a, b, fs, result)


def _summary(k: int, a: int, b: int, fs: float, result: AnalysisResult) -> WindowResult:
    families = (result.heart_rate.confidence, result.variability.confidence,
                result.morphology.confidence, result.respiration.confidence,
                result.modulation.confidence)
    confidence = float(np.clip(np.mean(families), 0.0, 1.0))
    return WindowResult(
        index=k, start_s=a / fs, end_s=b / fs, feature_vector=result.feature_vector,
        confidence=confidence, usable_fraction=float(result.quality.usable_fraction),
        flags=tuple(result.warnings), occupancy=result.occupancy,
        segments=tuple(replace(s, start_s=a / fs + s.start_s, end_s=a / fs + s.end_s)
                       for s in result.quality.segments),
    )


def _failed(k: int, a: int, b: int, fs: float, error: WindowError) -> WindowResult:
    return WindowResult(index=k, start_s=a / fs, end_s=b / fs, feature_vector=None,
                        confidence=0.0, usable_fraction=None, flags=(), error=error)
