"""Stage 6b, the drawing: one FigureSpec + its FigureData -> a matplotlib Figure at print size.

Order of work: colours -> grid (layout.choose_grid) -> axes -> chart kind's prepare/draw/finish ->
outer tick labels only -> measure what was drawn and place everything again in mm until grid and
margins settle (tick labels, crowded category labels tilted or turned upright, panel and axis
titles on one or two lines) -> panel titles, axis titles -> legend or colour bar (moved beside the
grid when it does not fit the empty cell) -> ticks pinned to what is drawn.  Call inside
``matplotlib.rc_context`` with the house style's rcParams (see :func:`figkit.render.render`).
"""
from __future__ import annotations

from dataclasses import replace

import numpy as np

from . import layout as L
from .charts import DRAWERS, Context, set_limits
from .colour import assign_categories
from .data import FigureData
from .errors import FigkitError
from .spec import FigureSpec, label_text, short_label
from .style import mm_to_in, pt_to_mm
from .text import shown

HEADER_RULE = "#9AA1A9"
ELLIPSIS = "…"
EDGE_MM = 0.3          # nothing is drawn closer than this to the canvas edge
TEXT_EDGE_MM = 0.6     # a text's box keeps this from the canvas edge (its glyphs a bit more)
LABEL_GAP_MM = 0.8     # clear space between neighbouring level labels read side by side (common practice)
TILT_DEG = 35          # first remedy for crowded category labels (common practice)
WRAP_CHARS = 16        # upright category labels longer than this go on two lines (common practice)
# Category label arrangements tried in turn until the labels clear each other: (angle, two lines).
LABEL_STEPS = ((0, False), (0, True), (TILT_DEG, False), (90, True), (90, False))


def _text_width_mm(text: str, pt: float) -> float:
    """Width estimate for planning only (0.6 em per character for DejaVu Sans, common practice);
    the final layout uses measured extents."""
    return len(str(text)) * pt * 0.6 * 25.4 / 72


def _tick_mm(spec: FigureSpec) -> float:
    """Tick length + label pad in mm, read from the style sheet (the larger of x and y)."""
    rc = spec.style.rc
    return pt_to_mm(max(float(rc.get(f"{a}tick.major.size", 2.0)) + float(rc.get(f"{a}tick.major.pad", 1.5))
                        for a in "xy"))


def _mm(fig, px: float) -> float:
    return px / fig.dpi * 25.4


# ---------------------------------------------------------------------------- what is drawn

def _in_view(axis, locs) -> np.ndarray:
    """Mask of the tick locations matplotlib draws: inside the view interval, compared in the
    axis' scale with matplotlib's own relative tolerance of 1e-10."""
    locs = np.asarray(locs, dtype=float)
    if locs.size == 0:
        return np.zeros(0, dtype=bool)
    tr = axis.get_transform()
    with np.errstate(invalid="ignore", divide="ignore"):
        lo, hi = sorted(tr.transform(np.asarray(axis.get_view_interval(), dtype=float)))
        t = tr.transform(locs)
    tol = 1e-10 * abs(hi - lo)
    return (t >= lo - tol) & (t <= hi + tol)


def _ticks_now(axis, major: bool) -> tuple[np.ndarray, list]:
    """Place the ticks an axis draws for its current size and limits, as a draw would, and return
    their locations (inside the view only) with their tick objects.

    Labels are formatted from every location the locator gives, as a draw formats them (a
    formatter's precision and offset look at all of them), but only ticks inside the view get
    objects: a locator proposes one or two beyond each end, and each matplotlib Tick costs about
    a millisecond to make.  Once the ticks are pinned (:func:`_pin_ticks`) the locations are
    exactly the ones inside the view, so a draw then uses the same tick objects in the same order.
    A repeated call with nothing changed (limits, axis box, locator, formatter, and the ticks
    still where they were put) returns the placement made before; each new placement of the
    panels forgets it (:func:`_forget_ticks`), since tick parameters may change there."""
    locator, fmt = ((axis.get_major_locator(), axis.get_major_formatter()) if major else
                    (axis.get_minor_locator(), axis.get_minor_formatter()))
    key = (locator, fmt, tuple(axis.get_view_interval()), tuple(axis.axes.bbox.bounds))
    memo = axis.__dict__.setdefault("_figkit_ticks", {})
    seen = memo.get(major)
    if seen is not None and seen[0] == key and all(
            t.get_loc() == loc for t, loc in zip(seen[2], seen[1])):
        return seen[1], seen[2]
    locs = np.asarray(axis.get_majorticklocs() if major else axis.get_minorticklocs(), dtype=float)
    texts = fmt.format_ticks(locs)
    keep = _in_view(axis, locs)
    locs = locs[keep]
    ticks = (axis.get_major_ticks if major else axis.get_minor_ticks)(len(locs))
    for tick, loc, text in zip(ticks, locs, (t for t, k in zip(texts, keep) if k)):
        tick.update_position(loc)
        tick.label1.set_text(text)
        tick.label2.set_text(text)
    memo[major] = (key, locs, ticks)
    return locs, ticks


def _forget_ticks(axes) -> None:
    """Drop the placements :func:`_ticks_now` keeps, for axes whose ticks may change in ways its
    key does not see (tick parameters, a locator's or formatter's settings)."""
    for ax in axes:
        for axis in (ax.xaxis, ax.yaxis):
            axis.__dict__.pop("_figkit_ticks", None)


def _drawn_tick_labels(axis, renderer=None) -> list:
    """Tick labels that are actually drawn: visible, non-empty and inside the view (the axis
    keeps label objects for ticks outside the view and for ticks of earlier sizes)."""
    out = []
    for major in (True, False):
        params = axis.get_tick_params(which="major" if major else "minor")
        if not any(params.get(k) for k in ("labelleft", "labelright", "labelbottom", "labeltop")):
            continue   # labels switched off (inner panels of a shared axis): nothing to place
        for tick in _ticks_now(axis, major)[1]:
            out += [t for t in (tick.label1, tick.label2) if t.get_visible() and t.get_text().strip()]
    return out


def _drawn_texts(fig) -> list:
    """Every text that is drawn, tick labels included (see :func:`_drawn_tick_labels`)."""
    renderer = fig.canvas.get_renderer()

    def shown(ts):
        return [t for t in ts if t.get_visible() and t.get_text().strip()]

    out = []
    for ax in fig.axes:
        if not ax.get_visible():
            continue
        for axis in (ax.xaxis, ax.yaxis):
            if axis.get_visible():
                out += _drawn_tick_labels(axis, renderer) + shown([axis.label, axis.offsetText])
        out += shown(ax.texts)
        leg = ax.get_legend()
        if leg is not None:
            out += shown([leg.get_title(), *leg.get_texts()])
    out += shown(fig.texts)
    for leg in fig.legends:
        out += shown([leg.get_title(), *leg.get_texts()])
    return out


def _overlap(a, b, gap: float = 0.0) -> bool:
    """Boxes overlap (tolerance 0.5 px, as figkit.checks); ``gap`` px of clear space required
    side by side."""
    return (a.x0 < b.x1 + gap - 0.5 and b.x0 < a.x1 + gap - 0.5 and
            a.y0 < b.y1 - 0.5 and b.y0 < a.y1 - 0.5)


def _outside(fig, bb) -> bool:
    # fig.bbox, not (0, 0, width, height): a part of a multi-part figure is drawn in a sub-figure
    # whose canvas starts where its cell does (figkit.compose).
    c = fig.bbox
    return bb.x0 < c.x0 - 0.5 or bb.y0 < c.y0 - 0.5 or bb.x1 > c.x1 + 0.5 or bb.y1 > c.y1 + 0.5


class _TickBoxes:
    """The tick labels each axis draws, with their boxes (px), read once for one placement:
    settle measures widths, heights and both overhangs from the same labels, so each axis'
    ticks are placed and its labels measured once per round instead of four times.  Valid
    until the axes are placed again (settle makes a new one each round)."""

    def __init__(self, fig):
        self.renderer = fig.canvas.get_renderer()
        self._seen: dict[int, list] = {}

    def __call__(self, axis) -> list:
        key = id(axis)
        if key not in self._seen:
            self._seen[key] = [(t, t.get_window_extent(self.renderer))
                               for t in _drawn_tick_labels(axis, self.renderer)]
        return self._seen[key]


def _measure(fig, axes, which: str, boxes: _TickBoxes | None = None) -> float:
    """Largest extent (mm) of the tick labels drawn: width for 'y', height for 'x'."""
    boxes = boxes or _TickBoxes(fig)
    best = 0.0
    for ax in axes:
        for _t, bb in boxes(ax.yaxis if which == "y" else ax.xaxis):
            best = max(best, _mm(fig, bb.width if which == "y" else bb.height))
    return best


def _right_overhang(fig, axes, grid: L.Grid, boxes: _TickBoxes | None = None) -> float:
    """How far (mm) x tick labels of the last panel column reach past its right edge."""
    boxes = boxes or _TickBoxes(fig)
    worst = 0.0
    for i, ax in enumerate(axes):
        if i % grid.cols != grid.cols - 1:
            continue
        right = fig.bbox.x0 + ax.get_position().x1 * fig.bbox.width
        for _t, bb in boxes(ax.xaxis):
            worst = max(worst, _mm(fig, bb.x1 - right))
    return worst


def _top_overhang(fig, axes, grid: L.Grid, boxes: _TickBoxes | None = None) -> float:
    """How far (mm) y tick labels of the first panel row reach above its top edge (a label at
    the top of the range, as 100% of a shares chart, is centred on that edge)."""
    boxes = boxes or _TickBoxes(fig)
    worst = 0.0
    for i, ax in enumerate(axes):
        if i >= grid.cols:
            break
        top = fig.bbox.y0 + ax.get_position().y1 * fig.bbox.height
        for _t, bb in boxes(ax.yaxis):
            worst = max(worst, _mm(fig, bb.y1 - top))
    return worst


def _x_labels_clash(fig, axes, side_gap_mm: float) -> bool:
    """True when drawn x tick labels touch each other or a y tick label, or leave the canvas."""
    renderer = fig.canvas.get_renderer()
    xs, ys = [], []
    for ax in axes:
        xs += [t.get_window_extent(renderer) for t in _drawn_tick_labels(ax.xaxis, renderer)]
        ys += [t.get_window_extent(renderer) for t in _drawn_tick_labels(ax.yaxis, renderer)]
    gap = side_gap_mm / 25.4 * fig.dpi
    if any(_outside(fig, b) for b in xs):
        return True
    for i, a in enumerate(xs):
        if any(_overlap(a, b, gap) for b in xs[i + 1:]) or any(_overlap(a, b) for b in ys):
            return True
    return False


# ---------------------------------------------------------------------------- fitting text

def _measurer(fig, pt: float, weight: str = "normal"):
    """A function text -> drawn width in mm at ``pt`` (measured on a scratch text of ``fig``)."""
    renderer = fig.canvas.get_renderer()
    probe = fig.text(0, 0, "", fontsize=pt, fontweight=weight)
    cache: dict[str, float] = {}

    def width(text: str) -> float:
        if text not in cache:
            probe.set_text(text)
            cache[text] = _mm(fig, probe.get_window_extent(renderer).width) if text else 0.0
            probe.set_text("")   # a probe holding text would count as drawn text
        return cache[text]

    width.close = probe.remove
    return width


def _shorten_middle(width, text: str, max_mm: float) -> str:
    """Cut characters from the middle, marked by an ellipsis, until the text fits: the start and
    the end (where panel names usually differ, e.g. a trailing number) both stay readable."""
    if width(text) <= max_mm:
        return text
    for keep in range(len(text) - 1, 0, -1):
        head = (keep + 1) // 2
        tail = keep - head
        cand = text[:head].rstrip() + ELLIPSIS + (text[len(text) - tail:].lstrip() if tail else "")
        if width(cand) <= max_mm:
            return cand
    return ELLIPSIS


def _fit_text(width, text: str, max_mm: float, max_lines: int = 1) -> str:
    """``text`` fitted into ``max_mm``: as it is; else split once at the space giving the most
    even pair of lines that both fit (when two lines are allowed); else shortened in the middle."""
    if width(text) <= max_mm:
        return text
    words = text.split(" ")
    if max_lines >= 2 and len(words) > 1:
        best = None
        for k in range(1, len(words)):
            a, b = " ".join(words[:k]), " ".join(words[k:])
            widest = max(width(a), width(b))
            if widest <= max_mm and (best is None or widest < best[0]):
                best = (widest, f"{a}\n{b}")
        if best is not None:
            return best[1]
    return _shorten_middle(width, text, max_mm)


def _wrap_measured(width, text: str, max_mm: float) -> list[str]:
    """Greedy word wrap on measured widths (a word longer than the line stays whole)."""
    lines, line = [], ""
    for word in str(text).split():
        trial = f"{line} {word}".strip()
        if line and width(trial) > max_mm:
            lines.append(line)
            line = word
        else:
            line = trial
    return lines + [line] if line else lines


def _split_even(text: str) -> str:
    """Two lines split at the space nearest the middle (upright category labels)."""
    words = text.split(" ")
    if len(words) < 2:
        return text
    cut = min(range(1, len(words)), key=lambda k: abs(len(" ".join(words[:k])) - len(" ".join(words[k:]))))
    return " ".join(words[:cut]) + "\n" + " ".join(words[cut:])


# ---------------------------------------------------------------------------- colours and keys

def _colour_setup(spec: FigureSpec, data: FigureData, ctx: Context) -> str | None:
    """Decide the colour mapping and which key the figure needs: 'categories', 'bar' or None."""
    import matplotlib

    ctx.cmap = matplotlib.colormaps[spec.style.sequential]
    drawer = DRAWERS[spec.chart.name]
    if spec.colour:
        if spec.colour in data.levels:
            pinned = spec.pinned.get(spec.colour)
            present = data.present.get(spec.colour, data.levels[spec.colour])
            # Colours follow the project-wide order when config lists one (orders:), so a value
            # keeps its colour in every figure even where other values are absent.
            explicit = spec.orders.get(spec.colour) or []
            lookup = {str(v): v for v in present}
            full = [lookup.get(str(e), e) for e in explicit]
            full += [v for v in data.levels[spec.colour] if str(v) not in {str(e) for e in explicit}]
            try:
                colours = assign_categories(full, spec.style.palette, pinned)
            except FigkitError as exc:
                raise exc.at(row=spec.row, figure=spec.id, field="colour") from None
            ctx.colours = {v: colours[v] for v in present}
            ctx.colour_title = spec.axis_title(spec.colour)
            return "categories"
        import matplotlib.colors as mcolors
        from .data import colour_range
        lo, hi = colour_range(spec, data)       # checks the centre too (also before drawing)
        centre = spec.options.get("centre")
        if centre is None:
            ctx.norm = mcolors.Normalize(lo, hi)
        else:
            # A centre value asks for a diverging scheme, the centre at its neutral middle.
            from .colour import colormap
            ctx.cmap = colormap(spec.style.diverging)
            ctx.norm = mcolors.TwoSlopeNorm(vcenter=centre, vmin=lo, vmax=hi)
        ctx.colour_title = spec.axis_title(spec.colour)
        return "bar"
    return "bar" if drawer.colour_bar else None


def _legend_size(ctx: Context, spec: FigureSpec, ncol: int = 1) -> tuple[float, float]:
    """Width and height (mm) of the categorical legend with ``ncol`` columns, measured by drawing
    it once on a scratch figure, so long labels are never clipped."""
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure
    pt = spec.style.tick_pt
    scratch = Figure(figsize=(8, 8), dpi=72)
    FigureCanvasAgg(scratch)
    leg = scratch.legend(handles=_legend_handles(ctx, spec), title=ctx.colour_title, ncol=ncol,
                         fontsize=pt, title_fontsize=pt, borderpad=0, borderaxespad=0,
                         columnspacing=1.0, alignment="left")
    bb = leg.get_window_extent(scratch.canvas.get_renderer())
    return bb.width / 72 * 25.4, bb.height / 72 * 25.4


def _legend_width(kind: str | None, ctx: Context, spec: FigureSpec) -> float:
    """Width (mm) to reserve for the key beside the grid (a colour bar's is widened later if its
    drawn labels need more)."""
    pt = spec.style.tick_pt
    if kind == "categories":
        return _legend_size(ctx, spec)[0] + 1.0
    if kind == "bar":
        return 3.0 + 1.0 + _text_width_mm("00000", pt) + 3.5
    return 0.0


def _legend_handles(ctx: Context, spec: FigureSpec) -> list:
    from matplotlib.lines import Line2D
    from matplotlib.patches import Patch
    from .charts import cue_dashes, cue_markers
    if spec.chart.name == "lines":   # marker and dash pattern per group, as drawn
        from .charts import _line_cues
        markers, dashes = _line_cues(ctx)
        return [Line2D([], [], color=hexc, linewidth=1.0, linestyle=dashes[level],
                       marker=markers[level], markersize=3.5, markeredgecolor="white",
                       markeredgewidth=0.3, label=label_text(level)) for level, hexc in ctx.colours.items()]
    if spec.chart.name == "means":   # a dot on its interval line, as drawn
        markers = cue_markers(ctx)
        return [Line2D([], [], color=hexc, linewidth=1.0, marker=markers.get(level, "o"),
                       markersize=3.5, markeredgecolor="white", markeredgewidth=0.4,
                       label=label_text(level)) for level, hexc in ctx.colours.items()]
    if spec.chart.name == "scatter":
        markers = cue_markers(ctx)
        return [Line2D([], [], linestyle="none", marker=markers.get(level, "o"), markersize=3.5,
                       markerfacecolor=hexc, markeredgewidth=0, label=label_text(level))
                for level, hexc in ctx.colours.items()]
    dashes = cue_dashes(ctx)
    if dashes:
        return [Line2D([], [], color=hexc, linewidth=1.0, linestyle=dashes[level], label=label_text(level))
                for level, hexc in ctx.colours.items()]
    return [Patch(facecolor=hexc, edgecolor="none", label=label_text(level))
            for level, hexc in ctx.colours.items()]


def _margins(spec: FigureSpec, *, title_lines: int, ytick_w: float, xtick_h: float,
             legend_w: float, xtitle_lines: int, ytitle_lines: int, note: bool = False) -> L.Margins:
    st = spec.style
    line = L.text_mm(st.base_pt)
    note_h = L.text_mm(st.tick_pt) + 0.4 if note else 0.0
    tick = _tick_mm(spec)
    free_x = spec.ranges in ("own", "own-x")
    free_y = spec.ranges in ("own", "own-y")
    header = L.text_mm(st.title_pt) * 2 + 1.2 if spec.grid else 0.0
    return L.Margins(
        left=(line * ytitle_lines + 0.8 if ytitle_lines else 0.6) + ytick_w + tick + 0.3,
        right=1.2 + legend_w + header,
        top=0.8 + header,
        bottom=(line * xtitle_lines + 0.6 if xtitle_lines else 0.6) + xtick_h + tick + note_h,
        title=L.text_mm(st.title_pt, title_lines) + 0.9 if title_lines else 0.0,
        hgap=st.gap_mm + (ytick_w + tick if free_y else 0.0),
        vgap=st.gap_mm * 0.8 + (xtick_h + tick if free_x else 0.0),
    )


def _panel_title(panel, spec: FigureSpec) -> str:
    if not panel.keys:
        return ""
    (fld, value), = panel.keys.items()
    label = short_label(spec.labels.get(fld, (fld, ""))[0])
    # A bare number says nothing on its own: name the field beside it.
    if isinstance(value, (int, float, np.integer, np.floating)) and not isinstance(value, bool):
        return f"{label} {value:g}" if isinstance(value, float) else f"{label} {value}"
    return short_label(shown(value))   # cut at MAX_LABEL_CHARS, cautioned by figkit.data


def panel_letter(i: int, case: str) -> str:
    """a, b, ... z, aa, ab, ... (upper case when the house style says so)."""
    letters = ""
    i += 1
    while i:
        i, r = divmod(i - 1, 26)
        letters = chr(ord("a") + r) + letters
    return letters.upper() if case == "upper" else letters


def _count_label(v, _pos=None) -> str:
    """Tick label of a log count scale as a plain number (no exponents in small print)."""
    return f"{v:.0f}" if v >= 1 else f"{v:g}"


def _pin_ticks(fig) -> None:
    """Pin every axis to the ticks and labels it draws now, and blank the labels of ticks it does
    not draw.  The figure then redraws the same whatever rcParams are active later (a notebook
    draws outside the house style) and holds no text that is not drawn."""
    from matplotlib.ticker import FixedFormatter, FixedLocator
    # Read everything first: shared axes share one locator, so pinning one changes the others.
    plan = []
    for ax in fig.axes:
        for axis in (ax.xaxis, ax.yaxis):
            for major in (True, False):
                locs, ticks = _ticks_now(axis, major)
                labels = [t.label1.get_text() for t in ticks]
                offset = axis.get_major_formatter().get_offset() if major else ""
                plan.append((axis, major, locs, labels, offset))
    for axis, major, locs, labels, offset in plan:
        fixed = FixedFormatter(labels)
        fixed.set_offset_string(offset)
        if major:
            axis.set_major_locator(FixedLocator(locs))
            axis.set_major_formatter(fixed)
        else:
            axis.set_minor_locator(FixedLocator(locs))
            axis.set_minor_formatter(fixed)
        for t in (axis.majorTicks if major else axis.minorTicks)[len(locs):]:
            t.label1.set_text("")
            t.label2.set_text("")
        _ticks_now(axis, major)


# ---------------------------------------------------------------------------- the figure

_PREPARING = {"histogram": "binning", "hexbins": "binning", "scatter": "measuring overlap",
              "density": "estimating densities", "violin": "estimating densities",
              "box": "computing box statistics", "means": "computing means and intervals",
              "lines": "computing means per x", "count-bars": "counting", "shares": "counting",
              "tiles": "counting"}


def build_figure(spec: FigureSpec, data: FigureData, note: str | None = None, *,
                 target=None, floor: L.Margins | None = None):
    """Draw the figure; returns (figure, record) where record holds layout and per-panel numbers.
    ``note`` is one line of small print under the x title (the strata comparison, when the house
    style asks for it).

    A part of a multi-part figure (figkit.compose) is drawn into ``target``, a matplotlib
    SubFigure of the part's cell (``spec.width_mm`` by ``spec.height_mm``), with margins at least
    ``floor`` so that the panel edges of parts side by side line up."""
    from . import progress
    progress.stage(_PREPARING.get(spec.chart.name, "preparing"))
    job = _Assembly(spec, data, note, target=target, floor=floor)
    job.make_figure(job.plan_grid())
    progress.stage(f"drawing {len(data.panels)} panel{'' if len(data.panels) == 1 else 's'}")
    job.draw_panels()
    progress.stage("laying out")
    job.prepare_texts()
    job.relayout()
    if not job.measured_at_final_size():
        # The overplotting choice changes at the final panel size: draw again, measured there.
        final = (job.grid.panel_w, job.grid.panel_h)
        if target is not None:   # a sub-figure cannot be emptied: clear it for the new drawing
            target.clear()
        job = _Assembly(spec, data, note, panel_mm=final, target=target, floor=floor)
        job.make_figure(job.plan_grid())
        job.draw_panels()
        job.prepare_texts()
        job.relayout()
        job.measured_at_final_size(redraw=False)
    job.place_key()
    job.draw_panel_titles()
    job.draw_grid_headers()
    job.draw_axis_titles()
    job.check_drawn()
    _escape_left_controls(job.fig)
    record = job.record()
    record["margins"] = job.margin    # for figkit.compose (parts line up); not in the sidecar
    _forget_ticks(job.axes)           # the figure handed on carries none of the layout's state
    return job.fig, record


def _escape_left_controls(fig) -> None:
    """Labels are escaped where they are made (figkit.text.shown); this catches any text that was
    not, since one control character makes the SVG ill-formed XML.  Line breaks stay: figkit's
    own labels use them (a colour bar's title on two lines) and XML allows them."""
    from matplotlib.text import Text
    from .text import SHEET_CONTROLS, terminal
    for t in fig.findobj(Text):
        if SHEET_CONTROLS.search(t.get_text()):
            t.set_text(terminal(t.get_text()))


class _Assembly:
    """One figure being put together: its spec and data, the canvas and the axes, the chart
    kind's context, and where the layout stands now (grid, margins and height last placed, lines
    given to panel and axis titles, the category label arrangement, the key's place).  Each
    public method is one step of :func:`build_figure`, in the order it calls them."""

    def __init__(self, spec: FigureSpec, data: FigureData, note: str | None,
                 panel_mm: tuple[float, float] | None = None, *, target=None,
                 floor: L.Margins | None = None):
        st = spec.style
        self.target, self.floor = target, floor   # a part's sub-figure and its margin floor
        self.panel_hint = panel_mm    # the panel size to measure overplotting at, when known
        self.spec, self.data, self.note, self.st = spec, data, note, st
        self.panels = data.panels
        self.n = len(self.panels)
        self.ctx = Context(spec=spec, data=data, panel_mm=(40.0, 30.0))
        self.key = _colour_setup(spec, data, self.ctx)    # 'categories', 'bar' or None
        self.drawer = DRAWERS[spec.chart.name]
        self.xtitle = bool(spec.x)
        self.ytitle = (spec.chart.y is not None or
                       spec.chart.name in ("histogram", "density", "count-bars", "shares"))
        # Wrapped panels carry titles; grid panels only when they are lettered (the letter alone).
        self.titles = len(spec.strata) == 1 or (spec.letters and spec.grid)
        self.tick = _tick_mm(spec)
        self.share_x = spec.ranges in ("common", "own-y")
        self.share_y = spec.ranges in ("common", "own-x")

        # Tick label sizes guessed for the first choice of grid, before anything is drawn.
        self.est_y = max(_text_width_mm("0000", st.tick_pt), 5.0)
        if spec.chart.y == "categorical":
            self.est_y = max(_text_width_mm(label_text(v), st.tick_pt) for v in data.levels.get(spec.y, ["x"]))
        self.est_x = L.text_mm(st.tick_pt)
        # Lines given to panel titles and axis titles; grown when the measured text needs two.
        self.title_lines = 1 if self.titles else 0
        self.x_lines = 1 if self.xtitle else 0
        self.y_lines = 1 if self.ytitle else 0

        # The key: its width beside the grid, whether it sits in an empty cell instead, and the
        # room the margins keep for it now (grown when it does not fit).
        self.legend_w = 0.0
        self.in_cell = False
        self.legend_room = 0.0

        self.fig = None
        self.axes: list = []
        self.records: list = []
        # Set by place(); grid stays None until the axes have been placed once.
        self.grid: L.Grid | None = None
        self.margin: L.Margins | None = None
        self.height = 0.0
        self.placed_x_lines = 0     # x title lines when last placed (the key keeps clear of them)
        # Set by settle(): the tick label sizes measured (mm).
        self.ytick_w = self.xtick_h = 0.0
        # Set by prepare_texts().
        self.category_texts: list[str] = []
        self.category_x = False     # category labels along x, rearranged when they crowd
        self.label_step = 0         # index into LABEL_STEPS
        self.title_texts: list[str] = []
        self.shown_titles: list[str] = []
        self.bold = self.plain = None

    # ------------------------------------------------------------------ grid and margins

    def margins(self, legend_w: float, ytick_w: float | None = None,
                xtick_h: float | None = None) -> L.Margins:
        """Margins for the current title lines; tick label sizes default to the estimates.  A
        part of a multi-part figure keeps at least its floor: left, bottom, and top with the
        panel titles, so that its panel edges line up with its neighbours'."""
        m = _margins(self.spec, title_lines=self.title_lines,
                     ytick_w=self.est_y if ytick_w is None else ytick_w,
                     xtick_h=self.est_x if xtick_h is None else xtick_h,
                     legend_w=legend_w, xtitle_lines=self.x_lines, ytitle_lines=self.y_lines,
                     note=bool(self.note))
        f = self.floor
        if f is None:
            return m
        return replace(m, left=max(m.left, f.left), bottom=max(m.bottom, f.bottom),
                       top=max(m.top, f.top + f.title - m.title))

    def choose_grid(self, m: L.Margins) -> L.Grid:
        """The grid for margins ``m``: fixed by the two strata, else the wrap rule; a grid that
        does not fit is reported against the sheet row."""
        spec, st = self.spec, self.st
        try:
            if spec.grid:
                rl, cl = self.data.grid_levels
                return L.fixed_grid(len(rl), len(cl), spec.width_mm, m, aspect=st.panel_aspect,
                                    min_panel_mm=st.panel_min_mm, max_height_mm=st.max_height_mm,
                                    height_mm=spec.height_mm)
            return L.choose_grid(self.n, spec.width_mm, m, min_panel_mm=st.panel_min_mm,
                                 aspect=st.panel_aspect, max_height_mm=st.max_height_mm,
                                 columns=spec.columns, height_mm=spec.height_mm)
        except FigkitError as exc:
            raise exc.at(row=spec.row, figure=spec.id) from None

    def plan_grid(self) -> L.Grid:
        """First choice of grid from estimated text sizes, and of the key's place: in an empty
        cell when the wrapped grid leaves one, else beside the grid.  Runs the chart kind's
        prepare, which needs the panel size: scatter may switch to bins there, and then needs a
        colour bar."""
        spec, ctx = self.spec, self.ctx
        self.legend_w = _legend_width(self.key, ctx, spec)
        grid = self.choose_grid(self.margins(0.0))
        self.in_cell = self.key is not None and grid.empty_cells > 0 and not spec.grid
        if self.key is not None and not self.in_cell:
            grid = self.choose_grid(self.margins(self.legend_w))
        ctx.panel_mm = self.panel_hint or (grid.panel_w, grid.panel_h)
        self.drawer.prepare(ctx)
        if spec.chart.name == "scatter" and ctx.shared.get("mode") == "bins" and self.key is None:
            self.key = "bar"
            self.legend_w = _legend_width(self.key, ctx, spec)
            self.in_cell = grid.empty_cells > 0 and not spec.grid
            if not self.in_cell:
                grid = self.choose_grid(self.margins(self.legend_w))
                ctx.panel_mm = self.panel_hint or (grid.panel_w, grid.panel_h)
        self.legend_room = 0.0 if self.in_cell or self.key is None else self.legend_w
        return grid

    def extent(self, count: int | None = None) -> tuple[float, float, float, float]:
        """Left, right, bottom and top (mm) of the first ``count`` panels (all by default) as
        placed now."""
        boxes = [L.panel_box(self.grid, i, self.margin, self.height)
                 for i in range(self.n if count is None else count)]
        return (min(b[0] for b in boxes), max(b[0] + b[2] for b in boxes),
                min(b[1] for b in boxes), max(b[1] + b[3] for b in boxes))

    # ------------------------------------------------------------------ canvas and panels

    def make_figure(self, grid: L.Grid) -> None:
        """The canvas at the planned size and one axes per panel, shared as the ranges say.
        Positions come later (:meth:`place`)."""
        from matplotlib.backends.backend_agg import FigureCanvasAgg
        from matplotlib.figure import Figure

        spec = self.spec
        m = self.margins(self.legend_room)
        height = spec.height_mm or L.grid_height(grid.rows, grid.panel_h, m)
        if self.target is not None:      # a part's cell: its size is the cell's
            self.fig = self.target
        else:
            self.fig = Figure(figsize=(mm_to_in(spec.width_mm), mm_to_in(height)), dpi=72)
            FigureCanvasAgg(self.fig)
        first = None
        for _ in self.panels:
            ax = self.fig.add_axes((0, 0, 0.1, 0.1), sharex=first if self.share_x else None,
                                   sharey=first if self.share_y else None)
            first = first or ax
            self.axes.append(ax)

    def draw_panels(self) -> None:
        """Each panel drawn by the chart kind ('no data' where a panel is empty), the kind's
        finish, common limits and the house gridlines."""
        spec, st, ctx, drawer, axes = self.spec, self.st, self.ctx, self.drawer, self.axes
        for ax, panel in zip(axes, self.panels):
            rec = drawer.draw(ax, panel, ctx) or {}
            if panel.n == 0:
                ax.text(0.5, 0.5, "no data", transform=ax.transAxes, ha="center", va="center",
                        fontsize=st.tick_pt, color="#8A9099")
                rec.setdefault("notes", []).append("no rows in this panel")
            self.records.append(rec)
        if drawer.finish:
            drawer.finish(ctx)
        if ctx.shared.get("mode") == "bins" and spec.chart.name == "scatter":
            from .charts import finish_hexbins
            finish_hexbins(ctx)
        if drawer.zero_y:
            tops = []
            for ax in axes:
                ax.autoscale_view()
                tops.append(ax.get_ylim()[1])
            for ax, top in zip(axes, tops):
                set_limits(ax, y=(0, max(tops) if self.share_y else top))
        for ax in axes:
            set_limits(ax, ctx.shared["xlim"] if "xlim" in ctx.shared and spec.chart.x == "numeric"
                       and self.share_x else None,
                       ctx.shared["ylim"] if "ylim" in ctx.shared and spec.chart.y == "numeric"
                       and self.share_y else None)
            grid_axis = {"none": None, "x": "x", "y": "y", "both": "both"}[st.grid]
            if spec.chart.name not in ("tiles",):
                ax.grid(False)
                if grid_axis:
                    ax.grid(True, axis=grid_axis)
                if spec.chart.x == "categorical":
                    ax.grid(False, axis="x")
        from .scales import axis_scales, set_axis_ticks
        for role, (name, _fld) in axis_scales(spec).items():
            for ax in axes:     # ticks at powers of ten, labelled with the untransformed values
                set_axis_ticks(ax, role, name, float(spec.options.get("threshold", 1.0)))

    def prepare_texts(self) -> None:
        """The texts whose room the layout measures: panel titles (the letter leads), the
        measurers for titles and axis titles, and category labels in their first arrangement."""
        spec, st = self.spec, self.st
        self.category_texts = [label_text(v) for v in self.ctx.shared.get("xlevels", [])]
        # Category labels along x: a categorical x, or a lines chart's ordered text x.
        self.category_x = bool(self.category_texts) and (spec.chart.x == "categorical" or
                                                         spec.chart.name == "lines")
        if self.titles:
            self.title_texts = [_panel_title(p, spec) if not spec.grid else "" for p in self.panels]
        if spec.letters and self.titles:
            self.title_texts = [f"{panel_letter(spec.letter_from + i, st.letters)}  {t}".strip()
                                for i, t in enumerate(self.title_texts)]
        self.bold = _measurer(self.fig, st.title_pt, "bold")
        self.plain = _measurer(self.fig, st.base_pt)
        if self.category_x:
            self.set_category_labels(0)

    # ------------------------------------------------------------------ measure and place

    def place(self, grid: L.Grid, margin: L.Margins) -> None:
        """Size the canvas and place every panel for ``grid``; tick labels only on the outer
        panels when an axis is shared (the rule follows the grid, which may change)."""
        spec = self.spec
        _forget_ticks(self.axes)
        h = spec.height_mm or L.grid_height(grid.rows, grid.panel_h, margin)
        if self.target is None:          # a part's cell keeps its size (spec.height_mm is set)
            self.fig.set_size_inches(mm_to_in(spec.width_mm), mm_to_in(h))
        for i, ax in enumerate(self.axes):
            ax.tick_params(labelbottom=not self.share_x or L.below_empty(grid, i),
                           labelleft=not self.share_y or i % grid.cols == 0)
            l, b, w, hh = L.panel_box(grid, i, margin, h)
            ax.set_position((l / spec.width_mm, b / h, w / spec.width_mm, hh / h))
        self.grid, self.margin, self.height = grid, margin, h
        self.placed_x_lines = self.x_lines

    def settle(self) -> None:
        """Measure the tick labels drawn, choose the grid again and re-place, until nothing moves.
        After two rounds measurements may only grow, so the loop cannot swing."""
        fig, axes = self.fig, self.axes
        yw = xh = 0.0
        before = None
        for it in range(8):
            boxes = _TickBoxes(fig)      # this placement's labels, read once
            yw_now, xh_now = _measure(fig, axes, "y", boxes), _measure(fig, axes, "x", boxes)
            yw, xh = (max(yw, yw_now), max(xh, xh_now)) if it >= 2 else (yw_now, xh_now)
            mm = self.margins(self.legend_room, yw, xh)
            if self.grid is not None:   # x labels of the last column may reach past the panel
                over = _right_overhang(fig, axes, self.grid, boxes)
                if over + EDGE_MM > mm.right:
                    mm = replace(mm, right=over + EDGE_MM)
                # ... and y labels of the first row above it: they keep clear of the top edge.
                over = _top_overhang(fig, axes, self.grid, boxes) + TEXT_EDGE_MM
                if over > mm.top + mm.title:
                    mm = replace(mm, top=over - mm.title)
            g = self.choose_grid(mm)
            now = (g.rows, g.cols, tuple(round(v, 2) for v in vars(mm).values()))
            self.place(g, mm)
            if now == before:
                break
            before = now
        self.ytick_w, self.xtick_h = yw, xh

    def set_category_labels(self, step: int) -> None:
        """Category labels along x in arrangement ``LABEL_STEPS[step]`` (angle, two lines)."""
        angle, two = LABEL_STEPS[step]
        _forget_ticks(self.axes)
        texts = [_split_even(t) if two and len(t) > WRAP_CHARS else t for t in self.category_texts]
        for ax in self.axes:
            ax.set_xticks(range(len(texts)), texts)
            for t in ax.get_xticklabels():
                if angle == 0:
                    t.set(rotation=0, ha="center", va="top", rotation_mode="default", multialignment="center")
                else:
                    t.set(rotation=angle, ha="right", va="center" if angle == 90 else "top",
                          rotation_mode="anchor", multialignment="right")

    def relayout(self) -> None:
        """Settle the grid, then grow titles to two lines or rearrange crowded category labels
        where measurement says so, settling again after each change (changes only go forward)."""
        for _ in range(12):
            self.settle()
            if not self._grow_text():
                break

    def _grow_text(self) -> bool:
        """Make the first change measurement asks for, in this order: panel titles, x title,
        y title to two lines, then the next category label arrangement.  False when none."""
        spec = self.spec
        if self.titles and self.title_lines == 1 and any(
                "\n" in _fit_text(self.bold, t, self.grid.panel_w, 2) for t in self.title_texts):
            self.title_lines = 2
            return True
        gx0, gx1, gy0, gy1 = self.extent()
        if self.xtitle and self.x_lines == 1 and "\n" in _fit_text(self.plain, spec.axis_title(spec.x),
                                                                   gx1 - gx0, 2):
            self.x_lines = 2
            return True
        if self.ytitle and self.y_lines == 1 and "\n" in _fit_text(self.plain, _y_title(spec), gy1 - gy0, 2):
            self.y_lines = 2
            return True
        if self.category_x:
            gap = LABEL_GAP_MM if LABEL_STEPS[self.label_step][0] == 0 else 0.0
            if self.label_step < len(LABEL_STEPS) - 1 and _x_labels_clash(self.fig, self.axes, gap):
                self.label_step += 1
                while (LABEL_STEPS[self.label_step][1] and self.label_step < len(LABEL_STEPS) - 1 and
                       not any(" " in t and len(t) > WRAP_CHARS for t in self.category_texts)):
                    self.label_step += 1   # nothing to put on two lines: skip that arrangement
                self.set_category_labels(self.label_step)
                return True
        return False

    def measured_at_final_size(self, redraw: bool = True) -> bool:
        """Overplotting (scatter) is measured at the panel size the layout settled on.  When
        the grid was chosen again after the first measure, measure once more at the final size:
        the same choice of drawing only updates the recorded numbers; another choice returns
        False (with ``redraw``), and the figure is drawn again at that size."""
        ctx, spec = self.ctx, self.spec
        if spec.chart.name != "scatter":
            return True
        final = (self.grid.panel_w, self.grid.panel_h)
        if ctx.panel_mm == final:
            return True
        from dataclasses import replace as _replace
        from .charts import prepare_scatter
        probe = _replace(ctx, panel_mm=final, shared={}, cautions=[], mappables=[], used_colours=[])
        prepare_scatter(probe)
        new = probe.shared
        if redraw and (new["mode"], new["alpha"]) != (ctx.shared["mode"], ctx.shared["alpha"]):
            return False
        ctx.panel_mm = final
        ctx.shared.update(cells=new["cells"], densest=new["densest"])
        for panel, rec in zip(self.panels, self.records):
            if "max_per_cell" in rec:
                rec.update(max_per_cell=new["own_densest"].get(id(panel), 0),
                           figure_max_per_cell=new["densest"], cells=list(new["cells"]))
        return True

    # ------------------------------------------------------------------ the key

    def place_key(self) -> None:
        """The key: drawn, checked against the canvas, the panels and every other text; moved
        beside the grid (in-cell) or given more room (beside) when it does not fit."""
        if self.key is None:
            return
        key_artists: list = []
        for _attempt in range(4):
            if self.in_cell and self.grid.empty_cells == 0:   # the relayout filled the empty cell
                self.in_cell, self.legend_room = False, self.legend_w
                self.relayout()
            key_artists = self.draw_key()
            problem = _key_problem(self.fig, key_artists, self.axes)
            if problem is None:
                break
            for a in key_artists:
                a.remove()
            key_artists = []
            if self.in_cell:
                self.in_cell, self.legend_room = False, self.legend_w
            else:
                self.legend_room += max(problem, 1.0)
            self.relayout()
        if not key_artists:   # pragma: no cover - every attempt failed
            self.draw_key()
            self.ctx.cautions.append("the colour key could not be placed clear of other text")

    def draw_key(self) -> list:
        """Draw the legend or colour bar; returns the artists added (removable)."""
        fig, ctx, spec, st = self.fig, self.ctx, self.spec, self.st
        grid, m, H = self.grid, self.margin, self.height
        W = spec.width_mm
        _, gx1, _, gy1 = self.extent(grid.panels)
        bottom_limit = 0.5 + L.text_mm(st.base_pt, self.placed_x_lines) + 0.3
        if self.in_cell:
            c0 = grid.panels % grid.cols
            l, b, w, h = L.panel_box(grid, (grid.rows - 1) * grid.cols + c0, m, H)
            x0 = l + 1.0
            # The empty cell's space starts below the x tick labels of the panel above it.
            ytop = b + h + m.title + (m.vgap - self.xtick_h - self.tick - 0.5 if grid.rows > 1 else 0.0)
            room_w, room_h = gx1 - x0, ytop - bottom_limit
        else:
            x0 = gx1 + 1.2 + (L.text_mm(st.title_pt) * 2 + 1.2 if spec.grid else 0.0)
            ytop, room_w, room_h = gy1, W - x0 - EDGE_MM, gy1 - EDGE_MM
        pt = st.tick_pt
        if self.key == "categories":
            handles = _legend_handles(ctx, spec)
            ncol = 1
            if self.in_cell:
                fits = [k for k in range(len(handles), 0, -1)
                        if all(a <= b for a, b in zip(_legend_size(ctx, spec, k), (room_w, room_h)))]
                ncol = fits[0] if fits else 1
            leg = fig.legend(handles=handles, title=ctx.colour_title, loc="upper left",
                             bbox_to_anchor=(x0 / W, ytop / H), bbox_transform=fig.transSubfigure, ncol=ncol,
                             fontsize=pt, title_fontsize=pt, alignment="left",
                             borderaxespad=0, borderpad=0, columnspacing=1.0)
            return [leg]
        import matplotlib.cm as cm
        import matplotlib.colors as mcolors
        from matplotlib.ticker import FuncFormatter, LogLocator, NullFormatter
        # The bar shows the colour scale itself: opaque, even when the marks are translucent.
        source = ctx.mappables[0] if ctx.mappables else None
        mappable = cm.ScalarMappable(norm=source.norm if source is not None else ctx.norm,
                                     cmap=source.get_cmap() if source is not None else ctx.cmap)
        label_h = L.text_mm(pt)
        measure = _measurer(fig, pt)
        if self.in_cell:
            # Inset by half the widest end label so the labels under the bar stay in the cell.
            inset = measure("00000") / 2
            bw = max(10.0, min(room_w - 2 * inset, 40.0))
            title = _shorten_middle(measure, ctx.colour_title, room_w)
            cax = fig.add_axes(((x0 + inset) / W, (ytop - label_h - 0.5 - 2.2) / H, bw / W, 2.2 / H),
                               label="<colorbar>")   # matplotlib's own name for a colour-bar axes
            bar = fig.colorbar(mappable, cax=cax, orientation="horizontal")
            text = fig.text(x0 / W, (ytop - label_h) / H, title, fontsize=pt, ha="left", va="bottom")
        else:
            lines = _wrap_measured(measure, ctx.colour_title, room_w)
            # The top tick label reaches half a line above the bar: keep it clear of the title.
            title_h = L.text_mm(pt, len(lines)) + 0.6 + label_h / 2
            bh = min(35.0, max(12.0, ytop - title_h - 8))
            cax = fig.add_axes((x0 / W, (ytop - title_h - bh) / H, 2.4 / W, bh / H), label="<colorbar>")
            bar = fig.colorbar(mappable, cax=cax, orientation="vertical")
            text = fig.text(x0 / W, ytop / H, "\n".join(lines), fontsize=pt, ha="left", va="top",
                            linespacing=1.1)
        measure.close()
        norm = mappable.norm
        if isinstance(norm, mcolors.LogNorm):
            decades = np.log10(max(norm.vmax, 1.0) / max(norm.vmin, 1e-12))
            bar.locator = LogLocator(base=10, subs=(1.0,) if decades >= 2 else (1.0, 2.0, 5.0))
            bar.formatter = FuncFormatter(_count_label)
            bar.minorformatter = NullFormatter()
        bar.outline.set_linewidth(0.4)
        # Edges between colour steps are not drawn; the empty divider set would still count as a
        # (too thin) line in the house minimum check.
        bar.dividers.set_visible(False)
        bar.ax.tick_params(labelsize=pt, width=0.4, length=1.5)
        return [cax, text]

    # ------------------------------------------------------------------ titles

    def _fx(self, mm: float) -> float:
        return mm / self.spec.width_mm

    def _fy(self, mm: float) -> float:
        return mm / self.height

    def framed(self) -> bool:
        """The house style draws a frame round each panel (its top and right edges visible)."""
        return bool(self.axes) and all(self.axes[0].spines[k].get_visible() for k in ("top", "right"))

    def draw_panel_titles(self) -> None:
        """Panel titles, fitted, in our own look: left-aligned over a hairline rule."""
        st, fx, fy = self.st, self._fx, self._fy
        self.shown_titles = []
        if not self.titles:
            return
        framed = self.framed()
        for i, text in enumerate(self.title_texts):
            l, b, w, h = L.panel_box(self.grid, i, self.margin, self.height)
            fitted = _fit_text(self.bold, text, w, self.title_lines)
            self.shown_titles.append(fitted)
            self.fig.text(fx(l), fy(b + h + 0.55), fitted, fontsize=st.title_pt, fontweight="bold",
                          ha="left", va="bottom", linespacing=1.1)
            if not framed:   # a framed panel's top edge already rules its title off
                self.fig.add_artist(_rule(self.fig, fx(l), fx(l + w), fy(b + h + 0.35)))

    def draw_grid_headers(self) -> None:
        """Row and column headers of a two-way grid, each with a rule, and the two strata's
        names over them."""
        spec, st, fig, fx, fy = self.spec, self.st, self.fig, self._fx, self._fy
        if not spec.grid:
            return
        grid, m, H = self.grid, self.margin, self.height
        bold = self.bold
        rf, cf = spec.strata
        rl, cl = self.data.grid_levels
        title_w = _measurer(fig, st.title_pt)
        l0, b0, w0, h0 = L.panel_box(grid, 0, m, H)
        top_of_grid = b0 + h0
        for j, cv in enumerate(cl):
            l, b, w, h = L.panel_box(grid, j, m, H)
            fig.text(fx(l + w / 2), fy(top_of_grid + 0.6), _shorten_middle(title_w, shown(cv), w),
                     fontsize=st.title_pt, ha="center", va="bottom")
            if not self.framed():   # a framed panel's edge already rules its header off
                fig.add_artist(_rule(fig, fx(l), fx(l + w), fy(top_of_grid + 0.4)))
        lw1, _, _, _ = L.panel_box(grid, grid.cols - 1, m, H)
        fig.text(fx((l0 + lw1 + w0) / 2), fy(top_of_grid + 0.6 + L.text_mm(st.title_pt) + 0.3),
                 _shorten_middle(bold, spec.labels.get(cf, (cf, ""))[0], lw1 + w0 - l0),
                 fontsize=st.title_pt, fontweight="bold", ha="center", va="bottom")
        right_edge = None
        for i, rv in enumerate(rl):
            l, b, w, h = L.panel_box(grid, i * grid.cols + grid.cols - 1, m, H)
            right_edge = l + w
            fig.text(fx(l + w + 0.6), fy(b + h / 2), _shorten_middle(title_w, shown(rv), h),
                     fontsize=st.title_pt, rotation=270, ha="center", va="bottom",
                     rotation_mode="anchor")
            if not self.framed():
                fig.add_artist(_rule(fig, fx(l + w + 0.4), fx(l + w + 0.4), fy(b), fy(b + h)))
        lb = L.panel_box(grid, (grid.rows - 1) * grid.cols, m, H)
        mid = (lb[1] + top_of_grid) / 2
        fig.text(fx(right_edge + 0.6 + L.text_mm(st.title_pt) + 0.3), fy(mid),
                 _shorten_middle(bold, spec.labels.get(rf, (rf, ""))[0], top_of_grid - lb[1]),
                 fontsize=st.title_pt, fontweight="bold", rotation=270, ha="center", va="bottom",
                 rotation_mode="anchor")
        title_w.close()

    def draw_axis_titles(self) -> None:
        """One x title and one y title for the whole figure, with units, and the note under the
        x title.  These are the last fitted texts, so the measurers are closed here."""
        spec, st, fig, fx, fy = self.spec, self.st, self.fig, self._fx, self._fy
        gx0, gx1, gy0, gy1 = self.extent()
        note_h = L.text_mm(st.tick_pt) + 0.4 if self.note else 0.0
        if self.note:
            fig.text(fx(gx0), fy(0.5), _fit_text(self.plain, self.note, gx1 - gx0, 1), fontsize=st.tick_pt,
                     ha="left", va="bottom", color="#5A5F66")
        if self.xtitle:
            fig.text(fx((gx0 + gx1) / 2), fy(0.5 + note_h),
                     _fit_text(self.plain, spec.axis_title(spec.x), gx1 - gx0, self.x_lines),
                     fontsize=st.base_pt, ha="center", va="bottom", linespacing=1.1)
        if self.ytitle:
            # Anchored before rotation: the text's top (its left side once turned) sits at 0.5 mm.
            fig.text(fx(0.5), fy((gy0 + gy1) / 2),
                     _fit_text(self.plain, _y_title(spec), gy1 - gy0, self.y_lines),
                     fontsize=st.base_pt, rotation=90, ha="center", va="top", rotation_mode="anchor",
                     linespacing=1.1)
        self.bold.close()
        self.plain.close()

    # ------------------------------------------------------------------ checks and record

    def check_drawn(self) -> None:
        """Tile counts kept only where all fit, ticks pinned to what is drawn, and remaining text
        overlaps reported as a caution."""
        ctx, fig = self.ctx, self.fig
        notes = _fit_tile_numbers(fig, self.axes, ctx) if self.spec.chart.name == "tiles" else None
        if notes:
            ctx.cautions.append(notes)
        _pin_ticks(fig)
        from .checks import text_collisions
        _place_legend_texts(fig)
        clashes = text_collisions(fig)
        if clashes:
            a, b = clashes[0]
            ctx.cautions.append(f"{len(clashes)} text overlap(s) remain, e.g. '{a[:30]}' / '{b[:30]}'; "
                                "try a wider size preset or fewer panel columns")

    def _axis_ranges(self) -> dict:
        out = {}
        for name, numeric, get in (("x_range", self.spec.chart.x == "numeric", "get_xlim"),
                                   ("y_range", self.spec.chart.y == "numeric", "get_ylim")):
            if not numeric or not self.axes:
                continue
            ranges = [[float(f"{v:.6g}") for v in getattr(ax, get)()] for ax in self.axes]
            out[name] = ranges[0] if all(r == ranges[0] for r in ranges) else ranges
        return out

    def record(self) -> dict:
        """Layout and per-panel numbers for the sidecar."""
        grid, ctx, key = self.grid, self.ctx, self.key
        angle, two = LABEL_STEPS[self.label_step]
        category_texts = self.category_texts
        record = {
            "size_mm": [round(self.spec.width_mm, 3), round(self.height, 3)],
            "layout": {"rows": grid.rows, "cols": grid.cols, "panels": self.n,
                       "panel_mm": [round(grid.panel_w, 2), round(grid.panel_h, 2)],
                       "empty_cells": grid.empty_cells, "key": key,
                       "key_place": None if key is None else ("empty cell" if self.in_cell else "right"),
                       "x_labels_tilted": bool(category_texts and angle != 0),
                       "x_label_angle": angle if category_texts else 0,
                       "x_labels_two_lines": bool(category_texts and two),
                       "title_lines": self.title_lines,
                       # the numeric axes' ranges as drawn (one per panel where ranges are own):
                       # a comparison of builds says when the axes moved under the data
                       **self._axis_ranges(),
                       "titles_shortened": sum(ELLIPSIS in t and ELLIPSIS not in s
                                               for t, s in zip(self.shown_titles, self.title_texts))},
            "panel_records": self.records,
            "colours": ctx.used_colours,
            "cautions": ctx.cautions,
            "shared": {k: v for k, v in ctx.shared.items() if k in ("mode", "alpha", "densest", "bin_rule")},
        }
        if "edges" in ctx.shared:
            record["bin_edges"] = [float(e) for e in ctx.shared["edges"]]
            record["bins"] = dict(ctx.shared["bin_info"])
        return record


def _place_legend_texts(fig) -> None:
    """Legends place their texts only when drawn: draw them, and nothing else, without output.
    Every other text already stands where it will be drawn (ticks are pinned by _pin_ticks);
    an axis offset text (e.g. "1e6") is placed by its axis' draw, so a figure that shows one
    is drawn whole, as before."""
    offsets = any(axis.offsetText.get_visible() and axis.offsetText.get_text().strip()
                  for ax in fig.axes for axis in (ax.xaxis, ax.yaxis))
    if offsets:     # (a part's sub-figure is drawn by its page)
        fig.figure.draw_without_rendering()   # .figure: the root Figure (also on matplotlib 3.9)
        return
    legends = list(fig.legends) + [leg for ax in fig.axes if (leg := ax.get_legend()) is not None]
    if legends:
        renderer = fig.canvas.get_renderer()
        with renderer._draw_disabled():
            for leg in legends:
                leg.draw(renderer)


def _y_title(spec: FigureSpec) -> str:
    if spec.y and spec.chart.y is not None:
        return spec.axis_title(spec.y)
    scaled = spec.options.get("x_scale", "linear")
    if spec.chart.name == "density" and scaled != "linear":   # the curve is a density of t(x)
        return "Density per log10 unit" if scaled == "log10" else "Density (symmetric log units)"
    return {"histogram": "Count", "density": "Density",
            "count-bars": spec.axis_title(spec.weight) if spec.weight else "Count",
            "shares": "Share" + (f" of {spec.axis_title(spec.weight).lower()}" if spec.weight else "")
            }.get(spec.chart.name, "")


def _rule(fig, x0, x1, y0, y1=None):
    from matplotlib.lines import Line2D
    return Line2D([x0, x1], [y0, y0 if y1 is None else y1], transform=fig.transSubfigure,
                  color=HEADER_RULE, linewidth=0.4)


def _fit_tile_numbers(fig, axes, ctx: Context) -> str | None:
    """Counts printed in tiles must fit their tile; when one does not, none is printed (a
    partial set would read as missing values) and the caution says so."""
    texts = ctx.shared.get("tile_texts") or []
    nx, ny = len(ctx.shared.get("xlevels", [])), len(ctx.shared.get("ylevels", []))
    if not texts or not nx or not ny:
        return None
    renderer = fig.canvas.get_renderer()
    cell_w = min(ax.bbox.width for ax in axes) / nx
    cell_h = min(ax.bbox.height for ax in axes) / ny
    pad = 0.4 / 25.4 * fig.dpi
    for t in texts:
        bb = t.get_window_extent(renderer)
        if bb.width > cell_w - pad or bb.height > cell_h - pad:
            for u in texts:
                u.set_visible(False)
            return (f"tile counts not printed: tiles of {_mm(fig, cell_w):.1f} x {_mm(fig, cell_h):.1f} mm "
                    f"are too small for {ctx.spec.style.tick_pt:g} pt numbers")
    return None


def _key_problem(fig, artists: list, axes) -> float | None:
    """None when the key's texts stay on the canvas, off the panels and clear of every other
    text; else how far (mm) it reaches past the right edge (0 when it collides elsewhere)."""
    renderer = fig.canvas.get_renderer()
    own, own_boxes = [], []
    for a in artists:
        if hasattr(a, "get_texts"):
            # A legend lays out its texts only when drawn: its own box stands for all of them.
            own += [a.get_title(), *a.get_texts()]
            own_boxes.append(a.get_window_extent(renderer))
        elif hasattr(a, "xaxis"):
            labels = _drawn_tick_labels(a.xaxis, renderer) + _drawn_tick_labels(a.yaxis, renderer)
            own += labels
            own_boxes += [t.get_window_extent(renderer) for t in labels] + [a.get_window_extent(renderer)]
        else:
            own.append(a)
            own_boxes.append(a.get_window_extent(renderer))
    right = max((b.x1 for b in own_boxes), default=0.0)
    over = _mm(fig, right - fig.bbox.x1) + EDGE_MM
    if over > 0:
        return over
    ids = {id(t) for t in own}
    others = [t.get_window_extent(renderer) for t in _drawn_texts(fig) if id(t) not in ids]
    panels = [ax.get_window_extent(renderer) for ax in axes]
    for b in own_boxes:
        if _outside(fig, b) or any(_overlap(b, o) for o in others) or any(_overlap(b, p) for p in panels):
            return 0.0
    return None
