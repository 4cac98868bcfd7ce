"""Each figure job asks Snakemake for the memory and time it needs, computed from what it will
read, and a figure over the configured ceiling is refused before it is submitted.

Outside references: Snakemake's own dry-run listing of each job's resources (`snakemake -n -p`);
the row counts pandas reads from the same files; the peak resident memory of the job process as
the kernel reports it (POSIX getrusage, RUSAGE_CHILDREN, ru_maxrss in KiB on Linux).
"""
from __future__ import annotations

import re
import shutil
import subprocess
import sys
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from conftest import REPO, snakemake
from figkit.jobsize import estimate_rows

BIG = 1_500_000      # more rows than one streamed chunk (figkit.data.CHUNK_ROWS = 1e6)


def _project(root: Path, rows: dict[str, int], extra: str = "") -> Path:
    """Datasets of normal readings in three groups (fixed seed), one figure row per dataset and
    chart kind, PNG only."""
    (root / "config").mkdir(parents=True)
    (root / "data").mkdir()
    shutil.copytree(REPO / "figkit" / "styles", root / "styles")
    rng = np.random.default_rng(13)
    lines = ["id\tdataset\tchart\tx\ty\tstrata"]
    for name, n in rows.items():
        pd.DataFrame({"x": rng.normal(size=n).round(3), "y": rng.normal(size=n).round(3),
                      "g": rng.choice(["a", "b", "c"], size=n)}).to_csv(root / "data" / f"{name}.csv",
                                                                       index=False)
        lines += [f"hist-{name}\t{name}\thistogram\tx\t\tg", f"scatter-{name}\t{name}\tscatter\tx\ty\tg"]
    (root / "config" / "figures.tsv").write_text("\n".join(lines) + "\n", encoding="utf-8")
    datasets = ", ".join(f"{n}: data/{n}.csv" for n in rows)
    (root / "config" / "config.yaml").write_text(
        f"datasets: {{{datasets}}}\nformats: [png]\n{extra}", encoding="utf-8")
    (root / "Snakefile").write_text(
        'import figkit.workflow\nconfigfile: "config/config.yaml"\n'
        'include: figkit.workflow.rules()\n\n'
        'rule all:\n    input: rules.all_figures.input\n', encoding="utf-8")
    return root


def _planned(proc) -> dict[str, dict]:
    """figure id -> resources, as Snakemake's dry run lists them."""
    out = {}
    text = proc.stdout + proc.stderr
    for block in text.split("rule figure:")[1:]:
        fid = re.search(r"wildcards: id=(\S+)", block).group(1)
        res = re.search(r"resources: (.*)", block).group(1)
        out[fid] = {k: v for k, v in re.findall(r"(\w+)=([^,]+)", res)}
    return out


@pytest.fixture(scope="module")
def sized(tmp_path_factory) -> Path:
    return _project(tmp_path_factory.mktemp("sized"), {"small": 20_000, "big": BIG})


def test_row_estimate_matches_pandas(sized, tmp_path):
    """The estimate from the file's head is within 2% of the rows pandas reads (CSV, gzip CSV,
    and exact for Parquet, whose footer holds the count)."""
    for name in ("small", "big"):
        path = sized / "data" / f"{name}.csv"
        n = len(pd.read_csv(path))
        assert abs(estimate_rows(path) - n) <= 0.02 * n
    frame = pd.read_csv(sized / "data" / "small.csv")
    frame.to_csv(tmp_path / "small.csv.gz", index=False)
    assert abs(estimate_rows(tmp_path / "small.csv.gz") - len(frame)) <= 0.02 * len(frame)
    pytest.importorskip("pyarrow")
    frame.to_parquet(tmp_path / "small.parquet")
    assert estimate_rows(tmp_path / "small.parquet") == len(frame)


def test_memory_grows_with_the_data_and_streaming_needs_less(sized):
    """Snakemake's dry run lists mem_mb, runtime and one thread per figure job; mem_mb grows with
    the dataset, and the same histogram read chunk by chunk (stream_above_mb: 0) asks for less."""
    plan = _planned(snakemake(sized, "-n", "-p"))
    assert set(plan) == {"hist-small", "scatter-small", "hist-big", "scatter-big"}
    for res in plan.values():
        assert int(res["mem_mb"]) > 0 and int(res["runtime"]) >= 1
    assert int(plan["scatter-big"]["mem_mb"]) > int(plan["scatter-small"]["mem_mb"])
    assert int(plan["hist-big"]["mem_mb"]) > int(plan["hist-small"]["mem_mb"])
    streamed = _planned(snakemake(sized, "-n", "-p", "--config", "stream_above_mb=0"))
    assert int(streamed["hist-big"]["mem_mb"]) < int(plan["hist-big"]["mem_mb"])
    assert streamed["scatter-big"]["mem_mb"] == plan["scatter-big"]["mem_mb"]   # never streamed
    text = snakemake(sized, "-n", "-p").stdout
    assert re.search(r"--granted mem_mb=\d+,runtime=\d+", text)


def test_the_job_fits_what_it_asks_for(sized, tmp_path):
    """The scatter over 1.5 million rows, run as its job runs: its peak resident memory stays
    under the mem_mb it asked for, which is not more than three times that peak."""
    project = tmp_path / "p"
    shutil.copytree(sized, project)
    plan = _planned(snakemake(project, "-n", "-p"))
    asked = int(plan["scatter-big"]["mem_mb"])
    # A fresh parent whose only child is the job, so RUSAGE_CHILDREN's peak is the job's own.
    probe = ("import resource, subprocess, sys\n"
             "rc = subprocess.run(sys.argv[1:]).returncode\n"
             "print(rc, resource.getrusage(resource.RUSAGE_CHILDREN).ru_maxrss)")
    proc = subprocess.run([sys.executable, "-c", probe, sys.executable, "-m", "figkit", "render",
                           "--id", "scatter-big", "--granted", f"mem_mb={asked},runtime=5"],
                          cwd=project, capture_output=True, text=True)
    rc, kib = proc.stdout.split()[-2:]
    assert rc == "0", proc.stderr
    peak_mb = int(kib) / 1024
    assert peak_mb <= asked <= 3 * peak_mb, (peak_mb, asked)
    import json
    car = json.loads((project / "results" / "figures" / "scatter-big.json").read_text())
    assert car["resources"]["granted"] == {"mem_mb": asked, "runtime": 5}
    assert car["resources"]["mem_mb"] == asked and car["resources"]["threads"] == 1
    assert abs(car["resources"]["rows_estimated"] - BIG) <= 0.02 * BIG


def test_a_figure_over_the_ceiling_is_refused_before_submission(sized, tmp_path):
    """With max_mem_mb below what the big scatter needs, the dry run (nothing submitted) names
    the figure in one line, and a build fails that figure alone with the same line."""
    project = tmp_path / "p"
    shutil.copytree(sized, project)
    plan = _planned(snakemake(project, "-n", "-p"))
    ceiling = int(plan["scatter-big"]["mem_mb"]) - 1
    assert int(plan["scatter-small"]["mem_mb"]) <= ceiling
    over = sorted(f for f, r in plan.items() if int(r["mem_mb"]) > ceiling)
    assert "scatter-big" in over and "scatter-small" not in over
    dry = snakemake(project, "-n", "--config", f"max_mem_mb={ceiling}")
    lines = [l for l in (dry.stdout + dry.stderr).splitlines() if "memory ceiling" in l]
    assert sorted(re.search(r"figure '([^']+)'", l).group(1) for l in lines) == over
    for line in lines:
        for part in ("sheet row", "max_mem_mb", str(ceiling), "allowed:"):
            assert part in line
    run = snakemake(project, "--keep-going", "--config", f"max_mem_mb={ceiling}", check=False)
    assert run.returncode != 0
    figures = project / "results" / "figures"
    assert (figures / "scatter-small.png").is_file()
    for fid in over:
        assert not list(figures.glob(f"{fid}.*"))
        log = (project / "logs" / "figures" / f"{fid}.log").read_text()
        assert "memory ceiling" in log and "Traceback" not in log
