"""The demo's sidecars recomputed independently with reference libraries.

* Straight-line trends: statsmodels OLS on the panel's rows (same n, slope, 95% CI), and the strata
  interaction F-test against statsmodels' anova_lm (y ~ x + C(stratum) vs y ~ x * C(stratum)).
* Colours: the minimum pairwise CIEDE2000 of the colours drawn, under normal vision and Machado,
  Oliveira & Fernandes (2009) simulations at severity 1, recomputed with colour-science; greyscale
  compared as CIE L* alone (a* = b* = 0).
"""
from __future__ import annotations

import itertools
import json

import numpy as np
import pandas as pd
import pytest


def _cars(project):
    return {p.stem: json.loads(p.read_text()) for p in (project / "results" / "figures").glob("*.json")}


def test_line_trends_match_statsmodels(built_demo):
    import statsmodels.api as sm
    import statsmodels.formula.api as smf
    from statsmodels.stats.anova import anova_lm

    checked = 0
    for fid, car in _cars(built_demo).items():
        lines = [p for p in car["panels"] if (p.get("trend") or {}).get("kind") == "line"]
        if not lines:
            continue
        data = pd.read_csv(built_demo / car["inputs"][0]["path"])
        assert car["filter"] is None and car["derived"] is None   # the demo's line figure
        fld = car["strata"][0]
        frames = []
        for p in car["panels"]:
            part = data[data[fld] == p["keys"][fld]].dropna(subset=[car["x"], car["y"]])
            fit = sm.OLS(part[car["y"]], sm.add_constant(part[car["x"]])).fit()
            lo, hi = fit.conf_int(alpha=0.05).loc[car["x"]]
            assert p["n"] == len(part) == p["trend"]["n"]
            assert p["trend"]["slope"] == pytest.approx(fit.params[car["x"]], rel=1e-8)
            assert p["trend"]["slope_ci"] == pytest.approx([lo, hi], rel=1e-8)
            assert p["stats"]["intercept"] == pytest.approx(fit.params["const"], rel=1e-8)
            frames.append(part.assign(stratum=p["label"]))
            checked += 1
        both = pd.concat(frames).rename(columns={car["x"]: "x", car["y"]: "y"})
        additive = smf.ols("y ~ x + C(stratum)", both).fit()
        full = smf.ols("y ~ x * C(stratum)", both).fit()
        table = anova_lm(additive, full)
        st = car["strata_test"]
        assert st["F"] == pytest.approx(table["F"].iloc[1], rel=1e-6)
        assert st["p"] == pytest.approx(table["Pr(>F)"].iloc[1], rel=1e-6, abs=1e-300)
        assert st["df_num"] == table["df_diff"].iloc[1]
        assert st["df_den"] == table["df_resid"].iloc[1]
        assert st["pooled_slope"] == pytest.approx(additive.params["x"], rel=1e-8)
        crude = sm.OLS(both["y"], sm.add_constant(both["x"])).fit()
        assert st["crude_slope"] == pytest.approx(crude.params["x"], rel=1e-8)
    assert checked >= 4


def _min_de(hexes, transform):
    import colour
    rgb = np.array([[int(h[i:i + 2], 16) / 255 for i in (1, 3, 5)] for h in hexes])
    lab = transform(rgb)
    return min(float(colour.delta_E(a, b, method="CIE 2000")) for a, b in itertools.combinations(lab, 2))


def test_colour_separability_matches_colour_science(built_demo):
    import colour

    def to_lab(rgb_linear):
        xyz = colour.RGB_to_XYZ(rgb_linear, colour.RGB_COLOURSPACES["sRGB"], apply_cctf_decoding=False)
        return colour.XYZ_to_Lab(xyz, colour.CCS_ILLUMINANTS["CIE 1931 2 Degree Standard Observer"]["D65"])

    def normal(rgb):
        return to_lab(colour.models.eotf_sRGB(rgb))

    def simulated(kind):
        def f(rgb):
            lin = colour.models.eotf_sRGB(rgb)
            m = colour.blindness.matrix_cvd_Machado2009(kind, 1.0)
            sim = np.clip(np.einsum("ij,nj->ni", m, lin), 0, 1)
            return to_lab(sim)
        return f

    def grey(rgb):
        lab = normal(rgb)
        lab[:, 1:] = 0.0
        return lab

    visions = {"normal": normal, "protan": simulated("Protanomaly"), "deutan": simulated("Deuteranomaly"),
               "tritan": simulated("Tritanomaly"), "grey": grey}
    checked = 0
    for fid, car in _cars(built_demo).items():
        used = car["colours"]["used"]
        if len(used) < 2:
            continue
        # a figure made of parts: the closest pair within any one part (each part has its key)
        sets = [p["colours"]["used"] for p in car.get("parts") or [] if len(p["colours"]["used"]) > 1]
        for vision, f in visions.items():
            want = min(_min_de(u, f) for u in sets) if car.get("parts") else _min_de(used, f)
            assert car["colours"]["min_delta_e"][vision] == pytest.approx(want, abs=0.5), \
                (fid, vision)
        checked += 1
    assert checked >= 4
