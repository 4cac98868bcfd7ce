# figkit figure rules: one job per sheet row.  Included by a project's Snakefile.
#
# A figure's job reruns when its dataset file(s) or style files change (file inputs), when its own
# sheet row or the settings it reads change (params "fingerprint"), or when figkit's version
# changes (part of the fingerprint).  The sheet file itself is not an input, so editing one row
# reruns only that figure.
import sys
from snakemake.utils import min_version, validate

import figkit
import figkit.workflow
import figkit.workflow.recover
import figkit.workflow.report
from figkit.compose import (build_parts_spec, check_parts_ceiling, is_parts, parts_fingerprint,
                            parts_job_size)
from figkit.errors import FigkitError
from figkit.jobsize import check_ceiling, job_size
from figkit.sheet import read_sheet, schema_path, validate_config
from figkit.spec import build_spec, fingerprint
from figkit.text import ReportText, shown

min_version("9.0")

try:   # a mistake in the settings or the sheet's structure: one line, not a schema dump
    FK_CONFIG = validate_config(config, ".")
    FK_ROWS = read_sheet(FK_CONFIG.sheet_path)
except FigkitError as exc:
    sys.stderr.write(f"figkit: error: {exc}\n")
    raise SystemExit(2)
validate(config, schema_path("config"))          # passes now; fills Snakemake's config defaults
figkit.workflow.job_settings(FK_CONFIG.data)      # jobs use these, overrides and all
# ---- one warm interpreter for the figure jobs (figkit.warm) -------------------------------------
# Each job stays one Snakemake job per figure (own exit status, log, outputs, reruns); its process
# hands the render to a server that imported pandas and matplotlib once per Snakemake process
# (per group job on a cluster node).  FIGKIT_WARM=off keeps one interpreter per job.
figkit.workflow.warm_jobs()
# ---- end of the warm-interpreter block ----------------------------------------------------------
FK_RESULTS = FK_CONFIG["results"]
FK_FORMATS = FK_CONFIG["formats"]
import functools
import hashlib
import re
from pathlib import Path

FK_ID = re.compile(r"^[A-Za-z0-9][A-Za-z0-9_-]*$")
FK_BY_ID = {}
for _row in FK_ROWS:
    FK_BY_ID.setdefault(_row.id, _row)   # the first row of an id is the figure (render agrees)
FK_TARGETS = [rid for rid in FK_BY_ID if FK_ID.match(rid)]


_FK_SPECS = {}


def _spec(rid):
    """The row's spec, or its error, built once per workflow run (the style files are read once).
    A figure over the memory ceiling (max_mem_mb) is an error here, said before any submission;
    its job then fails with the same line (figkit render checks the ceiling too)."""
    if rid not in _FK_SPECS:
        try:
            if is_parts(FK_BY_ID[rid]):   # a figure made of other rows (figkit.compose)
                spec = build_parts_spec(FK_BY_ID[rid], FK_CONFIG, FK_ROWS)
                check_parts_ceiling(spec, _size(spec), FK_CONFIG.get("max_mem_mb"))
            else:
                spec = build_spec(FK_BY_ID[rid], FK_CONFIG)
                check_ceiling(spec, _size(spec), FK_CONFIG.get("max_mem_mb"))
            _FK_SPECS[rid] = spec
        except FigkitError as exc:
            if FK_BY_ID[rid].error is None:
                sys.stderr.write(f"figkit: {exc} (this figure will fail; snakemake --keep-going "
                                 "builds the others)\n")
            _FK_SPECS[rid] = exc
    return _FK_SPECS[rid]


def _size(spec):
    limit = int(FK_CONFIG["stream_above_mb"] * 2 ** 20)
    if hasattr(spec, "parts"):
        return parts_job_size([job_size(p, limit) for p in spec.parts])
    return job_size(spec, limit)


def _input_files(spec):
    """A figure's dataset and style files; a figure made of parts reads every part's data."""
    if hasattr(spec, "parts"):
        return [*spec.data_paths, *spec.style.files]
    return [spec.data_path, *spec.style.files]


def _resource(name, grow=True):
    """A figure job's resource from what it will read (figkit.jobsize); grown with each retry
    (snakemake --retries N) for memory and time.  A row with an error asks for the minimum."""
    def value(wildcards, attempt=1):
        spec = _spec(wildcards.id)
        size = None if isinstance(spec, FigkitError) else _size(spec)
        base = {"mem_mb": size.mem_mb if size else 1000,
                "runtime": size.runtime if size else 5}[name]
        return base * attempt if grow else base
    return value


def _row_inputs(wildcards):
    """Dataset and style files of one figure.  Files that do not exist are left out (a missing
    input would stop every figure); the row's fingerprint then records the problem, so the job
    reruns and fails alone with its one-line message."""
    spec = _spec(wildcards.id)
    if isinstance(spec, FigkitError):
        return []
    return [str(p) for p in _input_files(spec) if _available(p)]


def _available(path) -> bool:
    """The file exists, or a rule of this workflow makes it (the demo's data, say)."""
    if path.is_file():
        return True
    name = str(path)
    return any(str(out) == name for r in workflow.rules for out in r.output)


def _fingerprint(wildcards, files: bool = True):
    """The row's fingerprint, with its error if it has one and (``files``) the input files that
    neither exist nor are made by a rule.  The stamp leaves the files out, as it always has (it
    was once written before rules included later, such as the demo's data, were known), so that
    stamps written by earlier versions stay current."""
    row = FK_BY_ID[wildcards.id]
    spec = _spec(wildcards.id)
    if isinstance(spec, FigkitError):
        problem = str(spec)
    elif files:
        problem = ";".join(str(p) for p in _input_files(spec) if not _available(p))
    else:
        problem = ""
    # The problem goes in as a digest: its text may quote a sheet cell, and Snakemake's report
    # embeds params in a script element of its page.
    digest = hashlib.sha256(problem.encode()).hexdigest()[:16] if problem else ""
    own = parts_fingerprint(row, FK_CONFIG, FK_ROWS) if is_parts(row) else fingerprint(row, FK_CONFIG)
    return own + (f":{digest}" if digest else "")


for _row in FK_ROWS:
    if _row.error is None:
        continue
    if FK_BY_ID.get(_row.id) is not _row:
        note = "this row is ignored; the first row with the id is built"
    elif not FK_ID.match(_row.id):
        note = "this row cannot be built; fix its id"
    else:
        note = "this figure will fail; snakemake --keep-going builds the others"
    sys.stderr.write(f"figkit: {_row.error} ({note})\n")

_FK_OLD = sorted(p.stem for p in (Path(FK_RESULTS) / "figures").glob("*.json") if p.stem not in FK_BY_ID)
if _FK_OLD:   # files of removed rows stay in the folder; say so once, delete nothing
    sys.stderr.write(f"figkit: {Path(FK_RESULTS) / 'figures'} holds figures no longer in the sheet: "
                     f"{shown(', '.join(_FK_OLD))} (delete their files if they are not wanted)\n")


def _stamp(wildcards):
    """A small file holding the row's fingerprint, rewritten only when the fingerprint changes.
    As an input it makes Snakemake rerun the figure by modification time even where Snakemake
    has no metadata for it (outputs made by `figkit render` by hand, a copied results folder).
    Written when Snakemake first asks for a figure's inputs, before it looks at any file, and only
    in a run that executes jobs: a dry run (or --report, --summary) writes nothing; a stale stamp
    then stands for its rewrite by the ``.changed`` file the rule below would make, so the dry run
    still lists the figure."""
    path = Path(FK_RESULTS) / ".fingerprints" / wildcards.id
    if workflow.executor_plugin is None or workflow.dryrun:
        if _stamp_is_current(wildcards.id):
            return str(path)
        return str(path.with_name(f"{path.name}.changed"))
    _write_stamps()
    return str(path)


def _stamp_value(rid) -> str:
    return _fingerprint(type("W", (), {"id": rid})(), files=False)


def _stamp_is_current(rid) -> bool:
    path = Path(FK_RESULTS) / ".fingerprints" / rid
    return path.is_file() and path.read_text(encoding="utf-8") == _stamp_value(rid)


def _keep_incomplete() -> bool:
    return bool(getattr(workflow.execution_settings, "keep_incomplete", False))


@functools.cache
def _input_record(path, root):
    """figkit.data.input_record (the file's SHA-256), once per file for all figures of a run."""
    from figkit.data import input_record   # here, not at the top: it imports pandas
    return input_record(path, root)


def _stale(rid) -> list[str]:
    """What changed since figure ``rid`` was built, as preflight's up-to-date check says it, for
    figkit.workflow.recover with --keep-incomplete.  A row that cannot be built now: its old
    files are out of date whatever they show."""
    from figkit.files import read_json_object
    from figkit.preflight import changes_since_built
    from figkit.sheet import Project
    spec = _spec(rid)
    if isinstance(spec, FigkitError):
        return ["its sheet row (it has an error now)"]
    try:
        record = read_json_object(Path(FK_RESULTS) / "figures" / f"{rid}.json")
    except FigkitError:
        return []          # no readable sidecar: no evidence (the hash check decides)
    return changes_since_built(record, Project(FK_CONFIG, FK_ROWS), spec, _input_record)


_FK_STAMPS_WRITTEN = []


def _write_stamps() -> None:
    """Every figure's stamp at once, at the first call: Snakemake keeps a listing of a folder once
    it has looked into it, so a stamp written after that would count as missing.  Also the place
    for what must happen once per real run after Snakemake has put its settings in place."""
    if _FK_STAMPS_WRITTEN:
        return
    _FK_STAMPS_WRITTEN.append(True)
    # On a cluster node (a group job): every figure of the job is built even when one fails; the
    # job still fails.  Here, not where the file is read: Snakemake puts its execution settings on
    # the workflow only after reading the Snakefile, and reads them for the scheduler after the
    # input functions have run (figkit.workflow.keep_going_on_node).
    figkit.workflow.keep_going_on_node(workflow)
    if workflow.is_main_process:   # after a killed build: markers, leftovers, stale locks
        # --keep-incomplete (the cluster profiles) keeps a failed job's files without a marker
        # and as if current: then every figure's files are checked against its sidecar, and
        # against today's row, data and house style (figkit.workflow.recover.recover_figures)
        figkit.workflow.recover.recover(FK_RESULTS, FK_TARGETS, FK_FORMATS, every=_keep_incomplete(),
                                        stale=_stale)
    for rid in FK_TARGETS:
        if _stamp_is_current(rid):
            continue
        path = Path(FK_RESULTS) / ".fingerprints" / rid
        path.parent.mkdir(parents=True, exist_ok=True)
        tmp = path.with_name(f".{path.name}.part")
        tmp.write_text(_stamp_value(rid), encoding="utf-8")
        tmp.replace(path)


rule figure_fingerprint_changed:
    # Only ever scheduled by a dry run (see _stamp); a real run rewrites the stamp instead.
    output:
        f"{FK_RESULTS}/.fingerprints/{{id}}.changed",
    shell:
        "touch {output}"


rule all_figures:
    input:
        [f"{FK_RESULTS}/figures/{rid}.json" for rid in FK_TARGETS],


def _sidecar(wildcards):
    return f"{FK_RESULTS}/figures/{wildcards.id}.json"


def _figure_outputs():
    out = [f"{FK_RESULTS}/figures/{{id}}.json", f"{FK_RESULTS}/figures/{{id}}.stats.csv"]
    for fmt in FK_FORMATS:
        path = f"{FK_RESULTS}/figures/{{id}}.{fmt}"
        if fmt == "png":   # the HTML report (snakemake --report) shows every figure's PNG
            path = report(path, caption="report/caption.rst", category="Figures",
                          labels=lambda w: figkit.workflow.report.labels(_sidecar(w), w.id))
        out.append(path)
    return out


rule figure:
    input:
        _row_inputs,
        _stamp,
    output:
        _figure_outputs(),
    params:
        fingerprint=_fingerprint,
        # Sheet text for the report's caption template: plain text there, never markup, and
        # nothing in Snakemake's page that could end its script element (figkit.text).
        caption=lambda w: ReportText(FK_BY_ID[w.id].cells.get("caption", "")),
        chart=lambda w: ReportText(FK_BY_ID[w.id].cells.get("chart", "")),
        # The sidecar's numbers for the report, read when the report is written.
        numbers=lambda w: figkit.workflow.report.ReportNumbers(_sidecar(w)),
    log:
        "logs/figures/{id}.log",
    threads: 1
    resources:
        mem_mb=_resource("mem_mb"),
        runtime=_resource("runtime"),
    wildcard_constraints:
        id="[A-Za-z0-9][A-Za-z0-9_-]*",
    shell:
        # The job's messages go to the terminal (its one-line error) and to its log; Snakemake's
        # bash runs with pipefail, so the job still fails when figkit does.
        # What Snakemake granted goes into the sidecar (placeholders: the text stays the same).
        f"{figkit.workflow.job_python()} -m figkit render --id {{wildcards.id}} "
        "--granted mem_mb={resources.mem_mb},runtime={resources.runtime} 2>&1 | tee {log}"


onsuccess:
    figkit.workflow.stop_rate_timers()
    figkit.workflow.recover.forget_run()


onerror:
    figkit.workflow.stop_rate_timers()
    figkit.workflow.recover.forget_run()
