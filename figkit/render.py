"""The pipeline for one figure: sheet row -> spec -> data -> statistics -> drawing -> checks ->
files + sidecar.  Also the notebook API: :func:`figure` returns a matplotlib Figure for one row.
"""
from __future__ import annotations

import csv
import gc
import io
import json
import logging
import re
import warnings
from contextlib import contextmanager
from pathlib import Path

import numpy as np

from . import provenance as P
from . import stats
from .checks import enforce_minimums
from .data import FigureData, load_figure_data
from .errors import FigkitError
from .sheet import Project, SheetRow, check_row, find_row, load_project  # noqa: F401 (API)
from .spec import FigureSpec, build_spec, fingerprint
from .text import shown

log = logging.getLogger("figkit")

STATS_COLUMNS = ["panel", "group", "n", "n_dropped", "x_mean", "y_mean", "slope", "slope_ci_low",
                 "slope_ci_high", "intercept", "r"]
# <id>.values.csv: the numbers drawn, one line per number (tidy, long form).  x is the category
# (or, for bins, empty with x_low/x_high the bin's edges), group the colour group, y the second
# category of tiles; measure names the number (count, share, q1, ...).
VALUES_COLUMNS = ["panel", "group", "x", "x_low", "x_high", "y", "measure", "value"]
_BOX_MEASURES = ("n", "q1", "median", "q3", "whisker_low", "whisker_high", "outliers")
_VIOLIN_MEASURES = ("n", "q1", "median", "q3", "bandwidth")
_SHARE_MEASURES = ("count", "total", "share", "share_ci_low", "share_ci_high")


def drawn_values(spec: FigureSpec, panels: list[dict], edges=None) -> list[dict]:
    """The numbers each panel draws, from the panel records of the sidecar: bin counts on the
    shared edges, bar counts (or summed weights), shares, tile counts, box and violin statistics."""
    out = []
    kind = spec.chart.name
    measure = "sum of " + spec.weight if spec.weight else "count"
    for p in panels:
        label = p["label"]

        def add(value, name, x=None, group=None, y=None, low=None, high=None):
            out.append({"panel": label, "group": group, "x": x, "x_low": low, "x_high": high,
                        "y": y, "measure": name, "value": value})
        if kind == "histogram" and edges is not None:
            for i, c in enumerate(p.get("bin_counts") or []):
                add(c, "count", low=edges[i], high=edges[i + 1])
        elif kind == "count-bars":
            for e in p.get("counts", []):
                add(e["count"], measure, x=e["x"], group=e["group"])
        elif kind == "shares":
            for e in p.get("shares", []):
                for m in _SHARE_MEASURES:
                    if m in e:
                        add(e[m], m if m not in ("count", "total") or not spec.weight
                            else f"{m} (sum of {spec.weight})", x=e["x"], group=e["group"])
        elif kind == "tiles":
            for e in p.get("tiles", []):
                add(e["count"], measure, x=e["x"], y=e["y"])
        elif kind == "lines":
            for g in p.get("groups", []):
                for pt in g.get("per_x", []):
                    for m in ("n", "mean", "ci_low", "ci_high"):
                        if pt[m] is not None:
                            add(pt[m], m, x=pt.get("x_label", pt["x"]), group=g["group"])
        elif kind == "means":
            for g in p.get("groups", []):
                for m in ("n", "mean", "sd", "ci_low", "ci_high"):
                    add(g[m], m, x=g["x"], group=g["colour_group"])
        elif kind in ("box", "violin"):
            for g in p.get("groups", []):
                for m in (_BOX_MEASURES if kind == "box" else _VIOLIN_MEASURES):
                    add(g[m], m, x=g["group"])
    return out


def _values_csv(lines: list[dict], lead: tuple = ()) -> str:
    """``lead``: columns in front (a multi-part figure's ``part``)."""
    buf = io.StringIO()
    w = csv.writer(buf, lineterminator="\n")
    w.writerow([*lead, *VALUES_COLUMNS])
    for line in lines:
        w.writerow(["" if (v := P.clean(line.get(c))) is None else v for c in (*lead, *VALUES_COLUMNS)])
    return buf.getvalue()


def spec_from_cells(cells: dict, project: Project | str | Path = ".") -> FigureSpec:
    """A spec from a dict of sheet cells (as a notebook would write a row), in a project."""
    proj = project if isinstance(project, Project) else load_project(project)
    clean = {k: str(v) for k, v in cells.items() if v not in (None, "")}
    row = check_row(None, clean)                               # no sheet row to name
    if row.error is None and "parts" in row.cells:   # a figure made of parts (figkit.compose)
        from .compose import build_parts_spec
        return build_parts_spec(row, proj.config, proj.rows)
    return build_spec(row, proj.config)


def _stat_line(panel, spec: FigureSpec, x, y) -> dict:
    # n is the panel's rows drawn, also for charts with no numeric x (bars, shares, tiles)
    rec = {"n": len(x) if len(x) or spec.chart.x == "numeric" else panel.n, "n_dropped": panel.n_dropped,
           "x_mean": float(np.mean(x)) if len(x) else None,
           "y_mean": float(np.mean(y)) if y is not None and len(y) else None,
           "slope": None, "slope_ci_low": None, "slope_ci_high": None, "intercept": None, "r": None}
    if y is not None and len(x) >= 3 and np.ptp(x) > 0:
        fit = stats.fit_line(x, y)
        rec.update(slope=fit.slope, slope_ci_low=fit.slope_ci_low, slope_ci_high=fit.slope_ci_high,
                   intercept=fit.intercept, r=fit.r)
    return rec


def _tally_line(p) -> dict:
    t = p.tally
    rec = {"n": t.n, "n_dropped": p.n_dropped, "x_mean": t.x_mean, "y_mean": None, "slope": None,
           "slope_ci_low": None, "slope_ci_high": None, "intercept": None, "r": None}
    if t.line is not None:
        rec["y_mean"] = t.line.y_mean
        if t.line.n >= 3 and t.line.sxx > 0:
            fit = t.line.fit()
            rec.update(slope=fit.slope, slope_ci_low=fit.slope_ci_low,
                       slope_ci_high=fit.slope_ci_high, intercept=fit.intercept, r=fit.r)
    return rec


def panel_statistics(spec: FigureSpec, data: FigureData) -> list[dict]:
    """One line per panel (and per colour group where colour splits the data)."""
    lines = []
    numeric_x = spec.chart.x == "numeric"
    numeric_y = spec.chart.y == "numeric"
    for p in data.panels:
        if p.tally is not None:           # streamed: the same numbers from one-pass sums
            lines.append({"panel": p.label, "group": None, **_tally_line(p)})
            continue
        x = p.frame[spec.x].to_numpy(dtype=float) if numeric_x else np.array([])
        y = p.frame[spec.y].to_numpy(dtype=float) if numeric_y else None
        if not numeric_x and numeric_y:
            x, y = y, None   # groups charts: the mean of the measured field goes in y_mean
            line = _stat_line(p, spec, x, None)
            line["y_mean"], line["x_mean"] = line["x_mean"], None
        else:
            line = _stat_line(p, spec, x, y)
        line = {"panel": p.label, "group": None, **line}
        lines.append(line)
        if spec.colour and spec.colour in data.levels and (numeric_x or numeric_y):
            for level, part in p.frame.groupby(spec.colour, sort=False, observed=True):
                gx = part[spec.x].to_numpy(dtype=float) if numeric_x else part[spec.y].to_numpy(dtype=float)
                gy = part[spec.y].to_numpy(dtype=float) if numeric_x and numeric_y else None
                g = _stat_line(p, spec, gx, gy)
                g["n_dropped"] = None
                if not numeric_x:
                    g["y_mean"], g["x_mean"] = g["x_mean"], None
                lines.append({"panel": p.label, "group": P.clean(level), **g})
        if spec.chart.name == "means" and p.n:   # n and mean of every group a dot stands for
            keys = [spec.x] + ([spec.colour] if spec.colour else [])
            for key, part in p.frame.groupby(keys, sort=False, observed=True):
                key = key if isinstance(key, tuple) else (key,)
                y_part = part[spec.y].to_numpy(dtype=float)
                lines.append({"panel": p.label, "group": " / ".join(shown(k) for k in key),
                              "n": len(y_part), "n_dropped": None, "x_mean": None,
                              "y_mean": float(y_part.mean()), "slope": None, "slope_ci_low": None,
                              "slope_ci_high": None, "intercept": None, "r": None})
    return lines


def strata_comparison(spec: FigureSpec, data: FigureData) -> dict | None:
    """Interaction F-test of equal slopes across panels (stats.strata_slope_test_from_sums): one
    pass of centred sums per panel, in memory or streamed alike.  Solving the two least-squares
    models directly (stats.strata_slope_test, the same F) took 1.7 s at 2 million rows."""
    if spec.trend != "line" or not spec.strata or len(data.panels) < 2:
        return None
    if data.panels[0].tally is not None:
        sums = {p.label: p.tally.line for p in data.panels if p.tally.line is not None}
    else:
        sums = {p.label: stats.LineSums.of(p.frame[spec.x].to_numpy(dtype=float),
                                           p.frame[spec.y].to_numpy(dtype=float))
                for p in data.panels if p.n}     # an empty panel is no stratum of the data
    test = stats.strata_slope_test_from_sums(sums)
    if test is None:
        return None
    return {"F": test.F, "df_num": test.df_num, "df_den": test.df_den, "p": test.p,
            "pooled_slope": test.pooled_slope, "crude_slope": test.crude_slope,
            "excluded": list(test.excluded)}


def strata_note(test: dict | None) -> str | None:
    """One line for the figure: do the slopes differ across panels?  p is printed to two
    significant digits, and as "p < 0.001" below that (common reporting practice)."""
    if not test or test["F"] is None:
        return None
    p = test["p"]
    p_text = "p < 0.001" if p < 0.001 else f"p = {p:.2g}"
    return (f"Equal slopes across panels: F({test['df_num']}, {test['df_den']}) = {test['F']:.2f}, "
            f"{p_text}; pooled within-panel slope {test['pooled_slope']:.3g}, "
            f"crude slope {test['crude_slope']:.3g}")


def figure(row_or_id, project: Project | str | Path = "."):
    """Notebook API: the matplotlib Figure of one sheet row (by id, or a dict of cells)."""
    import matplotlib as mpl
    proj = project if isinstance(project, Project) else load_project(project)
    spec = proj.spec(row_or_id) if isinstance(row_or_id, str) else spec_from_cells(row_or_id, proj)
    if hasattr(spec, "parts"):   # a figure made of parts (figkit.compose)
        from .compose import draw_parts
        with mpl.rc_context(spec.style.rc), warnings.catch_warnings(record=True) as caught:
            warnings.simplefilter("always")
            page, drawn = draw_parts(proj, spec)
        for note in drawn["cautions"] + warning_notes(caught):   # as in a build
            log.warning("%s: %s", spec.id, note)
        return page
    data = load_figure_data(spec, stream_above_bytes=int(proj.config["stream_above_mb"] * 2 ** 20))
    from .draw import build_figure
    with mpl.rc_context(spec.style.rc), warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        fig, _ = build_figure(spec, data, _note_for(spec, data))
    for note in warning_notes(caught):       # as in a build: a caution, not warning text
        log.warning("%s: %s", spec.id, note)
    return fig


def _note_for(spec: FigureSpec, data: FigureData) -> str | None:
    return strata_note(strata_comparison(spec, data)) if spec.style.strata_note else None


def rebuild_command(spec: FigureSpec, results: str) -> str:
    return f"snakemake --cores 1 --forcerun {results}/figures/{spec.id}.json"


def render(project: Project, figure_id: str, granted: dict | None = None) -> dict:
    """Build one figure's files and sidecar under ``results/figures``; return the sidecar.
    Every mistake found on the way names the sheet row and the figure.  ``granted``: the
    resources the workflow gave the job (mem_mb, runtime), for the sidecar.  A row made of
    other rows (a ``parts`` cell) is drawn by figkit.compose."""
    from . import progress
    row = find_row(project.rows, figure_id)
    try:
        with progress.job(figure_id):
            if row.error is None and "parts" in row.cells:
                from .compose import render_parts
                return render_parts(project, row, granted)
            return _render(project, row, granted)
    except FigkitError as exc:
        raise exc.at(row=row.number, figure=figure_id) from None


def prepare(project: Project, row: SheetRow):
    """Every check a build makes before it draws, in the build's order: the row and settings
    (spec), the style sheet, the job's memory ceiling (before reading any data), then the row
    against its data.  Returns (spec, job size, data).  `figkit lint` runs exactly this, so a
    row that lints clean does not fail at build time before drawing."""
    from .jobsize import check_ceiling, job_size
    spec = build_spec(row, project.config)
    spec.style.rc                          # parses and checks the style sheet
    from .layout import check_height
    try:
        st = spec.style        # a panel's least height, as layout.choose_grid requires it
        check_height(spec.height_mm, st.max_height_mm,
                     st.panel_min_mm * min(st.panel_aspect, 1.0) * 0.75)
    except FigkitError as exc:
        raise exc.at(row=spec.row, figure=spec.id) from None
    path = spec.data_path          # before anything opens it: a pipe would block the read
    if not path.is_file():
        raise spec.err("dataset file not found" if not path.exists() else
                       "dataset file is not a regular file (a folder, pipe or device)",
                       field="dataset", value=str(path))
    limit = int(project.config["stream_above_mb"] * 2 ** 20)
    size = job_size(spec, limit)
    check_ceiling(spec, size, project.config.get("max_mem_mb"))
    data = load_figure_data(spec, stream_above_bytes=limit)
    if spec.colour and spec.colour not in data.levels and all(p.tally is None for p in data.panels):
        from .data import colour_range
        colour_range(spec, data)         # a numeric colour field: its 'centre' inside its range
    return spec, size, data


@contextmanager
def collector_paused():
    """Python's cyclic garbage collector paused while a figure is drawn and saved.  A figure is
    tens of thousands of small objects made at once (each tick alone is five artists), so the
    collector keeps walking them without finding garbage: 0-10% of a render's CPU time,
    measured per demo figure with it on and off (most for figures with many panels or bars).  The
    data are read before this (a multi-part figure pauses it for its saving only), and the
    figure's own garbage is collected as usual once it is written."""
    was = gc.isenabled()
    gc.disable()
    try:
        yield
    finally:
        if was:
            gc.enable()


def _render(project: Project, row: SheetRow, granted: dict | None = None) -> dict:
    import matplotlib as mpl
    mpl.use("Agg", force=True)
    from . import progress
    from .draw import build_figure

    spec, size, data = prepare(project, row)
    out_dir = project.config.results / "figures"

    strata = strata_comparison(spec, data)
    # Library warnings while drawing and saving (a glyph the font lacks, say) are recorded, not
    # printed as Python warning text: they become the figure's cautions (sidecar and log).
    with mpl.rc_context(spec.style.rc), warnings.catch_warnings(record=True) as caught, \
            collector_paused():
        warnings.simplefilter("always")
        fig, drawn = build_figure(spec, data, strata_note(strata) if spec.style.strata_note else None)
        progress.stage("checking text and line sizes")
        sizes = enforce_minimums(fig, spec.style.min_text_pt, spec.style.min_line_pt,
                                 figure=spec.id, row=spec.row)
        record, stat_lines, min_delta_e = figure_record(project, row, spec, data, strata, drawn,
                                                        sizes, size, granted)
        panels = record["panels"]
        for msg in record["cautions"]:
            log.warning("%s: %s", spec.id, msg)
        write_figure(fig, record, spec.id, spec.formats, spec.style, out_dir, min_delta_e, spec.err,
                     values=_values_csv(drawn_values(spec, panels, record.get("bin_edges"))),
                     stats=_stats_csv(stat_lines), caught=caught)
    return P.clean(record)


def figure_record(project: Project, row: SheetRow, spec: FigureSpec, data: FigureData,
                  strata: dict | None, drawn: dict, sizes, size, granted: dict | None):
    """The sidecar of one drawn figure (everything but its preflight and values file), its stats
    lines, and the smallest colour difference among the colours it used.  A part of a multi-part
    figure gets the same record as when it is built alone (figkit.compose)."""
    results_rel = project.config["results"]
    stat_lines = panel_statistics(spec, data)
    panel_stats = {}
    for line in stat_lines:
        if line["group"] is None:
            panel_stats[line["panel"]] = {k: line[k] for k in STATS_COLUMNS[2:]}

    panels = []
    for p, rec in zip(data.panels, drawn["panel_records"]):
        entry = {"label": p.label, "keys": p.keys, "n": p.n, "n_dropped": p.n_dropped}
        if data.scales:
            entry["scale_dropped"] = dict(getattr(p, "scale_dropped", {}) or {})
        if p.cell is not None:
            entry["cell"] = list(p.cell)
        entry["stats"] = panel_stats.get(p.label)
        entry.update(rec)
        panels.append(entry)

    from .colour import check_separability, separability
    sep = separability(drawn["colours"])
    cautions = list(data.notes) + _dropped_notes(spec, data) + list(drawn["cautions"])
    # Greyscale is reported, not judged: most qualitative palettes fail it by design.
    collisions = check_separability(drawn["colours"], spec.style.min_colour_difference)
    judged = [c for c in collisions if "greyscale" not in c]
    if judged and spec.style.strict:
        raise spec.err("colours too alike (strict house style): " + "; ".join(judged))
    cautions += judged
    # Greyscale is information, as in preflight ("not judged"): said with its remedy, and
    # not at all where the figure already carries a non-colour cue for its groups.
    cue = next((o for o in ("shapes", "dashes") if o in spec.chart.options), None)
    # lines always carry a marker and a dash pattern per group (charts._line_cues)
    if not (cue and spec.options.get(cue) == "yes") and spec.chart.name != "lines":
        remedy = f"; add {cue}=yes under options for a cue that is not colour" if cue else ""
        cautions += [f"{c}: not judged, but a greyscale print would merge these groups{remedy}"
                     for c in collisions if "greyscale" in c]
    if spec.ranges != "common" and len(data.panels) > 1 and spec.chart.name in (
            "count-bars", "histogram", "density", "shares", "scatter", "hexbins", "box", "violin",
            "means", "lines"):
        cautions.append(f"ranges are '{spec.ranges}': panels have their own axis ranges, so "
                        "compare shapes within a panel, not heights across panels")
    if spec.trend != "none" and spec.colour and spec.colour in data.levels:
        cautions.append(f"one {spec.trend} trend per panel is fitted over all '{spec.colour}' "
                        "groups together; it can differ from every group's own trend "
                        "(see the per-group lines of the stats file)")
    if spec.trend == "line":
        cautions.append("confidence band, slope intervals and the strata F-test treat every "
                        "row as independent; repeated readings of the same units (sites, "
                        "patients) make them look more precise than they are")
    y_scale = (data.scales or {}).get("y", {}).get("scale")
    if spec.trend == "line" and y_scale == "log10":
        cautions.append("the straight line is fitted to log10(y): on the data's own scale it is "
                        "an exponential fit, y = 10^(intercept + slope * x), and its slope is a "
                        "change in log10 units (a factor of 10^slope per x unit)")
    elif spec.trend == "line" and y_scale == "signed-log":
        cautions.append("the straight line is fitted to the symmetric log of y: on the data's "
                        "own scale it is neither straight nor exponential")
    if spec.chart.name == "lines" and any("x values repeat" in r.get("line_is", "")
                                          for r in drawn["panel_records"]):
        cautions.append("lines join the mean of y at each x (x values repeat); the band is each "
                        "mean's 95% t interval, treating every row as independent")
    if spec.chart.name == "means":
        how = ("percentile bootstrap of the mean (Efron & Tibshirani 1993), "
               f"{spec.options.get('resamples', 4000)} resamples, seed {spec.options.get('seed', 20261202)}"
               if spec.options.get("interval") == "bootstrap" else "Student t interval of the mean")
        cautions.append(f"95% intervals: {how}; they treat every row as independent, so "
                        "repeated readings of the same units (sites, patients) make them look "
                        "more precise than they are; they show the mean's uncertainty, not the "
                        "spread of the data")
        if (data.scales or {}).get("y", {}).get("scale") == "log10":
            cautions.append("on a log10 y axis the dot is the mean of log10(y): a geometric "
                            "mean, not the arithmetic mean of the values")
    if spec.trend == "loess":
        cautions.append("LOESS shows a local average; its shape depends on the span "
                        f"({spec.options.get('span', 0.75)}) and says nothing about uncertainty")
    record = {
        "id": spec.id,
        "size_mm": drawn["size_mm"],
        "size_preset": spec.size_preset,   # which preset, and from where (row or a default)
        "dpi": spec.style.dpi,
        "files": {fmt: f"{spec.id}.{fmt}" for fmt in spec.formats},
        "inputs": data.inputs,
        "chart": spec.chart.name,
        "x": spec.x, "y": spec.y, "colour": spec.colour, "weight": spec.weight,
        "strata": list(spec.strata),
        "filter": spec.filter.text if spec.filter is not None else None,
        "derived": [b.as_record() for b in spec.bandings] or None,
        "layout": drawn["layout"],
        "panels": panels,
        "rows_read": data.n_read, "rows_kept": data.n_kept, "rows_without_stratum": data.n_unassigned,
        "missing_values": dict(data.missing or {}),   # field -> rows of the panels missing it
        "strata_test": strata,
        "scales": data.scales or None,   # axis -> scale, how drawn, values dropped
        "colours": {"used": drawn["colours"], "min_delta_e": sep.min_delta_e},
        "min_font_pt": sizes.min_font_pt,
        "min_line_pt": sizes.min_line_pt,
        "cautions": [shown(c) for c in cautions],   # they quote data values
        "style": {"name": spec.style.name, "files": spec.style.digest()},
        "row_sha256": P.row_sha256(row.cells),
        # The row with every setting it reads (labels, orders, colours, bands, sizes) and
        # figkit's version, as the workflow's rerun trigger sees them: preflight compares it.
        "fingerprint": fingerprint(row, project.config),
        # Where the settings came from: config.yaml, or the config Snakemake resolved from
        # it and --configfile / --config / a profile (the fingerprint reads the same).
        # The job's size as estimated from the file (figkit.jobsize), and what the workflow
        # granted it (the estimate at the time the workflow was read, grown on retries).
        "resources": {**size.record(), "granted": granted},
        "settings": {"from": project.settings_from,
                     "sha256": P.settings_sha256(project.config.data)},
        "rebuild": rebuild_command(spec, results_rel),
        "versions": {**P.versions(), "font": P.font_file(spec.style.rc.get("font.family", ["DejaVu Sans"])[0]
                                                        if isinstance(spec.style.rc.get("font.family"), list)
                                                        else spec.style.rc.get("font.family", "DejaVu Sans"))},
    }
    if "bin_edges" in drawn:
        record["bin_edges"] = drawn["bin_edges"]
        record["bins"] = drawn["bins"]
    if data.streamed is not None:
        record["streamed"] = {k: v for k, v in data.streamed.items()
                              if k not in ("bin_edges", "bin_info")}
    return record, stat_lines, sep.min_delta_e


def write_figure(fig, record: dict, fid: str, formats, style, out_dir: Path, min_delta_e,
                 err, *, values: str, stats: str, caught: list | None = None) -> None:
    """Write a figure's files, its values and stats tables and its sidecar (``record``, which
    gains ``values_file``, ``preflight`` and ``file_sha256``) all together or not at all.
    ``caught``: the Python warnings recorded while drawing and saving, added as cautions."""
    from . import progress
    meta = json.dumps(P.file_metadata(record), sort_keys=True, separators=(",", ":"))
    targets = [out_dir / f"{fid}.{fmt}" for fmt in formats]
    record["values_file"] = f"{fid}.values.csv"
    targets += [out_dir / record["values_file"], out_dir / f"{fid}.stats.csv", out_dir / f"{fid}.json"]
    from .rasters import shared_rasters
    with P.atomic_outputs(targets) as temps:
        with shared_rasters(fig):      # each dense layer painted once for PDF and SVG
            for fmt, tmp in zip(formats, temps):
                progress.stage(f"writing {fmt.upper()}")
                _save(fig, tmp, fmt, fid, style.dpi, meta)
        progress.stage("preflight: reading the files back")
        # Preflight reads the files just written (still under their temporary names); in a
        # strict house style a failure aborts here and nothing is renamed into place.
        from .preflight import preflight
        pf = preflight({fmt: t for fmt, t in zip(formats, temps)}, sizes_mm=style.sizes,
                       min_text_pt=style.min_text_pt, min_line_pt=style.min_line_pt,
                       min_dpi=style.min_dpi, min_delta_e=min_delta_e,
                       delta_e_threshold=style.min_colour_difference, strict=style.strict,
                       names=record["files"])
        record["preflight"] = pf
        failed = [c for c in pf["checks"] if not c["passed"] and c.get("level") != "warning"]
        if failed and style.strict:
            raise err("preflight failed: " + "; ".join(
                f"{c['name']} ({c['message']})" for c in failed))
        for c in failed:
            log.warning("%s: preflight: %s: %s", fid, c["name"], c["message"])
        progress.stage("writing the sidecar and tables")
        temps[-3].write_text(values, encoding="utf-8")
        temps[-2].write_text(stats, encoding="utf-8")
        # Each output's SHA-256: a build killed while renaming leaves files that disagree
        # with the sidecar (renamed last), which the workflow then rebuilds
        # (figkit.workflow.recover); equal files give equal hashes, so rebuilds stay identical.
        record["file_sha256"] = {t.name: P.sha256_file(tmp)
                                 for t, tmp in zip(targets[:-1], temps[:-1])}
        for note in warning_notes(caught or []):
            log.warning("%s: %s", fid, note)
            record["cautions"].append(shown(note))
        temps[-1].write_text(P.dumps(record), encoding="utf-8")


def _dropped_notes(spec: FigureSpec, data: FigureData) -> list[str]:
    """Rows the figure leaves out, said in the log and the sidecar's cautions, not only counted
    per panel: a reader should know what share of the data is not shown."""
    out = []
    kept = data.n_kept
    dropped = sum(p.n_dropped for p in data.panels)
    if dropped and kept:
        # Only the fields that do miss values, with a count each (a row may miss several).
        where = ", ".join(f"{f!r} in {n} row{'s' if n != 1 else ''}"
                          for f, n in (data.missing or {}).items())
        out.append(f"{dropped} of {kept} rows ({100 * dropped / kept:.1f}%) are not drawn: a value "
                   f"is missing in {where} (n_dropped per panel)")
    if data.n_unassigned and kept:
        out.append(f"{data.n_unassigned} of {kept} rows ({100 * data.n_unassigned / kept:.1f}%) have no "
                   f"value of {' / '.join(repr(f) for f in spec.strata)} and belong to no panel")
    return out


def _save(fig, path: Path, fmt: str, fid: str, dpi: float, meta: str) -> None:
    title = f"figkit figure {fid}"
    if fmt == "pdf":
        fig.savefig(path, format="pdf", dpi=dpi,
                    metadata={"Title": title, "Subject": meta, "Creator": "figkit",
                              "CreationDate": None, "ModDate": None})
    elif fmt == "svg":
        fig.savefig(path, format="svg", dpi=dpi,
                    metadata={"Title": title, "Description": meta, "Creator": "figkit", "Date": None})
    elif fmt == "png":
        # zlib level 1: a third of the default level's time for ~18% larger files (measured in
        # benchmarks/); PNG is lossless whatever the level.
        fig.savefig(path, format="png", dpi=dpi,
                    metadata={"Title": title, "Software": "figkit", "figkit": meta},
                    pil_kwargs={"compress_level": 1})
    elif fmt == "tiff":
        fig.savefig(path, format="tiff", dpi=dpi,
                    pil_kwargs={"compression": "tiff_lzw", "description": meta})
    else:  # pragma: no cover - the schema allows only the four above
        raise FigkitError("unknown output format", value=fmt, allowed=["pdf", "png", "svg", "tiff"])


def _stats_csv(lines: list[dict], lead: tuple = ()) -> str:
    buf = io.StringIO()
    w = csv.writer(buf, lineterminator="\n")
    w.writerow([*lead, *STATS_COLUMNS])
    for line in lines:
        cells = []
        for col in (*lead, *STATS_COLUMNS):
            v = P.clean(line.get(col))
            cells.append("" if v is None else shown(v) if isinstance(v, str) else v)
        w.writerow(cells)
    return buf.getvalue()


_GLYPH = re.compile(r"Glyph \d+ \((.+?)\) missing from font\(s\) (.+?)\.?$")


def warning_notes(caught) -> list[str]:
    """Recorded Python warnings as cautions, one per kind: missing glyphs named together with
    the font (matplotlib draws them as empty boxes), any other warning by its first line."""
    glyphs, fonts, other = {}, set(), {}
    for w in caught:
        text = str(w.message).splitlines()[0] if str(w.message) else w.category.__name__
        m = _GLYPH.match(text)
        if m:
            name = m.group(1)
            try:    # matplotlib names the character as \N{NAME}
                char = name.encode("ascii").decode("unicode_escape")
            except (UnicodeDecodeError, UnicodeEncodeError):
                char = name
            glyphs[char] = True
            fonts.add(m.group(2))
        else:
            other.setdefault(text, w.category.__name__)
    out = []
    if glyphs:
        chars = sorted(glyphs)
        out.append(f"the font ({', '.join(sorted(fonts))}) has no glyph for {len(chars)} "
                   f"character{'s' if len(chars) != 1 else ''} of the figure's text, drawn as "
                   f"empty boxes: {' '.join(repr(c) for c in chars[:10])}"
                   + (" ..." if len(chars) > 10 else "") + "; use a house-style font that has "
                   "them, or other labels")
    out += [f"{text} ({kind} while drawing)" for text, kind in other.items()]
    return out
