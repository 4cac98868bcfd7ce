"""Stage 1, the sheet: read config/config.yaml and config/figures.tsv, check them against the
JSON Schemas in figkit/schemas (also reachable as config/schemas), and hand on plain rows.

Rows are numbered as a spreadsheet shows them: the header is row 1, the first figure row 2.
Structural checks only; what needs the data (does the column exist?) happens in :mod:`figkit.spec`.
"""
from __future__ import annotations

import copy
import csv
import io
import json
import os
from dataclasses import dataclass, field
from functools import lru_cache
from pathlib import Path

import jsonschema
import yaml

from .errors import FigkitError, did_you_mean
from .text import read_text, read_yaml, refuse_controls

SCHEMA_DIR = Path(__file__).with_name("schemas")
CONFIG_FILE = Path("config") / "config.yaml"
# The longest cell a sheet may hold.  The longest cell a figure needs is a caption, and a
# paragraph of caption fits in a few thousand characters; a longer cell is pasted data or a
# runaway export, and would only make every check and message that quotes it slow.
MAX_CELL_CHARS = 5_000
# The results folder's path, made absolute, may be at most this long: Linux's PATH_MAX is 4,096
# bytes for a whole path, and figures/<id>.<format> plus a temporary '.part' name must still fit
# under it (and under the 260 characters older Windows tools allow, for a folder shared there).
MAX_RESULTS_PATH_CHARS = 1_024
# One component of a path: NAME_MAX of Linux file systems and POSIX's usual value.
MAX_NAME_BYTES = 255
# Figures are never written into the operating system's own folders (pseudo-files under /proc
# and /sys, devices, programs, system settings), even by a tool running with the rights to.
SYSTEM_FOLDERS = ("/proc", "/sys", "/dev", "/etc", "/boot", "/bin", "/sbin", "/usr", "/lib",
                  "/lib64", "/var/lib")


@lru_cache(maxsize=None)
def schema(name: str) -> dict:
    """The JSON Schema ``name`` ("config" or "sheet") as a dict."""
    return json.loads((SCHEMA_DIR / f"{name}.schema.json").read_text(encoding="utf-8"))


def schema_path(name: str) -> str:
    return str(SCHEMA_DIR / f"{name}.schema.json")


def _schema_message(err: jsonschema.ValidationError, sch: dict) -> tuple[str, str | None, object, object]:
    """Turn a jsonschema error into (message, field, value, allowed) for a one-line FigkitError."""
    path = [str(p) for p in err.absolute_path]
    fld = ".".join(path) or None
    if err.validator == "required":
        missing = err.message.split("'")[1] if "'" in err.message else err.message
        return "required field is missing", missing, None, None
    if err.validator == "additionalProperties":
        known = sorted(err.schema.get("properties", {})) or None
        extra = sorted(set(err.instance) - set(err.schema.get("properties", {})))
        hint = did_you_mean(extra[0], known or ()) if len(extra) == 1 else ""
        return f"unknown field {', '.join(map(repr, extra))}{hint}", fld, None, known
    if err.validator == "enum":
        return ("value not allowed" + did_you_mean(err.instance, err.validator_value), fld,
                err.instance, err.validator_value)
    if err.validator == "pattern":
        desc = err.schema.get("description", f"text matching {err.validator_value}")
        return "badly formed value", fld, err.instance, desc
    return err.message, fld, err.instance, None


def _defaults(sch: dict) -> dict:
    return {k: copy.deepcopy(v["default"]) for k, v in sch.get("properties", {}).items() if "default" in v}


@dataclass
class Config:
    """Project-wide settings, with schema defaults filled in."""
    root: Path
    data: dict

    def __getitem__(self, key):
        return self.data[key]

    def get(self, key, default=None):
        return self.data.get(key, default)

    @property
    def results(self) -> Path:
        return self.root / self.data["results"]

    @property
    def sheet_path(self) -> Path:
        return self.root / self.data["sheet"]


def validate_config(data: dict, root: Path | str = ".") -> Config:
    """Validate an already-parsed config mapping and fill its defaults."""
    if not isinstance(data, dict):
        raise FigkitError("config.yaml must be a mapping of settings", value=type(data).__name__)
    sch = schema("config")
    errors = sorted(jsonschema.Draft202012Validator(sch).iter_errors(data), key=lambda e: list(e.path))
    if errors:
        msg, fld, value, allowed = _schema_message(errors[0], sch)
        raise FigkitError(f"config.yaml: {msg}", field=fld, value=value, allowed=allowed)
    _refuse_controls_in(data, [])
    full = _defaults(sch)
    full.update(copy.deepcopy(data))
    # The project's house style is checked once here, not once per figure row that uses it (a
    # row's own 'style' cell is checked with that row).
    if full.get("default_size") is not None and full.get("sizes") and \
            full["default_size"] not in full["sizes"]:
        raise FigkitError("config.yaml: 'default_size' is not one of the project's sizes:",
                          field="default_size", value=full["default_size"], allowed=sorted(full["sizes"]))
    _check_results_folder(Path(root), full["results"])
    styles = Path(root) / full["styles_dir"]
    style_file = styles / f"{full['style']}.yaml"   # a link (even a bad one): load_style says
    if styles.is_dir() and not (style_file.is_file() or style_file.is_symlink()):
        raise FigkitError("config.yaml: 'style' names an unknown house style", value=full["style"],
                          allowed=sorted(p.stem for p in styles.glob("*.yaml")) or
                          f"none found in {styles}")
    return Config(Path(root), full)


def _check_results_folder(root: Path, results: str) -> None:
    """The results folder must be a folder figkit can make and write: not a file (nor under
    one), not in a system folder, not longer than the limits above."""
    def refuse(why: str, allowed: str) -> FigkitError:
        return FigkitError(f"config.yaml: the results folder {why}", field="results",
                           value=results, allowed=allowed)
    if not results.strip():
        raise refuse("is empty", "a folder name such as results")
    full = Path(os.path.abspath(root / results))
    if len(str(full)) > MAX_RESULTS_PATH_CHARS:
        raise refuse(f"is {len(str(full)):,} characters long as an absolute path",
                     f"at most {MAX_RESULTS_PATH_CHARS:,} characters")
    long = [part for part in full.parts if len(part.encode("utf-8", "surrogateescape")) > MAX_NAME_BYTES]
    if long:
        raise refuse(f"has a name of {len(long[0].encode('utf-8', 'surrogateescape')):,} bytes",
                     f"names of at most {MAX_NAME_BYTES} bytes between the slashes")
    try:
        real = full.resolve()
    except (OSError, RuntimeError):   # a symlink loop on the way
        raise refuse("goes through a symbolic link that points to itself",
                     "a folder reached without a link loop") from None
    for candidate in (full, real):       # as written first, then with links followed
        for system in SYSTEM_FOLDERS:
            if candidate == Path(system) or Path(system) in candidate.parents:
                raise refuse(f"lies under the system folder {system}",
                             "a folder of your own, such as results inside the project")
    probe = real
    while not probe.exists():   # the first part of the path that exists must be a folder
        if probe.parent == probe:
            break
        probe = probe.parent
    if probe.exists() and not probe.is_dir():
        where = "is a file" if probe == real else f"lies under {probe}, which is a file"
        raise refuse(where, "a folder (or a path where one can be made)")


def _refuse_controls_in(value, path: list) -> None:
    """Settings text (field labels, orders, band names, ...) becomes labels in the figures."""
    if isinstance(value, dict):
        for k, v in value.items():
            _refuse_controls_in(str(k), path + ["(key)"])
            _refuse_controls_in(v, path + [str(k)])
    elif isinstance(value, list):
        for i, v in enumerate(value):
            _refuse_controls_in(v, path + [str(i)])
    elif isinstance(value, str):
        refuse_controls(value, field=".".join(p for p in path if p != "(key)") or None,
                        where="config.yaml:")


def load_config(root: Path | str = ".") -> Config:
    root = Path(root)
    path = root / CONFIG_FILE
    if not path.is_file():
        raise FigkitError(f"no project settings at {path}; run 'figkit init DIR' to start a project")
    try:
        data = read_yaml(path, "settings file") or {}
    except yaml.YAMLError as exc:
        mark = getattr(exc, "problem_mark", None)
        where = f" at line {mark.line + 1}" if mark else ""
        raise FigkitError(f"{path} is not valid YAML{where}") from None
    return validate_config(data, root)


@dataclass
class SheetRow:
    """One figure row: its spreadsheet row number and its non-empty cells."""
    number: int
    cells: dict
    error: FigkitError | None = field(default=None)
    given: frozenset = field(default=frozenset())   # columns the row filled (not schema defaults)

    @property
    def id(self) -> str:
        return self.cells.get("id", f"row{self.number}")


def check_row(number: int, cells: dict) -> SheetRow:
    """Validate one row against the sheet schema; defaults are filled in."""
    sch = schema("sheet")
    for name, value in cells.items():
        if len(value) > MAX_CELL_CHARS:
            return SheetRow(number, {"id": cells["id"]} if "id" in cells and
                            len(cells["id"]) <= MAX_CELL_CHARS else {}, FigkitError(
                f"cell of {len(value):,} characters is longer than the limit",
                row=number, figure=cells.get("id") if len(cells.get("id", "")) <= 200 else None,
                field=name, value=value, allowed=f"at most {MAX_CELL_CHARS:,} characters"),
                given=frozenset(cells))
    errors = sorted(jsonschema.Draft202012Validator(sch).iter_errors(cells), key=lambda e: list(e.path))
    full = _defaults(sch)
    full.update(cells)
    row = SheetRow(number, full, given=frozenset(cells))
    try:   # a control character would reach SVG, the report or a terminal (figkit.text)
        for name, value in cells.items():
            refuse_controls(value, row=number, figure=cells.get("id"), field=name)
    except FigkitError as exc:
        row.error = exc
        return row
    if errors:
        msg, fld, value, allowed = _schema_message(errors[0], sch)
        row.error = FigkitError(msg, row=number, figure=cells.get("id"), field=fld, value=value,
                                allowed=allowed)
    return row


def read_sheet(path: Path | str) -> list[SheetRow]:
    """Read the figure sheet (tab-separated, header first).  Empty cells are left out; lines that
    are blank or start with '#' are comments.  Returns every row, each with its own error (if any),
    so that one bad row does not stop the others from building."""
    path = Path(path)
    if not path.is_file():
        raise FigkitError(f"figure sheet not found: {path}")
    lines = _sheet_records(path)
    if not lines or not any(h.strip() for h in lines[0]):   # nothing, or a blank first line
        raise FigkitError(f"figure sheet {path} is empty; it needs a header row")
    header = [h.strip() for h in lines[0]]
    _refuse_other_separators(path, header)
    if len(set(header)) != len(header):
        dup = sorted({h for h in header if header.count(h) > 1})
        raise FigkitError(f"figure sheet {path}: repeated column {', '.join(dup)}")
    rows, seen = [], {}
    for number, values in enumerate(lines[1:], start=2):
        if not any(v.strip() for v in values) or values[0].lstrip().startswith("#"):
            continue
        if len(values) > len(header):
            # A stray tab shifts every later cell one column to the right, empty last cells or
            # not, so the row is refused.  It keeps its id, so that its figure fails with this
            # message instead of vanishing from the build.
            filled = [i for i, v in enumerate(values) if v.strip()]
            last = filled[-1] if filled else 0
            where = header[last] if last < len(header) else "past the last column"
            rid = values[header.index("id")].strip() if "id" in header else ""
            rows.append(SheetRow(number, {"id": rid} if rid else {}, FigkitError(
                f"{len(values)} cells but the header has {len(header)} columns (a stray tab "
                f"shifts the cells after it; the last filled cell, {values[last].strip()!r}, "
                f"is cell {last + 1}, under '{where}')", row=number, figure=rid or None,
                allowed=f"{len(header)} cells: {', '.join(header)}")))
            if rid:
                seen.setdefault(rid, number)   # a later row with this id is still a repeat
            continue
        cells = {h: v.strip() for h, v in zip(header, values) if v.strip()}
        row = check_row(number, cells)
        if row.error is None and row.id in seen:
            row.error = FigkitError(f"id already used in sheet row {seen[row.id]}", row=number,
                                    figure=row.id, field="id", value=row.id)
        seen.setdefault(row.id, number)
        rows.append(row)
    return rows


def _sheet_records(path: Path) -> list[list[str]]:
    """The sheet's records (lists of cells); its bytes decoded as figkit.text.read_text says."""
    text = read_text(path, "figure sheet")
    reader = csv.reader(io.StringIO(text, newline=""), delimiter="\t")
    lines: list[list[str]] = []
    try:
        for values in reader:
            lines.append(values)
    except csv.Error as exc:   # e.g. a cell longer than the csv module's field limit
        raise FigkitError(f"figure sheet {path.name} cannot be read as tab-separated text: {exc}",
                          row=len(lines) + 1,
                          allowed=f"cells of at most {MAX_CELL_CHARS:,} characters") from None
    return lines


def _refuse_other_separators(path: Path, header: list[str]) -> None:
    """A sheet saved as comma- or semicolon-separated text has a header of one cell holding every
    column name: say that the sheet is tab-separated, instead of 'unknown field'."""
    if len(header) != 1:
        return
    known = set(schema("sheet").get("properties", {}))
    for sep, name in ((",", "commas"), (";", "semicolons")):
        names = [h.strip().strip('"') for h in header[0].split(sep)]
        if len(names) > 1 and sum(n in known for n in names) >= 2:
            shown = header[0] if len(header[0]) <= 60 else header[0][:57] + "..."
            raise FigkitError(f"figure sheet {path.name} is separated by {name}, but the sheet is "
                              "tab-separated; save it as tab-separated text (.tsv)", row=1,
                              field="header", value=shown,
                              allowed="column names separated by tabs")


def find_row(rows: list[SheetRow], figure_id: str) -> SheetRow:
    for row in rows:
        if row.id == figure_id:
            return row
    raise FigkitError("no such figure in the sheet", figure=figure_id,
                      allowed=[r.id for r in rows] or "no rows yet")


@dataclass
class Project:
    """A manuscript folder: its settings and its sheet rows (``figkit.render.load_project`` too).
    Kept here, away from the drawing stages, so commands that only read results (compare,
    check, snapshot) start without importing pandas or matplotlib."""
    config: Config
    rows: list[SheetRow]
    settings_from: str = "config/config.yaml"   # or "snakemake": the settings the workflow resolved

    @property
    def root(self) -> Path:
        return self.config.root

    def spec(self, figure_id: str):
        """The row's FigureSpec, or a figkit.compose.PartsSpec for a row made of parts."""
        from .compose import build_parts_spec, is_parts
        from .spec import build_spec
        row = find_row(self.rows, figure_id)
        if row.error is None and is_parts(row):
            return build_parts_spec(row, self.config, self.rows)
        return build_spec(row, self.config)


def load_project(root: Path | str = ".", settings: dict | None = None) -> Project:
    """The project at ``root``; ``settings`` (a mapping as config.yaml holds) replace the file's,
    as in a workflow job given Snakemake's resolved config (``--config``, ``--configfile``)."""
    if settings is None:
        config = load_config(root)
        return Project(config, read_sheet(config.sheet_path))
    config = validate_config(settings, root)
    return Project(config, read_sheet(config.sheet_path), settings_from="snakemake")
