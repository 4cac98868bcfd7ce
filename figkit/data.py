"""Stage 3, the data: read only the columns a figure needs, derive bands, apply the row filter,
check field types, and split the rows into panels (strata) in a stable, documented order.

Panel order for a categorical field: the explicit order from config (``orders:``), else the
band order for a derived field, else the data's own category order where it is an ordered
categorical, else numeric order for numbers, else natural sort ("S2" before "S10").
"""
from __future__ import annotations

import gzip
import os
import re
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pandas as pd

from .errors import SPELLING_POOL_MAX, SPELLING_SEARCHES_MAX, FigkitError, closest
from .provenance import sha256_file  # noqa: F401  (also figkit.data.sha256_file, as before)
from .spec import (CATEGORY, MAX_LABEL_CHARS, NUMERIC, Banding, FigureSpec, check_columns,
                   short_label)
from .text import data_encoding, locate_bad_byte, shown


def _reader(path: Path):
    name = path.name.lower()
    if name.endswith(".parquet"):
        return "parquet"
    return "tsv" if name.endswith((".tsv", ".tsv.gz", ".txt")) else "csv"


def _opener(path: Path):
    return gzip.open if path.name.lower().endswith(".gz") else open


def _text_options(path: Path, kind: str) -> dict:
    """pandas' separator and encoding for a CSV/TSV file: UTF-8 with or without a byte-order
    mark, UTF-16 with one (figkit.text.data_encoding checks the first bytes)."""
    return {"sep": "\t" if kind == "tsv" else ",",
            "encoding": data_encoding(path, _opener(path))}


def _undecodable(path: Path) -> FigkitError:
    """The one-line error for a data file pandas could not decode, with the byte offset."""
    try:
        enc = data_encoding(path, _opener(path))
    except FigkitError as exc:
        return exc
    return locate_bad_byte(path, enc, _opener(path))


def input_record(path: Path, root: Path) -> dict:
    """{path relative to the project (its name alone when outside it), sha256} for the sidecar."""
    try:
        rel = path.resolve().relative_to(Path(root).resolve()).as_posix()
    except ValueError:
        rel = path.name
    return {"path": rel, "sha256": sha256_file(path)}


def file_identity(path: Path) -> tuple:
    """What changes whenever a file is written or replaced: device, inode, size, modification
    and status-change times in ns (the status-change time cannot be set back by a user; POSIX
    stat(2)).  Equal identities before the read and after the hash mean the hash is of the bytes
    that were read."""
    st = os.stat(path)
    return (st.st_dev, st.st_ino, st.st_size, st.st_mtime_ns, st.st_ctime_ns)


def inputs_as_read(spec, path: Path, before: tuple, root: Path) -> list[dict]:
    """The sidecar's ``inputs``: the file's SHA-256, refused when the file changed since
    ``before`` (its identity when reading began), so a sidecar never pairs the new data's hash
    with numbers drawn from the old data."""
    record = input_record(path, root)
    try:
        after = file_identity(path)
    except OSError:
        after = None
    if after != before:
        raise spec.err("dataset file changed while figkit read it (written or replaced during "
                       "the build); build again once it is written", field="dataset",
                       value=str(path))
    return [record]


def read_columns(path: Path) -> list[str]:
    """The dataset's column names, read from its header only."""
    if not path.is_file():
        raise FigkitError("dataset file not found", value=str(path))
    kind = _reader(path)
    try:
        if kind == "parquet":
            import pyarrow.parquet as pq
            return list(pq.read_schema(path).names)
        return list(pd.read_csv(path, nrows=0, **_text_options(path, kind)).columns)
    except ImportError:
        raise FigkitError("reading Parquet needs pyarrow: pip install pyarrow", value=str(path)) from None
    except UnicodeDecodeError:
        raise _undecodable(path) from None
    except (OSError, ValueError, UnicodeDecodeError) as exc:
        raise FigkitError(f"dataset file cannot be read ({type(exc).__name__})", value=str(path)) from None


def read_dataset(path: Path, columns: list[str]) -> pd.DataFrame:
    kind = _reader(path)
    try:
        if kind == "parquet":   # positions in the file, whatever index pandas stored with it
            return pd.read_parquet(path, columns=columns).reset_index(drop=True)
        return pd.read_csv(path, usecols=columns, low_memory=False, **_text_options(path, kind))
    except ImportError:
        raise FigkitError("reading Parquet needs pyarrow: pip install pyarrow", value=str(path)) from None
    except UnicodeDecodeError:
        raise _undecodable(path) from None
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


@dataclass(eq=False)
class Panel:
    label: str
    keys: dict            # field -> stratum value, as in the data
    frame: pd.DataFrame   # rows drawn (complete in every field the chart uses)
    n_dropped: int
    cell: tuple[int, int] | None = None   # (row, col) in a two-way grid
    tally: object = None  # streamed data: an aggregate.PanelTally instead of rows

    @property
    def n(self) -> int:
        return self.tally.n if self.tally is not None else len(self.frame)


# Limits of what one figure can show legibly; past them a build would spend minutes laying out
# text nobody can read.  Categories per axis: at 176 mm (a full page width) 300 bars leave about
# half a millimetre each, well under a 5 pt tick label.
MAX_CATEGORIES_PER_AXIS = 300
# Panels per figure: a 15 x 15 grid of small multiples at full page width leaves panels of about
# 10 mm, below any house style's panel minimum; more is a strata field with identifiers in it.
MAX_PANELS = 225
# A text column whose values are mostly numbers (or dates) with more than this many distinct
# ones is a numeric (or date) column with stray text in it, not categories (the same number
# as the rule for a numeric column used as categories).
CONTINUOUS_DISTINCT = 50


def _row_where(spec: FigureSpec, first_pos: int | None) -> str:
    """', first at row R of the file (header = row 1)' for a row position, as in _text_error."""
    if first_pos is None:
        return ""
    if _reader(spec.data_path) == "parquet":
        return f", first in data row {first_pos + 1}"
    return f", first at row {first_pos + 2} of the file (header = row 1)"


def order_notes(fld: str, order: list, values) -> list[str]:
    """Cautions for an ``orders:`` list that does not match a field's values in the data file: a
    listed value the file never holds is most likely a typo, and the value meant is then placed
    (and coloured) as an unlisted one, so a category would change colour between figures."""
    have = {str(v) for v in values}
    listed = [str(v) for v in order]
    missing = [v for v in listed if v not in have]
    unlisted = sorted(have - set(listed), key=natural_key)
    out = []
    if missing:
        # bounded: at most SPELLING_SEARCHES_MAX searches, none over a pool of identifiers
        pool = unlisted or sorted(have)
        hints = []
        for m in missing[:SPELLING_SEARCHES_MAX]:
            best = closest(m, pool)
            hints.append(f"'{shown(m)}'" + (f" (did you mean '{shown(best)}'?)" if best else ""))
        more = len(missing) - len(hints)
        out.append(f"orders: the list for '{fld}' names {', '.join(hints)}"
                   + (f" and {more:,} more" if more else "")
                   + ", which the data never hold; check the spelling in config.yaml")
    if unlisted:
        more = f" and {len(unlisted) - 5} more" if len(unlisted) > 5 else ""
        out.append(f"orders: '{fld}' has values the list leaves out ({', '.join(map(repr, unlisted[:5]))}"
                   f"{more}); they come after the listed ones, in natural order")
    return out


def filter_notes(spec: FigureSpec, values_of) -> list[str]:
    """Cautions for text the filter compares with a column that the column never holds (in the
    whole file): ``arm in ["placebo", "hgh dose"]`` would silently keep only placebo rows.
    ``values_of(column)`` gives the column's distinct values, or None for a numeric column."""
    if spec.filter is None:
        return []
    out = []
    for col, text in dict.fromkeys(spec.filter.text_values()):
        values = values_of(col)
        if values is None:
            continue
        have = {str(v) for v in values}
        if text in have:
            continue
        # an identifier column can hold a million values: no spelling search there; sorted, so
        # ties of the search and the values shown are the same on every rebuild
        small = len(have) <= SPELLING_POOL_MAX
        pool = sorted(have, key=natural_key) if small else sorted(have)
        best = closest(text, pool) if small else None
        close = [best] if best else []
        shown = ", ".join(pool[:8]) + (f" ... ({len(have) - 8} more)" if len(have) > 8 else "")
        out.append(f"filter: {text!r} is not a value of '{col}' in the data, so it matches no row"
                   + (f" (did you mean {close[0]!r}?)" if close else "") + f"; '{col}' holds: {shown}")
    return out


def _text_values(frame: pd.DataFrame, col: str):
    """Distinct values of a text or categorical column; None for numbers, dates and booleans."""
    if col not in frame:
        return None
    s = frame[col]
    if isinstance(s.dtype, pd.CategoricalDtype) or pd.api.types.is_string_dtype(s) or s.dtype == object:
        return pd.unique(s.dropna())
    return None


def _ordered_fields(spec: FigureSpec) -> list[str]:
    """Fields of the figure that have an ``orders:`` list (bands bring their own order)."""
    banded = {b.name for b in spec.bandings}
    return [f for f in dict.fromkeys(f for f in (spec.x, spec.y, spec.colour, *spec.strata) if f)
            if spec.orders.get(f) is not None and f not in banded]


@dataclass(eq=False)
class FigureData:
    panels: list[Panel]
    inputs: list[dict]            # [{path, sha256}]
    n_read: int                   # rows in the file
    n_kept: int                   # rows after the filter
    levels: dict                  # field -> full ordered levels (for colours, x groups)
    n_unassigned: int             # rows whose strata value is missing
    grid_levels: tuple = ()       # two-way grid: (row levels, col levels)
    streamed: dict | None = None  # set when the data were read chunk by chunk
    present: dict = field(default_factory=dict)   # colour field -> values kept by the filter
    notes: list = field(default_factory=list)     # cautions about the data (orders lists, ...)
    missing: dict = field(default_factory=dict)   # field -> rows of the panels missing it
    scales: dict = field(default_factory=dict)    # axis -> scale record (figkit.scales)


def _ordered_positions(values: pd.Series, spec: FigureSpec) -> tuple[pd.Series, list]:
    """An ordered text x of a lines chart (months by name, dose levels, survey rounds) as the
    position of each value in its order (config.yaml orders:, else natural sort), 0, 1, 2 ...:
    the line joins neighbours in that order, and a value missing in a group is a gap of two
    steps, which breaks the line (gap=auto)."""
    present = level_order(values, spec.x, spec)
    if len(present) > MAX_CATEGORIES_PER_AXIS:
        raise spec.err(f"x field '{spec.x}' has {len(present):,} distinct values, more than one axis "
                       "can show", field="x", value=spec.x,
                       allowed=f"at most {MAX_CATEGORIES_PER_AXIS} categories per axis (a filter, "
                       "or a band set derived from the field)")
    # A declared order keeps its every level, present or not: a level the data lack is a step
    # of two positions, which breaks the line (gap=auto), and still shows as a tick.
    declared = [str(v) for v in spec.orders.get(spec.x) or []][:MAX_CATEGORIES_PER_AXIS]
    levels = declared + [v for v in present if str(v) not in set(declared)]
    index = {str(v): float(i) for i, v in enumerate(levels)}
    position = {v: index[str(v)] for v in present}
    return values.map(position).astype(float), levels


def _first_few(levels: list, n: int = 4) -> str:
    shown_levels = ", ".join(str(v) for v in levels[:n])
    return shown_levels + (", ..." if len(levels) > n else "")


def _factorized(values: pd.Series, fld: str, spec: FigureSpec) -> tuple[np.ndarray, list]:
    """(code of each row's value in the panel order, the ordered values): one hashing pass."""
    codes, uniques = pd.factorize(values, sort=False)
    levels = level_order(pd.Series(uniques, dtype=values.dtype), fld, spec)
    position = {v: i for i, v in enumerate(levels)}
    remap = np.array([position[u] for u in uniques], dtype=np.int64)
    return remap[codes], levels


def _json_value(v):
    if isinstance(v, np.generic):
        return v.item()
    return v


def _text_in_numbers(frame: pd.DataFrame, field: str) -> pd.Series | None:
    """Cells of a numeric field that hold text; None when the column is numeric.  An empty
    result for a text column means numbers kept as text (a Parquet string column)."""
    s = frame[field]
    if pd.api.types.is_numeric_dtype(s):
        return None
    return s[pd.to_numeric(s, errors="coerce").isna() & s.notna()]


def _stored_as_text(spec: FigureSpec, field: str, role: str, dtype):
    return spec.err(f"{role} field '{field}' must be numeric for chart '{spec.chart.name}'",
                    field=role, value=f"{field} is stored as text ({dtype})",
                    allowed="a numeric column: store these values as numbers")


def _text_error(spec: FigureSpec, field: str, role: str, n_bad: int, examples: list,
                first_pos: int | None):
    """The one-line error for text in a numeric field: how many rows, a few values, the first."""
    sample = ", ".join(repr(v) for v in examples[:3])
    # Frames keep each row's position in the file (0 = the first data row; see read_dataset
    # and iter_chunks), so the first bad value can be found: a spreadsheet shows a CSV's
    # header as row 1; a Parquet file has no header row.
    where = "" if first_pos is None else (
        f", first in data row {first_pos + 1}" if _reader(spec.data_path) == "parquet"
        else f", first at row {first_pos + 2} of the file (header = row 1)")
    return spec.err(f"{role} field '{field}' must be numeric for chart '{spec.chart.name}'",
                    field=role, value=f"{field} holds text in {n_bad} rows such as {sample}{where}",
                    allowed="a numeric column (decimal point, not comma; empty cells for missing)")


def _first_pos(bad: pd.Series) -> int | None:
    return int(bad.index[0]) if len(bad) and pd.api.types.is_integer_dtype(bad.index) else None


def _check_kind(frame: pd.DataFrame, field: str, need: str, spec: FigureSpec, role: str) -> None:
    s = frame[field]
    if need == NUMERIC:
        bad = _text_in_numbers(frame, field)
        if bad is not None and len(bad):
            raise _text_error(spec, field, role, len(bad), list(pd.unique(bad)[:3]), _first_pos(bad))
        if bad is not None:
            raise _stored_as_text(spec, field, role, s.dtype)
    if need == CATEGORY and pd.api.types.is_numeric_dtype(s) and not pd.api.types.is_bool_dtype(s):
        distinct = s.nunique()
        if distinct > CONTINUOUS_DISTINCT:
            raise spec.err(f"{role} field '{field}' is continuous ({distinct} distinct values) but chart "
                           f"'{spec.chart.name}' needs categories", field=role, value=field,
                           allowed="a categorical column, or a band set (bands:) derived from it")
    if need == CATEGORY:
        return _check_categories(s, field, spec, role)
    return None


def _check_categories(s: pd.Series, field: str, spec: FigureSpec, role: str) -> str | None:
    """A categorical axis: at most MAX_CATEGORIES_PER_AXIS values; a text column that holds
    numbers or dates as text with many distinct values is refused (it is a measurement, not
    categories); a few numbers mixed with text give a caution (returned)."""
    uniques = pd.unique(s.dropna())
    if len(uniques) > MAX_CATEGORIES_PER_AXIS:
        raise spec.err(f"{role} field '{field}' has {len(uniques):,} distinct values, more than "
                       f"one axis can show", field=role, value=field,
                       allowed=f"at most {MAX_CATEGORIES_PER_AXIS} categories per axis (a filter, "
                       "or a band set derived from the field)")
    if not (s.dtype == object or pd.api.types.is_string_dtype(s)) or not len(uniques):
        return None
    text = pd.Series(uniques, dtype=object).map(lambda v: v if isinstance(v, str) else None)
    numbers = pd.to_numeric(text, errors="coerce")
    is_number = numbers.notna().to_numpy()
    n_distinct = int(is_number.sum())
    dates = None
    if not is_number.any():
        dates = pd.to_datetime(text, errors="coerce", format="ISO8601")
        is_number = dates.notna().to_numpy()
        n_distinct = int(is_number.sum())
    if not is_number.any():
        return None
    what = "numbers" if dates is None else "dates"
    word = {True: set(uniques[is_number]), False: set(uniques[~is_number])}
    row_is_number = s.isin(word[True])
    n_rows = int(row_is_number.sum())
    other = s.notna() & ~row_is_number
    n_other = int(other.sum())
    first = _first_pos(s[other]) if n_other else None
    sample = ", ".join(repr(v) for v in list(pd.unique(s[other]))[:3])
    if n_distinct > CONTINUOUS_DISTINCT:
        detail = (f"and text in {n_other} rows such as {sample}{_row_where(spec, first)}"
                  if n_other else "")
        raise spec.err(f"{role} field '{field}' holds {what} stored as text in {n_rows} rows "
                       f"({n_distinct} distinct) {detail}, but chart '{spec.chart.name}' needs "
                       "categories", field=role, value=field,
                       allowed=f"a categorical column; or store the {what} as {what} and derive "
                       "a band set (bands:) from them")
    if n_other and dates is None:
        return (f"{role} field '{field}' mixes numbers ({n_rows} rows) with text ({n_other} rows "
                f"such as {sample}{_row_where(spec, first)}); each is drawn as a category of its "
                "own, in natural order")
    return None


def split_rows(frame: pd.DataFrame, codes: np.ndarray, k: int, used: list[str]):
    """Split rows into ``k`` panels at once, with no DataFrame copy per panel: rows incomplete
    in ``used`` are dropped (and counted per panel), one stable sort by panel code puts each
    panel's rows together in their file order.  Returns (the ``used`` columns in panel order,
    k + 1 slice bounds, dropped rows per panel); panel i is ``ordered[bounds[i]:bounds[i+1]]``.
    """
    complete = frame[used].notna().all(axis=1).to_numpy() if used else np.ones(len(frame), bool)
    everything = bool(complete.all())     # the usual case: skip the masking copies
    dropped = np.zeros(k, dtype=np.int64) if everything else np.bincount(codes[~complete], minlength=k)
    if not everything:
        codes = codes[complete]
    order = np.argsort(codes.astype(np.int16 if k < 2 ** 15 else np.int64), kind="stable")
    rows = order if everything else np.flatnonzero(complete)[order]
    ordered = pd.DataFrame({f: _gather(frame[f], rows) for f in used},
                           index=pd.RangeIndex(len(rows)))
    return ordered, np.searchsorted(codes[order], np.arange(k + 1)), dropped


def _gather(series: pd.Series, rows: np.ndarray):
    """The series' values at ``rows``: numpy indexing for numpy dtypes (half the time of
    DataFrame.take at 1e7 rows, and no index to carry), pandas' take for the others."""
    if isinstance(series.dtype, np.dtype):
        return series.to_numpy()[rows]
    return series.take(rows).reset_index(drop=True)   # categories and strings keep their dtype


def load_figure_data(spec: FigureSpec, rel_to: Path | None = None,
                     stream_above_bytes: int | None = None) -> FigureData:
    """Read, derive, filter, type-check and split the data of one figure (chunk by chunk for
    big files of the charts that only need counts, see :func:`stream_figure_data`)."""
    path = spec.data_path
    if not path.is_file():
        raise spec.err("dataset file not found", field="dataset", value=str(path))
    if should_stream(spec, stream_above_bytes):
        return stream_figure_data(spec, rel_to)
    before = file_identity(path)
    check_columns(spec, read_columns(path))
    from . import progress
    progress.stage(f"reading {path.name}")
    frame = read_dataset(path, spec.columns_needed())
    n_read = len(frame)
    progress.stage(f"read {n_read:,} rows of {path.name}; splitting into panels")
    for banding in spec.bandings:
        frame[banding.name] = apply_banding(frame[banding.source], banding)
    ordered = _ordered_fields(spec)
    notes = [n for fld in ordered                      # before the filter: the whole file
             for n in order_notes(fld, spec.orders[fld], pd.unique(frame[fld].dropna()))]
    notes += filter_notes(spec, lambda col: _text_values(frame, col))

    # Colour levels are taken before the filter so that a category keeps its colour in every
    # figure of the dataset, whatever the figure keeps.  A numeric colour field with few distinct
    # values (a year, a dose level) is shown as categories unless the row gives a centre value.
    levels = {}
    colour_is_category = False
    if spec.colour:
        s_col = frame[spec.colour]
        numeric = pd.api.types.is_numeric_dtype(s_col) and not isinstance(s_col.dtype, pd.CategoricalDtype)
        colour_is_category = not numeric or (spec.options.get("centre") is None and s_col.nunique() <= 12)
        if colour_is_category:
            levels[spec.colour] = level_order(s_col, spec.colour, spec)
    if spec.filter is not None:
        try:
            mask = spec.filter.evaluate(frame)
        except FigkitError as exc:
            raise exc.at(row=spec.row, figure=spec.id, field="filter") from None
        frame = frame.loc[mask]
    n_kept = len(frame)
    if n_read == 0:
        raise spec.err("dataset file has a header but no rows of data", field="dataset",
                       value=str(path), allowed="a file with at least one row under its header")
    if n_kept == 0:
        raise spec.err("no rows left after the filter", field="filter", value=spec.filter.text,
                       allowed="a filter that keeps some rows" + "".join(
                           "; " + n.split("; ", 1)[1] for n in notes if n.startswith("filter:")))

    ordered_x = None
    if spec.chart.name == "lines" and spec.x and not pd.api.types.is_numeric_dtype(frame[spec.x]) \
            and _text_in_numbers(frame, spec.x).size == frame[spec.x].notna().sum():
        if spec.options.get("x_scale", "linear") != "linear":
            raise spec.err("an ordered text x is drawn at positions 0, 1, 2 ..., not at values: it "
                           "has no log scale", field="options",
                           value=f"x_scale={spec.options['x_scale']}",
                           allowed="x_scale=linear, or a numeric x")
        frame = frame.copy()
        frame[spec.x], ordered_x = _ordered_positions(frame[spec.x], spec)
        levels[spec.x] = ordered_x
        if spec.orders.get(spec.x) is None:
            notes.append(f"x field '{spec.x}' is text with no order under orders: in config.yaml; "
                         f"its values are joined in natural sort order ({_first_few(ordered_x)}): "
                         "give the order there if it is not that one")
    for role, need in (("x", spec.chart.x), ("y", spec.chart.y)):
        fld = getattr(spec, role)
        if fld and need:
            note = _check_kind(frame, fld, need, spec, role)
            if note:
                notes.append(note)
    if spec.weight:
        _check_kind(frame, spec.weight, NUMERIC, spec, "weight")
        if (frame[spec.weight].dropna() < 0).any():
            raise spec.err("weight field has negative values", field="weight", value=spec.weight,
                           allowed="counts or other non-negative numbers")
        infinite = frame[spec.weight][np.isinf(frame[spec.weight].to_numpy(dtype=float))]
        if len(infinite):   # a sum with one inf in it is inf: every bar or tile would be lost
            raise spec.err(f"weight field '{spec.weight}' holds infinite values in "
                           f"{len(infinite)} rows{_row_where(spec, _first_pos(infinite))}",
                           field="weight", value=spec.weight,
                           allowed="finite non-negative numbers (empty cells for missing)")

    # Axis groups and legend entries: only the values the figure keeps (a value the filter
    # removed would otherwise read as a true zero).
    present = {}
    for fld, need in ((spec.x, spec.chart.x), (spec.y, spec.chart.y)):
        if fld and need == CATEGORY:
            levels[fld] = level_order(frame[fld], fld, spec)
    if colour_is_category:
        present[spec.colour] = level_order(frame[spec.colour], spec.colour, spec)

    used = [f for f in (spec.x, spec.y, spec.colour, spec.weight) if f]
    used = list(dict.fromkeys(used))
    n_unassigned = 0
    if spec.strata:
        has_strata = frame[list(spec.strata)].notna().all(axis=1)
        n_unassigned = int((~has_strata).sum())
        if n_unassigned:          # a copy of every column: ~0.3 s at 1e7 rows, so only if needed
            frame = frame.loc[has_strata]
    panels: list[Panel] = []
    grid_levels: tuple = ()
    if not spec.strata:
        keys_list, labels, cells, codes = [{}], [""], [None], np.zeros(len(frame), dtype=np.int64)
    elif len(spec.strata) == 1:
        fld = spec.strata[0]
        codes, levels_ = _factorized(frame[fld], fld, spec)
        keys_list, labels, cells = [{fld: v} for v in levels_], [short_label(shown(v)) for v in levels_], None
    else:
        rf, cf = spec.strata
        rcodes, rlev = _factorized(frame[rf], rf, spec)
        ccodes, clev = _factorized(frame[cf], cf, spec)
        codes = rcodes * len(clev) + ccodes
        keys_list = [{rf: rv, cf: cv} for rv in rlev for cv in clev]
        labels = [short_label(f"{shown(rv)} / {shown(cv)}") for rv in rlev for cv in clev]
        cells = [(i, j) for i in range(len(rlev)) for j in range(len(clev))]
        grid_levels = (rlev, clev)
    k = len(keys_list)
    _check_panel_count(spec, k)
    ordered, bounds, dropped = split_rows(frame, codes, k, used)
    # Which fields the dropped rows miss, with a count each (only when some are dropped).
    missing = {f: int(frame[f].isna().sum()) for f in used} if dropped.any() else {}
    for i in range(k):
        panels.append(Panel(labels[i], {f: _json_value(v) for f, v in keys_list[i].items()},
                            ordered.iloc[bounds[i]:bounds[i + 1]], int(dropped[i]),
                            cells[i] if cells else None))

    data = FigureData(panels, inputs_as_read(spec, path, before, rel_to or spec.root), n_read, n_kept, levels,
                      n_unassigned, grid_levels)
    data.present = present
    data.notes = notes
    data.missing = {f: n for f, n in missing.items() if n}
    from .scales import apply_scales
    apply_scales(spec, data)      # log/signed-log axes: values in the space the axis draws
    data.notes += _empty_panel_notes(spec, data) + _long_label_notes(spec, data)
    return data


def colour_range(spec: FigureSpec, data: "FigureData") -> tuple[float, float]:
    """(lowest, highest) value of a numeric colour field over the rows drawn; a 'centre' option
    must lie strictly inside (a diverging scale needs both sides).  Called when drawing and, via
    render.prepare, by lint."""
    vals = np.concatenate([p.frame[spec.colour].to_numpy(dtype=float) for p in data.panels if p.n]
                          or [np.array([0.0, 1.0])])
    lo, hi = float(np.nanmin(vals)), float(np.nanmax(vals))
    centre = spec.options.get("centre")
    if centre is not None and not lo < centre < hi:
        raise spec.err("option 'centre' must lie inside the colour field's range",
                       field="options", value=centre, allowed=f"between {lo:g} and {hi:g}")
    return lo, hi


def _long_label_notes(spec: FigureSpec, data: "FigureData") -> list[str]:
    """A caution for each axis title or panel title cut to MAX_LABEL_CHARS (spec.short_label)."""
    out = []
    fields = dict.fromkeys(f for f in (spec.x, spec.y, spec.colour, spec.weight, *spec.strata) if f)
    for f in fields:
        label, unit = spec.labels.get(f, (f, ""))
        if label.endswith("\u2026") and len(label) == MAX_LABEL_CHARS or \
                unit.endswith("\u2026") and len(unit) == MAX_LABEL_CHARS:
            out.append(f"the label of field '{f}' is longer than {MAX_LABEL_CHARS} characters and "
                       "is shown cut short with an ellipsis; shorten it under fields: in config.yaml")
        elif len(f) > MAX_LABEL_CHARS and f not in spec.labels:
            out.append(f"field name '{short_label(f)}' is longer than {MAX_LABEL_CHARS} characters; "
                       "give it a short label under fields: in config.yaml")
    for f, values in (data.levels or {}).items():     # tick labels and legend entries
        long = [v for v in values if len(shown(v)) > MAX_LABEL_CHARS]
        if long:
            where = "legend entries" if f == spec.colour and f not in (spec.x, spec.y) else \
                "category labels"
            out.append(f"{len(long)} {where} of field '{f}' are longer than {MAX_LABEL_CHARS} "
                       f"characters and are shown cut short with an ellipsis (the first: "
                       f"'{short_label(shown(long[0]))}', {len(shown(long[0])):,} characters)")
    cut = [p.label for p in data.panels if p.label.endswith("\u2026") and
           len(p.label) == MAX_LABEL_CHARS]
    if cut:
        out.append(f"{len(cut)} panel titles are longer than {MAX_LABEL_CHARS} characters and are "
                   "shown cut short with an ellipsis")
    return out


def _check_panel_count(spec: FigureSpec, k: int) -> None:
    if k > MAX_PANELS:
        raise spec.err(f"strata make {k:,} panels, more than one figure can show", field="strata",
                       value=" by ".join(spec.strata), allowed=f"at most {MAX_PANELS} panels (a "
                       "filter, or a band set derived from the field)")


def _empty_panel_notes(spec: FigureSpec, data: "FigureData") -> list[str]:
    """A figure none of whose panels has a complete row is refused (it would show nothing); a
    panel left empty only because its rows miss values gets a caution."""
    if not data.panels or any(p.n for p in data.panels):
        empty = [p for p in data.panels if not p.n and p.n_dropped]
        if not empty:
            return []
        names = ", ".join(repr(p.label) for p in empty[:5]) + (
            f" and {len(empty) - 5} more" if len(empty) > 5 else "")
        return [f"{len(empty)} of {len(data.panels)} panels draw no data ({names}): every row "
                f"there misses a value of {', '.join(repr(f) for f in data.missing) or 'a field'}"]
    worst = max(data.missing.items(), key=lambda kv: kv[1]) if data.missing else None
    raise spec.err("no panel has a row with a value in every field it draws, so the figure "
                   "would show nothing" + (f": '{worst[0]}' is missing in {worst[1]} of "
                                           f"{data.n_kept} rows" if worst else ""),
                   field=None if worst is None else next(
                       (r for r in ("x", "y", "colour", "weight") if getattr(spec, r) == worst[0]),
                       None),
                   value=None if worst is None else worst[0],
                   allowed="rows with values in x, y and the other fields the chart uses")


# ---------------------------------------------------------------------------- streaming path
#
# Data bigger than memory: for the charts that only need counts and sums (hexbins, histogram)
# the file is read in chunks with only the needed columns, twice: pass 1 finds the shared extent,
# the strata values and a fixed-seed sample for bin rules; pass 2 tallies every panel (counts per
# hexagon or bin, n, n_dropped, means, straight-line sums).  Memory is bounded by the chunk size.

STREAM_CHARTS = ("hexbins", "histogram")
STREAM_ABOVE_BYTES = 256 * 2 ** 20      # files larger than this stream (config: stream_above_mb)
CHUNK_ROWS = 1_000_000
SAMPLE_ROWS = 200_000                   # fixed-seed sample for the Freedman-Diaconis quartiles


def should_stream(spec: FigureSpec, limit_bytes: int | None = None) -> bool:
    if spec.chart.name not in STREAM_CHARTS or spec.trend == "loess" or any(
            spec.options.get(k, "linear") != "linear" for k in ("x_scale", "y_scale")):
        return False
    limit = STREAM_ABOVE_BYTES if limit_bytes is None else limit_bytes
    return spec.data_path.is_file() and spec.data_path.stat().st_size > limit


def iter_chunks(path: Path, columns: list[str], rows: int | None = None):
    """DataFrames of at most ``rows`` rows (default: CHUNK_ROWS, read at call time) holding
    only ``columns``."""
    rows = rows or CHUNK_ROWS
    kind = _reader(path)
    if kind == "parquet":
        try:
            import pyarrow.parquet as pq
        except ImportError:
            raise FigkitError("reading Parquet needs pyarrow: pip install pyarrow", value=str(path)) from None
        # pre_buffer=False: Arrow would otherwise keep every row group's buffers until the pass
        # ends, and memory would grow with the file (measured in benchmarks/, case 7).
        start = 0
        for batch in pq.ParquetFile(path, pre_buffer=False).iter_batches(batch_size=rows, columns=columns):
            chunk = batch.to_pandas()
            chunk.index = pd.RangeIndex(start, start + len(chunk))   # positions in the file
            start += len(chunk)
            yield chunk
        return
    try:
        yield from pd.read_csv(path, usecols=columns, chunksize=rows, low_memory=False,
                               **_text_options(path, kind))
    except UnicodeDecodeError:
        raise _undecodable(path) from None
    except (OSError, ValueError, UnicodeDecodeError, pd.errors.ParserError) as exc:
        first = str(exc).splitlines()[0] if str(exc) else type(exc).__name__
        raise FigkitError(f"dataset file cannot be read: {first}", value=str(path)) from None


def _prepared_chunks(spec: FigureSpec, progress=None, raw=None):
    """Chunks with bands derived and the filter applied; yields (chunk, rows read).  ``raw``, if
    given, sees every chunk before the filter."""
    for chunk in iter_chunks(spec.data_path, spec.columns_needed()):
        read = len(chunk)
        for banding in spec.bandings:
            chunk[banding.name] = apply_banding(chunk[banding.source], banding)
        if raw is not None:
            raw(chunk)
        if spec.filter is not None:
            chunk = chunk.loc[spec.filter.evaluate(chunk)]
        if progress is not None:
            progress(read)
        yield chunk, read


def _progress_printer(path: Path):
    """A row count on the job's progress line (figkit.progress: on a terminal only, never in
    logs or CI output); outside a figure job, a line of its own."""
    from . import progress
    own = progress.current() is None
    line = progress.Progress(None) if own else progress.current()
    total = [0]

    def step(rows):
        total[0] += rows
        line.stage(f"reading {path.name}: {total[0]:,} rows")

    def done():
        if own:
            line.close()
    return step, done


def stream_figure_data(spec: FigureSpec, rel_to: Path | None = None) -> FigureData:
    """The streaming twin of :func:`load_figure_data` (same panels, counts, means and slopes)."""
    from .aggregate import HexGrid, PanelTally
    from . import stats

    path = spec.data_path
    before = file_identity(path)
    check_columns(spec, read_columns(path))
    used = list(dict.fromkeys(f for f in (spec.x, spec.y, spec.weight) if f))
    strata = list(spec.strata)
    rng = np.random.default_rng(20261202)

    # Pass 1: extent, strata values, counts, a sample of x for bin rules.
    n_read = n_kept = 0
    lo = {f: np.inf for f in used}
    hi = {f: -np.inf for f in used}
    seen: dict = {f: set() for f in strata}
    sample = []
    ordered = _ordered_fields(spec)
    compared = {c for c, _ in spec.filter.text_values()} if spec.filter is not None else set()
    whole: dict = {f: set() for f in [*ordered, *compared]}   # values before the filter, for notes
    numeric: set = set()

    def collect(chunk):
        for f in whole:
            if f in compared and _text_values(chunk, f) is None:
                numeric.add(f)          # numbers: a text filter value is not judged (as in memory)
            if f in ordered or f not in numeric:   # no set of every number: memory stays bounded
                whole[f].update(chunk[f].dropna().unique().tolist())
    texts: dict = {}     # role -> text cells in a numeric field, counted over every chunk
    as_text: dict = {}   # role -> dtype of a numeric field stored as text (numbers only)
    step, done = _progress_printer(path)
    for chunk, read in _prepared_chunks(spec, step, collect):
        n_read += read
        n_kept += len(chunk)
        if len(chunk):   # every chunk: a bad value may sit anywhere in a big file
            for role, need in (("x", spec.chart.x), ("y", spec.chart.y)):
                fld = getattr(spec, role)
                if fld and need == CATEGORY:
                    _check_kind(chunk, fld, need, spec, role)
                elif fld and need == NUMERIC:   # text is counted over every chunk, then reported
                    bad = _text_in_numbers(chunk, fld)
                    if bad is not None and not len(bad):
                        as_text.setdefault(role, chunk[fld].dtype)   # said if nothing worse
                    elif bad is not None:
                        t = texts.setdefault(role, {"n": 0, "examples": [], "first": None})
                        t["n"] += len(bad)
                        t["first"] = _first_pos(bad) if t["first"] is None else t["first"]
                        for v in pd.unique(bad):
                            if len(t["examples"]) < 3 and v not in t["examples"]:
                                t["examples"].append(v)
        if texts or as_text:
            continue     # the numbers of this file are not read: the error follows the pass
        for f in used:
            v = chunk[f].to_numpy(dtype=float)
            if np.isfinite(v).any():
                lo[f] = min(lo[f], float(np.nanmin(v)))
                hi[f] = max(hi[f], float(np.nanmax(v)))
        for f in strata:
            seen[f].update(chunk[f].dropna().unique().tolist())
        if spec.chart.name == "histogram" and len(chunk):
            keep = rng.random(len(chunk)) < min(1.0, SAMPLE_ROWS / max(len(chunk), 1))
            sample.append(chunk.loc[keep, spec.x].dropna().to_numpy(dtype=float))
    for role, t in texts.items():
        raise _text_error(spec, getattr(spec, role), role, t["n"], t["examples"], t["first"])
    for role, dtype in as_text.items():
        raise _stored_as_text(spec, getattr(spec, role), role, dtype)
    if n_kept == 0:
        raise spec.err("no rows left after the filter", field="filter",
                       value=spec.filter.text if spec.filter is not None else None,
                       allowed="a filter that keeps some rows")

    # Panels in the documented order.
    def order(f):
        return level_order(pd.Series(sorted(seen[f], key=natural_key)), f, spec)
    if not strata:
        keys_list, cells = [{}], [None]
    elif len(strata) == 1:
        keys_list, cells = [{strata[0]: v} for v in order(strata[0])], None
    else:
        rl, cl = order(strata[0]), order(strata[1])
        keys_list = [{strata[0]: r, strata[1]: c} for r in rl for c in cl]
        cells = [(i, j) for i in range(len(rl)) for j in range(len(cl))]
    _check_panel_count(spec, len(keys_list))
    grid = edges = bin_info = None
    if spec.chart.name == "hexbins":
        from .aggregate import padded_range
        xl, yl = padded_range(lo[spec.x], hi[spec.x]), padded_range(lo[spec.y], hi[spec.y])
        grid = HexGrid(xl[0], xl[1], yl[0], yl[1], int(spec.options.get("cells", 30)))
    else:
        pooled = np.concatenate(sample) if sample else np.array([lo[spec.x], hi[spec.x]])
        rule = spec.options.get("bins", "fd")
        rule = int(float(rule)) if rule not in ("fd", "sturges") else rule
        # The rule's width from the sample; the edges span the full data range.
        width_edges = stats.bin_edges(pooled, rule)
        # ceil, as numpy.histogram_bin_edges (and stats.bin_edges) count bins for a width
        k = max(1, int(np.ceil((hi[spec.x] - lo[spec.x]) / (width_edges[1] - width_edges[0]) - 1e-9)))
        edges = np.linspace(lo[spec.x], hi[spec.x], k + 1) if isinstance(rule, str) else \
            np.linspace(lo[spec.x], hi[spec.x], rule + 1)
        edges, bin_info = stats.bin_layout(edges, rule, stats.data_resolution(pooled),
                                           spec.options.get("edges", "aligned") == "exact")

    # Pass 2: tallies.
    tallies = {tuple(k.get(f) for f in strata): PanelTally() for k in keys_list}
    n_unassigned = 0
    missing: dict = {}
    for chunk, _ in _prepared_chunks(spec):
        if strata:
            has = chunk[strata].notna().all(axis=1)
            n_unassigned += int((~has).sum())
            chunk = chunk.loc[has]
            groups = chunk.groupby(strata, sort=False, observed=True)
        else:
            groups = [((), chunk)]
        for key, part in groups:
            key = key if isinstance(key, tuple) else (key,)
            tally = tallies[tuple(_json_value(k) for k in key)] if strata else tallies[()]
            complete = part[used].notna().all(axis=1)
            tally.n_dropped += int((~complete).sum())
            if not complete.all():
                for f in used:
                    missing[f] = missing.get(f, 0) + int(part[f].isna().sum())
            part = part.loc[complete]
            x = part[spec.x].to_numpy(dtype=float)
            y = part[spec.y].to_numpy(dtype=float) if spec.y else None
            tally.add_points(x, y, grid, edges)
    done()

    panels = []
    for i, keys in enumerate(keys_list):
        tally = tallies[tuple(keys.get(f) for f in strata)]
        label = short_label(" / ".join(shown(v) for v in keys.values()))
        frame = pd.DataFrame({f: pd.Series(dtype=float) for f in used})
        panels.append(Panel(label, {k: _json_value(v) for k, v in keys.items()}, frame,
                            tally.n_dropped, cells[i] if cells else None, tally=tally))
    grid_levels = (order(strata[0]), order(strata[1])) if len(strata) == 2 else ()
    data = FigureData(panels, inputs_as_read(spec, path, before, rel_to or spec.root), n_read, n_kept, {},
                      n_unassigned, grid_levels)
    data.missing = {f: n for f, n in missing.items() if n}
    data.notes = [n for f in ordered for n in order_notes(f, spec.orders[f], sorted(whole[f], key=natural_key))]
    data.notes += filter_notes(spec, lambda col: None if col in numeric else whole.get(col))
    data.notes += _empty_panel_notes(spec, data) + _long_label_notes(spec, data)
    data.streamed = {"chunk_rows": CHUNK_ROWS, "hex_grid": None if grid is None else
                     [grid.xmin, grid.xmax, grid.ymin, grid.ymax, grid.nx],
                     "bin_edges": None if edges is None else edges.tolist(), "bin_info": bin_info,
                     "sample_rows": int(sum(len(s) for s in sample)) if sample else None}
    return data
