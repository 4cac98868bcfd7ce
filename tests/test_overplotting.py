"""Overplotting is measured, not guessed.

References: alpha compositing (Porter & Duff 1984, "Compositing digital images", SIGGRAPH): k
marks of opacity a stacked give opacity 1 - (1 - a)^k; the hexagon counts are checked against
our bincount lattice, itself checked against matplotlib's hexbin in test_aggregate.
"""
from __future__ import annotations

import shutil
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from figkit.charts import DENSEST_OPACITY, MIN_ALPHA, choose_drawing

REPO = Path(__file__).resolve().parents[1]


def test_chooser_from_known_overlap():
    assert choose_drawing(1) == ("points", 1.0)              # 50 scattered points: no stacking
    mode, alpha = choose_drawing(10)
    assert mode == "translucent"
    # the densest cell (10 stacked marks) reaches exactly the target opacity (Porter & Duff 1984)
    assert 1 - (1 - alpha) ** 10 == pytest.approx(DENSEST_OPACITY, abs=1e-3)
    assert choose_drawing(1_000_000) == ("bins", 1.0)         # 10^6 points in one cell
    assert choose_drawing(1_000_000, "points") == ("points", 1.0)   # the user may force any
    assert choose_drawing(3, "bins")[0] == "bins"
    # the switch to bins happens where a lone point would fall below the visible floor
    k_switch = next(k for k in range(2, 10_000) if choose_drawing(k)[0] == "bins")
    assert 1 - (1 - DENSEST_OPACITY) ** (1 / k_switch) < MIN_ALPHA <= \
        1 - (1 - DENSEST_OPACITY) ** (1 / (k_switch - 1))


def _project(tmp_path: Path, df: pd.DataFrame, sheet: str = "id\tdataset\tchart\n") -> object:
    from figkit.render import load_project
    (tmp_path / "data").mkdir(exist_ok=True)
    df.to_csv(tmp_path / "data" / "d.csv", index=False)
    if not (tmp_path / "styles").exists():
        shutil.copytree(REPO / "figkit" / "styles", tmp_path / "styles")
    (tmp_path / "config").mkdir(exist_ok=True)
    (tmp_path / "config" / "config.yaml").write_text("datasets: {d: data/d.csv}\nformats: [png]\n")
    (tmp_path / "config" / "figures.tsv").write_text(sheet)
    return load_project(tmp_path)


def _fig(project, **cells):
    import matplotlib
    matplotlib.use("Agg")
    from figkit.render import figure
    return figure({"id": "t", "dataset": "d", "size": "single", **cells}, project)


def test_figures_choose_points_then_bins(tmp_path):
    from figkit.render import render
    rng = np.random.default_rng(0)
    sparse = pd.DataFrame({"x": rng.uniform(0, 100, 50), "y": rng.uniform(0, 100, 50)})
    sheet = "id\tdataset\tchart\tx\ty\tsize\nf\td\tscatter\tx\ty\tsingle\n"
    project = _project(tmp_path, sparse, sheet)
    assert render(project, "f")["panels"][0]["drawing"] == "points"
    dense = pd.DataFrame({"x": rng.normal(0, 0.01, 200_000), "y": rng.normal(0, 0.01, 200_000)})
    dense.loc[:1, ["x", "y"]] = [[-1, -1], [1, 1]]           # two outliers stretch the axes
    project = _project(tmp_path, dense, sheet)
    assert render(project, "f")["panels"][0]["drawing"] == "bins"


def test_same_count_same_colour_in_every_panel(tmp_path):
    rng = np.random.default_rng(1)
    n = 20_000
    df = pd.DataFrame({"g": np.repeat(["a", "b"], n // 2), "x": rng.normal(0, 1, n)})
    df["y"] = df["x"] + rng.normal(0, 1, n) * np.where(df["g"] == "a", 0.5, 1.5)
    fig = _fig(_project(tmp_path, df), chart="hexbins", x="x", y="y", strata="g")
    fig.canvas.draw()
    colls = [c for ax in fig.axes for c in ax.collections if c.get_array() is not None
             and ax.get_label() != "<colorbar>"][:2]
    assert colls[0].norm is colls[1].norm                     # one normalisation for the figure
    maps = []
    for c in colls:
        counts = np.asarray(c.get_array())
        maps.append({float(k): tuple(np.round(rgba, 6)) for k, rgba in zip(counts, c.get_facecolors())})
    shared = set(maps[0]) & set(maps[1])
    assert len(shared) > 5
    for k in shared:
        assert maps[0][k] == maps[1][k]


def test_jitter_never_crosses_half_the_gap(tmp_path):
    rng = np.random.default_rng(2)
    n = 5000
    df = pd.DataFrame({"x": rng.integers(1, 6, n).astype(float), "y": rng.normal(0, 1, n)})
    fig = _fig(_project(tmp_path, df), chart="scatter", x="x", y="y", options="points=jitter")
    ax = fig.axes[0]
    drawn = np.concatenate([c.get_offsets()[:, 0] for c in ax.collections])
    nearest = np.round(drawn)
    assert np.max(np.abs(drawn - nearest)) <= 0.4 + 1e-12     # 0.4 of the gap of 1: < half
    assert np.array_equal(np.bincount(nearest.astype(int), minlength=6),
                          np.bincount(df["x"].astype(int), minlength=6))


@pytest.mark.parametrize("strata", ["", "g"])
def test_every_jittered_point_is_inside_the_axes(tmp_path, strata):
    """A jittered point reaches 0.4 of the gap beyond the outermost value; the common axis range
    must hold it, or the figure hides rows its sidecar counts (n).  No outside source: the
    count drawn inside the view must equal the rows (common practice)."""
    rng = np.random.default_rng(3)
    n = 4000
    df = pd.DataFrame({"g": np.repeat(["a", "b"], n // 2),
                       "x": rng.integers(2022, 2026, n).astype(float),    # four years
                       "y": rng.normal(50, 10, n)})
    fig = _fig(_project(tmp_path, df), chart="scatter", x="x", y="y", strata=strata)
    inside = 0
    for ax in fig.axes:
        (x0, x1), (y0, y1) = sorted(ax.get_xlim()), sorted(ax.get_ylim())
        for c in ax.collections:
            xy = np.asarray(c.get_offsets())
            if len(xy) < 2:
                continue
            inside += int(((xy[:, 0] >= x0) & (xy[:, 0] <= x1) & (xy[:, 1] >= y0) & (xy[:, 1] <= y1)).sum())
    assert inside == n


def test_a_panel_cramped_by_the_common_range_is_named(tmp_path):
    """One stratum spans 0-100 on x, the other 0-5: on the common range the second fills 5% of its
    panel's width.  The range stays common (honest comparison) and a caution names that panel and
    axis only.  The 10% line is common practice, no outside source."""
    from figkit.render import render
    rng = np.random.default_rng(4)
    wide = pd.DataFrame({"g": "wide", "x": rng.uniform(0, 100, 300), "y": rng.normal(0, 1, 300)})
    narrow = pd.DataFrame({"g": "narrow", "x": rng.uniform(0, 5, 300), "y": rng.normal(0, 1, 300)})
    sheet = "id\tdataset\tchart\tx\ty\tstrata\tranges\nc\td\tscatter\tx\ty\tg\t\no\td\tscatter\tx\ty\tg\town-x\n"
    project = _project(tmp_path, pd.concat([wide, narrow]), sheet)
    notes = [c for c in render(project, "c")["cautions"] if "common range" in c]
    assert len(notes) == 1 and "narrow on x" in notes[0] and "wide" not in notes[0]
    assert not [c for c in render(project, "o")["cautions"] if "common range" in c]   # own ranges


def test_too_dense_for_colour_says_which_colour(tmp_path):
    """Hexagon counts cannot show a colour per point, so a coloured scatter that the density
    would bin stays points at the lowest opacity, with a caution that names what is lost: groups
    for a categorical colour, the scale for a numeric one."""
    from figkit.render import render
    rng = np.random.default_rng(8)
    n = 200_000
    df = pd.DataFrame({"x": rng.normal(0, 0.01, n), "y": rng.normal(0, 0.01, n),
                       "g": rng.choice(["a", "b"], n), "c": rng.uniform(0, 30, n)})
    df.loc[:1, ["x", "y"]] = [[-1, -1], [1, 1]]
    sheet = ("id\tdataset\tchart\tx\ty\tcolour\tsize\n"
             "grp\td\tscatter\tx\ty\tg\tsingle\nnum\td\tscatter\tx\ty\tc\tsingle\n")
    project = _project(tmp_path, df, sheet)
    for fid, words in (("grp", "too dense for colour groups"), ("num", "too dense for a colour scale of 'c'")):
        car = render(project, fid)
        assert car["panels"][0]["drawing"] == "translucent" and car["panels"][0]["alpha"] == MIN_ALPHA
        assert any(words in c for c in car["cautions"]), car["cautions"]


def test_overlap_is_measured_at_the_final_panel_size(tmp_path):
    """The grid is chosen again once the tick labels are measured (five-digit y labels are wider
    than the first estimate): the marker-sized cells must be those of the final panels.  A
    marker of s pt is s * 25.4 / 72 mm wide (the PostScript point, 1/72 inch); cells across a
    panel = floor(panel width / marker width), read back from the written sidecar."""
    import json

    import matplotlib as mpl
    from figkit.render import render
    rng = np.random.default_rng(3)
    n = 4000
    df = pd.DataFrame({"x": rng.normal(size=n), "y": rng.normal(50_000, 8_000, size=n),
                       "g": rng.choice(list("ABCD"), size=n)})
    sheet = "id\tdataset\tchart\tx\ty\tstrata\nwide\td\tscatter\tx\ty\tg\n"
    project = _project(tmp_path, df, sheet)
    render(project, "wide")
    car = json.loads((tmp_path / "results" / "figures" / "wide.json").read_text())
    rc = mpl.rc_params_from_file(str(REPO / "figkit" / "styles" / "house.mplstyle"),
                                 use_default_template=False)
    marker_mm = float(rc.get("lines.markersize", 2.5)) * 25.4 / 72
    w, h = car["layout"]["panel_mm"]
    for p in car["panels"]:
        cx, cy = p["cells"]
        assert w / marker_mm - 1 < cx <= w / marker_mm + 0.01, (p["cells"], w)
        assert h / marker_mm - 1 < cy <= h / marker_mm + 0.01, (p["cells"], h)
    assert car["panels"][0]["figure_max_per_cell"] == max(p["max_per_cell"] for p in car["panels"])
