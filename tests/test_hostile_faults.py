"""Faults mid-build (issue 17): a build killed at random moments (SIGKILL of Snakemake or of a
figure job, seeded), then a plain ``snakemake --cores 2`` completes and every figure's files are
whole and agree with their sidecar; leftovers of dead processes are removed; a data file
rewritten while it is read is refused; Python warnings do not reach the user.

Outside references: SHA-256 (FIPS 180-4, Python's hashlib) for "whole"; Snakemake's own
persistence layout for its incomplete markers (checked against the markers a killed Snakemake
really leaves); POSIX kill(2) (signal 0 tests existence) and stat(2); matplotlib's FT2Font
charmap as the reference for which characters DejaVu Sans lacks.
"""
from __future__ import annotations

import hashlib
import json
import os
import random
import signal
import subprocess
import sys
import time
from pathlib import Path

import pytest

from conftest import REPO

SEED = 20261203


def sha256(path: Path) -> str:
    return hashlib.sha256(path.read_bytes()).hexdigest()      # FIPS 180-4 via hashlib


def figkit(cwd: Path, *args: str, timeout: float = 300) -> subprocess.CompletedProcess:
    return subprocess.run([sys.executable, "-m", "figkit", *args], cwd=cwd, capture_output=True,
                          text=True, timeout=timeout, env=dict(os.environ, MPLBACKEND="Agg"))


def snakemake(cwd: Path, *args: str, timeout: float = 600) -> subprocess.CompletedProcess:
    return subprocess.run([sys.executable, "-m", "snakemake", "--cores", "2", *args], cwd=cwd,
                          capture_output=True, text=True, timeout=timeout,
                          env=dict(os.environ, MPLBACKEND="Agg"))


@pytest.fixture(scope="module")
def project(tmp_path_factory) -> Path:
    root = tmp_path_factory.mktemp("faults") / "p"
    proc = figkit(root.parent, "init", str(root), "--scale", "0.02")
    assert proc.returncode == 0, proc.stderr
    proc = snakemake(root)
    assert proc.returncode == 0, proc.stderr[-3000:]
    return root


def assert_whole_and_current(root: Path) -> None:
    """Every figure's files exist with the SHA-256 its sidecar records, its inputs' hashes are
    the data files' as they are now, and no temporary file is left."""
    figures = root / "results" / "figures"
    sidecars = sorted(figures.glob("*.json"))
    assert len(sidecars) == 2
    for sc in sidecars:
        record = json.loads(sc.read_text(encoding="utf-8"))
        for name, digest in record["file_sha256"].items():
            assert sha256(figures / name) == digest, (sc.name, name)
        for inp in record["inputs"]:
            assert sha256(root / inp["path"]) == inp["sha256"], (sc.name, inp["path"])
    assert not [p.name for p in figures.iterdir() if p.name.endswith(".part")]


def _children(pid: int) -> list[int]:
    """The processes of the session ``pid`` leads (started with start_new_session): its jobs
    (proc(5): /proc/PID/stat, field 6 is the session id)."""
    out = []
    for entry in Path("/proc").iterdir():
        if not entry.name.isdigit() or int(entry.name) == pid:
            continue
        try:
            fields = (entry / "stat").read_text().rsplit(")", 1)[1].split()
        except OSError:
            continue
        if int(fields[3]) == pid:           # field 6 overall; 4th after the name
            out.append(int(entry.name))
    return out


def _cmdline(pid: int) -> str:
    try:
        return Path(f"/proc/{pid}/cmdline").read_bytes().replace(b"\0", b" ").decode()
    except OSError:
        return ""


def _wait_gone(pids, limit: float = 120) -> None:
    end = time.monotonic() + limit
    for pid in pids:
        while time.monotonic() < end:
            try:
                os.kill(pid, 0)
            except ProcessLookupError:
                break
            time.sleep(0.2)


@pytest.mark.skipif(not Path("/proc/self/task").is_dir(), reason="needs Linux /proc")
def test_killed_builds_then_a_plain_build_completes_with_whole_files(project):
    rng = random.Random(SEED)
    killed = {"snakemake": 0, "figure job": 0}
    for round_ in range(4):
        for name in ("readings.csv", "surveys.csv"):         # both figures out of date: a
            path = project / "data" / name                    # row more (Snakemake compares
            rows = path.read_bytes().splitlines(keepends=True)  # small inputs by checksum)
            path.write_bytes(b"".join(rows) + rows[-1])
        proc = subprocess.Popen([sys.executable, "-m", "snakemake", "--cores", "2"], cwd=project,
                                stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL,
                                env=dict(os.environ, MPLBACKEND="Agg"), start_new_session=True)
        which = ("snakemake", "figure job")[round_ % 2]
        if which == "snakemake":
            time.sleep(rng.uniform(1.0, 7.0))                  # any moment of the run
        else:                                                  # a moment inside a job
            end = time.monotonic() + 60
            while time.monotonic() < end and not [
                    k for k in _children(proc.pid) if "-m figkit render" in _cmdline(k)]:
                time.sleep(0.1)
            time.sleep(rng.uniform(0.0, 2.0))
        kids = _children(proc.pid)
        jobs = [k for k in kids if "-m figkit render" in _cmdline(k)
                and not _cmdline(k).startswith(("/bin/bash", "/usr/bin/bash"))]
        if which == "figure job" and jobs:
            os.kill(rng.choice(jobs), signal.SIGKILL)
        else:
            which = "snakemake"
            os.kill(proc.pid, signal.SIGKILL)
        killed[which] += 1
        if which == "snakemake":
            proc.wait(timeout=60)
            markers = list((project / ".snakemake" / "incomplete").rglob("*"))
            if markers:      # our reading of Snakemake's layout names the markers it left
                from figkit.workflow.recover import marker_path
                with_cwd = os.getcwd()
                os.chdir(project)
                try:
                    keys = [f"results/figures/{fid}.{ext}" for fid in
                            ("oxygen-by-land-use", "taxa-by-season")
                            for ext in ("json", "stats.csv", "pdf", "png", "svg")]
                    ours = {str(marker_path(k).resolve()) for k in keys}
                finally:
                    os.chdir(with_cwd)
                assert {str(m.resolve()) for m in markers if m.is_file()} <= ours
        else:
            proc.wait(timeout=300)
        rebuild = snakemake(project)
        assert rebuild.returncode == 0, (round_, which, rebuild.stderr[-3000:])
        assert "IncompleteFilesException" not in rebuild.stderr
        _wait_gone(kids)                  # a job orphaned by the kill finishes its own writing
        assert_whole_and_current(project)
        again = snakemake(project, "--dry-run")
        assert "Nothing to be done" in again.stdout + again.stderr, again.stdout[-2000:]
    assert sum(killed.values()) == 4 and killed["snakemake"] >= 2
    print(f"\nkilled: {killed}", file=sys.stderr)


def test_half_written_figure_under_an_incomplete_marker_is_built_again(project):
    """A marker on a figure whose PDF is another build's (its hash disagrees): the files are
    removed and built again; a marker on a whole figure is simply cleared."""
    from figkit.workflow.recover import marker_path
    figures = project / "results" / "figures"
    pdf = figures / "taxa-by-season.pdf"
    good = pdf.read_bytes()
    pdf.write_bytes(good[: len(good) // 2] + b"%%EOF\n")            # not what the sidecar says
    here = os.getcwd()
    os.chdir(project)
    try:
        for fid in ("taxa-by-season", "oxygen-by-land-use"):
            for ext in ("json", "pdf"):
                m = marker_path(f"results/figures/{fid}.{ext}")
                m.parent.mkdir(parents=True, exist_ok=True)
                m.write_text(json.dumps({"external_jobid": None}))
    finally:
        os.chdir(here)
    whole_before = sha256(figures / "oxygen-by-land-use.png")
    proc = snakemake(project)
    assert proc.returncode == 0, proc.stderr[-3000:]
    assert "figure 'taxa-by-season': its files were left half-written" in proc.stderr
    assert "oxygen-by-land-use': its files" not in proc.stderr
    assert pdf.read_bytes() == good                              # rebuilt: byte-identical
    assert sha256(figures / "oxygen-by-land-use.png") == whole_before
    assert_whole_and_current(project)


def test_with_keep_incomplete_a_half_written_figure_without_marker_is_built_again(project):
    """--keep-incomplete (the cluster profiles): Snakemake keeps a failed job's files and clears
    their markers, so the start of a run checks every figure against its sidecar's hashes: a
    PDF of another build with no marker at all (as a killed `figkit render` run by hand leaves
    it, or a co-author's edit) is moved to results/figures/set-aside/ (not deleted) and the figure
    built again byte-identical; a whole figure is left as it is (its files not rewritten)."""
    figures = project / "results" / "figures"
    assert not list((project / ".snakemake" / "incomplete").rglob("*"))
    pdf = figures / "taxa-by-season.pdf"
    good = pdf.read_bytes()
    pdf.write_bytes(good[: len(good) // 2] + b"%%EOF\n")            # not what the sidecar says
    whole = figures / "oxygen-by-land-use.png"
    before = (sha256(whole), whole.stat().st_mtime_ns)
    proc = snakemake(project, "--keep-incomplete")
    assert proc.returncode == 0, proc.stderr[-3000:]
    assert "figure 'taxa-by-season': its files disagree with the SHA-256s" in proc.stderr
    assert "oxygen-by-land-use': its files" not in proc.stderr
    assert pdf.read_bytes() == good                              # rebuilt: byte-identical
    aside = figures / "set-aside" / "taxa-by-season.pdf"           # the odd file kept, not lost
    assert aside.read_bytes() == good[: len(good) // 2] + b"%%EOF\n"
    assert (sha256(whole), whole.stat().st_mtime_ns) == before
    assert_whole_and_current(project)


def test_keep_incomplete_check_needs_evidence(tmp_path, monkeypatch):
    """The check of every figure removes files only on evidence: a sidecar that records a hash
    the file does not have.  A sidecar of an older figkit (no file_sha256) or a file it records
    no hash for is left alone, and without --keep-incomplete unmarked figures are not looked at."""
    from figkit.workflow.recover import recover_figures
    monkeypatch.chdir(tmp_path)
    folder = tmp_path / "results" / "figures"
    folder.mkdir(parents=True)
    (folder / "old.json").write_text(json.dumps({"id": "old"}))       # no hashes recorded
    (folder / "old.png").write_bytes(b"anything")
    (folder / "mix.png").write_bytes(b"new")
    (folder / "mix.stats.csv").write_bytes(b"not recorded")
    (folder / "mix.json").write_text(json.dumps({"file_sha256": {
        "mix.png": hashlib.sha256(b"old").hexdigest()}}))             # FIPS 180-4 via hashlib
    assert recover_figures("results", ["old", "mix"], ["png"], every=False) == []
    assert (folder / "mix.png").exists()
    assert recover_figures("results", ["old", "mix"], ["png"], every=True) == ["mix"]
    assert not [p for p in folder.iterdir() if p.name.startswith("mix.")]
    assert (folder / "set-aside" / "mix.png").read_bytes() == b"new"   # moved, not deleted
    assert (folder / "old.png").read_bytes() == b"anything" and (folder / "old.json").exists()


def test_keep_incomplete_finds_figures_older_than_their_row_data_or_style(project, tmp_path):
    """What the workflow asks with --keep-incomplete (figkit.preflight.changes_since_built, also
    preflight's up-to-date check), on a real build's sidecar in a copy of the project: nothing
    while row, data and house style are as built; then each change is named (the figure's row,
    its data file, a house-style file).  Hashes are hashlib's SHA-256 (FIPS 180-4)."""
    import shutil

    from figkit.preflight import changes_since_built
    from figkit.render import load_project
    copy = tmp_path / "copy"
    shutil.copytree(project, copy, symlinks=False)
    record = json.loads((copy / "results" / "figures" / "taxa-by-season.json").read_text())

    def changes():
        p = load_project(copy)
        return changes_since_built(record, p, p.spec("taxa-by-season"))
    assert changes() == []
    sheet = copy / "config" / "figures.tsv"
    saved_sheet = sheet.read_text()
    lines = saved_sheet.splitlines(keepends=True)
    row = next(i for i, line in enumerate(lines) if line.startswith("taxa-by-season\t"))
    head = lines[0].rstrip("\n").split("\t")
    cells = lines[row].rstrip("\n").split("\t") + [""] * len(head)
    cells[head.index("caption")] = "an edited caption"
    lines[row] = "\t".join(cells[:len(head)]) + "\n"
    sheet.write_text("".join(lines))
    assert "its sheet row" in changes()
    sheet.write_text(saved_sheet)
    data = copy / record["inputs"][0]["path"]
    saved = data.read_bytes()
    data.write_bytes(saved + b"\n")
    assert record["inputs"][0]["path"] in changes()
    data.write_bytes(saved)
    name = next(iter(record["style"]["files"]))
    style = copy / load_project(copy).config["styles_dir"] / name
    style.write_text(style.read_text() + "\n# edited\n")
    assert f"style file {name}" in changes()


def test_a_lock_no_recorded_run_took_is_left_alone(project):
    """Locks of a run figkit did not record (another machine, another tool): never removed."""
    locks = project / ".snakemake" / "locks"
    locks.mkdir(parents=True, exist_ok=True)
    lock = locks / "0.output.lock"
    lock.write_text("results/figures/taxa-by-season.json\n")
    try:
        proc = snakemake(project, "--forcerun", "figure")
        assert proc.returncode != 0 and lock.exists()
        assert "unlock" in (proc.stdout + proc.stderr).lower()
    finally:
        lock.unlink()
    assert snakemake(project).returncode == 0


def test_leftovers_of_dead_processes_are_removed_and_live_ones_kept(tmp_path):
    from figkit.provenance import _HOST, atomic_outputs
    dead = subprocess.Popen([sys.executable, "-c", "pass"])
    dead.wait()                                  # its id now names no process (POSIX kill(2))
    folder = tmp_path / "figures"
    folder.mkdir()
    gone = folder / f".f.png.{_HOST}~{dead.pid}.abc123.part"
    live = folder / f".f.png.{_HOST}~{os.getpid()}.def456.part"
    other_host = folder / f".f.png.elsewhere~{dead.pid}.ghi789.part"
    other_fig = folder / f".g.png.{_HOST}~{dead.pid}.jkl012.part"
    for p in (gone, live, other_host, other_fig):
        p.write_bytes(b"half")
    with atomic_outputs([folder / "f.png"]) as (tmp,):
        tmp.write_bytes(b"whole")
    assert not gone.exists()
    assert live.exists() and other_host.exists()
    assert other_fig.exists()                    # another figure's: its own build clears it
    assert (folder / "f.png").read_bytes() == b"whole"


def test_a_data_file_replaced_while_it_is_read_is_refused(tmp_path, monkeypatch):
    """The sidecar must not pair the new file's hash with numbers from the old one: the file is
    replaced just after pandas read it, and the build refuses (stat(2) identity differs)."""
    import pandas as pd
    import figkit.data as D
    from figkit.errors import FigkitError
    from figkit.sheet import load_project
    root = tmp_path / "p"
    (root / "data").mkdir(parents=True)
    import shutil
    shutil.copytree(REPO / "figkit" / "styles", root / "styles")
    csv = root / "data" / "t.csv"
    pd.DataFrame({"x": [1.0, 2.0, 3.0, 4.0]}).to_csv(csv, index=False)
    (root / "figures.tsv").write_text("id\tdataset\tchart\tx\nh\tt\thistogram\tx\n")
    project = load_project(root, settings={"datasets": {"t": "data/t.csv"}, "sheet": "figures.tsv"})
    spec = project.spec("h")
    real = D.read_dataset

    def read_then_replace(path, columns):
        frame = real(path, columns)
        new = csv.with_name("t.csv.new")
        new.write_text("x\n10\n20\n30\n40\n")
        os.replace(new, csv)                     # a writer's atomic replace mid-build
        return frame

    monkeypatch.setattr(D, "read_dataset", read_then_replace)
    with pytest.raises(FigkitError) as info:
        D.load_figure_data(spec)
    assert "changed while figkit read it" in str(info.value) and "field 'dataset'" in str(info.value)
    monkeypatch.setattr(D, "read_dataset", real)
    data = D.load_figure_data(spec)              # once the file is still: its own hash, numbers
    assert data.inputs[0]["sha256"] == sha256(csv)
    assert float(data.panels[0].frame["x"].sum()) == 100.0


def test_no_python_warning_text_reaches_the_user(tmp_path):
    """Bad-but-valid inputs (characters the font lacks, one row, constant values) built and
    linted with -W error: no traceback, no warning text; a missing glyph is a caution naming it."""
    import pandas as pd
    from matplotlib import font_manager
    from matplotlib.ft2font import FT2Font
    root = tmp_path / "p"
    assert figkit(tmp_path, "init", str(root), "--scale", "0.02").returncode == 0
    missing = "\u8a9e"     # CJK U+8A9E: absent from DejaVu Sans (checked against its charmap)
    font = FT2Font(font_manager.findfont("DejaVu Sans"))
    assert ord(missing) not in font.get_charmap()
    pd.DataFrame({"g": [f"{missing}a", "b", "b"], "v": [1.0, 1.0, 1.0],
                  "w": [2.0, 2.0, 2.0]}).to_csv(root / "data" / "odd.csv", index=False)
    config = root / "config" / "config.yaml"
    config.write_text(config.read_text().replace("datasets:\n", "datasets:\n  odd: data/odd.csv\n"))
    (root / "config" / "figures.tsv").write_text(
        "id\tdataset\tchart\tx\ty\ttrend\n"
        "glyphs\todd\tbox\tg\tv\t\n"
        "flat\todd\tscatter\tv\tw\tline\n"
        "one-value\todd\tviolin\tg\tv\t\n"
        "flat-density\todd\tdensity\tv\t\t\n")
    for args in (["lint"], ["render", "--id", "glyphs", "--id", "flat", "--id", "one-value",
                            "--id", "flat-density"]):
        proc = subprocess.run([sys.executable, "-W", "error", "-m", "figkit", *args], cwd=root,
                              capture_output=True, text=True, timeout=300,
                              env=dict(os.environ, MPLBACKEND="Agg"))
        text = proc.stdout + proc.stderr
        assert "Traceback" not in text, text[-3000:]
        assert "Warning:" not in text and "warnings.warn" not in text, text[-3000:]
        assert all(ln.startswith(("figkit:", "{", " ")) or not ln.strip()
                   for ln in proc.stderr.splitlines()), proc.stderr[-3000:]
    record = json.loads((root / "results" / "figures" / "glyphs.json").read_text(encoding="utf-8"))
    assert any("no glyph" in c and missing in c for c in record["cautions"]), record["cautions"]
