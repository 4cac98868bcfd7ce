"""A user's own manuscript folder (figkit init) builds with the installed figkit, and the
notebook API returns a matplotlib Figure for one row."""
from __future__ import annotations

import json
import subprocess
import sys


from conftest import snakemake


def test_init_scaffold_builds_without_copying_code(tmp_path):
    target = tmp_path / "my-paper"
    proc = subprocess.run([sys.executable, "-m", "figkit", "init", str(target), "--scale", "0.02"],
                          capture_output=True, text=True)
    assert proc.returncode == 0, proc.stderr
    assert (target / "config" / "figures.tsv").is_file()
    assert (target / "styles" / "house.yaml").is_file()
    assert not list(target.rglob("*.py")) and not list(target.rglob("*.smk"))   # no figkit code copied
    snakemake(target)
    out = target / "results" / "figures"
    ids = [line.split("\t")[0] for line in (target / "config" / "figures.tsv").read_text().splitlines()[1:]]
    for fid in ids:
        car = json.loads((out / f"{fid}.json").read_text())
        assert car["id"] == fid and (out / f"{fid}.pdf").is_file()
    assert "Nothing to be done" in (snakemake(target, "-n").stdout + snakemake(target, "-n").stderr)


def test_init_refuses_a_non_empty_folder(tmp_path):
    (tmp_path / "keep.txt").write_text("my notes")
    proc = subprocess.run([sys.executable, "-m", "figkit", "init", str(tmp_path)], capture_output=True,
                          text=True)
    assert proc.returncode == 2 and "not empty" in proc.stderr
    assert (tmp_path / "keep.txt").read_text() == "my notes"


def test_notebook_api_returns_a_figure(tmp_path):
    import matplotlib
    matplotlib.use("Agg")
    from matplotlib.figure import Figure
    from figkit.render import figure, load_project
    target = tmp_path / "nb"
    subprocess.run([sys.executable, "-m", "figkit", "init", str(target), "--scale", "0.02"], check=True,
                   capture_output=True)
    project = load_project(target)
    fig = figure("oxygen-by-land-use", project)
    assert isinstance(fig, Figure)
    assert len(fig.axes) == 4                       # four land uses, one panel each
    w, h = fig.get_size_inches() * 25.4
    assert abs(w - 176) < 0.1                       # the "full" preset of the house style
    # An equivalent row written as a dict in the notebook, not in the sheet.
    fig2 = figure({"id": "scratch", "dataset": "readings", "chart": "histogram",
                   "x": "water_temp_c", "strata": "season", "size": "single"}, project)
    assert abs(fig2.get_size_inches()[0] * 25.4 - 84) < 0.1
    assert len([a for a in fig2.axes if a.get_label() != "<colorbar>"]) == 4
