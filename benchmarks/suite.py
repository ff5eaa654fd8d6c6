"""The benchmark suite: engine, floor, peer, memory and service, side by side in one run.

Run from the repository root: ``python -m benchmarks.suite [--quick] [--json PATH]``.

1. Traces: simulated seated force (``simulation``) in 30-minute blocks, seeds
   1-4 in turn, tiled to the longest length of each (rate, channels) pair; shorter
   lengths are the first minutes of the same trace. They are written as raw float64 files
   in a temporary directory.
2. Every case runs in two fresh child processes, one for heartsway (engine, then the
   floor of :mod:`benchmarks.floor` on the same input) and one for the peer of
   :mod:`benchmarks.peer`, so their memory figures do not mix. A child first sets the
   allocator as the service's processes do (:func:`service.allocator.tune_allocator`:
   without it an 8-hour engine call took 47 000-64 000 page faults, and the 8-hour
   multiple read 1.8-2.35 against 1.6-1.8 with it, see ``benchmarks/README.md``), then
   reads its input,
   warms up (every stage once, imports included) on its first minute (a quarter of it for
   inputs under 4 minutes), notes its resident set, then times the full input: median of
   the engine's runs (the peer: 3 up to 30 minutes, then 1). The engine's runs alternate with runs
   of the floor, 11 pairs at 5 minutes and 5 from 15 minutes (see ``_engine_repeats``), and
   the engine's multiple of the floor is the median of the pairs' ratios, so that load
   from other processes on a shared machine falls on single pairs; a run of the suite
   at 06:07 UTC on 2026-12-02, before this, put a different 5-minute case over 5x than
   the runs before it. ``peak_mb`` is the peak resident
   set (``VmHWM``, reset after the warm-up) of the first full run less the resident set
   before it: peak memory above the input and the imported libraries. ``traced_mb``
   (engine only) is the ``tracemalloc`` peak of one more run.
3. The peer is skipped where its time, extrapolated linearly from the longest length
   already measured at that rate, would pass 300 s; the table says so.
4. Scaling: a log-log fit of time against length at 250 Hz, one channel (1.0 is linear).
5. The 8-hour, 1000 Hz, four-channel case goes through ``features.windows`` (5-minute
   windows) with :mod:`benchmarks.windows`, reading one window at a time from a file.
6. The service: :mod:`benchmarks.service_load` (gunicorn and wrk on loopback, and one
   request in process split into its steps, in rounds beside the engine alone: CPU time,
   BLAS held to one thread; the request's multiple of the engine is the median of the
   rounds' ratios).
7. The pictures: :mod:`benchmarks.pictures` in a fresh child process (the report of the
   demo evening beside its analysis, rounds side by side; the night picture of an
   8-hour night, 96 and 960 windows).
"""

from __future__ import annotations

import argparse
import json
import os
import platform
import resource
import statistics
import subprocess
import sys
import tempfile
import time
import tracemalloc
from pathlib import Path
from typing import Any

import numpy as np

from benchmarks import floor, peer, pictures, service_load
from service.allocator import tune_allocator

REPO = Path(__file__).resolve().parents[1]
BLOCK_S = 1800.0
SEEDS = (1, 2, 3, 4)
PEER_CAP_S = 300.0
"""Longest the peer may take at one length before it is skipped (extrapolated)."""
WARM_S = 60.0
"""Warm-up length: every stage runs once (imports, caches) on this much of the input."""

FULL_CASES = (
    (250.0, 1, (300.0, 900.0, 1800.0, 3600.0, 7200.0, 14400.0, 28800.0)),
    (100.0, 1, (300.0, 3600.0)),
    (1000.0, 1, (300.0, 3600.0)),
    (250.0, 4, (300.0, 3600.0)),
)
QUICK_CASES = ((250.0, 1, (60.0, 120.0)), (250.0, 4, (60.0,)))
WHOLE_HRV_S = (300.0, 900.0, 1800.0)


# --------------------------------------------------------------------------
# Machine and helpers
# --------------------------------------------------------------------------


def machine() -> dict[str, Any]:
    """CPU, cores, load and library versions (BLAS through threadpoolctl when installed)."""
    import pywt
    import scipy

    cpu = platform.processor() or platform.machine()
    try:
        for line in Path("/proc/cpuinfo").read_text().splitlines():
            if line.startswith("model name"):
                cpu = line.split(":", 1)[1].strip()
                break
    except OSError:
        pass
    info: dict[str, Any] = {
        "date": time.strftime("%Y-%m-%d %H:%M %Z"),
        "cpu": cpu, "machine": platform.machine(), "cpus": os.cpu_count(),
        "usable_cpus": len(os.sched_getaffinity(0)) if hasattr(os, "sched_getaffinity") else None,
        "load_avg": [round(v, 2) for v in os.getloadavg()],
        "python": platform.python_version(), "numpy": np.__version__,
        "scipy": scipy.__version__, "pywt": pywt.__version__, "neurokit2": peer.available(),
    }
    try:
        from threadpoolctl import threadpool_info
        info["blas"] = [f"{p.get('internal_api')} {p.get('version')} "
                        f"threads={p.get('num_threads')}" for p in threadpool_info()]
    except ImportError:
        info["blas"] = ["threadpoolctl not installed"]
    return info


def fit_exponent(lengths: list[float], times: list[float]) -> float | None:
    """Slope of log(time) against log(length): 1.0 for time proportional to length."""
    if len(lengths) < 2:
        return None
    return float(np.polyfit(np.log(lengths), np.log(times), 1)[0])


def _rss_mb() -> float:
    return _status_mb("VmRSS")


def _status_mb(key: str) -> float:
    for line in Path("/proc/self/status").read_text().splitlines():
        if line.startswith(key + ":"):
            return float(line.split()[1]) / 1024.0
    return float("nan")


def _reset_peak() -> bool:
    """Reset this process's peak resident set (``VmHWM``) to its current size (Linux 4.0+).

    ``ru_maxrss`` cannot serve here: Linux carries the parent's resident set into it across
    ``fork`` and ``exec``, so a child of a large parent reports the parent's size.
    """
    try:
        Path("/proc/self/clear_refs").write_text("5")
    except OSError:
        return False
    return True


def _peak_mb() -> float:
    """Peak resident set of this process (``VmHWM``), or ``ru_maxrss`` without /proc."""
    value = _status_mb("VmHWM")
    if value == value:  # not NaN
        return value
    return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024.0


def build_trace(path: str, duration_s: float, fs_hz: float, n_channels: int) -> dict[str, Any]:
    """Tile simulated blocks into a raw float64 (channels x samples) file; its metadata."""
    from simulation import SimulationSettings, simulate

    block_s = min(BLOCK_S, duration_s)
    n = round(duration_s * fs_hz)
    n_block = round(block_s * fs_hz)
    out = np.memmap(path, dtype=np.float64, mode="w+", shape=(n_channels, n))
    cache: dict[int, Any] = {}
    rec = None
    for k, a in enumerate(range(0, n, n_block)):
        seed = SEEDS[k % len(SEEDS)]
        if seed not in cache:
            cache[seed] = simulate(SimulationSettings(duration_s=block_s, fs_hz=fs_hz,
                                                      n_channels=n_channels, seed=seed))
        rec = cache[seed]
        m = min(n_block, n - a)
        for i in range(n_channels):
            out[i, a:a + m] = rec.channels[i][:m]
    out.flush()
    del out
    assert rec is not None
    return {"n_total": n, "n_channels": n_channels, "labels": list(rec.labels),
            "quantity": rec.quantity, "unit": rec.unit,
            "positions": None if rec.positions_m is None else [list(p) for p in rec.positions_m]}


def _engine_repeats(duration_s: float) -> int:
    """Engine/floor pairs timed: 11 at 5 minutes, whose tens of milliseconds a passing
    burst of load on a shared machine can double, and never fewer than 5: with 3 pairs
    a long case's multiple moved by up to a quarter between runs of the same code."""
    return max(5, min(11, int(round(3300.0 / duration_s))))


def _warm(duration_s: float) -> float:
    """Warm-up length: :data:`WARM_S`, but at most a quarter of the input (at least 30 s).

    Without /proc (no ``VmHWM`` reset) the warm-up's own memory peak must stay below the
    measured run's, since ``ru_maxrss`` is a high-water mark over the life of the process.
    """
    return max(30.0, min(WARM_S, duration_s / 4.0))


def _read(path: str, meta: dict[str, Any], n: int) -> np.ndarray:
    """The first ``n`` samples of every channel, read straight into memory (no mapping)."""
    rows = [np.fromfile(path, dtype=np.float64, count=n, offset=8 * i * meta["n_total"])
            for i in range(meta["n_channels"])]
    return np.stack(rows)


# --------------------------------------------------------------------------
# Child processes
# --------------------------------------------------------------------------


def _channels(sig: np.ndarray, meta: dict[str, Any]) -> list[Any]:
    from features import ChannelInput

    pos = meta["positions"]
    return [ChannelInput(samples=sig[i], label=meta["labels"][i], quantity=meta["quantity"],
                         unit=meta["unit"], position_m=None if pos is None else tuple(pos[i]))
            for i in range(sig.shape[0])]


def _engine_child(sig: np.ndarray, meta: dict[str, Any], fs: float, repeats: int,
                  warm_s: float) -> dict[str, Any]:
    from features import analyze

    channels = _channels(sig, meta)
    warm = _channels(np.ascontiguousarray(sig[:, : round(warm_s * fs)]), meta)
    analyze(warm, fs)
    floor.floor_passes(sig, fs)  # the floor's warm-up
    _reset_peak()
    rss0 = _rss_mb()
    runs, cpu, peak, result = [], [], 0.0, None
    floors: list[dict[str, float]] = []
    for i in range(repeats):
        # Engine and floor alternate, so that a burst of load from other processes on
        # the shared machine falls on one pair rather than on all engine runs.
        t0, c0 = time.perf_counter(), time.process_time()
        result = analyze(channels, fs)
        runs.append(time.perf_counter() - t0)
        cpu.append(time.process_time() - c0)
        if i == 0:
            peak = _peak_mb() - rss0
        # The floor runs twice and the second run counts: measured with its own data in
        # the caches, as when its runs followed each other (the conservative choice; a
        # floor run straight after the engine's was measured up to 50 % slower).
        floor.floor_passes(sig, fs)
        floors.append(floor.floor_passes(sig, fs))
    tracemalloc.start()
    analyze(channels, fs)
    traced = tracemalloc.get_traced_memory()[1] / 2**20
    tracemalloc.stop()
    assert result is not None
    totals = [sum(f.values()) for f in floors]
    floor_median = {name: statistics.median(f[name] for f in floors) for name in floor.PASSES}
    floor_median["total"] = statistics.median(totals)
    return {"seconds": statistics.median(runs), "runs": runs,
            "cpu_s": statistics.median(cpu), "peak_mb": peak,
            "traced_mb": traced, "mean_bpm": result.heart_rate.mean_bpm,
            "beats": int(result.beats.times_s.size),
            "floor": floor_median, "floor_runs": totals,
            # the median over the pairs of engine time / floor time
            "floor_multiple": statistics.median(e / f for e, f in zip(runs, totals,
                                                                          strict=True))}


def _peer_child(sig: np.ndarray, fs: float, repeats: int, warm_s: float,
                window_s: float, whole_hrv: bool) -> dict[str, Any]:
    trace = sig.sum(axis=0) if sig.shape[0] > 1 else sig[0]
    peer.peer_pipeline(np.ascontiguousarray(trace[: round(warm_s * fs)]), fs, window_s=warm_s)
    _reset_peak()
    rss0 = _rss_mb()
    runs, cpu, peak = [], [], 0.0
    for i in range(repeats):
        c0 = time.process_time()
        runs.append(peer.peer_pipeline(trace, fs, window_s=window_s))
        cpu.append(time.process_time() - c0)
        if i == 0:
            peak = _peak_mb() - rss0
    out: dict[str, Any] = {k: statistics.median(r[k] for r in runs)
                           for k in ("ppg", "rsp", "hrv", "total")}
    out.update(seconds=out["total"], runs=[r["total"] for r in runs],
               cpu_s=statistics.median(cpu), peak_mb=peak,
               mean_bpm=runs[0]["mean_bpm"], hrv_windows=runs[0]["hrv_windows"],
               hrv_failed=runs[0]["hrv_failed"])
    if whole_hrv:
        out["whole_hrv_s"] = peer.whole_signal_hrv(trace, fs)
    return out


def _child_main(args: argparse.Namespace) -> int:
    # The allocator as the service's processes set it, before the input is read (see
    # service.allocator); the floor and the peer run under the same settings.
    tune_allocator()
    meta = json.loads(args.meta)
    n = round(args.seconds * args.fs)
    sig = _read(args.trace, meta, n)
    if args.child == "engine":
        out = _engine_child(sig, meta, args.fs, args.repeats, args.warm_s)
    else:
        out = _peer_child(sig, args.fs, args.repeats, args.warm_s, args.window_s,
                          args.whole_hrv)
    print("RESULT " + json.dumps(out))
    return 0


def _run_child(kind: str, trace: str, meta: dict[str, Any], fs: float, seconds: float,
               repeats: int, warm_s: float, window_s: float = 300.0,
               whole_hrv: bool = False) -> dict[str, Any]:
    cmd = [sys.executable, "-m", "benchmarks.suite", "--child", kind, "--trace", trace,
           "--meta", json.dumps(meta), "--fs", str(fs), "--seconds", str(seconds),
           "--repeats", str(repeats), "--warm-s", str(warm_s), "--window-s", str(window_s)]
    if whole_hrv:
        cmd.append("--whole-hrv")
    env = dict(os.environ, PYTHONPATH=str(REPO) + os.pathsep + os.environ.get("PYTHONPATH", ""))
    done = subprocess.run(cmd, capture_output=True, text=True, cwd=REPO, env=env)
    if done.returncode != 0:
        raise RuntimeError(f"{kind} child failed:\n{done.stderr[-3000:]}")
    line = next(x for x in reversed(done.stdout.splitlines()) if x.startswith("RESULT "))
    return dict(json.loads(line[len("RESULT "):]))


# --------------------------------------------------------------------------
# The run
# --------------------------------------------------------------------------


def run_cases(quick: bool, log: Any) -> list[dict[str, Any]]:
    """Engine, floor and peer on every case; one dict per (rate, channels, length)."""
    cases = QUICK_CASES if quick else FULL_CASES
    has_peer = peer.available() is not None
    rows: list[dict[str, Any]] = []
    with tempfile.TemporaryDirectory() as tmp:
        for fs, nch, lengths in cases:
            path = os.path.join(tmp, f"trace_{fs:g}_{nch}.f64")
            t0 = time.perf_counter()
            meta = build_trace(path, max(lengths), fs, nch)
            log(f"built {max(lengths):g} s x {fs:g} Hz x {nch} ch in "
                f"{time.perf_counter() - t0:.0f} s")
            per_s: float | None = None
            for dur in lengths:
                row: dict[str, Any] = {"fs_hz": fs, "channels": nch, "length_s": dur}
                row["engine"] = _run_child("engine", path, meta, fs, dur,
                                           _engine_repeats(dur), _warm(dur))
                log(f"engine {fs:g} Hz {nch} ch {dur:g} s: {row['engine']['seconds']:.2f} s")
                window_s = min(300.0, dur)
                estimate = None if per_s is None else per_s * dur
                if not has_peer:
                    row["peer"] = {"skipped": "NeuroKit2 not installed"}
                elif estimate is not None and estimate > PEER_CAP_S:
                    row["peer"] = {"skipped": f"estimated {estimate:.0f} s > {PEER_CAP_S:g} s"}
                else:
                    whole = (not quick) and fs == 250.0 and nch == 1 and dur in WHOLE_HRV_S
                    row["peer"] = _run_child("peer", path, meta, fs, dur,
                                             3 if dur <= 1800 else 1, _warm(dur),
                                             window_s=window_s, whole_hrv=whole)
                    per_s = row["peer"]["seconds"] / dur
                    log(f"peer {fs:g} Hz {nch} ch {dur:g} s: {row['peer']['seconds']:.1f} s")
                rows.append(row)
            os.remove(path)
    return rows


def run_windowed(quick: bool, log: Any) -> dict[str, Any]:
    """The long four-channel case through features.windows (benchmarks.windows' child)."""
    try:
        import features.windows  # noqa: F401
        from benchmarks import windows
    except ImportError as exc:
        return {"skipped": f"not measured: {exc}"}
    hours, fs = (0.25, 250.0) if quick else (8.0, 1000.0)
    with tempfile.TemporaryDirectory() as tmp:
        path = os.path.join(tmp, "trace.f32")
        t0 = time.perf_counter()
        n, meta = windows.build_trace(path, hours, fs, 4)
        meta.update(n_channels=4, n_samples=n)
        log(f"built {hours:g} h x {fs:g} Hz x 4 ch (float32 file) in "
            f"{time.perf_counter() - t0:.0f} s")
        # windows._child reads ru_maxrss, which Linux carries over from the parent across
        # fork and exec: start it from a small launcher, not from this (large) process.
        code = ("import json, sys; from benchmarks import windows; "
                "a = json.loads(sys.argv[1]); "
                "print('RESULT ' + json.dumps(windows._child(*a, trace=False)))")
        arg = json.dumps([path, meta, hours, fs, "reader", 300.0])
        env = dict(os.environ,
                   PYTHONPATH=str(REPO) + os.pathsep + os.environ.get("PYTHONPATH", ""))
        done = subprocess.run([sys.executable, "-c", code, arg], capture_output=True,
                              text=True, cwd=REPO, env=env, check=True)
        line = next(x for x in done.stdout.splitlines() if x.startswith("RESULT "))
    return dict(json.loads(line[len("RESULT "):]))


def run_pictures(quick: bool, log: Any) -> dict[str, Any]:
    """benchmarks.pictures in a fresh child process (its first report is a cold one)."""
    env = dict(os.environ,
               PYTHONPATH=str(REPO) + os.pathsep + os.environ.get("PYTHONPATH", ""))
    done = subprocess.run([sys.executable, "-m", "benchmarks.pictures", "--child",
                           *(["--quick"] if quick else [])], capture_output=True, text=True,
                          cwd=REPO, env=env, check=True)
    line = next(x for x in done.stdout.splitlines() if x.startswith("RESULT "))
    log("pictures measured")
    return dict(json.loads(line[len("RESULT "):]))


def run_service(quick: bool, log: Any) -> dict[str, Any]:
    """Request split in-process, then gunicorn + wrk for 1, 2 and 4 workers."""
    dur = 60.0 if quick else 300.0
    out = service_load.measure_requests(dur, 3 if quick else service_load.ROUNDS)
    log("request split measured")
    if not service_load.wrk_available():
        out["load"] = {"skipped": "wrk not on PATH (apt-get install wrk)"}
        return out
    if not service_load.gunicorn_available():
        out["load"] = {"skipped": "gunicorn not installed"}
        return out
    body = service_load.request_body(dur, 250.0)
    rows = []
    settings = ((1, (1,)),) if quick else ((1, (1, 2)), (2, (1, 4)), (4, (1, 8)))
    for workers, conns in settings:
        rows += service_load.load_test(body, workers, duration_s=2.0 if quick else 20.0,
                                       connections=conns)
        log(f"load test with {workers} worker(s) done")
    out["load"] = rows
    return out


# --------------------------------------------------------------------------
# Report
# --------------------------------------------------------------------------


def _length(s: float) -> str:
    return f"{s / 3600:g} h" if s >= 3600 else f"{s / 60:g} min"


def report(res: dict[str, Any]) -> str:
    """The tables as plain text (also pasted into benchmarks/README.md)."""
    m = res["machine"]
    lines = [f"date {m['date']}; {m['cpu']} ({m['machine']}), {m['cpus']} cpus "
             f"({m['usable_cpus']} usable), load average at start {m['load_avg']}",
             f"python {m['python']}, numpy {m['numpy']}, scipy {m['scipy']}, "
             f"PyWavelets {m['pywt']}, NeuroKit2 {m['neurokit2']}; BLAS: {'; '.join(m['blas'])}",
             ""]
    rows = res["cases"]
    lines.append("engine throughput (median of 3 after a warm-up; peak_mb = peak RSS above "
                 "the input, fresh process per case)")
    lines.append(f"{'rate':>6} {'ch':>2} {'length':>8} {'engine_s':>9} {'s_per_h':>8} "
                 f"{'samples/s':>11} {'cpu_s':>7} {'peak_mb':>8} {'traced_mb':>9} {'bpm':>6}")
    for r in rows:
        e = r["engine"]
        n = r["fs_hz"] * r["length_s"] * r["channels"]
        bpm = "-" if e["mean_bpm"] is None else f"{e['mean_bpm']:.1f}"
        lines.append(f"{r['fs_hz']:6g} {r['channels']:2d} {_length(r['length_s']):>8} "
                     f"{e['seconds']:9.3f} {e['seconds'] * 3600 / r['length_s']:8.3f} "
                     f"{n / e['seconds']:11.3g} {e['cpu_s']:7.3f} {e['peak_mb']:8.0f} "
                     f"{e['traced_mb']:9.0f} {bpm:>6}")
    lines += ["", "floor (median seconds per pass, same input, same process, timed alternately "
              "with the engine) and the engine as a multiple of it (median over the pairs)"]
    head = f"{'rate':>6} {'ch':>2} {'length':>8} " + " ".join(
        f"{p[:8]:>8}" for p in floor.PASSES) + f" {'floor_s':>8} {'engine/floor':>12}"
    lines.append(head)
    for r in rows:
        f = r["engine"]["floor"]
        lines.append(f"{r['fs_hz']:6g} {r['channels']:2d} {_length(r['length_s']):>8} "
                     + " ".join(f"{f[p]:8.3f}" for p in floor.PASSES)
                     + f" {f['total']:8.3f} {r['engine']['floor_multiple']:12.1f}")
    lines += ["", "peer: NeuroKit2 ppg_process + rsp_process + hrv_time/frequency/nonlinear on "
              "consecutive 5-min windows (median of 3 up to 30 min, then 1 run)"]
    lines.append(f"{'rate':>6} {'ch':>2} {'length':>8} {'ppg_s':>8} {'rsp_s':>8} {'hrv_s':>8} "
                 f"{'peer_s':>8} {'peak_mb':>8} {'bpm':>6} {'hs/peer':>8} {'speed-up':>8} "
                 f"{'cpu_x':>6}")
    for r in rows:
        p = r["peer"]
        lead = f"{r['fs_hz']:6g} {r['channels']:2d} {_length(r['length_s']):>8}"
        if "skipped" in p:
            lines.append(f"{lead} skipped: {p['skipped']}")
            continue
        bpm = "-" if p["mean_bpm"] is None else f"{p['mean_bpm']:.1f}"
        e = r["engine"]["seconds"]
        lines.append(f"{lead} {p['ppg']:8.2f} {p['rsp']:8.2f} {p['hrv']:8.2f} "
                     f"{p['seconds']:8.2f} {p['peak_mb']:8.0f} {bpm:>6} "
                     f"{e / p['seconds']:8.3f} {p['seconds'] / e:7.1f}x "
                     f"{p['cpu_s'] / r['engine']['cpu_s']:5.1f}x")
    lines.append("")
    sc = res["scaling"]
    for key, label in (("engine", "engine, wall"), ("engine_cpu", "engine, CPU"),
                       ("floor", "floor"), ("peer", "peer")):
        v = sc.get(key)
        lines.append(f"fitted exponent of time against length, 250 Hz 1 ch, {label}: "
                     + ("-" if v is None else f"{v:.3f}"))
    base = [r for r in rows if r["fs_hz"] == 250.0 and r["channels"] == 1]
    if len(base) >= 3:
        for key in ("seconds", "cpu_s"):
            local = [f"{_length(a['length_s'])}->{_length(b['length_s'])} " + format(
                fit_exponent([a["length_s"], b["length_s"]],
                             [a["engine"][key], b["engine"][key]]) or 0.0, ".2f")
                for a, b in zip(base, base[1:], strict=False)]
            lines.append(f"engine exponent between neighbouring lengths "
                         f"({'wall' if key == 'seconds' else 'CPU'}): " + ", ".join(local))
    whole = [(r["length_s"], r["peer"]["whole_hrv_s"]) for r in rows
             if "whole_hrv_s" in r["peer"]]
    if whole:
        lines.append("NeuroKit2 nk.hrv on the whole signal (not windowed): " + ", ".join(
            f"{_length(d)} {t:.1f} s" for d, t in whole)
            + (f"; exponent {sc['whole_hrv']:.2f}" if sc.get("whole_hrv") else ""))
    w = res["windowed"]
    lines.append("")
    if "skipped" in w:
        lines.append(f"windowed long case: {w['skipped']}")
    else:
        lines.append(f"windowed {w['hours']:g} h x {w['fs_hz']:g} Hz x 4 ch (features.windows, "
                     f"5-min windows read one at a time from a float32 file): "
                     f"{w['seconds']:.0f} s ({w['seconds'] / w['hours']:.1f} s per hour), "
                     f"{w['windows']} windows, {w['failed']} failed, ru_maxrss "
                     f"{w['ru_maxrss_mb']:.0f} MB, peak anonymous RSS "
                     f"{w['rss_anon_peak_mb']:.0f} MB")
    s = res["service"]
    lines += [""] + service_load.split_lines(s)
    load = s["load"]
    lines.append("")
    if isinstance(load, dict):
        lines.append(f"service load: {load['skipped']}")
    else:
        lines.append("service under gunicorn on 127.0.0.1, wrk -t1 from a second process "
                     f"({'2' if res['quick'] else '20'} s per row)")
        lines.append(f"{'workers':>7} {'conns':>5} {'requests':>8} {'errors':>6} {'req/s':>7} "
                     f"{'p50_ms':>7} {'p95_ms':>7} {'p99_ms':>7} {'max_ms':>7}")
        for r in load:
            lines.append(f"{r['workers']:7d} {r['connections']:5d} {r['requests']:8d} "
                         f"{r['errors']:6d} {r['rps']:7.1f} {r['p50_ms']:7.0f} "
                         f"{r['p95_ms']:7.0f} {r['p99_ms']:7.0f} {r['max_ms']:7.0f}")
    if "pictures" in res:
        lines += [""] + pictures.lines(res["pictures"])
    lines += ["", "acceptance (as measured in this run):"]
    lines += [f"  [{'holds' if ok else 'FAILS' if ok is False else 'n/a  '}] {text}"
              for ok, text in res["acceptance"]]
    return "\n".join(lines)


FLOOR_LIMIT = 2.0
"""Issue 13: the engine at most this multiple of its floor at every case."""
PEER_SPEED_UP = 10.0
"""Issue 13 (and the issue before it): at least this many times faster than the peer."""
EXPONENT_LIMIT = 1.1
"""Issue 13: the fitted exponent of time against length, 5 minutes to 8 hours."""


def _where(row: dict[str, Any]) -> str:
    return f"{row['fs_hz']:g} Hz, {row['channels']} ch, {_length(row['length_s'])}"


def _engine_lines(res: dict[str, Any]) -> list[tuple[bool | None, str]]:
    """Issue 13, line 1: the floor multiple and the peer's speed-up at every case."""
    rows = res["cases"]
    row, worst = max(((r, r["engine"]["floor_multiple"]) for r in rows), key=lambda t: t[1])
    out: list[tuple[bool | None, str]] = [(
        worst <= FLOOR_LIMIT, f"1. engine <= {FLOOR_LIMIT:g}x its floor at every case: worst "
        f"{worst:.1f}x ({_where(row)})")]
    speed = [(r, r["peer"]["seconds"] / r["engine"]["seconds"]) for r in rows
             if "seconds" in r["peer"]]
    if speed:
        row, slowest = min(speed, key=lambda t: t[1])
        out.append((all(v >= PEER_SPEED_UP for _, v in speed) and len(speed) == len(rows),
                    f"1. >= {PEER_SPEED_UP:g}x faster than the peer at every case: slowest "
                    f"speed-up {slowest:.1f}x ({_where(row)}); peer measured at {len(speed)} "
                    f"of {len(rows)} cases"))
    else:
        out.append((None, f"1. >= {PEER_SPEED_UP:g}x faster than the peer: peer not measured"))
    out.append((None, "1. every accuracy figure of the cohort unchanged: not judged here "
                "(python -m validation.cohort and validation.features_check are)"))
    return out


def _information_lines(res: dict[str, Any]) -> list[tuple[bool | None, str]]:
    """The lines of the performance issue before issue 13, kept for information."""
    rows = res["cases"]
    row, worst = max(((r, r["engine"]["floor_multiple"]) for r in rows), key=lambda t: t[1])
    out: list[tuple[bool | None, str]] = [
        (worst <= 5, f"(information) engine <= 5x its floor: worst {worst:.1f}x "
                     f"({_where(row)})")]
    w = res["windowed"]
    if "skipped" in w:
        out.append((None, f"(information) 8 h, 1000 Hz, 4 ch under 2 GB: {w['skipped']}"))
    else:
        out.append((w["ru_maxrss_mb"] < 2048 if w["hours"] >= 8 else None,
                    f"(information) {w['hours']:g} h, {w['fs_hz']:g} Hz, 4 ch windowed peak "
                    f"memory (ru_maxrss) {w['ru_maxrss_mb']:.0f} MB < 2048 MB"))
    load = res["service"]["load"]
    if isinstance(load, dict):
        out.append((None, f"(information) service p99 and requests/s: {load['skipped']}"))
        return out
    low = [r for r in load if r["workers"] == 1 and r["connections"] == 1]
    if low:
        out.append((low[0]["p99_ms"] < 250, f"(information) p99 < 250 ms, 1 worker, low "
                    f"load: {low[0]['p99_ms']:.0f} ms"))
    best = max(load, key=lambda r: r["rps"])
    out.append((best["rps"] >= 20 and best["errors"] == 0,
                f"(information) >= 20 requests/s with no errors: best {best['rps']:.1f}/s "
                f"({best['workers']} workers, {best['connections']} connections, "
                f"{best['errors']} errors)"))
    return out


def acceptance(res: dict[str, Any]) -> list[tuple[bool | None, str]]:
    """Issue 13's four acceptance lines judged on this run's numbers, then older lines.

    1. The engine at most 2x its floor and at least 10x faster than the peer at every case
       (the cohort's accuracy is judged by validation/, not here); 2. the in-process
       5-minute request at most 1.5x the engine, the worse of JSON and base64 samples;
       3. the pictures (:func:`benchmarks.pictures.acceptance`); 4. time linear in length.
       The lines of the performance issue before it follow, marked "(information)".
    """
    out = _engine_lines(res)
    ok, text = service_load.request_acceptance(res["service"])
    out.append((ok, f"2. {text}"))
    if "pictures" in res:
        out += [(ok, f"3. {text}") for ok, text in pictures.acceptance(res["pictures"])]
    else:
        out.append((None, "3. report and night pictures: not measured"))
    ex = res["scaling"].get("engine")
    out.append((None if ex is None else ex <= EXPONENT_LIMIT,
                f"4. time linear in length (exponent <= {EXPONENT_LIMIT:g}): "
                + ("-" if ex is None else f"{ex:.3f}")
                + ("" if res["quick"] else " over 5 min to 8 h")))
    return out + _information_lines(res)


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--quick", action="store_true", help="short inputs only (CI smoke run)")
    ap.add_argument("--json", metavar="PATH", help="also write every number as JSON here")
    ap.add_argument("--child", choices=("engine", "peer"), help=argparse.SUPPRESS)
    ap.add_argument("--trace", help=argparse.SUPPRESS)
    ap.add_argument("--meta", help=argparse.SUPPRESS)
    ap.add_argument("--fs", type=float, help=argparse.SUPPRESS)
    ap.add_argument("--seconds", type=float, help=argparse.SUPPRESS)
    ap.add_argument("--repeats", type=int, default=3, help=argparse.SUPPRESS)
    ap.add_argument("--warm-s", type=float, default=WARM_S, help=argparse.SUPPRESS)
    ap.add_argument("--window-s", type=float, default=300.0, help=argparse.SUPPRESS)
    ap.add_argument("--whole-hrv", action="store_true", help=argparse.SUPPRESS)
    args = ap.parse_args(argv)
    if args.child:
        return _child_main(args)

    started = time.perf_counter()

    def log(msg: str) -> None:
        print(f"[{time.perf_counter() - started:6.0f} s] {msg}", file=sys.stderr, flush=True)

    res: dict[str, Any] = {"quick": args.quick, "machine": machine()}
    res["cases"] = run_cases(args.quick, log)
    base = [r for r in res["cases"] if r["fs_hz"] == 250.0 and r["channels"] == 1]
    with_peer = [r for r in base if "seconds" in r["peer"]]
    whole = [r for r in base if "whole_hrv_s" in r["peer"]]
    res["scaling"] = {
        "engine": fit_exponent([r["length_s"] for r in base],
                               [r["engine"]["seconds"] for r in base]),
        "engine_cpu": fit_exponent([r["length_s"] for r in base],
                                   [r["engine"]["cpu_s"] for r in base]),
        "floor": fit_exponent([r["length_s"] for r in base],
                              [r["engine"]["floor"]["total"] for r in base]),
        "peer": fit_exponent([r["length_s"] for r in with_peer],
                             [r["peer"]["seconds"] for r in with_peer]),
        "whole_hrv": fit_exponent([r["length_s"] for r in whole],
                                  [r["peer"]["whole_hrv_s"] for r in whole]),
    }
    res["windowed"] = run_windowed(args.quick, log)
    res["service"] = run_service(args.quick, log)
    res["pictures"] = run_pictures(args.quick, log)
    res["acceptance"] = acceptance(res)
    res["wall_s"] = time.perf_counter() - started
    print(report(res))
    print(f"\n(suite wall time {res['wall_s']:.0f} s)")
    if args.json:
        Path(args.json).write_text(json.dumps(res, indent=1, default=str))
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
