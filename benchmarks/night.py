"""A whole simulated night: windowed analysis plus night summary, time, peak memory, truth.

Run: ``python -m benchmarks.night [--quick] [--fs 250 1000] [--hours 8]``.

1. A night (``simulation.night``: empty support, lying down, one 10-minute bed exit, getting
   up; four load cells) is written as an EDF file in a temporary directory by a child
   process, piece by piece (``write_night(..., file_format="edf")``).
2. A fresh child process opens the file with edfio without loading it
   (``lazy_load_data=True``) and gives the engine one sequence per cell whose slices read
   just that window (``EdfSignal.get_data_slice``): the road a night-job worker can take.
   It runs :func:`features.windows.analyze_windows` (``window_s`` 300, no overlap) and
   :func:`features.night.summarize_night`, and reports the wall time of the two together,
   the peak resident set (``resource.getrusage(RUSAGE_SELF).ru_maxrss`` and ``VmHWM`` of
   ``/proc/self/status``; the launcher stays small, since Linux carries the parent's
   resident size into a child's ``ru_maxrss``), and the summary against the truth.
3. ``--whole`` adds a row per rate where the child reads the whole file the way the
   service reads an upload today (``fileformats.edf.read_edf`` of the file's bytes: every
   sample as float64 in memory), for comparison.

Acceptance (issue 11): the bed exit within one window (300 s) of the truth and the night's
mean heart rate within 1 bpm of the truth; the peak resident set under 1 GiB at 1000 Hz.
The results as last measured are in ``benchmarks/README.md`` (section "Night").
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
from pathlib import Path

WINDOW_S = 300.0
LIMIT_MIB = 1024.0


class _EdfRow:
    """One EDF signal as a sliceable row: a slice reads only those seconds from the file."""

    def __init__(self, signal: object, fs_hz: float, n_samples: int) -> None:
        self.signal, self.fs, self.n = signal, fs_hz, n_samples

    def __len__(self) -> int:
        return self.n

    def __getitem__(self, item: slice):  # type: ignore[no-untyped-def]
        start, stop, step = item.indices(self.n)
        if step != 1:
            raise ValueError("only contiguous slices are supported")
        return self.signal.get_data_slice(start / self.fs, stop / self.fs)  # type: ignore[attr-defined]


def _vm_hwm_mib() -> float | None:
    try:
        for line in Path("/proc/self/status").read_text().splitlines():
            if line.startswith("VmHWM:"):
                return float(line.split()[1]) / 1024.0
    except OSError:
        return None
    return None


def _build(path: str, hours: float, fs: float, seed: int) -> dict:
    from dataclasses import asdict

    from simulation.night import NightSettings, write_night

    settings = NightSettings.scaled(hours * 3600.0, fs_hz=fs, seed=seed)
    t0 = time.perf_counter()
    rec = write_night(settings, path, file_format="edf")
    return {"build_s": time.perf_counter() - t0, "n_samples": rec.n_samples,
            "labels": list(rec.labels), "positions": [list(p) for p in rec.positions_m],
            "unit": rec.unit, "truth": {k: v for k, v in asdict(rec.truth).items()
                                        if k in ("occupied_spans_s", "bed_exits_s",
                                                 "occupied_s", "heart_rate_mean_bpm",
                                                 "n_clipped")}}


def _measure(path: str, meta: dict, fs: float, whole: bool) -> dict:
    from features.conditioning import ChannelInput
    from features.night import summarize_night
    from features.windows import analyze_windows

    t0 = time.perf_counter()
    if whole:
        from fileformats.edf import read_edf

        rows: list = list(read_edf(Path(path).read_bytes()).samples)
    else:
        import edfio

        edf = edfio.read_edf(path, lazy_load_data=True)
        rows = [_EdfRow(s, fs, meta["n_samples"]) for s in edf.signals]
    channels = [ChannelInput(samples=row, label=label, quantity="force", unit=meta["unit"],
                             position_m=tuple(pos))
                for row, label, pos in zip(rows, meta["labels"], meta["positions"],
                                           strict=True)]
    windowed = analyze_windows(channels, fs, window_s=WINDOW_S)
    summary = summarize_night(windowed)
    seconds = time.perf_counter() - t0
    return {
        "seconds": seconds, "cpu_seconds": time.process_time(),
        "ru_maxrss_mib": resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024.0,
        "vm_hwm_mib": _vm_hwm_mib(), "windows": len(windowed.windows),
        "failed": windowed.n_failed,
        "exits": [[e.start_s, e.end_s] for e in summary.bed_exits],
        "measures": {m.name: m.value for m in summary.measures},
    }


def _child(*args: str) -> dict:
    """Run this module in a fresh interpreter; the JSON of its last output line."""
    done = subprocess.run([sys.executable, "-m", "benchmarks.night", *args],
                          capture_output=True, text=True, check=True,
                          cwd=Path(__file__).resolve().parents[1])
    return dict(json.loads(done.stdout.strip().splitlines()[-1]))


def _verdict(meta: dict, r: dict) -> tuple[float | None, float | None]:
    """(worst exit-edge error in s, mean heart-rate error in bpm) against the truth."""
    truth = meta["truth"]
    want, got = truth["bed_exits_s"], r["exits"]
    exit_err = (max(max(abs(a - c), abs(b - d)) for (a, b), (c, d) in zip(want, got,
                                                                           strict=True))
                if len(want) == len(got) else None)
    hr = r["measures"]["heart_rate_mean_bpm"]
    return exit_err, None if hr is None else abs(hr - truth["heart_rate_mean_bpm"])


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--quick", action="store_true", help="1 h at 100 Hz (smoke run)")
    ap.add_argument("--hours", type=float, default=8.0)
    ap.add_argument("--fs", type=float, nargs="+", default=[250.0, 1000.0])
    ap.add_argument("--seed", type=int, default=0)
    ap.add_argument("--whole", action="store_true",
                    help="also read the whole file into memory, as the service does today")
    ap.add_argument("--build", metavar="PATH", help=argparse.SUPPRESS)
    ap.add_argument("--measure", metavar="PATH", help=argparse.SUPPRESS)
    ap.add_argument("--meta", help=argparse.SUPPRESS)
    ap.add_argument("--read-whole", action="store_true", help=argparse.SUPPRESS)
    args = ap.parse_args(argv)
    if args.build:
        print(json.dumps(_build(args.build, args.hours, args.fs[0], args.seed)))
        return 0
    if args.measure:
        print(json.dumps(_measure(args.measure, json.loads(args.meta), args.fs[0],
                                  args.read_whole)))
        return 0

    hours, rates = (1.0, [100.0]) if args.quick else (args.hours, args.fs)
    print(f"machine: {platform.machine()} cpus={os.cpu_count()} "
          f"python={platform.python_version()}; {hours:g} h night, 4 cells, EDF, "
          f"{WINDOW_S:g}-s windows, seed {args.seed}")
    head = (f"{'fs_hz':>6} {'read':>6} {'win':>4} {'err':>3} {'wall_s':>7} {'rss_MiB':>8} "
            f"{'hwm_MiB':>8} {'exit_err_s':>10} {'hr_err_bpm':>10} {'pass':>5}")
    print(head)
    print("-" * len(head))
    ok = True
    with tempfile.TemporaryDirectory() as tmp:
        for fs in rates:
            path = os.path.join(tmp, f"night_{fs:g}.edf")
            meta = _child("--build", path, "--hours", str(hours), "--fs", str(fs),
                          "--seed", str(args.seed))
            size = os.path.getsize(path) / 2**20
            for whole in (False, True) if args.whole else (False,):
                r = _child("--measure", path, "--meta", json.dumps(meta), "--fs", str(fs),
                           *(["--read-whole"] if whole else []))
                exit_err, hr_err = _verdict(meta, r)
                rss = max(r["ru_maxrss_mib"], r["vm_hwm_mib"] or 0.0)
                good = (exit_err is not None and exit_err <= WINDOW_S and hr_err is not None
                        and hr_err <= 1.0 and rss < LIMIT_MIB)
                ok &= good or whole
                print(f"{fs:>6g} {'whole' if whole else 'window':>6} {r['windows']:>4} "
                      f"{r['failed']:>3} {r['seconds']:>7.1f} {r['ru_maxrss_mib']:>8.0f} "
                      f"{r['vm_hwm_mib'] or float('nan'):>8.0f} "
                      f"{'-' if exit_err is None else f'{exit_err:.1f}':>10} "
                      f"{'-' if hr_err is None else f'{hr_err:.2f}':>10} "
                      f"{'yes' if good else 'NO':>5}")
            t = meta["truth"]
            print(f"        (file {size:.0f} MiB, built in {meta['build_s']:.0f} s; truth: "
                  f"exit {t['bed_exits_s']}, mean heart rate "
                  f"{t['heart_rate_mean_bpm']:.2f}/min; found exit {r['exits']}, "
                  f"{r['measures']['heart_rate_mean_bpm']:.2f}/min; clipped samples "
                  f"{t['n_clipped']})")
    print("columns: wall = reading + analyze_windows + summarize_night; rss = ru_maxrss, "
          "hwm = VmHWM of the child; exit_err = worst distance of the exit's start or end "
          "from the truth; pass = exit within one window, mean heart rate within 1 bpm, "
          f"peak under {LIMIT_MIB:g} MiB ('whole' rows are for comparison and not judged)")
    from schemas.responses import NOTICE  # after the children: the launcher stays small

    print(f"Caution: {NOTICE}")
    return 0 if ok else 1


if __name__ == "__main__":
    sys.exit(main())
