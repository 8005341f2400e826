"""Reading users' crater lists: CSV / GeoPackage / Shapefile, reprojection, bad rows, fuzzing."""

from __future__ import annotations

import math
import tempfile
from pathlib import Path

import geopandas as gpd
import numpy as np
import pyproj
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from shapely.geometry import Point

from morpho.errors import CraterListError
from morpho.ingest.craterlist import flag_outside, read_crater_list

R_MOON = 1_737_400.0
# Equirectangular on the lunar sphere, as the LOLA LDEM products (PDS label).
EQC = pyproj.CRS.from_proj4(f"+proj=eqc +lat_ts=0 +lat_0=0 +lon_0=180 +R={R_MOON} +units=m +no_defs")
GEO = pyproj.CRS.from_proj4(f"+proj=longlat +R={R_MOON} +no_defs")


def _eqc_xy(lon, lat):
    # Snyder (1987) Map Projections - A Working Manual, USGS PP 1395, eqs. 12-1/12-2 with
    # phi_1 = 0: x = R (lambda - lambda_0), y = R phi.
    return R_MOON * np.radians(np.asarray(lon) - 180.0), R_MOON * np.radians(np.asarray(lat))


def test_csv_map_units_keeps_ids_and_values(tmp_path):
    p = tmp_path / "list.csv"
    p.write_text("crater_id,center_x,center_y,diameter_m\nNorth-1,1000.5,-20,5000\nB7, 3e3 ,4e3,120\n")
    cl = read_crater_list(p, dem_crs=EQC)
    assert cl.bad_rows == {}
    assert list(cl.craters.crater_id) == ["North-1", "B7"]
    np.testing.assert_allclose(cl.craters[["x", "y", "diameter_m"]].to_numpy(),
                               [[1000.5, -20, 5000], [3000, 4000, 120]])


def test_csv_lonlat_reprojected_to_dem(tmp_path):
    p = tmp_path / "list.csv"
    p.write_text("lon,lat,diameter_m\n170.0,10.0,2e4\n200.5,-31.0,8e4\n")
    cl = read_crater_list(p, dem_crs=EQC)
    x, y = _eqc_xy([170.0, 200.5], [10.0, -31.0])
    np.testing.assert_allclose(cl.craters.x, x, rtol=0, atol=1e-3)
    np.testing.assert_allclose(cl.craters.y, y, rtol=0, atol=1e-3)
    # Generated ids when the file has none (common practice: stable, row-based).
    assert list(cl.craters.crater_id) == ["L00001", "L00002"]


def test_bad_rows_named_and_rest_kept(tmp_path):
    p = tmp_path / "list.csv"
    p.write_text(
        "id;center_x;center_y;diameter_m\n"
        "a;1;2;10\n"        # row 1 fine
        "b;;2;10\n"         # row 2 missing x
        "c;1;two;10\n"      # row 3 non-numeric y
        "d;1;2;-5\n"        # row 4 negative diameter
        "e;1;2;0\n"         # row 5 zero diameter
        "f;1;2;nan\n"       # row 6 NaN diameter
        "g;5;6;7\n"         # row 7 fine
    )
    cl = read_crater_list(p, dem_crs=EQC)
    assert list(cl.craters.crater_id) == ["a", "g"]
    assert list(cl.craters.source_row) == [1, 7]
    assert set(cl.bad_rows) == {2, 3, 4, 5, 6}
    assert "center_x" in cl.bad_rows[2] and "missing" in cl.bad_rows[2]
    assert "'two'" in cl.bad_rows[3]
    assert "> 0" in cl.bad_rows[4] and "> 0" in cl.bad_rows[5]


def test_missing_file_and_wrong_columns(tmp_path):
    with pytest.raises(CraterListError) as e:
        read_crater_list(tmp_path / "nope.csv", dem_crs=EQC)
    assert e.value.path.endswith("nope.csv") and e.value.fix
    p = tmp_path / "cols.csv"
    p.write_text("a,b,c\n1,2,3\n")
    with pytest.raises(CraterListError, match="lack a centre or a diameter") as e:
        read_crater_list(p, dem_crs=EQC)
    assert "center_x" in e.value.fix
    p.write_text("center_x,center_y,diameter_m\nx,y,z\n")
    with pytest.raises(CraterListError, match="none of the 1 rows") as e:
        read_crater_list(p, dem_crs=EQC)
    assert e.value.bad_rows


def test_geopackage_points_in_other_crs(tmp_path):
    pts = gpd.GeoDataFrame({"crater_id": ["k1", "k2"], "diameter_m": [3000.0, 9000.0]},
                           geometry=[Point(150.0, 5.0), Point(220.0, -12.5)], crs=GEO)
    path = tmp_path / "pts.gpkg"
    pts.to_file(path, layer="craters", driver="GPKG")
    cl = read_crater_list(path, dem_crs=EQC)
    x, y = _eqc_xy([150.0, 220.0], [5.0, -12.5])
    np.testing.assert_allclose(cl.craters.x, x, atol=1e-3)
    np.testing.assert_allclose(cl.craters.y, y, atol=1e-3)
    assert list(cl.craters.crater_id) == ["k1", "k2"]
    np.testing.assert_allclose(cl.craters.diameter_m, [3000.0, 9000.0])


def test_shapefile_rim_polygons_area_equivalent_diameter(tmp_path):
    # A 128-gon of circumradius r has area (n/2) r^2 sin(2 pi / n) (elementary geometry).
    r, n = 10_000.0, 128
    centre = (2.0e5, -1.0e5)
    poly = Point(centre).buffer(r, quad_segs=n // 4)
    gdf = gpd.GeoDataFrame({"name": ["rim-A"]}, geometry=[poly], crs=EQC)
    path = tmp_path / "rims.shp"
    gdf.to_file(path)
    cl = read_crater_list(path, dem_crs=EQC)
    d_expected = 2.0 * math.sqrt(0.5 * n * r * r * math.sin(2 * math.pi / n) / math.pi)
    # Equal-area ground diameter vs map diameter: eqc is true to scale near the equator
    # (Snyder 1987); 6 km from the equator the scale error is < 1e-4 relative.
    assert cl.craters.diameter_m.iloc[0] == pytest.approx(d_expected, rel=2e-3)
    assert cl.craters.x.iloc[0] == pytest.approx(centre[0], abs=30.0)
    assert cl.craters.y.iloc[0] == pytest.approx(centre[1], abs=30.0)
    assert cl.craters.crater_id.iloc[0] == "rim-A"


def test_flag_outside():
    import pandas as pd

    df = pd.DataFrame({"crater_id": ["in", "out"], "x": [5.0, 50.0], "y": [5.0, 5.0]})
    assert flag_outside(df, (0, 0, 10, 10)) == {"out": "centre outside the DEM"}


_TEXT = st.one_of(
    st.text(max_size=300),
    st.lists(st.sampled_from(["center_x", "center_y", "diameter_m", "lon", "lat", "id", ",",
                              ";", "\n", "1", "-2.5", "nan", "", "\"", "1e309", "abc", " "]),
             max_size=60).map("".join),
)


@settings(max_examples=150, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(_TEXT)
def test_fuzz_csv_only_clean_errors(text):
    # Property (common practice for parsers): any input gives a result or a CraterListError.
    with tempfile.TemporaryDirectory() as d:
        p = Path(d) / "fuzz.csv"
        p.write_text(text, encoding="utf-8", errors="surrogatepass")
        try:
            cl = read_crater_list(p, dem_crs=EQC)
        except CraterListError:
            return
        assert set(cl.craters.columns) >= {"crater_id", "x", "y", "diameter_m"}
        assert np.all(cl.craters.diameter_m > 0)
        assert all(isinstance(k, int) and k >= 1 for k in cl.bad_rows)
