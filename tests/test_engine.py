"""Tile engine: serial and Dask paths agree, resume redoes only missing tiles, failures are reported."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from morpho.ingest import plan_windows
from morpho.pipeline import run_tiles


def toy_tile(seed, spec, fail=()):
    """A tile function with a result that depends only on the tile (as real tiles do)."""
    if spec.index in fail:
        raise RuntimeError(f"boom {spec.key}")
    rng = np.random.default_rng(seed + spec.index)
    n = int(rng.integers(0, 4))
    return pd.DataFrame({"tile": [spec.key] * n, "v": rng.normal(size=n)})


def _table(run):
    df = pd.concat([r for r in run.results if len(r)], ignore_index=True)
    return df.sort_values(["tile", "v"]).reset_index(drop=True)


SPECS = plan_windows(400, 300, 100, 10)


def test_serial_path_runs_every_tile_in_order():
    run = run_tiles(toy_tile, 7, SPECS, progress=False)
    assert len(run.results) == len(SPECS) == 12
    assert not run.failed


@pytest.mark.slow
def test_real_dask_cluster_on_loopback_matches_serial():
    from dask.distributed import LocalCluster

    serial = _table(run_tiles(toy_tile, 7, SPECS, progress=False))
    with LocalCluster(n_workers=2, threads_per_worker=1, processes=True, host="127.0.0.1",
                      dashboard_address=None) as cluster:
        remote = _table(run_tiles(toy_tile, 7, SPECS, scheduler=cluster.scheduler_address, progress=False))
    pd.testing.assert_frame_equal(serial, remote)


def test_failed_tile_is_retried_then_reported_and_others_complete():
    calls = []

    def flaky(seed, spec):
        calls.append(spec.index)
        return toy_tile(seed, spec, fail=(3,))

    run = run_tiles(flaky, 7, SPECS, progress=False)
    assert list(run.failed) == [SPECS[3].key]
    assert calls.count(3) == 2  # tried, then retried once
    assert len(run.results) == len(SPECS) - 1


def test_resume_redoes_only_missing_tiles(tmp_path):
    full = _table(run_tiles(toy_tile, 7, SPECS, progress=False))
    # an "interrupted" run: tile 5 failed, the others were saved to the run folder
    first = run_tiles(toy_tile, 7, SPECS, (tuple([5]),), run_dir=tmp_path, progress=False)
    assert SPECS[5].key in first.failed
    redone = []

    def counting(seed, spec):
        redone.append(spec.index)
        return toy_tile(seed, spec)

    resumed = run_tiles(counting, 7, SPECS, run_dir=tmp_path, resume=True, progress=False)
    assert redone == [5]
    assert resumed.reused == len(SPECS) - 1
    pd.testing.assert_frame_equal(_table(resumed), full)
