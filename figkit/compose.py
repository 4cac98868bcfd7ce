"""Multi-part figures: one sheet row made of other rows ("(a) a scatter, (b) a box plot, (c)
shares" on one page), laid out at the journal width with one letter sequence across the parts.

The row's ``parts`` cell lists the parts' ids: commas between the parts of one line of the page,
``/`` between lines, e.g. ``oxygen-temperature, conductivity-catchments / sensitive-share``.

Each part is an ordinary row of the sheet and builds alone too.  Here it is read by the same
data pass (``figkit.render.prepare``: the build's checks and ``load_figure_data``) and records the same numbers
(``figkit.render.figure_record``); only its width (its cell's), its height (its line's) and its
house style (the combined row's: one figure, one look) differ.  Its key (legend or colour bar)
stays with it.

The page, in mm (:func:`page_cells`, :func:`page_boxes`, pure arithmetic):

* a line of ``k`` parts splits the width into ``k`` equal cells with ``PART_GAP_MM`` between;
* every line has a band on top for the part letters, then the parts;
* parts side by side line up on their panel edges: each takes the line's largest top margin
  (with its panel titles) and largest bottom margin; parts whose cells start at the same x in
  different lines take the largest left margin, so their panels' left edges line up too; and the
  line is as tall as its tallest part needs, the others' panels growing to match.

Drawing is two passes: each part alone at its cell width (its natural height and margins), then
each into a matplotlib sub-figure of the page with the line's height and margins as floors.
"""
from __future__ import annotations

import hashlib
import json
import re
import warnings
from dataclasses import dataclass, replace
from pathlib import Path

from . import layout as L
from .errors import FigkitError
from .sheet import Config, Project, SheetRow
from .spec import FigureSpec, build_spec, fingerprint

# White space between parts side by side and between lines of parts.  Common practice (no
# single source): 3-5 mm between the parts of a printed figure.
PART_GAP_MM = 4.0
# Limits: a page holds at most this many parts, and this many on one line (a part narrower than
# a quarter of a double column, ~42 mm, leaves no room for a panel and its axis labels).
MAX_PARTS = 12
MAX_PARTS_PER_LINE = 4
# Cells a row made of parts may fill besides 'parts' (the rest comes from its parts).
PARTS_ROW_FIELDS = ("id", "parts", "size", "style", "caption", "panel_letters")
_ID = re.compile(r"^[A-Za-z0-9][A-Za-z0-9_-]*$")


def is_parts(row: SheetRow) -> bool:
    """The row is a figure made of other rows (its ``parts`` cell is filled)."""
    return "parts" in row.cells


def parse_parts(text: str, err) -> tuple[tuple[str, ...], ...]:
    """The ``parts`` cell as lines of ids: ``a, b / c`` -> (("a", "b"), ("c",))."""
    lines = tuple(tuple(p.strip() for p in line.split(",")) for line in text.split("/"))
    example = "ids separated by commas, lines separated by '/', e.g. 'scatter-a, box-b / shares-c'"
    for line in lines:
        for pid in line:
            if not pid:
                raise err("an empty place in the parts list (two commas or slashes together, or "
                          "one at an end)", field="parts", value=text, allowed=example)
            if not _ID.match(pid):
                raise err("a part is not a figure id", field="parts", value=pid, allowed=example)
        if len(line) > MAX_PARTS_PER_LINE:
            raise err(f"{len(line)} parts on one line of the page", field="parts", value=text,
                      allowed=f"at most {MAX_PARTS_PER_LINE} per line; start a new line with '/'")
    ids = [pid for line in lines for pid in line]
    if len(ids) > MAX_PARTS:
        raise err(f"{len(ids)} parts", field="parts", value=text, allowed=f"at most {MAX_PARTS}")
    repeated = sorted({pid for pid in ids if ids.count(pid) > 1})
    if repeated:
        raise err("a part appears twice", field="parts", value=repeated[0],
                  allowed="each part once")
    return lines


def page_cells(lines, width_mm: float, gap_mm: float = PART_GAP_MM) -> list[tuple[int, float, float]]:
    """(line, x0, width) in mm of each part's cell, in reading order: a line of ``k`` parts
    splits ``width_mm`` into ``k`` equal cells with ``gap_mm`` between them."""
    out = []
    for i, line in enumerate(lines):
        k = len(line)
        w = (width_mm - (k - 1) * gap_mm) / k
        out += [(i, j * (w + gap_mm), w) for j in range(k)]
    return out


def page_boxes(cells, line_heights, band_mm: float, gap_mm: float = PART_GAP_MM):
    """Each cell's box (x0, top, width, height) in mm from the page's top-left corner, and the
    page height: every line is a letter band of ``band_mm`` then its parts, lines ``gap_mm``
    apart."""
    tops, y = [], 0.0
    for h in line_heights:
        tops.append(y + band_mm)
        y += band_mm + h + gap_mm
    height = y - gap_mm if line_heights else 0.0
    return [(x0, tops[i], w, line_heights[i]) for i, x0, w in cells], height


@dataclass
class PartsSpec:
    """A row made of other rows, resolved: its page and each part's spec at its cell's width."""
    id: str
    row: int
    lines: tuple[tuple[str, ...], ...]
    width_mm: float
    style: object                     # figkit.style.HouseStyle
    caption: str
    formats: tuple[str, ...]
    root: Path
    cells: dict
    size_preset: dict
    lettered: bool                    # the parts carry letters (the row and house style agree)
    parts: tuple[FigureSpec, ...]     # reading order, each at its cell's width, in this style
    part_rows: tuple[SheetRow, ...]
    own_styles: tuple[str, ...] = ()  # the house style each part has when built alone

    @property
    def data_paths(self) -> list[Path]:
        out: list[Path] = []
        for p in self.parts:
            if p.data_path not in out:
                out.append(p.data_path)
        return out

    def err(self, message: str, **kw) -> FigkitError:
        return FigkitError(message, row=self.row, figure=self.id, **kw)


def build_parts_spec(row: SheetRow, config: Config, rows: list[SheetRow]) -> PartsSpec:
    """Check a row made of parts against the sheet: the cells it may fill, its parts exist, are
    rows of their own (not made of parts) and build; each part's spec at its cell's width."""
    from .spec import _size_preset
    from .style import load_style
    if row.error is not None:
        raise row.error
    c, fig, num = row.cells, row.id, row.number

    def err(message, **kw):
        return FigkitError(message, row=num, figure=fig, **kw)

    for name in sorted(row.given):
        if name not in PARTS_ROW_FIELDS:
            raise err("a figure made of parts takes its data and chart from its parts", field=name,
                      value=c[name], allowed=f"leave '{name}' empty; a row with parts fills "
                      + ", ".join(PARTS_ROW_FIELDS))
    lines = parse_parts(c["parts"], err)
    by_id: dict[str, SheetRow] = {}
    for r in rows:
        by_id.setdefault(r.id, r)
    chartable = [r.id for r in rows if not is_parts(r)]
    part_rows = []
    for pid in (p for line in lines for p in line):
        part = by_id.get(pid)
        if part is None:
            raise err("a part names no row of the sheet", field="parts", value=pid,
                      allowed=chartable or "no chart rows yet")
        if part is row or is_parts(part):
            raise err("a part must be a chart row, not a figure made of parts", field="parts",
                      value=pid, allowed=chartable)
        part_rows.append(part)

    style = load_style(c.get("style") or config["style"], config.root / config["styles_dir"],
                       config.get("sizes"), config.get("dpi"), row=num, figure=fig)
    preset, size_from = _size_preset(row, config, style, err)
    width = style.width_mm(preset, row=num, figure=fig)
    cells = page_cells(lines, width)
    specs, own_styles = [], []
    for part, (_line, _x0, w) in zip(part_rows, cells):
        try:
            spec = build_spec(part, config)
        except FigkitError as exc:
            raise FigkitError(f"part '{part.id}' (sheet row {part.number}): {exc.message}", row=num,
                              figure=fig, field=exc.field, value=exc.value,
                              allowed=exc.allowed) from None
        own_styles.append(spec.style.name)
        specs.append(replace(
            spec, width_mm=w, height_mm=None, style=style, formats=tuple(config["formats"]),
            letters=spec.letters and style.letters != "none",
            size_preset={"name": f"part of {fig}", "mm": round(w, 3), "from": f"sheet row {num}",
                         "presets_from": spec.size_preset["presets_from"]}))
    # Parts are lettered unless the row says panel_letters=no (the column's default, "no", is
    # for panels of a chart row) or the house style letters nothing.
    lettered = not ("panel_letters" in row.given and c["panel_letters"] == "no") \
        and style.letters != "none" and len(part_rows) > 1   # one part: nothing to tell apart
    return PartsSpec(
        id=fig, row=num, lines=lines, width_mm=width, style=style, caption=c.get("caption", ""),
        formats=tuple(config["formats"]), root=config.root, cells=dict(c),
        size_preset={"name": preset, "mm": width, "from": size_from,
                     "presets_from": "config.yaml sizes:" if config.get("sizes")
                     else f"house style '{style.name}'"},
        lettered=lettered, parts=tuple(specs), part_rows=tuple(part_rows),
        own_styles=tuple(own_styles))


def parts_fingerprint(row: SheetRow, config: Config, rows: list[SheetRow]) -> str:
    """The row's own fingerprint and each part's: editing a part's row, or a setting a part
    reads, reruns the combined figure (and that part), nothing else."""
    by_id: dict[str, SheetRow] = {}
    for r in rows:
        by_id.setdefault(r.id, r)
    ids = [p.strip() for p in re.split(r"[,/]", row.cells.get("parts", "")) if p.strip()]
    blob = json.dumps([fingerprint(row, config)] +
                      [fingerprint(by_id[p], config) if p in by_id else f"missing:{p}" for p in ids])
    return hashlib.sha256(blob.encode()).hexdigest()[:16]


def _letter_plan(pspec: PartsSpec, panel_counts: list[int]) -> tuple[list[FigureSpec], list[str | None]]:
    """One letter sequence across the parts: a part gets one letter, or, when its own row
    letters its panels, its panels continue the sequence (and the part takes no letter of its
    own).  Returns the part specs (with ``letter_from`` set) and each part's letter."""
    from .draw import panel_letter
    specs, letters, k = [], [], 0
    for spec, n in zip(pspec.parts, panel_counts):
        titled = len(spec.strata) == 1 or spec.grid
        if pspec.lettered and spec.letters and titled and n > 1:
            specs.append(replace(spec, letter_from=k))
            letters.append(None)
            k += n
        else:
            specs.append(replace(spec, letters=False))
            letters.append(panel_letter(k, pspec.style.letters) if pspec.lettered else None)
            k += 1 if pspec.lettered else 0
    return specs, letters


def render_parts(project: Project, row: SheetRow, granted: dict | None = None) -> dict:
    """Build a figure made of parts: files, values and stats tables (one line per part's line,
    with a ``part`` column) and a sidecar whose ``parts`` hold each part's sidecar fields."""
    import matplotlib as mpl
    mpl.use("Agg", force=True)
    from . import provenance as P
    from .render import _stats_csv, _values_csv, collector_paused, log, rebuild_command, write_figure

    pspec = build_parts_spec(row, project.config, project.rows)
    st = pspec.style
    # Python warnings while drawing and saving become cautions, as for any figure (render).
    with mpl.rc_context(st.rc), warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        page, d = draw_parts(project, pspec)
        W, H = pspec.width_mm, d["height"]
        record = {
            "id": pspec.id,
            "chart": "parts",
            "size_mm": [round(W, 3), round(H, 3)],
            "size_preset": pspec.size_preset,
            "dpi": st.dpi,
            "files": {fmt: f"{pspec.id}.{fmt}" for fmt in pspec.formats},
            "inputs": d["inputs"],
            "layout": {"lines": [list(line) for line in pspec.lines], "gap_mm": PART_GAP_MM,
                       "letter_band_mm": round(d["band"], 3), "parts": len(d["parts"]),
                       "letters": [p["letter"] for p in d["parts"]]},
            "parts": d["parts"],
            "panels": [],   # a figure made of parts has its panels in its parts
            "colours": {"used": d["colours"], "min_delta_e": d["min_delta_e"]},
            "min_font_pt": d["sizes"].min_font_pt,
            "min_line_pt": d["sizes"].min_line_pt,
            "cautions": d["cautions"],
            "style": {"name": st.name, "files": st.digest()},
            "row_sha256": P.row_sha256(row.cells),
            "fingerprint": parts_fingerprint(row, project.config, project.rows),
            "resources": {**d["job"].record(), "granted": granted},
            "settings": {"from": project.settings_from,
                         "sha256": P.settings_sha256(project.config.data)},
            "rebuild": rebuild_command(pspec, project.config["results"]),
            "versions": {**P.versions(), "font": P.font_file(_font(st))},
        }
        for msg in d["cautions"]:
            log.warning("%s: %s", pspec.id, msg)
        # Only the saving with the collector paused: the parts' data and their first, thrown-away
        # drawings (pass 1 of draw_parts) leave garbage that should go as it comes.
        with collector_paused():
            write_figure(page, record, pspec.id, pspec.formats, st, project.config.results / "figures",
                         d["min_delta_e"], pspec.err, values=_values_csv(d["values"], ("part",)),
                         stats=_stats_csv(d["stat_lines"], ("part",)), caught=caught)
    return P.clean(record)


def draw_parts(project: Project, pspec: PartsSpec):
    """The page (a matplotlib Figure) of a figure made of parts, and what its sidecar needs:
    each part's record, stats and values lines, colours, cautions, inputs and sizes.  Call it
    inside the house style's ``rc_context``."""
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure
    from matplotlib.gridspec import GridSpec

    from . import progress
    from .checks import enforce_minimums
    from .draw import TEXT_EDGE_MM, build_figure
    from .jobsize import job_size
    from .render import drawn_values, figure_record, prepare, strata_comparison, strata_note
    from .style import mm_to_in

    st = pspec.style
    limit = int(project.config["stream_above_mb"] * 2 ** 20)
    sizes = [job_size(s, limit) for s in pspec.parts]
    combined = parts_job_size(sizes)
    check_parts_ceiling(pspec, combined, project.config.get("max_mem_mb"))
    datas = []
    for part_row in pspec.part_rows:   # each part's data through the build's own checks
        progress.stage(f"reading the data of part '{part_row.id}'")
        try:
            datas.append(prepare(project, part_row)[2])
        except FigkitError as exc:
            raise _part_error(exc, part_row, pspec) from None
    specs, letters = _letter_plan(pspec, [len(d.panels) for d in datas])
    stratas = [strata_comparison(s, d) for s, d in zip(specs, datas)]
    notes = [strata_note(t) if st.strata_note else None for t in stratas]
    cells = page_cells(pspec.lines, pspec.width_mm)
    band = L.text_mm(st.title_pt + 1) + TEXT_EDGE_MM + 0.4 if any(letters) else 0.0

    # Pass 1: each part alone at its cell's width: its natural height, margins and columns.
    alone = []
    for spec, data, note in zip(specs, datas, notes):
        progress.stage(f"laying out part '{spec.id}'")
        try:
            _fig, drawn = build_figure(spec, data, note)
        except FigkitError as exc:
            raise _part_error(exc, spec, pspec) from None
        alone.append((drawn["size_mm"][1], drawn["margins"], drawn["layout"]["cols"]))
    heights, top, bottom, left = [], {}, {}, {}
    for i, line in enumerate(pspec.lines):
        members = [k for k, c in enumerate(cells) if c[0] == i]
        top[i] = max(alone[k][1].top + alone[k][1].title for k in members)
        bottom[i] = max(alone[k][1].bottom for k in members)
        inner = max(alone[k][0] - alone[k][1].top - alone[k][1].title - alone[k][1].bottom
                    for k in members)
        heights.append(top[i] + inner + bottom[i])
    for k, (_i, x0, _w) in enumerate(cells):
        key = round(x0, 2)
        left[key] = max(left.get(key, 0.0), alone[k][1].left)
    boxes, page_h = page_boxes(cells, heights, band)
    if page_h > st.max_height_mm + 1e-9:
        raise pspec.err(f"the parts need {page_h:.0f} mm of height; the house style allows "
                        f"{st.max_height_mm:.0f} mm", field="parts", value=pspec.cells["parts"],
                        allowed="fewer lines of parts, or parts with fewer panel rows")

    # Pass 2: the page, each part in a sub-figure of its cell with the line's margins.
    W, H = pspec.width_mm, page_h
    page = Figure(figsize=(mm_to_in(W), mm_to_in(H)), dpi=72)
    FigureCanvasAgg(page)
    parts_out, stat_lines, values, colours, cautions = [], [], [], [], []
    letter_texts, drawn_margins = [], []
    min_de = []
    inputs: list[dict] = []
    for k, (spec, data, note, box) in enumerate(zip(specs, datas, notes, boxes)):
        x0, y_top, w, h = box
        progress.stage(f"drawing part '{spec.id}'")
        gs = GridSpec(3, 3, figure=page, wspace=0, hspace=0, left=0, right=1, bottom=0, top=1,
                      width_ratios=[max(x0, 1e-6), w, max(W - x0 - w, 1e-6)],
                      height_ratios=[max(y_top, 1e-6), h, max(H - y_top - h, 1e-6)])
        sub = page.add_subfigure(gs[1, 1])
        line = cells[k][0]
        floor = L.Margins(left=left[round(x0, 2)], right=0.0, top=top[line], bottom=bottom[line],
                          title=0.0, hgap=0.0, vgap=0.0)
        cols = alone[k][2]
        placed = replace(spec, height_mm=h, columns=cols if len(spec.strata) == 1 else spec.columns)
        try:
            _sub, drawn = build_figure(placed, data, note, target=sub, floor=floor)
            part_sizes = enforce_minimums(sub, st.min_text_pt, st.min_line_pt,
                                          figure=spec.id, row=spec.row)
            rec, lines_k, de = figure_record(project, pspec.part_rows[k], placed, data,
                                             stratas[k], drawn, part_sizes, sizes[k], None)
        except FigkitError as exc:
            raise _part_error(exc, spec, pspec) from None
        letter = letters[k]
        label = letter or spec.id
        for ln in lines_k:
            stat_lines.append({"part": label, **ln})
        for v in drawn_values(placed, rec["panels"], rec.get("bin_edges")):
            values.append({"part": label, **v})
        colours += [c for c in rec["colours"]["used"] if c not in colours]
        min_de.append(de)
        own_style = pspec.own_styles[k] if pspec.own_styles else st.name
        if own_style != st.name:   # one figure, one look
            rec["cautions"].append(f"drawn in the combined figure's house style '{st.name}', "
                                   f"not its own '{own_style}'")
        cautions += [f"part {label} ({spec.id}): {c}" for c in rec["cautions"]]
        inputs += [i for i in rec["inputs"] if i not in inputs]
        for drop in ("files", "rebuild", "settings", "versions", "dpi", "resources"):
            rec.pop(drop, None)
        parts_out.append({"letter": letter,
                          "box_mm": [round(v, 3) for v in box],   # x0, top, width, height
                          **rec})
        drawn_margins.append(drawn["margins"])
        if letter:
            # Kept TEXT_EDGE_MM off the page's edge, as every text of figkit (draw.py).
            letter_texts += [page.text((x0 + TEXT_EDGE_MM) / W, 1 - (y_top - band + TEXT_EDGE_MM) / H, letter,
                      fontsize=st.title_pt + 1, fontweight="bold", ha="left", va="top")]
    page_sizes = enforce_minimums(page, st.min_text_pt, st.min_line_pt, figure=pspec.id,
                                  row=pspec.row)
    cautions += _letter_clashes(page, letter_texts) + _misaligned(cells, drawn_margins)
    # Per vision, the closest pair of colours within any one part (a reader tells groups
    # apart within a part; the parts' keys are separate).
    sep_de = {v: min((d[v] for d in min_de if d.get(v) is not None), default=None)
              for v in (min_de[0] if min_de else {})}
    return page, {"height": H, "band": band, "parts": parts_out, "stat_lines": stat_lines,
                  "values": values, "colours": colours, "min_delta_e": sep_de,
                  "cautions": cautions, "inputs": inputs, "sizes": page_sizes, "job": combined}


def _letter_clashes(page, letter_texts) -> list[str]:
    """A part letter's box against every other text of the page (figkit.checks' tolerance)."""
    from .checks import _visible_texts
    from .draw import _overlap
    renderer = page.canvas.get_renderer()
    mine = {id(t) for t in letter_texts}
    others = [(t.get_text(), t.get_window_extent(renderer)) for t in _visible_texts(page)
              if id(t) not in mine]
    for t in letter_texts:
        a = t.get_window_extent(renderer)
        for text, b in others:
            if _overlap(a, b):
                return [f"part letter '{t.get_text()}' touches other text ('{text[:30]}')"]
    return []


def _misaligned(cells, margins, tol_mm: float = 0.1) -> list[str]:
    """The floors make parts line up unless a part needed more room on the page than alone (a
    taller panel can carry longer tick labels): say so when drawn edges differ by over tol_mm."""
    out = []
    for i in sorted({c[0] for c in cells}):
        line = [m for c, m in zip(cells, margins) if c[0] == i]
        for name, edge in (("top", lambda m: m.top + m.title), ("bottom", lambda m: m.bottom)):
            spread = max(map(edge, line)) - min(map(edge, line))
            if spread > tol_mm:
                out.append(f"parts on line {i + 1} of the page: panel {name} edges differ by "
                           f"{spread:.1f} mm")
    by_x: dict = {}
    for c, m in zip(cells, margins):
        by_x.setdefault(round(c[1], 2), []).append(m.left)
    for x0, lefts in by_x.items():
        if len(lefts) > 1 and max(lefts) - min(lefts) > tol_mm:
            out.append(f"parts starting {x0:g} mm from the left: panel left edges differ by "
                       f"{max(lefts) - min(lefts):.1f} mm")
    return out


def _font(st) -> str:
    fam = st.rc.get("font.family", "DejaVu Sans")
    return fam[0] if isinstance(fam, list) else fam


def _part_error(exc: FigkitError, part, pspec: PartsSpec) -> FigkitError:
    """A part's error, said of the combined figure (the row the user built), naming the part:
    ``part`` is its FigureSpec (drawing: its cell's width is named) or its SheetRow (data)."""
    cell = f" in its {part.width_mm:.0f} mm cell" if hasattr(part, "width_mm") else ""
    number = part.row if hasattr(part, "width_mm") else part.number
    return FigkitError(f"part '{part.id}' (sheet row {number}){cell}: {exc.message}", row=pspec.row,
                       figure=pspec.id, field=exc.field, value=exc.value, allowed=exc.allowed)


def check_parts_ceiling(pspec: PartsSpec, size, ceiling_mb) -> None:
    """Refuse, in one line, a figure whose parts together need more than ``max_mem_mb`` (the
    workflow checks when it reads the sheet, the job again before reading any data)."""
    if ceiling_mb is not None and size.mem_mb > ceiling_mb:
        raise pspec.err(f"the parts together need about {size.mem_mb} MB, over the memory "
                        f"ceiling max_mem_mb: {ceiling_mb:g}", field="parts",
                        value=pspec.cells["parts"],
                        allowed=f"parts within {ceiling_mb:g} MB together (filters, or a larger ceiling)")


def parts_job_size(sizes):
    """A combined figure's job holds every part's data at once (pass 2 draws from it)."""
    from .jobsize import BASE_MB, JobSize
    return JobSize(mem_mb=BASE_MB + sum(max(s.mem_mb - BASE_MB, 0) for s in sizes),
                   runtime=sum(s.runtime for s in sizes), rows=sum(s.rows for s in sizes),
                   columns=max(s.columns for s in sizes), streamed=any(s.streamed for s in sizes),
                   rows_known=all(s.rows_known for s in sizes))
