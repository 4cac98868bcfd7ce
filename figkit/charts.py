"""Stage 6a, the chart kinds: how one panel of each kind is drawn.

A chart kind is two functions (see DEVELOPERS.md, "Adding a chart kind"):

* ``prepare(ctx)`` — once per figure, before any panel: everything that must be the same in every
  panel so panels compare honestly (bin edges, hexagon extent, density grid, colour scale, the
  overplotting decision).  Results go into ``ctx.shared``.
* ``draw(ax, panel, ctx) -> dict`` — one panel; returns that panel's numbers for the sidecar.

Its requirements (which fields, options) live in :data:`figkit.spec.CHARTS`.
"""
from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from . import stats
from .aggregate import HexGrid, padded_range
from .data import FigureData, Panel
from .spec import FigureSpec, label_text
from .style import pt_to_mm
from .text import shown

INK = "#2B2F33"         # trend lines, medians, text on light tiles
NEUTRAL = "#4D7FA6"     # single-colour charts (histogram, box, violin, density without colour)
TREND = "#1B1D1F"
BAND_ALPHA = 0.18
MIN_TREND_N = 3          # fewer complete rows: no trend, no band (a note in the sidecar)
FEW_POINTS = 20          # a smoother or band over fewer points than this earns a caution


@dataclass
class Context:
    spec: FigureSpec
    data: FigureData
    panel_mm: tuple[float, float]
    colours: dict | None = None          # categorical colour level -> hex
    cmap: object = None                  # continuous colour: matplotlib colormap
    norm: object = None
    colour_title: str = ""
    shared: dict = field(default_factory=dict)
    cautions: list = field(default_factory=list)
    mappables: list = field(default_factory=list)   # artists that share ctx.norm (for the colour bar)
    used_colours: list = field(default_factory=list)

    def use(self, hex_colour: str) -> str:
        if hex_colour not in self.used_colours:
            self.used_colours.append(hex_colour)
        return hex_colour


# ---------------------------------------------------------------------------- helpers

# Non-colour cues, so a figure still reads in greyscale or to a colour-blind reader: one marker
# shape or one dash pattern per colour group, in legend order.
MARKER_SHAPES = ("o", "s", "^", "D", "v", "P", "X", "*")
DASH_PATTERNS = ("-", (0, (4, 1.5)), (0, (1, 1.2)), (0, (4, 1.5, 1, 1.5)), (0, (7, 2)),
                 (0, (2, 2)), (0, (6, 1.5, 1, 1.5, 1, 1.5)), (0, (1, 3)))


def cue_markers(ctx: "Context") -> dict:
    if ctx.spec.options.get("shapes") != "yes" or not ctx.colours:
        return {}
    return {level: MARKER_SHAPES[i % len(MARKER_SHAPES)] for i, level in enumerate(ctx.colours)}


def cue_dashes(ctx: "Context") -> dict:
    if ctx.spec.options.get("dashes") != "yes" or not ctx.colours:
        return {}
    return {level: DASH_PATTERNS[i % len(DASH_PATTERNS)] for i, level in enumerate(ctx.colours)}


def _values(panels: list[Panel], col: str) -> np.ndarray:
    arrays = [p.frame[col].to_numpy(dtype=float) for p in panels if p.n]
    return np.concatenate(arrays) if arrays else np.array([], dtype=float)


def _groups(panel: Panel, ctx: Context):
    """(level, hex, frame) per colour group in legend order; one neutral group without colour."""
    spec = ctx.spec
    if spec.colour and ctx.colours is not None:
        by = dict(iter(panel.frame.groupby(spec.colour, sort=False, observed=True)))
        for level, hexc in ctx.colours.items():
            if level in by:
                yield level, hexc, by[level]
    else:
        yield None, None, panel.frame


def _levels(ctx: Context, fld: str) -> list:
    return list(ctx.data.levels.get(fld, []))


def _note_trend(ctx: Context, panel: Panel, rec: dict, what: str, n: int) -> bool:
    if n < MIN_TREND_N:
        rec.setdefault("notes", []).append(f"{what} not drawn: {n} complete rows (needs {MIN_TREND_N})")
        return False
    if n < FEW_POINTS:
        ctx.cautions.append(f"panel '{panel.label or 'all'}': {what} drawn over only {n} points")
    return True


# ---------------------------------------------------------------------------- trends

def draw_trend(ax, panel: Panel, ctx: Context, rec: dict) -> None:
    spec = ctx.spec
    if spec.trend == "none":
        return
    what = "straight-line fit" if spec.trend == "line" else "LOESS smoother"
    from .scales import axis_scales
    scaled = axis_scales(spec)
    fitted_in = {"x": f"{scaled['x'][0]}(x)" if "x" in scaled else "x",
                 "y": f"{scaled['y'][0]}(y)" if "y" in scaled else "y"}
    tally = panel.tally
    if tally is not None:       # streamed data: the line comes from the panel's one-pass sums
        n, lo, hi = tally.n, tally.x_min, tally.x_max
    else:
        x = panel.frame[spec.x].to_numpy(dtype=float)
        y = panel.frame[spec.y].to_numpy(dtype=float)
        n, lo, hi = len(x), (x.min() if len(x) else 0.0), (x.max() if len(x) else 0.0)
    if not _note_trend(ctx, panel, rec, what, n):
        return
    if hi <= lo:
        rec.setdefault("notes", []).append(f"{what} not drawn: x is constant")
        return
    # Drawn only over the panel's own data range: a trend is never extrapolated.
    grid = np.linspace(lo, hi, 120)
    if spec.trend == "line":
        fit = tally.line.fit() if tally is not None else stats.fit_line(x, y)
        yhat, band_lo, band_hi = stats.line_band(fit, grid)
        ax.fill_between(grid, band_lo, band_hi, color=TREND, alpha=BAND_ALPHA, linewidth=0, zorder=3)
        ax.plot(grid, yhat, color=TREND, linewidth=0.9, zorder=4, solid_capstyle="butt")
        rec["trend"] = {"kind": "line", "slope": fit.slope, "intercept": fit.intercept,
                        "slope_ci": [fit.slope_ci_low, fit.slope_ci_high], "r": fit.r, "n": fit.n,
                        "fitted_in": fitted_in}
    else:
        o = spec.options
        xs, ys = stats.loess(x, y, span=o.get("span", 0.75), degree=o.get("degree", 1),
                             iterations=o.get("robust", 0))
        ax.plot(xs, ys, color=TREND, linewidth=0.9, zorder=4)
        rec["trend"] = {"kind": "loess", "span": o.get("span", 0.75), "degree": o.get("degree", 1),
                        "robust_iterations": o.get("robust", 0), "n": len(x), "fitted_in": fitted_in}


def set_limits(ax, x=None, y=None) -> None:
    """``ax.set_xlim(*x)`` and ``ax.set_ylim(*y)``, skipped where the view already has those
    limits and is fixed.  matplotlib passes limits set on one panel to every panel sharing the
    axis, so setting each of n shared panels again costs n² updates for nothing (a 16-panel grid
    spent a quarter of its layout time there)."""
    for lim, get, auto, put in ((x, ax.get_xlim, ax.get_autoscalex_on, ax.set_xlim),
                                (y, ax.get_ylim, ax.get_autoscaley_on, ax.set_ylim)):
        if lim is not None and (auto() or tuple(map(float, get())) != (float(lim[0]), float(lim[1]))):
            put(*lim)


# ---------------------------------------------------------------------------- scatter

def _cell_counts(x, y, xlim, ylim, cells) -> np.ndarray:
    """Points per marker-sized cell: integer cell indices, one bincount (no per-point work)."""
    nx, ny = cells
    ix = np.clip(((x - xlim[0]) / (xlim[1] - xlim[0]) * nx).astype(np.int64), 0, nx - 1)
    iy = np.clip(((y - ylim[0]) / (ylim[1] - ylim[0]) * ny).astype(np.int64), 0, ny - 1)
    return np.bincount(ix * ny + iy, minlength=nx * ny)


CRAMPED_SHARE = 0.1      # a panel whose data span less of a common range is hard to read


def cramped_panels(panels: list[Panel], spec, xlim, ylim) -> str | None:
    """A note naming the panels whose data span less than CRAMPED_SHARE of the common range on
    an axis.  The common range stays (panels compare honestly); the note says how to look
    closer without changing what is compared."""
    tight = {"x": [], "y": []}
    for p in panels:
        if p.n < 2 or p.tally is not None:
            continue
        for axis, fld, (lo, hi) in (("x", spec.x, xlim), ("y", spec.y, ylim)):
            v = p.frame[fld].to_numpy(dtype=float)
            if hi > lo and np.ptp(v) < CRAMPED_SHARE * (hi - lo):
                tight[axis].append(p.label)
    parts = [f"{', '.join(labels[:4])}{' ...' if len(labels) > 4 else ''} on {axis}"
             for axis, labels in tight.items() if labels]
    if not parts:
        return None
    return (f"panels whose data fill less than {CRAMPED_SHARE:.0%} of the common range: "
            f"{'; '.join(parts)}; ranges=own-x or own-y (in the sheet) shows them closer, but then "
            "panels no longer compare by position")


def _discrete_gap(v: np.ndarray) -> float | None:
    """The smallest gap between distinct values when an axis holds few of them (heavy ties)."""
    # A part never holds more distinct values than the whole: 31 among the first rows settle
    # it without sorting a million values.
    if len(v) > 4096 and len(np.unique(v[:4096])) > 30:
        return None
    u = np.unique(v)
    if len(u) < 2 or len(u) > 30 or len(v) < 4 * len(u):
        return None
    return float(np.min(np.diff(u)))


# Opacity reached by the densest cell when transparency is chosen from the measured density.
DENSEST_OPACITY = 0.9
MIN_ALPHA = 0.1          # below this a lone point vanishes: switch to hexagonal bins


def choose_drawing(max_per_cell: int, forced: str = "auto") -> tuple[str, float]:
    """Pick plain points, translucent points or bins from the densest marker-sized cell.

    With k points stacked at opacity a each, the cell's opacity is 1 - (1 - a)^k (alpha
    compositing, Porter & Duff 1984).  We choose a so that the densest cell reaches
    DENSEST_OPACITY: a = 1 - (1 - DENSEST_OPACITY)^(1/k).  If that a is below MIN_ALPHA
    (a single point would be hard to see; common practice) we bin instead.
    """
    k = max(int(max_per_cell), 1)
    alpha = 1.0 - (1.0 - DENSEST_OPACITY) ** (1.0 / k)
    if forced == "points":
        return "points", 1.0
    if forced == "translucent":
        return "translucent", max(alpha, MIN_ALPHA)
    if forced == "bins":
        return "bins", 1.0
    if k <= 2:
        return "points", 1.0
    if alpha < MIN_ALPHA:
        return "bins", 1.0
    return "translucent", round(alpha, 4)


JITTER_SEED = 20261202   # fixed: the same jitter on every rebuild


def prepare_scatter(ctx: Context) -> None:
    """Measure overlap at the final size and choose how points are drawn (one choice per figure,
    from its densest panel, so every panel reads the same way)."""
    spec, panels = ctx.spec, ctx.data.panels
    x, y = _values(panels, spec.x), _values(panels, spec.y)
    forced = spec.options.get("points", "auto")
    jitter = {}
    if forced in ("auto", "jitter") and x.size:
        for axis, v in (("x", x), ("y", y)):
            gap = _discrete_gap(v)
            if gap is not None:
                jitter[axis] = 0.4 * gap   # < half the gap: a point never reaches the next value
    # The common ranges hold every point as drawn: jittered ones reach jitter width beyond the
    # outermost values, and a range cut at the values would hide them while n still counts them.
    wx, wy = jitter.get("x", 0.0), jitter.get("y", 0.0)
    ctx.shared["xlim"] = padded_range(np.nanmin(x) - wx, np.nanmax(x) + wx) if x.size else (0, 1)
    ctx.shared["ylim"] = padded_range(np.nanmin(y) - wy, np.nanmax(y) + wy) if y.size else (0, 1)
    if spec.ranges == "common" and len(panels) > 1:
        note = cramped_panels(panels, spec, ctx.shared["xlim"], ctx.shared["ylim"])
        if note:
            ctx.cautions.append(note)
    marker_mm = pt_to_mm(float(spec.style.rc.get("lines.markersize", 2.5)))
    cells = (max(1, int(ctx.panel_mm[0] / marker_mm)), max(1, int(ctx.panel_mm[1] / marker_mm)))
    rng = np.random.default_rng(JITTER_SEED)
    coords, densest, own = {}, 0, {}
    for p in panels:
        px = p.frame[spec.x].to_numpy(dtype=float)
        py = p.frame[spec.y].to_numpy(dtype=float)
        if "x" in jitter:
            px = px + rng.uniform(-jitter["x"], jitter["x"], size=len(px))
        if "y" in jitter:
            py = py + rng.uniform(-jitter["y"], jitter["y"], size=len(py))
        coords[id(p)] = (px, py)
        if p.n:
            xl = padded_range(px.min(), px.max()) if spec.ranges in ("own", "own-x") else ctx.shared["xlim"]
            yl = padded_range(py.min(), py.max()) if spec.ranges in ("own", "own-y") else ctx.shared["ylim"]
            own[id(p)] = int(_cell_counts(px, py, xl, yl, cells).max())
            densest = max(densest, own[id(p)])
    mode, alpha = choose_drawing(densest, "auto" if forced == "jitter" else forced)
    if forced == "jitter":      # asked for: keep the points, at the opacity the density calls for
        alpha = {"points": 1.0, "bins": MIN_ALPHA}.get(mode, alpha)
        mode = "jitter"
    elif jitter and mode != "bins":
        mode = "jitter"
    if mode == "bins" and spec.colour:
        mode, alpha = "translucent", MIN_ALPHA   # bins cannot show a colour per point
        grouped = ctx.colours is not None
        what = "colour groups" if grouped else f"a colour scale of '{spec.colour}'"
        instead = ("splitting by the colour field" if grouped
                   else "bands of the colour field as panels")
        ctx.cautions.append(f"points too dense for {what}: drawn at the lowest opacity, where "
                            f"overlapping points mix their colours; consider {instead} instead")
    ctx.shared.update(mode=mode, alpha=alpha, cells=cells, densest=densest, jitter=jitter,
                      coords=coords, own_densest=own)
    if mode == "bins":
        prepare_hexbins(ctx)
        if forced != "bins":     # chosen, not asked for: the caption must say what is shown
            ctx.cautions.append(f"drawn as hexagonal-bin counts, not points: up to {densest} points "
                                "share a marker-sized cell; say so in the caption (points=translucent "
                                "keeps points)")


def draw_scatter(ax, panel: Panel, ctx: Context) -> dict:
    spec, sh = ctx.spec, ctx.shared
    # One choice per figure (from its densest panel) so panels read alike; each panel's own
    # densest marker-sized cell is recorded beside it.
    rec = {"drawing": sh["mode"], "max_per_cell": sh["own_densest"].get(id(panel), 0),
           "figure_max_per_cell": sh["densest"], "cells": list(sh["cells"])}
    if sh["mode"] == "bins":
        rec.update(draw_hexbins(ax, panel, ctx))
        return rec
    if sh["mode"] != "points":
        rec["alpha"] = sh["alpha"]
    px, py = sh["coords"][id(panel)]
    size = float(spec.style.rc.get("lines.markersize", 2.5)) ** 2
    alpha = None if sh["mode"] == "points" else sh["alpha"]
    if spec.colour and ctx.colours is None:          # continuous colour: one collection
        art = ax.scatter(px, py, c=panel.frame[spec.colour].to_numpy(dtype=float), cmap=ctx.cmap,
                         norm=ctx.norm, s=size, linewidths=0, alpha=alpha,
                         rasterized=len(px) > 2000, zorder=2)
        ctx.mappables.append(art)
    else:
        codes = panel.frame[spec.colour].to_numpy() if spec.colour else None
        markers = cue_markers(ctx)
        for level, hexc, part in _groups(panel, ctx):   # one collection per colour group
            m = slice(None) if codes is None else (codes == level)
            ax.scatter(px[m], py[m], color=ctx.use(hexc or NEUTRAL), s=size, linewidths=0,
                       alpha=alpha, rasterized=len(part) > 2000, zorder=2,
                       marker=markers.get(level, "o"))
    for axis in sh["jitter"]:
        values = np.unique(panel.frame[spec.x if axis == "x" else spec.y].to_numpy(dtype=float))
        if len(values) <= 12:   # label the distinct values themselves, not fractions between them
            (ax.set_xticks if axis == "x" else ax.set_yticks)(values, [f"{v:g}" for v in values])
    if sh["jitter"]:
        rec["jitter"] = {axis: float(w) for axis, w in sh["jitter"].items()}
        rec["jitter_seed"] = JITTER_SEED
    draw_trend(ax, panel, ctx, rec)
    return rec


# ---------------------------------------------------------------------------- hexagonal bins

def prepare_hexbins(ctx: Context) -> None:
    """One hexagon lattice (extent and cell size) for every panel, so a cell means the same
    everywhere; streamed data bring the lattice their counts were made on."""
    spec, panels = ctx.spec, ctx.data.panels
    streamed = getattr(ctx.data, "streamed", None)
    if streamed and streamed.get("hex_grid"):
        grid = HexGrid(*streamed["hex_grid"])
        ctx.shared["xlim"], ctx.shared["ylim"] = (grid.xmin, grid.xmax), (grid.ymin, grid.ymax)
    else:
        if "xlim" not in ctx.shared:
            x, y = _values(panels, spec.x), _values(panels, spec.y)
            ctx.shared["xlim"] = padded_range(np.nanmin(x), np.nanmax(x)) if x.size else (0, 1)
            ctx.shared["ylim"] = padded_range(np.nanmin(y), np.nanmax(y)) if y.size else (0, 1)
        grid = HexGrid(*ctx.shared["xlim"], *ctx.shared["ylim"], int(spec.options.get("cells", 30)))
    ctx.shared["hex_grid"] = grid
    ctx.shared["hex_collections"] = []


def draw_hexbins(ax, panel: Panel, ctx: Context) -> dict:
    """Counts per hexagon by integer cell index and one bincount (figkit.aggregate), drawn as one
    collection of hexagons; no per-point artists."""
    from matplotlib.collections import PolyCollection
    from matplotlib.transforms import AffineDeltaTransform

    spec, sh = ctx.spec, ctx.shared
    grid: HexGrid = sh["hex_grid"]
    rec: dict = {"drawing": "bins", "cells_across": grid.nx}
    if not panel.n:
        return rec
    if panel.tally is not None:
        counts = panel.tally.hex_counts
    else:
        counts = grid.counts(panel.frame[spec.x].to_numpy(dtype=float),
                             panel.frame[spec.y].to_numpy(dtype=float))
    keep = counts >= 1
    coll = PolyCollection([grid.hexagon()], offsets=grid.centres()[keep],
                          offset_transform=AffineDeltaTransform(ax.transData), linewidths=0,
                          cmap=ctx.cmap, rasterized=int(keep.sum()) > 5000, zorder=2)
    # A few thousand hexagons stay vector (sharper, and a far smaller, faster PDF than a
    # full-page raster); only a very fine lattice is rasterised.
    coll.set_array(counts[keep].astype(float))
    ax.add_collection(coll, autolim=False)
    set_limits(ax, sh["xlim"], sh["ylim"])
    sh["hex_collections"].append(coll)
    rec.update(max_count=int(counts.max()) if counts.size else 0, cells_filled=int(keep.sum()),
               lattice={"x": [float(grid.xmin), float(grid.xmax)],
                        "y": [float(grid.ymin), float(grid.ymax)], "cells_across": grid.nx})
    draw_trend(ax, panel, ctx, rec)
    return rec


def finish_hexbins(ctx: Context) -> None:
    """One normalisation for every panel: the same count is the same colour everywhere."""
    import matplotlib.colors as mcolors
    colls = ctx.shared.get("hex_collections") or []
    if not colls:
        return
    top = max((float(c.get_array().max()) for c in colls if c.get_array().size), default=1.0)
    scale = ctx.spec.options.get("scale", "log")
    ctx.norm = mcolors.LogNorm(1, max(top, 2)) if scale == "log" else mcolors.Normalize(0, max(top, 1))
    for c in colls:
        c.set_norm(ctx.norm)
        c.set_cmap(ctx.cmap)
    ctx.mappables.extend(colls)
    ctx.colour_title = "Count per hexagon" + (" (log scale)" if scale == "log" else "")


# ---------------------------------------------------------------------------- box and violin

def prepare_groups_y(ctx: Context) -> None:
    spec, panels = ctx.spec, ctx.data.panels
    y = _values(panels, spec.y)
    ctx.shared["ylim"] = padded_range(np.nanmin(y), np.nanmax(y)) if y.size else (0, 1)
    ctx.shared["xlevels"] = _levels(ctx, spec.x)


def _by_level(panel: Panel, fld: str, levels: list):
    by = dict(iter(panel.frame.groupby(fld, sort=False, observed=True)))
    for i, level in enumerate(levels):
        yield i, level, by.get(level)


def draw_box(ax, panel: Panel, ctx: Context) -> dict:
    spec = ctx.spec
    levels = ctx.shared["xlevels"]
    method = spec.options.get("quartiles", "linear")
    bxp, groups = [], []
    for i, level, part in _by_level(panel, spec.x, levels):
        if part is None or len(part) == 0:
            continue
        b = stats.box_stats(part[spec.y].to_numpy(dtype=float), whisker=spec.options.get("whisker", 1.5),
                            method=method)
        bxp.append({"med": b.median, "q1": b.q1, "q3": b.q3, "whislo": b.whisker_low,
                    "whishi": b.whisker_high, "fliers": b.outliers, "label": label_text(level), "_pos": i})
        groups.append({"group": level, "n": b.n, "q1": b.q1, "median": b.median, "q3": b.q3,
                       "whisker_low": b.whisker_low, "whisker_high": b.whisker_high,
                       "outliers": int(len(b.outliers))})
    if bxp:
        colour = ctx.use(NEUTRAL)
        ax.bxp([{k: v for k, v in s.items() if k != "_pos"} for s in bxp],
               positions=[s["_pos"] for s in bxp], widths=0.55, patch_artist=True, showfliers=True,
               boxprops=dict(facecolor=colour + "40", edgecolor=colour, linewidth=0.6),
               medianprops=dict(color=INK, linewidth=1.0, solid_capstyle="butt"),
               whiskerprops=dict(color=colour, linewidth=0.6),
               capprops=dict(color=colour, linewidth=0.6),
               flierprops=dict(marker="o", markersize=1.6, markerfacecolor=colour, markeredgewidth=0,
                               alpha=0.7, rasterized=sum(len(s["fliers"]) for s in bxp) > 2000))
    # Outliers stay vector (editable, sharp) unless there are so many that the file would swell.
    _category_axis(ax, levels)
    return {"groups": groups, "quartiles": method,
            "quartile_method": stats.QUARTILE_METHOD_TEXT[method],
            "whisker_iqr": float(spec.options.get("whisker", 1.5))}


def draw_violin(ax, panel: Panel, ctx: Context) -> dict:
    spec = ctx.spec
    levels = ctx.shared["xlevels"]
    colour = ctx.use(NEUTRAL)
    groups = []
    for i, level, part in _by_level(panel, spec.x, levels):
        if part is None or len(part) < 2:
            continue
        v = part[spec.y].to_numpy(dtype=float)
        if np.ptp(v) == 0:
            continue
        bw = stats.kde_bandwidth(v, _bandwidth_rule(spec.options.get("bandwidth", "scott")))
        grid = np.linspace(v.min(), v.max(), 160)   # clipped to the data: no density past the range
        dens = stats.kde(v, grid, bw)
        half = 0.4 * dens / dens.max()
        ax.fill_betweenx(grid, i - half, i + half, facecolor=colour + "40", edgecolor=colour,
                         linewidth=0.5, zorder=2)
        q1, med, q3 = np.percentile(v, [25, 50, 75])
        ax.plot([i, i], [q1, q3], color=INK, linewidth=1.6, solid_capstyle="butt", zorder=3)
        ax.plot([i], [med], marker="o", markersize=2.2, color="white", markeredgecolor=INK,
                markeredgewidth=0.5, zorder=4)
        groups.append({"group": level, "n": len(v), "bandwidth": bw, "q1": q1, "median": med, "q3": q3})
    _category_axis(ax, levels)
    sizes = [g["n"] for g in groups]
    if sizes and max(sizes) > 10 * min(sizes):
        ctx.cautions.append(f"panel '{panel.label or 'all'}': violins have the same width whatever "
                            f"their size ({min(sizes)} to {max(sizes)} rows); see n per group in the sidecar")
    return {"groups": groups, "quartiles": "linear",
            "quartile_method": stats.QUARTILE_METHOD_TEXT["linear"]}


# ---------------------------------------------------------------------------- group means

MEANS_SLOT = 0.8         # share of an x group's width taken by its colour groups side by side


def _mean_interval(v: np.ndarray, spec: FigureSpec):
    o = spec.options
    if o.get("interval", "t") == "bootstrap":
        return stats.mean_bootstrap_interval(v, o.get("resamples", 4000), o.get("seed", 20261202))
    return stats.mean_t_interval(v)


def prepare_means(ctx: Context) -> None:
    """Every group's mean and interval once (the y range must hold every interval end and, when
    drawn, every raw point); the raw points' opacity from the densest marker-sized cell, as for
    scatter (choose_drawing), one choice for the figure."""
    spec, panels = ctx.spec, ctx.data.panels
    ctx.shared["xlevels"] = levels = _levels(ctx, spec.x)
    groups = list(ctx.colours.items()) if ctx.colours else [(None, NEUTRAL)]
    k = len(groups)
    width = MEANS_SLOT / k
    rng = np.random.default_rng(JITTER_SEED)
    results, ends, coords, densest = {}, [], {}, 0
    show = spec.options.get("points", "none") != "none"
    marker_mm = pt_to_mm(float(spec.style.rc.get("lines.markersize", 2.5)))
    cells = (max(1, int(ctx.panel_mm[0] / marker_mm)), max(1, int(ctx.panel_mm[1] / marker_mm)))
    y_all = _values(panels, spec.y)
    ylim_pts = padded_range(np.nanmin(y_all), np.nanmax(y_all)) if y_all.size else (0, 1)
    for p in panels:
        rows = []
        if p.n:
            keys = [spec.x] + ([spec.colour] if spec.colour else [])
            by = dict(iter(p.frame.groupby(keys if len(keys) > 1 else keys[0], sort=False, observed=True)))
            px, py = [], []
            for i, lv in enumerate(levels):
                for j, (level, hexc) in enumerate(groups):
                    part = by.get((lv, level) if spec.colour else lv)
                    if part is None or len(part) == 0:
                        continue
                    v = part[spec.y].to_numpy(dtype=float)
                    res = _mean_interval(v, spec)
                    pos = i - MEANS_SLOT / 2 + width * (j + 0.5)
                    rows.append((i, lv, level, hexc, pos, res))
                    ends += [res.mean] + ([res.low, res.high] if res.low is not None else [])
                    if show:   # jittered sideways within a third of the group's slot (fixed seed)
                        px.append(pos + rng.uniform(-width / 3, width / 3, size=len(v)))
                        py.append(v)
            if show and px:
                cx, cy = np.concatenate(px), np.concatenate(py)
                coords[id(p)] = (px, py)
                densest = max(densest, int(_cell_counts(
                    cx, cy, (-0.6, len(levels) - 0.4), ylim_pts, cells).max()))
        results[id(p)] = rows
    lo, hi = (min(ends), max(ends)) if ends else (0.0, 1.0)
    if show and y_all.size:
        lo, hi = min(lo, float(np.nanmin(y_all))), max(hi, float(np.nanmax(y_all)))
    ctx.shared["ylim"] = padded_range(lo, hi)
    forced = spec.options.get("points", "none")
    mode, alpha = choose_drawing(densest, "auto" if forced == "none" else forced)
    if mode == "bins":          # bins would hide the means' own groups: lowest opacity instead
        mode, alpha = "translucent", MIN_ALPHA
    ctx.shared.update(means=results, mean_coords=coords, mode=mode if show else "none",
                      alpha=alpha, densest=densest, slot=width)


def draw_means(ax, panel: Panel, ctx: Context) -> dict:
    """One dot per group at its mean and a vertical line over its interval; no bar (a bar's
    area would stand for a mean down to zero and hide the spread: docs/cautions.md)."""
    spec, sh = ctx.spec, ctx.shared
    markers = cue_markers(ctx)
    size = float(spec.style.rc.get("lines.markersize", 2.5))
    if sh["mode"] != "none" and id(panel) in sh["mean_coords"]:
        px, py = sh["mean_coords"][id(panel)]
        rows = sh["means"][id(panel)]
        for (_i, _lv, _level, hexc, _pos, _res), gx, gy in zip(rows, px, py):
            ax.scatter(gx, gy, s=size ** 2 * 0.6, linewidths=0, color=ctx.use(hexc or NEUTRAL),
                       alpha=None if sh["mode"] == "points" else max(sh["alpha"] * 0.6, 0.06),
                       rasterized=len(gx) > 2000, zorder=1)
    groups = []
    few = []
    for i, lv, level, hexc, pos, res in sh["means"][id(panel)]:
        colour = ctx.use(hexc or NEUTRAL)
        if res.low is not None:
            ax.plot([pos, pos], [res.low, res.high], color=colour, linewidth=1.0,
                    solid_capstyle="butt", zorder=3)
        ax.plot([pos], [res.mean], marker=markers.get(level, "o"), markersize=size * 1.5,
                color=colour, markeredgecolor="white", markeredgewidth=0.4, linestyle="none", zorder=4)
        if res.n < FEW_POINTS:
            few.append(res.n)
        name = shown(lv) if level is None else f"{shown(lv)} / {shown(level)}"
        groups.append({"group": name, "x": lv, "colour_group": level, "n": res.n, "mean": res.mean,
                       "sd": res.sd, "ci_low": res.low, "ci_high": res.high,
                       "interval": res.method})
    if few:
        ctx.cautions.append(f"panel '{panel.label or 'all'}': {len(few)} group(s) with fewer than "
                            f"{FEW_POINTS} rows (smallest n = {min(few)}); "
                            + ("an interval needs n >= 2" if min(few) < 2 else
                               "their intervals rest on the normality of the mean"))
    _category_axis(ax, ctx.shared["xlevels"])
    rec = {"groups": groups, "level": 0.95}
    if sh["mode"] != "none":
        rec.update(points=sh["mode"], alpha=sh["alpha"], jitter_seed=JITTER_SEED)
    return rec


# ---------------------------------------------------------------------------- lines over x

GAP_FACTOR = 1.5     # gap=auto: a step over 1.5 times the usual step between x values breaks


def _line_gap(ctx: Context, x: np.ndarray) -> tuple[float | None, str]:
    """The largest step a line bridges, and how it was chosen.  auto: 1.5 times the median step
    between the figure's distinct x values (a regular series with one missing period breaks
    there); none: every step is bridged; a number: that step."""
    gap = ctx.spec.options.get("gap", "auto")
    if gap == "none":
        return None, "none: every step between x values is bridged"
    if gap != "auto":
        return float(gap), f"steps over {float(gap):g} x units break the line (gap={gap})"
    if ctx.data.levels.get(ctx.spec.x) is not None:   # an ordered text x: positions 0, 1, 2 ...
        return GAP_FACTOR, "auto: a level left out (a step over one place in the order) breaks the line"
    u = np.unique(x)
    if u.size < 3:
        return None, "auto: fewer than three x values, nothing to break"
    step = float(np.median(np.diff(u)))
    return GAP_FACTOR * step, (f"auto: steps over {GAP_FACTOR:g} times the median step "
                               f"({step:g}) between x values break the line")


def prepare_lines(ctx: Context) -> None:
    """Per panel and colour group: the per-x means with their t intervals (stats.per_x_means),
    one gap rule for the figure, and a y range holding every mean and band end."""
    spec, panels = ctx.spec, ctx.data.panels
    x_all = _values(panels, spec.x)
    max_step, rule = _line_gap(ctx, x_all)
    ctx.shared["xlim"] = padded_range(np.nanmin(x_all), np.nanmax(x_all)) if x_all.size else (0, 1)
    ends, tables = [], {}
    for p in panels:
        rows = []
        for level, hexc, part in _groups(p, ctx):
            if len(part) == 0:
                continue
            xs, n, mean, low, high = stats.per_x_means(part[spec.x].to_numpy(dtype=float),
                                                       part[spec.y].to_numpy(dtype=float))
            rows.append((level, hexc, xs, n, mean, low, high, stats.line_runs(xs, max_step)))
            ends += [np.nanmin(mean), np.nanmax(mean)]
            if spec.options.get("band", "yes") == "yes" and np.isfinite(low).any():
                ends += [np.nanmin(low), np.nanmax(high)]
        tables[id(p)] = rows
    lo, hi = (min(ends), max(ends)) if ends else (0.0, 1.0)
    ctx.shared["ylim"] = padded_range(lo, hi)
    ctx.shared.update(line_tables=tables, gap_rule=rule, max_step=max_step)
    ordered = ctx.data.levels.get(spec.x) if spec.x else None
    if ordered is not None:     # an ordered text x (figkit.data._ordered_positions)
        ctx.shared["xlevels"] = list(ordered)
        ctx.shared["xlim"] = (-0.5, len(ordered) - 0.5)
    # Whole-number x (months, years, doses in steps) gets whole-number ticks: "2.5" of a month
    # is no value the data can take.
    ctx.shared["whole_x"] = bool(x_all.size) and spec.options.get("x_scale", "linear") == "linear" \
        and bool(np.all(np.equal(np.mod(x_all, 1), 0)))
    if spec.options.get("gap", "auto") == "none":
        ctx.cautions.append("gap=none: lines bridge every step between x values, also missing "
                            "periods, and so draw values that were never measured")


def _line_cues(ctx: Context) -> tuple[dict, dict]:
    """Markers and dash patterns, one each per colour group in legend order (readable in
    greyscale); a single line is solid with round markers."""
    if not ctx.colours:
        return {}, {}
    order = list(ctx.colours)
    return ({lv: MARKER_SHAPES[i % len(MARKER_SHAPES)] for i, lv in enumerate(order)},
            {lv: DASH_PATTERNS[i % len(DASH_PATTERNS)] for i, lv in enumerate(order)})


def draw_lines(ax, panel: Panel, ctx: Context) -> dict:
    spec, sh = ctx.spec, ctx.shared
    markers, dashes = _line_cues(ctx)
    size = float(spec.style.rc.get("lines.markersize", 2.5))
    band = spec.options.get("band", "yes") == "yes"
    groups, repeated = [], False
    for level, hexc, xs, n, mean, low, high, runs in sh["line_tables"][id(panel)]:
        colour = ctx.use(hexc or NEUTRAL)
        per_x = bool((n > 1).any())
        repeated |= per_x
        for a, b in runs:
            if band and per_x and b - a > 1:
                ok = np.isfinite(low[a:b])
                ax.fill_between(xs[a:b], np.where(ok, low[a:b], mean[a:b]),
                                np.where(ok, high[a:b], mean[a:b]), color=colour,
                                alpha=BAND_ALPHA, linewidth=0, zorder=2)
            ax.plot(xs[a:b], mean[a:b], color=colour, linewidth=1.0, zorder=3,
                    linestyle=dashes.get(level, "-"), marker=markers.get(level, "o"),
                    markersize=size * 1.2, markeredgecolor="white", markeredgewidth=0.3)
        groups.append({"group": level, "n": int(n.sum()), "x_values": int(len(xs)),
                       "segments": len(runs), "breaks": [float(xs[a]) for a, _ in runs[1:]],
                       "per_x": [{"x": float(xs[i]), "n": int(n[i]), "mean": float(mean[i]),
                                  "ci_low": None if not np.isfinite(low[i]) else float(low[i]),
                                  "ci_high": None if not np.isfinite(high[i]) else float(high[i])}
                                 for i in range(len(xs))]})
    ordered = sh.get("xlevels")
    if ordered is not None:     # category labels at their positions (the layout arranges them)
        ax.set_xticks(range(len(ordered)))
        ax.grid(False, axis="x")
        for g in groups:
            for pt in g["per_x"]:
                pt["x_label"] = shown(ordered[int(pt["x"])])
            g["break_labels"] = [shown(ordered[int(b)]) for b in g["breaks"]]   # breaks: positions
    elif sh.get("whole_x"):
        from matplotlib.ticker import MaxNLocator
        ax.xaxis.set_major_locator(MaxNLocator(integer=True))
    rec = {"groups": groups, "gap": sh["gap_rule"],
           "line_is": ("the mean of y at each x (x values repeat), with its 95% t interval "
                       "as a band" if band else "the mean of y at each x (x values repeat)")
           if repeated else "the single value of y at each x"}
    if repeated:
        few = min((pt["n"] for g in groups for pt in g["per_x"]), default=0)
        if few < 2:
            rec.setdefault("notes", []).append("x values with a single row have no interval")
    return rec


def _bandwidth_rule(text: str):
    return text if text in ("scott", "silverman") else float(text)


def _category_axis(ax, levels: list) -> None:
    ax.set_xticks(range(len(levels)))
    ax.set_xticklabels([label_text(v) for v in levels])
    set_limits(ax, (-0.6, len(levels) - 0.4))
    ax.grid(False, axis="x")


# ---------------------------------------------------------------------------- density curves

def prepare_density(ctx: Context) -> None:
    spec, panels = ctx.spec, ctx.data.panels
    x = _values(panels, spec.x)
    lo, hi = (np.nanmin(x), np.nanmax(x)) if x.size else (0.0, 1.0)
    # The shared grid runs three bandwidths past the data, where a Gaussian kernel has all but
    # 0.3% of its mass, so no curve is cut off with a vertical edge at the range's end.
    h = stats.kde_bandwidth(x, _bandwidth_rule(spec.options.get("bandwidth", "scott"))) \
        if x.size > 1 and np.ptp(x) > 0 else 0.0
    ctx.shared["grid"] = np.linspace(lo - 3 * h, hi + 3 * h, 384)
    ctx.shared["xlim"] = padded_range(lo - 3 * h, hi + 3 * h, 0.0)


def draw_density(ax, panel: Panel, ctx: Context) -> dict:
    spec = ctx.spec
    grid = ctx.shared["grid"]
    groups = []
    for level, hexc, part in _groups(panel, ctx):
        v = part[spec.x].to_numpy(dtype=float)
        if len(v) < 2 or np.ptp(v) == 0:
            continue
        if len(v) < FEW_POINTS:
            ctx.cautions.append(f"panel '{panel.label or 'all'}': density curve over only {len(v)} points")
        bw = stats.kde_bandwidth(v, _bandwidth_rule(spec.options.get("bandwidth", "scott")))
        inside = grid[(grid >= v.min() - 3 * bw) & (grid <= v.max() + 3 * bw)]
        dens = stats.kde(v, inside, bw)
        colour = ctx.use(hexc or NEUTRAL)
        ax.fill_between(inside, 0, dens, color=colour, alpha=0.25, linewidth=0, zorder=2)
        ax.plot(inside, dens, color=colour, linewidth=0.9, zorder=3,
                linestyle=cue_dashes(ctx).get(level, "-"))
        groups.append({"group": level, "n": len(v), "bandwidth": bw})
    return {"groups": groups}


# ---------------------------------------------------------------------------- histogram

def prepare_histogram(ctx: Context) -> None:
    spec, panels = ctx.spec, ctx.data.panels
    x = _values(panels, spec.x)
    rule = spec.options.get("bins", "fd")
    rule = int(float(rule)) if rule not in ("fd", "sturges") else rule
    # On a scaled axis the recorded grid of the raw values says nothing about log10 values.
    exact = spec.options.get("edges", "aligned") == "exact" or \
        spec.options.get("x_scale", "linear") != "linear"
    streamed = getattr(ctx.data, "streamed", None)
    if streamed and streamed.get("bin_edges"):      # counted while streaming, on these edges
        edges = np.asarray(streamed["bin_edges"])
        info = dict(streamed["bin_info"])
    else:
        # Edges from the pooled data of every panel: the same bins everywhere (comparable panels).
        raw = stats.bin_edges(x, rule) if x.size else np.linspace(0, 1, 11)
        # A rule's width may move to the recorded grid (said in the sidecar); a count stays.
        edges, info = stats.bin_layout(raw, rule, stats.data_resolution(x), exact)
    ctx.shared["edges"] = edges
    ctx.shared["bin_rule"] = rule
    ctx.shared["bin_info"] = info


def draw_histogram(ax, panel: Panel, ctx: Context) -> dict:
    spec, edges = ctx.spec, ctx.shared["edges"]
    if panel.tally is not None:
        counts = panel.tally.hist_counts
        if counts is None:
            counts = np.zeros(len(edges) - 1, dtype=np.int64)
    else:
        counts, _ = np.histogram(panel.frame[spec.x].to_numpy(dtype=float), bins=edges)
    colour = ctx.use(NEUTRAL)
    ax.stairs(counts, edges, fill=True, color=colour, alpha=0.85, zorder=2)
    ax.stairs(counts, edges, color="white", linewidth=0.3, zorder=3)
    info = ctx.shared["bin_info"]
    return {"bins": len(edges) - 1, "bin_rule": str(ctx.shared["bin_rule"]),
            "bin_width": float(edges[1] - edges[0]), "rule_bin_width": info["rule_width"],
            "aligned_to_step": info["aligned_to_step"],
            "bin_counts": [int(c) for c in counts]}


# ---------------------------------------------------------------------------- counts

def _counts(frame: pd.DataFrame, keys: list[str], weight: str | None) -> pd.Series:
    if weight:
        return frame.groupby(keys, observed=True, sort=False)[weight].sum()
    return frame.groupby(keys, observed=True, sort=False).size()


def prepare_counts(ctx: Context) -> None:
    ctx.shared["xlevels"] = _levels(ctx, ctx.spec.x)


def draw_count_bars(ax, panel: Panel, ctx: Context) -> dict:
    spec = ctx.spec
    levels = ctx.shared["xlevels"]
    groups = list(ctx.colours.items()) if ctx.colours else [(None, NEUTRAL)]
    k = len(groups)
    width = 0.8 / k
    table = []
    if panel.n:
        keys = [spec.x] + ([spec.colour] if spec.colour else [])
        counts = _counts(panel.frame, keys, spec.weight)
        for j, (level, hexc) in enumerate(groups):
            heights = []
            for lv in levels:
                key = (lv, level) if spec.colour else lv
                heights.append(float(counts.get(key, 0)))
            pos = np.arange(len(levels)) - 0.4 + width * (j + 0.5)
            ax.bar(pos, heights, width=width * 0.92, color=ctx.use(hexc), linewidth=0, zorder=2)
            for lv, h in zip(levels, heights):
                table.append({"x": lv, "group": level, "count": h})
    _category_axis(ax, levels)
    return {"counts": table}


def draw_shares(ax, panel: Panel, ctx: Context) -> dict:
    spec = ctx.spec
    levels = ctx.shared["xlevels"]
    table = []
    if panel.n:
        counts = _counts(panel.frame, [spec.x, spec.colour], spec.weight)
        mat = np.array([[float(counts.get((lv, g), 0)) for g in ctx.colours] for lv in levels])
        totals = mat.sum(axis=1)
        share = stats.shares(mat)
        bottom = np.zeros(len(levels))
        for j, (g, hexc) in enumerate(ctx.colours.items()):
            ax.bar(np.arange(len(levels)), share[:, j], bottom=bottom, width=0.72,
                   color=ctx.use(hexc), linewidth=0.3, edgecolor="white", zorder=2)
            bottom += share[:, j]
        want_ci = spec.options.get("interval") == "wilson" and not spec.weight
        for i, lv in enumerate(levels):
            for j, g in enumerate(ctx.colours):
                entry = {"x": lv, "group": g, "count": mat[i, j], "total": totals[i], "share": share[i, j]}
                if want_ci and totals[i] > 0:
                    lo, hi = stats.wilson_interval(mat[i, j], totals[i])
                    entry.update(share_ci_low=float(lo), share_ci_high=float(hi))
                table.append(entry)
    _category_axis(ax, levels)
    set_limits(ax, y=(0, 1))
    ax.yaxis.set_major_formatter(_percent)
    return {"shares": table}


def _percent_fmt(v, _pos):
    return f"{v * 100:.0f}%"


from matplotlib.ticker import FuncFormatter  # noqa: E402 - matplotlib is always present

_percent = FuncFormatter(_percent_fmt)


def prepare_tiles(ctx: Context) -> None:
    spec = ctx.spec
    ctx.shared["xlevels"] = _levels(ctx, spec.x)
    ctx.shared["ylevels"] = _levels(ctx, spec.y)
    top = 0.0
    for p in ctx.data.panels:
        if p.n:
            top = max(top, float(_counts(p.frame, [spec.x, spec.y], spec.weight).max()))
    import matplotlib.colors as mcolors
    ctx.norm = mcolors.Normalize(0, max(top, 1))     # one scale for every panel
    ctx.colour_title = spec.axis_title(spec.weight) if spec.weight else "Count"


def draw_tiles(ax, panel: Panel, ctx: Context) -> dict:
    spec = ctx.spec
    xl, yl = ctx.shared["xlevels"], ctx.shared["ylevels"]
    mat = np.zeros((len(yl), len(xl)))
    if panel.n:
        counts = _counts(panel.frame, [spec.x, spec.y], spec.weight)
        for i, yv in enumerate(yl):
            for j, xv in enumerate(xl):
                mat[i, j] = float(counts.get((xv, yv), 0))
    mesh = ax.pcolormesh(np.arange(len(xl) + 1) - 0.5, np.arange(len(yl) + 1) - 0.5, mat,
                         cmap=ctx.cmap, norm=ctx.norm, edgecolors="white", linewidth=0.5, zorder=1)
    ctx.mappables.append(mesh)
    rgba = ctx.cmap(ctx.norm(mat))
    from .colour import relative_luminance
    fontsize = spec.style.tick_pt
    for i in range(len(yl)):
        for j in range(len(xl)):
            light = relative_luminance(rgba[i, j, :3]) > 0.4
            # Kept so the drawing stage can check at final size that each number fits its tile.
            ctx.shared.setdefault("tile_texts", []).append(
                ax.text(j, i, f"{mat[i, j]:.0f}", ha="center", va="center", fontsize=fontsize,
                        color=INK if light else "white", zorder=3))
    ax.set_xticks(range(len(xl)))
    ax.set_xticklabels([label_text(v) for v in xl])
    ax.set_yticks(range(len(yl)))
    ax.set_yticklabels([label_text(v) for v in yl])
    set_limits(ax, (-0.5, len(xl) - 0.5), (len(yl) - 0.5, -0.5))   # first y level on top, as a table reads
    ax.grid(False)
    ax.tick_params(length=0)
    return {"tiles": [{"x": xv, "y": yv, "count": mat[i, j]} for i, yv in enumerate(yl)
                      for j, xv in enumerate(xl)]}


@dataclass(frozen=True)
class Drawer:
    prepare: object
    draw: object
    finish: object = None
    colour_bar: bool = False     # draws with ctx.cmap / ctx.norm
    zero_y: bool = False         # y axis starts at 0 (bars, counts, densities): never truncated


DRAWERS = {
    "scatter": Drawer(prepare_scatter, draw_scatter),
    "hexbins": Drawer(prepare_hexbins, draw_hexbins, finish_hexbins, colour_bar=True),
    "box": Drawer(prepare_groups_y, draw_box),
    "violin": Drawer(prepare_groups_y, draw_violin),
    "means": Drawer(prepare_means, draw_means),
    "lines": Drawer(prepare_lines, draw_lines),
    "density": Drawer(prepare_density, draw_density, zero_y=True),
    "histogram": Drawer(prepare_histogram, draw_histogram, zero_y=True),
    "count-bars": Drawer(prepare_counts, draw_count_bars, zero_y=True),
    "shares": Drawer(prepare_counts, draw_shares),
    "tiles": Drawer(prepare_tiles, draw_tiles, colour_bar=True),
}
