"""The optional strata annotation (house style `strata_note: true`): the printed F, degrees of
freedom and p are the sidecar's (whose values are checked against statsmodels' anova_lm in
test_demo_references), and the line collides with no other text."""
import shutil
from pathlib import Path

import numpy as np
import pandas as pd

REPO = Path(__file__).resolve().parents[1]


def test_note_printed_from_the_sidecar_numbers(tmp_path):
    import matplotlib
    matplotlib.use("Agg")
    from figkit.checks import text_collisions
    from figkit.render import figure, load_project, render
    rng = np.random.default_rng(8)
    g = rng.choice(["a", "b", "c"], 900)
    x = rng.normal(0, 1, 900)
    y = np.select([g == "a", g == "b"], [0.5, 0.8], 1.1) * x + rng.normal(0, 1, 900)
    (tmp_path / "data").mkdir()
    pd.DataFrame({"g": g, "x": x, "y": y}).to_csv(tmp_path / "data" / "d.csv", index=False)
    shutil.copytree(REPO / "figkit" / "styles", tmp_path / "styles")
    house = (tmp_path / "styles" / "house.yaml").read_text()
    assert "strata_note: false" in house                     # off by default
    (tmp_path / "styles" / "noted.yaml").write_text(house.replace("strata_note: false", "strata_note: true"))
    (tmp_path / "config").mkdir()
    (tmp_path / "config" / "config.yaml").write_text(
        "datasets: {d: data/d.csv}\nstyle: noted\nformats: [png]\n")
    (tmp_path / "config" / "figures.tsv").write_text(
        "id\tdataset\tchart\tx\ty\tstrata\ttrend\nf\td\tscatter\tx\ty\tg\tline\n")
    project = load_project(tmp_path)
    car = render(project, "f")
    st = car["strata_test"]
    fig = figure("f", project)
    fig.canvas.draw()
    notes = [t.get_text() for t in fig.texts if t.get_text().startswith("Equal slopes")]
    assert len(notes) == 1
    assert f"F({st['df_num']}, {st['df_den']}) = {st['F']:.2f}" in notes[0]
    assert ("p < 0.001" in notes[0]) == (st["p"] < 0.001)
    assert text_collisions(fig) == []
