"""The example rows of the new capabilities (config/examples/new-kinds.tsv: a log-scale density,
a means chart, a lines chart, in the demo's river-monitoring scenario) build through Snakemake
with the README's command and the sheet given as a setting, and pass figkit's preflight (file
read-back: fonts, sizes, dpi, up to date).  Demo data invented (figkit.demo)."""
from __future__ import annotations

import json

import pytest

from conftest import copy_project, make_demo_data, snakemake
from figkit.cli import main

SHEET = "config/examples/new-kinds.tsv"


@pytest.fixture(scope="module")
def built(tmp_path_factory):
    project = copy_project(tmp_path_factory.mktemp("examples"))
    make_demo_data(project)
    snakemake(project, "--config", f"sheet={SHEET}")
    return project


def test_example_rows_build_and_pass_preflight(built, capsys):
    figs = built / "results" / "figures"
    cars = {p.stem: json.loads(p.read_text()) for p in figs.glob("*.json")}
    assert set(cars) == {"turbidity-log", "mayfly-means", "oxygen-months"}
    assert cars["turbidity-log"]["scales"]["x"]["scale"] == "log10"
    assert cars["mayfly-means"]["chart"] == "means" and cars["mayfly-means"]["panels"][0]["groups"]
    assert cars["oxygen-months"]["chart"] == "lines"
    config = built / "config" / "config.yaml"
    config.write_text(config.read_text().replace("sheet: config/figures.tsv", f"sheet: {SHEET}"))
    assert main(["preflight", "--project", str(built)]) == 0, capsys.readouterr()
    assert main(["lint", "--project", str(built)]) == 0, capsys.readouterr()
