"""Stage 5, the layout: the panel grid and every margin in millimetres at final print size.

Everything here is pure arithmetic on sizes, so it can be tested without drawing.  The drawing
stage measures the tick labels it actually drew and calls :func:`place` again with the measured
margins, so labels never collide whatever their length.
"""
from __future__ import annotations

import math
from dataclasses import dataclass

from .errors import FigkitError
from .style import pt_to_mm

# Text line height as a multiple of the font size (DejaVu Sans ascender + descender ~ 1.17 em,
# plus leading; common typographic practice is 1.2).
LINE = 1.2


@dataclass(frozen=True)
class Margins:
    left: float
    right: float
    top: float
    bottom: float
    title: float      # above every panel row (panel titles), 0 when panels carry none
    hgap: float       # between panel columns
    vgap: float       # between panel rows (besides the title)


@dataclass(frozen=True)
class Grid:
    rows: int
    cols: int
    panels: int
    panel_w: float
    panel_h: float

    @property
    def empty_cells(self) -> int:
        return self.rows * self.cols - self.panels


def grid_height(rows: int, panel_h: float, m: Margins) -> float:
    return m.top + rows * (m.title + panel_h) + (rows - 1) * m.vgap + m.bottom


def panel_width(cols: int, width_mm: float, m: Margins) -> float:
    return (width_mm - m.left - m.right - (cols - 1) * m.hgap) / cols


def check_height(height_mm: float | None, max_height_mm: float, min_height_mm: float = 0.0) -> None:
    """A row's height_mm within the style's maximum and at least ``min_height_mm`` (one panel's
    least height; checked before drawing too, so lint finds it; margins come on top)."""
    if height_mm is not None and height_mm > max_height_mm + 1e-9:
        raise FigkitError(f"height_mm {height_mm:g} is above the {max_height_mm:.0f} mm the style "
                          "allows", field="height_mm", value=height_mm,
                          allowed=f"at most {max_height_mm:.0f}")
    if height_mm is not None and height_mm < max(min_height_mm, 1e-9):
        raise FigkitError(f"height_mm {height_mm:g} is below the {min_height_mm:.0f} mm one panel "
                          "needs (before its titles and axes)", field="height_mm", value=height_mm,
                          allowed=f"at least {min_height_mm:.0f}, at most {max_height_mm:.0f}")


def choose_grid(n: int, width_mm: float, m: Margins, *, min_panel_mm: float, aspect: float,
                max_height_mm: float, columns: int | None = None,
                height_mm: float | None = None) -> Grid:
    """Choose columns and rows for ``n`` wrapped panels.

    Rule (ours): among all column counts whose panels are at least ``min_panel_mm`` wide and whose
    figure fits under ``max_height_mm``, take the largest panels (fewest columns); among equal
    sizes the fewest empty cells.  ``rows = ceil(n / cols)`` so no row is ever wholly empty.  A
    fixed ``columns`` skips the search but not the checks.  With ``height_mm`` the panel height
    follows from the height instead of the aspect; a panel's size is then
    ``min(width, height / aspect)`` and panels must also be at least
    ``0.75 * min_panel_mm * min(aspect, 1)`` tall (common practice).
    """
    if n < 1:
        raise FigkitError("a figure needs at least one panel", value=n)
    candidates = [columns] if columns else range(1, n + 1)
    best = None
    for cols in candidates:
        rows = math.ceil(n / cols)   # the smallest row count: no row is ever wholly empty
        pw = panel_width(cols, width_mm, m)
        check_height(height_mm, max_height_mm)
        if height_mm is not None:
            ph = (height_mm - m.top - m.bottom - (rows - 1) * m.vgap) / rows - m.title
        else:
            ph = pw * aspect
        total = grid_height(rows, ph, m) if height_mm is None else height_mm
        if pw < min_panel_mm or ph < min_panel_mm * min(aspect, 1.0) * 0.75:
            continue
        if total > max_height_mm + 1e-9:
            continue
        key = (-min(pw, ph / aspect), rows * cols - n)
        if best is None or key < best[0]:
            best = (key, Grid(rows, cols, n, pw, ph))
    if best is None:
        if columns:
            raise FigkitError(f"{columns} columns of {n} panels do not fit: panels would be "
                              f"{panel_width(columns, width_mm, m):.0f} mm wide at {width_mm:.0f} mm "
                              f"(minimum {min_panel_mm:.0f} mm) or the figure taller than "
                              f"{max_height_mm:.0f} mm", field="panel_columns", value=columns)
        # Name the sizes that clash: the most columns that keep panels wide enough, and the
        # height those columns still need (the smallest height any allowed grid reaches).
        most = max(1, min(n, int((width_mm - m.left - m.right + m.hgap) // (min_panel_mm + m.hgap))))
        pw = panel_width(most, width_mm, m)
        if pw < min_panel_mm:
            raise FigkitError(f"panels would be {pw:.0f} mm wide in one column of a {width_mm:.0f} mm "
                              f"preset ({m.left + m.right:.0f} mm go to margins); the minimum is "
                              f"{min_panel_mm:.0f} mm", field="size",
                              allowed="a wider size preset or a smaller panel minimum")
        rows = math.ceil(n / most)
        if height_mm is not None:
            ph = (height_mm - m.top - m.bottom - (rows - 1) * m.vgap) / rows - m.title
            raise FigkitError(f"{n} panels do not fit: at most {most} columns of {min_panel_mm:.0f} mm "
                              f"panels fit the {width_mm:.0f} mm preset, and {rows} rows of them in "
                              f"{height_mm:.0f} mm leave panels {ph:.0f} mm tall (minimum "
                              f"{min_panel_mm * min(aspect, 1.0) * 0.75:.0f} mm)", field="height_mm",
                              allowed="a larger height_mm, a wider size preset or fewer panels")
        raise FigkitError(f"{n} panels do not fit: at most {most} columns of {min_panel_mm:.0f} mm "
                          f"panels fit the {width_mm:.0f} mm preset, and {rows} rows of them need "
                          f"{grid_height(rows, pw * aspect, m):.0f} mm of height; figures may be "
                          f"{max_height_mm:.0f} mm tall", field="size",
                          allowed="a wider size preset, fewer panels, or a smaller panel minimum")
    return best[1]


def fixed_grid(rows: int, cols: int, width_mm: float, m: Margins, *, aspect: float,
               min_panel_mm: float, max_height_mm: float, height_mm: float | None = None) -> Grid:
    """A two-way rows x columns grid: the sizes follow from the width (and height if given)."""
    pw = panel_width(cols, width_mm, m)
    if height_mm is not None:
        ph = (height_mm - m.top - m.bottom - (rows - 1) * m.vgap) / rows - m.title
    else:
        ph = pw * aspect
    total = height_mm if height_mm is not None else grid_height(rows, ph, m)
    if pw < min_panel_mm or ph <= 0:
        raise FigkitError(f"a {rows} x {cols} grid needs at least "
                          f"{m.left + m.right + cols * min_panel_mm + (cols - 1) * m.hgap:.0f} mm at "
                          f"{min_panel_mm:.0f} mm per panel; the preset is {width_mm:.0f} mm",
                          field="size", allowed="a wider size preset or fewer strata values")
    if total > max_height_mm + 1e-9:
        raise FigkitError(f"a {rows} x {cols} grid is {total:.0f} mm tall; the style allows "
                          f"{max_height_mm:.0f} mm", field="height_mm",
                          allowed="fewer rows, a wider preset or a lower height")
    return Grid(rows, cols, rows * cols, pw, ph)


def panel_box(grid: Grid, index: int, m: Margins, height_mm: float) -> tuple[float, float, float, float]:
    """(left, bottom, width, height) of panel ``index`` in mm from the bottom-left corner."""
    r, c = divmod(index, grid.cols)
    left = m.left + c * (grid.panel_w + m.hgap)
    top = m.top + r * (m.title + grid.panel_h + m.vgap) + m.title
    return left, height_mm - top - grid.panel_h, grid.panel_w, grid.panel_h


def text_mm(pt: float, lines: int = 1) -> float:
    """Height in mm of ``lines`` lines of text at ``pt`` points."""
    return pt_to_mm(pt) * LINE * lines


def below_empty(grid: Grid, index: int) -> bool:
    """True when the cell under panel ``index`` is empty (its x ticks must then be shown)."""
    r, c = divmod(index, grid.cols)
    return r == grid.rows - 1 or (r + 1) * grid.cols + c >= grid.panels
