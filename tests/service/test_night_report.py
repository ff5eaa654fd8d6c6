"""The night picture: PNG and SVG from features.night.NightSummary and its windowed analysis.

Drawn from a simulated 40-minute night (simulation.night, 100 Hz, four cells): lying down
at 75 s, one 600-s bed exit from 1080 s, getting up at 2325 s (``NightSettings.scaled``).
No timing is asserted: the picture's time is measured by ``python -m benchmarks.suite``.
"""

from __future__ import annotations

import dataclasses
import inspect
import io

import numpy as np
import pytest
from picture_checks import assert_caution_dark_readable_and_last, png_size, svg_texts

from features import ChannelInput
from features.night import summarize_night
from features.windows import analyze_windows
from service.night_report import draw_night
from simulation.night import NightSettings, simulate_night

FS_HZ = 100.0


@pytest.fixture(scope="module")
def night():
    sim = simulate_night(NightSettings.scaled(2400.0, fs_hz=FS_HZ, seed=3))
    rec = sim.recording
    channels = [ChannelInput(samples=sim.channels[i], label=rec.labels[i], quantity="force",
                             unit=rec.unit, position_m=tuple(rec.positions_m[i]))
                for i in range(sim.channels.shape[0])]
    windowed = analyze_windows(channels, FS_HZ, window_s=300.0)
    return summarize_night(windowed), windowed, rec.truth


@pytest.fixture(scope="module")
def png(night):
    summary, windowed, _ = night
    return draw_night(summary, windowed)


@pytest.fixture(scope="module")
def svg(night):
    summary, windowed, _ = night
    return draw_night(summary, windowed, image_format="svg")


def test_the_signature_the_jobs_api_calls():
    # GET /v1/jobs/{id}/report calls draw_night(summary, windowed, image_format=...).
    params = inspect.signature(draw_night).parameters
    assert list(params) == ["summary", "windowed", "image_format"]
    assert params["image_format"].kind is inspect.Parameter.KEYWORD_ONLY
    assert params["image_format"].default == "png"


def test_png_decodes_at_page_size_and_is_not_blank(png):
    import matplotlib.image

    assert png_size(png) == (1100, 850)
    pixels = matplotlib.image.imread(io.BytesIO(png), format="png")
    assert pixels.shape[:2] == (850, 1100)
    flat = pixels[..., :3].reshape(-1, 3)
    assert len(np.unique(np.round(flat * 255), axis=0)) > 50
    assert (flat.mean(axis=1) < 0.9).mean() > 0.03


def test_svg_carries_the_whole_caution_dark_readable_and_last(svg):
    assert_caution_dark_readable_and_last(svg)


def test_svg_names_every_panel_and_the_exit(night, svg):
    summary, _, truth = night
    texts = " ".join(text for text, _, _ in svg_texts(svg))
    for title in ("Heart rate of each occupied window", "Breathing rate of each occupied window",
                  "RMSSD of each occupied window", "in bed", "movement", "exit / unknown",
                  "point opacity: its confidence"):
        assert title in texts
    # The simulated exit lasts 600 s (simulation/night.py, NightSettings.scaled): 10 min.
    assert len(truth.bed_exits_s) == 1 and len(summary.bed_exits) == 1
    assert "exit 1: 10 min" in texts


def _columns(mask: np.ndarray, share: float) -> np.ndarray:
    """Columns where at least ``share`` of the rows hold the mask."""
    return np.flatnonzero(mask.mean(axis=0) >= share)


def test_exit_is_shaded_where_the_summary_places_it(night, png):
    import matplotlib.image

    summary, windowed, _ = night
    rgb = np.round(matplotlib.image.imread(io.BytesIO(png), format="png")[..., :3] * 255)
    panels = rgb[150:780]  # below the strip's title, above the caution
    # The axes' left and right spines: the columns that are dark over most of the panels.
    dark = panels.mean(axis=2) < 128
    spines = _columns(dark, 0.5)
    left, right = spines.min(), spines.max()
    assert right - left > 800  # the panels span most of the 1100-px page
    # The shading: the exit colour (#d62728) at 15 % over white, about (251, 221, 222);
    # +-4 per channel allows for rounding in the blend.
    pink = (np.abs(panels - np.array([251.0, 221.0, 222.0])) <= 4).all(axis=2)
    shaded = _columns(pink, 0.25)
    assert shaded.size > 0
    (exit_,) = summary.bed_exits
    per_s = (right - left) / windowed.duration_s
    # Edges within 2 px: the spine's and the span's anti-aliased pixel columns.
    assert abs(shaded.min() - (left + exit_.start_s * per_s)) <= 2
    assert abs(shaded.max() + 1 - (left + exit_.end_s * per_s)) <= 2
    # One stretch only: no shading anywhere else.
    assert shaded.size == shaded.max() - shaded.min() + 1


def test_a_night_without_windows_draws_its_nulls_plainly(night):
    _, windowed, _ = night
    empty = dataclasses.replace(windowed, windows=(), n_failed=0)
    summary = summarize_night(empty)
    assert summary.get("heart_rate_mean_bpm").value is None
    texts = [text for text, _, _ in svg_texts(draw_night(summary, empty, image_format="svg"))]
    assert texts.count("no occupied window with a value") == 3
    assert any("heart rate none" in text for text in texts)


def test_errors_name_the_argument(night):
    summary, windowed, _ = night
    with pytest.raises(ValueError, match="`image_format` must be one of png, svg; got 'pdf'"):
        draw_night(summary, windowed, image_format="pdf")
    fewer = dataclasses.replace(windowed, windows=windowed.windows[:-1])
    with pytest.raises(ValueError, match="`summary` must be the summary of `windowed`"):
        draw_night(summary, fewer)


def test_failed_windows_are_drawn_as_unknown_time(night, svg):
    import xml.etree.ElementTree as ElementTree

    from features.windows import WindowError

    _, windowed, _ = night
    failed = WindowError(kind="UnusableSignalError", code="flat_signal", message="flat")
    windows = list(windowed.windows)
    windows[2] = dataclasses.replace(windows[2], feature_vector=None, occupancy=None,
                                     segments=(), error=failed)
    broken = dataclasses.replace(windowed, windows=tuple(windows), n_failed=1)
    summary = summarize_night(broken)
    assert summary.n_failed_windows == 1
    drawn = draw_night(summary, broken, image_format="svg")

    def patterns(data: bytes) -> int:  # the hatch of unknown time is an SVG <pattern>
        return sum(1 for _ in ElementTree.fromstring(data).iter(
            "{http://www.w3.org/2000/svg}pattern"))

    assert patterns(svg) == 0 and patterns(drawn) >= 1
    texts = " ".join(text for text, _, _ in svg_texts(drawn))
    assert "1 failed" in texts
