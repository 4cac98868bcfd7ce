"""Layout at print size (figkit issue 5): the wrap rule, text that never collides or leaves the
canvas, text sizes read back from SVG, PDF page sizes, golden images and both house styles.

Every check reads what was drawn or written.  Sources:
* 1 pt = 1/72 in, 1 in = 25.4 mm: the PDF user space unit (ISO 32000-1:2008, 8.3.2.3) and the
  PostScript point; an SVG whose width is given in pt with a viewBox of the same numbers has a
  user unit of 1 pt (W3C SVG 1.1, 7.10 "Units").
* Column widths 84 / 120 / 176 mm: the house style's presets (one geoscience society's table of
  column widths; common practice).
* 5 pt as the absolute floor for printed text: common practice in journal artwork guidelines.
* Golden images are compared with matplotlib.testing.compare.compare_images (reference library),
  RMS tolerance 2 on 0-255 grey levels (common practice in matplotlib's own image tests).
* The wrap rule is the one documented in :func:`figkit.layout.choose_grid`; the check is an
  independent brute-force search over every (rows, cols) grid.
"""
from __future__ import annotations

import json
import math
import os
import re
import shutil
import xml.etree.ElementTree as ET
from pathlib import Path

import matplotlib

matplotlib.use("Agg")

import matplotlib as mpl  # noqa: E402
import numpy as np  # noqa: E402
import pandas as pd  # noqa: E402
import pytest  # noqa: E402
import yaml  # noqa: E402
from matplotlib.testing.compare import compare_images  # noqa: E402
from pypdf import PdfReader  # noqa: E402

from figkit import layout as L  # noqa: E402
from figkit.checks import drawn_sizes, text_collisions  # noqa: E402
from figkit.data import load_figure_data  # noqa: E402
from figkit.draw import build_figure  # noqa: E402
from figkit.errors import FigkitError  # noqa: E402
from figkit.render import figure, load_project, render  # noqa: E402
from figkit.style import load_style  # noqa: E402

REPO = Path(__file__).resolve().parents[1]
STYLES = REPO / "figkit" / "styles"
BASELINE = Path(__file__).with_name("baseline")
MM_PER_PT = 25.4 / 72
PRESETS = {"single": 84.0, "one-and-half": 120.0, "full": 176.0}

# ---------------------------------------------------------------------------- 1. the wrap rule

# Margins of the size the drawing stage produces for the two house styles (left: y title, tick
# labels and ticks; bottom: x title and tick labels; title: one line of panel title).
MARGIN_SETS = {
    "house": (L.Margins(left=12.4, right=1.2, top=0.8, bottom=8.9, title=3.9, hgap=2.5, vgap=2.0),
              28.0, 0.75, 230.0),
    "compact": (L.Margins(left=10.8, right=1.2, top=0.8, bottom=7.2, title=3.6, hgap=1.5, vgap=1.2),
                22.0, 0.8, 230.0),
}


def brute_force_grid(n, width, m, min_mm, aspect, max_h, height_mm=None):
    """Every (rows, cols) grid holding n panels with no wholly empty row; keep those whose panels
    are at least min_mm wide and whose figure is at most max_h tall; the best has the largest
    panels, then the fewest empty cells.  Sizes from the layout drawn in mm: margins, one title
    band above each row, gaps between columns and rows.  With a fixed figure height the panel
    height is what the rows leave, the size is min(width, height / aspect), and panels must be
    at least 0.75 * min_mm * min(aspect, 1) tall (the documented floor)."""
    best = None
    for rows in range(1, n + 1):
        for cols in range(1, n + 1):
            if rows * cols < n or (rows - 1) * cols >= n:
                continue
            pw = (width - m.left - m.right - (cols - 1) * m.hgap) / cols
            if height_mm is None:
                ph = pw * aspect
                height = m.top + rows * (m.title + ph) + (rows - 1) * m.vgap + m.bottom
                size = pw
            else:
                ph = (height_mm - m.top - m.bottom - (rows - 1) * m.vgap) / rows - m.title
                height, size = height_mm, min(pw, ph / aspect)
            if pw < min_mm or ph < 0.75 * min_mm * min(aspect, 1.0) or height > max_h:
                continue
            key = (-size, rows * cols - n)
            if best is None or key < best[0]:
                best = (key, rows, cols, pw, ph)
    return None if best is None else best[1:]


@pytest.mark.parametrize("style", sorted(MARGIN_SETS))
@pytest.mark.parametrize("width", [84.0, 120.0, 176.0])
def test_choose_grid_matches_brute_force(style, width):
    m, min_mm, aspect, max_h = MARGIN_SETS[style]
    fitted = failed = 0
    for n in range(1, 31):
        want = brute_force_grid(n, width, m, min_mm, aspect, max_h)
        if want is None:
            with pytest.raises(FigkitError):
                L.choose_grid(n, width, m, min_panel_mm=min_mm, aspect=aspect, max_height_mm=max_h)
            failed += 1
            continue
        got = L.choose_grid(n, width, m, min_panel_mm=min_mm, aspect=aspect, max_height_mm=max_h)
        rows, cols, pw, ph = want
        assert (got.rows, got.cols) == (rows, cols), (n, width)
        assert got.panel_w == pytest.approx(pw) and got.panel_h == pytest.approx(ph), (n, width)
        assert got.panels == n and 0 <= got.empty_cells < got.cols, (n, width)
        assert L.grid_height(got.rows, got.panel_h, m) <= max_h + 1e-9
        fitted += 1
    # The table covers both outcomes at the narrow width and only fits at full width.
    assert fitted > 0
    if width == 84.0:
        assert failed > 0
    if width == 176.0:
        assert failed == 0


@pytest.mark.parametrize("height_mm", [60.0, 120.0, 200.0])
@pytest.mark.parametrize("width", [84.0, 120.0, 176.0])
def test_choose_grid_with_a_fixed_height_matches_brute_force(width, height_mm):
    m, min_mm, aspect, max_h = MARGIN_SETS["house"]
    fitted = 0
    for n in range(1, 31):
        want = brute_force_grid(n, width, m, min_mm, aspect, max_h, height_mm)
        kw = dict(min_panel_mm=min_mm, aspect=aspect, max_height_mm=max_h, height_mm=height_mm)
        if want is None:
            with pytest.raises(FigkitError) as info:
                L.choose_grid(n, width, m, **kw)
            assert f"{height_mm:.0f} mm" in str(info.value)
            continue
        got = L.choose_grid(n, width, m, **kw)
        assert (got.rows, got.cols) == want[:2], (n, width, height_mm)
        assert got.panel_h == pytest.approx(want[3])
        fitted += 1
    assert fitted > 0


@pytest.mark.parametrize("n,width", [(30, 84.0), (24, 84.0), (30, 120.0)])
def test_nothing_fits_message_names_the_sizes(n, width):
    m, min_mm, aspect, max_h = MARGIN_SETS["house"]
    assert brute_force_grid(n, width, m, min_mm, aspect, max_h) is None
    with pytest.raises(FigkitError) as info:
        L.choose_grid(n, width, m, min_panel_mm=min_mm, aspect=aspect, max_height_mm=max_h)
    msg = str(info.value)
    assert "\n" not in msg and f"{width:.0f} mm" in msg and f"{min_mm:.0f} mm" in msg
    assert f"{max_h:.0f} mm" in msg and f"{n} panels" in msg
    # The height it says is needed is the least any grid of wide-enough panels needs (by brute
    # force), and more than allowed: the message is true, not just suggestive.
    least = min(m.top + math.ceil(n / c) * (m.title + p * aspect) + (math.ceil(n / c) - 1) * m.vgap
                + m.bottom for c in range(1, n + 1)
                if (p := (width - m.left - m.right - (c - 1) * m.hgap) / c) >= min_mm)
    said = float(re.search(r"need (\d+) mm of height", msg).group(1))
    assert said == pytest.approx(least, abs=0.5) and said > max_h


def test_too_narrow_message_names_the_sizes():
    m, min_mm, aspect, max_h = MARGIN_SETS["house"]
    with pytest.raises(FigkitError) as info:
        L.choose_grid(2, 40.0, m, min_panel_mm=min_mm, aspect=aspect, max_height_mm=max_h)
    msg = str(info.value)
    assert "40 mm" in msg and "28 mm" in msg and "26 mm wide" in msg   # 40 - 12.4 - 1.2 = 26.4
    with pytest.raises(FigkitError) as info:
        L.choose_grid(2, 84.0, m, min_panel_mm=min_mm, aspect=aspect, max_height_mm=max_h,
                      height_mm=260.0)
    assert "260" in str(info.value) and "230 mm" in str(info.value)


# ---------------------------------------------------------------------------- synthetic projects

LONG_GROUP = "a rather long catchment name number {}"
LONG_SITE = "sampling site with a rather long name {}"
HEADER = ["id", "dataset", "chart", "x", "y", "colour", "weight", "strata", "trend", "ranges",
          "filter", "bands", "size", "height_mm", "panel_columns", "style", "options", "caption"]
KINDS = {
    "scatter": dict(x="v1", y="v2", colour="method"),
    "hexbins": dict(x="v1", y="v2"),
    "box": dict(x="group", y="v1"),
    "violin": dict(x="group", y="v1"),
    "means": dict(x="group", y="v1", colour="method", options="points=auto"),
    "lines": dict(x="count", y="v1", colour="method"),
    "density": dict(x="v1", colour="method"),
    "histogram": dict(x="v1"),
    "count-bars": dict(x="group", colour="method", weight="count"),
    "shares": dict(x="group", colour="method", weight="count"),
    "tiles": dict(x="group", y="method", weight="count"),
}


def observations(n_sites: int = 13, per_site: int = 60, seed: int = 7) -> pd.DataFrame:
    """Invented field data: 13 sites with long names, five reaches with long names, three methods."""
    rng = np.random.default_rng(seed)
    parts = []
    for s in range(n_sites):
        g = rng.integers(0, 5, per_site)
        v1 = rng.normal(8 + 0.7 * s, 2.0, per_site)
        parts.append(pd.DataFrame({
            "site": LONG_SITE.format(s + 1),
            "group": [LONG_GROUP.format(c + 1) for c in g],
            "method": np.array(["kick sample", "surber sampler", "hand search"])[rng.integers(0, 3, per_site)],
            "v1": v1,
            "v2": 0.6 * v1 + rng.normal(0, 1.0, per_site) + 3 * s,
            "count": rng.poisson(12, per_site) + 1,
            "band": ["lower band", "middle band", "upper band"][s % 3],
            "zone": f"zone {s % 4 + 1}",
        }))
    return pd.concat(parts, ignore_index=True)


def make_project(root: Path, rows: list[dict], *, formats=("pdf",), dpi: int = 300) -> Path:
    """A project folder: config/config.yaml (datasets + fields), config/figures.tsv, styles copied
    from figkit/styles, data/obs.csv."""
    (root / "config").mkdir(parents=True, exist_ok=True)
    (root / "data").mkdir(exist_ok=True)
    shutil.copytree(STYLES, root / "styles", dirs_exist_ok=True)
    observations().to_csv(root / "data" / "obs.csv", index=False)
    config = {"sheet": "config/figures.tsv", "results": "results", "style": "house",
              "formats": list(formats), "dpi": dpi, "datasets": {"obs": "data/obs.csv"},
              "fields": {"v1": {"label": "First measurement", "unit": "mg/L"},
                         "v2": {"label": "Second measurement", "unit": "µS/cm"},
                         "site": {"label": "Site"}, "group": {"label": "Reach"},
                         "method": {"label": "Sampling method"}, "count": {"label": "Individuals"},
                         "band": {"label": "Band"}, "zone": {"label": "Zone"}}}
    (root / "config" / "config.yaml").write_text(yaml.safe_dump(config, allow_unicode=True),
                                                 encoding="utf-8")
    lines = ["\t".join(HEADER)] + ["\t".join(str(r.get(h, "")) for h in HEADER) for r in rows]
    (root / "config" / "figures.tsv").write_text("\n".join(lines) + "\n", encoding="utf-8")
    return root


TWO_ZONES = 'zone in ["zone 1", "zone 2"]'
STRESS_ROWS = ([dict(id=f"many-{k}", dataset="obs", chart=k, strata="site", **v) for k, v in KINDS.items()] + [
    dict(id="two-way", dataset="obs", chart="scatter", x="v1", y="v2", strata="band by zone", trend="line"),
    dict(id="free", dataset="obs", chart="scatter", x="v1", y="v2", strata="site", ranges="own",
         filter=TWO_ZONES),
    dict(id="free-bars", dataset="obs", chart="count-bars", x="group", colour="method", strata="site",
         ranges="own-y", filter=TWO_ZONES, size="one-and-half"),
])
GOLDEN_ROWS = [
    dict(id="golden-wrap", dataset="obs", chart="count-bars", x="group", colour="method",
         weight="count", strata="site", filter=TWO_ZONES, size="one-and-half"),
    dict(id="golden-grid", dataset="obs", chart="scatter", x="v1", y="v2", strata="band by zone",
         trend="line"),
    dict(id="golden-free", dataset="obs", chart="scatter", x="v1", y="v2", strata="zone",
         ranges="own", size="one-and-half"),
]
PRESET_ROWS = [dict(id=f"size-{p}", dataset="obs", chart="histogram", x="v1", strata="zone", size=p)
               for p in PRESETS]
STYLE_ROWS = [dict(id=f"{k}-{s}", dataset="obs", chart=k, strata="zone", style=s, **v)
              for s in ("house", "compact") for k, v in KINDS.items()]


@pytest.fixture(scope="module")
def project(tmp_path_factory):
    root = make_project(tmp_path_factory.mktemp("layout"),
                        STRESS_ROWS + GOLDEN_ROWS + PRESET_ROWS + STYLE_ROWS)
    return load_project(root)


def build(project, figure_id):
    """Figure and drawing record of one row, drawn inside its house style."""
    spec = project.spec(figure_id)
    with mpl.rc_context(spec.style.rc):
        return build_figure(spec, load_figure_data(spec))


def panel_axes(fig):
    return [ax for ax in fig.axes if ax.get_label() != "<colorbar>"]


def key_boxes(fig):
    renderer = fig.canvas.get_renderer()
    boxes = [leg.get_window_extent(renderer) for leg in fig.legends]
    boxes += [ax.get_window_extent(renderer) for ax in fig.axes if ax.get_label() == "<colorbar>"]
    return boxes


def overlaps(a, b) -> bool:
    return a.x0 < b.x1 - 0.5 and b.x0 < a.x1 - 0.5 and a.y0 < b.y1 - 0.5 and b.y0 < a.y1 - 0.5


# ---------------------------------------------------------------------------- 2. no collisions

@pytest.mark.parametrize("figure_id", [r["id"] for r in STRESS_ROWS])
def test_no_text_overlaps_or_leaves_the_canvas(project, figure_id):
    fig = figure(figure_id, project)     # the notebook API: drawn here, outside the house style
    fig.canvas.draw()
    assert text_collisions(fig) == []
    renderer = fig.canvas.get_renderer()
    axes = panel_axes(fig)
    # Legends and colour bars sit clear of every panel (never over data).
    for box in key_boxes(fig):
        assert not any(overlaps(box, ax.get_window_extent(renderer)) for ax in axes)
    # Panel titles fit their panel and stay distinguishable after shortening.
    if not figure_id.startswith("two-way"):
        titles = [t for t in fig.texts if t.get_fontweight() in ("bold", 700)]
        assert len(titles) == len(axes)
        widest = max(ax.get_window_extent(renderer).width for ax in axes)
        assert all(t.get_window_extent(renderer).width <= widest + 0.5 for t in titles)
        assert len({t.get_text() for t in titles}) == len(titles)


def test_thirteen_panels_wrap_with_an_incomplete_last_row(project):
    fig, record = build(project, "many-count-bars")
    lay = record["layout"]
    assert lay["panels"] == 13 and lay["rows"] * lay["cols"] > 13 and lay["empty_cells"] < lay["cols"]
    # The long category labels could not stand side by side: they were turned.
    assert lay["x_labels_tilted"] and lay["x_label_angle"] in (35, 90)
    fig.canvas.draw()
    assert text_collisions(fig) == []


def test_notebook_figure_draws_the_same_outside_the_style(project):
    """Ticks are pinned at build time: drawing later under other rcParams changes no text."""
    fig = figure("free", project)

    def texts():
        fig.canvas.draw()
        return sorted((t.get_text(), round(t.get_fontsize(), 2))
                      for t in fig.findobj(matplotlib.text.Text) if t.get_visible() and t.get_text())

    outside = texts()
    with mpl.rc_context({"font.size": 14, "xtick.labelsize": 14, "ytick.labelsize": 14}):
        assert texts() == outside
    assert min(size for _, size in outside) >= load_style("house", STYLES).min_text_pt


# ---------------------------------------------------------------------------- 3. text sizes in SVG

SVG_NS = "{http://www.w3.org/2000/svg}"
FONT_SIZE = re.compile(r"font(?:-size)?:\s*(?:[a-z-]+\s+)*([0-9.]+)px")


def svg_text_sizes(path: Path) -> tuple[float, list[float]]:
    """Page width in SVG user units (checked to be pt) and the size of every text element."""
    root = ET.parse(path).getroot()
    width, viewbox = root.get("width"), root.get("viewBox").split()
    assert width.endswith("pt") and float(width[:-2]) == pytest.approx(float(viewbox[2]))
    sizes = []
    for el in root.iter():
        if el.tag in (SVG_NS + "text", SVG_NS + "tspan"):
            assert "scale" not in (el.get("transform") or "")   # sizes are not scaled afterwards
            found = FONT_SIZE.search(el.get("style") or "")
            if found:
                sizes.append(float(found.group(1)))
    return float(width[:-2]), sizes


def test_svg_text_sizes_of_the_demo_figures(built_demo):
    figures = built_demo / "results" / "figures"
    cars = sorted(figures.glob("*.json"))
    assert len(cars) >= 10
    for car_path in cars:
        car = json.loads(car_path.read_text())
        floor = max(5.0, load_style(car["style"]["name"], built_demo / "styles").min_text_pt)
        width_pt, sizes = svg_text_sizes(figures / car["files"]["svg"])
        assert width_pt * MM_PER_PT == pytest.approx(car["size_mm"][0], abs=0.1), car["id"]
        assert len(sizes) >= 5, car["id"]
        assert min(sizes) >= floor - 1e-6, (car["id"], min(sizes))


@pytest.mark.parametrize("figure_id", ["many-hexbins", "many-tiles", "two-way"])
def test_svg_text_sizes_of_colour_bar_figures(project, figure_id, tmp_path):
    """Colour bars (log counts included) print plain numbers at the house size, no exponents."""
    fig, _ = build(project, figure_id)
    with mpl.rc_context(project.spec(figure_id).style.rc):
        fig.savefig(tmp_path / "f.svg", format="svg")
    _, sizes = svg_text_sizes(tmp_path / "f.svg")
    assert sizes and min(sizes) >= max(5.0, load_style("house", STYLES).min_text_pt)


# ---------------------------------------------------------------------------- 4. PDF page size

@pytest.mark.parametrize("preset", sorted(PRESETS))
def test_pdf_page_is_the_preset_width(project, preset):
    car = render(project, f"size-{preset}")
    page = PdfReader(project.root / "results" / "figures" / car["files"]["pdf"]).pages[0]
    width_mm = float(page.mediabox.width) * MM_PER_PT
    height_mm = float(page.mediabox.height) * MM_PER_PT
    assert width_mm == pytest.approx(PRESETS[preset], abs=0.1)
    assert height_mm == pytest.approx(car["size_mm"][1], abs=0.1)
    assert car["size_mm"][0] == pytest.approx(PRESETS[preset], abs=0.1)


# ---------------------------------------------------------------------------- 5. golden images

GOLDEN_DPI = 100
GOLDEN_TOL = 2.0


def check_golden(fig, name: str, tmp_path: Path) -> None:
    """Compare with tests/baseline/<name>.png.  To regenerate the baselines after an intended
    change of look, run:  FIGKIT_UPDATE_BASELINES=1 pytest tests/test_layout.py -k golden
    and look at every new image before committing it."""
    expected = BASELINE / f"{name}.png"
    if os.environ.get("FIGKIT_UPDATE_BASELINES") == "1":
        BASELINE.mkdir(exist_ok=True)
        fig.savefig(expected, dpi=GOLDEN_DPI, metadata={"Software": None})
        assert expected.stat().st_size < 300_000
        pytest.skip(f"baseline {expected.name} written")
    assert expected.is_file(), f"no baseline {expected}; run with FIGKIT_UPDATE_BASELINES=1"
    actual = tmp_path / f"{name}.png"
    fig.savefig(actual, dpi=GOLDEN_DPI, metadata={"Software": None})
    result = compare_images(str(expected), str(actual), tol=GOLDEN_TOL)
    assert result is None, result


@pytest.mark.parametrize("figure_id", [r["id"] for r in GOLDEN_ROWS])
def test_golden_layouts(project, figure_id, tmp_path):
    fig, record = build(project, figure_id)
    lay = record["layout"]
    if figure_id == "golden-wrap":
        assert lay["empty_cells"] > 0 and lay["key_place"] == "empty cell"
    if figure_id == "golden-grid":
        assert (lay["rows"], lay["cols"]) == (3, 4)
    check_golden(fig, figure_id, tmp_path)


def test_golden_baselines_are_small():
    for path in sorted(BASELINE.glob("*.png")):
        assert path.stat().st_size < 300_000, path.name


# ---------------------------------------------------------------------------- 6. both house styles

@pytest.mark.parametrize("style", ["house", "compact"])
@pytest.mark.parametrize("kind", sorted(KINDS))
def test_both_house_styles_render_every_chart_kind(project, kind, style):
    figure_id = f"{kind}-{style}"
    car = render(project, figure_id)
    st = load_style(style, project.root / "styles")
    assert car["style"]["name"] == style and car["chart"] == kind
    assert car["min_font_pt"] >= max(5.0, st.min_text_pt)
    pdf = project.root / "results" / "figures" / car["files"]["pdf"]
    page = PdfReader(pdf).pages[0]
    assert float(page.mediabox.width) * MM_PER_PT == pytest.approx(car["size_mm"][0], abs=0.1)
    assert not [c for c in car["cautions"] if "overlap" in c]
    if style != "house":   # the house style is drawn and checked above with 13 panels
        fig = figure(figure_id, project)
        fig.canvas.draw()
        assert text_collisions(fig) == []
        assert drawn_sizes(fig).min_font_pt >= st.min_text_pt
