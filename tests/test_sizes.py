"""A project's `sizes:` are the presets it uses; a row without a size takes a default the project
declared, and the sidecar says which and from where.

Widths 89 and 183 mm: a common single- and double-column width of journals (from memory).
The written PNG is read back with Pillow: its width in pixels is width_mm / 25.4 * dpi
(the definition of dots per inch, 25.4 mm to the inch).
"""
from __future__ import annotations

import json
import os
import shutil
import subprocess
import sys
from pathlib import Path

import pytest
from PIL import Image

REPO = Path(__file__).resolve().parents[1]

SHEET = ("id\tdataset\tchart\tx\tsize\n"
         "no-size\tnums\thistogram\tvalue\t\n"
         "single\tnums\thistogram\tvalue\tsingle\n"
         "style-full\tnums\thistogram\tvalue\tfull\n")


def _project(root: Path, extra: str) -> Path:
    (root / "config").mkdir(parents=True)
    (root / "data").mkdir()
    shutil.copytree(REPO / "figkit" / "styles", root / "styles")
    (root / "data" / "nums.csv").write_text("value\n" + "".join(f"{(i * 37) % 101}\n" for i in range(300)))
    (root / "config" / "config.yaml").write_text(
        "datasets:\n  nums: data/nums.csv\nformats: [png]\nsizes: {single: 89, double: 183}\n" + extra)
    (root / "config" / "figures.tsv").write_text(SHEET)
    return root


def _render(root: Path, fig_id: str) -> subprocess.CompletedProcess:
    env = dict(os.environ, MPLBACKEND="Agg")
    return subprocess.run([sys.executable, "-m", "figkit", "render", "--id", fig_id, "--project", str(root)],
                          capture_output=True, text=True, env=env)


def _png_mm(path: Path) -> float:
    with Image.open(path) as im:
        dpi = im.info["dpi"][0]
        return im.size[0] / dpi * 25.4


def test_row_without_size_needs_a_declared_default(tmp_path):
    root = _project(tmp_path / "p", "")
    proc = _render(root, "no-size")
    assert proc.returncode == 2
    lines = proc.stderr.strip().splitlines()
    assert len(lines) == 1 and "Traceback" not in proc.stderr
    msg = lines[0]
    assert msg.startswith("figkit: error: sheet row 2, figure 'no-size', field 'size'")
    assert "default_size" in msg and "allowed: double, single" in msg
    assert not (root / "results" / "figures" / "no-size.png").exists()   # nothing half-written


def test_project_sizes_replace_the_style_presets(tmp_path):
    root = _project(tmp_path / "p", "")
    proc = _render(root, "style-full")                 # 'full' is the style's, not the project's
    assert proc.returncode == 2 and "field 'size'" in proc.stderr and "(got 'full')" in proc.stderr
    proc = _render(root, "single")
    assert proc.returncode == 0, proc.stderr
    out = root / "results" / "figures"
    assert _png_mm(out / "single.png") == pytest.approx(89, abs=0.1)
    car = json.loads((out / "single.json").read_text())
    assert car["size_preset"] == {"name": "single", "mm": 89.0, "from": "row",
                                  "presets_from": "config.yaml sizes:"}
    width = next(c for c in car["preflight"]["checks"] if c["name"] == "width matches a preset")
    assert width["passed"] and "'single'" in width["message"]


def test_default_size_from_config_is_used_and_said(tmp_path):
    root = _project(tmp_path / "p", "default_size: double\n")
    proc = _render(root, "no-size")
    assert proc.returncode == 0, proc.stderr
    out = root / "results" / "figures"
    assert _png_mm(out / "no-size.png") == pytest.approx(183, abs=0.1)
    car = json.loads((out / "no-size.json").read_text())
    assert car["size_preset"]["name"] == "double"
    assert car["size_preset"]["from"] == "default_size in config.yaml"


def test_default_size_must_be_declared(tmp_path):
    root = _project(tmp_path / "p", "default_size: full\n")
    proc = _render(root, "single")
    assert proc.returncode == 2
    assert "field 'default_size'" in proc.stderr and "allowed: double, single" in proc.stderr
