"""Tests for the invented river-monitoring demo data (figkit.demo).

External references used:
* DO saturation of fresh water at sea level, Benson & Krause (1984) as tabulated in APHA
  Standard Methods 4500-O and USGS tables: 14.62 mg/L at 0 degC, 11.29 at 10 degC,
  9.09 at 20 degC, 7.56 at 30 degC (from memory);
* ICAO standard atmosphere: 89.88 kPa at 1000 m over 101.325 kPa at sea level (from memory);
* ANCOVA interaction F-test, statsmodels ``anova_lm`` as the reference implementation;
* meteorological seasons, Dec-Feb winter ... Sep-Nov autumn (common practice).
Row counts, column names and missing shares are the demo's own specification.
"""
from __future__ import annotations

import os
import subprocess
import sys
import time
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from figkit import demo
from figkit.errors import FigkitError

READING_COLUMNS = ["site", "catchment", "land_use", "day_of_year", "month", "season",
                   "water_temp_c", "dissolved_oxygen_mgl", "conductivity_uscm",
                   "discharge_m3s", "turbidity_ntu"]
SURVEY_COLUMNS = ["site", "catchment", "land_use", "year", "season", "replicate",
                  "taxon_group", "sensitivity", "count"]
SITE_COLUMNS = ["site", "catchment", "land_use", "altitude_m", "distance_to_source_km",
                "catchment_area_km2"]


@pytest.fixture(scope="module")
def full(tmp_path_factory):
    """The scale-1 demo, written once for the whole module (also timed)."""
    out = tmp_path_factory.mktemp("demo_full")
    start = time.perf_counter()
    paths = demo.write_demo_data(out)
    seconds = time.perf_counter() - start
    tables = {name: pd.read_csv(path) for name, path in paths.items()}
    return paths, tables, seconds


def test_same_seed_gives_byte_identical_files(tmp_path):
    a = demo.write_demo_data(tmp_path / "a", scale=0.02)
    b = demo.write_demo_data(tmp_path / "b", scale=0.02)
    assert set(a) == {"sites", "readings", "surveys"}
    for name in a:
        assert a[name].name == f"{name}.csv"
        assert a[name].read_bytes() == b[name].read_bytes(), name
    c = demo.write_demo_data(tmp_path / "c", scale=0.02, seed=1)
    assert c["readings"].read_bytes() != a["readings"].read_bytes()


def test_sites_do_not_depend_on_scale(tmp_path, full):
    small = demo.write_demo_data(tmp_path, scale=0.01)
    assert small["sites"].read_bytes() == full[0]["sites"].read_bytes()


def test_full_scale_size_columns_and_speed(full):
    paths, t, seconds = full
    readings = t["readings"]
    assert len(readings) >= 200_000
    assert len(readings) == 24 * 8760            # hourly for a 365-day year at scale 1
    assert list(readings.columns) == READING_COLUMNS
    assert list(t["surveys"].columns) == SURVEY_COLUMNS
    assert list(t["sites"].columns) == SITE_COLUMNS
    assert 2_000 <= len(t["surveys"]) <= 10_000  # "a few thousand" kick-sample records
    assert seconds < 20, f"scale-1 demo took {seconds:.1f} s"   # aim ~2 s; loose for CI
    assert paths["readings"].stat().st_size < 20e6
    assert not [p for p in paths["readings"].parent.iterdir() if p.name.startswith(".")]


def test_missing_shares(full):
    readings = full[1]["readings"]
    share = readings.isna().mean()
    assert 0.02 <= share["turbidity_ntu"] <= 0.06          # "a few %" (specification)
    assert 0.005 <= share["dissolved_oxygen_mgl"] <= 0.03   # "some" dropouts
    others = share.drop(["turbidity_ntu", "dissolved_oxygen_mgl"])
    assert (others == 0).all()
    # Dropouts come in runs (sensor outages), not as isolated single readings.
    gaps = readings["turbidity_ntu"].isna().to_numpy().astype(int)
    starts = np.sum(np.diff(gaps) == 1)
    assert gaps.sum() / max(starts, 1) > 10


def test_missing_shares_hold_at_small_scale(tmp_path):
    readings = pd.read_csv(demo.write_demo_data(tmp_path, scale=0.05)["readings"])
    share = readings.isna().mean()
    assert 0.01 <= share["turbidity_ntu"] <= 0.08
    assert 0.0 < share["dissolved_oxygen_mgl"] <= 0.05


def test_tables_agree_with_each_other(full):
    t = full[1]
    sites = t["sites"]
    assert len(sites) == 24 and sites["site"].is_unique
    assert list(sites["site"]) == [f"S{i:02d}" for i in range(1, 25)]
    assert sites["catchment"].nunique() == 4
    assert set(sites["land_use"]) == {"forest", "pasture", "arable", "urban"}
    key = sites.set_index("site")[["catchment", "land_use"]]
    for name in ("readings", "surveys"):
        df = t[name]
        joined = df[["site", "catchment", "land_use"]].drop_duplicates().set_index("site")
        pd.testing.assert_frame_equal(joined.sort_index(), key.sort_index())
    assert (sites["altitude_m"] > 0).all() and (sites["catchment_area_km2"] > 0).all()
    # Downstream sites drain larger areas and sit lower (within each catchment).
    for _, g in sites.groupby("catchment"):
        g = g.sort_values("distance_to_source_km")
        assert g["catchment_area_km2"].iloc[-1] > g["catchment_area_km2"].iloc[0]
        assert g["altitude_m"].iloc[-1] < g["altitude_m"].iloc[0]


def test_calendar_columns(full):
    r = full[1]["readings"]
    assert r["month"].between(1, 12).all() and r["day_of_year"].between(1, 365).all()
    # Meteorological seasons (common practice): DJF winter, MAM spring, JJA summer, SON autumn.
    expected = {12: "winter", 1: "winter", 2: "winter", 3: "spring", 4: "spring", 5: "spring",
                6: "summer", 7: "summer", 8: "summer", 9: "autumn", 10: "autumn", 11: "autumn"}
    pairs = r[["month", "season"]].drop_duplicates()
    assert dict(zip(pairs["month"], pairs["season"])) == expected
    # Day 32 is 1 February, day 60 is 1 March in a 365-day year.
    first = r.groupby("month")["day_of_year"].min()
    assert first[2] == 32 and first[3] == 60 and first[12] == 335


def test_oxygen_saturation_matches_published_table():
    # Benson & Krause (1984) tabulated values (from memory), to 0.01 mg/L.
    temps = np.array([0.0, 10.0, 20.0, 30.0])
    np.testing.assert_allclose(demo.oxygen_saturation_mgl(temps), [14.62, 11.29, 9.09, 7.56],
                               atol=0.006)
    # ICAO standard atmosphere (from memory): 89.88 / 101.325 at 1000 m.
    np.testing.assert_allclose(demo.pressure_ratio(1000.0), 89.88 / 101.325, rtol=2e-3)
    np.testing.assert_allclose(demo.oxygen_saturation_mgl(10.0, 1000.0),
                               11.29 * 89.88 / 101.325, rtol=3e-3)


def test_readings_are_physically_plausible(full):
    r = full[1]["readings"].dropna()
    assert r["water_temp_c"].between(0, 30).all()
    sat = demo.oxygen_saturation_mgl(r["water_temp_c"].to_numpy())
    # Never far above sea-level saturation (noise only), never anoxic.
    assert (r["dissolved_oxygen_mgl"] < sat * 1.12).all() and (r["dissolved_oxygen_mgl"] > 0).all()
    assert (r["discharge_m3s"] > 0).all() and (r["turbidity_ntu"] > 0).all()
    # Discharge is log-normal-ish: log values roughly symmetric (skewness of logs small).
    logq = np.log(r.loc[r["site"] == "S06", "discharge_m3s"])
    assert abs(((logq - logq.mean()) ** 3).mean() / logq.std() ** 3) < 0.5
    # Wetter winter, warmer summer.
    by_season = r.groupby("season")
    assert by_season["discharge_m3s"].median()["winter"] > by_season["discharge_m3s"].median()["summer"]
    assert by_season["water_temp_c"].mean()["summer"] > by_season["water_temp_c"].mean()["winter"] + 6
    # Conductivity higher in urban/arable than forest; turbidity highest where arable.
    med = r.groupby("land_use")[["conductivity_uscm", "turbidity_ntu"]].median()
    assert med.loc["urban", "conductivity_uscm"] > med.loc["forest", "conductivity_uscm"] * 3
    assert med.loc["arable", "conductivity_uscm"] > med.loc["pasture", "conductivity_uscm"]
    assert med["turbidity_ntu"].idxmax() == "arable"


def test_oxygen_temperature_slopes_differ_by_land_use(full):
    # ANCOVA: y ~ x + stratum vs y ~ x * stratum; statsmodels anova_lm is the reference F-test.
    smf = pytest.importorskip("statsmodels.formula.api")
    sm_anova = pytest.importorskip("statsmodels.stats.anova")
    r = full[1]["readings"].dropna(subset=["dissolved_oxygen_mgl"])
    r = r.iloc[::10]                     # 20 000 rows is plenty and keeps the test quick
    same = smf.ols("dissolved_oxygen_mgl ~ water_temp_c + C(land_use)", r).fit()
    own = smf.ols("dissolved_oxygen_mgl ~ water_temp_c * C(land_use)", r).fit()
    table = sm_anova.anova_lm(same, own)
    assert table["Pr(>F)"].iloc[1] < 1e-6
    slopes = {lu: np.polyfit(g["water_temp_c"], g["dissolved_oxygen_mgl"], 1)[0]
              for lu, g in r.groupby("land_use")}
    assert all(s < 0 for s in slopes.values())           # DO falls as water warms
    assert slopes["urban"] < slopes["forest"] - 0.05      # steeper where respiration is higher
    assert max(slopes.values()) - min(slopes.values()) < 0.3   # "differ a little"


def test_surveys_make_sense(full):
    s = full[1]["surveys"]
    assert set(s["year"]) == {2022, 2023, 2024, 2025}
    assert set(s["season"]) == {"winter", "spring", "summer", "autumn"}
    assert s["taxon_group"].nunique() == 8
    assert pd.api.types.is_integer_dtype(s["count"]) and (s["count"] >= 0).all()
    assert (s.groupby("taxon_group")["sensitivity"].nunique() == 1).all()
    assert set(s["sensitivity"]) == {"sensitive", "tolerant"}
    # Every site x visit x taxon appears (zeros kept), so shares and tile maps are complete.
    assert len(s) == 24 * 4 * 4 * s["replicate"].nunique() * 8
    share = (s.assign(sens=s["count"].where(s["sensitivity"] == "sensitive", 0))
             .groupby("land_use")[["sens", "count"]].sum())
    share = share["sens"] / share["count"]
    assert share["forest"] > share["pasture"] > share["arable"] > share["urban"]


def test_scale_shrinks_rows(tmp_path):
    paths = demo.write_demo_data(tmp_path, scale=0.01)
    readings = pd.read_csv(paths["readings"])
    assert len(readings) == 24 * round(8760 * 0.01)
    assert list(readings.columns) == READING_COLUMNS
    assert len(pd.read_csv(paths["surveys"])) == 24 * 4 * 4 * 8   # one kick sample per visit


@pytest.mark.parametrize("kwargs", [{"scale": 0}, {"scale": -1}, {"scale": float("nan")},
                                    {"scale": 1e6}, {"scale": "1"}, {"seed": -1},
                                    {"seed": 1.5}])
def test_bad_arguments(tmp_path, kwargs):
    with pytest.raises(FigkitError) as info:
        demo.write_demo_data(tmp_path, **kwargs)
    assert "\n" not in str(info.value)


def test_output_path_must_be_a_folder(tmp_path):
    f = tmp_path / "file.txt"
    f.write_text("x")
    with pytest.raises(FigkitError, match="not a folder"):
        demo.write_demo_data(f, scale=0.01)


def test_command_line(tmp_path, capsys):
    assert demo.main([str(tmp_path / "out"), "--scale", "0.01"]) == 0
    assert "readings" in capsys.readouterr().out
    assert (tmp_path / "out" / "surveys.csv").exists()
    assert demo.main([str(tmp_path / "bad"), "--scale", "0"]) == 2
    assert "scale" in capsys.readouterr().err


def test_python_dash_m_entry_point(tmp_path):
    root = Path(demo.__file__).resolve().parents[1]
    env = dict(os.environ, PYTHONPATH=str(root) + os.pathsep + os.environ.get("PYTHONPATH", ""))
    done = subprocess.run([sys.executable, "-m", "figkit.demo", str(tmp_path), "--scale", "0.005"],
                          capture_output=True, text=True, env=env, timeout=120)
    assert done.returncode == 0, done.stderr
    assert sorted(p.name for p in tmp_path.iterdir()) == ["readings.csv", "sites.csv", "surveys.csv"]
