"""Long lines painted per pixel column (service.picture.envelope_line, paint_columns).

The reference is matplotlib's own Agg renderer stroking the same min/max envelope line:
the painted line must ink what the stroke inks and nothing away from it, leave the page
outside the axes alone, and the SVG must keep matplotlib's path.
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy import ndimage

from service.picture import columns_of, envelope, envelope_line, new_figure

RECT = (0.076, 0.712, 0.910, 0.222)  # the report's trace panel


def _trace(seed):
    rng = np.random.default_rng(seed)
    y = np.cumsum(rng.normal(size=30_000)) + 5.0 * np.sin(np.arange(30_000) / 40.0)
    return np.arange(y.size) / 250.0, y


def _figure(seed, painted, ylim=None, alpha=None):
    figure = new_figure()
    ax = figure.add_axes(RECT)
    t, y = _trace(seed)
    if painted:
        envelope_line(ax, t, y, color="#1f4e79", linewidth=0.6, alpha=alpha)
    else:
        tt, yy = envelope(t, y, columns_of(RECT))
        ax.plot(tt, yy, color="#1f4e79", linewidth=0.6, alpha=alpha)
    ax.set_xlim(0.0, t[-1])
    if ylim is not None:
        ax.set_ylim(*ylim)
    ax.axis("off")
    return figure


def _ink(figure):
    figure.canvas.draw()
    rgb = np.asarray(figure.canvas.buffer_rgba())[..., :3].astype(float)
    return (255.0 - rgb.mean(axis=2)) / 255.0


@pytest.mark.parametrize("seed", [0, 1, 2])
@pytest.mark.parametrize("ylim", [None, (-20.0, 20.0)])
@pytest.mark.parametrize("alpha", [None, 0.8])  # opaque (the trace) and translucent
def test_painted_line_inks_what_aggs_stroke_inks_within_a_pixel(seed, ylim, alpha):
    stroke = _ink(_figure(seed, painted=False, ylim=ylim, alpha=alpha))
    painted = _ink(_figure(seed, painted=True, ylim=ylim, alpha=alpha))
    # One pixel of slack (a 3 x 3 neighbourhood): Agg strokes the joins between columns
    # as 0.83-px diagonals where the painting fills each column's whole span, and its
    # anti-aliasing spreads the ink of a line that thin over two pixels.
    near = np.ones((3, 3), dtype=bool)
    strong_stroke, strong_painted = stroke > 0.5, painted > 0.5
    assert strong_stroke.sum() > 1000  # the line is there (and, with ylim, clipped)
    assert not (strong_stroke & ~ndimage.binary_dilation(painted > 0.05, near)).any()
    assert not (strong_painted & ~ndimage.binary_dilation(stroke > 0.05, near)).any()


def test_painted_line_leaves_the_page_outside_its_axes_alone():
    figure = _figure(0, painted=True, ylim=(-20.0, 20.0))  # the trace leaves the axes
    ink = _ink(figure)
    x0, y0, x1, y1 = figure.axes[0].bbox.extents
    rows, cols = np.mgrid[: ink.shape[0], : ink.shape[1]]
    inside = (cols >= x0) & (cols < x1) & (ink.shape[0] - rows > y0 - 1) & \
        (ink.shape[0] - rows <= y1 + 1)
    assert ink[inside].max() > 0.5
    assert not ink[~inside].any()


def test_the_svg_keeps_matplotlibs_path_of_the_line():
    import io
    import re

    def svg(painted):
        buffer = io.BytesIO()
        _figure(0, painted=painted).savefig(buffer, format="svg", metadata={"Date": None})
        # the clip path's id is matplotlib's hash of objects of the figure, not content
        return re.sub(rb'"(url\(#)?p[0-9a-f]{10}\)?"', b'"clip"', buffer.getvalue())

    assert svg(True) == svg(False)


def test_a_trace_too_short_to_thin_is_a_plain_line():
    from matplotlib.lines import Line2D

    figure = new_figure()
    ax = figure.add_axes(RECT)
    t = np.arange(500) / 250.0
    line = envelope_line(ax, t, np.sin(t), color="k")
    assert type(line) is Line2D
    np.testing.assert_array_equal(line.get_xdata(), t)
