"""Chunked (streamed) and in-memory paths give identical counts, means and slopes on the same
file — CSV and Parquet.  The in-memory path is the reference; its own numbers are checked against
statsmodels and pandas elsewhere (test_demo_references, test_pipeline)."""
from __future__ import annotations

import shutil
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from figkit import data as D
from figkit.aggregate import HexGrid
from figkit.sheet import check_row, validate_config
from figkit.spec import build_spec
from figkit.stats import fit_line

REPO = Path(__file__).resolve().parents[1]


def _project(tmp_path: Path, fmt: str) -> Path:
    rng = np.random.default_rng(5)
    n = 30_000
    df = pd.DataFrame({"g": rng.choice(["north", "south", "east"], n),
                       "h": rng.choice(["wet", "dry"], n),
                       "x": np.round(rng.normal(10, 3, n), 1)})
    df["y"] = 0.4 * df["x"] + rng.normal(0, 1, n)
    df.loc[rng.random(n) < 0.03, "y"] = np.nan
    df.loc[rng.random(n) < 0.01, "g"] = None
    (tmp_path / "data").mkdir()
    name = f"data/points.{fmt}"
    if fmt == "parquet":
        df.to_parquet(tmp_path / name, row_group_size=4000)
    else:
        df.to_csv(tmp_path / name, index=False)
    shutil.copytree(REPO / "figkit" / "styles", tmp_path / "styles")
    return tmp_path / name


def _both_paths(spec, monkeypatch):
    """(in memory, streamed in several uneven chunks) for one spec."""
    monkeypatch.setattr(D, "CHUNK_ROWS", 7_000)
    whole = D.load_figure_data(spec, stream_above_bytes=10 ** 12)
    streamed = D.load_figure_data(spec, stream_above_bytes=0)
    assert streamed.streamed is not None and whole.streamed is None
    return whole, streamed


def _spec(tmp_path, name, **cells):
    cfg = validate_config({"datasets": {"pts": name}}, tmp_path)
    return build_spec(check_row(2, {"id": "f", "dataset": "pts", **cells}), cfg)


@pytest.mark.parametrize("fmt", ["csv", "parquet"])
@pytest.mark.parametrize("chart", ["hexbins", "histogram"])
def test_streamed_equals_in_memory(tmp_path, monkeypatch, fmt, chart):
    if fmt == "parquet":
        pytest.importorskip("pyarrow")
    path = _project(tmp_path, fmt)
    cells = dict(chart=chart, x="x", strata="g by h", filter="x > 2")
    if chart == "hexbins":
        cells.update(y="y", trend="line")
    spec = _spec(tmp_path, path.relative_to(tmp_path).as_posix(), **cells)
    monkeypatch.setattr(D, "CHUNK_ROWS", 7_000)         # several chunks, uneven last one
    whole = D.load_figure_data(spec, stream_above_bytes=10 ** 12)
    streamed = D.load_figure_data(spec, stream_above_bytes=0)
    assert streamed.streamed is not None and whole.streamed is None
    assert [p.keys for p in streamed.panels] == [p.keys for p in whole.panels]
    assert (streamed.n_read, streamed.n_kept, streamed.n_unassigned) == \
        (whole.n_read, whole.n_kept, whole.n_unassigned)
    for s, w in zip(streamed.panels, whole.panels):
        assert (s.n, s.n_dropped) == (w.n, w.n_dropped)
        x = w.frame["x"].to_numpy(float)
        assert s.tally.x_mean == pytest.approx(x.mean(), rel=1e-12)
        if chart == "hexbins":
            y = w.frame["y"].to_numpy(float)
            fit = fit_line(x, y)
            got = s.tally.line.fit()
            assert got.slope == pytest.approx(fit.slope, rel=1e-10)
            assert got.slope_ci_low == pytest.approx(fit.slope_ci_low, rel=1e-10)
            g = streamed.streamed["hex_grid"]
            grid = HexGrid(*g)
            assert np.array_equal(s.tally.hex_counts, grid.counts(x, y))
        else:
            edges = np.asarray(streamed.streamed["bin_edges"])
            assert np.array_equal(s.tally.hist_counts, np.histogram(x, bins=edges)[0])


def test_small_files_and_other_charts_stay_in_memory(tmp_path):
    _project(tmp_path, "csv")
    spec = _spec(tmp_path, "data/points.csv", chart="scatter", x="x", y="y")
    assert not D.should_stream(spec, 0)                  # scatter needs the points themselves
    spec = _spec(tmp_path, "data/points.csv", chart="hexbins", x="x", y="y")
    assert D.should_stream(spec, 0) and not D.should_stream(spec)


@pytest.mark.parametrize("chart", ["hexbins", "histogram"])
def test_streamed_figure_equals_in_memory_figure(tmp_path, monkeypatch, chart):
    """Rendered end to end: the same sidecar numbers and the same pixels (RMS as matplotlib's
    testing module computes it) whichever path read the data."""
    from matplotlib.testing.compare import calculate_rms
    from PIL import Image
    from figkit.render import load_project, render
    _project(tmp_path, "csv")
    (tmp_path / "config").mkdir()
    row = {"id": "f", "dataset": "pts", "chart": chart, "x": "x", "strata": "g"}
    if chart == "hexbins":
        row.update(y="y", trend="line")
    (tmp_path / "config" / "figures.tsv").write_text(
        "\t".join(row) + "\n" + "\t".join(row.values()) + "\n")
    monkeypatch.setattr(D, "CHUNK_ROWS", 5_000)
    results = {}
    for name, limit in (("memory", 1000), ("streamed", 0)):
        (tmp_path / "config" / "config.yaml").write_text(
            f"datasets: {{pts: data/points.csv}}\nformats: [png]\ndpi: 600\n"
            f"results: out-{name}\nstream_above_mb: {limit}\n")
        results[name] = render(load_project(tmp_path), "f")
    mem, st = results["memory"], results["streamed"]
    assert "streamed" in st and "streamed" not in mem
    for a, b in zip(mem["panels"], st["panels"]):
        assert (a["label"], a["n"], a["n_dropped"]) == (b["label"], b["n"], b["n_dropped"])
        for k in ("x_mean", "y_mean", "slope", "slope_ci_low", "slope_ci_high", "intercept", "r"):
            if a["stats"][k] is None:
                assert b["stats"][k] is None
            else:
                assert b["stats"][k] == pytest.approx(a["stats"][k], rel=1e-9)
    if chart == "hexbins":
        assert st["strata_test"]["F"] == pytest.approx(mem["strata_test"]["F"], rel=1e-9)
    pa = np.asarray(Image.open(tmp_path / "out-memory" / "figures" / "f.png").convert("RGB"), dtype=np.int16)
    pb = np.asarray(Image.open(tmp_path / "out-streamed" / "figures" / "f.png").convert("RGB"), dtype=np.int16)
    assert pa.shape == pb.shape
    assert calculate_rms(pa, pb) < 1.0


@pytest.mark.parametrize("fmt", ["csv", "parquet"])
def test_streamed_and_in_memory_give_the_same_orders_notes(tmp_path, monkeypatch, fmt):
    """An orders list with a typo ('nrth') and a value left out ('east') gives the same cautions on
    both paths, judged on the whole file (the filter keeps no 'east' row here)."""
    if fmt == "parquet":
        pytest.importorskip("pyarrow")
    path = _project(tmp_path, fmt)
    cfg = validate_config({"datasets": {"pts": path.relative_to(tmp_path).as_posix()},
                           "orders": {"g": ["nrth", "south"]}}, tmp_path)
    spec = build_spec(check_row(2, {"id": "f", "dataset": "pts", "chart": "histogram", "x": "x",
                                    "strata": "g", "filter": 'g != "east"'}), cfg)
    whole, streamed = _both_paths(spec, monkeypatch)
    assert streamed.notes == whole.notes and len(whole.notes) == 2
    assert "'nrth' (did you mean 'north'?)" in whole.notes[0] and "'east'" in whole.notes[1]


@pytest.mark.parametrize("fmt", ["csv", "parquet"])
@pytest.mark.parametrize("stream", [False, True])
def test_text_in_a_numeric_column_names_its_row_on_both_paths(tmp_path, monkeypatch, fmt, stream):
    """The first bad value's row: CSV counts the header as row 1 (as a spreadsheet shows it), a
    Parquet file has no header (data row); the same on the streamed path, where the bad value
    sits in a later chunk (rows are positions in the file, not in the chunk)."""
    if fmt == "parquet":
        pytest.importorskip("pyarrow")
    from figkit.errors import FigkitError
    rng = np.random.default_rng(6)
    n = 20_000
    df = pd.DataFrame({"x": rng.normal(0, 1, n).round(3).astype(str), "y": rng.normal(0, 1, n)})
    df.loc[[15_003, 15_100], "x"] = ["1,5", "2,5"]
    (tmp_path / "data").mkdir()
    name = f"data/t.{fmt}"
    if fmt == "parquet":
        df.set_axis(df.index + 1000).to_parquet(tmp_path / name, row_group_size=4000)  # stored index
    else:
        df.to_csv(tmp_path / name, index=False)
    shutil.copytree(REPO / "figkit" / "styles", tmp_path / "styles")
    spec = _spec(tmp_path, name, chart="histogram", x="x")
    monkeypatch.setattr(D, "CHUNK_ROWS", 7_000)
    with pytest.raises(FigkitError) as err:
        D.load_figure_data(spec, stream_above_bytes=0 if stream else 10 ** 12)
    text = str(err.value)
    assert "'1,5'" in text
    assert ("first at row 15005 of the file (header = row 1)" if fmt == "csv"
            else "first in data row 15004") in text, text


def test_streamed_and_in_memory_name_the_same_filter_typo(tmp_path, monkeypatch):
    """A filter value no row holds ('sout') is named on both paths alike."""
    path = _project(tmp_path, "csv")
    spec = _spec(tmp_path, path.relative_to(tmp_path).as_posix(), chart="histogram", x="x",
                 strata="h", filter='g in ["north", "sout"]')
    whole, streamed = _both_paths(spec, monkeypatch)
    assert whole.notes == streamed.notes and len(whole.notes) == 1
    assert "'sout'" in whole.notes[0] and "did you mean 'south'" in whole.notes[0]


@pytest.mark.parametrize("fmt", ["csv", "parquet"])
def test_text_rows_are_counted_in_every_chunk(tmp_path, monkeypatch, fmt):
    """'holds text in N rows' counts every bad cell of the file, on the streamed path too, where
    they sit in three different chunks; N is checked against pandas.to_numeric(errors='coerce')
    on the whole column."""
    if fmt == "parquet":
        pytest.importorskip("pyarrow")
    from figkit.errors import FigkitError
    rng = np.random.default_rng(7)
    n = 20_000
    df = pd.DataFrame({"x": rng.normal(0, 1, n).round(3).astype(str), "y": rng.normal(0, 1, n)})
    df.loc[[1_000, 1_001, 9_500, 18_000], "x"] = ["1,5", "abc", "2,5", "1,5"]
    expect = int(pd.to_numeric(df["x"], errors="coerce").isna().sum())   # pandas: 4
    (tmp_path / "data").mkdir()
    name = f"data/t.{fmt}"
    if fmt == "parquet":
        df.to_parquet(tmp_path / name, row_group_size=4000)
    else:
        df.to_csv(tmp_path / name, index=False)
    shutil.copytree(REPO / "figkit" / "styles", tmp_path / "styles")
    spec = _spec(tmp_path, name, chart="histogram", x="x")
    monkeypatch.setattr(D, "CHUNK_ROWS", 7_000)
    monkeypatch.setattr(D.iter_chunks, "__defaults__", (7_000,))   # whatever reads the default
    texts = []
    for limit in (10 ** 12, 0):          # in memory, then streamed in 3 chunks
        with pytest.raises(FigkitError) as err:
            D.load_figure_data(spec, stream_above_bytes=limit)
        texts.append(str(err.value))
        assert f"holds text in {expect} rows" in texts[-1], texts[-1]
    assert texts[0] == texts[1]


def test_missing_values_per_field_are_the_same_on_both_paths(tmp_path, monkeypatch):
    """Rows dropped for a missing value are counted per field alike in memory and streamed, and
    equal pandas' isna() count over the rows that belong to a panel."""
    path = _project(tmp_path, "csv")
    spec = _spec(tmp_path, path.relative_to(tmp_path).as_posix(), chart="hexbins", x="x", y="y",
                 strata="g")
    whole, streamed = _both_paths(spec, monkeypatch)
    df = pd.read_csv(path)
    in_panels = df[df["g"].notna()]
    expect = {f: int(in_panels[f].isna().sum()) for f in ("x", "y") if in_panels[f].isna().any()}
    assert whole.missing == streamed.missing == expect and expect
