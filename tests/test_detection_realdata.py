"""Detection on the two NASA DEMs in ../shared/data (skipped where the folder is absent)."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest

from morpho.detection import detect_craters

from .test_realdata_survey import LUNAR_NAMED

pytestmark = pytest.mark.realdata

_CANDIDATES = [Path("/work/shared/data"), Path(__file__).resolve().parents[1].parent / "shared" / "data"]
DATA = next((p for p in _CANDIDATES if p.is_dir()), None)


def _tile(name):
    if DATA is None or not (DATA / name).is_file():
        pytest.skip(f"real DEM {name} not available (../shared/data absent)")
    from morpho.ingest import read_dem

    return read_dem(DATA / name)


def _found(tile, df, lon0, lat0, diameter_km):
    """Rim diameter (km) of the detection closest to (lon0, lat0) within 0.3 D, or None."""
    lon, lat = tile.to_lonlat(df.row.to_numpy(), df.col.to_numpy())
    k = tile.scale_factor(df.row.to_numpy(), df.col.to_numpy())
    d_km = 2.0 * df.radius_px.to_numpy() * tile.spacing_m / k / 1000.0
    body_km = tile.body.radius_m / 1000.0
    # Great-circle distance on the body's sphere (haversine).
    p1, p2 = np.radians(lat), np.radians(lat0)
    dl = np.radians(lon - lon0)
    a = np.sin((p2 - p1) / 2) ** 2 + np.cos(p1) * np.cos(p2) * np.sin(dl / 2) ** 2
    dist_km = 2 * body_km * np.arcsin(np.sqrt(np.clip(a, 0, 1)))
    near = dist_km < 0.3 * diameter_km
    if not near.any():
        return None
    best = np.argmin(np.where(near, np.abs(d_km - diameter_km), np.inf))
    return float(d_km[best])


@pytest.fixture(scope="module")
def moon():
    tile = _tile("moon_lola_ldem4_farside_eqc.tif")
    return tile, detect_craters(tile.z, tile.spacing_m)


def test_lunar_highlands_yield_hundreds_of_craters(moon):
    # Issue figure: a saturated highland scene gives hundreds of craters, not a handful
    # (data README: hundreds of degraded complex craters 5-80 px across).
    _, df = moon
    assert len(df) >= 200


# IAU Gazetteer of Planetary Nomenclature, current entries: centres and rim diameters as listed
# (with their sourcing) in tests/test_realdata_survey.py.
@pytest.mark.parametrize("name, lat, lon, diameter_km", LUNAR_NAMED, ids=[n[0] for n in LUNAR_NAMED])
def test_lunar_named_craters_within_15_percent(moon, name, lat, lon, diameter_km):
    tile, df = moon
    d = _found(tile, df, lon, lat, diameter_km)
    assert d is not None, f"{name} not found"
    # Issue figure: rim diameters within 15 % of the published values. Measured on the
    # detector's own output: all nine, +4 % (Heaviside) to +15 % (Hertzsprung, whose highest
    # ring on LDEM_4 lies outside the gazetteer rim); Fermi, overlapped by Tsiolkovskiy, +8 %.
    assert d == pytest.approx(diameter_km, rel=0.15)


def test_mars_large_crater_found_within_15_percent():
    tile = _tile("mars_korolev_mola128_native.tif")
    df = detect_craters(tile.z, tile.spacing_m)
    # Data README: one large complex crater, rim-crest diameter ~80 km, about 73 N, 164.5 E
    # (IAU Gazetteer: Korolev, 81.4 km, from memory). Issue figure: within 15 %.
    d = _found(tile, df, 164.5, 72.8, 81.4)
    assert d is not None
    assert d == pytest.approx(81.4, rel=0.15)
