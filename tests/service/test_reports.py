"""Report images: PNG and SVG from POST /v1/reports and from analyze --plot."""

from __future__ import annotations

import io
import struct
import xml.etree.ElementTree as ElementTree

import numpy as np
import pytest

from schemas.responses import NOTICE
from service.cli import main
from service.demo import demo_request_body

# PNG signature and IHDR layout: PNG specification (ISO/IEC 15948), sections 5.2 and 11.2.2.
PNG_SIGNATURE = b"\x89PNG\r\n\x1a\n"


def _png_size(data: bytes) -> tuple[int, int]:
    assert data[:8] == PNG_SIGNATURE
    assert data[12:16] == b"IHDR"
    width, height = struct.unpack(">II", data[16:24])
    return width, height


@pytest.fixture(scope="module")
def body():
    return demo_request_body()


def test_png_report(client, body):
    response = client.post("/v1/reports", json=body, headers={"Accept": "image/png"})
    assert response.status_code == 200
    assert response.mimetype == "image/png"
    data = response.get_data()
    assert _png_size(data) == (1100, 850)
    import matplotlib.image

    pixels = matplotlib.image.imread(io.BytesIO(data), format="png")
    # Not blank: many distinct colours, and ink on at least 5 % of the pixels.
    flat = pixels[..., :3].reshape(-1, 3)
    assert len(np.unique(np.round(flat * 255), axis=0)) > 50
    assert (flat.mean(axis=1) < 0.9).mean() > 0.05


def test_svg_report_is_well_formed_and_names_the_panels(client, body):
    response = client.post("/v1/reports", json=body, headers={"Accept": "image/svg+xml"})
    assert response.status_code == 200 and response.mimetype == "image/svg+xml"
    root = ElementTree.fromstring(response.get_data())
    assert root.tag == "{http://www.w3.org/2000/svg}svg"
    # 11 x 8.5 inches at 72 points per inch (matplotlib's SVG backend writes points).
    assert root.attrib["width"].startswith("792") and root.attrib["height"].startswith("612")


def test_default_is_png_and_other_types_are_refused(client, body):
    assert client.post("/v1/reports", json=body).mimetype == "image/png"
    refused = client.post("/v1/reports", json=body, headers={"Accept": "application/pdf"})
    assert refused.status_code == 406
    assert refused.mimetype == "application/problem+json"


def test_report_errors_are_problems_like_the_analyses(client):
    response = client.post("/v1/reports", json={"sampling_rate_hz": 10})
    assert response.status_code == 422
    assert {e["field"] for e in response.get_json()["errors"]} >= {"channels", "sampling_rate_hz"}


def test_analyze_plot_writes_the_image(tmp_path, body, capsys):
    columns = np.column_stack([c["samples"] for c in body["channels"]])
    path = tmp_path / "evening.csv"
    lines = [",".join(c["label"] for c in body["channels"])]
    lines += [",".join(f"{v:.3f}" for v in row) for row in columns]
    path.write_text("\n".join(lines) + "\n", encoding="utf-8")
    for suffix in ("png", "svg"):
        image = tmp_path / f"report.{suffix}"
        assert main(["analyze", str(path), "--rate", "250", "--plot", str(image)]) == 0
        assert capsys.readouterr().out.startswith("{")
        data = image.read_bytes()
        if suffix == "png":
            assert _png_size(data) == (1100, 850)
        else:
            assert ElementTree.fromstring(data).tag.endswith("svg")


def _relative_luminance(hex_colour: str) -> float:
    # WCAG 2.1, definition of "relative luminance" (sRGB channels linearised).
    channels = [int(hex_colour[i:i + 2], 16) / 255 for i in (1, 3, 5)]
    linear = [c / 12.92 if c <= 0.04045 else ((c + 0.055) / 1.055) ** 2.4 for c in channels]
    return 0.2126 * linear[0] + 0.7152 * linear[1] + 0.0722 * linear[2]


def _caution_texts(svg: bytes) -> tuple[list[tuple[dict[str, str], str, float]], float]:
    """(style, text, y) of the SVG text elements that carry the caution; the lowest other y."""
    root = ElementTree.fromstring(svg)
    found, other_ys = [], []
    for element in root.iter("{http://www.w3.org/2000/svg}text"):
        text = "".join(element.itertext()).strip()
        if "y" in element.attrib:
            y = float(element.attrib["y"])
        else:  # transform="translate(x y) ..."
            y = float(element.attrib["transform"].split("translate(")[1].split(")")[0].split()[1])
        if len(text.split()) > 3 and text in NOTICE:  # not an axis label such as "confidence"
            style = dict(part.split(":", 1) for part in element.attrib["style"].split(";"))
            found.append(({k.strip(): v.strip() for k, v in style.items()}, text, y))
        elif text:
            other_ys.append(y)
    return found, max(other_ys)


def test_svg_report_carries_the_whole_caution_dark_and_readable(client, body):
    response = client.post("/v1/reports", json=body, headers={"Accept": "image/svg+xml"})
    parts, lowest_other = _caution_texts(response.get_data())
    assert " ".join(" ".join(text.split()) for _, text, _ in parts) == " ".join(NOTICE.split())
    for style, _, y in parts:
        # Points (the SVG is 792 x 612 user units for 11 x 8.5 in): 10 pt is the smallest
        # size commonly set for body text in print (common practice); the old caution was 6.
        assert float(style["font-size"].removesuffix("px")) >= 10
        # WCAG 2.1 SC 1.4.6 (contrast, enhanced): at least 7:1 against the white page.
        contrast = 1.05 / (_relative_luminance(style["fill"]) + 0.05)
        assert contrast >= 7
        # Its own line(s), below every other text of the image (SVG y grows downwards).
        assert y > lowest_other


def test_png_report_has_dark_caution_lines_at_the_bottom(client, body):
    import matplotlib.image

    data = client.post("/v1/reports", json=body, headers={"Accept": "image/png"}).get_data()
    pixels = matplotlib.image.imread(io.BytesIO(data), format="png")[..., :3].mean(axis=2)
    band = pixels[-70:]  # below the panels' axis labels: the caution alone
    # Rows with near-black ink (grey #555555 text, luminance 0.33, has none below 0.2):
    # two or more lines of 15-px text ink well over 15 rows.
    assert ((band < 0.2).sum(axis=1) > 0).sum() > 15
