"""The means chart: per group the mean and a 95% interval, checked against reference libraries.

Data: Palmer penguins (Gorman, Williams & Fraser 2014, PLOS ONE 9(3):e90081) as shipped by the
palmerpenguins package: body mass by species (x) and sex (colour).  References:
scipy.stats.t.interval (Student t interval of a mean), statsmodels DescrStatsW.tconfint_mean,
pandas groupby for n and means; the percentile bootstrap (Efron & Tibshirani 1993, ch. 13)
against the t interval on normal data drawn with numpy (the two agree for a large normal sample,
from memory).  Every figure check reads the files figkit wrote (sidecar JSON, values and stats CSV).
"""
from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from palmerpenguins import load_penguins

from figkit import stats
from figkit.errors import FigkitError
from figkit.render import load_project, render

from conftest import sheet_text, write_penguin_project

REPO = Path(__file__).resolve().parents[1]

SHEET = sheet_text(["id", "dataset", "chart", "x", "y", "colour", "strata", "options"], [
        ["mass-means", "penguins", "means", "species", "body_mass_g", "sex", "", "points=auto"],
        ["mass-means-boot", "penguins", "means", "species", "body_mass_g", "", "island",
         "interval=bootstrap; resamples=2000; seed=7"],
        ["mass-means-bad", "penguins", "means", "species", "body_mass_g", "", "", "resamples=10"],
    ])


@pytest.fixture(scope="module")
def penguins() -> pd.DataFrame:
    return load_penguins()


@pytest.fixture(scope="module")
def project(tmp_path_factory) -> Path:
    return write_penguin_project(tmp_path_factory.mktemp("penguin-means"), SHEET)


def _built(project: Path, fig_id: str):
    render(load_project(project), fig_id)
    out = project / "results" / "figures"
    car = json.loads((out / f"{fig_id}.json").read_text())
    values = pd.read_csv(out / car["values_file"], keep_default_na=False, na_values=[""])
    stats_csv = pd.read_csv(out / f"{fig_id}.stats.csv", keep_default_na=False, na_values=[""])
    return car, values, stats_csv


def test_t_intervals_match_scipy_and_statsmodels(project, penguins):
    from scipy import stats as sps
    from statsmodels.stats.weightstats import DescrStatsW
    car, values, stats_csv = _built(project, "mass-means")
    groups = car["panels"][0]["groups"]
    ref = penguins.dropna(subset=["species", "body_mass_g", "sex"])
    by = ref.groupby(["species", "sex"])["body_mass_g"]
    assert len(groups) == by.ngroups == 6                     # 3 species x 2 sexes (pandas)
    for g in groups:
        v = by.get_group((g["x"], g["colour_group"])).to_numpy(float)
        lo, hi = sps.t.interval(0.95, len(v) - 1, loc=v.mean(), scale=sps.sem(v))   # scipy
        assert g["n"] == len(v)
        assert g["mean"] == pytest.approx(v.mean(), rel=1e-9)
        assert (g["ci_low"], g["ci_high"]) == pytest.approx((lo, hi), rel=1e-9)
        assert (g["ci_low"], g["ci_high"]) == pytest.approx(DescrStatsW(v).tconfint_mean(0.05), rel=1e-9)
        assert g["interval"] == "t"
        # the same numbers in the values file and n per group in the stats file
        row = values[(values["x"] == g["x"]) & (values["group"] == g["colour_group"])]
        assert row.set_index("measure")["value"]["ci_high"] == pytest.approx(hi, rel=1e-9)
        line = stats_csv[stats_csv["group"] == f"{g['x']} / {g['colour_group']}"]
        assert int(line["n"].iloc[0]) == len(v)
    # Adelie females: 73 birds, mean 3368.8 g (pandas on the package's data)
    adelie_f = next(g for g in groups if g["x"] == "Adelie" and g["colour_group"] == "female")
    assert adelie_f["n"] == 73 and adelie_f["mean"] == pytest.approx(3368.84, abs=0.01)
    assert car["panels"][0]["points"] in ("points", "translucent")
    assert any("Student t interval" in c for c in car["cautions"])


def test_bootstrap_reproducible_and_close_to_t_on_normal_data():
    rng = np.random.default_rng(3)
    v = rng.normal(50.0, 10.0, 1000)
    a = stats.mean_bootstrap_interval(v, resamples=20000, seed=11)
    b = stats.mean_bootstrap_interval(v, resamples=20000, seed=11)
    c = stats.mean_bootstrap_interval(v, resamples=20000, seed=12)
    t = stats.mean_t_interval(v)
    assert (a.low, a.high) == (b.low, b.high)                # fixed seed: identical
    assert (a.low, a.high) != (c.low, c.high)                # the seed matters
    half_t = (t.high - t.low) / 2
    assert (a.high - a.low) / 2 == pytest.approx(half_t, rel=0.02)
    assert a.mean == t.mean == pytest.approx(v.mean())


def test_bootstrap_row_records_its_method_and_seed(project, penguins):
    car, _, _ = _built(project, "mass-means-boot")
    ref = penguins.dropna(subset=["species", "body_mass_g", "island"])
    for p in car["panels"]:
        for g in p["groups"]:
            v = ref[(ref["island"] == p["keys"]["island"]) & (ref["species"] == g["x"])]["body_mass_g"]
            again = stats.mean_bootstrap_interval(v.to_numpy(float), 2000, 7)
            assert g["interval"] == "bootstrap" and g["n"] == len(v)
            assert (g["ci_low"], g["ci_high"]) == pytest.approx((again.low, again.high), rel=1e-9)
    assert any("percentile bootstrap" in c and "seed 7" in c for c in car["cautions"])


def test_single_value_group_has_no_interval():
    r = stats.mean_t_interval([4.0])
    assert r.n == 1 and r.mean == 4.0 and r.low is None and r.high is None


def test_resamples_out_of_range_is_one_line_error(project):
    with pytest.raises(FigkitError) as exc:
        render(load_project(project), "mass-means-bad")
    text = str(exc.value)
    assert "\n" not in text and "mass-means-bad" in text and "resamples" in text and "500" in text
