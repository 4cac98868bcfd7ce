"""What a new user reads: one-line errors in the usual form, help with examples, counts that
match what was printed, the closest spelling of a mistyped value.

The closest spelling is difflib's (Python standard library) ratio search, the same the filter
and orders checks use; the usual error form is the one figkit's command line documents
("figkit: error: ..." on one line, exit status 2).
"""
from __future__ import annotations

import argparse
import os
import re
import shutil
import subprocess
import sys
from pathlib import Path

import pytest

REPO = Path(__file__).resolve().parents[1]


def _run(*args: str, cwd: Path | None = None) -> subprocess.CompletedProcess:
    env = dict(os.environ, MPLBACKEND="Agg")
    return subprocess.run([sys.executable, "-m", *args], capture_output=True, text=True, env=env,
                          cwd=cwd, timeout=300)


def _project(root: Path, sheet: str, extra_config: str = "") -> Path:
    (root / "config").mkdir(parents=True)
    (root / "data").mkdir()
    shutil.copytree(REPO / "figkit" / "styles", root / "styles")
    (root / "data" / "d.csv").write_text("site,season,value\n" + "".join(
        f"S{i % 3},{['winter', 'summer'][i % 2]},{i * 0.5}\n" for i in range(60)))
    (root / "config" / "config.yaml").write_text("datasets:\n  d: data/d.csv\nformats: [png]\n" + extra_config)
    (root / "config" / "figures.tsv").write_text(sheet)
    return root


# --------------------------------------------------------------------- sheet separators

@pytest.mark.parametrize("sep, word", [(",", "commas"), (";", "semicolons")])
def test_comma_or_semicolon_sheet_is_named(tmp_path, sep, word):
    sheet = sep.join(["id", "dataset", "chart", "x"]) + "\n" + sep.join(["h", "d", "histogram", "value"]) + "\n"
    root = _project(tmp_path / "p", sheet)
    proc = _run("figkit", "lint", "--project", str(root))
    assert proc.returncode == 2
    lines = proc.stderr.strip().splitlines()
    assert len(lines) == 1 and "Traceback" not in proc.stderr
    assert lines[0].startswith("figkit: error: sheet row 1, field 'header'")
    assert f"separated by {word}" in lines[0] and "tab-separated" in lines[0]
    assert "unknown field" not in lines[0]


# ------------------------------------------------------------------------- lint's counts

def test_lint_summary_counts_what_it_prints(tmp_path):
    sheet = ("id\tdataset\tchart\tx\tfilter\n"
             "ok\td\thistogram\tvalue\t\n"
             "typo\td\thistogram\tvalue\tseason in [\"winter\", \"sumer\"]\n")
    # 'seasn' is no column: a caution about config.yaml; "sumer" is no value: a row caution
    root = _project(tmp_path / "p", sheet, "orders:\n  seasn: [winter, summer]\n")
    proc = _run("figkit", "lint", "--project", str(root))
    assert proc.returncode == 0, proc.stderr
    printed = [ln for ln in proc.stderr.splitlines() if ln.startswith("figkit: caution:")]
    rows_cautioned = {m.group(1) for ln in printed if (m := re.search(r"sheet row (\d+)", ln))}
    summary = proc.stdout.strip().splitlines()[-1]
    found = re.search(r"(\d+) with problems, (\d+) with cautions; (\d+) cautions? about config.yaml; "
                      r"(\d+) cautions? in all", summary)
    assert found, summary
    assert int(found.group(2)) == len(rows_cautioned) == 1
    assert int(found.group(3)) == 1
    assert int(found.group(4)) == len(printed) == 2


# ------------------------------------------------------------------------------- demo scale

def test_demo_scale_error_is_one_usual_line_and_help_says_the_limit(tmp_path):
    from figkit.demo import MAX_SCALE
    proc = _run("figkit.demo", "--scale", "50", str(tmp_path / "data"))
    assert proc.returncode == 2
    lines = proc.stderr.strip().splitlines()
    assert len(lines) == 1 and lines[0].startswith("figkit: error: field 'scale':")
    assert f"at most {MAX_SCALE:g}" in lines[0] and "(got 50.0)" in lines[0]
    assert not (tmp_path / "data").exists()
    helptext = _run("figkit.demo", "--help").stdout
    assert f"0 < S <= {MAX_SCALE:g}" in " ".join(helptext.split())
    assert "example:" in helptext


def test_init_with_a_bad_scale_writes_nothing(tmp_path):
    proc = _run("figkit", "init", str(tmp_path / "paper"), "--scale", "50")
    assert proc.returncode == 2 and proc.stderr.startswith("figkit: error:")
    assert not (tmp_path / "paper").exists()


# -------------------------------------------------------------------------------- help

OFF_LIMITS: set[str] = set()


def test_every_argument_has_help_and_every_command_an_example():
    from figkit.cli import build_parser
    parser = build_parser()
    assert "example" in (parser.epilog or "")
    sub = next(a for a in parser._actions if isinstance(a, argparse._SubParsersAction))
    for name, cmd in sub.choices.items():
        if name in OFF_LIMITS:
            continue
        for action in cmd._actions:
            if isinstance(action, argparse._HelpAction):
                continue
            assert action.help, f"figkit {name}: {action.dest} has no help text"
        assert "example" in (cmd.epilog or ""), f"figkit {name} --help shows no example"
        shown = _run("figkit", name, "--help").stdout
        assert "example" in shown
    for name in ("compare", "check", "preflight", "lint"):     # what a script's caller needs
        assert "exit status" in " ".join(_run("figkit", name, "--help").stdout.lower().split())


# --------------------------------------------------------------------- closest spelling

def test_mistyped_chart_name_gets_the_closest_spelling(tmp_path):
    sheet = "id\tdataset\tchart\tx\ty\nt\td\tscater\tvalue\tvalue\n"
    root = _project(tmp_path / "p", sheet)
    proc = _run("figkit", "render", "--id", "t", "--project", str(root))
    assert proc.returncode == 2
    line = proc.stderr.strip()
    assert "\n" not in line
    assert line.startswith("figkit: error: sheet row 2, figure 't', field 'chart'")
    assert "did you mean 'scatter'?" in line and "(got 'scater')" in line and "allowed: scatter" in line


def test_mistyped_column_name_gets_the_closest_spelling(tmp_path):
    sheet = "id\tdataset\tchart\tx\tcolur\nt\td\thistogram\tvalue\tseason\n"
    root = _project(tmp_path / "p", sheet)
    proc = _run("figkit", "render", "--id", "t", "--project", str(root))
    assert proc.returncode == 2
    assert "unknown field 'colur' (did you mean 'colour'?)" in proc.stderr
