"""Byte-identical rebuilds, and provenance that travels with a file.

Two copies of the demo manuscript, in folders of different names and path lengths, each generate
their data and build the same figures through Snakemake, started a moment apart (so the clock
differs), under a different time zone and hash seed.  Every output file must be byte for byte the
same: no dates, absolute paths, salted ids or set/dict ordering may leak into them
(reproducible-builds.org, "Timestamps" and "Build path"; common practice).  A subset of the sheet
keeps the test fast; the figures chosen cover a histogram, a coloured density with a filter
(colour separability in the sidecar) and a straight-line scatter with its statistics, a colour bar
and raster images inside the PDF.
"""
from __future__ import annotations

import hashlib
import json
import os
import shutil
import subprocess
import sys
import time
from pathlib import Path

import matplotlib
import pytest

import figkit
from conftest import REPO

IDS = ("temperature-histogram", "turbidity-density", "oxygen-temperature")
SCALE = "0.1"


def start_build(root: Path, env_extra: dict) -> subprocess.Popen:
    """Copy the manuscript, generate its data, and start Snakemake on the chosen figures."""
    root.mkdir(parents=True)
    shutil.copy(REPO / "Snakefile", root / "Snakefile")
    shutil.copytree(REPO / "config", root / "config")
    shutil.copytree(REPO / "figkit" / "styles", root / "styles")   # the real files, not the link
    env = dict(os.environ, MPLBACKEND="Agg", **env_extra)
    subprocess.run([sys.executable, "-m", "figkit.demo", "data", "--scale", SCALE], cwd=root,
                   env=env, check=True, capture_output=True)
    targets = [f"results/figures/{fid}.json" for fid in IDS]
    return subprocess.Popen([sys.executable, "-m", "snakemake", "--cores", "2", *targets], cwd=root,
                            env=env, stdout=subprocess.PIPE, stderr=subprocess.STDOUT, text=True)


def source_digest() -> str:
    """figkit's own code: if it changes while the builds run, a difference is not the builds' fault."""
    h = hashlib.sha256()
    for p in sorted((REPO / "figkit").rglob("*.py")):
        h.update(p.read_bytes())
    return h.hexdigest()


@pytest.fixture(scope="module")
def builds(tmp_path_factory):
    base = tmp_path_factory.mktemp("rebuild")
    before = source_digest()
    first = start_build(base / "one", {"TZ": "UTC", "PYTHONHASHSEED": "1"})
    time.sleep(1.5)   # the second build starts on a later second of the clock
    second = start_build(base / "second-build-elsewhere",
                         {"TZ": "Pacific/Auckland", "PYTHONHASHSEED": "2"})
    logs = [proc.communicate(timeout=300)[0] for proc in (first, second)]
    for proc, log in zip((first, second), logs):
        assert proc.returncode == 0, log[-3000:]
    note = "" if source_digest() == before else " (figkit's sources changed during the builds)"
    return base / "one", base / "second-build-elsewhere", note


def outputs(root: Path) -> dict[str, bytes]:
    folder = root / "results" / "figures"
    return {p.name: p.read_bytes() for p in sorted(folder.iterdir()) if not p.name.startswith(".")}


def test_two_builds_are_byte_identical(builds):
    *roots, note = builds
    a, b = (outputs(root) for root in roots)
    expected = {f"{fid}.{ext}" for fid in IDS
                for ext in ("pdf", "png", "svg", "json", "stats.csv", "values.csv")}
    assert set(a) == set(b) == expected
    differ = sorted(name for name in a if a[name] != b[name])
    assert not differ, f"{differ}{note}"
    for root in roots:   # no absolute path of the project inside any output
        needle = str(root).encode()
        assert not [name for name, data in outputs(root).items() if needle in data]


def test_info_recovers_provenance_from_copied_files(builds, tmp_path):
    root = builds[0]
    data_sha = {f"data/{p.name}": hashlib.sha256(p.read_bytes()).hexdigest()
                for p in (root / "data").glob("*.csv")}
    away = tmp_path / "sent-to-a-coauthor"
    away.mkdir()
    fid = "oxygen-temperature"
    for ext in ("png", "pdf", "svg"):
        copy = away / f"figure-2.{ext}"   # renamed and moved away from the project
        shutil.copy(root / "results" / "figures" / f"{fid}.{ext}", copy)
        proc = subprocess.run([sys.executable, "-m", "figkit", "info", copy.name], cwd=away,
                              capture_output=True, text=True)
        assert proc.returncode == 0, proc.stderr
        meta = json.loads(proc.stdout)
        assert meta["id"] == fid, ext
        assert meta["inputs"] == [{"path": "data/readings.csv", "sha256": data_sha["data/readings.csv"]}]
        assert meta["versions"]["figkit"] == figkit.__version__
        assert meta["versions"]["matplotlib"] == matplotlib.__version__
        assert meta["rebuild"].endswith(f"results/figures/{fid}.json")
        car = json.loads((root / "results" / "figures" / f"{fid}.json").read_text())
        assert meta["row_sha256"] == car["row_sha256"]
