"""One warm interpreter for a build's figure jobs (figkit.warm): each figure stays its own Snakemake
job, the files are byte-identical to one interpreter per job, a failing figure fails alone, an
edited row reruns only its figure, and the interpreter starts really drop from one per figure to
one per build.  Interpreter starts and forked renders are counted from FIGKIT_PROCESS_LOG, a line
each process writes (figkit.warm.note); the counts are checked against the sheet's rows and against
Snakemake's own account of the jobs it ran (its log lines), not against numbers typed here."""
from __future__ import annotations

import hashlib
import os
import re
import signal
import subprocess
import sys
import time
from pathlib import Path

import pytest

from conftest import copy_project, make_demo_data
from figkit import warm

pytestmark = pytest.mark.skipif(not warm.available(), reason="no fork or Unix sockets here")


def _build(project: Path, *args: str, warm_on: bool = True, log: Path | None = None, check=True):
    env = dict(os.environ, MPLBACKEND="Agg")
    env.pop(warm.VAR, None)
    if not warm_on:
        env[warm.VAR] = "off"
    if log is not None:
        env[warm.LOG_VAR] = str(log)
    proc = subprocess.run([sys.executable, "-m", "snakemake", "--cores", "2", *args], cwd=project,
                          capture_output=True, text=True, env=env)
    if check and proc.returncode != 0:
        raise AssertionError(proc.stdout[-3000:] + proc.stderr[-3000:])
    return proc


def _events(log: Path) -> list[tuple[str, int, str]]:
    if not log.exists():
        return []
    out = []
    for line in log.read_text().splitlines():
        event, pid, what = (line.split(" ", 2) + [""])[:3]
        out.append((event, int(pid), what))
    return out


def _hashes(folder: Path) -> dict:
    return {p.name: hashlib.sha256(p.read_bytes()).hexdigest() for p in sorted(folder.iterdir())
            if p.is_file()}


def _rows(project: Path) -> list[str]:
    lines = (project / "config" / "figures.tsv").read_text(encoding="utf-8").splitlines()
    return [ln.split("\t", 1)[0] for ln in lines[1:] if ln.strip()]


def _figure_jobs_run(proc) -> list[str]:
    """The figure ids Snakemake says it started (its 'wildcards: id=...' lines)."""
    return re.findall(r"wildcards: id=(\S+)", proc.stdout + proc.stderr)


@pytest.fixture(scope="module")
def two_builds(tmp_path_factory):
    """The demo sheet built twice from the same data: warm (one server) and one interpreter per job."""
    root = tmp_path_factory.mktemp("warm")
    out = {}
    for name, on in (("warm", True), ("cold", False)):
        project = copy_project(root / name)
        make_demo_data(project)
        log = root / f"{name}.log"
        proc = _build(project, warm_on=on, log=log)
        out[name] = (project, log, proc)
    return out


def test_files_are_byte_identical_to_one_interpreter_per_job(two_builds):
    warm_p, cold_p = two_builds["warm"][0], two_builds["cold"][0]
    got, want = _hashes(warm_p / "results" / "figures"), _hashes(cold_p / "results" / "figures")
    assert got == want
    # every row's sidecar, figure files and stats are there (12 demo rows -> >= 5 files each)
    assert len(want) >= 5 * len(_rows(cold_p))


def test_interpreter_starts_drop_to_one_per_build(two_builds):
    rows = _rows(two_builds["cold"][0])
    cold = _events(two_builds["cold"][1])
    assert sorted(e[2] for e in cold if e[0] == "interpreter") == sorted(rows)   # one per figure
    assert not [e for e in cold if e[0] == "fork"]
    events = _events(two_builds["warm"][1])
    starts = [e for e in events if e[0] == "interpreter"]
    forks = [e for e in events if e[0] == "fork"]
    assert len(starts) == 1 and starts[0][2] == "warm server"
    # one forked render per Snakemake job, each its own process
    ran = _figure_jobs_run(two_builds["warm"][2])
    assert sorted(ran) == sorted(rows)
    assert sorted(re.search(r"--id (\S+)", f[2]).group(1) for f in forks) == sorted(rows)
    assert len({f[1] for f in forks}) == len(rows)


def test_server_ends_with_its_build(two_builds):
    """The server belongs to the Snakemake process that named it: gone within seconds of its end."""
    (start,) = [e for e in _events(two_builds["warm"][1]) if e[0] == "interpreter"]
    deadline = time.monotonic() + 10
    while time.monotonic() < deadline and Path(f"/proc/{start[1]}").exists():
        time.sleep(0.2)
    assert not Path(f"/proc/{start[1]}").exists() or "zombie" in _state(start[1])


def _state(pid: int) -> str:
    try:
        return Path(f"/proc/{pid}/status").read_text().lower()
    except OSError:
        return "zombie"


def test_editing_one_row_reruns_only_that_figure_warm(two_builds, tmp_path):
    project = two_builds["warm"][0]
    sheet = project / "config" / "figures.tsv"
    old = sheet.read_text(encoding="utf-8")
    before = _hashes(project / "results" / "figures")
    lines = old.splitlines(keepends=True)
    target = lines[1].split("\t", 1)[0]
    cells = lines[1].rstrip("\n").split("\t")
    header = lines[0].rstrip("\n").split("\t")
    cells[header.index("caption")] += " (edited)"
    lines[1] = "\t".join(cells) + "\n"
    sheet.write_text("".join(lines), encoding="utf-8")
    log = tmp_path / "rerun.log"
    try:
        proc = _build(project, log=log)
        assert _figure_jobs_run(proc) == [target]
        forks = [e for e in _events(log) if e[0] == "fork"]
        assert len(forks) == 1 and f"--id {target} " in forks[0][2] + " "
        after = _hashes(project / "results" / "figures")
        changed = {n for n in after if after[n] != before.get(n)}
        assert changed and {n.split(".", 1)[0] for n in changed} == {target}
    finally:
        sheet.write_text(old, encoding="utf-8")


def test_a_failing_row_among_good_ones_fails_alone(tmp_path):
    """Three rows, the middle one naming a column the data lack: with --keep-going the two good
    figures are written whole, Snakemake reports exactly the bad figure's job as failed, and its
    log holds the one-line error; no file of the bad figure exists."""
    project = copy_project(tmp_path / "fail")
    make_demo_data(project)
    sheet = project / "config" / "figures.tsv"
    lines = sheet.read_text(encoding="utf-8").splitlines(keepends=True)
    header = lines[0].rstrip("\n").split("\t")
    good = [ln for ln in lines[1:] if ln.split("\t", 1)[0] in ("temperature-histogram", "taxa-counts")]
    bad = good[0].rstrip("\n").split("\t")
    bad[0] = "broken-histogram"
    bad[header.index("x")] = "no_such_column"
    sheet.write_text(lines[0] + good[0] + "\t".join(bad) + "\n" + good[1], encoding="utf-8")
    log = tmp_path / "fail.log"
    proc = _build(project, "--keep-going", log=log, check=False)
    text = proc.stdout + proc.stderr
    assert proc.returncode != 0
    # Snakemake's block for each failed job names its outputs
    failed = re.findall(r"Error in rule figure:.*?output: \S*?results/figures/([^/\s]+)\.json", text,
                        flags=re.S)
    assert failed == ["broken-histogram"]
    figures = project / "results" / "figures"
    for fid in ("temperature-histogram", "taxa-counts"):
        assert (figures / f"{fid}.json").is_file() and (figures / f"{fid}.pdf").is_file()
    assert not list(figures.glob("broken-histogram.*"))
    err = (project / "logs" / "figures" / "broken-histogram.log").read_text().strip().splitlines()
    assert err[-1].startswith("figkit: error:") and "no_such_column" in err[-1]
    assert [e[0] for e in _events(log)].count("interpreter") == 1


def test_a_server_that_cannot_start_leaves_the_render_in_its_own_process(tmp_path, monkeypatch):
    """An unusable socket folder: the job renders in its own interpreter (logged as one)."""
    from figkit.cli import main
    proj = tmp_path / "proj"
    assert main(["init", str(proj), "--scale", "0.02"]) == 0
    log = tmp_path / "proc.log"
    monkeypatch.setenv(warm.VAR, f"{os.getpid()}:{tmp_path / 'missing' / 'x.sock'}")
    monkeypatch.setenv(warm.LOG_VAR, str(log))
    fid = _rows(proj)[0]
    assert main(["render", "--id", fid, "--project", str(proj)]) == 0
    assert (proj / "results" / "figures" / f"{fid}.json").is_file()
    assert [e[0] for e in _events(log)] == ["interpreter"]


def test_a_signal_to_the_job_reaches_its_render(tmp_path):
    """SIGTERM sent to a job's process (what Snakemake does on Ctrl-C) ends its forked render
    too, and the job ends by that signal; no figure file appears."""
    proj = tmp_path / "proj"
    subprocess.run([sys.executable, "-m", "figkit", "init", str(proj)], check=True, capture_output=True)
    log = tmp_path / "proc.log"
    owner = subprocess.Popen(["sleep", "60"])
    env = dict(os.environ, MPLBACKEND="Agg")
    env[warm.VAR] = f"{owner.pid}:{warm.socket_path(owner.pid)}"
    env[warm.LOG_VAR] = str(log)
    fid = _rows(proj)[0]
    try:
        job = subprocess.Popen([sys.executable, "-m", "figkit", "render", "--id", fid], cwd=proj,
                               env=env, stdout=subprocess.PIPE, stderr=subprocess.PIPE)
        deadline = time.monotonic() + 60
        while time.monotonic() < deadline and not [e for e in _events(log) if e[0] == "fork"]:
            time.sleep(0.01)
        job.send_signal(signal.SIGTERM)
        job.wait(timeout=30)
        assert job.returncode == -signal.SIGTERM
        (fork,) = [e for e in _events(log) if e[0] == "fork"]
        deadline = time.monotonic() + 10
        while time.monotonic() < deadline and Path(f"/proc/{fork[1]}").exists() \
                and "zombie" not in _state(fork[1]):
            time.sleep(0.05)
        assert not Path(f"/proc/{fork[1]}").exists() or "zombie" in _state(fork[1])
        assert not list((proj / "results" / "figures").glob(f"{fid}.*")) \
            if (proj / "results" / "figures").exists() else True
    finally:
        owner.kill()
        owner.wait()


def test_a_grouped_cluster_build_shares_one_interpreter_per_group(tmp_path):
    """The generic cluster profile (five figure jobs to a group) with the stand-in batch system of
    tests/cluster (each group job started under `env -i`, as on another node; here it also passes
    FIGKIT_PROCESS_LOG on): three figures go to the queue as one group job (Snakemake's account:
    one submission), and that job's figures are rendered by one interpreter on the node."""
    pytest.importorskip("snakemake_executor_plugin_cluster_generic")
    import shutil
    from conftest import REPO
    project = copy_project(tmp_path / "grouped")
    shutil.copytree(REPO / "profiles", project / "profiles")
    make_demo_data(project)
    sheet = project / "config" / "figures.tsv"
    lines = sheet.read_text(encoding="utf-8").splitlines(keepends=True)
    keep = ("temperature-histogram", "taxa-counts", "sensitive-share")
    sheet.write_text(lines[0] + "".join(ln for ln in lines[1:] if ln.split("\t", 1)[0] in keep),
                     encoding="utf-8")
    log = tmp_path / "processes.log"
    submit = tmp_path / "submit.sh"
    submit.write_text((REPO / "tests" / "cluster" / "submit.sh").read_text().replace(
        'env -i PATH="$PATH" HOME="$HOME"', f'env -i PATH="$PATH" HOME="$HOME" {warm.LOG_VAR}={log}'))
    _build(project, "--profile", "profiles/cluster-generic",
           "--cluster-generic-submit-cmd", f"sh {submit}",
           "--cluster-generic-status-cmd", f"sh {REPO / 'tests' / 'cluster' / 'status.sh'}",
           "--cluster-generic-cancel-cmd", "true", "--latency-wait", "10")
    assert len((project / ".queue" / "submitted").read_text().split()) == 1
    for fid in keep:
        assert (project / "results" / "figures" / f"{fid}.json").is_file()
    events = _events(log)
    assert [e[2] for e in events if e[0] == "interpreter"] == ["warm server"]
    forked = sorted(re.search(r"--id (\S+)", e[2]).group(1) for e in events if e[0] == "fork")
    assert forked == sorted(keep)
