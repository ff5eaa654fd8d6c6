"""Report images: PNG and SVG from POST /v1/reports and from analyze --plot."""

from __future__ import annotations

import io
import xml.etree.ElementTree as ElementTree

import numpy as np
import pytest
from picture_checks import assert_caution_dark_readable_and_last, png_size

from service.cli import main
from service.demo import demo_request_body


@pytest.fixture(scope="module")
def body():
    return demo_request_body()


def test_png_report(client, body):
    response = client.post("/v1/reports", json=body, headers={"Accept": "image/png"})
    assert response.status_code == 200
    assert response.mimetype == "image/png"
    data = response.get_data()
    assert png_size(data) == (1100, 850)
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
            assert png_size(data) == (1100, 850)
        else:
            assert ElementTree.fromstring(data).tag.endswith("svg")


def test_svg_report_carries_the_whole_caution_dark_and_readable(client, body):
    response = client.post("/v1/reports", json=body, headers={"Accept": "image/svg+xml"})
    assert_caution_dark_readable_and_last(response.get_data())


def test_png_report_has_dark_caution_lines_at_the_bottom(client, body):
    import matplotlib.image

    data = client.post("/v1/reports", json=body, headers={"Accept": "image/png"}).get_data()
    pixels = matplotlib.image.imread(io.BytesIO(data), format="png")[..., :3].mean(axis=2)
    band = pixels[-70:]  # below the panels' axis labels: the caution alone
    # Rows with near-black ink (grey #555555 text, luminance 0.33, has none below 0.2):
    # two or more lines of 15-px text ink well over 15 rows.
    assert ((band < 0.2).sum(axis=1) > 0).sum() > 15


def test_a_reused_page_draws_what_a_fresh_one_draws():
    # The report's figure is built once and reused: drawing another recording (other rate,
    # length, heart rate, with windows) in between must leave nothing behind. Bit-equality
    # is the property: the same Agg raster of the same artists in one process.
    import features
    import service.report as report
    from features import ChannelInput, Options
    from simulation import SimulationSettings, simulate

    def result(**settings):
        rec = simulate(SimulationSettings(n_channels=1, **settings))
        channels = [ChannelInput(samples=rec.channels[0], label=rec.labels[0],
                                 quantity=rec.quantity, unit=rec.unit)]
        return features.analyze(channels, rec.fs_hz, options=Options(
            keep_fused_trace=True, window_s=40.0, window_overlap_s=10.0))

    first = result(duration_s=120.0, fs_hz=250.0, seed=1)
    other = result(duration_s=90.0, fs_hz=100.0, seed=5, heart_rate_bpm=85.0)
    report._PAGES.clear()
    fresh = report.draw_report(first)
    assert report.draw_report(other) != fresh
    report.draw_report(other, image_format="svg")
    assert report.draw_report(first) == fresh
