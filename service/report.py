"""The report image of one analysis (PNG or SVG), drawn with matplotlib's Agg backend.

Four panels and a bar chart: the fused trace with the masked segments shaded, the
beats marked and the analysis windows (when asked) outlined; the beat ensemble with
the located H, I, J, K, L waves; the beat-to-beat intervals with the breathing signal;
and the confidence of each family. Everything is drawn from the engine's result (the
fused trace is the one the engine kept, ``AnalysisResult.fused_trace``); nothing here
runs a stage of the engine. No pyplot: every figure is its own object, so threads do
not share state.
"""

from __future__ import annotations

import io
import math
from typing import Any

import numpy as np
from scipy import signal

from features.engine import AnalysisResult
from schemas.requests import AnalysisRequest
from schemas.responses import NOTICE
from service.analysis import analyze_request, dump_analysis

#: Formats drawn, and their media types.
MEDIA_TYPES = {"png": "image/png", "svg": "image/svg+xml"}
#: Display band of the trace panel, Hz (the cardiac band; breathing is in its own panel).
DISPLAY_BAND_HZ = (0.7, 20.0)
#: Points drawn per line at most (the trace is thinned by min/max pairs beyond).
MAX_POINTS = 8000
#: Width and height of the image, inches, and its resolution (PNG), dots per inch.
SIZE_IN = (11.0, 8.5)
DPI = 100
_FAMILIES = ("quality", "heart_rate", "variability", "morphology", "respiration", "modulation")
#: The caution's size, points (15 px at ``DPI``), and colour (contrast 17:1 on white).
NOTICE_FONT_PT = 11.0
NOTICE_COLOUR = "#1a1a1a"


def _display(trace: np.ndarray, fs_hz: float) -> np.ndarray:
    high = min(DISPLAY_BAND_HZ[1], 0.45 * fs_hz)
    sos = signal.butter(2, (DISPLAY_BAND_HZ[0], high), btype="bandpass", fs=fs_hz, output="sos")
    if trace.size <= 3 * 2 * sos.shape[0]:
        return trace - np.mean(trace)
    return np.asarray(signal.sosfiltfilt(sos, trace))


def _thin(t: np.ndarray, y: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """At most MAX_POINTS points: the min and max of each block, in time order."""
    if y.size <= MAX_POINTS:
        return t, y
    block = math.ceil(y.size / (MAX_POINTS // 2))
    n = (y.size // block) * block
    yb = y[:n].reshape(-1, block)
    tb = t[:n].reshape(-1, block)
    lo, hi = yb.argmin(axis=1), yb.argmax(axis=1)
    rows = np.arange(yb.shape[0])
    first = np.minimum(lo, hi)
    second = np.maximum(lo, hi)
    tt = np.column_stack([tb[rows, first], tb[rows, second]]).ravel()
    yy = np.column_stack([yb[rows, first], yb[rows, second]]).ravel()
    return tt, yy


def _trace_panel(ax: Any, result: AnalysisResult, trace: np.ndarray) -> None:
    fs = result.input.sampling_rate_hz
    y = _display(trace, fs) * (result.beats.polarity or 1)
    t = np.arange(y.size) / fs
    tt, yy = _thin(t, y)
    ax.plot(tt, yy, color="#1f4e79", linewidth=0.6, label="fused trace")
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
    ax.set_xlabel("time (s)")
    unit = result.input.amplitude_unit
    ax.set_ylabel(f"{unit} ({DISPLAY_BAND_HZ[0]:g}-{DISPLAY_BAND_HZ[1]:g} Hz)")
    ax.set_title("Trace, masked segments and beats", loc="left", fontsize=10)
    ax.legend(loc="upper right", fontsize=7, ncols=3)


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
    ax.set_title("Beat ensemble and located waves", loc="left", fontsize=10)
    if morph.template is None or morph.template_start_s is None:
        ax.text(0.5, 0.5, "no ensemble (" + (", ".join(morph.flags[:2]) or "not built") + ")",
                ha="center", va="center", transform=ax.transAxes, fontsize=8)
        return
    template = np.asarray(morph.template, dtype=np.float64)
    # template_start_s is the time of the first sample relative to J (negative).
    t_ms = (np.arange(template.size) / morph.template_fs_hz + morph.template_start_s) * 1000.0
    ax.plot(t_ms, template, color="#2ca02c", linewidth=1.2)
    for wave in morph.waves:
        if wave.time_ms is None or wave.amplitude is None:
            continue
        ax.plot([wave.time_ms], [wave.amplitude], marker="o", markersize=4, color="#444444")
        ax.annotate(f"{wave.name} ({wave.confidence:.2f})", (wave.time_ms, wave.amplitude),
                    textcoords="offset points", xytext=(3, 5), fontsize=7)
    ax.axvline(0.0, color="#999999", linewidth=0.6, linestyle=":")
    ax.set_xlabel("time from J (ms)")
    ax.set_ylabel(morph.amplitude_unit)
    ax.text(0.99, 0.02, f"{morph.beats_used} beats", ha="right", va="bottom",
            transform=ax.transAxes, fontsize=7)


def _interval_panel(ax: Any, result: AnalysisResult) -> None:
    ax.set_title("Beat-to-beat intervals and breathing", loc="left", fontsize=10)
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
        ax.legend(loc="upper left", fontsize=7)
    else:
        ax.text(0.5, 0.5, "no intervals", ha="center", va="center", transform=ax.transAxes,
                fontsize=8)
    ax.set_xlabel("time (s)")
    ax.set_ylabel("interval (ms)")
    resp = result.respiration
    breath = np.asarray(resp.breathing_signal, dtype=np.float64)
    if breath.size and np.isfinite(breath).any() and resp.breathing_fs_hz:
        twin = ax.twinx()
        tb = np.arange(breath.size) / resp.breathing_fs_hz
        tb, breath = _thin(tb, breath)
        twin.plot(tb, breath, color="#9467bd", linewidth=0.7, alpha=0.8)
        twin.set_ylabel("breathing (a.u.)", color="#9467bd")
        twin.tick_params(axis="y", labelsize=7, colors="#9467bd")


def _confidence_panel(ax: Any, result: AnalysisResult) -> None:
    values = [float(getattr(result, name).confidence) for name in _FAMILIES]
    positions = np.arange(len(values))
    ax.barh(positions, values, color=["#7f7f7f" if v < 0.5 else "#2ca02c" for v in values])
    ax.set_yticks(positions, [name.replace("_", " ") for name in _FAMILIES], fontsize=8)
    ax.set_xlim(0, 1)
    ax.invert_yaxis()
    for k, value in enumerate(values):
        ax.text(min(value + 0.02, 0.9), k, f"{value:.2f}", va="center", fontsize=7)
    ax.set_xlabel("confidence")
    ax.set_title("Confidence of each family", loc="left", fontsize=10)


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
    if image_format not in MEDIA_TYPES:
        raise ValueError(f"`image_format` must be one of {', '.join(sorted(MEDIA_TYPES))}; "
                         f"got {image_format!r}.")
    if result.fused_trace is None:
        raise ValueError("`result.fused_trace` must be kept to draw the report; got None. "
                         "Analyse with `Options(keep_fused_trace=True)`.")
    trace = np.asarray(result.fused_trace, dtype=np.float64)
    # Imported on first use: matplotlib writes its font cache under $HOME when imported,
    # which the service's other paths (and a read-only container) need not do.
    import matplotlib
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure

    # SVG text stays text (not glyph outlines): the caution can be read, searched and
    # checked. The same value on every call, so concurrent threads never see another.
    matplotlib.rcParams["svg.fonttype"] = "none"

    figure = Figure(figsize=SIZE_IN, dpi=DPI, layout="constrained")
    FigureCanvasAgg(figure)
    grid = figure.add_gridspec(3, 3, height_ratios=(1.1, 1.0, 1.0))
    _trace_panel(figure.add_subplot(grid[0, :]), result, trace)
    _ensemble_panel(figure.add_subplot(grid[1, :2]), result)
    _confidence_panel(figure.add_subplot(grid[1:, 2]), result)
    _interval_panel(figure.add_subplot(grid[2, :2]), result)
    figure.suptitle(_headline(result), fontsize=10)
    # The caution on its own line(s) below the panels, dark and at reading size.
    figure.supxlabel(NOTICE, fontsize=NOTICE_FONT_PT, color=NOTICE_COLOUR, wrap=True)
    buffer = io.BytesIO()
    metadata = {"Date": None} if image_format == "svg" else {"Software": None}
    figure.savefig(buffer, format=image_format, dpi=DPI, metadata=metadata)
    return buffer.getvalue()


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
