"""The in-memory panel split (figkit.data.split_rows) against pandas' own groupby, the reference:
each panel holds exactly the rows groupby gives its key, in file order, with the same dtypes,
and the rows missing a used field are counted per panel."""
import numpy as np
import pandas as pd

from figkit.data import split_rows


def test_split_rows_matches_pandas_groupby():
    rng = np.random.default_rng(3)
    n = 5000
    frame = pd.DataFrame({
        "x": rng.normal(size=n),
        "y": rng.normal(size=n),
        "kind": pd.Categorical(rng.choice(["a", "b", "c"], n)),
        "site": pd.array(rng.choice(["S1", "S2", "S10"], n), dtype="string"),
        "stratum": rng.choice(["north", "south", "east", "west"], n),
    })
    frame.loc[rng.random(n) < 0.05, "x"] = np.nan
    frame.loc[rng.random(n) < 0.03, "kind"] = np.nan
    used = ["x", "y", "kind", "site"]
    codes, levels = pd.factorize(frame["stratum"], sort=False)
    ordered, bounds, dropped = split_rows(frame, codes, len(levels), used)

    complete = frame[used].notna().all(axis=1)
    for i, level in enumerate(levels):
        ref = frame.loc[complete & (frame["stratum"] == level), used].reset_index(drop=True)
        got = ordered.iloc[bounds[i]:bounds[i + 1]].reset_index(drop=True)
        pd.testing.assert_frame_equal(got, ref)
        assert dropped[i] == int((~complete & (frame["stratum"] == level)).sum())
    assert bounds[-1] == int(complete.sum()) == len(ordered)


def test_split_rows_when_every_row_is_complete_and_a_panel_is_empty():
    """Reference: pandas groupby on the panel codes (a code with no rows has an empty slice)."""
    rng = np.random.default_rng(4)
    frame = pd.DataFrame({"x": rng.normal(size=300), "flag": rng.random(300) < 0.5,
                          "when": pd.date_range("2026-01-01", periods=300, freq="h", tz="UTC")})
    codes = rng.choice([0, 2, 3], 300)          # panel 1 has no rows
    ordered, bounds, dropped = split_rows(frame, codes, 4, ["x", "flag", "when"])
    groups = dict(list(frame.groupby(codes, sort=True)))
    for i in range(4):
        got = ordered.iloc[bounds[i]:bounds[i + 1]].reset_index(drop=True)
        if i not in groups:
            assert got.empty
            continue
        pd.testing.assert_frame_equal(got, groups[i].reset_index(drop=True))
    assert dropped.tolist() == [0, 0, 0, 0]
