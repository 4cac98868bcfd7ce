"""Malformed rows: each mistake gives one line naming row, figure, field, bad value and what is
allowed; no traceback and no half-written output."""
from __future__ import annotations

import shutil
import subprocess
import sys
from pathlib import Path

import pytest

from conftest import make_demo_data, snakemake

HEADER = ["id", "dataset", "chart", "x", "y", "colour", "weight", "strata", "trend", "ranges",
          "filter", "bands", "size", "options"]
GOOD = dict(id="good", dataset="readings", chart="scatter", x="water_temp_c", y="dissolved_oxygen_mgl",
            strata="land_use")

# (row cells, words the one-line message must contain)
CASES = {
    "unknown chart": (dict(GOOD, id="b1", chart="pie"),
                      ["row 3", "b1", "chart", "'pie'", "scatter", "hexbins"]),
    "unknown dataset": (dict(GOOD, id="b2", dataset="rainfall"),
                        ["row 3", "b2", "dataset", "'rainfall'", "readings"]),
    "unknown field": (dict(GOOD, id="b3", x="water_temp"),
                      ["row 3", "b3", "field 'x'", "'water_temp'", "water_temp_c"]),
    "text where numbers needed": (dict(GOOD, id="b4", y="site"),
                                  ["row 3", "b4", "field 'y'", "site", "numeric"]),
    "chart needs y": (dict(GOOD, id="b5", y=""), ["row 3", "b5", "field 'y'", "needs"]),
    "chart takes no y": (dict(GOOD, id="b6", chart="histogram"),
                         ["row 3", "b6", "field 'y'", "dissolved_oxygen_mgl", "leave 'y' empty"]),
    "trend on a box plot": (dict(GOOD, id="b7", chart="box", x="land_use", trend="line"),
                            ["row 3", "b7", "trend", "'line'", "scatter", "hexbins"]),
    "unknown preset": (dict(GOOD, id="b8", size="double"),
                       ["row 3", "b8", "size", "'double'", "single", "full"]),
    "bad filter grammar": (dict(GOOD, id="b9", filter="season == 'summer' and"),
                           ["row 3", "b9", "filter", "column"]),
    "filter on a missing column": (dict(GOOD, id="b10", filter="depth > 3"),
                                   ["row 3", "b10", "filter", "depth", "water_temp_c"]),
    "filter keeps nothing": (dict(GOOD, id="b11", filter="water_temp_c > 1000"),
                             ["row 3", "b11", "filter", "no rows left"]),
    "unknown band set": (dict(GOOD, id="b12", bands="rainfall"),
                         ["row 3", "b12", "bands", "'rainfall'", "flow"]),
    "unknown option": (dict(GOOD, id="b13", options="smoothness=3"),
                       ["row 3", "b13", "options", "unknown option 'smoothness'", "points"]),
    "option of another chart": (dict(GOOD, id="b17", options="cells=20"),
                                ["row 3", "b17", "options", "'cells' does not apply to chart 'scatter'",
                                 "points"]),
    "bad option value": (dict(GOOD, id="b14", trend="loess", options="span=2"),
                         ["row 3", "b14", "options", "span", "2"]),
    "bad ranges": (dict(GOOD, id="b15", ranges="loose"),
                   ["row 3", "b15", "ranges", "'loose'", "own-y"]),
    "continuous field as categories": (dict(GOOD, id="b16", chart="box", x="conductivity_uscm",
                                            y="water_temp_c"),
                                       ["row 3", "b16", "field 'x'", "continuous", "band"]),
    "bad id": (dict(GOOD, id="has space"), ["row 3", "id", "'has space'"]),
}


@pytest.fixture(scope="module")
def project(tmp_path_factory) -> Path:
    from conftest import copy_project
    root = copy_project(tmp_path_factory.mktemp("bad"))
    make_demo_data(root, "0.02")
    return root


def write_sheet(project: Path, *rows: dict) -> None:
    lines = ["\t".join(HEADER)] + ["\t".join(r.get(h, "") for h in HEADER) for r in rows]
    (project / "config" / "figures.tsv").write_text("\n".join(lines) + "\n")


def run_render(project: Path, fid: str) -> subprocess.CompletedProcess:
    return subprocess.run([sys.executable, "-m", "figkit", "render", "--id", fid], cwd=project,
                          capture_output=True, text=True)


@pytest.mark.parametrize("name", sorted(CASES))
def test_one_line_error(project, name):
    cells, words = CASES[name]
    write_sheet(project, GOOD, cells)
    proc = run_render(project, cells["id"])
    assert proc.returncode == 2, proc.stderr
    err = proc.stderr.strip()
    assert "Traceback" not in err
    assert len(err.splitlines()) == 1, err
    for w in words:
        assert w in err, f"{name}: '{w}' missing from: {err}"
    out = project / "results" / "figures"
    assert not list(out.glob(f"{cells['id']}.*")) if out.exists() else True
    assert not list(out.glob(".*.part")) if out.exists() else True


def test_missing_dataset_file(project, tmp_path):
    root = tmp_path / "p"
    shutil.copytree(project, root, symlinks=True)
    (root / "data" / "readings.csv").unlink()
    write_sheet(root, GOOD)
    proc = run_render(root, "good")
    assert proc.returncode == 2
    assert "dataset file not found" in proc.stderr and "readings.csv" in proc.stderr
    assert len(proc.stderr.strip().splitlines()) == 1


def test_unreadable_dataset_file(project, tmp_path):
    root = tmp_path / "p"
    shutil.copytree(project, root, symlinks=True)
    (root / "data" / "readings.csv").write_bytes(b"\xff\xfe\x00garbage\x00\n\x00\x01")
    write_sheet(root, GOOD)
    proc = run_render(root, "good")
    assert proc.returncode == 2
    assert "Traceback" not in proc.stderr and len(proc.stderr.strip().splitlines()) == 1


def test_bad_config_is_one_line(project, tmp_path):
    root = tmp_path / "p"
    shutil.copytree(project, root, symlinks=True)
    cfg = root / "config" / "config.yaml"
    cfg.write_text(cfg.read_text().replace("formats: [pdf, png, svg]", "formats: [pdf, jpeg]"))
    write_sheet(root, GOOD)
    proc = run_render(root, "good")
    assert proc.returncode == 2
    assert "formats" in proc.stderr and "jpeg" in proc.stderr and "png" in proc.stderr
    assert len(proc.stderr.strip().splitlines()) == 1


def test_repeated_id_is_reported(project):
    write_sheet(project, GOOD, dict(GOOD))
    proc = run_render(project, "good")
    assert proc.returncode == 0, proc.stderr   # the first row builds
    # the repeated one is named with both row numbers
    lines = (project / "config" / "figures.tsv").read_text().splitlines()
    assert len(lines) == 3
    from figkit.sheet import read_sheet
    rows = read_sheet(project / "config" / "figures.tsv")
    assert rows[1].error is not None and "row 2" in str(rows[1].error) and "row 3" in str(rows[1].error)


def test_one_bad_row_does_not_stop_the_others(project, tmp_path):
    root = tmp_path / "p"
    shutil.copytree(project, root, symlinks=True)
    write_sheet(root, GOOD, dict(GOOD, id="broken", x="no_such_field"),
                dict(GOOD, id="also-good", chart="hexbins"))
    proc = snakemake(root, "--keep-going", check=False)
    assert proc.returncode != 0
    out = root / "results" / "figures"
    assert (out / "good.png").is_file() and (out / "also-good.png").is_file()
    assert not list(out.glob("broken.*"))
    assert "no column 'no_such_field'" in proc.stdout + proc.stderr


def test_missing_dataset_fails_alone_and_leaves_no_stale_figure(project, tmp_path):
    """A typo in a dataset path must not keep old figures silently nor stop the others."""
    root = tmp_path / "p"
    shutil.copytree(project, root, symlinks=True)
    write_sheet(root, GOOD, dict(GOOD, id="other", chart="hexbins"))
    snakemake(root)
    cfg = root / "config" / "config.yaml"
    # point 'good' at a dataset name whose file does not exist
    text = cfg.read_text()
    cfg.write_text(text.replace("datasets:\n", "datasets:\n  typo: data/readingz.csv\n", 1))
    write_sheet(root, dict(GOOD, dataset="typo"), dict(GOOD, id="other", chart="hexbins"))
    proc = snakemake(root, "--keep-going", check=False)
    out = root / "results" / "figures"
    assert proc.returncode != 0
    assert "dataset file not found" in proc.stdout + proc.stderr
    assert not (out / "good.png").exists()          # the stale figure is not left in place
    assert (out / "other.png").is_file()


def test_repeated_id_edits_of_the_first_row_are_honoured(project, tmp_path):
    root = tmp_path / "p"
    shutil.copytree(project, root, symlinks=True)
    write_sheet(root, GOOD, dict(GOOD, chart="hexbins"))
    snakemake(root)
    write_sheet(root, dict(GOOD, options="points=translucent"), dict(GOOD, chart="hexbins"))
    proc = snakemake(root, "-n", "-p")
    assert "--id good" in proc.stdout + proc.stderr


def test_too_many_cells_names_the_figure_and_the_stray_value(project):
    """A filled cell past the header's last column (a stray tab) is refused in one line naming
    the row, the figure id, the stray value and the header's columns; that figure fails alone."""
    lines = ["\t".join(HEADER), "\t".join(GOOD.get(h, "") for h in HEADER),
             "\t".join(dict(GOOD, id="stray").get(h, "") for h in HEADER) + "\tsummer only"]
    (project / "config" / "figures.tsv").write_text("\n".join(lines) + "\n")
    proc = run_render(project, "stray")
    assert proc.returncode == 2
    err = proc.stderr.strip()
    assert len(err.splitlines()) == 1 and "Traceback" not in err
    for w in ("row 3", "stray", "'summer only'", f"{len(HEADER) + 1} cells", "past the last column",
              "dataset, chart"):
        assert w in err, f"'{w}' missing from: {err}"
    assert run_render(project, "good").returncode == 0


def test_a_stray_tab_is_refused_even_when_the_last_cells_are_empty(project):
    """A stray tab shifts the cells after it: 'shapes=yes' would land in the caption column and be
    lost.  The row is refused (an empty last cell does not make the row right), and a later row
    with the same id is still reported as a repeat."""
    header = ["id", "dataset", "chart", "x", "y", "colour", "options", "caption"]
    shifted = ["sh", "readings", "scatter", "water_temp_c", "dissolved_oxygen_mgl", "land_use", "",
               "shapes=yes", ""]
    again = ["sh", "readings", "histogram", "water_temp_c", "", "", "", ""]
    path = project / "config" / "figures.tsv"
    path.write_text("\n".join("\t".join(r) for r in (header, shifted, again)) + "\n")
    from figkit.sheet import read_sheet
    rows = read_sheet(path)
    assert rows[0].error is not None and "9 cells but the header has 8" in str(rows[0].error)
    assert rows[0].id == "sh" and "'shapes=yes', is cell 8, under 'caption'" in str(rows[0].error)
    assert rows[1].error is not None and "id already used in sheet row 2" in str(rows[1].error)


@pytest.mark.parametrize("edit, words", [
    (("formats: [pdf, png, svg]", "formats: [pdf, png, svg]\ndataset: readings"),
     ["config.yaml", "unknown field 'dataset'", "datasets"]),
    (("style: house", "style: nature"), ["config.yaml", "'style'", "'nature'", "house", "compact"]),
])
def test_bad_settings_under_snakemake_are_one_line(project, tmp_path, edit, words):
    """Through Snakemake too, a mistake in config.yaml is one line naming the setting, the bad
    value and what is allowed (no schema dump, no traceback), reported once, not once per row."""
    root = tmp_path / "p"
    shutil.copytree(project, root, symlinks=True)
    cfg = root / "config" / "config.yaml"
    assert edit[0] in cfg.read_text()
    cfg.write_text(cfg.read_text().replace(edit[0], edit[1]))
    write_sheet(root, GOOD, dict(GOOD, id="good2"))
    proc = snakemake(root, "-n", check=False)
    assert proc.returncode != 0
    err = [ln for ln in proc.stderr.splitlines() if ln.strip()]
    assert len(err) == 1, proc.stderr[-3000:]
    for w in words:
        assert w in err[0], f"'{w}' missing from: {err[0]}"


def test_text_in_a_numeric_column_says_how_many_and_where(project, tmp_path):
    """Decimal commas in a numeric column: the message counts the bad values and gives the first
    one's row in the file as a spreadsheet numbers it (header = row 1)."""
    import pandas as pd
    root = tmp_path / "p"
    shutil.copytree(project, root, symlinks=True)
    path = root / "data" / "readings.csv"
    frame = pd.read_csv(path)
    frame["water_temp_c"] = frame["water_temp_c"].astype(object)
    frame.loc[[4, 9, 30], "water_temp_c"] = ["12,5", "13,1", "12,5"]
    frame.to_csv(path, index=False)
    write_sheet(root, GOOD)
    proc = run_render(root, "good")
    assert proc.returncode == 2
    err = proc.stderr.strip()
    assert len(err.splitlines()) == 1 and "Traceback" not in err
    for w in ("field 'x'", "water_temp_c", "3 rows", "'12,5'", "'13,1'", "row 6 of the file"):
        assert w in err, f"'{w}' missing from: {err}"
    # the file's row 6 (header = row 1) really holds the first bad value
    assert '"12,5"' in path.read_text().splitlines()[5]
    assert not any(',"' in line for line in path.read_text().splitlines()[1:5])


def test_lint_checks_rows_against_their_data(project, tmp_path):
    """`figkit lint` finds what a build would refuse for its data (a filter that keeps nothing, a
    continuous field as categories, an unknown column) and passes a good row; one line each."""
    root = tmp_path / "p"
    shutil.copytree(project, root, symlinks=True)
    keep_nothing = dict(GOOD, id="l1", filter="water_temp_c > 1000")
    continuous = dict(GOOD, id="l2", chart="box", x="conductivity_uscm", y="water_temp_c")
    unknown = dict(GOOD, id="l3", x="water_temp")
    write_sheet(root, GOOD, keep_nothing, continuous, unknown)
    proc = subprocess.run([sys.executable, "-m", "figkit", "lint"], cwd=root, capture_output=True, text=True)
    assert proc.returncode == 2
    lines = proc.stderr.strip().splitlines()
    assert len(lines) == 3 and "Traceback" not in proc.stderr, proc.stderr
    assert "l1" in lines[0] and "no rows left" in lines[0]
    assert "l2" in lines[1] and "continuous" in lines[1]
    assert "l3" in lines[2] and "water_temp" in lines[2]
    assert "4 figure rows, 3 with problems" in proc.stdout


def test_a_misspelt_orders_value_is_a_caution_with_the_likely_value(project, tmp_path):
    """`orders:` naming a value the data never hold (a typo) would silently move the value meant
    to the end and change its colour: the build says so, naming the likely value (difflib's
    closest match; no outside source)."""
    root = tmp_path / "p"
    shutil.copytree(project, root, symlinks=True)
    cfg = root / "config" / "config.yaml"
    assert "land_use: [forest, pasture, arable, urban]" in cfg.read_text()
    cfg.write_text(cfg.read_text().replace("land_use: [forest, pasture, arable, urban]",
                                           "land_use: [forest, pastre, arable, urban]"))
    write_sheet(root, GOOD)
    from figkit.render import load_project, render
    car = render(load_project(root), "good")
    notes = [c for c in car["cautions"] if c.startswith("orders:")]
    assert any("'pastre'" in c and "did you mean 'pasture'" in c for c in notes), notes
    assert any("'pasture'" in c and "leaves out" in c for c in notes), notes
    # the correct list gives no such caution
    cfg.write_text(cfg.read_text().replace("pastre", "pasture"))
    assert not [c for c in render(load_project(root), "good")["cautions"] if c.startswith("orders:")]


def test_a_filter_value_the_data_never_hold_is_named(project, tmp_path):
    """`land_use in ["forest", "pastre"]` silently keeps forest alone: a caution names the value,
    the closest spelling (difflib) and what the column holds; a filter that keeps nothing
    because of such a value says what the column holds in its one-line error."""
    from figkit.render import load_project, render
    root = tmp_path / "p"
    shutil.copytree(project, root, symlinks=True)
    write_sheet(root, dict(GOOD, filter='land_use in ["forest", "pastre"]'),
                dict(GOOD, id="none", filter='land_use == "Forest"'))
    car = render(load_project(root), "good")
    notes = [c for c in car["cautions"] if c.startswith("filter:")]
    assert len(notes) == 1 and "'pastre'" in notes[0] and "did you mean 'pasture'" in notes[0]
    assert "arable, forest, pasture, urban" in notes[0]
    proc = run_render(root, "none")
    err = proc.stderr.strip()
    assert proc.returncode == 2 and len(err.splitlines()) == 1
    assert "no rows left" in err and "'land_use' holds: arable, forest, pasture, urban" in err


def test_lint_shows_likely_mistakes_in_settings_and_orders(project, tmp_path):
    """Lint prints what a build would only caution about: an orders value the data never hold and
    a settings key naming no column ('treatment'), with the closest spelling; exit 0 (cautions,
    not errors) and a count in the summary."""
    root = tmp_path / "p"
    shutil.copytree(project, root, symlinks=True)
    cfg = root / "config" / "config.yaml"
    cfg.write_text(cfg.read_text().replace("land_use: [forest, pasture, arable, urban]",
                                           "land_use: [forest, pastre, arable, urban]\n  lnad_use: [a, b]"))
    write_sheet(root, GOOD)
    proc = subprocess.run([sys.executable, "-m", "figkit", "lint"], cwd=root, capture_output=True, text=True)
    assert proc.returncode == 0, proc.stderr
    err = proc.stderr
    assert "orders: 'lnad_use' is not a column of any dataset nor a band (did you mean 'land_use'?)" in err
    assert "figure 'good'" in err and "did you mean 'pasture'" in err
    assert "1 figure row, 0 with problems, 1 with cautions" in proc.stdout
