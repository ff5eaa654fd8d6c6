"""The pictures' own ticks (service.ticks), text stamps and overlay (service.stamps), and
the PNG written from the Agg buffer (service.picture.png_bytes).

The references are matplotlib itself (its ``MaxNLocator`` for the tick steps, its Agg text
for where a text lands), Pillow as an independent PNG decoder (PNG: ISO/IEC 15948), and
the SVG matplotlib writes for the same figure.
"""

from __future__ import annotations

import collections
import io
import xml.etree.ElementTree as ElementTree

import numpy as np
import pytest

from service.picture import SIZE_IN, new_figure, png_bytes
from service.stamps import Overlay, text_size
from service.ticks import MINUS, nice_ticks, tick_labels

WIDTH_PX, HEIGHT_PX = 1100, 850


def _views(n, seed):
    rng = np.random.default_rng(seed)
    for _ in range(n):
        centre = rng.normal() * 10 ** rng.uniform(-3, 4)
        width = 10 ** rng.uniform(-3, 5)
        yield (centre - width * rng.uniform(), centre + width * rng.uniform(),
               int(rng.integers(1, 10)))


def test_ticks_are_matplotlibs_max_n_locator_ticks_inside_the_view():
    from matplotlib.ticker import MaxNLocator

    for lo, hi, n in _views(2000, seed=0):
        # AutoLocator's steps (matplotlib.ticker.AutoLocator: steps=[1, 2, 2.5, 5, 10]).
        ref = MaxNLocator(nbins=n, steps=[1, 2, 2.5, 5, 10]).tick_values(lo, hi)
        slack = 1e-9 * (hi - lo)
        ref = ref[(ref >= lo - slack) & (ref <= hi + slack)]
        got = nice_ticks(lo, hi, max_ticks=n)
        # matplotlib subtracts an offset before scaling: the same multiples of the same
        # step, to a few ulps of the values' magnitude.
        scale = max(abs(lo), abs(hi))
        np.testing.assert_allclose(got, ref, rtol=0, atol=1e-9 * scale,
                                   err_msg=f"view {lo!r}..{hi!r}, {n} intervals")


def test_ticks_edge_cases():
    np.testing.assert_array_equal(nice_ticks(3.0, -2.0, max_ticks=5),
                                  nice_ticks(-2.0, 3.0, max_ticks=5))
    np.testing.assert_array_equal(nice_ticks(4.0, 4.0, max_ticks=5), [4.0])
    assert nice_ticks(0.0, float("nan"), max_ticks=5).size == 0
    # A view narrower than one step of the asked count still gets two ticks.
    assert nice_ticks(0.95, 2.05, max_ticks=1).size >= 2


def test_tick_labels_known_answers_and_round_trip():
    assert tick_labels(nice_ticks(0.0, 120.0, max_ticks=6)) == [
        "0", "20", "40", "60", "80", "100", "120"]
    assert tick_labels(np.array([-0.5, -0.25, 0.0, 0.25])) == [
        f"{MINUS}0.50", f"{MINUS}0.25", "0.00", "0.25"]
    for lo, hi, n in _views(500, seed=1):
        ticks = nice_ticks(lo, hi, max_ticks=n)
        labels = tick_labels(ticks)
        assert len(set(labels)) == len(labels)  # distinct: enough decimals for the step
        back = np.array([float(s.replace(MINUS, "-")) for s in labels])
        step = np.diff(ticks).min() if ticks.size > 1 else 1.0
        # Written with the step's decimals: exact to well under a tenth of a step.
        np.testing.assert_allclose(back, ticks, rtol=0, atol=0.1 * step)
        assert not any(s.startswith(MINUS) and float(s.replace(MINUS, "-")) == 0
                       for s in labels)


def _ink_box(rgb, threshold=0.5):
    """(left, top, right, bottom) of the pixels darker than ``threshold``, rows from top."""
    dark = rgb.mean(axis=2) < threshold * 255
    rows, cols = np.nonzero(dark)
    return cols.min(), rows.min(), cols.max(), rows.max()


def _matplotlib_text(x, y, text, size, ha, va, rotation):
    figure = new_figure()
    figure.text(x / WIDTH_PX, y / HEIGHT_PX, text, fontsize=size, ha=ha, va=va,
                rotation=rotation, rotation_mode="anchor")
    figure.canvas.draw()
    return np.asarray(figure.canvas.buffer_rgba())[..., :3].copy()


@pytest.mark.parametrize("ha", ["left", "center", "right"])
@pytest.mark.parametrize("va", ["top", "center", "baseline", "bottom"])
@pytest.mark.parametrize("rotation", [0, 90])
def test_a_stamp_lands_where_matplotlib_draws_the_same_text(ha, va, rotation):
    text, size, x, y = "heart rate (/min) 0.25", 10.0, 400.3, 300.6
    want = _matplotlib_text(x, y, text, size, ha, va, rotation)
    overlay = Overlay()
    overlay.label(x, y, text, size, "#000000", ha, va, rotation)
    got = np.full((HEIGHT_PX, WIDTH_PX, 4), 255, dtype=np.uint8)
    overlay.paint(got)
    # The same glyphs (matplotlib's Agg text) placed by our box, aligned in the text's
    # own frame and turned about the anchor (matplotlib's rotation_mode="anchor"): within
    # 2 px of matplotlib's placement (anchors rounded to whole pixels, the box's height
    # taken from "lp" as matplotlib's layout takes it).
    for a, b in zip(_ink_box(got[..., :3]), _ink_box(want), strict=True):
        assert abs(int(a) - int(b)) <= 2


def test_a_stamp_keeps_its_colour_and_full_coverage():
    overlay = Overlay()
    overlay.label(200, 200, "Caution: not a diagnosis", 11.0, "#1a1a1a", "left", "bottom")
    page = np.full((HEIGHT_PX, WIDTH_PX, 4), 255, dtype=np.uint8)
    overlay.paint(page)
    # Fully covered pixels (stems of the letters) carry exactly the colour asked for.
    darkest = page[..., :3].reshape(-1, 3)[page[..., :3].sum(axis=2).argmin()]
    np.testing.assert_array_equal(darkest, [0x1A, 0x1A, 0x1A])


def test_overlay_svg_elements_read_back():
    overlay = Overlay()
    overlay.label(100.0, 50.0, "a < b", 7.0, "#9467bd", "left", "baseline")
    overlay.label(30.0, 400.0, "interval (ms)", 10.0, "#000000", "center", "bottom", 90)
    overlay.mark(10.0, 20.0, 11.0, 25.0)
    root = ElementTree.fromstring(
        '<svg xmlns="http://www.w3.org/2000/svg">' + overlay.svg() + "</svg>")
    texts = list(root.iter("{http://www.w3.org/2000/svg}text"))
    assert [t.text for t in texts] == ["a < b", "interval (ms)"]
    # Points, y down: 72 points per inch, SIZE_IN[1] inches high (72/100 per pixel).
    assert float(texts[0].get("x")) == pytest.approx(100.0 * 0.72, abs=0.01)
    assert float(texts[0].get("y")) == pytest.approx((HEIGHT_PX - 50.0) * 0.72, abs=0.01)
    # Centred along the text: the anchor itself, turned with the text (x stays, y is
    # the anchor's height from the top).
    assert "rotate(-90" in texts[1].get("transform")
    assert "text-anchor: middle" in texts[1].get("style")
    assert float(texts[1].get("y")) == pytest.approx((HEIGHT_PX - 400.0) * 0.72, abs=0.01)
    assert "fill: #9467bd" in texts[0].get("style")
    (rect,) = root.iter("{http://www.w3.org/2000/svg}rect")
    assert float(rect.get("height")) == pytest.approx(5.0 * 0.72, abs=0.01)


def test_text_size_is_the_agg_renderers_measure():
    from matplotlib.backends.backend_agg import RendererAgg
    from matplotlib.font_manager import FontProperties

    width, ascent, descent = text_size("0.25", 10.0)
    ref_w, ref_h, ref_d = RendererAgg(8, 8, 100).get_text_width_height_descent(
        "0.25", FontProperties(size=10.0), ismath=False)
    assert width == ref_w  # the same call on the same font: the property under test
    assert ascent >= ref_h - ref_d and descent >= ref_d


def test_png_bytes_decode_to_the_canvas_pixels():
    from PIL import Image

    figure = new_figure()
    ax = figure.add_axes((0.1, 0.1, 0.8, 0.8))
    ax.plot(np.sin(np.linspace(0, 20, 500)), color="#1f4e79")
    figure.canvas.draw()
    data = png_bytes(figure.canvas)
    decoded = np.asarray(Image.open(io.BytesIO(data)).convert("RGBA"))
    # PNG is lossless: bit-equality is the property under test.
    np.testing.assert_array_equal(decoded, np.asarray(figure.canvas.buffer_rgba()))
    assert decoded.shape == (round(SIZE_IN[1] * 100), round(SIZE_IN[0] * 100), 4)


@pytest.mark.parametrize("height", [1, 2, 3, 851])
def test_deflate_in_two_halves_is_one_zlib_stream_of_the_rows(monkeypatch, height):
    """The two-thread stream (service.picture._deflate) inflates, by the standard library's
    zlib (RFC 1950/1951), to exactly the rows; at every row count, the halves cut anywhere."""
    import zlib

    import service.picture as picture

    monkeypatch.setattr(picture, "PARALLEL_DEFLATE_FROM", 0)
    monkeypatch.setattr(picture, "_cores", lambda: 2)
    rng = np.random.default_rng(height)
    # runs of equal bytes and noise, as an image has: both kinds of deflate data
    rows = np.repeat(rng.integers(0, 256, size=(height, 1101)), 4, axis=1).astype(np.uint8)
    rows[:, ::7] = rng.integers(0, 256, size=rows[:, ::7].shape)
    stream = picture._deflate(rows)
    assert zlib.decompress(stream) == rows.tobytes()
    assert stream[:2] == zlib.compress(b"", picture.PNG_COMPRESS_LEVEL)[:2]


def test_deflate_on_one_core_is_zlibs_own_stream(monkeypatch):
    import zlib

    import service.picture as picture

    monkeypatch.setattr(picture, "_cores", lambda: 1)
    rows = np.arange(4 * 1100 * 300, dtype=np.uint32).view(np.uint8).reshape(300, -1)
    assert picture._deflate(rows) == zlib.compress(rows.tobytes(), picture.PNG_COMPRESS_LEVEL)


def test_png_bytes_from_one_and_two_threads_decode_to_the_same_pixels(monkeypatch):
    from PIL import Image

    import service.picture as picture

    figure = new_figure()
    ax = figure.add_axes((0.1, 0.1, 0.8, 0.8))
    ax.plot(np.cos(np.linspace(0, 30, 800)), color="#7f2704")
    figure.canvas.draw()
    decoded = []
    for cores in (1, 2):
        monkeypatch.setattr(picture, "_cores", lambda cores=cores: cores)
        data = png_bytes(figure.canvas)
        decoded.append(np.asarray(Image.open(io.BytesIO(data)).convert("RGBA")))
    # lossless both ways: bit-equality with the canvas is the property under test
    for pixels in decoded:
        np.testing.assert_array_equal(pixels, np.asarray(figure.canvas.buffer_rgba()))


def test_report_svg_splices_the_same_elements_as_a_whole_savefig():
    import features
    import service.report as report
    from features import ChannelInput, Options
    from service.picture import save
    from simulation import SimulationSettings, simulate

    rec = simulate(SimulationSettings(n_channels=1, duration_s=90.0, fs_hz=100.0, seed=2))
    result = features.analyze(
        [ChannelInput(samples=rec.channels[0], label=rec.labels[0], quantity=rec.quantity,
                      unit=rec.unit)], rec.fs_hz, options=Options(keep_fused_trace=True))
    report._PAGES.clear()
    spliced = report.draw_report(result, image_format="svg")
    # The page keeps the report's artists: matplotlib writing the whole figure again gives
    # the document the splice should equal, element for element (the overlay aside).
    whole = save(report._PAGES[-1].figure, "svg")

    def tags(svg):
        root = ElementTree.fromstring(svg)
        ids = [e.get("id") for e in root.iter() if e.get("id")]
        assert len(ids) == len(set(ids))  # ids unique (XML 1.0, the ID validity constraint)
        for group in root.iter("{http://www.w3.org/2000/svg}g"):
            if group.get("id") == "overlay":
                root.remove(group)
        return collections.Counter(e.tag for e in root.iter())

    assert tags(spliced) == tags(whole)


def test_texts_to_overlay_moves_plain_texts_and_keeps_matplotlibs_clipping():
    from service.stamps import texts_to_overlay

    figure = new_figure()
    ax = figure.add_axes((0.1, 0.1, 0.8, 0.8))
    ax.set_xlim(0, 10)
    ax.set_ylim(0, 10)
    plain = ax.text(0.5, 0.5, "moved", transform=ax.transAxes, fontsize=7, color="#2ca02c")
    inside = ax.annotate("J (0.92)", (5, 5), textcoords="offset points", xytext=(3, 5))
    outside = ax.annotate("off the axes", (50, 5), textcoords="offset points", xytext=(3, 5))
    clipped = ax.text(9.5, 5, "clipped", clip_on=True)
    overlay = Overlay()
    texts_to_overlay(overlay, ax)
    placed = {label.text: label for label in overlay.labels}
    assert set(placed) == {"moved", "J (0.92)"}
    assert not plain.get_visible() and not inside.get_visible()
    # matplotlib's default annotation_clip drops an annotation whose point is outside
    # the axes (matplotlib.text.Annotation); a clipped text stays matplotlib's to clip.
    assert not outside.get_visible() and clipped.get_visible()
    # The axes span 80 % of 1100 x 850 pixels from 10 %: the middle is (550, 425); the
    # annotation sits its offset (3, 5) points right and up of its point, 100/72 px each.
    assert (placed["moved"].x, placed["moved"].y) == pytest.approx((550.0, 425.0), abs=1e-6)
    assert (placed["J (0.92)"].x, placed["J (0.92)"].y) == pytest.approx(
        (550.0 + 3 * 100 / 72, 425.0 + 5 * 100 / 72), abs=1e-6)
    assert placed["moved"].colour == "#2ca02c" and placed["moved"].size_pt == 7.0


def test_points_to_svg_writes_matplotlibs_points_as_circles():
    from matplotlib.colors import to_rgba

    from service.picture import save
    from service.stamps import points_to_svg

    rng = np.random.default_rng(4)
    figure = new_figure()
    ax = figure.add_axes((0.1, 0.1, 0.8, 0.8))
    rgba = np.tile(to_rgba("#1f4e79"), (40, 1))
    rgba[:, 3] = rng.uniform(0.12, 1.0, 40)
    x, y = rng.uniform(0, 10, 40), rng.uniform(50, 70, 40)
    points = ax.scatter(x, y, s=14, c=rgba, linewidths=0)
    ax.set_xlim(-1, 11)
    ax.set_ylim(45, 75)
    root = ElementTree.fromstring(save(figure, "svg"))
    svg_ns, xlink = "{http://www.w3.org/2000/svg}", "{http://www.w3.org/1999/xlink}"
    # matplotlib's SVG of the same points: one <use> per point of the collection.
    uses = [u for u in root.iter(svg_ns + "use") if u.get(xlink + "href", "").startswith("#C")]
    want = np.array([[float(u.get("x")), float(u.get("y"))] for u in uses])
    overlay = Overlay()
    points_to_svg(overlay, ax, points)
    assert not points.get_visible()
    circles = list(ElementTree.fromstring(
        '<svg xmlns="http://www.w3.org/2000/svg">' + overlay.svg() + "</svg>"
    ).iter(svg_ns + "circle"))
    got = np.array([[float(c.get("cx")), float(c.get("cy"))] for c in circles])
    # Centres to the 0.01 point both writers round to (2 decimals here; matplotlib more).
    np.testing.assert_allclose(got, want, rtol=0, atol=0.01)
    # A marker of area 14 square points is sqrt(14) points across (matplotlib's scatter).
    assert float(circles[0].get("r")) == pytest.approx(np.sqrt(14) / 2, abs=0.01)
    opacity = [float(c.get("style").split("fill-opacity:")[1].strip(' "/')) for c in circles]
    np.testing.assert_allclose(opacity, rgba[:, 3], atol=5e-4)  # written to 3 decimals
