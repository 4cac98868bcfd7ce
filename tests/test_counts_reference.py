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

REPO = Path(__file__).resolve().parents[1]

SHEET = """id\tdataset\tchart\tx\ty\tcolour\tweight\tstrata\toptions
species-bars\tpenguins\tcount-bars\tspecies\t\tisland\t\t\t
island-shares\tpenguins\tshares\tisland\t\tspecies\t\t\tinterval=wilson
species-tiles\tpenguins\ttiles\tisland\tspecies\t\t\tsex\t
mass-bars\tpenguins\tcount-bars\tspecies\t\t\tbody_mass_g\t\t
"""


@pytest.fixture(scope="module")
def penguin_project(tmp_path_factory) -> Path:
    root = tmp_path_factory.mktemp("penguins")
    (root / "config").mkdir()
    (root / "data").mkdir()
    shutil.copytree(REPO / "figkit" / "styles", root / "styles")
    load_penguins().to_csv(root / "data" / "penguins.csv", index=False)
    (root / "config" / "config.yaml").write_text(
        "datasets:\n  penguins: data/penguins.csv\nformats: [png, svg]\n")
    (root / "config" / "figures.tsv").write_text(SHEET)
    return root


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
