"""The ``run`` provenance table: what went in, with which settings and software.

A reviewer reproducing a result needs the exact input (its SHA-256), every
parameter, the seed, the model and the library versions; this module gathers
them into one ordered dict written as the GeoPackage ``run`` layer.
"""

from __future__ import annotations

import json
import os
from datetime import UTC, datetime
from importlib import metadata
from pathlib import Path

from .. import __version__
from ..caveats import CAVEATS
from ..errors import InputError

__all__ = ["DEPENDENCIES", "sha256_file", "dependency_versions", "utc_iso", "run_provenance"]

#: Distributions whose versions are recorded in every run table.
DEPENDENCIES = ("numpy", "scipy", "scikit-image", "scikit-learn", "rasterio", "geopandas",
                "pyogrio", "pyproj", "shapely", "pandas", "dask", "skops")

_CHUNK = 1 << 20


def sha256_file(path) -> str:
    """SHA-256 of a file, read in 1 MiB chunks (large DEMs never sit in memory).

    Raises
    ------
    InputError
        The file cannot be read.
    """
    from ..ingest import sha256_of

    try:
        return sha256_of(path, chunk=_CHUNK)
    except OSError as err:
        raise InputError(f"cannot read the file to fingerprint it: {err.strerror or err}.",
                         path=path, fix="check the path and permissions") from err


def dependency_versions() -> dict[str, str]:
    """Versions of morpho's scientific dependencies and of GDAL, keyed ``version.<name>``."""
    out = {"version.morpho": __version__}
    for dist in DEPENDENCIES:
        try:
            out[f"version.{dist}"] = metadata.version(dist)
        except metadata.PackageNotFoundError:
            out[f"version.{dist}"] = "not installed"
    # rasterio and pyogrio wheels each bundle their own GDAL: the one that read the
    # DEM and the one that wrote the GeoPackage may differ, so record both.
    try:
        import rasterio

        out["version.gdal_rasterio"] = rasterio.__gdal_version__
    except ImportError:  # pragma: no cover - rasterio is a hard dependency
        out["version.gdal_rasterio"] = "not installed"
    import pyogrio

    out["version.gdal_pyogrio"] = pyogrio.__gdal_version_string__
    return out


def utc_iso(when=None) -> str:
    """ISO 8601 UTC timestamp (``2026-01-31T12:00:00Z``); ``when`` a datetime, str or None (now)."""
    if isinstance(when, str):
        try:
            when = datetime.fromisoformat(when.replace("Z", "+00:00"))
        except ValueError as err:
            raise InputError(f"timestamp {when!r} is not ISO 8601.",
                             fix="pass a datetime or an ISO 8601 text") from err
    when = datetime.now(UTC) if when is None else when
    if when.tzinfo is None:
        raise InputError(f"timestamp {when!r} has no time zone.",
                         fix="pass an aware datetime, e.g. datetime.now(datetime.UTC)")
    return when.astimezone(UTC).isoformat(timespec="seconds").replace("+00:00", "Z")


def run_provenance(input_path, *, command: str = "", parameters: dict | None = None,
                   raster_size: tuple[int, int] | None = None, crs=None, body=None,
                   seed: int | None = None, model_path=None, model_card=None,
                   start_time=None, end_time=None, tiles_failed=(), extra: dict | None = None
                   ) -> dict[str, str]:
    """Build the ``run`` provenance dict of a survey or measurement.

    Parameters
    ----------
    input_path : path-like
        The DEM (hashed with SHA-256; only its file name is recorded, not the folder).
    command : str, optional
        The morpho command or function that ran (``"survey"``, ``"measure"``).
    parameters : dict, optional
        Every parameter of the run; one row ``param.<name>`` each.
    raster_size : (int, int), optional
        Raster rows and columns.
    crs : pyproj.CRS or rasterio.crs.CRS or str, optional
        CRS of the DEM; recorded as WKT.
    body : morpho.bodies.Body or str, optional
        Planetary body.
    seed : int, optional
        Random seed.
    model_path : path-like, optional
        Scorer model file (hashed with SHA-256).
    model_card : dict or str, optional
        Summary of the model card (training data, hypothesis, metrics).
    start_time, end_time : datetime or str, optional
        Start and end of the run (UTC); ``end_time`` defaults to now.
    tiles_failed : sequence, optional
        Tiles that failed (e.g. ``"(0, 2048)"``), with or without reasons.
    extra : dict, optional
        Further keys, added last.

    Returns
    -------
    dict of str to str
        Ordered provenance; structured values as JSON text. Always ends with
        ``caveats``.

    Examples
    --------
    >>> import tempfile, pathlib
    >>> p = pathlib.Path(tempfile.mkdtemp()) / "dem.tif"
    >>> _ = p.write_bytes(b"abc")
    >>> run_provenance(p, seed=1)["input_sha256"][:12]
    'ba7816bf8f01'
    """
    path = Path(input_path)
    if not path.is_file():
        raise InputError("the input file does not exist.", path=path, fix="give the DEM that was surveyed")
    run: dict[str, str] = {
        "morpho_version": __version__,
        "command": command,
        "input_file": path.name,
        "input_sha256": sha256_file(path),
        "input_size_bytes": str(os.path.getsize(path)),
    }
    if raster_size is not None:
        run["raster_rows"], run["raster_cols"] = (str(int(n)) for n in raster_size)
    if crs is not None:
        run["crs_wkt"] = crs if isinstance(crs, str) else crs.to_wkt()
    if body is not None:
        run["body"] = body if isinstance(body, str) else str(getattr(body, "name", body))
        for attr in ("radius_m", "gravity_ms2", "transition_diameter_m", "source"):
            if hasattr(body, attr):
                run[f"body_{attr}"] = str(getattr(body, attr))
    for name, value in (parameters or {}).items():
        run[f"param.{name}"] = _text(value)
    run["seed"] = "" if seed is None else str(int(seed))
    if model_path is not None:
        run["model_file"] = Path(model_path).name
        run["model_sha256"] = sha256_file(model_path)
    if model_card is not None:
        run["model_card"] = _text(model_card)
    run["start_time_utc"] = "" if start_time is None else utc_iso(start_time)
    run["end_time_utc"] = utc_iso(end_time)
    failed = [_text(t) for t in tiles_failed]
    run["tiles_failed_count"] = str(len(failed))
    run["tiles_failed"] = json.dumps(failed)
    run.update(dependency_versions())
    for name, value in (extra or {}).items():
        run[str(name)] = _text(value)
    run["caveats"] = CAVEATS
    return run


def _text(value) -> str:
    if isinstance(value, str):
        return value
    try:
        return json.dumps(value, sort_keys=True, default=str)
    except (TypeError, ValueError):
        return str(value)
