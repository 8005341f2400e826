"""Tiled surveys: serial, local-cluster and remote-scheduler runs agree; kill + resume; failed tiles."""

from __future__ import annotations

import json
import os
import signal
import subprocess
import sys
import time

import numpy as np
import pandas as pd
import pyogrio
import pytest
from affine import Affine

from morpho.pipeline import survey

from .conftest import MOON_STERE, write_raster
from .test_survey_geometry import pike_bowl

N = 384
SPACING = 40.0
TILE = 128  # 9 tiles
MAXD = 40   # px -> overlap 50 px
BORDER = [[128, 60], [256, 200], [100, 128], [300, 256]]  # crater centres on tile borders (row, col)


@pytest.fixture(scope="module")
def crater_dem(tmp_path_factory):
    """Fresh Pike-shaped craters (Pike 1977) at random places, some straddling tile borders."""
    rng = np.random.default_rng(42)
    yy, xx = np.mgrid[0:N, 0:N].astype(float)
    z = rng.normal(0, 0.5, (N, N))
    centres = rng.uniform(15, N - 15, (30, 2))
    centres[:4] = BORDER  # on tile borders
    diam = rng.uniform(12, 30, len(centres))
    diam[:4] = 24.0
    # Keep the planted border craters whole: no random crater overlaps them.
    gap = np.hypot(*(centres[4:, None, :] - centres[None, :4, :]).transpose(2, 0, 1))
    clear = (gap > 0.6 * (diam[4:, None] + diam[None, :4])).all(axis=1)
    centres = np.concatenate([centres[:4], centres[4:][clear]])
    diam = np.concatenate([diam[:4], diam[4:][clear]])
    for (r0, c0), d_px in zip(centres, diam, strict=True):
        z += pike_bowl(np.hypot(yy - r0, xx - c0) * SPACING, d_px * SPACING)
    path = tmp_path_factory.mktemp("scale") / "field.tif"
    return write_raster(path, z.astype("float32"), crs=MOON_STERE,
                        transform=Affine(SPACING, 0, 0, 0, -SPACING, 0))


def _key(craters):
    df = pd.DataFrame(craters.drop(columns="geometry"))
    cols = ["crater_id", "center_x", "center_y", "diameter_m", "depth_m", "p_impact"]
    return df[cols].sort_values("crater_id").reset_index(drop=True)


@pytest.fixture(scope="module")
def serial(crater_dem):
    return survey(crater_dem, tile_size=TILE, max_diameter_px=MAXD, seed=2, workers=1)


def test_tiled_survey_finds_border_craters_once(serial, crater_dem):
    c = serial.craters
    assert serial.run["n_tiles"] == "9"
    # no two craters closer than a quarter of their diameter (duplicates from overlaps merged)
    xy = c[["center_x", "center_y"]].to_numpy()
    d = np.hypot(*(xy[:, None, :] - xy[None, :, :]).transpose(2, 0, 1))
    np.fill_diagonal(d, np.inf)
    assert (d.min(axis=1) > 0.25 * c["diameter_m"].to_numpy()).all()
    for r0, c0 in BORDER:
        x, y = (c0 + 0.5) * SPACING, -(r0 + 0.5) * SPACING
        assert np.hypot(c["center_x"] - x, c["center_y"] - y).min() < 3 * SPACING


@pytest.mark.slow
def test_local_cluster_and_remote_scheduler_match_serial(serial, crater_dem, tmp_path, monkeypatch):
    from dask.distributed import LocalCluster

    from morpho.ingest import valid_footprint

    survey_module = sys.modules["morpho.pipeline.survey"]  # the package exports a function of that name
    log = tmp_path / "footprint_pids.txt"

    def logged(info):  # sent to the workers by value; notes which process ran it
        with open(log, "a") as fh:
            fh.write(f"{os.getpid()}\n")
        return valid_footprint(info)

    parts_log = tmp_path / "population_parts.txt"
    part = survey_module._population_part

    def logged_part(*args):  # the CSR simulations' measures, split between the worker and this process
        with open(parts_log, "a") as fh:
            fh.write(f"{os.getpid()}:{args[-2]}\n")
        return part(*args)

    with monkeypatch.context() as patch:
        patch.setattr(survey_module, "valid_footprint", logged)
        patch.setattr(survey_module, "_population_part", logged_part)
        local = survey(crater_dem, tile_size=TILE, max_diameter_px=MAXD, seed=2, workers=2)
    pids = log.read_text().split()
    assert len(pids) == 1 and int(pids[0]) != os.getpid()  # once, on a worker
    parts = dict(line.split(":")[::-1] for line in parts_log.read_text().split())
    assert sorted(parts) == ["0", str(survey_module.SIMULATIONS_BESIDE_SCORING)]
    # With workers=2 this process is one of the two: it takes the later simulations while the
    # Dask worker scores, then the first ones.
    assert parts[str(survey_module.SIMULATIONS_BESIDE_SCORING)] == str(os.getpid()) != parts["0"]
    pd.testing.assert_frame_equal(_key(local.craters), _key(serial.craters))
    # The valid-data footprint comes from a worker here and from this process serially.
    assert local.footprint.geometry.iloc[0].equals_exact(serial.footprint.geometry.iloc[0], 0.0)
    pd.testing.assert_frame_equal(local.population, serial.population)
    with LocalCluster(n_workers=2, threads_per_worker=1, processes=True, host="127.0.0.1",
                      dashboard_address=None) as cluster:
        remote = survey(crater_dem, tile_size=TILE, max_diameter_px=MAXD, seed=2,
                        scheduler=cluster.scheduler_address)
    pd.testing.assert_frame_equal(_key(remote.craters), _key(serial.craters))


def test_failing_tile_is_reported_and_other_tiles_complete(serial, crater_dem):
    res = survey(crater_dem, tile_size=TILE, max_diameter_px=MAXD, seed=2, _fail_tiles=(4,))
    assert res.partial and len(res.failed_tiles) == 1
    assert "made to fail" in next(iter(res.failed_tiles.values()))
    assert res.run["tiles_failed_count"] == "1"
    lost = serial.craters["source_tile"] == "r000128_c000128"
    got = set(np.round(res.craters["center_x"], 3))
    assert set(np.round(serial.craters.loc[~lost, "center_x"], 3)) <= got


@pytest.mark.slow
def test_killed_survey_resumes_to_the_same_result(tmp_path, crater_dem):
    out = tmp_path / "killed.gpkg"
    run_dir = tmp_path / "killed.gpkg.morpho-run"
    cmd = [sys.executable, "-m", "morpho.cli.main", "-q", "survey", str(crater_dem), "-o", str(out),
           "--tile-size", str(TILE), "--max-diameter-px", str(MAXD), "--seed", "2", "--workers", "1"]
    proc = subprocess.Popen(cmd, start_new_session=True)
    t0 = time.time()
    while time.time() - t0 < 120 and len(list(run_dir.glob("*.parquet"))) < 3:
        time.sleep(0.05)
    os.killpg(proc.pid, signal.SIGKILL)
    proc.wait()
    done_before = len(list(run_dir.glob("*.parquet")))
    assert 3 <= done_before < 9 and not out.exists()
    res = subprocess.run([*cmd, "--resume"], capture_output=True, text=True, timeout=300)
    assert res.returncode == 0, res.stderr
    full = tmp_path / "full.gpkg"
    res2 = subprocess.run([*cmd[:7], str(full), *cmd[8:]], capture_output=True, text=True, timeout=300)
    assert res2.returncode == 0, res2.stderr
    a = pyogrio.read_dataframe(out, layer="craters")
    b = pyogrio.read_dataframe(full, layer="craters")
    pd.testing.assert_frame_equal(_key(a), _key(b))
    run = pyogrio.read_dataframe(out, layer="run").set_index("key")["value"]
    assert int(run["param.tiles_reused"]) == done_before


def test_stage_times_add_up_to_the_survey_time(serial):
    # common practice: a time breakdown must account for the whole, with no negative parts.
    timing = json.loads(serial.run["timing_s"])
    stages = ("open", "model_wait", "cluster", "warmup", "tiles", "merge", "finish")
    assert set(stages) <= set(timing)
    assert all(timing[k] >= 0 for k in stages)
    total = float(serial.run["seconds"])
    assert 0.9 * total <= sum(timing[k] for k in stages) <= total + 0.01
    assert timing["cluster"] == 0  # one worker: no cluster started
    assert list(serial.run)[-1] == "caveats"


@pytest.mark.slow
def test_broken_model_file_stops_a_dask_survey_before_anything_is_kept(tmp_path, crater_dem):
    from morpho.errors import ModelFileError

    model = tmp_path / "broken.skops"
    model.write_bytes(b"PK\x03\x04 not really a zip")
    run_dir = tmp_path / "out.gpkg.morpho-run"
    with pytest.raises(ModelFileError):
        survey(crater_dem, tile_size=TILE, max_diameter_px=MAXD, seed=2, workers=2, model=model,
               run_dir=run_dir)
    assert not run_dir.exists()


_LIGHT_MAIN = """
import json, sys
from morpho.pipeline import survey
res = survey(sys.argv[1], tile_size=int(sys.argv[2]), max_diameter_px=float(sys.argv[3]), seed=2, workers=2)
timing = json.loads(res.run["timing_s"])
print(json.dumps({"sklearn": "sklearn" in sys.modules, "skops": "skops" in sys.modules,
                  "model_load": timing["model_load"], "n": len(res.craters),
                  "scored": bool(res.craters["p_impact"].notna().all())}))
"""


def _assert_light_main(dem, tile_size):
    """A 2-worker survey in a fresh process scores every crater without importing scikit-learn or skops."""
    out = subprocess.run([sys.executable, "-c", _LIGHT_MAIN, str(dem), str(tile_size), str(MAXD)],
                         capture_output=True, text=True, check=True, timeout=300)
    got = json.loads(out.stdout.strip().splitlines()[-1])
    assert got["n"] > 20 and got["scored"]
    assert not got["sklearn"] and not got["skops"]
    assert got["model_load"] > 0  # timed in the process that loaded it


@pytest.mark.slow
def test_dask_survey_scores_on_a_worker_and_its_main_process_stays_light(crater_dem):
    # Design check (DEVELOPERS.md, pipeline notes): with Dask workers the model is loaded and
    # used on a worker, so the main process never imports scikit-learn or skops.
    _assert_light_main(crater_dem, TILE)


@pytest.mark.slow
def test_single_tile_survey_on_two_cores_scores_in_a_second_process(crater_dem):
    # Design check (DEVELOPERS.md, pipeline notes): one tile runs in this process; with a
    # second core the model is loaded beside it in another process and the scores come from
    # there, so this process imports neither scikit-learn nor skops ...
    _assert_light_main(crater_dem, N)
    # ... and the tables are those of the same single tile on one core (issue #9: same craters
    # whatever runs them).
    one = survey(crater_dem, tile_size=N, max_diameter_px=MAXD, seed=2, workers=1)
    two = survey(crater_dem, tile_size=N, max_diameter_px=MAXD, seed=2, workers=2)
    assert one.run["n_tiles"] == two.run["n_tiles"] == "1"
    pd.testing.assert_frame_equal(pd.DataFrame(two.craters.drop(columns="geometry")),
                                  pd.DataFrame(one.craters.drop(columns="geometry")))
    pd.testing.assert_frame_equal(two.population, one.population)
    pd.testing.assert_frame_equal(pd.DataFrame(two.chains.drop(columns="geometry")),
                                  pd.DataFrame(one.chains.drop(columns="geometry")))


def _die(*_args):
    """Stands in for the scoring process's work and ends that process abruptly."""
    os._exit(3)


@pytest.mark.slow
@pytest.mark.parametrize("step", ["warm_model", "score_table"])
def test_single_tile_survey_survives_its_scoring_process_dying(crater_dem, monkeypatch, caplog, step):
    # Reliability (issue #9: the rest completes): if the second process dies while loading the
    # model or while scoring, this process does that work itself and the tables do not change.
    survey_module = sys.modules["morpho.pipeline.survey"]
    one = survey(crater_dem, tile_size=N, max_diameter_px=MAXD, seed=2, workers=1)
    monkeypatch.setattr(survey_module, step, _die)
    with caplog.at_level("WARNING", logger="morpho.pipeline.survey"):
        two = survey(crater_dem, tile_size=N, max_diameter_px=MAXD, seed=2, workers=2)
    assert any("scoring process stopped" in r.getMessage() for r in caplog.records)
    pd.testing.assert_frame_equal(pd.DataFrame(two.craters.drop(columns="geometry")),
                                  pd.DataFrame(one.craters.drop(columns="geometry")))


@pytest.mark.slow
@pytest.mark.parametrize("tile_size", [TILE, N], ids=["dask-workers", "scoring-process"])
def test_untrusted_model_is_refused_on_the_workers_naming_the_users_file(tmp_path, crater_dem, tile_size):
    import fractions

    import skops.io as sio

    import morpho.scoring._persistence as persistence
    from morpho.errors import ModelFileError
    from morpho.scoring import ImpactSpotClassifier

    from ._scoring_toy import toy_features

    X, y = toy_features(80, seed=4)
    payload = {"format": persistence.FORMAT, "format_version": 1,
               "model": ImpactSpotClassifier(random_state=0, max_iter=10).fit(X, y),
               "card": {}, "extra": fractions.Fraction(1, 3)}
    model = tmp_path / "evil.skops"
    sio.dump(payload, model)
    out = tmp_path / "out.gpkg"
    with pytest.raises(ModelFileError, match=r"evil\.skops.*untrusted types.*fractions\.Fraction"):
        survey(crater_dem, tile_size=tile_size, max_diameter_px=MAXD, seed=2, workers=2, model=model)
    assert not out.exists()


def test_shipped_model_bytes_that_are_not_a_model_are_refused_by_the_users_name(tmp_path):
    # A remote scheduler's workers get the model's bytes; an error must name the file the
    # user gave, not the worker's temporary copy (issue: a clear error naming the file).
    from morpho.errors import ModelFileError
    from morpho.scoring import _table

    spec = _table.ModelSpec(path="/data/models/mine.skops", sha256="0" * 64, data=b"not a zip file")
    with pytest.raises(ModelFileError, match=r"^/data/models/mine\.skops: "):
        _table.cached_model(spec)
    assert spec.sha256 not in _table.MODELS
