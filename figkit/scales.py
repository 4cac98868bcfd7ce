"""Axis scales: linear, log10 and a symmetric log, applied by transforming the values.

A row asks for a scale with the options ``x_scale`` / ``y_scale`` (``linear``, ``log10``,
``signed-log``) and, for the symmetric log, ``threshold`` (its linear threshold C, in data units).
The values of a scaled field are *replaced by their transform* once, after the panels are split
and before any chart kind sees them; every statistic is therefore computed in the space the axis
draws (hexagon lattices, 2-D counts, bins, densities, trend fits, box statistics), and the axis
gets ticks at powers of ten labelled with the untransformed values.

* log10: t = log10(v).  Values v <= 0 have no logarithm: they are counted per panel, dropped
  from that panel and named in the cautions with their share (never clipped to a small number).
* signed-log: the bi-symmetric log transform of Webber (2012, Meas. Sci. Technol. 24, 027001),
  t = sign(v) * log10(1 + |v| / C).  It keeps zeros and negatives; for |v| well below C it is
  nearly linear (t ~ v / (C ln 10)), for |v| well above C nearly logarithmic
  (t ~ sign(v) (log10|v| - log10 C)).  C is the row's ``threshold`` (default 1).
"""
from __future__ import annotations

import numpy as np

SCALES = ("linear", "log10", "signed-log")
DEFAULT_THRESHOLD = 1.0


def axis_scales(spec) -> dict:
    """role ('x'/'y') -> (scale name, field) for the axes with a non-linear scale."""
    out = {}
    for role in ("x", "y"):
        name = spec.options.get(f"{role}_scale", "linear")
        fld = getattr(spec, role)
        if name != "linear" and fld and getattr(spec.chart, role) == "numeric":
            out[role] = (name, fld)
    return out


def forward(v, scale: str, threshold: float = DEFAULT_THRESHOLD) -> np.ndarray:
    v = np.asarray(v, dtype=float)
    if scale == "log10":
        with np.errstate(divide="ignore", invalid="ignore"):
            return np.log10(v)
    if scale == "signed-log":
        return np.sign(v) * np.log10(1.0 + np.abs(v) / threshold)
    return v


def inverse(t, scale: str, threshold: float = DEFAULT_THRESHOLD) -> np.ndarray:
    t = np.asarray(t, dtype=float)
    if scale == "log10":
        return 10.0 ** t
    if scale == "signed-log":
        return np.sign(t) * threshold * (10.0 ** np.abs(t) - 1.0)
    return t


def describe(scale: str, threshold: float) -> str:
    if scale == "log10":
        return "log10(value)"
    if scale == "signed-log":
        return f"sign(value) * log10(1 + |value| / {threshold:g}) (symmetric log, Webber 2012)"
    return "value"


def apply_scales(spec, data) -> None:
    """Transform the scaled fields of every panel in place of the raw values; drop (and count)
    values a log10 axis cannot show.  Adds ``data.scales`` (the sidecar's record) and cautions."""
    scales = axis_scales(spec)
    data.scales = {}
    if not scales:
        return
    c = float(spec.options.get("threshold", DEFAULT_THRESHOLD))
    dropped_total = {}
    for p in data.panels:
        if p.tally is not None:      # never streamed (data.should_stream); guard anyway
            continue
        frame = p.frame
        keep = np.ones(len(frame), dtype=bool)
        lost = {}
        for role, (name, fld) in scales.items():
            v = frame[fld].to_numpy(dtype=float)
            if name == "log10":
                bad = ~(v > 0)
                if bad.any():
                    lost[fld] = int(bad.sum())
                    keep &= ~bad
        new = {fld: forward(frame[fld].to_numpy(dtype=float), name, c)
               for role, (name, fld) in scales.items()}
        frame = frame.assign(**new)
        if not keep.all():
            frame = frame.loc[keep]
        p.frame = frame
        p.scale_dropped = lost
        for fld, n in lost.items():
            dropped_total[fld] = dropped_total.get(fld, 0) + n
    total = sum(p.n for p in data.panels) + sum(sum(getattr(p, "scale_dropped", {}).values())
                                                for p in data.panels)
    for fld, n in dropped_total.items():
        share = 100.0 * n / total if total else 0.0
        data.notes.append(f"log10 axis: {n} of {total} rows ({share:.1f}%) have '{fld}' <= 0, which "
                          "has no logarithm; they are not drawn (scale_dropped per panel); "
                          "x_scale/y_scale=signed-log keeps zeros and negatives")
    for role, (name, fld) in scales.items():
        data.scales[role] = {"field": fld, "scale": name, "drawn_as": describe(name, c),
                             "threshold": c if name == "signed-log" else None,
                             "dropped": dropped_total.get(fld, 0),
                             "numbers_in": f"the transformed space: statistics of '{fld}' in this "
                                           "sidecar and the stats and values files are of "
                                           + describe(name, c)}
        if name == "signed-log":
            data.notes.append(f"symmetric log axis for '{fld}': nearly linear for |value| below "
                              f"about {c:g} (threshold), logarithmic above; distances across the "
                              "threshold do not read as ratios")


def ticks(lo: float, hi: float, scale: str, threshold: float = DEFAULT_THRESHOLD):
    """(major positions, labels, minor positions) in transformed units for a view [lo, hi].
    Majors at powers of ten (and 0 for signed-log), minors at 2..9 times them.  When a view holds
    fewer than two powers of ten, 2x and 5x multiples are labelled too."""
    if hi < lo:
        lo, hi = hi, lo
    values = []
    if scale == "log10":
        k0, k1 = int(np.floor(lo)) - 1, int(np.ceil(hi)) + 1
        decades = [10.0 ** k for k in range(k0, k1 + 1)]
    else:   # signed-log: decades from the threshold's order upwards, on both sides of zero
        top = max(abs(inverse(lo, scale, threshold)), abs(inverse(hi, scale, threshold)), threshold)
        k0 = int(np.floor(np.log10(threshold))) - 1
        k1 = int(np.ceil(np.log10(top))) + 1
        decades = [10.0 ** k for k in range(k0, k1 + 1)]
    pos = []
    for d in decades:
        pos.append(d)
    minors_v = [m * d for d in decades for m in range(2, 10)]
    if scale == "signed-log":     # inside the linear zone (|v| < C) only 0 is marked
        pos = [d for d in pos if d >= threshold]
        minors_v = [m for m in minors_v if m >= threshold]
        values = [0.0] + pos + [-d for d in pos]
        minors_v = minors_v + [-m for m in minors_v]
    else:
        values = pos
    eps = 1e-9 * max(1.0, hi - lo)

    def inside(vals):
        t = forward(np.array(vals, dtype=float), scale, threshold)
        return [(float(a), v) for a, v in zip(t, vals) if lo - eps <= a <= hi + eps]
    major = inside(values)
    if scale == "signed-log":          # keep majors at least 0.3 transformed units apart
        thinned = []
        for a, v in sorted(major):
            if not thinned or a - thinned[-1][0] >= 0.3:
                thinned.append((a, v))
        major = thinned
    if len(major) < 2:
        extra = inside([m * d for d in decades for m in (2, 5)]
                       + ([-m * d for d in decades for m in (2, 5)] if scale == "signed-log" else []))
        major = sorted(set(major) | set(extra))
    minor = [a for a, v in inside(minors_v) if all(abs(a - b) > eps for b, _ in major)]
    return [a for a, _ in major], [label(v) for _, v in major], minor


def label(v: float) -> str:
    """A tick label as a plain number: 0.001, 0.1, 1, 10, 1000, 100000; 1e6 beyond."""
    if v == 0:
        return "0"
    a = abs(v)
    if 1e-4 <= a < 1e6:
        text = f"{v:.{max(0, -int(np.floor(np.log10(a))))}f}"
        return text
    return f"{v:.0e}".replace("e+0", "e").replace("e-0", "e-").replace("e+", "e")


def set_axis_ticks(ax, role: str, scale: str, threshold: float) -> None:
    from matplotlib.ticker import FixedFormatter, FixedLocator, NullFormatter
    axis = ax.xaxis if role == "x" else ax.yaxis
    lo, hi = ax.get_xlim() if role == "x" else ax.get_ylim()
    major, labels, minor = ticks(lo, hi, scale, threshold)
    axis.set_major_locator(FixedLocator(major))
    axis.set_major_formatter(FixedFormatter(labels))
    axis.set_minor_locator(FixedLocator(minor))
    axis.set_minor_formatter(NullFormatter())
