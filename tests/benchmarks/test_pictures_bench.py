"""benchmarks.pictures: its verdicts follow issue 13's picture lines; no timing is asserted.

The quick run itself is exercised by tests/benchmarks/test_suite_smoke.py (the suite runs
it in a child process).
"""

from __future__ import annotations

import pytest

from benchmarks.pictures import _median_ratio, acceptance, lines


def _res(png: float, svg: float, hours: float, night_s: float) -> dict:
    ratio = {"request_png": png, "request_svg": svg, "draw_png": png, "draw_svg": svg}
    median = {k: 0.1 for k in ("analysis_request", "report_png_request",
                                "report_svg_request", "engine", "draw_png", "draw_svg")}
    case = {"window_s": 300.0, "windows": 96, "analysis_s": 10.0, "png": night_s,
            "svg": night_s / 2, "png_max": night_s, "svg_max": night_s}
    return {"report": {"rounds": 3, "first_report_s": 0.5, "median_s": median,
                       "ratio": ratio},
            "night": {"hours": hours, "fs_hz": 100.0, "cases": [case]}}


def test_verdicts_follow_the_issue_thresholds() -> None:
    # Issue 13, acceptance: the report at most 2 times its analysis; the night picture of
    # an 8-hour night under 1 s.
    assert [ok for ok, _ in acceptance(_res(2.0, 1.5, 8.0, 0.99))] == [True, True]
    assert [ok for ok, _ in acceptance(_res(1.5, 2.01, 8.0, 1.0))] == [False, False]
    # A shorter night (the quick run) is not judged.
    assert acceptance(_res(1.0, 1.0, 1.0, 0.2))[1][0] is None


def test_ratio_is_the_median_of_the_rounds_ratios() -> None:
    # One slow round (load on a shared machine) does not move the median (common practice).
    assert _median_ratio([2.0, 2.0, 9.0], [1.0, 1.0, 1.0]) == pytest.approx(2.0)
    assert _median_ratio([3.0, 4.0, 5.0], [1.0, 2.0, 1.0]) == pytest.approx(3.0)


def test_lines_name_both_pictures() -> None:
    text = "\n".join(lines(_res(3.0, 2.5, 8.0, 0.2)))
    assert "/v1/reports PNG" in text and "96 windows of 300 s" in text
