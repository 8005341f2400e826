"""End-to-end geometry: craters keep their ground size whatever the DEM's projection.

The DEMs here are built independently of morpho's synthetic generator: elevation at
each pixel is an analytic fresh-crater profile of the great-circle distance from the
crater centre (pyproj.Geod), so the true rim diameter is known exactly.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pyproj
import pytest
from affine import Affine

from morpho.pipeline import measure, survey

from .conftest import MOON_GEOG, write_raster

R_MOON = 1_737_400.0


def pike_bowl(r_m, diameter_m):
    """Fresh simple crater: parabolic bowl d = 0.196 D, rim h = 0.036 D with an (r/R)^-3 flank.

    Pike 1977 (Impact and Explosion Cratering, 489-509; coefficients from memory, see
    shared/reference/published-values.md 1.1); flank decay McGetchin et al. 1973 EPSL 20.
    """
    R = diameter_m / 2
    d = 0.196 * diameter_m
    h = 0.036 * diameter_m
    x = r_m / R
    inside = h - (d) * (1 - x**2)
    outside = h * np.clip(x, 1, None) ** -3.0
    return np.where(x < 1, inside, outside)


def geographic_crater_dem(path, lat0, lon0=20.0, diameter_m=3000.0, deg=0.002, n=160):
    lats = lat0 + (np.arange(n) - (n - 1) / 2) * deg * -1
    lons = lon0 + (np.arange(n) - (n - 1) / 2) * deg
    lon, lat = np.meshgrid(lons, lats)
    geod = pyproj.Geod(a=R_MOON, f=0.0)
    _, _, dist = geod.inv(np.full(lon.shape, lon0), np.full(lat.shape, lat0), lon, lat)
    z = pike_bowl(dist, diameter_m).astype("float32")
    t = Affine(deg, 0, lon0 - n / 2 * deg, 0, -deg, lat0 + n / 2 * deg)
    return write_raster(path, z, crs=MOON_GEOG, transform=t)


@pytest.mark.parametrize("lat0", [0.0, 60.0])
def test_three_km_crater_in_degrees_measures_three_km(tmp_path, lat0):
    # Issue requirement: a 3.0 km crater on a Moon DEM stored in degrees at 60 N measures 3.0 km within 5 %.
    path = geographic_crater_dem(tmp_path / f"moon_deg_{lat0}.tif", lat0)
    res = survey(path, seed=1)
    craters = res.craters
    assert len(craters) >= 1
    best = craters.iloc[np.argmin(np.hypot(craters["lon"] - 20.0, craters["lat"] - lat0))]
    assert best["diameter_m"] == pytest.approx(3000.0, rel=0.05)
    assert best["lat"] == pytest.approx(lat0, abs=0.01)
    # depth: Pike 1977 rim-crest-to-floor depth d = 0.196 D, built into the analytic bowl
    assert best["depth_m"] == pytest.approx(0.196 * 3000.0, rel=0.10)


def test_measure_refines_user_list_in_degrees(tmp_path):
    path = geographic_crater_dem(tmp_path / "moon_deg_45.tif", 45.0)
    listed = pd.DataFrame({"crater_id": ["user-7"], "x": [20.0 + 0.004], "y": [45.0 - 0.003],
                           "diameter_m": [3300.0]})  # 10 % too large, centre off by ~0.1 km
    res = measure(path, listed, seed=1)
    assert list(res.craters["crater_id"]) == ["user-7"]
    assert res.craters["diameter_m"].iloc[0] == pytest.approx(3000.0, rel=0.03)
