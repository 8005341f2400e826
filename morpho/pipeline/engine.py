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

import contextlib
import importlib
import logging
import os
import threading
import time
from collections import deque
from collections.abc import Callable, Mapping, Sequence
from dataclasses import dataclass, field
from pathlib import Path

import pandas as pd
from tqdm.auto import tqdm

from .._runtime import WORKER_ENVIRON
from ..ingest import TileSpec

__all__ = ["TilePool", "TileRun", "run_tiles", "uses_dask"]

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
        Starting (and, unless the pool stays open, closing) the Dask client and local cluster,
        with the workers' imports of ``warm_modules`` (a fixed cost; 0 when serial).
    warmup_seconds : float
        Importing ``warm_modules`` in this process before in-process tiles (a fixed cost).
    side : dict
        Results of ``side_tasks`` that ran on Dask workers (name -> value).
    background : dict
        Handles (``result()``) of ``background_tasks`` submitted to Dask workers, not waited for.
    """

    results: list = field(default_factory=list)
    failed: dict = field(default_factory=dict)
    seconds: float = 0.0
    reused: int = 0
    cluster_seconds: float = 0.0
    warmup_seconds: float = 0.0
    side: dict = field(default_factory=dict)
    background: dict = field(default_factory=dict)


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
    local_modules: Sequence[str] = (),
    side_tasks: Mapping[str, tuple[Callable, tuple]] | None = None,
    background_tasks: Mapping[str, tuple[Callable, tuple]] | None = None,
    pool: TilePool | None = None,
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
        worker when on Dask), and their ``_warm_up()`` hooks run, so that one-off set-up
        (imports, constant tables) is not counted as tile work.
    local_modules : sequence of str
        Modules this process needs after the tiles (to merge and finish their results). On
        Dask they are imported here once the tiles are submitted, while the workers run them
        (this process would otherwise import them after the last tile, on the critical path);
        serially with ``warm_modules``.
    side_tasks : mapping, optional
        ``name -> (func, args)``: independent work the caller needs after the tiles. On Dask it
        is submitted after the tiles and runs on a worker between them (Dask starts it as soon as
        a worker is free, typically after its first tile: the same worker time as at the end);
        its value goes to ``TileRun.side[name]``.
        Serially, or if it fails on a worker, it is left out and the caller computes it itself.
    background_tasks : mapping, optional
        ``name -> (func, args)``: like ``side_tasks`` (submitted after them), but not waited for:
        the handle goes to ``TileRun.background[name]`` and the caller collects it when it needs
        it (e.g. loading the scoring model on a worker while the last tiles finish). Serially
        nothing is submitted.
    pool : TilePool, optional
        An open pool to run on, which stays open afterwards for :meth:`TilePool.submit` (its
        ``workers``, ``scheduler`` and ``warm_modules`` apply; those given here are ignored).
        By default a pool is opened for the tiles and closed after them.

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

    own = pool is None
    if own:
        pool = TilePool(workers=workers, scheduler=scheduler, warm_modules=warm_modules)
    try:
        if todo and not pool.would_use_dask(len(todo)):
            t_warm = time.perf_counter()
            _import_all((*pool.warm_modules, *local_modules))
            run.warmup_seconds = time.perf_counter() - t_warm
            for spec in todo:
                _run_here(func, first_arg, spec, extra_args, _record)
        elif todo and pool.shares:
            _run_shared(pool, func, first_arg, todo, extra_args, _record, dict(side_tasks or {}),
                        dict(background_tasks or {}), run, local_modules)
        elif todo:
            pool.start()
            _run_dask(pool, func, first_arg, todo, extra_args, _record, dict(side_tasks or {}), run.side,
                      dict(background_tasks or {}), run.background, local_modules)
    finally:
        if own:
            pool.close()
        run.cluster_seconds = pool.seconds
    bar.close()
    if pool.background_start_seconds:
        log.info("the local cluster started in %.1f s while this process ran tiles", pool.background_start_seconds)
    run.results = [done[s.index] for s in specs if s.index in done]
    run.seconds = time.perf_counter() - t0
    return run


def local_workers(workers: int | None) -> int:
    """Local worker processes meant by ``workers`` (``None`` = all cores)."""
    return (os.cpu_count() or 1) if workers is None else int(workers)


def uses_dask(n_tiles: int, workers: int | None, scheduler: str | None) -> bool:
    """Whether :func:`run_tiles` sends ``n_tiles`` tiles to Dask (else it runs them in this process)."""
    return scheduler is not None or (local_workers(workers) > 1 and n_tiles > 1)


#: Timer intervals for local clusters (see TilePool.start).
_QUIET_TIMERS = {"distributed.admin.tick.interval": "200ms", "distributed.worker.memory.monitor-interval": "1s",
                 "distributed.admin.system-monitor.interval": "2s"}


def _import_all(modules) -> None:
    """Import ``modules`` and run their ``_warm_up()`` hooks (in this process, or on each Dask
    worker by ``client.run``): one-off set-up whose cost does not depend on the DEM."""
    for name in modules:
        hook = getattr(importlib.import_module(name), "_warm_up", None)
        if callable(hook):
            hook()


class TilePool:
    """Where tiles and later tasks run: this process, a local Dask cluster, or a given scheduler.

    The cluster starts when the first tiles need it (:meth:`start`) and stays up until
    :meth:`close`, so that work after the tiles can use the workers too (:meth:`submit`).
    Use it as a context manager.

    Parameters
    ----------
    workers : int, optional
        Processes that run tiles (``None`` = all cores); 1 runs everything in this process. On
        a local cluster this process is one of them, beside ``workers - 1`` Dask workers.
    scheduler : str, optional
        Address of an existing dask.distributed scheduler (all tiles then go to its workers).
    warm_modules : sequence of str
        Imported, with their ``_warm_up()`` hooks, on every worker when the cluster starts
        (see :func:`run_tiles`).

    Attributes
    ----------
    seconds : float
        Time spent waiting for the client/cluster to start, and closing it, so far (0 when
        serial; a start in the background while this process ran tiles is not a wait).
    background_start_seconds : float
        How long that background start took.
    """

    def __init__(self, *, workers: int | None = 1, scheduler: str | None = None, warm_modules: Sequence[str] = ()):
        self.n_workers = local_workers(workers)
        self.workers = workers
        self.scheduler = scheduler
        self.warm_modules = tuple(warm_modules)
        #: On a local cluster this process is one of the ``n_workers``: it runs tiles beside
        #: ``n_workers - 1`` Dask worker processes (see :func:`_run_shared`).
        self.shares = scheduler is None and self.n_workers > 1
        self.client = None
        self._cluster = None
        self._starter: threading.Thread | None = None
        self._start_error: BaseException | None = None
        self.seconds = 0.0
        #: Starting the local cluster while this process ran tiles (not a wait: not in ``seconds``).
        self.background_start_seconds = 0.0

    def __enter__(self) -> TilePool:
        return self

    def __exit__(self, *exc) -> None:
        self.close()

    def would_use_dask(self, n_tiles: int) -> bool:
        """Whether ``n_tiles`` tiles go to Dask (see :func:`uses_dask`)."""
        return self.client is not None or uses_dask(n_tiles, self.workers, self.scheduler)

    def start_in_background(self, on_ready: Callable[[], None] | None = None) -> None:
        """Start the local cluster in a thread while this process goes on (see :meth:`wait_started`).

        ``on_ready`` is called in that thread as soon as the workers are up (e.g. to hand them
        tiles at once rather than when this process next looks); what it raises is kept like a
        failed start.
        """
        if self._starter is not None:
            return
        if self.client is not None:  # already up (a pool used before): ready now
            if on_ready is not None:
                on_ready()
            return

        def target():
            t0 = time.perf_counter()
            try:
                self._start()
                self.background_start_seconds = time.perf_counter() - t0
                if on_ready is not None:
                    on_ready()
            except BaseException as err:  # noqa: BLE001 - handed to the thread that waits
                self._start_error = err

        self._starter = threading.Thread(target=target, name="morpho-cluster-start", daemon=True)
        self._starter.start()

    def wait_started(self) -> None:
        """Wait for a background start; re-raise what it raised. The wait counts in ``seconds``."""
        if self._starter is not None:
            t0 = time.perf_counter()
            self._starter.join()
            self._starter = None
            self.seconds += time.perf_counter() - t0
            if self._start_error is not None:
                err, self._start_error = self._start_error, None
                raise err

    def start(self) -> None:
        """Start the local cluster (or connect to the scheduler) if not yet done."""
        if self._starter is not None:
            self.wait_started()
            return
        if self.client is not None:
            return
        t0 = time.perf_counter()
        try:
            self._start()
        finally:
            self.seconds += time.perf_counter() - t0

    def _start(self) -> None:
        if self.client is not None:
            return
        import dask
        from dask.distributed import Client, LocalCluster

        # distributed sets its loggers to INFO when imported; keep them quiet unless morpho is at DEBUG.
        if not log.isEnabledFor(logging.DEBUG):
            for name in ("distributed", "dask"):
                logging.getLogger(name).setLevel(logging.WARNING)
        if self.scheduler is None:
            # Dask's nanny sets MALLOC_TRIM_THRESHOLD_ low so workers give memory back; our workers
            # instead keep freed pages for the next tile (see ``morpho._runtime``: tiles ~2x faster).
            # The nanny prefers this process's environment to its config (and copies what it
            # spawns with into it), so both are set while the workers start.
            environ = {f"distributed.nanny.pre-spawn-environ.{k}": v for k, v in WORKER_ENVIRON.items()}
            # The workers' statistical profiler samples the running task's stack every 10 ms for
            # a dashboard we do not start; off, 16 tiles of 8192^2 on 2 workers took ~10 % less
            # (34.9 -> 30.5 s and 36.8 -> 33.4 s in two A/B pairs).
            environ["distributed.worker.profile.enabled"] = False
            # Housekeeping timers wake each process's event loop, whose thread then takes the GIL
            # from the tile: every 20 ms (loop-latency tick), 100 ms (memory monitor) and 500 ms
            # (system monitor) by default. Slower timers cut the tiles' time off the CPU from
            # 3.4-4.5 s to 1.3-2.3 s per 60 s of tiles and the 16-tile run by 0.9-1.8 s (two
            # A/B pairs at 8192^2); memory limits are still checked every second.
            environ.update(_QUIET_TIMERS)
            n_dask = self.n_workers - 1 if self.shares else self.n_workers
            with dask.config.set(environ), _environ(WORKER_ENVIRON):
                cluster = LocalCluster(n_workers=n_dask, threads_per_worker=1, processes=True,
                                       dashboard_address=None)
            self._cluster = cluster
            self.client = Client(cluster)
        else:
            self.client = Client(self.scheduler)
        if self.warm_modules:
            self.client.run(_import_all, self.warm_modules)

    def submit(self, func: Callable, *args, workers: Sequence[str] | None = None):
        """Run ``func(*args)`` on a worker if the cluster is up, else in this process when asked.

        ``workers`` (addresses) is a preference: Dask may still run it on another worker when
        those are gone or busy (it moves queued tasks to idle workers).

        Returns
        -------
        object with ``result()``
            The value, or the error ``func`` raised (re-raised by ``result()``).
        """
        if self.client is None:
            return _Local(func, args)
        where = {"workers": list(workers), "allow_other_workers": True} if workers else {}
        return self.client.submit(func, *args, pure=False, key=f"morpho-{func.__name__}-{time.monotonic_ns()}",
                                  **where)

    def worker_addresses(self) -> list[str]:
        """Addresses of the connected workers (empty when serial)."""
        if self.client is None:
            return []
        return sorted(self.client.scheduler_info().get("workers", {}))

    def close(self) -> None:
        """Close the client and the local cluster (idempotent)."""
        if self._starter is not None:  # a background start still going: let it end first
            self._starter.join()
            self._starter = None
            self._start_error = None
        if self.client is None:
            if self._cluster is not None:  # the cluster came up but its client did not
                self._cluster.close()
                self._cluster = None
            return
        t0 = time.perf_counter()
        try:
            self.client.close()
            if self._cluster is not None:
                self._cluster.close()
        finally:
            self.client = self._cluster = None
            self.seconds += time.perf_counter() - t0


@contextlib.contextmanager
def _environ(values: Mapping[str, str]):
    """Set environment variables of this process for the ``with`` block, then restore them."""
    saved = {k: os.environ.get(k) for k in values}
    os.environ.update(values)
    try:
        yield
    finally:
        for k, v in saved.items():
            if v is None:
                os.environ.pop(k, None)
            else:
                os.environ[k] = v


class _Local:
    """A call deferred until its result is asked for (the serial counterpart of a Dask future)."""

    def __init__(self, func, args):
        self._func, self._args = func, args

    def result(self):
        return self._func(*self._args)


def _run_dask(pool, func, first_arg, todo, extra_args, record, side_tasks=None, side=None,
              background_tasks=None, background=None, local_modules=()) -> None:
    """Run the tiles (and side tasks) on a started pool's Dask client, recording each tile as it completes."""
    from dask.distributed import as_completed

    futures = {_submit_tile(pool.client, func, first_arg, spec, extra_args): spec for spec in _largest_first(todo)}
    # Submitted after the tiles; Dask may still start them between tiles (see run_tiles).
    extra = {pool.submit(f, *args): name for name, (f, args) in (side_tasks or {}).items()}
    for name, (f, args) in (background_tasks or {}).items():
        background[name] = pool.submit(f, *args)
    # This process is idle while the workers run the tiles: its own one-off imports go here.
    _import_all(local_modules)
    for fut in as_completed(list(futures) + list(extra)):
        _collect(fut, futures, extra, side, record)


def _largest_first(specs) -> list:
    """Largest windows first (edge tiles are smaller): the last tiles, which can leave a core
    idle, are then the shortest. Results are put back in tile order by the caller."""
    return sorted(specs, key=lambda t: -t.height * t.width)


def _submit_tile(client, func, first_arg, spec, extra_args):
    """One tile on Dask, retried once there."""
    return client.submit(func, first_arg, spec, *extra_args, retries=1, pure=False,
                         key=f"morpho-tile-{spec.key}-{time.monotonic_ns()}")


def _run_here(func, first_arg, spec, extra_args, record) -> None:
    """One tile in this process, retried once if it raises; recorded either way."""
    try:
        try:
            df = func(first_arg, spec, *extra_args)
        except Exception as err:  # noqa: BLE001 - retried once, then reported
            log.warning("tile %s failed (%s); retrying once", spec.key, err)
            df = func(first_arg, spec, *extra_args)
    except Exception as err:  # noqa: BLE001
        record(spec, err=err)
        return
    record(spec, df=df)


def _collect(fut, futures, extra, side, record) -> None:
    """Record a finished Dask tile, or keep a side task's value (a failed one the caller redoes)."""
    if fut in extra:
        try:
            side[extra[fut]] = fut.result()
        except Exception as err:  # noqa: BLE001 - the caller computes it itself
            log.debug("side task %s failed on a worker: %s", extra[fut], err)
        return
    try:
        df = fut.result()
    except Exception as err:  # noqa: BLE001
        record(futures[fut], err=err)
        return
    record(futures[fut], df=df)


def _run_shared(pool, func, first_arg, todo, extra_args, record, side_tasks, background_tasks, run,
                local_modules) -> None:
    """Run the tiles in this process and on the pool's Dask workers at once (a local cluster).

    The cluster starts in the background (:meth:`TilePool.start_in_background`) while this
    process takes its first tiles: starting worker processes (~2 s on two cores) no longer
    holds up the tiles, and one process fewer pays a cold first tile. Once the workers are up
    (in the starting thread) each gets one tile, then the next as soon as it finishes (a
    done-callback), so that at the end this process never waits for tiles queued behind a
    worker's running one; the side and background tasks go to them as with :func:`_run_dask`.
    Everyone takes the largest tile left, so the last to end are the shortest. Every tile runs
    the same function with the same arguments wherever it runs.
    """
    shared = _SharedRun(pool, func, first_arg, todo, extra_args, record, run.side)
    pool.start_in_background(on_ready=lambda: shared.on_ready(side_tasks, background_tasks, run.background))
    try:
        t_warm = time.perf_counter()
        _import_all(pool.warm_modules)  # this process runs tiles too: the same one-off set-up
        run.warmup_seconds = time.perf_counter() - t_warm
        shared.tiles_here()
        pool.wait_started()  # re-raises a failed start
        # This process has no tile left: its own one-off imports for after the tiles go here.
        _import_all(local_modules)
        shared.wait_for_workers()
    finally:
        shared.stop()


class _SharedRun:
    """State of :func:`_run_shared`: the queue of tiles, and the futures of those given to Dask."""

    def __init__(self, pool, func, first_arg, todo, extra_args, record, side):
        self.pool, self.func, self.first_arg, self.extra_args, self.record = pool, func, first_arg, extra_args, record
        self.side = side
        self.queue = deque(_largest_first(todo))
        # Taking a tile off the queue and recording its future happen under one lock, so that
        # when this process finds the queue empty, every tile given out is in ``futures``.
        self.lock = threading.Lock()
        self.futures: dict = {}
        self.extra: dict = {}
        self.harvested: set = set()
        self.stopped = False

    def hand_out(self, _done=None) -> None:
        """Give the largest tile left to Dask; again when that one ends (Dask's callback thread)."""
        with self.lock:
            if self.stopped or not self.queue:
                return
            spec = self.queue.popleft()
            fut = _submit_tile(self.pool.client, self.func, self.first_arg, spec, self.extra_args)
            self.futures[fut] = spec
        fut.add_done_callback(self.hand_out)

    def take(self):
        """The largest tile left for this process (the last ones are then short), or None."""
        with self.lock:
            return self.queue.popleft() if self.queue else None

    def stop(self) -> None:
        with self.lock:
            self.stopped = True

    def on_ready(self, side_tasks, background_tasks, background) -> None:
        """The workers are up (called in the starting thread): one tile each, then the other tasks."""
        for _ in range(self.pool.n_workers - 1):
            self.hand_out()
        extra = {self.pool.submit(f, *args): name for name, (f, args) in side_tasks.items()}
        with self.lock:
            self.extra.update(extra)
        for name, (f, args) in background_tasks.items():
            background[name] = self.pool.submit(f, *args)

    def tiles_here(self) -> None:
        """Run tiles in this process until none is left, recording the workers' as they end."""
        while True:
            self.harvest(block=False)
            spec = self.take()
            if spec is None:
                break
            _run_here(self.func, self.first_arg, spec, self.extra_args, self.record)

    def harvest(self, *, block: bool) -> None:
        """Record the Dask tiles (and side tasks) that have ended; with ``block``, wait for one first."""
        from dask.distributed import wait

        with self.lock:
            pending = [f for f in (*self.futures, *self.extra) if f not in self.harvested]
        if block and pending:
            wait(pending, return_when="FIRST_COMPLETED")
        for fut in pending:
            if not fut.done():
                continue
            self.harvested.add(fut)
            _collect(fut, self.futures, self.extra, self.side, self.record)

    def wait_for_workers(self) -> None:
        """Record every tile and side task still on Dask."""
        while True:
            with self.lock:
                left = any(f not in self.harvested for f in (*self.futures, *self.extra))
            if not left:
                return
            self.harvest(block=True)
