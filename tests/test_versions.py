"""Figures across data versions: snapshots, compare by name, conclusion-level changes, the review
page and the regression gate.

External references used, named beside each check:
* statsmodels ``OLS(...).fit().conf_int()`` (95% slope interval) and ``anova_lm`` of nested OLS
  models (the strata F-test of equal slopes) — Seabold & Perktold (2010);
* pandas ``crosstab(..., normalize="index")`` for shares (percentage points by hand arithmetic);
* Python's ``hashlib.sha256`` (FIPS 180-4) for the manifest's hashes; ``os.stat`` inode numbers
  for hard links (POSIX ``link()``);
* ``xml.etree.ElementTree`` for the JUnit XML; the element and attribute names (testsuites,
  testsuite, testcase, failure; tests, failures, name, classname, message) are those CI servers
  read, as pytest's own ``--junitxml`` writes them (checked below against a pytest run);
* headless Chromium (Debian package) for the review page, via tests/browser.py.
Constructed data is generated in each test; the demo data (invented) only in the end-to-end run.
"""
from __future__ import annotations

import hashlib
import json
import os
import shutil
import subprocess
import sys
import xml.etree.ElementTree as ET
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from figkit import compare as CMP
from figkit import snapshot as S
from figkit.cli import main
from figkit.errors import FigkitError

from browser import require_browser, visit
from conftest import snakemake

ROOT = Path(__file__).resolve().parents[1]

CONFIG = """\
sheet: config/figures.tsv
results: results
style: house
formats: [png]
dpi: 300
datasets:
  obs: data/obs.csv
"""


def _project(root: Path, rows: list[dict], obs: pd.DataFrame) -> Path:
    """A tiny project drawn with figkit.render (no Snakemake): one dataset, the given rows."""
    from figkit.render import load_project, render
    (root / "config").mkdir(parents=True, exist_ok=True)
    (root / "data").mkdir(exist_ok=True)
    if not (root / "styles").exists():
        (root / "styles").symlink_to(ROOT / "figkit" / "styles")
    (root / "config" / "config.yaml").write_text(CONFIG, encoding="utf-8")
    header = sorted({k for r in rows for k in r}, key=lambda k: (k != "id", k))
    lines = ["\t".join(header)] + ["\t".join(str(r.get(k, "")) for k in header) for r in rows]
    (root / "config" / "figures.tsv").write_text("\n".join(lines) + "\n", encoding="utf-8")
    obs.to_csv(root / "data" / "obs.csv", index=False)
    project = load_project(root)
    for r in rows:
        render(project, r["id"])
    return root


def _two_versions(tmp_path, rows, old: pd.DataFrame, new: pd.DataFrame):
    """Build, snapshot as 'v1', replace the data, rebuild; returns (project, report)."""
    from figkit.render import load_project
    root = _project(tmp_path / "p", rows, old)
    S.take_snapshot(load_project(root), "v1")
    _project(root, rows, new)
    project = load_project(root)
    report = CMP.compare_builds(S.resolve_build("v1", project), S.current_build(project))
    return project, report


def _conclusions(report, fid):
    (fc,) = [f for f in report.figures if f.id == fid]
    return fc.conclusions


# ----------------------------------------------------------------------------- conclusions

def test_slope_interval_that_starts_to_cover_zero_is_a_conclusion(tmp_path):
    """Removing rows widens a slope interval until it covers 0: the reader can no longer say the
    slope is positive.  Whether each interval covers 0 is taken from statsmodels OLS."""
    import statsmodels.api as sm
    rng = np.random.default_rng(1979)
    x = rng.uniform(0, 10, 80)
    y = 1.0 + 0.25 * x + rng.normal(0, 1.5, 80)
    full = pd.DataFrame({"site": "north", "dose": x.round(3), "growth": y.round(3)})
    few = full.iloc[:7]

    def covers_zero(df):
        lo, hi = sm.OLS(df["growth"], sm.add_constant(df["dose"])).fit().conf_int(0.05).loc["dose"]
        return lo <= 0 <= hi
    assert not covers_zero(full) and covers_zero(few)     # the construction works (statsmodels)
    rows = [{"id": "growth", "dataset": "obs", "chart": "scatter", "x": "dose", "y": "growth",
             "strata": "site", "trend": "line", "size": "single"}]
    _, report = _two_versions(tmp_path, rows, full, few)
    concl = {c.what: c for c in _conclusions(report, "growth")}
    trend = concl["panel 'north' line trend"]
    assert "95% interval now includes 0" in trend.note and trend.level == "conclusion"
    sm_ci = sm.OLS(few["growth"], sm.add_constant(few["dose"])).fit().conf_int(0.05).loc["dose"]
    assert trend.new == pytest.approx(list(sm_ci), rel=1e-6)
    assert concl["panel 'north' n"].old == 80 and concl["panel 'north' n"].new == 7
    # the terminal lists it before any numeric detail
    text = report.summary()
    assert text.index("CONCLUSION panel 'north' line trend") < text.index("slope_ci_low")


def test_slope_sign_change_is_a_conclusion_and_a_steady_slope_is_not(tmp_path):
    rng = np.random.default_rng(7)
    x = rng.uniform(0, 10, 60)
    e = rng.normal(0, 0.5, 60)
    old = pd.DataFrame({"site": ["a"] * 30 + ["b"] * 30, "dose": x.round(3),
                        "growth": np.r_[0.8 * x[:30], 0.5 * x[30:]] + e})
    new = old.copy()
    new.loc[new.site == "a", "growth"] = -0.8 * x[:30] + e[:30]
    rows = [{"id": "g", "dataset": "obs", "chart": "scatter", "x": "dose", "y": "growth",
             "strata": "site", "trend": "line", "size": "full"}]
    _, report = _two_versions(tmp_path, rows, old, new)
    concl = {c.what: c for c in _conclusions(report, "g")}
    assert "slope changed sign" in concl["panel 'a' line trend"].note
    assert "panel 'b' line trend" not in concl         # b's data did not change


def test_strata_test_crossing_005_is_a_conclusion_with_p_from_anova_lm(tmp_path):
    """Two sites with equal slopes (p well above 0.05), then with different slopes (p below):
    figkit's p equals statsmodels ``anova_lm`` of the nested models y ~ x + site and
    y ~ x * site, and the crossing is flagged."""
    import statsmodels.formula.api as smf
    from statsmodels.stats.anova import anova_lm
    rng = np.random.default_rng(2010)
    x = rng.uniform(0, 10, 80)
    e = rng.normal(0, 1.0, 80)
    site = np.repeat(["north", "south"], 40)
    old = pd.DataFrame({"site": site, "dose": x.round(4), "growth": (2 + 0.5 * x + e).round(4)})
    new = old.copy()
    new.loc[40:, "growth"] = (2 + 0.9 * x[40:] + e[40:]).round(4)

    def p_anova(df):
        small = smf.ols("growth ~ dose + C(site)", df).fit()
        big = smf.ols("growth ~ dose * C(site)", df).fit()
        return float(anova_lm(small, big)["Pr(>F)"].iloc[1])
    p_old, p_new = p_anova(old), p_anova(new)
    assert p_old >= 0.05 > p_new                       # the construction crosses (statsmodels)
    rows = [{"id": "g", "dataset": "obs", "chart": "scatter", "x": "dose", "y": "growth",
             "strata": "site", "trend": "line", "size": "full"}]
    _, report = _two_versions(tmp_path, rows, old, new)
    (c,) = [c for c in _conclusions(report, "g") if c.what == "strata test p"]
    assert c.old == pytest.approx(p_old, rel=1e-6) and c.new == pytest.approx(p_new, rel=1e-6)
    assert "now below 0.05" in c.note


def test_shares_moved_by_five_points_or_more_are_conclusions(tmp_path):
    """Shares of 'yes' per category: A moves by +6 points, B by +3, C by exactly +5 (the
    threshold counts, "moving by >= 5").  Points checked against a pandas crosstab."""
    def frame(counts):
        recs = [(cat, ans) for cat, (yes, no) in counts.items()
                for ans, k in (("yes", yes), ("no", no)) for _ in range(k)]
        return pd.DataFrame(recs, columns=["kind", "answer"])
    old = frame({"A": (30, 70), "B": (50, 50), "C": (20, 80)})
    new = frame({"A": (36, 64), "B": (53, 47), "C": (25, 75)})
    ct = lambda df: pd.crosstab(df["kind"], df["answer"], normalize="index")["yes"]  # noqa: E731
    moved = ((ct(new) - ct(old)) * 100).round(9)
    assert moved.to_dict() == {"A": 6.0, "B": 3.0, "C": 5.0}
    rows = [{"id": "s", "dataset": "obs", "chart": "shares", "x": "kind", "colour": "answer",
             "size": "single"}]
    _, report = _two_versions(tmp_path, rows, old, new)
    shares = {c.what: c for c in _conclusions(report, "s") if " share " in c.what}
    flagged = sorted(w.split(" share ")[1].split(" / ")[0] for w in shares)
    assert flagged == sorted(k for k, v in moved.items() if v >= 5)      # A and C, not B
    full = lambda df: pd.crosstab(df["kind"], df["answer"], normalize="index")  # noqa: E731
    for w, c in shares.items():          # "panel '...' share <category> / <stacked group>"
        kind, group = w.split(" share ")[1].split(" / ")
        points = (full(new).loc[kind, group] - full(old).loc[kind, group]) * 100
        assert (c.new - c.old) * 100 == pytest.approx(points)
        assert c.note == f"{points:+.1f} percentage points"


def test_order_of_groups_and_categories_appearing(tmp_path):
    """Box medians by hand: old a < b < c; new b above c (a swap), and category d appears."""
    old = pd.DataFrame({"grp": list("aaabbbccc"), "v": [1, 2, 3, 4, 5, 6, 7, 8, 9]})
    new = pd.DataFrame({"grp": list("aaabbbcccddd"), "v": [1, 2, 3, 9, 10, 11, 7, 8, 9, 2, 2, 2]})
    rows = [{"id": "b", "dataset": "obs", "chart": "box", "x": "grp", "y": "v", "size": "single"}]
    _, report = _two_versions(tmp_path, rows, old, new)
    concl = _conclusions(report, "b")
    order = [c for c in concl if "order of groups" in c.what]
    assert len(order) == 1 and "'b' now above 'c'" in order[0].note
    assert order[0].old == "c > b > a" and order[0].new == "b > c > a"
    assert any(c.what.endswith("groups new") and c.new == ["d"] for c in concl)


def test_unchanged_pixels_and_numbers_are_unchanged_whatever_the_inputs_say(tmp_path):
    """Same drawing, other input hash and other PNG text: "unchanged", the input reported."""
    from PIL import Image, PngImagePlugin
    rng = np.random.default_rng(3)
    df = pd.DataFrame({"site": "n", "dose": rng.uniform(0, 9, 40).round(2),
                       "growth": rng.uniform(0, 9, 40).round(2)})
    rows = [{"id": "h", "dataset": "obs", "chart": "histogram", "x": "dose", "size": "single"}]
    root = _project(tmp_path / "p", rows, df)
    figs = root / "results" / "figures"
    other = tmp_path / "other"
    shutil.copytree(figs, other)
    sc = json.loads((other / "h.json").read_text())
    sc["inputs"][0]["sha256"] = "0" * 64
    (other / "h.json").write_text(json.dumps(sc))
    with Image.open(figs / "h.png") as im:
        info = PngImagePlugin.PngInfo()
        info.add_text("Comment", "another provenance text")
        im.save(other / "h.png", pnginfo=info, dpi=(300, 300))
    report = CMP.compare_folders(figs, other)
    (fc,) = report.figures
    assert not fc.changed and fc.pixels == "identical"
    assert [c.what for c in fc.provenance] == ["input data/obs.csv"]
    assert "unchanged although their inputs changed: h" in report.summary()


# ----------------------------------------------------------------------------- snapshots

def _file_hash(p: Path) -> str:
    return hashlib.sha256(p.read_bytes()).hexdigest()


def test_snapshot_manifest_hashes_and_no_overwrite(tmp_path):
    from figkit.render import load_project
    rng = np.random.default_rng(4)
    df = pd.DataFrame({"site": "n", "dose": rng.uniform(0, 9, 30).round(2),
                       "growth": rng.uniform(0, 9, 30).round(2)})
    rows = [{"id": "h", "dataset": "obs", "chart": "histogram", "x": "dose", "size": "single"},
            {"id": "never", "dataset": "obs", "chart": "histogram", "x": "growth", "size": "single"}]
    root = _project(tmp_path / "p", rows[:1], df)
    (root / "config" / "figures.tsv").write_text(
        "id\tdataset\tchart\tx\tsize\nh\tobs\thistogram\tdose\tsingle\n"
        "never\tobs\thistogram\tgrowth\tsingle\n", encoding="utf-8")
    project = load_project(root)
    m = S.take_snapshot(project, "first", note="as submitted")
    folder = root / "results" / "snapshots" / "first"
    on_disk = json.loads((folder / "manifest.json").read_text())
    assert on_disk["name"] == "first" and on_disk["note"] == "as submitted"
    assert on_disk["figures"] == ["h"] and on_disk["not_built"] == ["never"]
    # every hash is the file's SHA-256 (hashlib, FIPS 180-4)
    assert on_disk["project"]["datasets"]["obs"]["sha256"] == _file_hash(root / "data" / "obs.csv")
    assert on_disk["project"]["sheet"]["sha256"] == _file_hash(root / "config" / "figures.tsv")
    assert on_disk["project"]["settings"]["sha256"] == _file_hash(root / "config" / "config.yaml")
    assert on_disk["project"]["styles"]["house.yaml"] == _file_hash(root / "styles" / "house.yaml")
    for rel, rec in on_disk["files"].items():
        assert rec["sha256"] == _file_hash(folder / rel)
        assert rec["sha256"] == _file_hash(root / "results" / "figures" / Path(rel).name)
    built = sorted(f"figures/{p.name}" for p in (root / "results" / "figures").glob("h.*"))
    assert sorted(on_disk["files"]) == built and "figures/h.stats.csv" in built
    assert m["stored"]["files"] == len(built)
    # never overwritten silently; --replace does, and leaves no temporary folder behind
    with pytest.raises(FigkitError, match="exists .*--replace"):
        S.take_snapshot(project, "first")
    S.take_snapshot(project, "first", replace=True, note="again")
    assert json.loads((folder / "manifest.json").read_text())["note"] == "again"
    assert sorted(p.name for p in (root / "results" / "snapshots").iterdir()) == [".store", "first"]


def test_a_failed_snapshot_leaves_nothing(tmp_path, monkeypatch):
    from figkit.render import load_project
    df = pd.DataFrame({"dose": np.arange(30.0), "growth": np.arange(30.0)})
    root = _project(tmp_path / "p", [{"id": "h", "dataset": "obs", "chart": "histogram",
                                       "x": "dose", "size": "single"}], df)
    project = load_project(root)

    def broken(*a, **k):
        raise KeyboardInterrupt            # the user pressed Ctrl-C half-way
    monkeypatch.setattr(S, "dumps", broken)
    with pytest.raises(KeyboardInterrupt):
        S.take_snapshot(project, "half")
    snaps = root / "results" / "snapshots"
    assert not (snaps / "half").exists()
    assert [p.name for p in snaps.iterdir() if p.name != ".store"] == []


@pytest.fixture(scope="module")
def tiny(tmp_path_factory):
    from figkit.render import load_project
    df = pd.DataFrame({"dose": np.arange(30.0), "growth": np.arange(30.0)})
    root = _project(tmp_path_factory.mktemp("tiny") / "p", [{"id": "h", "dataset": "obs",
                    "chart": "histogram", "x": "dose", "size": "single"}], df)
    return load_project(root)


@settings(max_examples=40, deadline=None)
@given(st.text(min_size=0, max_size=80))
def test_any_snapshot_name_is_taken_or_refused_in_one_line(tiny, name):
    """Every name either becomes exactly results/snapshots/<name> (found again by name) or is
    refused in one line before anything is written."""
    snaps = tiny.config.results / "snapshots"
    before = sorted(p.name for p in snaps.iterdir()) if snaps.is_dir() else []
    try:
        S.take_snapshot(tiny, name, replace=True)
    except FigkitError as exc:
        assert "\n" not in str(exc).replace(repr(name), "") and "allowed" in str(exc)
        after = sorted(p.name for p in snaps.iterdir()) if snaps.is_dir() else []
        assert after == before
        return
    assert (snaps / name / "manifest.json").is_file() and (snaps / name).parent == snaps
    assert S.resolve_build(name, tiny).name == name


def test_abandoned_snapshot_folders_of_dead_commands_are_cleared(tiny):
    """A snapshot command killed with SIGKILL leaves its hidden temporary folder; the next one
    removes it when no process of that id runs (POSIX kill(pid, 0))."""
    snaps = tiny.config.results / "snapshots"
    snaps.mkdir(parents=True, exist_ok=True)
    dead = subprocess.Popen([sys.executable, "-c", "pass"])
    dead.wait()                                  # a process id that no longer runs
    left = snaps / f".killed.{dead.pid}.part"
    (left / "figures").mkdir(parents=True)
    alive = snaps / f".busy.{os.getpid()}.part"     # this very process: still running
    alive.mkdir()
    S.take_snapshot(tiny, "after-kill", replace=True)
    assert not left.exists() and alive.exists()
    alive.rmdir()


# ----------------------------------------------------------------------------- end to end

@pytest.fixture(scope="module")
def versions(built_demo, tmp_path_factory):
    """The demo built, snapshot 'v1', the surveys regenerated with another seed, rebuilt through
    Snakemake, snapshot 'v2' of that; and the rows reading surveys.csv."""
    project = tmp_path_factory.mktemp("versions") / "p"
    shutil.copytree(built_demo, project, symlinks=True)
    env_main = lambda *a: main([*a, "--project", str(project)])  # noqa: E731
    assert env_main("snapshot", "v1") == 0
    other = tmp_path_factory.mktemp("seed2")
    subprocess.run([sys.executable, "-m", "figkit.demo", str(other), "--scale", "0.05",
                    "--seed", "99"], check=True, capture_output=True)
    shutil.copy(other / "surveys.csv", project / "data" / "surveys.csv")
    snakemake(project)
    # every figure that reads surveys.csv, a figure made of parts through one of its parts too
    readers = sorted(json.loads(p.read_text())["id"] for p in (project / "results" / "figures")
                     .glob("*.json") if "data/surveys.csv" in
                     [i["path"] for i in json.loads(p.read_text())["inputs"]])
    assert env_main("snapshot", "v2") == 0
    return project, readers


def _figures(project) -> int:
    """Figure rows of the project's sheet (every one is built)."""
    lines = (project / "config" / "figures.tsv").read_text(encoding="utf-8").splitlines()[1:]
    return sum(1 for ln in lines if ln.strip() and not ln.startswith("#"))


def test_gate_fails_naming_the_changed_figures_and_passes_an_unchanged_snapshot(versions, capsys,
                                                                                tmp_path):
    project, readers = versions
    capsys.readouterr()
    junit = tmp_path / "gate.xml"
    assert main(["check", "v1", "--project", str(project), "--junit", str(junit)]) == 1
    out = capsys.readouterr().out
    changed = sorted(line.split()[3].rstrip(":") for line in out.splitlines()
                     if line.startswith("figkit: check: CHANGED"))
    # exactly the figures of surveys.csv: 5 rows read it, and the multi-part figure with a part
    # that does
    assert changed == readers and len(readers) == 6
    root = ET.parse(junit).getroot()
    (suite,) = root.findall("testsuite")
    cases = {c.get("name"): c for c in suite.findall("testcase")}
    assert int(suite.get("tests")) == len(cases) == _figures(project)
    assert int(suite.get("failures")) == len(readers)
    assert sorted(n for n, c in cases.items() if c.find("failure") is not None) == readers
    for n in readers:
        assert cases[n].find("failure").get("message")
    props = {p.get("name"): p.get("value") for p in suite.find("properties")}
    assert props["ssim_min"] == "0.99" and props["snapshot"] == "v1"
    # against the snapshot of this very build: exit 0, every case passes
    assert main(["check", "v2", "--project", str(project), "--junit", str(junit)]) == 0
    suite = ET.parse(junit).getroot().find("testsuite")
    assert suite.get("failures") == "0" and len(suite.findall("testcase")) == _figures(project)
    # bad input: exit 2 with one line
    assert main(["check", "nope", "--project", str(project)]) == 2
    err = capsys.readouterr().err.strip()
    assert err.startswith("figkit: error:") and "v1, v2" in err and "\n" not in err


def test_junit_layout_matches_what_pytest_writes(tmp_path):
    """The element and attribute names CI servers read, as pytest's --junitxml writes them."""
    (tmp_path / "test_x.py").write_text("def test_ok():\n    pass\n\n"
                                        "def test_bad():\n    assert 0, 'why'\n")
    subprocess.run([sys.executable, "-m", "pytest", "-q", "-p", "no:cacheprovider",
                    f"--junitxml={tmp_path / 'ref.xml'}", str(tmp_path / "test_x.py")],
                   capture_output=True, cwd=tmp_path)
    ref = ET.parse(tmp_path / "ref.xml").getroot()
    from figkit.gate import GateResult, Verdict, junit_xml
    report = CMP.Report(Path("a"), Path("b"), 0.0)
    ours = ET.fromstring(junit_xml(GateResult("v1", report, [
        Verdict("ok", True), Verdict("bad\x1bname", False, ["why \x00 <b>"])])))
    for root in (ref, ours):
        suite = root.find("testsuite") if root.tag == "testsuites" else root
        assert root.tag == "testsuites" and suite.tag == "testsuite"
        assert {"name", "tests", "failures", "errors", "skipped", "time"} <= set(suite.attrib)
        cases = suite.findall("testcase")
        assert len(cases) == 2 and all({"classname", "name", "time"} <= set(c.attrib)
                                       for c in cases)
        fails = [c.find("failure") for c in cases if c.find("failure") is not None]
        assert len(fails) == 1 and "message" in fails[0].attrib
    bad = [c for c in ours.iter("testcase") if c.find("failure") is not None][0]
    assert bad.find("failure").get("message") == "why \ufffd <b>"   # XML 1.0 has no NUL


def test_compare_by_name_and_snapshots_share_unchanged_files(versions, capsys):
    project, readers = versions
    snaps = project / "results" / "snapshots"
    v1, v2 = json.loads((snaps / "v1" / "manifest.json").read_text()), \
        json.loads((snaps / "v2" / "manifest.json").read_text())
    same = [rel for rel in v1["files"] if v2["files"].get(rel, {}).get("sha256")
            == v1["files"][rel]["sha256"]]
    assert same and len(same) < len(v1["files"])
    for rel in same:                         # one file on disk for both (POSIX hard links)
        assert os.stat(snaps / "v1" / rel).st_ino == os.stat(snaps / "v2" / rel).st_ino
    objects = [p for p in (snaps / ".store").rglob("*") if p.is_file() and p.parent.name != "reduced"]
    distinct = {r["sha256"] for m in (v1, v2) for r in m["files"].values()}
    assert len(objects) == len(distinct)
    # the snapshot command left each render reduced to the comparison resolution, and comparing
    # with those copies gives the numbers decoding the full renders gives
    reduced = {p.name.split(".")[0] for p in (snaps / ".store" / "reduced").glob("*.png")}
    assert {r["sha256"] for rel, r in v1["files"].items() if rel.endswith(".png")} <= reduced
    cached = CMP.compare_builds(S.snapshot_build(snaps / "v1"), S.snapshot_build(snaps / "v2"))
    plain = CMP.compare_folders(snaps / "v1" / "figures", snaps / "v2" / "figures")
    assert [(f.id, f.rms, f.ssim) for f in cached.figures] == \
        [(f.id, f.rms, f.ssim) for f in plain.figures]
    # snapshots lists both, and says which data file differs from now
    capsys.readouterr()
    assert main(["snapshots", "--project", str(project)]) == 0
    lines = capsys.readouterr().out.splitlines()
    v1_line = [ln for ln in lines if ln.startswith("v1 ")][0]
    v2_line = [ln for ln in lines if ln.startswith("v2 ")][0]
    assert "data surveys" in v1_line and "readings" not in v1_line
    assert v2_line.rstrip().endswith("nothing")
    # compare by name, NEW defaulting to the current build
    assert main(["compare", "v1", "--project", str(project)]) == 0
    text = capsys.readouterr().out
    assert "snapshot 'v1'" in text and "-> current build" in text
    assert f"{len(readers)} changed" in text and f"{_figures(project) - len(readers)} unchanged" in text
    assert "data data/surveys.csv" in text and "data data/readings.csv" not in text


def test_review_page_in_a_headless_browser(versions, tmp_path, capsys):
    """The review page opened from file:// in Chromium: no console errors, every image loaded,
    the summary counts equal the comparison's, conclusions listed; a screenshot is kept."""
    require_browser()
    project, readers = versions
    review = tmp_path / "review"
    assert main(["compare", "v1", "v2", "--project", str(project), "--review", str(review)]) == 0
    result = json.loads((review / "compare.json").read_text())
    shot = tmp_path / "review.png"
    seen = visit(review / "index.html", screenshot=shot,
                 selectors=("[data-count]", "section.figure h2", "ul.conclusions li",
                            "script", "link"))
    assert seen.errors == []
    assert seen.images and all(i["natural_width"] > 0 for i in seen.images), seen.images
    counts = {}
    for text in seen.texts["[data-count]"]:           # "<b>4</b>changed a conclusion"
        label = text.lstrip("0123456789")
        counts[label] = int(text[:len(text) - len(label)])
    assert counts == {"changed a conclusion": result["counts"]["conclusions_changed"],
                      "changed": result["counts"]["changed"],
                      "unchanged": result["counts"]["unchanged"],
                      "added": result["counts"]["added"], "removed": result["counts"]["removed"]}
    assert result["counts"]["changed"] == len(readers)
    assert result["counts"]["unchanged"] == _figures(project) - len(readers)
    headings = [h.split()[0] for h in seen.texts["section.figure h2"]]
    assert sorted(headings[:len(readers)]) == readers      # changed figures come first
    assert seen.texts["script"] == [] and seen.texts["link"] == []    # nothing external
    html = (review / "index.html").read_text()
    assert "http://" not in html and "https://" not in html
    assert shot.is_file() and shot.stat().st_size > 10_000


def test_hostile_figure_ids_and_notes_stay_text_on_the_review_page(tmp_path):
    """A caution carrying markup reaches the page as text: no element is made from it."""
    require_browser()
    old = {"id": "x", "panels": [{"label": "<b>p</b>", "n": 10}], "cautions": []}
    new = {"id": "x", "panels": [{"label": "<b>p</b>", "n": 20}],
           "cautions": ['<img src=x onerror="window.__pwned=1">']}
    for side, sc in (("old", old), ("new", new)):
        (tmp_path / side).mkdir()
        (tmp_path / side / "x.json").write_text(json.dumps(sc))
    report = CMP.compare_folders(tmp_path / "old", tmp_path / "new")
    from figkit.review import write_review
    page = write_review(report, S.Build("old", tmp_path / "old"), S.Build("new", tmp_path / "new"),
                        tmp_path / "r")
    seen = visit(page, selectors=("ul.conclusions li", "img", "b"), hooks=("__pwned",))
    assert seen.hooks["__pwned"] is None and seen.errors == []
    assert any('onerror="window.__pwned=1"' in t for t in seen.texts["ul.conclusions li"])
    assert all(t != "p" for t in seen.texts["b"])        # the label's <b> is not an element


def test_without_hard_links_files_are_copied_and_said_so(tmp_path, monkeypatch):
    from figkit.render import load_project
    df = pd.DataFrame({"dose": np.arange(30.0), "growth": np.arange(30.0)})
    root = _project(tmp_path / "p", [{"id": "h", "dataset": "obs", "chart": "histogram",
                                       "x": "dose", "size": "single"}], df)

    def no_links(*a, **k):
        raise OSError(1, "Operation not permitted")       # EPERM, as some file systems say
    monkeypatch.setattr(S.os, "link", no_links)
    m = S.take_snapshot(load_project(root), "copied")
    assert m["stored"]["copied"] == m["stored"]["files"] >= 3
    folder = root / "results" / "snapshots" / "copied"
    assert {r["stored"] for r in m["files"].values()} == {"copy"}
    for rel, rec in m["files"].items():
        assert _file_hash(folder / rel) == rec["sha256"] and os.stat(folder / rel).st_nlink == 1


def test_a_stale_current_build_is_named(versions, tmp_path, capsys):
    """Data edited after the build: compare and check say which figures are older than their
    data (the check still judges the files as they are)."""
    project, readers = versions
    copy = tmp_path / "p"
    shutil.copytree(project, copy, symlinks=True)
    path = copy / "data" / "surveys.csv"
    lines = path.read_text().splitlines(keepends=True)
    path.write_text("".join(lines + [lines[-1]]))
    capsys.readouterr()
    assert main(["compare", "v2", "--project", str(copy)]) == 0
    out = capsys.readouterr().out
    assert "older than their data" in out and ", ".join(readers) in out
    capsys.readouterr()
    assert main(["check", "v2", "--project", str(copy)]) == 1     # not the current build
    out = capsys.readouterr().out
    failed = sorted(ln.split()[3].rstrip(":") for ln in out.splitlines() if "CHANGED" in ln)
    assert failed == readers and "older than its data files" in out


def test_thresholds_come_from_the_house_style_and_are_recorded(tmp_path, capsys):
    """A style whose review: block asks for 7 points: A's +6 points is no longer a conclusion,
    and the review's compare.json records share_points 7 (the shares are those of the crosstab
    test above)."""
    import yaml
    def frame(counts):
        recs = [(cat, ans) for cat, (yes, no) in counts.items()
                for ans, k in (("yes", yes), ("no", no)) for _ in range(k)]
        return pd.DataFrame(recs, columns=["kind", "answer"])
    root = tmp_path / "p"
    (root / "styles").mkdir(parents=True)
    for f in (ROOT / "figkit" / "styles").iterdir():
        shutil.copy(f, root / "styles" / f.name)
    style = yaml.safe_load((root / "styles" / "house.yaml").read_text())
    style["review"]["share_points"] = 7
    (root / "styles" / "house.yaml").write_text(yaml.safe_dump(style))
    rows = [{"id": "s", "dataset": "obs", "chart": "shares", "x": "kind", "colour": "answer",
             "size": "single"}]
    from figkit.render import load_project
    _project(root, rows, frame({"A": (30, 70), "C": (20, 80)}))
    S.take_snapshot(load_project(root), "v1")
    _project(root, rows, frame({"A": (36, 64), "C": (28, 72)}))        # +6 and +8 points
    assert main(["compare", "v1", "--project", str(root), "--review", str(tmp_path / "r")]) == 0
    result = json.loads((tmp_path / "r" / "compare.json").read_text())
    assert result["thresholds"]["share_points"] == 7
    (fig,) = result["figures"]
    flagged = [c["what"] for c in fig["conclusions"] if " share " in c["what"]]
    assert len(flagged) == 1 and " share C / " in flagged[0]
    # a bad review setting is one line naming it and what is allowed
    style["review"]["share_points"] = "lots"
    (root / "styles" / "house.yaml").write_text(yaml.safe_dump(style))
    capsys.readouterr()
    assert main(["compare", "v1", "--project", str(root)]) == 2
    err = capsys.readouterr().err.strip()
    assert "review.share_points" in err and "from 0 to 100" in err and "\n" not in err


def test_three_stacked_parts_every_share_is_judged(tmp_path):
    """Three parts: A .30 -> .33, B .30 -> .33, C .40 -> .34 of the same category: only C moves
    by >= 5 points (-6), and it is flagged although it is the last part (pandas crosstab)."""
    def frame(parts):
        return pd.DataFrame([("k", g) for g, n in parts.items() for _ in range(n)],
                            columns=["kind", "part"])
    old, new = frame({"A": 30, "B": 30, "C": 40}), frame({"A": 33, "B": 33, "C": 34})
    ct = lambda df: pd.crosstab(df["kind"], df["part"], normalize="index").loc["k"]  # noqa: E731
    points = ((ct(new) - ct(old)) * 100).round(9).to_dict()
    assert points == {"A": 3.0, "B": 3.0, "C": -6.0}
    rows = [{"id": "s", "dataset": "obs", "chart": "shares", "x": "kind", "colour": "part",
             "size": "single"}]
    _, report = _two_versions(tmp_path, rows, old, new)
    flagged = {c.what.split(" / ")[-1]: c for c in _conclusions(report, "s") if " share " in c.what}
    assert sorted(flagged) == ["C"] and flagged["C"].note == "-6.0 percentage points"


def test_a_caution_naming_one_more_panel_is_a_new_caution():
    """Two cautions of one kind where there was one (numbers masked alike): the new text is a
    caution added; the same count with other numbers is only reworded (hand-made sidecars)."""
    base = {"id": "x", "panels": [], "cautions": ["panel 'S07': a caution about 3 rows"]}
    more = dict(base, cautions=base["cautions"] + ["panel 'S08': a caution about 5 rows"])
    (c,) = CMP.conclusions(base, more)
    assert c.what == "caution added" and "S08" in c.new
    (c,) = CMP.conclusions(more, base)
    assert c.what == "caution removed" and "S08" in c.old
    other = dict(base, cautions=["panel 'S07': a caution about 4 rows"])
    assert CMP.conclusions(base, other) == []
    (d,) = CMP.compare_sidecars(base, other)
    assert d.note == "same caution, other numbers"


def test_review_folder_with_other_files_is_refused_and_kept(versions, tmp_path, capsys):
    project, _ = versions
    mine = tmp_path / "notes"
    (mine / "img").mkdir(parents=True)
    (mine / "img" / "my-figure.png").write_bytes(b"not ours")
    capsys.readouterr()
    assert main(["compare", "v1", "--project", str(project), "--review", str(mine)]) == 2
    err = capsys.readouterr().err.strip()
    assert err.startswith("figkit: error:") and "not an earlier review page" in err
    assert (mine / "img" / "my-figure.png").read_bytes() == b"not ours"
    # a page written before is rewritten in place, its own images replaced
    page = tmp_path / "page"
    for _ in range(2):
        assert main(["compare", "v1", "v2", "--project", str(project), "--review", str(page)]) == 0
    assert sorted(p.name for p in page.iterdir()) == ["compare.json", "img", "index.html"]


def test_bad_gate_and_compare_paths_are_one_line_errors(versions, tmp_path, capsys):
    project, _ = versions
    capsys.readouterr()
    assert main(["check", "v1", "--project", str(project), "--junit", str(tmp_path)]) == 2
    assert "--junit names a folder" in capsys.readouterr().err
    (tmp_path / "empty").mkdir()
    assert main(["compare", str(tmp_path / "empty"), "--project", str(project)]) == 2
    err = capsys.readouterr().err.strip()
    assert "no figure sidecars" in err and "old" in err and "\n" not in err


def test_out_never_writes_outside_its_folder(tmp_path):
    """A sidecar claiming the id '../../escape' (not a sheet id) gets an index-named file."""
    from PIL import Image
    for side, colour in (("old", 0), ("new", 255)):
        (tmp_path / side).mkdir()
        Image.new("RGB", (40, 30), (colour, 0, 0)).save(tmp_path / side / "f.png", dpi=(150, 150))
        (tmp_path / side / "f.json").write_text(json.dumps(
            {"id": "../../escape", "dpi": 150, "panels": [], "files": {"png": "f.png"}}))
    out = tmp_path / "deep" / "out"
    report = CMP.compare_folders(tmp_path / "old", tmp_path / "new", out)
    (fc,) = report.changed
    assert fc.diff_png.parent == out and fc.diff_png.name == "figure-001.diff.png"
    assert not (tmp_path / "escape.diff.png").exists()


def test_builds_without_png_say_their_pixels_were_not_compared(tmp_path, capsys):
    from figkit.render import load_project
    df = pd.DataFrame({"dose": np.arange(30.0), "growth": np.arange(30.0)})
    root = _project(tmp_path / "p", [{"id": "h", "dataset": "obs", "chart": "histogram",
                                      "x": "dose", "size": "single"}], df)
    for p in (root / "results" / "figures").glob("*.png"):    # as a build of formats: [pdf]
        p.unlink()
    S.take_snapshot(load_project(root), "v1")
    capsys.readouterr()
    assert main(["check", "v1", "--project", str(root)]) == 0
    assert "no PNG to compare, numbers checked only: h" in capsys.readouterr().out


def test_changes_md_shows_markup_from_sidecars_as_text(tmp_path):
    """A caution quoting a data value that looks like HTML reaches changes.md as entities
    (CommonMark passes raw HTML through; entities are shown as the characters)."""
    old = {"id": "x", "panels": [{"label": "p", "n": 10}], "cautions": []}
    new = {"id": "x", "panels": [{"label": "p", "n": 10}],
           "cautions": ['<img src=x onerror="alert(1)"> & more']}
    for side, sc in (("old", old), ("new", new)):
        (tmp_path / side).mkdir()
        (tmp_path / side / "x.json").write_text(json.dumps(sc))
    CMP.compare_folders(tmp_path / "old", tmp_path / "new", tmp_path / "out")
    md = (tmp_path / "out" / "changes.md").read_text()
    assert "<img" not in md and '&lt;img src=x onerror="alert(1)"> &amp; more' in md


def test_axis_ranges_are_recorded_and_a_moved_axis_is_reported(tmp_path):
    """The sidecar records each numeric axis's drawn range; it holds every data value (pandas
    min/max); when new data widen the range, compare says the axis moved."""
    rng = np.random.default_rng(12)
    old = pd.DataFrame({"site": "n", "dose": rng.uniform(0, 10, 40).round(3),
                        "growth": rng.uniform(0, 5, 40).round(3)})
    new = old.copy()
    new.loc[0, "dose"] = 30.0
    rows = [{"id": "g", "dataset": "obs", "chart": "scatter", "x": "dose", "y": "growth",
             "size": "single"}]
    project, report = _two_versions(tmp_path, rows, old, new)
    sc = json.loads((project.config.results / "figures" / "g.json").read_text())
    lo, hi = sc["layout"]["x_range"]
    assert lo <= new["dose"].min() and new["dose"].max() <= hi
    lo, hi = sc["layout"]["y_range"]
    assert lo <= new["growth"].min() and new["growth"].max() <= hi
    (fc,) = report.figures
    moved = {c.what: c for c in fc.details}
    assert "layout x_range" in moved and moved["layout x_range"].new[1] >= 30.0
    from figkit.review import write_review
    page = write_review(report, S.Build("a", tmp_path / "x"), S.Build("b", tmp_path / "y"),
                        tmp_path / "r")
    assert "The axes moved" in page.read_text()
