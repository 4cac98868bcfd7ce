"""Comparison stage: what changed in the figures between two builds.

Two folders of built figures (``results/figures``) are paired by figure id.  For each pair the
sidecars are compared field by field (what a reader of the figure would notice: size, layout,
panels, counts, fitted statistics, the strata test, inputs, colours, cautions, versions) and the
PNG renders pixel by pixel (RMS difference and structural similarity).  The result is a
:class:`Report` that prints a short summary and can be written as a markdown file with one
difference image per changed render.

Only numpy and Pillow are used at run time.
"""
from __future__ import annotations

import json
import math
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from .errors import FigkitError

# Wang, Bovik, Sheikh & Simoncelli (2004), IEEE TIP 13(4):600-612, section III-C: K1 = 0.01,
# K2 = 0.03, an 11 x 11 circular-symmetric Gaussian window of standard deviation 1.5 samples,
# normalised to unit sum.
SSIM_K1 = 0.01
SSIM_K2 = 0.03
SSIM_SIGMA = 1.5
SSIM_RADIUS = 5          # 11 x 11 window

# ITU-R BT.601 luma weights (the Y' of Y'CbCr); the same weights Pillow's "L" conversion uses.
LUMA_601 = np.array([0.299, 0.587, 0.114])

# Highlight colours of the difference image: Okabe & Ito (2008) "Color Universal Design"
# vermillion, blue and reddish purple; they stay distinct under the common colour-vision
# deficiencies and against a grey background.
INK_ADDED = (0xD5, 0x5E, 0x00)     # the new render is darker here: something was drawn
INK_REMOVED = (0x00, 0x72, 0xB2)   # the new render is lighter here: something went away
INK_RECOLOURED = (0xCC, 0x79, 0xA7)  # same lightness, different colour

REPORT_NAME = "changes.md"
P_THRESHOLD = 0.05       # conventional significance level (common practice), only for a note
_CHUNK = 1 << 22         # elements per block in the big-image loops (bounded memory)


# ----------------------------------------------------------------------------- pixels

def load_render(path: Path | str) -> np.ndarray:
    """A render as an ``(H, W, 3)`` uint8 array, transparent parts laid on white paper.

    Flattening on white gives what a reader sees on the page, so a render saved with and one
    without an alpha channel compare by their visible pixels.
    """
    from PIL import Image, UnidentifiedImageError
    path = Path(path)
    try:
        with Image.open(path) as im:
            im = im.convert("RGBA")
    except FileNotFoundError:
        raise FigkitError("image not found", value=str(path)) from None
    except (UnidentifiedImageError, OSError) as exc:
        raise FigkitError(f"cannot read image {path}: {exc}") from None
    paper = Image.new("RGBA", im.size, (255, 255, 255, 255))
    return np.asarray(Image.alpha_composite(paper, im).convert("RGB"))


def _as_image(img, name: str) -> np.ndarray:
    if isinstance(img, (str, Path)):
        return load_render(img)
    arr = np.asarray(img)
    if arr.ndim not in (2, 3) or (arr.ndim == 3 and arr.shape[2] not in (1, 3, 4)):
        raise FigkitError(f"{name} must be an image array of shape (H, W) or (H, W, 1|3|4)",
                          field=name, value=arr.shape)
    if not (np.issubdtype(arr.dtype, np.integer) or np.issubdtype(arr.dtype, np.floating)
            or arr.dtype == bool):
        raise FigkitError(f"{name} must hold numbers", field=name, value=str(arr.dtype))
    return arr


def _same_shape(a: np.ndarray, b: np.ndarray) -> None:
    if a.shape != b.shape:
        raise FigkitError(f"images differ in size: {_shape_text(a.shape)} against "
                          f"{_shape_text(b.shape)}; compare renders of the same size")
    if a.size == 0:
        raise FigkitError("images are empty", value=a.shape)


def _shape_text(shape) -> str:
    return f"{shape[1]} x {shape[0]} px" + (f" x {shape[2]}" if len(shape) == 3 else "")


def rms_difference(a, b) -> float:
    """Root mean square of the pixel difference of two images of the same shape.

        RMS = sqrt( mean over every pixel and channel of (a - b)^2 )

    as matplotlib's testing module computes it (``matplotlib.testing.compare.calculate_rms``,
    which ``compare_images`` calls on images converted to int16 so that uint8 values cannot wrap
    round).  Here the difference is taken in float64, which is the same for integer images and
    exact for any 8- or 16-bit data.  On 8-bit images the result is on the 0-255 scale.
    ``a``, ``b``: arrays (H, W) or (H, W, C), or paths of image files (see :func:`load_render`).
    """
    a, b = _as_image(a, "a"), _as_image(b, "b")
    _same_shape(a, b)
    fa, fb = a.reshape(-1), b.reshape(-1)
    total = 0.0
    for s in range(0, fa.size, _CHUNK):   # blocks: a 600 dpi page is ~70 M values
        d = fa[s:s + _CHUNK].astype(np.float64) - fb[s:s + _CHUNK].astype(np.float64)
        total += float(d @ d)
    return math.sqrt(total / fa.size)


def luminance(img) -> np.ndarray:
    """Greyscale of an image as float64: the ITU-R BT.601 luma

        Y = 0.299 R + 0.587 G + 0.114 B

    (Recommendation ITU-R BT.601; Pillow's "L" mode uses the same weights).  A 2-D array is
    returned as it is (as float); an alpha channel is ignored.
    """
    arr = _as_image(img, "image")
    return _grey(arr).astype(np.float64)


def _grey(arr: np.ndarray) -> np.ndarray:
    # float32 storage keeps a 600 dpi page's working copies small; every SSIM block is
    # promoted to float64 before the moments are taken.
    if arr.ndim == 2:
        return arr.astype(np.float32)
    if arr.shape[2] == 1:
        return arr[:, :, 0].astype(np.float32)
    return (arr[:, :, :3].astype(np.float32) @ LUMA_601.astype(np.float32)).astype(np.float32)


def gaussian_window(sigma: float = SSIM_SIGMA, radius: int = SSIM_RADIUS) -> np.ndarray:
    """The 1-D factor of the SSIM window: w_i = exp(-i^2 / (2 sigma^2)), i = -radius..radius,
    normalised to unit sum.  The 2-D window (Wang et al. 2004, section III-C) is its outer
    product with itself, which also sums to one."""
    i = np.arange(-radius, radius + 1, dtype=np.float64)
    w = np.exp(-0.5 * (i / sigma) ** 2)
    return w / w.sum()


def _blur_valid(p: np.ndarray, k: np.ndarray) -> np.ndarray:
    """Separable 'valid' filtering: rows then columns; output is (h - n + 1, w - n + 1)."""
    n = k.size
    h, w = p.shape[0] - n + 1, p.shape[1] - n + 1
    t = k[0] * p[0:h]
    for i in range(1, n):
        t += k[i] * p[i:i + h]
    o = k[0] * t[:, 0:w]
    for j in range(1, n):
        o += k[j] * t[:, j:j + w]
    return o


def ssim(a, b, *, data_range: float = 255.0, return_map: bool = False):
    """Mean structural similarity (SSIM) of two images' luminance.

    Wang, Bovik, Sheikh & Simoncelli (2004), "Image quality assessment: from error visibility to
    structural similarity", IEEE Trans. Image Processing 13(4):600-612, eq. (13) and (17):

        SSIM(x, y) = (2 mu_x mu_y + C1)(2 sigma_xy + C2)
                     / ((mu_x^2 + mu_y^2 + C1)(sigma_x^2 + sigma_y^2 + C2)),
        C1 = (K1 L)^2, C2 = (K2 L)^2,  K1 = 0.01, K2 = 0.03,  L = ``data_range``,

    with mu, sigma^2 and sigma_xy the local weighted means, variances and covariance under an
    11 x 11 Gaussian window (sigma = 1.5, unit sum; population moments, i.e. divided by the sum
    of weights).  The mean SSIM (eq. 17) averages the map over every window that lies wholly
    inside the image, as the authors' own code does (``filter2(..., 'valid')``).  Colour images
    are first reduced to BT.601 luma (see :func:`luminance`).

    Returns the mean, or ``(mean, map)`` with ``return_map=True``; the map has the image's size,
    its outer 5-pixel border computed with mirrored edges (it does not enter the mean).
    """
    a, b = _as_image(a, "a"), _as_image(b, "b")
    x, y = _grey(a), _grey(b)
    if x.shape != y.shape:
        _same_shape(x, y)
    r = SSIM_RADIUS
    h, w = x.shape
    if h < 2 * r + 1 or w < 2 * r + 1:
        raise FigkitError(f"images must be at least {2 * r + 1} x {2 * r + 1} pixels for SSIM",
                          value=(w, h))
    if not (isinstance(data_range, (int, float)) and math.isfinite(data_range) and data_range > 0):
        raise FigkitError("data_range must be a positive number", field="data_range",
                          value=data_range)
    c1 = (SSIM_K1 * data_range) ** 2
    c2 = (SSIM_K2 * data_range) ** 2
    k = gaussian_window()
    # mirrored edges ("d c b a | a b c d") only shape the border of the map
    xp = np.pad(x, r, mode="symmetric")
    yp = np.pad(y, r, mode="symmetric")
    smap = np.empty((h, w), dtype=np.float64) if return_map else None
    total = 0.0
    step = max(1, _CHUNK // (w + 2 * r) // 2)
    for s in range(0, h, step):
        e = min(h, s + step)
        xs = xp[s:e + 2 * r].astype(np.float64)
        ys = yp[s:e + 2 * r].astype(np.float64)
        mx, my = _blur_valid(xs, k), _blur_valid(ys, k)
        vx = _blur_valid(xs * xs, k) - mx * mx
        vy = _blur_valid(ys * ys, k) - my * my
        vxy = _blur_valid(xs * ys, k) - mx * my
        block = ((2 * mx * my + c1) * (2 * vxy + c2)) / ((mx * mx + my * my + c1) * (vx + vy + c2))
        if smap is not None:
            smap[s:e] = block
        lo, hi = max(s, r), min(e, h - r)   # rows whose window lies inside the image
        if hi > lo:
            total += float(block[lo - s:hi - s, r:w - r].sum())
    mean = total / ((h - 2 * r) * (w - 2 * r))
    return (mean, smap) if return_map else mean


def _dilate(mask: np.ndarray, grow: int) -> np.ndarray:
    """Square dilation by ``grow`` pixels (separable max of shifted copies)."""
    if grow <= 0:
        return mask
    out = mask.copy()
    for d in range(1, grow + 1):
        out[d:] |= mask[:-d]
        out[:-d] |= mask[d:]
    rows = out.copy()
    for d in range(1, grow + 1):
        out[:, d:] |= rows[:, :-d]
        out[:, :-d] |= rows[:, d:]
    return out


def diff_image(a, b, out_path: Path | str, *, threshold: float = 0.0,
               grow: int | None = None) -> Path:
    """Write a PNG showing where render ``b`` (new) differs from ``a`` (old).

    Pixel values are taken on the 0-255 scale (8-bit renders).  The old render is drawn as a
    faint grey (its luma compressed into the top third of the scale); pixels whose largest
    channel difference exceeds ``threshold`` are painted: vermillion where the new render is darker (ink added), blue where it is lighter (ink
    removed), reddish purple where only the colour changed.  Changed areas are grown by
    ``grow`` pixels (default: one per 1000 pixels of the longer side, at least one) so that a
    moved hairline shows at thumbnail size.  Written atomically (temporary file, then
    ``os.replace``).  Returns the path.
    """
    from PIL import Image
    from .provenance import atomic_outputs
    a, b = _as_image(a, "a"), _as_image(b, "b")
    _same_shape(a, b)
    if not (isinstance(threshold, (int, float)) and threshold >= 0):
        raise FigkitError("threshold must be a number >= 0", field="threshold", value=threshold)
    h, w = a.shape[:2]
    if grow is None:
        grow = max(1, round(max(h, w) / 1000))
    if not isinstance(grow, int) or grow < 0:
        raise FigkitError("grow must be a whole number of pixels >= 0", field="grow", value=grow)
    a3 = a[:, :, None] if a.ndim == 2 else a
    b3 = b[:, :, None] if b.ndim == 2 else b
    ya, yb = _grey(a), _grey(b)
    changed = np.zeros((h, w), dtype=bool)
    for s in range(0, h, max(1, _CHUNK // (w * a3.shape[2]))):
        e = s + max(1, _CHUNK // (w * a3.shape[2]))
        d = np.abs(a3[s:e].astype(np.float64) - b3[s:e].astype(np.float64)).max(axis=2)
        changed[s:e] = d > threshold
    darker = changed & (yb < ya)
    lighter = changed & (yb > ya)
    recoloured = changed & ~darker & ~lighter
    base = np.clip(255.0 - (255.0 - ya) / 3.0, 0, 255).astype(np.uint8)
    out = np.repeat(base[:, :, None], 3, axis=2)
    # draw the rarer kinds last so they are not hidden by a neighbouring kind's halo
    for mask, ink in ((recoloured, INK_RECOLOURED), (lighter, INK_REMOVED), (darker, INK_ADDED)):
        if mask.any():
            out[_dilate(mask, grow)] = ink
    out_path = Path(out_path)
    with atomic_outputs([out_path]) as (tmp,):
        Image.fromarray(out, mode="RGB").save(tmp, format="PNG")
    return out_path


# ----------------------------------------------------------------------------- sidecars

@dataclass(frozen=True)
class Change:
    """One difference between two builds of a figure."""
    figure: str
    what: str
    old: object
    new: object
    note: str = ""

    @property
    def detail(self) -> str:
        """The change without the figure id."""
        if self.old is None and self.new is not None:
            text = f"{self.what}: {_show(self.new)}"
        elif self.new is None and self.old is not None:
            text = f"{self.what}: {_show(self.old)}"
        else:
            text = f"{self.what}: {_show(self.old)} -> {_show(self.new)}"
        return text + (f" ({self.note})" if self.note else "")

    @property
    def text(self) -> str:
        """One line a person can read."""
        return f"{self.figure}: {self.detail}"

    def __str__(self) -> str:
        return self.text


def _show(v) -> str:
    if v is None:
        return "none"
    if isinstance(v, bool):
        return "yes" if v else "no"
    if isinstance(v, float):
        return f"{v:.4g}"
    if isinstance(v, (list, tuple)):
        return "[" + ", ".join(_show(i) for i in v) + "]"
    if isinstance(v, dict):
        return "{" + ", ".join(f"{k}: {_show(i)}" for k, i in v.items()) + "}"
    return str(v)


def _is_number(v) -> bool:
    return isinstance(v, (int, float)) and not isinstance(v, bool)


def _equal(a, b, rel_tol: float, abs_tol: float = 1e-12) -> bool:
    """Equality that forgives last-digit float noise (sidecars keep 10 significant digits)."""
    if _is_number(a) and _is_number(b):
        return math.isclose(a, b, rel_tol=rel_tol, abs_tol=abs_tol)
    if isinstance(a, (list, tuple)) and isinstance(b, (list, tuple)):
        return len(a) == len(b) and all(_equal(x, y, rel_tol, abs_tol) for x, y in zip(a, b))
    if isinstance(a, dict) and isinstance(b, dict):
        return a.keys() == b.keys() and all(_equal(a[k], b[k], rel_tol, abs_tol) for k in a)
    return a == b


def relative_change(old, new) -> float | None:
    """(new - old) / |old|, or None when old is 0 or either is missing."""
    if not (_is_number(old) and _is_number(new)) or old == 0:
        return None
    return (new - old) / abs(old)


def _relative_note(old, new) -> str:
    if not (_is_number(old) and _is_number(new)):
        return "now undefined" if new is None else ("now defined" if old is None else "")
    rel = relative_change(old, new)
    if rel is None:
        return "was 0"
    if abs(rel) < 10:
        note = f"{rel * 100:+.3g}%"
    elif old * new > 0:
        note = f"{new / old:.3g} times the old value"
    else:
        note = f"{rel * 100:+.0f}%"
    if old * new < 0:
        note += ", sign changed"
    return note


def _short_hash(h) -> str | None:
    return h[:12] if isinstance(h, str) else h


def _panel_index(panels) -> dict:
    out = {}
    for i, p in enumerate(panels or []):
        label = str(p.get("label", f"#{i + 1}"))
        key, k = label, 2
        while key in out:            # repeated labels: keep them apart by position
            key, k = f"{label} #{k}", k + 1
        out[key] = p
    return out


_DEFINITION = ("chart", "x", "y", "colour", "weight", "strata", "filter", "derived", "dpi")
_PANEL_STATS = ("slope", "slope_ci_low", "slope_ci_high", "r", "x_mean", "y_mean")
_STRATA_FIELDS = ("F", "p", "df_num", "df_den", "excluded")


def compare_sidecars(old: dict, new: dict, *, rel_tol: float = 1e-9) -> list[Change]:
    """Field-by-field differences between two sidecars of one figure that matter to a reader.

    Covered: figure definition (chart, fields, filter, bands, dpi, the sheet row's hash, style),
    ``size_mm`` (to 0.05 mm), ``layout`` keys, panels added or removed (matched by label), each
    panel's ``n`` and ``n_dropped``, each panel's statistics (slope, its CI limits, r, x and y
    means; note = relative change (new - old) / |old|, sign flips, and whether the CI now covers
    0), rows read and kept, ``strata_test`` (F with its relative change, p with a note when it
    crosses 0.05, degrees of freedom, excluded panels), inputs
    by path (sha256 changed, added, removed), colours used, cautions added or removed and
    ``versions``; for the counting charts each bar's share or count and each tile's count (the
    largest changes first), and for histograms the bin edges.  Numbers count as equal when
    within ``rel_tol`` (sidecars store 10
    significant digits, so the default only forgives last-digit noise).
    """
    for name, sc in (("old", old), ("new", new)):
        if not isinstance(sc, dict):
            raise FigkitError(f"{name} sidecar must be a mapping", field=name, value=type(sc).__name__)
    if not (_is_number(rel_tol) and rel_tol >= 0):
        raise FigkitError("rel_tol must be a number >= 0", field="rel_tol", value=rel_tol)
    fig = str(new.get("id") or old.get("id") or "?")
    changes: list[Change] = []

    def add(what, o, n, note=""):
        changes.append(Change(fig, what, o, n, note))

    def differs(o, n) -> bool:
        return not _equal(o, n, rel_tol)

    if old.get("id") != new.get("id"):
        add("id", old.get("id"), new.get("id"))
    for key in _DEFINITION:
        if differs(old.get(key), new.get(key)):
            add(key, old.get(key), new.get(key))
    if old.get("row_sha256") != new.get("row_sha256"):
        add("sheet row", _short_hash(old.get("row_sha256")), _short_hash(new.get("row_sha256")),
            "the figure's row in the sheet was edited")
    os_, ns_ = old.get("style") or {}, new.get("style") or {}
    if os_.get("name") != ns_.get("name"):
        add("style", os_.get("name"), ns_.get("name"))
    else:
        of, nf = os_.get("files") or {}, ns_.get("files") or {}
        for fname in sorted(set(of) | set(nf)):
            if of.get(fname) != nf.get(fname):
                add(f"style file {fname}", _short_hash(of.get(fname)), _short_hash(nf.get(fname)),
                    "edited" if fname in of and fname in nf else "")

    osz, nsz = old.get("size_mm"), new.get("size_mm")
    if not _equal(osz, nsz, 0.0, abs_tol=0.05):
        note = ""
        if isinstance(osz, list) and isinstance(nsz, list) and len(osz) == len(nsz) == 2:
            note = ", ".join(f"{side} {n - o:+.1f} mm" for side, o, n in
                             zip(("width", "height"), osz, nsz) if abs(n - o) >= 0.05)
        add("size_mm", _mm(osz), _mm(nsz), note)

    ol, nl = old.get("layout") or {}, new.get("layout") or {}
    for key in [k for k in ol if k in nl] + [k for k in ol if k not in nl] + [k for k in nl if k not in ol]:
        tol = 0.05 if key.endswith("_mm") else None
        same = (_equal(ol.get(key), nl.get(key), 0.0, abs_tol=tol) if tol is not None
                else not differs(ol.get(key), nl.get(key)))
        if not same:
            add(f"layout {key}", ol.get(key), nl.get(key))

    op, np_ = _panel_index(old.get("panels")), _panel_index(new.get("panels"))
    for label in op:
        if label not in np_:
            add("panel removed", label, None, f"n was {_show(op[label].get('n'))}")
    for label in np_:
        if label not in op:
            add("panel added", None, label, f"n = {_show(np_[label].get('n'))}")
    for label in [lb for lb in np_ if lb in op]:
        po, pn = op[label], np_[label]
        for key in ("n", "n_dropped"):
            o, n = po.get(key), pn.get(key)
            if differs(o, n):
                note = (f"{n - o:+d} rows" if isinstance(o, int) and isinstance(n, int) else "")
                rel = _relative_note(o, n)
                add(f"panel '{label}' {key}", o, n, ", ".join(t for t in (note, rel) if t))
        so, sn = po.get("stats") or {}, pn.get("stats") or {}
        for key in _PANEL_STATS:
            o, n = so.get(key), sn.get(key)
            if differs(o, n):
                add(f"panel '{label}' {key}", o, n, _relative_note(o, n))
        covers = [_covers_zero(s) for s in (so, sn)]
        if None not in covers and covers[0] != covers[1]:
            add(f"panel '{label}' slope CI", _ci(so), _ci(sn),
                "now includes 0" if covers[1] else "now excludes 0")
        for what, keys, value, unit in _BAR_RECORDS:
            where = f"panel '{label}' " if label else ""
            cells, rest = _keyed_changes(po.get(what), pn.get(what), keys, value, rel_tol)
            for cell, o, n in cells:
                if o is None or n is None:
                    note = "new bar" if o is None else "no longer drawn (no rows)"
                elif unit == "pp":
                    note = f"{(n - o) * 100:+.1f} percentage points"
                else:
                    note = _relative_note(o, n)
                add(f"{where}{what[:-1]} {cell}", o, n, note)
            if rest:
                add(f"{where}{what}", None, f"{rest} more changed", "the largest changes are listed")

    oe, ne = old.get("bin_edges"), new.get("bin_edges")
    if differs(oe, ne):
        ot, nt = _edges_text(oe), _edges_text(ne)
        note = "histogram bars now cover other ranges of x"
        if ot == nt:        # same count, width and range at the digits shown: say by how much
            shift = max(abs(a - b) for a, b in zip(oe, ne))
            note += f"; edges moved by up to {shift:.3g}"
        add("bin edges", ot, nt, note)

    for key in ("rows_read", "rows_kept"):
        o, n = old.get(key), new.get(key)
        if differs(o, n):
            add(key.replace("_", " "), o, n, _relative_note(o, n))

    changes += _strata_changes(fig, old.get("strata_test"), new.get("strata_test"), rel_tol)

    oi = {i.get("path"): i.get("sha256") for i in old.get("inputs") or []}
    ni = {i.get("path"): i.get("sha256") for i in new.get("inputs") or []}
    for path in oi:
        if path not in ni:
            add("input removed", path, None)
        elif oi[path] != ni[path]:
            add(f"input {path}", _short_hash(oi[path]), _short_hash(ni[path]),
                "file contents changed")
    for path in ni:
        if path not in oi:
            add("input added", None, path)

    oc = list((old.get("colours") or {}).get("used") or [])
    nc = list((new.get("colours") or {}).get("used") or [])
    gone = [c for c in oc if c not in nc]
    came = [c for c in nc if c not in oc]
    if gone:
        add("colours no longer used", gone, None)
    if came:
        add("colours newly used", None, came)
    if not gone and not came and oc != nc:
        add("colour order", oc, nc, "same colours, assigned in another order")

    oca, nca = list(old.get("cautions") or []), list(new.get("cautions") or [])
    for c in oca:
        if c not in nca:
            add("caution removed", c, None)
    for c in nca:
        if c not in oca:
            add("caution added", None, c)

    ov, nv = old.get("versions") or {}, new.get("versions") or {}
    for key in list(ov) + [k for k in nv if k not in ov]:
        if ov.get(key) != nv.get(key):
            add(f"version of {key}", ov.get(key), nv.get(key))
    return changes


# Per-panel records of the counting charts: (sidecar key, fields naming a bar or tile, the
# number compared, unit of the note: "pp" = percentage points of a share).
_BAR_RECORDS = (("shares", ("x", "group"), "share", "pp"),
                ("counts", ("x", "group"), "count", ""),
                ("tiles", ("x", "y"), "count", ""))
_MAX_CELL_CHANGES = 8    # per panel and record; the rest are counted in one line


def _keyed_changes(old, new, keys, value, rel_tol) -> tuple[list[tuple[str, object, object]], int]:
    """([(cell name, old value, new value)], how many more) for the bars or tiles whose
    ``value`` changed, appeared or went: the largest changes first, at most _MAX_CELL_CHANGES."""
    if not isinstance(old, list) or not isinstance(new, list):
        return [], 0

    def index(rows):      # a zero bar is no bar: 0 and absent are the same drawing
        return {" / ".join(str(r.get(k)) for k in keys if r.get(k) is not None): r.get(value)
                for r in rows if isinstance(r, dict) and r.get(value) not in (0, 0.0)}
    o, n = index(old), index(new)
    out = [(cell, o.get(cell), n.get(cell)) for cell in list(o) + [c for c in n if c not in o]
           if not _equal(o.get(cell), n.get(cell), rel_tol)]
    out.sort(key=lambda t: -abs((t[2] or 0) - (t[1] or 0)) if _is_number(t[1] or 0) and
             _is_number(t[2] or 0) else 0)
    return out[:_MAX_CELL_CHANGES], max(0, len(out) - _MAX_CELL_CHANGES)


def _edges_text(edges) -> str | None:
    """'12 bins of 12.5 from 0 to 150' for evenly spaced edges, else the bin count and range."""
    if not isinstance(edges, list) or len(edges) < 2 or not all(_is_number(e) for e in edges):
        return None if edges is None else _show(edges)
    widths = np.diff(np.asarray(edges, dtype=float))
    even = np.allclose(widths, widths[0], rtol=1e-6)
    size = f" of {widths[0]:.6g}" if even else f" ({widths.min():.6g} to {widths.max():.6g} wide)"
    return f"{len(edges) - 1} bins{size} from {edges[0]:.6g} to {edges[-1]:.6g}"


def _mm(size) -> str | None:
    if isinstance(size, list) and len(size) == 2 and all(_is_number(v) for v in size):
        return f"{size[0]:.1f} x {size[1]:.1f} mm"
    return None if size is None else str(size)


def _ci(stats: dict) -> list | None:
    lo, hi = stats.get("slope_ci_low"), stats.get("slope_ci_high")
    return [lo, hi] if _is_number(lo) and _is_number(hi) else None


def _covers_zero(stats: dict) -> bool | None:
    ci = _ci(stats)
    return None if ci is None else bool(ci[0] <= 0 <= ci[1])


def _strata_changes(fig: str, old, new, rel_tol: float) -> list[Change]:
    if old is None and new is None:
        return []
    summary = lambda t: f"F = {_show(t.get('F'))}, p = {_show(t.get('p'))}"  # noqa: E731
    if old is None:
        return [Change(fig, "strata test added", None, summary(new))]
    if new is None:
        return [Change(fig, "strata test removed", summary(old), None)]
    out = []
    for key in _STRATA_FIELDS:
        o, n = old.get(key), new.get(key)
        if _equal(o, n, rel_tol):
            continue
        # a relative change of a p-value means little; crossing the usual 0.05 does
        note = _relative_note(o, n) if key == "F" else ""
        if key == "p" and _is_number(o) and _is_number(n) and (o < P_THRESHOLD) != (n < P_THRESHOLD):
            note = f"now {'below' if n < P_THRESHOLD else 'at or above'} {P_THRESHOLD}"
        out.append(Change(fig, f"strata test {key}", o, n, note))
    return out


# ----------------------------------------------------------------------------- folders

@dataclass
class FigureComparison:
    """One figure found in both folders."""
    id: str
    changes: list[Change]
    rms: float | None = None          # 0-255 scale; None when not compared
    ssim: float | None = None
    pixels: str = "identical"          # identical | within tolerance | differ | sizes differ | missing
    note: str = ""
    diff_png: Path | None = None

    @property
    def changed(self) -> bool:
        return bool(self.changes) or self.pixels in ("differ", "sizes differ", "missing")

    def pixel_text(self) -> str:
        if self.pixels in ("identical", "missing", "sizes differ"):
            return f"pixels {self.pixels}" + (f": {self.note}" if self.note else "")
        return f"pixels {self.pixels}: RMS {self.rms:.3g} (0-255), SSIM {self.ssim:.4f}"


@dataclass
class Report:
    """The answer to "what changed in the figures?" for two folders of built figures."""
    old_dir: Path
    new_dir: Path
    tolerance: float
    figures: list[FigureComparison] = field(default_factory=list)
    added: list[str] = field(default_factory=list)
    removed: list[str] = field(default_factory=list)
    out_dir: Path | None = None
    markdown_path: Path | None = None

    @property
    def changed(self) -> list[FigureComparison]:
        return [f for f in self.figures if f.changed]

    @property
    def unchanged(self) -> list[FigureComparison]:
        return [f for f in self.figures if not f.changed]

    def headline(self) -> str:
        return (f"{len(self.figures)} figures in both folders: {len(self.changed)} changed, "
                f"{len(self.unchanged)} unchanged; {len(self.added)} added, "
                f"{len(self.removed)} removed")

    def summary(self) -> str:
        lines = [f"figkit: compare: {self.headline()}"]
        for f in self.changed:
            lines.append(f"  {f.id}: {f.pixel_text()}")
            lines += [f"    {c.detail}" for c in f.changes]
        if self.added:
            lines.append("  added: " + ", ".join(self.added))
        if self.removed:
            lines.append("  removed: " + ", ".join(self.removed))
        if self.markdown_path is not None:
            lines.append(f"figkit: report -> {self.markdown_path}")
        return "\n".join(lines)

    def markdown(self) -> str:
        md = ["# What changed in the figures", "",
              f"- old: `{self.old_dir}`", f"- new: `{self.new_dir}`",
              f"- pixel tolerance: RMS {self.tolerance:g} on the 0-255 scale", "",
              self.headline()[0].upper() + self.headline()[1:] + ".", ""]
        if self.added:
            md += ["## Figures added", ""] + [f"- {i}" for i in self.added] + [""]
        if self.removed:
            md += ["## Figures removed", ""] + [f"- {i}" for i in self.removed] + [""]
        for f in self.changed:
            md += [f"## {f.id}", "", f"- {f.pixel_text()}"]
            md += [f"- {c.detail}" for c in f.changes]
            if f.diff_png is not None:
                md += ["", f"![where {f.id} changed]({f.diff_png.name})", "",
                       "Grey: old render; vermillion: ink added; blue: ink removed; "
                       "purple: colour changed."]
            md.append("")
        if self.unchanged:
            md += ["Unchanged: " + ", ".join(f.id for f in self.unchanged) + ".", ""]
        return "\n".join(md)


def _figures_folder(path: Path | str, name: str) -> Path:
    folder = Path(path)
    if not folder.is_dir():
        raise FigkitError(f"{name} folder not found or not a folder", field=name, value=str(folder))
    if not any(folder.glob("*.json")) and (folder / "figures").is_dir():
        folder = folder / "figures"     # a results folder was given
    return folder


def read_sidecars(folder: Path) -> dict[str, tuple[Path, dict]]:
    """Every figure sidecar (``*.json`` holding an id and panels) in ``folder``, by figure id."""
    found: dict[str, tuple[Path, dict]] = {}
    for path in sorted(folder.glob("*.json")):
        try:
            data = json.loads(path.read_text(encoding="utf-8"))
        except (OSError, UnicodeDecodeError, json.JSONDecodeError) as exc:
            raise FigkitError(f"cannot read sidecar {path}: {exc}") from None
        if not (isinstance(data, dict) and isinstance(data.get("id"), str) and "panels" in data):
            continue     # another JSON file, not a figure's sidecar
        if data["id"] in found:
            raise FigkitError(f"two sidecars in {folder} claim figure id '{data['id']}'",
                              value=[found[data["id"]][0].name, path.name])
        found[data["id"]] = (path, data)
    return found


def _png_of(folder: Path, sidecar: dict) -> Path | None:
    name = (sidecar.get("files") or {}).get("png") or f"{sidecar['id']}.png"
    path = folder / Path(name).name
    return path if path.is_file() else None


def _compare_pixels(fc: FigureComparison, old_png, new_png, tolerance, out_dir) -> None:
    if old_png is None and new_png is None:
        fc.pixels, fc.note = "identical", "no PNG in either folder, not compared"
        return
    if old_png is None or new_png is None:
        fc.pixels = "missing"
        fc.note = f"PNG only in the {'new' if old_png is None else 'old'} folder"
        return
    a, b = load_render(old_png), load_render(new_png)
    if a.shape != b.shape:
        fc.pixels = "sizes differ"
        fc.note = f"{_shape_text(a.shape[:2])} against {_shape_text(b.shape[:2])}, not compared"
        return
    if np.array_equal(a, b):
        fc.pixels, fc.rms, fc.ssim = "identical", 0.0, 1.0
        return
    fc.rms = rms_difference(a, b)
    fc.ssim = ssim(a, b)
    if fc.rms <= tolerance:
        fc.pixels = "within tolerance"
        return
    fc.pixels = "differ"
    if out_dir is not None:
        fc.diff_png = diff_image(a, b, out_dir / f"{fc.id}.diff.png")


def compare_folders(old_dir: Path | str, new_dir: Path | str, out_dir: Path | str | None = None,
                    *, tolerance: float = 0.0, rel_tol: float = 1e-9) -> Report:
    """Pair the figures of two folders by id and say what changed.

    For each figure in both: :func:`compare_sidecars`, then the PNGs: identical, or their
    :func:`rms_difference` and :func:`ssim` (renders of different pixel size are reported as such,
    not compared).  A render whose RMS is at or below ``tolerance`` (0-255 scale) counts as
    unchanged.  Figures in only one folder are listed as added or removed.  With ``out_dir``
    the markdown report (``changes.md``) and one ``<id>.diff.png`` per differing render are
    written there.  A results folder holding ``figures/`` is accepted for either folder.
    """
    if not (_is_number(tolerance) and math.isfinite(tolerance) and tolerance >= 0):
        raise FigkitError("tolerance must be a pixel RMS >= 0 (0-255 scale)", field="tolerance",
                          value=tolerance)
    old_f, new_f = _figures_folder(old_dir, "old"), _figures_folder(new_dir, "new")
    old_sc, new_sc = read_sidecars(old_f), read_sidecars(new_f)
    if not old_sc and not new_sc:
        raise FigkitError(f"no figure sidecars (*.json) in {old_f} or {new_f}; "
                          "give two folders of built figures (results/figures)")
    out = Path(out_dir) if out_dir is not None else None
    if out is not None:
        if out.exists() and not out.is_dir():
            raise FigkitError("--out must be a folder", field="out", value=str(out))
        out.mkdir(parents=True, exist_ok=True)
    report = Report(old_f, new_f, float(tolerance), out_dir=out,
                    added=sorted(set(new_sc) - set(old_sc)),
                    removed=sorted(set(old_sc) - set(new_sc)))
    for fid in sorted(set(old_sc) & set(new_sc)):
        (_, old), (_, new) = old_sc[fid], new_sc[fid]
        fc = FigureComparison(fid, compare_sidecars(old, new, rel_tol=rel_tol))
        _compare_pixels(fc, _png_of(old_f, old), _png_of(new_f, new), tolerance, out)
        report.figures.append(fc)
    if out is not None:
        from .provenance import atomic_outputs
        report.markdown_path = out / REPORT_NAME
        with atomic_outputs([report.markdown_path]) as (tmp,):
            tmp.write_text(report.markdown(), encoding="utf-8")
    return report
