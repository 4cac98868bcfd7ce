"""The progress line: on a terminal only, one line rewritten in place (carriage return, the
terminal convention of ECMA-48's CR control), the stages of a figure job, cleared at the end;
nothing at all when standard error is not a terminal.  Row counts are checked against pandas."""
from __future__ import annotations

import io
import os
import shutil
import subprocess
import sys
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from figkit import progress
from figkit.render import load_project, render

REPO = Path(__file__).resolve().parents[1]


class FakeTerminal(io.StringIO):
    def isatty(self) -> bool:
        return True


@pytest.fixture()
def project(tmp_path) -> Path:
    (tmp_path / "config").mkdir()
    (tmp_path / "data").mkdir()
    shutil.copytree(REPO / "figkit" / "styles", tmp_path / "styles")
    rng = np.random.default_rng(4)
    pd.DataFrame({"v": rng.normal(10, 2, 5000).round(1),
                  "g": rng.choice(["a", "b"], 5000)}).to_csv(tmp_path / "data" / "d.csv", index=False)
    (tmp_path / "config" / "config.yaml").write_text("datasets:\n  d: data/d.csv\nformats: [png, svg]\n")
    (tmp_path / "config" / "figures.tsv").write_text("id\tdataset\tchart\tx\tstrata\nh\td\thistogram\tv\tg\n")
    return tmp_path


def test_stages_on_one_line_on_a_terminal(project, monkeypatch):
    term = FakeTerminal()
    monkeypatch.setattr(sys, "stderr", term)
    monkeypatch.setattr(progress, "DELAY_S", 0.0)
    render(load_project(project), "h")
    out = term.getvalue()
    assert "\n" not in out                                # one line, rewritten in place
    shown = [part.strip() for part in out.split("\r") if part.strip()]
    stages = [s.split(": ", 2)[-1] for s in shown]
    assert all(s.startswith("figkit: h: ") for s in shown)
    for want in ("reading d.csv", "binning", "drawing 2 panels", "writing PNG", "writing SVG"):
        assert any(s.startswith(want) for s in stages), (want, stages)
    assert stages.index("binning") < stages.index("drawing 2 panels") < stages.index("writing PNG")
    assert out.endswith("\r") and out.split("\r")[-2].strip() == ""   # cleared at the end
    assert progress.current() is None


def test_short_jobs_show_nothing(project, monkeypatch):
    term = FakeTerminal()
    monkeypatch.setattr(sys, "stderr", term)
    monkeypatch.setattr(progress, "DELAY_S", 1000.0)
    render(load_project(project), "h")
    assert term.getvalue() == ""


def test_streamed_rows_are_counted_on_the_line(project, monkeypatch):
    (project / "config" / "config.yaml").write_text(
        "datasets:\n  d: data/d.csv\nformats: [png]\nstream_above_mb: 0\n")
    term = FakeTerminal()
    monkeypatch.setattr(sys, "stderr", term)
    monkeypatch.setattr(progress, "DELAY_S", 0.0)
    render(load_project(project), "h")
    n = len(pd.read_csv(project / "data" / "d.csv"))
    assert f"reading d.csv: {n:,} rows" in term.getvalue()


def test_nothing_when_not_a_terminal(project):
    env = dict(os.environ, MPLBACKEND="Agg")
    proc = subprocess.run([sys.executable, "-m", "figkit", "render", "--id", "h", "--project", str(project)],
                          capture_output=True, text=True, env=env, timeout=300)
    assert proc.returncode == 0, proc.stderr
    assert "\r" not in proc.stderr and "binning" not in proc.stderr and "writing" not in proc.stderr
