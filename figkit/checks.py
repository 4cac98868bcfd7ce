"""Stage 7, the checks: legibility of what was drawn (text sizes, line widths, text collisions),
measured on the figure's own artists at final print size."""
from __future__ import annotations

from dataclasses import dataclass

from .errors import FigkitError


@dataclass
class DrawnSizes:
    min_font_pt: float
    min_font_text: str
    min_line_pt: float | None
    min_line_what: str | None


def _visible_texts(fig):
    from matplotlib.text import Text
    for t in fig.findobj(Text):
        if t.get_visible() and t.get_text().strip() and t.get_alpha() != 0:
            yield t


def drawn_sizes(fig) -> DrawnSizes:
    """Smallest text (pt) and thinnest drawn line (pt) among the figure's visible artists."""
    from matplotlib.collections import Collection
    from matplotlib.lines import Line2D
    from matplotlib.patches import Patch

    small, small_text = float("inf"), ""
    for t in _visible_texts(fig):
        if t.get_fontsize() < small:
            small, small_text = t.get_fontsize(), t.get_text()
    thin, thin_what = None, None

    def consider(width, what):
        nonlocal thin, thin_what
        if width and width > 0 and (thin is None or width < thin):
            thin, thin_what = float(width), what

    for a in fig.findobj(Line2D):
        if a.get_visible() and len(a.get_xdata()) > 1:
            consider(a.get_linewidth(), f"line {a.get_label() or ''}".strip())
    for a in fig.findobj(Patch):
        if a.get_visible() and a.get_edgecolor()[3] > 0 and a is not fig.patch and \
                not (hasattr(a, "axes") and a.axes is not None and a is a.axes.patch):
            consider(a.get_linewidth(), type(a).__name__.lower())
    for a in fig.findobj(Collection):
        if a.get_visible() and len(a.get_edgecolor()) and max(c[3] for c in a.get_edgecolor()) > 0:
            for w in a.get_linewidths():
                consider(w, type(a).__name__.lower())
    return DrawnSizes(small, small_text, thin, thin_what)


def enforce_minimums(fig, min_text_pt: float, min_line_pt: float, *, figure: str, row: int) -> DrawnSizes:
    """Fail the render when text or lines fall below the house minimums (named in the message)."""
    s = drawn_sizes(fig)
    if s.min_font_pt < min_text_pt - 1e-9:
        raise FigkitError(f"text '{s.min_font_text[:30]}' is {s.min_font_pt:g} pt, below the house "
                          f"minimum of {min_text_pt:g} pt", row=row, figure=figure)
    if s.min_line_pt is not None and s.min_line_pt < min_line_pt - 1e-9:
        raise FigkitError(f"{s.min_line_what} is {s.min_line_pt:g} pt wide, below the house minimum "
                          f"of {min_line_pt:g} pt", row=row, figure=figure)
    return s


def text_collisions(fig) -> list[tuple[str, str]]:
    """Pairs of visible texts whose drawn boxes overlap, and texts leaving the canvas."""
    renderer = fig.canvas.get_renderer()
    boxes = [(t.get_text(), t.get_window_extent(renderer)) for t in _visible_texts(fig)]
    c = fig.bbox   # a sub-figure's canvas starts where its cell does (figkit.compose)
    hits = []
    for text, bb in boxes:
        if bb.x0 < c.x0 - 0.5 or bb.y0 < c.y0 - 0.5 or bb.x1 > c.x1 + 0.5 or bb.y1 > c.y1 + 0.5:
            hits.append((text, "<outside the canvas>"))
    for i, (ta, a) in enumerate(boxes):
        for tb, b in boxes[i + 1:]:
            if a.x0 < b.x1 - 0.5 and b.x0 < a.x1 - 0.5 and a.y0 < b.y1 - 0.5 and b.y0 < a.y1 - 0.5:
                hits.append((ta, tb))
    return hits
