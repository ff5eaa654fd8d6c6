"""Pictures: the report of the demo evening beside its analysis, and the night picture.

Run from the repository root: ``python -m benchmarks.pictures [--quick] [--json PATH]``
(``python -m benchmarks.suite`` runs it too, in a child process, and adds its lines).

1. The report (issue 13: at most twice the time of its analysis). In one fresh process,
   the demo evening's body (``service.demo.demo_request_body``: 2 minutes, 4 cells,
   250 Hz) goes through the app in process (Flask's test client), timed in rounds side by
   side: ``POST /v1/analyses``, then ``POST /v1/reports`` as PNG, then as SVG; and below
   the HTTP layer the engine (``service.analysis.analyze_request``) beside the drawing of
   its result (``service.report.draw_report``, PNG and SVG). Each ratio is the median over
   the rounds of that round's ratio, so that load from other processes on a shared
   machine falls on single rounds. The first report of the process (matplotlib imported,
   the figure built) is reported apart: what the first visitor waits for.
2. The night picture (issue 13: under 1 s for an 8-hour night). A simulated night
   (``simulation.night``, ``NightSettings.scaled``, seed 0, 100 Hz, four cells) in memory,
   analysed with ``features.analyze_windows`` in 300-s windows (96 for 8 hours) and in
   30-s windows (960), each summarised with ``features.night.summarize_night``; then
   ``service.night_report.draw_night`` timed as PNG and as SVG: median of the runs after
   one warm-up draw.
"""

from __future__ import annotations

import argparse
import json
import statistics
import sys
import time
from pathlib import Path
from typing import Any

REPORT_ROUNDS = 11
QUICK_ROUNDS = 3
NIGHT_RUNS = 5
NIGHT_WINDOWS_S = (300.0, 30.0)
NIGHT_FS_HZ = 100.0


def _median_ratio(top: list[float], bottom: list[float]) -> float:
    return float(statistics.median(a / b for a, b in zip(top, bottom, strict=True)))


def measure_report(rounds: int) -> dict[str, Any]:
    """Request and drawing times of the demo evening's report beside its analysis."""
    from service import create_app
    from service.analysis import analyze_request
    from service.bodies import request_schema
    from service.demo import demo_request_body
    from service.report import draw_report

    body = json.dumps(demo_request_body())
    app = create_app()
    client = app.test_client()
    json_type = {"Content-Type": "application/json"}
    accept = {"png": {**json_type, "Accept": "image/png"},
              "svg": {**json_type, "Accept": "image/svg+xml"}}
    with app.app_context():
        request = request_schema().load(json.loads(body))

    def post(path: str, headers: dict[str, str]) -> float:
        t0 = time.perf_counter()
        response = client.post(path, data=body, headers=headers)
        seconds = time.perf_counter() - t0
        if response.status_code != 200:
            raise RuntimeError(f"{path} answered {response.status_code}")
        return seconds

    t0 = time.perf_counter()
    result = analyze_request(request, keep_fused_trace=True)
    draw_report(result, image_format="png")
    first_s = time.perf_counter() - t0
    post("/v1/analyses", json_type)  # every road warm once
    post("/v1/reports", accept["png"])
    post("/v1/reports", accept["svg"])
    times: dict[str, list[float]] = {k: [] for k in (
        "analysis_request", "report_png_request", "report_svg_request",
        "engine", "draw_png", "draw_svg")}
    for _ in range(rounds):
        times["analysis_request"].append(post("/v1/analyses", json_type))
        times["report_png_request"].append(post("/v1/reports", accept["png"]))
        times["report_svg_request"].append(post("/v1/reports", accept["svg"]))
        t0 = time.perf_counter()
        result = analyze_request(request, keep_fused_trace=True)
        times["engine"].append(time.perf_counter() - t0)
        for fmt in ("png", "svg"):
            t0 = time.perf_counter()
            draw_report(result, image_format=fmt)
            times[f"draw_{fmt}"].append(time.perf_counter() - t0)
    out: dict[str, Any] = {"rounds": rounds, "first_report_s": first_s, "runs": times}
    out["median_s"] = {k: float(statistics.median(v)) for k, v in times.items()}
    out["ratio"] = {
        "request_png": _median_ratio(times["report_png_request"], times["analysis_request"]),
        "request_svg": _median_ratio(times["report_svg_request"], times["analysis_request"]),
        "draw_png": _median_ratio(times["draw_png"], times["engine"]),
        "draw_svg": _median_ratio(times["draw_svg"], times["engine"]),
    }
    return out


def measure_night(hours: float, runs: int) -> dict[str, Any]:
    """Time of the night picture of a simulated night, for each window length."""
    from features import ChannelInput
    from features.night import summarize_night
    from features.windows import analyze_windows
    from service.night_report import draw_night
    from simulation.night import NightSettings, simulate_night

    t0 = time.perf_counter()
    night = simulate_night(NightSettings.scaled(hours * 3600.0, fs_hz=NIGHT_FS_HZ, seed=0))
    rec = night.recording
    channels = [ChannelInput(samples=night.channels[i], label=rec.labels[i], quantity="force",
                             unit=rec.unit, position_m=tuple(rec.positions_m[i]))
                for i in range(night.channels.shape[0])]
    out: dict[str, Any] = {"hours": hours, "fs_hz": NIGHT_FS_HZ,
                           "simulate_s": time.perf_counter() - t0, "cases": []}
    for window_s in NIGHT_WINDOWS_S:
        t0 = time.perf_counter()
        windowed = analyze_windows(channels, NIGHT_FS_HZ, window_s=window_s)
        summary = summarize_night(windowed)
        case: dict[str, Any] = {"window_s": window_s, "windows": len(windowed.windows),
                                "analysis_s": time.perf_counter() - t0}
        for fmt in ("png", "svg"):
            draw_night(summary, windowed, image_format=fmt)  # warm-up
            seconds = []
            for _ in range(runs):
                t0 = time.perf_counter()
                draw_night(summary, windowed, image_format=fmt)
                seconds.append(time.perf_counter() - t0)
            case[fmt] = float(statistics.median(seconds))
            case[f"{fmt}_max"] = max(seconds)
        out["cases"].append(case)
    return out


def measure(quick: bool) -> dict[str, Any]:
    """Both measurements; ``quick`` is the CI smoke run (3 rounds, a 1-hour night)."""
    return {"report": measure_report(QUICK_ROUNDS if quick else REPORT_ROUNDS),
            "night": measure_night(1.0 if quick else 8.0, 2 if quick else NIGHT_RUNS)}


def lines(res: dict[str, Any]) -> list[str]:
    """The results as the suite prints them."""
    r, n = res["report"], res["night"]
    m, q = r["median_s"], r["ratio"]
    out = [
        f"pictures: report of the demo evening (2 min, 4 ch, 250 Hz), in process, "
        f"{r['rounds']} rounds side by side (median seconds; ratio = median of the rounds' "
        "ratios)",
        f"  request: POST /v1/analyses {m['analysis_request']:.3f}, /v1/reports PNG "
        f"{m['report_png_request']:.3f} ({q['request_png']:.2f}x), SVG "
        f"{m['report_svg_request']:.3f} ({q['request_svg']:.2f}x)",
        f"  drawing: engine {m['engine']:.3f}, draw_report PNG {m['draw_png']:.3f} "
        f"({q['draw_png']:.2f}x), SVG {m['draw_svg']:.3f} ({q['draw_svg']:.2f}x); first report "
        f"of the process (imports, figure built) {r['first_report_s']:.2f}",
        f"night picture, {n['hours']:g}-hour night at {n['fs_hz']:g} Hz (draw_night, median "
        "seconds; the windowed analysis and summary are not in it)",
    ]
    for c in n["cases"]:
        out.append(f"  {c['windows']:4d} windows of {c['window_s']:g} s: PNG {c['png']:.3f}, "
                   f"SVG {c['svg']:.3f} (slowest run {max(c['png_max'], c['svg_max']):.3f}; "
                   f"analysis and summary {c['analysis_s']:.1f})")
    return out


def acceptance(res: dict[str, Any]) -> list[tuple[bool | None, str]]:
    """The two picture lines of issue 13's acceptance, judged on this run."""
    q = res["report"]["ratio"]
    worst = max(q["request_png"], q["request_svg"])
    out: list[tuple[bool | None, str]] = [(
        worst <= 2.0,
        f"report image of the demo evening <= 2x its analysis (requests side by side): PNG "
        f"{q['request_png']:.2f}x, SVG {q['request_svg']:.2f}x (drawing alone beside the "
        f"engine: PNG {q['draw_png']:.2f}x, SVG {q['draw_svg']:.2f}x)")]
    n = res["night"]
    slowest = max(max(c["png"], c["svg"]) for c in n["cases"])
    out.append((slowest < 1.0 if n["hours"] >= 8 else None,
                f"night picture of an 8-hour night under 1 s ({n['hours']:g} h here): slowest "
                f"median {slowest:.3f} s (PNG and SVG, "
                + " and ".join(str(c["windows"]) for c in n["cases"]) + " windows)"))
    return out


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--quick", action="store_true", help="3 rounds and a 1-hour night")
    ap.add_argument("--json", metavar="PATH", help="also write every number as JSON here")
    ap.add_argument("--child", action="store_true", help=argparse.SUPPRESS)
    args = ap.parse_args(argv)
    res = measure(args.quick)
    if args.child:
        print("RESULT " + json.dumps(res))
        return 0
    print("\n".join(lines(res)))
    for ok, text in acceptance(res):
        print(f"  [{'holds' if ok else 'FAILS' if ok is False else 'n/a  '}] {text}")
    if args.json:
        Path(args.json).write_text(json.dumps(res, indent=1))
    from schemas.responses import NOTICE

    print(f"Caution: {NOTICE}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
