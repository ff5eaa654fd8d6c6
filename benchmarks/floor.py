"""The floor: the numerical passes an engine like ours cannot avoid, timed on its input.

:func:`floor_passes` runs each pass once on the same channels the engine gets and returns
the wall time of each; the suite (:mod:`benchmarks.suite`) times it in pairs with the
engine and keeps the medians.
The passes, in the order they run:

1. ``bandpass``: zero-phase 2nd-order Butterworth band-pass of the beat band
   (:data:`features.beats.BEAT_BAND_HZ`, 1.5-16 Hz) on every channel at the input rate
   (``scipy.signal.sosfiltfilt``), then the plain sum of the channels when there are several.
2. ``second_band``: zero-phase 2nd-order Butterworth band-pass of the breathing band
   (0.05-1 Hz) on the summed trace at the input rate.
3. ``to_work_rate``: the beat-band trace brought to the beat detector's working rate
   (:data:`features.beats.WORK_RATE_HZ`, 125 Hz): every q-th sample when the rate is an
   integer multiple (the band-pass already removed what would alias), else
   ``scipy.signal.resample_poly``.
4. ``swt``: ``pywt.swt`` with ``sym4`` up to the deepest level the detector keeps
   (:func:`features.wavelets.levels_for_band` at 125 Hz: levels 3-5, so 5 levels),
   forward transform only, ``trim_approx=True, norm=True``, on the trace cut to a multiple
   of ``2**level``.
5. ``peaks``: ``scipy.signal.find_peaks`` with a refractory ``distance`` (0.3 s) and a
   ``prominence`` of one robust standard deviation, on the 125-Hz beat-band trace.
6. ``ensemble``: the -0.35 to +0.45 s epochs around every peak gathered by one fancy index,
   and their median (the beat template).
7. ``welch``: one Welch spectrum (``scipy.signal.welch``, 8-s Hann segments, half overlap)
   of the summed trace at the input rate.

This is a deliberately low floor: no inverse transform, no template matching, no per-beat
work beyond one median, no interval or variability measures. The engine's time divided by
the sum of these passes is the "multiple of the floor" in the suite's table.
"""

from __future__ import annotations

import time
from fractions import Fraction

import numpy as np
import pywt
from numpy.typing import NDArray
from scipy import signal

from features.beats import BEAT_BAND_HZ, TEMPLATE_WINDOW_S, WORK_RATE_HZ
from features.wavelets import WAVELET, levels_for_band

BREATHING_BAND_HZ = (0.05, 1.0)
"""Second band of the floor: where breathing lives (3-60 breaths per minute)."""

WELCH_SEGMENT_S = 8.0
PEAK_DISTANCE_S = 0.3

PASSES = ("bandpass", "second_band", "to_work_rate", "swt", "peaks", "ensemble", "welch")
"""Names of the timed passes, in the order they run."""


def floor_passes(signals: NDArray[np.float64], fs_hz: float) -> dict[str, float]:
    """Run the floor's passes once on ``signals`` (channels x samples); seconds per pass."""
    x = np.atleast_2d(np.asarray(signals, dtype=np.float64))
    times: dict[str, float] = {}
    clock = time.perf_counter

    t0 = clock()
    sos = signal.butter(2, BEAT_BAND_HZ, btype="bandpass", fs=fs_hz, output="sos")
    beat = signal.sosfiltfilt(sos, x, axis=-1)
    beat = beat.sum(axis=0) if beat.shape[0] > 1 else beat[0]
    summed = x.sum(axis=0) if x.shape[0] > 1 else x[0]
    times["bandpass"] = clock() - t0

    t0 = clock()
    sos2 = signal.butter(2, BREATHING_BAND_HZ, btype="bandpass", fs=fs_hz, output="sos")
    signal.sosfiltfilt(sos2, summed)
    times["second_band"] = clock() - t0

    t0 = clock()
    ratio = fs_hz / WORK_RATE_HZ
    if ratio >= 1.0 and float(ratio).is_integer():
        work = np.ascontiguousarray(beat[:: int(ratio)])
    else:
        frac = Fraction(WORK_RATE_HZ / fs_hz).limit_denominator(1000)
        work = signal.resample_poly(beat, frac.numerator, frac.denominator)
    times["to_work_rate"] = clock() - t0

    t0 = clock()
    top = max(levels_for_band(WORK_RATE_HZ, BEAT_BAND_HZ))
    usable = work.size - work.size % (2**top)
    pywt.swt(work[:usable], WAVELET, level=top, trim_approx=True, norm=True)
    times["swt"] = clock() - t0

    t0 = clock()
    scale = 1.4826 * float(np.median(np.abs(work - np.median(work))))
    peaks, _ = signal.find_peaks(work, distance=max(1, round(PEAK_DISTANCE_S * WORK_RATE_HZ)),
                                 prominence=scale)
    times["peaks"] = clock() - t0

    t0 = clock()
    before = round(-TEMPLATE_WINDOW_S[0] * WORK_RATE_HZ)
    after = round(TEMPLATE_WINDOW_S[1] * WORK_RATE_HZ)
    peaks = peaks[(peaks >= before) & (peaks < work.size - after)]
    if peaks.size:
        epochs = work[peaks[:, None] + np.arange(-before, after)[None, :]]
        np.median(epochs, axis=0)
    times["ensemble"] = clock() - t0

    t0 = clock()
    nper = min(summed.size, round(WELCH_SEGMENT_S * fs_hz))
    signal.welch(summed, fs=fs_hz, window="hann", nperseg=nper, noverlap=nper // 2)
    times["welch"] = clock() - t0
    return times
