"""Colour stage: published palettes, colour science and colour-vision checks.

Everything here works on sRGB colours given as ``"#RRGGBB"`` strings or as float
arrays of shape (..., 3) in [0, 1] (sRGB-encoded, IEC 61966-2-1).  The maths is
numpy only; matplotlib is imported lazily, only to build colormaps and to draw
the swatch sheet.

References used throughout
--------------------------
- IEC 61966-2-1:1999, sRGB (transfer function, RGB->XYZ matrix, D65 white).
- CIE 15:2004 / CIE 1976 L*a*b*.
- Sharma, Wu & Dalal (2005), "The CIEDE2000 color-difference formula:
  implementation notes, supplementary test data, and mathematical
  observations", Color Res. Appl. 30(1):21-30.
- Machado, Oliveira & Fernandes (2009), "A physiologically-based model for
  simulation of color vision deficiency", IEEE TVCG 15(6):1291-1298.
- W3C (2023), Web Content Accessibility Guidelines (WCAG) 2.2, definitions of
  "relative luminance" and "contrast ratio".
"""
from __future__ import annotations

import os
import re
from collections.abc import Iterable, Mapping, Sequence
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from figkit.errors import FigkitError

__all__ = [
    "Palette", "PALETTES", "get_palette", "palette_colours", "colormap",
    "hex_to_rgb", "rgb_to_hex", "srgb_to_linear", "linear_to_srgb", "linear_to_xyz",
    "xyz_to_lab", "srgb_to_lab", "delta_e_2000", "simulate_cvd", "greyscale",
    "relative_luminance", "contrast_ratio", "VISIONS", "Separability", "separability",
    "check_separability", "assign_categories", "swatch_sheet",
]


# --------------------------------------------------------------------------- palettes

KINDS = ("qualitative", "sequential", "diverging")
_HEX = re.compile(r"#[0-9A-Fa-f]{6}")  # used with fullmatch


@dataclass(frozen=True)
class Palette:
    """A published colour scheme.

    ``colours`` holds upper-case ``"#RRGGBB"`` strings in the order they are handed
    out.  Sequential schemes that ship with matplotlib keep ``colours`` empty and
    are sampled from matplotlib's colormap on demand (see :func:`palette_colours`),
    so that no sampled values are typed into this file.
    """

    name: str
    kind: str
    colours: tuple[str, ...]
    source: str
    note: str = ""

    def __post_init__(self):
        if self.kind not in KINDS:
            raise FigkitError("unknown palette kind", field="kind", value=self.kind,
                              allowed=KINDS)
        bad = [c for c in self.colours if not (_HEX.fullmatch(c) and c == c.upper())]
        if bad:
            raise FigkitError(f"palette '{self.name}' colours must be upper-case #RRGGBB",
                              field="colours", value=bad[0])


PALETTES: dict[str, Palette] = {p.name: p for p in (
    Palette(
        "okabe-ito", "qualitative",
        # Orange, sky blue, bluish green, yellow, blue, vermillion, reddish purple, black.
        ("#E69F00", "#56B4E9", "#009E73", "#F0E442", "#0072B2", "#D55E00", "#CC79A7",
         "#000000"),
        "Okabe & Ito (2008), Color Universal Design (CUD): how to make figures and "
        "presentations that are friendly to colorblind people (values from memory)",
        note="The paper lists black first; here black comes last because figures "
             "already use black for text, axes and reference lines, so it is handed "
             "to a category only when the seven chromatic colours are used up."),
    Palette(
        "tol-bright", "qualitative",
        ("#4477AA", "#EE6677", "#228833", "#CCBB44", "#66CCEE", "#AA3377", "#BBBBBB"),
        "Tol (2021), Colour Schemes, SRON technical note SRON/EPS/TN/09-002 issue 3.2, "
        "bright scheme (values from memory)"),
    Palette(
        "tol-vibrant", "qualitative",
        ("#EE7733", "#0077BB", "#33BBEE", "#EE3377", "#CC3311", "#009988", "#BBBBBB"),
        "Tol (2021), Colour Schemes, SRON technical note SRON/EPS/TN/09-002 issue 3.2, "
        "vibrant scheme (values from memory)"),
    Palette(
        "tol-muted", "qualitative",
        ("#CC6677", "#332288", "#DDCC77", "#117733", "#88CCEE", "#882255", "#44AA99",
         "#999933", "#AA4499"),
        "Tol (2021), Colour Schemes, SRON technical note SRON/EPS/TN/09-002 issue 3.2, "
        "muted scheme (values from memory)",
        note="Tol pairs this scheme with pale grey #DDDDDD for missing data; that grey "
             "is not a category colour and is left out."),
    Palette(
        "tol-high-contrast", "qualitative",
        ("#004488", "#DDAA33", "#BB5566"),
        "Tol (2021), Colour Schemes, SRON technical note SRON/EPS/TN/09-002 issue 3.2, "
        "high-contrast scheme (values from memory)",
        note="Designed to stay distinct in greyscale; Tol adds white and black."),
    Palette(
        "viridis", "sequential", (),
        "van der Walt & Smith (2015), viridis colormap as shipped with matplotlib"),
    Palette(
        "cividis", "sequential", (),
        "Nuñez, Anderton & Renslow (2018), PLOS ONE 13(7):e0199239, cividis colormap "
        "as shipped with matplotlib"),
    Palette(
        "rdbu", "diverging",
        ("#67001F", "#B2182B", "#D6604D", "#F4A582", "#FDDBC7", "#F7F7F7", "#D1E5F0",
         "#92C5DE", "#4393C3", "#2166AC", "#053061"),
        "Brewer (2003), ColorBrewer RdBu 11-class; Harrower & Brewer (2003), "
        "Cartographic J. 40(1):27-37 (values from memory, checked against the copy "
        "shipped in matplotlib)"),
)}


def get_palette(name: str) -> Palette:
    """Return the published palette called ``name`` (a key of :data:`PALETTES`)."""
    try:
        return PALETTES[name]
    except (KeyError, TypeError):
        raise FigkitError("unknown palette", field="palette", value=name,
                          allowed=sorted(PALETTES)) from None


def colormap(name: str):
    """A matplotlib colormap for palette ``name`` (matplotlib imported lazily).

    Sequential palettes return matplotlib's own map of that name; diverging ones a
    map interpolated linearly in sRGB between the published colours; qualitative
    ones a listed (non-interpolating) map.
    """
    pal = get_palette(name)
    import matplotlib
    from matplotlib.colors import LinearSegmentedColormap, ListedColormap
    if pal.kind == "sequential":
        return matplotlib.colormaps[pal.name]
    if pal.kind == "diverging":
        return LinearSegmentedColormap.from_list(pal.name, list(pal.colours), N=256)
    return ListedColormap(list(pal.colours), name=pal.name)


def palette_colours(name: str, n: int | None = None) -> tuple[str, ...]:
    """The colours of palette ``name`` as upper-case hex strings.

    Qualitative: the first ``n`` colours (all when ``n`` is None).  Diverging: the
    published colours, or ``n`` evenly spaced samples of :func:`colormap`.
    Sequential: ``n`` (default 9) samples of matplotlib's map at t = i / (n - 1).
    """
    pal = get_palette(name)
    if n is not None and (isinstance(n, bool) or not isinstance(n, (int, np.integer))
                          or n < 1):
        raise FigkitError("number of colours must be a positive integer", field="n",
                          value=n)
    if pal.kind == "qualitative":
        if n is not None and n > len(pal.colours):
            raise FigkitError(f"palette '{name}' holds only {len(pal.colours)} colours",
                              field="n", value=n)
        return pal.colours[:n]
    if pal.kind == "diverging" and n is None:
        return pal.colours
    n = 9 if n is None else int(n)
    cmap = colormap(name)
    t = np.linspace(0.0, 1.0, n) if n > 1 else np.array([0.5])
    return tuple(rgb_to_hex(np.asarray(cmap(t))[:, :3]))


# --------------------------------------------------------------------------- conversions

def _as_rgb(rgb, field: str = "rgb") -> np.ndarray:
    """Accept hex string(s) or floats in [0, 1]; return a float array (..., 3)."""
    if isinstance(rgb, str) or (isinstance(rgb, (list, tuple)) and rgb
                                and all(isinstance(c, str) for c in rgb)):
        return hex_to_rgb(rgb)
    try:
        arr = np.asarray(rgb, dtype=float)
    except (TypeError, ValueError):
        raise FigkitError("colours must be #RRGGBB strings or numbers in [0, 1]",
                          field=field, value=rgb) from None
    if arr.ndim == 0 or arr.shape[-1] != 3:
        raise FigkitError("RGB colours need a last axis of length 3", field=field,
                          value=arr.shape)
    # A hair of slack lets values that rounding pushed just past 0 or 1 through.
    if (not np.all(np.isfinite(arr)) or arr.min(initial=0) < -1e-9
            or arr.max(initial=0) > 1 + 1e-9):
        raise FigkitError("RGB values must be finite and within [0, 1]", field=field,
                          value=(float(np.nanmin(arr)), float(np.nanmax(arr))))
    return np.clip(arr, 0.0, 1.0)


def _as_triples(x, field: str) -> np.ndarray:
    arr = np.asarray(x, dtype=float)
    if arr.ndim == 0 or arr.shape[-1] != 3:
        raise FigkitError("colour coordinates need a last axis of length 3", field=field,
                          value=arr.shape)
    if not np.all(np.isfinite(arr)):
        raise FigkitError("colour coordinates must be finite", field=field)
    return arr


def hex_to_rgb(hexes: str | Sequence[str]) -> np.ndarray:
    """``"#RRGGBB"`` (or a sequence of them) -> sRGB floats in [0, 1], shape (..., 3).

    Each channel is the 8-bit code value divided by 255 (IEC 61966-2-1, 8-bit encoding).
    """
    single = isinstance(hexes, str)
    if not single and not isinstance(hexes, Iterable):
        raise FigkitError("colours must be written #RRGGBB", field="colour", value=hexes)
    items = [hexes] if single else list(hexes)
    bad = [h for h in items if not (isinstance(h, str) and _HEX.fullmatch(h))]
    if bad:
        raise FigkitError("colours must be written #RRGGBB", field="colour",
                          value=bad[0])
    codes = np.array([[int(h[i:i + 2], 16) for i in (1, 3, 5)] for h in items],
                     dtype=float).reshape(len(items), 3)
    rgb = codes / 255.0
    return rgb[0] if single else rgb


def rgb_to_hex(rgb) -> str | list[str]:
    """sRGB floats in [0, 1] (..., 3) -> upper-case ``"#RRGGBB"`` (a str for one colour).

    Code value = round(255 * c), the inverse of :func:`hex_to_rgb`.
    """
    arr = _as_rgb(rgb)
    codes = np.rint(arr * 255.0).astype(int).reshape(-1, 3)
    out = ["#{:02X}{:02X}{:02X}".format(*c) for c in codes]
    return out[0] if arr.ndim == 1 else out


def srgb_to_linear(rgb) -> np.ndarray:
    """Decode sRGB values to linear light (IEC 61966-2-1).

    C_lin = C / 12.92 if C <= 0.04045, else ((C + 0.055) / 1.055) ** 2.4.
    """
    c = _as_rgb(rgb)
    return np.where(c <= 0.04045, c / 12.92, ((c + 0.055) / 1.055) ** 2.4)


def linear_to_srgb(linear) -> np.ndarray:
    """Encode linear-light RGB to sRGB (IEC 61966-2-1); input clipped to [0, 1].

    C = 12.92 C_lin if C_lin <= 0.0031308, else 1.055 C_lin ** (1 / 2.4) - 0.055.
    """
    c = np.clip(_as_triples(linear, "linear"), 0.0, 1.0)
    out = np.where(c <= 0.0031308, 12.92 * c, 1.055 * c ** (1 / 2.4) - 0.055)
    return np.clip(out, 0.0, 1.0)


# IEC 61966-2-1:1999: linear sRGB -> CIE XYZ, D65, Y of white = 1.
# The standard publishes these four-decimal values; its Y row is the one WCAG
# uses for relative luminance.
SRGB_TO_XYZ = np.array([[0.4124, 0.3576, 0.1805],
                        [0.2126, 0.7152, 0.0722],
                        [0.0193, 0.1192, 0.9505]])
# CIE D65 white from its chromaticity x = 0.3127, y = 0.3290 (CIE 15:2004), Y = 1.
_D65_XY = (0.3127, 0.3290)
D65_WHITE_XYZ = np.array([_D65_XY[0] / _D65_XY[1], 1.0,
                          (1.0 - _D65_XY[0] - _D65_XY[1]) / _D65_XY[1]])


def linear_to_xyz(linear) -> np.ndarray:
    """Linear sRGB -> CIE XYZ (D65, Y of white = 1): [X Y Z]^T = M [R G B]^T.

    M is the matrix of IEC 61966-2-1:1999 (0.4124 0.3576 0.1805 / 0.2126 0.7152
    0.0722 / 0.0193 0.1192 0.9505).
    """
    return _as_triples(linear, "linear") @ SRGB_TO_XYZ.T


def xyz_to_lab(xyz, white=D65_WHITE_XYZ) -> np.ndarray:
    """CIE XYZ -> CIE 1976 L*a*b* (CIE 15:2004), D65 white by default.

    L* = 116 f(Y/Yn) - 16, a* = 500 [f(X/Xn) - f(Y/Yn)], b* = 200 [f(Y/Yn) - f(Z/Zn)],
    f(t) = t^(1/3) if t > (6/29)^3 else t / (3 (6/29)^2) + 4/29.
    """
    t = _as_triples(xyz, "xyz") / np.asarray(white, dtype=float)
    delta = 6.0 / 29.0
    f = np.where(t > delta ** 3, np.cbrt(t), t / (3 * delta ** 2) + 4.0 / 29.0)
    return np.stack([116.0 * f[..., 1] - 16.0,
                     500.0 * (f[..., 0] - f[..., 1]),
                     200.0 * (f[..., 1] - f[..., 2])], axis=-1)


def srgb_to_lab(rgb) -> np.ndarray:
    """sRGB (hex or floats in [0, 1]) -> CIE L*a*b* (D65): decode, matrix, CIE 1976."""
    return xyz_to_lab(linear_to_xyz(srgb_to_linear(rgb)))


# --------------------------------------------------------------------------- CIEDE2000

# Hue angles come from atan2 and carry ~1e-13 degree rounding.  Where two hues are
# exactly opposite (Sharma et al. 2005, table 1, pair 14) the rounding would pick
# the "> 180" branch at random; the paper's value takes the "<= 180" branch, so the
# comparison allows this much slack.
_HUE_SLACK_DEG = 1e-9


def delta_e_2000(lab1, lab2, *, k_l: float = 1.0, k_c: float = 1.0,
                 k_h: float = 1.0) -> np.ndarray:
    """CIEDE2000 colour difference, vectorised over (..., 3) L*a*b* arrays.

    Implements equations (1)-(17) of Sharma, Wu & Dalal (2005):
    G = 0.5 (1 - sqrt(C̄^7 / (C̄^7 + 25^7))), a' = (1 + G) a, C' = |(a', b)|,
    h' = atan2(b, a') in [0, 360) and 0 when C' = 0;
    Δh' = 0 if C'1 C'2 = 0, else h'2 - h'1 wrapped into [-180, 180];
    ΔH' = 2 sqrt(C'1 C'2) sin(Δh'/2);
    h̄' = h'1 + h'2 if C'1 C'2 = 0, (h'1 + h'2)/2 if |h'1 - h'2| <= 180,
    else (h'1 + h'2 ± 360)/2 (+ when the sum < 360);
    T = 1 - 0.17 cos(h̄' - 30) + 0.24 cos(2h̄') + 0.32 cos(3h̄' + 6) - 0.20 cos(4h̄' - 63);
    S_L = 1 + 0.015 (L̄' - 50)^2 / sqrt(20 + (L̄' - 50)^2), S_C = 1 + 0.045 C̄',
    S_H = 1 + 0.015 C̄' T, R_T = -sin(2 Δθ) R_C with Δθ = 30 exp(-((h̄' - 275)/25)^2),
    R_C = 2 sqrt(C̄'^7 / (C̄'^7 + 25^7));
    ΔE00 = sqrt((ΔL'/k_L S_L)^2 + (ΔC'/k_C S_C)^2 + (ΔH'/k_H S_H)^2
                + R_T (ΔC'/k_C S_C)(ΔH'/k_H S_H)).
    """
    lab1, lab2 = np.broadcast_arrays(_as_triples(lab1, "lab1"), _as_triples(lab2, "lab2"))
    for k, name in ((k_l, "k_l"), (k_c, "k_c"), (k_h, "k_h")):
        if not (np.isfinite(k) and k > 0):
            raise FigkitError("parametric factors must be positive", field=name, value=k)
    L1, a1, b1 = np.moveaxis(lab1, -1, 0)
    L2, a2, b2 = np.moveaxis(lab2, -1, 0)
    p25 = 25.0 ** 7

    c_bar = (np.hypot(a1, b1) + np.hypot(a2, b2)) / 2.0
    g = 0.5 * (1.0 - np.sqrt(c_bar ** 7 / (c_bar ** 7 + p25)))
    a1p, a2p = (1.0 + g) * a1, (1.0 + g) * a2
    c1p, c2p = np.hypot(a1p, b1), np.hypot(a2p, b2)
    h1p = np.where(c1p == 0, 0.0, np.degrees(np.arctan2(b1, a1p)) % 360.0)
    h2p = np.where(c2p == 0, 0.0, np.degrees(np.arctan2(b2, a2p)) % 360.0)

    chroma_zero = (c1p * c2p) == 0
    dh = h2p - h1p
    near = np.abs(dh) <= 180.0 + _HUE_SLACK_DEG
    dhp = np.where(chroma_zero, 0.0,
                   np.where(near, dh, np.where(dh > 180.0, dh - 360.0, dh + 360.0)))
    d_lp = L2 - L1
    d_cp = c2p - c1p
    d_hp = 2.0 * np.sqrt(c1p * c2p) * np.sin(np.radians(dhp) / 2.0)

    l_bar = (L1 + L2) / 2.0
    c_bar_p = (c1p + c2p) / 2.0
    h_sum = h1p + h2p
    h_bar = np.where(chroma_zero, h_sum,
                     np.where(near, h_sum / 2.0,
                              np.where(h_sum < 360.0, (h_sum + 360.0) / 2.0,
                                       (h_sum - 360.0) / 2.0)))
    hr = np.radians(h_bar)
    t = (1.0 - 0.17 * np.cos(hr - np.radians(30.0)) + 0.24 * np.cos(2.0 * hr)
         + 0.32 * np.cos(3.0 * hr + np.radians(6.0)) - 0.20 * np.cos(4.0 * hr - np.radians(63.0)))
    d_theta = 30.0 * np.exp(-(((h_bar - 275.0) / 25.0) ** 2))
    r_c = 2.0 * np.sqrt(c_bar_p ** 7 / (c_bar_p ** 7 + p25))
    s_l = 1.0 + 0.015 * (l_bar - 50.0) ** 2 / np.sqrt(20.0 + (l_bar - 50.0) ** 2)
    s_c = 1.0 + 0.045 * c_bar_p
    s_h = 1.0 + 0.015 * c_bar_p * t
    r_t = -np.sin(np.radians(2.0 * d_theta)) * r_c

    tl, tc, th = d_lp / (k_l * s_l), d_cp / (k_c * s_c), d_hp / (k_h * s_h)
    return np.sqrt(tl ** 2 + tc ** 2 + th ** 2 + r_t * tc * th)


# --------------------------------------------------------------------------- vision

# Machado, Oliveira & Fernandes (2009) simulation matrices Φ_CVD for severities
# 0.0, 0.1, ..., 1.0, acting on linear RGB.  Transcribed from the authors' published
# table (Machado 2010, "A model for simulation of color vision deficiency and a color
# contrast enhancement technique for dichromats", UFRGS, pp. 1-94) via the copy in
# colour-science's dataset module; tests/test_colour.py checks every entry against
# colour-science.  Rows are output R, G, B.  Tritan uses the paper's shift paradigm,
# an approximation of tritanomaly.  Between tabulated severities the matrix is
# interpolated linearly from the two bracketing entries.  (colour-science 0.4.7
# instead extends the line through the next two entries, and returns the 1.0
# matrix above 0.9, so away from the tabulated severities the two differ by up to
# ~0.1 per matrix element; they agree exactly at the tabulated severities.)
_MACHADO_2009 = {
    "protan": (
        ((1.000000, 0.000000, 0.000000), (0.000000, 1.000000, 0.000000), (0.000000, 0.000000, 1.000000)),  # 0.0
        ((0.856167, 0.182038, -0.038205), (0.029342, 0.955115, 0.015544), (-0.002880, -0.001563, 1.004443)),  # 0.1
        ((0.734766, 0.334872, -0.069637), (0.051840, 0.919198, 0.028963), (-0.004928, -0.004209, 1.009137)),  # 0.2
        ((0.630323, 0.465641, -0.095964), (0.069181, 0.890046, 0.040773), (-0.006308, -0.007724, 1.014032)),  # 0.3
        ((0.539009, 0.579343, -0.118352), (0.082546, 0.866121, 0.051332), (-0.007136, -0.011959, 1.019095)),  # 0.4
        ((0.458064, 0.679578, -0.137642), (0.092785, 0.846313, 0.060902), (-0.007494, -0.016807, 1.024301)),  # 0.5
        ((0.385450, 0.769005, -0.154455), (0.100526, 0.829802, 0.069673), (-0.007442, -0.022190, 1.029632)),  # 0.6
        ((0.319627, 0.849633, -0.169261), (0.106241, 0.815969, 0.077790), (-0.007025, -0.028051, 1.035076)),  # 0.7
        ((0.259411, 0.923008, -0.182420), (0.110296, 0.804340, 0.085364), (-0.006276, -0.034346, 1.040622)),  # 0.8
        ((0.203876, 0.990338, -0.194214), (0.112975, 0.794542, 0.092483), (-0.005222, -0.041043, 1.046265)),  # 0.9
        ((0.152286, 1.052583, -0.204868), (0.114503, 0.786281, 0.099216), (-0.003882, -0.048116, 1.051998)),  # 1.0
    ),
    "deutan": (
        ((1.000000, 0.000000, 0.000000), (0.000000, 1.000000, 0.000000), (0.000000, 0.000000, 1.000000)),  # 0.0
        ((0.866435, 0.177704, -0.044139), (0.049567, 0.939063, 0.011370), (-0.003453, 0.007233, 0.996220)),  # 0.1
        ((0.760729, 0.319078, -0.079807), (0.090568, 0.889315, 0.020117), (-0.006027, 0.013325, 0.992702)),  # 0.2
        ((0.675425, 0.433850, -0.109275), (0.125303, 0.847755, 0.026942), (-0.007950, 0.018572, 0.989378)),  # 0.3
        ((0.605511, 0.528560, -0.134071), (0.155318, 0.812366, 0.032316), (-0.009376, 0.023176, 0.986200)),  # 0.4
        ((0.547494, 0.607765, -0.155259), (0.181692, 0.781742, 0.036566), (-0.010410, 0.027275, 0.983136)),  # 0.5
        ((0.498864, 0.674741, -0.173604), (0.205199, 0.754872, 0.039929), (-0.011131, 0.030969, 0.980162)),  # 0.6
        ((0.457771, 0.731899, -0.189670), (0.226409, 0.731012, 0.042579), (-0.011595, 0.034333, 0.977261)),  # 0.7
        ((0.422823, 0.781057, -0.203881), (0.245752, 0.709602, 0.044646), (-0.011843, 0.037423, 0.974421)),  # 0.8
        ((0.392952, 0.823610, -0.216562), (0.263559, 0.690210, 0.046232), (-0.011910, 0.040281, 0.971630)),  # 0.9
        ((0.367322, 0.860646, -0.227968), (0.280085, 0.672501, 0.047413), (-0.011820, 0.042940, 0.968881)),  # 1.0
    ),
    "tritan": (
        ((1.000000, 0.000000, 0.000000), (0.000000, 1.000000, 0.000000), (0.000000, 0.000000, 1.000000)),  # 0.0
        ((0.926670, 0.092514, -0.019184), (0.021191, 0.964503, 0.014306), (0.008437, 0.054813, 0.936750)),  # 0.1
        ((0.895720, 0.133330, -0.029050), (0.029997, 0.945400, 0.024603), (0.013027, 0.104707, 0.882266)),  # 0.2
        ((0.905871, 0.127791, -0.033662), (0.026856, 0.941251, 0.031893), (0.013410, 0.148296, 0.838294)),  # 0.3
        ((0.948035, 0.089490, -0.037526), (0.014364, 0.946792, 0.038844), (0.010853, 0.193991, 0.795156)),  # 0.4
        ((1.017277, 0.027029, -0.044306), (-0.006113, 0.958479, 0.047634), (0.006379, 0.248708, 0.744913)),  # 0.5
        ((1.104996, -0.046633, -0.058363), (-0.032137, 0.971635, 0.060503), (0.001336, 0.317922, 0.680742)),  # 0.6
        ((1.193214, -0.109812, -0.083402), (-0.058496, 0.979410, 0.079086), (-0.002346, 0.403492, 0.598854)),  # 0.7
        ((1.257728, -0.139648, -0.118081), (-0.078003, 0.975409, 0.102594), (-0.003316, 0.501214, 0.502102)),  # 0.8
        ((1.278864, -0.125333, -0.153531), (-0.084748, 0.957674, 0.127074), (-0.000989, 0.601151, 0.399838)),  # 0.9
        ((1.255528, -0.076749, -0.178779), (-0.078411, 0.930809, 0.147602), (0.004733, 0.691367, 0.303900)),  # 1.0
    ),
}
_CVD_MATRICES = {k: np.array(v, dtype=float) for k, v in _MACHADO_2009.items()}
CVD_KINDS = tuple(_CVD_MATRICES)
VISIONS = ("normal", "protan", "deutan", "tritan", "grey")


def _cvd_matrix(kind: str, severity: float) -> np.ndarray:
    if kind not in _CVD_MATRICES:
        raise FigkitError("unknown colour-vision deficiency", field="kind", value=kind,
                          allowed=CVD_KINDS)
    if isinstance(severity, bool) or not isinstance(severity, (int, float, np.floating,
                                                                 np.integer)) \
            or not 0.0 <= float(severity) <= 1.0:
        raise FigkitError("severity must be a number from 0 to 1", field="severity",
                          value=severity)
    table = _CVD_MATRICES[kind]
    pos = float(severity) * (len(table) - 1)
    i = min(int(np.floor(pos)), len(table) - 2)
    w = pos - i
    return (1.0 - w) * table[i] + w * table[i + 1]


def simulate_cvd(rgb, kind: str, severity: float = 1.0) -> np.ndarray:
    """Simulate how sRGB colours look with a colour-vision deficiency.

    Machado, Oliveira & Fernandes (2009): rgb_lin' = Φ_CVD(severity) rgb_lin, with
    Φ(s) = (1 - w) Φ(s_i) + w Φ(s_i+1), w = (s - s_i) / 0.1, between the two
    tabulated severities s_i <= s <= s_i+1 of 0.0, 0.1, ..., 1.0;
    the result is clipped to [0, 1] and re-encoded to sRGB.  ``kind`` is "protan",
    "deutan" or "tritan"; severity 1.0 is dichromacy (protanopia etc.).
    Input and output are sRGB-encoded floats (..., 3); hex strings are accepted.
    """
    matrix = _cvd_matrix(kind, severity)
    linear = srgb_to_linear(rgb)
    return linear_to_srgb(np.clip(linear @ matrix.T, 0.0, 1.0))


def greyscale(rgb) -> np.ndarray:
    """The neutral grey with the same CIE Y (hence the same L*) as each sRGB colour.

    Y = row 2 of the sRGB->XYZ matrix applied to linear RGB (IEC 61966-2-1); the grey
    is linear (Y, Y, Y), which has luminance Y because that row sums to 1.
    """
    y = linear_to_xyz(srgb_to_linear(rgb))[..., 1]
    return linear_to_srgb(np.repeat(np.clip(y, 0.0, 1.0)[..., None], 3, axis=-1))


def relative_luminance(rgb) -> np.ndarray | float:
    """WCAG 2.x relative luminance: L = 0.2126 R + 0.7152 G + 0.0722 B on linear RGB.

    Linearisation as sRGB (threshold 0.04045, WCAG 2.2 definition of relative
    luminance, W3C 2023).  Returns a float for one colour.
    """
    lum = srgb_to_linear(rgb) @ np.array([0.2126, 0.7152, 0.0722])
    return float(lum) if np.ndim(lum) == 0 else lum


def contrast_ratio(a, b) -> np.ndarray | float:
    """WCAG 2.x contrast ratio (L1 + 0.05) / (L2 + 0.05), L1 the lighter (W3C 2023).

    Ranges from 1 (same luminance) to 21 (white on black).
    """
    la, lb = np.asarray(relative_luminance(a)), np.asarray(relative_luminance(b))
    ratio = (np.maximum(la, lb) + 0.05) / (np.minimum(la, lb) + 0.05)
    return float(ratio) if ratio.ndim == 0 else ratio


def _as_vision(rgb: np.ndarray, vision: str) -> np.ndarray:
    if vision == "normal":
        return rgb
    if vision == "grey":
        return greyscale(rgb)
    return simulate_cvd(rgb, vision, 1.0)


# --------------------------------------------------------------------------- separability

@dataclass(frozen=True)
class Separability:
    """Smallest pairwise CIEDE2000 among a set of colours, per vision.

    ``min_delta_e[vision]`` is None and ``closest[vision]`` is None when fewer than
    two colours were given.  Visions: normal, protan, deutan, tritan (Machado et al.
    2009 at severity 1, i.e. dichromacy) and grey (same CIE L*, a greyscale print).
    """

    colours: tuple[str, ...]
    min_delta_e: dict[str, float | None]
    closest: dict[str, tuple[str, str] | None]


def _normalise_hexes(hexes) -> tuple[str, ...]:
    items = [hexes] if isinstance(hexes, str) else list(hexes)
    hex_to_rgb(items)  # validates every entry
    return tuple(h.upper() for h in items)


def separability(hexes: Iterable[str]) -> Separability:
    """Minimum pairwise CIEDE2000 (Sharma et al. 2005) of ``hexes`` under each vision.

    For vision v: min over i < j of ΔE00(Lab(v(c_i)), Lab(v(c_j))), where v is the
    identity, a Machado et al. (2009) dichromat simulation, or :func:`greyscale`.
    The pair count is n (n - 1) / 2, meant for the handful of colours in a figure.
    """
    colours = _normalise_hexes(hexes)
    n = len(colours)
    if n < 2:
        return Separability(colours, {v: None for v in VISIONS}, {v: None for v in VISIONS})
    rgb = hex_to_rgb(list(colours))
    i, j = np.triu_indices(n, k=1)
    mins, pairs = {}, {}
    for vision in VISIONS:
        lab = srgb_to_lab(_as_vision(rgb, vision))
        d = delta_e_2000(lab[i], lab[j])
        k = int(np.argmin(d))
        mins[vision] = float(d[k])
        pairs[vision] = (colours[i[k]], colours[j[k]])
    return Separability(colours, mins, pairs)


def check_separability(hexes: Iterable[str], threshold: float = 10.0) -> list[str]:
    """One message per vision whose closest pair differs by less than ``threshold``.

    The default of 10 CIEDE2000 units is a rule of thumb (common practice, no single
    source) for colours that must be told apart as small markers or thin lines.
    """
    if isinstance(threshold, bool) or not isinstance(threshold, (int, float)) \
            or not np.isfinite(threshold) or threshold <= 0:
        raise FigkitError("separability threshold must be a positive number",
                          field="threshold", value=threshold)
    sep = separability(hexes)
    messages = []
    for vision in VISIONS:
        d = sep.min_delta_e[vision]
        if d is not None and d < threshold:
            a, b = sep.closest[vision]
            where = "in greyscale" if vision == "grey" else f"under {vision} vision"
            messages.append(f"{a} and {b} differ by only {d:.1f} CIEDE2000 {where} "
                            f"(threshold {threshold:g})")
    return messages


# --------------------------------------------------------------------------- categories

def assign_categories(categories: Sequence, palette_name: str,
                      pinned: Mapping | None = None) -> dict:
    """Give each category a colour from a qualitative palette, stable across figures.

    ``categories`` is the full, project-wide order, so a category keeps its colour
    in every figure whatever subset a panel shows.  ``pinned`` maps category -> hex
    and wins; the unpinned categories take the palette colours in order, skipping
    any colour already pinned.
    """
    pal = get_palette(palette_name)
    if pal.kind != "qualitative":
        raise FigkitError("categories need a qualitative palette", field="palette",
                          value=palette_name,
                          allowed=[p.name for p in PALETTES.values() if p.kind == "qualitative"])
    if isinstance(categories, str) or not isinstance(categories, Iterable):
        raise FigkitError("categories must be a list", field="categories", value=categories)
    cats = list(categories)
    seen = set()
    for c in cats:
        if c in seen:
            raise FigkitError("category listed twice", field="categories", value=c)
        seen.add(c)
    pinned = dict(pinned or {})
    unknown = [k for k in pinned if k not in seen]
    if unknown:
        raise FigkitError("pinned category is not among the categories", field="pinned",
                          value=unknown[0], allowed=cats)
    pins = dict(zip(pinned, _normalise_hexes(list(pinned.values()))))
    clash = [h for h in set(pins.values()) if list(pins.values()).count(h) > 1]
    if clash:
        raise FigkitError("the same colour is pinned to two categories", field="pinned",
                          value=clash[0])
    free = [c for c in pal.colours if c not in set(pins.values())]
    todo = [c for c in cats if c not in pins]
    if len(todo) > len(free):
        counts = (f"{len(cats)} categories but palette '{pal.name}' holds "
                  f"{len(pal.colours)} colours" if not pins else
                  f"{len(todo)} unpinned categories (of {len(cats)}) but palette "
                  f"'{pal.name}' has {len(free)} of its {len(pal.colours)} colours left "
                  f"after the pinned ones")
        raise FigkitError(f"{counts}; split the field into panels (small multiples) "
                          f"rather than adding colours readers cannot tell apart",
                          field="colour")
    given = dict(zip(todo, free))
    return {c: pins[c] if c in pins else given[c] for c in cats}


# --------------------------------------------------------------------------- swatch sheet

def _save_atomic(fig, path: Path, **kwargs) -> None:
    """Write to a temporary file beside ``path`` and rename it into place (the same mechanism
    as every figure: :func:`figkit.provenance.atomic_outputs`)."""
    from .provenance import atomic_outputs
    with atomic_outputs([path]) as (tmp,):
        fig.savefig(tmp, **kwargs)


def _short_citation(source: str) -> str:
    """'Nuñez, Anderton & Renslow (2018), ...' -> 'Nuñez et al. (2018)'."""
    head = source.split(")")[0] + ")" if ")" in source else source
    authors, _, year = head.partition(" (")
    if "," in authors:
        authors = authors.split(",")[0] + " et al."
    return f"{authors} ({year}" if year else authors


def swatch_sheet(out_dir: str | os.PathLike, threshold: float = 10.0) -> list[Path]:
    """Draw every palette under each vision and write palettes.png (300 dpi) and .pdf.

    One block per palette (sequential ones sampled at 9 steps), one row per vision
    (normal, protan, deutan, tritan, grey) with that row's minimum pairwise
    CIEDE2000; rows under ``threshold`` (rule of thumb, common practice) are bold.
    Returns the paths written.
    """
    out = Path(out_dir)
    if out.exists() and not out.is_dir():
        raise FigkitError("output folder is a file", field="out_dir", value=str(out))
    out.mkdir(parents=True, exist_ok=True)

    import matplotlib
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure
    from matplotlib.patches import Rectangle

    blocks = []
    for pal in PALETTES.values():
        hexes = palette_colours(pal.name)
        rgb = hex_to_rgb(list(hexes))
        sep = separability(hexes)
        rows = [(v, _as_vision(rgb, v), sep.min_delta_e[v]) for v in VISIONS]
        blocks.append((pal, hexes, rows))

    # Geometry in inches: two columns of palette blocks, fixed-size cells.
    cell_w, cell_h, row_gap = 0.20, 0.13, 0.035
    label_w, value_w, margin, col_gap = 0.55, 0.55, 0.18, 0.30
    title_h, block_gap, header_h = 0.24, 0.16, 0.62
    max_n = max(len(h) for _, h, _ in blocks)
    col_w = label_w + max_n * cell_w + value_w
    block_h = title_h + len(VISIONS) * (cell_h + row_gap)
    per_col = -(-len(blocks) // 2)
    width = 2 * margin + 2 * col_w + col_gap
    height = header_h + per_col * block_h + (per_col - 1) * block_gap + margin

    fig = Figure(figsize=(width, height))
    FigureCanvasAgg(fig)
    ax = fig.add_axes((0, 0, 1, 1))
    ax.set_xlim(0, width)
    ax.set_ylim(height, 0)  # y grows downwards, in inches
    ax.set_axis_off()
    text = dict(fontsize=7, va="center", color="black")
    ax.text(margin, 0.17, "Palettes under simulated colour vision", fontsize=9,
            fontweight="bold", va="center")
    notes = ("Rows: normal vision; protan, deutan and tritan dichromacy simulated after "
             "Machado et al. (2009), severity 1; grey with the same CIE L*.",
             "Right: smallest CIEDE2000 between any two colours of the row, bold when "
             f"below {threshold:g} (a rule of thumb).")
    for k, line in enumerate(notes):
        ax.text(margin, 0.36 + 0.12 * k, line, fontsize=6, va="center", color="0.25")

    for b, (pal, hexes, rows) in enumerate(blocks):
        x0 = margin + (b // per_col) * (col_w + col_gap)
        y0 = header_h + (b % per_col) * (block_h + block_gap)
        cite = _short_citation(pal.source)
        sampled = " samples" if pal.kind == "sequential" else " colours"
        ax.text(x0, y0 + title_h / 2, pal.name, fontsize=8, fontweight="bold", va="center")
        ax.text(x0 + label_w + max_n * cell_w, y0 + title_h / 2,
                f"{pal.kind}, {len(hexes)}{sampled} · {cite}", fontsize=6,
                va="center", ha="right", color="0.3")
        ax.text(x0 + col_w, y0 + title_h / 2, "min ΔE₀₀", fontsize=6, va="center",
                ha="right", color="0.3")
        for r, (vision, rgb_v, d) in enumerate(rows):
            y = y0 + title_h + r * (cell_h + row_gap)
            ax.text(x0 + label_w - 0.06, y + cell_h / 2, vision, ha="right", **text)
            for k, colour in enumerate(rgb_v):
                ax.add_patch(Rectangle((x0 + label_w + k * cell_w, y), cell_w, cell_h,
                                       facecolor=colour, edgecolor="white", linewidth=0.4))
            ax.add_patch(Rectangle((x0 + label_w, y), len(hexes) * cell_w, cell_h,
                                   facecolor="none", edgecolor="0.6", linewidth=0.3))
            low = d is not None and d < threshold
            ax.text(x0 + col_w, y + cell_h / 2,
                    "–" if d is None else f"{d:.1f}", ha="right",
                    fontweight="bold" if low else "normal", **text)

    rc = {"pdf.fonttype": 42, "svg.fonttype": "none", "font.family": "DejaVu Sans"}
    png, pdf = out / "palettes.png", out / "palettes.pdf"
    with matplotlib.rc_context(rc):
        _save_atomic(fig, png, format="png", dpi=300, facecolor="white")
        _save_atomic(fig, pdf, format="pdf", facecolor="white",
                     metadata={"CreationDate": None})
    return [png, pdf]
