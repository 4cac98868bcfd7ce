"""Bin edges on a recorded grid (readings rounded to 0.1): each bin holds a whole number of grid
values, so uniform data give equal counts — checked with numpy.histogram as the counting
reference.  The property is derived by hand from the definition of equal-width bins."""
import numpy as np
import pytest

from figkit import stats


def test_resolution_found_and_refused():
    rng = np.random.default_rng(1)
    assert stats.data_resolution(np.round(rng.uniform(0, 20, 5000), 1)) == pytest.approx(0.1)
    assert stats.data_resolution(rng.normal(size=5000)) is None        # no common grid
    assert stats.data_resolution([1.0, 1.0]) is None


def test_aligned_bins_hold_whole_grid_steps():
    grid = np.round(np.arange(0, 20.0001, 0.1), 1)
    values = np.repeat(grid, 50)                                        # perfectly uniform on the grid
    raw = stats.bin_edges(values, "fd")
    edges = stats.align_edges(raw, stats.data_resolution(values))
    counts, _ = np.histogram(values, bins=edges)
    inner = counts[1:-1]
    assert inner.min() == inner.max()                                   # no comb
    k = (edges / 0.1) - 0.5
    assert np.allclose(k, np.round(k))                                  # edges between grid values
    assert edges[0] <= values.min() and edges[-1] >= values.max()
    assert (edges[1] - edges[0]) >= (raw[1] - raw[0]) - 1e-12           # never narrower than the rule


def test_unaligned_fd_bins_show_the_comb_this_prevents():
    grid = np.round(np.arange(0, 20.0001, 0.1), 1)
    values = np.repeat(grid, 50)
    counts, _ = np.histogram(values, bins=stats.bin_edges(values, "fd"))
    assert counts[1:-1].max() > counts[1:-1].min()
