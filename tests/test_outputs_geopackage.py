"""The survey GeoPackage: round trips, OGC GeoPackage structure, atomic and guarded writes.

Independent references: geopandas' own reader and ``geopandas.testing`` for round
trips; the OGC GeoPackage Encoding Standard 1.3 (OGC 12-128r18) for the file's
SQLite tables, checked with Python's ``sqlite3``.
"""

from __future__ import annotations

import sqlite3
import xml.etree.ElementTree as ET

import geopandas as gpd
import numpy as np
import pandas as pd
import pyogrio
import pytest
import shapely
from geopandas.testing import assert_geodataframe_equal
from pandas.testing import assert_frame_equal

from morpho import dictionary
from morpho.errors import InputError, OutputError, OutputExistsError
from morpho.outputs import _geopackage, read_survey, write_geopackage
from morpho.outputs._sample import (
    sample_chains,
    sample_craters,
    sample_envelope,
    sample_population,
)


@pytest.fixture(scope="module")
def craters():
    return sample_craters(60, seed=3)


def _write(path, craters, **kw):
    return write_geopackage(path, craters, population=sample_population(), chains=sample_chains(),
                            footprint=shapely.box(0, 0, 100_000, 100_000),
                            run={"input_file": "brannock.tif", "seed": 7}, envelope=sample_envelope(),
                            **kw)


def test_layers_read_back_with_geopandas_equal_what_was_written(tmp_path, craters):
    path = _write(tmp_path / "out.gpkg", craters)
    back = gpd.read_file(path, layer="craters")
    assert_geodataframe_equal(back, craters, check_crs=False)
    # CRS: the WKT stored in gpkg_spatial_ref_sys describes the same projection (pyproj equality)
    assert back.crs.equals(craters.crs, ignore_axis_order=True)
    assert_geodataframe_equal(gpd.read_file(path, layer="chains"), sample_chains(), check_crs=False)
    assert_frame_equal(pd.DataFrame(gpd.read_file(path, layer="population")), sample_population())
    assert_frame_equal(pd.DataFrame(gpd.read_file(path, layer="ripley_l")), sample_envelope())
    fp = gpd.read_file(path, layer="footprint")
    assert fp.geometry.iloc[0].equals(shapely.box(0, 0, 100_000, 100_000))
    run = gpd.read_file(path, layer="run")
    assert list(run.columns) == ["key", "value"]
    assert dict(zip(run["key"], run["value"], strict=True)) == {"input_file": "brannock.tif", "seed": "7"}
    # and morpho's own reader gives the same tables
    survey = read_survey(path)
    assert_geodataframe_equal(survey.craters, back)
    assert_frame_equal(survey.population, sample_population())
    assert_frame_equal(survey.envelope, sample_envelope())
    assert survey.run == {"input_file": "brannock.tif", "seed": "7"}


def test_file_follows_the_ogc_geopackage_structure(tmp_path, craters):
    path = _write(tmp_path / "out.gpkg", craters)
    with sqlite3.connect(path) as con:
        # OGC 12-128r18 Req 2: application_id is 0x47504B47 ("GPKG")
        assert con.execute("PRAGMA application_id").fetchone()[0] == 0x47504B47
        assert con.execute("PRAGMA integrity_check").fetchone()[0] == "ok"
        contents = dict(con.execute("SELECT table_name, data_type FROM gpkg_contents"))
        geom = dict(con.execute("SELECT table_name, geometry_type_name FROM gpkg_geometry_columns"))
        n = con.execute("SELECT count(*) FROM craters").fetchone()[0]
    # Req 13/ 21: vector layers are "features", non-spatial tables "attributes"
    assert {k: contents[k] for k in _geopackage.LAYERS} == {
        "craters": "features", "population": "attributes", "ripley_l": "attributes", "chains": "features",
        "footprint": "features", "run": "attributes"}
    assert geom["craters"] == "POLYGON" and geom["chains"] == "LINESTRING"
    assert n == len(craters)


def test_columns_follow_dictionary_order_whatever_the_input_order(tmp_path, craters):
    shuffled = craters[list(craters.columns[::-1])]
    path = write_geopackage(tmp_path / "o.gpkg", shuffled)
    back = gpd.read_file(path, layer="craters")
    assert list(back.columns[:-1]) == [c for c in dictionary.CRATER_COLUMNS if c in craters.columns]


def test_empty_crater_table_writes_full_schema(tmp_path):
    empty = sample_craters(0)
    path = write_geopackage(tmp_path / "empty.gpkg", empty)
    with sqlite3.connect(path) as con:
        cols = [r[1] for r in con.execute("PRAGMA table_info(craters)")]
        geom = con.execute("SELECT geometry_type_name FROM gpkg_geometry_columns "
                           "WHERE table_name='craters'").fetchone()[0]
    assert cols[2:] == list(dictionary.CRATER_COLUMNS)  # after fid and geom
    assert geom == "POLYGON"
    survey = read_survey(path)
    assert len(survey.craters) == 0
    expected = {f.name: f.dtype for f in dictionary.CRATER_FIELDS}
    for name, dtype in expected.items():
        got = survey.craters[name].dtype
        assert (got == "str") if dtype == "str" else (got == np.dtype(dtype)), (name, got)


def test_undocumented_column_is_rejected_before_writing(tmp_path, craters):
    bad = craters.assign(my_guess=1.0)
    with pytest.raises(InputError, match="my_guess.*dictionary"):
        write_geopackage(tmp_path / "o.gpkg", bad)
    assert list(tmp_path.iterdir()) == []


@pytest.mark.parametrize("mutate, match", [
    (lambda c: c.assign(crater_id="same"), "unique"),
    (lambda c: c.set_crs(None, allow_override=True), "no CRS"),
    (lambda c: c.set_geometry(c.centroid), "polygons"),
    (lambda c: c.assign(diameter_m="wide"), "cannot be stored as float64"),
])
def test_bad_crater_tables_are_rejected(tmp_path, craters, mutate, match):
    with pytest.raises(InputError, match=match):
        write_geopackage(tmp_path / "o.gpkg", mutate(craters))


def test_never_overwrites_without_overwrite(tmp_path, craters):
    path = _write(tmp_path / "o.gpkg", craters)
    before = path.read_bytes()
    with pytest.raises(OutputExistsError, match="--overwrite") as info:
        _write(path, craters.iloc[:5])
    assert info.value.path == str(path)
    assert path.read_bytes() == before
    _write(path, craters.iloc[:5], overwrite=True)
    assert len(gpd.read_file(path, layer="craters")) == 5


def test_unwritable_destination_is_an_output_error(tmp_path, craters):
    not_a_folder = tmp_path / "file"
    not_a_folder.write_text("x")
    with pytest.raises(OutputError, match="does not exist"):
        write_geopackage(not_a_folder / "o.gpkg", craters)
    with pytest.raises(OutputError, match="does not exist"):
        write_geopackage(tmp_path / "missing" / "o.gpkg", craters)


def _interrupt_at(monkeypatch, layer):
    real = _geopackage._write_layer

    def flaky(frame, path, name, **kw):
        if name == layer:
            raise KeyboardInterrupt("simulated interruption")
        real(frame, path, name, **kw)

    monkeypatch.setattr(_geopackage, "_write_layer", flaky)


def test_interrupted_write_leaves_no_file(tmp_path, craters, monkeypatch):
    _interrupt_at(monkeypatch, "chains")  # after craters and population are on disk
    with pytest.raises(KeyboardInterrupt):
        _write(tmp_path / "o.gpkg", craters)
    assert list(tmp_path.iterdir()) == []  # no target, no temporary leftovers


def test_unflushed_sqlite_setting_is_scoped_to_the_write_even_when_interrupted(tmp_path, craters, monkeypatch):
    # GDAL configuration option OGR_SQLITE_SYNCHRONOUS (GDAL SQLite/GPKG driver docs): the
    # writer turns the per-transaction flush off for its temporary file only; the user's
    # setting is back afterwards, whether the write completed or not.
    pyogrio.set_gdal_config_options({"OGR_SQLITE_SYNCHRONOUS": "NORMAL"})
    try:
        _write(tmp_path / "a.gpkg", craters)
        assert pyogrio.get_gdal_config_option("OGR_SQLITE_SYNCHRONOUS") == "NORMAL"
        _interrupt_at(monkeypatch, "chains")
        with pytest.raises(KeyboardInterrupt):
            _write(tmp_path / "b.gpkg", craters)
        assert pyogrio.get_gdal_config_option("OGR_SQLITE_SYNCHRONOUS") == "NORMAL"
    finally:
        pyogrio.set_gdal_config_options({"OGR_SQLITE_SYNCHRONOUS": None})
    assert pyogrio.get_gdal_config_option("OGR_SQLITE_SYNCHRONOUS") is None
    with sqlite3.connect(tmp_path / "a.gpkg") as con:
        assert con.execute("PRAGMA integrity_check").fetchone()[0] == "ok"


def test_interrupted_overwrite_keeps_the_old_file(tmp_path, craters, monkeypatch):
    path = _write(tmp_path / "o.gpkg", craters)
    before = path.read_bytes()
    _interrupt_at(monkeypatch, "run")
    with pytest.raises(KeyboardInterrupt):
        _write(path, craters.iloc[:3], overwrite=True)
    assert path.read_bytes() == before
    assert [p.name for p in tmp_path.iterdir()] == ["o.gpkg"]


def test_read_survey_rejects_files_that_are_not_morpho_geopackages(tmp_path, craters):
    text = tmp_path / "notes.gpkg"
    text.write_text("not a database")
    with pytest.raises(InputError, match="not a GeoPackage"):
        read_survey(text)
    other = tmp_path / "other.gpkg"
    craters[["crater_id", "geometry"]].to_file(other, layer="roads")
    with pytest.raises(InputError, match="not a morpho GeoPackage"):
        read_survey(other)
    with pytest.raises(InputError, match="no such file"):
        read_survey(tmp_path / "absent.gpkg")


def test_default_style_colours_craters_by_verdict(tmp_path, craters):
    path = _write(tmp_path / "o.gpkg", craters)
    with sqlite3.connect(path) as con:
        name, qml, default = con.execute(
            "SELECT f_table_name, styleQML, useAsDefault FROM layer_styles").fetchone()
    assert name == "craters" and default == 1
    renderer = ET.fromstring(qml).find("renderer-v2")
    assert renderer.get("attr") == "verdict"
    values = {c.get("value") for c in renderer.iter("category")}
    assert values == set(craters["verdict"])


def test_missing_values_never_become_true(tmp_path, craters):
    bools = [f.name for f in dictionary.CRATER_FIELDS if f.dtype == "bool" and f.name in craters]
    if not bools:
        pytest.skip("the dictionary declares no boolean crater column")
    bad = craters.astype({bools[0]: object})
    bad.loc[0, bools[0]] = None
    with pytest.raises(InputError, match="missing values"):
        write_geopackage(tmp_path / "o.gpkg", bad)
