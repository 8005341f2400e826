"""Reading a scientist's own crater list (CSV, GeoPackage, Shapefile) into the DEM's CRS.

An edge module: it opens files. Everything it returns is a plain table: ``crater_id`` (the
user's id kept as text, or generated), ``x, y`` (centre in the DEM's CRS, map units) and
``diameter_m`` (rim diameter, ground metres). Rows that cannot be used are not dropped in
silence: ``bad_rows`` maps their row number to the reason, and the other rows are kept.

Row numbers are 1-based and count data rows (CSV: the first line after the header is row 1;
vector files: the first feature is row 1).
"""

from __future__ import annotations

import csv
import io
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pandas as pd
import pyproj

from ..errors import CraterListError

__all__ = ["CraterList", "read_crater_list", "flag_outside"]

_ID_NAMES = ("crater_id", "id", "name")
_XY_NAMES = (("center_x", "center_y"), ("x", "y"))
_LONLAT_NAMES = (("lon", "lat"), ("longitude", "latitude"))
_DIAM_M = ("diameter_m", "diam_m", "diameter", "diam")
_DIAM_KM = ("diameter_km", "diam_km")
_VECTOR = {".gpkg", ".shp"}
_FIX_COLUMNS = (
    "give columns center_x, center_y, diameter_m (centre in the DEM's map units, diameter in "
    "metres) or lon, lat, diameter_m (degrees); an id column (crater_id) is optional."
)


@dataclass(frozen=True)
class CraterList:
    """A crater list in the DEM's CRS.

    Attributes
    ----------
    craters : pandas.DataFrame
        ``crater_id`` (str), ``x, y`` (float, DEM CRS map units), ``diameter_m`` (float, m),
        ``source_row`` (int, 1-based row of the file).
    bad_rows : dict[int, str]
        Row number -> why the row was not used.
    """

    craters: pd.DataFrame
    bad_rows: dict = field(default_factory=dict)


def _pick(columns, names):
    low = {str(c).strip().lower(): c for c in columns}
    for n in names:
        if n in low:
            return low[n]
    return None


def _read_csv(path: Path) -> pd.DataFrame:
    try:
        text = path.read_bytes().decode("utf-8-sig", errors="replace")
    except OSError as err:
        raise CraterListError(f"cannot read the crater list ({err.strerror or err}).", path=path,
                              fix="check the path and the file's permissions.") from err
    first = text.split("\n", 1)[0]
    sep = max((",", ";", "\t"), key=first.count)
    try:
        df = pd.read_csv(io.StringIO(text), sep=sep, dtype=str, keep_default_na=False,
                         skipinitialspace=True, on_bad_lines="error", engine="python")
    except (pd.errors.ParserError, pd.errors.EmptyDataError, ValueError, csv.Error) as err:
        raise CraterListError(f"not a readable CSV table ({err}).", path=path,
                              fix="save the list as comma-separated text with one header line; "
                              + _FIX_COLUMNS) from err
    df.columns = [str(c).strip() for c in df.columns]
    return df


def _read_vector(path: Path):
    try:
        import geopandas as gpd

        gdf = gpd.read_file(path)
    except Exception as err:  # pyogrio raises several unrelated types for unreadable files
        raise CraterListError(f"not a readable vector file ({err}).", path=path,
                              fix="give a GeoPackage (.gpkg) or Shapefile (.shp) with point or "
                              "polygon features.") from err
    return gdf


def _numeric(df, col, bad, *, positive=False):
    """Column as float; NaN where bad, reason recorded per row (1-based)."""
    raw = df[col]
    val = pd.to_numeric(raw.astype(str).str.strip(), errors="coerce").to_numpy(float)
    for i in np.flatnonzero(~np.isfinite(val)):
        text = str(raw.iloc[i]).strip()
        why = f"{col} is missing" if text in ("", "nan", "None") else f"{col} {text!r} is not a finite number"
        bad.setdefault(i + 1, why)
    if positive:
        for i in np.flatnonzero(np.isfinite(val) & (val <= 0)):
            bad.setdefault(i + 1, f"{col} {val[i]:g} is not > 0")
    return val


def _geographic(dem_crs: pyproj.CRS | None, body, path) -> pyproj.CRS:
    if dem_crs is not None and dem_crs.geodetic_crs is not None:
        return dem_crs.geodetic_crs
    if body is not None:
        from ..bodies import get_body

        radius = get_body(body).radius_m if isinstance(body, str) else body.radius_m
        return pyproj.CRS.from_proj4(f"+proj=longlat +R={radius} +no_defs")
    raise CraterListError("lon/lat columns given but neither the DEM's CRS nor the body is known.",
                          path=path, fix="pass body= (e.g. 'moon') or use center_x, center_y.")


def _to_dem(x, y, src: pyproj.CRS, dem_crs: pyproj.CRS | None):
    if dem_crs is None or src == dem_crs:
        return x, y
    tr = pyproj.Transformer.from_crs(src, dem_crs, always_xy=True)
    with np.errstate(invalid="ignore"):
        return tr.transform(x, y, errcheck=False)


def _table_rows(df, path, dem_crs, body):
    """Centres, diameters and bad rows from a plain table (CSV or attribute table)."""
    bad: dict[int, str] = {}
    dcol = _pick(df.columns, _DIAM_M)
    kcol = _pick(df.columns, _DIAM_KM)
    xy = next((p for p in _XY_NAMES if _pick(df.columns, p[:1]) and _pick(df.columns, p[1:])), None)
    ll = next((p for p in _LONLAT_NAMES if _pick(df.columns, p[:1]) and _pick(df.columns, p[1:])),
              None)
    if (dcol is None and kcol is None) or (xy is None and ll is None):
        raise CraterListError(f"the columns {list(df.columns)[:12]} lack a centre or a diameter.",
                              path=path, fix=_FIX_COLUMNS)
    if xy is not None:
        x = _numeric(df, _pick(df.columns, xy[:1]), bad)
        y = _numeric(df, _pick(df.columns, xy[1:]), bad)
    else:
        lon = _numeric(df, _pick(df.columns, ll[:1]), bad)
        lat = _numeric(df, _pick(df.columns, ll[1:]), bad)
        for i in np.flatnonzero(np.isfinite(lat) & (np.abs(lat) > 90)):
            bad.setdefault(i + 1, f"latitude {lat[i]:g} is outside -90..90")
        x, y = _to_dem(lon, lat, _geographic(dem_crs, body, path), dem_crs)
    diam = (_numeric(df, dcol, bad, positive=True) if dcol is not None
            else 1000.0 * _numeric(df, kcol, bad, positive=True))
    return np.asarray(x, float), np.asarray(y, float), diam, bad


def _ids(df, n):
    col = _pick(df.columns, _ID_NAMES)
    if col is None:
        return np.array([f"L{i + 1:05d}" for i in range(n)], dtype=object)
    ids = df[col].astype(str).str.strip().to_numpy(dtype=object)
    # Blank ids are replaced by generated ones; the user's other ids are kept as given.
    return np.array([v if v not in ("", "nan", "None") else f"L{i + 1:05d}"
                     for i, v in enumerate(ids)], dtype=object)


def _vector_rows(gdf, path, dem_crs, body):
    src = gdf.crs if gdf.crs is not None else dem_crs
    geom = gdf.geometry
    kinds = set(geom.geom_type.dropna())
    if kinds and kinds <= {"Point"}:
        attrs = pd.DataFrame(gdf.drop(columns=gdf.geometry.name))
        if _pick(attrs.columns, _DIAM_M) is None and _pick(attrs.columns, _DIAM_KM) is None:
            raise CraterListError("point features have no diameter attribute.", path=path,
                                  fix="add a diameter_m attribute (metres) to the points.")
        attrs["center_x"] = geom.x.to_numpy()
        attrs["center_y"] = geom.y.to_numpy()
        x0, y0, diam, bad = _table_rows(attrs, path, None, body)
        x, y = _to_dem(x0, y0, src, dem_crs) if src is not None else (x0, y0)
        return np.asarray(x, float), np.asarray(y, float), diam, bad
    if kinds and kinds <= {"Polygon", "MultiPolygon"}:
        return _polygon_rows(gdf, src, path, dem_crs, body)
    raise CraterListError(f"features are {sorted(kinds) or 'empty'}; expected points or polygons.",
                          path=path, fix="give crater centres as points (with diameter_m) or "
                          "crater rims as polygons.")


def _polygon_rows(gdf, src, path, dem_crs, body):
    """Rim polygons -> centroid and area-equivalent diameter D = 2 sqrt(A / pi)."""
    bad: dict[int, str] = {}
    for i, g in enumerate(gdf.geometry):
        if g is None or g.is_empty:
            bad[i + 1] = "empty geometry"
    geog = _geographic(src if src is not None else dem_crs, body, path)
    ll = gdf.set_crs(src, allow_override=True).to_crs(geog) if src is not None else gdf
    cen = ll.geometry.representative_point()
    lon0, lat0 = float(np.nanmean(cen.x)), float(np.nanmean(cen.y))
    # Areas on an equal-area projection centred on the list: true ground area whatever the
    # list's or the DEM's CRS (a geographic CRS would give square degrees).
    laea = pyproj.CRS.from_proj4(f"+proj=laea +lat_0={lat0} +lon_0={lon0} "
                                 + _ellipsoid_terms(geog))
    eq = ll.to_crs(laea)
    area = eq.geometry.area.to_numpy(float)
    diam = 2.0 * np.sqrt(np.where(area > 0, area, np.nan) / np.pi)
    for i in np.flatnonzero(~(area > 0)):
        bad.setdefault(i + 1, "polygon has no area")
    cx, cy = eq.geometry.centroid.x.to_numpy(float), eq.geometry.centroid.y.to_numpy(float)
    x, y = _to_dem(cx, cy, laea, dem_crs if dem_crs is not None else laea)
    return np.asarray(x, float), np.asarray(y, float), diam, bad


def _ellipsoid_terms(geog: pyproj.CRS) -> str:
    ell = geog.ellipsoid
    return f"+a={ell.semi_major_metre} +b={ell.semi_minor_metre} +units=m +no_defs"


def read_crater_list(path, *, dem_crs, body=None) -> CraterList:
    """Read a crater list and bring it into the DEM's CRS.

    Parameters
    ----------
    path : str or Path
        ``.csv`` (or ``.txt``) with columns ``center_x, center_y, diameter_m`` (map units of the
        DEM's CRS) or ``lon, lat, diameter_m`` (degrees on the DEM's body); ``diameter_km`` is
        accepted instead of ``diameter_m``; an id column ``crater_id`` (or ``id``, ``name``) is
        kept. ``.gpkg`` or ``.shp``: points with a ``diameter_m`` attribute, or rim polygons
        (centroid and area-equivalent diameter), in any CRS (reprojected with pyproj).
        Vector files without a CRS are taken to be in the DEM's CRS.
    dem_crs : pyproj.CRS, str or None
        CRS of the DEM.
    body : str or Body, optional
        Body name, used for lon/lat when the DEM's CRS has no geographic counterpart.

    Returns
    -------
    CraterList

    Raises
    ------
    CraterListError
        Missing or unreadable file, no usable centre/diameter columns, or no usable row.
    """
    p = Path(path)
    if not p.is_file():
        raise CraterListError("crater list not found.", path=p,
                              fix="check the path; supported: .csv, .gpkg, .shp.")
    crs = None if dem_crs is None else pyproj.CRS.from_user_input(dem_crs)
    ext = p.suffix.lower()
    if ext in _VECTOR:
        table = _read_vector(p)
        x, y, diam, bad = _vector_rows(table, p, crs, body)
    elif ext in {".csv", ".txt", ""}:
        table = _read_csv(p)
        x, y, diam, bad = _table_rows(table, p, crs, body)
    else:
        raise CraterListError(f"unsupported file type {ext!r}.", path=p,
                              fix="give a .csv, .gpkg or .shp file.")
    n = len(table)
    for i in np.flatnonzero(~(np.isfinite(x) & np.isfinite(y))):
        bad.setdefault(i + 1, "centre cannot be placed in the DEM's CRS")
    ids = _ids(table.drop(columns=table.geometry.name) if ext in _VECTOR else table, n)
    ok = np.ones(n, dtype=bool)
    ok[[r - 1 for r in bad]] = False
    if n and not ok.any():
        raise CraterListError(f"none of the {n} rows is usable (first: row "
                              f"{min(bad)}: {bad[min(bad)]}).", path=p, fix=_FIX_COLUMNS,
                              bad_rows=bad)
    craters = pd.DataFrame({
        "crater_id": pd.Series(ids[ok], dtype=object).astype(str),
        "x": x[ok], "y": y[ok], "diameter_m": diam[ok],
        "source_row": np.flatnonzero(ok) + 1,
    })
    return CraterList(craters, dict(sorted(bad.items())))


def flag_outside(craters: pd.DataFrame, bounds) -> dict:
    """Rows whose centre lies outside ``bounds = (left, bottom, right, top)`` (DEM CRS).

    Returns
    -------
    dict
        ``crater_id -> reason`` for each centre outside the bounds.
    """
    left, bottom, right, top = (float(b) for b in bounds)
    x, y = craters["x"].to_numpy(float), craters["y"].to_numpy(float)
    out = ~((x >= min(left, right)) & (x <= max(left, right))
            & (y >= min(bottom, top)) & (y <= max(bottom, top)))
    return {str(c): "centre outside the DEM" for c in craters.loc[out, "crater_id"]}
