"""Shared fixtures: small rasters written with explicit CRS, transform, dtype and nodata."""

from __future__ import annotations

from morpho._runtime import pin_numeric_threads

# Tests compute like the CLI and Dask workers (one BLAS thread), before numpy loads.
pin_numeric_threads()

from pathlib import Path  # noqa: E402

import numpy as np  # noqa: E402
import pytest  # noqa: E402
import rasterio  # noqa: E402
from affine import Affine  # noqa: E402

REPO = Path(__file__).resolve().parents[1]
SHARED_DATA = REPO.parent / "shared" / "data"

MOON_GEOG = "+proj=longlat +R=1737400 +no_defs +type=crs"
MARS_GEOG = "+proj=longlat +a=3396190 +rf=169.894447223612 +no_defs +type=crs"
MOON_STERE = "+proj=stere +lat_0=0 +lon_0=0 +k=1 +R=1737400 +units=m +no_defs +type=crs"


def write_raster(path, z, *, crs=MOON_STERE, transform=None, nodata=None, dtype=None,
                 scale=None, offset=None, **profile):
    """Write ``z`` (2-D or 3-D band-first) to a GeoTIFF and return its path."""
    z = np.asarray(z)
    if z.ndim == 2:
        z = z[None]
    dtype = dtype or z.dtype
    if transform is None:
        transform = Affine(100.0, 0, 0, 0, -100.0, 0)
    kw = dict(driver="GTiff", width=z.shape[2], height=z.shape[1], count=z.shape[0],
              dtype=dtype, transform=transform, nodata=nodata)
    if crs is not None:
        kw["crs"] = rasterio.crs.CRS.from_string(crs) if isinstance(crs, str) else crs
    kw.update(profile)
    with rasterio.open(path, "w", **kw) as dst:
        dst.write(z.astype(dtype))
        if scale is not None or offset is not None:
            dst.scales = (scale if scale is not None else 1.0,) * z.shape[0]
            dst.offsets = (offset if offset is not None else 0.0,) * z.shape[0]
    return Path(path)


@pytest.fixture
def raster_writer(tmp_path):
    """Write small rasters into the test's temp folder: ``raster_writer(name, z, **kw)``."""

    def _write(name, z, **kw):
        return write_raster(tmp_path / name, z, **kw)

    return _write


@pytest.fixture
def shared_data():
    """Folder of the real NASA DEMs beside the repo; skip when absent."""
    if not SHARED_DATA.is_dir():
        pytest.skip(f"real DEMs not present at {SHARED_DATA}")
    return SHARED_DATA


def bowl_dem(n=128, radius_px=20.0, depth=400.0, spacing=100.0, center=None):
    """A paraboloid bowl (depth ``depth`` m, rim radius ``radius_px``) on a flat plain."""
    c = (n - 1) / 2 if center is None else center
    yy, xx = np.mgrid[0:n, 0:n]
    r = np.hypot(yy - c, xx - c) / radius_px
    return np.where(r < 1, depth * (r**2 - 1), 0.0)
