"""House styles: a matplotlib style sheet (configuration as data) plus a small YAML of figkit
settings — size presets in mm, text sizes in pt, minimum sizes, palette, letters, grid, checks."""
from __future__ import annotations

import hashlib
from dataclasses import dataclass, field
from functools import lru_cache
from pathlib import Path

import yaml

from .errors import FigkitError
from .text import read_yaml

MM_PER_INCH = 25.4
PT_PER_INCH = 72.0


def mm_to_in(mm: float) -> float:
    return mm / MM_PER_INCH


def pt_to_mm(pt: float) -> float:
    return pt * MM_PER_INCH / PT_PER_INCH


@dataclass(frozen=True)
class HouseStyle:
    name: str
    files: tuple[Path, ...]        # the YAML and the .mplstyle: inputs of every figure that uses them
    sizes: dict                    # preset name -> width in mm
    max_height_mm: float
    panel_min_mm: float
    panel_aspect: float
    gap_mm: float
    base_pt: float
    tick_pt: float
    title_pt: float
    letter_pt: float
    min_text_pt: float
    min_line_pt: float
    palette: str
    sequential: str
    letters: str
    grid: str
    strict: bool
    dpi: int
    min_colour_difference: float = 10.0   # CIEDE2000; ~10 is a rule of thumb (common practice)
    strata_note: bool = False   # print the strata comparison under the figure
    diverging: str = "rdbu"  # used when a numeric colour field is given a centre value
    min_dpi: int = 500       # raster floor: 500-600 dpi for line art over halftone (journal guides)
    review: dict = field(default_factory=lambda: dict(REVIEW_DEFAULTS))  # see REVIEW_DEFAULTS

    @property
    def rc(self) -> dict:
        """rcParams from the style sheet (``files[1]``), parsed and checked by matplotlib on first
        use: the workflow builds every row's spec while Snakemake reads the Snakefile, where
        neither matplotlib nor the parse is needed (about 0.25 s of every ``snakemake`` call)."""
        return _read_rc(self.files[1])

    def width_mm(self, preset: str, *, row=None, figure=None) -> float:
        if preset not in self.sizes:
            raise FigkitError("unknown size preset", row=row, figure=figure, field="size", value=preset,
                              allowed=sorted(self.sizes))
        return float(self.sizes[preset])

    def digest(self) -> dict:
        return {p.name: hashlib.sha256(p.read_bytes()).hexdigest() for p in self.files}


# What `figkit compare` calls a change of conclusion, and what `figkit check` lets through.  The
# house style's `review:` block may set any of them; the values in force are written into every
# comparison's output.
REVIEW_DEFAULTS = {
    "share_points": 5.0,     # a share moving by >= 5 percentage points (common practice, no source)
    "n_percent": 10.0,       # a panel's n moving by >= 10 % (common practice, no source)
    "p_level": 0.05,         # the strata test crossing the conventional 5 % level (Fisher 1925)
    "compare_dpi": 150.0,    # renders are compared box-filtered to this resolution (screen review)
    "ssim_min": 0.99,        # gate: mean SSIM at compare_dpi at least this (common practice, no source)
    "rms_max": 2.0,          # gate: RMS pixel difference (0-255) at compare_dpi at most this (ditto)
    "stats_rel_tol": 1e-6,   # gate: statistics equal within this relative tolerance; n is exact
}
_REVIEW_LIMITS = {"share_points": (0, 100), "n_percent": (0, 1000), "p_level": (0, 1),
                  "compare_dpi": (10, 1200), "ssim_min": (-1, 1), "rms_max": (0, 255),
                  "stats_rel_tol": (0, 1)}


def review_settings(data, where: str) -> dict:
    """The `review:` block of a house style over :data:`REVIEW_DEFAULTS`, each value checked."""
    out = dict(REVIEW_DEFAULTS)
    if data is None:
        return out
    if not isinstance(data, dict):
        raise FigkitError(f"{where}: review must be a mapping of settings", value=data,
                          allowed=sorted(REVIEW_DEFAULTS))
    for key, value in data.items():
        if key not in REVIEW_DEFAULTS:
            raise FigkitError(f"{where}: unknown review setting", field=f"review.{key}", value=key,
                              allowed=sorted(REVIEW_DEFAULTS))
        lo, hi = _REVIEW_LIMITS[key]
        if isinstance(value, bool) or not isinstance(value, (int, float)) or not lo <= value <= hi:
            raise FigkitError(f"{where}: review.{key} must be a number from {lo} to {hi}",
                              field=f"review.{key}", value=value)
        out[key] = float(value)
    return out


_REQUIRED = {"sheet", "sizes", "max_height_mm", "panel", "text", "minimums", "palette", "sequential",
             "letters", "grid", "strict", "dpi"}


def _read_rc(path: Path) -> dict:
    st = path.stat()
    return dict(_parsed_rc(str(path), st.st_mtime_ns, st.st_size))   # a copy per caller


@lru_cache(maxsize=32)
def _parsed_rc(path: str, _mtime_ns: int, _size: int) -> dict:
    """The style sheet's settings, parsed once per process while the file is unchanged (a
    notebook or a test session draws many figures in one process)."""
    import matplotlib as mpl
    try:
        return dict(mpl.rc_params_from_file(path, use_default_template=False))
    except (OSError, ValueError) as exc:  # pragma: no cover - message only
        raise FigkitError(f"style sheet {path} cannot be read: {exc}") from None


def _inside_styles(path: Path, styles_dir: Path, *, row=None, figure=None) -> None:
    """A house style's files must lie inside the styles folder once symbolic links are followed:
    a style is shared with co-authors, and a link to a system file (or a '../' name) would read
    a file from outside the project into every figure; a link to itself would loop."""
    try:
        real, home = path.resolve(strict=True), styles_dir.resolve(strict=True)
    except FileNotFoundError:
        return   # a missing file has its own message
    except (OSError, RuntimeError):
        raise FigkitError(f"house style file {path} is a symbolic link that points to itself "
                          "(a link loop)", row=row, figure=figure, field="style",
                          allowed="a file inside the styles folder") from None
    if home not in real.parents:
        raise FigkitError(f"house style file {path} lies outside the styles folder {styles_dir} "
                          f"(it leads to {real})", row=row, figure=figure, field="style",
                          allowed=f"files inside {styles_dir}")


def load_style(name: str, styles_dir: Path | str, extra_sizes: dict | None = None,
               dpi: int | None = None, *, row=None, figure=None) -> HouseStyle:
    """Load ``styles_dir/<name>.yaml`` and the style sheet it names."""
    styles_dir = Path(styles_dir)
    path = styles_dir / f"{name}.yaml"
    _inside_styles(path, styles_dir, row=row, figure=figure)
    if not path.is_file():
        known = sorted(p.stem for p in styles_dir.glob("*.yaml")) or ["none found in " + str(styles_dir)]
        raise FigkitError("unknown house style", row=row, figure=figure, field="style", value=name,
                          allowed=known)
    try:
        data = read_yaml(path, "house style") or {}
    except yaml.YAMLError:
        raise FigkitError(f"house style {path} is not valid YAML") from None
    missing = sorted(_REQUIRED - set(data))
    if missing:
        raise FigkitError(f"house style {path} lacks settings: {', '.join(missing)}")
    sheet = styles_dir / str(data["sheet"])
    _inside_styles(sheet, styles_dir, row=row, figure=figure)
    if not sheet.is_file():
        raise FigkitError(f"house style {path} names a style sheet that does not exist", value=str(sheet))
    # A project's sizes: (config.yaml) are the presets it uses: they replace the style's, so a
    # width the project never declared cannot pass for one.
    sizes = dict(extra_sizes) if extra_sizes else dict(data["sizes"])
    mins, text, panel = data["minimums"], data["text"], data["panel"]
    if float(mins["text_pt"]) < 5:
        raise FigkitError(f"house style {name}: minimums.text_pt below the 5 pt absolute floor",
                          value=mins["text_pt"])
    for key in ("base_pt", "tick_pt", "title_pt", "letter_pt"):
        if float(text[key]) < float(mins["text_pt"]):
            raise FigkitError(f"house style {name}: text.{key} is below minimums.text_pt "
                              f"({text[key]} < {mins['text_pt']} pt)")
    if data["letters"] not in ("lower", "upper", "none"):
        raise FigkitError(f"house style {name}: letters", value=data["letters"], allowed=["lower", "upper", "none"])
    if data["grid"] not in ("none", "x", "y", "both"):
        raise FigkitError(f"house style {name}: grid", value=data["grid"], allowed=["none", "x", "y", "both"])
    return HouseStyle(
        name=name, files=(path, sheet), sizes=sizes,
        max_height_mm=float(data["max_height_mm"]), panel_min_mm=float(panel["min_mm"]),
        panel_aspect=float(panel["aspect"]), gap_mm=float(panel["gap_mm"]),
        base_pt=float(text["base_pt"]), tick_pt=float(text["tick_pt"]), title_pt=float(text["title_pt"]),
        letter_pt=float(text["letter_pt"]), min_text_pt=float(mins["text_pt"]),
        min_line_pt=float(mins["line_pt"]), palette=str(data["palette"]),
        sequential=str(data["sequential"]), letters=data["letters"], grid=data["grid"],
        strict=bool(data["strict"]), dpi=int(dpi or data["dpi"]),
        min_colour_difference=float(data.get("min_colour_difference", 10.0)),
        min_dpi=int(mins.get("dpi", 500)), diverging=str(data.get("diverging", "rdbu")),
        strata_note=bool(data.get("strata_note", False)),
        review=review_settings(data.get("review"), f"house style {path}"))
