"""The report image of one analysis (PNG or SVG), drawn with matplotlib's Agg canvas.

Four panels and a bar chart: the fused trace with the masked segments shaded, the
beats marked and the analysis windows (when asked) outlined; the beat ensemble with
the located H, I, J, K, L waves; the beat-to-beat intervals with the breathing signal;
and the confidence of each family. Everything is drawn from the engine's result (the
fused trace is the one the engine kept, ``AnalysisResult.fused_trace``); nothing here
runs a stage of the engine. The page, the caution and saving are shared with the night
picture (:mod:`service.picture`); the axes sit at fixed places and long lines are drawn
from their min/max envelope per pixel column, so the cost of a report hardly grows with
the length of the recording. Ticks, tick and axis labels, texts, the legends' words and
the headline are laid by the overlay (:mod:`service.stamps`), not by matplotlib's axis
and text artists, whose layout and rasterisation were most of a report's time.
"""

from __future__ import annotations

import functools
import threading
from typing import Any

import numpy as np
from scipy import signal

from features.engine import AnalysisResult
from schemas.requests import AnalysisRequest
from service.analysis import analyze_request, dump_analysis
from service.picture import (
    DPI,
    MEDIA_TYPES,
    NOTICE_COLOUR,
    NOTICE_FONT_PT,
    SIZE_IN,
    check_format,
    draw_caution,
    envelope_line,
    new_figure,
    png_bytes,
    save,
)
from service.stamps import (
    Overlay,
    StaticSvg,
    axis_ticks,
    legend_to_overlay,
    texts_to_overlay,
)

__all__ = ["DPI", "MEDIA_TYPES", "NOTICE_COLOUR", "NOTICE_FONT_PT", "SIZE_IN",
           "analysis_with_report", "draw_report", "report_of"]

#: Display band of the trace panel, Hz (the cardiac band; breathing is in its own panel).
DISPLAY_BAND_HZ = (0.7, 20.0)
#: Colour of the breathing signal and of its axis.
_BREATH = "#9467bd"
_FAMILIES = ("quality", "heart_rate", "variability", "morphology", "respiration", "modulation")
#: Where the panels sit (left, bottom, width, height in figure fraction): about the places
#: constrained layout found for them, fixed, with room on the left for tick labels such as
#: "-2.5" or "1000" beside the axis label, and for the caution's lines below.
TRACE_RECT = (0.076, 0.712, 0.910, 0.222)
ENSEMBLE_RECT = (0.076, 0.430, 0.555, 0.205)
INTERVAL_RECT = (0.083, 0.145, 0.548, 0.210)
CONFIDENCE_RECT = (0.768, 0.145, 0.218, 0.490)


@functools.lru_cache(maxsize=8)
def _display_filter(fs_hz: float) -> np.ndarray:
    """Second-order sections of the display band-pass, designed once per rate."""
    high = min(DISPLAY_BAND_HZ[1], 0.45 * fs_hz)
    return np.asarray(signal.butter(2, (DISPLAY_BAND_HZ[0], high), btype="bandpass",
                                    fs=fs_hz, output="sos"))


def _display(trace: np.ndarray, fs_hz: float) -> np.ndarray:
    sos = _display_filter(float(fs_hz))
    if trace.size <= 3 * 2 * sos.shape[0]:
        return trace - np.mean(trace)
    return np.asarray(signal.sosfiltfilt(sos, trace))


def _trace_panel(ax: Any, result: AnalysisResult, trace: np.ndarray) -> None:
    fs = result.input.sampling_rate_hz
    y = _display(trace, fs) * (result.beats.polarity or 1)
    t = np.arange(y.size) / fs
    envelope_line(ax, t, y, color="#1f4e79", linewidth=0.6, label="fused trace")
    for k, segment in enumerate(result.quality.segments):
        ax.axvspan(segment.start_s, segment.end_s, color="#d62728", alpha=0.18, linewidth=0,
                   label="masked" if k == 0 else None)
    beats = np.asarray(result.beats.times_s, dtype=np.float64)
    if beats.size:
        idx = np.clip(np.round(beats * fs).astype(int), 0, y.size - 1)
        ax.plot(beats, y[idx], linestyle="none", marker="v", markersize=3.5, color="#ff7f0e",
                label=f"beats ({beats.size})")
    _window_marks(ax, result)
    ax.set_xlim(0, max(t[-1] if t.size else 1.0, 1e-3))
    unit = result.input.amplitude_unit
    ax.set_ylabel(f"{unit} ({DISPLAY_BAND_HZ[0]:g}-{DISPLAY_BAND_HZ[1]:g} Hz)")


def _window_marks(ax: Any, result: AnalysisResult) -> None:
    """Outline the analysis windows, if any, and say in the legend how many there are."""
    windowed = result.windows
    if windowed is None:
        return
    label = f"{len(windowed.windows)} windows of {windowed.window_s:g} s"
    if windowed.n_failed:
        label += f", {windowed.n_failed} failed"
    for k, window in enumerate(windowed.windows):
        ax.axvspan(window.start_s, window.end_s, ymin=0.0, ymax=0.04,
                   color="#7f7f7f" if window.error is None else "#d62728",
                   alpha=0.5 if k % 2 == 0 else 0.25, linewidth=0,
                   label=label if k == 0 else None)
    if not windowed.windows:
        ax.plot([], [], color="#7f7f7f", label=label)


def _ensemble_panel(ax: Any, result: AnalysisResult) -> None:
    morph = result.morphology
    ax.set_ylabel(morph.amplitude_unit)
    if morph.template is None or morph.template_start_s is None:
        ax.text(0.5, 0.5, "no ensemble (" + (", ".join(morph.flags[:2]) or "not built") + ")",
                ha="center", va="center", transform=ax.transAxes, fontsize=8)
        ax.set_xlim(0.0, 1.0)
        ax.set_ylim(0.0, 1.0)
        return
    template = np.asarray(morph.template, dtype=np.float64)
    # template_start_s is the time of the first sample relative to J (negative).
    t_ms = (np.arange(template.size) / morph.template_fs_hz + morph.template_start_s) * 1000.0
    ax.plot(t_ms, template, color="#2ca02c", linewidth=1.2)
    located = [w for w in morph.waves if w.time_ms is not None and w.amplitude is not None]
    if located:
        ax.plot([w.time_ms for w in located], [w.amplitude for w in located],
                linestyle="none", marker="o", markersize=4, color="#444444")
    for wave in located:
        ax.annotate(f"{wave.name} ({wave.confidence:.2f})", (wave.time_ms, wave.amplitude),
                    textcoords="offset points", xytext=(3, 5), fontsize=7)
    ax.axvline(0.0, color="#999999", linewidth=0.6, linestyle=":")
    ax.text(0.99, 0.02, f"{morph.beats_used} beats", ha="right", va="bottom",
            transform=ax.transAxes, fontsize=7)


def _interval_panel(ax: Any, twin: Any, result: AnalysisResult) -> None:
    times = np.asarray(result.intervals.times_s, dtype=np.float64)
    values = np.asarray(result.intervals.intervals_ms, dtype=np.float64)
    labels = np.asarray(result.interval_labels.labels)
    if times.size:
        normal = labels == "normal" if labels.size == times.size else np.ones(times.size, bool)
        ax.plot(times, values, color="#1f4e79", linewidth=0.8, marker=".", markersize=3,
                label="intervals")
        if (~normal).any():
            ax.plot(times[~normal], values[~normal], linestyle="none", marker="x",
                    markersize=4, color="#d62728", label="not normal")
    else:
        ax.text(0.5, 0.5, "no intervals", ha="center", va="center", transform=ax.transAxes,
                fontsize=8)
        ax.set_ylim(0.0, 1.0)
    resp = result.respiration
    breath = np.asarray(resp.breathing_signal, dtype=np.float64)
    shown = bool(breath.size and np.isfinite(breath).any() and resp.breathing_fs_hz)
    twin.set_visible(shown)
    if shown:
        tb = np.arange(breath.size) / resp.breathing_fs_hz
        envelope_line(twin, tb, breath, color=_BREATH, linewidth=0.7, alpha=0.8)
    if not times.size and not shown:
        ax.set_xlim(0.0, 1.0)


def _confidence_panel(ax: Any, result: AnalysisResult) -> None:
    values = [float(getattr(result, name).confidence) for name in _FAMILIES]
    colours = ["#7f7f7f" if v < 0.5 else "#2ca02c" for v in values]
    if len(ax.patches) != len(values):  # the page's first report: the bars are made
        ax.barh(np.arange(len(values)), values, color=colours)
    for bar, value, colour in zip(ax.patches, values, colours, strict=True):
        bar.set_width(value)  # then kept, and only their lengths and colours change
        bar.set_facecolor(colour)
    for k, value in enumerate(values):
        ax.text(min(value + 0.02, 0.9), k, f"{value:.2f}", va="center", fontsize=7)


def _headline(result: AnalysisResult) -> str:
    hr = result.heart_rate.mean_bpm
    rate = result.respiration.rate_per_min
    sdnn = result.variability.time_domain.sdnn_ms
    parts = [
        f"heart rate {hr:.1f} /min" if hr is not None else "heart rate: none",
        f"breathing {rate:.1f} /min" if rate is not None else "breathing: none",
        f"SDNN {sdnn:.1f} ms" if sdnn is not None else "SDNN: none",
        f"usable {100 * result.quality.usable_fraction:.0f} %",
        f"{result.input.duration_s:.0f} s at {result.input.sampling_rate_hz:g} Hz",
    ]
    return "  |  ".join(parts)


class _Page:
    """One report figure whose set-up is done once and reused.

    Built once: the axes at their places and their frames, the twin axis of the
    breathing signal, the panel titles, the confidence panel's axes and the caution; for
    PNG the pixels of all of these (``background``), for SVG their document
    (``static_svg``). A report restores them and draws after them only what changes (the
    data artists, the confidence bars' lengths, the legends' frames and handles), then
    its overlay: ticks and labels that follow the data, texts, legends' words, headline.
    """

    def __init__(self) -> None:
        figure = new_figure()
        self.figure = figure
        self.trace = figure.add_axes(TRACE_RECT)
        self.ensemble = figure.add_axes(ENSEMBLE_RECT)
        self.confidence = figure.add_axes(CONFIDENCE_RECT)
        self.interval = figure.add_axes(INTERVAL_RECT)
        self.twin = self.interval.twinx()
        for ax, title in ((self.trace, "Trace, masked segments and beats"),
                          (self.ensemble, "Beat ensemble and located waves"),
                          (self.interval, "Beat-to-beat intervals and breathing"),
                          (self.confidence, "Confidence of each family")):
            # A fixed title height: matplotlib otherwise measures the axis on every draw.
            ax.set_title(title, loc="left", fontsize=10, y=1.0)
        self.trace.set_xlabel("time (s)")
        self.ensemble.set_xlabel("time from J (ms)")
        self.interval.set_xlabel("time (s)")
        self.interval.set_ylabel("interval (ms)")
        self.twin.set_ylabel("breathing (a.u.)", color=_BREATH)
        positions = np.arange(len(_FAMILIES))
        conf = self.confidence
        conf.set_yticks(positions, [name.replace("_", " ") for name in _FAMILIES], fontsize=8)
        conf.set_xlim(0, 1)
        conf.set_ylim(len(_FAMILIES) - 0.5, -0.5)  # the first family on top
        conf.set_autoscale_on(False)
        conf.set_xlabel("confidence")
        draw_caution(figure)
        self.moving = (self.trace, self.ensemble, self.interval, self.twin)
        # The axes whose ticks follow the data are not drawn by matplotlib: their ticks,
        # tick labels and axis labels are the overlay's (``overlay``).
        for ax in self.moving:
            ax.xaxis.set_visible(False)
            ax.yaxis.set_visible(False)
        self.fixed: set[Any] = {conf.xaxis, conf.yaxis}
        for ax in (*self.moving, conf):
            self.fixed |= {ax.patch, ax.title, ax._left_title, ax._right_title,
                           *ax.spines.values()}
        self.extra: list[Any] = []  # the legends' frames and handles, figure artists
        # The background: everything that does not change from one report to the next.
        figure.canvas.draw()
        self.background = figure.canvas.copy_from_bbox(figure.bbox)
        self.static_svg = StaticSvg(save(figure, "svg"))

    def clear(self) -> None:
        """Remove the last report's data, legends and data limits."""
        for artist in self.confidence.texts:  # its bars are kept and its limits fixed
            artist.remove()
        for ax in self.moving:
            for artist in [*ax.lines, *ax.collections, *ax.patches, *ax.texts]:
                artist.remove()
            ax.relim()
        for artist in self.extra:
            artist.remove()
        self.extra = []
        for ax in self.moving:
            ax.set_autoscale_on(True)

    def png(self, overlay: Overlay) -> bytes:
        """The report as PNG: the background restored, the changing artists drawn over it,
        then the overlay."""
        canvas = self.figure.canvas
        canvas.restore_region(self.background)
        for artist in self.changing():
            artist.draw(canvas.get_renderer())
        overlay.paint(np.asarray(canvas.buffer_rgba()))
        return png_bytes(canvas)

    def svg(self, overlay: Overlay) -> bytes:
        """The report as SVG: the static part written once, the changing artists and the
        overlay's elements after it."""
        return self.static_svg.with_changes(self.figure, self.changing(), overlay)

    def changing(self) -> list[Any]:
        """The artists that change from one report to the next, in drawing order: of each
        visible axes its children by z-order (as ``Axes.draw``), then ``extra``."""
        out = []
        for ax in (self.trace, self.ensemble, self.confidence, self.interval, self.twin):
            if ax.get_visible():
                children = [a for a in ax.get_children()
                            if a not in self.fixed and a.get_visible()]
                out.extend(sorted(children, key=lambda a: a.get_zorder()))
        return out + self.extra

    def overlay(self, result: AnalysisResult) -> Overlay:
        """The ticks, axis labels, texts and legends that follow the data, and the
        headline; the legends' frames and handles join ``extra``."""
        overlay = Overlay()
        for ax in (self.trace, self.ensemble, self.interval, self.confidence):
            texts_to_overlay(overlay, ax)
        self.extra = [*legend_to_overlay(overlay, self.trace, loc="upper right", ncols=3),
                      *legend_to_overlay(overlay, self.interval, loc="upper left")]
        axis_ticks(overlay, self.trace, "x", side="bottom")
        axis_ticks(overlay, self.trace, "y", side="left")
        axis_ticks(overlay, self.ensemble, "x", side="bottom")
        axis_ticks(overlay, self.ensemble, "y", side="left")
        axis_ticks(overlay, self.interval, "x", side="bottom")
        axis_ticks(overlay, self.interval, "y", side="left")
        if self.twin.get_visible():
            axis_ticks(overlay, self.twin, "y", side="right", size_pt=7.0, colour=_BREATH)
        overlay.label(0.5 * SIZE_IN[0] * DPI, 0.992 * SIZE_IN[1] * DPI, _headline(result),
                      10.0, "#000000", "center", "top")
        return overlay


_PAGES: list[_Page] = []
_PAGES_LOCK = threading.Lock()
#: Pages kept for reuse per process (one per thread drawing at once, up to this many).
MAX_PAGES = 2


def _take_page() -> _Page:
    with _PAGES_LOCK:
        if _PAGES:
            return _PAGES.pop()
    return _Page()


def _give_back(page: _Page) -> None:
    with _PAGES_LOCK:
        if len(_PAGES) < MAX_PAGES:
            _PAGES.append(page)


def draw_report(result: AnalysisResult, *, image_format: str = "png") -> bytes:
    """Draw the report of one analysis.

    Parameters
    ----------
    result
        The engine's result, with its fused trace (``Options.keep_fused_trace``).
    image_format
        ``"png"`` or ``"svg"``.

    Returns
    -------
    bytes
        The image, ``SIZE_IN`` inches at ``DPI`` (1100 x 850 pixels as PNG).

    Raises
    ------
    ValueError
        For another ``image_format``, or a result without its fused trace.
    """
    check_format(image_format)
    if result.fused_trace is None:
        raise ValueError("`result.fused_trace` must be kept to draw the report; got None. "
                         "Analyse with `Options(keep_fused_trace=True)`.")
    trace = np.asarray(result.fused_trace, dtype=np.float64)
    page = _take_page()
    # A page is put back only after a whole report was drawn on it: an error (or the
    # service's deadline interrupting the drawing) leaves it half-changed, so it is dropped.
    page.clear()
    _trace_panel(page.trace, result, trace)
    _ensemble_panel(page.ensemble, result)
    _confidence_panel(page.confidence, result)
    _interval_panel(page.interval, page.twin, result)
    overlay = page.overlay(result)
    image = page.png(overlay) if image_format == "png" else page.svg(overlay)
    _give_back(page)
    return image


def analysis_with_report(request: AnalysisRequest, *,
                         image_format: str = "png") -> tuple[dict[str, Any], bytes]:
    """Run the engine once on ``request``: its JSON document (as ``run_analysis``) and report.

    Raises
    ------
    features.errors.InvalidInputError, features.errors.UnusableSignalError
        From the engine.
    """
    result = analyze_request(request, keep_fused_trace=True)
    return dump_analysis(result, request), draw_report(result, image_format=image_format)


def report_of(request: AnalysisRequest, *, image_format: str = "png") -> bytes:
    """Run the engine once on ``request`` and draw its report (``POST /v1/reports``, which
    answers the image alone and so need not dump the JSON document).

    Raises
    ------
    features.errors.InvalidInputError, features.errors.UnusableSignalError
        From the engine.
    """
    return draw_report(analyze_request(request, keep_fused_trace=True),
                       image_format=image_format)
