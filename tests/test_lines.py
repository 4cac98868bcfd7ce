"""The lines chart: per-x means against pandas, intervals against scipy, gaps in x break lines.

Data: constructed here (numpy, fixed seed): monthly readings at two sites, three rows per month,
one site missing month 6.  References: pandas groupby (count, mean) for the per-x means,
scipy.stats.t.interval for the per-x 95% intervals; the drawn segments are counted on the
matplotlib figure the notebook API returns.
"""
from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from conftest import sheet_text, write_project
from figkit.errors import FigkitError
from figkit.render import figure, load_project, render

REPO = Path(__file__).resolve().parents[1]

SHEET = sheet_text(["id", "dataset", "chart", "x", "y", "colour", "options"], [
        ["monthly", "obs", "lines", "month", "level", "site", ""],
        ["monthly-bridged", "obs", "lines", "month", "level", "site", "gap=none"],
        ["monthly-bad", "obs", "lines", "month", "level", "site", "gap=-2"],
    ])


@pytest.fixture(scope="module")
def frame() -> pd.DataFrame:
    rng = np.random.default_rng(5)
    rows = []
    for site, shift in (("upper", 0.0), ("lower", 3.0)):
        for month in range(1, 13):
            if site == "upper" and month == 6:
                continue          # a missing period
            for _ in range(3):
                rows.append((site, month, shift + np.sin(month / 2) + rng.normal(0, 0.5)))
    return pd.DataFrame(rows, columns=["site", "month", "level"])


@pytest.fixture(scope="module")
def project(tmp_path_factory, frame) -> Path:
    return write_project(tmp_path_factory.mktemp("lines"), SHEET, {"obs": frame})


def test_per_x_means_match_pandas_and_scipy(project, frame):
    from scipy import stats as sps
    render(load_project(project), "monthly")
    car = json.loads((project / "results" / "figures" / "monthly.json").read_text())
    ref = frame.groupby(["site", "month"])["level"].agg(["count", "mean"])      # pandas
    rec = car["panels"][0]
    assert "mean of y at each x" in rec["line_is"]
    seen = 0
    for g in rec["groups"]:
        for pt in g["per_x"]:
            r = ref.loc[(g["group"], int(pt["x"]))]
            assert pt["n"] == r["count"] and pt["mean"] == pytest.approx(r["mean"], rel=1e-9)
            v = frame[(frame["site"] == g["group"]) & (frame["month"] == pt["x"])]["level"]
            lo, hi = sps.t.interval(0.95, len(v) - 1, loc=v.mean(), scale=sps.sem(v))   # scipy
            assert (pt["ci_low"], pt["ci_high"]) == pytest.approx((lo, hi), rel=1e-9)
            seen += 1
    assert seen == len(ref) == 23


def test_a_gap_in_x_breaks_the_line(project):
    render(load_project(project), "monthly")
    car = json.loads((project / "results" / "figures" / "monthly.json").read_text())
    by = {g["group"]: g for g in car["panels"][0]["groups"]}
    assert by["upper"]["segments"] == 2 and by["upper"]["breaks"] == [7.0]
    assert by["lower"]["segments"] == 1
    fig = figure("monthly", load_project(project))
    assert len(fig.axes[0].get_lines()) == 3           # segments drawn (matplotlib Line2D)
    bridged = figure("monthly-bridged", load_project(project))
    assert len(bridged.axes[0].get_lines()) == 2
    render(load_project(project), "monthly-bridged")
    car = json.loads((project / "results" / "figures" / "monthly-bridged.json").read_text())
    assert any("gap=none" in c for c in car["cautions"])


def test_bad_gap_is_one_line_error(project):
    with pytest.raises(FigkitError) as exc:
        render(load_project(project), "monthly-bad")
    text = str(exc.value)
    assert "\n" not in text and "monthly-bad" in text and "gap" in text and "-2" in text


# ---------------------------------------------------------------------------- ordered text x

PENGUIN_SHEET = sheet_text(["id", "dataset", "chart", "x", "y", "colour", "filter"], [
    ["mass-by-island", "penguins", "lines", "island", "body_mass_g", "species",
     'not (species == "Adelie" and island == "Biscoe")']])


def test_ordered_text_x_follows_the_declared_order_and_breaks_at_a_missing_value(tmp_path):
    """x as ordered text (Palmer penguins' island, Gorman, Williams & Fraser 2014, via the
    palmerpenguins package), in the order config.yaml declares: per-x means equal a pandas
    groupby, the values file names each x by its text, and Adelie, left out on Biscoe (the
    middle of the order), is drawn as two segments, never bridged over the missing island."""
    from conftest import write_penguin_project
    from palmerpenguins import load_penguins
    root = write_penguin_project(tmp_path, PENGUIN_SHEET)
    order = ["Torgersen", "Biscoe", "Dream"]
    with open(root / "config" / "config.yaml", "a") as fh:
        fh.write(f"orders:\n  island: {json.dumps(order)}\n")
    car = render(load_project(root), "mass-by-island")
    df = load_penguins().dropna(subset=["body_mass_g"])
    df = df[~((df.species == "Adelie") & (df.island == "Biscoe"))]
    ref = df.groupby(["species", "island"])["body_mass_g"].agg(["count", "mean"])   # pandas
    groups = {g["group"]: g for g in car["panels"][0]["groups"]}
    for species, g in groups.items():
        for pt in g["per_x"]:
            island = order[int(pt["x"])]
            assert pt["x_label"] == island
            assert pt["n"] == ref.loc[(species, island), "count"]
            assert pt["mean"] == pytest.approx(ref.loc[(species, island), "mean"], rel=1e-9)  # 10 digits kept
    assert [pt["x_label"] for pt in groups["Adelie"]["per_x"]] == ["Torgersen", "Dream"]
    assert groups["Adelie"]["segments"] == 2
    values = pd.read_csv(root / "results" / "figures" / "mass-by-island.values.csv")
    assert set(values["x"]) <= set(order)
    fig = figure("mass-by-island", root)
    labels = [t.get_text() for t in fig.axes[0].get_xticklabels()]
    assert labels == order


def test_ordered_text_x_without_a_declared_order_is_cautioned(tmp_path):
    from conftest import write_penguin_project
    root = write_penguin_project(tmp_path, PENGUIN_SHEET)
    car = render(load_project(root), "mass-by-island")
    assert any("no order under orders:" in c and "island" in c for c in car["cautions"])


def test_ordered_text_x_keeps_declared_levels_the_data_lack(tmp_path):
    """A level declared under orders: but absent from the data (Biscoe removed from the Palmer
    penguins) keeps its place: every line steps over it in two positions and so breaks there,
    and its tick is still drawn.  Without an order the natural order is used (Biscoe, Dream,
    Torgersen), and a log scale on an ordered text x is refused in one line."""
    from conftest import write_penguin_project
    from palmerpenguins import load_penguins
    sheet = PENGUIN_SHEET.replace('not (species == "Adelie" and island == "Biscoe")',
                                  'island != "Biscoe"')
    root = write_penguin_project(tmp_path / "declared", sheet)
    order = ["Torgersen", "Biscoe", "Dream"]
    with open(root / "config" / "config.yaml", "a") as fh:
        fh.write(f"orders:\n  island: {json.dumps(order)}\n")
    car = render(load_project(root), "mass-by-island")
    adelie = next(g for g in car["panels"][0]["groups"] if g["group"] == "Adelie")
    assert [pt["x_label"] for pt in adelie["per_x"]] == ["Torgersen", "Dream"]
    assert adelie["segments"] == 2 and adelie["break_labels"] == ["Dream"]
    assert [t.get_text() for t in figure("mass-by-island", root).axes[0].get_xticklabels()] == order

    root = write_penguin_project(tmp_path / "natural", PENGUIN_SHEET)
    car = render(load_project(root), "mass-by-island")
    df = load_penguins()
    seen = {pt["x_label"] for g in car["panels"][0]["groups"] for pt in g["per_x"]}
    assert sorted(seen) == sorted(df["island"].unique())
    for g in car["panels"][0]["groups"]:
        labels = [pt["x_label"] for pt in g["per_x"]]
        assert labels == sorted(labels)           # natural order: alphabetical for these names

    bad = write_penguin_project(tmp_path / "log", PENGUIN_SHEET.replace(
        "\tfilter\n", "\tfilter\toptions\n").replace('"Biscoe")\n', '"Biscoe")\tx_scale=log10\n'))
    with pytest.raises(FigkitError, match="ordered text x .* has no log scale"):
        render(load_project(bad), "mass-by-island")


def test_whole_number_x_gets_whole_number_ticks(project):
    """Months 1-12 (the constructed series above): every x tick label is a whole number."""
    fig = figure("monthly", project)
    labels = [t.get_text() for t in fig.axes[0].get_xticklabels() if t.get_text()]
    assert labels and all(lab.lstrip("−-").isdigit() for lab in labels), labels
