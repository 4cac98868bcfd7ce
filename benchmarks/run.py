"""figkit benchmarks: ``python benchmarks/run.py [--quick] [--big] [--profile]``.

Every case runs in its own fresh Python process (benchmarks/cases.py), so one case's peak
memory and warm caches never leak into another; the parent reads each child's peak RSS with
os.wait4 and the child reports its own VmHWM.  Ratios are figkit / baseline, measured in the
same run on the same machine.  Writes benchmarks/RESULTS.md (and RESULTS.json with the raw numbers;
PROFILE.md with --profile) and prints the table.

    --quick    smaller sizes, one run per case: a smoke test (well under a minute)
    --big      also the 1e8-row density figure (needs about 18 GiB free memory, 6 GB disk) and
               the 1e8-row Parquet file of benchmark 7 (needs about 4 GiB free memory, 3 GB disk)
    --profile  cProfile the slow figkit cases and write benchmarks/PROFILE.md
    --keep DIR keep the generated data and projects in DIR (reused when present)
    --only 1,3 run some benchmarks only (5 runs with 2; A = 6, B = 7);  --out FILE  table elsewhere
    cases 9 and 10 (a full demo build against the code of 651f466, through `git archive` and
    PYTHONPATH; one sheet edit through `figkit draft` against Snakemake): --only 9,10
"""
from __future__ import annotations

import argparse
import datetime as dt
import json
import math
import os
import platform
import shutil
import subprocess
import sys
import tempfile
import time
from pathlib import Path

HERE = Path(__file__).resolve().parent
REPO = HERE.parent
STYLES = REPO / "figkit" / "styles"
CASES = HERE / "cases.py"
sys.path.insert(0, str(HERE))
sys.dont_write_bytecode = True    # no __pycache__ in benchmarks/
from cases import SHORT_S  # noqa: E402  (the same repeat rule as the children)

FULL = {"scatter": 10**6, "growth": [10**5, 10**6, 10**7], "density": 10**7, "fits": 10**7,
        "loess": [10**4, 10**5], "parquet": [10**6, 10**7], "demo_all": True, "repeat": 3}
QUICK = {"scatter": 10**5, "growth": [10**4, 10**5], "density": 10**5, "fits": 10**6,
         "loess": [10**3, 10**4], "parquet": [10**5, 10**6], "demo_all": False, "repeat": 1}
BIG_N = 10**8
BIG_MEM = 18 * 2**30       # MemAvailable needed before trying 1e8 rows
# The streamed Parquet path holds one 1e6-row chunk at a time: 1e8 rows need little memory,
# but about 1.7 GB of disk for the file.
BIG_PARQUET_MEM = 4 * 2**30
BIG_PARQUET_DISK = 3 * 10**9
DEMO_FIGURE = "oxygen-temperature"   # the demo's densest figure (every hourly reading, 4 panels)
RSS_GROWTH_MAX = 1.3                 # benchmark 7: peak RSS at the largest size / at the smallest
BIG_LIMIT = 20 * 2**30     # address-space cap of each 1e8 child (the machine has 24 GiB)
HEX_CELLS = 30             # figkit's default hexagons across a panel
# Rectangular cells for the bound: about as many as 30-across hexagons on two lattices
# (31 x 18 + 30 x 17 = 1068).
BOUND_CELLS = (30, 36)

SHEET = ("id\tdataset\tchart\tx\ty\tstrata\n"
         "scatter12\tpoints\tscatter\tx\ty\tstratum\n"
         "hexbins12\tpoints\thexbins\tx\ty\tstratum\n")
CONFIG = """\
# figkit benchmark project (written by benchmarks/run.py)
datasets:
  points: data/points.csv
formats: [pdf, png]
fields:
  x: {label: Predictor}
  y: {label: Response}
  stratum: {label: Stratum}
"""


# ------------------------------------------------------------------------------- plumbing
def run_command(cmd: list[str], cwd: Path, log: Path, extra_env: dict | None = None) -> dict:
    """Run a command in a fresh process: wall time from start to exit (interpreter start and
    imports included) and, from wait4, CPU time and peak RSS over it and its children."""
    log.parent.mkdir(parents=True, exist_ok=True)
    env = dict(os.environ, MPLBACKEND="Agg", PYTHONHASHSEED="0", **(extra_env or {}))
    t0 = time.perf_counter()
    with open(log, "w") as fh:
        proc = subprocess.Popen(cmd, stdout=fh, stderr=subprocess.STDOUT, env=env, cwd=cwd)
        _, status, usage = os.wait4(proc.pid, 0)
    wall = time.perf_counter() - t0
    code = os.waitstatus_to_exitcode(status)
    res = {"wall_s": wall, "cpu_s": usage.ru_utime + usage.ru_stime,
           "ru_maxrss_bytes": usage.ru_maxrss * 1024}
    if code != 0:
        tail = log.read_text(errors="replace").strip().splitlines()[-6:]
        print(f"  ! {' '.join(cmd[:3])} failed (exit {code}): {' | '.join(tail)}", file=sys.stderr)
        res["error"] = tail[-1] if tail else f"exit {code}"
    return res


def run_child(case: str, args: dict, work: Path, label: str) -> dict:
    """Run one case in a fresh interpreter; its result plus wall time and peak RSS (wait4)."""
    out = work / "out" / f"{label}.json"
    log = work / "out" / f"{label}.log"
    out.parent.mkdir(parents=True, exist_ok=True)
    out.unlink(missing_ok=True)
    env = dict(os.environ, MPLBACKEND="Agg", PYTHONHASHSEED="0")
    t0 = time.perf_counter()
    with open(log, "w") as fh:
        proc = subprocess.Popen([sys.executable, str(CASES), case, json.dumps(args), str(out)],
                                stdout=fh, stderr=subprocess.STDOUT, env=env, cwd=REPO)
        _, status, usage = os.wait4(proc.pid, 0)
        proc.returncode = os.waitstatus_to_exitcode(status)
    wall = time.perf_counter() - t0
    if proc.returncode != 0 or not out.is_file():
        tail = log.read_text(errors="replace").strip().splitlines()[-6:]
        print(f"  ! {label} failed (exit {proc.returncode}): {' | '.join(tail)}", file=sys.stderr)
        return {"error": tail[-1] if tail else f"exit {proc.returncode}", "wall_s": wall}
    res = json.loads(out.read_text())
    res["wall_s"] = wall
    res["ru_maxrss_bytes"] = usage.ru_maxrss * 1024      # Linux reports KiB
    res["cpu_s"] = usage.ru_utime + usage.ru_stime        # less disturbed by other load than wall time
    return res


def make_project(root: Path, config: str = CONFIG) -> Path:
    (root / "config").mkdir(parents=True, exist_ok=True)
    (root / "config" / "config.yaml").write_text(config, encoding="utf-8")
    (root / "config" / "figures.tsv").write_text(SHEET, encoding="utf-8")
    if not (root / "styles").exists():
        shutil.copytree(STYLES, root / "styles")
    return root


def dataset(n: int, work: Path, log: dict) -> Path:
    """Project folder with n rows of data/points.csv (generated once per size)."""
    root = make_project(work / f"n{n:.0e}".replace("+", ""))
    csv = root / "data" / "points.csv"
    if not csv.is_file():
        res = run_child("make_csv", {"n": n, "path": str(csv)}, work, f"make_csv_{n:.0e}")
        if "error" in res:
            raise SystemExit(f"could not write the {n:.0e}-row data set: {res['error']}")
        log[fn(n)] = {"seconds": res["seconds"], "bytes": res["bytes"]}
    return root


def twin_project(root: Path, suffix: str, config: str) -> Path:
    """A twin of a CSV project with another config; its data/points.csv links to the same file."""
    twin = make_project(root.with_name(root.name + suffix), config)
    link = twin / "data" / "points.csv"
    if not link.exists():
        link.parent.mkdir(parents=True, exist_ok=True)
        link.symlink_to(root / "data" / "points.csv")
    return twin


def streamed_project(root: Path) -> Path:
    """The twin whose config forces the streamed path (stream_above_mb: 0)."""
    return twin_project(root, "-streamed", CONFIG + "stream_above_mb: 0\n")


def pdf_only_project(root: Path) -> Path:
    """The twin that writes the PDF alone, as the plain script does (like for like)."""
    return twin_project(root, "-pdf", CONFIG.replace("formats: [pdf, png]", "formats: [pdf]"))


def marker_pt2() -> float:
    """figkit's marker area (house style lines.markersize squared): the baseline uses the same."""
    for line in (STYLES / "house.mplstyle").read_text().splitlines():
        if line.split(":")[0].strip() == "lines.markersize":
            return float(line.split(":")[1].split("#")[0]) ** 2
    return 6.25


def mem_available() -> int:
    try:
        for line in open("/proc/meminfo"):
            if line.startswith("MemAvailable"):
                return int(line.split()[1]) * 1024
    except OSError:
        pass
    return 0


# ------------------------------------------------------------------------------ formatting
def fs(seconds) -> str:
    if seconds is None:
        return "—"
    return f"{seconds * 1e3:.1f} ms" if seconds < 1 else f"{seconds:.2f} s"


def fb(nbytes) -> str:
    if nbytes is None:
        return "—"
    return f"{nbytes / 2**20:.2f} MiB" if nbytes >= 2**20 else f"{nbytes / 1024:.0f} KiB"


def fn(n) -> str:
    e = int(round(math.log10(n)))
    return f"1e{e}" if 10**e == n else f"{n:,}"


def fr(r) -> str:
    return "—" if r is None else f"{r:.3g}"


def met(ok) -> str:
    return "—" if ok is None else ("yes" if ok else "**no**")


def versions() -> dict:
    import matplotlib
    import numpy
    import pandas
    out = {"python": platform.python_version(), "numpy": numpy.__version__,
           "pandas": pandas.__version__, "matplotlib": matplotlib.__version__}
    try:
        import figkit
        out["figkit"] = figkit.__version__
    except ImportError:
        out["figkit"] = "not importable"
    try:   # pandas stores text in pyarrow when it is installed: it changes the timings
        import pyarrow
        out["pyarrow"] = pyarrow.__version__
    except ImportError:
        out["pyarrow"] = "not installed"
    return out


def git_state() -> str:
    """Commit of the working tree and whether figkit/ has uncommitted changes (read-only git)."""
    try:
        head = subprocess.run(["git", "rev-parse", "--short", "HEAD"], cwd=REPO, capture_output=True,
                              text=True, timeout=10).stdout.strip()
        dirty = subprocess.run(["git", "status", "--porcelain", "--", "figkit"], cwd=REPO,
                               capture_output=True, text=True, timeout=10).stdout.strip()
    except (OSError, subprocess.SubprocessError):
        return "commit unknown"
    return f"commit {head or 'unknown'}{', figkit/ has uncommitted changes' if dirty else ''}"


def cpu_model() -> str:
    try:
        for line in open("/proc/cpuinfo"):
            if line.startswith("model name"):
                return line.split(":", 1)[1].strip()
    except OSError:
        pass
    return platform.processor() or "unknown"


# ------------------------------------------------------------------------------ benchmarks
def bench_scatter(sz, work, rows, details, data_log, profile):
    n = sz["scatter"]
    root = dataset(n, work, data_log)
    fk = run_child("figkit_render", {"root": str(root), "id": "scatter12", "repeat": sz["repeat"]},
                   work, f"figkit_scatter_{n:.0e}")
    details["figkit scatter12 " + fn(n)] = fk
    if "error" in fk:
        rows.append(["1. scatter, 12 panels: time", fn(n), "failed", "—", "—", "≤ 0.1 (≥ 10× faster)", "—"])
        return
    base = run_child("plain_scatter", {
        "csv": str(root / "data" / "points.csv"), "size_mm": fk["size_mm"],
        "rows": fk["layout"]["rows"], "cols": fk["layout"]["cols"], "marker_pt2": marker_pt2(),
        "out": str(work / "plain_scatter.pdf"), "repeat": sz["repeat"]}, work, f"plain_scatter_{n:.0e}")
    details["plain matplotlib scatter " + fn(n)] = base
    bt = base.get("seconds")
    r = fk["seconds"] / bt if bt else None
    rows.append([f"1. scatter, 12 panels ({fk['layout']['rows']} rows × {fk['layout']['cols']} cols), incl. CSV read: time",
                 fn(n), fs(fk["seconds"]), fs(bt) if bt else "failed", fr(r), "≤ 0.1 (≥ 10× faster)",
                 met(None if r is None else r <= 0.1)])
    # Like for like: figkit writing the PDF alone (its sidecar, statistics and checks still run).
    only = run_child("figkit_render", {"root": str(pdf_only_project(root)), "id": "scatter12",
                                       "repeat": sz["repeat"]}, work, f"figkit_scatter_pdf_{n:.0e}")
    details["figkit scatter12, PDF only, " + fn(n)] = only
    if "error" not in only and bt:
        r = only["seconds"] / bt
        rows.append(["1. scatter, 12 panels, PDF only on both sides (figkit still writes its sidecar "
                     "and runs its checks): time", fn(n), fs(only["seconds"]), fs(bt), fr(r),
                     "≤ 0.1 (≥ 10× faster)", met(r <= 0.1)])
    pdf = fk["files"].get("pdf")
    bp = base.get("pdf_bytes")
    rows.append(["1. scatter, 12 panels: PDF size", fn(n), fb(pdf), fb(bp),
                 fr(pdf / bp if bp else None), "figkit PDF ≤ 1 MB", met(pdf <= 10**6)])
    if profile is not None:
        run_child("figkit_render", {"root": str(root), "id": "scatter12",
                                    "profile": str(work / "prof_scatter.pstats")}, work, "prof_scatter")
        profile["1. scatter12, " + fn(n)] = work / "prof_scatter.pstats"


def bench_density(sz, work, rows, details, data_log, profile, big):
    """Benchmarks 2 and 5: hexbins figure at every growth size against the bincount bound."""
    sizes = list(sz["growth"])
    if big:
        if mem_available() >= BIG_MEM and shutil.disk_usage(work).free >= 6 * 10**9:
            sizes.append(BIG_N)
        else:
            details["1e8 skipped"] = {"reason": f"MemAvailable {fb(mem_available())} or disk too small"}
    res = {}
    for n in sizes:
        root = dataset(n, work, data_log)
        # Cap the 1e8 children's address space below what is free, so that a miss fails the
        # case (MemoryError) instead of pushing the machine into swap.
        cap = min(BIG_LIMIT, mem_available() - 3 * 2**30)
        limit = {"limit_bytes": cap} if n >= BIG_N else {}
        fk = run_child("figkit_render", {"root": str(root), "id": "hexbins12", "repeat": sz["repeat"], **limit},
                       work, f"figkit_hexbins_{n:.0e}")
        bd = run_child("bincount_bound", {"csv": str(root / "data" / "points.csv"), "nx": BOUND_CELLS[0],
                                          "ny": BOUND_CELLS[1], "repeat": sz["repeat"], **limit},
                       work, f"bound_{n:.0e}")
        details["figkit hexbins12 " + fn(n)] = fk
        details["bincount bound " + fn(n)] = bd
        res[n] = (fk, bd)
        if n >= BIG_N:    # free the disk: 1e8 rows are several GB
            shutil.rmtree(root / "data", ignore_errors=True)

    # The chunked (streaming) path at the main size, forced on: figkit streams hexbins from
    # files above a size threshold; here the in-memory and streamed paths meet on the same file.
    big_n = sz["density"]
    stream = run_child("figkit_render", {"root": str(streamed_project(dataset(big_n, work, data_log))),
                                         "id": "hexbins12", "repeat": sz["repeat"]},
                       work, f"figkit_hexbins_streamed_{big_n:.0e}")
    details["figkit hexbins12 streamed " + fn(big_n)] = stream

    fixed_n = min(sz["growth"])
    fk_f, _ = res[fixed_n]
    fk_b, bd_b = res[big_n]
    if "error" in fk_f or "error" in fk_b or "error" in bd_b:
        rows.append(["2. density 12 panels vs bincount bound", fn(big_n), "failed", "—", "—", "≤ 3", "—"])
    else:
        F = fk_f["seconds"]
        T = fk_b["seconds"]
        B = bd_b["seconds"]
        rows.append([f"2. density (hexbins), 12 panels: fixed cost F = figkit time at {fn(fixed_n)}",
                     fn(fixed_n), fs(F), "—", "—", "—", "—"])
        r = (T - F) / B
        rows.append(["2a. density: (figkit − F) vs bound = CSV read + factorize + bincount",
                     fn(big_n), f"{fs(T)} − F = {fs(T - F)}", fs(B), fr(r), "≤ 3 (T ≤ 3·bound + F)",
                     met(r <= 3)])
        # Without file reading: figkit's own read time (stage timer) and the bound's in-memory part.
        read_b = fk_b["stages"].get("read csv", 0.0)
        read_f = fk_f["stages"].get("read csv", 0.0)
        marg = (T - read_b) - (F - read_f)
        r2 = marg / bd_b["agg_s"]
        rows.append(["2b. density without file reading: (figkit − read − F′) vs in-memory factorize + bincount",
                     fn(big_n), fs(marg), fs(bd_b["agg_s"]), fr(r2), "≤ 3", met(r2 <= 3)])
    for n in sizes:
        fk, bd = res[n]
        if "error" in fk or "error" in bd:
            rows.append(["5. growth: hexbins figure (PDF+PNG) vs read + bincount", fn(n),
                         "failed: " + fk.get("error", "") if "error" in fk else fs(fk["seconds"]),
                         "failed" if "error" in bd else fs(bd["seconds"]), "—", "—", "—"])
            continue
        rows.append(["5. growth: hexbins figure (PDF+PNG) vs read + bincount", fn(n), fs(fk["seconds"]),
                     fs(bd["seconds"]), fr(fk["seconds"] / bd["seconds"]), "—", "—"])
    fk_b, bd_b = res[big_n]
    if "error" not in stream and "error" not in bd_b:
        path = "" if stream.get("streamed") else " (**figkit did not stream**)"
        rows.append(["5s. hexbins figure, streamed path forced (stream_above_mb: 0, chunks of 1e6 rows) "
                     f"vs read + bincount{path}",
                     fn(big_n), fs(stream["seconds"]), fs(bd_b["seconds"]),
                     fr(stream["seconds"] / bd_b["seconds"]), "—", "—"])
    else:
        rows.append(["5s. hexbins figure, streamed path forced", fn(big_n),
                     "failed: " + stream.get("error", "")[:80] if "error" in stream else "—", "—", "—", "—", "—"])
    if not big:
        rows.append(["5. growth: 1e8 rows", "1e8", "not run (use --big)", "—", "—", "—", "—"])
    if profile is not None:
        root = dataset(big_n, work, data_log)
        run_child("figkit_render", {"root": str(root), "id": "hexbins12",
                                    "profile": str(work / "prof_hexbins.pstats")}, work, "prof_hexbins")
        profile["2. hexbins12, " + fn(big_n)] = work / "prof_hexbins.pstats"


def bench_fits(sz, work, rows, details, data_log, profile):
    n = sz["fits"]
    root = dataset(n, work, data_log)
    res = run_child("line_fits", {"csv": str(root / "data" / "points.csv"), "repeat": sz["repeat"],
                                  **({"profile": str(work / "prof_fits.pstats")} if profile is not None else {})},
                    work, f"line_fits_{n:.0e}")
    details["line fits " + fn(n)] = res
    if "error" in res:
        rows.append(["3. line fits, 12 panels", fn(n), "failed", "—", "—", "≤ 2", "—"])
        return
    r = res["seconds"] / res["baseline_s"]
    rows.append(["3. line fits, 12 panels: factorize + split_rows + fit_line ×12 vs groupby().mean()", fn(n),
                 fs(res["seconds"]), fs(res["baseline_s"]), fr(r), "≤ 2", met(r <= 2)])
    if profile is not None:
        profile["3. line fits (split + fit_line ×12), " + fn(n)] = work / "prof_fits.pstats"


def bench_loess(sz, work, rows, details):
    small, large = sz["loess"]
    fk = {n: run_child("loess", {"n": n, "repeat": sz["repeat"]}, work, f"loess_{n:.0e}")
          for n in (small, large)}
    ref = {}
    try:
        import importlib.util
        have_ref = importlib.util.find_spec("statsmodels") is not None
    except ImportError:
        have_ref = False
    if have_ref:
        ref = {n: run_child("loess", {"n": n, "impl": "reference", "repeat": sz["repeat"]}, work,
                            f"lowess_ref_{n:.0e}") for n in (small, large)}
    for n in (small, large):
        details[f"figkit loess {fn(n)}"] = fk[n]
        if n in ref:
            details[f"statsmodels lowess {fn(n)}"] = ref[n]
    for n in (small, large):
        if "error" in fk[n]:
            rows.append(["4. LOESS time", fn(n), "failed", "—", "—", "—", "—"])
            continue
        rt = ref.get(n, {}).get("seconds")
        rows.append(["4. LOESS time (span 0.75, degree 1) vs statsmodels lowess (delta = range/200)", fn(n),
                     fs(fk[n]["seconds"]), fs(rt) if rt else "not available",
                     fr(fk[n]["seconds"] / rt if rt else None), "— (reference)", "—"])
    if "error" not in fk[small] and "error" not in fk[large]:
        a, b = fk[large]["extra_peak_bytes"], fk[small]["extra_peak_bytes"]
        r = a / b if b > 0 else None
        growth = large / small
        # Bounded memory: growth no steeper than about linear (exponent 1.25), far from n^2.
        limit = growth ** 1.25
        rows.append([f"4. LOESS extra peak RSS: {fn(large)} (figkit col.) vs {fn(small)} (baseline col.)",
                     f"{fn(large)} vs {fn(small)}", fb(a), fb(b), fr(r),
                     f"≤ {limit:.1f} = {growth:.0f}^1.25 (linear {growth:.0f}, n² {growth ** 2:.0f})",
                     met(None if r is None else r <= limit)])


def demo_project(root: Path) -> Path:
    """A temporary copy of the demo manuscript: Snakefile, config (schemas linked to figkit's),
    house styles, and data from ``python -m figkit.demo`` at scale 1."""
    (root / "config").mkdir(parents=True, exist_ok=True)
    shutil.copy2(REPO / "Snakefile", root / "Snakefile")
    for name in ("config.yaml", "figures.tsv"):
        shutil.copy2(REPO / "config" / name, root / "config" / name)
    if not (root / "config" / "schemas").exists():
        (root / "config" / "schemas").symlink_to(REPO / "figkit" / "schemas")
    if not (root / "styles").exists():
        shutil.copytree(STYLES, root / "styles")
    return root


def snakemake_exe() -> str:
    here = Path(sys.executable).parent / "snakemake"
    return str(here) if here.is_file() else (shutil.which("snakemake") or "snakemake")


def best_of(runs: list[dict]) -> dict:
    ok = [r for r in runs if "error" not in r]
    return min(ok, key=lambda r: r["wall_s"]) if ok else runs[-1]


def bench_demo(sz, work, rows, details, data_log, scale: int = 1):
    """Benchmark 6: the demo's densest figure rebuilt through Snakemake against a plain script;
    both sides are fresh processes timed from start to exit (start-up and imports included).
    ``scale`` > 1: the same demo with ``scale`` times the readings (how the ratio grows with
    rows); only that figure is built there."""
    title = f"6. densest demo figure ({DEMO_FIGURE}) rebuilt through Snakemake vs plain matplotlib script"
    if scale != 1:
        title = title.replace("6. densest demo figure", f"6g. the same figure, demo data at scale {scale}")
    root = demo_project(work / ("demo" if scale == 1 else f"demo-x{scale}"))
    logs = work / "out"
    tag = "" if scale == 1 else f" (scale {scale})"
    if not (root / "data" / "readings.csv").is_file():
        res = run_command([sys.executable, "-m", "figkit.demo", str(root / "data"), "--scale", str(scale)],
                          REPO, logs / f"demo_data_{scale}.log")
        if "error" in res:
            rows.append([title, "—", "failed: demo data", "—", "—", "≤ 0.2 (≥ 5× faster)", "—"])
            return
        data_log[f"demo{scale}"] = {"seconds": res["wall_s"], "name": f"demo data (scale {scale})",
                                      "bytes": sum(f.stat().st_size for f in (root / "data").glob("*.csv"))}
    target = f"results/figures/{DEMO_FIGURE}.json"
    snake = snakemake_exe()
    # Build once (every figure in a full run; only this one with --quick), so the timed runs
    # below rebuild one figure in an otherwise up-to-date project.
    build_all = sz["demo_all"] and scale == 1
    first = run_command([snake, "--cores", "2"] + ([] if build_all else [target]), root,
                        logs / f"demo_build_{scale}.log")
    details["demo: first build (" + ("all figures" if build_all else DEMO_FIGURE) + f", --cores 2){tag}"] = {
        "seconds": first["wall_s"], "cpu_s": first["cpu_s"], "child_peak_bytes": first["ru_maxrss_bytes"],
        **({"error": first["error"]} if "error" in first else {"note": "not part of the comparison"})}
    if "error" in first:
        rows.append([title, "—", "failed: first build", "—", "—", "≤ 0.2 (≥ 5× faster)", "—"])
        return
    # With every figure built, the default target reruns only the forced one; after a --quick
    # first build the target is named, or the default target would build all the others too.
    # The target goes before --forcerun, which takes every word after it as its own.
    cmd = [snake, "--cores", "1"] + ([] if build_all else [target]) + ["--forcerun", target]
    fk_runs = [run_command(cmd, root, logs / f"demo_rebuild_{scale}_{i}.log") for i in range(sz["repeat"])]
    # The figure job alone (what Snakemake's job runs), to split Snakemake's own share out.
    job_runs = [run_command([sys.executable, "-m", "figkit", "render", "--id", DEMO_FIGURE], root,
                            logs / f"demo_render_{scale}_{i}.log") for i in range(sz["repeat"])]
    fk, job = best_of(fk_runs), best_of(job_runs)
    side = json.loads((root / target).read_text())
    out_dir = root / "results" / "figures"
    files = {fmt: (out_dir / name).stat().st_size for fmt, name in side["files"].items()}
    with open(root / side["inputs"][0]["path"], "rb") as fh:
        n_rows = sum(block.count(b"\n") for block in iter(lambda: fh.read(1 << 20), b"")) - 1
    base_runs = [run_child("plain_demo", {
        "csv": str(root / side["inputs"][0]["path"]), "x": side["x"], "y": side["y"],
        "strata": side["strata"][0], "levels": [p["keys"][side["strata"][0]] for p in side["panels"]],
        "size_mm": side["size_mm"], "rows": side["layout"]["rows"], "cols": side["layout"]["cols"],
        "marker_pt2": marker_pt2(), "out": str(work / "plain_demo.pdf")}, work, f"plain_demo_{scale}_{i}")
        for i in range(sz["repeat"])]
    base = best_of(base_runs)
    details[f"figkit via snakemake --forcerun ({DEMO_FIGURE}){tag}"] = {
        "seconds": fk.get("wall_s"), "times": [r["wall_s"] for r in fk_runs], "cpu_s": fk.get("cpu_s"),
        "child_peak_bytes": fk.get("ru_maxrss_bytes"), **({"error": fk["error"]} if "error" in fk else {}),
        "note": (f"{side['layout']['rows']}×{side['layout']['cols']} panels, {side['size_mm'][0]:g} × "
                 f"{side['size_mm'][1]:g} mm; points drawn as {side['panels'][0].get('drawing')}; files "
                 + ", ".join(f"{k} {fb(v)}" for k, v in files.items()) + "; plus sidecar and stats.csv")}
    details[f"figkit job alone: python -m figkit render --id {DEMO_FIGURE}{tag}"] = {
        "seconds": job.get("wall_s"), "times": [r["wall_s"] for r in job_runs], "cpu_s": job.get("cpu_s"),
        "child_peak_bytes": job.get("ru_maxrss_bytes"), **({"error": job["error"]} if "error" in job else {}),
        "note": "the command Snakemake's job runs, without Snakemake"}
    details[f"plain matplotlib script, demo figure (fresh process each run){tag}"] = {
        "seconds": base.get("wall_s"), "times": [r["wall_s"] for r in base_runs], "cpu_s": base.get("cpu_s"),
        "import_s": base.get("import_s"), "child_peak_bytes": base.get("child_peak_bytes"),
        **({"error": base["error"]} if "error" in base else {}),
        "note": (f"in-process read + draw + save {fs(base.get('seconds'))}; {base.get('points', 0):,} points; "
                 f"PDF {fb(base.get('pdf_bytes'))}")}
    if "error" in fk or "error" in base:
        rows.append([title, fn(n_rows), "failed" if "error" in fk else fs(fk["wall_s"]),
                     "failed" if "error" in base else fs(base["wall_s"]), "—", "≤ 0.2 (≥ 5× faster)", "—"])
        return
    r = fk["wall_s"] / base["wall_s"]
    rows.append([f"{title}: wall time of the whole process (start-up + imports included on both sides)",
                 f"{fn(n_rows)} rows, {side['layout']['panels']} panels", fs(fk["wall_s"]), fs(base["wall_s"]),
                 fr(r), "≤ 0.2 (≥ 5× faster)", met(r <= 0.2)])
    if scale == 1:
        floor_rows(sz, work, rows, details, base["wall_s"])
    pdf, bp = files.get("pdf"), base["pdf_bytes"]
    rows.append([("6. densest demo figure" if scale == 1 else f"6g. scale {scale}") + ": PDF size",
                 f"{fn(n_rows)} rows", fb(pdf), fb(bp),
                 fr(pdf / bp if pdf and bp else None), "figkit PDF ≤ 1 MB",
                 met(None if pdf is None else pdf <= 10**6)])


FLOOR_SNAKEFILE = """\
# What any Snakemake rebuild of one job costs before figkit does anything (benchmarks/run.py).
import figkit.workflow

rule nothing:
    output: "done.txt"
    shell: "touch {output}"

onsuccess:
    figkit.workflow.stop_rate_timers()
"""


def floor_rows(sz, work, rows, details, plain_s: float) -> None:
    """Case 6's floor: Snakemake's own cost with no figkit work at all (a one-rule workflow
    whose job touches a file, the rate-limit timer stopped as in figkit's rules), and the bare
    import of Snakemake's command line.  If either exceeds a fifth of the plain script's time,
    no figure job, however fast, can make the rebuild 5× faster than the script."""
    root = work / "floor"
    root.mkdir(parents=True, exist_ok=True)
    (root / "Snakefile").write_text(FLOOR_SNAKEFILE, encoding="utf-8")
    logs, snake = work / "out", snakemake_exe()
    run_command([snake, "--cores", "1"], root, logs / "floor_first.log")
    cases = [("one-rule workflow (job: touch a file) through Snakemake, no figkit work",
              [snake, "--cores", "1", "--forcerun", "done.txt"]),
             ("python -c 'import snakemake.cli' (Snakemake's import alone)",
              [sys.executable, "-c", "import snakemake.cli"])]
    for i, (what, cmd) in enumerate(cases):
        best = best_of([run_command(cmd, root, logs / f"floor_{i}_{k}.log") for k in range(sz["repeat"])])
        details[f"floor: {what}"] = {"seconds": best.get("wall_s"), "cpu_s": best.get("cpu_s"),
                                     **({"error": best["error"]} if "error" in best else {}),
                                     "note": "no figure is drawn; the floor under case 6's figkit side"}
        if "error" in best:
            rows.append([f"6f. floor: {what}", "—", "failed", fs(plain_s), "—", "≤ 0.2 (≥ 5× faster)", "—"])
            continue
        r = best["wall_s"] / plain_s
        rows.append([f"6f. floor of case 6: {what}, vs the plain script of case 6", "—",
                     fs(best["wall_s"]), fs(plain_s), fr(r), "≤ 0.2 (≥ 5× faster)", met(r <= 0.2)])


def parquet_project(n: int, work: Path, data_log: dict, limit: dict) -> Path | None:
    """Project with n rows in data/points.parquet and the streamed path forced on."""
    config = CONFIG.replace("data/points.csv", "data/points.parquet") + "stream_above_mb: 0\n"
    root = make_project(work / f"pq{n:.0e}".replace("+", ""), config)
    path = root / "data" / "points.parquet"
    if not path.is_file():
        res = run_child("make_parquet", {"n": n, "path": str(path), **limit}, work, f"make_parquet_{n:.0e}")
        if "error" in res:
            return None
        data_log[fn(n) + " Parquet"] = {"seconds": res["seconds"], "bytes": res["bytes"], "name": f"{fn(n)} rows",
                                        "kind": f"Parquet ({res['row_groups']} row groups)"}
    return root


def bench_parquet(sz, work, rows, details, data_log, big):
    """Benchmark 7: hexbins figure from Parquet on the streamed path: peak RSS stays flat."""
    sizes = list(sz["parquet"])
    if big:
        free_disk = shutil.disk_usage(work).free
        if mem_available() >= BIG_PARQUET_MEM and free_disk >= BIG_PARQUET_DISK:
            sizes.append(BIG_N)
        else:
            details["Parquet 1e8 skipped"] = {
                "reason": f"MemAvailable {fb(mem_available())}, free disk {fb(free_disk)}"}
    res = {}
    for n in sizes:
        cap = {"limit_bytes": min(BIG_LIMIT, mem_available() - 3 * 2**30)} if n >= BIG_N else {}
        root = parquet_project(n, work, data_log, cap)
        if root is None:
            res[n] = {"error": "could not write the Parquet file"}
        else:
            res[n] = run_child("figkit_render", {"root": str(root), "id": "hexbins12",
                                                 "repeat": sz["repeat"], **cap}, work, f"figkit_parquet_{n:.0e}")
            if n >= BIG_N:
                shutil.rmtree(root / "data", ignore_errors=True)
        details["figkit hexbins12 Parquet streamed " + fn(n)] = res[n]
    label = "7. Parquet, streamed path forced (stream_above_mb: 0), hexbins 12 panels"
    for n in sizes:
        d = res[n]
        if "error" in d:
            rows.append([f"{label}: time, peak RSS", fn(n), "failed: " + d["error"][:80], "—", "—", "—", "—"])
            continue
        flag = "" if d.get("streamed") else " (**figkit did not stream**)"
        rows.append([f"{label}: render time (in process, best run){flag}", fn(n), fs(d["seconds"]),
                     "—", "—", "—", "—"])
        rows.append([f"{label}: peak RSS of the whole process (VmHWM){flag}", fn(n),
                     fb(d["child_peak_bytes"]), "—", "—", "—", "—"])
    small, large = sizes[0], sizes[-1]
    a, b = res[large], res[small]
    if "error" in a or "error" in b:
        rows.append(["7. peak RSS growth", f"{fn(large)} vs {fn(small)}", "—", "—", "—",
                     f"≤ {RSS_GROWTH_MAX}", "—"])
        return
    rr = a["child_peak_bytes"] / b["child_peak_bytes"]
    rows.append([f"7. peak RSS growth: {fn(large)} (figkit col.) vs {fn(small)} (baseline col.)",
                 f"{fn(large)} vs {fn(small)}", fb(a["child_peak_bytes"]), fb(b["child_peak_bytes"]), fr(rr),
                 f"≤ {RSS_GROWTH_MAX}", met(rr <= RSS_GROWTH_MAX)])
    growth = large / small
    tr = a["seconds"] / b["seconds"]
    rows.append([f"7. time growth, whole render: {fn(large)} (figkit col.) vs {fn(small)} (baseline col.)",
                 f"rows ×{growth:.0f}", fs(a["seconds"]), fs(b["seconds"]), fr(tr),
                 f"~linear: ≤ {1.25 * growth:.1f} = 1.25 × {growth:.0f}", met(tr <= 1.25 * growth)])
    key = "streamed load (chunked read + tallies)"
    sa, sb = a["stages"].get(key), b["stages"].get(key)
    if sa and sb:
        st = sa / sb
        rows.append([f"7. time growth, streamed load stage only (two chunked passes + tallies): "
                     f"{fn(large)} (figkit col.) vs {fn(small)} (baseline col.)", f"rows ×{growth:.0f}",
                     fs(sa), fs(sb), fr(st), f"~linear: ≤ {1.25 * growth:.1f} = 1.25 × {growth:.0f}",
                     met(st <= 1.25 * growth)])
    if not big:
        rows.append(["7. Parquet streamed: 1e8 rows", "1e8", "not run (use --big)", "—", "—", "—", "—"])


# ------------------------------------------------------- per-figure cost (cases 9 and 10)
# The demo figures of case 9, by id (rows added to the demo sheet later are not timed here;
# an id no longer in the sheet is skipped and said so).
DEMO_IDS = ("oxygen-temperature", "oxygen-season-grid", "conductivity-catchments",
            "temperature-seasons", "turbidity-density", "temperature-histogram", "taxa-counts",
            "sensitive-share", "taxa-tiles", "oxygen-flow-bands", "conductivity-discharge",
            "counts-by-year")
DENSE_FIGURE = "oxygen-season-grid"   # case 10: the demo's densest grid (16 panels, every reading)
SAVE_RATIO_MAX = 1.5


def demo_with_data(work: Path, name: str, data_log: dict) -> Path | None:
    """A copy of the demo project (demo_project) with its data at scale 1, written once."""
    root = demo_project(work / name)
    if not (root / "data" / "readings.csv").is_file():
        res = run_command([sys.executable, "-m", "figkit.demo", str(root / "data")], REPO,
                          work / "out" / f"{name}_data.log")
        if "error" in res:
            return None
        data_log[name] = {"seconds": res["wall_s"], "name": "demo data (scale 1)",
                          "bytes": sum(f.stat().st_size for f in (root / "data").glob("*.csv"))}
    return root


def sheet_ids(root: Path) -> list[str]:
    with open(root / "config" / "figures.tsv", encoding="utf-8") as fh:
        return [line.split("\t", 1)[0] for line in fh.read().splitlines()[1:] if line.strip()]


def bench_figure_costs(sz, work, rows, details, data_log):
    """Case 9: each demo figure in one warm process, figkit's whole render (data, statistics,
    drawing, checks, files, preflight, sidecar) against plain matplotlib saving the Figure
    figkit built to the same formats."""
    title = "9. demo figure, in process: figkit's whole render vs matplotlib saving the finished Figure"
    target = f"≤ {SAVE_RATIO_MAX}"
    root = demo_with_data(work, "demo-figures", data_log)
    if root is None:
        rows.append([title, "—", "failed: demo data", "—", "—", target, "—"])
        return
    present = sheet_ids(root)
    ids = [i for i in DEMO_IDS if i in present]
    if len(ids) < len(DEMO_IDS):
        details["9 skipped"] = {"reason": "not in the demo sheet: " + ", ".join(
            i for i in DEMO_IDS if i not in present)}
    res = run_child("demo_figures", {"root": str(root), "ids": ids, "repeat": sz["repeat"],
                                     "out": str(work / "plain-saves")}, work, "demo_figures")
    if "error" in res:
        rows.append([title, "—", "failed", "—", "—", target, "—"])
        return
    for fid, d in res["figures"].items():
        r, rc = d["seconds"] / d["baseline_s"], d["cpu_s"] / d["baseline_cpu_s"]
        rows.append([f"9. `{fid}` ({d['chart']}, {d['panels']} panels; {' + '.join(d['formats'])}): "
                     f"figkit render vs plain savefig of its Figure; CPU time (wall: {fs(d['seconds'])} "
                     f"vs {fs(d['baseline_s'])}, ratio {fr(r)})", "demo, scale 1",
                     fs(d["cpu_s"]), fs(d["baseline_cpu_s"]), fr(rc), target, met(rc <= SAVE_RATIO_MAX)])
        details[f"9 figkit render {fid}"] = {"seconds": d["seconds"], "times": d["times"],
                                             "cpu_s": d["cpu_s"], "stages": d["stages"], "files": {},
                                             "drawing": d["chart"]}
        details[f"9 plain savefig {fid}"] = {"seconds": d["baseline_s"], "times": d["baseline_times"],
                                             "cpu_s": d["baseline_cpu_s"],
                                             "note": "the Figure figkit built, saved by matplotlib alone"}
    figs = res["figures"].values()
    total = {k: sum(d[k] for d in figs) for k in ("seconds", "baseline_s", "cpu_s", "baseline_cpu_s")}
    rc = total["cpu_s"] / total["baseline_cpu_s"]
    rows.append([f"9. all {len(res['figures'])} demo figures one after another (sums of best runs); CPU "
                 f"time (wall: {fs(total['seconds'])} vs {fs(total['baseline_s'])}, ratio "
                 f"{fr(total['seconds'] / total['baseline_s'])})", "demo, scale 1", fs(total["cpu_s"]),
                 fs(total["baseline_cpu_s"]), fr(rc), target, met(rc <= SAVE_RATIO_MAX)])


def bench_dense_job(sz, work, rows, details, data_log):
    """Case 10: the densest demo grid, the figure job alone (`python -m figkit render`, what a
    Snakemake job runs; Snakemake's own floor is case 6f) against a plain matplotlib script
    drawing every point; both fresh processes timed from start to exit."""
    title = (f"10. densest demo grid ({DENSE_FIGURE}): figure job alone vs plain matplotlib script "
             "drawing all points (fresh processes, start-up and imports included)")
    target = "≤ 0.2 (≥ 5× faster)"
    root = demo_with_data(work, "demo-dense", data_log)
    if root is None or DENSE_FIGURE not in sheet_ids(root):
        rows.append([title, "—", "failed: demo data" if root is None else "not in the sheet",
                     "—", "—", target, "—"])
        return
    cmd = [sys.executable, "-m", "figkit", "render", "--id", DENSE_FIGURE]
    job_runs = [run_command(cmd, root, work / "out" / f"dense_job_{i}.log") for i in range(sz["repeat"])]
    job = best_of(job_runs)
    if "error" in job:
        rows.append([title, "—", "failed", "—", "—", target, "—"])
        return
    side = json.loads((root / "results" / "figures" / f"{DENSE_FIGURE}.json").read_text())
    base_runs = [run_child("plain_grid", {
        "csv": str(root / side["inputs"][0]["path"]), "x": side["x"], "y": side["y"],
        "keys": [p["keys"] for p in side["panels"]], "size_mm": side["size_mm"],
        "rows": side["layout"]["rows"], "cols": side["layout"]["cols"], "marker_pt2": marker_pt2(),
        "out": str(work / "plain_grid.pdf")}, work, f"plain_grid_{i}") for i in range(sz["repeat"])]
    base = best_of(base_runs)
    files = {fmt: (root / "results" / "figures" / name).stat().st_size for fmt, name in side["files"].items()}
    details[f"10 figure job alone: python -m figkit render --id {DENSE_FIGURE}"] = {
        "seconds": job["wall_s"], "times": [r["wall_s"] for r in job_runs], "cpu_s": job["cpu_s"],
        "child_peak_bytes": job["ru_maxrss_bytes"],
        "note": (f"{side['layout']['rows']}×{side['layout']['cols']} panels drawn as "
                 f"{side['panels'][0].get('drawing', side['chart'])}; files "
                 + ", ".join(f"{k} {fb(v)}" for k, v in files.items()) + "; plus sidecar and tables")}
    if "error" in base:
        rows.append([title, "—", fs(job["wall_s"]), "failed", "—", target, "—"])
        return
    details["10 plain matplotlib grid script (fresh process each run)"] = {
        "seconds": base["wall_s"], "times": [r["wall_s"] for r in base_runs], "cpu_s": base.get("cpu_s"),
        "import_s": base.get("import_s"), "child_peak_bytes": base.get("child_peak_bytes"),
        "note": (f"in-process read + draw + save {fs(base.get('seconds'))}; {base.get('points', 0):,} "
                 f"points; PDF only, {fb(base.get('pdf_bytes'))}")}
    r = job["wall_s"] / base["wall_s"]
    cpu = (f"; CPU {fs(job['cpu_s'])} vs {fs(base['cpu_s'])}, ratio {fr(job['cpu_s'] / base['cpu_s'])}"
           if job.get("cpu_s") and base.get("cpu_s") else "")
    rows.append([title + cpu, f"{side['rows_kept']:,} rows, {len(side['panels'])} panels", fs(job["wall_s"]),
                 fs(base["wall_s"]), fr(r), target, met(r <= 0.2)])


# -------------------------------------------------------------------------------- reports
def short_path(filename: str) -> str:
    for marker in ("site-packages/", str(REPO) + "/"):
        if marker in filename:
            return filename.split(marker, 1)[1]
    return Path(filename).name if "/" in filename else filename


def profile_report(profiles: dict) -> str:
    import pstats
    out = ["# figkit benchmark profiles", "",
           "cProfile of one warm run per case (a first, unprofiled run warms font caches).",
           "`own` = time inside the function itself, `cum` = including callees.", ""]
    for title, path in profiles.items():
        if not Path(path).is_file():
            out += [f"## {title}", "", "profile not written (the case failed)", ""]
            continue
        st = pstats.Stats(str(path))
        total = st.total_tt
        entries = []
        for (fname, line, func), (cc, nc, tt, ct, callers) in st.stats.items():
            where = f"{short_path(fname)}:{func}" if fname != "~" else func
            entries.append((where, nc, tt, ct, fname))
        out += [f"## {title} — {total:.2f} s profiled", "", "Top functions by own time:", "",
                "| function | calls | own | cum |", "|---|---:|---:|---:|"]
        for where, nc, tt, ct, _ in sorted(entries, key=lambda e: -e[2])[:15]:
            out.append(f"| `{where}` | {nc} | {fs(tt)} | {fs(ct)} |")
        out += ["", "figkit functions by cumulative time:", "",
                "| function | calls | own | cum |", "|---|---:|---:|---:|"]
        mine = [e for e in entries if "/figkit/" in e[4] and "benchmarks" not in e[4]]
        for where, nc, tt, ct, _ in sorted(mine, key=lambda e: -e[3])[:15]:
            out.append(f"| `{where}` | {nc} | {fs(tt)} | {fs(ct)} |")
        out.append("")
    return "\n".join(out)


def details_table(details: dict) -> list[str]:
    out = ["| case | best run | runs | imports | child CPU (all runs) | child peak RSS | stages of the best run (figkit) |",
           "|---|---:|---|---:|---:|---:|---|"]
    for name, d in details.items():
        if "error" in d or "reason" in d:
            out.append(f"| {name} | — | {d.get('error') or d.get('reason')} | | | | |")
            continue
        times = d.get("times") or d.get("read_times")
        runs = ", ".join(fs(t) for t in times) if times else ""
        extra = ""
        if "note" in d and "stages" not in d:
            extra = d["note"]
        elif "stages" in d:
            extra = "; ".join(f"{k} {fs(v)}" for k, v in sorted(d["stages"].items(), key=lambda kv: -kv[1]))
            extra += f"; files {', '.join(f'{k} {fb(v)}' for k, v in d['files'].items())}; drawn as {d.get('drawing')}"
            extra += f"; {'streamed' if d.get('streamed') else 'in memory'}"
        elif "agg_s" in d:
            extra = f"read {fs(d['read_s'])} (runs {runs}); in-memory factorize + bincount {fs(d['agg_s'])}"
            runs = ", ".join(fs(t) for t in d["agg_times"])
        elif "baseline_s" in d:
            extra = (f"groupby().mean() {fs(d['baseline_s'])}; fit_line ×12 on pre-split arrays "
                     f"{fs(d['fit_only_s'])} (runs {', '.join(fs(t) for t in d['fit_only_times'])}); "
                     f"factorize + split alone {fs(d['split_s'])}")
        elif "extra_peak_bytes" in d:
            extra = (f"extra peak RSS {fb(d['extra_peak_bytes'])} (data {fb(d['data_bytes'])}; "
                     f"peak reset {'ok' if d['peak_reset'] else 'unavailable'})")
        elif "pdf_bytes" in d:
            extra = f"PDF {fb(d['pdf_bytes'])}"
        imp = fs(d["import_s"]) if "import_s" in d else ""
        out.append(f"| {name} | {fs(d['seconds'])} | {runs} | {imp} | {fs(d.get('cpu_s'))} | {fb(d.get('child_peak_bytes'))} | {extra} |")
    return out


COMPARE_BASE = "651f466"      # the commit whose `figkit compare` is case 8's baseline


def bench_compare(sz, work, rows, details):
    """Benchmark 8: `figkit compare` of the 12 demo figures after a data change (the demo data
    regenerated with another seed, so every figure differs), in fresh processes: today's code
    writing changes.md and difference images (``--out``, like for like) and the review page
    (``--review``), against the code of COMPARE_BASE (full-resolution SSIM) on the same folders."""
    title = "8. compare the 12 demo figures after a data change (every figure differs)"
    root = demo_project(work / "demo-compare")
    logs = work / "out"
    snake = snakemake_exe()
    old = root / "old-figures"
    if not old.is_dir():
        steps = [[sys.executable, "-m", "figkit.demo", str(root / "data")], [snake, "--cores", "2"]]
        for i, cmd in enumerate(steps):
            if "error" in run_command(cmd, root, logs / f"compare_build_{i}.log"):
                rows.append([title, "12 figures", "failed: demo build", "—", "—", "≤ 10 s", "—"])
                return
        shutil.copytree(root / "results" / "figures", old)
        for i, cmd in enumerate([[sys.executable, "-m", "figkit.demo", str(root / "data"),
                                  "--seed", "7"], [snake, "--cores", "2"]]):
            run_command(cmd, root, logs / f"compare_rebuild_{i}.log")
    new = root / "results" / "figures"
    base_src = work / "compare_base.py"
    got = subprocess.run(["git", "-C", str(REPO), "show", f"{COMPARE_BASE}:figkit/compare.py"],
                         capture_output=True, text=True)
    repeat = sz["repeat"]
    runs = {}
    for label, cmd in (("out", [sys.executable, "-m", "figkit", "compare", str(old), str(new),
                                "--out", str(work / "cmp-out")]),
                       ("review", [sys.executable, "-m", "figkit", "compare", str(old), str(new),
                                   "--review", str(work / "cmp-review")])):
        runs[label] = best_of([run_command(cmd, root, logs / f"compare_{label}.log")
                               for _ in range(repeat)])
    if got.returncode == 0:
        base_src.write_text(got.stdout.replace("from .", "from figkit."), encoding="utf-8")
        script = (f"import sys; sys.path.insert(0, {str(work)!r}); import compare_base as c; "
                  f"print(c.compare_folders({str(old)!r}, {str(new)!r}, "
                  f"out_dir={str(work / 'cmp-base')!r}).summary())")
        runs["base"] = run_command([sys.executable, "-c", script], root, logs / "compare_base.log")
    base = runs.get("base")
    for label, what in (("out", "changes.md + difference images (--out), like for like"),
                        ("review", "review page (--review: four views per figure)")):
        r = runs[label]
        if "error" in r:
            rows.append([f"{title}: {what}", "12 figures", "failed", "—", "—", "≤ 10 s", "—"])
            continue
        ok = base is not None and "error" not in base
        rows.append([f"{title}: {what}; baseline: the code of {COMPARE_BASE} (--out)",
                     "12 figures, 600 dpi", fs(r["wall_s"]),
                     fs(base["wall_s"]) if ok else "not measured (no git history)",
                     fr(r["wall_s"] / base["wall_s"]) if ok else "—", "≤ 10 s",
                     met(r["wall_s"] <= 10)])
        details[f"8 compare {label}"] = {"seconds": r["wall_s"], "cpu_s": r["cpu_s"],
                                         "child_peak_bytes": r["ru_maxrss_bytes"],
                                         "note": "fresh process: imports, decoding 24 PNGs"}
    if base is not None and "error" not in base:
        details["8 compare baseline"] = {"seconds": base["wall_s"], "cpu_s": base["cpu_s"],
                                         "child_peak_bytes": base["ru_maxrss_bytes"],
                                         "note": f"figkit.compare of {COMPARE_BASE}, SSIM at 600 dpi"}


# ----------------------------------------------------------------- 9 and 10: builds and warm loop
BUILD_BASE = "651f466"        # case 9's baseline: the code before figure jobs shared an interpreter
DRAFT_FIGURE = "temperature-histogram"


def _clean_results(root: Path) -> None:
    for name in ("results", "logs", ".snakemake"):
        shutil.rmtree(root / name, ignore_errors=True)


def old_tree(work: Path, commit: str) -> Path | None:
    """The repository at ``commit`` (git archive into a temporary folder; nothing installed: its
    figkit is imported through PYTHONPATH with the current environment's packages)."""
    dest = work / f"src-{commit}"
    if (dest / "Snakefile").is_file():
        return dest
    dest.mkdir(parents=True, exist_ok=True)
    archive = subprocess.run(["git", "-C", str(REPO), "archive", commit], capture_output=True)
    if archive.returncode != 0:
        return None
    subprocess.run(["tar", "-x", "-C", str(dest)], input=archive.stdout, check=True)
    return dest


def bench_build(sz, work, rows, details, data_log):
    """Benchmark 9: the README's build command (`snakemake --cores 2`) from a clean results folder,
    today's code against the code of BUILD_BASE, on the same figure sheet (BUILD_BASE's 12 rows)
    and the same data.  Runs alternate old/new so that load from other users hits both sides;
    best of ``repeat``.  Also: today's code with FIGKIT_WARM=off (one interpreter per figure job,
    to split the warm interpreter's share out) and today's full demo sheet."""
    title = "11. full demo build, `snakemake --cores 2` from a clean results folder"
    target = "≥ 2.5× faster (ratio ≤ 0.4)"
    old = old_tree(work, BUILD_BASE)
    if old is None:
        rows.append([title, "—", "not measured (no git history)", "—", "—", target, "—"])
        return
    new = demo_project(work / "build-new")
    sheet = (old / "config" / "figures.tsv").read_text(encoding="utf-8")
    (new / "config" / "figures.tsv").write_text(sheet, encoding="utf-8")   # the same 12 rows
    current = demo_project(work / "build-current")                       # today's demo sheet
    logs, snake = work / "out", snakemake_exe()
    if not (new / "data" / "readings.csv").is_file():
        res = run_command([sys.executable, "-m", "figkit.demo", str(new / "data")], REPO, logs / "build_data.log")
        if "error" in res:
            rows.append([title, "—", "failed: demo data", "—", "—", target, "—"])
            return
        data_log["build"] = {"seconds": res["wall_s"], "name": "demo data (scale 1)",
                             "bytes": sum(f.stat().st_size for f in (new / "data").glob("*.csv"))}
    for root in (old, current):   # the same data files on every side
        shutil.rmtree(root / "data", ignore_errors=True)
        shutil.copytree(new / "data", root / "data")
    old_env = {"PYTHONPATH": str(old)}
    check = subprocess.run([sys.executable, "-c", "import figkit; print(figkit.__file__)"], cwd=work,
                           env=dict(os.environ, **old_env), capture_output=True, text=True)
    if not check.stdout.strip().startswith(str(old)):
        rows.append([title, "—", "—", "failed: the old tree's figkit is not the one imported", "—", target, "—"])
        return
    n_rows = sum(1 for ln in sheet.splitlines()[1:] if ln.strip())
    sides = {"old": (old, old_env), "new": (new, {}), "new-off": (new, {"FIGKIT_WARM": "off"}),
             "current": (current, {})}
    runs = {k: [] for k in sides}
    for i in range(sz["repeat"]):
        for label in ("old", "new", "new-off", "current"):
            if label == "current" and i < sz["repeat"] - 1:
                continue          # for the record only: one run
            root, extra = sides[label]
            _clean_results(root)
            plog = logs / f"build_{label}_{i}.processes"
            plog.unlink(missing_ok=True)
            runs[label].append(run_command([snake, "--cores", "2"], root,
                                           logs / f"build_{label}_{i}.log", {**extra, "FIGKIT_PROCESS_LOG": str(plog)}))
            add_server_cpu(runs[label][-1], plog)
            figs = root / "results" / "figures"
            made = len(list(figs.glob("*.json"))) if figs.is_dir() else 0
            want = n_rows if label != "current" else sum(
                1 for ln in (root / "config" / "figures.tsv").read_text(encoding="utf-8").splitlines()[1:] if ln.strip())
            if made != want and "error" not in runs[label][-1]:
                runs[label][-1]["error"] = f"{made} of {want} figures built"
    best = {k: best_of(v) for k, v in runs.items()}
    for label, what in (("old", f"the code of {BUILD_BASE}, one interpreter per figure job"),
                        ("new", "today, figure jobs share one warm interpreter"),
                        ("new-off", "today with FIGKIT_WARM=off (one interpreter per figure job)"),
                        ("current", "today's full demo sheet, warm")):
        b = best[label]
        details[f"11 build: {what}"] = {"seconds": b.get("wall_s"), "times": [r.get("wall_s") for r in runs[label]],
                                       "cpu_s": b.get("cpu_s"),
                                       **({"error": b["error"]} if "error" in b else {}),
                                       "note": "CPU: Snakemake, its jobs and the warm server with its renders; "
                                               + (f"{b.get('interpreters')} interpreter(s) imported the pipeline, "
                                                  f"{b.get('forks')} forked render(s)" if label != "old"
                                                  else "one interpreter per figure job")}
    if any("error" in best[k] for k in ("old", "new")):
        rows.append([title, f"{n_rows} figures", "failed" if "error" in best["new"] else fs(best["new"]["wall_s"]),
                     "failed" if "error" in best["old"] else fs(best["old"]["wall_s"]), "—", target, "—"])
        return
    r = best["new"]["wall_s"] / best["old"]["wall_s"]
    rows.append([f"{title}: today vs the code of {BUILD_BASE}, the same sheet ({BUILD_BASE}'s rows) and data",
                 f"{n_rows} figures", fs(best["new"]["wall_s"]), fs(best["old"]["wall_s"]), fr(r), target,
                 met(r <= 0.4)])
    cpu_new, cpu_old = best["new"].get("cpu_s"), best["old"].get("cpu_s")
    if cpu_new and cpu_old:
        rows.append(["11. the same builds' CPU time (all processes, warm server included)", f"{n_rows} figures",
                     fs(cpu_new), fs(cpu_old), fr(cpu_new / cpu_old), "— (2 cores: wall ≥ CPU / 2)", "—"])
    if "error" not in best["new-off"]:
        r2 = best["new-off"]["wall_s"] / best["old"]["wall_s"]
        rows.append([f"11. the same, today with FIGKIT_WARM=off (one interpreter per job) vs {BUILD_BASE}",
                     f"{n_rows} figures", fs(best["new-off"]["wall_s"]), fs(best["old"]["wall_s"]), fr(r2),
                     "— (the warm interpreter's share)", "—"])
    c = best["current"]
    n_cur = sum(1 for ln in (current / "config" / "figures.tsv").read_text(encoding="utf-8").splitlines()[1:]
                if ln.strip())
    rows.append(["11. today's full demo build (today's sheet), for the record", f"{n_cur} figures",
                 "failed" if "error" in c else fs(c["wall_s"]), "—", "—", "—", "—"])


def add_server_cpu(res: dict, plog: Path) -> None:
    """A warm server is detached from Snakemake (wait4 does not see it): add the CPU time it logs
    at its end (its own and its renders'), and count the interpreters that imported figkit's
    pipeline (FIGKIT_PROCESS_LOG; the code of 651f466 writes no such lines)."""
    end = time.monotonic() + 10
    text = plog.read_text() if plog.is_file() else ""
    while "warm server" in text and " cpu_s=" not in text and time.monotonic() < end:
        time.sleep(0.1)
        text = plog.read_text()
    lines = text.splitlines()
    res["interpreters"] = sum(1 for ln in lines if ln.startswith("interpreter "))
    res["forks"] = sum(1 for ln in lines if ln.startswith("fork "))
    for ln in lines:
        if " cpu_s=" in ln and "cpu_s" in res:
            res["cpu_s"] += float(ln.rsplit("cpu_s=", 1)[1])


def _set_option(sheet: Path, fid: str, value: str) -> None:
    """Rewrite one row's options cell (the row is the figure's; the rest of the sheet is kept)."""
    lines = sheet.read_text(encoding="utf-8").splitlines(keepends=True)
    header = lines[0].rstrip("\n").split("\t")
    col = header.index("options")
    for i, ln in enumerate(lines):
        cells = ln.rstrip("\n").split("\t")
        if cells[0] == fid:
            cells += [""] * (len(header) - len(cells))
            cells[col] = value
            lines[i] = "\t".join(cells) + "\n"
    sheet.write_text("".join(lines), encoding="utf-8")


def bench_draft(sz, work, rows, details):
    """Benchmark 10: one sheet edit seen as a new picture.  figkit draft (already running, default
    0.5 s polling): from writing the row to its new preview PNG on disk.  Snakemake: from writing
    the same row to the end of `snakemake --cores 2` (which rebuilds only that figure).  The edit
    alternates the histogram's bins between two values, so every round changes the pixels."""
    title = f"12. one sheet edit to a new picture ({DRAFT_FIGURE}): `figkit draft` preview vs Snakemake rebuild"
    target = "≤ 0.25"
    root = demo_project(work / "draft")
    logs, snake = work / "out", snakemake_exe()
    if not (root / "data" / "readings.csv").is_file():
        src = work / "build-new" / "data"
        if src.is_dir():
            shutil.copytree(src, root / "data")
        elif "error" in run_command([sys.executable, "-m", "figkit.demo", str(root / "data")], REPO,
                                    logs / "draft_data.log"):
            rows.append([title, "—", "failed: demo data", "—", "—", target, "—"])
            return
    sheet = root / "config" / "figures.tsv"
    values = ["bins=24", "bins=fd"]
    # every figure built first, so that the timed `snakemake --cores 2` rebuilds only the edited one
    first = run_command([snake, "--cores", "2"], root, logs / "draft_first.log")
    if "error" in first:
        rows.append([title, "—", "—", "failed: first build", "—", target, "—"])
        return
    sm = []
    for i in range(sz["repeat"]):
        t0 = time.perf_counter()
        _set_option(sheet, DRAFT_FIGURE, values[i % 2])
        res = run_command([snake, "--cores", "2"], root, logs / f"draft_snakemake_{i}.log")
        res["wall_s"] = time.perf_counter() - t0
        sm.append(res)
    preview = root / "results" / "draft" / "000.png"
    log = logs / "draft_loop.log"
    fh = open(log, "w")
    proc = subprocess.Popen([sys.executable, "-m", "figkit", "draft", DRAFT_FIGURE], cwd=root, stdout=fh,
                            stderr=subprocess.STDOUT, env=dict(os.environ, MPLBACKEND="Agg", PYTHONHASHSEED="0"))
    loop = []
    done_line = f"figkit: draft: {DRAFT_FIGURE}: preview"     # printed after each round's print files

    def settle(count: int) -> bool:
        """Wait until the loop has printed ``count`` rounds (it is idle, polling again)."""
        end = time.monotonic() + 180
        while time.monotonic() < end and proc.poll() is None:
            if log.read_text().count(done_line) >= count:
                return True
            time.sleep(0.05)
        return False
    try:
        for i in range(sz["repeat"]):
            if not settle(i + 1):
                loop.append({"error": "the draft loop did not finish a round"})
                break
            before = preview.read_bytes() if preview.is_file() else b""
            t0 = time.perf_counter()
            _set_option(sheet, DRAFT_FIGURE, values[(i + 1) % 2])
            end = time.monotonic() + 120
            while time.monotonic() < end:
                if preview.is_file() and preview.read_bytes() != before:
                    loop.append({"wall_s": time.perf_counter() - t0})
                    break
                time.sleep(0.005)
            else:
                loop.append({"error": "no new preview within 120 s"})
        settle(sz["repeat"] + 1)
    finally:
        proc.send_signal(2)
        try:
            proc.wait(timeout=30)
        except subprocess.TimeoutExpired:
            proc.kill()
        fh.close()
    a, b = best_of(loop), best_of(sm)
    details["12 figkit draft: row written to new preview PNG"] = {
        "seconds": a.get("wall_s"), "times": [r.get("wall_s") for r in loop],
        **({"error": a["error"]} if "error" in a else {}),
        "note": "default polling 0.5 s (half of it on average is waiting for the next look); the print "
                "files follow in the same process"}
    details["12 Snakemake: row written to the end of `snakemake --cores 2`"] = {
        "seconds": b.get("wall_s"), "times": [r.get("wall_s") for r in sm], "cpu_s": b.get("cpu_s"),
        **({"error": b["error"]} if "error" in b else {}),
        "note": "one figure rebuilt (PDF, PNG, SVG, sidecar, checks) through a warm interpreter started for it"}
    if "error" in a or "error" in b:
        rows.append([title, "1 figure", "failed" if "error" in a else fs(a["wall_s"]),
                     "failed" if "error" in b else fs(b["wall_s"]), "—", target, "—"])
        return
    r = a["wall_s"] / b["wall_s"]
    rows.append([title, "1 figure, 4 panels", fs(a["wall_s"]), fs(b["wall_s"]), fr(r), target, met(r <= 0.25)])


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--quick", action="store_true", help="small sizes, one run each (smoke test)")
    ap.add_argument("--big", action="store_true", help="also try 1e8 rows (needs ~18 GiB free)")
    ap.add_argument("--profile", action="store_true", help="cProfile slow cases into PROFILE.md")
    ap.add_argument("--keep", metavar="DIR", help="keep (and reuse) generated data in DIR")
    ap.add_argument("--only", default="1,2,3,4,6,7,8,9,10,11,12",
                    help="comma list of benchmarks (5 runs with 2; A = 6, B = 7, C = 8)")
    ap.add_argument("--out", default=str(HERE / "RESULTS.md"), help="where the table goes")
    ns = ap.parse_args(argv)
    sz = QUICK if ns.quick else FULL
    only = set(ns.only.upper().replace("5", "2").replace("A", "6").replace("B", "7").replace("C", "8").split(","))
    work = Path(ns.keep) if ns.keep else Path(tempfile.mkdtemp(prefix="figkit-bench-"))
    work.mkdir(parents=True, exist_ok=True)
    t_start = time.perf_counter()
    load_start = os.getloadavg()
    started = dt.datetime.now().isoformat(timespec="seconds")
    rows, details, data_log, profiles = [], {}, {}, {} if ns.profile else None
    try:
        if "1" in only:
            print("1. scatter ...", flush=True)
            bench_scatter(sz, work, rows, details, data_log, profiles)
        if "2" in only:
            print("2/5. density and growth ...", flush=True)
            bench_density(sz, work, rows, details, data_log, profiles, ns.big)
        if "3" in only:
            print("3. line fits ...", flush=True)
            bench_fits(sz, work, rows, details, data_log, profiles)
        if "4" in only:
            print("4. LOESS ...", flush=True)
            bench_loess(sz, work, rows, details)
        if "6" in only:
            print("6. demo figure through Snakemake ...", flush=True)
            bench_demo(sz, work, rows, details, data_log)
            if not ns.quick:     # how the ratio grows: the same demo with ten times the readings
                bench_demo(sz, work, rows, details, data_log, scale=10)
        if "7" in only:
            print("7. Parquet streamed ...", flush=True)
            bench_parquet(sz, work, rows, details, data_log, ns.big)
        if "8" in only:
            print("8. compare after a data change ...", flush=True)
            bench_compare(sz, work, rows, details)
        if "9" in only:
            print("9. each demo figure: render vs plain savefig ...", flush=True)
            bench_figure_costs(sz, work, rows, details, data_log)
        if "10" in only:
            print("10. densest demo grid: job alone vs plain script ...", flush=True)
            bench_dense_job(sz, work, rows, details, data_log)
        if "11" in only:
            print("11. full demo build vs " + BUILD_BASE + " ...", flush=True)
            bench_build(sz, work, rows, details, data_log)
        if "12" in only:
            print("12. draft loop vs Snakemake rebuild ...", flush=True)
            bench_draft(sz, work, rows, details)
        profile_text = profile_report(profiles) if ns.profile else None
    finally:
        if not ns.keep:
            shutil.rmtree(work, ignore_errors=True)
    total = time.perf_counter() - t_start

    v = versions()
    try:
        cpus = len(os.sched_getaffinity(0))
    except AttributeError:
        cpus = os.cpu_count()
    blas_env = {k: os.environ[k] for k in sorted(os.environ) if k.startswith(("OPENBLAS", "OMP_", "MKL_"))}
    lines = [
        "# figkit benchmarks", "",
        f"- run: started {started}, mode: {'quick' if ns.quick else 'full'}"
        f"{', big' if ns.big else ''}; whole run {total:.0f} s",
        f"- machine: {cpu_model()}, {cpus} CPUs usable (os.cpu_count() = {os.cpu_count()}), "
        f"{platform.system()} {platform.release()}; load average (1 min) {load_start[0]:.2f} at start, "
        f"{os.getloadavg()[0]:.2f} at end (other work on the machine disturbs wall times)",
        f"- OPENBLAS_CORETYPE: {os.environ.get('OPENBLAS_CORETYPE', 'unset')}; other BLAS/OpenMP settings: "
        f"{', '.join(f'{k}={x}' for k, x in blas_env.items() if k != 'OPENBLAS_CORETYPE') or 'none'}",
        f"- versions: python {v['python']}, numpy {v['numpy']}, pandas {v['pandas']}, "
        f"matplotlib {v['matplotlib']}, pyarrow {v['pyarrow']}, figkit {v['figkit']} ({git_state()})",
        f"- every case in a fresh process; time.perf_counter; best of 3 when a run takes < {SHORT_S:.0f} s "
        "(else 1 run; --quick: 1 run); imports not timed (listed below)",
        "- ratio = figkit / baseline (time or size). Data reading: included on both sides in 1, 2a, 5 and 6 "
        "(the same CSV, pandas.read_csv); excluded on both sides in 2b, 3 and 4",
        "- figkit writes PDF + PNG (600 dpi) and the sidecar; the plain script (1) writes the PDF only",
        "- 6: both sides are fresh processes timed by the driver from start to exit, so interpreter start-up "
        "and imports are included on both sides (best of 3). figkit side = `snakemake --cores 1 --forcerun "
        f"results/figures/{DEMO_FIGURE}.json` in a temporary copy of the demo project after one full build: "
        "Snakemake start-up, Snakefile parse, config validation, sheet read and DAG, then the job "
        "`python -m figkit render` (its own interpreter and imports, CSV read, hashing, statistics, drawing, "
        "checks) writing PDF + PNG + SVG (the demo config's formats), sidecar and stats.csv. Plain side = "
        "one Python process: imports, `pandas.read_csv`, `plt.subplots` on figkit's grid and size, "
        "`ax.scatter(alpha=0.1)` + `np.polyfit` line per panel, PDF only",
        "- 7: one fresh process per size; render time is in-process (imports not timed), peak RSS is the "
        "whole process's VmHWM (interpreter, pandas, pyarrow, matplotlib included); figkit reads Parquet "
        "row group by row group (1e6 rows) on its streamed path",
        "",
        "| benchmark | size | figkit | baseline | ratio | target | met? |",
        "|---|---|---|---|---|---|---|",
    ]
    lines += ["| " + " | ".join(r) + " |" for r in rows]
    lines += ["", "## Details", ""]
    lines += details_table(details)
    if data_log:
        lines += ["", "Data written: " + "; ".join(
            f"{d.get('name', k + ' rows')} {fb(d['bytes'])} {d.get('kind', 'CSV')} in "
            f"{fs(d['seconds'])}" for k, d in data_log.items())]
    text = "\n".join(lines) + "\n"
    out = Path(ns.out)
    out.parent.mkdir(parents=True, exist_ok=True)
    out.write_text(text, encoding="utf-8")
    out.with_suffix(".json").write_text(
        json.dumps({"rows": rows, "details": details}, indent=1, default=str), encoding="utf-8")
    if profile_text:
        out.with_name("PROFILE.md").write_text(profile_text, encoding="utf-8")
    print(text)
    return 0


if __name__ == "__main__":
    sys.exit(main())
