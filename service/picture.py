"""What the report and the night picture share: the page, the caution, thinning and saving.

Both pictures are drawn with matplotlib's Agg canvas (no pyplot: every figure is its own
object, so threads do not share state), on a page of ``SIZE_IN`` inches at ``DPI``, with
axes at fixed places (no layout engine: constrained layout measured every text of the
figure on each call and drew it twice, about half of the report's time). The caution is
wrapped once per process, dark and at reading size, on its own lines below the panels.
"""

from __future__ import annotations

import functools
import io
import math
import os
import struct
import threading
import zlib
from concurrent.futures import ThreadPoolExecutor
from typing import Any

import numpy as np

from schemas.responses import NOTICE

#: Formats drawn, and their media types.
MEDIA_TYPES = {"png": "image/png", "svg": "image/svg+xml"}
#: Width and height of the image, inches, and its resolution (PNG), dots per inch.
SIZE_IN = (11.0, 8.5)
DPI = 100
#: The caution's size, points (15 px at ``DPI``), and colour (contrast 17:1 on white).
NOTICE_FONT_PT = 11.0
NOTICE_COLOUR = "#1a1a1a"
#: Widest caution line, pixels (the page is 1100 wide), and the gap below it.
NOTICE_WIDTH_PX = 1060.0
NOTICE_BOTTOM = 0.008
#: zlib level of the PNG: 1 writes about 13 % more bytes than 6 in less than half the
#: time, and the image is the same pixels (PNG is lossless).
PNG_COMPRESS_LEVEL = 1
#: Image data, bytes, from which the PNG's zlib stream is compressed in two halves at once
#: (:func:`_deflate`); the report and the night picture are some 3.7 MB.
PARALLEL_DEFLATE_FROM = 1 << 20


def check_format(image_format: str) -> None:
    """Raise ``ValueError`` unless ``image_format`` is one of :data:`MEDIA_TYPES`."""
    if image_format not in MEDIA_TYPES:
        raise ValueError(f"`image_format` must be one of {', '.join(sorted(MEDIA_TYPES))}; "
                         f"got {image_format!r}.")


def new_figure() -> Any:
    """An empty ``SIZE_IN`` figure on its own Agg canvas, no layout engine."""
    # Imported on first use: matplotlib writes its font cache under $HOME when imported,
    # which the service's other paths (and a read-only container) need not do.
    import matplotlib
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure

    # SVG text stays text (not glyph outlines): the caution can be read, searched and
    # checked. The same value on every call, so concurrent threads never see another.
    matplotlib.rcParams["svg.fonttype"] = "none"
    figure = Figure(figsize=SIZE_IN, dpi=DPI)
    FigureCanvasAgg(figure)
    return figure


@functools.lru_cache(maxsize=1)
def caution_lines() -> tuple[str, ...]:
    """The caution split between words into lines of at most ``NOTICE_WIDTH_PX`` pixels.

    Measured once per process with the Agg renderer's text metrics (the font of the
    picture), so a line never runs off the page and no layout pass re-measures it.
    """
    from matplotlib.backends.backend_agg import RendererAgg
    from matplotlib.font_manager import FontProperties

    renderer = RendererAgg(8, 8, DPI)
    font = FontProperties(size=NOTICE_FONT_PT)

    def width(text: str) -> float:
        return float(renderer.get_text_width_height_descent(text, font, ismath=False)[0])

    lines: list[str] = []
    for word in NOTICE.split():
        if lines and width(lines[-1] + " " + word) <= NOTICE_WIDTH_PX:
            lines[-1] += " " + word
        else:
            lines.append(word)
    return tuple(lines)


def draw_caution(figure: Any) -> float:
    """Write the caution centred at the foot of ``figure``; its top in figure fraction."""
    lines = caution_lines()
    figure.text(0.5, NOTICE_BOTTOM, "\n".join(lines), ha="center", va="bottom",
                fontsize=NOTICE_FONT_PT, color=NOTICE_COLOUR, linespacing=1.25)
    line = NOTICE_FONT_PT / 72.0 * 1.25 / SIZE_IN[1]  # one line's height, figure fraction
    return NOTICE_BOTTOM + len(lines) * line


def save(figure: Any, image_format: str) -> bytes:
    """The figure as PNG or SVG bytes, without a date or software stamp."""
    buffer = io.BytesIO()
    if image_format == "svg":
        figure.savefig(buffer, format="svg", dpi=DPI, metadata={"Date": None})
    else:
        figure.savefig(buffer, format="png", dpi=DPI, metadata={"Software": None},
                       pil_kwargs={"compress_level": PNG_COMPRESS_LEVEL})
    return buffer.getvalue()


def png_bytes(canvas: Any) -> bytes:
    """The pixels an Agg canvas holds now, as an 8-bit RGBA PNG.

    Written here rather than through Pillow: every row is the canvas's own RGBA row after
    a filter-type byte of 0, compressed at zlib level ``PNG_COMPRESS_LEVEL``. Keeping the
    (opaque) alpha byte lets each row be copied whole; dropping it was a strided copy
    that, with the larger compression it saved, took longer (about 45 against 35 ms on a
    loaded two-core machine, for a file 10 % smaller). Pillow's adaptive filtering took
    about twice as long again.

    Notes
    -----
    Chunks as in the PNG specification (ISO/IEC 15948:2004): the signature (5.2), IHDR
    with colour type 6 (truecolour with alpha), bit depth 8 (11.2.2), pHYs with ``DPI`` in
    pixels per metre (11.3.5.3), one IDAT of the zlib stream of the filtered rows (11.2.4,
    filter type 0 of 9.2) and IEND (11.2.5); each chunk ends with the CRC-32 of its type
    and data (5.3).
    """
    width, height = canvas.get_width_height()
    rgba = np.asarray(canvas.buffer_rgba()).reshape(height, 4 * width)
    rows = np.empty((height, 1 + 4 * width), dtype=np.uint8)
    rows[:, 0] = 0  # filter type 0: none
    rows[:, 1:] = rgba
    per_metre = round(DPI / 0.0254)

    def chunk(kind: bytes, data: bytes) -> bytes:
        return (struct.pack(">I", len(data)) + kind + data
                + struct.pack(">I", zlib.crc32(kind + data) & 0xFFFFFFFF))

    return b"".join((
        b"\x89PNG\r\n\x1a\n",
        chunk(b"IHDR", struct.pack(">IIBBBBB", width, height, 8, 6, 0, 0, 0)),
        chunk(b"pHYs", struct.pack(">IIB", per_metre, per_metre, 1)),
        chunk(b"IDAT", _deflate(rows)),
        chunk(b"IEND", b""),
    ))


_helper: tuple[int, ThreadPoolExecutor] | None = None
_helper_lock = threading.Lock()


def _cores() -> int:
    """Cores this process may run on (all of the machine's where that is not known)."""
    try:
        return len(os.sched_getaffinity(0))
    except AttributeError:  # not on every platform
        return os.cpu_count() or 1


def _second_thread() -> ThreadPoolExecutor | None:
    """One helper thread per process (made again after a fork), or None on one core."""
    global _helper
    if _cores() < 2:
        return None
    with _helper_lock:
        if _helper is None or _helper[0] != os.getpid():
            _helper = (os.getpid(), ThreadPoolExecutor(1, thread_name_prefix="png-deflate"))
        return _helper[1]


def _raw_deflate(data: memoryview, last: bool) -> bytes:
    part = zlib.compressobj(PNG_COMPRESS_LEVEL, zlib.DEFLATED, -15)
    return part.compress(data) + part.flush(zlib.Z_FINISH if last else zlib.Z_SYNC_FLUSH)


def _deflate(rows: np.ndarray) -> bytes:
    """The zlib stream (RFC 1950) of ``rows``' bytes at ``PNG_COMPRESS_LEVEL``.

    From ``PARALLEL_DEFLATE_FROM`` bytes and with a second core, the two halves are
    compressed at once, this thread and a helper (zlib lets go of the interpreter while it
    compresses): the first half's deflate data ends with a sync flush (an empty stored
    block, byte-aligned, RFC 1951 3.2.4), so the second's follow it as one stream, as
    parallel gzip writers do. The second half starts without the first's history, which
    costs a few bytes; the time is about halved (12 against 6.5 ms for the report's 3.7 MB
    on two idle cores). zlib's own header for the level opens the stream and the Adler-32
    of the whole data closes it. Anywhere else, ``zlib.compress``.
    """
    data = memoryview(np.ascontiguousarray(rows)).cast("B")
    helper = _second_thread() if data.nbytes >= PARALLEL_DEFLATE_FROM else None
    if helper is None:
        return zlib.compress(data, PNG_COMPRESS_LEVEL)
    cut = (rows.shape[0] // 2) * (data.nbytes // rows.shape[0])  # on a row boundary
    start = zlib.adler32(data[:cut])
    # The checksum runs on from the first half's into the second's, in the helper after
    # its half: each thread reads its own half once more (some 0.5 ms of the report's
    # 3.7 MB), where the whole checksum after both halves added about 1 ms in turn.
    second = helper.submit(_deflate_and_check, data[cut:], start)
    first = _raw_deflate(data[:cut], False)
    rest, check = second.result()
    return _zlib_header() + first + rest + struct.pack(">I", check)


def _deflate_and_check(data: memoryview, start: int) -> tuple[bytes, int]:
    """The last part of :func:`_deflate`'s stream, and the Adler-32 run on from ``start``."""
    return _raw_deflate(data, True), zlib.adler32(data, start)


@functools.cache
def _zlib_header() -> bytes:
    """The two header bytes zlib itself writes at ``PNG_COMPRESS_LEVEL`` (RFC 1950 2.2)."""
    return zlib.compress(b"", PNG_COMPRESS_LEVEL)[:2]


def envelope(t: np.ndarray, y: np.ndarray, columns: int) -> tuple[np.ndarray, np.ndarray]:
    """The min/max envelope of ``y`` per pixel column, as a line through both in turn.

    Parameters
    ----------
    t, y
        Times (increasing) and values, equal length.
    columns
        Pixel columns the line spans on the image (at least 1).

    Returns
    -------
    (t, y)
        Unchanged when ``y`` has at most two points per column; otherwise two points per
        column (its lowest and highest value, at the column's first time), so the line
        drawn covers, in each column, exactly the range the full trace covers there.
    """
    columns = max(1, int(columns))
    if y.size <= 2 * columns:
        return t, y
    edges = np.linspace(0, y.size, columns + 1).astype(np.intp)[:-1]
    lo = np.minimum.reduceat(y, edges)
    hi = np.maximum.reduceat(y, edges)
    tt = np.repeat(t[edges], 2)
    yy = np.column_stack([lo, hi]).ravel()
    return tt, yy


def columns_of(ax_rect: tuple[float, float, float, float]) -> int:
    """Pixel columns of an axes placed at ``ax_rect`` (figure fraction) on the page."""
    return math.ceil(ax_rect[2] * SIZE_IN[0] * DPI)


def envelope_line(ax: Any, t: np.ndarray, y: np.ndarray, **style: Any) -> Any:
    """Plot ``y`` against ``t`` on ``ax`` as its min/max envelope per pixel column
    (:func:`envelope`; ``style`` as for ``Axes.plot``) and return the line.

    Where the envelope thinned the trace, the Agg canvas paints the line column by column
    (:func:`paint_columns`) instead of stroking its thousands of short segments, which was
    the largest part of drawing the report; other renderers (SVG) draw the path itself.
    """
    tt, yy = envelope(t, y, columns_of(ax.get_position().bounds))
    if tt.size == t.size:
        return ax.plot(tt, yy, **style)[0]
    line = _column_line_class()(tt, yy, **style)
    ax.add_line(line)
    ax.autoscale(enable=None)  # the limits follow at draw time, as after ``Axes.plot``
    return line


@functools.cache
def _column_line_class() -> type:
    """``Line2D`` whose Agg drawing is :func:`paint_columns` (made on first use: matplotlib
    is imported only when a picture is drawn)."""
    from matplotlib.backends.backend_agg import RendererAgg
    from matplotlib.colors import to_rgba
    from matplotlib.lines import Line2D
    from matplotlib.transforms import Bbox, BboxBase

    class ColumnLine(Line2D):
        def draw(self, renderer: Any) -> None:
            if not isinstance(renderer, RendererAgg) or not self.get_visible():
                super().draw(renderer)
                return
            clip = Bbox.from_extents(0, 0, renderer.width, renderer.height)
            if self.get_clip_on():
                for box in (self.get_clip_box(), self.get_clip_path()):
                    if box is not None and not isinstance(box, BboxBase):
                        box = box.get_fully_transformed_path().get_extents()
                    if box is not None:
                        clip = Bbox.intersection(clip, box) or Bbox.from_extents(0, 0, 0, 0)
            paint_columns(np.asarray(renderer.buffer_rgba()),
                          self.get_transform().transform(self.get_xydata()), clip.extents,
                          to_rgba(self.get_color(), self.get_alpha()),
                          self.get_linewidth() * renderer.dpi / 72.0)
            self.stale = False

    return ColumnLine


def paint_columns(rgba: np.ndarray, xy: np.ndarray, clip: tuple[float, float, float, float],
                  colour: tuple[float, float, float, float], width_px: float) -> None:
    """Paint into ``rgba`` (an opaque canvas, rows top down) what a line through the
    display points ``xy`` (pixels, y up), ``width_px`` wide, covers in each pixel column
    inside ``clip`` (x0, y0, x1, y1 in the same pixels).

    Each segment gives its vertical span to every column it crosses (for an envelope line,
    a column's own low-to-high stroke and the joins to its neighbours); the column's span,
    widened by half the width at each end, is blended over the pixels in proportion to the
    part of each pixel it covers (the anti-aliasing of its two end pixels), at the colour's
    alpha. Exact for the vertical strokes; a steep join is painted a column wide where a
    stroke would be a little narrower.
    """
    height, width = rgba.shape[:2]
    x0, y0, x1, y1 = clip
    ok = np.isfinite(xy).all(axis=1)
    if np.count_nonzero(ok) < 2:
        return
    x, y = xy[ok, 0], xy[ok, 1]
    lo_seg, hi_seg = np.minimum(y[:-1], y[1:]), np.maximum(y[:-1], y[1:])
    c_a = np.floor(np.minimum(x[:-1], x[1:])).astype(np.intp)
    c_b = np.floor(np.maximum(x[:-1], x[1:])).astype(np.intp)
    # the pixel columns wholly inside the clip box
    first = max(int(math.ceil(x0)), int(c_a.min()), 0)
    last = min(int(math.floor(x1)) - 1, int(c_b.max()), width - 1)
    if last < first:
        return
    lo = np.full(last - first + 1, np.inf)
    hi = np.full(last - first + 1, -np.inf)
    span = c_b - c_a
    for step in range(int(span.max()) + 1):  # columns a segment crosses: one or two
        cols = c_a + step
        use = (span >= step) & (cols >= first) & (cols <= last)
        np.minimum.at(lo, cols[use] - first, lo_seg[use])
        np.maximum.at(hi, cols[use] - first, hi_seg[use])
    painted = lo <= hi
    half = 0.5 * width_px
    # the span in rows top down, inside the clip box and the canvas; empty where unpainted
    top = np.maximum(np.maximum(height - hi - half, height - y1), 0.0)
    bottom = np.minimum(np.minimum(height - lo + half, height - y0), float(height))
    empty = ~painted | (bottom <= top)
    top[empty], bottom[empty] = 0.0, 0.0
    ink = 255.0 * np.asarray(colour[:3])
    alpha = colour[3]
    # the pixels the span covers whole: rows ceil(top) to floor(bottom)
    inner_top, inner_end = np.ceil(top), np.floor(bottom)
    r0, r1 = int(inner_top.min()), int(inner_end.max())
    if r1 > r0:
        rows = np.arange(r0, r1, dtype=np.float64)[:, None]
        whole = (rows >= inner_top) & (rows < inner_end)
        if alpha >= 1.0:  # each pixel's four bytes at once: the ink, opaque
            packed = np.array([*np.rint(ink), 255], dtype=np.uint8).view(np.uint32)[0]
            np.copyto(rgba.view(np.uint32)[r0:r1, first:last + 1, 0], packed, where=whole)
        else:
            block = rgba[r0:r1, first:last + 1, :3]
            old = block[whole].astype(np.float64)
            block[whole] = np.rint(old + alpha * (ink - old))
    # the end pixels, in proportion to the part covered (one pixel when both ends share it)
    first_row = np.floor(top)
    one = first_row == inner_end
    share = np.concatenate((np.where(one, bottom - top, first_row + 1.0 - top),
                            (bottom - inner_end)[~one]))
    rows_at = np.concatenate((first_row, inner_end[~one])).astype(np.intp)
    cols_at = np.concatenate((np.arange(first, last + 1), np.arange(first, last + 1)[~one]))
    keep = (share > 0.0) & (rows_at < height)
    _blend(rgba, rows_at[keep], cols_at[keep], alpha * share[keep], ink)


def _blend(rgba: np.ndarray, rows: np.ndarray, cols: np.ndarray, cover: np.ndarray,
           ink: np.ndarray) -> None:
    """The colour of the pixels ``(rows, cols)`` moved toward ``ink`` by ``cover`` (0 to 1),
    rounded."""
    if rows.size:
        old = rgba[rows, cols, :3].astype(np.float64)
        rgba[rows, cols, :3] = np.rint(old + cover[:, None] * (ink - old))
