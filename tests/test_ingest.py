"""DEM ingestion: pixel sizes from the CRS, nodata/scale/offset, tiles, bad input."""

from __future__ import annotations

import math

import numpy as np
import pyproj
import pytest
from affine import Affine

from morpho.errors import CrsError, DemError
from morpho.ingest import (
    ground_pixel_size,
    open_dem,
    plan_tiles,
    plan_windows,
    read_dem,
    read_tile,
    valid_footprint,
)
from morpho.ingest.tiles import TileSpec

from .conftest import MARS_GEOG, MOON_GEOG, MOON_STERE

DEG = 0.01  # pixel size in degrees of the geographic test rasters


def _geographic(raster_writer, crs, lat, name):
    z = np.random.default_rng(0).normal(0, 10, (64, 64)).astype("float32")
    t = Affine(DEG, 0, 10.0, 0, -DEG, lat + 32 * DEG)  # row 31.5 sits at `lat`
    return raster_writer(name, z, crs=crs, transform=t)


@pytest.mark.parametrize("lat", [0.0, 45.0, 60.0, 80.0])
def test_moon_geographic_pixel_size_matches_spherical_formula_and_geod(raster_writer, lat):
    # Spherical formula: east-west = R * dlambda * cos(phi), north-south = R * dphi
    # (any geodesy text, e.g. Snyder 1987, USGS Prof. Paper 1395, eqs. 4-2/4-3).
    path = _geographic(raster_writer, MOON_GEOG, lat, f"moon_{lat}.tif")
    info = open_dem(path)
    assert info.body.name == "moon"
    dx, dy = ground_pixel_size(info, 31.5, 31.5)
    R = 1_737_400.0
    assert dx == pytest.approx(R * math.radians(DEG) * math.cos(math.radians(lat)), rel=1e-6)
    assert dy == pytest.approx(R * math.radians(DEG), rel=1e-6)
    # Independent reference: pyproj.Geod geodesic distance between neighbouring pixel centres.
    geod = pyproj.Geod(a=R, f=0.0)
    _, _, d_ew = geod.inv(10.0, lat, 10.0 + DEG, lat)
    _, _, d_ns = geod.inv(10.0, lat - DEG / 2, 10.0, lat + DEG / 2)
    assert dx == pytest.approx(d_ew, rel=1e-4)
    assert dy == pytest.approx(d_ns, rel=1e-6)


@pytest.mark.parametrize("lat", [0.0, 45.0, 60.0, 80.0])
def test_mars_ellipsoid_pixel_size_matches_geod(raster_writer, lat):
    # Mars 2000 ellipsoid (a = 3396.19 km, 1/f = 169.894); pyproj.Geod is the independent reference.
    path = _geographic(raster_writer, MARS_GEOG, lat, f"mars_{lat}.tif")
    info = open_dem(path)
    assert info.body.name == "mars"
    dx, dy = ground_pixel_size(info, 31.5, 31.5)
    geod = pyproj.Geod(a=3396190.0, rf=169.894447223612)
    _, _, d_ew = geod.inv(10.0, lat, 10.0 + DEG, lat)
    _, _, d_ns = geod.inv(10.0, lat - DEG / 2, 10.0, lat + DEG / 2)
    assert dx == pytest.approx(d_ew, rel=1e-4)
    assert dy == pytest.approx(d_ns, rel=1e-5)


def test_geographic_tile_is_warped_to_square_ground_pixels(raster_writer):
    path = _geographic(raster_writer, MOON_GEOG, 60.0, "moon60.tif")
    tile = read_dem(path)
    assert tile.warped
    # At 60 N a 0.01-degree pixel is 151.6 m east-west and 303.2 m north-south on the ground;
    # the local grid keeps the finer one (common practice: do not throw resolution away).
    assert tile.spacing_m == pytest.approx(1_737_400 * math.radians(DEG) * 0.5, rel=0.01)
    assert tile.z.shape[1] == pytest.approx(64, abs=3)
    assert tile.z.shape[0] == pytest.approx(128, abs=4)
    lon, lat = tile.to_lonlat(np.array([tile.z.shape[0] / 2]), np.array([tile.z.shape[1] / 2]))
    assert lat[0] == pytest.approx(60.0, abs=0.02)
    assert lon[0] == pytest.approx(10.32, abs=0.02)
    k = tile.scale_factor(np.array([tile.z.shape[0] / 2]), np.array([tile.z.shape[1] / 2]))
    assert k[0] == pytest.approx(1.0, abs=1e-4)


def test_nodata_nan_scale_offset(raster_writer):
    raw = np.full((32, 32), 100, dtype="int16")
    raw[0, 0] = -32768
    raw[1, 1] = 7
    path = raster_writer("int.tif", raw, nodata=-32768, dtype="int16", scale=0.5, offset=-1000.0)
    tile = read_dem(path)
    assert np.isnan(tile.z[0, 0])
    assert tile.z[1, 1] == pytest.approx(7 * 0.5 - 1000.0)
    assert tile.z[5, 5] == pytest.approx(100 * 0.5 - 1000.0)
    # explicit override wins over the file's metadata
    tile2 = read_dem(path, z_scale=2.0, z_offset=0.0)
    assert tile2.z[5, 5] == pytest.approx(200.0)


def test_float_nan_and_huge_nodata(raster_writer):
    z = np.zeros((32, 32), dtype="float32")
    z[2, 3] = np.nan
    z[4, 4] = -3.4e38
    path = raster_writer("f.tif", z, nodata=-3.4e38)
    tile = read_dem(path)
    assert np.isnan(tile.z[2, 3]) and np.isnan(tile.z[4, 4])
    assert np.isfinite(tile.z).sum() == 32 * 32 - 2


def test_projected_square_metre_grid_is_not_warped(raster_writer):
    path = raster_writer("s.tif", np.zeros((40, 40), "float32"), crs=MOON_STERE)
    tile = read_dem(path)
    assert not tile.warped
    assert tile.spacing_m == 100.0


@pytest.mark.parametrize("h,w,size,ov", [(10, 4, 4, 1), (1000, 777, 256, 40), (5, 5, 8, 3), (300, 301, 100, 0)])
def test_tile_cores_cover_raster_exactly_once(h, w, size, ov):
    specs = plan_windows(h, w, size, ov)
    count = np.zeros((h, w), int)
    for s in specs:
        count[s.core_row_off:s.core_row_off + s.core_height, s.core_col_off:s.core_col_off + s.core_width] += 1
        # the read window is the core grown by the overlap, clipped to the raster
        assert s.row_off == max(0, s.core_row_off - ov)
        assert s.col_off == max(0, s.core_col_off - ov)
        assert s.row_off + s.height == min(h, s.core_row_off + s.core_height + ov)
        assert s.col_off + s.width == min(w, s.core_col_off + s.core_width + ov)
    assert (count == 1).all()


def test_read_tile_window_and_offsets(raster_writer):
    z = np.arange(50 * 60, dtype="float32").reshape(50, 60)
    path = raster_writer("a.tif", z)
    info = open_dem(path)
    spec = TileSpec(0, 10, 20, 15, 25, 12, 22, 10, 20)
    tile = read_tile(info, spec)
    np.testing.assert_array_equal(tile.z, z[10:25, 20:45])
    x, y = tile.xy(np.array([0.0]), np.array([0.0]))
    assert (x[0], y[0]) == (100.0 * 20.5, -100.0 * 10.5)
    assert tile.in_core(np.array([1.0, 3.0]), np.array([1.0, 3.0])).tolist() == [False, True]


# ---- bad input ------------------------------------------------------------------------------
def test_missing_file(tmp_path):
    with pytest.raises(DemError, match="file not found"):
        open_dem(tmp_path / "nope.tif")


def test_text_file_named_tif(tmp_path):
    p = tmp_path / "text.tif"
    p.write_text("this is not a raster\n")
    with pytest.raises(DemError, match="not a raster"):
        open_dem(p)


def test_truncated_geotiff(raster_writer):
    path = raster_writer("t.tif", np.random.default_rng(1).normal(size=(256, 256)).astype("float32"))
    data = path.read_bytes()
    path.write_bytes(data[: len(data) // 2])
    with pytest.raises(DemError, match="truncated|not a raster"):
        open_dem(path)


def test_large_raster_checked_by_sample(raster_writer):
    """Rasters over 1 Mpx are checked on a sample of windows (not every block), which must
    still catch a truncated file and must not refuse a file whose valid data the sample misses."""
    z = np.random.default_rng(2).normal(size=(1536, 1536)).astype("float32")
    tiled = dict(tiled=True, blockxsize=256, blockysize=256, compress="deflate")
    path = raster_writer("big.tif", z, **tiled)
    data = path.read_bytes()
    path.write_bytes(data[: int(len(data) * 0.9)])  # the last blocks of the file are gone
    with pytest.raises(DemError, match="truncated"):
        open_dem(path)
    sparse = np.full((1536, 1536), -9999.0, "float32")
    sparse[700:720, 900:920] = 1.0  # valid data between the sampled windows
    info = open_dem(raster_writer("sparse.tif", sparse, nodata=-9999.0, **tiled))
    assert (info.width, info.height) == (1536, 1536)
    allbad = raster_writer("nodata.tif", np.full((1536, 1536), -9999.0, "float32"), nodata=-9999.0, **tiled)
    with pytest.raises(DemError, match="no valid elevation"):
        open_dem(allbad)


def test_no_crs_requires_pixel_size_then_body(raster_writer):
    path = raster_writer("nocrs.tif", np.zeros((40, 40), "float32"), crs=None)
    with pytest.raises(CrsError, match="pixel-size"):
        open_dem(path)
    with pytest.raises(CrsError, match="--body"):
        open_dem(path, pixel_size=5.0)
    tile = read_dem(path, pixel_size=5.0, body="moon")
    assert tile.spacing_m == 5.0


def test_unknown_body(raster_writer):
    path = raster_writer("venusish.tif", np.zeros((40, 40), "float32"),
                         crs="+proj=longlat +R=6051800 +no_defs +type=crs",
                         transform=Affine(0.01, 0, 0, 0, -0.01, 0))
    with pytest.raises(CrsError, match="--body"):
        open_dem(path)


def test_all_nodata(raster_writer):
    path = raster_writer("empty.tif", np.full((40, 40), -9999, "float32"), nodata=-9999)
    with pytest.raises(DemError, match="no valid elevation"):
        open_dem(path)


def test_too_small(raster_writer):
    path = raster_writer("tiny.tif", np.zeros((10, 10), "float32"))
    with pytest.raises(DemError, match="smaller than"):
        open_dem(path, min_size_px=8)


def test_multiband_requires_band(raster_writer):
    path = raster_writer("mb.tif", np.zeros((2, 40, 40), "float32"))
    with pytest.raises(DemError, match="--band"):
        open_dem(path)
    assert open_dem(path, band=2).band == 2


def test_real_mars_dem_pixel_aspect(shared_data):
    # /work/shared/data/README.md: 0.00781 degree pixels are ~137 m (E-W) x ~463 m (N-S) at 72.75 N.
    info = open_dem(shared_data / "mars_korolev_mola128_native.tif")
    assert info.body.name == "mars" and info.needs_warp
    assert info.ground_pixel_m[0] == pytest.approx(137, rel=0.03)
    assert info.ground_pixel_m[1] == pytest.approx(463, rel=0.01)


def test_real_moon_eqc_is_warped(shared_data):
    # The equirectangular lunar crop's east-west scale changes with latitude (shared/data/README.md).
    info = open_dem(shared_data / "moon_lola_ldem4_farside_eqc.tif")
    assert info.body.name == "moon" and info.needs_warp


def test_footprint_strips_equal_gdal_decimation(raster_writer):
    # The footprint is read in strips to bound GDAL's block cache; GDAL's own nearest-neighbour
    # decimated read (rasterio out_shape) is the reference it must reproduce exactly.
    import rasterio

    from morpho.ingest.dem import _decimated

    rng = np.random.default_rng(7)
    z = rng.normal(size=(1537, 1000)).astype("float32")
    z[200:900, 300:420] = -9999.0  # a nodata hole
    path = raster_writer("odd.tif", z, nodata=-9999.0, tiled=True, blockxsize=256, blockysize=256)
    info = open_dem(path)
    for out_h, out_w in ((769, 500), (220, 143), (1537, 1000)):
        got = _decimated(info, out_h, out_w, strip_bytes=64 * 1000 * 4)  # 64-row strips
        with rasterio.open(path) as src:
            ref = src.read(1, out_shape=(out_h, out_w), masked=True)
        assert np.array_equal(np.ma.getmaskarray(got), np.ma.getmaskarray(ref))
        assert np.array_equal(np.ma.getdata(got), np.ma.getdata(ref))
    fp = valid_footprint(info, max_size=500)
    assert 0.9 < fp.area / (1000 * 1537 * 100.0**2 - 700 * 120 * 100.0**2) < 1.1


@pytest.mark.parametrize("lat", [0.0, 70.0])
def test_core_box_holds_every_core_position_of_a_warped_tile(raster_writer, lat):
    # The box a tile's detector searches (DemTile.core_box) must hold every grid position the
    # tile owns (DemTile.in_core), also on a grid warped to local stereographic, where the core
    # is a curved quadrilateral; otherwise craters near the core's edge would be lost.
    path = _geographic(raster_writer, MOON_GEOG, lat, f"core_{lat}.tif")
    info = open_dem(path)
    specs = plan_tiles(info, 24, 8)
    assert len(specs) == 9
    for spec in specs:
        tile = read_tile(info, spec)
        assert tile.warped
        r0, r1, c0, c1 = tile.core_box()
        rows, cols = np.mgrid[0:tile.z.shape[0]:0.25, 0:tile.z.shape[1]:0.25]
        owned = tile.in_core(rows.ravel(), cols.ravel())
        assert owned.any()
        rr, cc = rows.ravel()[owned], cols.ravel()[owned]
        assert rr.min() >= r0 - 0.5 and rr.max() < r1 - 0.5 + 1e-9
        assert cc.min() >= c0 - 0.5 and cc.max() < c1 - 0.5 + 1e-9
        # and it is no wider than the core plus a few pixels of the warp
        assert (r1 - r0) <= (rr.max() - rr.min()) + 5 and (c1 - c0) <= (cc.max() - cc.min()) + 5


def test_core_box_of_an_unwarped_tile_is_its_core(raster_writer):
    path = raster_writer("box.tif", np.zeros((100, 90), "float32"), crs=MOON_STERE)
    info = open_dem(path)
    spec = plan_tiles(info, 40, 10)[4]
    tile = read_tile(info, spec)
    r0, r1, c0, c1 = tile.core_box()
    assert (r0, c0) == (spec.core_row_off - spec.row_off, spec.core_col_off - spec.col_off)
    assert (r1 - r0, c1 - c0) == (spec.core_height, spec.core_width)
    rows, cols = np.mgrid[0:tile.z.shape[0], 0:tile.z.shape[1]]
    inside = (rows >= r0) & (rows < r1) & (cols >= c0) & (cols < c1)
    assert np.array_equal(tile.in_core(rows.ravel(), cols.ravel()), inside.ravel())
