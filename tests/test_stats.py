"""Tests of figkit.stats against published data, hand computations and reference libraries.

Each check names its source.  Reference libraries (statsmodels, scipy, numpy) are
used only here, as independent implementations of the same published methods.
"""
from fractions import Fraction

import numpy as np
import pandas as pd
import pytest
import scipy.stats
import statsmodels.api as sm
import statsmodels.formula.api as smf
from statsmodels.nonparametric.bandwidths import bw_silverman
from statsmodels.nonparametric.smoothers_lowess import lowess as sm_lowess
from statsmodels.stats.anova import anova_lm
from statsmodels.stats.proportion import proportion_confint

from figkit.errors import FigkitError
from figkit.stats import (
    QUANTILE_METHODS, LineSums, bin_edges, box_stats, fit_line, kde, kde_bandwidth,
    line_band, loess, loess_at, shares, strata_slope_test, wilson_interval,
)

# ------------------------------------------------------------------------- Anscombe
# Anscombe, F. J. (1973), "Graphs in Statistical Analysis", The American Statistician
# 27(1):17-21, the data table.  Typed from memory of the paper's table: no installed
# registry package ships a copy (statsmodels.datasets has none), and the published
# summary values checked below confirm the typing.
ANSCOMBE_X = [10, 8, 13, 9, 11, 14, 6, 4, 12, 7, 5]
ANSCOMBE = {
    "I": (ANSCOMBE_X,
          [8.04, 6.95, 7.58, 8.81, 8.33, 9.96, 7.24, 4.26, 10.84, 4.82, 5.68]),
    "II": (ANSCOMBE_X,
           [9.14, 8.14, 8.74, 8.77, 9.26, 8.10, 6.13, 3.10, 9.13, 7.26, 4.74]),
    "III": (ANSCOMBE_X,
            [7.46, 6.77, 12.74, 7.11, 7.81, 8.84, 6.08, 5.39, 8.15, 6.42, 5.73]),
    "IV": ([8, 8, 8, 8, 8, 8, 8, 19, 8, 8, 8],
           [6.58, 5.76, 7.71, 8.84, 8.47, 7.04, 5.25, 12.50, 5.56, 7.91, 6.89]),
}


@pytest.mark.parametrize("name", list(ANSCOMBE))
def test_anscombe_summary_values(name):
    x, y = ANSCOMBE[name]
    fit = fit_line(x, y)
    # Anscombe (1973), summary table printed with the data (same for all four sets).
    assert fit.n == 11
    # The paper gives one rounded value for all four sets; the sets differ in the
    # next digit (r of set IV is 0.8165), so compare within one unit of that digit.
    assert fit.slope == pytest.approx(0.500, abs=1e-3)
    assert fit.intercept == pytest.approx(3.00, abs=1e-2)
    assert fit.r == pytest.approx(0.816, abs=1e-3)
    assert fit.x_mean == pytest.approx(9.0, abs=1e-12)
    assert fit.sxx == pytest.approx(110.0, abs=1e-9)          # "sum of squares of x - xbar"
    assert fit.y_mean == pytest.approx(7.50, abs=1e-2)
    # From memory of the same table: residual SS 13.75 (9 d.f.), regression SS 27.50,
    # s.e. of slope 0.118, R^2 0.667.  The paper rounds; the four sets agree to 0.03.
    assert fit.df == 9
    assert fit.rss == pytest.approx(13.75, abs=0.03)
    assert fit.slope ** 2 * fit.sxx == pytest.approx(27.50, abs=0.03)
    t = scipy.stats.t.ppf(0.975, 9)
    se_slope = (fit.slope_ci_high - fit.slope_ci_low) / (2 * t)
    assert se_slope == pytest.approx(0.118, abs=1e-3)
    assert fit.r ** 2 == pytest.approx(0.667, abs=1e-3)


# ---------------------------------------------------------------- straight line / OLS
def _line_data(n=60, seed=11, offset=1000.0):
    rng = np.random.default_rng(seed)
    x = offset + rng.uniform(0, 20, n)
    y = 4.0 - 0.3 * x + rng.normal(0, 1.5, n)
    return x, y


@pytest.mark.parametrize("level", [0.95, 0.80])
def test_fit_line_matches_statsmodels_ols(level):
    # Reference: statsmodels OLS (QR least squares) on the same data.
    x, y = _line_data()
    res = sm.OLS(y, sm.add_constant(x)).fit()
    fit = fit_line(x, y, level=level)
    rel = 1e-8
    assert fit.intercept == pytest.approx(res.params[0], rel=rel)
    assert fit.slope == pytest.approx(res.params[1], rel=rel)
    ci = res.conf_int(alpha=1 - level)
    assert [fit.intercept_ci_low, fit.intercept_ci_high] == pytest.approx(ci[0], rel=rel)
    assert [fit.slope_ci_low, fit.slope_ci_high] == pytest.approx(ci[1], rel=rel)
    assert fit.rss == pytest.approx(res.ssr, rel=rel)
    assert fit.df == res.df_resid
    assert fit.r ** 2 == pytest.approx(res.rsquared, rel=rel)

    grid = np.linspace(x.min() - 5, x.max() + 5, 25)
    pred = res.get_prediction(sm.add_constant(grid)).conf_int(alpha=1 - level)
    yhat, lo, hi = line_band(fit, grid)
    assert yhat == pytest.approx(res.predict(sm.add_constant(grid)), rel=rel)
    assert lo == pytest.approx(pred[:, 0], rel=rel)
    assert hi == pytest.approx(pred[:, 1], rel=rel)


def test_line_band_level_override_matches_statsmodels():
    x, y = _line_data(seed=5)
    res = sm.OLS(y, sm.add_constant(x)).fit()
    grid = np.array([x.min(), x.mean(), x.max()])
    _, lo, hi = line_band(fit_line(x, y), grid, level=0.99)
    ref = res.get_prediction(sm.add_constant(grid)).conf_int(alpha=0.01)
    assert np.column_stack([lo, hi]) == pytest.approx(ref, rel=1e-8)


def test_line_sums_chunks_equal_whole_fit():
    x, y = _line_data(n=1001, seed=2)
    whole = fit_line(x, y)
    sums = LineSums()
    for part in np.array_split(np.arange(x.size), 7):
        sums = sums.add(x[part], y[part])
    chunked = sums.fit()
    # Merging in a different grouping must give the same sums (pairwise update).
    halves = [LineSums.of(x[:300], y[:300]), LineSums.of(x[300:], y[300:])]
    merged = halves[1].merge(halves[0]).fit()
    for f in (chunked, merged):
        assert f.n == whole.n
        for field in ("slope", "intercept", "slope_ci_low", "slope_ci_high",
                      "intercept_ci_low", "intercept_ci_high", "r", "x_mean", "y_mean",
                      "sxx", "rss"):
            assert getattr(f, field) == pytest.approx(getattr(whole, field), rel=1e-10)
    assert sums.sx == pytest.approx(x.sum(), rel=1e-12)
    assert sums.sy == pytest.approx(y.sum(), rel=1e-12)


def test_line_sums_large_offset_against_exact_arithmetic():
    # x near 1e8: the raw-sum formula Sxx = sum x^2 - (sum x)^2 / n loses all digits in
    # float64; the reference is exact rational arithmetic (Python fractions).
    k = np.arange(200)
    x = 1e8 + 0.25 * k                       # exactly representable
    y = 3.0 + 0.5 * (k % 7) - 0.125 * k      # exactly representable
    fx, fy = [Fraction(v) for v in x], [Fraction(v) for v in y]
    n = len(fx)
    mx, my = sum(fx) / n, sum(fy) / n
    sxx = sum((a - mx) ** 2 for a in fx)
    sxy = sum((a - mx) * (b - my) for a, b in zip(fx, fy))
    exact_slope = float(sxy / sxx)
    sums = LineSums()
    for part in np.array_split(np.arange(n), 9):
        sums = sums.add(x[part], y[part])
    assert sums.fit().slope == pytest.approx(exact_slope, rel=1e-9)
    assert sums.sxx == pytest.approx(float(sxx), rel=1e-9)


def test_fit_line_input_errors():
    with pytest.raises(FigkitError, match="at least 3"):
        fit_line([1, 2], [3, 4])
    with pytest.raises(FigkitError, match="constant"):
        fit_line([2, 2, 2, 2], [1, 2, 3, 4])
    with pytest.raises(FigkitError, match="level"):
        fit_line([1, 2, 3], [1, 2, 4], level=95)
    with pytest.raises(FigkitError, match="same length"):
        fit_line([1, 2, 3], [1, 2])
    with pytest.raises(FigkitError, match="finite"):
        fit_line([1, 2, np.inf], [1, 2, 3])
    # NaN pairs are dropped, not an error: three complete pairs remain.
    assert fit_line([1, 2, np.nan, 3], [1, 2, 5, 4]).n == 3


# --------------------------------------------------------------------------- strata
def _strata_frame(seed=4):
    rng = np.random.default_rng(seed)
    frames = []
    for label, slope, shift, n in (("a", 1.0, 0.0, 40), ("b", 1.3, 5.0, 35),
                                   ("c", 0.8, -3.0, 30)):
        x = rng.uniform(0, 10, n) + shift
        frames.append(pd.DataFrame({"x": x, "y": 2 + slope * x + rng.normal(0, 1, n),
                                    "s": label}))
    return pd.concat(frames, ignore_index=True)


def _check_against_anova(d, res, y="y", x="x", s="s"):
    # Reference: statsmodels anova_lm comparing the nested OLS models.
    add = smf.ols(f"{y} ~ {x} + C({s})", d).fit()
    full = smf.ols(f"{y} ~ {x} * C({s})", d).fit()
    table = anova_lm(add, full)
    assert res.F == pytest.approx(table["F"].iloc[1], rel=1e-8)
    assert res.df_num == table["df_diff"].iloc[1]
    assert res.df_den == table["df_resid"].iloc[1]
    assert res.p == pytest.approx(table["Pr(>F)"].iloc[1], rel=1e-7)
    assert res.pooled_slope == pytest.approx(add.params[x], rel=1e-8)
    crude = smf.ols(f"{y} ~ {x}", d).fit()
    assert res.crude_slope == pytest.approx(crude.params[x], rel=1e-8)
    f_cmp, p_cmp, _ = full.compare_f_test(add)
    assert res.F == pytest.approx(f_cmp, rel=1e-8)
    assert res.p == pytest.approx(p_cmp, rel=1e-7)


def test_strata_slope_test_matches_anova_lm():
    d = _strata_frame()
    res = strata_slope_test(d.x, d.y, d.s)
    assert res.n == len(d) and res.n_strata == 3 and res.excluded == ()
    _check_against_anova(d, res)


def test_strata_slope_test_excludes_small_or_flat_strata():
    d = _strata_frame(seed=9)
    extra = pd.DataFrame({"x": [1.0, 2.0, 3.0, 4.0, 4.0, 4.0],
                          "y": [1.0, 2.0, 1.0, 3.0, 5.0, 2.0],
                          "s": ["two", "two", "flat", "flat", "flat", "flat"]})
    extra.loc[2:, "x"] = 4.0                # stratum "flat": constant x
    res = strata_slope_test(pd.concat([d, extra]).x, pd.concat([d, extra]).y,
                            pd.concat([d, extra]).s)
    assert set(res.excluded) == {"two", "flat"}
    assert res.n == len(d)
    _check_against_anova(d, res)
    # A single usable stratum: no test.
    one = d[d.s == "a"]
    assert strata_slope_test(one.x, one.y, one.s) is None


# ---------------------------------------------------------------------------- LOESS
def _smooth_data(n, seed, ties=False):
    rng = np.random.default_rng(seed)
    x = rng.uniform(0, 10, n)
    if ties:
        x = np.round(x)
    y = np.sin(x) + 0.1 * x + rng.standard_t(3, n) * 0.3 + 50.0
    return x, y


@pytest.mark.parametrize("span,iterations", [(0.75, 0), (0.3, 0), (0.4567, 2), (0.2, 3)])
def test_loess_at_matches_statsmodels_lowess(span, iterations):
    # Reference: statsmodels lowess (Cleveland 1979 algorithm, local linear, tricube,
    # bisquare robustness), delta=0 so that every point is fitted, data without ties.
    x, y = _smooth_data(150, seed=1)
    assert np.unique(x).size == x.size
    ref = sm_lowess(y, x, frac=span, it=iterations, delta=0.0, return_sorted=False)
    ours = loess_at(x, y, x, span=span, degree=1, iterations=iterations)
    assert ours == pytest.approx(ref, rel=1e-8, abs=1e-8)
    # With n <= n_eval distinct x, loess() evaluates at every distinct x exactly.
    xs, ys = loess(x, y, span=span, iterations=iterations, n_eval=200)
    order = np.argsort(x)
    assert xs == pytest.approx(x[order], rel=0, abs=0)
    assert ys == pytest.approx(ref[order], rel=1e-8, abs=1e-8)


def test_loess_with_ties_matches_statsmodels():
    # Ties in x (rounded to integers): same reference as above.
    x, y = _smooth_data(120, seed=3, ties=True)
    ref = sm_lowess(y, x, frac=0.3, it=2, delta=0.0, return_sorted=False)
    xs, ys = loess(x, y, span=0.3, iterations=2)
    assert xs.size == np.unique(x).size
    assert np.interp(x, xs, ys) == pytest.approx(ref, rel=1e-8, abs=1e-8)


@pytest.mark.parametrize("n,span,iterations,ties", [(20_000, 0.3, 0, False), (8_000, 0.5, 1, False),
                                                    (6_000, 0.4, 0, True)])
def test_loess_on_a_delta_grid_matches_direct_and_statsmodels(n, span, iterations, ties):
    # Cleveland (1979) speed-up: fit only at points at least delta apart in x, interpolate
    # linearly in between.  Reference: statsmodels lowess with the same delta (the same rule,
    # so the same vertices); and figkit's direct evaluation at every point (loess_at, no
    # interpolation).  Tolerance: 1e-6 of the y range (the bound for drawing).
    x, y = _smooth_data(n, seed=7)
    if ties:
        x = np.round(x, 2)                      # ties, but enough distinct x to interpolate
    delta = float(np.ptp(x)) / (300 if ties else 4000)
    y_range = float(np.ptp(y))
    xs, ys = loess(x, y, span=span, iterations=iterations, delta=delta)
    assert 100 < xs.size < np.unique(x).size    # really a grid: most points interpolated
    at_data = np.interp(x, xs, ys)
    ref = sm_lowess(y, x, frac=span, it=iterations, delta=delta, return_sorted=False)
    assert np.abs(at_data - ref).max() <= 1e-6 * y_range
    # At the grid's own points the fit is the direct evaluation (loess_at: every local fit
    # computed, nothing interpolated).
    if iterations == 0:
        assert np.abs(ys - loess_at(x, y, xs, span=span)).max() <= 1e-6 * y_range
    # Between grid points the line is interpolated: against the direct evaluation at a sample
    # of the data points (all of them would cost O(n q)) it stays far inside the drawn line's
    # width, 1e-3 of the y range (common practice, no source).  With robustness iterations the
    # weights come from residuals of the interpolated fit, as in Cleveland's routine.
    rng = np.random.default_rng(8)
    check = x[rng.choice(n, 1500, replace=False)]
    direct = loess_at(x, y, check, span=span, iterations=iterations)
    assert np.abs(np.interp(check, xs, ys) - direct).max() <= 1e-3 * y_range


def test_loess_delta_rule_vertices():
    # The rule by hand (Cleveland 1979, as statsmodels' update_indices): from x = 0 the last
    # point within delta = 1 is x = 1 -> fit there; the tie at 1 shares it; from 1 the last
    # point within 2 is 2 -> fit; from 2 nothing lies within 3, so the next point, 5; from 5
    # no point lies past 6, and the routine then steps to the second-last point, 5.5 (its
    # search ends on the last index), and from there to the last, 6.
    x = np.array([0, 0.5, 1, 1, 2, 5, 5.5, 6.0])
    y = np.arange(x.size, dtype=float)
    xs, _ = loess(x, y, span=0.9, delta=1.0)
    assert list(xs) == [0.0, 1.0, 2.0, 5.0, 5.5, 6.0]
    with pytest.raises(FigkitError, match="delta"):
        loess(x, y, delta=-1.0)


def test_loess_many_ties_at_one_x():
    # Hand-computed from the definition: with q = floor(0.5 * 6) = 3 and four points at
    # x = 0, h(0) = 0; the value there is the mean of the tied y (our documented rule),
    # (1 + 2 + 3 + 4) / 4 = 2.5.  At x = 2 the nearest three are x = 2, 1, 0 (h = 2):
    # tricube weights 1, (1 - 1/8)^3 and 0 fit the line through (1, 5), (2, 6).
    xs, ys = loess([0, 0, 0, 0, 1, 2], [1, 2, 3, 4, 5, 6], span=0.5)
    assert list(xs) == [0.0, 1.0, 2.0]
    assert ys[0] == pytest.approx(2.5) and ys[2] == pytest.approx(6.0)


def test_loess_degree2_reproduces_quadratic_and_matches_weighted_polyfit():
    # Local quadratic fitting reproduces any quadratic exactly (Cleveland & Devlin 1988).
    rng = np.random.default_rng(8)
    x = rng.uniform(-3, 3, 80)
    quad = 1.0 + 2.0 * x - 0.7 * x ** 2
    grid = np.linspace(-3, 3, 13)
    got = loess_at(x, quad, grid, span=0.25, degree=2)
    assert got == pytest.approx(1.0 + 2.0 * grid - 0.7 * grid ** 2, abs=1e-9)
    # Independent evaluation from the definition: weighted least-squares quadratic with
    # tricube weights over the q = floor(span n) nearest neighbours (numpy polyfit).
    y = np.cos(x) + rng.normal(0, 0.2, x.size)
    span = 0.4
    q = int(np.floor(span * x.size))
    for x0 in (-2.9, -0.3, 1.7):
        d = np.abs(x - x0)
        h = np.sort(d)[q - 1]
        w = np.clip(1 - (d / h) ** 3, 0, None) ** 3
        coef = np.polyfit(x - x0, y, 2, w=np.sqrt(w))
        assert loess_at(x, y, [x0], span=span, degree=2)[0] == pytest.approx(
            coef[-1], rel=1e-9, abs=1e-9)


def test_loess_bounded_evaluation_at_1e5_points():
    # 1e5 points: at most n_eval local fits, interpolated linearly in between.  The
    # interpolation error against exact evaluation must be small against the noise
    # (standard deviation about 0.3 here); the tolerance is common practice.
    rng = np.random.default_rng(12)
    n = 100_000
    x = rng.uniform(0, 10, n)
    y = np.sin(x) + rng.normal(0, 0.3, n)
    xs, ys = loess(x, y, span=0.1)
    assert xs.size <= 200 and xs[0] == x.min() and xs[-1] == x.max()
    check = np.array([0.05, 2.5, 4.71, 7.3, 9.95])
    exact = loess_at(x, y, check, span=0.1)
    assert np.abs(np.interp(check, xs, ys) - exact).max() < 3e-3
    # A given grid is evaluated exactly.
    gx, gy = loess(x, y, span=0.1, grid=check)
    assert gy == pytest.approx(exact, rel=1e-12, abs=1e-12)
    # Robustness residuals from the interpolated fit: close to exact residuals
    # (smaller n so that exact residuals, O(n q), stay cheap).
    x2, y2 = x[:20_000], y[:20_000]
    approx = loess(x2, y2, span=0.05, iterations=1, grid=check)[1]
    exact2 = loess_at(x2, y2, check, span=0.05, iterations=1)
    assert np.abs(approx - exact2).max() < 3e-3


def test_loess_input_errors():
    x, y = _smooth_data(30, seed=2)
    with pytest.raises(FigkitError, match="span"):
        loess(x, y, span=0)
    with pytest.raises(FigkitError, match="degree"):
        loess(x, y, degree=3)
    with pytest.raises(FigkitError, match="distinct"):
        loess([1, 1, 2, 2], [1, 2, 3, 4], degree=2)


# -------------------------------------------------------------------- kernel density
def test_kde_scott_matches_scipy_gaussian_kde():
    # Reference: scipy.stats.gaussian_kde(bw_method='scott'), Scott (1992) factor.
    rng = np.random.default_rng(21)
    x = np.concatenate([rng.normal(0, 1, 300), rng.normal(4, 0.5, 150)])
    grid = np.linspace(-4, 7, 301)
    ref = scipy.stats.gaussian_kde(x, bw_method="scott")
    assert kde_bandwidth(x, "scott") == pytest.approx(
        np.sqrt(ref.covariance[0, 0]), rel=1e-12)
    assert kde(x, grid, "scott") == pytest.approx(ref(grid), rel=1e-10, abs=1e-14)


def test_kde_silverman_rule_of_thumb():
    # Silverman (1986), eq. (3.31): h = 0.9 min(sigma, IQR/1.34) n^(-1/5), computed here
    # independently from numpy's std and type 7 quartiles.
    rng = np.random.default_rng(22)
    heavy = rng.standard_t(2, 500)               # IQR/1.34 < sigma: the IQR branch
    q1, q3 = np.percentile(heavy, [25, 75])
    sigma = np.std(heavy, ddof=1)
    assert (q3 - q1) / 1.34 < sigma
    expect = 0.9 * (q3 - q1) / 1.34 * 500 ** -0.2
    assert kde_bandwidth(heavy, "silverman") == pytest.approx(expect, rel=1e-12)
    # statsmodels' bw_silverman divides the IQR by 1.349 instead of 1.34: on the IQR
    # branch the two differ by exactly that ratio, on the sigma branch they agree.
    assert kde_bandwidth(heavy, "silverman") == pytest.approx(
        bw_silverman(heavy) * 1.349 / 1.34, rel=1e-10)
    flat = rng.uniform(0, 1, 400)                # sigma < IQR/1.349: the sigma branch
    assert kde_bandwidth(flat, "silverman") == pytest.approx(bw_silverman(flat), rel=1e-12)
    # scipy's 'silverman' is a different formula (see kde_bandwidth's docstring).
    scipy_h = np.sqrt(scipy.stats.gaussian_kde(flat, bw_method="silverman").covariance[0, 0])
    assert abs(kde_bandwidth(flat, "silverman") / scipy_h - 1) > 0.1


def test_kde_binned_path_close_to_exact_and_integrates_to_one():
    rng = np.random.default_rng(23)
    x = np.concatenate([rng.normal(0, 1, 40_000), rng.exponential(2, 20_000) + 3])
    grid = np.linspace(-6, 25, 400)
    h = kde_bandwidth(x, "silverman")
    binned = kde(x, grid, h)                     # auto: n large -> linear binning
    exact = kde(x, grid, h, exact=True)
    # Linear binning error is O((bin width / h)^2) (Wand 1994); with width <= h/32 the
    # tolerance below is common practice for drawing.
    assert np.abs(binned - exact).max() < 1e-4 * exact.max()
    # A density integrates to 1 (trapezoid rule over a grid covering the support).
    assert np.trapezoid(exact, grid) == pytest.approx(1.0, abs=1e-3)


def test_kde_bandwidth_errors():
    with pytest.raises(FigkitError, match="bandwidth"):
        kde_bandwidth([1, 2, 3], "wide")
    with pytest.raises(FigkitError, match="bandwidth"):
        kde_bandwidth([1, 2, 3], -1.0)
    with pytest.raises(FigkitError, match="equal"):
        kde_bandwidth([2, 2, 2], "scott")


# ------------------------------------------------------------------------- box plot
def test_quartiles_hand_computed_from_hyndman_fan():
    # Hyndman & Fan (1996), The American Statistician 50(4):361-365, definitions:
    # type 7: Q(p) = x_(j) + g (x_(j+1) - x_(j)), j + g = 1 + (n - 1) p;
    # type 6: the same with j + g = (n + 1) p.  Hand-computed for n = 10.
    data = [9, -10, 2, 30, 3, 4, 5, 6, 7, 8]     # sorted: -10, 2, 3, ..., 9, 30
    b7 = box_stats(data)
    assert b7.method == "linear"
    assert (b7.q1, b7.median, b7.q3) == pytest.approx((3.25, 5.5, 7.75))  # j+g 3.25, 7.75
    b6 = box_stats(data, method="weibull")
    assert (b6.q1, b6.median, b6.q3) == pytest.approx((2.75, 5.5, 8.25))  # j+g 2.75, 8.25


@pytest.mark.parametrize("method", QUANTILE_METHODS)
def test_quartiles_follow_numpy_hyndman_fan_methods(method):
    # numpy's percentile methods are named after Hyndman & Fan's nine types.
    x = np.random.default_rng(31).normal(size=37)
    b = box_stats(x, method=method)
    assert (b.q1, b.median, b.q3) == pytest.approx(
        tuple(np.percentile(x, [25, 50, 75], method=method)), rel=1e-14)


def test_whiskers_and_outliers_hand_computed_from_tukey():
    # Hand-computed from Tukey's (1977) definition: fences 1.5 IQR beyond the quartiles,
    # whiskers to the most extreme data inside the fences, the rest outliers.
    b = box_stats([9, -10, 2, 30, 3, 4, 5, 6, 7, 8])
    # IQR = 7.75 - 3.25 = 4.5, fences -3.5 and 14.5.
    assert b.iqr == pytest.approx(4.5)
    assert (b.whisker_low, b.whisker_high) == (2.0, 9.0)
    assert list(b.outliers) == [-10.0, 30.0]
    assert b.n == 10
    # A point exactly on a fence is inside: n = 9, type 7 quartiles x_(3) = 4 and
    # x_(7) = 6, IQR 2, fences 1 and 9.
    b = box_stats([-2, 3, 4, 4.5, 5, 5.5, 6, 7, 9])
    assert (b.q1, b.q3) == (4.0, 6.0)
    assert (b.whisker_low, b.whisker_high) == (3.0, 9.0)
    assert list(b.outliers) == [-2.0]
    # whisker = 3 (Tukey's "far out" fences): -2 is inside 4 - 6 = -2.
    assert list(box_stats([-2, 3, 4, 4.5, 5, 5.5, 6, 7, 9], whisker=3).outliers) == []


def test_box_stats_errors():
    with pytest.raises(FigkitError, match="quantile method"):
        box_stats([1, 2, 3], method="tukey")
    with pytest.raises(FigkitError, match="no values"):
        box_stats([np.nan])


# ------------------------------------------------------------------------ histogram
@pytest.mark.parametrize("rule", ["fd", "sturges"])
def test_bin_edges_match_numpy(rule):
    # Reference: numpy.histogram_bin_edges (Freedman & Diaconis 1981; Sturges 1926).
    rng = np.random.default_rng(41)
    pooled = np.concatenate([rng.normal(0, 1, 700), rng.gamma(2, 1, 300)])
    assert bin_edges(pooled, rule) == pytest.approx(np.histogram_bin_edges(pooled, rule))
    rng_ = (-5.0, 12.0)
    assert bin_edges(pooled, rule, range=rng_) == pytest.approx(
        np.histogram_bin_edges(pooled, rule, range=rng_))
    ints = rng.integers(0, 6, 5000)              # integer data keep width >= 1
    assert bin_edges(ints, rule) == pytest.approx(np.histogram_bin_edges(ints, rule))


def test_bin_edges_sturges_count_and_zero_iqr_fallback():
    # Sturges (1926): k = ceil(log2 n) + 1 bins, e.g. n = 100 -> 8.
    x = np.random.default_rng(42).normal(size=100)
    assert bin_edges(x, "sturges").size - 1 == 8
    # Over half the values tied: IQR = 0, FD has no width; documented fallback to
    # Sturges (numpy gives one bin here).
    tied = np.r_[np.zeros(80), np.linspace(1, 5, 20)]
    assert np.histogram_bin_edges(tied, "fd").size == 2
    assert bin_edges(tied, "fd") == pytest.approx(np.histogram_bin_edges(tied, "sturges"))
    # Explicit edges pass through; bad edges are refused.
    assert list(bin_edges(x, [0, 1, 3])) == [0.0, 1.0, 3.0]
    with pytest.raises(FigkitError, match="increasing"):
        bin_edges(x, [0, 2, 1])
    with pytest.raises(FigkitError, match="binning rule"):
        bin_edges(x, "square-root-ish")


# ---------------------------------------------------------------------- proportions
@pytest.mark.parametrize("level", [0.95, 0.90])
def test_wilson_interval_matches_statsmodels(level):
    # Reference: statsmodels proportion_confint(method='wilson'), Wilson (1927).
    k = np.array([0, 1, 5, 17, 50, 99, 100])
    n = np.array([10, 10, 40, 30, 100, 100, 100])
    lo, hi = wilson_interval(k, n, level=level)
    ref_lo, ref_hi = proportion_confint(k, n, alpha=1 - level, method="wilson")
    assert lo == pytest.approx(ref_lo, rel=1e-12, abs=1e-15)
    assert hi == pytest.approx(ref_hi, rel=1e-12, abs=1e-15)
    one = wilson_interval(3, 12, level=level)
    assert one == pytest.approx(proportion_confint(3, 12, alpha=1 - level, method="wilson"))
    with pytest.raises(FigkitError, match="successes"):
        wilson_interval(5, 3)


def test_shares_rows_sum_to_one_and_zero_rows_safe():
    table = np.array([[1, 3, 0], [0, 0, 0], [2, 2, 4]])
    s = shares(table)
    assert s[0] == pytest.approx([0.25, 0.75, 0.0])
    assert list(s[1]) == [0.0, 0.0, 0.0]
    assert s[2].sum() == pytest.approx(1.0)
    with pytest.raises(FigkitError, match=">= 0"):
        shares([1, -1])


# ---------------------------------------------------------------------- palmerpenguins
@pytest.fixture(scope="module")
def penguins():
    from palmerpenguins import load_penguins
    return load_penguins()


def test_penguin_counts_and_shares(penguins):
    # Gorman, Williams & Fraser (2014), PLOS ONE 9(3):e90081: 344 penguins, Adelie 152,
    # Gentoo 124, Chinstrap 68 (counts from memory; the data ship with palmerpenguins).
    counts = penguins["species"].value_counts()
    assert counts.to_dict() == {"Adelie": 152, "Gentoo": 124, "Chinstrap": 68}
    s = shares(counts.to_numpy())
    assert s == pytest.approx(np.array([152, 124, 68]) / 344)
    lo, hi = wilson_interval(counts.to_numpy(), 344)
    assert np.all((lo < s) & (s < hi))


def test_penguin_per_species_summaries_match_pandas(penguins):
    # Reference: pandas groupby on the same rows.
    d = penguins.dropna(subset=["bill_length_mm", "flipper_length_mm"])
    g = d.groupby("species")["bill_length_mm"]
    for species, part in d.groupby("species"):
        fit = fit_line(part["flipper_length_mm"], part["bill_length_mm"])
        assert fit.n == g.count()[species]
        assert fit.y_mean == pytest.approx(g.mean()[species], rel=1e-12)
        box = box_stats(penguins.loc[penguins.species == species, "bill_length_mm"])
        assert box.n == g.count()[species]                  # NaN dropped
        assert box.median == pytest.approx(g.median()[species], rel=1e-12)
        assert box.q1 == pytest.approx(g.quantile(0.25)[species], rel=1e-12)
        assert box.q3 == pytest.approx(g.quantile(0.75)[species], rel=1e-12)


def test_penguin_bill_slopes_by_species(penguins):
    # Real-data ANCOVA checked against statsmodels.  Bill depth falls with bill length
    # across all penguins but rises within each species (a Simpson's-paradox pattern
    # often shown with these data; from memory).
    d = penguins.dropna(subset=["bill_length_mm", "bill_depth_mm"])
    res = strata_slope_test(d.bill_length_mm, d.bill_depth_mm, d.species)
    assert res.n == 342 and res.n_strata == 3
    _check_against_anova(d, res, y="bill_depth_mm", x="bill_length_mm", s="species")
    assert res.crude_slope < 0 < res.pooled_slope
