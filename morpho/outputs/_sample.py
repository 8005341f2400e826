"""A synthetic survey that fills every dictionary column, for tests and benchmarks.

The values are plausible in range and type but carry no science: diameters follow
a cumulative power law of index -2 (a flat R-plot), depths scale as 0.15 D, and
every other column gets values of its declared dtype. Columns added to the
dictionary later are filled automatically, so writers are always exercised on the
full schema.
"""

from __future__ import annotations

import geopandas as gpd
import numpy as np
import pandas as pd
import shapely

from .. import dictionary

__all__ = ["SAMPLE_CRS", "sample_craters", "sample_population", "sample_chains", "sample_envelope"]

#: Local stereographic projection on a lunar-radius sphere (invented scene "Brannock Plain").
SAMPLE_CRS = "+proj=stere +lat_0=12 +lon_0=31 +R=1737400 +units=m +no_defs +type=crs"

_VERDICTS = ("impact", "discharge", "neither", "undecided")


def _column(field, n: int, rng: np.random.Generator, base: dict[str, np.ndarray]):
    name, dtype = field.name, field.dtype
    if name in base:
        return base[name]
    if name.endswith("_err"):
        ref = base.get(name[:-4])
        return (np.abs(ref) * 0.05 if ref is not None else rng.uniform(0.0, 0.1, n)) + 1e-3
    if dtype == "str":
        if name == "verdict":
            return rng.choice(_VERDICTS, n).astype(object)
        if name == "measure_status":
            return np.full(n, "ok", dtype=object)
        return np.array([f"{name}-{i % 7}" for i in range(n)], dtype=object)
    if dtype == "bool":
        return rng.random(n) < 0.5
    if dtype == "int64":
        return rng.integers(0, 10, n).astype(np.int64)
    d = base["diameter_m"]
    if name.endswith("_over_D"):
        return rng.uniform(0.05, 0.22, n) * (0.2 if name.startswith("h_") else 1.0)
    if field.unit == "m" and "depth" in name:
        return d * rng.uniform(0.08, 0.2, n)
    if field.unit == "m":
        return d * rng.uniform(0.02, 0.05, n)
    if field.unit == "degree" or name.endswith("_deg"):
        return rng.uniform(5.0, 35.0, n)
    return rng.uniform(0.0, 1.0, n)


def sample_craters(n: int = 200, *, seed: int = 0, extent_m: float = 100_000.0,
                   quad_segs: int = 8) -> gpd.GeoDataFrame:
    """A crater table with every column of :data:`morpho.dictionary.CRATER_FIELDS`.

    Parameters
    ----------
    n : int
        Number of craters (0 gives the empty table with the full schema).
    seed : int
        Seed of the generator.
    extent_m : float
        Side of the square scene (m).
    quad_segs : int
        Segments per quarter circle of each rim outline.

    Returns
    -------
    geopandas.GeoDataFrame
        Circular rim outlines in :data:`SAMPLE_CRS`.
    """
    rng = np.random.default_rng(seed)
    # inverse-CDF draw of N(>=D) ~ D^-2 above 200 m, capped at 20 km
    diameter = np.minimum(200.0 * rng.random(n) ** -0.5, 20_000.0)
    x = rng.uniform(0.0, extent_m, n)
    y = rng.uniform(0.0, extent_m, n)
    base = {
        "crater_id": np.array([f"c{i:06d}" for i in range(n)], dtype=object),
        "center_x": x,
        "center_y": y,
        "lon": 31.0 + x / 30_000.0,
        "lat": 12.0 + y / 30_000.0,
        "diameter_m": diameter,
        "p_impact": rng.beta(2.0, 1.0, n),
        "source_tile": np.full(n, "(0, 0)", dtype=object),
    }
    cols = {}
    for f in dictionary.CRATER_FIELDS:
        cols[f.name] = _column(f, n, rng, base)
        base.setdefault(f.name, cols[f.name])
    frame = pd.DataFrame(cols)
    geom = shapely.buffer(shapely.points(x, y), diameter / 2.0, quad_segs=quad_segs)
    return gpd.GeoDataFrame(frame, geometry=geom, crs=SAMPLE_CRS)


def sample_population() -> pd.DataFrame:
    """A small population-statistics table in the contract's long form."""
    return pd.DataFrame({
        "statistic": ["n_craters", "clark_evans_R", "sfd_slope_ml"],
        "value": [200.0, 1.02, -2.0],
        "p_value": [np.nan, 0.61, np.nan],
        "n": [200, 200, 150],
        "method": ["count", "Clark-Evans with Donnelly edge correction", "maximum likelihood"],
        "reference": ["common practice", "Clark & Evans 1954, Ecology 35:445",
                      "Clauset, Shalizi & Newman 2009, SIAM Rev. 51:661"],
    })


def sample_chains(crs=SAMPLE_CRS) -> gpd.GeoDataFrame:
    """Two crater chains as lines."""
    lines = [shapely.LineString([(1000, 1000), (5000, 5200), (9000, 9100)]),
             shapely.LineString([(20000, 3000), (26000, 3500)])]
    return gpd.GeoDataFrame({"chain_id": np.array([1, 2], dtype=np.int64),
                             "n_craters": np.array([3, 2], dtype=np.int64)},
                            geometry=lines, crs=crs)


def sample_envelope() -> pd.DataFrame:
    """Besag's L(r) near CSR (L = r) with a symmetric simulation envelope."""
    r = np.linspace(500.0, 20_000.0, 40)
    half = 0.05 * r + 200.0
    return pd.DataFrame({"r_m": r, "L_m": r * 1.02, "L_low_m": r - half, "L_high_m": r + half,
                         "L_mean_m": r})
