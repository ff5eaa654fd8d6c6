"""Windowed analysis of long recordings: time and peak memory, and linear growth with length.

Run: ``python -m benchmarks.windows [--quick]``.

1. A trace is built by tiling simulated 30-minute blocks (the simulator's longest; four
   seeds in turn) into a float32 ``numpy.memmap`` file of shape (channels, samples) in a
   temporary directory. Block seams fall on multiples of 1800 s, which are window
   boundaries for 5-minute windows, so no window straddles a seam.
2. Each measurement runs in a fresh child process (the parent's simulator memory does not
   count) that opens the file and calls :func:`features.windows.analyze_windows`:
   - ``memmap``: the channels are rows of one ``numpy.memmap`` over the whole file. The
     pages of the file that have been read stay mapped, so ``ru_maxrss`` also counts
     file-backed page cache (shared and reclaimable), up to the file size.
   - ``reader``: the channels are a small sequence type whose slices read just that window
     from the file (``numpy.fromfile`` with an offset), so nothing outside the current
     window is ever resident.
   Time is wall time without tracing; the peak of traced allocations (``tracemalloc``,
   which sees numpy's buffers) comes from a second, traced run; ``ru_maxrss`` is the child's
   peak resident set, and the peak anonymous resident memory (``RssAnon`` of
   ``/proc/self/status``) is sampled after every window.
3. Scaling: the first 1, 2, 4 and 8 h of a 250-Hz 4-channel trace, 5-minute windows; the
   exponent of a log-log fit of time against length is printed (1.0 is linear).

Recorded run (2026-12-02; x86-64, 2 cores shared with other work, Python 3.11.7, numpy
2.4.6; 5-min windows, no overlap; memory in MiB)::

    hours  fs_hz   input  win err   wall_s   cpu_s  ms/win   traced    anon   VmHWM ru_maxrss
        8   1000  memmap   96   0     27.3    24.6     273       31      82     586       586
        8   1000  reader   96   0     33.6    25.0     350       36     103     151       151
        1    250  memmap   12   0      3.8     2.6     315        -      70     142       142
        2    250  memmap   24   0      7.6     5.3     315        -      71     156       156
        4    250  memmap   48   0     13.5    10.0     276        -      66     187       187
        8    250  memmap   96   0     27.5    19.4     284        -      68     238       238
    time ~ length^0.94 (wall), length^0.96 (cpu)

The 8-h, 1000-Hz, 4-channel trace (439 MiB of float32) takes about 25 s of CPU; the traced
peak is 31-36 MiB whatever the length, the anonymous resident memory stays near 70-100 MiB
(of which about 60 MiB is the interpreter with numpy, scipy and PyWavelets loaded), and the
peak resident set is 151 MiB when the windows are read from the file one at a time. With
one ``numpy.memmap`` over the whole file the peak resident set reaches 586 MiB: the file's
pages that have been read stay mapped (page cache, shared and reclaimable by the kernel),
not memory the analysis holds.
"""

from __future__ import annotations

import argparse
import json
import os
import platform
import resource
import subprocess
import sys
import tempfile
import time
import tracemalloc
from pathlib import Path

import numpy as np

BLOCK_S = 1800.0
_SEEDS = (11, 12, 13, 14)


class _WindowReader:
    """One channel of the file; a slice reads only those samples (a copy of one window)."""

    def __init__(self, path: str, row: int, n_channels: int, n_samples: int) -> None:
        self.path, self.row, self.n = path, row, n_samples
        self.offset = row * n_samples * 4
        del n_channels

    def __len__(self) -> int:
        return self.n

    def __getitem__(self, item: slice) -> np.ndarray:
        start, stop, step = item.indices(self.n)
        if step != 1:
            raise ValueError("only contiguous slices are supported")
        return np.fromfile(self.path, dtype=np.float32, count=stop - start,
                           offset=self.offset + 4 * start)


def build_trace(path: str, hours: float, fs_hz: float, n_channels: int) -> tuple[int, dict]:
    """Tile simulated 30-min blocks into a (channels, samples) float32 memmap at ``path``."""
    from simulation import SimulationSettings, simulate

    n_block = round(BLOCK_S * fs_hz)
    n_blocks = int(np.ceil(hours * 3600.0 / BLOCK_S))
    n = round(hours * 3600.0 * fs_hz)
    out = np.memmap(path, dtype=np.float32, mode="w+", shape=(n_channels, n))
    meta: dict = {}
    for b in range(n_blocks):
        seed = _SEEDS[b % len(_SEEDS)]
        if seed not in meta:
            rec = simulate(SimulationSettings(duration_s=BLOCK_S, fs_hz=fs_hz,
                                              n_channels=n_channels, seed=seed))
            meta[seed] = {
                "block": np.stack(rec.channels).astype(np.float32),
                "labels": rec.labels, "quantity": rec.quantity, "unit": rec.unit,
                "positions": rec.positions_m,
            }
        a = b * n_block
        m = min(n_block, n - a)
        out[:, a : a + m] = meta[seed]["block"][:, :m]
    out.flush()
    first = meta[_SEEDS[0]]
    del out
    return n, {k: first[k] for k in ("labels", "quantity", "unit", "positions")}


def _status_mb(key: str) -> float | None:
    """A memory line of ``/proc/self/status`` (Linux), in MiB; None elsewhere."""
    try:
        for line in Path("/proc/self/status").read_text().splitlines():
            if line.startswith(key + ":"):
                return float(line.split()[1]) / 1024.0
    except OSError:
        return None
    return None


def _measure(args: argparse.Namespace) -> None:
    """Child process: analyse the file and print one JSON line of measurements."""
    from features.conditioning import ChannelInput
    from features.windows import analyze_windows, iter_windows

    meta = json.loads(args.meta)
    n_ch, n_total = meta["n_channels"], meta["n_samples"]
    n = round(args.hours * 3600.0 * args.fs)
    if args.mode == "memmap":
        mm = np.memmap(args.path, dtype=np.float32, mode="r", shape=(n_ch, n_total))
        rows = [mm[i, :n] for i in range(n_ch)]
    else:
        rows = [_WindowReader(args.path, i, n_ch, n_total) for i in range(n_ch)]
    positions = meta["positions"]
    channels = [
        ChannelInput(samples=rows[i], label=meta["labels"][i], quantity=meta["quantity"],
                     unit=meta["unit"],
                     position_m=None if positions is None else tuple(positions[i]))
        for i in range(n_ch)
    ]
    if args.mode == "reader" and n < n_total:
        for ch in channels:
            ch.samples.n = n  # type: ignore[attr-defined]
    next(iter_windows(channels, args.fs, window_s=args.window_s))  # warm-up: one window
    t0, c0 = time.perf_counter(), time.process_time()
    anon_peak = 0.0
    failed = 0
    per_window = []
    last = t0
    for w in iter_windows(channels, args.fs, window_s=args.window_s):
        now = time.perf_counter()
        per_window.append(now - last)
        last = now
        failed += w.error is not None
        anon = _status_mb("RssAnon")
        if anon is not None:
            anon_peak = max(anon_peak, anon)
    seconds, cpu = time.perf_counter() - t0, time.process_time() - c0
    n_windows = len(per_window)
    maxrss = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024.0
    hwm = _status_mb("VmHWM")
    traced = None
    if args.trace:
        tracemalloc.start()
        analyze_windows(channels, args.fs, window_s=args.window_s)
        traced = tracemalloc.get_traced_memory()[1] / 2**20
        tracemalloc.stop()
    print(json.dumps({
        "hours": args.hours, "fs_hz": args.fs, "mode": args.mode, "windows": n_windows,
        "failed": failed, "seconds": seconds, "cpu_seconds": cpu,
        "median_window_s": float(np.median(per_window)), "tracemalloc_peak_mb": traced,
        "ru_maxrss_mb": maxrss, "vm_hwm_mb": hwm,
        "rss_anon_peak_mb": anon_peak,
    }))


def _run(*extra: str) -> dict:
    """Run this module in a fresh interpreter and return the JSON of its last output line.

    The parent never simulates or analyses: on Linux a child's ``ru_maxrss`` starts from the
    resident size of the parent at fork time, so the parent stays small.
    """
    cmd = [sys.executable, "-m", "benchmarks.windows", *extra]
    done = subprocess.run(cmd, capture_output=True, text=True, check=True,
                          cwd=Path(__file__).resolve().parents[1])
    return dict(json.loads(done.stdout.strip().splitlines()[-1]))


def _build(path: str, hours: float, fs: float) -> dict:
    return _run("--build", path, "--hours", str(hours), "--fs", str(fs))


def _child(path: str, meta: dict, hours: float, fs: float, mode: str, window_s: float,
           trace: bool) -> dict:
    return _run("--measure", path, "--meta", json.dumps(meta), "--hours", str(hours),
                "--fs", str(fs), "--mode", mode, "--window-s", str(window_s),
                *(["--trace"] if trace else []))


def _row(r: dict) -> str:
    traced = "-" if r["tracemalloc_peak_mb"] is None else f"{r['tracemalloc_peak_mb']:.0f}"
    hwm = "-" if r["vm_hwm_mb"] is None else f"{r['vm_hwm_mb']:.0f}"
    return (f"{r['hours']:>5g} {r['fs_hz']:>6g} {r['mode']:>7} {r['windows']:>4} "
            f"{r['failed']:>3} {r['seconds']:>8.1f} {r['cpu_seconds']:>7.1f} "
            f"{1e3 * r['median_window_s']:>7.0f} "
            f"{traced:>8} {r['rss_anon_peak_mb']:>7.0f} {hwm:>7} {r['ru_maxrss_mb']:>9.0f}")


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--quick", action="store_true", help="1 h at 250 Hz only (smoke run)")
    ap.add_argument("--window-s", type=float, default=300.0)
    ap.add_argument("--measure", metavar="PATH", help=argparse.SUPPRESS)
    ap.add_argument("--build", metavar="PATH", help=argparse.SUPPRESS)
    ap.add_argument("--meta", help=argparse.SUPPRESS)
    ap.add_argument("--hours", type=float, default=8.0, help=argparse.SUPPRESS)
    ap.add_argument("--fs", type=float, default=1000.0, help=argparse.SUPPRESS)
    ap.add_argument("--mode", default="memmap", help=argparse.SUPPRESS)
    ap.add_argument("--trace", action="store_true", help=argparse.SUPPRESS)
    args = ap.parse_args(argv)
    if args.measure:
        args.path = args.measure
        _measure(args)
        return 0
    if args.build:
        n, meta = build_trace(args.build, args.hours, args.fs, 4)
        meta.update(n_channels=4, n_samples=n)
        print(json.dumps(meta))
        return 0

    print(f"machine: {platform.machine()} cpus={os.cpu_count()} "
          f"python={platform.python_version()} numpy={np.__version__}; "
          f"window {args.window_s:g} s, no overlap; memory in MiB")
    head = (f"{'hours':>5} {'fs_hz':>6} {'input':>7} {'win':>4} {'err':>3} {'wall_s':>8} "
            f"{'cpu_s':>7} {'ms/win':>7} {'traced':>8} {'anon':>7} {'VmHWM':>7} "
            f"{'ru_maxrss':>9}")
    print(head)
    print("-" * len(head))
    big = (1.0, 250.0) if args.quick else (8.0, 1000.0)
    lengths = (0.5, 1.0) if args.quick else (1.0, 2.0, 4.0, 8.0)
    with tempfile.TemporaryDirectory() as tmp:
        path = os.path.join(tmp, "trace.f32")
        t0 = time.perf_counter()
        meta = _build(path, big[0], big[1])
        print(f"(built {big[0]:g} h x {big[1]:g} Hz x 4 channels, "
              f"{os.path.getsize(path) / 2**20:.0f} MiB, in {time.perf_counter() - t0:.0f} s)")
        for mode in ("memmap", "reader"):
            print(_row(_child(path, meta, big[0], big[1], mode, args.window_s, trace=True)))
        if big[1] != 250.0:
            os.remove(path)
            meta = _build(path, lengths[-1], 250.0)
        rows = [_child(path, meta, h, 250.0, "memmap", args.window_s, trace=False)
                for h in lengths]
    print("-" * len(head))
    for r in rows:
        print(_row(r))
    hours = np.log([r["hours"] for r in rows])
    wall = float(np.polyfit(hours, np.log([r["seconds"] for r in rows]), 1)[0])
    cpu = float(np.polyfit(hours, np.log([r["cpu_seconds"] for r in rows]), 1)[0])
    print(f"time ~ length^{wall:.2f} (wall), length^{cpu:.2f} (cpu); log-log fit over "
          f"{len(rows)} lengths, 1.0 is linear")
    print("columns: wall and CPU seconds of the untraced run; median wall ms per window; "
          "traced = tracemalloc peak of a second, traced run; anon = peak RssAnon sampled "
          "after each window; VmHWM and ru_maxrss = peak resident set of the child")
    return 0


if __name__ == "__main__":
    sys.exit(main())
