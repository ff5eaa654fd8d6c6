"""The peer: the NeuroKit2 pipeline a data scientist would glue together instead.

NeuroKit2 is a development dependency only; nothing outside ``benchmarks/`` and the tests
imports it. :func:`peer_pipeline` runs, on one trace (the channels summed, as a user with
a four-cell plate would do in one line of numpy):

1. ``ppg``: ``nk.ppg_process(trace, sampling_rate=fs)``: cleaning (band-pass of the
   pulse band) and peak finding of a pulse-like waveform, rate and quality, the closest
   ready-made equivalent of our beat stage;
2. ``rsp``: ``nk.rsp_process(trace, sampling_rate=fs)``: cleaning of the breathing band,
   breath detection, rate and amplitude;
3. ``hrv``: ``nk.hrv_time``, ``nk.hrv_frequency`` and ``nk.hrv_nonlinear`` on the peaks of
   each consecutive 5-minute window (``window_s``). NeuroKit2's nonlinear measures grow
   quadratically with the number of beats (0.9 s for 5 minutes, about 120 s for one hour
   on this machine type), so a user analysing hours would window as here; a window with
   fewer than 10 peaks, or that raises, is counted in ``hrv_failed``.

:func:`whole_signal_hrv` times ``nk.hrv`` on all the peaks at once, for the note on the
quadratic cost. NeuroKit2 warnings are silenced here (they are about its own defaults).
"""

from __future__ import annotations

import time
import warnings
from typing import Any

import numpy as np
from numpy.typing import NDArray

MIN_WINDOW_PEAKS = 10


def available() -> str | None:
    """NeuroKit2's version, or None when it is not installed."""
    try:
        import neurokit2
    except ImportError:
        return None
    return str(neurokit2.__version__)


def peer_pipeline(trace: NDArray[np.float64], fs_hz: float, *,
                  window_s: float = 300.0) -> dict[str, Any]:
    """Run the peer pipeline once; seconds per stage, the total and the mean peak rate."""
    import neurokit2 as nk

    clock = time.perf_counter
    out: dict[str, Any] = {}
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        t0 = clock()
        _, info = nk.ppg_process(trace, sampling_rate=fs_hz)
        peaks = np.asarray(info["PPG_Peaks"], dtype=np.int64)
        out["ppg"] = clock() - t0

        t0 = clock()
        nk.rsp_process(trace, sampling_rate=fs_hz)
        out["rsp"] = clock() - t0

        t0 = clock()
        step = max(1, round(window_s * fs_hz))
        n_windows = max(1, trace.size // step)
        failed = 0
        for k in range(n_windows):
            a = k * step
            b = trace.size if k == n_windows - 1 else a + step
            p = peaks[(peaks >= a) & (peaks < b)] - a
            if p.size < MIN_WINDOW_PEAKS:
                failed += 1
                continue
            try:
                nk.hrv_time(p, sampling_rate=fs_hz)
                nk.hrv_frequency(p, sampling_rate=fs_hz)
                nk.hrv_nonlinear(p, sampling_rate=fs_hz)
            except Exception:  # noqa: BLE001 - a failing window is counted, not fatal
                failed += 1
        out["hrv"] = clock() - t0
    out["total"] = out["ppg"] + out["rsp"] + out["hrv"]
    out["hrv_windows"] = n_windows
    out["hrv_failed"] = failed
    out["mean_bpm"] = (60.0 * fs_hz / float(np.mean(np.diff(peaks)))
                       if peaks.size > 1 else None)
    return out


def whole_signal_hrv(trace: NDArray[np.float64], fs_hz: float) -> float:
    """Seconds for ``nk.hrv`` on all the peaks of ``trace`` at once (peak finding excluded)."""
    import neurokit2 as nk

    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        _, info = nk.ppg_process(trace, sampling_rate=fs_hz)
        peaks = np.asarray(info["PPG_Peaks"], dtype=np.int64)
        t0 = time.perf_counter()
        nk.hrv(peaks, sampling_rate=fs_hz)
        return time.perf_counter() - t0
