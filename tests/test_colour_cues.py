"""Colour assignment rules at figure level: a centre value gives a diverging scheme centred on
it; optional shapes and dash patterns give a cue that survives greyscale; a category keeps its
colour in every figure of a project (pinned in config or by the project-wide order)."""
from __future__ import annotations

import shutil
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from figkit.errors import FigkitError

REPO = Path(__file__).resolve().parents[1]


@pytest.fixture(scope="module")
def project(tmp_path_factory):
    from figkit.render import load_project
    root = tmp_path_factory.mktemp("cues")
    rng = np.random.default_rng(2)
    n = 600
    df = pd.DataFrame({"site": rng.choice(["S1", "S2", "S10", "S3"], n), "x": rng.normal(0, 1, n),
                       "anomaly": rng.normal(0.5, 2, n)})
    df["y"] = df["x"] + rng.normal(0, 1, n)
    (root / "data").mkdir()
    df.to_csv(root / "data" / "d.csv", index=False)
    df[df["site"] != "S1"].to_csv(root / "data" / "e.csv", index=False)   # S1 absent here
    shutil.copytree(REPO / "figkit" / "styles", root / "styles")
    (root / "config").mkdir()
    (root / "config" / "config.yaml").write_text(
        "datasets: {d: data/d.csv, e: data/e.csv}\nformats: [png]\n"
        "colours: {site: {S3: '#CC79A7'}}\norders: {site: [S1, S2, S3, S10]}\n")
    (root / "config" / "figures.tsv").write_text("id\tdataset\tchart\n")
    return load_project(root)


def _fig(project, **cells):
    import matplotlib
    matplotlib.use("Agg")
    from figkit.render import figure
    return figure({"id": "t", "dataset": "d", **cells}, project)


def test_centre_gives_a_diverging_norm_centred_on_it(project):
    import matplotlib.colors as mcolors
    fig = _fig(project, chart="scatter", x="x", y="y", colour="anomaly", options="centre=0")
    colls = [c for ax in fig.axes for c in ax.collections if c.get_array() is not None]
    norm = colls[0].norm
    assert isinstance(norm, mcolors.TwoSlopeNorm) and norm.vcenter == 0
    # the centre maps to the middle of the map: the diverging scheme's neutral colour
    assert norm(0.0) == pytest.approx(0.5)


def test_centre_outside_the_range_is_a_one_line_error(project):
    with pytest.raises(FigkitError) as exc:
        _fig(project, chart="scatter", x="x", y="y", colour="anomaly", options="centre=99")
    text = str(exc.value)
    assert "centre" in text and "99" in text and "between" in text and "\n" not in text


def test_shapes_give_each_colour_group_its_own_marker(project):
    fig = _fig(project, chart="scatter", x="x", y="y", colour="site", options="shapes=yes")
    ax = fig.axes[0]
    paths = [tuple(map(tuple, c.get_paths()[0].vertices.round(3))) for c in ax.collections]
    assert len(paths) == 4 and len(set(paths)) == 4


def test_dashes_give_each_density_curve_its_own_pattern(project):
    fig = _fig(project, chart="density", x="x", colour="site", options="dashes=yes")
    styles = {str(line._unscaled_dash_pattern) for line in fig.axes[0].get_lines()}
    assert len(styles) == 4


def test_a_category_keeps_its_colour_across_figures(project):
    """Pinned S3 keeps #CC79A7 everywhere; S2 gets the same palette colour in both datasets
    although S1 is missing from the second (colours follow the project-wide order in config)."""
    from matplotlib.colors import to_hex

    def colours(dataset):
        fig = _fig(project, dataset=dataset, chart="scatter", x="x", y="y", colour="site")
        legend = fig.legends[0]
        return {t.get_text(): to_hex(h.get_markerfacecolor()).upper()
                for t, h in zip(legend.get_texts(), legend.legend_handles)}

    d, e = colours("d"), colours("e")
    assert set(d) == {"S1", "S2", "S3", "S10"} and set(e) == {"S2", "S3", "S10"}
    assert d["S3"] == e["S3"] == "#CC79A7"
    assert d["S2"] == e["S2"] and d["S10"] == e["S10"]


def test_greyscale_note_names_its_remedy_and_goes_once_a_shape_cue_is_on(tmp_path):
    """Okabe & Ito (2008) orange #E69F00 and sky blue #56B4E9 have nearly the same CIE L*, so a
    greyscale print merges them (the CIEDE2000 figures are checked against colour-science in
    test_colour).  The caution says it is not judged and how to add a non-colour cue; with
    shapes=yes there is a cue, and no caution."""
    from figkit.render import load_project, render
    root = tmp_path / "grey"
    rng = np.random.default_rng(5)
    n = 400
    df = pd.DataFrame({"g": rng.choice(["a", "b"], n), "x": rng.normal(0, 1, n)})
    df["y"] = df["x"] + rng.normal(0, 1, n)
    (root / "data").mkdir(parents=True)
    df.to_csv(root / "data" / "d.csv", index=False)
    shutil.copytree(REPO / "figkit" / "styles", root / "styles")
    (root / "config").mkdir()
    (root / "config" / "config.yaml").write_text(
        "datasets: {d: data/d.csv}\nformats: [png]\ncolours: {g: {a: '#E69F00', b: '#56B4E9'}}\n")
    (root / "config" / "figures.tsv").write_text(
        "id\tdataset\tchart\tx\ty\tcolour\toptions\n"
        "plain\td\tscatter\tx\ty\tg\t\n"
        "shaped\td\tscatter\tx\ty\tg\tshapes=yes\n")
    project = load_project(root)
    grey = [c for c in render(project, "plain")["cautions"] if "greyscale" in c]
    assert len(grey) == 1 and "#E69F00" in grey[0] and "#56B4E9" in grey[0]
    assert "not judged" in grey[0] and "shapes=yes" in grey[0]
    assert not [c for c in render(project, "shaped")["cautions"] if "greyscale" in c]
