"""Run tile jobs serially or on Dask, with per-tile results kept for resuming.

The serial path and the distributed path call the same tile function with the
same arguments; only the executor differs. Each finished tile is written to the
run folder (``<output>.morpho-run/``) at once, so an interrupted survey resumes
by redoing only the missing tiles. A tile that raises is retried once, then
recorded as failed while the others complete.

``before_first`` lets the caller finish work it started in the background before any
tile result is kept: if that work fails, the run stops with nothing written to the run
folder.
"""

from __future__ import annotations

import importlib
import logging
import os
import time
from collections.abc import Callable, Mapping, Sequence
from dataclasses import dataclass, field
from pathlib import Path

import pandas as pd
from tqdm.auto import tqdm

from .._runtime import WORKER_ENVIRON
from ..ingest import TileSpec

__all__ = ["TileRun", "run_tiles", "uses_dask"]

log = logging.getLogger(__name__)


@dataclass
class TileRun:
    """What running the tiles produced.

    Attributes
    ----------
    results : list of DataFrame
        One per successful tile, in tile order (independent of completion order).
    failed : dict
        Tile key -> error text, for tiles that failed twice.
    seconds : float
        Wall time, including ``cluster_seconds``.
    reused : int
        Tiles taken from the run folder (``resume``).
    cluster_seconds : float
        Starting and closing the Dask client and local cluster, with the workers' imports of
        ``warm_modules`` (a fixed cost; 0 when serial).
    warmup_seconds : float
        Importing ``warm_modules`` in this process before in-process tiles (a fixed cost).
    side : dict
        Results of ``side_tasks`` that ran on Dask workers (name -> value).
    """

    results: list = field(default_factory=list)
    failed: dict = field(default_factory=dict)
    seconds: float = 0.0
    reused: int = 0
    cluster_seconds: float = 0.0
    warmup_seconds: float = 0.0
    side: dict = field(default_factory=dict)


def _cache_path(run_dir: Path, spec: TileSpec) -> Path:
    return run_dir / f"{spec.key}.parquet"


def _save(run_dir: Path, spec: TileSpec, df: pd.DataFrame) -> None:
    target = _cache_path(run_dir, spec)
    run_dir.mkdir(parents=True, exist_ok=True)
    tmp = target.with_suffix(".parquet.tmp")
    df.to_parquet(tmp, index=False)
    os.replace(tmp, target)


def run_tiles(
    func: Callable,
    first_arg,
    specs: Sequence[TileSpec],
    extra_args: tuple = (),
    *,
    workers: int | None = 1,
    scheduler: str | None = None,
    run_dir: Path | None = None,
    resume: bool = False,
    progress: bool = True,
    before_first: Callable[[], None] | None = None,
    warm_modules: Sequence[str] = (),
    side_tasks: Mapping[str, tuple[Callable, tuple]] | None = None,
) -> TileRun:
    """Run ``func(first_arg, spec, *extra_args)`` for every tile.

    Parameters
    ----------
    func : callable
        A module-level function (picklable) returning a DataFrame.
    first_arg : object
        Usually the :class:`~morpho.ingest.DemInfo` (small; each task reads its own window).
    specs : sequence of TileSpec
    extra_args : tuple
        Further picklable arguments.
    workers : int, optional
        Local worker processes; 1 (or a single tile) runs in this process. ``None`` = all cores.
    scheduler : str, optional
        Address of an existing dask.distributed scheduler (``tcp://host:port``).
    run_dir : Path, optional
        Folder for per-tile results; enables ``resume``.
    resume : bool
        Reuse tiles already in ``run_dir``.
    progress : bool
        Show a progress bar over tiles.
    before_first : callable, optional
        Called once, before the first computed tile is recorded or saved; whatever it
        raises stops the run (the cluster is closed, nothing more is saved).
    warm_modules : sequence of str
        Modules the tile function imports lazily; imported before the first tile (on every
        worker when on Dask) so that their one-off import time is not counted as tile work.
    side_tasks : mapping, optional
        ``name -> (func, args)``: independent work the caller needs after the tiles. On Dask it
        is submitted after the tiles, so a worker picks it up when it runs out of tiles (the
        time the last tiles leave a core idle); its value goes to ``TileRun.side[name]``.
        Serially, or if it fails on a worker, it is left out and the caller computes it itself.

    Returns
    -------
    TileRun
    """
    t0 = time.perf_counter()
    run = TileRun()
    done: dict[int, pd.DataFrame] = {}
    todo = []
    for spec in specs:
        cached = None if run_dir is None else _cache_path(run_dir, spec)
        if resume and cached is not None and cached.exists():
            done[spec.index] = pd.read_parquet(cached)
            run.reused += 1
        else:
            todo.append(spec)
    n_workers = (os.cpu_count() or 1) if workers is None else int(workers)
    bar = tqdm(total=len(specs), initial=run.reused, unit="tile", desc="tiles", disable=not progress,
               leave=False)

    pending_hook = [before_first]

    def _record(spec, df=None, err=None):
        if pending_hook[0] is not None:
            hook, pending_hook[0] = pending_hook[0], None
            hook()
        if err is not None:
            run.failed[spec.key] = f"{type(err).__name__}: {err}"
            log.error("tile %s failed twice: %s", spec.key, err)
        else:
            done[spec.index] = df
            if run_dir is not None:
                _save(run_dir, spec, df)
        bar.update(1)

    if todo and not uses_dask(len(todo), workers, scheduler):
        t_warm = time.perf_counter()
        _import_all(warm_modules)
        run.warmup_seconds = time.perf_counter() - t_warm
        for spec in todo:
            try:
                df = _run_one(func, first_arg, spec, extra_args)
            except Exception as err:  # noqa: BLE001
                _record(spec, err=err)
                continue
            _record(spec, df=df)
    elif todo:
        run.cluster_seconds = _run_dask(func, first_arg, todo, extra_args, n_workers, scheduler, _record,
                                        tuple(warm_modules), dict(side_tasks or {}), run.side)
    bar.close()
    run.results = [done[s.index] for s in specs if s.index in done]
    run.seconds = time.perf_counter() - t0
    return run


def uses_dask(n_tiles: int, workers: int | None, scheduler: str | None) -> bool:
    """Whether :func:`run_tiles` sends ``n_tiles`` tiles to Dask (else it runs them in this process)."""
    n_workers = (os.cpu_count() or 1) if workers is None else int(workers)
    return scheduler is not None or (n_workers > 1 and n_tiles > 1)


def _import_all(modules) -> None:
    """Import ``modules`` (run in this process, or on each Dask worker by ``client.run``)."""
    for name in modules:
        importlib.import_module(name)


def _run_one(func, first_arg, spec, extra_args):
    try:
        return func(first_arg, spec, *extra_args)
    except Exception as err:  # noqa: BLE001 - retried once, then reported by the caller
        log.warning("tile %s failed (%s); retrying once", spec.key, err)
        return func(first_arg, spec, *extra_args)


def _run_dask(func, first_arg, todo, extra_args, n_workers, scheduler, record, warm_modules=(),
              side_tasks=None, side=None) -> float:
    """Run the tiles on Dask; returns the seconds spent starting and closing the client/cluster."""
    t0 = time.perf_counter()
    import dask
    from dask.distributed import Client, LocalCluster, as_completed

    # distributed sets its loggers to INFO when imported; keep them quiet unless morpho is at DEBUG.
    if not log.isEnabledFor(logging.DEBUG):
        for name in ("distributed", "dask"):
            logging.getLogger(name).setLevel(logging.WARNING)
    cluster = None
    if scheduler is None:
        # Dask's nanny sets MALLOC_TRIM_THRESHOLD_ low so workers give memory back; our workers
        # instead keep freed pages for the next tile (see ``morpho._runtime``: tiles ~2x faster).
        environ = {f"distributed.nanny.pre-spawn-environ.{k}": v for k, v in WORKER_ENVIRON.items()}
        with dask.config.set(environ):
            cluster = LocalCluster(n_workers=n_workers, threads_per_worker=1, processes=True,
                                   dashboard_address=None)
        client = Client(cluster)
    else:
        client = Client(scheduler)
    if warm_modules:
        client.run(_import_all, warm_modules)
    setup = time.perf_counter() - t0
    try:
        futures = {}
        # Largest windows first (edge tiles are smaller): the last tasks, which can leave a core
        # idle, are then the shortest. Results are put back in tile order by the caller.
        for spec in sorted(todo, key=lambda t: -t.height * t.width):
            fut = client.submit(func, first_arg, spec, *extra_args, retries=1, pure=False,
                                key=f"morpho-tile-{spec.key}-{time.monotonic_ns()}")
            futures[fut] = spec
        extra = {client.submit(f, *args, pure=False, key=f"morpho-{name}-{time.monotonic_ns()}"): name
                 for name, (f, args) in (side_tasks or {}).items()}
        for fut in as_completed(list(futures) + list(extra)):
            if fut in extra:
                try:
                    side[extra[fut]] = fut.result()
                except Exception as err:  # noqa: BLE001 - the caller computes it itself
                    log.debug("side task %s failed on a worker: %s", extra[fut], err)
                continue
            spec = futures[fut]
            try:
                df = fut.result()
            except Exception as err:  # noqa: BLE001
                record(spec, err=err)
                continue
            record(spec, df=df)
    finally:
        t1 = time.perf_counter()
        client.close()
        if cluster is not None:
            cluster.close()
        teardown = time.perf_counter() - t1
    return setup + teardown
