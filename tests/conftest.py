"""Shared fixtures: small copies of the demo manuscript built through Snakemake."""
from __future__ import annotations

import os
import shutil
import subprocess
import sys
from pathlib import Path

import pytest

REPO = Path(__file__).resolve().parents[1]
DEMO_SCALE = "0.05"   # 5% of the demo's rows: every figure kind, fast enough for CI


def copy_project(dest: Path) -> Path:
    """The demo manuscript without its data or results (styles copied, not linked)."""
    dest.mkdir(parents=True, exist_ok=True)
    shutil.copy(REPO / "Snakefile", dest / "Snakefile")
    shutil.copytree(REPO / "config", dest / "config", symlinks=False)
    shutil.copytree(REPO / "figkit" / "styles", dest / "styles")
    return dest


def sheet_text(header: list[str], rows: list[list[str]]) -> str:
    """A figure sheet (tab-separated, header first) from a header and rows of cells."""
    return "\n".join("\t".join(r) for r in [header, *rows]) + "\n"


def write_project(root: Path, sheet: str, datasets: dict, formats: str = "[png]") -> Path:
    """A project at ``root``: the shipped house styles, each data frame of ``datasets`` (name ->
    pandas DataFrame) as data/<name>.csv, and the given figure sheet."""
    (root / "config").mkdir(parents=True)
    (root / "data").mkdir()
    shutil.copytree(REPO / "figkit" / "styles", root / "styles")
    for name, frame in datasets.items():
        frame.to_csv(root / "data" / f"{name}.csv", index=False)
    names = "".join(f"  {name}: data/{name}.csv\n" for name in datasets)
    (root / "config" / "config.yaml").write_text(f"datasets:\n{names}formats: {formats}\n")
    (root / "config" / "figures.tsv").write_text(sheet)
    return root


def write_penguin_project(root: Path, sheet: str, formats: str = "[png]") -> Path:
    """A project over the Palmer penguins data (Gorman, Williams & Fraser 2014, as shipped by
    the palmerpenguins package) with the given figure sheet."""
    from palmerpenguins import load_penguins
    return write_project(root, sheet, {"penguins": load_penguins()}, formats)


def make_demo_data(project: Path, scale: str = DEMO_SCALE) -> None:
    subprocess.run([sys.executable, "-m", "figkit.demo", str(project / "data"), "--scale", scale],
                   check=True, capture_output=True)


def snakemake(project: Path, *args: str, check: bool = True) -> subprocess.CompletedProcess:
    env = dict(os.environ, MPLBACKEND="Agg")
    proc = subprocess.run([sys.executable, "-m", "snakemake", "--cores", "2", *args], cwd=project,
                          capture_output=True, text=True, env=env)
    if check and proc.returncode != 0:
        raise AssertionError(f"snakemake {' '.join(args)} failed:\n{proc.stdout[-3000:]}\n{proc.stderr[-3000:]}")
    return proc


@pytest.fixture(scope="session")
def built_demo(tmp_path_factory) -> Path:
    """The demo manuscript at reduced scale, built once through Snakemake."""
    project = copy_project(tmp_path_factory.mktemp("demo"))
    make_demo_data(project)
    snakemake(project)
    return project
