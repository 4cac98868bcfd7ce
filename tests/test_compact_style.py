"""The compact house style has a look of our own: white panels, each in a thin light frame, no
grid lines (not tinted panels with white grid lines and no axis lines).  Checked on the PNG
files written, read back with Pillow: pixel colours compared with the style's frame colour
(sRGB triplets, IEC 61966-2-1) and pure white.  Data: Palmer penguins (Gorman, Williams &
Fraser 2014) from the palmerpenguins package."""
from __future__ import annotations

import json
import logging
import shutil
from pathlib import Path

import matplotlib as mpl
import numpy as np
import pytest
from PIL import Image
from palmerpenguins import load_penguins

from figkit.render import load_project, render

REPO = Path(__file__).resolve().parents[1]
STYLE = REPO / "figkit" / "styles" / "compact.mplstyle"


@pytest.fixture(scope="module")
def built(tmp_path_factory) -> Path:
    root = tmp_path_factory.mktemp("compact")
    (root / "config").mkdir()
    (root / "data").mkdir()
    shutil.copytree(REPO / "figkit" / "styles", root / "styles")
    load_penguins().to_csv(root / "data" / "penguins.csv", index=False)
    (root / "config" / "config.yaml").write_text(
        "datasets:\n  penguins: data/penguins.csv\nformats: [png]\nstyle: compact\n")
    (root / "config" / "figures.tsv").write_text(
        "id\tdataset\tchart\tx\ty\tstrata\n"
        "grid\tpenguins\tscatter\tbill_length_mm\tbody_mass_g\tspecies by sex\n"
        "wrap\tpenguins\thistogram\tflipper_length_mm\t\tisland\n")
    logging.disable(logging.WARNING)
    try:
        for fig_id in ("grid", "wrap"):
            render(load_project(root), fig_id)
    finally:
        logging.disable(logging.NOTSET)
    return root / "results" / "figures"


def _rgb(path: Path) -> np.ndarray:
    with Image.open(path) as im:
        return np.asarray(im.convert("RGB")).astype(int)


@pytest.mark.parametrize("fig_id", ["grid", "wrap"])
def test_panels_are_white(built, fig_id):
    a = _rgb(built / f"{fig_id}.png")
    white = (a == 255).all(axis=2).mean()
    assert white > 0.75, white            # tinted panels would cover most of the canvas


@pytest.mark.parametrize("fig_id", ["grid", "wrap"])
def test_every_panel_has_a_thin_frame(built, fig_id):
    rc = mpl.rc_params_from_file(str(STYLE), use_default_template=False)
    assert all(rc[f"axes.spines.{side}"] for side in ("top", "right", "bottom", "left"))
    frame = np.array(mpl.colors.to_rgb(rc["axes.edgecolor"])) * 255
    a = _rgb(built / f"{fig_id}.png")
    near = (np.abs(a - frame) <= 30).all(axis=2)
    car = json.loads((built / f"{fig_id}.json").read_text())
    rows, cols = car["layout"]["rows"], car["layout"]["cols"]
    dpi = car["dpi"]
    panel_w_px = car["layout"]["panel_mm"][0] / 25.4 * dpi
    panel_h_px = car["layout"]["panel_mm"][1] / 25.4 * dpi
    # a frame edge is a line of frame colour at least 90% of the panel long
    h_lines = np.flatnonzero(near.sum(axis=1) >= 0.9 * panel_w_px)
    v_lines = np.flatnonzero(near.sum(axis=0) >= 0.9 * panel_h_px)

    def runs(idx):
        return 0 if idx.size == 0 else int(1 + np.sum(np.diff(idx) > 1))
    assert runs(h_lines) >= 2 * rows           # top and bottom of every panel row
    assert runs(v_lines) >= 2 * cols           # left and right of every panel column
    assert not rc["axes.grid"] and car["style"]["name"] == "compact"
