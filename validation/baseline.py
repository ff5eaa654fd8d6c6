"""A deliberately naive beat detector, so the gain of the real engine is visible.

Sum the channels, band-pass 1-20 Hz (Butterworth, zero phase), take every peak at least 0.3 s
from a larger one (``scipy.signal.find_peaks`` with ``distance``). No polarity handling, no
movement masking, no occupancy check, no confidence.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
from scipy import signal

__all__ = ["BaselineResult", "detect_beats_baseline"]


@dataclass(frozen=True)
class BaselineResult:
    """Beat times (s) and heart rate (bpm, None with fewer than two beats)."""

    beat_times_s: np.ndarray
    mean_bpm: float | None


def detect_beats_baseline(
    channels: Sequence[np.ndarray],
    fs_hz: float,
    *,
    band_hz: tuple[float, float] = (1.0, 20.0),
    min_distance_s: float = 0.3,
    order: int = 4,
) -> BaselineResult:
    """Naive beat detection on the summed channels.

    Parameters
    ----------
    channels : sequence of 1-D arrays
        Channels of equal length, any unit.
    fs_hz : float
        Sampling rate, Hz (> 2 * upper band edge).
    band_hz : (float, float)
        Pass band, Hz (default 1-20).
    min_distance_s : float
        Minimum distance between peaks, s (default 0.3, i.e. up to 200 bpm).
    order : int
        Butterworth order (default 4), applied forward and backward.

    Returns
    -------
    BaselineResult
        Peak times and ``60 / median(interval)``.

    Raises
    ------
    ValueError
        If the channels are empty or differ in length, or the band is not below fs/2.

    Notes
    -----
    1. Sum the channels sample by sample.
    2. Zero-phase Butterworth band-pass (``scipy.signal.sosfiltfilt``).
    3. ``scipy.signal.find_peaks(x, distance=round(min_distance_s * fs_hz))``.
    4. Heart rate from the median peak-to-peak interval.
    """
    arrays = [np.asarray(c, dtype=float).ravel() for c in channels]
    if not arrays or any(a.size != arrays[0].size for a in arrays):
        raise ValueError("`channels` must be one or more arrays of equal length.")
    if not 0 < band_hz[0] < band_hz[1] < fs_hz / 2:
        raise ValueError(f"`band_hz` must satisfy 0 < low < high < fs_hz/2; got {band_hz!r}.")
    fused = np.sum(arrays, axis=0)
    sos = signal.butter(order, band_hz, btype="bandpass", fs=fs_hz, output="sos")
    filtered = signal.sosfiltfilt(sos, fused - np.mean(fused))
    peaks, _ = signal.find_peaks(filtered, distance=max(1, int(round(min_distance_s * fs_hz))))
    times = peaks / fs_hz
    mean_bpm = 60.0 / float(np.median(np.diff(times))) if times.size > 1 else None
    return BaselineResult(beat_times_s=times, mean_bpm=mean_bpm)
