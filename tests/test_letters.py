"""Panel letters (a, b, c ... in the house style's case) on wrapped panels and on grids, with no
text collisions (window extents of the drawn texts)."""
import shutil
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from figkit.draw import panel_letter

REPO = Path(__file__).resolve().parents[1]


def test_letter_sequence():
    assert [panel_letter(i, "lower") for i in (0, 1, 25, 26, 27)] == ["a", "b", "z", "aa", "ab"]
    assert panel_letter(2, "upper") == "C"


@pytest.mark.parametrize("strata,style,first", [("g", "house", "a"), ("g by h", "compact", "A")])
def test_letters_drawn_in_order_without_collisions(tmp_path, strata, style, first):
    import matplotlib
    matplotlib.use("Agg")
    from figkit.checks import text_collisions
    from figkit.render import figure, load_project
    rng = np.random.default_rng(4)
    df = pd.DataFrame({"g": rng.choice(list("pqrs"), 800), "h": rng.choice(["u", "v"], 800),
                       "x": rng.normal(size=800)})
    (tmp_path / "data").mkdir()
    df.to_csv(tmp_path / "data" / "d.csv", index=False)
    shutil.copytree(REPO / "figkit" / "styles", tmp_path / "styles")
    (tmp_path / "config").mkdir()
    (tmp_path / "config" / "config.yaml").write_text(f"datasets: {{d: data/d.csv}}\nstyle: {style}\n")
    (tmp_path / "config" / "figures.tsv").write_text("id\tdataset\tchart\n")
    fig = figure({"id": "t", "dataset": "d", "chart": "histogram", "x": "x", "strata": strata,
                  "panel_letters": "yes", "size": "single"}, load_project(tmp_path))
    fig.canvas.draw()
    texts = [t.get_text() for t in fig.texts]
    n = 4 if strata == "g" else 8
    letters = [t.split()[0] for t in texts if t.split() and t.split()[0].lower() in
               [panel_letter(i, "lower") for i in range(n)] and len(t.split()[0]) == 1]
    assert letters[:n] == [panel_letter(i, "upper" if first == "A" else "lower") for i in range(n)]
    assert text_collisions(fig) == []
