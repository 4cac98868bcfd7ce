"""Counts behind bars, 100% shares and tile maps against an open dataset.

Reference: the Palmer penguins data (Gorman, Williams & Fraser 2014, PLOS ONE 9(3):e90081) as
shipped by the palmerpenguins package; expected values computed independently with pandas
crosstab from the same rows, and the published species totals (Adelie 152, Gentoo 124,
Chinstrap 68 — from memory of the paper's data description, confirmed by the package's data).
"""
from __future__ import annotations

import json
import shutil
from pathlib import Path

import pandas as pd
import pytest
from palmerpenguins import load_penguins

from figkit.render import load_project, render

from conftest import write_penguin_project

REPO = Path(__file__).resolve().parents[1]

SHEET = """id\tdataset\tchart\tx\ty\tcolour\tweight\tstrata\toptions
species-bars\tpenguins\tcount-bars\tspecies\t\tisland\t\t\t
island-shares\tpenguins\tshares\tisland\t\tspecies\t\t\tinterval=wilson
species-tiles\tpenguins\ttiles\tisland\tspecies\t\t\tsex\t
mass-bars\tpenguins\tcount-bars\tspecies\t\t\tbody_mass_g\t\t
"""


@pytest.fixture(scope="module")
def penguin_project(tmp_path_factory) -> Path:
    return write_penguin_project(tmp_path_factory.mktemp("penguins"), SHEET, "[png, svg]")


@pytest.fixture(scope="module")
def penguins() -> pd.DataFrame:
    return load_penguins()


def test_published_species_totals(penguins):
    # Gorman, Williams & Fraser (2014): 152 Adelie, 124 Gentoo, 68 Chinstrap (344 birds).
    assert penguins["species"].value_counts().to_dict() == {"Adelie": 152, "Gentoo": 124, "Chinstrap": 68}


def test_count_bars_equal_crosstab(penguin_project, penguins):
    car = render(load_project(penguin_project), "species-bars")
    expect = pd.crosstab(penguins["species"], penguins["island"])
    got = {(c["x"], c["group"]): c["count"] for c in car["panels"][0]["counts"]}
    for species in expect.index:
        for island in expect.columns:
            assert got[(species, island)] == expect.loc[species, island]
    assert sum(got.values()) == 344


def test_weighted_bars_equal_groupby_sum(penguin_project, penguins):
    car = render(load_project(penguin_project), "mass-bars")
    expect = penguins.dropna(subset=["body_mass_g"]).groupby("species")["body_mass_g"].sum()
    got = {c["x"]: c["count"] for c in car["panels"][0]["counts"]}
    assert got == pytest.approx(expect.to_dict())
    assert car["panels"][0]["n_dropped"] == penguins["body_mass_g"].isna().sum()   # 2 birds


def test_shares_equal_normalised_crosstab(penguin_project, penguins):
    from statsmodels.stats.proportion import proportion_confint
    car = render(load_project(penguin_project), "island-shares")
    expect = pd.crosstab(penguins["island"], penguins["species"], normalize="index")
    totals = penguins["island"].value_counts()
    rows = car["panels"][0]["shares"]
    for r in rows:
        # the sidecar keeps 10 significant digits (figkit.provenance.clean)
        assert r["share"] == pytest.approx(expect.loc[r["x"], r["group"]], abs=1e-9)
        assert r["total"] == totals[r["x"]]
        # Wilson (1927) interval, reference: statsmodels proportion_confint(method="wilson")
        lo, hi = proportion_confint(r["count"], r["total"], alpha=0.05, method="wilson")
        assert r["share_ci_low"] == pytest.approx(lo, abs=1e-9)
        assert r["share_ci_high"] == pytest.approx(hi, abs=1e-9)
    for island in totals.index:
        assert sum(r["share"] for r in rows if r["x"] == island) == pytest.approx(1.0)


def test_tiles_equal_crosstab_per_panel(penguin_project, penguins):
    car = render(load_project(penguin_project), "species-tiles")
    # strata by sex: two panels (female, male); 11 birds without a recorded sex are counted
    assert [p["label"] for p in car["panels"]] == ["female", "male"]
    assert car["rows_without_stratum"] == penguins["sex"].isna().sum()
    for p in car["panels"]:
        part = penguins[penguins["sex"] == p["keys"]["sex"]]
        expect = pd.crosstab(part["species"], part["island"])
        for tile in p["tiles"]:
            want = expect.loc[tile["y"], tile["x"]] if tile["x"] in expect.columns and \
                tile["y"] in expect.index else 0
            assert tile["count"] == want


def test_every_output_is_written_and_sidecar_is_json(penguin_project):
    render(load_project(penguin_project), "species-bars")
    out = penguin_project / "results" / "figures"
    for suffix in (".png", ".svg", ".json", ".stats.csv"):
        assert (out / f"species-bars{suffix}").is_file()
    assert json.loads((out / "species-bars.json").read_text())["id"] == "species-bars"
    assert not list(out.glob(".*.part"))   # no temporary files left behind


def _tile_text_boxes(fig):
    """(text, its box, its tile's box) in display units for every tile count text of a tiles
    figure: tile (j, i) spans j ± 0.5, i ± 0.5 in data units (figkit.charts.draw_tiles)."""
    fig.canvas.draw()
    renderer = fig.canvas.get_renderer()
    out = []
    for ax in fig.axes:
        for t in ax.texts:
            if not t.get_text().isdigit():
                continue
            j, i = t.get_position()
            (x0, y0), (x1, y1) = ax.transData.transform([(j - 0.5, i - 0.5), (j + 0.5, i + 0.5)])
            shown = t.get_visible()
            t.set_visible(True)        # a hidden text measures as an empty box
            bb = t.get_window_extent(renderer)
            t.set_visible(shown)
            out.append((t, bb, (min(x0, x1), min(y0, y1), max(x0, x1), max(y0, y1))))
    return out


def test_tile_counts_are_printed_inside_their_tiles(penguin_project, penguins):
    """Every count printed in a tile lies inside that tile at final size and equals the
    crosstab (Gorman et al. 2014 data; pandas crosstab as the independent count)."""
    from figkit.render import figure
    fig = figure("species-tiles", load_project(penguin_project))
    boxes = _tile_text_boxes(fig)
    assert len(boxes) == 2 * 3 * 3                       # two sexes x three islands x three species
    for t, bb, (x0, y0, x1, y1) in boxes:
        assert t.get_visible()
        assert x0 <= bb.x0 and bb.x1 <= x1 and y0 <= bb.y0 and bb.y1 <= y1, t.get_text()
    printed = sorted(int(t.get_text()) for t, _, _ in boxes)
    expect = sorted(int(v) for s in ("female", "male")
                    for v in pd.crosstab(penguins.loc[penguins["sex"] == s, "species"],
                                         penguins.loc[penguins["sex"] == s, "island"])
                    .reindex(index=["Adelie", "Chinstrap", "Gentoo"],
                             columns=["Biscoe", "Dream", "Torgersen"], fill_value=0).to_numpy().ravel())
    assert printed == expect


def test_tile_counts_too_big_for_their_tiles_are_all_left_out(penguin_project):
    """One-millimetre flipper-length bands make tiles far narrower than a printed number: then no
    number is printed (a partial set would read as missing values) and a caution says why.
    Tile size and text size are read from the drawn figure; no outside source (common practice:
    printed numbers must fit the cell they label)."""
    from figkit.render import figure
    root = penguin_project.parent / (penguin_project.name + "-narrow")
    if not root.exists():
        shutil.copytree(penguin_project, root, ignore=shutil.ignore_patterns("results"))
    cuts = list(range(173, 232))   # flipper lengths of the data run from 172 to 231 mm
    bands = "".join(f"      - {{label: f{c - 1}, below: {c}}}\n" for c in cuts) + "      - {label: f231}\n"
    (root / "config" / "config.yaml").write_text(
        "datasets:\n  penguins: data/penguins.csv\nformats: [png, svg]\n"
        "bands:\n  flipper_mm:\n    from: flipper_length_mm\n    bands:\n" + bands)
    (root / "config" / "figures.tsv").write_text(
        "id\tdataset\tchart\tx\ty\tweight\tstrata\tbands\n"
        "narrow-tiles\tpenguins\ttiles\tflipper_mm\tspecies\t\tsex\tflipper_mm\n")
    car = render(load_project(root), "narrow-tiles")
    notes = [c for c in car["cautions"] if c.startswith("tile counts not printed")]
    assert len(notes) == 1, car["cautions"]
    boxes = _tile_text_boxes(figure("narrow-tiles", load_project(root)))
    assert boxes                                          # the numbers were made ...
    assert not any(t.get_visible() for t, _, _ in boxes)  # ... and none is shown
    # and they really did not fit: the widest number is wider than its tile
    assert max(bb.width - (x1 - x0) for _, bb, (x0, _, x1, _) in boxes) > 0


def test_compare_names_the_shares_and_counts_that_changed(penguin_project, penguins, tmp_path):
    """Drop the Dream island's Chinstraps from the data: compare must name the Dream bars that
    moved, with their old and new values equal to pandas crosstabs of the two data sets
    (Gorman et al. 2014 data), shares in percentage points, and leave the other islands alone."""
    from figkit.compare import compare_sidecars
    root = tmp_path / "p"
    shutil.copytree(penguin_project, root, ignore=shutil.ignore_patterns("results"))
    old_cars = {fid: render(load_project(root), fid) for fid in ("island-shares", "species-bars")}
    fewer = penguins[~((penguins["island"] == "Dream") & (penguins["species"] == "Chinstrap"))]
    fewer.to_csv(root / "data" / "penguins.csv", index=False)
    new_cars = {fid: render(load_project(root), fid) for fid in ("island-shares", "species-bars")}

    changes = {c.what: c for c in compare_sidecars(old_cars["island-shares"], new_cars["island-shares"])}
    before = pd.crosstab(penguins["island"], penguins["species"], normalize="index")
    after = pd.crosstab(fewer["island"], fewer["species"], normalize="index")
    adelie = changes["share Dream / Adelie"]             # one panel: no panel name
    assert adelie.old == pytest.approx(before.loc["Dream", "Adelie"], abs=1e-9)
    assert adelie.new == pytest.approx(after.loc["Dream", "Adelie"], abs=1e-9) == pytest.approx(1.0)
    pp = (after.loc["Dream", "Adelie"] - before.loc["Dream", "Adelie"]) * 100
    assert adelie.note == f"{pp:+.1f} percentage points"
    gone = changes["share Dream / Chinstrap"]
    assert gone.old == pytest.approx(before.loc["Dream", "Chinstrap"], abs=1e-9)
    assert gone.new is None and gone.note == "no longer drawn (no rows)"
    assert not [w for w in changes if "share Biscoe" in w or "share Torgersen" in w]

    changes = {c.what: c for c in compare_sidecars(old_cars["species-bars"], new_cars["species-bars"])}
    c = changes["count Chinstrap / Dream"]
    assert c.old == pd.crosstab(penguins["species"], penguins["island"]).loc["Chinstrap", "Dream"]  # 68
    assert c.new in (None, 0)


def test_rows_left_out_are_said_not_only_counted(penguin_project, penguins):
    """Palmer penguins (Gorman et al. 2014): 2 birds lack a body mass and 11 a recorded sex.  A
    figure weighted by mass says 2 of 344 rows are not drawn; one split by sex says 11 rows
    belong to no panel."""
    mass = render(load_project(penguin_project), "mass-bars")
    missing = int(penguins["body_mass_g"].isna().sum())
    assert missing == 2
    assert any(c.startswith(f"{missing} of 344 rows (0.6%) are not drawn") for c in mass["cautions"]), mass["cautions"]
    tiles = render(load_project(penguin_project), "species-tiles")
    no_sex = int(penguins["sex"].isna().sum())
    assert no_sex == 11
    assert any(c.startswith(f"{no_sex} of 344 rows (3.2%) have no value of 'sex'") for c in tiles["cautions"])
