"""Comparison stage: what changed in the figures between two builds.

Two builds (snapshots, folders of built figures, or the current build; see
:mod:`figkit.snapshot`) are paired by figure id.  For each pair:

1. :func:`conclusions` lists the changes that alter what a reader concludes (a line trend's 95%
   slope interval starting or stopping to exclude 0, the strata test crossing its level, panels,
   groups or categories appearing or going, groups changing order, shares moving, n moving,
   cautions appearing or going; thresholds from the house style's ``review:`` block);
2. :func:`compare_sidecars` lists every other changed number and setting, and the provenance
   (inputs, versions) that alone never makes a figure "changed";
3. the PNG renders are compared at the comparison resolution (box-filtered, RMS difference and
   SSIM; renders of different size on a common canvas, the size change reported).

The result is a :class:`Report` that prints a short summary, writes ``changes.md`` with one
difference image per changed render, and feeds the review page (:mod:`figkit.review`) and the
regression gate (:mod:`figkit.gate`).  numpy, Pillow and scipy's ``ndimage`` only.
"""
from __future__ import annotations

import math
import os
import re
from dataclasses import dataclass, field
from pathlib import Path
from typing import TYPE_CHECKING

import numpy as np

from .errors import FigkitError
from .style import REVIEW_DEFAULTS

if TYPE_CHECKING:
    from .snapshot import Build

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

_SAFE_ID = re.compile(r"[A-Za-z0-9][A-Za-z0-9_-]{0,63}")   # the sheet's id rule
RECOLOUR_STEP = 24      # 0-255: a colour change the overlay marks although lightness stayed
REPORT_NAME = "changes.md"
P_THRESHOLD = 0.05       # conventional significance level (common practice), only for a note
_CHUNK = 1 << 22         # elements per block in the big-image loops (bounded memory)


# ----------------------------------------------------------------------------- pixels

def load_render(path: Path | str) -> np.ndarray:
    """A render as an ``(H, W, 3)`` uint8 array, transparent parts laid on white paper.

    Flattening on white gives what a reader sees on the page, so a render saved with and one
    without an alpha channel compare by their visible pixels.
    """
    im, _ = _open_image(Path(path), full=True)
    with im:
        return np.asarray(_flat_rgb(im))


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


def _blur(p: np.ndarray, k: np.ndarray) -> np.ndarray:
    """Separable filtering with the window ``k`` along both axes, mirrored edges
    ("d c b a | a b c d", scipy's ``reflect``); scipy's C loop, not ours (it was 52 s of a
    12-figure comparison at 600 dpi)."""
    from scipy import ndimage
    return ndimage.correlate1d(ndimage.correlate1d(p, k, axis=0, mode="reflect"), k, axis=1,
                               mode="reflect")


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
    are first reduced to BT.601 luma (see :func:`luminance`).  The filtering is scipy's
    ``ndimage.correlate1d``; the result is checked against scikit-image's
    ``structural_similarity`` in the tests.

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
    smap = np.empty((h, w), dtype=np.float64) if return_map else None
    total = 0.0
    # blocks of rows with a 2r overlap keep a 600 dpi page's float64 moments within ~0.5 GB
    step = max(4 * r, _CHUNK // max(w, 1) // 2)
    for s in range(0, h, step):
        e = min(h, s + step)
        lo_pad, hi_pad = min(s, 2 * r), min(h - e, 2 * r)
        xs = x[s - lo_pad:e + hi_pad].astype(np.float64)
        ys = y[s - lo_pad:e + hi_pad].astype(np.float64)
        if lo_pad < 2 * r or hi_pad < 2 * r:      # the image's own top/bottom edge: mirror it
            xs = np.pad(xs, ((2 * r - lo_pad, 2 * r - hi_pad), (0, 0)), mode="symmetric")
            ys = np.pad(ys, ((2 * r - lo_pad, 2 * r - hi_pad), (0, 0)), mode="symmetric")
        mx, my = _blur(xs, k), _blur(ys, k)
        vx = _blur(xs * xs, k) - mx * mx
        vy = _blur(ys * ys, k) - my * my
        vxy = _blur(xs * ys, k) - mx * my
        block = (((2 * mx * my + c1) * (2 * vxy + c2))
                 / ((mx * mx + my * my + c1) * (vx + vy + c2)))[2 * r:-2 * r]
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


def png_pixel_digest(path: Path | str) -> str | None:
    """SHA-256 of a PNG's header and image data chunks (IHDR, PLTE, tRNS, IDAT), ignoring its
    text chunks: two renders with equal digests have equal pixels, whatever provenance text they
    carry (PNG specification, ISO/IEC 15948:2004, section 5.3 "Chunk layout").  None when the
    file is not a PNG; a digest that differs says nothing (the pixels are then decoded)."""
    import hashlib
    h = hashlib.sha256()
    try:
        with open(path, "rb") as f:
            if f.read(8) != b"\x89PNG\r\n\x1a\n":
                return None
            while True:
                head = f.read(8)
                if len(head) < 8:
                    return None
                length, kind = int.from_bytes(head[:4], "big"), head[4:]
                if kind in (b"IHDR", b"PLTE", b"tRNS", b"IDAT"):
                    h.update(kind)
                    h.update(f.read(length))
                    f.seek(4, 1)                      # CRC
                else:
                    f.seek(length + 4, 1)
                if kind == b"IEND":
                    return h.hexdigest()
    except OSError:
        return None


@dataclass
class Render:
    """A render loaded for comparison: the file's pixel size and dpi, and the image box-filtered
    to the comparison resolution (RGB on white paper)."""
    path: Path
    dpi: float
    full_shape: tuple[int, int]
    image: np.ndarray                 # (H, W, 3) uint8 at ``scale`` of the file's pixels
    scale: float


def _flat_rgb(im):
    """The decoded image as RGB, transparent parts laid on white paper."""
    from PIL import Image
    if im.mode in ("RGBA", "LA", "PA") or (im.mode == "P" and "transparency" in im.info):
        im = im.convert("RGBA")
        if im.getchannel("A").getextrema()[0] < 255:
            paper = Image.new("RGBA", im.size, (255, 255, 255, 255))
            return Image.alpha_composite(paper, im).convert("RGB")
    return im.convert("RGB")


def _open_image(path: Path, *, full: bool):
    """(header-only or fully decoded image, its dpi from the file or None); one-line errors,
    image bombs refused before decoding (figkit.files.open_image)."""
    from .files import open_image
    im = open_image(path, load=full)
    return im, (im.info.get("dpi") or (None,))[0]


def load_pixels(im, path: Path) -> None:
    """Decode an opened image; a file cut short or damaged after its header is one line."""
    from .files import open_image_error
    try:
        im.load()
    except Exception as exc:  # noqa: BLE001 - Pillow's decoders raise OSError, struct.error, ...
        raise open_image_error(exc, path) from None


def load_for_compare(path: Path | str, file_dpi: float | None, compare_dpi: float,
                     *, cache: Path | None = None) -> Render:
    """Decode a render and reduce it to ``compare_dpi`` by box filtering (each output pixel the
    mean of the input pixels it covers: Pillow's ``reduce`` for a whole factor, else ``resize``
    with its BOX filter).  Transparent parts are laid on white paper first, as in
    :func:`load_render`.  ``file_dpi`` (the sidecar's) wins over the dpi the file states.

    ``cache``: a file for the reduced image of an unchanging render (a snapshot's files never
    change, see :mod:`figkit.snapshot`): read when present, written when not; decoding a 600 dpi
    page is most of a comparison's time."""
    from PIL import Image
    path = Path(path)
    im, stated = _open_image(path, full=False)
    # The first of the sidecar's dpi and the file's that is a positive finite number (a damaged
    # sidecar or a file stating 0 dpi must not divide by zero or scale by a string).
    dpi = next((d for d in map(_usable_dpi, (file_dpi, stated)) if d), float(compare_dpi))
    full_shape = (im.height, im.width)
    factor = dpi / compare_dpi
    if cache is not None and cache.is_file():
        try:
            with Image.open(cache) as c:
                small = np.asarray(c.convert("RGB"))
            im.close()
            return Render(path, dpi, full_shape, small, small.shape[1] / full_shape[1])
        except OSError:
            pass                                  # a broken cache file: decode again
    with im:
        load_pixels(im, path)
        rgb = _flat_rgb(im)
    small = rgb
    if factor > 1.0001:
        k = round(factor)
        if abs(factor - k) < 1e-3:    # PNG keeps whole pixels per metre: 600 dpi reads 599.9988
            small = rgb.reduce(k)
        else:
            small = rgb.resize((max(1, round(rgb.width / factor)), max(1, round(rgb.height / factor))),
                               Image.Resampling.BOX)
    if cache is not None:
        try:
            cache.parent.mkdir(parents=True, exist_ok=True)
            tmp = cache.with_name(f".{cache.name}.{os.getpid()}.{id(small)}.part")
            small.save(tmp, format="PNG", compress_level=1)
            os.replace(tmp, cache)
        except OSError:
            pass                                  # a read-only snapshot folder: no cache
    return Render(path, dpi, full_shape, np.asarray(small), small.width / rgb.width)


def _same_full_pixels(a: Path, b: Path) -> bool:
    ia, _ = _open_image(a, full=True)
    ib, _ = _open_image(b, full=True)
    with ia, ib:
        return ia.size == ib.size and _flat_rgb(ia).tobytes() == _flat_rgb(ib).tobytes()


def on_common_canvas(a: np.ndarray, b: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Two renders at the same scale laid top-left on white canvases of their common size, so a
    figure whose height moved is still compared (its new strip is white on the other side)."""
    if a.shape == b.shape:
        return a, b
    h, w = max(a.shape[0], b.shape[0]), max(a.shape[1], b.shape[1])
    out = []
    for img in (a, b):
        c = np.full((h, w, 3), 255, np.uint8)
        c[:img.shape[0], :img.shape[1]] = img
        out.append(c)
    return out[0], out[1]


def overlay_image(a: np.ndarray, b: np.ndarray) -> np.ndarray:
    """Old and new renders overlaid in two contrasting inks: what only the old render has is
    blue, what only the new one has is vermillion, what both share stays dark (Okabe & Ito 2008
    blue #0072B2 and vermillion #D55E00, distinct under the common colour-vision deficiencies).
    A line that moved shows twice, so the view stays readable when the axes move.

        out = 255 * (1 - i_old (1 - c_old)) * (1 - i_new (1 - c_new)),  i = 1 - Y / 255

    per channel, with Y the BT.601 luma and c the ink colour on the 0-1 scale (a multiply
    blend of each render tinted with its ink).  Luma alone cannot tell two fills of equal
    lightness apart (a stacked bar whose boundary moved between orange and sky blue), so
    pixels whose colour changed by more than ``RECOLOUR_STEP`` in a channel while their luma
    moved less than that are painted reddish purple, as in :func:`diff_image`."""
    a, b = on_common_canvas(a, b)
    ya, yb = _grey(a), _grey(b)
    i_old = 1.0 - ya / 255.0
    i_new = 1.0 - yb / 255.0
    c_old = np.array(INK_REMOVED, np.float32) / 255.0
    c_new = np.array(INK_ADDED, np.float32) / 255.0
    out = 255.0 * (1 - i_old[..., None] * (1 - c_old)) * (1 - i_new[..., None] * (1 - c_new))
    out = np.clip(out + 0.5, 0, 255).astype(np.uint8)
    hue = ((np.abs(a.astype(np.int16) - b.astype(np.int16)).max(axis=2) > RECOLOUR_STEP)
           & (np.abs(ya - yb) < RECOLOUR_STEP))
    out[hue] = INK_RECOLOURED
    return out


# ----------------------------------------------------------------------------- sidecars

@dataclass(frozen=True)
class Change:
    """One difference between two builds of a figure."""
    figure: str
    what: str
    old: object
    new: object
    note: str = ""
    level: str = "detail"   # "conclusion": changes what a reader concludes (see conclusions());
                            # "detail": a number or the drawing; "provenance": inputs, versions


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
    def brief(self) -> str:
        """The change in a few words: an order change names the pairs that swapped, not the
        whole old and new rankings (those stay in ``old`` and ``new``)."""
        if self.kind == "order":
            return f"{self.what}: {self.note}"
        return self.detail

    @property
    def kind(self) -> str:
        return "order" if " order of " in f" {self.what} " else "value"

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
        if v.is_integer() and abs(v) < 1e15:
            return str(int(v))          # a count summed as float: 15050, not 1.505e+04
        return f"{v:.4g}"
    if isinstance(v, (list, tuple)):
        return "[" + ", ".join(_show(i) for i in v) + "]"
    if isinstance(v, dict):
        return "{" + ", ".join(f"{k}: {_show(i)}" for k, i in v.items()) + "}"
    return str(v)


def _usable_dpi(value) -> float | None:
    """A dpi as a float when it is a number from 1 to 100,000, else None."""
    try:
        d = float(value)
    except (TypeError, ValueError):
        return None
    return d if math.isfinite(d) and 1 <= d <= 100_000 else None


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


def _md(text) -> str:
    """Text from sidecars (figure ids, cautions quoting data values) for changes.md: '&' and '<'
    as HTML entities, so a Markdown viewer that passes HTML through shows them as text (raw HTML
    starts with '<', CommonMark 0.31 section 6.6; entities, section 2.5); '>' stays ('->')."""
    return str(text).replace("&", "&amp;").replace("<", "&lt;")


def _short_hash(h) -> str | None:
    return h[:12] if isinstance(h, str) else h


def _panels_appearing(fig: str, op: dict, np_: dict, level: str) -> list[Change]:
    """Panels (matched by label) in only one of two sidecars' panel indexes."""
    return ([Change(fig, "panel removed", lb, None, f"n was {_show(op[lb].get('n'))}", level)
             for lb in op if lb not in np_]
            + [Change(fig, "panel added", None, lb, f"n = {_show(np_[lb].get('n'))}", level)
               for lb in np_ if lb not in op])


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
    if old.get("parts") or new.get("parts"):
        return _by_part(compare_sidecars, old, new, "detail", rel_tol=rel_tol)
    fig = str(new.get("id") or old.get("id") or "?")
    changes: list[Change] = []

    def add(what, o, n, note="", level="detail"):
        changes.append(Change(fig, what, o, n, note, level))

    def differs(o, n) -> bool:
        return not _equal(o, n, rel_tol)

    if old.get("id") != new.get("id"):
        add("id", old.get("id"), new.get("id"))
    for key in _DEFINITION:
        if differs(old.get(key), new.get(key)):
            add(key, old.get(key), new.get(key))
    if old.get("row_sha256") != new.get("row_sha256"):
        add("sheet row", _short_hash(old.get("row_sha256")), _short_hash(new.get("row_sha256")),
            "the figure's row in the sheet was edited", "provenance")
    os_, ns_ = old.get("style") or {}, new.get("style") or {}
    if os_.get("name") != ns_.get("name"):
        add("style", os_.get("name"), ns_.get("name"))
    else:
        of, nf = os_.get("files") or {}, ns_.get("files") or {}
        for fname in sorted(set(of) | set(nf)):
            if of.get(fname) != nf.get(fname):
                add(f"style file {fname}", _short_hash(of.get(fname)), _short_hash(nf.get(fname)),
                    "edited" if fname in of and fname in nf else "", "provenance")

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
    changes += _panels_appearing(fig, op, np_, "detail")
    for label in [lb for lb in np_ if lb in op]:
        po, pn = op[label], np_[label]
        for key in ("n", "n_dropped"):
            o, n = po.get(key), pn.get(key)
            if o != n:                                   # counts are compared exactly
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
            drawn = _line_trend(po) or _line_trend(pn)
            add(f"panel '{label}' slope CI", _ci(so), _ci(sn),
                ("now includes 0" if covers[1] else "now excludes 0")
                + ("" if drawn else " (no trend drawn: the stats file's slope)"))
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
        changes += _group_changes(fig, label, po.get("groups"), pn.get("groups"), rel_tol)

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
        if o != n:
            add(key.replace("_", " "), o, n, _relative_note(o, n))

    changes += _strata_changes(fig, old.get("strata_test"), new.get("strata_test"), rel_tol)

    oi = {i.get("path"): i.get("sha256") for i in old.get("inputs") or []}
    ni = {i.get("path"): i.get("sha256") for i in new.get("inputs") or []}
    for path in oi:
        if path not in ni:
            add("input removed", path, None, "", "provenance")
        elif oi[path] != ni[path]:
            add(f"input {path}", _short_hash(oi[path]), _short_hash(ni[path]),
                "file contents changed", "provenance")
    for path in ni:
        if path not in oi:
            add("input added", None, path, "", "provenance")

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

    moved, reworded = caution_changes(old, new)
    for how, text in moved:
        if how == "gone":
            add("caution removed", text, None)
        else:
            add("caution added", None, text)
    for a, b in reworded:
        add("caution", a, b, "same caution, other numbers")

    ov, nv = old.get("versions") or {}, new.get("versions") or {}
    for key in list(ov) + [k for k in nv if k not in ov]:
        if ov.get(key) != nv.get(key):
            add(f"version of {key}", ov.get(key), nv.get(key), "", "provenance")
    return changes


_NUMBER = None


def _by_part(compare, old: dict, new: dict, level: str, **kw) -> list[Change]:
    """A figure made of parts (figkit.compose) compared part by part, each part's changes named
    "part <letter> (<id>): ...", after the page's own (size, layout, inputs, style).  A part
    that appears or goes is a change at ``level``."""
    fig = str(new.get("id") or old.get("id") or "?")
    # The page's own cautions (a part letter touching text, ...) are compared here; each part's
    # (copied to the page with a "part a (id): " prefix) are compared with that part below.
    page = [{**{k: v for k, v in sc.items() if k != "parts"},
             "cautions": [c for c in sc.get("cautions") or [] if not str(c).startswith("part ")]}
            for sc in (old, new)]
    out = compare(*page, **kw)
    op = {str(p.get("id")): p for p in old.get("parts") or [] if isinstance(p, dict)}
    np_ = {str(p.get("id")): p for p in new.get("parts") or [] if isinstance(p, dict)}
    for pid in [*np_, *(p for p in op if p not in np_)]:
        po, pn = op.get(pid), np_.get(pid)
        tag = f"part {(pn or po).get('letter') or pid} ({pid})" if (pn or po).get("letter") else f"part {pid}"
        if po is None or pn is None:
            out.append(Change(fig, tag, None if po is None else pid, None if pn is None else pid,
                              "part added" if po is None else "part removed", level))
            continue
        out += [Change(fig, f"{tag}: {c.what}", c.old, c.new, c.note, c.level)
                for c in compare(po, pn, **kw)]
    return out


def caution_kind(text: str) -> str:
    """A caution with its numbers masked: the same warning about other numbers (a new data
    version moves "2898 of 210240 rows (1.4%)") is one caution, not one gone and one new."""
    import re
    global _NUMBER
    if _NUMBER is None:
        _NUMBER = re.compile(r"[-+]?\d[\d,]*(?:\.\d+)?(?:e[-+]?\d+)?%?")
    return _NUMBER.sub("#", str(text))


def _caution_index(sidecar: dict) -> dict[str, list[str]]:
    out: dict[str, list[str]] = {}
    for c in sidecar.get("cautions") or []:
        out.setdefault(caution_kind(c), []).append(str(c))
    return out


def caution_changes(old: dict, new: dict) -> tuple[list[tuple], list[tuple]]:
    """(appeared or gone, reworded) cautions of two sidecars.  Cautions are matched by kind
    (:func:`caution_kind`); a kind that occurs more or fewer times than before (one panel more
    named in its own caution) counts as cautions appearing or going, the texts that are new or
    gone named.  Appeared/gone: ("gone" | "new", text); reworded: (old text, new text)."""
    oca, nca = _caution_index(old), _caution_index(new)
    moved, reworded = [], []
    for kind in list(oca) + [k for k in nca if k not in oca]:
        o, n = oca.get(kind, []), nca.get(kind, [])
        if len(o) == len(n):
            reworded += [(a, b) for a, b in zip(o, n) if a != b]
            continue
        extra_old = [t for t in o if t not in n] or o[len(n):]
        extra_new = [t for t in n if t not in o] or n[len(o):]
        if len(o) > len(n):
            moved += [("gone", t) for t in extra_old[:len(o) - len(n)]]
        else:
            moved += [("new", t) for t in extra_new[:len(n) - len(o)]]
    return moved, reworded


_GROUP_NUMBERS = ("n", "mean", "median", "q1", "q3", "whisker_low", "whisker_high", "outliers",
                  "ci_low", "ci_high", "bandwidth")


def _group_changes(fig: str, label: str, old, new, rel_tol: float) -> list[Change]:
    """Per-group numbers of box, violin and density panels (quartiles, medians, n, bandwidths):
    each group's changed numbers in one line, groups appearing or going."""
    if not isinstance(old, list) or not isinstance(new, list):
        return []
    where = f"panel '{label}' " if label else ""
    o = {str(g.get("group")): g for g in old if isinstance(g, dict)}
    n = {str(g.get("group")): g for g in new if isinstance(g, dict)}
    out = []
    for name in list(o) + [k for k in n if k not in o]:
        if name not in n:
            out.append(Change(fig, f"{where}group '{name}'", "drawn", None, "no longer drawn"))
        elif name not in o:
            out.append(Change(fig, f"{where}group '{name}'", None, "drawn", "new group"))
        else:
            moved = [f"{k} {_show(o[name].get(k))} -> {_show(n[name].get(k))}"
                     for k in _GROUP_NUMBERS
                     if (o[name].get(k) != n[name].get(k) if k in ("n", "outliers")
                         else not _equal(o[name].get(k), n[name].get(k), rel_tol))]
            if moved:
                out.append(Change(fig, f"{where}group '{name}'", None, "; ".join(moved)))
    return out


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


# ----------------------------------------------------------------------------- conclusions

@dataclass(frozen=True)
class Thresholds:
    """What counts as a change of conclusion, and what the regression gate lets through.  The
    defaults and their sources are ``figkit.style.REVIEW_DEFAULTS``; a house style's ``review:``
    block overrides them, and every comparison records the values it used."""
    share_points: float = REVIEW_DEFAULTS["share_points"]
    n_percent: float = REVIEW_DEFAULTS["n_percent"]
    p_level: float = REVIEW_DEFAULTS["p_level"]
    compare_dpi: float = REVIEW_DEFAULTS["compare_dpi"]
    ssim_min: float = REVIEW_DEFAULTS["ssim_min"]
    rms_max: float = REVIEW_DEFAULTS["rms_max"]
    stats_rel_tol: float = REVIEW_DEFAULTS["stats_rel_tol"]

    @classmethod
    def from_settings(cls, settings: dict | None) -> "Thresholds":
        from .style import review_settings
        return cls(**review_settings(settings, "review settings"))

    def as_dict(self) -> dict:
        from dataclasses import asdict
        return asdict(self)


def _line_trend(panel: dict) -> bool:
    trend = panel.get("trend")
    return isinstance(trend, dict) and trend.get("kind") == "line"


def _order_swaps(old: dict, new: dict) -> list[tuple[str, str]]:
    """Pairs (a, b) with a above b before and b above a now, among the names in both: the order
    of groups by value changed.  Ties on either side are no order, so they never count."""
    names = [k for k in old if k in new and _is_number(old[k]) and _is_number(new[k])]
    swaps = []
    for i, a in enumerate(names):
        for b in names[i + 1:]:
            if (old[a] - old[b]) * (new[a] - new[b]) < 0:
                swaps.append((a, b) if old[a] > old[b] else (b, a))
    return swaps


def _ranking(values: dict) -> str:
    return " > ".join(k for k, _ in sorted(values.items(), key=lambda kv: -kv[1]))


def _order_change(fig, what, old, new, unit) -> Change | None:
    swaps = _order_swaps(old, new)
    if not swaps:
        return None
    shown = ", ".join(f"'{b}' now above '{a}'" for a, b in swaps[:3])
    more = f" and {len(swaps) - 3} more pairs" if len(swaps) > 3 else ""
    keep = [k for k in old if k in new]
    return Change(fig, what, _ranking({k: old[k] for k in keep}),
                  _ranking({k: new[k] for k in keep}), f"{shown}{more} (by {unit})", "conclusion")


def _appeared(fig, what, old: set, new: set) -> list[Change]:
    out = []
    if old - new:
        out.append(Change(fig, f"{what} gone", sorted(old - new), None, "", "conclusion"))
    if new - old:
        out.append(Change(fig, f"{what} new", None, sorted(new - old), "", "conclusion"))
    return out


def conclusions(old: dict, new: dict, th: Thresholds = Thresholds()) -> list[Change]:
    """The changes between two sidecars of one figure that alter what a reader concludes, each
    with level "conclusion", in the order a reviewer reads them:

    * panels appearing or disappearing (matched by label);
    * a line trend (least squares, drawn) whose 95% slope interval starts or stops excluding
      zero, or whose slope changes sign;
    * the strata comparison (the interaction F-test of equal slopes) crossing ``p_level``;
    * a panel's n moving by >= ``n_percent`` % of the old n;
    * groups or categories appearing or disappearing (box, violin and density groups; bars,
      shares and tiles by their category and colour group);
    * the order of groups by their value changing: box and violin groups by median (or mean),
      bars by height within each colour group, categories by the share of each stacked group
      (of the first only when there are two: the second's is the complement); a pair counts only
      when its order reverses, never a tie;
    * a share moving by >= ``share_points`` percentage points;
    * a caution appearing or going (numbers masked: the same caution about other numbers is
      numeric detail, see :func:`caution_kind`).
    """
    if old.get("parts") or new.get("parts"):
        return _by_part(conclusions, old, new, "conclusion", th=th)
    fig = str(new.get("id") or old.get("id") or "?")
    out: list[Change] = []
    add = lambda what, o, n, note="": out.append(Change(fig, what, o, n, note, "conclusion"))  # noqa: E731
    op, np_ = _panel_index(old.get("panels")), _panel_index(new.get("panels"))
    out += _panels_appearing(fig, op, np_, "conclusion")
    for label in [lb for lb in np_ if lb in op]:
        po, pn = op[label], np_[label]
        at = f"panel '{label}'"
        if _line_trend(po) or _line_trend(pn):
            so, sn = po.get("stats") or {}, pn.get("stats") or {}
            notes = []
            a, b = so.get("slope"), sn.get("slope")
            if _is_number(a) and _is_number(b) and a * b < 0:
                notes.append(f"slope changed sign ({a:+.4g} -> {b:+.4g})")
            covers = [_covers_zero(so), _covers_zero(sn)]
            if None not in covers and covers[0] != covers[1]:
                notes.append("95% interval now includes 0" if covers[1]
                             else "95% interval now excludes 0")
            if notes:
                add(f"{at} line trend", _ci(so), _ci(sn), "; ".join(notes))
        n0, n1 = po.get("n"), pn.get("n")
        if _is_number(n0) and _is_number(n1) and n0 != n1 and (
                n0 == 0 or abs(n1 - n0) / abs(n0) * 100 >= th.n_percent):
            add(f"{at} n", n0, n1, f"{(n1 - n0) / n0 * 100:+.1f}%" if n0 else "was 0")
        out += _group_conclusions(fig, at, po, pn, th)
    ot, nt = old.get("strata_test") or {}, new.get("strata_test") or {}
    p0, p1 = ot.get("p"), nt.get("p")
    if _is_number(p0) and _is_number(p1) and (p0 < th.p_level) != (p1 < th.p_level):
        add("strata test p", p0, p1, (f"now below {th.p_level:g}: the slopes now differ between "
                                      "panels" if p1 < th.p_level else
                                      f"now at or above {th.p_level:g}: no longer evidence that "
                                      "the slopes differ between panels"))
    for how, text in caution_changes(old, new)[0]:
        if how == "gone":
            add("caution removed", text, None)
        else:
            add("caution added", None, text)
    return out


def _group_conclusions(fig: str, at: str, po: dict, pn: dict, th: Thresholds) -> list[Change]:
    out: list[Change] = []
    og, ng = po.get("groups"), pn.get("groups")
    if isinstance(og, list) and isinstance(ng, list):
        o = {str(g.get("group")): g for g in og if isinstance(g, dict)}
        n = {str(g.get("group")): g for g in ng if isinstance(g, dict)}
        out += _appeared(fig, f"{at} groups", set(o), set(n))
        for key in ("median", "mean"):
            ov = {k: g.get(key) for k, g in o.items() if _is_number(g.get(key))}
            nv = {k: g.get(key) for k, g in n.items() if _is_number(g.get(key))}
            if ov and nv:
                c = _order_change(fig, f"{at} order of groups", ov, nv, key)
                if c:
                    out.append(c)
                break
    for what, keys, value in (("counts", ("x", "group"), "count"), ("shares", ("x", "group"), "share"),
                              ("tiles", ("x", "y"), "count")):
        orec, nrec = po.get(what), pn.get(what)
        if not (isinstance(orec, list) and isinstance(nrec, list)):
            continue
        drawn = lambda rs, k: {str(r.get(k)) for r in rs if isinstance(r, dict)   # noqa: E731
                               and r.get(k) is not None and r.get(value) not in (0, 0.0, None)}
        for k in keys:
            out += _appeared(fig, f"{at} {what} categories ({k})", drawn(orec, k), drawn(nrec, k))
        if what == "tiles":
            continue
        groups = [g for g in dict.fromkeys(str(r.get("group")) for r in orec + nrec
                                           if isinstance(r, dict))]
        if what == "shares" and len(groups) == 2:
            groups = groups[:1]     # two stacked parts: the second's share is the complement
        for g in groups:
            ov = {str(r.get("x")): r.get(value) for r in orec
                  if isinstance(r, dict) and str(r.get("group")) == g}
            nv = {str(r.get("x")): r.get(value) for r in nrec
                  if isinstance(r, dict) and str(r.get("group")) == g}
            label = f"{at} order of bars" + (f" of '{g}'" if g != "None" else "")
            c = _order_change(fig, label, ov, nv, "share" if what == "shares" else "height")
            if c:
                out.append(c)
            if what == "shares":
                for x in [x for x in ov if x in nv]:
                    a, b = ov[x], nv[x]
                    if _is_number(a) and _is_number(b) and abs(b - a) * 100 >= th.share_points - 1e-9:
                        out.append(Change(fig, f"{at} share {x} / {g}", a, b,
                                          f"{(b - a) * 100:+.1f} percentage points", "conclusion"))
    return out


# ----------------------------------------------------------------------------- folders

@dataclass
class FigureComparison:
    """One figure found in both builds."""
    id: str
    changes: list[Change]                       # numeric detail and provenance
    conclusions: list[Change] = field(default_factory=list)
    rms: float | None = None          # 0-255 scale, at the comparison resolution; None: not compared
    ssim: float | None = None
    pixels: str = "identical"          # identical | within tolerance | differ | missing | not compared
    note: str = ""
    diff_png: Path | None = None
    size_change: str = ""              # "height +1.6 mm" when the renders' sizes differ
    images: tuple | None = None        # (old, new) at the comparison resolution, for the review

    @property
    def details(self) -> list[Change]:
        return [c for c in self.changes if c.level != "provenance"]

    @property
    def provenance(self) -> list[Change]:
        return [c for c in self.changes if c.level == "provenance"]

    @property
    def changed(self) -> bool:
        """Pixels or numbers differ; changed inputs or versions alone do not make a change."""
        return bool(self.conclusions or self.details) or self.pixels in ("differ", "missing")

    @property
    def weight(self) -> tuple:
        """How much changed, for ordering: conclusions first (changes of order, which come in
        numbers when near-equal bars swap, after every other kind), then how unlike the pixels
        are, then how many numbers changed."""
        orders = sum(c.kind == "order" for c in self.conclusions)
        return (len(self.conclusions) - orders, orders,
                0.0 if self.ssim is None else 1.0 - self.ssim, len(self.details))

    def pixel_text(self) -> str:
        size = f"; size changed: {self.size_change}" if self.size_change else ""
        if self.pixels in ("identical", "missing", "not compared"):
            return f"pixels {self.pixels}" + (f": {self.note}" if self.note else "") + size
        return f"pixels {self.pixels}: RMS {self.rms:.3g} (0-255), SSIM {self.ssim:.4f}{size}"


@dataclass
class Report:
    """The answer to "what changed in the figures?" for two builds."""
    old_dir: Path
    new_dir: Path
    tolerance: float
    figures: list[FigureComparison] = field(default_factory=list)
    added: list[str] = field(default_factory=list)
    removed: list[str] = field(default_factory=list)
    out_dir: Path | None = None
    markdown_path: Path | None = None
    old_label: str = ""
    new_label: str = ""
    thresholds: Thresholds = field(default_factory=Thresholds)
    data_changes: list[tuple[str, str | None, str | None]] = field(default_factory=list)
    seconds: float = 0.0
    stale: list[str] = field(default_factory=list)   # current-build figures older than their data

    @property
    def changed(self) -> list[FigureComparison]:
        return sorted((f for f in self.figures if f.changed), key=lambda f: f.weight, reverse=True)

    @property
    def unchanged(self) -> list[FigureComparison]:
        return [f for f in self.figures if not f.changed]

    @property
    def with_conclusions(self) -> list[FigureComparison]:
        return [f for f in self.changed if f.conclusions]

    def counts(self) -> dict:
        return {"changed": len(self.changed), "unchanged": len(self.unchanged),
                "added": len(self.added), "removed": len(self.removed),
                "conclusions_changed": len(self.with_conclusions)}

    def headline(self) -> str:
        return (f"{len(self.figures)} figures in both: {len(self.changed)} changed "
                f"({len(self.with_conclusions)} with a changed conclusion), "
                f"{len(self.unchanged)} unchanged; {len(self.added)} added, "
                f"{len(self.removed)} removed")

    def summary(self, details: int = 6, conclusions: int = 8) -> str:
        """What a terminal shows: per changed figure at most ``conclusions`` changes of
        conclusion, then at most ``details`` numbers (the review page and changes.md hold them
        all)."""
        lines = [f"figkit: compare: {self.old_label or self.old_dir} -> "
                 f"{self.new_label or self.new_dir}", f"figkit: compare: {self.headline()}"]
        for path, a, b in self.data_changes:
            lines.append(f"  data {path}: {_short_hash(a)} -> {_short_hash(b)}")
        for f in self.changed:
            lines.append(f"  {f.id}: {f.pixel_text()}")
            lines += [f"    CONCLUSION {c.brief}" for c in f.conclusions[:conclusions]]
            if len(f.conclusions) > conclusions:
                lines.append(f"    CONCLUSION ... and {len(f.conclusions) - conclusions} more")
            shown = f.details[:details]
            lines += [f"    {c.detail}" for c in shown]
            if len(f.details) > len(shown):
                lines.append(f"    ... {len(f.details) - len(shown)} more numbers changed")
        quiet = [f for f in self.unchanged if f.provenance]
        if quiet:
            lines.append("  unchanged although their inputs changed: "
                         + ", ".join(f.id for f in quiet))
        if self.added:
            lines.append("  added: " + ", ".join(self.added))
        if self.removed:
            lines.append("  removed: " + ", ".join(self.removed))
        if self.stale:
            lines.append("figkit: caution: the current build has figures older than their data "
                         f"files (rebuild first: snakemake --cores 2): {', '.join(self.stale)}")
        if self.markdown_path is not None:
            lines.append(f"figkit: report -> {self.markdown_path}")
        return "\n".join(lines)

    def markdown(self) -> str:
        th = ", ".join(f"{k} {v:g}" for k, v in self.thresholds.as_dict().items())
        md = ["# What changed in the figures", "",
              f"- old: {self.old_label or self.old_dir} (`{self.old_dir}`)",
              f"- new: {self.new_label or self.new_dir} (`{self.new_dir}`)",
              f"- pixels compared at {self.thresholds.compare_dpi:g} dpi; tolerance: RMS "
              f"{self.tolerance:g} on the 0-255 scale",
              f"- thresholds: {th}", "",
              self.headline()[0].upper() + self.headline()[1:] + ".", ""]
        if self.data_changes:
            md += ["## Data files changed", ""] + [
                f"- `{p}`: `{_short_hash(a)}` -> `{_short_hash(b)}`" for p, a, b in self.data_changes] + [""]
        if self.added:
            md += ["## Figures added", ""] + [f"- {_md(i)}" for i in self.added] + [""]
        if self.removed:
            md += ["## Figures removed", ""] + [f"- {_md(i)}" for i in self.removed] + [""]
        for f in self.changed:
            md += [f"## {_md(f.id)}", ""]
            if f.conclusions:
                md += ["Changes a reader's conclusion:", ""]
                md += [f"- **{_md(c.brief)}**" for c in f.conclusions] + [""]
            md += [f"- {f.pixel_text()}"]
            md += [f"- {_md(c.detail)}" for c in f.changes]
            if f.diff_png is not None:
                md += ["", f"![where {_md(f.id)} changed]({f.diff_png.name})", "",
                       "Grey: old render; vermillion: ink added; blue: ink removed; "
                       "purple: colour changed."]
            md.append("")
        if self.unchanged:
            md += ["Unchanged: " + ", ".join(_md(f.id) for f in self.unchanged) + ".", ""]
        return "\n".join(md)

    def as_dict(self) -> dict:
        """The machine-readable result (written as compare.json beside a review page)."""
        def ch(c: Change) -> dict:
            return {"what": c.what, "old": c.old, "new": c.new, "note": c.note, "level": c.level}
        return {"old": {"label": self.old_label, "folder": str(self.old_dir)},
                "new": {"label": self.new_label, "folder": str(self.new_dir)},
                "thresholds": self.thresholds.as_dict(), "tolerance_rms": self.tolerance,
                "counts": self.counts(), "added": self.added, "removed": self.removed,
                "older_than_data": self.stale,
                "data_changes": [{"path": p, "old": a, "new": b} for p, a, b in self.data_changes],
                "figures": [{"id": f.id, "changed": f.changed, "pixels": f.pixels, "rms": f.rms,
                             "ssim": f.ssim, "size_change": f.size_change,
                             "conclusions": [ch(c) for c in f.conclusions],
                             "changes": [ch(c) for c in f.changes]}
                            for f in self.changed + self.unchanged]}


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
        if not path.is_file():
            continue     # a folder or pipe named *.json is no sidecar (and reading a pipe hangs)
        from .files import read_json_object
        data = read_json_object(path)
        if not (isinstance(data, dict) and isinstance(data.get("id"), str) and "panels" in data):
            continue     # another JSON file, not a figure's sidecar
        _check_sidecar_shape(path, data)
        if data["id"] in found:
            raise FigkitError(f"two sidecars in {folder} claim figure id '{data['id']}'",
                              value=[found[data["id"]][0].name, path.name])
        found[data["id"]] = (path, data)
    return found


# The containers compare walks, by sidecar key (figkit writes these; a hand-edited or damaged
# sidecar with another shape is refused in one line rather than failing deep inside).
_SIDECAR_SHAPES = {"panels": list, "inputs": list, "files": dict, "layout": dict, "colours": dict,
                   "cautions": list, "style": dict, "versions": dict, "size_mm": list}


def _check_sidecar_shape(path: Path, data: dict) -> None:
    for key, kind in _SIDECAR_SHAPES.items():
        value = data.get(key)
        if value is not None and not isinstance(value, kind):
            raise FigkitError(f"sidecar {path} is damaged: '{key}' is not a JSON "
                              f"{'array' if kind is list else 'object'}", value=type(value).__name__)
    for key in ("panels", "inputs"):
        if not all(isinstance(v, dict) for v in data.get(key) or []):
            raise FigkitError(f"sidecar {path} is damaged: '{key}' holds something other than "
                              "objects")


def _pair_safely(fid: str, old, new, *args):
    """:func:`_pair`, with a sidecar whose values are not of the kinds figkit writes (a number
    where a list belongs, deep inside a panel) said in one line naming both sidecars."""
    try:
        return _pair(fid, old, new, *args)
    except (TypeError, KeyError, AttributeError, ValueError, IndexError) as exc:
        raise FigkitError(f"figure '{fid}': a sidecar holds values figkit does not write "
                          f"({type(exc).__name__}); rebuild it or compare other builds",
                          value=[str(old.figures), str(new.figures)]) from None


def _png_of(folder: Path, sidecar: dict) -> Path | None:
    name = (sidecar.get("files") or {}).get("png") or f"{sidecar['id']}.png"
    path = folder / Path(name).name
    return path if path.is_file() else None


def compare_pixels(fc: FigureComparison, old_png, new_png, *, old_dpi=None, new_dpi=None,
                   th: Thresholds = Thresholds(), tolerance: float = 0.0,
                   keep_images: bool = False, old_cache: Path | None = None,
                   new_cache: Path | None = None) -> None:
    """Fill ``fc``'s pixel verdict.  Equal image data (:func:`png_pixel_digest`) or equal decoded
    pixels are "identical"; otherwise both renders are box-filtered to ``th.compare_dpi``, laid on
    a common canvas when their sizes differ (the size change is reported, the pixels still
    compared), and their RMS difference and SSIM taken there."""
    if old_png is None and new_png is None:
        fc.pixels, fc.note = "not compared", "no PNG in either build (formats without png)"
        return
    if old_png is None or new_png is None:
        fc.pixels = "missing"
        fc.note = f"PNG only in the {'new' if old_png is None else 'old'} build"
        return
    da, db = png_pixel_digest(old_png), png_pixel_digest(new_png)
    if da is not None and da == db:       # equal image data: nothing to decode or to show
        fc.pixels, fc.rms, fc.ssim = "identical", 0.0, 1.0
        return
    a = load_for_compare(old_png, old_dpi, th.compare_dpi, cache=old_cache)
    b = load_for_compare(new_png, new_dpi, th.compare_dpi, cache=new_cache)
    # Renders that differ at the comparison resolution differ; only equal reductions need the
    # full pixels compared (a one-pixel change can round away in the box filter).
    same = (a.full_shape == b.full_shape and np.array_equal(a.image, b.image)
            and _same_full_pixels(old_png, new_png))
    if keep_images:
        fc.images = (a.image, b.image)
    if a.full_shape != b.full_shape:
        mm = lambda px, dpi: px / dpi * 25.4     # noqa: E731
        parts = [f"{side} {mm(nb, b.dpi) - mm(na, a.dpi):+.1f} mm"
                 for side, na, nb in (("width", a.full_shape[1], b.full_shape[1]),
                                      ("height", a.full_shape[0], b.full_shape[0])) if na != nb]
        fc.size_change = ", ".join(parts) or f"{_shape_text(a.full_shape)} -> {_shape_text(b.full_shape)}"
    if same:
        fc.pixels, fc.rms, fc.ssim = "identical", 0.0, 1.0
        return
    x, y = on_common_canvas(a.image, b.image)
    fc.rms = rms_difference(x, y)
    fc.ssim = ssim(x, y) if min(x.shape[:2]) >= 2 * SSIM_RADIUS + 1 else None
    fc.pixels = "within tolerance" if fc.rms <= tolerance and not fc.size_change else "differ"


def _pair(fid: str, old: Build, new: Build, old_sc: dict, new_sc: dict, th: Thresholds,
          tolerance: float, rel_tol: float, keep_images: bool) -> FigureComparison:
    concl = conclusions(old_sc, new_sc, th)
    said = {c.what for c in concl}
    changes = [c for c in compare_sidecars(old_sc, new_sc, rel_tol=rel_tol) if c.what not in said]
    fc = FigureComparison(fid, changes, concl)
    old_png, new_png = _png_of(old.figures, old_sc), _png_of(new.figures, new_sc)
    compare_pixels(fc, old_png, new_png, old_dpi=old_sc.get("dpi"), new_dpi=new_sc.get("dpi"),
                   th=th, tolerance=tolerance, keep_images=keep_images,
                   old_cache=old.reduced_cache(old_png, th.compare_dpi),
                   new_cache=new.reduced_cache(new_png, th.compare_dpi))
    return fc


def compare_builds(old: Build, new: Build, *, thresholds: Thresholds = Thresholds(),
                   tolerance: float = 0.0, rel_tol: float = 1e-9, out_dir=None,
                   keep_images: bool = False, workers: int | None = None) -> Report:
    """Pair the figures of two builds (:class:`figkit.snapshot.Build`) by id and say what changed:
    for each figure in both, :func:`conclusions` first, then :func:`compare_sidecars` (numeric
    detail, and provenance that alone does not make a change), then the pixels
    (:func:`compare_pixels`).  Renders are decoded in ``workers`` threads (Pillow decodes
    outside the interpreter lock).  With ``out_dir``, ``changes.md`` and one ``<id>.diff.png``
    per differing render are written there."""
    import time
    from concurrent.futures import ThreadPoolExecutor
    t0 = time.perf_counter()
    if not (_is_number(tolerance) and math.isfinite(tolerance) and tolerance >= 0):
        raise FigkitError("tolerance must be a pixel RMS >= 0 (0-255 scale)", field="tolerance",
                          value=tolerance)
    for b, side in ((old, "old"), (new, "new")):
        if not Path(b.figures).is_dir():
            raise FigkitError(f"{side} folder not found or not a folder", field=side,
                              value=str(b.figures))
    old_sc, new_sc = read_sidecars(Path(old.figures)), read_sidecars(Path(new.figures))
    for b, sc in ((old, old_sc), (new, new_sc)):
        if b.ids is not None:
            for fid in [f for f in sc if f not in b.ids]:
                del sc[fid]
    if not old_sc and not new_sc:
        raise FigkitError(f"no figure sidecars (*.json) in {old.figures} or {new.figures}; "
                          "give two folders of built figures (results/figures) or snapshots")
    for b, sc, side in ((old, old_sc, "old"), (new, new_sc, "new")):
        if not sc:            # a mistyped folder would otherwise read as "every figure removed"
            raise FigkitError(f"no figure sidecars (*.json) in the {side} build; give a folder "
                              "of built figures (results/figures), a snapshot name or folder",
                              field=side, value=str(b.figures))
    out = Path(out_dir) if out_dir is not None else None
    if out is not None:
        if out.exists() and not out.is_dir():
            raise FigkitError("--out must be a folder", field="out", value=str(out))
        out.mkdir(parents=True, exist_ok=True)
    report = Report(Path(old.figures), Path(new.figures), float(tolerance), out_dir=out,
                    added=sorted(set(new_sc) - set(old_sc)),
                    removed=sorted(set(old_sc) - set(new_sc)), old_label=old.label,
                    new_label=new.label, thresholds=thresholds)
    both = sorted(set(old_sc) & set(new_sc))
    keep = keep_images or out is not None
    with ThreadPoolExecutor(max_workers=workers or min(4, os.cpu_count() or 1)) as pool:
        report.figures = list(pool.map(lambda fid: _pair_safely(
            fid, old, new, old_sc[fid][1], new_sc[fid][1], thresholds, tolerance, rel_tol, keep),
            both))
    report.data_changes = _data_changes(old, new, old_sc, new_sc)
    for build, sc in ((old, old_sc), (new, new_sc)):
        if build.current:
            report.stale += sorted(fid for fid, (_, d) in sc.items()
                                   if any(build.datasets.get(i.get("path"), i.get("sha256"))
                                          != i.get("sha256") for i in d.get("inputs") or []
                                          if isinstance(i, dict)))
    if out is not None:
        from .provenance import atomic_outputs
        for fc in report.figures:
            if fc.pixels == "differ" and fc.images is not None:
                name = (f"{fc.id}.diff.png" if _SAFE_ID.fullmatch(fc.id)    # a sheet id
                        else f"figure-{report.figures.index(fc) + 1:03d}.diff.png")
                fc.diff_png = diff_image(*on_common_canvas(*fc.images), out / name)
            if not keep_images:
                fc.images = None
        report.markdown_path = out / REPORT_NAME
        with atomic_outputs([report.markdown_path]) as (tmp,):
            tmp.write_text(report.markdown(), encoding="utf-8")
    report.seconds = time.perf_counter() - t0
    return report


def _data_changes(old: Build, new: Build, old_sc: dict, new_sc: dict) -> list[tuple]:
    """(path, old SHA-256, new SHA-256) of each data file that differs: from the snapshots'
    manifests or the project where known, else from the sidecars' inputs."""
    def from_sidecars(sc):
        return {i.get("path"): i.get("sha256") for _, d in sc.values()
                for i in d.get("inputs") or [] if isinstance(i, dict)}
    a = old.datasets or from_sidecars(old_sc)
    b = new.datasets or from_sidecars(new_sc)
    return [(p, a.get(p), b.get(p)) for p in sorted(set(a) | set(b), key=str)
            if a.get(p) != b.get(p)]


def compare_folders(old_dir: Path | str, new_dir: Path | str, out_dir: Path | str | None = None,
                    *, tolerance: float = 0.0, rel_tol: float = 1e-9,
                    thresholds: Thresholds = Thresholds()) -> Report:
    """:func:`compare_builds` for two plain folders of built figures (a results folder holding
    ``figures/`` is accepted for either)."""
    from .snapshot import Build
    old_f, new_f = _figures_folder(old_dir, "old"), _figures_folder(new_dir, "new")
    return compare_builds(Build(str(old_f), old_f), Build(str(new_f), new_f),
                          thresholds=thresholds, tolerance=tolerance, rel_tol=rel_tol,
                          out_dir=out_dir)
