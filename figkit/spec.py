"""Stage 2, the spec: one checked sheet row + project settings + house style -> FigureSpec.

This is where a row's meaning is checked: the chart kind's needs (:data:`CHARTS`), the fields
against the dataset's columns, presets, bands, the filter's grammar, options and their values.
Every failure is a one-line :class:`~figkit.errors.FigkitError` naming row, figure, field, value and
what is allowed.
"""
from __future__ import annotations

import math

import hashlib
import json
from dataclasses import dataclass, field
from pathlib import Path

from . import __version__
from .errors import FigkitError
from .expr import Expr, parse
from .sheet import Config, SheetRow
from .style import HouseStyle, load_style

NUMERIC, CATEGORY = "numeric", "categorical"


@dataclass(frozen=True)
class ChartKind:
    """What a chart kind needs from a row.  ``x``/``y``: NUMERIC, CATEGORY or None (not used);
    ``colour``: which colour mappings it accepts; ``options``: option name -> (type, default, help)."""
    name: str
    x: str | None
    y: str | None
    y_required: bool = True
    colour: tuple[str, ...] = ()
    colour_required: bool = False
    weight: bool = False
    trend: bool = False
    options: dict = field(default_factory=dict)
    summary: str = ""


_OVERPLOT = ("auto", "points", "translucent", "jitter", "bins")
_SCALE = ("linear", "log10", "signed-log")
_THRESHOLD = {"threshold": (float, 1.0, "the symmetric log's linear threshold, above 0")}
_XY_SCALES = {"x_scale": (str, "linear", _SCALE), "y_scale": (str, "linear", _SCALE), **_THRESHOLD}
_X_SCALE = {"x_scale": (str, "linear", _SCALE), **_THRESHOLD}
_Y_SCALE = {"y_scale": (str, "linear", _SCALE), **_THRESHOLD}
CHARTS: dict[str, ChartKind] = {c.name: c for c in [
    ChartKind("scatter", NUMERIC, NUMERIC, colour=(CATEGORY, NUMERIC), trend=True,
              options={"points": (str, "auto", _OVERPLOT), "span": (float, 0.75, "0 < span <= 1"),
                       "degree": (int, 1, (1, 2)), "robust": (int, 0, "0-5 iterations"),
                       "shapes": (str, "no", ("yes", "no")),
                       "centre": (float, None, "a value of the numeric colour field"), **_XY_SCALES},
              summary="points of y against x; overplotting handled from the measured density"),
    ChartKind("hexbins", NUMERIC, NUMERIC, trend=True,
              options={"cells": (int, 30, "hexagons across a panel, 5-200"),
                       "scale": (str, "log", ("log", "linear")), "span": (float, 0.75, "0 < span <= 1"),
                       "degree": (int, 1, (1, 2)), "robust": (int, 0, "0-5 iterations"),
                       **_XY_SCALES},
              summary="counts in hexagonal bins (Carr et al. 1987), one colour scale for all panels"),
    ChartKind("box", CATEGORY, NUMERIC, options={"whisker": (float, 1.5, "IQR multiple > 0"),
                                                 "quartiles": (str, "linear", ("linear", "hinges")),
                                                 **_Y_SCALE},
              summary="Tukey box plot of y per x group"),
    ChartKind("lines", NUMERIC, NUMERIC, colour=(CATEGORY,),
              options={"gap": (str, "auto", "auto, none or a step in x units above 0"),
                       "band": (str, "yes", ("yes", "no")), **_XY_SCALES},
              summary="y over an ordered x, one line per colour group (markers and dashes); "
                      "per-x means with a 95% band where x repeats; gaps in x break the line"),
    ChartKind("means", CATEGORY, NUMERIC, colour=(CATEGORY,),
              options={"interval": (str, "t", ("t", "bootstrap")),
                       "resamples": (int, 4000, "bootstrap resamples, 500-100000"),
                       "seed": (int, 20261202, "a whole number (the bootstrap's fixed seed)"),
                       "points": (str, "none", ("none", "auto", "points", "translucent")),
                       "shapes": (str, "no", ("yes", "no")), **_Y_SCALE},
              summary="mean of y per x group (side by side per colour group) with its 95% interval"),
    ChartKind("violin", CATEGORY, NUMERIC, options={"bandwidth": (str, "scott", "scott, silverman or a number"),
                                                    **_Y_SCALE},
              summary="mirrored kernel density of y per x group, quartiles marked"),
    ChartKind("density", NUMERIC, None, colour=(CATEGORY,),
              options={"bandwidth": (str, "scott", "scott, silverman or a number"),
                       "dashes": (str, "no", ("yes", "no")), **_X_SCALE},
              summary="Gaussian kernel density curves of x with translucent fills"),
    ChartKind("histogram", NUMERIC, None, options={"bins": (str, "fd", "fd, sturges or a count"),
                                                   "edges": (str, "aligned", ("aligned", "exact")),
                                                   **_X_SCALE},
              summary="histogram of x on bin edges shared by every panel"),
    ChartKind("count-bars", CATEGORY, None, colour=(CATEGORY,), weight=True,
              summary="bars of counts (or summed weight) per x value, side by side per colour group"),
    ChartKind("shares", CATEGORY, None, colour=(CATEGORY,), colour_required=True, weight=True,
              options={"interval": (str, "none", ("none", "wilson"))},
              summary="bars stacked to 100%: each colour group's share of the x value's total"),
    ChartKind("tiles", CATEGORY, CATEGORY, weight=True,
              summary="tile map of counts over two categorical fields, numbers printed in tiles"),
]}


@dataclass(frozen=True)
class Band:
    label: str
    below: float | None


@dataclass(frozen=True)
class Banding:
    """A categorical field derived from a continuous one; first matching band wins."""
    name: str
    source: str
    bands: tuple[Band, ...]

    def as_record(self) -> dict:
        return {"field": self.name, "from": self.source,
                "bands": [{"label": b.label, "below": b.below} for b in self.bands]}


@dataclass
class FigureSpec:
    id: str
    row: int
    dataset: str
    data_path: Path
    chart: ChartKind
    x: str | None
    y: str | None
    colour: str | None
    weight: str | None
    strata: tuple[str, ...]           # () none, (f,) wrapped, (rows, cols) grid
    trend: str
    ranges: str                       # common | own | own-x | own-y
    filter: Expr | None
    bandings: tuple[Banding, ...]
    width_mm: float
    height_mm: float | None
    columns: int | None
    style: HouseStyle
    options: dict
    caption: str
    labels: dict                      # field -> (label, unit)
    orders: dict                      # field -> explicit order
    pinned: dict                      # field -> {value: hex}
    formats: tuple[str, ...]
    root: Path
    cells: dict = field(default_factory=dict)
    letters: bool = False             # letter each panel (case from the house style)
    letter_from: int = 0              # the first panel's letter: 0 = a (later in a multi-part figure)
    size_preset: dict | None = None   # {name, mm, from, presets_from}: which width and why

    @property
    def grid(self) -> bool:
        return len(self.strata) == 2

    def columns_needed(self) -> list[str]:
        """Source columns to read: used fields, band sources and filter columns, derived ones excluded."""
        derived = {b.name for b in self.bandings}
        want = [f for f in (self.x, self.y, self.colour, self.weight, *self.strata) if f]
        want += [b.source for b in self.bandings]
        if self.filter is not None:
            want += sorted(self.filter.columns)
        out = []
        for f in want:
            if f not in derived and f not in out:
                out.append(f)
        return out

    def axis_title(self, fld: str | None) -> str:
        if not fld:
            return ""
        label, unit = self.labels.get(fld, (fld, ""))
        return f"{label} ({unit})" if unit else label

    def err(self, message: str, **kw) -> FigkitError:
        return FigkitError(message, row=self.row, figure=self.id, **kw)


# The longest axis title, unit or panel title drawn in full.  A full-width figure (176 mm) holds
# about 80 characters of 7 pt text on one line; a longer label would be wrapped over many lines
# and take the layout minutes to fit.  Longer labels are cut with an ellipsis, and cautioned.
MAX_LABEL_CHARS = 80


def short_label(text) -> str:
    """``text`` as drawn: at most MAX_LABEL_CHARS characters, the last an ellipsis if cut."""
    text = str(text)
    return text if len(text) <= MAX_LABEL_CHARS else text[:MAX_LABEL_CHARS - 1] + "\u2026"


def label_text(value) -> str:
    """A data value as drawn in a tick label, legend entry or panel title: control characters
    escaped (figkit.text.shown), then cut to MAX_LABEL_CHARS with an ellipsis (cautioned by
    figkit.data)."""
    from .text import shown
    return short_label(shown(value))


def _parse_options(text: str | None, kind: ChartKind, err) -> dict:
    opts = {k: spec[1] for k, spec in kind.options.items()}
    if not text:
        return opts
    for part in filter(None, (p.strip() for p in text.split(";"))):
        key, _, raw = (s.strip() for s in part.partition("="))
        if key not in kind.options:
            known = any(key in k.options for k in CHARTS.values())
            what = (f"option '{key}' does not apply to chart '{kind.name}'" if known else
                    f"unknown option '{key}' for chart '{kind.name}'")
            raise err(what, field="options", value=part,
                      allowed=sorted(kind.options) or "no options for this chart")
        typ, _, allowed = kind.options[key]
        try:
            value = typ(raw)
        except ValueError:
            what = {"float": "number", "int": "whole number"}.get(typ.__name__, typ.__name__)
            raise err(f"option '{key}' needs a {what}", field="options", value=raw,
                      allowed=allowed) from None
        if isinstance(value, float) and not math.isfinite(value):
            raise err(f"option '{key}' needs a finite number", field="options", value=raw,
                      allowed=allowed)
        if isinstance(allowed, tuple) and value not in allowed:
            raise err(f"option '{key}' value not allowed", field="options", value=raw, allowed=allowed)
        opts[key] = value
    _check_option_ranges(opts, err)
    return opts


def _check_option_ranges(opts: dict, err) -> None:
    checks = {"span": lambda v: 0 < v <= 1, "robust": lambda v: 0 <= v <= 5,
              "cells": lambda v: 5 <= v <= 200, "whisker": lambda v: v > 0,
              "threshold": lambda v: v > 0, "resamples": lambda v: 500 <= v <= 100000}
    for key, ok in checks.items():
        if key in opts and not ok(opts[key]):
            limits = {"span": "0 < span <= 1", "robust": "0 to 5", "cells": "5 to 200",
                      "whisker": "above 0", "threshold": "above 0",
                      "resamples": "500 to 100000"}[key]
            raise err(f"option '{key}' out of range", field="options", value=opts[key], allowed=limits)
    gap = opts.get("gap")
    if gap is not None and gap not in ("auto", "none"):
        try:
            ok = 0 < float(gap) < float("inf")
        except ValueError:
            ok = False
        if not ok:
            raise err("option 'gap' not understood", field="options", value=gap,
                      allowed="auto, none or a step in x units above 0")
    for key in ("bandwidth", "bins"):
        v = opts.get(key)
        if v is None or v in ("scott", "silverman", "fd", "sturges"):
            continue
        try:
            number = float(v)
        except ValueError:
            number = -1
        if not math.isfinite(number):   # 'inf', 'nan', '1e999'
            number = -1
        if number <= 0 or (key == "bins" and not number.is_integer()):
            allowed = "scott, silverman or a positive number" if key == "bandwidth" else \
                "fd, sturges or a whole number of bins"
            raise err(f"option '{key}' not understood", field="options", value=v, allowed=allowed)


def _parse_filter(text: str, err) -> Expr:
    try:
        return parse(text)
    except FigkitError as exc:  # the parser names the position; add row and figure
        raise exc.at(row=err("").row, figure=err("").figure, field="filter") from None


def _bandings(names: str | None, config: Config, err) -> tuple[Banding, ...]:
    if not names:
        return ()
    declared = config.get("bands") or {}
    out = []
    for name in (n.strip() for n in names.split(",") if n.strip()):
        if name not in declared:
            raise err("unknown band set", field="bands", value=name,
                      allowed=sorted(declared) or "none declared under bands: in config.yaml")
        d = declared[name]
        bands = tuple(Band(b["label"], b.get("below")) for b in d["bands"])
        if bands[-1].below is not None or any(b.below is None for b in bands[:-1]):
            raise err(f"band set '{name}' must give 'below' on every band but the last (the catch-all)",
                      field="bands", value=name)
        cuts = [b.below for b in bands[:-1]]
        if cuts != sorted(cuts):
            raise err(f"band set '{name}': 'below' values must increase", field="bands", value=cuts)
        out.append(Banding(name, d["from"], bands))
    return tuple(out)


def build_spec(row: SheetRow, config: Config, columns: list[str] | None = None) -> FigureSpec:
    """Check a sheet row and resolve it against the project settings.

    ``columns`` are the dataset's column names (read from its header); when given, every field the
    row names must be one of them or a derived band.
    """
    if row.error is not None:
        raise row.error
    c = row.cells
    fig, num = c["id"], row.number

    def err(message, **kw):
        return FigkitError(message, row=num, figure=fig, **kw)

    datasets = config["datasets"]
    if c["dataset"] not in datasets:
        raise err("unknown dataset", field="dataset", value=c["dataset"], allowed=sorted(datasets))
    data_path = config.root / datasets[c["dataset"]]
    kind = CHARTS[c["chart"]]
    style = load_style(c.get("style") or config["style"], config.root / config["styles_dir"],
                       config.get("sizes"), config.get("dpi"), row=num, figure=fig)
    preset, size_from = _size_preset(row, config, style, err)
    width = style.width_mm(preset, row=num, figure=fig)

    # Which fields this chart takes.
    for fld, need in (("x", kind.x), ("y", kind.y)):
        if need is None and c.get(fld):
            raise err(f"chart '{kind.name}' takes no {fld} field", field=fld, value=c[fld],
                      allowed=f"leave '{fld}' empty")
        if need is not None and not c.get(fld) and (fld == "x" or kind.y_required):
            raise err(f"chart '{kind.name}' needs a {need} {fld} field", field=fld)
    if c.get("colour") and not kind.colour:
        raise err(f"chart '{kind.name}' takes no colour field", field="colour", value=c["colour"],
                  allowed="charts with colour: " + ", ".join(k for k, v in CHARTS.items() if v.colour))
    if kind.colour_required and not c.get("colour"):
        raise err(f"chart '{kind.name}' needs a colour field (the parts of each bar)", field="colour")
    if c.get("weight") and not kind.weight:
        raise err(f"chart '{kind.name}' takes no weight field", field="weight", value=c["weight"],
                  allowed="charts with weight: " + ", ".join(k for k, v in CHARTS.items() if v.weight))
    trend = c.get("trend", "none")
    if trend != "none" and not kind.trend:
        raise err(f"chart '{kind.name}' cannot carry a trend", field="trend", value=trend,
                  allowed="trends go on " + ", ".join(k for k, v in CHARTS.items() if v.trend))
    strata = tuple(c["strata"].split(" by ")) if c.get("strata") else ()
    strata = tuple(s.strip() for s in strata)
    if len(set(strata)) != len(strata):
        raise err("the two strata fields must differ", field="strata", value=c["strata"])
    columns_fixed = int(c["panel_columns"]) if c.get("panel_columns") else None
    if columns_fixed and len(strata) != 1:
        raise err("panel_columns applies to one wrapped strata field", field="panel_columns",
                  value=c["panel_columns"])

    ranges = c.get("ranges", "common")
    if kind.name in ("hexbins", "tiles") and ranges != "common":
        raise err(f"chart '{kind.name}' counts on one lattice shared by every panel, so panels "
                  "cannot have their own ranges", field="ranges", value=ranges, allowed=["common"])
    flt = _parse_filter(c["filter"], err) if c.get("filter") else None
    bandings = _bandings(c.get("bands"), config, err)
    options = _parse_options(c.get("options"), kind, err)
    if options.get("interval") == "wilson" and c.get("weight"):
        raise err("a Wilson interval needs counts of rows (independent units), not summed weights",
                  field="options", value="interval=wilson", allowed="leave 'weight' empty, or no interval")
    if "threshold" in (c.get("options") or "") and "signed-log" not in (
            options.get("x_scale"), options.get("y_scale")):
        raise err("option 'threshold' is the symmetric log's linear threshold", field="options",
                  value=f"threshold={options['threshold']:g}", allowed="x_scale=signed-log or y_scale=signed-log")
    if options.get("centre") is not None and not c.get("colour"):
        raise err("option 'centre' needs a numeric colour field", field="options",
                  value=f"centre={options['centre']:g}", allowed="give 'colour' a numeric field")

    labels = {k: (short_label(v.get("label", k)), short_label(v.get("unit", "")))
              for k, v in (config.get("fields") or {}).items()}
    spec = FigureSpec(
        id=fig, row=num, dataset=c["dataset"], data_path=data_path, chart=kind, x=c.get("x"),
        y=c.get("y"), colour=c.get("colour"), weight=c.get("weight"), strata=strata, trend=trend,
        ranges=ranges, filter=flt, bandings=bandings, width_mm=width,
        height_mm=float(c["height_mm"]) if c.get("height_mm") else None, columns=columns_fixed,
        style=style, options=options, caption=c.get("caption", ""), labels=labels,
        orders=dict(config.get("orders") or {}), pinned=dict(config.get("colours") or {}),
        formats=tuple(config["formats"]), root=config.root, cells=dict(c),
        letters=c.get("panel_letters", "no") == "yes" and style.letters != "none",
        size_preset={"name": preset, "mm": width, "from": size_from,
                     "presets_from": "config.yaml sizes:" if config.get("sizes")
                     else f"house style '{style.name}'"})
    if columns is not None:
        check_columns(spec, columns)
    return spec


DEFAULT_SIZE = "full"


def _size_preset(row: SheetRow, config: Config, style: HouseStyle, err) -> tuple[str, str]:
    """The row's size preset and where it came from: the row, config.yaml's default_size, or
    figkit's default ('full').  A default the project's presets lack is an error, never a
    width taken silently from elsewhere."""
    if "size" in row.given or (not row.given and "size" in row.cells):
        return row.cells["size"], "row"
    if config.get("default_size"):
        name, source = config["default_size"], "default_size in config.yaml"
    else:
        name, source = DEFAULT_SIZE, "figkit's default"
    if name not in style.sizes:
        where = "config.yaml sizes:" if config.get("sizes") else f"house style '{style.name}'"
        raise err(f"no size given, and {source} '{name}' is not a preset of {where}; give the row "
                  "a size or set default_size: in config.yaml", field="size", value=name,
                  allowed=sorted(style.sizes))
    return name, source


def check_columns(spec: FigureSpec, columns: list[str]) -> None:
    """Every field the row names must be a column of its dataset (or a derived band)."""
    derived = {b.name for b in spec.bandings}
    available = list(columns) + sorted(derived)
    for b in spec.bandings:
        if b.source not in columns:
            raise spec.err(f"band set '{b.name}' reads a column the dataset lacks", field="bands",
                           value=b.source, allowed=columns)
    named = [("x", spec.x), ("y", spec.y), ("colour", spec.colour), ("weight", spec.weight)]
    named += [("strata", s) for s in spec.strata]
    for fld, name in named:
        if name and name not in available:
            raise spec.err(f"no column '{name}' in dataset '{spec.dataset}'", field=fld, value=name,
                           allowed=available)
    if spec.filter is not None:
        for name in sorted(spec.filter.columns):
            if name not in available:
                raise spec.err(f"filter names no column of dataset '{spec.dataset}'", field="filter",
                               value=name, allowed=available)


def fingerprint(row: SheetRow, config: Config) -> str:
    """A digest of everything in the sheet and settings that this one figure depends on.

    Snakemake reruns a figure when this changes (a params trigger), so editing one row, or one
    field label, reruns only the figures it touches.
    """
    c = row.cells
    used = {c.get(k) for k in ("x", "y", "colour", "weight")} | set((c.get("strata") or "").split(" by "))
    bands = [b.strip() for b in (c.get("bands") or "").split(",") if b.strip()]
    declared = config.get("bands") or {}
    used |= {declared[b]["from"] for b in bands if b in declared}
    used.discard(None)
    if c.get("filter"):
        try:
            used |= set(parse(c["filter"]).columns)
        except FigkitError:
            pass
    picked = {
        "row": c, "version": __version__,
        "dataset": (config.get("datasets") or {}).get(c.get("dataset")),
        "style": c.get("style") or config.get("style"), "sizes": config.get("sizes"),
        **({"default_size": config["default_size"]} if config.get("default_size") else {}),
        "dpi": config.get("dpi"), "formats": config.get("formats"),
        "bands": {b: declared.get(b) for b in bands},
        "fields": {f: (config.get("fields") or {}).get(f) for f in sorted(used)},
        "orders": {f: (config.get("orders") or {}).get(f) for f in sorted(used)},
        "colours": {f: (config.get("colours") or {}).get(f) for f in sorted(used)},
    }
    blob = json.dumps(picked, sort_keys=True, default=str).encode()
    return hashlib.sha256(blob).hexdigest()[:16]
