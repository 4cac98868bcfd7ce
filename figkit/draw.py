"""Stage 6b, the drawing: one FigureSpec + its FigureData -> a matplotlib Figure at print size.

Order of work: colours -> grid (layout.choose_grid) -> axes -> chart kind's prepare/draw/finish ->
outer tick labels only -> measure the tick labels actually drawn and place everything again in
mm -> panel titles, axis titles, legend or colour bar.  Call inside ``matplotlib.rc_context`` with
the house style's rcParams (see :func:`figkit.render.render_spec`).
"""
from __future__ import annotations

import numpy as np
import pandas as pd

from dataclasses import replace

from . import layout as L
from .charts import DRAWERS, NEUTRAL, Context
from .colour import assign_categories
from .data import FigureData
from .errors import FigkitError
from .spec import FigureSpec
from .style import mm_to_in, pt_to_mm

TICK_MM = pt_to_mm(2.0 + 1.5)      # tick length + pad (pt in the style sheets)
HEADER_RULE = "#9AA1A9"


def _text_width_mm(text: str, pt: float) -> float:
    """Width estimate for planning only (0.6 em per character for DejaVu Sans, common practice);
    the final layout uses measured extents."""
    return len(str(text)) * pt * 0.6 * 25.4 / 72


def _colour_setup(spec: FigureSpec, data: FigureData, ctx: Context) -> str | None:
    """Decide the colour mapping and which key the figure needs: 'categories', 'bar' or None."""
    import matplotlib

    ctx.cmap = matplotlib.colormaps[spec.style.sequential]
    drawer = DRAWERS[spec.chart.name]
    if spec.colour:
        if spec.colour in data.levels:
            pinned = spec.pinned.get(spec.colour)
            try:
                ctx.colours = assign_categories(data.levels[spec.colour], spec.style.palette, pinned)
            except FigkitError as exc:
                raise exc.at(row=spec.row, figure=spec.id, field="colour") from None
            ctx.colour_title = spec.axis_title(spec.colour)
            return "categories"
        import matplotlib.colors as mcolors
        vals = np.concatenate([p.frame[spec.colour].to_numpy(dtype=float) for p in data.panels if p.n]
                              or [np.array([0.0, 1.0])])
        ctx.norm = mcolors.Normalize(float(np.nanmin(vals)), float(np.nanmax(vals)))
        ctx.colour_title = spec.axis_title(spec.colour)
        return "bar"
    return "bar" if drawer.colour_bar else None


def _legend_width(kind: str | None, ctx: Context, spec: FigureSpec) -> float:
    """Width (mm) to reserve for the key beside the grid.  A categorical legend is measured by
    drawing it once on a scratch figure, so long labels are never clipped."""
    pt = spec.style.tick_pt
    if kind == "categories":
        from matplotlib.backends.backend_agg import FigureCanvasAgg
        from matplotlib.figure import Figure
        scratch = Figure(figsize=(4, 4), dpi=72)
        FigureCanvasAgg(scratch)
        leg = scratch.legend(handles=_legend_handles(ctx, spec), title=ctx.colour_title,
                             fontsize=pt, title_fontsize=pt, borderpad=0, borderaxespad=0)
        width = leg.get_window_extent(scratch.canvas.get_renderer()).width / 72 * 25.4
        return width + 1.0
    if kind == "bar":
        return 3.0 + 1.0 + _text_width_mm("00000", pt) + 3.5
    return 0.0


def _legend_handles(ctx: Context, spec: FigureSpec) -> list:
    from matplotlib.lines import Line2D
    from matplotlib.patches import Patch
    if spec.chart.name == "scatter":
        return [Line2D([], [], linestyle="none", marker="o", markersize=3.5, markerfacecolor=hexc,
                       markeredgewidth=0, label=str(level)) for level, hexc in ctx.colours.items()]
    return [Patch(facecolor=hexc, edgecolor="none", label=str(level))
            for level, hexc in ctx.colours.items()]


def _margins(spec: FigureSpec, *, titles: bool, ytick_w: float, xtick_h: float,
             legend_w: float, xtitle: bool, ytitle: bool) -> L.Margins:
    st = spec.style
    line = L.text_mm(st.base_pt)
    free_x = spec.scales in ("free", "free-x")
    free_y = spec.scales in ("free", "free-y")
    header = L.text_mm(st.title_pt) * 2 + 1.2 if spec.grid else 0.0
    return L.Margins(
        left=(line + 0.8 if ytitle else 0.6) + ytick_w + TICK_MM + 0.3,
        right=1.2 + legend_w + (header if spec.grid else 0.0),
        top=0.8 + header,
        bottom=(line + 0.6 if xtitle else 0.6) + xtick_h + TICK_MM,
        title=L.text_mm(st.title_pt) + 0.9 if titles else 0.0,
        hgap=st.gap_mm + (ytick_w + TICK_MM if free_y else 0.0),
        vgap=st.gap_mm * 0.8 + (xtick_h + TICK_MM if free_x else 0.0),
    )


def _measure(fig, axes, which: str, visible) -> float:
    """Largest extent (mm) of the tick labels actually drawn: width for 'y', height for 'x'."""
    renderer = fig.canvas.get_renderer()
    best = 0.0
    for ax, show in zip(axes, visible):
        if not show:
            continue
        axis = ax.yaxis if which == "y" else ax.xaxis
        labels = axis.get_ticklabels()
        ax.xaxis.get_tightbbox(renderer) if which == "x" else ax.yaxis.get_tightbbox(renderer)
        for t in labels:
            if t.get_visible() and t.get_text():
                bb = t.get_window_extent(renderer)
                size = bb.width if which == "y" else bb.height
                best = max(best, size / fig.dpi * 25.4)
    return best


def _right_overhang(fig, axes, visible) -> float:
    """How far (mm) x tick labels reach past the right edge of their panel column's right end."""
    renderer = fig.canvas.get_renderer()
    width = fig.bbox.width
    worst = 0.0
    for ax, show in zip(axes, visible):
        if not show:
            continue
        ax.xaxis.get_tightbbox(renderer)
        for t in ax.get_xticklabels():
            if t.get_visible() and t.get_text():
                bb = t.get_window_extent(renderer)
                panel_right = ax.get_position().x1 * width
                worst = max(worst, (bb.x1 - panel_right) / fig.dpi * 25.4)
    return worst


def _rotate_if_crowded(fig, axes, visible) -> bool:
    """Tilt categorical x labels that would touch their neighbours (measured, not guessed)."""
    renderer = fig.canvas.get_renderer()
    crowded = False
    for ax, show in zip(axes, visible):
        if not show:
            continue
        ax.xaxis.get_tightbbox(renderer)
        boxes = [t.get_window_extent(renderer) for t in ax.get_xticklabels() if t.get_text()]
        for a, b in zip(boxes, boxes[1:]):
            if a.x1 + 1 > b.x0:
                crowded = True
    if crowded:
        for ax in axes:
            for t in ax.get_xticklabels():
                t.set_rotation(35)
                t.set_ha("right")
                t.set_rotation_mode("anchor")
    return crowded


def _panel_title(panel, spec: FigureSpec) -> str:
    if not panel.keys:
        return ""
    (fld, value), = panel.keys.items()
    label = spec.labels.get(fld, (fld, ""))[0]
    # A bare number says nothing on its own: name the field beside it.
    if isinstance(value, (int, float, np.integer, np.floating)) and not isinstance(value, bool):
        return f"{label} {value:g}" if isinstance(value, float) else f"{label} {value}"
    return str(value)


def _wrap(text: str, width_mm: float, pt: float) -> list[str]:
    """Greedy word wrap to an estimated width (planning estimate, see _text_width_mm)."""
    lines, line = [], ""
    for word in str(text).split():
        trial = f"{line} {word}".strip()
        if line and _text_width_mm(trial, pt) > width_mm:
            lines.append(line)
            line = word
        else:
            line = trial
    return lines + [line] if line else lines


def _shorten(fig, text_artist, max_mm: float) -> None:
    """Shorten a title with an ellipsis until it fits ``max_mm`` (never overlaps its neighbour)."""
    renderer = fig.canvas.get_renderer()
    text = text_artist.get_text()
    while text and text_artist.get_window_extent(renderer).width / fig.dpi * 25.4 > max_mm:
        text = text[:-2] if len(text) > 2 else ""
        text_artist.set_text(text.rstrip() + "…")
        if len(text) <= 2:
            break


def build_figure(spec: FigureSpec, data: FigureData):
    """Draw the figure; returns (figure, record) where record holds layout and per-panel numbers."""
    import matplotlib.pyplot as plt
    from matplotlib.figure import Figure

    st = spec.style
    panels = data.panels
    ctx = Context(spec=spec, data=data, panel_mm=(40.0, 30.0))
    key = _colour_setup(spec, data, ctx)
    if spec.chart.name == "scatter":
        # Bins may be chosen from the density; then a colour bar is needed too.
        pass
    xtitle = bool(spec.x)
    ytitle = spec.chart.y is not None or spec.chart.name in ("histogram", "density", "count-bars", "shares")
    titles = len(spec.strata) == 1

    est_y = max(_text_width_mm("0000", st.tick_pt), 5.0)
    if spec.chart.y == "categorical":
        est_y = max(_text_width_mm(str(v), st.tick_pt) for v in data.levels.get(spec.y, ["x"]))
    est_x = L.text_mm(st.tick_pt)

    def margins(legend_w, ytick_w=est_y, xtick_h=est_x):
        return _margins(spec, titles=titles, ytick_w=ytick_w, xtick_h=xtick_h, legend_w=legend_w,
                        xtitle=xtitle, ytitle=ytitle)

    def pick(m):
        try:
            if spec.grid:
                rl, cl = data.grid_levels
                return L.fixed_grid(len(rl), len(cl), spec.width_mm, m, aspect=st.panel_aspect,
                                    min_panel_mm=st.panel_min_mm, max_height_mm=st.max_height_mm,
                                    height_mm=spec.height_mm)
            return L.choose_grid(len(panels), spec.width_mm, m, min_panel_mm=st.panel_min_mm,
                                 aspect=st.panel_aspect, max_height_mm=st.max_height_mm,
                                 columns=spec.columns, height_mm=spec.height_mm)
        except FigkitError as exc:
            raise exc.at(row=spec.row, figure=spec.id) from None

    # Legend: in an empty cell when the wrapped grid leaves one, else beside the grid.
    # Scatter may switch to bins (and need a colour bar) only once the panel size is known.
    legend_w = _legend_width(key, ctx, spec)
    grid = pick(margins(0.0))
    in_cell = key is not None and grid.empty_cells > 0 and not spec.grid
    if key is not None and not in_cell:
        grid = pick(margins(legend_w))
    ctx.panel_mm = (grid.panel_w, grid.panel_h)
    drawer = DRAWERS[spec.chart.name]
    drawer.prepare(ctx)
    if spec.chart.name == "scatter" and ctx.shared.get("mode") == "bins" and key is None:
        key = "bar"
        legend_w = _legend_width(key, ctx, spec)
        in_cell = grid.empty_cells > 0 and not spec.grid
        if not in_cell:
            grid = pick(margins(legend_w))
            ctx.panel_mm = (grid.panel_w, grid.panel_h)

    m = margins(0.0 if in_cell or key is None else legend_w)
    height = spec.height_mm or L.grid_height(grid.rows, grid.panel_h, m)
    fig = Figure(figsize=(mm_to_in(spec.width_mm), mm_to_in(height)), dpi=72)
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    FigureCanvasAgg(fig)

    share_x = spec.scales in ("shared", "free-y")
    share_y = spec.scales in ("shared", "free-x")
    axes, records = [], []
    first = None
    for i, panel in enumerate(panels):
        ax = fig.add_axes((0, 0, 0.1, 0.1), sharex=first if share_x else None,
                          sharey=first if share_y else None)
        first = first or ax
        axes.append(ax)
    for ax, panel in zip(axes, panels):
        rec = drawer.draw(ax, panel, ctx) or {}
        if panel.n == 0:
            ax.text(0.5, 0.5, "no data", transform=ax.transAxes, ha="center", va="center",
                    fontsize=st.tick_pt, color="#8A9099")
            rec.setdefault("notes", []).append("no rows in this panel")
        records.append(rec)
    if drawer.finish:
        drawer.finish(ctx)
    if ctx.shared.get("mode") == "bins" and spec.chart.name == "scatter":
        from .charts import finish_hexbins
        finish_hexbins(ctx)
    if drawer.zero_y:
        tops = []
        for ax in axes:
            ax.relim()
            ax.autoscale_view()
            tops.append(ax.get_ylim()[1])
        for ax, top in zip(axes, tops):
            ax.set_ylim(0, max(tops) if share_y else top)
    for ax in axes:
        if "xlim" in ctx.shared and spec.chart.x == "numeric" and share_x:
            ax.set_xlim(*ctx.shared["xlim"])
        if "ylim" in ctx.shared and spec.chart.y == "numeric" and share_y:
            ax.set_ylim(*ctx.shared["ylim"])
        grid_axis = {"none": None, "x": "x", "y": "y", "both": "both"}[st.grid]
        if spec.chart.name not in ("tiles",):
            ax.grid(False)
            if grid_axis:
                ax.grid(True, axis=grid_axis)
            if spec.chart.x == "categorical":
                ax.grid(False, axis="x")

    # Tick labels only on the outer panels when an axis is shared.
    n = len(panels)
    rows_cols = [(i // grid.cols, i % grid.cols) for i in range(n)]
    show_x = [not share_x or L.below_empty(grid, i) for i in range(n)]
    show_y = [not share_y or c == 0 for (_, c) in rows_cols]
    for ax, sx, sy in zip(axes, show_x, show_y):
        ax.tick_params(labelbottom=sx, labelleft=sy)

    # Measure what was drawn and place everything again: twice, since the ticks chosen depend
    # on the panel size; then once more if categorical labels had to be tilted.
    crowded = False
    legend_room = 0.0 if in_cell or key is None else legend_w
    for step in range(3):
        if step == 2:
            crowded = spec.chart.x == "categorical" and _rotate_if_crowded(fig, axes, show_x)
            if not crowded:
                break
        ytick_w = _measure(fig, axes, "y", show_y)
        xtick_h = _measure(fig, axes, "x", show_x)
        overhang = _right_overhang(fig, axes, show_x)
        m = margins(legend_room, ytick_w, xtick_h)
        if overhang > m.right:
            m = replace(m, right=overhang + 0.3)
        grid = pick(m)
        height = spec.height_mm or L.grid_height(grid.rows, grid.panel_h, m)
        fig.set_size_inches(mm_to_in(spec.width_mm), mm_to_in(height))
        for i, ax in enumerate(axes):
            l, b, w, h = L.panel_box(grid, i, m, height)
            ax.set_position((l / spec.width_mm, b / height, w / spec.width_mm, h / height))
    W, H = spec.width_mm, height

    def fx(mm):
        return mm / W

    def fy(mm):
        return mm / H

    # Panel titles (wrapped) or row/column headers (two-way grid), in our own look: left-aligned
    # titles over a hairline rule for wrapped panels; headers with a rule for grids.
    if titles:
        for i, (ax, panel) in enumerate(zip(axes, panels)):
            l, b, w, h = L.panel_box(grid, i, m, H)
            t = fig.text(fx(l), fy(b + h + 0.55), _panel_title(panel, spec), fontsize=st.title_pt,
                         fontweight="bold", ha="left", va="bottom")
            _shorten(fig, t, w)
            fig.add_artist(_rule(fig, fx(l), fx(l + w), fy(b + h + 0.35)))
    if spec.grid:
        rf, cf = spec.strata
        rl, cl = data.grid_levels
        l0, b0, w0, h0 = L.panel_box(grid, 0, m, H)
        top_of_grid = b0 + h0
        for j, cv in enumerate(cl):
            l, b, w, h = L.panel_box(grid, j, m, H)
            t = fig.text(fx(l + w / 2), fy(top_of_grid + 0.6), str(cv), fontsize=st.title_pt,
                         ha="center", va="bottom")
            _shorten(fig, t, w)
            fig.add_artist(_rule(fig, fx(l), fx(l + w), fy(top_of_grid + 0.4)))
        lw0, _, ww, _ = L.panel_box(grid, 0, m, H)
        lw1, _, _, _ = L.panel_box(grid, grid.cols - 1, m, H)
        fig.text(fx((lw0 + lw1 + ww) / 2), fy(top_of_grid + 0.6 + L.text_mm(st.title_pt) + 0.3),
                 spec.labels.get(cf, (cf, ""))[0], fontsize=st.title_pt, fontweight="bold",
                 ha="center", va="bottom")
        right_edge = None
        for i, rv in enumerate(rl):
            l, b, w, h = L.panel_box(grid, i * grid.cols + grid.cols - 1, m, H)
            right_edge = l + w
            fig.text(fx(l + w + 0.6), fy(b + h / 2), str(rv), fontsize=st.title_pt,
                     rotation=270, ha="center", va="bottom", rotation_mode="anchor")
            fig.add_artist(_rule(fig, fx(l + w + 0.4), fx(l + w + 0.4), fy(b), fy(b + h)))
        lb = L.panel_box(grid, (grid.rows - 1) * grid.cols, m, H)
        mid = (lb[1] + top_of_grid) / 2
        fig.text(fx(right_edge + 0.6 + L.text_mm(st.title_pt) + 0.3), fy(mid),
                 spec.labels.get(rf, (rf, ""))[0], fontsize=st.title_pt, fontweight="bold",
                 rotation=270, ha="center", va="bottom", rotation_mode="anchor")

    # One x title and one y title for the whole figure, with units.
    lefts = [L.panel_box(grid, i, m, H) for i in range(n)]
    gx0 = min(b[0] for b in lefts)
    gx1 = max(b[0] + b[2] for b in lefts)
    gy0 = min(b[1] for b in lefts)
    gy1 = max(b[1] + b[3] for b in lefts)
    if xtitle:
        fig.text(fx((gx0 + gx1) / 2), fy(0.5), spec.axis_title(spec.x), fontsize=st.base_pt,
                 ha="center", va="bottom")
    if ytitle:
        # Anchored before rotation: the text's top (its left side once turned) sits at 0.5 mm.
        fig.text(fx(0.5), fy((gy0 + gy1) / 2), _y_title(spec), fontsize=st.base_pt, rotation=90,
                 ha="center", va="top", rotation_mode="anchor")

    # Legend or colour bar.
    if key is not None:
        if in_cell:
            c0 = grid.panels % grid.cols
            l, b, w, h = L.panel_box(grid, (grid.rows - 1) * grid.cols + c0, m, H)
            x0, ytop = l + 1.0, b + h + m.title - (xtick_h + TICK_MM if show_x else 0) * 0
            # The empty cell's space starts below the x tick labels of the panel above it.
            ytop = b + h + m.title - xtick_h - TICK_MM - 0.5
            room_w = (grid.cols - c0) * (grid.panel_w + m.hgap) - m.hgap - 1.0
        else:
            x0 = gx1 + 1.2 + (L.text_mm(st.title_pt) * 2 + 1.2 if spec.grid else 0.0)
            ytop, room_w = gy1, legend_w
        _draw_key(fig, key, ctx, spec, x0, ytop, room_w, W, H, horizontal=in_cell)

    record = {
        "size_mm": [round(W, 3), round(H, 3)],
        "layout": {"rows": grid.rows, "cols": grid.cols, "panels": n,
                   "panel_mm": [round(grid.panel_w, 2), round(grid.panel_h, 2)],
                   "empty_cells": grid.empty_cells, "key": key,
                   "key_place": None if key is None else ("empty cell" if in_cell else "right"),
                   "x_labels_tilted": bool(spec.chart.x == "categorical" and crowded)},
        "panel_records": records,
        "colours": ctx.used_colours,
        "cautions": ctx.cautions,
        "shared": {k: v for k, v in ctx.shared.items() if k in ("mode", "alpha", "densest", "bin_rule")},
    }
    if "edges" in ctx.shared:
        record["bin_edges"] = [float(e) for e in ctx.shared["edges"]]
    return fig, record


def _y_title(spec: FigureSpec) -> str:
    if spec.y and spec.chart.y is not None:
        return spec.axis_title(spec.y)
    return {"histogram": "Count", "density": "Density",
            "count-bars": spec.axis_title(spec.weight) if spec.weight else "Count",
            "shares": "Share" + (f" of {spec.axis_title(spec.weight).lower()}" if spec.weight else "")
            }.get(spec.chart.name, "")


def _rule(fig, x0, x1, y0, y1=None):
    from matplotlib.lines import Line2D
    return Line2D([x0, x1], [y0, y0 if y1 is None else y1], transform=fig.transFigure,
                  color=HEADER_RULE, linewidth=0.4)


def _draw_key(fig, key, ctx: Context, spec: FigureSpec, x0, ytop, room_w, W, H, horizontal):
    st = spec.style
    if key == "categories":
        handles = _legend_handles(ctx, spec)
        ncol = 1
        if horizontal:
            per = max(_text_width_mm(str(k), st.tick_pt) for k in ctx.colours) + 5
            ncol = max(1, min(len(handles), int(room_w // per)))
        fig.legend(handles=handles, title=ctx.colour_title, loc="upper left",
                   bbox_to_anchor=(x0 / W, ytop / H), bbox_transform=fig.transFigure, ncol=ncol,
                   fontsize=st.tick_pt, title_fontsize=st.tick_pt, alignment="left",
                   borderaxespad=0, borderpad=0, columnspacing=1.0)
        return
    import matplotlib.cm as cm
    mappable = ctx.mappables[0] if ctx.mappables else cm.ScalarMappable(norm=ctx.norm, cmap=ctx.cmap)
    if horizontal:
        bw = min(room_w, 40.0)
        title_h = L.text_mm(st.tick_pt)
        cax = fig.add_axes(((x0) / W, (ytop - title_h - 0.5 - 2.2) / H, bw / W, 2.2 / H))
        bar = fig.colorbar(mappable, cax=cax, orientation="horizontal")
        fig.text(x0 / W, (ytop - title_h) / H, ctx.colour_title, fontsize=st.tick_pt, ha="left",
                 va="bottom")
    else:
        lines = _wrap(ctx.colour_title, room_w, st.tick_pt)
        title_h = L.text_mm(st.tick_pt, len(lines)) + 0.8
        bh = min(35.0, max(12.0, ytop - title_h - 8))
        cax = fig.add_axes((x0 / W, (ytop - title_h - bh) / H, 2.4 / W, bh / H))
        bar = fig.colorbar(mappable, cax=cax, orientation="vertical")
        fig.text(x0 / W, ytop / H, "\n".join(lines), fontsize=st.tick_pt, ha="left", va="top",
                 linespacing=1.1)
    bar.outline.set_linewidth(0.4)
    bar.ax.tick_params(labelsize=st.tick_pt, width=0.4, length=1.5)
