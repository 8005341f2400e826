"""Survey and measure: the whole job from a DEM file to scored craters and population statistics.

``survey`` detects craters tile by tile; ``measure`` takes a user's crater list.
Both then merge the tiles, resolve duplicates in overlaps deterministically,
add the scaling-law comparison, score each crater, compute population
statistics on the merged table, and return a :class:`SurveyResult` that
:func:`morpho.outputs.write_geopackage` writes.
"""

from __future__ import annotations

import importlib
import json
import logging
import math
import time
from dataclasses import dataclass, field
from datetime import UTC, datetime
from pathlib import Path

import geopandas as gpd
import numpy as np
import pandas as pd
import pyproj
import shapely

from ..dictionary import CRATER_COLUMNS
from ..errors import InputError
from ..ingest import DemInfo, open_dem, plan_tiles, valid_footprint
from ..scoring._table import (
    ModelSpec,
    apply_scores,
    model_file,
    model_spec,
    score_table,
    warm_model,
)
from .engine import TilePool, local_workers, run_tiles, uses_dask
from .tile_job import TileParams, measure_tile, survey_tile

__all__ = ["SurveyResult", "survey", "measure"]

log = logging.getLogger(__name__)

#: Default core size of a tile in source pixels.
DEFAULT_TILE_SIZE = 2048
#: Modules the tile jobs import lazily: imported before the first tile (a fixed cost, not tile work).
TILE_MODULES = ("morpho.detection", "morpho.morphometry")
#: What this process needs after the tiles: the merge's KD-tree (~0.35 s to import when no tile
#: ran here) and the provenance writer.
MERGE_MODULES = ("scipy.spatial", "morpho.outputs")
#: Columns the population statistics read (sent to a Dask worker; see _finish).
_POPULATION_COLUMNS = ("center_x", "center_y", "lon", "lat", "diameter_m", "ellipse_azimuth_deg", "ellipticity")
#: CSR simulations of the population statistics' Monte Carlo tests (p >= 0.01).
N_SIMULATIONS = 99
#: On Dask, simulations the scoring worker measures after scoring (the rest and the observed
#: pattern go to the other worker). Task streams of the 8192^2 benchmark survey (2,646 craters):
#: scoring 0.84-1.26 s, one simulation ~28 ms on either worker, so 30 of 99 even them out.
SIMULATIONS_BESIDE_SCORING = 30
#: Largest crater searched by default on multi-tile DEMs (pixels); single-tile DEMs search up to the tile.
DEFAULT_MAX_DIAMETER_PX = 256


@dataclass
class SurveyResult:
    """Everything a survey produced, ready to be written.

    Attributes
    ----------
    craters : geopandas.GeoDataFrame
        One row per crater, rim outline polygons in the DEM's CRS, columns in dictionary order.
    population : pandas.DataFrame
        ``statistic, value, p_value, n, method, reference``.
    chains : geopandas.GeoDataFrame
        Detected crater chains as lines in the DEM's CRS.
    footprint : geopandas.GeoDataFrame
        The valid-data area in the DEM's CRS.
    run : dict
        Provenance (key -> value) for the ``run`` layer.
    failed_tiles : dict
        Tile key -> error, for tiles that failed twice.
    """

    craters: gpd.GeoDataFrame
    population: pd.DataFrame
    chains: gpd.GeoDataFrame
    footprint: gpd.GeoDataFrame
    run: dict
    failed_tiles: dict = field(default_factory=dict)
    unmeasured: pd.DataFrame | None = None
    envelope: pd.DataFrame | None = None

    def write(self, path, *, overwrite: bool = False):
        """Write the GeoPackage (see :func:`morpho.outputs.write_geopackage`)."""
        from ..outputs import write_geopackage

        return write_geopackage(path, self.craters, population=self.population, chains=self.chains,
                                footprint=self.footprint, run=self.run, envelope=self.envelope,
                                overwrite=overwrite)

    @property
    def partial(self) -> bool:
        """True when some tiles failed and the result misses their craters."""
        return bool(self.failed_tiles)


def _crs_for_output(info: DemInfo):
    return None if info.crs is None else info.crs


def _metric_xy(df: pd.DataFrame, info: DemInfo):
    """Crater centres in a local azimuthal-equidistant plane (metres) centred on the DEM."""
    if info.crs is None:
        return df["center_x"].to_numpy(float), df["center_y"].to_numpy(float), None
    from ..population.projection import to_local_metric

    geo = info.geodetic_crs()
    cx, cy = info.transform @ (info.width / 2.0, info.height / 2.0)
    lon0, lat0 = pyproj.Transformer.from_crs(info.crs, geo, always_xy=True).transform(cx, cy)
    x, y = to_local_metric(df["lon"].to_numpy(float), df["lat"].to_numpy(float),
                           info.body.radius_m, lon0=float(lon0), lat0=float(lat0))
    return np.asarray(x), np.asarray(y), (float(lon0), float(lat0))


def _metric_crs(info: DemInfo, origin):
    if origin is None:
        return None
    lon0, lat0 = origin
    return pyproj.CRS.from_proj4(
        f"+proj=aeqd +lat_0={lat0} +lon_0={lon0} +R={info.body.radius_m} +units=m +no_defs +type=crs"
    )


def _dedupe(df: pd.DataFrame, x: np.ndarray, y: np.ndarray) -> np.ndarray:
    """Boolean keep-mask dropping the same crater found by two neighbouring tiles.

    Two craters from different tiles are one when their centres are closer
    than 0.25 of the mean diameter and their diameters differ by < 30 %; the
    one with the higher detection confidence (then the lower tile key) stays.
    """
    from scipy.spatial import cKDTree

    n = len(df)
    keep = np.ones(n, bool)
    if n < 2:
        return keep
    d = df["diameter_m"].to_numpy(float)
    good = np.isfinite(x) & np.isfinite(y) & np.isfinite(d)
    idx = np.flatnonzero(good)
    if idx.size < 2:
        return keep
    tree = cKDTree(np.column_stack([x[idx], y[idx]]))
    pairs = tree.query_pairs(r=0.25 * float(np.nanmax(d[idx])), output_type="ndarray")
    if pairs.size == 0:
        return keep
    i, j = idx[pairs[:, 0]], idx[pairs[:, 1]]
    dist = np.hypot(x[i] - x[j], y[i] - y[j])
    dm = 0.5 * (d[i] + d[j])
    tiles = df["source_tile"].to_numpy()
    same = (dist < 0.25 * dm) & (np.abs(d[i] - d[j]) < 0.3 * dm) & (tiles[i] != tiles[j])
    conf = df["detection_confidence"].fillna(0).to_numpy(float)
    order = np.lexsort((tiles, -conf))  # best first: high confidence, then lower tile key
    rank = np.empty(n, int)
    rank[order] = np.arange(n)
    for a, b in sorted(zip(i[same], j[same], strict=True), key=lambda p: min(rank[p[0]], rank[p[1]])):
        if keep[a] and keep[b]:
            keep[b if rank[a] < rank[b] else a] = False
    return keep


def _stable_order(df: pd.DataFrame) -> pd.DataFrame:
    """Deterministic row order (north to south, then west to east, then size)."""
    key_y = np.round(df["center_y"].to_numpy(float), 3)
    key_x = np.round(df["center_x"].to_numpy(float), 3)
    key_d = np.round(df["diameter_m"].to_numpy(float), 3)
    order = np.lexsort((key_d, key_x, -key_y))
    return df.iloc[order].reset_index(drop=True)


def _geodataframe(df: pd.DataFrame, info: DemInfo) -> gpd.GeoDataFrame:
    geom = shapely.from_wkb(df["rim_wkb"].to_numpy()) if "rim_wkb" in df else None
    keep_cols = [c for c in CRATER_COLUMNS if c in df.columns]
    dropped = sorted(set(df.columns) - set(keep_cols) - {"rim_wkb", "row", "col", "radius_px"})
    if dropped:
        log.debug("columns not in the data dictionary, not written: %s", dropped)
    out = df[keep_cols].copy()
    return gpd.GeoDataFrame(out, geometry=geom, crs=_crs_for_output(info))


def _empty_craters(info: DemInfo) -> gpd.GeoDataFrame:
    from ..dictionary import FIELDS

    cols = {}
    for name in CRATER_COLUMNS:
        dtype = FIELDS[name].dtype
        cols[name] = pd.Series([], dtype="object" if dtype == "str" else dtype)
    return gpd.GeoDataFrame(pd.DataFrame(cols), geometry=gpd.GeoSeries([], crs=_crs_for_output(info)),
                            crs=_crs_for_output(info))


def _chains_frame(records: list, lines: list, info: DemInfo) -> gpd.GeoDataFrame:
    """The ``chains`` layer: one line per chain with the dictionary's chain columns."""
    from ..dictionary import CHAIN_FIELDS

    attrs = pd.DataFrame.from_records(records, columns=[f.name for f in CHAIN_FIELDS])
    for f in CHAIN_FIELDS:
        attrs[f.name] = attrs[f.name].astype(f.dtype)
    crs = _crs_for_output(info)
    return gpd.GeoDataFrame(attrs, geometry=gpd.GeoSeries(lines, crs=crs), crs=crs)


def _population_inputs(craters: pd.DataFrame, info: DemInfo, footprint_src):
    """Centres (m), diameters (m) and the valid area in the local metric plane, and that plane's CRS."""
    x, y, origin = _metric_xy(craters, info)
    metric = _metric_crs(info, origin)
    if metric is not None and not footprint_src.is_empty:
        to_m = pyproj.Transformer.from_crs(info.crs, metric, always_xy=True)
        area = shapely.transform(footprint_src, lambda xy: np.column_stack(to_m.transform(xy[:, 0], xy[:, 1])))
    else:
        area = footprint_src
    return x, y, craters["diameter_m"].to_numpy(float), area, metric


def _population_part(craters: pd.DataFrame, info: DemInfo, footprint_src, seed: int, start: int, stop):
    """Measures of the CSR simulations ``start:stop`` of :func:`_population` (on another worker)."""
    from ..population.statistics import simulated_measures

    x, y, d, area, _ = _population_inputs(craters, info, footprint_src)
    return simulated_measures(x, y, d, area, n_simulations=N_SIMULATIONS, seed=seed, start=start, stop=stop)


def _population(craters: pd.DataFrame, info: DemInfo, footprint_src, seed: int, *parts):
    """Population statistics on the merged table; chains mapped back to the DEM's CRS.

    ``parts``: the simulations' measures from :func:`_population_part`, in order, when they
    were computed elsewhere. Returns ``({"stats", "envelope", "cluster_id", "chain_id"}, chains)``.
    """
    from ..population import population_statistics

    x, y, d, area, metric = _population_inputs(craters, info, footprint_src)
    az = craters["ellipse_azimuth_deg"].to_numpy(float) if "ellipse_azimuth_deg" in craters else None
    ell = craters["ellipticity"].to_numpy(float) if "ellipticity" in craters else None
    simulated = [m for part in parts for m in part] if parts else None
    res = population_statistics(x, y, d, area, ellipse_azimuth_deg=az, ellipticity=ell,
                                n_simulations=N_SIMULATIONS, seed=seed, simulated=simulated)
    records = [dict(c) for c in (res.chains or [])]
    lines = [r.pop("geometry") for r in records]
    if metric is not None and lines:
        back = pyproj.Transformer.from_crs(metric, info.crs, always_xy=True)
        lines = [shapely.transform(g, lambda xy: np.column_stack(back.transform(xy[:, 0], xy[:, 1])))
                 for g in lines]
    chains = _chains_frame(records, lines, info)
    # Plain pandas/numpy only: unpickling a PopulationResult would import the statistics
    # (and scipy.stats) into the main process just to read four fields.
    return {"stats": res.stats, "envelope": res.envelope, "cluster_id": np.asarray(res.cluster_id, dtype="int64"),
            "chain_id": np.asarray(res.chain_id, dtype="int64")}, chains


class _SplitPopulation:
    """The population statistics on two Dask workers, as one job with ``result()``.

    The statistics worker (``target``) starts on the later simulations at once; the scoring
    worker (``where``) takes the first ``SIMULATIONS_BESIDE_SCORING`` once it has scored,
    which the caller signals by asking for the result (after the scores). Submitted only
    then, those simulations go to the idle scoring worker even though Dask may move a task
    off its preferred worker; queued early, they ran behind the others on the statistics
    worker (a task stream showed it). The statistics worker then puts everything together:
    the same result as one call (:func:`~morpho.population.statistics.simulated_measures`).
    """

    def __init__(self, pool, args, where, target):
        self._pool, self._args, self._where, self._target = pool, args, where, target
        self._tail = pool.submit(_population_part, *args, SIMULATIONS_BESIDE_SCORING, None, workers=target)
        self._whole = None

    def result(self):
        if self._whole is None:
            head = self._pool.submit(_population_part, *self._args, 0, SIMULATIONS_BESIDE_SCORING,
                                     workers=[self._where])
            self._whole = self._pool.submit(_population, *self._args, head, self._tail, workers=self._target)
        return self._whole.result()


class _SharedPopulation:
    """The population statistics split between this process and the scoring worker.

    When this process is one of the local workers (:attr:`TilePool.shares`), the scoring worker
    (``where``) takes the first ``SIMULATIONS_BESIDE_SCORING`` simulations after the scores and
    this process the others, then puts everything together: the same result as one call.
    """

    def __init__(self, pool, args, where):
        self._args = args
        self._head = pool.submit(_population_part, *args, 0, SIMULATIONS_BESIDE_SCORING,
                                 workers=[where] if where else None)

    def result(self):
        tail = _population_part(*self._args, SIMULATIONS_BESIDE_SCORING, None)
        return _population(*self._args, self._head.result(), tail)


def _after_tiles(pool: TilePool) -> tuple:
    """Modules this process needs after the tiles: the merge's, and the statistics' when it computes
    part of them (a local cluster it works in, see :class:`_SharedPopulation`)."""
    return (*MERGE_MODULES, "morpho.population.statistics") if pool.shares else MERGE_MODULES


def _load_scorer(model):
    """The scoring model and its path (the shipped default when ``model`` is None or "default")."""
    from ..scoring import load_model

    path = model_file(model)
    return load_model(path), path


def _precheck_model(model) -> None:
    """Cheap checks of a user's model file before any tile runs (no scikit-learn import).

    A missing file or one that is not a readable zip archive with a skops schema stops the
    survey at once; types and versions are checked when the model is loaded after the tiles
    (the finished tiles then stay in the run folder for ``--resume``).
    """
    import zipfile

    from ..errors import ModelFileError

    if model is None or model == "default":
        return  # the shipped model, checked by the tests
    path = Path(model)
    if not path.is_file():
        raise ModelFileError("no model file here.", path=path,
                             fix="give the path of a .skops model (default: morpho.scoring.default_model_path()).")
    try:
        with zipfile.ZipFile(path) as zf:
            ok = "schema.json" in zf.namelist() and zf.testzip() is None
    except (zipfile.BadZipFile, OSError) as err:
        raise ModelFileError(f"the model file is corrupt or not a skops file ({err}).", path=path,
                             fix="rebuild it with `morpho train` or reinstall morpho.") from err
    if not ok:
        raise ModelFileError("the model file is corrupt or not a skops file (no readable schema).", path=path,
                             fix="rebuild it with `morpho train` or reinstall morpho.")


def _warm_model(spec: ModelSpec):
    """Load the model on a Dask worker ahead of scoring: ``(worker address, seconds)``."""
    from dask.distributed import get_worker

    seconds = warm_model(spec)
    return get_worker().address, seconds


def _warm_population():
    """Import the population statistics on a Dask worker ahead of use (~2 s): its address."""
    from dask.distributed import get_worker

    importlib.import_module("morpho.population.statistics")
    return get_worker().address


class _ScoringProcess:
    """A second process that loads the scoring model while this one runs the tiles, then scores.

    For tiles run in this process (a single tile) when more than one core was given: importing
    scikit-learn and skops and reading the model (~2-3 s) then overlaps the tile instead of
    preceding it, and the scoring overlaps the population statistics. A thread would not do
    (see :class:`_ScorerLoader`). Spawned, not forked (this process may already run threads);
    what it runs lives in :mod:`morpho.scoring._table`, which imports neither geopandas nor
    the pipeline.
    """

    def __init__(self, spec: ModelSpec):
        import multiprocessing
        from concurrent.futures import ProcessPoolExecutor

        self.spec = spec
        self._pool = ProcessPoolExecutor(max_workers=1, mp_context=multiprocessing.get_context("spawn"))
        try:
            self._warm = self._pool.submit(warm_model, spec)
        except BaseException:
            self._pool.shutdown(wait=False, cancel_futures=True)
            raise

    def wait_model(self) -> float | None:
        """Seconds the other process took to load the model, once it has; None if that process
        broke (the caller then loads the model itself). A model file that cannot be loaded
        raises its :class:`~morpho.errors.ModelFileError` here."""
        from concurrent.futures.process import BrokenProcessPool

        try:
            return self._warm.result()
        except BrokenProcessPool as err:
            log.warning("the scoring process stopped (%s); loading the model in this process", err)
            return None

    def score(self, df: pd.DataFrame, body):
        """Future of :func:`~morpho.scoring._table.score_table` in the other process."""
        from concurrent.futures import Future
        from concurrent.futures.process import BrokenProcessPool

        try:
            return self._pool.submit(score_table, df, body, self.spec)
        except BrokenProcessPool as err:  # it stopped after loading the model: see scores()
            failed = Future()
            failed.set_exception(err)
            return failed

    def scores(self, job) -> pd.DataFrame | None:
        """The scored table of a :meth:`score` job; None if the other process broke."""
        from concurrent.futures.process import BrokenProcessPool

        try:
            return job.result()[0]
        except BrokenProcessPool as err:
            log.warning("the scoring process stopped (%s); scoring in this process", err)
            return None

    def close(self, *, wait: bool = True) -> None:
        self._pool.shutdown(wait=wait, cancel_futures=True)


class _ScorerLoader:
    """Loads the scoring model for a survey: here before in-process tiles, beside them in a
    second process, or on a Dask worker.

    Importing the scorer's libraries and reading the model is a fixed ~2-3 s. In-process tiles
    on one core load it first (a thread importing modules beside numpy-heavy tile code slows both:
    measured 1024^2 tile 1.5 s -> 4-8 s). With more cores (``beside``), a second process loads it
    while the tile runs here and scores there (:class:`_ScoringProcess`). When the tiles run on
    Dask (``defer``), the model is loaded on a worker instead, between its tiles (:func:`_warm_model`),
    and the merged craters are scored there (:func:`~morpho.scoring._table.score_table`): the main
    process then needs neither scikit-learn nor skops (loading them beside the tiles had put ~124 MB
    in the main process during the workers' memory peak, over 2 GiB at 8192^2). A user's model file
    gets cheap checks up front (:func:`_precheck_model`), so a missing or broken file still
    stops the survey before any tile runs. ``seconds`` is the time spent loading here.
    Use it as a context manager: leaving closes the scoring process.
    """

    def __init__(self, model, *, defer: bool, beside: bool = False):
        self._model = model
        self._value = None
        self._error: BaseException | None = None
        self.seconds = 0.0
        self.deferred = defer
        self.process: _ScoringProcess | None = None
        if defer:
            _precheck_model(model)
        elif beside:
            _precheck_model(model)
            try:
                self.process = _ScoringProcess(model_spec(model, ship=False))
            except OSError as err:  # no second process here: load the model now, as on one core
                log.warning("could not start a scoring process (%s); loading the model first", err)
                self.result()
        else:
            self.result()  # a bad model file fails here, before any tile runs

    def _load(self):
        t0 = time.perf_counter()
        try:
            self._value = _load_scorer(self._model)
        except BaseException as err:  # noqa: BLE001 - re-raised by result()
            self._error = err
        self.seconds = time.perf_counter() - t0

    def result(self):
        """The loaded ``(model, model_path)``, loading it on first call; re-raises a loading error."""
        if self._value is None and self._error is None:
            self._load()
        if self._error is not None:
            raise self._error
        return self._value

    def close(self, *, wait: bool = True) -> None:
        """Stop the scoring process, if any (``wait``: let it finish its task first)."""
        if self.process is not None:
            self.process.close(wait=wait)

    def __enter__(self):
        return self

    def __exit__(self, exc_type, exc, tb):
        self.close(wait=exc_type is None)
        return False


def _scores_beside(n_tiles: int, workers: int | None, scheduler: str | None) -> bool:
    """Whether in-process tiles get a scoring process (:class:`_ScoringProcess`): more than one
    core given but the tiles run here (a single tile)."""
    return local_workers(workers) > 1 and not uses_dask(n_tiles, workers, scheduler)


def _finish(df: pd.DataFrame, info: DemInfo, *, seed: int, loader: _ScorerLoader, params: dict, t_start: float,
            started: str, failed: dict, command: str, timing: dict, unmeasured=None,
            footprint=None, pool: TilePool, spec: ModelSpec | None = None,
            background: dict | None = None) -> SurveyResult:
    """Scaling, scoring, population statistics and provenance of the merged craters.

    When the tiles ran on Dask, the scoring (with the model of ``spec``, loaded on a worker
    while the last tiles ran: ``background`` from :func:`_background_tasks`) and the population
    statistics (positions and sizes only) go to two workers, and this process imports neither
    scikit-learn nor skops. With in-process tiles the statistics run here, and the scoring
    runs in the ``loader``'s scoring process when it has one (one tile, several cores; this
    process then imports neither either), else here with the model it read before the tiles.
    ``pool`` is closed here, so its teardown counts as ``cluster``.
    """
    t_finish = time.perf_counter()
    # Computed by a Dask worker beside the last tiles when there was one (see _side_tasks).
    footprint_src = valid_footprint(info) if footprint is None else footprint
    on_workers = pool.client is not None and spec is not None
    warm, warm_population = ((background or {}).get(k) for k in ("model", "population"))
    population_job = score_job = None
    waited = 0.0  # for the model, in this process
    timing["model_load"] = 0.0
    if len(df):
        cols = [c for c in _POPULATION_COLUMNS if c in df.columns]
        if on_workers:
            t_wait = time.perf_counter()
            try:
                where, timing["model_load"] = warm.result() if warm is not None else (None, 0.0)
            except Exception as err:  # noqa: BLE001 - the scoring task loads it again and reports
                log.debug("loading the model on a worker failed: %s", err)
                where = None
            waited += time.perf_counter() - t_wait
            score_job = pool.submit(score_table, df, info.body, spec, workers=[where] if where else None)
            try:
                ready = warm_population.result() if warm_population is not None else None
            except Exception:  # noqa: BLE001 - only a head start; the statistics import it anyway
                ready = None
            # On the worker that imported the statistics, even if it also holds the model:
            # after the scoring (~1 s) there beats importing them afresh elsewhere (~2 s).
            target = [ready] if ready else [w for w in pool.worker_addresses() if w != where]
            log.debug("scoring on %s (model ready there: %s), statistics on %s (imports ready on %s)",
                      where, where is not None, target, ready)
            args = (df[cols], info, footprint_src, seed)
            if pool.shares:
                population_job = _SharedPopulation(pool, args, where)
            elif where is not None and target and where not in target:
                population_job = _SplitPopulation(pool, args, where, target)
            else:
                population_job = pool.submit(_population, *args, workers=target or None)
        else:  # in this process, when its result is asked for (after the scoring)
            population_job = pool.submit(_population, df[cols], info, footprint_src, seed)
    t_import = time.perf_counter()
    from ..outputs import run_provenance

    if not on_workers:
        # The finish stage's one-off imports (scipy.stats among them: ~0.5 s when scikit-learn,
        # which imports it too, is in another process).
        importlib.import_module("morpho.population.statistics")
        if loader.process is None:
            from ..scaling import add_scaling_columns  # noqa: F401
            from ..scoring import score_craters  # noqa: F401

    # One-off imports of the finish stage's code are a fixed cost, like the tile code's.
    imported = time.perf_counter() - t_import
    timing["warmup"] = timing.get("warmup", 0.0) + imported
    helper = loader.process  # a second process holding the model (in-process tiles, > 1 core)
    if on_workers:
        model_path = Path(spec.path)
    else:
        t_model = time.perf_counter()
        loaded = helper.wait_model() if helper is not None else None
        if loaded is None:
            helper = None
            fitted, model_path = loader.result()
            timing["model_load"] = loader.seconds
        else:
            model_path = Path(helper.spec.path)
            timing["model_load"] = loaded
        waited += time.perf_counter() - t_model  # 0 when it was loaded before in-process tiles
    envelope = None
    if len(df):
        t0 = time.perf_counter()
        if on_workers:
            if pool.shares:  # this process's part of the statistics while the worker scores
                pop, chains = population_job.result()
            df, loading = score_job.result()
            # Loaded by the scoring task itself when the warm-up did not reach that worker.
            timing["model_load"] += loading
            waited += loading
        elif helper is not None:
            score_job = helper.score(df, info.body)
            pop, chains = population_job.result()  # here, while the other process scores
            scored = helper.scores(score_job)
            if scored is None:  # that process broke: score here
                scored = apply_scores(df, info.body, loader.result()[0])
            df = scored
        else:
            df = apply_scores(df, info.body, fitted)
        t1 = time.perf_counter()
        if helper is None and not (on_workers and pool.shares):
            pop, chains = population_job.result()
            log.info("scaling + scoring %.1f s, then waited %.1f s for the population statistics (%d craters)",
                     t1 - t0, time.perf_counter() - t1, len(df))
        else:
            log.info("population statistics here and scoring beside them %.1f s (%d craters)", t1 - t0, len(df))
        df["cluster_id"] = pop["cluster_id"]
        df["chain_id"] = pop["chain_id"]
        population = pop["stats"]
        envelope = pop["envelope"]
        craters = _geodataframe(df, info)
    else:
        craters = _empty_craters(info)
        population = pd.DataFrame({"statistic": pd.Series([], dtype=str), "value": pd.Series([], dtype=float),
                                   "p_value": pd.Series([], dtype=float), "n": pd.Series([], dtype="int64"),
                                   "method": pd.Series([], dtype=str), "reference": pd.Series([], dtype=str)})
        chains = _chains_frame([], [], info)
    footprint = gpd.GeoDataFrame({"name": ["valid_data"]}, geometry=[footprint_src], crs=_crs_for_output(info))
    run = run_provenance(
        info.path, command=command, parameters=params, raster_size=(info.height, info.width),
        crs=info.crs, body=info.body, seed=seed, model_path=model_path, start_time=started,
        end_time=datetime.now(UTC).isoformat(timespec="seconds"),
        tiles_failed=[f"{k}: {v}" for k, v in sorted(failed.items())],
        extra={"n_craters": len(craters), "n_tiles": params.get("n_tiles", ""),
               "ground_pixel_m": list(info.ground_pixel_m),
               "warped_to_local_stereographic": info.needs_warp},
    )
    before_close = pool.seconds
    pool.close()
    timing["cluster"] = timing.get("cluster", 0.0) + pool.seconds - before_close
    now = time.perf_counter()
    timing["model_wait"] = waited if on_workers or loader.process is not None else loader.seconds
    timing["finish"] = now - t_finish - imported - waited - (pool.seconds - before_close)
    # Wall time of the stages (seconds; differs run to run, unlike every other value).
    caveats = run.pop("caveats")  # stays the last key
    run["seconds"] = f"{now - t_start:.3f}"
    run["timing_s"] = json.dumps({k: round(v, 3) for k, v in timing.items()})
    run["caveats"] = caveats
    log.info("survey stages (s): %s", ", ".join(f"{k} {v:.2f}" for k, v in timing.items()))
    return SurveyResult(craters, population, chains, footprint, run, failed, unmeasured, envelope)


def _side_tasks(info: DemInfo) -> dict:
    """Work independent of the tiles that a Dask worker does between them.

    The valid-data footprint is a second (decimated) read of the whole DEM, ~1.3 s at 8192^2:
    on Dask it runs beside the tiles instead of after them.
    """
    return {"footprint": (valid_footprint, (info,))}


def _background_tasks(spec: ModelSpec | None) -> dict:
    """Loading the scoring model and the statistics' code on workers, between the tiles.

    Collected by :func:`_finish`, which then scores and computes the statistics on those
    workers side by side (only when the tiles ran on Dask).
    """
    if spec is None:
        return {}
    return {"model": (_warm_model, (spec,)), "population": (_warm_population, ())}


def _run_timing(run) -> dict:
    """Stage times around the tiles: fixed costs (cluster, waiting for the model) apart from tile work.

    The model's keys are filled in by :func:`_finish` once the model is loaded (before
    in-process tiles, after Dask tiles; the survey always waits for all of it).
    """
    return {
        "model_load": 0.0,
        "model_wait": 0.0,
        "cluster": run.cluster_seconds,
        "warmup": run.warmup_seconds,
        "tiles": run.seconds - run.cluster_seconds - run.warmup_seconds,
    }


def _prepare(path, *, body, band, pixel_size, z_scale, z_offset, min_diameter_px):
    return open_dem(path, band=band, body=body, pixel_size=pixel_size, z_scale=z_scale,
                    z_offset=z_offset, min_size_px=int(math.ceil(min_diameter_px)))


def _tiling(info: DemInfo, tile_size: int, max_diameter_px):
    single = max(info.height, info.width) <= tile_size
    if single:
        specs = plan_tiles(info, max(info.height, info.width), 0)
        return specs, max_diameter_px
    max_d = DEFAULT_MAX_DIAMETER_PX if max_diameter_px is None else float(max_diameter_px)
    overlap = int(math.ceil(1.25 * max_d))
    return plan_tiles(info, tile_size, overlap), max_d


def survey(
    path,
    *,
    body: str | None = None,
    band: int | None = None,
    pixel_size: float | None = None,
    z_scale: float | None = None,
    z_offset: float | None = None,
    min_diameter_px: float = 8.0,
    max_diameter_px: float | None = None,
    tile_size: int = DEFAULT_TILE_SIZE,
    n_azimuths: int = 64,
    n_boot: int = 30,
    seed: int = 0,
    model=None,
    workers: int | None = 1,
    scheduler: str | None = None,
    run_dir=None,
    resume: bool = False,
    progress: bool = False,
    _fail_tiles: tuple = (),
) -> SurveyResult:
    """Detect, measure and score the craters of a DEM and test their population.

    Parameters
    ----------
    path : str or Path
        The DEM (any raster GDAL reads).
    body, band, pixel_size, z_scale, z_offset
        See :func:`morpho.ingest.open_dem`.
    min_diameter_px, max_diameter_px : float
        Diameter range searched, in pixels of the local metric grid. By default
        a single-tile DEM is searched up to a large fraction of its size and a
        multi-tile DEM up to 256 px (the tile overlap grows with it).
    tile_size : int
        Tile core size in source pixels; sets memory use.
    n_azimuths, n_boot : int
        Radial profiles per crater and bootstrap resamples.
    seed : int
        Seed for every random step; same input + seed = same output.
    model : str or Path, optional
        Scoring model file (skops); the shipped default when omitted.
    workers : int, optional
        Processes that run tiles (``None`` = all cores). Several tiles are shared between
        this process and ``workers - 1`` local Dask workers; a single tile runs in this
        process, and with more than one worker a second process loads the scoring model
        beside it and scores. Both start processes by
        ``spawn``, so a script that calls this with more than one worker needs the usual
        ``if __name__ == "__main__":`` guard (see :mod:`multiprocessing`).
    scheduler : str, optional
        Address of an existing dask.distributed scheduler.
    run_dir : Path, optional
        Folder for per-tile results (enables ``resume``).
    resume : bool
        Continue an interrupted survey, redoing only missing tiles.
    progress : bool
        Progress bar over tiles.

    Returns
    -------
    SurveyResult

    Examples
    --------
    >>> res = survey("sample_dems/kessel_halden_block.tif")  # doctest: +SKIP
    >>> res.craters[["diameter_m", "d_over_D", "p_impact", "verdict"]].head()  # doctest: +SKIP
    """
    t_start = time.perf_counter()
    started = datetime.now(UTC).isoformat(timespec="seconds")
    info = _prepare(path, body=body, band=band, pixel_size=pixel_size, z_scale=z_scale,
                    z_offset=z_offset, min_diameter_px=min_diameter_px)
    specs, max_d = _tiling(info, tile_size, max_diameter_px)
    timing = {"open": time.perf_counter() - t_start}  # opening the DEM and planning its tiles
    loader = _ScorerLoader(model, defer=uses_dask(len(specs), workers, scheduler),
                           beside=_scores_beside(len(specs), workers, scheduler))
    params = TileParams(min_diameter_px=float(min_diameter_px), max_diameter_px=max_d,
                        n_azimuths=int(n_azimuths), n_boot=int(n_boot), seed=int(seed),
                        fail_tiles=tuple(_fail_tiles))
    spec = model_spec(model, ship=scheduler is not None) if loader.deferred else None
    with loader, TilePool(workers=workers, scheduler=scheduler, warm_modules=TILE_MODULES) as pool:
        run = run_tiles(survey_tile, info, specs, (params,), run_dir=None if run_dir is None else Path(run_dir),
                        resume=resume, progress=progress, local_modules=_after_tiles(pool),
                        side_tasks=_side_tasks(info), background_tasks=_background_tasks(spec), pool=pool)
        log.info("%d tiles in %.1f s (%d reused, %d failed)", len(specs), run.seconds, run.reused, len(run.failed))
        t_merge = time.perf_counter()
        frames = [f for f in run.results if len(f)]
        df = pd.concat(frames, ignore_index=True) if frames else pd.DataFrame()
        if len(df):
            df = df[df["measure_status"].astype(str) == "ok"].reset_index(drop=True) if "measure_status" in df else df
        if len(df):
            x, y, _ = _metric_xy(df, info)
            df = df.loc[_dedupe(df, x, y)].reset_index(drop=True)
            df = _stable_order(df)
            df["crater_id"] = [f"C{i + 1:06d}" for i in range(len(df))]
        record = {
            "body": info.body.name, "band": info.band, "pixel_size": pixel_size, "z_scale": info.z_scale,
            "z_offset": info.z_offset, "min_diameter_px": min_diameter_px, "max_diameter_px": max_d,
            "tile_size": tile_size, "n_tiles": len(specs), "n_azimuths": n_azimuths, "n_boot": n_boot,
            "workers": workers, "scheduler": scheduler, "resume": resume, "tiles_reused": run.reused,
        }
        merge = time.perf_counter() - t_merge
        timing.update(_run_timing(run), merge=merge)
        return _finish(df, info, seed=seed, loader=loader, params=record, t_start=t_start, started=started,
                       failed=run.failed, command="survey", timing=timing, footprint=run.side.get("footprint"),
                       pool=pool, spec=spec, background=run.background)


def measure(
    path,
    craters: pd.DataFrame,
    *,
    body: str | None = None,
    band: int | None = None,
    pixel_size: float | None = None,
    z_scale: float | None = None,
    z_offset: float | None = None,
    tile_size: int = DEFAULT_TILE_SIZE,
    n_azimuths: int = 64,
    n_boot: int = 30,
    seed: int = 0,
    model=None,
    workers: int | None = 1,
    scheduler: str | None = None,
    progress: bool = False,
    bad_rows: dict | None = None,
) -> SurveyResult:
    """Measure and score a user's crater list on a DEM (no detection).

    Parameters
    ----------
    path : str or Path
        The DEM.
    craters : pandas.DataFrame
        Columns ``crater_id, x, y, diameter_m`` with x, y in the DEM's CRS
        (see :func:`morpho.ingest.craterlist.read_crater_list`).
    bad_rows : dict, optional
        Rows of the list already refused by the reader (row -> reason), kept in provenance.

    Other parameters are as for :func:`survey`.

    Returns
    -------
    SurveyResult
        ``unmeasured`` lists the craters that could not be measured, with the reason.
    """
    t_start = time.perf_counter()
    started = datetime.now(UTC).isoformat(timespec="seconds")
    info = _prepare(path, body=body, band=band, pixel_size=pixel_size, z_scale=z_scale,
                    z_offset=z_offset, min_diameter_px=4)
    need = {"crater_id", "x", "y", "diameter_m"}
    if not need <= set(craters.columns):
        raise InputError(f"crater table lacks columns {sorted(need - set(craters.columns))}.",
                         fix="read the list with morpho.ingest.craterlist.read_crater_list.")
    max_d_px = float(np.nanmax(craters["diameter_m"])) / min(info.ground_pixel_m) if len(craters) else 0
    single = max(info.height, info.width) <= tile_size
    overlap = 0 if single else int(math.ceil(1.25 * max_d_px))
    specs = plan_tiles(info, max(info.height, info.width) if single else tile_size, overlap)
    timing = {"open": time.perf_counter() - t_start}  # opening the DEM and planning its tiles
    loader = _ScorerLoader(model, defer=uses_dask(len(specs), workers, scheduler),
                           beside=_scores_beside(len(specs), workers, scheduler))
    # Craters whose centre is outside the raster are reported, not silently dropped.
    inv = ~info.transform
    col = inv.c + inv.a * craters["x"].to_numpy(float) + inv.b * craters["y"].to_numpy(float)
    row = inv.f + inv.d * craters["x"].to_numpy(float) + inv.e * craters["y"].to_numpy(float)
    inside = (row >= 0) & (row < info.height) & (col >= 0) & (col < info.width)
    unmeasured = [{"crater_id": str(c), "reason": "centre outside the DEM"}
                  for c in craters.loc[~inside, "crater_id"]]
    params = TileParams(n_azimuths=int(n_azimuths), n_boot=int(n_boot), seed=int(seed))
    spec = model_spec(model, ship=scheduler is not None) if loader.deferred else None
    with loader, TilePool(workers=workers, scheduler=scheduler, warm_modules=TILE_MODULES) as pool:
        run = run_tiles(measure_tile, info, specs, (craters.loc[inside].reset_index(drop=True), params),
                        progress=progress, local_modules=_after_tiles(pool), side_tasks=_side_tasks(info),
                        background_tasks=_background_tasks(spec), pool=pool)
        t_merge = time.perf_counter()
        frames = [f for f in run.results if len(f)]
        df = pd.concat(frames, ignore_index=True) if frames else pd.DataFrame()
        if len(df) and "measure_status" in df:
            bad = df["measure_status"].astype(str) != "ok"
            unmeasured += [{"crater_id": str(c), "reason": str(r)}
                           for c, r in zip(df.loc[bad, "crater_id"], df.loc[bad, "measure_status"], strict=True)]
            df = df.loc[~bad].reset_index(drop=True)
        if len(df):
            df = _stable_order(df)
        record = {
            "body": info.body.name, "band": info.band, "pixel_size": pixel_size, "z_scale": info.z_scale,
            "z_offset": info.z_offset, "tile_size": tile_size, "n_tiles": len(specs), "n_azimuths": n_azimuths,
            "n_boot": n_boot, "workers": workers, "scheduler": scheduler, "n_listed": len(craters),
            "bad_rows": bad_rows or {}, "unmeasured": unmeasured,
        }
        merge = time.perf_counter() - t_merge
        timing.update(_run_timing(run), merge=merge)
        return _finish(df, info, seed=seed, loader=loader, params=record, t_start=t_start, started=started,
                       failed=run.failed, command="measure", timing=timing,
                       unmeasured=pd.DataFrame(unmeasured, columns=["crater_id", "reason"]),
                       footprint=run.side.get("footprint"), pool=pool, spec=spec, background=run.background)
