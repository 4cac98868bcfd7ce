"""No ink at the canvas edge: every text keeps a margin from the edge of the figure.

Printers and journals trim or re-frame artwork, and text touching the edge reads as cut off
(common practice in artwork guides: keep type clear of the trim).  The band checked here,
EDGE_BAND_MM = 0.25 mm, is figkit's own rule (the layout keeps 0.3 mm or more).  The PNG files
are read back with Pillow; a pixel is ink when any channel is 6 or more below white (255).
Data: Palmer penguins (Gorman, Williams & Fraser 2014) from the palmerpenguins package, and
the demo built through Snakemake (conftest.built_demo).
"""
from __future__ import annotations

import logging
import shutil
from pathlib import Path

import numpy as np
import pytest
from PIL import Image
from palmerpenguins import load_penguins

from figkit.render import load_project, render

REPO = Path(__file__).resolve().parents[1]
EDGE_BAND_MM = 0.25


def edge_ink(path: Path) -> dict:
    """Ink pixels in the outer band of each side of a PNG: {'top': n, ...}."""
    with Image.open(path) as im:
        dpi = im.info["dpi"][0]
        a = np.asarray(im.convert("RGB")).astype(int)
    band = max(1, int(round(EDGE_BAND_MM / 25.4 * dpi)))
    ink = (a < 250).any(axis=2)
    return {"top": int(ink[:band].sum()), "bottom": int(ink[-band:].sum()),
            "left": int(ink[:, :band].sum()), "right": int(ink[:, -band:].sum())}


@pytest.fixture(scope="module")
def penguin_shares(tmp_path_factory) -> Path:
    root = tmp_path_factory.mktemp("edges")
    (root / "config").mkdir()
    (root / "data").mkdir()
    shutil.copytree(REPO / "figkit" / "styles", root / "styles")
    load_penguins().to_csv(root / "data" / "penguins.csv", index=False)
    (root / "config" / "config.yaml").write_text(
        "datasets:\n  penguins: data/penguins.csv\nformats: [png]\nsizes: {single: 89, double: 183}\n")
    (root / "config" / "figures.tsv").write_text(
        "id\tdataset\tchart\tx\tcolour\tsize\n"
        "island-shares\tpenguins\tshares\tisland\tspecies\tsingle\n"     # one panel: no title above it
        "island-bars\tpenguins\tcount-bars\tisland\tspecies\tsingle\n")
    logging.disable(logging.WARNING)
    try:
        for fig_id in ("island-shares", "island-bars"):
            render(load_project(root), fig_id)
    finally:
        logging.disable(logging.NOTSET)
    return root / "results" / "figures"


@pytest.mark.parametrize("fig_id", ["island-shares", "island-bars"])
def test_top_tick_label_keeps_clear_of_the_edge(penguin_shares, fig_id):
    # The shares chart's "100%" sits on the top edge of its panel: half of it used to reach
    # the canvas edge at 89 mm wide.
    assert edge_ink(penguin_shares / f"{fig_id}.png") == {"top": 0, "bottom": 0, "left": 0, "right": 0}


def test_no_ink_at_the_edge_of_any_demo_figure(built_demo):
    pngs = sorted((built_demo / "results" / "figures").glob("*.png"))
    assert len(pngs) >= 12
    touching = {p.name: e for p in pngs if any((e := edge_ink(p)).values())}
    assert not touching
