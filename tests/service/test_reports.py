"""Report images: PNG and SVG from POST /v1/reports and from analyze --plot."""

from __future__ import annotations

import io
import struct
import xml.etree.ElementTree as ElementTree

import numpy as np
import pytest

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
