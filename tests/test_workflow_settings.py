"""Snakemake's way of giving settings reaches every figure job: `--config`, `--configfile`, a dry
run that writes nothing, per-job logs.

Outside references: Snakemake's own record of each output (its metadata folder,
`.snakemake/metadata/<base64 of the path>`, holding the params it ran the job with; RFC 4648
base64) and its dry-run listing; SHA-256 (FIPS 180-4, Python's hashlib) of the style files on
disk; the demo data are invented by figkit.demo.
"""
from __future__ import annotations

import base64
import hashlib
import re
import json
import shutil
from pathlib import Path

import pytest

from conftest import copy_project, make_demo_data, snakemake

TARGET = "temperature-histogram"   # the demo's cheapest figure (one histogram per catchment)


@pytest.fixture(scope="module")
def demo(tmp_path_factory) -> Path:
    project = copy_project(tmp_path_factory.mktemp("settings"))
    make_demo_data(project)
    return project


def _copy(demo: Path, dest: Path) -> Path:
    shutil.copytree(demo, dest, symlinks=True)
    return dest


def _recorded_params(project: Path, output: str) -> list:
    """The params Snakemake stored for one output file (its metadata record)."""
    name = base64.urlsafe_b64encode(output.encode()).decode()
    return json.loads((project / ".snakemake" / "metadata" / name).read_text())["params"]


def _file_sha256(path: Path) -> str:
    return hashlib.sha256(path.read_bytes()).hexdigest()


def test_config_override_reaches_the_job_and_its_record(demo, tmp_path):
    """`--config style=compact`: the job draws with the compact style (the sidecar holds the
    SHA-256 of styles/compact.yaml as on disk), records where its settings came from, and its
    fingerprint is the one Snakemake ran it with; the next dry run with the same override has
    nothing to do, one without it reruns the figure for its changed params."""
    project = _copy(demo, tmp_path / "p")
    target = f"results/figures/{TARGET}.json"
    snakemake(project, target, "--config", "style=compact")
    car = json.loads((project / target).read_text())
    assert car["style"]["name"] == "compact"
    assert car["style"]["files"]["compact.yaml"] == _file_sha256(project / "styles" / "compact.yaml")
    assert car["settings"]["from"] == "snakemake"
    assert _recorded_params(project, target) == [repr(car["fingerprint"])]
    again = snakemake(project, target, "-n", "--config", "style=compact")
    assert "Nothing to be done" in again.stdout + again.stderr
    back = snakemake(project, target, "-n", "-p")
    text = back.stdout + back.stderr
    assert f"--id {TARGET}" in text and "Params have changed" in text


def test_dry_run_writes_nothing(demo, tmp_path):
    """`snakemake -n --config results=alt` lists every figure and leaves no file behind: no
    results folder, no fingerprint stamps, no logs."""
    project = _copy(demo, tmp_path / "p")
    before = {p for p in project.rglob("*") if ".snakemake" not in p.parts}
    proc = snakemake(project, "-n", "-p", "--config", "results=alt")
    after = {p for p in project.rglob("*") if ".snakemake" not in p.parts}
    assert after == before
    assert not (project / "alt").exists()
    assert f"--id {TARGET}" in proc.stdout + proc.stderr


@pytest.mark.parametrize("how", ["config", "configfile"])
def test_results_override_builds_there(demo, tmp_path, how):
    """`--config results=alt` and `--configfile other.yaml` (with another `results:`) build the
    figure in that folder, with its log under logs/figures/, and nothing under results/."""
    project = _copy(demo, tmp_path / "p")
    if how == "config":
        args = ["--config", "results=alt"]
    else:
        (project / "other.yaml").write_text("results: alt\n", encoding="utf-8")
        args = ["--configfile", "other.yaml"]
    snakemake(project, f"alt/figures/{TARGET}.json", *args)
    built = sorted(p.name for p in (project / "alt" / "figures").iterdir())
    assert built == sorted(f"{TARGET}.{ext}" for ext in ("json", "stats.csv", "values.csv", "pdf",
                                                          "png", "svg"))
    assert not (project / "results" / "figures").exists()
    log = (project / "logs" / "figures" / f"{TARGET}.log").read_text()
    assert f"alt/figures/{TARGET}" in log
    car = json.loads((project / "alt" / "figures" / f"{TARGET}.json").read_text())
    assert car["rebuild"].endswith(f"alt/figures/{TARGET}.json")
    again = snakemake(project, f"alt/figures/{TARGET}.json", "-n", *args)
    assert "Nothing to be done" in again.stdout + again.stderr


# ------------------------------------------------------------------ the report's numbers

WALK_FIGURES = """
const done = arguments[arguments.length - 1];
const seen = {};
for (const path of Object.keys(results)) {
    ReactDOM.flushSync(() => app.showResultInfo(path));
    const box = document.querySelector('.prose');
    seen[path] = {
        text: box.textContent,
        rows: Array.from(box.querySelectorAll('tbody tr')).map(
            r => Array.from(r.querySelectorAll('td')).map(c => c.textContent.trim())),
        items: Array.from(box.querySelectorAll('li')).map(li => li.textContent)};
}
ReactDOM.flushSync(() => app.showCategory('Figures'));
const table = Array.from(document.querySelectorAll('table tr')).map(
    r => Array.from(r.querySelectorAll('th, td')).map(c => c.textContent.trim()));
setTimeout(() => done({figures: seen, table: table}), 500);
"""


def _number(text: str) -> float:
    return float(text.replace("−", "-").replace(",", ""))


def test_report_shows_each_figures_numbers(built_demo, tmp_path):
    """`snakemake --report` opened in headless Chromium: each figure's entry shows a table of its
    panels with n, n_dropped and the line's slope with its interval, the strata comparison and
    every caution, equal to its sidecar read back from disk; the results view lists every figure
    with its chart kind and panel count."""
    from browser import visit
    project = _copy(built_demo, tmp_path / "p")
    snakemake(project, "--report", "report.html")
    page = visit(project / "report.html", script=WALK_FIGURES, screenshot=tmp_path / "report.png")
    assert page.errors == []
    cars = {p.stem: json.loads(p.read_text()) for p in (project / "results" / "figures").glob("*.json")}
    shown = {Path(k).stem: v for k, v in page.script_result["figures"].items()}
    assert set(shown) == set(cars)
    for fid, car in cars.items():
        entry = shown[fid]
        # a figure made of parts shows each part's panels in turn
        panels = car["panels"] or [q for part in car.get("parts") or [] for q in part["panels"]]
        assert len(entry["rows"]) == len(panels)
        for row, panel in zip(entry["rows"], panels):
            assert row[0] == (panel["label"] or "all")
            assert _number(row[1]) == panel["n"] and _number(row[2]) == panel["n_dropped"]
            trend = panel.get("trend") or {}
            if trend.get("kind") == "line":
                slope, low, high = re.match(r"(\S+) \((\S+) to (\S+)\)", row[3]).groups()
                for text, value in ((slope, trend["slope"]), (low, trend["slope_ci"][0]),
                                    (high, trend["slope_ci"][1])):
                    assert _number(text) == pytest.approx(value, rel=5e-3)   # 3 significant digits
        flat = " ".join(entry["text"].split())
        test = car.get("strata_test")
        if test and test.get("F") is not None:
            assert f"F({test['df_num']}, {test['df_den']})" in flat
        assert [" ".join(i.split()) for i in entry["items"]] == [" ".join(c.split()) for c in car["cautions"]]
    head, *rows = page.script_result["table"]
    assert head[:3] == ["figure", "chart", "panels"]
    assert sorted(r[:3] for r in rows) == sorted(
        [fid, car["chart"], str(len(car["panels"]) or sum(len(q["panels"]) for q in car.get("parts") or []))]
        for fid, car in cars.items())
