"""figkit's command line.

    figkit render --id ID      build one figure (what each Snakemake job runs)
    figkit init DIR            start a manuscript folder that builds with the installed figkit
    figkit lint                check the sheet, settings, styles and each row against its data, without drawing
    figkit palettes --out DIR  swatch sheets of every built-in palette under simulated vision
    figkit info FILE           what a figure file says about where it came from
    figkit preflight [ID ...]  re-check written figures against the house style's artwork rules
    figkit compare OLD NEW     what changed between two builds of the figures

A user's mistake prints one line (``figkit: error: ...``) and exits with status 2.
"""
from __future__ import annotations

import argparse
import json
import logging
import os
import shutil
import sys
from pathlib import Path

from .errors import FigkitError

STYLES = Path(__file__).with_name("styles")
PROFILES = Path(__file__).with_name("profiles")   # Snakemake profiles: local, slurm, cluster-generic


def _cmd_render(args) -> int:
    from .render import load_project, render
    from .workflow import settings_from_environment
    project = load_project(args.project, settings_from_environment())
    rec = render(project, args.id, granted=args.granted)
    out = project.config.results / "figures"
    n = len(rec["panels"])
    print(f"figkit: {rec['id']}: {n} panel{'' if n == 1 else 's'}, "
          f"{rec['size_mm'][0]:.0f} x {rec['size_mm'][1]:.0f} mm -> {out}/{rec['id']}.*")
    return 0


def _granted(text: str) -> dict:
    out = {}
    for part in text.split(","):
        key, _, value = part.partition("=")
        if key.strip() not in ("mem_mb", "runtime") or not value.strip().isdigit():
            raise argparse.ArgumentTypeError(f"expected mem_mb=N,runtime=M, got {text!r}")
        out[key.strip()] = int(value)
    return out


def _cmd_lint(args) -> int:
    """Every check a build makes before drawing: the row, the settings, the style sheet, and the
    row against its data (columns exist, numbers are numbers, the filter keeps rows, categories
    are categories), so a sheet that lints clean does not fail at build time for its data."""
    from .data import load_figure_data
    from .render import load_project
    from .spec import build_spec
    project = load_project(args.project)
    problems = cautioned = 0
    limit = int(project.config["stream_above_mb"] * 2 ** 20)
    for note in _settings_notes(project):
        print(f"figkit: caution: {note}", file=sys.stderr)
    for row in project.rows:
        try:
            spec = build_spec(row, project.config)
            spec.style.rc                      # parses and checks the style sheet
            notes = load_figure_data(spec, stream_above_bytes=limit).notes
            if spec.colour:
                _lint_palette(spec)
        except FigkitError as exc:
            problems += 1
            print(f"figkit: error: {exc.at(row=row.number, figure=row.id)}", file=sys.stderr)
            continue
        cautioned += bool(notes)    # a misspelt orders value or filter value: likely mistakes
        for note in notes:
            print(f"figkit: caution: sheet row {row.number}, figure '{row.id}': {note}", file=sys.stderr)
    n = len(project.rows)
    print(f"figkit: lint: {n} figure row{'' if n == 1 else 's'}, {problems} with problems, "
          f"{cautioned} with cautions")
    return 2 if problems else 0


def _settings_notes(project) -> list[str]:
    """Settings keyed by a field that no dataset has and no band defines (orders, colours,
    fields): most likely a misspelt column name, silently unused."""
    import difflib
    from .data import read_columns
    columns = set(project.config.get("bands") or {})
    for path in (project.config.get("datasets") or {}).values():
        try:
            columns |= set(read_columns(project.config.root / path))
        except FigkitError:
            pass                                # a missing dataset is reported with its rows
    out = []
    for key in ("orders", "colours", "fields"):
        for fld in project.config.get(key) or {}:
            if fld not in columns:
                close = difflib.get_close_matches(fld, sorted(columns), n=1)
                out.append(f"config.yaml: {key}: '{fld}' is not a column of any dataset nor a band"
                           + (f" (did you mean '{close[0]}'?)" if close else ""))
    return out


def _lint_palette(spec) -> None:
    """A categorical colour field must not have more values than the palette holds."""
    import pandas as pd
    from .colour import get_palette
    from .data import read_dataset
    col = spec.colour
    if col in {b.name for b in spec.bandings}:
        return
    values = read_dataset(spec.data_path, [col])[col]
    if pd.api.types.is_float_dtype(values):
        return
    palette = get_palette(spec.style.palette)
    k = values.nunique()
    if k > len(palette.colours):
        raise spec.err(f"colour field '{col}' has {k} values but palette '{palette.name}' holds "
                       f"{len(palette.colours)}; split by this field into panels instead",
                       field="colour", value=col)


def _cmd_palettes(args) -> int:
    from .colour import swatch_sheet
    for path in swatch_sheet(Path(args.out)):
        print(f"figkit: wrote {path}")
    return 0


def _cmd_info(args) -> int:
    from .provenance import read_file_metadata
    meta = read_file_metadata(Path(args.file))
    print(json.dumps(meta, indent=2, ensure_ascii=False))
    return 0


def _cmd_preflight(args) -> int:
    """One line per failed check, then a summary.  Exit 1 when a check failed (as a linter does,
    so a script or CI job stops), 0 when every check passed or only warned; 2 is kept for
    mistakes in the input (an unknown figure id, a broken sheet).  ``--strict`` (or a strict house
    style) turns the colour-separability warning into a failing check."""
    from .preflight import failure_lines, preflight_project
    from .render import load_project
    results = preflight_project(load_project(args.project), args.ids, strict=args.strict)
    failed = warned = 0
    for fid, result in results:
        for line in failure_lines(fid, result):
            print(f"figkit: preflight: {line}")
        bad = [c for c in result["checks"] if not c["passed"]]
        failed += sum(c["level"] == "error" for c in bad)
        warned += sum(c["level"] == "warning" for c in bad)
    n_checks = sum(len(r["checks"]) for _, r in results)
    print(f"figkit: preflight: {len(results)} figures, {n_checks} checks, {failed} failed, "
          f"{warned} warnings")
    return 1 if failed else 0


def _cmd_compare(args) -> int:
    """Differences are information, not errors: exit 0 whatever changed."""
    from .compare import compare_folders
    report = compare_folders(args.old, args.new, out_dir=args.out, tolerance=args.tolerance)
    print(report.summary())
    return 0


SCAFFOLD_SNAKEFILE = """\
# Figures of this manuscript.  Build them all:  snakemake --cores 2
# The rules come from the installed figkit (no code is copied here).
import figkit.workflow

configfile: "config/config.yaml"

include: figkit.workflow.rules()


rule all:  # the default target: every figure of the sheet
    input:
        rules.all_figures.input,
"""

SCAFFOLD_CONFIG = """\
# Project settings.  Every key is described in figkit's config/README.md.
sheet: config/figures.tsv
results: results
style: house
formats: [pdf, png, svg]
# Your journal's column widths in mm; the sheet's 'size' column names one.  These are the house
# style's presets: change the numbers, or add a name of your own.
sizes:
  single: 84
  one-and-half: 120
  full: 176
datasets:
  readings: data/readings.csv
  surveys: data/surveys.csv
fields:
  water_temp_c: {label: Water temperature, unit: °C}
  dissolved_oxygen_mgl: {label: Dissolved oxygen, unit: mg/L}
  land_use: {label: Land use}
  season: {label: Season}
  taxon_group: {label: Taxon group}
orders:
  season: [winter, spring, summer, autumn]
  land_use: [forest, pasture, arable, urban]
"""

SCAFFOLD_SHEET = [
    ["id", "dataset", "chart", "x", "y", "colour", "weight", "strata", "trend", "size", "caption"],
    ["oxygen-by-land-use", "readings", "scatter", "water_temp_c", "dissolved_oxygen_mgl", "", "",
     "land_use", "line", "full", "Dissolved oxygen falls as water warms, at every land use."],
    ["taxa-by-season", "surveys", "count-bars", "taxon_group", "", "season", "count", "", "", "full",
     "Invertebrates counted per taxon group and season (sum of the count column)."],
]


def _cmd_init(args) -> int:
    from .demo import write_demo_data
    target = Path(args.dir)
    if target.exists() and any(target.iterdir()):
        raise FigkitError("folder is not empty; figkit init will not overwrite anything",
                          value=str(target), allowed="a new or empty folder")
    (target / "config").mkdir(parents=True, exist_ok=True)
    (target / "Snakefile").write_text(SCAFFOLD_SNAKEFILE, encoding="utf-8")
    (target / "config" / "config.yaml").write_text(SCAFFOLD_CONFIG, encoding="utf-8")
    (target / "config" / "figures.tsv").write_text(
        "".join("\t".join(r) + "\n" for r in SCAFFOLD_SHEET), encoding="utf-8")
    shutil.copytree(STYLES, target / "styles")
    shutil.copytree(PROFILES, target / "profiles")
    written = write_demo_data(target / "data", scale=args.scale)
    for name in ("sites",):
        if name in written:
            written[name].unlink()   # the starter sheet uses readings and surveys only
    print(f"figkit: started a manuscript folder at {target}\n"
          f"  edit config/figures.tsv (one row per figure) and config/config.yaml, then run:\n"
          f"  cd {target} && snakemake --cores 2\n"
          f"  (on a cluster: snakemake --profile profiles/slurm or profiles/cluster-generic)")
    return 0


def build_parser() -> argparse.ArgumentParser:
    p = argparse.ArgumentParser(prog="figkit", description="Journal-ready small-multiple figures "
                                "from a figure sheet.")
    from . import __version__
    p.add_argument("--version", action="version", version=f"figkit {__version__}")
    sub = p.add_subparsers(dest="command", required=True)
    r = sub.add_parser("render", help="build one figure of the sheet")
    r.add_argument("--id", required=True, help="the figure's id (sheet column 'id')")
    r.add_argument("--project", default=".", help="manuscript folder (default: here)")
    r.add_argument("--granted", metavar="mem_mb=N,runtime=M", type=_granted,
                   help="resources the workflow gave this job, recorded in the sidecar")
    r.set_defaults(func=_cmd_render)
    i = sub.add_parser("init", help="start a manuscript folder")
    i.add_argument("dir")
    i.add_argument("--scale", type=float, default=0.05,
                   help="size of the starter data relative to the demo (default 0.05)")
    i.set_defaults(func=_cmd_init)
    lt = sub.add_parser("lint", help="check sheet, settings, styles and each row against its data, without drawing")
    lt.add_argument("--project", default=".")
    lt.set_defaults(func=_cmd_lint)
    pa = sub.add_parser("palettes", help="write swatch sheets of the built-in palettes")
    pa.add_argument("--out", required=True, help="folder for palettes.png and palettes.pdf")
    pa.set_defaults(func=_cmd_palettes)
    inf = sub.add_parser("info", help="print the provenance a figure file carries")
    inf.add_argument("file")
    inf.set_defaults(func=_cmd_info)
    pf = sub.add_parser("preflight", help="re-check built figure files against the artwork rules")
    pf.add_argument("ids", nargs="*", metavar="ID", help="figure ids (default: every row)")
    pf.add_argument("--project", default=".", help="manuscript folder (default: here)")
    pf.add_argument("--strict", action="store_true", help="judge colour separability too (a failing check, not a warning)")
    pf.set_defaults(func=_cmd_preflight)
    cmp = sub.add_parser("compare", help="say what changed between two folders of built figures")
    cmp.add_argument("old", help="folder of the earlier build (results/figures)")
    cmp.add_argument("new", help="folder of the later build")
    cmp.add_argument("--out", help="folder for changes.md and one difference image per changed render")
    cmp.add_argument("--tolerance", type=float, default=0.0, metavar="RMS",
                     help="pixel RMS (0-255 scale) up to which two renders count as the same "
                          "(default 0)")
    cmp.set_defaults(func=_cmd_compare)
    return p


class _Printable:
    """A text stream that writes control characters as escapes (figkit.text.terminal): whatever
    a message quotes from a data file, the terminal shows it instead of obeying it."""

    def __init__(self, stream):
        self._stream = stream

    def write(self, text: str) -> int:
        from .text import terminal
        return self._stream.write(terminal(text))

    def __getattr__(self, name):
        return getattr(self._stream, name)


def main(argv=None) -> int:
    saved = sys.stdout, sys.stderr
    sys.stdout, sys.stderr = _Printable(sys.stdout), _Printable(sys.stderr)
    try:
        return _main(argv)
    finally:
        sys.stdout, sys.stderr = saved


def _main(argv=None) -> int:
    logging.basicConfig(format="figkit: caution: %(message)s", level=logging.WARNING)
    args = build_parser().parse_args(argv)
    os.environ.setdefault("MPLBACKEND", "Agg")
    try:
        return args.func(args)
    except FigkitError as exc:
        print(f"figkit: error: {exc}", file=sys.stderr)
        return 2
    except BrokenPipeError:       # output piped into `head` and the like: not an error
        sys.stderr.close()
        return 0
