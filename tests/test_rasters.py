"""Dense layers painted once and reused (figkit.rasters): the PDF and SVG files are byte for
byte those of matplotlib's own savefig (the reference), and the second vector file paints no
layer at all."""
from __future__ import annotations

import io

import matplotlib
import numpy as np
import pytest

matplotlib.use("Agg")

from matplotlib.backends.backend_agg import FigureCanvasAgg  # noqa: E402
from matplotlib.figure import Figure  # noqa: E402

from figkit.rasters import shared_rasters  # noqa: E402

RC = {"svg.hashsalt": "test", "pdf.fonttype": 42, "svg.fonttype": "path"}
META = {"pdf": {"CreationDate": None, "ModDate": None}, "svg": {"Date": None}, "png": {}}


def _figure() -> Figure:
    """Two panels: two consecutive rasterised layers (merged into one image by matplotlib), a
    vector line over them, a rasterised layer alone, and a colour bar (rasterised solids)."""
    rng = np.random.default_rng(3)
    fig = Figure(figsize=(4, 2), dpi=72)
    FigureCanvasAgg(fig)
    a, b = fig.subplots(1, 2)
    x, y = rng.normal(size=(2, 5000))
    a.scatter(x, y, s=2, alpha=0.2, rasterized=True, zorder=2)
    a.scatter(y, x, s=2, alpha=0.2, color="C1", rasterized=True, zorder=2)
    a.plot([-2, 2], [-1, 1], zorder=4)
    m = b.scatter(x, x * y, c=y, s=2, rasterized=True, zorder=2)
    fig.colorbar(m, ax=b)
    return fig


def _save(fig, fmt: str) -> bytes:
    buf = io.BytesIO()
    fig.savefig(buf, format=fmt, dpi=300, metadata=META[fmt])
    return buf.getvalue()


def test_vector_files_identical_to_matplotlib_and_layers_painted_once(monkeypatch):
    with matplotlib.rc_context(RC):
        fig = _figure()
        plain = {fmt: _save(fig, fmt) for fmt in ("pdf", "svg", "png")}
        import figkit.rasters as R
        painted_runs = []          # each run painted is cropped once: count the crops
        crop = R._painted
        monkeypatch.setattr(R, "_painted", lambda rgba: (painted_runs.append(1), crop(rgba))[1])
        painted = {}
        with shared_rasters(fig):
            for fmt in ("pdf", "png", "svg"):
                before = len(painted_runs)
                painted[fmt] = _save(fig, fmt)
                runs_in = len(painted_runs) - before
                if fmt == "pdf":
                    # matplotlib's runs: panel a's two layers as one, panel b's layer, the bar
                    assert runs_in >= 3
                elif fmt == "svg":
                    assert runs_in == 0      # every layer reused from the PDF
        monkeypatch.undo()
        assert painted == plain
        # The figure is left as it was: plain saves afterwards are unchanged too.
        assert _save(fig, "svg") == plain["svg"]
        assert all("draw" not in vars(a) for a in fig.findobj())


def test_other_dpi_is_painted_again():
    with matplotlib.rc_context(RC):
        fig = _figure()
        low = io.BytesIO()
        fig.savefig(low, format="svg", dpi=100, metadata=META["svg"])
        with shared_rasters(fig):
            _save(fig, "pdf")
            got = io.BytesIO()
            fig.savefig(got, format="svg", dpi=100, metadata=META["svg"])
        assert got.getvalue() == low.getvalue()


@pytest.mark.parametrize("fmt", ["pdf", "svg"])
def test_first_file_alone_is_unchanged(fmt):
    with matplotlib.rc_context(RC):
        fig = _figure()
        plain = _save(fig, fmt)
        with shared_rasters(fig):
            assert _save(fig, fmt) == plain


def test_painted_bounds_match_matplotlib():
    # Reference: matplotlib's own cropping, cbook._get_nonzero_slices of the alpha channel.
    from matplotlib import cbook

    from figkit.rasters import _painted
    rng = np.random.default_rng(5)
    for shape, box in (((300, 420), (40, 260, 10, 400)), ((50, 60), (0, 50, 0, 60)), ((30, 30), None)):
        rgba = np.zeros(shape + (4,), dtype=np.uint8)
        rgba[..., :3] = rng.integers(0, 256, shape + (3,))     # colour where alpha is 0 is ignored
        if box is not None:
            r0, r1, c0, c1 = box
            rgba[r0:r1, c0:c1, 3] = rng.integers(0, 2, (r1 - r0, c1 - c0)) * rng.integers(1, 256)
            rgba[r0, c0, 3] = rgba[r1 - 1, c1 - 1, 3] = 1
        assert _painted(rgba) == cbook._get_nonzero_slices(rgba[..., 3])
