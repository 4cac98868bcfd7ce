"""Hexagonal binning by integer cell indices (Carr et al. 1987) against matplotlib's own hexbin
(a general-purpose reference implementation of the same two-lattice scheme), and one-pass
tallies against in-memory computations."""
import numpy as np
import pytest

from figkit.aggregate import HexGrid, PanelTally
from figkit.stats import fit_line


def _mpl_counts(x, y, extent, nx):
    import matplotlib
    matplotlib.use("Agg")
    import matplotlib.pyplot as plt
    fig, ax = plt.subplots()
    coll = ax.hexbin(x, y, gridsize=nx, extent=extent, mincnt=None)
    counts = np.asarray(coll.get_array(), dtype=float)
    centres = coll.get_offsets()
    plt.close(fig)
    return counts, np.asarray(centres)


@pytest.mark.parametrize("nx", [7, 20, 31])
def test_hex_counts_match_matplotlib_hexbin(nx):
    rng = np.random.default_rng(nx)
    x = rng.normal(0, 1, 20000)
    y = 0.5 * x + rng.normal(0, 1, 20000)
    extent = (-4.5, 4.5, -4.0, 4.0)
    inside = (x > extent[0]) & (x < extent[1]) & (y > extent[2]) & (y < extent[3])
    x, y = x[inside], y[inside]
    grid = HexGrid(*extent, nx)
    ours = grid.counts(x, y)
    ref, ref_centres = _mpl_counts(x, y, extent, nx)
    assert ours.sum() == len(x)
    assert np.allclose(grid.centres(), ref_centres, atol=1e-6 * (extent[1] - extent[0]))
    # matplotlib nudges its extent by 1e-9 of the range; points on a cell boundary may differ
    assert np.abs(ours - ref).sum() <= 2


def test_tally_in_chunks_equals_whole():
    rng = np.random.default_rng(3)
    x = rng.uniform(0, 10, 100_000)
    y = 2 + 0.3 * x + rng.normal(0, 1, x.size)
    grid = HexGrid(0, 10, -2, 8, 25)
    edges = np.linspace(0, 10, 41)
    whole = PanelTally()
    whole.add_points(x, y, grid, edges)
    chunks = PanelTally()
    for part in np.array_split(np.arange(x.size), 17):
        chunks.add_points(x[part], y[part], grid, edges)
    assert chunks.n == whole.n == x.size
    assert np.array_equal(chunks.hex_counts, whole.hex_counts)
    assert np.array_equal(chunks.hist_counts, np.histogram(x, bins=edges)[0])
    fit_c, fit_w = chunks.line.fit(), fit_line(x, y)
    assert fit_c.slope == pytest.approx(fit_w.slope, rel=1e-10)
    assert fit_c.intercept == pytest.approx(fit_w.intercept, rel=1e-10)
    assert chunks.x_mean == pytest.approx(x.mean(), rel=1e-12)


def test_strata_test_from_sums_equals_the_least_squares_version_and_anova_lm():
    """Reference: statsmodels anova_lm comparing y ~ x + C(g) with y ~ x * C(g)."""
    import pandas as pd
    import statsmodels.formula.api as smf
    from statsmodels.stats.anova import anova_lm
    from figkit.stats import LineSums, strata_slope_test, strata_slope_test_from_sums
    rng = np.random.default_rng(11)
    g = np.repeat(["a", "b", "c", "d"], [300, 250, 400, 5])
    slope = {"a": 0.5, "b": 0.6, "c": 0.4, "d": 0.5}
    x = rng.normal(10, 3, g.size)
    y = np.array([slope[k] for k in g]) * x + rng.normal(0, 1, g.size)
    sums = {}
    for k in ["a", "b", "c", "d"]:
        m = g == k
        for part in np.array_split(np.flatnonzero(m), 3):      # chunk by chunk
            s = LineSums.of(x[part], y[part])
            sums[k] = s if k not in sums else sums[k].merge(s)
    fast = strata_slope_test_from_sums(sums)
    direct = strata_slope_test(x, y, g)
    assert fast.F == pytest.approx(direct.F, rel=1e-9)
    assert fast.p == pytest.approx(direct.p, rel=1e-9)
    assert (fast.df_num, fast.df_den) == (direct.df_num, direct.df_den)
    assert fast.pooled_slope == pytest.approx(direct.pooled_slope, rel=1e-10)
    assert fast.crude_slope == pytest.approx(direct.crude_slope, rel=1e-10)
    df = pd.DataFrame({"x": x, "y": y, "g": g})
    table = anova_lm(smf.ols("y ~ x + C(g)", df).fit(), smf.ols("y ~ x * C(g)", df).fit())
    assert fast.F == pytest.approx(table["F"].iloc[1], rel=1e-7)


def test_strata_test_from_sums_leaves_out_a_constant_stratum_as_the_direct_version_does():
    """A stratum whose x is one repeated value (0.1, which sums cannot hold exactly) has no
    slope: both versions of the test leave it out and agree on the rest.  Reference for the
    remaining F: statsmodels anova_lm (y ~ x + C(g) against y ~ x * C(g))."""
    import pandas as pd
    import statsmodels.formula.api as smf
    from statsmodels.stats.anova import anova_lm
    from figkit.stats import LineSums, strata_slope_test, strata_slope_test_from_sums
    rng = np.random.default_rng(5)
    g = np.repeat(["a", "b", "flat"], [200, 150, 1001])
    x = rng.normal(3, 1, g.size)
    x[g == "flat"] = 0.1
    y = 0.7 * x + rng.normal(0, 1, g.size)
    sums = {k: LineSums.of(x[g == k], y[g == k]) for k in ["a", "b", "flat"]}
    assert sums["flat"].sxx > 0            # rounding leaves a tiny spread around the mean
    fast = strata_slope_test_from_sums(sums)
    direct = strata_slope_test(x, y, g)
    assert fast.excluded == direct.excluded == ("flat",)
    assert fast.F == pytest.approx(direct.F, rel=1e-9)
    kept = pd.DataFrame({"x": x, "y": y, "g": g}).query("g != 'flat'")
    table = anova_lm(smf.ols("y ~ x + C(g)", kept).fit(), smf.ols("y ~ x * C(g)", kept).fit())
    assert fast.F == pytest.approx(table["F"].iloc[1], rel=1e-7)


def test_strata_test_from_sums_with_equal_slopes_and_exact_lines():
    """Rounding guards shared with the least-squares version.  Reference for the noisy case:
    statsmodels anova_lm, whose F is 0 (to rounding) when every stratum has the same fitted
    slope; exact lines give NaN (equal slopes) or an infinite F (different slopes), as the
    direct version does."""
    import pandas as pd
    import statsmodels.formula.api as smf
    from statsmodels.stats.anova import anova_lm
    from figkit.stats import LineSums, strata_slope_test, strata_slope_test_from_sums
    rng = np.random.default_rng(8)
    x = rng.uniform(0, 20, 60)
    e = rng.normal(0, 1, 60)
    g = np.repeat(["a", "b", "c"], 20)
    # the same x and noise in every stratum, shifted: identical fitted slopes
    xs, es = np.tile(x[:20], 3), np.tile(e[:20], 3)
    y = 0.4 * xs + es + np.repeat([0.0, 3.0, 7.0], 20)
    sums = {k: LineSums.of(xs[g == k], y[g == k]) for k in "abc"}
    fast = strata_slope_test_from_sums(sums)
    df = pd.DataFrame({"x": xs, "y": y, "g": g})
    table = anova_lm(smf.ols("y ~ x + C(g)", df).fit(), smf.ols("y ~ x * C(g)", df).fit())
    assert abs(table["F"].iloc[1]) < 1e-9
    assert fast.F == pytest.approx(0.0, abs=1e-9) and fast.p == pytest.approx(1.0)
    for slopes, expect in (((1.8, 1.8, 1.8), "nan"), ((1.8, 1.0, 1.8), "inf")):
        y = np.repeat(slopes, 20) * x + 32.0 + np.repeat([0.0, 5.0, 9.0], 20)
        sums = {k: LineSums.of(x[g == k], y[g == k]) for k in "abc"}
        fast, direct = strata_slope_test_from_sums(sums), strata_slope_test(x, y, g)
        if expect == "nan":
            assert np.isnan(fast.F) and np.isnan(fast.p) and np.isnan(direct.F)
        else:
            assert fast.F == direct.F == np.inf and fast.p == direct.p == 0.0
