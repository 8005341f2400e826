"""Tile engine: serial and Dask paths agree, resume redoes only missing tiles, failures are reported."""

from __future__ import annotations

import os
import subprocess
import sys

import numpy as np
import pandas as pd
import pytest

from morpho._runtime import WORKER_ENVIRON
from morpho.ingest import plan_windows
from morpho.pipeline import run_tiles
from morpho.pipeline.engine import uses_dask


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


def pid_tile(seed, spec):
    """A short tile that says which process ran it."""
    import time

    time.sleep(0.05)
    return pd.DataFrame({"tile": [spec.index], "v": [seed + spec.index], "pid": [os.getpid()]})


@pytest.mark.slow
def test_local_cluster_shares_the_tiles_with_this_process_and_loses_none():
    # workers=2 on a local cluster: this process and one Dask worker take tiles from one
    # queue (the worker's next one handed out from a done-callback thread). 120 short tiles
    # make that hand-out race with this process's own; each must come back once, in tile order.
    specs = plan_windows(1200, 1000, 100, 0)
    run = run_tiles(pid_tile, 3, specs, workers=2, progress=False)
    df = pd.concat(run.results, ignore_index=True)
    assert len(specs) == 120 and not run.failed
    assert df["tile"].tolist() == list(range(len(specs)))
    assert (df["v"] == 3 + df["tile"]).all()
    # Both took tiles: this process from the start, the worker once the cluster was up (~2 s).
    assert os.getpid() in set(df["pid"]) and df["pid"].nunique() == 2


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


def test_before_first_failure_stops_the_run_before_anything_is_saved(tmp_path):
    # common practice: a run that cannot finish (here: the survey's model failed to load)
    # leaves no partial state behind for --resume to pick up.
    run_dir = tmp_path / "run"
    calls = []

    def tile(seed, spec):
        calls.append(spec.index)
        return toy_tile(seed, spec)

    def hook():
        raise ValueError("model failed to load")

    with pytest.raises(ValueError, match="model failed"):
        run_tiles(tile, 7, SPECS, run_dir=run_dir, before_first=hook, progress=False)
    assert calls == [0]
    assert not run_dir.exists()


def test_before_first_runs_once_before_the_first_save(tmp_path):
    seen = []
    run = run_tiles(toy_tile, 7, SPECS, run_dir=tmp_path / "run", progress=False,
                    before_first=lambda: seen.append(len(list(tmp_path.glob("run/*.parquet")))))
    assert seen == [0]
    assert len(list(tmp_path.glob("run/*.parquet"))) == len(SPECS) == len(run.results)
    assert run.cluster_seconds == 0.0


@pytest.mark.parametrize(("n_tiles", "workers", "scheduler", "expected"), [
    (1, 2, None, False),   # one tile: in-process, no cluster to start
    (4, 1, None, False),
    (4, 2, None, True),
    (1, 1, "tcp://127.0.0.1:1", True),  # a given scheduler is always used
])
def test_uses_dask_only_when_workers_can_share_tiles(n_tiles, workers, scheduler, expected):
    assert uses_dask(n_tiles, workers, scheduler) is expected


@pytest.mark.slow
def test_before_first_failure_on_a_local_cluster_closes_it_and_raises(tmp_path):
    def hook():
        raise ValueError("model failed to load")

    with pytest.raises(ValueError, match="model failed"):
        run_tiles(toy_tile, 7, SPECS, workers=2, run_dir=tmp_path / "run", before_first=hook, progress=False)
    assert not (tmp_path / "run").exists()


def test_warm_modules_are_imported_before_any_tile_runs(tmp_path):
    calls = []

    def tile(seed, spec):
        calls.append(spec.index)
        return toy_tile(seed, spec)

    with pytest.raises(ModuleNotFoundError):
        run_tiles(tile, 7, SPECS, warm_modules=("morpho.no_such_module",), progress=False)
    assert calls == []
    run = run_tiles(tile, 7, SPECS, warm_modules=("morpho.shapes",), progress=False)
    assert len(run.results) == len(SPECS) and run.warmup_seconds >= 0


_LOCAL_SCRIPT = """
import sys
import pandas as pd
from morpho.ingest import plan_windows
from morpho.pipeline import run_tiles

def tile(seed, spec):
    return pd.DataFrame({"v": [seed + spec.index]})

if __name__ == "__main__":
    assert "colorsys" not in sys.modules
    run = run_tiles(tile, 1, plan_windows(200, 200, 100, 10), workers=2, local_modules=("colorsys",), progress=False)
    print(len(run.results), "colorsys" in sys.modules, run.warmup_seconds)
"""


def test_local_modules_are_imported_here_while_dask_workers_run_the_tiles(tmp_path):
    # The merge's imports would otherwise land after the last tile (scipy.spatial: ~0.35 s).
    script = tmp_path / "local_modules.py"
    script.write_text(_LOCAL_SCRIPT)
    out = subprocess.run([sys.executable, str(script)], capture_output=True, text=True, check=True, timeout=300)
    n, imported, warmup = out.stdout.split()
    # 4 tiles, shared between this process and the Dask worker; no warm-up modules to import.
    assert (n, imported) == ("4", "True") and float(warmup) < 0.1


_WARM_SCRIPT = """
import numpy as np
from morpho import shapes
from morpho.pipeline.engine import _import_all
from morpho.morphometry._degradation import _model_table
from morpho.bodies import get_body
_import_all(["morpho.morphometry"])
warm = shapes._diffusion_modes.cache_info()
_model_table(1000.0, get_body("moon"), np.linspace(0.0, 2.5, 101))
print(warm.currsize, warm.misses, shapes._diffusion_modes.cache_info().misses)
"""


def test_morphometry_warm_up_computes_the_operator_the_degradation_tables_use():
    # One miss at warm-up, none when the first table is built: the operator the warm-up
    # computes is the one every table needs (same grid key), so the tiles do not pay for it.
    out = subprocess.run([sys.executable, "-c", _WARM_SCRIPT], capture_output=True, text=True, check=True)
    assert out.stdout.split() == ["1", "1", "1"]


_REUSE_SCRIPT = """
import resource, sys, threading
import numpy as np
from morpho._runtime import retain_freed_memory
if sys.argv[1] == "retain":
    assert retain_freed_memory()

def work(out):
    a = np.ones(96 << 17)  # 96 MiB: above glibc's largest adaptive mmap threshold (32 MiB)
    del a                  # and above a thread arena's largest heap (64 MiB)
    before = resource.getrusage(resource.RUSAGE_THREAD).ru_minflt
    b = np.ones(96 << 17)
    out.append(resource.getrusage(resource.RUSAGE_THREAD).ru_minflt - before)

out = []
if sys.argv[2] == "thread":  # as in a Dask worker, whose tasks run in a worker thread
    t = threading.Thread(target=work, args=(out,))
    t.start()
    t.join()
else:
    work(out)
print(out[0])
"""


@pytest.mark.skipif(not sys.platform.startswith("linux"), reason="glibc malloc tunables (Linux only)")
def test_retained_memory_is_reused_without_new_page_faults():
    # mallopt(3), glibc manual "Memory Allocation Tunables": with both thresholds above the
    # allocation size a freed block stays in the heap, so the next one touches no new pages;
    # with the defaults a 64 MiB block is mapped afresh (>= 64 MiB / 2 MiB huge pages faults).
    # glibc's defaults in the child: no tunables inherited from this process (the CLI exports them).
    env = {k: v for k, v in os.environ.items() if k not in WORKER_ENVIRON}

    def faults(mode, where):
        out = subprocess.run([sys.executable, "-c", _REUSE_SCRIPT, mode, where], capture_output=True,
                             text=True, check=True, env=env)
        return int(out.stdout.strip())

    # 96 MiB is >= 48 huge pages or 24,576 small ones when mapped afresh.
    assert faults("default", "main") >= 48
    assert faults("default", "thread") >= 48
    assert faults("retain", "main") < 8
    # glibc manual, "Memory Allocation Tunables" (glibc.malloc.arena_max): with one arena a
    # thread allocates from the main heap, which the thresholds keep.
    assert faults("retain", "thread") < 8


_HERE = os.getpid()


def _busy_here():
    # With workers=2 this process runs tiles too; slowed down here, it leaves some to the Dask
    # worker once that is up (~2 s), whose settings these tests read.
    if os.getpid() == _HERE:
        import time

        time.sleep(1.5)


def env_tile(names, spec):
    """A tile that reports environment variables of the process it ran in."""
    _busy_here()
    return pd.DataFrame({"tile": [spec.key], "pid": [os.getpid()],
                         **{name: [os.environ.get(name, "")] for name in names}})


@pytest.mark.slow
def test_local_workers_start_with_the_retaining_malloc_settings():
    names = ("MALLOC_MMAP_THRESHOLD_", "MALLOC_TRIM_THRESHOLD_", "MALLOC_ARENA_MAX", "NUMPY_MADVISE_HUGEPAGE")
    run = run_tiles(env_tile, names, SPECS[:6], workers=2, progress=False)
    df = pd.concat(run.results, ignore_index=True)
    df = df[df["pid"] != os.getpid()]
    assert len(df) >= 1  # really ran in a worker process
    assert set(df["MALLOC_MMAP_THRESHOLD_"]) == set(df["MALLOC_TRIM_THRESHOLD_"]) == {str(1 << 30)}
    assert set(df["MALLOC_ARENA_MAX"]) == {"1"}
    assert set(df["NUMPY_MADVISE_HUGEPAGE"]) == {"0"}


def profiling_tile(_, spec):
    """A tile that reports whether its Dask worker samples task stacks."""
    _busy_here()
    import dask
    from dask.utils import parse_timedelta

    timers = ("distributed.admin.tick.interval", "distributed.worker.memory.monitor-interval",
              "distributed.admin.system-monitor.interval")
    return pd.DataFrame({"tile": [spec.key], "pid": [os.getpid()],
                         "profile": [bool(dask.config.get("distributed.worker.profile.enabled"))],
                         **{t: [parse_timedelta(dask.config.get(t))] for t in timers}})


@pytest.mark.slow
def test_local_workers_do_not_profile_the_tiles_and_wake_less_often():
    run = run_tiles(profiling_tile, None, SPECS[:6], workers=2, progress=False)
    df = pd.concat(run.results, ignore_index=True)
    df = df[df["pid"] != os.getpid()]
    assert len(df) >= 1
    assert not df["profile"].any()
    # Slower housekeeping timers in the workers (dask defaults: 20 ms, 100 ms, 500 ms).
    assert (df["distributed.admin.tick.interval"] == 0.2).all()
    assert (df["distributed.worker.memory.monitor-interval"] == 1.0).all()
    assert (df["distributed.admin.system-monitor.interval"] == 2.0).all()


def _footprint_like(value):
    return {"area": value * 2}


@pytest.mark.slow
def test_side_tasks_run_on_dask_workers_and_are_left_to_the_caller_serially():
    side = {"fp": (_footprint_like, (21,))}
    dask_run = run_tiles(toy_tile, 7, SPECS, workers=2, progress=False, side_tasks=side)
    assert dask_run.side == {"fp": {"area": 42}}
    assert _table(dask_run).equals(_table(run_tiles(toy_tile, 7, SPECS, progress=False)))
    serial = run_tiles(toy_tile, 7, SPECS, progress=False, side_tasks=side)
    assert serial.side == {}  # the caller computes it itself
    failing = run_tiles(toy_tile, 7, SPECS, workers=2, progress=False,
                        side_tasks={"fp": (_footprint_like, (None,))})
    assert failing.side == {} and not failing.failed and len(failing.results) == len(SPECS)


def _pid_plus(k):
    return os.getpid() + k


@pytest.mark.slow
def test_pool_runs_later_tasks_on_its_workers_and_serially_here():
    from morpho.pipeline import TilePool

    with TilePool(workers=2) as pool:
        run = run_tiles(toy_tile, 7, SPECS, pool=pool, progress=False)
        assert pool.client is not None  # still open after the tiles
        assert pool.submit(_pid_plus, 0).result() != os.getpid()
    assert pool.client is None and pool.seconds >= run.cluster_seconds > 0
    with TilePool(workers=1) as serial:
        run_tiles(toy_tile, 7, SPECS, pool=serial, progress=False)
        handle = serial.submit(_pid_plus, 1)
        assert serial.client is None and handle.result() == os.getpid() + 1


@pytest.mark.parametrize("name", ["InputError", "DemError", "ModelFileError", "OutputError", "CraterListError"])
def test_errors_raised_on_a_worker_come_back_whole(name):
    # Dask sends a worker's exception back through distributed.core.error_message and its
    # pickle (with tblib's traceback support); the error must keep its class, file and fix.
    from distributed.core import error_message
    from distributed.protocol import pickle as dask_pickle

    import morpho.errors as errors

    cls = getattr(errors, name)
    err = cls("the model file is broken.", path="/data/m.skops", fix="rebuild it")
    sent = error_message(err)["exception"]
    back = dask_pickle.loads(dask_pickle.dumps(err, protocol=4))
    assert type(back) is cls and str(back) == str(err)
    assert (back.path, back.fix) == ("/data/m.skops", "rebuild it")
    assert sent is not None
