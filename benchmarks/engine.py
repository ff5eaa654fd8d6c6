"""Engine throughput and scaling benchmark.

Run: ``python -m benchmarks.engine [--quick]``. Prints one table: seconds per
hour of signal, samples per second and peak traced memory for one channel at
several rates and lengths, and the fitted exponent of time against length
(1.0 is linear). Traces come from the project's simulator with fixed seeds;
each case is warmed up once and timed as the median of several runs, all in
one process, so the ratios between rows are measured side by side.
"""

from __future__ import annotations

import argparse
import os
import platform
import statistics
import time
import tracemalloc

import numpy as np

from features import ChannelInput, analyze
from simulation import SimulationSettings, simulate

BLOCK_S = 1800.0
"""Longest simulated block; longer traces repeat blocks of different seeds end to end."""


def _recording(duration_s: float, fs_hz: float, n_channels: int, seed: int) -> list[ChannelInput]:
    blocks = []
    left, k = duration_s, 0
    while left > 0:
        length = min(BLOCK_S, left)
        blocks.append(simulate(SimulationSettings(duration_s=length, fs_hz=fs_hz,
                                                  n_channels=n_channels, seed=seed + k)))
        left -= length
        k += 1
    rec = blocks[0]
    return [
        ChannelInput(samples=np.concatenate([b.channels[i] for b in blocks]), label=lab,
                     quantity=rec.quantity, unit=rec.unit,
                     position_m=None if rec.positions_m is None else rec.positions_m[i])
        for i, lab in enumerate(rec.labels)
    ]


def _time(channels: list[ChannelInput], fs_hz: float, repeats: int) -> tuple[float, float]:
    analyze(channels, fs_hz)  # warm-up
    runs = []
    for _ in range(repeats):
        t0 = time.perf_counter()
        analyze(channels, fs_hz)
        runs.append(time.perf_counter() - t0)
    tracemalloc.start()
    analyze(channels, fs_hz)
    _, peak = tracemalloc.get_traced_memory()
    tracemalloc.stop()
    return statistics.median(runs), peak / 2**20


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--quick", action="store_true", help="short inputs only (CI smoke run)")
    ap.add_argument("--repeats", type=int, default=3)
    args = ap.parse_args(argv)

    print(f"machine: {platform.machine()} {platform.processor() or ''} cpus={os.cpu_count()} "
          f"python={platform.python_version()} numpy={np.__version__}")
    if args.quick:
        cases = [(100.0, 60.0, 1), (250.0, 60.0, 1), (250.0, 120.0, 1), (250.0, 60.0, 4)]
    else:
        cases = [(100.0, 3600.0, 1), (250.0, 3600.0, 1), (1000.0, 3600.0, 1), (250.0, 3600.0, 4)]
        cases += [(250.0, d, 1) for d in (300.0, 900.0, 1800.0, 7200.0, 14400.0, 28800.0)]
    print(f"{'rate_hz':>8} {'channels':>8} {'length_s':>9} {'time_s':>8} {'s_per_hour':>10} "
          f"{'samples_per_s':>14} {'peak_mib':>9}")
    scaling: list[tuple[float, float]] = []
    for fs, dur, nch in cases:
        chans = _recording(dur, fs, nch, seed=1)
        t, peak = _time(chans, fs, args.repeats if dur <= 3600 else 1)
        n = fs * dur * nch
        print(f"{fs:8.0f} {nch:8d} {dur:9.0f} {t:8.3f} {t * 3600 / dur:10.3f} "
              f"{n / t:14.0f} {peak:9.1f}")
        if fs == 250.0 and nch == 1:
            scaling.append((dur, t))
    if len(scaling) >= 2:
        lengths, times = np.log([s[0] for s in scaling]), np.log([s[1] for s in scaling])
        slope = float(np.polyfit(lengths, times, 1)[0])
        print(f"fitted exponent of time against length (250 Hz, 1 channel): {slope:.3f}")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
