"""Writing a synthetic surface: GeoTIFF + truth CSV + truth GeoPackage, atomically."""

from __future__ import annotations

import warnings
from contextlib import contextmanager
from pathlib import Path

import numpy as np

from ..errors import OutputError

__all__ = ["write_surface", "check_surface_targets"]

_NAME_OK = frozenset("abcdefghijklmnopqrstuvwxyzABCDEFGHIJKLMNOPQRSTUVWXYZ0123456789_-.")


def write_surface(surface, out_dir, name: str, overwrite: bool = False) -> dict[str, Path]:
    """Write ``<name>.tif``, ``<name>_truth.csv`` and ``<name>_truth.gpkg`` into ``out_dir``.

    The GeoTIFF is float32, deflate-compressed (predictor 3), tiled 256 x 256, NaN nodata,
    with the surface's CRS and transform. The CSV holds the truth table; the GeoPackage
    holds it as points (layer ``truth``) in the DEM's CRS. All three files are written to
    a temporary folder beside the targets and renamed into place only when complete.

    Returns
    -------
    dict
        ``{"dem": path, "truth_csv": path, "truth_gpkg": path}``.

    Raises
    ------
    OutputExistsError
        A target exists and ``overwrite`` is false (nothing is written).
    OutputError
        The folder is missing or not writable, or ``name`` is not a plain file stem.
    """
    import geopandas as gpd
    import rasterio

    from ..outputs._atomic import atomic_paths

    out = Path(out_dir).expanduser().absolute()
    targets = check_surface_targets(out, name, overwrite=overwrite)
    z = np.asarray(surface.z, dtype=np.float32)
    try:
        with atomic_paths(list(targets.values())) as (tmp_dem, tmp_csv, tmp_gpkg):
            profile = dict(driver="GTiff", width=z.shape[1], height=z.shape[0], count=1, dtype="float32",
                           crs=rasterio.crs.CRS.from_wkt(surface.crs.to_wkt()), transform=surface.transform,
                           nodata=np.nan, compress="deflate", predictor=3, tiled=True, blockxsize=256,
                           blockysize=256)
            with rasterio.open(tmp_dem, "w", **profile) as dst:
                dst.write(z, 1)
                dst.update_tags(body=surface.body, pixel_size_m=repr(surface.pixel_size_m),
                                generator="morpho.synth", seed=str(surface.params.get("seed", "")))
                dst.set_band_description(1, "elevation (m)")
            truth = surface.truth
            truth.to_csv(tmp_csv, index=False, float_format="%.6g")
            gdf = gpd.GeoDataFrame(truth.copy(), geometry=gpd.points_from_xy(truth["center_x"], truth["center_y"]),
                                   crs=surface.crs.to_wkt())
            with warnings.catch_warnings(), _fixed_gpkg_timestamp():
                warnings.simplefilter("ignore", RuntimeWarning)
                gdf.to_file(tmp_gpkg, layer="truth", driver="GPKG")
    except OutputError:
        raise
    except OSError as err:
        raise OutputError(f"cannot write the synthetic surface: {err}.", path=out,
                          fix="check free space and permissions") from err
    return targets


@contextmanager
def _fixed_gpkg_timestamp():
    """GeoPackage timestamps fixed (GDAL's OGR_CURRENT_DATE) so same seed = same bytes."""
    import pyogrio

    old = pyogrio.get_gdal_config_option("OGR_CURRENT_DATE")
    pyogrio.set_gdal_config_options({"OGR_CURRENT_DATE": "2000-01-01T00:00:00.000Z"})
    try:
        yield
    finally:
        pyogrio.set_gdal_config_options({"OGR_CURRENT_DATE": old})


def check_surface_targets(out_dir, name: str, *, overwrite: bool) -> dict[str, Path]:
    """Check (before any work) that ``<name>.tif`` and its truth files can be written in ``out_dir``."""
    from ..outputs._atomic import check_targets

    out = Path(out_dir).expanduser().absolute()
    if not name or set(name) - _NAME_OK:
        raise OutputError(f"name must be a plain file stem (letters, digits, _ - .); got {name!r}.",
                          path=out, fix="choose a name such as moon_synth_11")
    targets = {"dem": out / f"{name}.tif", "truth_csv": out / f"{name}_truth.csv",
               "truth_gpkg": out / f"{name}_truth.gpkg"}
    check_targets(list(targets.values()), overwrite=overwrite)
    return targets
