"""Dense layers rasterised once per figure and reused by every vector file (PDF, SVG).

matplotlib draws an artist marked ``rasterized`` in a PDF or SVG by switching its
mixed-mode renderer to a scratch Agg canvas the size of the whole figure at the file's dpi,
drawing every consecutive rasterised artist there (one *run*), cropping the canvas to what
was painted and embedding that image (``MixedModeRenderer.start_rasterizing`` /
``stop_rasterizing``).  Saving the same figure as PDF and then SVG paints every run twice,
and a scratch canvas of a full-width figure at 600 dpi is ~60 MB to allocate and scan.

:func:`shared_rasters` paints each run once: the first vector file records the cropped image
and its place; later vector files at the same dpi embed the recorded image without drawing
the run's artists; every run of a file is painted on one scratch canvas, cleared between runs.
The embedded image is the very array matplotlib would have made, so the
files are byte-identical to plain ``savefig`` (tests/test_rasters.py checks this).  Raster
files (PNG, TIFF) draw everything directly, as matplotlib does.

Anything this does not recognise (a filter on the artist, a tight bounding box, a figure
that suppresses compositing) is drawn by matplotlib as usual.
"""
from __future__ import annotations

from contextlib import contextmanager

import numpy as np


def _is_mixed(renderer) -> bool:
    from matplotlib.backends.backend_mixed import MixedModeRenderer
    return isinstance(renderer, MixedModeRenderer)


def _painted(rgba: np.ndarray) -> tuple[slice, slice]:
    """Rows and columns holding every pixel with alpha > 0: what matplotlib's
    ``cbook._get_nonzero_slices(rgba[..., 3])`` returns, read as one 32-bit word per pixel
    instead of a strided byte per pixel (about 4x faster on a 600 dpi canvas)."""
    words = rgba.view(np.uint32).reshape(rgba.shape[:2])
    alpha = words >= (1 << 24) if np.little_endian else (words & 0xFF) > 0
    rows = np.flatnonzero(alpha.any(axis=1))
    if not rows.size:
        return slice(0, 0), slice(0, 0)
    cols = np.flatnonzero(alpha[rows[0]:rows[-1] + 1].any(axis=0))
    return slice(int(rows[0]), int(rows[-1]) + 1), slice(int(cols[0]), int(cols[-1]) + 1)


class _Runs:
    """Recorded runs of one figure: the first artist of a run -> (its artists, image, place)."""

    def __init__(self, fig):
        self.fig = fig
        self.done: dict[tuple[int, float], tuple[tuple[int, ...], np.ndarray, float, float]] = {}
        self.current: list[int] | None = None     # artists of the run being painted or replayed
        self.replay = None                        # the recorded run being replayed, if any
        self.scratch = None                       # (size, the Agg canvas runs are painted on)

    # ------------------------------------------------------------------ the renderer side
    def hook(self, renderer) -> None:
        """Record or replay this mixed-mode renderer's runs (instance attributes only)."""
        if getattr(renderer, "_figkit_runs", None) is self:
            return
        renderer._figkit_runs = self
        runs = self

        def start_rasterizing():
            # matplotlib's MixedModeRenderer.start_rasterizing, with one scratch canvas for every
            # run of the file, cleared between runs, instead of a new one (~60 MB) per run.
            renderer.figure.dpi = renderer.dpi
            size = (renderer._width * renderer.dpi, renderer._height * renderer.dpi, renderer.dpi)
            if runs.scratch is None or runs.scratch[0] != size:
                runs.scratch = (size, renderer._raster_renderer_class(*size))
            else:
                runs.scratch[1].clear()
            renderer._raster_renderer = renderer._renderer = runs.scratch[1]

        def stop_rasterizing():
            if runs.replay is not None:      # embed the recorded image; nothing was painted
                members, img, x, y = runs.replay
                runs.replay = None
                if tuple(runs.current) != members:   # pragma: no cover - draw order is fixed
                    raise RuntimeError("figkit.rasters: a layer changed between two files")
                runs.current = None
                if img.size:
                    renderer._renderer.draw_image(renderer._renderer.new_gc(), x, y, img)
                return
            # matplotlib's MixedModeRenderer.stop_rasterizing, keeping the cropped image.
            renderer._renderer = renderer._vector_renderer
            height = renderer._height * renderer.dpi
            full = np.asarray(renderer._raster_renderer.buffer_rgba())
            sy, sx = _painted(full)
            img = full[sy, sx][::-1].copy()   # the canvas is freed below: keep a copy
            x = sx.start * renderer._figdpi / renderer.dpi
            y = (height - sy.stop) * renderer._figdpi / renderer.dpi
            if img.size:
                renderer._renderer.draw_image(renderer._renderer.new_gc(), x, y, img)
            renderer._raster_renderer = None
            renderer.figure.dpi = renderer._figdpi
            if runs.current:
                runs.done[(runs.current[0], renderer.dpi)] = (tuple(runs.current), img, x, y)
            runs.current = None

        renderer.start_rasterizing = start_rasterizing
        renderer.stop_rasterizing = stop_rasterizing

    # ------------------------------------------------------------------ the artist side
    def wrap(self, artist) -> None:
        inner = artist.draw          # the class's draw, with matplotlib's rasterisation wrapper
        runs = self

        def draw(renderer):
            if (not _is_mixed(renderer) or renderer._bbox_inches_restore
                    or renderer._raster_depth or runs.fig.suppressComposite):
                return inner(renderer)
            runs.hook(renderer)
            if not renderer._rasterizing:            # this artist opens a run
                runs.current = [id(artist)]
                recorded = runs.done.get((id(artist), renderer.dpi))
                if recorded is not None:
                    runs.replay = recorded
                    renderer._rasterizing = True     # the next non-raster draw closes the run
                    return None
                return inner(renderer)
            if runs.current is None:    # pragma: no cover - a run opened by matplotlib itself
                return inner(renderer)
            runs.current.append(id(artist))
            if runs.replay is not None:
                return None
            return inner(renderer)

        artist.draw = draw


@contextmanager
def shared_rasters(fig):
    """Within this block, every vector file saved of ``fig`` reuses the raster layers the
    first one painted (same dpi).  The figure is left as it was."""
    runs = _Runs(fig)
    wrapped = [a for a in fig.findobj(lambda a: a.get_rasterized() and a.get_agg_filter() is None)
               if "draw" not in vars(a)]
    for a in wrapped:
        runs.wrap(a)
    try:
        yield
    finally:
        for a in wrapped:
            del a.draw
