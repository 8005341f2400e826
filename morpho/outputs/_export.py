"""Feature export for review: one row per crater, its data dictionary and the run provenance.

``export_features`` writes three files side by side, each atomically:
``features.csv`` (or ``.parquet``), ``features.dictionary.csv`` and
``features.provenance.json``. The dictionary rows come from the same
:mod:`morpho.dictionary` declaration the writers use, so every exported column is
documented exactly once.
"""

from __future__ import annotations

import io
import json
from pathlib import Path

import pandas as pd

from .. import dictionary
from ..errors import InputError
from ._atomic import atomic_paths, check_targets
from ._geopackage import read_survey

__all__ = ["FLOAT_FORMAT", "export_features", "feature_table", "companion_paths"]

#: printf format of floats in CSV: 10 significant digits round-trip every measured value
#: far below its uncertainty while keeping the text stable across platforms.
FLOAT_FORMAT = "%.10g"
_FORMATS = {".csv": "csv", ".parquet": "parquet"}


def companion_paths(out_path) -> tuple[Path, Path]:
    """The dictionary and provenance files written beside ``out_path``."""
    out = Path(out_path)
    stem = out.name[: -len(out.suffix)] if out.suffix else out.name
    return out.with_name(f"{stem}.dictionary.csv"), out.with_name(f"{stem}.provenance.json")


def feature_table(craters) -> pd.DataFrame:
    """The crater table without geometry, in dictionary column order and ``crater_id`` row order."""
    cols = [c for c in dictionary.CRATER_COLUMNS if c in craters.columns]
    table = pd.DataFrame(craters[cols])
    if "crater_id" in table.columns:
        table = table.sort_values("crater_id", kind="mergesort")
    return table.reset_index(drop=True)


def _csv_bytes(frame: pd.DataFrame) -> bytes:
    buf = io.StringIO()
    frame.to_csv(buf, index=False, float_format=FLOAT_FORMAT, lineterminator="\n")
    return buf.getvalue().encode("utf-8")


def export_features(gpkg_path, out_path, *, overwrite: bool = False) -> Path:
    """Export every crater feature of a survey GeoPackage as CSV or Parquet.

    Parameters
    ----------
    gpkg_path : path-like
        GeoPackage written by :func:`morpho.outputs.write_geopackage`.
    out_path : path-like
        ``*.csv`` or ``*.parquet``. Beside it go ``<stem>.dictionary.csv`` (column,
        unit, dtype, definition, method, reference) and ``<stem>.provenance.json``
        (the ``run`` table).
    overwrite : bool, default False
        Replace existing files (all three are checked before any is written).

    Returns
    -------
    pathlib.Path
        The feature table written.

    Notes
    -----
    Columns follow the data dictionary; rows follow ``crater_id``. Floats are written
    with ``%.10g`` and ``\\n`` line ends, so the same GeoPackage always gives a
    byte-identical CSV. Rim outlines stay in the GeoPackage; the table carries the
    centre coordinates.
    """
    out = Path(out_path)
    fmt = _FORMATS.get(out.suffix.lower())
    if fmt is None:
        raise InputError(f"unknown export format {out.suffix or '(no extension)'!r}; expected "
                         ".csv or .parquet.", path=out, fix="name the output features.csv or features.parquet")
    dict_path, prov_path = companion_paths(out)
    targets = check_targets([out, dict_path, prov_path], overwrite=overwrite)
    survey = read_survey(gpkg_path)
    table = feature_table(survey.craters)
    doc = dictionary.dictionary_table(list(table.columns))
    provenance = json.dumps(survey.run, indent=2, ensure_ascii=False) + "\n"
    with atomic_paths(targets) as (tmp_table, tmp_dict, tmp_prov):
        if fmt == "csv":
            tmp_table.write_bytes(_csv_bytes(table))
        else:
            table.to_parquet(tmp_table, index=False)
        tmp_dict.write_bytes(_csv_bytes(doc))
        tmp_prov.write_text(provenance, encoding="utf-8")
    return targets[0]
