"""Morphometry of a real crater: Korolev (Mars) on MOLA MEGDR 128 px/deg (../shared/data).

Skipped when ../shared/data is absent. Reference numbers: the data README ("rim-crest
diameter on the order of 80 km, about 73 N, 164.5 E", floor holding a thick ice mound);
IAU Gazetteer of Planetary Nomenclature, Korolev D = 81.4 km (from memory); fresh complex
depth on Mars d = 0.25 D^0.49 km (Garvin & Frawley 1998 GRL 25, verified).
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest

DATA = Path(__file__).resolve().parents[2] / "shared" / "data" / "mars_korolev_mola128_native.tif"
pytestmark = [
    pytest.mark.realdata,
    pytest.mark.skipif(not DATA.exists(), reason=f"real DEM not available at {DATA}"),
]


def test_korolev_rim_depth_and_mound():
    pyproj = pytest.importorskip("pyproj")
    from morpho.ingest import read_dem
    from morpho.morphometry import measure_craters
    from morpho.scaling import expected_fresh

    tile = read_dem(DATA, body="mars")
    geog = pyproj.CRS.from_proj4("+proj=longlat +a=3396190 +rf=169.894447223612 +no_defs")
    x, y = pyproj.Transformer.from_crs(geog, tile.crs, always_xy=True).transform(164.5, 73.0)
    row, col = (np.atleast_1d(v) for v in tile.rowcol(x, y))
    spacing = tile.ground_spacing_m(row, col)
    # A deliberately poor first guess (centre ~15 km off, radius 40 km) must be refined.
    t = measure_craters(tile.z, spacing, row, col, [40_000.0 / spacing[0]], body="mars",
                        n_boot=20).iloc[0]
    assert t.measure_status == "ok" and t.rim_coverage > 0.9
    assert t.diameter_m == pytest.approx(81_400.0, rel=0.06)
    assert t.ellipticity < 1.1  # a round crater
    # Ice-filled: shallower than a fresh complex crater of that size, but a clear cavity.
    fresh = expected_fresh([t.diameter_m], "mars").depth_m[0]
    assert 0.4 * fresh < t.depth_m < fresh
    # The mound stands hundreds of metres above the surrounding moat (the profile sees it
    # as a broad central rise).
    assert t.central_peak_present and 300.0 < t.central_peak_height_m < 1500.0
    assert 0 < t.diameter_m_err < 0.02 * t.diameter_m
