"""Awkward but valid inputs give the right numbers; bad ones give clean errors; runs are reproducible."""

from __future__ import annotations

import numpy as np
import pyogrio
import pytest
from affine import Affine
from click.testing import CliRunner

from morpho.cli.main import cli
from morpho.pipeline import survey

from .conftest import MOON_STERE, write_raster
from .test_survey_geometry import pike_bowl

SPACING = 50.0
# (row, col, diameter_m): fresh simple craters, Pike 1977 shapes
GRID = Affine(SPACING, 0, 0, 0, -SPACING, 0)
CRATERS = [(70.0, 70.0, 2000.0), (170.0, 90.0, 1500.0), (110.0, 185.0, 2500.0)]


def crater_field(n=256, offset=0.0, roughness=2.0, seed=0, craters=CRATERS):
    yy, xx = np.mgrid[0:n, 0:n].astype(float)
    z = np.zeros((n, n))
    for r0, c0, d in craters:
        z += pike_bowl(np.hypot(yy - r0, xx - c0) * SPACING, d)
    z += np.random.default_rng(seed).normal(0, roughness, z.shape)
    return z + offset


def _write(tmp_path, name, z, **kw):
    kw.setdefault("transform", GRID)
    return write_raster(tmp_path / name, z, crs=MOON_STERE, **kw)


def _match(craters, r0, c0, d):
    x, y = GRID @ (c0 + 0.5, r0 + 0.5)
    dist = np.hypot(craters["center_x"] - x, craters["center_y"] - y)
    i = int(np.argmin(dist))
    assert dist.iloc[i] < 0.25 * d, f"crater at ({r0}, {c0}) not found"
    return craters.iloc[i]


@pytest.fixture(scope="module")
def reference(tmp_path_factory):
    tmp = tmp_path_factory.mktemp("ref")
    path = _write(tmp, "float.tif", crater_field().astype("float32"))
    return survey(path, seed=3).craters


def test_reference_finds_the_three_craters(reference):
    for r0, c0, d in CRATERS:
        row = _match(reference, r0, c0, d)
        assert row["diameter_m"] == pytest.approx(d, rel=0.05)
        # Pike 1977 simple crater: rim-crest-to-floor depth d = 0.196 D, built into the analytic bowl
        assert row["depth_m"] == pytest.approx(0.196 * d, rel=0.10)


@pytest.mark.parametrize("dtype,scale,offset", [("int16", 0.5, -1000.0), ("uint16", 0.25, -2000.0)])
def test_integer_dem_with_scale_offset_gives_float_depths(tmp_path, reference, dtype, scale, offset):
    z = crater_field()
    raw = np.round((z - offset) / scale).astype(dtype)
    path = _write(tmp_path, f"{dtype}.tif", raw, dtype=dtype, scale=scale, offset=offset)
    got = survey(path, seed=3).craters
    for r0, c0, d in CRATERS:
        a, b = _match(got, r0, c0, d), _match(reference, r0, c0, d)
        assert a["depth_m"] == pytest.approx(b["depth_m"], rel=0.02)  # issue 10 figure: within 2 %


@pytest.mark.parametrize("offset", [10_000.0, -10_000.0])
def test_constant_offset_of_ten_km(tmp_path, reference, offset):
    path = _write(tmp_path, "off.tif", crater_field(offset=offset))
    got = survey(path, seed=3).craters
    assert len(got) == len(reference)
    for r0, c0, d in CRATERS:
        assert _match(got, r0, c0, d)["depth_m"] == pytest.approx(_match(reference, r0, c0, d)["depth_m"], rel=0.01)


@pytest.mark.parametrize("layout", [dict(tiled=True, blockxsize=64, blockysize=64),
                                    dict(ENDIANNESS="BIG"), dict(tiled=False, blockysize=1)])
def test_big_endian_tiled_striped_read_the_same(tmp_path, reference, layout):
    path = _write(tmp_path, "layout.tif", crater_field().astype("float32"), **layout)
    got = survey(path, seed=3).craters
    np.testing.assert_allclose(np.sort(got["diameter_m"]), np.sort(reference["diameter_m"]), rtol=1e-9)


def test_nan_stripe_across_a_crater_is_measured_from_valid_part_and_flagged(tmp_path, reference):
    z = crater_field().astype("float32")
    z[78:85, :] = np.nan  # a nodata stripe across the south wall and rim of the first crater
    z[165:175, 85:95] = -3.4e38  # huge nodata value inside the second crater's floor
    path = _write(tmp_path, "holes.tif", z, nodata=-3.4e38)
    got = survey(path, seed=3).craters
    a = _match(got, 70.0, 70.0, 2000.0)
    assert a["rim_coverage"] < 0.95
    assert a["diameter_m"] == pytest.approx(2000.0, rel=0.08)
    assert np.isfinite(got["depth_m"]).all()


def test_crater_touching_the_edge_is_kept_and_flagged(tmp_path):
    # rim radius 30 px, centre 20 px from the west edge: about a quarter of the rim is cut off
    z = crater_field(craters=[(128.0, 20.0, 3000.0)])
    path = _write(tmp_path, "edge.tif", z)
    got = survey(path, seed=3).craters
    assert len(got) >= 1
    a = _match(got, 128.0, 20.0, 3000.0)
    assert a["rim_coverage"] < 0.8
    assert a["diameter_m"] == pytest.approx(3000.0, rel=0.10)


@pytest.mark.parametrize("kind", ["plane", "noise"])
def test_plane_or_noise_gives_empty_valid_geopackage(tmp_path, kind):
    n = 200
    yy, xx = np.mgrid[0:n, 0:n]
    z = 0.05 * xx + 0.02 * yy if kind == "plane" else np.random.default_rng(5).normal(0, 0.5, (n, n))
    path = _write(tmp_path, f"{kind}.tif", z.astype("float32"))
    out = tmp_path / f"{kind}.gpkg"
    res = CliRunner().invoke(cli, ["-q", "survey", str(path), "-o", str(out)])
    assert res.exit_code == 0, res.output
    layers = dict(pyogrio.list_layers(out))
    assert {"craters", "population", "run"} <= set(layers)
    assert pyogrio.read_info(out, layer="craters")["features"] == 0


def test_same_seed_same_bytes_whatever_the_workers(tmp_path):
    from morpho.outputs import export_features, write_geopackage

    z = crater_field(n=300)
    path = _write(tmp_path, "det.tif", z.astype("float32"))
    outs = []
    for workers in (1, 2):
        res = survey(path, seed=9, tile_size=128, max_diameter_px=80, workers=workers)
        gpkg = tmp_path / f"w{workers}.gpkg"
        write_geopackage(gpkg, res.craters, population=res.population, chains=res.chains,
                         footprint=res.footprint, run=res.run)
        csv = tmp_path / f"w{workers}.csv"
        export_features(gpkg, csv)
        outs.append(csv.read_bytes())
    assert outs[0] == outs[1]
    assert outs[0].count(b"\n") >= 4
