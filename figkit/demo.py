"""Invented demo data: a river-monitoring network of 24 sites in 4 catchments.

Everything here is made up for trying figkit out; the physics is approximate, for an
invented demo only.  Three CSV files are written:

* ``sites.csv``    one row per site (catchment, land use, altitude, distance, area);
* ``readings.csv`` regular sensor readings through one year (about hourly at scale 1:
  24 sites x 8760 = 210 240 rows) of temperature, dissolved oxygen, conductivity,
  discharge and turbidity, with sensor dropouts left as empty fields;
* ``surveys.csv``  invertebrate kick-sample counts per taxon group, 2022-2025.

Output depends only on ``seed`` and ``scale`` (never on the clock), so the same call writes
byte-identical files.  Run ``python -m figkit.demo OUT_DIR [--scale S] [--seed N]``.
"""
from __future__ import annotations

import argparse
import math
import numbers
import os
import sys
from pathlib import Path

import numpy as np
import pandas as pd
from scipy.signal import lfilter

from figkit.errors import FigkitError

__all__ = ["write_demo_data", "oxygen_saturation_mgl", "pressure_ratio", "main",
           "DEFAULT_SEED", "CATCHMENTS", "LAND_USES", "SEASONS", "TAXA"]

DEFAULT_SEED = 20261202
MAX_SCALE = 20.0
READINGS_PER_SITE = 8760      # one year of hourly readings at scale 1

# Invented catchments: (name, altitude of the source in m, altitude at the outlet in m,
# river length in km, land use of its six sites from source to outlet).
CATCHMENTS = (
    ("Hollin Beck", 420.0, 60.0, 38.0,
     ("forest", "forest", "forest", "pasture", "pasture", "urban")),
    ("Sallow Fen", 95.0, 4.0, 52.0,
     ("pasture", "arable", "arable", "arable", "urban", "urban")),
    ("Cragmoor Water", 310.0, 35.0, 30.0,
     ("forest", "forest", "pasture", "pasture", "arable", "urban")),
    ("Ketley Vale", 180.0, 12.0, 44.0,
     ("forest", "pasture", "arable", "arable", "urban", "urban")),
)
LAND_USES = ("forest", "pasture", "arable", "urban")
SEASONS = ("winter", "spring", "summer", "autumn")
_MONTH_SEASON = np.array([0, 0, 1, 1, 1, 2, 2, 2, 3, 3, 3, 0])    # Dec-Feb winter, ...
_MONTH_START = np.cumsum([0, 31, 28, 31, 30, 31, 30, 31, 31, 30, 31, 30])  # 365-day year

# Land-use effects (invented).  Shading keeps forest streams cooler, towns warmer;
# oxygen sits below saturation where there is more respiration, and the shortfall grows
# with temperature, so the DO-temperature slope differs a little between land uses.
_LU = pd.DataFrame({
    "temp_offset_c": [-0.8, 0.0, 0.3, 1.2],
    "do_fraction_10c": [1.00, 0.96, 0.93, 0.88],     # DO / saturation at 10 degC
    "do_fraction_per_c": [0.0, 0.005, 0.010, 0.016],  # its fall per degC above 10 degC
    "conductivity_uscm": [110.0, 260.0, 430.0, 620.0],
    "turbidity_ntu": [1.8, 4.5, 8.0, 6.0],
    "stress": [0.0, 0.35, 0.6, 1.0],                 # invertebrate stress index
}, index=list(LAND_USES))

# Invertebrate taxon groups: sensitivity class, mean count per kick sample at an unstressed
# site, log-change of that mean per unit of stress, and per-season multipliers.
TAXA = (
    ("mayflies", "sensitive", 38.0, -1.6, (0.8, 1.4, 1.0, 0.9)),
    ("stoneflies", "sensitive", 14.0, -2.2, (1.4, 1.3, 0.5, 0.9)),
    ("caddisflies", "sensitive", 22.0, -1.3, (0.8, 1.0, 1.0, 1.3)),
    ("shrimps", "sensitive", 45.0, -0.9, (0.9, 1.0, 1.1, 1.1)),
    ("beetles", "tolerant", 12.0, -0.2, (0.7, 1.0, 1.3, 1.0)),
    ("snails", "tolerant", 16.0, 0.6, (0.6, 1.0, 1.4, 1.1)),
    ("worms", "tolerant", 20.0, 1.5, (1.0, 1.0, 1.0, 1.0)),
    ("midges", "tolerant", 55.0, 1.2, (0.6, 1.1, 1.6, 0.9)),
)
SURVEY_YEARS = (2022, 2023, 2024, 2025)

# Sensor dropouts: share of readings lost, and the mean length of a dropout in hours.
_DROPOUT = {"turbidity_ntu": (0.04, 48.0), "dissolved_oxygen_mgl": (0.015, 24.0)}


# --------------------------------------------------------------------------- physics

def oxygen_saturation_mgl(temp_c, altitude_m=0.0):
    """Dissolved-oxygen saturation of fresh water in mg/L.

    ln C* = -139.34411 + 1.575701e5/T - 6.642308e7/T^2 + 1.243800e10/T^3 - 8.621949e11/T^4
    with T in kelvin (Benson & Krause 1984, Limnol. Oceanogr. 29:620-632, as printed in
    APHA Standard Methods 4500-O; coefficients from memory), about 14.6 mg/L at 0 degC and
    7.6 mg/L at 30 degC, then scaled by the air-pressure ratio of :func:`pressure_ratio`
    (Henry's law).  Approximate, for an invented demo.
    """
    t = np.asarray(temp_c, dtype=float) + 273.15
    ln_c = (-139.34411 + 1.575701e5 / t - 6.642308e7 / t ** 2 + 1.243800e10 / t ** 3
            - 8.621949e11 / t ** 4)
    return np.exp(ln_c) * pressure_ratio(altitude_m)


def pressure_ratio(altitude_m):
    """Air pressure at ``altitude_m`` over sea-level pressure.

    p / p0 = (1 - 2.25577e-5 h)^5.25588, h in metres (ICAO standard atmosphere, troposphere;
    from memory).  About 0.95 at 430 m.
    """
    h = np.asarray(altitude_m, dtype=float)
    return (1.0 - 2.25577e-5 * h) ** 5.25588


def _ar1(rng: np.random.Generator, shape: tuple[int, int], step_days: float,
         memory_days: float, sd: float) -> np.ndarray:
    """Stationary AR(1) noise along axis 1: x_t = phi x_(t-1) + sqrt(1 - phi^2) e_t.

    phi = exp(-step / memory), so the correlation time is the same at every scale.
    """
    phi = math.exp(-step_days / memory_days)
    start = rng.standard_normal((shape[0], 1))
    eps = rng.standard_normal(shape)
    x = lfilter([math.sqrt(1.0 - phi * phi)], [1.0, -phi], eps, axis=1, zi=phi * start)[0]
    return sd * x


def _dropouts(rng: np.random.Generator, n: int, share: float, mean_len: float) -> np.ndarray:
    """Missing-value mask made of runs: geometric run lengths, dropouts covering ``share``."""
    lost = max(1.0, mean_len)
    kept = lost * (1.0 - share) / share
    pairs = int(n / (lost + kept) * 2) + 16
    while True:
        runs = np.empty(2 * pairs, dtype=np.int64)
        runs[0::2] = rng.geometric(1.0 / kept, pairs)
        runs[1::2] = rng.geometric(1.0 / lost, pairs)
        if runs[1:].sum() >= n:      # enough even after starting inside the first run
            break
        pairs *= 2      # very rare; deterministic because it only draws more numbers
    offset = int(rng.integers(0, runs[0]))          # start somewhere inside a kept run
    state = np.tile([False, True], pairs)
    return np.repeat(state, runs)[offset:offset + n]


def _round_sig(x: np.ndarray, digits: int) -> np.ndarray:
    """Round positive values to ``digits`` significant figures (keeps discharge files small)."""
    x = np.asarray(x, dtype=float)
    decimals = digits - 1 - np.floor(np.log10(np.abs(np.where(x == 0, 1.0, x)))).astype(int)
    out = np.empty_like(x)
    for d in np.unique(decimals):      # a handful of distinct exponents
        sel = decimals == d
        out[sel] = np.round(x[sel], int(d))
    return out


# --------------------------------------------------------------------------- tables

def _sites(rng: np.random.Generator) -> pd.DataFrame:
    rows = []
    for name, top, bottom, length, uses in CATCHMENTS:
        k = len(uses)
        # Spread the sites along the river, a little irregularly, from near the source.
        frac = (np.arange(k) + 0.5) / k * np.exp(rng.normal(0.0, 0.1, k))
        dist = np.sort(np.clip(frac, 0.04, 0.98)) * length
        # Altitude falls faster near the source (concave long profile).
        alt = bottom + (top - bottom) * (1.0 - dist / length) ** 1.6 + rng.normal(0, 5, k)
        # Hack's law, L = 1.4 A^0.6 (Hack 1957, USGS Prof. Paper 294-B; from memory),
        # inverted for the area and given some scatter.
        area = (dist / 1.4) ** (1 / 0.6) * np.exp(rng.normal(0.0, 0.15, k))
        for i in range(k):
            rows.append((name, uses[i], max(1.0, round(alt[i])), round(dist[i], 1),
                         round(max(area[i], 0.5), 1)))
    df = pd.DataFrame(rows, columns=["catchment", "land_use", "altitude_m",
                                     "distance_to_source_km", "catchment_area_km2"])
    df.insert(0, "site", [f"S{i + 1:02d}" for i in range(len(df))])
    df["altitude_m"] = df["altitude_m"].astype(int)
    return df


def _readings(rng: np.random.Generator, sites: pd.DataFrame, scale: float) -> pd.DataFrame:
    n_sites = len(sites)
    n = max(24, round(READINGS_PER_SITE * scale))
    step = 365.0 / n
    t = (np.arange(n) + 0.5) * step                       # days since 1 January
    day = np.floor(t).astype(int) + 1
    month = np.searchsorted(_MONTH_START, day - 1, side="right")   # 1..12
    shape = (n_sites, n)
    lu = _LU.loc[sites["land_use"]].reset_index(drop=True)
    alt = sites["altitude_m"].to_numpy(float)[:, None]
    area = sites["catchment_area_km2"].to_numpy(float)[:, None]

    # Water temperature: annual cycle peaking in late July, cooler uphill (about the dry
    # lapse of air, 6.5 K/km, common practice), plus weather-like AR(1) noise.
    mean_t = 11.5 - 0.0065 * alt + lu["temp_offset_c"].to_numpy()[:, None] \
        + rng.normal(0.0, 0.3, (n_sites, 1))
    amp_t = 6.0 + rng.normal(0.0, 0.4, (n_sites, 1))
    temp = mean_t + amp_t * np.cos(2 * np.pi * (t - 205.0) / 365.0) \
        + _ar1(rng, shape, step, 6.0, 1.0)
    temp = np.clip(temp, 0.0, None)

    # Discharge: log-normal about a median set by the area (about 0.012 m3/s per km2),
    # high in winter, low in late summer.
    log_q = np.log(0.012 * area) + 0.6 * np.cos(2 * np.pi * (t - 25.0) / 365.0) \
        + _ar1(rng, shape, step, 4.0, 0.55)
    q = np.exp(log_q)
    q_rel = np.exp(log_q - np.median(log_q, axis=1, keepdims=True))

    # Dissolved oxygen: saturation at the water temperature and site pressure, times a
    # land-use fraction that falls with temperature.
    frac = lu["do_fraction_10c"].to_numpy()[:, None] \
        - lu["do_fraction_per_c"].to_numpy()[:, None] * (temp - 10.0) \
        + _ar1(rng, shape, step, 1.0, 0.025)
    oxygen = np.clip(oxygen_saturation_mgl(temp, alt) * frac, 0.5, None)

    # Conductivity: land-use baseline, diluted at high flow.
    cond = lu["conductivity_uscm"].to_numpy()[:, None] * np.exp(rng.normal(0, 0.12, (n_sites, 1))) \
        * q_rel ** -0.18 * np.exp(_ar1(rng, shape, step, 2.0, 0.05))
    # Turbidity: rises with flow; noisy.
    turb = lu["turbidity_ntu"].to_numpy()[:, None] * q_rel ** 0.85 \
        * np.exp(rng.normal(0.0, 0.4, shape))

    cols = {
        "water_temp_c": np.round(temp, 1),
        "dissolved_oxygen_mgl": np.round(oxygen, 2),
        "conductivity_uscm": np.round(cond).astype(np.int64),
        "discharge_m3s": _round_sig(q, 3),
        "turbidity_ntu": np.round(np.clip(turb, 0.1, None), 1),
    }
    for name, (share, hours) in _DROPOUT.items():
        mask = np.stack([_dropouts(rng, n, share, hours * scale) for _ in range(n_sites)])
        cols[name] = np.where(mask, np.nan, cols[name])

    def repeat(values) -> np.ndarray:      # one site value for each of its n readings
        return np.repeat(np.asarray(values), n)

    season = np.asarray(SEASONS)[_MONTH_SEASON[month - 1]]
    df = pd.DataFrame({
        "site": repeat(sites["site"]),
        "catchment": repeat(sites["catchment"]),
        "land_use": repeat(sites["land_use"]),
        "day_of_year": np.tile(day, n_sites),
        "month": np.tile(month, n_sites),
        "season": np.tile(season, n_sites),
    })
    for name, values in cols.items():
        df[name] = values.reshape(-1)
    return df


def _surveys(rng: np.random.Generator, sites: pd.DataFrame, scale: float) -> pd.DataFrame:
    reps = max(1, round(2 * scale))          # kick samples per site visit
    n_sites, n_taxa = len(sites), len(TAXA)
    stress = _LU.loc[sites["land_use"], "stress"].to_numpy() + rng.normal(0, 0.08, n_sites)
    urban = (sites["land_use"] == "urban").to_numpy()
    site_effect = rng.normal(0.0, 0.25, (n_sites, n_taxa))

    base = np.array([t[2] for t in TAXA])
    slope = np.array([t[3] for t in TAXA])
    by_season = np.array([t[4] for t in TAXA])              # taxa x seasons
    sensitive = np.array([t[1] == "sensitive" for t in TAXA])

    # Axes: year, season, site, replicate, taxon.
    y = np.arange(len(SURVEY_YEARS))[:, None, None, None, None]
    mean = (base * np.exp(slope * stress[:, None] + site_effect))[None, None, :, None, :] \
        * by_season.T[None, :, None, None, :]
    # Urban streams recover slowly over the survey years (sensitive taxa only).
    recovery = np.exp(0.08 * y * (urban[:, None] & sensitive)[None, None, :, None, :])
    mean = np.broadcast_to(mean * recovery, (len(SURVEY_YEARS), len(SEASONS), n_sites,
                                            reps, n_taxa))
    k = 1.2                                   # negative-binomial clumping of kick samples
    counts = rng.negative_binomial(k, k / (k + mean))

    grid = np.indices(counts.shape).reshape(5, -1)
    iy, iseason, isite, irep, itaxon = grid
    return pd.DataFrame({
        "site": sites["site"].to_numpy()[isite],
        "catchment": sites["catchment"].to_numpy()[isite],
        "land_use": sites["land_use"].to_numpy()[isite],
        "year": np.asarray(SURVEY_YEARS)[iy],
        "season": np.asarray(SEASONS)[iseason],
        "replicate": irep + 1,
        "taxon_group": np.asarray([t[0] for t in TAXA])[itaxon],
        "sensitivity": np.asarray([t[1] for t in TAXA])[itaxon],
        "count": counts.reshape(-1).astype(np.int64),
    })


def _write_csv(df: pd.DataFrame, path: Path) -> None:
    """Write through a temporary file in the same folder, then rename (atomic on POSIX)."""
    tmp = path.with_name(f".{path.name}.{os.getpid()}.tmp")
    try:
        with open(tmp, "w", encoding="utf-8", newline="") as fh:
            df.to_csv(fh, index=False, lineterminator="\n", na_rep="")
        os.replace(tmp, path)
    except BaseException:
        if os.path.exists(tmp):
            os.unlink(tmp)
        raise


def check_scale(scale) -> None:
    """The demo's size factor: a number, 0 < scale <= MAX_SCALE (else a one-line error)."""
    if isinstance(scale, bool) or not isinstance(scale, numbers.Real) \
            or not math.isfinite(scale) or not 0 < scale <= MAX_SCALE:
        raise FigkitError(f"demo: scale must be a number above 0 and at most {MAX_SCALE:g}",
                          field="scale", value=scale,
                          allowed=f"0 < scale <= {MAX_SCALE:g}")


def write_demo_data(out_dir, scale: float = 1.0, seed: int = DEFAULT_SEED) -> dict[str, Path]:
    """Write ``sites.csv``, ``readings.csv`` and ``surveys.csv`` into ``out_dir``.

    ``scale`` multiplies the number of readings per site (8760 at scale 1, at least 24)
    and sets the number of kick samples per visit (2 at scale 1, at least 1); the sites
    never change.  The same ``seed`` and ``scale`` always give byte-identical files.
    Returns ``{"sites": path, "readings": path, "surveys": path}``.
    """
    check_scale(scale)
    if isinstance(seed, bool) or not isinstance(seed, (int, np.integer)) or seed < 0:
        raise FigkitError("demo: seed must be a whole number, 0 or more", field="seed",
                          value=seed)
    out = Path(out_dir)
    if out.exists() and not out.is_dir():
        raise FigkitError("demo: the output path is a file, not a folder", value=str(out))
    out.mkdir(parents=True, exist_ok=True)

    # Independent streams per table, so the site table does not depend on the scale.
    site_rng, reading_rng, survey_rng = np.random.default_rng(int(seed)).spawn(3)
    sites = _sites(site_rng)
    tables = {"sites": sites, "readings": _readings(reading_rng, sites, float(scale)),
              "surveys": _surveys(survey_rng, sites, float(scale))}
    paths = {}
    for name, df in tables.items():
        paths[name] = out / f"{name}.csv"
        _write_csv(df, paths[name])
    return paths


def main(argv: list[str] | None = None) -> int:
    """Command line: ``python -m figkit.demo OUT_DIR [--scale S] [--seed N]``."""
    parser = argparse.ArgumentParser(
        prog="python -m figkit.demo",
        description="Write the invented river-monitoring demo data (sites, readings, "
                    "surveys) as CSV files.",
        formatter_class=argparse.RawDescriptionHelpFormatter,
        epilog="example:\n  python -m figkit.demo data --scale 0.05")
    parser.add_argument("out_dir", help="folder to write the CSV files into")
    parser.add_argument("--scale", type=float, default=1.0,
                        help="size of the readings table relative to the full demo, "
                             f"0 < S <= {MAX_SCALE:g} (1 gives 210 240 rows; 0.01 is quick for tests)")
    parser.add_argument("--seed", type=int, default=DEFAULT_SEED,
                        help=f"random seed (default {DEFAULT_SEED})")
    args = parser.parse_args(argv)
    try:
        paths = write_demo_data(args.out_dir, scale=args.scale, seed=args.seed)
    except FigkitError as err:
        print(f"figkit: error: {err}", file=sys.stderr)
        return 2
    for name, path in paths.items():
        print(f"{name}: {path}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
