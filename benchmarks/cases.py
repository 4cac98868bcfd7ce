"""One benchmark case per process: ``python benchmarks/cases.py CASE ARGS_JSON OUT_JSON``.

The driver (run.py) starts a fresh interpreter for every case so that peak memory and warm
caches of one case never leak into another.  Each case writes a JSON result to OUT_JSON; the
child's own peak resident memory (VmHWM) is added to it.

Timing: time.perf_counter; a case runs once and, if that run was short (< SHORT_S seconds),
twice more, reporting the best (least disturbed) run.
"""
from __future__ import annotations

import json
import os
import sys
import time
from pathlib import Path

import numpy as np

SHORT_S = 30.0          # every case below 1e8 rows gets its best of 3
N_STRATA = 12
SEED = 20_241_117
CHUNK = 1_000_000
FIELDS = ["x", "y", "stratum"]


# ------------------------------------------------------------------------------- helpers
def proc_status() -> dict:
    """VmRSS and VmHWM of this process in bytes (Linux /proc)."""
    out = {}
    try:
        with open("/proc/self/status") as fh:
            for line in fh:
                if line.startswith(("VmRSS", "VmHWM")):
                    key, value = line.split(":")
                    out[key] = int(value.split()[0]) * 1024
    except OSError:
        pass
    return out


def reset_peak() -> bool:
    """Reset VmHWM to the current RSS (Linux >= 4.0: write 5 to /proc/self/clear_refs)."""
    try:
        with open("/proc/self/clear_refs", "w") as fh:
            fh.write("5")
        return True
    except OSError:
        return False


def timed(fn, repeat: int):
    """(best seconds, every run's seconds, last result); more runs only if the first was short."""
    times, result = [], None
    for i in range(max(1, repeat)):
        t0 = time.perf_counter()
        result = fn()
        times.append(time.perf_counter() - t0)
        if times[0] >= SHORT_S:
            break
    return min(times), times, result


# ---------------------------------------------------------------------------------- data
def points(n: int, chunk_index: int = 0) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Synthetic (x, y, stratum code): 12 strata, x normal around a stratum mean, y a noisy
    straight line of x whose slope differs by stratum (correlation about 0.4-0.75)."""
    rng = np.random.default_rng(np.random.SeedSequence([SEED, chunk_index]))
    g = rng.integers(0, N_STRATA, n)
    mu = np.linspace(-1.0, 1.0, N_STRATA)
    slope = np.linspace(0.3, 0.9, N_STRATA)
    x = mu[g] + rng.standard_normal(n)
    y = slope[g] * x + 0.8 * rng.standard_normal(n)
    return np.round(x, 4), np.round(y, 4), g


STRATUM_NAMES = np.array([f"s{i + 1:02d}" for i in range(N_STRATA)], dtype=object)


def _write_chunk(args):
    import pandas as pd
    path, n, index = args
    x, y, g = points(n, index)
    pd.DataFrame({"x": x, "y": y, "stratum": STRATUM_NAMES[g]}).to_csv(path, index=False, header=False)
    return path


def case_make_csv(a: dict) -> dict:
    """Write n rows as CSV in chunks of 1e6 rows (two worker processes), header first."""
    from concurrent.futures import ProcessPoolExecutor
    n, path = int(a["n"]), Path(a["path"])
    path.parent.mkdir(parents=True, exist_ok=True)
    jobs = [(str(path) + f".part{i}", min(CHUNK, n - start), i)
            for i, start in enumerate(range(0, n, CHUNK))]
    t0 = time.perf_counter()
    with ProcessPoolExecutor(max_workers=min(2, len(jobs))) as pool, open(path, "wb") as out:
        out.write((",".join(FIELDS) + "\n").encode())
        for part in pool.map(_write_chunk, jobs):
            with open(part, "rb") as fh:
                while block := fh.read(1 << 24):
                    out.write(block)
            os.remove(part)
    return {"seconds": time.perf_counter() - t0, "bytes": path.stat().st_size}


def case_make_parquet(a: dict) -> dict:
    """Write n rows as Parquet (columns stratum, x, y), one row group per 1e6-row chunk,
    generated and written chunk by chunk so that memory stays at one chunk."""
    import pyarrow as pa
    import pyarrow.parquet as pq
    n, path = int(a["n"]), Path(a["path"])
    path.parent.mkdir(parents=True, exist_ok=True)
    names = pa.array(STRATUM_NAMES.tolist(), type=pa.string())
    schema = pa.schema([("stratum", pa.string()), ("x", pa.float64()), ("y", pa.float64())])
    t0 = time.perf_counter()
    tmp = path.with_name(path.name + ".part")
    with pq.ParquetWriter(tmp, schema) as writer:
        for i, start in enumerate(range(0, n, CHUNK)):
            x, y, g = points(min(CHUNK, n - start), i)
            table = pa.table({"stratum": names.take(pa.array(g)), "x": x, "y": y}, schema=schema)
            writer.write_table(table, row_group_size=CHUNK)
    tmp.replace(path)
    meta = pq.ParquetFile(path).metadata
    return {"seconds": time.perf_counter() - t0, "bytes": path.stat().st_size,
            "rows": meta.num_rows, "row_groups": meta.num_row_groups}


def read_points(path: str):
    """The same reader call figkit makes (figkit.data.read_dataset for a .csv)."""
    import pandas as pd
    return pd.read_csv(path, usecols=FIELDS, sep=",", low_memory=False)


# ------------------------------------------------------------------------ figkit render
def _stage_timers():
    """Wrap figkit's stage functions (module attributes, not figkit's files) to time stages."""
    import figkit.data
    import figkit.draw
    import figkit.render
    totals: dict[str, float] = {}

    def wrap(module, name, label):
        inner = getattr(module, name, None)
        if inner is None:          # renamed in figkit: that stage is simply not broken out
            return

        def timed_stage(*args, **kwargs):
            t0 = time.perf_counter()
            try:
                return inner(*args, **kwargs)
            finally:
                key = label if label != "save" else f"save {args[2]}"
                totals[key] = totals.get(key, 0.0) + time.perf_counter() - t0
        setattr(module, name, timed_stage)

    wrap(figkit.data, "read_dataset", "read csv")
    if hasattr(figkit.data, "stream_figure_data"):
        wrap(figkit.data, "stream_figure_data", "streamed load (chunked read + tallies)")
    wrap(figkit.data, "sha256_file", "hash input")
    wrap(figkit.render, "load_figure_data", "load data (incl. read, hash, split)")
    wrap(figkit.draw, "build_figure", "build figure (prepare, draw, layout)")
    wrap(figkit.render, "enforce_minimums", "checks")
    wrap(figkit.render, "panel_statistics", "panel statistics")
    wrap(figkit.render, "strata_comparison", "strata test")
    wrap(figkit.render, "_save", "save")
    return totals


def case_figkit_render(a: dict) -> dict:
    """figkit.render.render(load_project(root), id) in-process; imports timed on their own."""
    t0 = time.perf_counter()
    import matplotlib
    matplotlib.use("Agg")
    from figkit.render import load_project, render
    import_s = time.perf_counter() - t0
    totals = _stage_timers()
    per_run = []
    # The streamed (chunked) path is chosen by the project's config key stream_above_mb, which
    # the driver writes; the sidecar's "streamed" entry says which path actually ran.

    def once():
        totals.clear()
        rec = render(load_project(a["root"]), a["id"])
        per_run.append(dict(totals))
        return rec

    profile = a.get("profile")
    if profile:
        import cProfile
        once()                      # warm caches (fonts) as the timed runs are warm too
        prof = cProfile.Profile()
        t1 = time.perf_counter()
        prof.enable()
        rec = once()
        prof.disable()
        best, times = time.perf_counter() - t1, []
        prof.dump_stats(profile)
    else:
        best, times, rec = timed(once, a.get("repeat", 3))
    out_dir = Path(a["root"]) / "results" / "figures"
    files = {fmt: (out_dir / name).stat().st_size for fmt, name in rec["files"].items()}
    stages = per_run[int(np.argmin(times))] if times else per_run[-1]
    return {"seconds": best, "times": times, "import_s": import_s, "files": files,
            "size_mm": rec["size_mm"], "layout": {k: rec["layout"].get(k) for k in ("rows", "cols")},
            "drawing": rec["panels"][0].get("drawing"), "n_panels": len(rec["panels"]),
            "streamed": rec.get("streamed") is not None, "rows_read": rec.get("rows_read"),
            "stages": stages}


# ---------------------------------------------------------------- plain matplotlib script
def case_plain_scatter(a: dict) -> dict:
    """What one would write by hand: read the CSV, a rows x cols grid, one ax.scatter per
    panel with alpha=0.1, save a PDF.  Default matplotlib style, no rasterizing."""
    t0 = time.perf_counter()
    import matplotlib
    matplotlib.use("Agg")
    import matplotlib.pyplot as plt
    import_s = time.perf_counter() - t0
    out = Path(a["out"])
    w_in, h_in = a["size_mm"][0] / 25.4, a["size_mm"][1] / 25.4

    def once():
        df = read_points(a["csv"])
        fig, axes = plt.subplots(a["rows"], a["cols"], figsize=(w_in, h_in), sharex=True, sharey=True)
        for ax, (level, part) in zip(axes.flat, df.groupby("stratum", sort=True)):
            ax.scatter(part["x"].to_numpy(), part["y"].to_numpy(), s=a["marker_pt2"], alpha=0.1,
                       linewidths=0)
            ax.set_title(str(level))
        fig.savefig(out, format="pdf")
        plt.close(fig)

    best, times, _ = timed(once, a.get("repeat", 3))
    return {"seconds": best, "times": times, "import_s": import_s, "pdf_bytes": out.stat().st_size}


def case_plain_demo(a: dict) -> dict:
    """The hand-written script for the demo's densest figure, run once per fresh process (the
    driver times the whole process): read the CSV with pandas, one panel per land use on
    figkit's grid and figure size, ax.scatter(alpha=0.1) and an np.polyfit straight line per
    panel, save a PDF.  Default matplotlib style, no rasterizing."""
    t0 = time.perf_counter()
    import matplotlib
    matplotlib.use("Agg")
    import matplotlib.pyplot as plt
    import pandas as pd
    import_s = time.perf_counter() - t0
    t1 = time.perf_counter()
    x, y, by = a["x"], a["y"], a["strata"]
    df = pd.read_csv(a["csv"])
    fig, axes = plt.subplots(a["rows"], a["cols"], figsize=(a["size_mm"][0] / 25.4, a["size_mm"][1] / 25.4),
                             sharex=True, sharey=True)
    n_drawn = 0
    for ax, level in zip(axes.flat, a["levels"]):
        part = df.loc[df[by] == level, [x, y]].dropna()
        px, py = part[x].to_numpy(), part[y].to_numpy()
        ax.scatter(px, py, s=a["marker_pt2"], alpha=0.1, linewidths=0)
        slope, intercept = np.polyfit(px, py, 1)
        ends = np.array([px.min(), px.max()])
        ax.plot(ends, intercept + slope * ends, color="black")
        ax.set_title(str(level))
        n_drawn += len(px)
    for ax in axes[-1]:
        ax.set_xlabel(x)
    for ax in axes[:, 0]:
        ax.set_ylabel(y)
    fig.savefig(a["out"], format="pdf")
    plt.close(fig)
    seconds = time.perf_counter() - t1
    return {"seconds": seconds, "import_s": import_s, "pdf_bytes": Path(a["out"]).stat().st_size,
            "points": n_drawn}


# ------------------------------------------------------------------ aggregation bound
def case_bincount_bound(a: dict) -> dict:
    """The least work a 12-panel density figure needs: read the columns (figkit's own reader
    call), factorize the stratum, integer cell indices, one np.bincount for all panels."""
    import pandas as pd
    nx, ny = int(a["nx"]), int(a["ny"])
    repeat = a.get("repeat", 3)
    read_s, read_times, df = timed(lambda: read_points(a["csv"]), repeat)

    def aggregate():
        codes, levels = pd.factorize(df["stratum"])
        x = df["x"].to_numpy(dtype=float)
        y = df["y"].to_numpy(dtype=float)
        x0, x1, y0, y1 = x.min(), x.max(), y.min(), y.max()
        ix = ((x - x0) * (nx / (x1 - x0))).astype(np.int64)
        np.minimum(ix, nx - 1, out=ix)
        iy = ((y - y0) * (ny / (y1 - y0))).astype(np.int64)
        np.minimum(iy, ny - 1, out=iy)
        cell = (codes.astype(np.int64) * nx + ix) * ny + iy
        return np.bincount(cell, minlength=len(levels) * nx * ny)

    agg_s, agg_times, counts = timed(aggregate, repeat)
    assert counts.sum() == len(df)
    return {"read_s": read_s, "read_times": read_times, "agg_s": agg_s, "agg_times": agg_times,
            "seconds": read_s + agg_s, "rows": len(df)}


# ---------------------------------------------------------------------- line statistics
def case_line_fits(a: dict) -> dict:
    """Per-panel straight lines as figkit makes them in memory: factorize the stratum, split the
    rows into panels (figkit.data.split_rows: one stable sort, no copy per panel) and
    figkit.stats.fit_line per panel, against one groupby().mean() over the same frame."""
    import pandas as pd
    from figkit import stats
    from figkit.data import split_rows
    df = read_points(a["csv"])
    repeat = a.get("repeat", 3)

    def presplit():
        codes, levels = pd.factorize(df["stratum"], sort=False)
        ordered, bounds, _ = split_rows(df, codes, len(levels), ["x", "y"])
        x, y = ordered["x"].to_numpy(dtype=float), ordered["y"].to_numpy(dtype=float)
        return {lev: (x[bounds[i]:bounds[i + 1]], y[bounds[i]:bounds[i + 1]])
                for i, lev in enumerate(levels)}

    def figkit_fits():
        return {k: stats.fit_line(px, py) for k, (px, py) in presplit().items()}

    def groupby_mean():
        return df.groupby("stratum", sort=False, observed=True)[["x", "y"]].mean()

    fk_s, fk_times, fits = timed(figkit_fits, repeat)
    if a.get("profile"):
        import cProfile
        prof = cProfile.Profile()
        prof.runcall(figkit_fits)
        prof.dump_stats(a["profile"])
    base_s, base_times, means = timed(groupby_mean, repeat)
    parts = presplit()
    fit_only_s, fit_only_times, _ = timed(
        lambda: [stats.fit_line(px, py) for px, py in parts.values()], repeat)
    split_s, _, _ = timed(presplit, repeat)
    # The two computations agree on the means (a check that both did the whole job).
    worst = max(abs(fits[k].x_mean - means.loc[k, "x"]) for k in fits)
    assert worst < 1e-9, worst
    return {"seconds": fk_s, "times": fk_times, "baseline_s": base_s, "baseline_times": base_times,
            "fit_only_s": fit_only_s, "fit_only_times": fit_only_times, "split_s": split_s,
            "rows": len(df)}


# ------------------------------------------------------------------------------- LOESS
def _loess_data(n: int):
    rng = np.random.default_rng(np.random.SeedSequence([SEED, 99, n]))
    x = rng.uniform(0.0, 10.0, n)
    y = np.sin(x) + 0.3 * x + rng.normal(0.0, 0.4, n)
    return x, y


def case_loess(a: dict) -> dict:
    """figkit.stats.loess (defaults: span 0.75, degree 1, no robustness iterations, 200
    vertices) or, with ``impl: reference``, statsmodels' lowess with a delta that gives a
    similar number of local fits.  Extra peak RSS = VmHWM after the call - VmRSS before it."""
    n = int(a["n"])
    x, y = _loess_data(n)
    if a.get("impl") == "reference":
        from statsmodels.nonparametric.smoothers_lowess import lowess
        delta = float(np.ptp(x)) / 200.0

        def fn():
            return lowess(y, x, frac=0.75, it=0, delta=delta, return_sorted=True)
    else:
        from figkit import stats

        def fn():
            return stats.loess(x, y, span=0.75)
    fn()   # import-time and first-touch effects out of the way
    before = proc_status().get("VmRSS", 0)
    peak_reset = reset_peak()
    best, times, _ = timed(fn, a.get("repeat", 3))
    after = proc_status()
    return {"seconds": best, "times": times, "extra_peak_bytes": after.get("VmHWM", 0) - before,
            "peak_reset": peak_reset, "data_bytes": x.nbytes + y.nbytes}


# ------------------------------------------------------- per-figure cost (cases 9 and 10)
def _plain_save(fig, path: Path, fmt: str, dpi: float) -> None:
    """matplotlib alone saving a finished Figure: savefig with the file's dpi; PNG at the same
    zlib level figkit uses (like for like: the level changes only the encoder's time)."""
    extra = {"pil_kwargs": {"compress_level": 1}} if fmt == "png" else {}
    fig.savefig(path, format=fmt, dpi=dpi, **extra)


def _wall_and_cpu(fn, repeat: int) -> dict:
    """Best of ``repeat`` runs by wall time and, separately, by this process's CPU time (the
    steadier measure on a shared machine: other work slows a run's wall time, hardly its CPU)."""
    wall, cpu = [], []
    for _ in range(max(1, repeat)):
        t0, c0 = time.perf_counter(), time.process_time()
        fn()
        wall.append(time.perf_counter() - t0)
        cpu.append(time.process_time() - c0)
    return {"seconds": min(wall), "times": wall, "cpu_s": min(cpu), "cpu_times": cpu}


def case_demo_figures(a: dict) -> dict:
    """Case 9: each demo figure in one warm process: figkit's whole render against plain
    matplotlib saving the Figure figkit built to the same formats at the same dpi, each the best
    of ``repeat`` runs (wall and CPU time).  The Figure is taken from figkit.draw.build_figure as
    render calls it; the plain saves run under the house style's rcParams, as figkit's do
    (fonts, hash salt)."""
    import matplotlib
    matplotlib.use("Agg")
    import figkit.draw
    from figkit.render import load_project, render
    built = []
    inner = figkit.draw.build_figure

    def keep(*args, **kwargs):
        out = inner(*args, **kwargs)
        built.append(out[0])
        return out
    figkit.draw.build_figure = keep
    totals = _stage_timers()
    out_dir = Path(a["out"])
    out_dir.mkdir(parents=True, exist_ok=True)
    render(load_project(a["root"]), a["ids"][0])     # fonts and caches warm, as in a warm loop
    res = {}
    for fid in a["ids"]:
        stage_runs, recs = [], []

        def once():
            totals.clear()
            built.clear()
            recs.append(render(load_project(a["root"]), fid))
            stage_runs.append(dict(totals))
        fk = _wall_and_cpu(once, a.get("repeat", 3))
        fig, rec = built[-1], recs[-1]
        spec = load_project(a["root"]).spec(fid)
        formats = list(rec["files"])

        def plain():
            with matplotlib.rc_context(spec.style.rc):
                for fmt in formats:
                    _plain_save(fig, out_dir / f"{fid}.{fmt}", fmt, spec.style.dpi)
        base = _wall_and_cpu(plain, a.get("repeat", 3))
        res[fid] = {**fk, "baseline_s": base["seconds"], "baseline_times": base["times"],
                    "baseline_cpu_s": base["cpu_s"], "formats": formats, "chart": rec["chart"],
                    "panels": len(rec["panels"]),
                    "stages": stage_runs[int(np.argmin(fk["times"]))]}
    return {"figures": res}


def case_plain_grid(a: dict) -> dict:
    """Case 10's plain side: the script one would write for a two-way grid of scatter panels,
    run in a fresh process (the driver times the whole process): read the CSV with pandas, one
    panel per pair of levels on figkit's grid and size, ax.scatter(alpha=0.1) of every point,
    save a PDF.  Default matplotlib style, no rasterizing."""
    t0 = time.perf_counter()
    import matplotlib
    matplotlib.use("Agg")
    import matplotlib.pyplot as plt
    import pandas as pd
    import_s = time.perf_counter() - t0
    t1 = time.perf_counter()
    x, y = a["x"], a["y"]
    df = pd.read_csv(a["csv"])
    fig, axes = plt.subplots(a["rows"], a["cols"], figsize=(a["size_mm"][0] / 25.4, a["size_mm"][1] / 25.4),
                             sharex=True, sharey=True, squeeze=False)
    n_drawn = 0
    for ax, keys in zip(axes.flat, a["keys"]):
        mask = np.ones(len(df), dtype=bool)
        for field, level in keys.items():
            mask &= (df[field] == level).to_numpy()
        part = df.loc[mask, [x, y]].dropna()
        ax.scatter(part[x].to_numpy(), part[y].to_numpy(), s=a["marker_pt2"], alpha=0.1, linewidths=0)
        ax.set_title(" / ".join(str(v) for v in keys.values()), fontsize=7)
        n_drawn += len(part)
    fig.savefig(a["out"], format="pdf")
    plt.close(fig)
    return {"seconds": time.perf_counter() - t1, "import_s": import_s,
            "pdf_bytes": Path(a["out"]).stat().st_size, "points": n_drawn}


CASES = {"make_csv": case_make_csv, "make_parquet": case_make_parquet,
         "figkit_render": case_figkit_render, "plain_scatter": case_plain_scatter,
         "plain_demo": case_plain_demo, "bincount_bound": case_bincount_bound,
         "line_fits": case_line_fits, "loess": case_loess,
         "demo_figures": case_demo_figures, "plain_grid": case_plain_grid}


def main(argv: list[str]) -> int:
    case, args, out = argv[1], json.loads(argv[2]), Path(argv[3])
    if args.get("limit_bytes"):
        import resource
        resource.setrlimit(resource.RLIMIT_AS, (int(args["limit_bytes"]),) * 2)
    result = CASES[case](args)
    result["child_peak_bytes"] = proc_status().get("VmHWM")
    out.write_text(json.dumps(result), encoding="utf-8")
    return 0


if __name__ == "__main__":
    sys.exit(main(sys.argv))
