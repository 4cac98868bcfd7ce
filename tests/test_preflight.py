"""Preflight reads the written files back: clean demo figures pass, each planted violation is caught.

Limits used, with their sources (section and table numbers from memory):
* text >= 6 pt, lines >= 0.25 pt: common journal floors (common practice, journal author guides);
* widths 84 / 120 / 176 mm: one geoscience society's published column widths (common practice);
* resolution: 300 dpi halftone, 500-600 combination, 1000-1200 line art (common practice, journal
  author guides); plots are combination artwork; the house style asks 600 dpi;
* PDF user unit 1/72 in (ISO 32000-1:2008, 8.3.2.3); embedded font programs are /FontFile,
  /FontFile2 or /FontFile3 in the font descriptor (ISO 32000-1, 9.8 Table 122, 9.9); Type 3 fonts
  are /Subtype /Type3 (ISO 32000-1, 9.6.5);
* SVG: user unit = CSS px, 96 px = 72 pt (CSS Values and Units Level 3, 5.2); transforms scale
  what they contain (SVG 1.1, 7.4-7.6); font shorthand (CSS Fonts Level 3, 3.7);
* PNG pHYs in whole pixels per metre (ISO/IEC 15948:2004, 11.3.5.3).
"""
from __future__ import annotations

import json
import shutil
import subprocess
import sys
from pathlib import Path

import matplotlib
import numpy as np
import pytest
from matplotlib.figure import Figure
from PIL import Image

from conftest import copy_project, make_demo_data
from figkit.errors import FigkitError
from figkit.preflight import preflight, preflight_figure, svg_facts

SIZES = {"single": 84.0, "one-and-half": 120.0, "full": 176.0}   # common practice (see above)
LIMITS = dict(sizes_mm=SIZES, min_text_pt=6.0, min_line_pt=0.25, min_dpi=500)
MM = 1 / 25.4
CLEAN_IDS = ("temperature-histogram", "sensitive-share")   # a 84 mm and a 120 mm figure, one coloured


def check(result: dict, name: str) -> dict:
    found = [c for c in result["checks"] if c["name"] == name]
    assert len(found) == 1, (name, [c["name"] for c in result["checks"]])
    return found[0]


def figure(width_mm=84.0, height_mm=40.0, *, text_pt=7.0, line_pt=0.6) -> Figure:
    """A small figure whose every text and line is at or above the limits unless planted."""
    fig = Figure(figsize=(width_mm * MM, height_mm * MM))
    ax = fig.add_axes((0.2, 0.25, 0.75, 0.7))
    ax.plot([0, 1, 2], [0, 2, 1], linewidth=line_pt)
    ax.text(0.5, 1.5, "n = 12", fontsize=text_pt)
    ax.tick_params(labelsize=7, width=0.5)
    for spine in ax.spines.values():
        spine.set_linewidth(0.5)
    return fig


def save(fig: Figure, path: Path, dpi: int = 600, **rc) -> Path:
    """Save with the production settings figkit's house style uses, unless ``rc`` overrides."""
    with matplotlib.rc_context({"svg.fonttype": "none", "pdf.fonttype": 42, **rc}):
        fig.savefig(path, dpi=dpi)
    return path


@pytest.fixture(scope="module")
def project(tmp_path_factory) -> Path:
    """Two demo figures rendered in-process into a copy of the demo manuscript."""
    from figkit.render import load_project, render
    root = copy_project(tmp_path_factory.mktemp("preflight"))
    make_demo_data(root, scale="0.02")
    loaded = load_project(root)
    for fid in CLEAN_IDS:
        render(loaded, fid)
    return root


# ------------------------------------------------------------------------------ clean figures pass

def test_clean_demo_figures_pass_every_check(project):
    from figkit.render import load_project
    loaded = load_project(project)
    for fid in CLEAN_IDS:
        result = preflight_figure(project / "results" / "figures" / f"{fid}.json", loaded.spec(fid).style)
        failed = [(c["file"], c["name"], c["message"]) for c in result["checks"] if not c["passed"]]
        assert result["passed"] and not failed, (fid, failed)
        names = {c["name"] for c in result["checks"]}
        assert {"fonts embedded", "no Type 3 fonts", "smallest text", "thinnest line",
                "raster resolution", "width matches a preset", "file size", "RGB colour space",
                "colour separability", "size matches the record",
                "provenance matches the record"} <= names, fid
    # the coloured one really judged its colours (Okabe-Ito pairs, CIEDE2000 well above 10)
    car = json.loads((project / "results" / "figures" / "sensitive-share.json").read_text())
    res = preflight_figure(project / "results" / "figures" / "sensitive-share.json",
                           loaded.spec("sensitive-share").style)
    assert check(res, "colour separability")["value"]["normal"] == pytest.approx(
        car["colours"]["min_delta_e"]["normal"], abs=1e-3)


def test_cli_exits_1_on_a_failed_check_and_2_on_bad_input(project, tmp_path, capsys):
    from figkit.cli import main

    def run(root, *args):
        code = main(["preflight", "--project", str(root), *args])
        out = capsys.readouterr()
        return code, out.out, out.err

    code, out, _ = run(project, *CLEAN_IDS)
    assert code == 0, out
    assert out.strip().splitlines()[-1].startswith("figkit: preflight: 2 figures, ")
    assert " 0 failed" in out
    # plant a 150 dpi PNG (same pixels, resolution rewritten) in a copy of the project
    copy = tmp_path / "copy"
    shutil.copytree(project, copy)
    png = copy / "results" / "figures" / "sensitive-share.png"
    with Image.open(png) as im:
        im.load()
        im.save(png, dpi=(150, 150), pnginfo=_text_chunks(im))
    code, out, _ = run(copy, *CLEAN_IDS)
    assert code == 1 and "raster resolution" in out and " 0 failed" not in out
    # the installed command line, as a separate process, strict mode too: a failed check exits 1
    strict = subprocess.run([sys.executable, "-m", "figkit", "preflight", "--project", str(copy),
                             "--strict", *CLEAN_IDS], capture_output=True, text=True)
    assert strict.returncode == 1, strict.stdout + strict.stderr
    lines = [ln for ln in strict.stdout.splitlines() if "raster resolution" in ln]
    assert lines == ["figkit: preflight: sensitive-share: sensitive-share.png: raster resolution: "
                     "150 dpi, below 600 dpi (common practice: 300 halftone, 500-600 combination, "
                     "1000-1200 line art)"]
    code, _, err = run(project, "no-such-figure")
    assert code == 2 and err.startswith("figkit: error:") and len(err.strip().splitlines()) == 1


def _text_chunks(im):
    from PIL.PngImagePlugin import PngInfo
    info = PngInfo()
    for k, v in im.text.items():
        info.add_text(k, v)
    return info


def test_stale_file_from_another_figure_is_caught(project, tmp_path):
    from figkit.render import load_project
    copy = tmp_path / "copy"
    shutil.copytree(project, copy)
    figs = copy / "results" / "figures"
    shutil.copy(figs / "temperature-histogram.pdf", figs / "sensitive-share.pdf")
    res = preflight_figure(figs / "sensitive-share.json", load_project(copy).spec("sensitive-share").style)
    assert not res["passed"]
    prov = [c for c in res["checks"] if c["name"] == "provenance matches the record" and
            c["file"] == "sensitive-share.pdf"][0]
    assert not prov["passed"] and prov["value"]["id"] == "temperature-histogram"
    size = [c for c in res["checks"] if c["name"] == "size matches the record" and
            c["file"] == "sensitive-share.pdf"][0]
    assert not size["passed"]   # an 84 mm page where the record says 120 mm


# ------------------------------------------------------------------------------- planted violations

def test_4pt_label_is_caught(tmp_path):
    bad = preflight({"svg": save(figure(text_pt=4), tmp_path / "bad.svg")}, **LIMITS)
    good = preflight({"svg": save(figure(text_pt=6), tmp_path / "good.svg")}, **LIMITS)
    c = check(bad, "smallest text")
    assert not bad["passed"] and not c["passed"]
    assert c["value"] == pytest.approx(4.0) and "n = 12" in c["message"]
    assert good["passed"] and check(good, "smallest text")["value"] == pytest.approx(6.0)


def test_thin_line_is_caught(tmp_path):
    bad = preflight({"svg": save(figure(line_pt=0.1), tmp_path / "bad.svg")}, **LIMITS)
    good = preflight({"svg": save(figure(line_pt=0.25), tmp_path / "good.svg")}, **LIMITS)
    c = check(bad, "thinnest line")
    assert not bad["passed"] and not c["passed"] and c["value"] == pytest.approx(0.1)
    assert good["passed"] and check(good, "thinnest line")["value"] == pytest.approx(0.25)


def test_svg_units_transforms_and_font_shorthand(tmp_path):
    # A hand-written SVG: 84 mm wide, user unit 1 pt; text in the font shorthand (CSS Fonts 3,
    # 3.7, weight 700 before the size); a scale(0.5) group halves an 8 px label to 4 pt and a
    # 1 px stroke to 0.5 pt (SVG 1.1, 7.5); strokes of width 0 or "none" are not drawn.
    w = 84 / 25.4 * 72
    svg = f"""<svg xmlns="http://www.w3.org/2000/svg" width="{w}pt" height="100pt" viewBox="0 0 {w} 100">
      <defs><clipPath id="c"><path d="M0 0 L1 1" style="stroke: #000; stroke-width: 0.01"/></clipPath></defs>
      <text x="1" y="10" style="font: 700 7px 'DejaVu Sans'">seven</text>
      <g transform="translate(5 5) scale(0.5)" style="stroke: #000">
        <text x="1" y="20" style="font-size: 8px">tiny</text>
        <path d="M0 0 L10 10"/>
      </g>
      <path d="M0 0 L9 9" style="stroke: #000; stroke-width: 0"/>
      <path d="M0 0 L9 9" style="stroke: none; stroke-width: 0.05"/>
      <path d="M0 0 L9 9" stroke="#000" stroke-width="0.6"/>
    </svg>"""
    path = tmp_path / "hand.svg"
    path.write_text(svg)
    facts = svg_facts(path)
    assert facts["smallest_text"] == (pytest.approx(4.0), "tiny")
    assert facts["thinnest_stroke"][0] == pytest.approx(0.5)
    assert facts["width_pt"] * 25.4 / 72 == pytest.approx(84.0)
    res = preflight({"svg": path}, **LIMITS)
    assert not check(res, "smallest text")["passed"] and check(res, "thinnest line")["passed"]
    assert check(res, "width matches a preset")["passed"]


def test_150_dpi_png_is_caught(tmp_path):
    bad = preflight({"png": save(figure(), tmp_path / "bad.png", dpi=150)}, **LIMITS)
    good = preflight({"png": save(figure(), tmp_path / "good.png", dpi=600)}, **LIMITS)
    c = check(bad, "raster resolution")
    assert not bad["passed"] and not c["passed"] and round(c["value"]) == 150
    assert check(bad, "width matches a preset")["passed"]   # 84 mm at 150 dpi is 496 px, consistent
    assert good["passed"] and round(check(good, "raster resolution")["value"]) == 600


def test_greyscale_raster_is_not_rgb(tmp_path):
    rgb = save(figure(), tmp_path / "rgb.tiff", dpi=600)
    grey = tmp_path / "grey.tiff"
    with Image.open(rgb) as im:
        im.convert("L").save(grey, dpi=(600, 600))
    assert preflight({"tiff": rgb}, **LIMITS)["passed"]
    res = preflight({"tiff": grey}, **LIMITS)
    assert not res["passed"] and check(res, "RGB colour space")["value"] == "L"


def _hand_pdf(path: Path, width_pt: float, height_pt: float) -> Path:
    """A one-page PDF whose font is the standard-14 Helvetica with no font program (ISO 32000-1,
    9.6.2.2: such fonts may omit the descriptor, so nothing is embedded), xref offsets computed."""
    content = b"BT /F1 7 Tf 10 10 Td (n = 12) Tj ET"
    objects = [
        b"<< /Type /Catalog /Pages 2 0 R >>",
        b"<< /Type /Pages /Kids [3 0 R] /Count 1 >>",
        b"<< /Type /Page /Parent 2 0 R /MediaBox [0 0 %.4f %.4f] /Resources << /Font << /F1 4 0 R >> >> "
        b"/Contents 5 0 R >>" % (width_pt, height_pt),
        b"<< /Type /Font /Subtype /Type1 /BaseFont /Helvetica >>",
        b"<< /Length %d >>\nstream\n%s\nendstream" % (len(content), content),
    ]
    out, offsets = bytearray(b"%PDF-1.4\n"), []
    for i, body in enumerate(objects, start=1):
        offsets.append(len(out))
        out += b"%d 0 obj\n%s\nendobj\n" % (i, body)
    xref = len(out)
    out += b"xref\n0 %d\n0000000000 65535 f \n" % (len(objects) + 1)
    out += b"".join(b"%010d 00000 n \n" % o for o in offsets)
    out += b"trailer\n<< /Size %d /Root 1 0 R >>\nstartxref\n%d\n%%%%EOF\n" % (len(objects) + 1, xref)
    path.write_bytes(bytes(out))
    return path


def test_unembedded_font_is_caught(tmp_path):
    res = preflight({"pdf": _hand_pdf(tmp_path / "loose.pdf", 84 / 25.4 * 72, 100)}, **LIMITS)
    c = check(res, "fonts embedded")
    assert not res["passed"] and not c["passed"] and c["value"] == ["Helvetica"]
    assert check(res, "no Type 3 fonts")["passed"] and check(res, "width matches a preset")["passed"]
    # matplotlib with pdf.fonttype 42 embeds its TrueType fonts (FontFile2)
    good = preflight({"pdf": save(figure(), tmp_path / "good.pdf")}, **LIMITS)
    assert good["passed"] and check(good, "fonts embedded")["passed"]


def test_type3_font_is_caught(tmp_path):
    res = preflight({"pdf": save(figure(), tmp_path / "t3.pdf", **{"pdf.fonttype": 3})}, **LIMITS)
    c = check(res, "no Type 3 fonts")
    assert not res["passed"] and not c["passed"] and any("DejaVu" in n for n in c["value"])
    assert check(res, "fonts embedded")["passed"]   # Type 3 glyphs live in the file itself


def test_oversize_width_is_caught(tmp_path):
    bad = preflight({"pdf": save(figure(200), tmp_path / "wide.pdf")}, **LIMITS)
    c = check(bad, "width matches a preset")
    assert not bad["passed"] and not c["passed"] and c["value"] == pytest.approx(200.0, abs=0.01)
    good = preflight({"pdf": save(figure(176), tmp_path / "full.pdf")}, **LIMITS)
    assert good["passed"] and check(good, "width matches a preset")["value"] == pytest.approx(176.0, abs=0.01)
    # 0.1 mm tolerance: 176.3 mm is no preset
    near = preflight({"pdf": _hand_pdf(tmp_path / "near.pdf", 176.3 / 25.4 * 72, 100)}, **LIMITS)
    assert not check(near, "width matches a preset")["passed"]


def test_file_size_limit(tmp_path):
    path = save(figure(), tmp_path / "f.svg")
    size = path.stat().st_size
    assert check(preflight({"svg": path}, **LIMITS, max_bytes=size), "file size")["passed"]
    res = preflight({"svg": path}, **LIMITS, max_bytes=size - 1)
    assert not res["passed"] and check(res, "file size")["value"] == size


def test_colour_separability_warns_unless_strict():
    close = {"normal": 25.0, "protan": 14.0, "deutan": 4.2, "tritan": 12.0, "grey": 0.6}
    lenient = preflight({}, **LIMITS, min_delta_e=close)
    c = check(lenient, "colour separability")
    assert lenient["passed"] and not c["passed"] and c["level"] == "warning"
    assert "deutan" in c["message"]
    strict = preflight({}, **LIMITS, min_delta_e=close, strict=True)
    assert not strict["passed"] and check(strict, "colour separability")["level"] == "error"
    apart = {"normal": 25.0, "protan": 14.0, "deutan": 11.0, "tritan": 12.0, "grey": 0.6}
    assert check(preflight({}, **LIMITS, min_delta_e=apart, strict=True), "colour separability")["passed"]


def test_missing_file_is_reported_not_raised(tmp_path):
    res = preflight({"png": tmp_path / "absent.png"}, **LIMITS)
    assert not res["passed"] and check(res, "file exists")["passed"] is False


def test_bad_limits_are_one_line_errors():
    with pytest.raises(FigkitError, match="min_text_pt"):
        preflight({}, **{**LIMITS, "min_text_pt": 0})
    with pytest.raises(FigkitError, match="sizes_mm"):
        preflight({}, **{**LIMITS, "sizes_mm": {}})


def test_preflight_finds_figures_older_than_their_data_or_row(project, tmp_path):
    """A figure left behind by a failed or partial build: its sidecar's SHA-256 of the data file
    (FIPS 180-4 SHA-256, Python's hashlib) or of its sheet row no longer matches; a figure whose
    row was removed from the sheet is a warning.  Common practice, no outside source: a figure
    submitted must show the data as they are."""
    from figkit.preflight import preflight_project
    from figkit.render import load_project
    root = tmp_path / "p"
    shutil.copytree(project, root)
    fresh = dict(preflight_project(load_project(root), CLEAN_IDS))
    assert all(check(r, "up to date")["passed"] for r in fresh.values())
    # one more reading in the data file: both figures read it
    data = root / "data" / "readings.csv"
    lines = data.read_text().splitlines(keepends=True)
    data.write_text("".join(lines + [lines[-1]]))
    stale = dict(preflight_project(load_project(root), CLEAN_IDS))
    c = check(stale["temperature-histogram"], "up to date")
    assert not c["passed"] and c["value"] == ["data/readings.csv"] and "rebuild" in c["message"]
    assert not stale["temperature-histogram"]["passed"]
    # an edited row: named too
    sheet = root / "config" / "figures.tsv"
    text = sheet.read_text()
    assert "Water temperature in each catchment" in text
    sheet.write_text(text.replace("Water temperature in each catchment", "Water temperature by catchment"))
    c = check(dict(preflight_project(load_project(root), CLEAN_IDS))["temperature-histogram"], "up to date")
    assert c["value"] == ["data/readings.csv", "its sheet row"]
    # a row removed from the sheet: its files are reported (warning) when the whole sheet is checked
    kept = [ln for ln in sheet.read_text().splitlines(keepends=True) if not ln.startswith("sensitive-share\t")]
    sheet.write_text("".join(kept))
    every = dict(preflight_project(load_project(root)))
    orphan = check(every["sensitive-share"], "in the sheet")
    assert orphan["level"] == "warning" and "no longer in the sheet" in orphan["message"]


@pytest.mark.parametrize("fmt", ["pdf", "svg"])
def test_raster_layers_inside_vector_files_are_measured(tmp_path, fmt):
    """An image's resolution on the page is its pixels over its painted size: ISO 32000-1, 8.9.4
    (the image fills the unit square mapped by the CTM) for PDF, the <image> width and height in
    user units (SVG 1.1, 5.7) for SVG.  Known cases: a 40 x 20 px image stretched over a 4 x 2 in
    axes (interpolation 'none': embedded unresampled) is 10 dpi; a rasterised layer saved at
    dpi=150 is 150 dpi."""
    import matplotlib
    matplotlib.use("Agg")
    from matplotlib.figure import Figure
    from figkit.preflight import preflight
    fig = Figure(figsize=(4, 2))
    ax = fig.add_axes((0, 0, 1, 1))
    ax.set_axis_off()
    ax.imshow(np.arange(800, dtype=float).reshape(20, 40), aspect="auto", interpolation="none")
    coarse = tmp_path / f"coarse.{fmt}"
    fig.savefig(coarse, dpi=72)
    fig2 = Figure(figsize=(4, 2))
    ax2 = fig2.add_axes((0.1, 0.1, 0.8, 0.8))
    ax2.scatter(np.linspace(0, 1, 50), np.linspace(0, 1, 50), rasterized=True)
    layer = tmp_path / f"layer.{fmt}"
    fig2.savefig(layer, dpi=150)
    sizes = {"w": 101.6}   # 4 in
    for path, dpi in ((coarse, 10.0), (layer, 150.0)):
        res = preflight({fmt: path}, sizes_mm=sizes, min_text_pt=1, min_line_pt=0.01, min_dpi=300)
        c = check(res, "embedded raster resolution")
        assert c["value"] == pytest.approx(dpi, rel=0.02), c
        assert not c["passed"] and "below 300 dpi" in c["message"]
        res = preflight({fmt: path}, sizes_mm=sizes, min_text_pt=1, min_line_pt=0.01, min_dpi=dpi * 0.9)
        assert check(res, "embedded raster resolution")["passed"]


def test_a_linked_svg_image_is_a_warning_not_a_pass(tmp_path):
    """An <image> that links a file instead of embedding it cannot be measured (and would not
    travel with the SVG): a warning, never 'no raster layers'."""
    from figkit.preflight import preflight
    svg = tmp_path / "linked.svg"
    svg.write_text('<svg xmlns="http://www.w3.org/2000/svg" xmlns:xlink="http://www.w3.org/1999/xlink" '
                   'width="288pt" height="144pt" viewBox="0 0 288 144">'
                   '<image id="photo" x="0" y="0" width="100" height="50" xlink:href="photo.png"/>'
                   '<text font-size="8">a</text></svg>')
    res = preflight({"svg": svg}, sizes_mm={"w": 101.6}, min_text_pt=1, min_line_pt=0.01, min_dpi=300)
    c = check(res, "embedded raster resolution")
    assert not c["passed"] and c["level"] == "warning" and "photo" in c["message"]


def test_figkit_raster_layers_are_at_the_figure_dpi(project, tmp_path):
    """figkit rasterises dense layers (here the colour bars of a hexagon and a tile figure) at the
    house style's 600 dpi, in the PDF and in the SVG."""
    from figkit.render import load_project, render
    root = tmp_path / "p"
    shutil.copytree(project, root)
    for fid in ("taxa-tiles", "oxygen-season-grid"):
        car = render(load_project(root), fid)
        layers = [c for c in car["preflight"]["checks"] if c["name"] == "embedded raster resolution"]
        assert {c["file"] for c in layers} == {f"{fid}.pdf", f"{fid}.svg"}
        for c in layers:
            assert c["passed"] and c["value"] == pytest.approx(600, abs=0.05), c


def test_up_to_date_sees_style_files_and_settings(project, tmp_path):
    """A changed house-style file or a setting the figure reads (a field's label in config.yaml)
    makes the figure out of date, as the workflow's rerun triggers do; a setting it does not
    read does not."""
    from figkit.preflight import preflight_project
    from figkit.render import load_project
    root = tmp_path / "p"
    shutil.copytree(project, root)
    fid = "temperature-histogram"
    def up(r):
        return check(dict(preflight_project(load_project(r), (fid,)))[fid], "up to date")
    assert up(root)["passed"]
    cfg = root / "config" / "config.yaml"
    text = cfg.read_text()
    cfg.write_text(text.replace("turbidity_ntu: {label: Turbidity, unit: NTU}",
                                "turbidity_ntu: {label: Turbidity (nephelometric), unit: NTU}"))
    assert up(root)["passed"]                     # a label this figure does not show
    cfg.write_text(text.replace("water_temp_c: {label: Water temperature, unit: °C}",
                                "water_temp_c: {label: Stream temperature, unit: °C}"))
    c = up(root)
    assert not c["passed"] and c["value"] == ["settings it reads in config.yaml (or figkit's version)"]
    cfg.write_text(text)
    sheet = root / "styles" / "house.mplstyle"
    sheet.write_text(sheet.read_text() + "\n# edited\n")
    assert up(root)["value"] == ["style file house.mplstyle"]


def _reference_pdf_images(path):
    """The same measurement over pypdf's own parse of every operator (pypdf's ContentStream):
    the reference the fast token scan in figkit.preflight.pdf_images is checked against."""
    import math
    from pypdf import PdfReader
    from pypdf.generic import ContentStream
    from figkit.preflight import _concat
    reader = PdfReader(str(path))
    out = []

    def run(content, resources, ctm, depth):
        xobjects = (resources.get_object() if resources is not None else {}).get("/XObject")
        xobjects = xobjects.get_object() if xobjects is not None else {}
        saved = []
        for operands, op in content.operations:
            if op == b"q":
                saved.append(ctm)
            elif op == b"Q" and saved:
                ctm = saved.pop()
            elif op == b"cm":
                ctm = _concat([float(v) for v in operands], ctm)
            elif op == b"Do":
                obj = xobjects[operands[0]].get_object()
                if obj["/Subtype"] == "/Image":
                    out.append(min(obj["/Width"] * 72 / math.hypot(ctm[0], ctm[1]),
                                   obj["/Height"] * 72 / math.hypot(ctm[2], ctm[3])))
                elif obj["/Subtype"] == "/Form" and depth < 16:
                    m = [float(v) for v in obj.get("/Matrix", [1, 0, 0, 1, 0, 0])]
                    run(ContentStream(obj, reader), obj.get("/Resources") or resources,
                        _concat(m, ctm), depth + 1)
    for page in reader.pages:
        run(page.get_contents(), page.get("/Resources"), [1.0, 0, 0, 1.0, 0, 0], 0)
    return out


def test_pdf_image_scan_equals_a_walk_over_pypdfs_parse(project, tmp_path):
    """Images inside forms inside forms, rotated and scaled, a literal string holding ' q ' and
    ' cm ' and a marker form painted many times: the fast scan finds the same images at the same
    resolutions as pypdf's full parse."""
    import matplotlib
    matplotlib.use("Agg")
    from matplotlib.figure import Figure
    from figkit.preflight import pdf_images
    fig = Figure(figsize=(5, 3))
    ax = fig.add_axes((0.1, 0.1, 0.8, 0.8))
    rng = np.random.default_rng(0)
    ax.scatter(rng.normal(size=3000), rng.normal(size=3000), s=4)            # a marker form, reused
    ax.scatter(rng.normal(size=3000), rng.normal(size=3000), s=4, rasterized=True)
    ax.imshow(rng.random((30, 50)), extent=(0, 1, 0, 1), aspect="auto", interpolation="none")
    ax.text(0, 0, "a q b Q 1 0 0 1 5 5 cm (x)")                              # operators as text
    path = tmp_path / "mixed.pdf"
    fig.savefig(path, dpi=200)
    fast = sorted(round(i["dpi"], 6) for i in pdf_images(path))
    assert fast == sorted(round(d, 6) for d in _reference_pdf_images(path))
    assert len(fast) == 2
    # and on figkit's own figures with raster layers (colour bars)
    from figkit.render import load_project, render
    root = tmp_path / "p"
    shutil.copytree(project, root)
    for fid in ("taxa-tiles", "oxygen-season-grid"):
        render(load_project(root), fid)
        f = root / "results" / "figures" / f"{fid}.pdf"
        got = sorted(round(i["dpi"], 6) for i in pdf_images(f))
        assert got and got == sorted(round(d, 6) for d in _reference_pdf_images(f)), fid


def test_a_few_box_plot_outliers_stay_vector(project, tmp_path):
    """A box plot's outliers are a few hundred marks at most here: they stay vector (editable and
    sharp for the art editor), so its PDF and SVG hold no raster layer."""
    from figkit.render import load_project, render
    root = tmp_path / "p"
    shutil.copytree(project, root)
    car = render(load_project(root), "conductivity-catchments")
    assert sum(g["outliers"] for p in car["panels"] for g in p["groups"]) > 0
    layers = [c for c in car["preflight"]["checks"] if c["name"] == "embedded raster resolution"]
    assert len(layers) == 2 and all(c["message"] == "no raster layers" for c in layers)
