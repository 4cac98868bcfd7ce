"""Preflight reads back only what a check needs: the pixel size of a raster layer inside an SVG
comes from the PNG header (PNG specification, 5.2-5.3: signature, then IHDR with width and
height as 4-byte big-endian integers) instead of decoding the whole image; checked against
Pillow's full decode (the reference) on an SVG written by matplotlib."""
from __future__ import annotations

import base64
import io
import xml.etree.ElementTree as ET

import matplotlib
import numpy as np
from PIL import Image

matplotlib.use("Agg")

from matplotlib.backends.backend_agg import FigureCanvasAgg  # noqa: E402
from matplotlib.figure import Figure  # noqa: E402

from figkit.preflight import _image_pixels  # noqa: E402


def _svg_images(dpi: int) -> list:
    fig = Figure(figsize=(3, 2), dpi=72)
    FigureCanvasAgg(fig)
    ax = fig.subplots()
    x, y = np.random.default_rng(1).normal(size=(2, 3000))
    ax.scatter(x, y, s=3, alpha=0.3, rasterized=True)
    ax.imshow(np.arange(12.0).reshape(3, 4), extent=(0, 1, 0, 1), interpolation="none")
    buf = io.BytesIO()
    fig.savefig(buf, format="svg", dpi=dpi)
    root = ET.fromstring(buf.getvalue())
    return [el for el in root.iter() if el.tag.rsplit("}", 1)[-1] == "image"]


def test_header_size_matches_full_decode():
    images = _svg_images(300)
    assert len(images) >= 2
    for el in images:
        href = el.get("{http://www.w3.org/1999/xlink}href")
        with Image.open(io.BytesIO(base64.b64decode(href.split(",", 1)[1]))) as im:
            assert _image_pixels(el) == (im.width, im.height)


def test_non_png_and_broken_data():
    el = ET.Element("image")
    gif = io.BytesIO()
    Image.new("RGB", (7, 5)).save(gif, format="GIF")
    el.set("href", "data:image/gif;base64," + base64.b64encode(gif.getvalue()).decode())
    assert _image_pixels(el) == (7, 5)           # not a PNG: Pillow reads it whole
    el.set("href", "data:image/png;base64,@@@@")
    assert _image_pixels(el) is None
