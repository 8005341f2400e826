"""The work done on one tile: read its window, detect (or place given craters), measure.

A tile job opens the DEM itself and reads only its own window, so nothing large
is shipped to Dask workers. It returns a plain :class:`pandas.DataFrame` whose
positions are already in the source CRS and lengths in ground metres, holding
only the craters whose centre lies in the tile's core (each crater is owned by
exactly one tile).
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
import pandas as pd
import shapely
from threadpoolctl import threadpool_limits

from ..ingest import DemInfo, DemTile, TileSpec, read_tile

__all__ = ["TileParams", "survey_tile", "measure_tile", "outline_wkb"]

#: vertices of a rim outline polygon
OUTLINE_VERTICES = 64


@dataclass(frozen=True)
class TileParams:
    """Parameters shared by every tile job (all picklable).

    Attributes
    ----------
    min_diameter_px, max_diameter_px : float
        Diameter range searched, in pixels of the local metric grid.
    n_azimuths : int
        Radial profiles per crater.
    n_boot : int
        Bootstrap resamples for uncertainties.
    seed : int
        Base seed; tile ``i`` uses ``seed + i`` so results do not depend on scheduling.
    fail_tiles : tuple of int
        Tile indices made to raise (tests of the retry/failure path only).
    """

    min_diameter_px: float = 8.0
    max_diameter_px: float | None = None
    n_azimuths: int = 64
    n_boot: int = 30
    seed: int = 0
    fail_tiles: tuple = field(default_factory=tuple)


def outline_wkb(tile: DemTile, rows, cols, radius_px, factor=None) -> list[bytes]:
    """Rim outline polygons in the source CRS, as WKB.

    Parameters
    ----------
    tile : DemTile
    rows, cols, radius_px : array_like, shape (n,)
        Refined centre and mean rim radius in grid pixels.
    factor : ndarray, shape (n, OUTLINE_VERTICES), optional
        Rim radius at each outline vertex relative to the mean (1 = circle).
    """
    rows = np.asarray(rows, float)
    cols = np.asarray(cols, float)
    radius_px = np.asarray(radius_px, float)
    n = rows.size
    if n == 0:
        return []
    theta = np.linspace(0, 2 * np.pi, OUTLINE_VERTICES, endpoint=False)
    factor = np.ones((n, OUTLINE_VERTICES)) if factor is None else np.asarray(factor, float)
    rr = rows[:, None] - radius_px[:, None] * factor * np.sin(theta)[None, :]
    cc = cols[:, None] + radius_px[:, None] * factor * np.cos(theta)[None, :]
    x, y = tile.to_source(rr.ravel(), cc.ravel())
    x = np.asarray(x).reshape(n, OUTLINE_VERTICES)
    y = np.asarray(y).reshape(n, OUTLINE_VERTICES)
    ring = np.stack([x, y], axis=-1)
    ring = np.concatenate([ring, ring[:, :1]], axis=1)
    polys = shapely.polygons(ring)
    return list(shapely.to_wkb(polys))


def _finish(tile: DemTile, meas: pd.DataFrame, extra: pd.DataFrame) -> pd.DataFrame:
    """Attach positions in the source CRS, lon/lat, outline and tile key to measured craters."""
    rows = meas["row"].to_numpy(float)
    cols = meas["col"].to_numpy(float)
    x, y = tile.to_source(rows, cols)
    lon, lat = tile.to_lonlat(rows, cols)
    out = meas.copy()
    out.insert(0, "center_x", np.asarray(x, float))
    out.insert(1, "center_y", np.asarray(y, float))
    out.insert(2, "lon", np.asarray(lon, float))
    out.insert(3, "lat", np.asarray(lat, float))
    for col in extra.columns:
        out[col] = extra[col].to_numpy()
    out["source_tile"] = tile.spec.key
    ok = np.isfinite(rows) & np.isfinite(cols) & np.isfinite(meas["radius_px"].to_numpy(float))
    wkb = [None] * len(out)
    idx = np.flatnonzero(ok)
    for i, g in zip(idx, outline_wkb(tile, rows[ok], cols[ok], meas["radius_px"].to_numpy(float)[ok]), strict=True):
        wkb[i] = g
    out["rim_wkb"] = wkb
    return out.reset_index(drop=True)


def _measure(tile: DemTile, rows, cols, radius_px, params: TileParams) -> pd.DataFrame:
    from ..morphometry import measure_craters

    spacing = tile.ground_spacing_m(rows, cols)
    return measure_craters(
        tile.z, spacing, rows, cols, radius_px,
        n_azimuths=params.n_azimuths, n_boot=params.n_boot, seed=params.seed + tile.spec.index,
        refine=True, body=tile.body,
    )


def survey_tile(info: DemInfo, spec: TileSpec, params: TileParams) -> pd.DataFrame:
    """Detect and measure the craters owned by one tile.

    BLAS runs single-threaded inside a tile, as in Dask workers: tiles are the
    unit of parallelism, and nested BLAS threads would only oversubscribe cores.

    Returns
    -------
    pandas.DataFrame
        One row per crater whose refined centre lies in the tile core.
    """
    with threadpool_limits(limits=1):
        return _survey_tile(info, spec, params)


def _survey_tile(info: DemInfo, spec: TileSpec, params: TileParams) -> pd.DataFrame:
    from ..detection import detect_craters

    if spec.index in params.fail_tiles:
        raise RuntimeError(f"tile {spec.key} made to fail on purpose (test hook)")
    tile = read_tile(info, spec)
    if not np.isfinite(tile.z).any():
        return pd.DataFrame()
    cand = detect_craters(
        tile.z, tile.spacing_m,
        min_diameter_px=params.min_diameter_px, max_diameter_px=params.max_diameter_px,
        region=tile.core_box(),
    )
    if len(cand) == 0:
        return pd.DataFrame()
    rows = cand["row"].to_numpy(float)
    cols = cand["col"].to_numpy(float)
    # Ownership by core is decided on the detected centre; refinement moves centres by < R.
    keep = tile.in_core(rows, cols)
    cand = cand.loc[keep].reset_index(drop=True)
    if len(cand) == 0:
        return pd.DataFrame()
    meas = _measure(tile, cand["row"].to_numpy(float), cand["col"].to_numpy(float),
                    cand["radius_px"].to_numpy(float), params)
    extra = pd.DataFrame({"detection_confidence": cand["detection_confidence"].to_numpy(float)})
    if "detection_confidence" in meas.columns:
        meas = meas.drop(columns=["detection_confidence"])
    return _finish(tile, meas, extra)


def measure_tile(info: DemInfo, spec: TileSpec, craters: pd.DataFrame, params: TileParams) -> pd.DataFrame:
    """Measure user-supplied craters (columns ``crater_id, x, y, diameter_m`` in the source CRS).

    Only craters whose centre falls in this tile's core are measured here (BLAS
    single-threaded, as in :func:`survey_tile`).
    """
    with threadpool_limits(limits=1):
        return _measure_tile(info, spec, craters, params)


def _measure_tile(info: DemInfo, spec: TileSpec, craters: pd.DataFrame, params: TileParams) -> pd.DataFrame:
    tile = read_tile(info, spec)
    x = craters["x"].to_numpy(float)
    y = craters["y"].to_numpy(float)
    rows, cols = tile.from_source(x, y)
    rows = np.asarray(rows, float)
    cols = np.asarray(cols, float)
    own = tile.in_core(rows, cols)
    sub = craters.loc[own].reset_index(drop=True)
    if len(sub) == 0:
        return pd.DataFrame()
    rows, cols = rows[own], cols[own]
    radius_px = sub["diameter_m"].to_numpy(float) / 2.0 / tile.ground_spacing_m(rows, cols)
    meas = _measure(tile, rows, cols, radius_px, params)
    extra = pd.DataFrame({"crater_id": sub["crater_id"].astype(str).to_numpy(),
                          "detection_confidence": np.full(len(sub), np.nan)})
    return _finish(tile, meas, extra)
