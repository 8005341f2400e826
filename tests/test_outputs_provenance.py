"""The ``run`` provenance table.

References: ``hashlib`` (SHA-256, FIPS 180-4) recomputed independently;
``importlib.metadata`` for installed versions; ISO 8601 for timestamps.
"""

from __future__ import annotations

import hashlib
import json
import re
from datetime import UTC, datetime, timedelta, timezone
from importlib import metadata

import pyproj
import pytest

from morpho.caveats import CAVEATS, CAVEATS_SHORT
from morpho.errors import InputError
from morpho.outputs import read_survey, run_provenance, write_geopackage
from morpho.outputs._provenance import DEPENDENCIES
from morpho.outputs._sample import sample_craters


@pytest.fixture
def dem(tmp_path):
    path = tmp_path / "brannock_plain.tif"
    # 3 MiB + 5 bytes: several read chunks, the last one partial
    path.write_bytes(bytes(range(256)) * (3 * 4096) + b"tail!")
    return path


def test_sha256_in_run_matches_hashlib_and_survives_the_geopackage(tmp_path, dem):
    run = run_provenance(dem, seed=11)
    expected = hashlib.sha256(dem.read_bytes()).hexdigest()
    assert run["input_sha256"] == expected
    assert run["input_file"] == "brannock_plain.tif"
    assert run["input_size_bytes"] == str(dem.stat().st_size)
    path = write_geopackage(tmp_path / "o.gpkg", sample_craters(5), run=run)
    assert read_survey(path).run["input_sha256"] == expected


def test_run_records_parameters_versions_times_model_and_caveats(tmp_path, dem):
    model = tmp_path / "scorer.skops"
    model.write_bytes(b"model bytes")
    crs = pyproj.CRS.from_proj4("+proj=stere +lat_0=12 +lon_0=31 +R=1737400 +units=m +no_defs")
    start = datetime(2026, 3, 1, 12, 0, 0, tzinfo=UTC)
    end = datetime(2026, 3, 1, 13, 30, 5, tzinfo=timezone(timedelta(hours=2)))
    run = run_provenance(
        dem, command="survey", parameters={"min_diameter_px": 8, "tile_size": 1024, "refine": True},
        raster_size=(600, 800), crs=crs, body="moon", seed=42, model_path=model,
        model_card={"trained_on": "synthetic", "n": 4000}, start_time=start, end_time=end,
        tiles_failed=["(0, 1024): all nodata"])
    assert run["param.min_diameter_px"] == "8" and run["param.refine"] == "true"
    assert (run["raster_rows"], run["raster_cols"]) == ("600", "800")
    assert pyproj.CRS.from_wkt(run["crs_wkt"]) == crs
    assert run["body"] == "moon" and run["seed"] == "42"
    assert run["model_sha256"] == hashlib.sha256(b"model bytes").hexdigest()
    assert json.loads(run["model_card"]) == {"trained_on": "synthetic", "n": 4000}
    # ISO 8601 in UTC: 13:30:05+02:00 is 11:30:05Z
    assert run["start_time_utc"] == "2026-03-01T12:00:00Z"
    assert run["end_time_utc"] == "2026-03-01T11:30:05Z"
    assert run["tiles_failed_count"] == "1"
    assert json.loads(run["tiles_failed"]) == ["(0, 1024): all nodata"]
    for dist in DEPENDENCIES:
        assert run[f"version.{dist}"] == metadata.version(dist)
    assert re.fullmatch(r"\d+\.\d+\.\d+.*", run["version.gdal_pyogrio"])
    assert run["caveats"] == CAVEATS
    assert list(run)[-1] == "caveats"


def test_end_time_defaults_to_now_in_utc(dem):
    run = run_provenance(dem)
    stamp = datetime.strptime(run["end_time_utc"], "%Y-%m-%dT%H:%M:%SZ").replace(tzinfo=UTC)
    assert abs((datetime.now(UTC) - stamp).total_seconds()) < 60


def test_naive_times_and_missing_inputs_are_refused(tmp_path, dem):
    with pytest.raises(InputError, match="time zone"):
        run_provenance(dem, start_time=datetime(2026, 1, 1))
    with pytest.raises(InputError, match="does not exist"):
        run_provenance(tmp_path / "absent.tif")


def test_caveats_state_the_limits():
    text = CAVEATS.lower()
    for phrase in ("morphological similarity", "not", "mechanism", "micrometre", "millimetre",
                   "untested assumption", "no published depth/diameter ratio", "consensus"):
        assert phrase in text, phrase
    assert "\n" not in CAVEATS_SHORT and "consensus" in CAVEATS_SHORT


def test_iso_text_times_are_normalised_to_utc(dem):
    run = run_provenance(dem, start_time="2026-03-01T12:00:00+00:00", end_time="2026-03-01T14:00:00+02:00")
    assert (run["start_time_utc"], run["end_time_utc"]) == ("2026-03-01T12:00:00Z", "2026-03-01T12:00:00Z")
    with pytest.raises(InputError, match="ISO 8601"):
        run_provenance(dem, start_time="yesterday")
