"""The night picture (PNG or SVG): a whole night's windows and its summary on one page.

From top to bottom: a strip of the night (occupied stretches, movement stretches, bed exits
and time nobody knows about: failed windows and the unanalysed tail), then heart rate,
breathing rate and RMSSD of each occupied window across the night, each point as opaque as
the engine's confidence in that value. The bed exits are shaded across every panel; the
headline carries the night summary's own figures; the caution sits on its own lines at the
foot, as on the report of one analysis (:mod:`service.report`).

Everything is read from the :class:`features.night.NightSummary` and the
:class:`features.windows.WindowedAnalysis` it was made from; nothing here runs a stage of
the engine. No sleep staging and no composite score: each panel is one plain measure.
"""

from __future__ import annotations

from typing import Any

import numpy as np

from features.night import MOVEMENT_KINDS, NightSummary
from features.windows import WindowedAnalysis
from service.picture import (
    DPI,
    SIZE_IN,
    check_format,
    columns_of,
    new_figure,
    png_bytes,
    save,
)
from service.stamps import (
    TICK_PX,
    Overlay,
    axis_ticks,
    caution,
    legend_to_overlay,
    points_to_svg,
    texts_to_overlay,
    title,
    with_overlay,
)

__all__ = ["NIGHT_PANELS", "draw_night"]

#: The per-window measures drawn, top to bottom: (feature name, label, colour). The
#: names are those of the feature catalogue (``docs/features.md``); RMSSD is the Task Force
#: short-term variability measure, the one the night summary takes the median of.
NIGHT_PANELS = (
    ("heart_rate_mean_bpm", "heart rate", "#1f4e79"),
    ("breathing_rate_per_min", "breathing rate", "#2ca02c"),
    ("rmssd_ms", "RMSSD", "#9467bd"),
)
#: Where the strip and the panels sit (left, bottom, width, height in figure fraction).
STRIP_RECT = (0.100, 0.835, 0.880, 0.085)
PANEL_RECTS = (
    (0.100, 0.600, 0.880, 0.185),
    (0.100, 0.370, 0.880, 0.185),
    (0.100, 0.140, 0.880, 0.185),
)
#: Narrowest bar drawn in the strip, pixels.
MIN_BAR_PX = 1.5
#: Opacity of a point of confidence 0 (1 at confidence 1): never quite invisible.
MIN_ALPHA = 0.12
_EXIT = "#d62728"
_OCCUPIED = "#2ca02c"
_MOVEMENT = "#ff7f0e"
_UNKNOWN = "#7f7f7f"


def draw_night(summary: NightSummary, windowed: WindowedAnalysis, *,
               image_format: str = "png") -> bytes:
    """Draw the picture of one night.

    Parameters
    ----------
    summary
        The night summary, :func:`features.night.summarize_night` of ``windowed``.
    windowed
        The windowed analysis of the night, :func:`features.windows.analyze_windows`.
    image_format
        ``"png"`` or ``"svg"``.

    Returns
    -------
    bytes
        The image, 11 x 8.5 inches (1100 x 850 pixels as PNG).

    Raises
    ------
    ValueError
        For another ``image_format``, or a ``summary`` that counts another number of
        windows than ``windowed`` holds (they must belong together).

    Notes
    -----
    1. Time runs in hours from the first sample of the recording, one axis for all.
    2. A window enters a panel when it was analysed, judged occupied and its value is not
       None: the windows the night summary's medians and means read.
    3. A point's opacity is ``MIN_ALPHA + (1 - MIN_ALPHA) * confidence`` of that value.
    4. The strip's rows: occupied stretches as the summary joined them, movement and
       posture-change segments of every analysed window, bed exits as the summary counted
       them, failed windows and the unanalysed tail as time of unknown occupancy.
    """
    check_format(image_format)
    if summary.n_windows != len(windowed.windows):
        raise ValueError("`summary` must be the summary of `windowed`; it counts "
                         f"{summary.n_windows} windows, `windowed` holds "
                         f"{len(windowed.windows)}.")
    hours = max(float(windowed.duration_s), 1.0) / 3600.0
    figure = new_figure()
    overlay = Overlay()
    strip = figure.add_axes(STRIP_RECT)
    _strip(strip, summary, windowed, overlay)
    panels = []
    for (name, label, colour), rect in zip(NIGHT_PANELS, PANEL_RECTS, strict=True):
        ax = figure.add_axes(rect, sharex=strip)
        panels.append((ax, _panel(ax, windowed, name, label, colour)))
        _exits(ax, summary)
        if name == "heart_rate_mean_bpm":
            _lowest(ax, summary)
    strip.set_xlim(0.0, hours)
    panels[-1][0].set_xlabel("time from the start of the recording (h)")
    _axes_overlay(figure, overlay, strip, panels)
    overlay.label(0.5 * SIZE_IN[0] * DPI, 0.992 * SIZE_IN[1] * DPI,
                  _headline(summary, windowed), 10.0, "#000000", "center", "top")
    caution(overlay)
    if image_format == "svg":
        from matplotlib.collections import PathCollection  # matplotlib is loaded by now

        for ax, _ in panels:
            for points in [c for c in ax.collections if isinstance(c, PathCollection)]:
                points_to_svg(overlay, ax, points)
        return with_overlay(save(figure, image_format), overlay)
    figure.canvas.draw()
    overlay.paint(np.asarray(figure.canvas.buffer_rgba()))
    return png_bytes(figure.canvas)


def _axes_overlay(figure: Any, overlay: Overlay, strip: Any,
                  panels: list[tuple[Any, bool]]) -> None:
    """Ticks, tick and axis labels, texts and the legend of the night's axes, drawn by the
    overlay (:mod:`service.stamps`) instead of matplotlib's axis artists."""
    for ax in figure.axes:
        ax.xaxis.set_visible(False)
        ax.yaxis.set_visible(False)
        texts_to_overlay(overlay, ax)
        title(overlay, ax, ax.get_title(loc="left"))
        ax.set_title("", loc="left")
    axis_ticks(overlay, strip, "x", side="bottom", labels=False)
    for ax, has_values in panels:
        axis_ticks(overlay, ax, "x", side="bottom", labels=ax is panels[-1][0])
        axis_ticks(overlay, ax, "y", side="left", ticks=has_values)
        for artist in legend_to_overlay(overlay, ax, loc="upper right", size_pt=8.0,
                                        frame=False):
            artist.set_zorder(3)


def _spans_h(spans: Any, duration_s: float) -> list[tuple[float, float]]:
    """(start, width) in hours of (start_s, end_s) stretches, for ``broken_barh``.

    A stretch narrower than ``MIN_BAR_PX`` pixels (a 3-s movement is a tenth of a pixel
    on an 8-hour axis) is widened about its middle to that width, so it is seen.
    """
    least_s = MIN_BAR_PX * duration_s / columns_of(STRIP_RECT)
    out = []
    for a, b in spans:
        if b <= a:
            continue
        if b - a < least_s:
            a, b = (a + b - least_s) / 2.0, (a + b + least_s) / 2.0
        out.append((a / 3600.0, (b - a) / 3600.0))
    return out


def _strip(ax: Any, summary: NightSummary, windowed: WindowedAnalysis,
           overlay: Overlay) -> None:
    moving = [(s.start_s, s.end_s) for w in windowed.windows if w.error is None
              for s in w.segments if s.kind in MOVEMENT_KINDS]
    unknown = [(w.start_s, w.end_s) for w in windowed.windows if w.error is not None]
    tail = float(windowed.unanalysed_tail_s)
    if tail > 0:
        unknown.append((windowed.duration_s - tail, windowed.duration_s))
    exits = [(e.start_s, e.end_s) for e in summary.bed_exits]
    duration_s = max(float(windowed.duration_s), 1.0)
    rows = (
        (2.0, "in bed", _spans_h(summary.occupied_spans_s, duration_s), _OCCUPIED),
        (1.0, "movement", _spans_h(moving, duration_s), _MOVEMENT),
        (0.0, "exit / unknown", _spans_h(exits, duration_s), _EXIT),
    )
    for y, _, bars, colour in rows:
        ax.broken_barh(bars, (y + 0.15, 0.7), facecolors=colour, linewidth=0)
    ax.broken_barh(_spans_h(unknown, duration_s), (0.15, 0.7), facecolors="none",
                   edgecolor=_UNKNOWN, hatch="////", linewidth=0.5)
    ax.set_ylim(0.0, 3.0)
    x0, y0, _, y1 = ax.bbox.extents
    for y, label, *_ in rows:  # the rows' names, 3.5 pt left of the strip (no tick)
        overlay.label(x0 - TICK_PX, y0 + (y + 0.5) / 3.0 * (y1 - y0), label, 8.0,
                      "#000000", "right", "center")
    for k, e in enumerate(summary.bed_exits, start=1):
        # Beside the bar, in dark ink: an exit of minutes is a few pixels wide in a night.
        ax.text(e.end_s / 3600.0, 0.5, f"  exit {k}: {e.duration_s / 60:.0f} min",
                ha="left", va="center", fontsize=8, color="#1a1a1a", clip_on=True)
    ax.set_title(f"The night: {summary.n_windows} windows of {summary.window_s:g} s, "
                 f"{summary.n_occupied_windows} occupied, {summary.n_failed_windows} failed",
                 loc="left", fontsize=10, y=1.0)


def _panel(ax: Any, windowed: WindowedAnalysis, name: str, label: str, colour: str) -> bool:
    """Draw one measure across the night; False when no window has a value."""
    t, v, c, unit = [], [], [], ""
    previous_end = None
    for w in windowed.windows:
        if (w.error is not None or w.feature_vector is None or w.occupancy is None
                or not w.occupancy.occupied):
            continue
        f = w.feature_vector.get(name)
        unit = f.unit or unit
        if f.value is None:
            continue
        if previous_end is not None and w.start_s > previous_end + 1e-6:
            t.append(np.nan)  # a break in the line: the windows between have no value
            v.append(np.nan)
            c.append(0.0)
        previous_end = w.end_s
        t.append((w.start_s + w.end_s) / 7200.0)
        v.append(float(f.value))
        c.append(float(f.confidence))
    ax.set_title(f"{label[0].upper() + label[1:]} of each occupied window (point opacity: "
                 "its confidence, 0-1)", loc="left", fontsize=10, y=1.0)
    ax.set_ylabel(f"{label} ({unit})" if unit else label)
    if not t:
        ax.text(0.5, 0.5, "no occupied window with a value", ha="center", va="center",
                transform=ax.transAxes, fontsize=9, color="#1a1a1a")
        return False
    alpha = MIN_ALPHA + (1.0 - MIN_ALPHA) * np.clip(np.asarray(c), 0.0, 1.0)
    from matplotlib.colors import to_rgba

    rgba = np.tile(to_rgba(colour), (len(t), 1))
    rgba[:, 3] = alpha
    ax.plot(t, v, color=colour, linewidth=0.5, alpha=0.35)
    ax.scatter(t, v, s=14, c=rgba, linewidths=0)
    lo, hi = float(np.nanmin(v)), float(np.nanmax(v))
    pad = max(0.08 * (hi - lo), 0.02 * max(abs(hi), 1.0))
    ax.set_ylim(lo - pad, hi + pad)
    return True


def _lowest(ax: Any, summary: NightSummary) -> None:
    """Ring the window of the summary's lowest 5-minute heart rate, when it has one."""
    start, rate = (summary.get("heart_rate_lowest_5min_start_s").value,
                   summary.get("heart_rate_lowest_5min_bpm").value)
    if start is None or rate is None:
        return
    ax.plot([(start + summary.window_s / 2.0) / 3600.0], [rate], linestyle="none",
            marker="o", markersize=9, markerfacecolor="none", markeredgecolor="#1a1a1a",
            markeredgewidth=1.0, label=f"lowest 5-min mean {rate:.1f} /min")


def _exits(ax: Any, summary: NightSummary) -> None:
    for e in summary.bed_exits:
        ax.axvspan(e.start_s / 3600.0, e.end_s / 3600.0, color=_EXIT, alpha=0.15, linewidth=0)


def _headline(summary: NightSummary, windowed: WindowedAnalysis) -> str:
    def show(name: str, fmt: str, scale: float = 1.0, unit: str = "") -> str:
        m = summary.get(name)
        return "none" if m.value is None else f"{m.value * scale:{fmt}}{unit}"

    parts = [
        f"in bed {show('occupied_duration_s', '.1f', 1 / 3600.0, ' h')}",
        f"bed exits {show('bed_exit_count', '.0f')}",
        f"heart rate {show('heart_rate_mean_bpm', '.1f', unit=' /min')}",
        f"breathing {show('breathing_rate_median_per_min', '.1f', unit=' /min')}",
        f"RMSSD {show('rmssd_median_ms', '.0f', unit=' ms')}",
        f"usable {show('usable_fraction', '.0f', 100.0, ' %')}",
        f"{windowed.duration_s / 3600.0:.1f} h at {windowed.fs_hz:g} Hz",
    ]
    return "  |  ".join(parts)
