"""Shape every table to the data dictionary before it is written.

Column order, dtypes and the rule "every written column is documented" come from
:mod:`morpho.dictionary`; nothing here lists columns a second time.
"""

from __future__ import annotations

import json

import geopandas as gpd
import numpy as np
import pandas as pd
import shapely

from .. import dictionary
from ..errors import InputError

__all__ = [
    "POPULATION_COLUMNS",
    "conform_craters",
    "conform_population",
    "conform_chains",
    "conform_envelope",
    "ENVELOPE_DTYPES",
    "conform_footprint",
    "run_table",
    "restore_dtypes",
]

#: pandas dtype for each dictionary dtype; "str" is pandas' own string dtype, the one
#: pyogrio gives back on read, so a written table and its read-back compare equal.
_PANDAS_DTYPE = {"float64": "float64", "int64": "int64", "bool": "bool", "str": "str"}

#: Columns of the ``population`` layer when the population section of the dictionary
#: declares none (module contract in DEVELOPERS.md).
POPULATION_COLUMNS = ("statistic", "value", "p_value", "n", "method", "reference")
_POPULATION_DTYPES = {"statistic": "str", "value": "float64", "p_value": "float64", "n": "int64",
                      "method": "str", "reference": "str"}
#: Columns of the ``ripley_l`` layer: Besag's L(r) with the CSR simulation envelope,
#: as returned in ``PopulationResult.envelope`` (all metres).
ENVELOPE_DTYPES = {f.name: f.dtype for f in dictionary.ENVELOPE_FIELDS}
_DICT_FIX = "declare the column in morpho/dictionary/_<section>.py or drop it before writing"


def _cast(df: pd.DataFrame, dtypes: dict[str, str], *, path, table: str) -> pd.DataFrame:
    out = {}
    for name in df.columns:
        if name not in dtypes:
            out[name] = df[name]
            continue
        want = _PANDAS_DTYPE[dtypes[name]]
        col = df[name]
        if want == "str":
            # None/NaN stay missing (written as NULL); everything else becomes text.
            col = col.astype(object).where(col.notna(), None)
        elif want == "bool" and col.dtype != bool and col.isna().any():
            # astype(bool) would turn a missing value into True without a word
            raise InputError(f"{table} column {name!r} is boolean but has missing values.", path=path,
                             fix="fill them with False (or declare the column as text) before writing")
        try:
            out[name] = col.astype(want)
        except (TypeError, ValueError) as err:
            raise InputError(
                f"{table} column {name!r} cannot be stored as {dtypes[name]} "
                f"(found {col.dtype}): {err}.", path=path,
                fix="fill missing values or fix the column's dtype before writing") from err
    return pd.DataFrame(out, index=df.index)


def _crater_dtypes() -> dict[str, str]:
    return {f.name: f.dtype for f in dictionary.CRATER_FIELDS}


def conform_craters(craters, *, path) -> gpd.GeoDataFrame:
    """Validate the crater table and order its columns by the dictionary.

    Parameters
    ----------
    craters : geopandas.GeoDataFrame
        Rim outline polygons with documented columns; must have a CRS and a unique
        ``crater_id``.
    path : path-like
        Target file, named in error messages.

    Returns
    -------
    geopandas.GeoDataFrame
        Columns in dictionary order, dtypes from the dictionary, index reset.
    """
    if not isinstance(craters, gpd.GeoDataFrame):
        raise InputError(f"craters must be a geopandas.GeoDataFrame, got {type(craters).__name__}.",
                         path=path, fix="build the crater table with geopandas")
    if craters.crs is None:
        raise InputError("the crater table has no CRS; a GeoPackage without one cannot be "
                         "placed on a map.", path=path, fix="set the DEM's CRS with set_crs()")
    geom_name = craters.geometry.name
    attrs = [c for c in craters.columns if c != geom_name]
    unknown = [c for c in attrs if c not in dictionary.FIELDS]
    if unknown:
        raise InputError(f"crater columns not in the morpho data dictionary: {unknown}; every "
                         "written column must be documented.", path=path, fix=_DICT_FIX)
    if "crater_id" not in attrs:
        raise InputError("the crater table has no 'crater_id' column.", path=path,
                         fix="give every crater a stable identifier")
    ids = craters["crater_id"]
    if ids.isna().any() or ids.duplicated().any():
        dup = ids[ids.duplicated()].astype(str).unique()[:5].tolist()
        raise InputError(f"crater_id must be unique and non-empty (duplicates: {dup}).", path=path,
                         fix="renumber the craters")
    kinds = set(shapely.get_type_id(craters.geometry.values[~craters.geometry.isna()]).tolist())
    # 3 = Polygon, 6 = MultiPolygon (shapely.GeometryType)
    if not kinds <= {3, 6}:
        raise InputError("crater geometries must be rim outline polygons.", path=path,
                         fix="store the rim outline (Polygon) of each crater")
    order = [c for c in dictionary.CRATER_COLUMNS if c in attrs]
    table = _cast(pd.DataFrame(craters[order]), _crater_dtypes(), path=path, table="crater")
    out = gpd.GeoDataFrame(table, geometry=craters.geometry.values, crs=craters.crs)
    return _geometry_named(out).reset_index(drop=True)


def conform_population(population, *, path) -> pd.DataFrame:
    """Validate the population statistics table (a plain DataFrame, no geometry)."""
    declared = {f.name: f.dtype for f in dictionary.POPULATION_FIELDS} or _POPULATION_DTYPES
    if population is None:
        return pd.DataFrame({c: pd.Series([], dtype=_PANDAS_DTYPE[d]) for c, d in declared.items()})
    if not isinstance(population, pd.DataFrame) or isinstance(population, gpd.GeoDataFrame):
        raise InputError("population must be a pandas.DataFrame without geometry.", path=path,
                         fix="pass PopulationResult.stats")
    unknown = [c for c in population.columns if c not in declared]
    if unknown:
        raise InputError(f"population columns not documented: {unknown}.", path=path,
                         fix=_DICT_FIX.replace("_<section>", "_population"))
    order = [c for c in declared if c in population.columns]
    return _cast(population[order], declared, path=path, table="population").reset_index(drop=True)


def conform_envelope(envelope, *, path) -> pd.DataFrame:
    """Ripley L envelope table (may be empty)."""
    if envelope is None or len(envelope.columns) == 0:
        return pd.DataFrame({c: pd.Series([], dtype=d) for c, d in ENVELOPE_DTYPES.items()})
    missing = [c for c in ENVELOPE_DTYPES if c not in envelope.columns]
    extra = [c for c in envelope.columns if c not in ENVELOPE_DTYPES]
    if missing or extra:
        raise InputError(f"the Ripley envelope needs columns {list(ENVELOPE_DTYPES)} "
                         f"(missing {missing}, unknown {extra}).", path=path,
                         fix="pass PopulationResult.envelope unchanged")
    return _cast(envelope[list(ENVELOPE_DTYPES)], ENVELOPE_DTYPES, path=path,
                 table="envelope").reset_index(drop=True)


def conform_chains(chains, crs, *, path) -> gpd.GeoDataFrame:
    """Chain lines (may be empty) in the craters' CRS."""
    if chains is None:
        return gpd.GeoDataFrame({"chain_id": pd.Series([], dtype="int64")},
                                geometry=gpd.GeoSeries([], crs=crs), crs=crs)
    if not isinstance(chains, gpd.GeoDataFrame):
        raise InputError(f"chains must be a geopandas.GeoDataFrame, got {type(chains).__name__}.",
                         path=path, fix="pass PopulationResult.chains")
    kinds = set(shapely.get_type_id(chains.geometry.values[~chains.geometry.isna()]).tolist())
    if not kinds <= {1, 5}:  # LineString, MultiLineString
        raise InputError("chain geometries must be lines.", path=path,
                         fix="store each chain as a LineString")
    return _same_crs(chains, crs, path=path, what="chains").pipe(_geometry_named)


def conform_footprint(footprint, crs, *, path) -> gpd.GeoDataFrame:
    """The valid-data footprint as a one-or-more-row polygon layer in the craters' CRS."""
    if footprint is None:
        geoms = gpd.GeoSeries([], crs=crs)
        return gpd.GeoDataFrame({"name": pd.Series([], dtype="str")}, geometry=geoms, crs=crs)
    if isinstance(footprint, shapely.Geometry):
        footprint = gpd.GeoDataFrame({"name": pd.Series(["valid data"], dtype="str")},
                                     geometry=[footprint], crs=crs)
    if not isinstance(footprint, gpd.GeoDataFrame):
        raise InputError("footprint must be a shapely polygon or a GeoDataFrame.", path=path,
                         fix="pass the valid-data polygon")
    return _same_crs(footprint, crs, path=path, what="footprint").pipe(_geometry_named)


def _geometry_named(gdf: gpd.GeoDataFrame) -> gpd.GeoDataFrame:
    # pyogrio reads the geometry back as "geometry"; naming it so keeps round trips equal.
    return gdf if gdf.geometry.name == "geometry" else gdf.rename_geometry("geometry")


def _same_crs(gdf: gpd.GeoDataFrame, crs, *, path, what: str) -> gpd.GeoDataFrame:
    if gdf.crs is None:
        return gdf.set_crs(crs)
    if gdf.crs != crs:
        raise InputError(f"the {what} CRS differs from the craters' CRS "
                         f"({gdf.crs.to_string()} vs {crs.to_string()}).", path=path,
                         fix=f"reproject the {what} with to_crs() first")
    return gdf.reset_index(drop=True)


def run_table(run) -> pd.DataFrame:
    """The ``run`` provenance dict as a two-column key/value table of strings.

    Text stays as is; anything else is JSON so a reader can parse it back.
    """
    run = dict(run or {})
    keys = [str(k) for k in run]
    values = [v if isinstance(v, str) else json.dumps(_jsonable(v), sort_keys=True)
              for v in run.values()]
    return pd.DataFrame({"key": pd.Series(keys, dtype="str"), "value": pd.Series(values, dtype="str")})


def _jsonable(v):
    if isinstance(v, np.generic):
        return v.item()
    if isinstance(v, np.ndarray):
        return v.tolist()
    if isinstance(v, dict):
        return {str(k): _jsonable(x) for k, x in v.items()}
    if isinstance(v, (list, tuple)):
        return [_jsonable(x) for x in v]
    if v is None or isinstance(v, (bool, int, float, str)):
        return v
    return str(v)


def restore_dtypes(df: pd.DataFrame, *, population: bool = False) -> pd.DataFrame:
    """Give columns read back from a GeoPackage their dictionary dtypes.

    An empty layer comes back with generic dtypes (text as ``object``); this makes
    empty and full tables alike.
    """
    if population:
        declared = {f.name: f.dtype for f in dictionary.POPULATION_FIELDS} or _POPULATION_DTYPES
    else:
        declared = _crater_dtypes()
    known = {c: d for c, d in declared.items() if c in df.columns}
    cast = _cast(pd.DataFrame(df[list(known)]), known, path=None, table="stored")
    for c in cast.columns:
        df[c] = cast[c]
    return df
