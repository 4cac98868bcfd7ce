"""Stage 3, the data: read only the columns a figure needs, derive bands, apply the row filter,
check field types, and split the rows into panels (strata) in a stable, documented order.

Panel order for a categorical field: the explicit order from config (``orders:``), else the
band order for a derived field, else the data's own category order where it is an ordered
categorical, else numeric order for numbers, else natural sort ("S2" before "S10").
"""
from __future__ import annotations

import hashlib
import re
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pandas as pd

from .errors import FigkitError
from .spec import CATEGORY, NUMERIC, Banding, FigureSpec


def sha256_file(path: Path, chunk: int = 1 << 20) -> str:
    h = hashlib.sha256()
    with open(path, "rb") as fh:
        for block in iter(lambda: fh.read(chunk), b""):
            h.update(block)
    return h.hexdigest()


def _reader(path: Path):
    name = path.name.lower()
    if name.endswith(".parquet"):
        return "parquet"
    return "tsv" if name.endswith((".tsv", ".tsv.gz", ".txt")) else "csv"


def read_columns(path: Path) -> list[str]:
    """The dataset's column names, read from its header only."""
    if not path.is_file():
        raise FigkitError("dataset file not found", value=str(path))
    kind = _reader(path)
    try:
        if kind == "parquet":
            import pyarrow.parquet as pq
            return list(pq.read_schema(path).names)
        return list(pd.read_csv(path, nrows=0, sep="\t" if kind == "tsv" else ",").columns)
    except ImportError:
        raise FigkitError("reading Parquet needs pyarrow: pip install pyarrow", value=str(path)) from None
    except (OSError, ValueError, UnicodeDecodeError) as exc:
        raise FigkitError(f"dataset file cannot be read ({type(exc).__name__})", value=str(path)) from None


def read_dataset(path: Path, columns: list[str]) -> pd.DataFrame:
    kind = _reader(path)
    try:
        if kind == "parquet":
            return pd.read_parquet(path, columns=columns)
        return pd.read_csv(path, usecols=columns, sep="\t" if kind == "tsv" else ",", low_memory=False)
    except ImportError:
        raise FigkitError("reading Parquet needs pyarrow: pip install pyarrow", value=str(path)) from None
    except (OSError, ValueError, UnicodeDecodeError, pd.errors.ParserError) as exc:
        first = str(exc).splitlines()[0] if str(exc) else type(exc).__name__
        raise FigkitError(f"dataset file cannot be read: {first}", value=str(path)) from None


def natural_key(value) -> tuple:
    """Sort key that orders embedded numbers by value: S2 < S10."""
    parts = re.split(r"(\d+)", str(value))
    return tuple((0, int(p)) if p.isdigit() else (1, p.lower()) for p in parts if p != "")


def apply_banding(values: pd.Series, banding: Banding) -> pd.Categorical:
    """Assign each value the first band whose ``below`` it is under; the last band catches the
    rest.  Missing stays missing.  The result is ordered in band order."""
    x = pd.to_numeric(values, errors="coerce").to_numpy(dtype=float)
    labels = [b.label for b in banding.bands]
    cuts = np.array([b.below for b in banding.bands[:-1]], dtype=float)
    # searchsorted(side='right') gives the first cut strictly above x: "x < below" wins.
    codes = np.searchsorted(cuts, x, side="right")
    codes = np.where(np.isnan(x), -1, codes)
    return pd.Categorical.from_codes(codes, categories=labels, ordered=True)


def level_order(series: pd.Series, field: str, spec: FigureSpec) -> list:
    """The ordered distinct values of a categorical field (see the module docstring)."""
    present = pd.unique(series.dropna())
    explicit = spec.orders.get(field)
    if explicit is not None:
        lookup = {str(v): v for v in present}
        head = [lookup[str(v)] for v in explicit if str(v) in lookup]
        rest = sorted((v for v in present if str(v) not in {str(e) for e in explicit}), key=natural_key)
        return head + rest
    if isinstance(series.dtype, pd.CategoricalDtype):
        cats = list(series.cat.categories)
        if series.cat.ordered:
            return [c for c in cats if c in set(present)]
        return sorted(present, key=natural_key)
    if pd.api.types.is_numeric_dtype(series):
        return sorted(present.tolist())
    return sorted(present, key=natural_key)


@dataclass
class Panel:
    label: str
    keys: dict            # field -> stratum value, as in the data
    frame: pd.DataFrame   # rows drawn (complete in every field the chart uses)
    n_dropped: int
    cell: tuple[int, int] | None = None   # (row, col) in a two-way grid

    @property
    def n(self) -> int:
        return len(self.frame)


@dataclass
class FigureData:
    panels: list[Panel]
    inputs: list[dict]            # [{path, sha256}]
    n_read: int                   # rows in the file
    n_kept: int                   # rows after the filter
    levels: dict                  # field -> full ordered levels (for colours, x groups)
    n_unassigned: int             # rows whose strata value is missing
    grid_levels: tuple = ()       # two-way grid: (row levels, col levels)


def _json_value(v):
    if isinstance(v, np.generic):
        return v.item()
    return v


def _check_kind(frame: pd.DataFrame, field: str, need: str, spec: FigureSpec, role: str) -> None:
    s = frame[field]
    if need == NUMERIC and not pd.api.types.is_numeric_dtype(s):
        sample = ", ".join(map(str, pd.unique(s.dropna())[:3]))
        raise spec.err(f"{role} field '{field}' must be numeric for chart '{spec.chart.name}'",
                       field=role, value=f"{field} holds text such as {sample}",
                       allowed="a numeric column")
    if need == CATEGORY and pd.api.types.is_numeric_dtype(s) and not pd.api.types.is_bool_dtype(s):
        distinct = s.nunique()
        if distinct > 50:
            raise spec.err(f"{role} field '{field}' is continuous ({distinct} distinct values) but chart "
                           f"'{spec.chart.name}' needs categories", field=role, value=field,
                           allowed="a categorical column, or a band set (bands:) derived from it")


def load_figure_data(spec: FigureSpec, rel_to: Path | None = None) -> FigureData:
    """Read, derive, filter, type-check and split the data of one figure."""
    path = spec.data_path
    if not path.is_file():
        raise spec.err("dataset file not found", field="dataset", value=str(path))
    from .spec import check_columns
    check_columns(spec, read_columns(path))
    frame = read_dataset(path, spec.columns_needed())
    n_read = len(frame)
    for banding in spec.bandings:
        frame[banding.name] = apply_banding(frame[banding.source], banding)

    # Colour levels are taken before the filter so that a category keeps its colour in every
    # figure of the dataset, whatever the figure keeps.
    levels = {}
    cat_fields = [(spec.colour, "colour")] if spec.colour else []
    if spec.chart.x == CATEGORY:
        cat_fields.append((spec.x, "x"))
    if spec.chart.y == CATEGORY:
        cat_fields.append((spec.y, "y"))
    for fld, _ in cat_fields:
        if not (fld == spec.colour and pd.api.types.is_numeric_dtype(frame[fld]) and
                not isinstance(frame[fld].dtype, pd.CategoricalDtype) and frame[fld].nunique() > 12):
            levels[fld] = level_order(frame[fld], fld, spec)

    if spec.filter is not None:
        mask = spec.filter.evaluate(frame)
        frame = frame.loc[mask]
    n_kept = len(frame)
    if n_kept == 0:
        raise spec.err("no rows left after the filter", field="filter", value=spec.filter.text,
                       allowed="a filter that keeps some rows")

    for role, need in (("x", spec.chart.x), ("y", spec.chart.y)):
        fld = getattr(spec, role)
        if fld and need:
            _check_kind(frame, fld, need, spec, role)
    if spec.weight:
        _check_kind(frame, spec.weight, NUMERIC, spec, "weight")
        if (frame[spec.weight].dropna() < 0).any():
            raise spec.err("weight field has negative values", field="weight", value=spec.weight,
                           allowed="counts or other non-negative numbers")

    used = [f for f in (spec.x, spec.y, spec.colour, spec.weight) if f]
    used = list(dict.fromkeys(used))
    n_unassigned = 0
    if spec.strata:
        has_strata = frame[list(spec.strata)].notna().all(axis=1)
        n_unassigned = int((~has_strata).sum())
        frame = frame.loc[has_strata]
    panels: list[Panel] = []
    grid_levels: tuple = ()

    def make(keys: dict, part: pd.DataFrame, label: str, cell=None) -> Panel:
        complete = part[used].notna().all(axis=1) if used else pd.Series(True, index=part.index)
        return Panel(label, {k: _json_value(v) for k, v in keys.items()},
                     part.loc[complete, used].reset_index(drop=True), int((~complete).sum()), cell)

    if not spec.strata:
        panels.append(make({}, frame, ""))
    elif len(spec.strata) == 1:
        fld = spec.strata[0]
        groups = dict(iter(frame.groupby(fld, sort=False, observed=True)))
        for level in level_order(frame[fld], fld, spec):
            panels.append(make({fld: level}, groups[level], str(level)))
    else:
        rf, cf = spec.strata
        rlev, clev = level_order(frame[rf], rf, spec), level_order(frame[cf], cf, spec)
        groups = dict(iter(frame.groupby([rf, cf], sort=False, observed=True)))
        empty = frame.iloc[0:0]
        for i, rv in enumerate(rlev):
            for j, cv in enumerate(clev):
                part = groups.get((rv, cv), empty)
                panels.append(make({rf: rv, cf: cv}, part, f"{rv} / {cv}", (i, j)))
        grid_levels = (rlev, clev)

    root = rel_to or spec.root
    try:
        rel = path.resolve().relative_to(Path(root).resolve()).as_posix()
    except ValueError:  # a dataset outside the project folder: keep its name only
        rel = path.name
    inputs = [{"path": rel, "sha256": sha256_file(path)}]
    return FigureData(panels, inputs, n_read, n_kept, levels, n_unassigned, grid_levels)
