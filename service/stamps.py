"""Text and tick marks laid on a picture without matplotlib's artists: the overlay.

A picture's changing words (tick labels, axis units, legends, the headline) cost
matplotlib a text layout and a glyph rasterisation each on every draw. Here a text is
measured and rasterised once per process (the same Agg renderer and font as the figure),
kept as a coverage stamp, and laid on the page by array compositing: a few microseconds
for a label seen before. The same overlay is written into an SVG as ``<text>`` and
``<path>`` elements, so both formats show the same words at the same places.

Coordinates are pixels of the page at ``DPI``, x to the right and y up from the bottom
(matplotlib's display coordinates); SVG user units are points, y down.
"""

from __future__ import annotations

import functools
import math
from dataclasses import dataclass
from typing import Any
from xml.sax.saxutils import escape

import numpy as np

from service.picture import DPI, SIZE_IN
from service.ticks import nice_ticks, tick_labels

__all__ = ["Label", "Mark", "Overlay", "StaticSvg", "axis_ticks", "legend_to_overlay", "text_size",
           "caution", "points_to_svg", "texts_to_overlay", "title", "with_overlay"]

#: Page height in pixels, and points per pixel (SVG units).
_HEIGHT_PX = SIZE_IN[1] * DPI
_PT_PER_PX = 72.0 / DPI
#: Blank pixels around a stamp's text box (glyphs may overhang their advance).
_PAD = 3
#: Fonts as matplotlib's SVG backend names them (the Agg raster uses the first found).
_SVG_FONTS = ("'DejaVu Sans', 'Bitstream Vera Sans', 'Lucida Grande', 'Verdana', "
              "'Arial', 'Helvetica', sans-serif")


@dataclass(frozen=True)
class Label:
    """One text: anchor point (pixels), alignment of its box on it, size, colour, angle.

    ``ha`` is left, center or right; ``va`` top, center, baseline or bottom, of the text's
    box (ascent of "lp" above the baseline, its descent below), before rotation;
    ``rotation`` is 0 or 90 degrees (reading upwards).
    """

    x: float
    y: float
    text: str
    size_pt: float = 10.0
    colour: str = "#000000"
    ha: str = "center"
    va: str = "center"
    rotation: int = 0


@dataclass(frozen=True)
class Mark:
    """A filled rectangle in pixels (x0, y0 bottom-left; x1, y1 top-right), e.g. a tick."""

    x0: float
    y0: float
    x1: float
    y1: float
    colour: str = "#000000"


@functools.lru_cache(maxsize=4096)
def text_size(text: str, size_pt: float) -> tuple[float, float, float]:
    """(width, ascent, descent) of ``text`` in pixels, by the Agg renderer's metrics.

    Ascent and descent are at least those of "lp", so labels of one row line up.
    """
    renderer, prop = _measurer(size_pt)
    width, height, descent = renderer.get_text_width_height_descent(text, prop, ismath=False)
    _, lp_height, lp_descent = renderer.get_text_width_height_descent("lp", prop, ismath=False)
    return (float(width), float(max(height - descent, lp_height - lp_descent)),
            float(max(descent, lp_descent)))


@functools.lru_cache(maxsize=16)
def _measurer(size_pt: float) -> tuple[Any, Any]:
    from matplotlib.backends.backend_agg import RendererAgg
    from matplotlib.font_manager import FontProperties

    return RendererAgg(8, 8, DPI), FontProperties(size=size_pt)


@functools.lru_cache(maxsize=4096)
def _stamp(text: str, size_pt: float, colour: str, rotation: int) -> tuple[np.ndarray,
                                                                          np.ndarray]:
    """The rasterised text as blending terms: ``255 - coverage`` and ``colour * coverage
    + 127`` (coverage 0-255, rows from the top; uint16, height x width x 1 and x 3).

    The box of :func:`text_size` starts ``_PAD`` pixels in from the stamp's top-left
    corner (before rotation).
    """
    from matplotlib.backends.backend_agg import RendererAgg
    from matplotlib.colors import to_rgb
    from matplotlib.font_manager import FontProperties

    width, ascent, descent = text_size(text, size_pt)
    renderer = RendererAgg(math.ceil(width) + 2 * _PAD,
                           math.ceil(ascent + descent) + 2 * _PAD, DPI)
    gc = renderer.new_gc()
    gc.set_foreground("#000000")
    # Agg's text y is downwards, at the baseline.
    renderer.draw_text(gc, _PAD, _PAD + ascent, text, FontProperties(size=size_pt), 0)
    coverage = np.array(np.asarray(renderer.buffer_rgba())[..., 3])
    if rotation == 90:
        coverage = np.ascontiguousarray(np.rot90(coverage))
    rgb = np.array([round(255 * c) for c in to_rgb(colour)], dtype=np.uint16)
    # Blending terms computed once: what is kept of the page (255 - coverage) and what is
    # added (colour times coverage, plus 127 to round the division by 255).
    cover = coverage.astype(np.uint16)[..., None]
    return 255 - cover, rgb * cover + 127


def _box(label: Label) -> tuple[float, float, float, float]:
    """(left, top) of the label's unrotated box in pixels from the page's top-left, with
    its width and height, after alignment (rotation 90 turns the box about the anchor)."""
    width, ascent, descent = text_size(label.text, label.size_pt)
    height = ascent + descent
    along = {"left": 0.0, "center": width / 2.0, "right": width}[label.ha]
    across = {"top": 0.0, "center": height / 2.0, "baseline": ascent,
              "bottom": height}[label.va]
    top_down = _HEIGHT_PX - label.y
    if label.rotation == 90:
        # Reading upwards: the text runs up the page from its left end; its top faces left.
        return label.x - across, top_down - width + along, height, width
    return label.x - along, top_down - across, width, height


class Overlay:
    """Labels and marks gathered for one picture, then laid on its PNG pixels or its SVG."""

    def __init__(self) -> None:
        self.labels: list[Label] = []
        self.marks: list[Mark] = []
        #: Points for the SVG alone, (x, y, radius in pixels, colour, opacity): see
        #: :func:`points_to_svg`. The PNG keeps matplotlib's raster of the same points.
        self.svg_points: list[tuple[float, float, float, str, float]] = []

    def label(self, *args: Any, **kwargs: Any) -> Label:
        """Add a :class:`Label` (same arguments) and return it."""
        item = Label(*args, **kwargs)
        self.labels.append(item)
        return item

    def mark(self, x0: float, y0: float, x1: float, y1: float,
             colour: str = "#000000") -> None:
        """Add a :class:`Mark`."""
        self.marks.append(Mark(x0, y0, x1, y1, colour))

    def paint(self, rgba: np.ndarray) -> None:
        """Lay the marks, then the labels, on ``rgba`` (height x width x 4, rows from the
        top, opaque), in place."""
        from matplotlib.colors import to_rgb

        height, width = rgba.shape[:2]
        for m in self.marks:
            c0, c1 = max(0, round(m.x0)), min(width, max(round(m.x1), round(m.x0) + 1))
            r0 = max(0, round(_HEIGHT_PX - m.y1))
            r1 = min(height, max(round(_HEIGHT_PX - m.y0), r0 + 1))
            rgba[r0:r1, c0:c1, :3] = [round(255 * c) for c in to_rgb(m.colour)]
        for label in self.labels:
            keep, add = _stamp(label.text, label.size_pt, label.colour, label.rotation)
            left, top, _, _ = _box(label)
            _composite(rgba, keep, add, round(left) - _PAD, round(top) - _PAD)

    def svg(self) -> str:
        """The overlay as SVG elements (points, y down), to close the picture's document."""
        parts = ['<g id="overlay">']
        for m in self.marks:
            x, y = m.x0 * _PT_PER_PX, (_HEIGHT_PX - m.y1) * _PT_PER_PX
            w, h = (m.x1 - m.x0) * _PT_PER_PX, (m.y1 - m.y0) * _PT_PER_PX
            parts.append(f'<rect x="{x:.2f}" y="{y:.2f}" width="{w:.2f}" height="{h:.2f}" '
                         f'style="fill: {m.colour}"/>')
        for x, y, r, colour, alpha in self.svg_points:
            parts.append(f'<circle cx="{x * _PT_PER_PX:.2f}" '
                         f'cy="{(_HEIGHT_PX - y) * _PT_PER_PX:.2f}" r="{r * _PT_PER_PX:.2f}" '
                         f'style="fill: {colour}; fill-opacity: {alpha:.3f}"/>')
        for label in self.labels:
            parts.append(_svg_text(label))
        parts.append("</g>")
        return "\n".join(parts)


def _svg_text(label: Label) -> str:
    """One ``<text>`` element on the baseline at the label's own anchor along the text
    (``text-anchor`` start, middle or end), as the raster places it: a viewer with
    another font keeps centred and right-aligned texts where they belong."""
    width, ascent, _ = text_size(label.text, label.size_pt)
    left, top, _, _ = _box(label)
    along = {"left": 0.0, "center": width / 2.0, "right": width}[label.ha]
    anchor = {"left": "start", "center": "middle", "right": "end"}[label.ha]
    if label.rotation == 90:
        x, y = left + ascent, top + width - along  # up the page from the text's start
        turn = f' transform="rotate(-90 {x * _PT_PER_PX:.2f} {y * _PT_PER_PX:.2f})"'
    else:
        x, y, turn = left + along, top + ascent, ""
    return (f'<text x="{x * _PT_PER_PX:.2f}" y="{y * _PT_PER_PX:.2f}"{turn} '
            f'style="font-size: {label.size_pt:g}px; font-family: {_SVG_FONTS}; '
            f'fill: {label.colour}; text-anchor: {anchor}">{escape(label.text)}</text>')


def _composite(rgba: np.ndarray, keep: np.ndarray, add: np.ndarray, left: int,
               top: int) -> None:
    """Blend a stamp (``keep``, ``add`` of :func:`_stamp`) onto ``rgba`` at (left, top):
    ``(page * keep + add) // 255`` per channel, the usual "over" with the text's coverage
    as its opacity, in integers."""
    height, width = rgba.shape[:2]
    r0, c0 = max(0, top), max(0, left)
    r1, c1 = min(height, top + keep.shape[0]), min(width, left + keep.shape[1])
    if r1 <= r0 or c1 <= c0:
        return
    rows, cols = slice(r0 - top, r1 - top), slice(c0 - left, c1 - left)
    dst = rgba[r0:r1, c0:c1, :3]
    dst[...] = (dst * keep[rows, cols] + add[rows, cols]) // 255


#: Tick length and the gap from a tick to its label, pixels (3.5 pt each, matplotlib's
#: defaults), the gap from tick labels to the axis label (4 pt), and tick width (0.8 pt).
TICK_PX = 3.5 / _PT_PER_PX
LABEL_GAP_PX = 4.0 / _PT_PER_PX
TICK_WIDTH_PX = 0.8 / _PT_PER_PX
#: Most tick intervals across an axis: its length over three label heights (x) or two
#: (y), between 1 and 9, as matplotlib's ``Axis.get_tick_space`` and ``MaxNLocator``.
_SPACE_PER_TICK = {"x": 3.0, "y": 2.0}


def axis_ticks(overlay: Overlay, ax: Any, which: str, *, side: str,
               size_pt: float = 10.0, colour: str = "#000000", labels: bool = True,
               ticks: bool = True) -> None:
    """Ticks, tick labels and the axis label of one axis of ``ax``, onto ``overlay``.

    Parameters
    ----------
    overlay
        Where the marks and labels go.
    ax
        A matplotlib axes with linear scales whose ``which`` axis artist is hidden: its
        view limits and its label text (``set_xlabel``/``set_ylabel``) are read here.
    which
        ``"x"`` or ``"y"``.
    side
        ``"bottom"`` for x; ``"left"`` or ``"right"`` for y.
    size_pt, colour
        Of the tick labels (the axis label is 10 pt, in its own colour).
    labels
        False: tick marks alone (an x axis whose labels the panel below carries).
    ticks
        False: the axis label alone (a panel with nothing to scale).
    """
    x0, y0, x1, y1 = ax.bbox.extents
    lo, hi = ax.get_xlim() if which == "x" else ax.get_ylim()
    start, end = (x0, x1) if which == "x" else (y0, y1)
    length_pt = (end - start) * _PT_PER_PX
    max_ticks = int(np.clip(length_pt // (size_pt * _SPACE_PER_TICK[which]), 1, 9))
    at_ticks = nice_ticks(lo, hi, max_ticks=max_ticks) if ticks else np.empty(0)
    where = (start + (at_ticks - lo) * ((end - start) / (hi - lo)) if hi != lo
             else at_ticks * 0)
    half = TICK_WIDTH_PX / 2.0
    widest = 0.0
    axis_label = (ax.xaxis if which == "x" else ax.yaxis).label
    texts = tick_labels(at_ticks) if labels else [""] * at_ticks.size
    for at, text in zip(where, texts, strict=True):
        if side == "bottom":
            overlay.mark(at - half, y0 - TICK_PX, at + half, y0)
            if text:
                overlay.label(at, y0 - 2 * TICK_PX, text, size_pt, colour, "center", "top")
        elif side == "left":
            overlay.mark(x0 - TICK_PX, at - half, x0, at + half)
            if text:
                overlay.label(x0 - 2 * TICK_PX, at, text, size_pt, colour, "right", "center")
        else:
            overlay.mark(x1, at - half, x1 + TICK_PX, at + half)
            if text:
                overlay.label(x1 + 2 * TICK_PX, at, text, size_pt, colour, "left", "center")
        widest = max(widest, text_size(text, size_pt)[0]) if text else widest
    name = axis_label.get_text()
    if not name or not labels:
        return
    label_colour = _hex(axis_label.get_color())
    if side == "bottom":
        _, ascent, descent = text_size("0", size_pt)
        overlay.label((x0 + x1) / 2.0, y0 - 2 * TICK_PX - ascent - descent - LABEL_GAP_PX,
                      name, 10.0, label_colour, "center", "top")
    elif side == "left":
        overlay.label(x0 - 2 * TICK_PX - widest - LABEL_GAP_PX, (y0 + y1) / 2.0, name, 10.0,
                      label_colour, "center", "bottom", 90)
    else:
        overlay.label(x1 + 2 * TICK_PX + widest + LABEL_GAP_PX, (y0 + y1) / 2.0, name, 10.0,
                      label_colour, "center", "top", 90)


def _hex(colour: Any) -> str:
    from matplotlib.colors import to_hex

    return str(to_hex(colour))


def with_overlay(svg: bytes, overlay: Overlay) -> bytes:
    """``svg`` (a document matplotlib wrote) with ``overlay``'s elements before its end."""
    end = svg.rindex(b"</svg>")
    return svg[:end] + overlay.svg().encode("utf-8") + b"\n" + svg[end:]


def texts_to_overlay(overlay: Overlay, ax: Any) -> None:
    """Move the texts and annotations of ``ax`` onto ``overlay`` (hidden on the axes).

    A text keeps its place (its own transform, or an annotation's point plus its offset
    in points), size, colour and alignment; annotations are drawn without arrows here.
    An annotation whose point lies outside the axes is dropped (as matplotlib's default
    ``annotation_clip`` drops it); another text clipped to the axes (``clip_on=True``) is
    left to matplotlib, which clips it.
    """
    from matplotlib.text import Annotation

    for text in ax.texts:
        if not text.get_visible():
            continue
        if isinstance(text, Annotation):
            x, y = ax.transData.transform(text.xy)
            if not ax.bbox.contains(x, y):
                text.set_visible(False)
                continue
            dx, dy = text.xyann
            x, y = x + dx / _PT_PER_PX, y + dy / _PT_PER_PX
        elif text.get_clip_on():
            continue
        else:
            x, y = text.get_transform().transform(text.get_position())
        va = text.get_verticalalignment()
        overlay.label(float(x), float(y), text.get_text(), float(text.get_fontsize()),
                      _hex(text.get_color()), text.get_horizontalalignment(),
                      "center" if va == "center_baseline" else va)
        text.set_visible(False)


#: Legend geometry in font sizes (matplotlib's rcParams ``legend.*`` defaults).
_BORDER_PAD, _LABEL_SPACING, _HANDLE_LENGTH = 0.4, 0.5, 2.0
_HANDLE_PAD, _AXES_PAD, _COLUMN_SPACING = 0.8, 0.5, 2.0


def legend_to_overlay(overlay: Overlay, ax: Any, *, loc: str, ncols: int = 1,
                      size_pt: float = 7.0, frame: bool = True) -> list[Any]:
    """A legend of the labelled artists of ``ax``: its words on ``overlay``, its frame and
    handles as figure artists (returned, to be drawn after the axes and removed later).

    Parameters
    ----------
    loc
        ``"upper right"`` or ``"upper left"`` of the axes.
    ncols
        Columns, filled top to bottom then left to right (as matplotlib's legend).
    """
    from matplotlib.lines import Line2D
    from matplotlib.patches import Rectangle

    handles, names = ax.get_legend_handles_labels()
    if not handles:
        return []
    figure = ax.figure
    size_px = size_pt / _PT_PER_PX
    _, ascent, descent = text_size("lp", size_pt)
    row = ascent + descent
    ncols = max(1, min(ncols, len(handles)))
    nrows = math.ceil(len(handles) / ncols)
    columns = [list(range(c * nrows, min((c + 1) * nrows, len(handles))))
               for c in range(ncols)]
    widths = [(_HANDLE_LENGTH + _HANDLE_PAD) * size_px
              + max(text_size(names[k], size_pt)[0] for k in col) for col in columns if col]
    box_w = (2 * _BORDER_PAD + _COLUMN_SPACING * (len(widths) - 1)) * size_px + sum(widths)
    box_h = 2 * _BORDER_PAD * size_px + nrows * row + (nrows - 1) * _LABEL_SPACING * size_px
    x0, _, x1, y1 = ax.bbox.extents
    left = x1 - _AXES_PAD * size_px - box_w if loc == "upper right" else x0 + _AXES_PAD * size_px
    top = y1 - _AXES_PAD * size_px
    page_w, page_h = SIZE_IN[0] * DPI, _HEIGHT_PX
    made: list[Any] = []
    if frame:
        made.append(Rectangle((left / page_w, (top - box_h) / page_h), box_w / page_w,
                              box_h / page_h, transform=figure.transFigure, facecolor="white",
                              edgecolor="0.8", linewidth=1.0, alpha=0.8))
    hx = left + _BORDER_PAD * size_px
    for col, width in zip(columns, widths, strict=False):
        for r, k in enumerate(col):
            cy = top - _BORDER_PAD * size_px - r * (row + _LABEL_SPACING * size_px) - row / 2
            made.extend(_handle(handles[k], hx, cy, size_px, figure, Line2D, Rectangle))
            overlay.label(hx + (_HANDLE_LENGTH + _HANDLE_PAD) * size_px, cy, names[k],
                          size_pt, "#000000", "left", "center")
        hx += width + _COLUMN_SPACING * size_px
    for artist in made:
        figure.add_artist(artist)
    return made


def _handle(source: Any, hx: float, cy: float, size_px: float, figure: Any,
            line_type: Any, rect_type: Any) -> list[Any]:
    """The handle of ``source`` (a line or a patch), ``_HANDLE_LENGTH`` font sizes wide."""
    page_w, page_h = SIZE_IN[0] * DPI, _HEIGHT_PX
    length = _HANDLE_LENGTH * size_px
    if not isinstance(source, line_type):
        height = 0.7 * size_px
        return [rect_type((hx / page_w, (cy - height / 2) / page_h), length / page_w,
                          height / page_h, transform=figure.transFigure,
                          facecolor=source.get_facecolor(), linewidth=0)]
    style = {"color": source.get_color(), "alpha": source.get_alpha(),
             "transform": figure.transFigure}
    made = []
    if source.get_linestyle() not in ("None", "none", " ", ""):
        made.append(line_type([hx / page_w, (hx + length) / page_w], [cy / page_h] * 2,
                              linewidth=source.get_linewidth(),
                              linestyle=source.get_linestyle(), **style))
    if source.get_marker() not in ("None", "none", " ", "", None):
        made.append(line_type([(hx + length / 2) / page_w], [cy / page_h], linestyle="none",
                              marker=source.get_marker(), markersize=source.get_markersize(),
                              markerfacecolor=source.get_markerfacecolor(),
                              markeredgecolor=source.get_markeredgecolor(),
                              markeredgewidth=source.get_markeredgewidth(), **style))
    return made


class StaticSvg:
    """An SVG document of a figure's static part, to which each picture adds its changes.

    matplotlib writes the figure's artists inside one group (``<g id="figure_1">``), then
    the clip paths and hatches they use (``<defs>``). The changing artists of a picture are
    written by a fresh SVG renderer (the figure at 72 dots per inch while they draw, as
    ``savefig`` sets it) and spliced at the end of that group; their own ``<defs>`` follow
    the static ones, and the overlay closes the document. The static part is written once,
    so its texts are laid out once.
    """

    def __init__(self, svg: bytes) -> None:
        text = svg.decode("utf-8")
        group_end = text.rindex(" </g>\n")
        self.head = text[:group_end]
        self.tail = text[group_end:text.rindex("</svg>")]

    def with_changes(self, figure: Any, artists: list[Any], overlay: Overlay) -> bytes:
        """The document with ``artists`` drawn after the static part, then ``overlay``."""
        import io

        from matplotlib.backends.backend_svg import RendererSVG

        buffer = io.StringIO()
        width, height = figure.get_size_inches()
        renderer = RendererSVG(width * 72, height * 72, buffer, image_dpi=DPI,
                               metadata={"Date": None})
        start = buffer.tell()  # after the header the renderer wrote
        dpi = figure.dpi
        figure.dpi = 72
        try:
            for k, artist in enumerate(artists, start=1):
                artist.set_gid(f"changing_{k}")  # ids apart from the static part's
                artist.draw(renderer)
            renderer.finalize()
        finally:
            figure.dpi = dpi
        body = buffer.getvalue()
        changes = body[start:body.rindex("</svg>")]
        # The changes' own <defs> (clip paths, markers) may come after the last group.
        cut = changes.rfind("\n <defs>")
        drawn, defs = (changes[:cut], changes[cut:]) if cut >= 0 else (changes, "")
        return "".join((self.head, drawn, "\n", self.tail, defs, "\n", overlay.svg(),
                        "\n</svg>\n")).encode("utf-8")


#: Gap between an axes' top and its title's baseline, points (matplotlib's axes.titlepad).
TITLE_PAD_PT = 6.0


def title(overlay: Overlay, ax: Any, text: str, *, size_pt: float = 10.0) -> None:
    """A title over the left end of ``ax``, as ``ax.set_title(text, loc="left")`` sets it."""
    x0, _, _, y1 = ax.bbox.extents
    overlay.label(x0, y1 + TITLE_PAD_PT / _PT_PER_PX, text, size_pt, "#000000", "left",
                  "baseline")


def caution(overlay: Overlay) -> None:
    """The caution's lines at the foot of the page, as :func:`service.picture.draw_caution`
    writes them: centred, ``NOTICE_FONT_PT``, ``NOTICE_COLOUR``, line spacing 1.25."""
    from service.picture import NOTICE_BOTTOM, NOTICE_COLOUR, NOTICE_FONT_PT, caution_lines

    lines = caution_lines()
    step = NOTICE_FONT_PT * 1.25 / _PT_PER_PX
    bottom = NOTICE_BOTTOM * _HEIGHT_PX
    for k, line in enumerate(lines):
        overlay.label(SIZE_IN[0] * DPI / 2.0, bottom + (len(lines) - 1 - k) * step, line,
                      NOTICE_FONT_PT, NOTICE_COLOUR, "center", "bottom")


def points_to_svg(overlay: Overlay, ax: Any, points: Any) -> None:
    """A scatter's round points (``ax.scatter``, no edge) as ``<circle>`` elements of the
    overlay's SVG, hidden on the axes.

    matplotlib's SVG writer spends a style lookup per point of a collection whose points
    each have their own colour (about 0.2 ms a point: half a second for the 2,880 points
    of a night in 30-s windows); a circle per point written here is a string each. Same
    centre (data to pixels by the axes' transform), radius (a marker of area ``s``
    square points is ``sqrt(s)`` points across) and colour with its opacity.
    """
    from matplotlib.colors import to_hex

    xy = ax.transData.transform(np.asarray(points.get_offsets(), dtype=np.float64))
    colours = points.get_facecolors()
    sizes = points.get_sizes()
    for k, (x, y) in enumerate(xy):
        if not (math.isfinite(x) and math.isfinite(y)):
            continue
        rgba = colours[k % len(colours)]
        radius_px = math.sqrt(sizes[k % len(sizes)]) / 2.0 / _PT_PER_PX
        overlay.svg_points.append((float(x), float(y), radius_px, to_hex(rgba[:3]),
                                   float(rgba[3])))
    points.set_visible(False)
