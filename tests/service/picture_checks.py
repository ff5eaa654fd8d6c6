"""Checks shared by the tests of the report and of the night picture (PNG and SVG)."""

from __future__ import annotations

import struct
import xml.etree.ElementTree as ElementTree

from schemas.responses import NOTICE

# PNG signature and IHDR layout: PNG specification (ISO/IEC 15948), sections 5.2 and 11.2.2.
PNG_SIGNATURE = b"\x89PNG\r\n\x1a\n"
SVG_TEXT = "{http://www.w3.org/2000/svg}text"


def png_size(data: bytes) -> tuple[int, int]:
    """(width, height) of a PNG image from its IHDR chunk."""
    assert data[:8] == PNG_SIGNATURE
    assert data[12:16] == b"IHDR"
    width, height = struct.unpack(">II", data[16:24])
    return width, height


def relative_luminance(hex_colour: str) -> float:
    # WCAG 2.1, definition of "relative luminance" (sRGB channels linearised).
    channels = [int(hex_colour[i:i + 2], 16) / 255 for i in (1, 3, 5)]
    linear = [c / 12.92 if c <= 0.04045 else ((c + 0.055) / 1.055) ** 2.4 for c in channels]
    return 0.2126 * linear[0] + 0.7152 * linear[1] + 0.0722 * linear[2]


def svg_texts(svg: bytes) -> list[tuple[str, float, str]]:
    """(text, y, style) of every SVG text element, y in user units (down the page)."""
    root = ElementTree.fromstring(svg)
    out = []
    for element in root.iter(SVG_TEXT):
        text = "".join(element.itertext()).strip()
        if "y" in element.attrib:
            y = float(element.attrib["y"])
        else:  # transform="translate(x y) ..."
            y = float(element.attrib["transform"].split("translate(")[1].split(")")[0].split()[1])
        out.append((text, y, element.attrib.get("style", "")))
    return out


def caution_texts(svg: bytes) -> tuple[list[tuple[dict[str, str], str, float]], float]:
    """(style, text, y) of the SVG text elements that carry the caution; the lowest other y."""
    found, other_ys = [], []
    for text, y, style_text in svg_texts(svg):
        if len(text.split()) > 3 and text in NOTICE:  # not an axis label such as "confidence"
            style = dict(part.split(":", 1) for part in style_text.split(";"))
            found.append(({k.strip(): v.strip() for k, v in style.items()}, text, y))
        elif text:
            other_ys.append(y)
    return found, max(other_ys)


def assert_caution_dark_readable_and_last(svg: bytes) -> None:
    """The whole caution, at 10 pt or more, at 7:1 contrast or more, below every other text."""
    parts, lowest_other = caution_texts(svg)
    assert " ".join(" ".join(text.split()) for _, text, _ in parts) == " ".join(NOTICE.split())
    for style, _, y in parts:
        # Points (the SVG is 792 x 612 user units for 11 x 8.5 in): 10 pt is the smallest
        # size commonly set for body text in print (common practice); the old caution was 6.
        assert float(style["font-size"].removesuffix("px")) >= 10
        # WCAG 2.1 SC 1.4.6 (contrast, enhanced): at least 7:1 against the white page.
        contrast = 1.05 / (relative_luminance(style["fill"]) + 0.05)
        assert contrast >= 7
        # Its own line(s), below every other text of the image (SVG y grows downwards).
        assert y > lowest_other
