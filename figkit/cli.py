"""figkit's command line.

    figkit render --id ID      build one figure (what each Snakemake job runs)
    figkit init DIR            start a manuscript folder that builds with the installed figkit
    figkit lint                check the sheet, settings, styles and each row against its data, without drawing
    figkit palettes --out DIR  swatch sheets of every built-in palette under simulated vision
    figkit info FILE           what a figure file says about where it came from
    figkit preflight [ID ...]  re-check written figures against the house style's artwork rules
    figkit draft [ID ...]      keep redrawing figures as their row, settings, style or data change
    figkit snapshot NAME       record the current build as snapshot NAME
    figkit snapshots           list the snapshots
    figkit compare OLD [NEW]   what changed between two builds (snapshots or folders)
    figkit check NAME          regression gate: exit 1 when the build differs from snapshot NAME

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
    """Several ids share one interpreter and its imports; each figure's files are still written
    together or not at all, and a figure that fails fails alone (exit 2 after the others)."""
    from .render import load_project, render
    from .workflow import settings_from_environment
    from .warm import FORKED, note
    if not FORKED:
        note("interpreter", " ".join(args.id))
    project = load_project(args.project, settings_from_environment())
    out = project.config.results / "figures"
    failed = 0
    for fid in dict.fromkeys(args.id):
        try:
            rec = render(project, fid, granted=args.granted)
        except FigkitError as exc:
            if len(args.id) == 1:
                raise
            failed += 1
            print(f"figkit: error: {exc}", file=sys.stderr)
            continue
        n = len(rec.get("parts") or rec["panels"])
        what = "part" if rec.get("parts") else "panel"
        print(f"figkit: {rec['id']}: {n} {what}{'' if n == 1 else 's'}, "
              f"{rec['size_mm'][0]:.0f} x {rec['size_mm'][1]:.0f} mm -> {out}/{rec['id']}.*")
    return 2 if failed else 0


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
    from .render import load_project, prepare
    project = load_project(args.project)
    problems = cautioned = 0
    settings = _settings_notes(project)
    printed = len(settings)
    for note in settings:
        print(f"figkit: caution: {note}", file=sys.stderr)
    from .compose import build_parts_spec, is_parts
    for row in project.rows:
        try:
            if row.error is None and is_parts(row):
                # its parts exist, are chart rows and build; their data is checked on their rows
                build_parts_spec(row, project.config, project.rows).style.rc
                continue
            spec, _, data = prepare(project, row)       # the build's own checks before drawing
            notes = data.notes
            if spec.colour:
                _lint_palette(spec, data)
        except FigkitError as exc:
            problems += 1
            print(f"figkit: error: {exc.at(row=row.number, figure=row.id)}", file=sys.stderr)
            continue
        cautioned += bool(notes)    # a misspelt orders value or filter value: likely mistakes
        printed += len(notes)
        for note in notes:
            print(f"figkit: caution: sheet row {row.number}, figure '{row.id}': {note}", file=sys.stderr)
    n = len(project.rows)
    # The summary counts every caution printed above: per row, and about the settings.
    print(f"figkit: lint: {n} figure row{'' if n == 1 else 's'}, {problems} with problems, "
          f"{cautioned} with cautions; {len(settings)} caution{'' if len(settings) == 1 else 's'} "
          f"about config.yaml; {printed} caution{'' if printed == 1 else 's'} in all")
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


def _lint_palette(spec, data) -> None:
    """A categorical colour field must not have more values than the palette holds (the build
    finds this when it assigns colours to the levels it read, data.levels)."""
    from .colour import get_palette
    col = spec.colour
    if col in {b.name for b in spec.bandings} or col not in data.levels:
        return
    palette = get_palette(spec.style.palette)
    k = len(set(map(str, data.levels[col])) | set(map(str, spec.orders.get(col) or [])))
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


def _project_or_none(folder: str):
    """The manuscript folder's project, or None where there is none (plain folders compared)."""
    from .sheet import CONFIG_FILE, load_project
    if not (Path(folder) / CONFIG_FILE).is_file():
        return None
    return load_project(folder)


def _thresholds(project, args=None):
    """The review thresholds of the project's house style, overridden by command-line options."""
    from dataclasses import replace
    from .compare import Thresholds
    from .style import load_style
    th = Thresholds()
    if project is not None:
        style = load_style(project.config["style"], project.root / project.config["styles_dir"])
        th = Thresholds.from_settings(style.review)
    over = {k: getattr(args, k) for k in ("ssim_min", "rms_max", "stats_rel_tol", "compare_dpi")
            if args is not None and getattr(args, k, None) is not None}
    return Thresholds.from_settings({**th.as_dict(), **over}) if over else replace(th)


def _cmd_compare(args) -> int:
    """Differences are information, not errors: exit 0 whatever changed (``figkit check`` is the
    gate that exits 1); 2 for bad input."""
    from .compare import compare_builds
    from .snapshot import resolve_build
    import time
    t0 = time.perf_counter()
    project = _project_or_none(args.project)
    if args.review:
        from .review import check_folder
        check_folder(args.review)                  # refused before the work, not after it
    old = resolve_build(args.old, project)
    new = resolve_build(args.new, project)
    if Path(old.figures).resolve() == Path(new.figures).resolve():
        print("figkit: caution: both sides are the same folder", file=sys.stderr)
    th = _thresholds(project, args)
    report = compare_builds(old, new, thresholds=th, out_dir=args.out, tolerance=args.tolerance,
                            keep_images=bool(args.review))
    print(report.summary())
    if args.review:
        from .review import write_review
        page = write_review(report, old, new, Path(args.review))
        print(f"figkit: review page -> {page}")
    print(f"figkit: compare: took {time.perf_counter() - t0:.1f} s (comparing "
          f"{report.seconds:.1f} s)", file=sys.stderr)
    return 0


def _cmd_snapshot(args) -> int:
    from .sheet import load_project
    from .snapshot import take_snapshot
    project = load_project(args.project)
    dpi = _thresholds(project).compare_dpi        # a bad review: setting fails before any work
    m = take_snapshot(project, args.name, replace=args.replace, note=args.note)
    _prime_reduced(project, m["name"], dpi)
    st = m["stored"]
    print(f"figkit: snapshot '{m['name']}': {len(m['figures'])} figures, {st['files']} files "
          f"({st['new_bytes'] / 2**20:.1f} MiB newly stored, {st['shared_files']} already in "
          f"the store) -> {project.config.results / 'snapshots' / m['name']}")
    if m["not_built"]:
        print(f"figkit: caution: not built, so not in the snapshot: {', '.join(m['not_built'])}",
              file=sys.stderr)
    if m["older_than_data"]:
        print("figkit: caution: older than their data files (rebuild before approving): "
              + ", ".join(m["older_than_data"]), file=sys.stderr)
    if st["copied"]:
        print(f"figkit: caution: {st['copied']} files copied, not linked (no hard links here)",
              file=sys.stderr)
    return 0


def _prime_reduced(project, name: str, dpi: float) -> None:
    """Reduce a new snapshot's renders to the comparison resolution now (in threads), so that
    every later comparison against it decodes only the other side's renders."""
    from concurrent.futures import ThreadPoolExecutor
    from .compare import load_for_compare
    from .snapshot import snapshot_build, snapshots_dir
    from .compare import read_sidecars
    build = snapshot_build(snapshots_dir(project) / name)
    jobs = []
    for _, sidecar in read_sidecars(Path(build.figures)).values():
        png = Path(build.figures) / f"{sidecar['id']}.png"
        if png.is_file():        # the sidecar's dpi, as compare reads it
            jobs.append((png, sidecar.get("dpi")))
    with ThreadPoolExecutor(max_workers=min(4, os.cpu_count() or 1)) as pool:
        list(pool.map(lambda j: load_for_compare(j[0], j[1], dpi,
                                                 cache=build.reduced_cache(j[0], dpi)), jobs))


def _cmd_draft(args) -> int:
    from .draft import main_loop
    return main_loop(Path(args.project), args.ids or None, args.interval, not args.previews_only)


def _cmd_snapshots(args) -> int:
    from .sheet import load_project
    from .snapshot import inputs_differ, list_snapshots, project_hashes
    project = load_project(args.project)
    found = list_snapshots(project)
    if not found:
        print("figkit: no snapshots yet; take one with 'figkit snapshot NAME'")
        return 0
    now = project_hashes(project)
    rows = [("name", "taken (UTC)", "figures", "differs from now")]
    for m in found:
        if "error" in m:
            rows.append((m["name"], "?", "?", m["error"]))
            continue
        diff = inputs_differ(m.get("project") or {}, now)
        rows.append((m["name"], str(m.get("created", "")).replace("T", " ").replace("+00:00", ""),
                     str(len(m.get("figures") or [])), ", ".join(diff) or "nothing"))
    widths = [max(len(r[i]) for r in rows) for i in range(3)]
    for r in rows:
        print("  ".join(c.ljust(w) for c, w in zip(r, widths)) + "  " + r[3])
    return 0


def _cmd_check(args) -> int:
    """Exit 0 when every figure matches the snapshot within tolerance, 1 when any differs, 2 for
    bad input (an unknown snapshot, a broken sheet)."""
    from .gate import check_against, write_junit
    from .sheet import load_project
    from .snapshot import MANIFEST, current_build, list_snapshots, snapshot_build, snapshots_dir
    project = load_project(args.project)
    if args.junit and Path(args.junit).is_dir():
        raise FigkitError("--junit names a folder; give a file name", field="junit",
                          value=args.junit, allowed="a file path, e.g. results/figure-check.xml")
    folder = snapshots_dir(project) / args.name
    if not (folder / MANIFEST).is_file():
        folder = Path(args.name)                   # a snapshot folder given by its path
        if not (folder / MANIFEST).is_file():
            raise FigkitError("no snapshot of that name", field="NAME", value=args.name,
                              allowed=[m["name"] for m in list_snapshots(project)]
                              or "none yet: take one with 'figkit snapshot NAME'")
    old = snapshot_build(folder)
    result = check_against(old, current_build(project), _thresholds(project, args),
                           old.name or args.name)
    for line in result.lines():
        print(line)
    if args.junit:
        print(f"figkit: check: JUnit report -> {write_junit(result, Path(args.junit))}")
    return 0 if result.passed else 1


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
# Your journal's column widths in mm; the sheet's 'size' column names one.  These are the presets
# this project uses (they replace the house style's): change the numbers, rename or add one.  A
# row with no 'size' takes default_size (here, or 'full' when not set), which must be listed.
default_size: full
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
    """The folder is made under a temporary name beside the target and renamed into place when
    complete, so a failed init (bad scale, no space, no permission, Ctrl-C) leaves nothing."""
    import tempfile
    from .demo import check_scale, write_demo_data
    check_scale(args.scale)         # before anything is written: no half-made folder
    target = Path(args.dir)
    if target.exists() and not target.is_dir():
        raise FigkitError("a file of that name exists; figkit init makes a folder",
                          value=str(target), allowed="a new or empty folder")
    if target.is_dir() and any(target.iterdir()):
        raise FigkitError("folder is not empty; figkit init will not overwrite anything",
                          value=str(target), allowed="a new or empty folder")
    parent = target.absolute().parent
    try:
        parent.mkdir(parents=True, exist_ok=True)
        work = Path(tempfile.mkdtemp(prefix=f".{target.name}.init-", dir=parent))
        from .provenance import _UMASK
        os.chmod(work, 0o777 & ~_UMASK)    # mkdtemp makes 0700; a project gets the usual mode
    except OSError as exc:
        raise FigkitError(f"cannot make the folder ({exc.strerror or type(exc).__name__})",
                          value=str(target)) from None
    try:
        (work / "config").mkdir()
        (work / "Snakefile").write_text(SCAFFOLD_SNAKEFILE, encoding="utf-8")
        (work / "config" / "config.yaml").write_text(SCAFFOLD_CONFIG, encoding="utf-8")
        (work / "config" / "figures.tsv").write_text(
            "".join("\t".join(r) + "\n" for r in SCAFFOLD_SHEET), encoding="utf-8")
        shutil.copytree(STYLES, work / "styles")
        shutil.copytree(PROFILES, work / "profiles")
        written = write_demo_data(work / "data", scale=args.scale)
        for name in ("sites",):
            if name in written:
                written[name].unlink()   # the starter sheet uses readings and surveys only
        if target.is_dir():              # an empty folder given: it stays, its contents arrive
            for item in work.iterdir():
                os.replace(item, target / item.name)
            work.rmdir()
        else:
            os.replace(work, target)
    except OSError as exc:
        shutil.rmtree(work, ignore_errors=True)
        raise FigkitError(f"cannot write the folder ({exc.strerror or type(exc).__name__}); "
                          "nothing was left behind", value=str(target)) from None
    except BaseException:
        shutil.rmtree(work, ignore_errors=True)
        raise
    print(f"figkit: started a manuscript folder at {target}\n"
          f"  edit config/figures.tsv (one row per figure) and config/config.yaml, then run:\n"
          f"  cd {target} && snakemake --cores 2\n"
          f"  (on a cluster: snakemake --profile profiles/slurm or profiles/cluster-generic)")
    return 0


class _Fmt(argparse.RawDescriptionHelpFormatter):
    """Help with the epilog's examples kept on their own lines."""


class _Parser(argparse.ArgumentParser):
    """A mistake on the command line is one line too, like every other mistake: what was wrong
    and where to read the options (argparse would print the usage block first)."""

    def error(self, message):
        self.exit(2, f"figkit: error: {self.prog}: {message} (see '{self.prog} --help')\n")


def build_parser() -> argparse.ArgumentParser:
    p = _Parser(prog="figkit", description="Journal-ready small-multiple figures "
                                "from a figure sheet.", formatter_class=_Fmt,
                                epilog="examples:\n  figkit init ~/papers/my-paper\n  figkit lint\n"
                                       "  figkit render --id oxygen-temperature\n"
                                       "  figkit COMMAND --help   (options and an example of each command)")
    from . import __version__
    p.add_argument("--version", action="version", version=f"figkit {__version__}")
    sub = p.add_subparsers(dest="command", required=True)
    r = sub.add_parser("render", help="build one figure of the sheet", formatter_class=_Fmt)
    r.add_argument("--id", required=True, action="append",
                   help="the figure's id (sheet column 'id'); repeat it to build several figures "
                        "in one process")
    r.add_argument("--project", default=".", help="manuscript folder (default: here)")
    r.add_argument("--granted", metavar="mem_mb=N,runtime=M", type=_granted,
                   help="resources the workflow gave this job, recorded in the sidecar")
    r.set_defaults(func=_cmd_render)
    r.epilog = "example:\n  figkit render --id oxygen-temperature --project ~/papers/my-paper"
    i = sub.add_parser("init", help="start a manuscript folder", formatter_class=_Fmt,
                       epilog="example:\n  figkit init ~/papers/my-paper && cd ~/papers/my-paper "
                              "&& snakemake --cores 2")
    i.add_argument("dir", help="the new folder (must not exist yet, or be empty)")
    i.add_argument("--scale", type=float, default=0.05,
                   help="size of the starter data relative to the demo, 0 < S <= 20 (default 0.05)")
    i.set_defaults(func=_cmd_init)
    lt = sub.add_parser("lint", help="check sheet, settings, styles and each row against its data, without drawing",
                        formatter_class=_Fmt,
                        epilog="exit status: 0 when no row has a problem (cautions allowed), 2 otherwise\n"
                               "example:\n  figkit lint --project ~/papers/my-paper")
    lt.add_argument("--project", default=".", help="manuscript folder (default: here)")
    lt.set_defaults(func=_cmd_lint)
    pa = sub.add_parser("palettes", help="write swatch sheets of the built-in palettes",
                        formatter_class=_Fmt, epilog="example:\n  figkit palettes --out swatches")
    pa.add_argument("--out", required=True, help="folder for palettes.png and palettes.pdf")
    pa.set_defaults(func=_cmd_palettes)
    inf = sub.add_parser("info", help="print the provenance a figure file carries", formatter_class=_Fmt,
                         epilog="example:\n  figkit info results/figures/oxygen-temperature.pdf")
    inf.add_argument("file", help="a figure file figkit wrote: PDF, PNG, SVG or TIFF")
    inf.set_defaults(func=_cmd_info)
    pf = sub.add_parser("preflight", help="re-check built figure files against the artwork rules",
                        formatter_class=_Fmt,
                        epilog="exit status: 0 when every check passed or only warned, 1 when a check "
                               "failed, 2 for a mistake in the input\n"
                               "example:\n  figkit preflight oxygen-temperature --strict")
    pf.add_argument("ids", nargs="*", metavar="ID", help="figure ids (default: every row)")
    pf.add_argument("--project", default=".", help="manuscript folder (default: here)")
    pf.add_argument("--strict", action="store_true", help="judge colour separability too (a failing check, not a warning)")
    pf.set_defaults(func=_cmd_preflight)
    dr = sub.add_parser("draft", help="keep redrawing figures as you edit sheet, settings, styles or data",
                        description="A warm loop for designing figures: re-renders only the "
                        "figures whose row, settings, style or data changed, a quick preview "
                        "first, then the print files; open results/draft/index.html (it reloads "
                        "itself). Ctrl-C stops.",
                        epilog="example: figkit draft oxygen-temperature")
    dr.add_argument("ids", nargs="*", metavar="ID", help="figure ids (default: every row)")
    dr.add_argument("--interval", type=float, default=0.5, metavar="S",
                    help="seconds between looks at the files (default 0.5)")
    dr.add_argument("--previews-only", action="store_true", dest="previews_only",
                    help="draw previews only, no print files")
    dr.add_argument("--project", default=".", help="manuscript folder (default: here)")
    dr.set_defaults(func=_cmd_draft)
    sn = sub.add_parser("snapshot", help="record the current build under results/snapshots/NAME",
                        description="Record every built figure of the sheet (figure files, "
                        "sidecars, stats files) and the SHA-256 of sheet, settings, styles and "
                        "datasets. Unchanged files are stored once across snapshots.",
                        epilog="example: figkit snapshot submitted-v1")
    sn.add_argument("name", metavar="NAME", help="the snapshot's name (letters, digits, . _ -)")
    sn.add_argument("--replace", action="store_true", help="overwrite an existing snapshot NAME")
    sn.add_argument("--note", help="a line kept in the manifest (e.g. 'as submitted')")
    sn.add_argument("--project", default=".", help="manuscript folder (default: here)")
    sn.set_defaults(func=_cmd_snapshot)
    sl = sub.add_parser("snapshots", help="list the snapshots and what differs from now",
                        epilog="example: figkit snapshots --project ~/papers/my-paper")
    sl.add_argument("--project", default=".", help="manuscript folder (default: here)")
    sl.set_defaults(func=_cmd_snapshots)
    cmp = sub.add_parser("compare", help="say what changed between two builds (snapshots or folders)",
                         description="What changed between two builds: the changes that alter a "
                         "conclusion first, then the numbers, then the pixels. Exit status 0 "
                         "whatever changed (see 'figkit check' for a gate), 2 for bad input.",
                         epilog="examples: figkit compare submitted-v1 --review review/   |   "
                         "figkit compare old/results new/results")
    cmp.add_argument("old", help="snapshot name, snapshot folder or folder of built figures")
    cmp.add_argument("new", nargs="?", help="the same kinds (default: the current build)")
    cmp.add_argument("--review", metavar="DIR", help="write a review page DIR/index.html")
    cmp.add_argument("--out", help="folder for changes.md and one difference image per changed render")
    cmp.add_argument("--tolerance", type=float, default=0.0, metavar="RMS",
                     help="pixel RMS (0-255 scale, at the comparison resolution) up to which two "
                          "renders count as the same (default 0)")
    cmp.add_argument("--project", default=".", help="manuscript folder (default: here)")
    cmp.set_defaults(func=_cmd_compare)
    ck = sub.add_parser("check", help="regression gate: exit 1 when the build differs from a snapshot",
                        description="Check the current build against snapshot NAME. Exit status 0 when "
                        "every figure matches within tolerance, 1 when any differs, 2 for bad "
                        "input. Tolerances come from the house style's review: settings.",
                        epilog="example: snakemake --cores 2 && figkit check approved --junit "
                        "results/figure-check.xml")
    ck.add_argument("name", metavar="NAME", help="the approved snapshot")
    ck.add_argument("--junit", metavar="FILE", help="write a JUnit XML report (one case per figure)")
    ck.add_argument("--ssim-min", type=float, dest="ssim_min", help="override review.ssim_min")
    ck.add_argument("--rms-max", type=float, dest="rms_max", help="override review.rms_max")
    ck.add_argument("--rel-tol", type=float, dest="stats_rel_tol", help="override review.stats_rel_tol")
    ck.add_argument("--project", default=".", help="manuscript folder (default: here)")
    ck.set_defaults(func=_cmd_check)
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
    words = sys.argv[1:] if argv is None else list(argv)
    if words[:1] == ["render"] and os.environ.get("FIGKIT_WARM"):
        from . import warm       # a workflow job: hand the figure to the warm interpreter
        if not warm.FORKED:
            code = warm.run_client(words)
            if code is not None:
                return code
    saved = sys.stdout, sys.stderr
    sys.stdout, sys.stderr = _Printable(sys.stdout), _Printable(sys.stderr)
    try:
        return _main(argv)
    finally:
        sys.stdout, sys.stderr = saved


def _warning_as_caution(message, category, filename, lineno, file=None, line=None) -> None:
    """A Python warning that reaches the command line is said as a caution of one line: its
    message, without the file, line and source text of the library that raised it."""
    text = (str(message).splitlines() or [category.__name__])[0]
    print(f"figkit: caution: {text}", file=sys.stderr)


def _main(argv=None) -> int:
    import warnings
    logging.basicConfig(format="figkit: caution: %(message)s", level=logging.WARNING)
    warnings.showwarning = _warning_as_caution
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
