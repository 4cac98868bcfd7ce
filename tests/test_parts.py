"""Multi-part figures (figkit.compose): one sheet row made of other rows.

Outside references: the PDF file format's MediaBox (ISO 32000-1:2008, 7.7.3.3), read from the
file's bytes; the SVG read back with the standard library's XML parser; pandas groupby for the
numbers a part draws; Snakemake's own dry-run job listing for what reruns.  The demo rows are
invented data (they only carry the figure); the widths come from the house style's presets.
"""
from __future__ import annotations

import csv
import json
import re
import shutil
import subprocess
import sys
import xml.etree.ElementTree as ET
from pathlib import Path

import pandas as pd
import pytest
import yaml

from conftest import REPO, sheet_text, snakemake
from figkit.compose import PART_GAP_MM, page_boxes, page_cells, parse_parts
from figkit.errors import FigkitError

COMBINED = "river-overview"
PARTS = ["mayfly-means", "temperature-histogram", "oxygen-months"]


def _sidecar(project: Path, fid: str) -> dict:
    return json.loads((project / "results" / "figures" / f"{fid}.json").read_text(encoding="utf-8"))


def _reading_order(texts: list[tuple[float, float, str]]) -> list[tuple[float, float, str]]:
    """(y, x, text) of SVG texts (y downwards) in reading order: lines of text, whose baselines
    lie within 2 pt of each other, from the top; left to right within a line."""
    rows: list[list] = []
    for item in sorted(texts):
        if rows and item[0] - rows[-1][0][0] < 2.0:
            rows[-1].append(item)
        else:
            rows.append([item])
    return [item for row in rows for item in sorted(row, key=lambda e: e[1])]


def _err(message, **kw):
    return FigkitError(message, **kw)


# ------------------------------------------------------------------ the page, pure arithmetic

def test_parts_cell_grammar():
    assert parse_parts("a, b / c", _err) == (("a", "b"), ("c",))
    assert parse_parts("one", _err) == (("one",),)
    for bad, why in (("a,,b", "empty place"), ("a, b /", "empty place"), ("a, a", "twice"),
                     ("a b", "not a figure id"), ("a, b, c, d, e", "parts on one line")):
        with pytest.raises(FigkitError, match=why):
            parse_parts(bad, _err)


def test_cells_fill_the_width_with_equal_parts_and_gaps():
    cells = page_cells((("a", "b", "c"), ("d",)), 176.0)
    widths = [w for line, _x, w in cells if line == 0]
    assert widths[0] == pytest.approx(widths[1]) == pytest.approx(widths[2])
    assert sum(widths) + 2 * PART_GAP_MM == pytest.approx(176.0)
    assert cells[2][1] + cells[2][2] == pytest.approx(176.0)     # the last cell ends at the edge
    assert cells[3] == (1, 0.0, 176.0)
    boxes, height = page_boxes(cells, [50.0, 30.0], band_mm=4.0)
    assert height == pytest.approx(4 + 50 + PART_GAP_MM + 4 + 30)
    assert boxes[3][1] == pytest.approx(4 + 50 + PART_GAP_MM + 4)   # the second line's top


# ------------------------------------------------------------------ the demo's multi-part figure

def test_combined_pdf_is_the_journal_width(built_demo):
    """The PDF's MediaBox (ISO 32000-1, 7.7.3.3; 72 units per inch) is the house style's 'full'
    preset within 0.1 mm, and the parts' cells with their gaps fill it."""
    pdf = (built_demo / "results" / "figures" / f"{COMBINED}.pdf").read_bytes()
    box = re.search(rb"/MediaBox\s*\[\s*0\s+0\s+([\d.]+)\s+([\d.]+)\s*\]", pdf)
    width_mm = float(box.group(1)) / 72 * 25.4
    full = yaml.safe_load((built_demo / "styles" / "house.yaml").read_text())["sizes"]["full"]
    assert abs(width_mm - float(full)) < 0.1
    car = _sidecar(built_demo, COMBINED)
    assert car["chart"] == "parts" and [p["id"] for p in car["parts"]] == PARTS
    first_line = [p["box_mm"] for p in car["parts"][:2]]
    assert first_line[0][2] + PART_GAP_MM + first_line[1][2] == pytest.approx(float(full), abs=0.01)
    assert car["preflight"]["passed"], car["preflight"]


def test_letters_in_reading_order_from_the_svg(built_demo):
    """One letter per part, a, b, c in reading order (top to bottom, left to right), each at
    the top-left of its part's cell, read back from the SVG's text elements."""
    root = ET.parse(built_demo / "results" / "figures" / f"{COMBINED}.svg").getroot()
    found = []
    for el in root.iter("{http://www.w3.org/2000/svg}text"):
        text = "".join(el.itertext()).strip()
        if re.fullmatch(r"[a-z]", text) and "700" in (el.get("style") or ""):
            found.append((float(el.get("y")), float(el.get("x")), text))
    found = _reading_order(found)
    assert [t for _y, _x, t in found] == ["a", "b", "c"]
    car = _sidecar(built_demo, COMBINED)
    for (y, x, letter), part in zip(found, car["parts"]):
        x0, top, _w, _h = part["box_mm"]
        assert part["letter"] == letter
        assert abs(x / 72 * 25.4 - x0) < 1.0            # at the cell's left edge (pt -> mm)
        assert y / 72 * 25.4 < top                      # above the part, in the letter band


def test_parts_keep_the_numbers_they_have_alone(built_demo):
    """Every part's panels hold the numbers of the part built alone (same data pass), and the
    lines part's per-x means equal a pandas groupby of the data file."""
    car = _sidecar(built_demo, COMBINED)
    for part in car["parts"]:
        alone = _sidecar(built_demo, part["id"])
        for key in ("rows_read", "rows_kept", "inputs", "row_sha256", "fingerprint", "chart"):
            assert part[key] == alone[key], (part["id"], key)
        assert len(part["panels"]) == len(alone["panels"])
        for a, b in zip(part["panels"], alone["panels"]):
            assert (a["label"], a["n"], a["n_dropped"]) == (b["label"], b["n"], b["n_dropped"])
            assert a.get("groups") == b.get("groups")
            assert a.get("bin_counts") == b.get("bin_counts")
    lines = next(p for p in car["parts"] if p["id"] == "oxygen-months")
    data = pd.read_csv(built_demo / "data" / "readings.csv")
    means = data.dropna(subset=["dissolved_oxygen_mgl"]).groupby(
        ["catchment", "land_use", "month"])["dissolved_oxygen_mgl"].mean()
    for panel in lines["panels"]:
        for g in panel["groups"]:
            for pt in g["per_x"]:
                want = means[(panel["label"], g["group"], int(pt["x"]))]
                assert pt["mean"] == pytest.approx(want, rel=1e-9)
    # The values and stats tables carry each part's lines under its letter.
    with open(built_demo / "results" / "figures" / f"{COMBINED}.values.csv", newline="") as fh:
        rows = list(csv.DictReader(fh))
    assert {r["part"] for r in rows} == {"a", "b", "c"}
    with open(built_demo / "results" / "figures" / f"{COMBINED}.stats.csv", newline="") as fh:
        head = next(csv.reader(fh))
    assert head[:2] == ["part", "panel"]


def test_parts_line_up_on_their_panel_edges(built_demo):
    """Parts side by side share their panels' top and bottom edges; parts in the same column of
    the page share their panels' left edge (drawn axes, measured in the page)."""
    from figkit.render import figure, load_project
    page = figure(COMBINED, load_project(built_demo))
    subs = page.subfigs
    assert len(subs) == 3
    boxes = [[ax.get_window_extent() for ax in sf.axes if ax.get_label() != "<colorbar>"]
             for sf in subs]
    top = [max(b.y1 for b in bs) for bs in boxes]
    bottom = [min(b.y0 for b in bs) for bs in boxes]
    left = [min(b.x0 for b in bs) for bs in boxes]
    assert top[0] == pytest.approx(top[1], abs=0.01)           # a and b: one line
    assert bottom[0] == pytest.approx(bottom[1], abs=0.01)
    assert left[0] == pytest.approx(left[2], abs=0.01)          # a above c: one column


def test_editing_a_part_reruns_the_combined_figure_and_only_that_part(built_demo, tmp_path):
    """Snakemake's dry run after an edit: a part's row -> that part and the combined figure;
    a row that is no part -> that figure alone."""
    project = tmp_path / "p"
    shutil.copytree(built_demo, project, symlinks=True)

    def planned() -> set[str]:
        out = snakemake(project, "-n").stdout
        return set(re.findall(r"wildcards: id=([A-Za-z0-9_-]+)", out))

    assert planned() == set()
    sheet = project / "config" / "figures.tsv"
    original = sheet.read_text(encoding="utf-8")
    sheet.write_text(original.replace("Mean count of mayflies per kick sample",
                                      "Mean mayflies per kick sample"), encoding="utf-8")
    assert planned() == {"mayfly-means", COMBINED}
    pre = subprocess.run([sys.executable, "-m", "figkit", "preflight", COMBINED], cwd=project,
                         capture_output=True, text=True)
    assert pre.returncode == 1 and "the sheet row of its part 'mayfly-means'" in pre.stdout, pre.stdout
    sheet.write_text(original.replace("Invertebrates counted per taxon group",
                                      "Invertebrates per taxon group"), encoding="utf-8")
    assert planned() == {"taxa-counts"}


# ------------------------------------------------------------------ mistakes, one line each

def test_the_parts_memory_together_is_checked_when_the_workflow_reads_the_sheet(built_demo):
    """Each part fits under max_mem_mb alone, the parts together do not: Snakemake's dry run says
    so for the combined figure alone, in one line, before anything is submitted (the estimates
    are figkit.jobsize's, read from the dry run's own listing)."""
    import json as _json
    parts = [_json.loads((built_demo / "results" / "figures" / f"{p}.json").read_text())
             ["resources"]["mem_mb"] for p in PARTS]
    together = 400 + sum(m - 400 for m in parts)        # figkit.jobsize.BASE_MB once
    ceiling = max(parts)                                  # every part fits alone
    assert together > ceiling
    proc = snakemake(built_demo, "-n", "--config", f"max_mem_mb={ceiling}", check=False)
    lines = [ln for ln in proc.stderr.splitlines() if "over the memory ceiling" in ln]
    assert lines and all(f"figure '{COMBINED}'" in ln and "parts together" in ln for ln in lines)


@pytest.mark.parametrize("parts, extra, message", [
    ("mayfly-means, no-such-row", {}, "a part names no row of the sheet"),
    ("mayfly-means, river-overview", {}, "a part must be a chart row"),
    ("mayfly-means", {"dataset": "readings"}, "takes its data and chart from its parts"),
    ("mayfly-means,,oxygen-months", {}, "an empty place in the parts list"),
    ("mayfly-means, oxygen-months, mayfly-means", {}, "a part appears twice"),
    ("mayfly-means, no such", {}, "a part is not a figure id"),
    ("oxygen-months / turbidity-log / taxa-counts / conductivity-catchments", {}, "mm of height"),
])
def test_bad_parts_rows_fail_alone_in_one_line(built_demo, tmp_path, parts, extra, message):
    project = tmp_path / "p"
    shutil.copytree(built_demo, project, symlinks=True,
                    ignore=shutil.ignore_patterns(".snakemake", "results"))
    sheet = project / "config" / "figures.tsv"
    lines = sheet.read_text(encoding="utf-8").rstrip("\n").split("\n")
    head = lines[0].split("\t")
    cells = dict.fromkeys(head, "")
    cells.update(id=COMBINED, parts=parts, **extra)
    lines = [ln for ln in lines if not ln.startswith(COMBINED + "\t")]
    sheet.write_text("\n".join(lines + ["\t".join(cells[h] for h in head)]) + "\n", encoding="utf-8")
    proc = subprocess.run([sys.executable, "-m", "figkit", "render", "--id", COMBINED],
                          cwd=project, capture_output=True, text=True)
    assert proc.returncode == 2, proc.stderr
    err = proc.stderr.strip().splitlines()
    assert len(err) == 1 and err[0].startswith("figkit: error:") and "Traceback" not in proc.stderr
    assert message in err[0] and f"figure '{COMBINED}'" in err[0]
    assert not (project / "results" / "figures" / f"{COMBINED}.pdf").exists()
    if "mm of height" not in message:     # lint finds what the build finds before drawing
        lint = subprocess.run([sys.executable, "-m", "figkit", "lint"], cwd=project,
                              capture_output=True, text=True)
        assert lint.returncode == 2 and message in lint.stderr


def test_a_part_whose_data_fail_names_the_combined_figure_and_the_part(tmp_path):
    """A part's data error (a column the data lack) is said of the combined figure the user
    built, naming the part and its row, in one line; nothing is written.  A figure of one part
    has no letter (Palmer penguins, as above)."""
    from conftest import write_penguin_project
    from figkit.render import load_project, render
    sheet = PENGUIN_PARTS.replace("flipper_length_mm\tbody_mass_g", "flipper_length_mm\tno_such_col")
    root = write_penguin_project(tmp_path / "bad", sheet, formats="[png]")
    with pytest.raises(FigkitError) as caught:
        render(load_project(root), "penguin-page")
    text = str(caught.value)
    assert "figure 'penguin-page'" in text and "part 'mass-flipper' (sheet row 2)" in text
    assert "no_such_col" in text and "\n" not in text
    assert not (root / "results" / "figures" / "penguin-page.png").exists()
    one = PENGUIN_PARTS.replace("mass-flipper, mass-by-island / bill-by-species", "mass-by-island")
    root = write_penguin_project(tmp_path / "one", one, formats="[png]")
    assert [p["letter"] for p in render(load_project(root), "penguin-page")["parts"]] == [None]


def test_compare_names_the_part_that_changed(built_demo):
    """A figure made of parts is compared part by part: a constructed change of one part's
    panel n is named with the part's letter and id, the others stay quiet."""
    from figkit.compare import compare_sidecars, conclusions
    old = _sidecar(built_demo, COMBINED)
    new = json.loads(json.dumps(old))
    panel = new["parts"][2]["panels"][0]
    panel["n"] = int(panel["n"] * 1.5)
    said = conclusions(old, new)
    assert said and all(c.what.startswith("part c (oxygen-months): ") for c in said)
    details = compare_sidecars(old, new)
    assert any(c.what == f"part c (oxygen-months): panel '{panel['label']}' n" for c in details)
    assert conclusions(old, old) == [] and compare_sidecars(old, old) == []
    gone = json.loads(json.dumps(old))
    gone["parts"].pop(0)
    assert any(c.note == "part removed" for c in conclusions(old, gone))


def test_the_readme_example_row_is_in_the_demo_sheet():
    """config/README.md shows how to add a figure made of parts; the demo sheet has one."""
    rows = list(csv.DictReader(open(REPO / "config" / "figures.tsv", encoding="utf-8"),
                               delimiter="\t"))
    combined = [r for r in rows if r.get("parts")]
    assert [r["id"] for r in combined] == [COMBINED]
    assert "parts" in (REPO / "config" / "README.md").read_text(encoding="utf-8")


PENGUIN_PARTS = sheet_text(["id", "dataset", "chart", "x", "y", "strata", "panel_letters", "style",
                           "parts"], [
    ["mass-flipper", "penguins", "scatter", "flipper_length_mm", "body_mass_g", "", "", "", ""],
    ["bill-by-species", "penguins", "box", "sex", "bill_length_mm", "species", "yes", "compact", ""],
    ["mass-by-island", "penguins", "violin", "island", "body_mass_g", "", "", "", ""],
    ["penguin-page", "", "", "", "", "", "", "", "mass-flipper, mass-by-island / bill-by-species"],
]) + "\n"


def test_one_letter_sequence_runs_through_lettered_panels(tmp_path):
    """A part whose own row letters its panels continues the sequence: a and b (one part each),
    then c d e (the three panels of the next part, one per species of the Palmer penguins,
    Gorman, Williams & Fraser 2014, via the palmerpenguins package); read back from the SVG, in
    reading order.  A part
    with its own house style is drawn in the combined figure's, with a caution."""
    from conftest import write_penguin_project
    from figkit.render import load_project, render
    root = write_penguin_project(tmp_path, PENGUIN_PARTS, formats="[svg, png]")
    car = render(load_project(root), "penguin-page")
    assert [p["letter"] for p in car["parts"]] == ["a", "b", None]
    svg = ET.parse(root / "results" / "figures" / "penguin-page.svg").getroot()
    texts = []
    for el in svg.iter("{http://www.w3.org/2000/svg}text"):
        text = "".join(el.itertext()).strip()
        if "700" in (el.get("style") or "") and re.match(r"^[a-e](\s|$)", text):
            texts.append((float(el.get("y")), float(el.get("x")), text.split()[0]))
    assert [t for _y, _x, t in _reading_order(texts)] == list("abcde")
    species = [p["label"] for p in car["parts"][2]["panels"]]
    assert species == ["Adelie", "Chinstrap", "Gentoo"]
    assert any("house style 'house', not its own 'compact'" in c for c in car["cautions"])
