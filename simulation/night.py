"""A simulated night in bed, with its truth: for the night summary's tests and benchmarks.

Scenario: a load-cell frame with four cells under a bed. The support is empty in the
evening; the occupant lies down, leaves the bed once for about ten minutes in the night and
gets up in the morning, after which the support is empty again. Heart rate and breathing
rate drift slowly over the night (highest in the evening, lowest in the second third, up
again towards morning), and there are a few movements. Invented data, for tests and
benchmarks only.

Public API
----------
NightSettings
    Frozen dataclass of the night's knobs; ``NightSettings.scaled(duration_s)`` places the
    same events at the same fractions of a night of any length.
simulate_night(settings) -> SimulatedNight
    The whole night in memory (float32 channels) with its truth; for short nights.
write_night(settings, path, *, file_format) -> NightRecording
    The night written piece by piece to a float32 file (``"f32"``: channels as rows) or an
    EDF file (``"edf"``), holding one piece of at most ``chunk_s`` in memory at a time.

Notes
-----
The night is cut into pieces at every event (lying down, leaving, coming back, getting up)
and at every multiple of ``chunk_s``; each piece is one run of
:func:`simulation.simulate` (its longest is 1800 s) with the heart rate and
breathing rate of the drift curves at the piece's middle, an occupant of ``body_mass_kg``
or an empty support. Pieces are joined end to end: beat and breath phases restart at a
seam, as they would not in a body; a seam may be masked as a short movement. Getting into
and out of bed adds a 4-s movement at the seam.
"""

from __future__ import annotations

import io
import math
from collections.abc import Callable
from dataclasses import dataclass, replace
from pathlib import Path

import numpy as np

from simulation import SettingsError, SimulationSettings, simulate

__all__ = [
    "EDF_PHYSICAL_RANGE_N",
    "NightRecording",
    "NightSettings",
    "NightTruth",
    "SimulatedNight",
    "simulate_night",
    "write_night",
]

EDF_PHYSICAL_RANGE_N = (-100.0, 400.0)
"""Physical range of every cell in the EDF file (N): a quarter of a 75-kg occupant's weight
(184 N) with movement bursts of up to 60 N rms fits; 16 bits give a step of 7.6 mN."""
_MOVE_AT_SEAM_S = 4.0
_MIN_PIECE_S = 10.0  # the base simulator's shortest recording


@dataclass(frozen=True)
class NightSettings:
    """Settings of one simulated night (defaults: 8 h, one 10-minute exit).

    Parameters
    ----------
    duration_s : float
        Length of the recording, s (at least 600).
    fs_hz : float
        Sampling rate, 50-2000 Hz (whole numbers of samples a second, for EDF records).
    lie_down_s, get_up_s : float
        When the occupant lies down and gets up, s; empty support before and after.
    exits_s : tuple of (start_s, end_s)
        Bed exits, inside the time in bed.
    heart_rate_bpm : (evening, lowest, morning)
        Heart-rate drift: from evening to lowest (at ``lowest_at_fraction`` of the time in
        bed) to morning, as half-cosine ramps.
    breathing_rate_per_min : (evening, lowest, morning)
        Breathing-rate drift, the same shape.
    lowest_at_fraction : float
        Where in the time in bed both rates are lowest, 0-1.
    movement_count : int
        Random 2-5 s movements while in bed (besides those of getting in and out).
    body_mass_kg : float
        The occupant.
    snr_db : float
        Cardiac-to-noise ratio of the base simulator, dB.
    chunk_s : float
        Longest piece simulated at once, s (10-1800).
    seed : int
        Seed of every random draw.
    """

    duration_s: float = 8 * 3600.0
    fs_hz: float = 250.0
    lie_down_s: float = 900.0
    get_up_s: float = 8 * 3600.0 - 900.0
    exits_s: tuple[tuple[float, float], ...] = ((13_000.0, 13_600.0),)
    heart_rate_bpm: tuple[float, float, float] = (66.0, 56.0, 62.0)
    breathing_rate_per_min: tuple[float, float, float] = (15.0, 12.5, 14.0)
    lowest_at_fraction: float = 0.6
    movement_count: int = 8
    body_mass_kg: float = 75.0
    snr_db: float = 10.0
    chunk_s: float = 600.0
    seed: int = 0

    def __post_init__(self) -> None:
        if not (math.isfinite(self.duration_s) and self.duration_s >= 600.0):
            raise SettingsError("duration_s", f"`duration_s` must be at least 600 s; got "
                                                  f"{self.duration_s!r}.")
        if not (50.0 <= self.fs_hz <= 2000.0 and float(self.fs_hz).is_integer()):
            raise SettingsError("fs_hz", f"`fs_hz` must be a whole number of Hz from 50 "
                                             f"to 2000; got {self.fs_hz!r}.")
        if not 10.0 <= self.chunk_s <= 1800.0:
            raise SettingsError("chunk_s", f"`chunk_s` must be between 10 and 1800 s; got "
                                               f"{self.chunk_s!r}.")
        events = [0.0, self.lie_down_s, *[t for span in self.exits_s for t in span],
                  self.get_up_s, self.duration_s]
        if any(b - a < _MIN_PIECE_S for a, b in zip(events[:-1], events[1:], strict=True)):
            raise SettingsError(
                "exits_s", "`lie_down_s`, `exits_s` and `get_up_s` must be in time order "
                f"inside the night, at least {_MIN_PIECE_S:g} s apart; got {events!r}.")

    @classmethod
    def scaled(cls, duration_s: float, **changes: object) -> NightSettings:
        """The default night's events at the same fractions of ``duration_s``.

        Lying down and getting up keep their 1/32 of the night from the ends; the exit
        starts at 0.45 of the night and lasts 600 s as in the default night.
        """
        d = float(duration_s)
        if not d >= 2400.0:
            raise SettingsError("duration_s", f"`duration_s` must be at least 2400 s for "
                                                  f"a scaled night; got {duration_s!r}.")
        start = float(round(0.45 * d))
        base = cls(duration_s=d, lie_down_s=float(round(d / 32.0)),
                   get_up_s=float(round(d - d / 32.0)), exits_s=((start, start + 600.0),))
        return replace(base, **changes)  # type: ignore[arg-type]


@dataclass(frozen=True)
class NightTruth:
    """What the simulator knows about the night (times in s from the first sample).

    Attributes
    ----------
    occupied_spans_s
        (start, end) of each stretch in bed.
    bed_exits_s
        (start, end) of each exit.
    occupied_s
        Total time in bed.
    heart_rate_mean_bpm
        60 times the number of J-J intervals over their total length, within the pieces in
        bed (intervals across a seam are not counted): beats per minute over the time in bed.
    piece_spans_s, piece_heart_rate_bpm, piece_breathing_rate_per_min
        Each piece and its realised rates (None for empty pieces).
    movement_spans_s
        Every simulated movement.
    n_clipped
        Samples clipped to the EDF physical range (0 for the float32 file).
    """

    occupied_spans_s: tuple[tuple[float, float], ...]
    bed_exits_s: tuple[tuple[float, float], ...]
    occupied_s: float
    heart_rate_mean_bpm: float
    piece_spans_s: tuple[tuple[float, float], ...]
    piece_heart_rate_bpm: tuple[float | None, ...]
    piece_breathing_rate_per_min: tuple[float | None, ...]
    movement_spans_s: tuple[tuple[float, float], ...]
    n_clipped: int


@dataclass(frozen=True)
class NightRecording:
    """The night's channel layout and truth, without its samples."""

    fs_hz: float
    n_samples: int
    labels: tuple[str, ...]
    positions_m: tuple[tuple[float, float], ...]
    unit: str
    truth: NightTruth
    settings: NightSettings


@dataclass(frozen=True)
class SimulatedNight:
    """A night in memory: ``channels`` (n_channels, n_samples) float32, and its recording."""

    channels: np.ndarray
    recording: NightRecording


def simulate_night(settings: NightSettings) -> SimulatedNight:
    """Simulate a whole night in memory (16 bytes a sample time for four float32 cells).

    Use :func:`write_night` for long nights at high rates.
    """
    n = round(settings.duration_s * settings.fs_hz)
    out = np.empty((4, n), dtype=np.float32)

    def sink(a: int, block: np.ndarray) -> None:
        out[:, a:a + block.shape[1]] = block

    recording = _run(settings, sink)
    return SimulatedNight(channels=out, recording=recording)


def write_night(settings: NightSettings, path: str | Path, *,
                file_format: str = "f32") -> NightRecording:
    """Write the night to ``path`` one piece at a time.

    Parameters
    ----------
    settings
        The night.
    path
        File to write (replaced).
    file_format
        ``"f32"``: float32 samples, channel after channel (shape (4, n) in C order), for
        ``numpy.memmap`` or ``numpy.fromfile``. ``"edf"``: EDF with one 1-s data record per
        second, 16-bit samples over :data:`EDF_PHYSICAL_RANGE_N`, labelled as the cells,
        dimension N; the header comes from edfio.

    Returns
    -------
    NightRecording
        Layout and truth (``truth.n_clipped`` counts samples clipped to the EDF range).
    """
    n = round(settings.duration_s * settings.fs_hz)
    path = Path(path)
    if file_format == "f32":
        out = np.memmap(path, dtype=np.float32, mode="w+", shape=(4, n))

        def sink(a: int, block: np.ndarray) -> None:
            out[:, a:a + block.shape[1]] = block
            out.flush()

        recording = _run(settings, sink)
        del out
        return recording
    if file_format == "edf":
        return _write_edf(settings, path, n)
    raise SettingsError("file_format", f"`file_format` must be one of edf, f32; got "
                                           f"{file_format!r}.")




# --------------------------------------------------------------------------- kernels


@dataclass(frozen=True)
class _Piece:
    start_s: float
    end_s: float
    occupied: bool
    movements: tuple[tuple[float, float], ...]  # within the piece, from its start


def _pieces(s: NightSettings) -> list[_Piece]:
    events = sorted({0.0, s.lie_down_s, s.get_up_s, s.duration_s,
                     *[t for span in s.exits_s for t in span]})
    cuts = set(events)
    for k in range(1, int(s.duration_s // s.chunk_s) + 1):
        t = k * s.chunk_s
        if all(abs(t - e) >= _MIN_PIECE_S for e in events):
            cuts.add(t)
    edges = sorted(cuts)
    in_bed = _in_bed_spans(s)
    rng = np.random.default_rng([s.seed, 7])
    moves: list[tuple[float, float]] = []
    for a, b in in_bed:  # getting in and out of bed
        moves += [(a, a + _MOVE_AT_SEAM_S), (b - _MOVE_AT_SEAM_S, b)]
    bed_total = sum(b - a for a, b in in_bed)
    for _ in range(s.movement_count):
        u = rng.uniform(0.05, 0.95) * bed_total
        for a, b in in_bed:
            if u < b - a:
                length = rng.uniform(2.0, 5.0)
                moves.append((a + u, a + u + length))
                break
            u -= b - a
    pieces = []
    for a, b in zip(edges[:-1], edges[1:], strict=True):
        occupied = any(x <= a and b <= y for x, y in in_bed)
        inside = tuple((max(m0, a) - a, min(m1, b) - a) for m0, m1 in sorted(moves)
                       if occupied and min(m1, b) - max(m0, a) >= 1.0)
        pieces.append(_Piece(a, b, occupied, inside))
    return pieces


def _in_bed_spans(s: NightSettings) -> list[tuple[float, float]]:
    spans, start = [], s.lie_down_s
    for a, b in s.exits_s:
        spans.append((start, a))
        start = b
    spans.append((start, s.get_up_s))
    return spans


def _drift(s: NightSettings, t: float, values: tuple[float, float, float]) -> float:
    """Evening -> lowest -> morning along the time in bed, half-cosine ramps."""
    u = min(1.0, max(0.0, (t - s.lie_down_s) / (s.get_up_s - s.lie_down_s)))
    evening, lowest, morning = values
    if u <= s.lowest_at_fraction:
        w = 0.5 * (1 - math.cos(math.pi * u / s.lowest_at_fraction))
        return evening + (lowest - evening) * w
    w = 0.5 * (1 - math.cos(math.pi * (u - s.lowest_at_fraction) / (1 - s.lowest_at_fraction)))
    return lowest + (morning - lowest) * w


def _run(s: NightSettings, sink: Callable[[int, np.ndarray], None]) -> NightRecording:
    """Simulate every piece, hand its float32 block to ``sink(first_sample, block)``."""
    fs = float(s.fs_hz)
    n_total = round(s.duration_s * fs)
    spans, hrs, brs, moves = [], [], [], []
    n_intervals, interval_s = 0, 0.0
    layout = None
    for i, p in enumerate(_pieces(s)):
        a, b = round(p.start_s * fs), round(p.end_s * fs)
        mid = 0.5 * (p.start_s + p.end_s)
        rec = simulate(SimulationSettings(
            duration_s=(b - a) / fs, fs_hz=fs, n_channels=4, snr_db=s.snr_db,
            heart_rate_bpm=_drift(s, mid, s.heart_rate_bpm),
            breathing_rate_per_min=_drift(s, mid, s.breathing_rate_per_min),
            body_mass_kg=s.body_mass_kg if p.occupied else None,
            movement_spans_s=p.movements, seed=s.seed * 100_003 + i,
        ))
        block = np.stack(rec.channels).astype(np.float32)[:, : b - a]
        sink(a, block)
        if layout is None:
            layout = (rec.labels, rec.positions_m, rec.unit)
        j = rec.truth.j_times_s
        spans.append((p.start_s, p.end_s))
        hrs.append(rec.truth.heart_rate_bpm if p.occupied else None)
        brs.append(rec.truth.breathing_rate_per_min if p.occupied else None)
        moves += [(p.start_s + m0, p.start_s + m1) for m0, m1 in p.movements]
        if p.occupied and j.size > 1:
            n_intervals += j.size - 1
            interval_s += float(j[-1] - j[0])
    assert layout is not None and layout[1] is not None
    in_bed = _in_bed_spans(s)
    truth = NightTruth(
        occupied_spans_s=tuple(in_bed), bed_exits_s=tuple(s.exits_s),
        occupied_s=float(sum(b - a for a, b in in_bed)),
        heart_rate_mean_bpm=60.0 * n_intervals / interval_s,
        piece_spans_s=tuple(spans), piece_heart_rate_bpm=tuple(hrs),
        piece_breathing_rate_per_min=tuple(brs), movement_spans_s=tuple(moves), n_clipped=0,
    )
    return NightRecording(fs_hz=fs, n_samples=n_total, labels=layout[0],
                          positions_m=layout[1], unit=layout[2], truth=truth, settings=s)


def _write_edf(s: NightSettings, path: Path, n: int) -> NightRecording:
    """EDF: edfio writes the header of a one-record file; the records follow, streamed."""
    import edfio

    fs = int(s.fs_hz)
    lo, hi = EDF_PHYSICAL_RANGE_N
    n_records = n // fs
    labels = ("front_left", "front_right", "rear_left", "rear_right")
    probe = edfio.Edf([edfio.EdfSignal.from_digital(
        np.zeros(fs, dtype=np.int16), fs, label=label, physical_dimension="N",
        physical_range=EDF_PHYSICAL_RANGE_N, digital_range=(-32768, 32767))
        for label in labels])
    header_bytes = 256 * (len(labels) + 1)
    buffer = io.BytesIO()
    probe.write(buffer)
    header = bytearray(buffer.getvalue()[:header_bytes])
    header[236:244] = f"{n_records:<8d}".encode("ascii")  # number of data records
    clipped = 0
    carry = np.zeros((4, 0), dtype=np.int16)
    with path.open("wb") as f:
        f.write(bytes(header))

        def sink(a: int, block: np.ndarray) -> None:
            nonlocal carry, clipped
            scaled = (block.astype(np.float64) - lo) / (hi - lo) * 65535.0 - 32768.0
            clipped += int(np.count_nonzero((scaled < -32768.5) | (scaled > 32767.5)))
            digital = np.clip(np.round(scaled), -32768, 32767).astype("<i2")
            carry = np.concatenate([carry, digital], axis=1)
            whole = carry.shape[1] // fs
            # One record: fs samples of each signal in turn (EDF spec, data record layout).
            records = carry[:, : whole * fs].reshape(4, whole, fs).transpose(1, 0, 2)
            f.write(np.ascontiguousarray(records).tobytes())
            carry = carry[:, whole * fs:]

        recording = _run(s, sink)
    assert recording.labels == labels
    truth = replace(recording.truth, n_clipped=clipped)
    return replace(recording, n_samples=n_records * fs, labels=labels, truth=truth)

