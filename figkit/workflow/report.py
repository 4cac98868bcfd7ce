"""What Snakemake's HTML report shows of each figure beyond its picture and caption: the numbers
of its sidecar (per-panel n and n_dropped, the trend's slope with its interval, the strata
comparison, the cautions) and the labels of the results table (chart kind, panel count).

The sidecar is read when the report is written (Snakemake evaluates params and labels then), so
the numbers are those of the files in the report.  Every piece of text goes through
:func:`figkit.text.rst_text`: panel labels and cautions quote data values, and nothing from a
data file may become markup.
"""
from __future__ import annotations

import json
from pathlib import Path

from ..text import ReportText, rst_text


def _read(path: Path) -> dict | None:
    try:
        return json.loads(Path(path).read_text(encoding="utf-8"))
    except (OSError, ValueError):
        return None


def _num(v, digits: int = 3) -> str:
    if v is None:
        return "–"
    if isinstance(v, int):
        return f"{v:,}"
    text = f"{v:,.0f}" if abs(v) >= 10 ** digits else f"{v:.{digits}g}"   # no exponents
    return text.replace("-", "−")


def _p(p) -> str:
    return "p < 0.001" if p is not None and p < 0.001 else f"p = {_num(p, 2)}"


def _cell(text: str) -> str:
    return rst_text(text) or "\\ "   # an empty cell still needs content in a list-table


def numbers_rst(car: dict) -> str:
    """reStructuredText for one sidecar: a table of panels, the strata comparison, the cautions.
    A figure made of parts: each part's numbers in turn, under its letter and id."""
    if car.get("parts"):
        out = []
        for part in car["parts"]:
            tag = f"({part['letter']}) {part.get('id')}" if part.get("letter") else str(part.get("id"))
            out += [rst_text(f"Part {tag}:"), "", numbers_rst({**part, "cautions": []})]
        cautions = car.get("cautions") or []
        if cautions:
            out += [rst_text("Cautions:"), ""] + [f"* {rst_text(c)}" for c in cautions] + [""]
        return "\n".join(out)
    panels = car.get("panels") or []
    slopes = any((p.get("trend") or {}).get("kind") == "line" for p in panels)
    head = ["panel", "n", "n dropped"] + (["slope (95% CI)"] if slopes else [])
    rows = []
    for p in panels:
        row = [p.get("label") or "all", _num(p.get("n")), _num(p.get("n_dropped"))]
        if slopes:
            t = p.get("trend") or {}
            ci = t.get("slope_ci") or [None, None]
            row.append(f"{_num(t.get('slope'))} ({_num(ci[0])} to {_num(ci[1])})"
                       if t.get("kind") == "line" and t.get("slope") is not None else "–")
        rows.append(row)
    out = [".. list-table::", "   :header-rows: 1", ""]
    for row in [head] + rows:
        out.append(f"   * - {_cell(row[0])}")
        out += [f"     - {_cell(c)}" for c in row[1:]]
    out.append("")
    test = car.get("strata_test")
    if test and test.get("F") is not None:
        out += [rst_text(
            f"Do slopes differ across panels? F({test.get('df_num')}, {test.get('df_den')}) = "
            f"{_num(test.get('F'))}, {_p(test.get('p'))}; pooled within-panel slope "
            f"{_num(test.get('pooled_slope'))}, crude slope {_num(test.get('crude_slope'))}."), ""]
    cautions = car.get("cautions") or []
    if cautions:
        out += [rst_text("Cautions:"), ""] + [f"* {rst_text(c)}" for c in cautions] + [""]
    return "\n".join(out)


class ReportNumbers:
    """A Snakemake param for the caption template: ``.rst`` is :func:`numbers_rst` of the sidecar,
    read when the template asks (the report is written after the build).  Its ``str()``, listed
    under "Job parameters", is the sidecar's path as a script-safe JSON string.  Snakemake does
    not record params of this type for its rerun trigger."""

    __slots__ = ("path",)

    def __init__(self, path) -> None:
        self.path = str(path)

    @property
    def rst(self) -> str:
        car = _read(self.path)
        return numbers_rst(car) if car else rst_text("(no sidecar yet)")

    def __str__(self) -> str:
        return str(ReportText(self.path))

    __repr__ = __str__


def labels(sidecar: Path, figure_id: str) -> dict:
    """The report's results table columns for one figure: id, chart kind, panel count."""
    car = _read(sidecar) or {}
    return {"figure": figure_id, "chart": str(car.get("chart", "")),
            "panels": str(len(car.get("panels") or []) or
                          sum(len(p.get("panels") or []) for p in car.get("parts") or []))}
