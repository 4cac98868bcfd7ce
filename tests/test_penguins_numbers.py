"""Bins, per-bin counts, the drawn values file, box quartiles and the missing-value caution,
checked on an open dataset against reference libraries.

Data: Palmer penguins (Gorman, Williams & Fraser 2014, PLOS ONE 9(3):e90081) as shipped by the
palmerpenguins package.  References: numpy.histogram_bin_edges / numpy.histogram (the
Freedman & Diaconis 1981 and Sturges 1926 rules as numpy implements them), numpy.percentile
(method "linear" = Hyndman & Fan 1996 type 7), Tukey's (1977) hinges computed here from their
definition with numpy.median on the two halves, pandas crosstab / groupby / isna for counts.
Every check reads the files figkit wrote (sidecar JSON, values CSV).
"""
from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from palmerpenguins import load_penguins

from figkit.render import load_project, render

from conftest import sheet_text, write_penguin_project

REPO = Path(__file__).resolve().parents[1]

SHEET = sheet_text(["id", "dataset", "chart", "x", "y", "colour", "strata", "options"], [
        ["flipper-fd", "penguins", "histogram", "flipper_length_mm", "", "", "", ""],
        ["flipper-fd-exact", "penguins", "histogram", "flipper_length_mm", "", "", "", "edges=exact"],
        ["mass-sturges", "penguins", "histogram", "body_mass_g", "", "", "species", "bins=sturges"],
        ["mass-sturges-exact", "penguins", "histogram", "body_mass_g", "", "", "species",
         "bins=sturges; edges=exact"],
        ["mass-box", "penguins", "box", "species", "body_mass_g", "", "", ""],
        ["mass-box-hinges", "penguins", "box", "species", "body_mass_g", "", "", "quartiles=hinges"],
        ["species-bars", "penguins", "count-bars", "species", "", "island", "", ""],
        ["island-shares", "penguins", "shares", "island", "", "species", "", "interval=wilson"],
        ["species-tiles", "penguins", "tiles", "island", "species", "", "", ""],
        ["bill-mass-sex", "penguins", "scatter", "bill_length_mm", "body_mass_g", "sex", "", ""],
    ])


@pytest.fixture(scope="module")
def penguins() -> pd.DataFrame:
    return load_penguins()


@pytest.fixture(scope="module")
def project(tmp_path_factory) -> Path:
    return write_penguin_project(tmp_path_factory.mktemp("penguin-numbers"), SHEET)


def _built(project: Path, fig_id: str) -> tuple[dict, pd.DataFrame]:
    render(load_project(project), fig_id)
    out = project / "results" / "figures"
    car = json.loads((out / f"{fig_id}.json").read_text())
    values = pd.read_csv(out / car["values_file"], keep_default_na=False, na_values=[""])
    return car, values


# ------------------------------------------------------------------------------------- bins

def test_fd_exact_edges_are_numpys(project, penguins):
    car, _ = _built(project, "flipper-fd-exact")
    v = penguins["flipper_length_mm"].dropna().to_numpy(float)
    ref = np.histogram_bin_edges(v, "fd")            # numpy: 172 ... 231 in steps of 6.556
    assert np.allclose(car["bin_edges"], ref, rtol=1e-9)
    assert car["bins"]["rule"] == "fd" and car["bins"]["edges"] == "exact"
    assert car["bins"]["aligned_to_step"] is None
    assert car["bins"]["rule_width"] == pytest.approx(ref[1] - ref[0], rel=1e-9)


def test_fd_aligned_keeps_the_rule_width_beside_the_drawn_one(project, penguins):
    car, _ = _built(project, "flipper-fd")
    v = penguins["flipper_length_mm"].dropna().to_numpy(float)
    ref = np.histogram_bin_edges(v, "fd")
    step = np.min(np.diff(np.unique(v)))             # flipper lengths are whole mm (pandas/numpy)
    bins = car["bins"]
    assert bins["rule_width"] == pytest.approx(ref[1] - ref[0], rel=1e-9)
    assert bins["aligned_to_step"] == pytest.approx(step)
    assert bins["width"] == pytest.approx(np.ceil((ref[1] - ref[0]) / step) * step)
    assert f"aligned to the data's step of {step:g}" in bins["note"]
    assert car["panels"][0]["rule_bin_width"] == pytest.approx(ref[1] - ref[0], rel=1e-9)
    assert car["panels"][0]["bin_width"] == pytest.approx(bins["width"])


def test_sturges_per_panel_counts_equal_numpy(project, penguins):
    for fig_id in ("mass-sturges", "mass-sturges-exact"):
        car, values = _built(project, fig_id)
        m = penguins["body_mass_g"].dropna().to_numpy(float)
        ref = np.histogram_bin_edges(m, "sturges")   # numpy: steps of 360 g
        assert car["bins"]["rule_width"] == pytest.approx(ref[1] - ref[0])
        if fig_id.endswith("exact"):
            assert np.allclose(car["bin_edges"], ref)
        else:
            assert car["bins"]["aligned_to_step"] == pytest.approx(25.0)   # masses are whole 25 g
            assert car["bins"]["width"] == pytest.approx(375.0)
        edges = np.asarray(car["bin_edges"])
        for p in car["panels"]:
            sp = penguins.loc[penguins["species"] == p["keys"]["species"], "body_mass_g"].dropna()
            expect, _ = np.histogram(sp.to_numpy(float), bins=edges)
            assert p["bin_counts"] == expect.tolist()
            rows = values[values["panel"] == p["label"]]
            assert rows["measure"].eq("count").all()
            assert rows["value"].astype(int).tolist() == expect.tolist()
            assert np.allclose(rows["x_low"], edges[:-1]) and np.allclose(rows["x_high"], edges[1:])


# ------------------------------------------------------------------------ drawn values file

def test_values_file_bars_shares_tiles_equal_crosstab(project, penguins):
    _, bars = _built(project, "species-bars")
    ref = pd.crosstab(penguins["species"], penguins["island"])
    for r in bars.itertuples():
        assert r.value == ref.loc[r.x, r.group], (r.x, r.group)
    assert bars["value"].sum() == len(penguins)

    _, shares = _built(project, "island-shares")
    ref = pd.crosstab(penguins["island"], penguins["species"], normalize="index")
    got = shares[shares["measure"] == "share"]
    assert len(got) == ref.size
    for r in got.itertuples():
        assert r.value == pytest.approx(ref.loc[r.x, r.group], abs=1e-9)
    assert {"share_ci_low", "share_ci_high", "count", "total"} <= set(shares["measure"])

    _, tiles = _built(project, "species-tiles")
    ref = pd.crosstab(penguins["species"], penguins["island"])
    for r in tiles.itertuples():
        assert r.value == ref.loc[r.y, r.x]


# ------------------------------------------------------------------------------ box plots

def test_box_records_its_quartile_method_and_numbers(project, penguins):
    car, values = _built(project, "mass-box")
    rec = car["panels"][0]
    assert rec["quartiles"] == "linear" and "type 7" in rec["quartile_method"]
    for g in rec["groups"]:
        v = penguins.loc[penguins["species"] == g["group"], "body_mass_g"].dropna().to_numpy(float)
        q1, med, q3 = np.percentile(v, [25, 50, 75], method="linear")   # Hyndman & Fan type 7
        assert (g["q1"], g["median"], g["q3"]) == pytest.approx((q1, med, q3))
        got = values[(values["x"] == g["group"])].set_index("measure")["value"]
        assert float(got["q1"]) == pytest.approx(q1) and int(got["n"]) == len(v)
    chin = next(g for g in rec["groups"] if g["group"] == "Chinstrap")
    assert chin["q1"] == pytest.approx(3487.5)       # value quoted in issue 16, numpy type 7


def test_box_tukey_hinges_option(project, penguins):
    car, _ = _built(project, "mass-box-hinges")
    rec = car["panels"][0]
    assert rec["quartiles"] == "hinges" and "Tukey" in rec["quartile_method"]
    for g in rec["groups"]:
        v = np.sort(penguins.loc[penguins["species"] == g["group"], "body_mass_g"].dropna().to_numpy(float))
        half = (len(v) + 1) // 2                      # Tukey (1977): median in both halves if n odd
        assert g["q1"] == pytest.approx(np.median(v[:half]))
        assert g["q3"] == pytest.approx(np.median(v[len(v) - half:]))
    chin = next(g for g in rec["groups"] if g["group"] == "Chinstrap")
    assert chin["q1"] == pytest.approx(3475.0)       # hinge quoted in issue 16 (n = 68)


# ------------------------------------------------------------------ missing-value caution

def test_missing_caution_names_only_fields_that_miss_values(project, penguins):
    car, _ = _built(project, "mass-box")
    text = next(c for c in car["cautions"] if "not drawn" in c)
    n_mass = int(penguins["body_mass_g"].isna().sum())          # pandas: 2
    assert f"'body_mass_g' in {n_mass} rows" in text
    assert "'species'" not in text                              # species misses nothing
    assert car["missing_values"] == {"body_mass_g": n_mass}

    car, _ = _built(project, "bill-mass-sex")
    text = next(c for c in car["cautions"] if "not drawn" in c)
    for f in ("bill_length_mm", "body_mass_g", "sex"):
        assert f"'{f}' in {int(penguins[f].isna().sum())} rows" in text
    dropped = int(penguins[["bill_length_mm", "body_mass_g", "sex"]].isna().any(axis=1).sum())
    assert text.startswith(f"{dropped} of {len(penguins)} rows")
