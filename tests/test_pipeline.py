"""End to end: the demo sheet through Snakemake, every output file read back and compared with the
sidecar and with independent computations on the data files."""
from __future__ import annotations

import hashlib
import os
import json
import re
import shutil
import subprocess
import sys
import xml.etree.ElementTree as ET
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from PIL import Image
from pypdf import PdfReader

from conftest import snakemake

MM_PER_PT = 25.4 / 72   # PDF user space unit is 1/72 inch (ISO 32000-1, 8.3.2.3)


def sidecars(project: Path) -> dict[str, dict]:
    out = {}
    for p in sorted((project / "results" / "figures").glob("*.json")):
        out[p.stem] = json.loads(p.read_text())
    return out


def test_demo_builds_every_figure_of_the_sheet(built_demo):
    sheet = pd.read_csv(built_demo / "config" / "figures.tsv", sep="\t", dtype=str)
    cars = sidecars(built_demo)
    assert len(sheet) >= 10
    assert set(cars) == set(sheet["id"])
    charts = {c["chart"] for c in cars.values()}
    assert charts == {"scatter", "hexbins", "box", "violin", "density", "histogram", "count-bars",
                      "shares", "tiles", "means", "lines", "parts"}   # parts: a multi-part figure
    # one-way and two-way splits, bands, a filter, colour and both trends are exercised
    assert any(len(c["strata"]) == 2 for c in cars.values())
    assert any(c["derived"] for c in cars.values())
    assert any(c["filter"] for c in cars.values())
    assert any(c["colour"] for c in cars.values())
    kinds = {(p.get("trend") or {}).get("kind") for c in cars.values() for p in c["panels"]}
    assert {"line", "loess"} <= kinds


def test_pdf_page_equals_sidecar_size(built_demo):
    for fid, car in sidecars(built_demo).items():
        page = PdfReader(built_demo / "results" / "figures" / car["files"]["pdf"]).pages[0]
        w = float(page.mediabox.width) * MM_PER_PT
        h = float(page.mediabox.height) * MM_PER_PT
        assert abs(w - car["size_mm"][0]) < 0.1, fid
        assert abs(h - car["size_mm"][1]) < 0.1, fid


def test_png_pixels_and_dpi_match_sidecar(built_demo):
    for fid, car in sidecars(built_demo).items():
        with Image.open(built_demo / "results" / "figures" / car["files"]["png"]) as im:
            dpi = im.info["dpi"]
            assert round(dpi[0]) == car["dpi"] >= 300, fid
            # pixels = mm / 25.4 * dpi (rounded by the renderer to whole pixels)
            assert abs(im.width - car["size_mm"][0] / 25.4 * car["dpi"]) <= 1, fid
            assert abs(im.height - car["size_mm"][1] / 25.4 * car["dpi"]) <= 1, fid


def test_svg_keeps_text_as_text(built_demo):
    ns = "{http://www.w3.org/2000/svg}"
    for fid, car in sidecars(built_demo).items():
        root = ET.parse(built_demo / "results" / "figures" / car["files"]["svg"]).getroot()
        texts = ["".join(t.itertext()).strip() for t in root.iter(f"{ns}text")]
        assert any(texts), fid
        if car.get("x") or car.get("parts"):
            assert any(t for t in texts), fid


def test_input_hashes_match_the_data_files(built_demo):
    for fid, car in sidecars(built_demo).items():
        assert car["inputs"], fid
        for item in car["inputs"]:
            assert not Path(item["path"]).is_absolute()
            digest = hashlib.sha256((built_demo / item["path"]).read_bytes()).hexdigest()
            assert digest == item["sha256"], fid


def test_panel_counts_match_an_independent_pandas_count(built_demo):
    """n per panel recomputed with plain pandas from the sheet row (filter written by hand)."""
    cars = sidecars(built_demo)
    readings = pd.read_csv(built_demo / "data" / "readings.csv")

    # oxygen-temperature: strata land_use; rows complete in x and y.
    car = cars["oxygen-temperature"]
    complete = readings.dropna(subset=["water_temp_c", "dissolved_oxygen_mgl"])
    expect = complete.groupby("land_use").size()
    missing = readings.groupby("land_use")["dissolved_oxygen_mgl"].apply(lambda s: s.isna().sum())
    for p in car["panels"]:
        value = p["keys"]["land_use"]
        assert p["n"] == expect[value]
        assert p["n_dropped"] == missing[value]

    # oxygen-flow-bands: filter season in [summer, autumn], bands on discharge (<0.5, <2, rest).
    car = cars["oxygen-flow-bands"]
    part = readings[readings["season"].isin(["summer", "autumn"])].dropna(
        subset=["water_temp_c", "dissolved_oxygen_mgl", "land_use"])
    band = np.where(part["discharge_m3s"] < 0.5, "low flow",
                    np.where(part["discharge_m3s"] < 2.0, "moderate flow", "high flow"))
    expect = pd.Series(band).value_counts()
    assert [p["label"] for p in car["panels"]] == ["low flow", "moderate flow", "high flow"]
    for p in car["panels"]:
        assert p["n"] == expect[p["label"]]

    # The two-way grid has one panel per (season, land use) cell in config order.
    car = cars["oxygen-season-grid"]
    assert car["layout"]["rows"] == 4 and car["layout"]["cols"] == 4
    assert [p["keys"]["season"] for p in car["panels"][::4]] == ["winter", "spring", "summer", "autumn"]


def test_stats_file_has_one_line_per_panel_in_sidecar_order(built_demo):
    car = sidecars(built_demo)["oxygen-temperature"]
    stats = pd.read_csv(built_demo / "results" / "figures" / "oxygen-temperature.stats.csv")
    for col in ["panel", "n", "n_dropped", "x_mean", "y_mean", "slope", "slope_ci_low",
                "slope_ci_high", "intercept", "r"]:
        assert col in stats.columns
    panel_rows = stats[stats["group"].isna()]
    assert list(panel_rows["panel"]) == [p["label"] for p in car["panels"]]
    assert list(panel_rows["n"]) == [p["n"] for p in car["panels"]]


def _scheduled(proc) -> list[str]:
    return sorted(set(re.findall(r"-m figkit render --id (\S+)", proc.stdout + proc.stderr)))


def test_second_run_has_nothing_to_do(built_demo):
    proc = snakemake(built_demo, "-n", "-p")
    assert _scheduled(proc) == []
    assert "Nothing to be done" in proc.stdout + proc.stderr


def test_changing_one_dataset_schedules_exactly_its_figures(built_demo, tmp_path):
    project = tmp_path / "p"
    shutil.copytree(built_demo, project, symlinks=True)
    cars = sidecars(project)
    readers = sorted(fid for fid, c in cars.items() if c["inputs"][0]["path"] == "data/surveys.csv")
    assert readers
    path = project / "data" / "surveys.csv"
    # A real edit (one more line).  Snakemake compares checksums of small files, so a bare
    # `touch` of an unchanged small file rightly schedules nothing; a changed one always reruns.
    lines = path.read_text().splitlines(keepends=True)
    path.write_text("".join(lines + [lines[-1]]))
    assert _scheduled(snakemake(project, "-n", "-p")) == readers


def test_editing_one_row_reruns_only_that_figure(built_demo, tmp_path):
    project = tmp_path / "p"
    shutil.copytree(built_demo, project, symlinks=True)
    sheet = project / "config" / "figures.tsv"
    text = sheet.read_text()
    assert "Distribution of water temperature by season" in text
    sheet.write_text(text.replace("Distribution of water temperature by season",
                                  "How water temperature is spread in each season"))
    assert _scheduled(snakemake(project, "-n", "-p")) == ["temperature-seasons"]


def test_html_report_has_every_figure_and_its_caption(built_demo, tmp_path):
    project = tmp_path / "p"
    shutil.copytree(built_demo, project, symlinks=True)
    snakemake(project, "--report", "report.html")
    html = (project / "report.html").read_text()
    sheet = pd.read_csv(project / "config" / "figures.tsv", sep="\t", dtype=str)
    for fid, caption in zip(sheet["id"], sheet["caption"]):
        assert f"{fid}.png" in html
        assert caption.split(" (")[0][:40] in html.replace("&#39;", "'")


def test_fresh_clone_schedules_the_demo_data_first(tmp_path):
    """On a fresh clone data/ does not exist yet: the demo-data rule must run before the figures
    (a missing file that a rule makes is an input, not a failure)."""
    from conftest import copy_project
    project = copy_project(tmp_path / "fresh")
    proc = snakemake(project, "-n", "-p")
    text = proc.stdout + proc.stderr
    assert "-m figkit.demo data" in text
    sheet = pd.read_csv(project / "config" / "figures.tsv", sep="\t", dtype=str)
    assert _scheduled(proc) == sorted(sheet["id"])


def test_data_made_by_a_later_rule_builds_once_and_settles(tmp_path):
    """A project whose own rule (included after figkit's) makes the dataset: the first run makes
    the data then the figure, and a second dry run has nothing to do."""
    import shutil as sh
    from conftest import REPO
    root = tmp_path / "own"
    (root / "config").mkdir(parents=True)
    sh.copytree(REPO / "figkit" / "styles", root / "styles")
    (root / "config" / "config.yaml").write_text("datasets: {d: data/d.csv}\nformats: [png]\n")
    (root / "config" / "figures.tsv").write_text("id\tdataset\tchart\tx\nh\td\thistogram\tv\n")
    (root / "Snakefile").write_text(
        'import figkit.workflow\nconfigfile: "config/config.yaml"\n'
        'include: figkit.workflow.rules()\n\n'
        'rule all:\n    input: rules.all_figures.input\n\n'
        'rule make_data:\n    output: "data/d.csv"\n'
        '    run:\n        import numpy as np, pandas as pd\n'
        '        pd.DataFrame({"v": np.random.default_rng(1).normal(size=500)}).to_csv(output[0], index=False)\n')
    snakemake(root)
    assert (root / "results" / "figures" / "h.png").is_file()
    proc = snakemake(root, "-n")
    assert "Nothing to be done" in proc.stdout + proc.stderr


def test_the_same_interpreter_by_another_path_reruns_nothing(built_demo):
    """`python -m snakemake`, `.venv/bin/snakemake` and a co-author's clone reach the interpreter
    by different paths; none of them may make Snakemake see changed job code and rebuild every
    figure (and regenerate the data).  Common practice, no outside source: a rebuild reruns
    exactly what changed."""
    exe = Path(sys.executable)
    # Another name for the same interpreter: venvs have python, python3 and python3.X side by side.
    others = [exe.with_name(n) for n in ("python3", "python", f"python3.{sys.version_info.minor}")]
    other = next((p for p in others if p.name != exe.name and p.exists()), None)
    if other is None:
        pytest.skip("no second name for this interpreter")
    proc = subprocess.run([str(other), "-m", "snakemake", "--cores", "2", "-n", "-p"], cwd=built_demo,
                          capture_output=True, text=True, env=dict(os.environ, MPLBACKEND="Agg"))
    assert proc.returncode == 0, proc.stderr[-2000:]
    assert _scheduled(proc) == []
    assert "Nothing to be done" in proc.stdout + proc.stderr


def test_a_removed_row_leaves_its_files_and_the_build_says_so(built_demo, tmp_path):
    """Removing a row deletes nothing (the files may be wanted), but every build names the figures
    whose files are no longer backed by a row; nothing is scheduled for them."""
    project = tmp_path / "p"
    shutil.copytree(built_demo, project, symlinks=True)
    sheet = project / "config" / "figures.tsv"
    sheet.write_text("".join(ln for ln in sheet.read_text().splitlines(keepends=True)
                             if not ln.startswith("taxa-tiles\t")))
    proc = snakemake(project, "-n", "-p")
    assert "no longer in the sheet: taxa-tiles" in proc.stderr
    assert (project / "results" / "figures" / "taxa-tiles.png").is_file()
    assert _scheduled(proc) == []
