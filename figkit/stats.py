"""Statistics stage: the numbers behind fitted lines, smooths, densities, boxes and bins.

Every function here is pure (arrays in, numbers out) and uses numpy, with scipy only
for the t, F and normal quantiles.  Nothing builds an n x n matrix, so a panel with
1e5 points costs memory proportional to n.

Missing values (NaN) are dropped before any computation (pairwise for x/y inputs) and
``n`` in the results counts what was used; infinite values are a user mistake and raise
:class:`~figkit.errors.FigkitError`.

Sources are named in each docstring; the equations follow them.
"""
from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
import pandas as pd
from scipy import special as _special   # scipy.stats costs ~0.6 s of import per figure job

from figkit.errors import FigkitError

__all__ = [
    "LineFit", "LineSums", "fit_line", "line_band",
    "loess", "loess_at",
    "kde_bandwidth", "kde",
    "BoxStats", "box_stats", "QUANTILE_METHODS",
    "bin_edges",
    "wilson_interval", "shares",
    "StrataTest", "strata_slope_test",
]

# Elements per temporary block (window matrices, kernel sums): about 16 MB of float64.
_BLOCK = 2_000_000


# ----------------------------------------------------------------------------- helpers
def _vector(values, field: str) -> np.ndarray:
    """1-D float array; NaN kept (callers drop it), inf refused."""
    try:
        arr = np.asarray(values, dtype=float)
    except (TypeError, ValueError):
        raise FigkitError("values must be numbers", field=field) from None
    if arr.ndim == 0:
        arr = arr.reshape(1)
    if arr.ndim != 1:
        raise FigkitError(f"values must be one-dimensional, got shape {arr.shape}", field=field)
    if np.isinf(arr).any():
        raise FigkitError("values must be finite (infinite value found)", field=field)
    return arr


def _pair(x, y) -> tuple[np.ndarray, np.ndarray]:
    """x, y as float vectors of equal length with rows holding any NaN dropped."""
    x, y = _vector(x, "x"), _vector(y, "y")
    if x.shape != y.shape:
        raise FigkitError(f"x and y must have the same length ({x.size} vs {y.size})",
                          field="y")
    keep = ~(np.isnan(x) | np.isnan(y))
    return x[keep], y[keep]


def _finite(values, field: str) -> np.ndarray:
    arr = _vector(values, field)
    return arr[~np.isnan(arr)]


def _check_level(level: float) -> float:
    if not isinstance(level, (int, float, np.floating)) or not 0.0 < float(level) < 1.0:
        raise FigkitError("confidence level must be a number strictly between 0 and 1",
                          field="level", value=level)
    return float(level)


def _t_quantile(level: float, df: int) -> float:
    """Two-sided Student t critical value t_{(1+level)/2, df}."""
    return float(_special.stdtrit(df, 0.5 + level / 2.0))   # inverse of Student's t CDF


# ----------------------------------------------------------------------- straight line
@dataclass(frozen=True)
class LineFit:
    """Ordinary least-squares line y = intercept + slope * x with t confidence limits.

    ``sxx`` = sum (x - x_mean)^2, ``rss`` = residual sum of squares, ``df`` = n - 2,
    ``level`` = confidence level of the ``*_ci_*`` limits, ``r`` = Pearson correlation
    (NaN when y is constant).
    """
    n: int
    slope: float
    intercept: float
    slope_ci_low: float
    slope_ci_high: float
    intercept_ci_low: float
    intercept_ci_high: float
    r: float
    x_mean: float
    y_mean: float
    sxx: float
    rss: float
    df: int
    level: float

    @property
    def sigma(self) -> float:
        """Residual standard error s = sqrt(rss / (n - 2))."""
        return math.sqrt(self.rss / self.df)


@dataclass(frozen=True)
class LineSums:
    """One-pass sufficient statistics of (x, y) for a straight-line fit, mergeable.

    Holds the count, the means and the *centred* second moments
    ``sxx = sum (x - x_mean)^2``, ``syy = sum (y - y_mean)^2``,
    ``sxy = sum (x - x_mean)(y - y_mean)``, so that no large raw sums are subtracted
    (the raw-sum formula Sxx = sum x^2 - (sum x)^2 / n loses precision when the mean is
    large against the spread).  Chunks are combined with the pairwise update of
    Chan, Golub & LeVeque (1979), "Updating formulae and a pairwise algorithm for
    computing sample variances", Stanford report STAN-CS-79-773:

        n = n_a + n_b,  d_x = xbar_b - xbar_a,  d_y = ybar_b - ybar_a,
        xbar = xbar_a + d_x * n_b / n,
        Sxy = Sxy_a + Sxy_b + d_x * d_y * n_a * n_b / n   (likewise Sxx, Syy).

    Objects are immutable: ``add`` and ``merge`` return a new ``LineSums``::

        sums = LineSums()
        for xs, ys in chunks:
            sums = sums.add(xs, ys)
        fit = sums.fit(0.95)
    """
    n: int = 0
    x_mean: float = 0.0
    y_mean: float = 0.0
    sxx: float = 0.0
    syy: float = 0.0
    sxy: float = 0.0

    @property
    def sx(self) -> float:
        """Raw sum of x (n * x_mean)."""
        return self.n * self.x_mean

    @property
    def sy(self) -> float:
        """Raw sum of y (n * y_mean)."""
        return self.n * self.y_mean

    @staticmethod
    def of(x, y) -> "LineSums":
        """Sums of one chunk by two passes (means first, then centred moments)."""
        x, y = _pair(x, y)
        n = x.size
        if n == 0:
            return LineSums()
        xm, ym = float(x.mean()), float(y.mean())
        dx, dy = x - xm, y - ym
        # einsum, not @: a dot product through BLAS threads is erratic on a busy 2-core machine
        return LineSums(n, xm, ym, float(np.einsum("i,i->", dx, dx)),
                        float(np.einsum("i,i->", dy, dy)), float(np.einsum("i,i->", dx, dy)))

    def add(self, x, y) -> "LineSums":
        """These sums combined with the chunk (x, y); NaN pairs are skipped."""
        return self.merge(LineSums.of(x, y))

    def merge(self, other: "LineSums") -> "LineSums":
        """Pairwise combination (Chan, Golub & LeVeque 1979), see the class docstring."""
        if other.n == 0:
            return self
        if self.n == 0:
            return other
        n = self.n + other.n
        dx, dy = other.x_mean - self.x_mean, other.y_mean - self.y_mean
        f = self.n * other.n / n
        return LineSums(
            n,
            self.x_mean + dx * other.n / n,
            self.y_mean + dy * other.n / n,
            self.sxx + other.sxx + dx * dx * f,
            self.syy + other.syy + dy * dy * f,
            self.sxy + other.sxy + dx * dy * f,
        )

    def fit(self, level: float = 0.95) -> LineFit:
        """OLS line and t confidence limits from the sums alone.

        slope b = Sxy / Sxx,  intercept a = ybar - b xbar,  RSS = Syy - b Sxy,
        s^2 = RSS / (n - 2),  se(b) = s / sqrt(Sxx),  se(a) = s sqrt(1/n + xbar^2 / Sxx),
        limits estimate +- t_{(1+level)/2, n-2} se  (any regression text, e.g. Draper &
        Smith (1998), Applied Regression Analysis, 3rd ed.),
        r = Sxy / sqrt(Sxx Syy).
        """
        level = _check_level(level)
        if self.n < 3:
            raise FigkitError("a straight-line fit needs at least 3 points", field="x",
                              value=self.n)
        # Sxx is a sum of squares of deviations: relative to x's own size it is zero
        # exactly when x is constant (up to rounding).
        scale = max(abs(self.x_mean), 1.0)
        if not self.sxx > (1e-13 * scale) ** 2 * self.n:
            raise FigkitError("x is constant, so no line can be fitted", field="x")
        b = self.sxy / self.sxx
        a = self.y_mean - b * self.x_mean
        rss = max(self.syy - b * self.sxy, 0.0)
        df = self.n - 2
        s = math.sqrt(rss / df)
        t = _t_quantile(level, df)
        se_b = s / math.sqrt(self.sxx)
        se_a = s * math.sqrt(1.0 / self.n + self.x_mean ** 2 / self.sxx)
        r = self.sxy / math.sqrt(self.sxx * self.syy) if self.syy > 0 else float("nan")
        return LineFit(n=self.n, slope=b, intercept=a,
                       slope_ci_low=b - t * se_b, slope_ci_high=b + t * se_b,
                       intercept_ci_low=a - t * se_a, intercept_ci_high=a + t * se_a,
                       r=r, x_mean=self.x_mean, y_mean=self.y_mean, sxx=self.sxx,
                       rss=rss, df=df, level=level)


def fit_line(x, y, level: float = 0.95) -> LineFit:
    """Ordinary least-squares straight line with ``level`` confidence limits.

    Same equations as :meth:`LineSums.fit` (t quantile with n - 2 degrees of freedom).
    Needs at least 3 complete (x, y) pairs and x not constant.
    """
    return LineSums.of(x, y).fit(level)


def line_band(fit: LineFit, grid, level: float | None = None):
    """Confidence band of the mean response along ``grid``: ``(yhat, lo, hi)``.

        yhat(x0) = a + b x0,
        se(x0)   = s sqrt(1/n + (x0 - xbar)^2 / Sxx),   s^2 = RSS / (n - 2),
        lo, hi   = yhat -+ t_{(1+level)/2, n-2} se(x0)

    (pointwise band for E[y | x0]; any regression text, e.g. Draper & Smith 1998).  ``level``
    defaults to the fit's own level.
    """
    level = fit.level if level is None else _check_level(level)
    g = _vector(grid, "grid")
    yhat = fit.intercept + fit.slope * g
    se = fit.sigma * np.sqrt(1.0 / fit.n + (g - fit.x_mean) ** 2 / fit.sxx)
    half = _t_quantile(level, fit.df) * se
    return yhat, yhat - half, yhat + half


# ------------------------------------------------------------------------------ LOESS
def _loess_q(span: float, n: int, degree: int) -> int:
    """Neighbourhood size q = floor(span * n), at least degree + 1 and at most n.

    Truncation as in Cleveland's (1979) lowess routine and statsmodels' lowess
    (``int(frac * n)``); the tiny offset keeps e.g. 0.3 * 10 from rounding down to 2.
    """
    return int(min(n, max(degree + 1, math.floor(span * n + 1e-9))))


def _check_loess_args(span, degree, iterations):
    if not isinstance(span, (int, float, np.floating)) or not 0.0 < float(span) <= 1.0:
        raise FigkitError("LOESS span must be a fraction in (0, 1]", field="span",
                          value=span)
    if degree not in (1, 2) or isinstance(degree, bool):
        raise FigkitError("LOESS degree must be 1 or 2", field="degree", value=degree,
                          allowed=(1, 2))
    if (not isinstance(iterations, (int, np.integer)) or isinstance(iterations, bool)
            or iterations < 0):
        raise FigkitError("LOESS robustness iterations must be a whole number >= 0",
                          field="iterations", value=iterations)


def _tie_mean(y: np.ndarray, rw: np.ndarray) -> float:
    sw = rw.sum()
    return float((rw @ y) / sw) if sw > 0 else float(y.mean())


def _rowsum(a: np.ndarray, b: np.ndarray) -> np.ndarray:
    """Row sums of a * b without the temporary product."""
    return np.einsum("ij,ij->i", a, b)


def _local_fit(xs: np.ndarray, ys: np.ndarray, rw: np.ndarray, x0: np.ndarray,
               q: int, degree: int) -> np.ndarray:
    """Local weighted polynomial fits at points x0 over sorted data (xs, ys).

    For each x0 the q nearest neighbours in x form a contiguous window [lo, lo + q) of
    the sorted data; lo is the first index with x0 <= (xs[lo] + xs[lo+q]) / 2, a
    non-decreasing sequence, so one ``searchsorted`` finds every window.  The radius h
    is the distance to the q-th nearest neighbour; points outside the window are at
    least h away and get tricube weight 0, so ties in x need no special care
    (except h = 0, handled as a mean of the tied points).
    Memory is (block of x0) x q, never n x n.
    """
    n = xs.size
    x0 = np.asarray(x0, dtype=float)
    out = np.empty(x0.size)
    if q < n:
        mids = 0.5 * (xs[:-q] + xs[q:])
        starts = np.minimum(np.searchsorted(mids, x0, side="left"), n - q)
    else:
        starts = np.zeros(x0.size, dtype=np.intp)
    xwin = np.lib.stride_tricks.sliding_window_view(xs, q)
    ywin = np.lib.stride_tricks.sliding_window_view(ys, q)
    rwin = np.lib.stride_tricks.sliding_window_view(rw, q)
    robust = not np.all(rw == 1.0)      # first pass: skip multiplying by ones
    block = max(1, _BLOCK // q)
    for b0 in range(0, x0.size, block):
        st = starts[b0:b0 + block]
        c = x0[b0:b0 + block]
        h = np.maximum(c - xs[st], xs[st + q - 1] - c)
        # Signed distance in units of h: |v| < 1 inside the neighbourhood.
        scale = np.where(h > 0, h, 1.0)[:, None]
        v = xwin[st] - c[:, None]
        v /= scale
        wy = ywin[st]
        w = np.abs(v)
        # q or more points tied at x0 (h = 0): the neighbourhood is those points
        # (the value is replaced by their mean below).
        w[(h <= 0)[:, None] & (w > 0)] = 1.0
        w **= 3
        np.subtract(1.0, w, out=w)
        np.clip(w, 0.0, None, out=w)
        w **= 3
        tri = w.copy() if robust else None
        if tri is not None:
            w *= rwin[st]
        sw = w.sum(axis=1)
        # All weights zero: robustness weights removed the whole window (fall back to
        # the distance weights), or every neighbour sits exactly at distance h, e.g.
        # midway between two points with q = 2 (fall back to equal weights).
        empty = ~(sw > 0)
        if empty.any():
            w[empty] = tri[empty] if tri is not None else 0.0
            still = empty & ~(w.sum(axis=1) > 0)
            w[still] = 1.0
            sw[empty] = w[empty].sum(axis=1)
        # Centre on the weighted mean of v (two passes: well-conditioned sums).
        vbar = _rowsum(w, v) / sw
        yw = _rowsum(w, wy) / sw
        v -= vbar[:, None]
        v0 = -vbar                      # x0 itself in centred units
        wv = w * v
        svv = _rowsum(wv, v)
        svy = _rowsum(wv, wy)            # = sum w v (y - yw), as sum w v = 0
        flat = ~(svv > 1e-12 * sw)      # fewer than two distinct x carry weight
        slope = np.where(flat, 0.0, svy / np.where(flat, 1.0, svv))
        fit = yw + v0 * slope
        if degree == 2:
            # Normal equations in (1, v, v^2) for y - yw; pinv copes with only two
            # distinct x in the neighbourhood.
            wv2 = wv * v
            m = np.empty((c.size, 3, 3))
            m[:, 0, 0] = sw
            m[:, 0, 1] = m[:, 1, 0] = wv.sum(axis=1)
            m[:, 0, 2] = m[:, 2, 0] = m[:, 1, 1] = svv
            m[:, 1, 2] = m[:, 2, 1] = _rowsum(wv2, v)
            m[:, 2, 2] = _rowsum(wv2, v * v)
            rhs = np.stack([sw * 0.0, svy, _rowsum(wv2, wy) - yw * svv], axis=1)
            coef = np.einsum("bij,bj->bi", np.linalg.pinv(m, rcond=1e-12), rhs)
            fit = yw + coef[:, 0] + coef[:, 1] * v0 + coef[:, 2] * v0 * v0
        zero_h = h <= 0
        if zero_h.any():
            # q or more points tied at x0: the fit is the (robustness-weighted) mean of
            # all of them, including tied points the window of q did not hold.
            cz = c[zero_h]
            a, b = np.searchsorted(xs, cz, "left"), np.searchsorted(xs, cz, "right")
            fit[zero_h] = [_tie_mean(ys[i:j], rw[i:j]) for i, j in zip(a, b)]
        out[b0:b0 + block] = fit
    return out


def _bisquare_weights(resid: np.ndarray) -> np.ndarray | None:
    """Robustness weights B(r / 6M), B(u) = (1 - u^2)^2 for |u| < 1, M = median |r|.

    Cleveland (1979), robustness step.  Returns None when M = 0 (more than half the
    points are fitted exactly): the weights would be undefined, so iteration stops.
    """
    a = np.abs(resid)
    m = float(np.median(a))
    if not m > 0:
        return None
    u = np.minimum(a / (6.0 * m), 1.0)
    return (1.0 - u * u) ** 2


def _loess_vertices(xs: np.ndarray, n_eval: int) -> np.ndarray:
    """At most n_eval evaluation points: half spaced evenly in x, half at evenly
    spaced ranks, so neither dense nor sparse stretches go unsampled; includes both ends."""
    half = max(2, n_eval // 2)
    even_x = np.linspace(xs[0], xs[-1], half)
    even_rank = xs[np.linspace(0, xs.size - 1, n_eval - half).round().astype(np.intp)]
    return np.unique(np.concatenate([even_x, even_rank, xs[[0, -1]]]))


def _sorted_data(x, y, degree):
    x, y = _pair(x, y)
    order = np.argsort(x, kind="stable")
    xs, ys = x[order], y[order]
    if np.unique(xs).size <= degree:
        raise FigkitError(f"LOESS of degree {degree} needs at least {degree + 1} distinct "
                          "x values", field="x", value=int(np.unique(xs).size))
    # Remove a common offset from y so that local sums do not carry it.
    shift = float(np.median(ys))
    return xs, ys - shift, shift


def loess_at(x, y, x_eval, *, span: float = 0.75, degree: int = 1,
             iterations: int = 0) -> np.ndarray:
    """LOESS evaluated exactly at ``x_eval`` (every local fit computed, no interpolation).

    Cleveland (1979), JASA 74:829-836; Cleveland & Devlin (1988), JASA 83:596-610.
    At x0 with neighbourhood radius h(x0) = distance to the q-th nearest x,
    q = floor(span * n):

        w_i(x0) = T(|x_i - x0| / h(x0)) * delta_i,   T(u) = (1 - u^3)^3 for u < 1, else 0,

    and the fitted value is that of the weighted least-squares polynomial of degree 1
    or 2 at x0.  delta_i = 1 on the first pass; each robustness iteration sets
    delta_i = B(e_i / 6M) with residuals e_i at every data point and
    B(u) = (1 - u^2)^2 (|u| < 1), M = median |e_i|.  The residuals are exact here, so
    the cost is O(n q) per iteration: use :func:`loess` for large n.

    Ties in x need no rule except one: when q or more points share x0, h(x0) = 0 and
    the value is the (robustness-weighted) mean of their y.
    """
    _check_loess_args(span, degree, iterations)
    xs, ys, shift = _sorted_data(x, y, degree)
    x_eval = _vector(x_eval, "x_eval")
    q = _loess_q(span, xs.size, degree)
    rw = np.ones(xs.size)
    for _ in range(iterations):
        new = _bisquare_weights(ys - _local_fit(xs, ys, rw, xs, q, degree))
        if new is None:
            break
        rw = new
    return _local_fit(xs, ys, rw, x_eval, q, degree) + shift


def _delta_vertices(xs: np.ndarray, delta: float) -> np.ndarray:
    """Indices of the sorted x where Cleveland's (1979) lowess computes a local fit when fits
    closer than ``delta`` are skipped: the first point; then, from the last point fitted (and
    the points tied with it), the last point within ``delta`` of it, or the next point when
    none is (one step forward at least); ending at the last point.  Every point in between is
    linearly interpolated.  This is the rule of Cleveland's routine as statsmodels' ``lowess``
    keeps it (``update_indices`` in statsmodels/nonparametric/_smoothers_lowess.pyx)."""
    n = xs.size
    out = [0]
    i = 0
    while True:
        last = i
        cut = xs[last] + delta
        # The first point past the cut-off (the last point when none is past it); the points
        # tied with x[last] share its fit.
        k = int(np.searchsorted(xs, cut, side="right"))
        k = min(k, n - 1) if k < n else n - 1
        last = int(np.searchsorted(xs, xs[last], side="right")) - 1
        if last >= n - 1:
            break
        i = max(k - 1, last + 1)
        out.append(i)
    return np.asarray(out, dtype=np.intp)


def loess(x, y, *, span: float = 0.75, degree: int = 1, iterations: int = 0,
          n_eval: int | None = None, grid=None, delta: float | None = None
          ) -> tuple[np.ndarray, np.ndarray]:
    """LOESS smooth for drawing: ``(xs, ys)`` sorted by xs.

    The method of :func:`loess_at` (Cleveland 1979; Cleveland & Devlin 1988), with the
    bounded-cost evaluation used by the original routines: the local fit is computed
    at most at ``n_eval`` vertices (default 200) spread over the data and, where the
    robustness iterations need fitted values at every data point, these are linearly
    interpolated between vertices (Cleveland's 1979 lowess skips fits closer than
    ``delta`` in the same way).  When the data have at most ``n_eval`` distinct x, the
    fit is computed at every distinct x and nothing is interpolated.

    ``delta`` (instead of ``n_eval``): the vertices are the data points Cleveland's lowess
    fits at when it skips fits closer than ``delta`` in x (:func:`_delta_vertices`), so the
    curve, interpolated linearly at the data, is statsmodels' ``lowess(..., delta=delta)``.

    Output points: ``grid`` if given (evaluated exactly, with the final robustness
    weights), else the vertices (or every distinct x).
    """
    _check_loess_args(span, degree, iterations)
    if n_eval is None:
        n_eval = 200
    if not isinstance(n_eval, (int, np.integer)) or isinstance(n_eval, bool) or n_eval < 4:
        raise FigkitError("number of LOESS evaluation points must be a whole number >= 4",
                          field="n_eval", value=n_eval)
    if delta is not None and (isinstance(delta, bool) or not isinstance(delta, (int, float, np.number))
                              or not math.isfinite(delta) or delta < 0):
        raise FigkitError("LOESS delta must be a number >= 0", field="delta", value=delta)
    xs, ys, shift = _sorted_data(x, y, degree)
    q = _loess_q(span, xs.size, degree)
    if delta is not None:
        verts = xs[_delta_vertices(xs, float(delta))]
    else:
        distinct = np.unique(xs)
        verts = distinct if distinct.size <= n_eval else _loess_vertices(xs, int(n_eval))
    rw = np.ones(xs.size)
    for _ in range(iterations):
        at_verts = _local_fit(xs, ys, rw, verts, q, degree)
        new = _bisquare_weights(ys - np.interp(xs, verts, at_verts))
        if new is None:
            break
        rw = new
    if grid is None:
        out_x = verts
    else:
        out_x = np.sort(_finite(grid, "grid"))
        if out_x.size == 0:
            raise FigkitError("evaluation grid is empty", field="grid")
    return out_x, _local_fit(xs, ys, rw, out_x, q, degree) + shift


# ---------------------------------------------------------------------- kernel density
_SQRT_2PI = math.sqrt(2.0 * math.pi)


def kde_bandwidth(x, rule: str | float = "scott") -> float:
    """Gaussian-kernel bandwidth (the kernel's standard deviation) for sample x.

    - ``"scott"``: h = sigma * n^(-1/5), sigma = sample standard deviation (ddof = 1);
      the normal reference rule sigma * n^(-1/(d+4)) of Scott (1992), Multivariate
      Density Estimation, ch. 6, with d = 1; this is scipy's ``gaussian_kde`` 'scott'
      factor n^(-1/(d+4)) times the data's standard deviation.
    - ``"silverman"``: h = 0.9 * min(sigma, IQR / 1.34) * n^(-1/5), the rule of thumb
      of Silverman (1986), Density Estimation for Statistics and Data Analysis,
      eq. (3.31); IQR from type 7 quartiles.  When IQR = 0, sigma alone is used.
      Note scipy's ``gaussian_kde(bw_method='silverman')`` is a different formula,
      factor (n (d + 2) / 4)^(-1/(d+4)) times sigma (= 1.06 sigma n^(-1/5) in 1-D), and
      some libraries divide the IQR by 1.349 rather than Silverman's 1.34.
    - a positive number: used as given.
    """
    if isinstance(rule, str):
        if rule not in ("scott", "silverman"):
            raise FigkitError("unknown bandwidth rule", field="bandwidth", value=rule,
                              allowed=("scott", "silverman", "a positive number"))
        v = _finite(x, "x")
        if v.size < 2:
            raise FigkitError("a bandwidth rule needs at least 2 values", field="x",
                              value=int(v.size))
        sigma = float(np.std(v, ddof=1))
        if not sigma > 0:
            raise FigkitError("all values are equal, so no density can be estimated",
                              field="x")
        if rule == "scott":
            return sigma * v.size ** (-0.2)
        q1, q3 = np.percentile(v, [25.0, 75.0])
        spread = min(sigma, (q3 - q1) / 1.34) if q3 > q1 else sigma
        return 0.9 * spread * v.size ** (-0.2)
    if (isinstance(rule, bool) or not isinstance(rule, (int, float, np.floating, np.integer))
            or not math.isfinite(rule) or rule <= 0):
        raise FigkitError("bandwidth must be 'scott', 'silverman' or a positive number",
                          field="bandwidth", value=rule)
    return float(rule)


def _gauss_sum(centres: np.ndarray, weights: np.ndarray | None, grid: np.ndarray,
               h: float) -> np.ndarray:
    """sum_i weight_i * phi((grid - centre_i) / h), in blocks of the grid."""
    out = np.empty(grid.size)
    block = max(1, _BLOCK // max(centres.size, 1))
    for b0 in range(0, grid.size, block):
        z = (grid[b0:b0 + block, None] - centres) / h
        k = np.exp(-0.5 * z * z)
        out[b0:b0 + block] = k.sum(axis=1) if weights is None else k @ weights
    return out / _SQRT_2PI


def kde(x, grid, bandwidth: str | float = "scott", *, exact: bool | None = None):
    """Gaussian kernel density estimate of sample x at the points ``grid``.

        f(g) = 1 / (n h) * sum_i phi((g - x_i) / h),   phi = standard normal density

    (Silverman 1986, sec. 2.4).  ``bandwidth`` is h or a rule for
    :func:`kde_bandwidth`.  ``exact=None`` sums over the data directly when n is at
    most the number of bins the binned path would use, else uses linear binning
    (Jones & Lotwick 1984, Applied Statistics 33:120-122; Wand 1994, JCGS 3:433-445):
    each x_i is split between its two neighbouring bin centres in proportion to
    closeness, with bin width at most h / 32 (at most 16384 bins), which keeps the
    relative error of order (width / h)^2.  Memory is bounded by blocks of the grid.
    """
    v = _finite(x, "x")
    if v.size == 0:
        raise FigkitError("no values to estimate a density from", field="x")
    g = _vector(grid, "grid")
    h = kde_bandwidth(v, bandwidth)
    lo, hi = float(v.min()), float(v.max())
    m = int(min(16384, max(1024, math.ceil(32.0 * (hi - lo) / h) + 1)))
    if exact is None:
        exact = v.size <= m or hi == lo
    if exact:
        return _gauss_sum(v, None, g, h) / (v.size * h)
    delta = (hi - lo) / (m - 1)
    t = (v - lo) / delta
    j = np.minimum(np.floor(t).astype(np.intp), m - 2)
    frac = t - j
    counts = (np.bincount(j, weights=1.0 - frac, minlength=m)
              + np.bincount(j + 1, weights=frac, minlength=m))
    centres = lo + delta * np.arange(m)
    used = counts > 0
    return _gauss_sum(centres[used], counts[used], g, h) / (v.size * h)


# --------------------------------------------------------------------------- box plot
# numpy percentile method names for the nine sample quantiles of Hyndman & Fan (1996),
# The American Statistician 50(4):361-365 (types 1-9 in order).
QUANTILE_METHODS = ("inverted_cdf", "averaged_inverted_cdf", "closest_observation",
                    "interpolated_inverted_cdf", "hazen", "weibull", "linear",
                    "median_unbiased", "normal_unbiased")
HINGES = "hinges"     # Tukey's (1977) hinges: medians of the lower and upper halves
QUARTILE_METHOD_TEXT = {
    "linear": "numpy 'linear', Hyndman & Fan (1996) type 7",
    HINGES: "Tukey's hinges (Tukey 1977): medians of the lower and upper halves, the median "
            "counted in both when n is odd",
}


def tukey_hinges(values) -> tuple[float, float, float]:
    """(lower hinge, median, upper hinge) of Tukey (1977), Exploratory Data Analysis, ch. 2:
    the hinges are the medians of the lower and upper halves of the sorted values, the median
    itself belonging to both halves when n is odd (depth of a hinge = (floor((n + 1) / 2) + 1) / 2)."""
    v = np.sort(_finite(values, "x"))
    if v.size == 0:
        raise FigkitError("no values for hinges", field="x")
    half = (v.size + 1) // 2
    return (float(np.median(v[:half])), float(np.median(v)), float(np.median(v[v.size - half:])))


@dataclass(frozen=True)
class BoxStats:
    """Five-number box summary plus outliers (sorted), and the quantile method used."""
    n: int
    q1: float
    median: float
    q3: float
    iqr: float
    whisker_low: float
    whisker_high: float
    outliers: np.ndarray
    method: str


def box_stats(x, whisker: float = 1.5, method: str = "linear") -> BoxStats:
    """Box-plot numbers of Tukey (1977), Exploratory Data Analysis, ch. 2.

    Quartiles q1, median, q3 are numpy percentiles with ``method``, one of the
    Hyndman & Fan (1996) sample quantiles (``QUANTILE_METHODS``); the default
    "linear" is their type 7, Q(p) = x_(j) + g (x_(j+1) - x_(j)) with j + g = 1 + (n-1)p.
    Tukey's own hinges (``method="hinges"``, :func:`tukey_hinges`) are the medians of the
    lower and upper halves; no single type matches them for every n.  IQR = q3 - q1.  Fences q1 - whisker*IQR and
    q3 + whisker*IQR (whisker = 1.5 in Tukey 1977); each whisker ends at the most
    extreme data point inside its fence, and points beyond the fences are outliers.
    """
    if method not in QUANTILE_METHODS and method != HINGES:
        raise FigkitError("unknown quantile method", field="method", value=method,
                          allowed=QUANTILE_METHODS + (HINGES,))
    if (isinstance(whisker, bool) or not isinstance(whisker, (int, float, np.floating))
            or not math.isfinite(whisker) or whisker < 0):
        raise FigkitError("whisker length must be a number >= 0 (in IQRs)",
                          field="whisker", value=whisker)
    v = np.sort(_finite(x, "x"))
    if v.size == 0:
        raise FigkitError("no values for a box plot", field="x")
    if method == HINGES:
        q1, med, q3 = tukey_hinges(v)
    else:
        q1, med, q3 = (float(a) for a in np.percentile(v, [25.0, 50.0, 75.0], method=method))
    iqr = q3 - q1
    lo_fence, hi_fence = q1 - whisker * iqr, q3 + whisker * iqr
    inside = v[(v >= lo_fence) & (v <= hi_fence)]
    # With a coarse quantile type and whisker 0 the box edge may not be a data point;
    # the whisker then collapses onto the box.
    wl = float(inside[0]) if inside.size else q1
    wh = float(inside[-1]) if inside.size else q3
    outliers = v[(v < lo_fence) | (v > hi_fence)]
    return BoxStats(n=int(v.size), q1=q1, median=med, q3=q3, iqr=iqr,
                    whisker_low=min(wl, q1), whisker_high=max(wh, q3),
                    outliers=outliers, method=method)


# -------------------------------------------------------------------------- histogram
_MAX_BINS = 10_000


def bin_edges(values, rule: str | int | Sequence[float] | np.ndarray = "fd",
              range: tuple[float, float] | None = None) -> np.ndarray:
    """Histogram bin edges shared by all panels (pass the values pooled over panels).

    - ``"fd"``: width w = 2 IQR n^(-1/3), Freedman & Diaconis (1981), Z. Wahrsch.
      verw. Gebiete 57:453-476.  If the IQR is 0 (over half the values tied) the rule
      gives no width and Sturges is used instead (numpy would give a single bin).
    - ``"sturges"``: k = ceil(log2 n) + 1 bins over the data's range, Sturges (1926),
      JASA 21:65-66; written as width w = range / (log2 n + 1).
    - an integer k: k equal bins; an increasing array: the edges themselves.

    Bins span ``range`` (default: the data's min to max; a zero-width range is widened
    by 0.5 each side) with ceil(span / w) equal bins, w computed from the values inside
    ``range``, as numpy.histogram_bin_edges does.  Integer data keep w >= 1.
    """
    raw = np.asarray(values)
    v = _finite(values, "values")
    if not isinstance(rule, str) and np.ndim(rule) == 1:
        edges = _vector(rule, "bins")
        if edges.size < 2 or np.isnan(edges).any() or np.any(np.diff(edges) <= 0):
            raise FigkitError("bin edges must be at least 2 finite, strictly increasing "
                              "numbers", field="bins")
        return edges
    if range is not None:
        try:
            first, last = (float(r) for r in range)
        except (TypeError, ValueError):
            raise FigkitError("range must be two numbers (low, high)", field="range",
                              value=range) from None
        if not (math.isfinite(first) and math.isfinite(last)) or first > last:
            raise FigkitError("range must be finite with low <= high", field="range",
                              value=range)
        v = v[(v >= first) & (v <= last)]
    elif v.size:
        first, last = float(v.min()), float(v.max())
    else:
        raise FigkitError("no values to choose histogram bins from", field="values")
    if first == last:
        first, last = first - 0.5, last + 0.5
    if isinstance(rule, (int, np.integer)) and not isinstance(rule, bool):
        if rule < 1:
            raise FigkitError("number of bins must be >= 1", field="bins", value=rule)
        k = int(rule)
    elif rule in ("fd", "sturges"):
        width = 0.0
        if v.size:
            if rule == "fd":
                q1, q3 = np.percentile(v, [25.0, 75.0])
                width = 2.0 * (q3 - q1) * v.size ** (-1.0 / 3.0)
            if not width > 0:
                width = float(np.ptp(v)) / (math.log2(v.size) + 1.0)
            if np.issubdtype(raw.dtype, np.integer) and 0 < width < 1:
                width = 1.0
        k = int(math.ceil((last - first) / width)) if width > 0 else 1
    else:
        raise FigkitError("unknown binning rule", field="bins", value=rule,
                          allowed=("fd", "sturges", "a number of bins", "an edge list"))
    if k > _MAX_BINS:
        raise FigkitError(f"the rule asks for {k} bins (over {_MAX_BINS}); set a range or "
                          "a number of bins", field="bins", value=rule)
    return np.linspace(first, last, k + 1)


# ------------------------------------------------------------------------ proportions
def wilson_interval(k, n, level: float = 0.95):
    """Wilson (1927) score interval for a binomial proportion, vectorised: ``(low, high)``.

        p = k / n,  z = Phi^-1((1 + level) / 2),
        centre = (p + z^2 / 2n) / (1 + z^2 / n),
        half   = z / (1 + z^2 / n) * sqrt(p (1 - p) / n + z^2 / 4n^2)

    Wilson, E. B. (1927), JASA 22:209-212.  n = 0 gives NaN (no information).
    """
    level = _check_level(level)
    k = np.asarray(k, dtype=float)
    n = np.asarray(n, dtype=float)
    if not (np.all(np.isfinite(k)) and np.all(np.isfinite(n))):
        raise FigkitError("counts must be finite numbers", field="count")
    if np.any(n < 0) or np.any(k < 0) or np.any(k > n):
        raise FigkitError("counts must satisfy 0 <= successes <= total", field="count")
    z = float(_special.ndtri(0.5 + level / 2.0))   # inverse of the standard normal CDF
    with np.errstate(divide="ignore", invalid="ignore"):
        p = k / n
        denom = 1.0 + z * z / n
        centre = (p + z * z / (2.0 * n)) / denom
        half = z / denom * np.sqrt(p * (1.0 - p) / n + z * z / (4.0 * n * n))
    low = np.where(n > 0, np.clip(centre - half, 0.0, 1.0), np.nan)
    high = np.where(n > 0, np.clip(centre + half, 0.0, 1.0), np.nan)
    if low.ndim == 0:
        return float(low), float(high)
    return low, high


# ------------------------------------------------------------------------ group means
@dataclass(frozen=True)
class MeanInterval:
    """A group's mean with a confidence interval (``low``/``high`` None when n < 2)."""
    n: int
    mean: float
    sd: float | None
    low: float | None
    high: float | None
    method: str          # "t" or "bootstrap"


def _mean_start(values, level):
    """(checked level, finite values, n, mean) for the interval functions below."""
    level = _check_level(level)
    v = _finite(values, "y")
    if v.size == 0:
        raise FigkitError("a mean needs at least one value", field="y")
    return level, v, int(v.size), float(v.mean())


def mean_t_interval(values, level: float = 0.95) -> MeanInterval:
    """Mean and Student-t confidence interval (Student 1908):

        mean +/- t_{(1+level)/2, n-1} * s / sqrt(n),   s^2 = sum (x - mean)^2 / (n - 1).

    Assumes independent observations and a sampling distribution of the mean close to normal.
    """
    level, v, n, mean = _mean_start(values, level)
    if n < 2:
        return MeanInterval(n, mean, None, None, None, "t")
    sd = float(v.std(ddof=1))
    half = _t_quantile(level, n - 1) * sd / math.sqrt(n)
    return MeanInterval(n, mean, sd, mean - half, mean + half, "t")


BOOTSTRAP_CHUNK = 256     # resamples drawn at once: memory stays at 256 * n values


def mean_bootstrap_interval(values, resamples: int = 4000, seed: int = 20261202,
                            level: float = 0.95) -> MeanInterval:
    """Mean and percentile bootstrap interval (Efron & Tibshirani 1993, ch. 13): the
    (1-level)/2 and (1+level)/2 quantiles (numpy's linear method) of the means of ``resamples``
    resamples of size n drawn with replacement, from numpy's default generator seeded with
    ``seed`` (the same interval on every rebuild)."""
    level, v, n, mean = _mean_start(values, level)
    if n < 2:
        return MeanInterval(n, mean, None, None, None, "bootstrap")
    rng = np.random.default_rng(seed)
    means = np.empty(int(resamples))
    for start in range(0, int(resamples), BOOTSTRAP_CHUNK):
        k = min(BOOTSTRAP_CHUNK, int(resamples) - start)
        means[start:start + k] = v[rng.integers(0, n, size=(k, n))].mean(axis=1)
    low, high = np.percentile(means, [50.0 * (1 - level), 50.0 * (1 + level)])
    return MeanInterval(n, mean, float(v.std(ddof=1)), float(low), float(high), "bootstrap")


def per_x_means(x, y, level: float = 0.95):
    """Mean of y at each distinct x with a Student t interval where x repeats:
    ``(xs, n, mean, low, high)``; low/high are NaN where n < 2 (no interval from one value).
    Per x: mean +/- t_{(1+level)/2, n-1} s / sqrt(n) (as :func:`mean_t_interval`)."""
    level = _check_level(level)
    x, y = _pair(x, y)
    frame = pd.DataFrame({"x": x, "y": y}).groupby("x", sort=True)["y"]
    agg = frame.agg(["count", "mean", "std"])
    xs = agg.index.to_numpy(dtype=float)
    n = agg["count"].to_numpy(dtype=np.int64)
    mean = agg["mean"].to_numpy(dtype=float)
    sd = agg["std"].to_numpy(dtype=float)
    with np.errstate(invalid="ignore", divide="ignore"):
        tq = np.where(n > 1, _special.stdtrit(np.maximum(n - 1, 1), 0.5 + level / 2.0), np.nan)
        half = tq * sd / np.sqrt(n)
    return xs, n, mean, mean - half, mean + half


def line_runs(xs, max_step: float | None) -> list[tuple[int, int]]:
    """Index ranges [start, stop) of sorted ``xs`` that a line joins: a step between
    neighbours larger than ``max_step`` (a missing period) starts a new run; None joins all."""
    xs = np.asarray(xs, dtype=float)
    if xs.size == 0:
        return []
    if max_step is None:
        return [(0, int(xs.size))]
    cuts = np.flatnonzero(np.diff(xs) > max_step * (1 + 1e-9)) + 1
    bounds = [0, *cuts.tolist(), int(xs.size)]
    return list(zip(bounds[:-1], bounds[1:]))


def shares(counts) -> np.ndarray:
    """Proportions within each group: counts / row total (rows sum to 1).

    1-D counts are one group; 2-D counts have one group per row.  A row of zeros gives
    zeros (nothing to share), not NaN.
    """
    c = np.asarray(counts, dtype=float)
    if c.ndim not in (1, 2) or c.size == 0:
        raise FigkitError("counts must be a non-empty 1-D or 2-D table", field="counts")
    if not np.all(np.isfinite(c)) or np.any(c < 0):
        raise FigkitError("counts must be finite and >= 0", field="counts")
    total = c.sum(axis=-1, keepdims=True)
    return np.divide(c, total, out=np.zeros_like(c), where=total > 0)


# ------------------------------------------------------------ slopes across strata
@dataclass(frozen=True)
class StrataTest:
    """Interaction F-test: do the y-on-x slopes differ between strata?"""
    F: float
    df_num: int
    df_den: int
    p: float
    pooled_slope: float
    crude_slope: float
    n: int
    n_strata: int
    excluded: tuple


def _rss(design: np.ndarray, y: np.ndarray) -> tuple[float, np.ndarray]:
    coef = np.linalg.lstsq(design, y, rcond=None)[0]
    e = y - design @ coef
    return float(e @ e), coef


def strata_slope_test(x, y, stratum) -> StrataTest | None:
    """ANCOVA test of equal slopes: y ~ x + stratum against y ~ x * stratum.

    With k strata and n rows, the additive model (common slope, one intercept per
    stratum) has k + 1 coefficients and the interaction model (one line per stratum)
    has 2k, so

        F = [(RSS_add - RSS_int) / (k - 1)] / [RSS_int / (n - 2k)],
        p = P(F_{k-1, n-2k} > F)

    (general linear-hypothesis F-test; e.g. Weisberg (2005), Applied Linear
    Regression, 3rd ed., ch. 6).  ``pooled_slope`` is the common within-stratum slope of the
    additive model; ``crude_slope`` the plain OLS slope of y on x over the same rows,
    ignoring strata.  Both models are fitted by least squares on n x (k+1) and n x 2k
    design matrices (x centred, for conditioning).  Strata with fewer than 3 complete
    rows or constant x are left out and listed in ``excluded``; with fewer than 2
    usable strata the test does not exist and None is returned.  F is NaN when both
    models fit exactly.
    """
    x, y = _vector(x, "x"), _vector(y, "y")
    labels = np.asarray(stratum, dtype=object)
    if labels.ndim != 1 or not (x.size == y.size == labels.size):
        raise FigkitError(f"x, y and stratum must have the same length "
                          f"({x.size}, {y.size}, {labels.size})", field="stratum")
    keep = ~(np.isnan(x) | np.isnan(y) | pd.isna(labels))
    x, y, labels = x[keep], y[keep], labels[keep]
    codes, uniques = pd.factorize(labels, sort=False)
    usable, excluded = [], []
    for c, lab in enumerate(uniques):
        xc = x[codes == c]
        if xc.size >= 3 and np.ptp(xc) > 1e-13 * max(1.0, float(np.abs(xc).max())):
            usable.append(c)
        else:
            excluded.append(lab)
    excluded = tuple(excluded)
    if len(usable) < 2:
        return None
    rows = np.isin(codes, usable)
    x, y, codes = x[rows], y[rows], codes[rows]
    n, k = x.size, len(usable)
    xc = x - x.mean()
    yc = y - y.mean()
    member = (codes[:, None] == np.asarray(usable)[None, :]).astype(float)  # n x k
    additive = np.column_stack([member, xc])                                # n x (k+1)
    interaction = np.column_stack([member, member * xc[:, None]])           # n x 2k
    rss_add, coef_add = _rss(additive, yc)
    rss_int, _ = _rss(interaction, yc)
    df_num, df_den = k - 1, n - 2 * k
    num = max(rss_add - rss_int, 0.0) / df_num
    den = rss_int / df_den
    tiny = 1e-14 * max(float(yc @ yc), np.finfo(float).tiny)
    if den <= tiny:
        f = float("nan") if num <= tiny else float("inf")
    else:
        f = num / den
    p = float(_special.fdtrc(df_num, df_den, f)) if math.isfinite(f) else (   # F upper tail
        0.0 if f == float("inf") else float("nan"))
    crude = float(xc @ yc / (xc @ xc))
    return StrataTest(F=float(f), df_num=df_num, df_den=df_den, p=p,
                      pooled_slope=float(coef_add[-1]), crude_slope=crude, n=int(n),
                      n_strata=k, excluded=excluded)


def data_resolution(values) -> float | None:
    """The grid the values were recorded on (e.g. 0.1 for readings rounded to one decimal):
    the smallest gap between distinct values, when every gap is a whole multiple of it
    (to 1e-6 relative).  None for values on no common grid."""
    v = np.unique(np.asarray(values, dtype=float)[np.isfinite(np.asarray(values, dtype=float))])
    if v.size < 3:
        return None
    gaps = np.diff(v)
    step = float(gaps.min())
    if step <= 0:
        return None
    ratio = gaps / step
    if np.all(np.abs(ratio - np.round(ratio)) < 1e-6 * np.maximum(ratio, 1.0)):
        return step
    return None


def align_edges(edges: np.ndarray, resolution: float | None) -> np.ndarray:
    """Equal-width edges moved onto a recorded grid: the width rounded up to a whole number of
    grid steps and the edges put half a step between recorded values.  Otherwise values rounded
    to a grid fall unevenly into bins narrower than ~ a few steps, and the histogram shows a comb
    that is an artefact of rounding, not of the data (common practice in histogram design)."""
    edges = np.asarray(edges, dtype=float)
    if resolution is None or edges.size < 2:
        return edges
    width = float(edges[1] - edges[0])
    steps = max(1, int(math.ceil(width / resolution - 1e-9)))
    width = steps * resolution
    start = (math.floor(edges[0] / resolution + 1e-9) - 0.5) * resolution
    n = int(math.ceil((edges[-1] - start) / width - 1e-9))
    return start + width * np.arange(n + 1)


def bin_layout(edges, rule, resolution: float | None, exact: bool = False) -> tuple[np.ndarray, dict]:
    """The edges a histogram draws and what to say about them.

    A named rule's (``"fd"``, ``"sturges"``) edges are moved onto the data's recorded grid by
    :func:`align_edges` unless ``exact``; a count of bins is kept as asked.  The record keeps the
    rule's own width beside the width drawn, and says in words when they differ, so a reader
    is never told "Freedman-Diaconis" for bins that are not the rule's."""
    edges = np.asarray(edges, dtype=float)
    rule_width = float(edges[1] - edges[0]) if edges.size > 1 else None
    named = isinstance(rule, str)
    step = resolution if (named and not exact) else None
    drawn = align_edges(edges, step)
    width = float(drawn[1] - drawn[0]) if drawn.size > 1 else None
    aligned = step is not None and not np.array_equal(drawn, edges)
    name = {"fd": "Freedman-Diaconis", "sturges": "Sturges"}.get(rule, f"{rule} equal bins")
    if aligned:
        note = (f"aligned to the data's step of {step:g}: bin width {width:.6g} where "
                f"{name} gives {rule_width:.6g} (edges=exact draws the rule's own edges)")
    elif named:
        note = f"{name}'s own edges" + (" (edges=exact)" if exact else "")
    else:
        note = f"{len(drawn) - 1} equal bins as asked"
    return drawn, {"rule": str(rule), "rule_width": rule_width, "width": width,
                   "aligned_to_step": float(step) if aligned else None,
                   "edges": "exact" if exact or not named else "aligned", "note": note}


def strata_slope_test_from_sums(sums: dict) -> StrataTest | None:
    """The same interaction F-test as :func:`strata_slope_test`, from per-stratum centred sums
    (:class:`LineSums`) alone — one pass over data of any size.

    With S_k = (n_k, Sxx_k, Sxy_k, Syy_k) per stratum k (any linear-models text, e.g. the ANCOVA
    chapter of Kutner et al. 2005):
        RSS_full = sum_k (Syy_k - Sxy_k^2 / Sxx_k)                 (own slope per stratum)
        b_w      = sum_k Sxy_k / sum_k Sxx_k                        (pooled within-stratum slope)
        RSS_add  = sum_k Syy_k - (sum_k Sxy_k)^2 / sum_k Sxx_k      (common slope)
        F = ((RSS_add - RSS_full) / (K - 1)) / (RSS_full / (N - 2K))
    The crude slope comes from the merged sums.  Strata with n < 3, or whose x has a standard
    deviation below 1e-13 of its size (max(1, |mean|); rounding leaves a tiny non-zero Sxx
    around a constant, which would otherwise give a wild slope), are excluded.  Rounding guards
    as in :func:`strata_slope_test`: RSS_add - RSS_full is floored at 0, and an error mean
    square below 1e-14 of the total centred sum of squares counts as an exact fit (F NaN when
    the lines are also equal, else infinite).
    """
    usable = {k: s for k, s in sums.items()
              if s.n >= 3 and s.sxx > s.n * (1e-13 * max(1.0, abs(s.x_mean))) ** 2}
    excluded = tuple(k for k in sums if k not in usable)
    K = len(usable)
    if K < 2:
        return None
    N = sum(s.n for s in usable.values())
    sxx = sum(s.sxx for s in usable.values())
    sxy = sum(s.sxy for s in usable.values())
    syy = sum(s.syy for s in usable.values())
    rss_full = sum(max(s.syy - s.sxy ** 2 / s.sxx, 0.0) for s in usable.values())
    rss_add = max(syy - sxy ** 2 / sxx, 0.0)
    df_num, df_den = K - 1, N - 2 * K
    if df_den <= 0:
        return None
    merged = None
    for s in usable.values():
        merged = s if merged is None else merged.merge(s)
    num = max(rss_add - rss_full, 0.0) / df_num
    den = rss_full / df_den
    tiny = 1e-14 * max(merged.syy, np.finfo(float).tiny)
    if den <= tiny:
        F, p = (math.nan, math.nan) if num <= tiny else (math.inf, 0.0)
    else:
        F = num / den
        p = float(_special.fdtrc(df_num, df_den, F))   # upper tail of F(df_num, df_den)
    return StrataTest(F=float(F), df_num=df_num, df_den=df_den, p=p, pooled_slope=sxy / sxx,
                      crude_slope=merged.sxy / merged.sxx, n=N, n_strata=K, excluded=excluded)
