"""Aggregation, the fast path for big data: hexagonal binning by integer cell indices and one
``numpy.bincount``, and accumulators that take data chunk by chunk so memory does not grow with
the number of rows.

Hexagonal binning follows Carr, Littlefield, Nicholson & Littlefield (1987), JASA 82:424-436:
the plane is covered by two rectangular lattices of hexagon centres offset by half a cell; a point
belongs to the nearer of its two candidate centres, distance measured with the y axis scaled by
sqrt(3) so that the cells are regular hexagons on a square-aspect grid.
"""
from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np

from .errors import FigkitError
from .stats import LineSums


@dataclass(frozen=True)
class HexGrid:
    """A hexagon lattice over ``extent`` with ``nx`` cells across (``ny = int(nx / sqrt 3)``)."""
    xmin: float
    xmax: float
    ymin: float
    ymax: float
    nx: int

    @property
    def ny(self) -> int:
        return max(1, int(self.nx / math.sqrt(3)))

    @property
    def sx(self) -> float:
        return (self.xmax - self.xmin) / self.nx

    @property
    def sy(self) -> float:
        return (self.ymax - self.ymin) / self.ny

    @property
    def n_cells(self) -> int:
        return (self.nx + 1) * (self.ny + 1) + self.nx * self.ny

    def cells(self, x: np.ndarray, y: np.ndarray) -> np.ndarray:
        """Cell index of each point: lattice 1 first ((nx+1) x (ny+1) centres on the grid
        nodes), then lattice 2 (nx x ny centres at the half-steps)."""
        if self.xmax <= self.xmin or self.ymax <= self.ymin:
            raise FigkitError("hexagon grid needs a positive extent",
                              value=(self.xmin, self.xmax, self.ymin, self.ymax))
        u = (np.asarray(x, dtype=float) - self.xmin) / self.sx
        v = (np.asarray(y, dtype=float) - self.ymin) / self.sy
        i1, j1 = np.round(u), np.round(v)
        i2, j2 = np.floor(u), np.floor(v)
        d1 = (u - i1) ** 2 + 3.0 * (v - j1) ** 2
        d2 = (u - i2 - 0.5) ** 2 + 3.0 * (v - j2 - 0.5) ** 2
        first = d1 < d2
        nx1, ny1 = self.nx + 1, self.ny + 1
        i1 = np.clip(i1, 0, self.nx).astype(np.int64)
        j1 = np.clip(j1, 0, self.ny).astype(np.int64)
        i2 = np.clip(i2, 0, self.nx - 1).astype(np.int64)
        j2 = np.clip(j2, 0, self.ny - 1).astype(np.int64)
        return np.where(first, i1 * ny1 + j1, nx1 * ny1 + i2 * self.ny + j2)

    def counts(self, x, y, weights=None) -> np.ndarray:
        """Points (or summed weights) per cell: one bincount over the cell indices."""
        return np.bincount(self.cells(x, y), weights=weights, minlength=self.n_cells)

    def centres(self) -> np.ndarray:
        """(n_cells, 2) centre coordinates, in the order of :meth:`cells`."""
        i1, j1 = np.meshgrid(np.arange(self.nx + 1), np.arange(self.ny + 1), indexing="ij")
        i2, j2 = np.meshgrid(np.arange(self.nx), np.arange(self.ny), indexing="ij")
        c1 = np.column_stack([i1.ravel(), j1.ravel()]).astype(float)
        c2 = np.column_stack([i2.ravel() + 0.5, j2.ravel() + 0.5])
        c = np.vstack([c1, c2])
        return np.column_stack([self.xmin + c[:, 0] * self.sx, self.ymin + c[:, 1] * self.sy])

    def hexagon(self) -> np.ndarray:
        """The six vertices of a cell around (0, 0), in data units: width sx, height 2 sy / 3
        (rows of centres are sy / 2 apart, so neighbouring cells tile the plane)."""
        return np.array([[0.5, -1 / 6], [0.5, 1 / 6], [0.0, 1 / 3], [-0.5, 1 / 6],
                         [-0.5, -1 / 6], [0.0, -1 / 3]]) * [self.sx, self.sy]


@dataclass
class PanelTally:
    """Everything a panel needs from its rows, accumulated chunk by chunk: row counts, means and
    straight-line sums (one pass), hexagon counts, histogram counts, category counts."""
    n: int = 0
    n_dropped: int = 0
    line: LineSums | None = None
    hex_counts: np.ndarray | None = None
    hist_counts: np.ndarray | None = None
    categories: dict = field(default_factory=dict)
    x_sum: float = 0.0
    y_sum: float = 0.0
    x_min: float = math.inf
    x_max: float = -math.inf

    def add_points(self, x: np.ndarray, y: np.ndarray | None, grid: HexGrid | None = None,
                   edges: np.ndarray | None = None) -> None:
        self.n += len(x)
        self.x_sum += float(np.sum(x))
        if len(x):
            self.x_min = min(self.x_min, float(np.min(x)))
            self.x_max = max(self.x_max, float(np.max(x)))
        if y is not None:
            self.y_sum += float(np.sum(y))
            if len(x):
                part = LineSums.of(x, y)
                self.line = part if self.line is None else self.line.merge(part)
        if grid is not None and y is not None:
            c = grid.counts(x, y)
            self.hex_counts = c if self.hex_counts is None else self.hex_counts + c
        if edges is not None:
            c, _ = np.histogram(x, bins=edges)
            self.hist_counts = c if self.hist_counts is None else self.hist_counts + c

    def add_categories(self, keys, weights=None) -> None:
        """Counts (or summed weights) per category key (tuples for two fields)."""
        import pandas as pd
        s = pd.Series(1.0 if weights is None else weights, index=pd.MultiIndex.from_arrays(keys)
                      if isinstance(keys, list) else keys)
        for k, v in s.groupby(level=list(range(s.index.nlevels))).sum().items():
            self.categories[k] = self.categories.get(k, 0.0) + float(v)

    @property
    def x_mean(self) -> float | None:
        return self.x_sum / self.n if self.n else None

    @property
    def y_mean(self) -> float | None:
        return self.y_sum / self.n if self.n else None


def padded_range(lo: float, hi: float, frac: float = 0.04) -> tuple[float, float]:
    """A data range widened by ``frac`` on each side (a zero-width range by 0.5), so points on
    the edge are not drawn on the frame."""
    if not np.isfinite(lo) or not np.isfinite(hi):
        return 0.0, 1.0
    if hi <= lo:
        return lo - 0.5, hi + 0.5
    pad = (hi - lo) * frac
    return lo - pad, hi + pad
