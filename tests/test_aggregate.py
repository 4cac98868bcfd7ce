"""Hexagonal binning by integer cell indices (Carr et al. 1987) against matplotlib's own hexbin
(a general-purpose reference implementation of the same two-lattice scheme), and one-pass
tallies against in-memory computations."""
import numpy as np
import pytest

from figkit.aggregate import HexGrid, PanelTally
from figkit.stats import fit_line


def _mpl_counts(x, y, extent, nx):
    import matplotlib
    matplotlib.use("Agg")
    import matplotlib.pyplot as plt
    fig, ax = plt.subplots()
    coll = ax.hexbin(x, y, gridsize=nx, extent=extent, mincnt=None)
    counts = np.asarray(coll.get_array(), dtype=float)
    centres = coll.get_offsets()
    plt.close(fig)
    return counts, np.asarray(centres)


@pytest.mark.parametrize("nx", [7, 20, 31])
def test_hex_counts_match_matplotlib_hexbin(nx):
    rng = np.random.default_rng(nx)
    x = rng.normal(0, 1, 20000)
    y = 0.5 * x + rng.normal(0, 1, 20000)
    extent = (-4.5, 4.5, -4.0, 4.0)
    inside = (x > extent[0]) & (x < extent[1]) & (y > extent[2]) & (y < extent[3])
    x, y = x[inside], y[inside]
    grid = HexGrid(*extent, nx)
    ours = grid.counts(x, y)
    ref, ref_centres = _mpl_counts(x, y, extent, nx)
    assert ours.sum() == len(x)
    assert np.allclose(grid.centres(), ref_centres, atol=1e-6 * (extent[1] - extent[0]))
    # matplotlib nudges its extent by 1e-9 of the range; points on a cell boundary may differ
    assert np.abs(ours - ref).sum() <= 2


def test_tally_in_chunks_equals_whole():
    rng = np.random.default_rng(3)
    x = rng.uniform(0, 10, 100_000)
    y = 2 + 0.3 * x + rng.normal(0, 1, x.size)
    grid = HexGrid(0, 10, -2, 8, 25)
    edges = np.linspace(0, 10, 41)
    whole = PanelTally()
    whole.add_points(x, y, grid, edges)
    chunks = PanelTally()
    for part in np.array_split(np.arange(x.size), 17):
        chunks.add_points(x[part], y[part], grid, edges)
    assert chunks.n == whole.n == x.size
    assert np.array_equal(chunks.hex_counts, whole.hex_counts)
    assert np.array_equal(chunks.hist_counts, np.histogram(x, bins=edges)[0])
    fit_c, fit_w = chunks.line.fit(), fit_line(x, y)
    assert fit_c.slope == pytest.approx(fit_w.slope, rel=1e-10)
    assert fit_c.intercept == pytest.approx(fit_w.intercept, rel=1e-10)
    assert chunks.x_mean == pytest.approx(x.mean(), rel=1e-12)
