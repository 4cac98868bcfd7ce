"""Axis scales (options x_scale / y_scale / threshold): every statistic in the space the axis
draws, checked against reference libraries on constructed skewed data.

References: numpy (log10, histogram_bin_edges, percentile, bincount), statsmodels OLS
(Seabold & Perktold 2010) for the straight line fitted to log10(y); the hexagon lattice is
recomputed here by brute force (nearest of all centres, numpy) instead of figkit's index rule;
the symmetric log is Webber (2012, Meas. Sci. Technol. 24, 027001), its formula typed from
memory.  Tick positions are read back from the SVG figkit wrote.
"""
from __future__ import annotations

import json
import math
import re
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from conftest import sheet_text, write_project
from figkit import scales
from figkit.errors import FigkitError
from figkit.render import load_project, render

REPO = Path(__file__).resolve().parents[1]

SHEET = sheet_text(["id", "dataset", "chart", "x", "y", "strata", "trend", "options"], [
        ["hex-loglog", "skew", "hexbins", "dose", "titre", "", "", "x_scale=log10; y_scale=log10; cells=12"],
        ["exp-line", "skew", "scatter", "day", "titre", "site", "line", "y_scale=log10"],
        ["hist-log", "skew", "histogram", "titre", "", "", "", "x_scale=log10; bins=fd"],
        ["box-log", "skew", "box", "site", "titre", "", "", "y_scale=log10"],
        ["dens-sym", "skew", "density", "change", "", "", "", "x_scale=signed-log; threshold=2"],
        ["bad-threshold", "skew", "histogram", "titre", "", "", "", "threshold=2"],
    ])


@pytest.fixture(scope="module")
def frame() -> pd.DataFrame:
    rng = np.random.default_rng(14)
    n = 600
    day = rng.uniform(0, 30, n)
    titre = 10 ** (1.0 + 0.05 * day + rng.normal(0, 0.3, n))   # exponential growth in day
    titre[:12] = 0.0          # 12 non-positive values a log axis cannot show (2% of 600)
    titre[12:15] = -1.0
    dose = 10 ** rng.uniform(-1, 3, n)
    change = rng.normal(0, 50, n)
    change[:40] = 0.0
    site = np.where(np.arange(n) % 2 == 0, "upper", "lower")
    return pd.DataFrame({"day": day, "titre": titre, "dose": dose, "change": change, "site": site})


@pytest.fixture(scope="module")
def project(tmp_path_factory, frame) -> Path:
    return write_project(tmp_path_factory.mktemp("scales"), SHEET, {"skew": frame}, "[png, svg]")


def _built(project: Path, fig_id: str) -> dict:
    render(load_project(project), fig_id)
    return json.loads((project / "results" / "figures" / f"{fig_id}.json").read_text())


def test_signed_log_formula_and_inverse():
    # Webber (2012) bi-symmetric log, from memory: t = sign(v) log10(1 + |v|/C)
    v = np.array([-1000.0, -2.0, 0.0, 2.0, 18.0, 1000.0])
    t = scales.forward(v, "signed-log", 2.0)
    assert t[2] == 0.0
    assert t[3] == pytest.approx(math.log10(2.0))          # 1 + 2/2 = 2
    assert t[4] == pytest.approx(1.0)                      # 1 + 18/2 = 10
    assert t[0] == pytest.approx(-t[5])
    assert np.allclose(scales.inverse(t, "signed-log", 2.0), v)


def test_hexagons_counted_on_log10_values(project, frame):
    car = _built(project, "hex-loglog")
    rec = car["panels"][0]
    x, y = np.log10(frame["dose"].to_numpy()), frame["titre"].to_numpy()
    keep = y > 0
    x, y = x[keep], np.log10(y[keep])
    (x0, x1), (y0, y1), nx = rec["lattice"]["x"], rec["lattice"]["y"], rec["lattice"]["cells_across"]
    # the lattice spans the log10 values, not the raw ones (raw dose reaches 1000)
    assert x0 <= x.min() and x1 >= x.max() and x1 < 4
    ny = max(1, int(nx / math.sqrt(3)))
    sx, sy = (x1 - x0) / nx, (y1 - y0) / ny
    c1 = np.array([(x0 + i * sx, y0 + j * sy) for i in range(nx + 1) for j in range(ny + 1)])
    c2 = np.array([(x0 + (i + .5) * sx, y0 + (j + .5) * sy) for i in range(nx) for j in range(ny)])
    centres = np.vstack([c1, c2])
    # nearest centre in the lattice's own metric (cells are regular in units of sx, sy*sqrt3)
    d = ((x[:, None] - centres[None, :, 0]) / sx) ** 2 + 3 * ((y[:, None] - centres[None, :, 1]) / sy) ** 2
    counts = np.bincount(d.argmin(axis=1), minlength=len(centres))      # numpy bincount
    assert rec["max_count"] == counts.max()
    assert rec["cells_filled"] == int((counts > 0).sum())
    assert car["scales"]["y"]["dropped"] == 15 and car["scales"]["x"]["dropped"] == 0


def test_exponential_trend_against_statsmodels_ols_on_log10_y(project, frame):
    import statsmodels.api as sm
    car = _built(project, "exp-line")
    for p in car["panels"]:
        part = frame[frame["site"] == p["keys"]["site"]]
        part = part[part["titre"] > 0]
        ols = sm.OLS(np.log10(part["titre"].to_numpy()), sm.add_constant(part["day"].to_numpy())).fit()
        t = p["trend"]
        assert t["slope"] == pytest.approx(ols.params[1], rel=1e-9)          # statsmodels OLS
        assert t["intercept"] == pytest.approx(ols.params[0], rel=1e-9)
        lo, hi = ols.conf_int(0.05)[1]
        assert t["slope_ci"] == pytest.approx([lo, hi], rel=1e-9)
        assert t["fitted_in"] == {"x": "x", "y": "log10(y)"}
        assert t["n"] == len(part)
    assert any("exponential fit" in c for c in car["cautions"])
    # the 15 non-positive titres: counted per panel, dropped, named with their share
    assert sum(p["scale_dropped"].get("titre", 0) for p in car["panels"]) == 15
    note = next(c for c in car["cautions"] if "log10 axis" in c)
    assert "15 of 600 rows (2.5%)" in note and "'titre'" in note


def test_histogram_bins_on_log10_values_are_numpys(project, frame):
    car = _built(project, "hist-log")
    v = frame["titre"].to_numpy()
    ref = np.histogram_bin_edges(np.log10(v[v > 0]), "fd")               # numpy
    assert np.allclose(car["bin_edges"], ref, rtol=1e-9)
    counts, _ = np.histogram(np.log10(v[v > 0]), bins=ref)
    assert car["panels"][0]["bin_counts"] == counts.tolist()


def test_box_statistics_on_drawn_log10_values(project, frame):
    car = _built(project, "box-log")
    for g in car["panels"][0]["groups"]:
        v = frame.loc[(frame["site"] == g["group"]) & (frame["titre"] > 0), "titre"].to_numpy()
        q1, med, q3 = np.percentile(np.log10(v), [25, 50, 75])              # numpy, type 7
        assert (g["q1"], g["median"], g["q3"]) == pytest.approx((q1, med, q3), rel=1e-8)  # sidecar: 10 digits
        assert g["n"] == len(v)


def _svg_x_ticks(svg: str) -> tuple[dict, int]:
    """({label: x} of the labelled x ticks, number of x ticks) read from the SVG's tick groups
    (svg.fonttype none keeps text as text); standard-library XML parser."""
    import xml.etree.ElementTree as ET
    ns = "{http://www.w3.org/2000/svg}"
    labels, n = {}, 0
    for g in ET.fromstring(svg).iter(f"{ns}g"):
        if re.fullmatch(r"xtick_\d+", g.get("id", "")):
            n += 1
            for t in g.iter(f"{ns}text"):
                if (t.text or "").strip():
                    labels[t.text.strip()] = float(t.get("x"))
    return labels, n


def test_decade_ticks_read_back_from_svg(project):
    render(load_project(project), "hist-log")
    svg = (project / "results" / "figures" / "hist-log.svg").read_text()
    found, n_ticks = _svg_x_ticks(svg)
    decades = [t for t in ("1", "10", "100", "1000", "10000", "100000") if t in found]
    assert len(decades) >= 3, found
    xs = [found[t] for t in decades]
    steps = np.diff(xs)
    assert (steps > 0).all()
    assert np.allclose(steps, steps[0], rtol=0.01)      # equal spacing per decade: a log axis
    # minor ticks (2..9 times each power of ten) are drawn beside the labelled ones
    assert n_ticks >= len(decades) + 8


def test_signed_log_keeps_zeros_and_states_threshold(project, frame):
    car = _built(project, "dens-sym")
    s = car["scales"]["x"]
    assert s["scale"] == "signed-log" and s["threshold"] == 2.0 and s["dropped"] == 0
    assert car["panels"][0]["groups"][0]["n"] == len(frame)
    assert any("nearly linear for |value| below about 2" in c for c in car["cautions"])


def test_threshold_without_signed_log_is_one_line_error(project):
    with pytest.raises(FigkitError) as exc:
        render(load_project(project), "bad-threshold")
    text = str(exc.value)
    assert "\n" not in text
    for part in ("bad-threshold", "options", "threshold=2", "signed-log"):
        assert part in text
