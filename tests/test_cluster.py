"""The profiles shipped with figkit: the demo built through Snakemake's generic cluster executor
(snakemake-executor-plugin-cluster-generic) with a stand-in batch system that starts each job in
a clean environment, the SLURM profile's dry run (snakemake-executor-plugin-slurm), and the
profiles `figkit init` puts into a manuscript folder.

Outside references: Snakemake's executor plugins and its dry-run listing; the per-panel numbers
of a local build of the same demo data (the session's `built_demo`), read from its sidecars;
SHA-256 (FIPS 180-4, Python's hashlib) and Pillow's PNG decoder for "whole" files.
"""
from __future__ import annotations

import filecmp
import hashlib
import json
import os
import re
import shutil
import subprocess
import sys
from pathlib import Path

import pytest
from PIL import Image

from conftest import REPO, copy_project, make_demo_data, sheet_text, snakemake, write_penguin_project

CLUSTER = REPO / "tests" / "cluster"
PROFILES = ("local", "slurm", "cluster-generic")


def _with_profiles(project: Path) -> Path:
    shutil.copytree(REPO / "profiles", project / "profiles")
    return project


def _stand_in(project: Path, *args: str, check: bool = True) -> subprocess.CompletedProcess:
    """The cluster-generic profile with the stand-in batch system (tests/cluster/), its status
    polled every second (Snakemake's default is 10 s)."""
    return snakemake(project, "--profile", "profiles/cluster-generic",
                     "--cluster-generic-submit-cmd", f"sh {CLUSTER / 'submit.sh'}",
                     "--cluster-generic-status-cmd", f"sh {CLUSTER / 'status.sh'}",
                     "--cluster-generic-cancel-cmd", "true", "--latency-wait", "10",
                     "--seconds-between-status-checks", "1", *args, check=check)


def _panels(folder: Path) -> dict:
    return {p.stem: [{k: panel.get(k) for k in ("label", "keys", "n", "n_dropped", "stats", "trend")}
                     for panel in json.loads(p.read_text())["panels"]]
            for p in sorted(folder.glob("*.json"))}


def test_demo_through_the_generic_cluster_executor(built_demo, tmp_path):
    """`snakemake --profile profiles/cluster-generic` with tests/cluster/submit.sh (jobs started in
    the background under `env -i` with only PATH and HOME) builds every figure; the figures (one per sheet row) go
    to the queue grouped, five per submission, and every sidecar's per-panel
    numbers equal those of the local build."""
    pytest.importorskip("snakemake_executor_plugin_cluster_generic")
    project = _with_profiles(copy_project(tmp_path / "cluster"))
    make_demo_data(project)
    proc = _stand_in(project)
    submitted = (project / ".queue" / "submitted").read_text().split()
    local = _panels(built_demo / "results" / "figures")
    remote = _panels(project / "results" / "figures")
    assert len(remote) == _sheet_rows(project) and set(remote) == set(local)
    assert remote == local
    # the profile groups five figure jobs per submission
    assert 1 <= len(submitted) <= -(-_sheet_rows(project) // 5), (submitted, proc.stdout[-2000:])
    for fid in remote:
        assert (project / "logs" / "figures" / f"{fid}.log").is_file()


def test_slurm_profile_dry_run(tmp_path):
    """`snakemake --profile profiles/slurm -n` on a fresh copy: no cluster needed, every figure
    listed with its own mem_mb and runtime, nothing written."""
    pytest.importorskip("snakemake_executor_plugin_slurm")
    project = _with_profiles(copy_project(tmp_path / "slurm"))
    proc = snakemake(project, "--profile", "profiles/slurm", "-n", "-p")
    text = proc.stdout + proc.stderr
    assert "Using profile profiles/slurm" in text
    assert text.count("rule figure:") == _sheet_rows(project)
    assert text.count("--granted mem_mb=") == _sheet_rows(project)
    assert not (project / "results").exists() and not (project / "logs").exists()


def test_init_installs_the_profiles(tmp_path):
    """`figkit init` puts the same three profiles into the new folder, and the local one runs
    there (a dry run through `--profile profiles/local`)."""
    target = tmp_path / "paper"
    proc = subprocess.run([sys.executable, "-m", "figkit", "init", str(target), "--scale", "0.02"],
                          capture_output=True, text=True)
    assert proc.returncode == 0, proc.stderr
    for name in PROFILES:
        cmp = filecmp.dircmp(REPO / "profiles" / name, target / "profiles" / name)
        assert cmp.left_only == [] and cmp.right_only == [] and cmp.diff_files == [], name
    dry = snakemake(target, "--profile", "profiles/local", "-n")
    assert "Using profile profiles/local" in dry.stdout + dry.stderr


def test_a_job_command_stands_alone(tmp_path):
    """The command Snakemake prints for a figure job holds no path of this machine and runs in a
    fresh environment (`env -i`, only PATH with the environment's bin folder first, and HOME), as
    on another node: FIGKIT_PYTHON unset, the shell falls back to python3 from PATH."""
    import re
    project = copy_project(tmp_path / "alone")
    make_demo_data(project)
    proc = snakemake(project, "-n", "-p", "results/figures/temperature-histogram.json")
    (command,) = [l.split("Shell command: ", 1)[1] for l in proc.stdout.splitlines()
                  if "figkit render" in l and l.startswith("Shell command: ")]
    assert str(project) not in command and sys.executable not in command
    assert not re.search(r"(^|\s)/", command)       # no absolute path at all
    env = {"PATH": f"{Path(sys.executable).parent}{os.pathsep}/usr/bin{os.pathsep}/bin",
           "HOME": os.environ.get("HOME", str(tmp_path))}
    (project / "logs" / "figures").mkdir(parents=True)
    run = subprocess.run(["env", "-i", *(f"{k}={v}" for k, v in env.items()), "bash", "-c",
                          f"set -euo pipefail; {command}"], cwd=project, capture_output=True, text=True)
    assert run.returncode == 0, run.stdout + run.stderr
    car = json.loads((project / "results" / "figures" / "temperature-histogram.json").read_text())
    assert car["settings"]["from"] == "config/config.yaml"     # no workflow around it
    assert car["resources"]["granted"]["mem_mb"] > 0


def test_a_killed_job_is_retried_with_more_memory_and_time(tmp_path):
    """A figure job the batch system kills on its first attempt (the stand-in fails it with code
    137) is submitted again by `--retries 1`, and Snakemake grants it twice the estimated mem_mb
    and runtime: the sidecar holds both the estimate and the grant."""
    pytest.importorskip("snakemake_executor_plugin_cluster_generic")
    project = _with_profiles(copy_project(tmp_path / "retry"))
    make_demo_data(project)
    (project / ".queue").mkdir()
    (project / ".queue" / "kill-next").write_text("")
    target = "results/figures/temperature-histogram.json"
    _stand_in(project, target, "--retries", "1")
    submitted = (project / ".queue" / "submitted").read_text().split()
    assert len(submitted) == 2
    assert (project / ".queue" / f"{submitted[0]}.rc").read_text().strip() == "137"
    res = json.loads((project / target).read_text())["resources"]
    assert res["granted"] == {"mem_mb": 2 * res["mem_mb"], "runtime": 2 * res["runtime_min"]}


GROUP_ROWS = [   # four figures of the Palmer penguins, one cluster job (five figures per group)
    # the bad one, first: a house style that fails the build at drawing time (lint passes it).
    # First, so that without keep-going on the node the group stops before the other three
    # (placed last, the other three were built anyway and the test passed without it).
    ["bad-scatter", "penguins", "scatter", "bill_length_mm", "flipper_length_mm", "species", "",
     "unforgiving"],
    ["bill-scatter", "penguins", "scatter", "bill_length_mm", "bill_depth_mm", "species", "", ""],
    ["flipper-hist", "penguins", "histogram", "flipper_length_mm", "", "", "species", ""],
    ["mass-box", "penguins", "box", "species", "body_mass_g", "", "", ""],
]


def test_a_figure_that_fails_in_a_group_job_fails_alone(tmp_path):
    """Four figures in one group job on the stand-in cluster, one of which fails while it is
    drawn: the node builds the other three (keep-going on the node, figkit.workflow), the batch
    system reports the job failed and Snakemake exits non-zero, the failed figure's log holds its
    one-line error and it has no files, the other three are kept with every file whole
    (--keep-incomplete in the profile).  After the row is fixed, a dry run lists that figure
    alone, and the build makes it without touching the other three's files."""
    pytest.importorskip("snakemake_executor_plugin_cluster_generic")
    header = ["id", "dataset", "chart", "x", "y", "colour", "strata", "style"]
    project = _with_profiles(write_penguin_project(tmp_path / "group", sheet_text(header, GROUP_ROWS),
                                                   formats="[pdf, png]"))
    (project / "Snakefile").write_text(
        'import figkit.workflow\nconfigfile: "config/config.yaml"\n'
        'include: figkit.workflow.rules()\n\nrule all:\n    input: rules.all_figures.input\n')
    # A strict house style whose colour-difference threshold no three-colour palette meets (a
    # value chosen to fail: CIEDE2000 90 exceeds the distance of most pairs of distinct hues).
    styles = project / "styles"
    text = (styles / "house.yaml").read_text()
    assert "\nstrict: false" in text and "\nmin_colour_difference: " in text
    text = text.replace("\nstrict: false", "\nstrict: true")
    text = re.sub(r"\nmin_colour_difference: \S+", "\nmin_colour_difference: 90", text)
    (styles / "unforgiving.yaml").write_text(text)
    shutil.copy(styles / "house.mplstyle", styles / "unforgiving.mplstyle")
    lint = subprocess.run([sys.executable, "-m", "figkit", "lint"], cwd=project,
                          capture_output=True, text=True)
    assert lint.returncode == 0, lint.stdout + lint.stderr     # not a mistake found before drawing

    first = _stand_in(project, "--retries", "0", check=False)
    assert first.returncode != 0
    (job,) = (project / ".queue" / "submitted").read_text().split()   # one group job
    assert (project / ".queue" / f"{job}.rc").read_text().strip() not in ("", "0")
    figures = project / "results" / "figures"
    log = (project / "logs" / "figures" / "bad-scatter.log").read_text().splitlines()
    errors = [line for line in log if line.startswith("figkit: error: ")]
    assert len(errors) == 1 and "Traceback" not in "\n".join(log)
    assert "sheet row 2, figure 'bad-scatter'" in errors[0] and "colours too alike" in errors[0]
    assert not list(figures.glob("bad-scatter.*"))
    good = {}
    for fid in ("bill-scatter", "flipper-hist", "mass-box"):
        record = json.loads((figures / f"{fid}.json").read_text())
        for ext in ("pdf", "png", "stats.csv"):
            path = figures / f"{fid}.{ext}"
            assert hashlib.sha256(path.read_bytes()).hexdigest() == record["file_sha256"][path.name]
        assert (figures / f"{fid}.pdf").read_bytes().rstrip().endswith(b"%%EOF")
        with Image.open(figures / f"{fid}.png") as im:
            im.load()                                        # decodes the whole image
        good[fid] = {p.name: (p.stat().st_mtime_ns, p.read_bytes()) for p in figures.glob(f"{fid}.*")}

    sheet = project / "config" / "figures.tsv"
    sheet.write_text(sheet.read_text().replace("\tunforgiving\n", "\t\n"))
    dry = _stand_in(project, "--retries", "0", "-n")
    planned = re.findall(r"rule figure:\n(?:.*\n)*?\s*wildcards: id=(\S+)", dry.stdout + dry.stderr)
    assert planned == ["bad-scatter"], (dry.stdout + dry.stderr)[-3000:]
    _stand_in(project, "--retries", "0")
    assert json.loads((figures / "bad-scatter.json").read_text())["id"] == "bad-scatter"
    for fid, files in good.items():
        assert {p.name: (p.stat().st_mtime_ns, p.read_bytes())
                for p in figures.glob(f"{fid}.*")} == files, fid


def test_a_killed_group_job_does_not_leave_a_stale_figure_as_current(tmp_path):
    """A row is edited, and the group job that would rebuild its figure is killed by the batch
    system before it starts (time limit, lost node; the stand-in's kill-next, no retries left).
    With keep-incomplete, Snakemake would keep the previous build's files, whole and agreeing
    with their sidecar, and record them as finished with the new settings (found by an
    independent review; Snakemake 9.27, Job.postprocess): the next run must still build the
    figure from today's row.  Outside reference: Snakemake's own dry-run listing and the sidecar
    the rebuilt figure carries."""
    pytest.importorskip("snakemake_executor_plugin_cluster_generic")
    header = ["id", "dataset", "chart", "x", "y", "colour", "strata", "style"]
    rows = [r for r in GROUP_ROWS if r[0] != "bad-scatter"]
    project = _with_profiles(write_penguin_project(tmp_path / "stale", sheet_text(header, rows),
                                                   formats="[pdf, png]"))
    (project / "Snakefile").write_text(
        'import figkit.workflow\nconfigfile: "config/config.yaml"\n'
        'include: figkit.workflow.rules()\n\nrule all:\n    input: rules.all_figures.input\n')
    _stand_in(project, "--retries", "0")
    sidecar = project / "results" / "figures" / "mass-box.json"
    kept = {p.name: p.read_bytes() for p in sidecar.parent.glob("bill-scatter.*")}
    sheet = project / "config" / "figures.tsv"
    sheet.write_text(sheet.read_text().replace("\tbody_mass_g\t", "\tflipper_length_mm\t"))
    (project / ".queue" / "kill-next").write_text("")
    killed = _stand_in(project, "--retries", "0", check=False)
    assert killed.returncode != 0
    # the stale figure's files went before anything was submitted (figkit.workflow.recover) ...
    assert "figure 'mass-box': its sheet row" in killed.stderr, killed.stderr[-2000:]
    assert not list(sidecar.parent.glob("mass-box.*"))
    # ... and only its: an unchanged figure keeps its files, byte for byte
    assert {p.name: p.read_bytes() for p in sidecar.parent.glob("bill-scatter.*")} == kept
    dry = _stand_in(project, "--retries", "0", "-n")
    planned = re.findall(r"wildcards: id=(\S+)", dry.stdout + dry.stderr)
    assert planned == ["mass-box"], (dry.stdout + dry.stderr)[-2000:]
    _stand_in(project, "--retries", "0")
    assert json.loads(sidecar.read_text())["y"] == "flipper_length_mm"


def test_keep_going_on_node_against_snakemakes_settings():
    """figkit.workflow.keep_going_on_node on Snakemake's own ExecutionSettings: set in remote mode
    only; a settings object that lacks the field or refuses it (a frozen dataclass) is left as it
    is, without an error, as is a workflow whose settings are not in place yet (None)."""
    import dataclasses
    from types import SimpleNamespace
    from snakemake.settings.types import ExecutionSettings
    from figkit.workflow import keep_going_on_node

    def flow(settings, remote=True):
        return SimpleNamespace(remote_exec=remote, execution_settings=settings)
    remote, main = ExecutionSettings(), ExecutionSettings()
    assert keep_going_on_node(flow(remote)) and remote.keep_going is True
    assert not keep_going_on_node(flow(main, remote=False)) and main.keep_going is False

    @dataclasses.dataclass(frozen=True)
    class Frozen:
        keep_going: bool = False
    frozen = Frozen()
    assert not keep_going_on_node(flow(frozen)) and frozen.keep_going is False
    assert not keep_going_on_node(flow(SimpleNamespace()))
    assert not keep_going_on_node(flow(None))


def _sheet_rows(project) -> int:
    """Figures of the demo sheet: its rows below the header."""
    lines = (project / "config" / "figures.tsv").read_text(encoding="utf-8").splitlines()
    return sum(1 for ln in lines[1:] if ln.strip())
