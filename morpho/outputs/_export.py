"""Feature export for review: one row per crater, its data dictionary and the run provenance.

``export_features`` writes three files side by side, each atomically:
``features.csv`` (or ``.parquet``), ``features.dictionary.csv`` and
``features.provenance.json``. The dictionary rows come from the same
:mod:`morpho.dictionary` declaration the writers use, so every exported column is
documented exactly once.
"""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.csv as pa_csv

from .. import dictionary
from ..errors import InputError
from ._atomic import atomic_paths, check_targets
from ._geopackage import read_survey

__all__ = ["SIGNIFICANT_DIGITS", "round_significant", "export_features", "feature_table", "companion_paths"]

#: Significant digits of floats in CSV: far below any measured value's uncertainty, and
#: deaf to last-bit differences between machines, so the text stays stable.
SIGNIFICANT_DIGITS = 10
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


def round_significant(values, digits: int = SIGNIFICANT_DIGITS) -> np.ndarray:
    """Round floats to ``digits`` significant decimal digits, vectorised.

    The result is the double nearest to the rounded decimal (division or
    multiplication by an exact power of ten is correctly rounded), so its shortest
    text form is that decimal: the same as ``f"{x:.{digits}g}"`` except, rarely, one
    unit in the last digit at exact ties. NaN, inf and zero pass through.
    """
    x = np.array(values, dtype=np.float64)
    sel = np.isfinite(x) & (x != 0)
    v = x[sel]
    e = np.floor(np.log10(np.abs(v))).astype(np.int64)
    e += np.abs(v) >= 10.0 ** (e + 1)  # log10 can land just below an exact power of ten
    n = digits - 1 - e  # decimals to keep
    r = np.empty_like(v)
    up = (n >= 0) & (n <= 22)  # 10**n exact in binary64 up to 1e22
    p = 10.0 ** n[up]
    r[up] = np.round(v[up] * p) / p
    down = n < 0
    q = 10.0 ** (-n[down])
    r[down] = np.round(v[down] / q) * q
    tiny = n > 22
    r[tiny] = [float(f"{t:.{digits}g}") for t in v[tiny]]
    x[sel] = r
    return x


def _csv_bytes(frame: pd.DataFrame) -> bytes:
    # pyarrow's CSV writer is ~10x faster than pandas' on wide tables and prints each
    # double in its shortest round-trip form; rounding first fixes that text.
    cols = {}
    for name in frame.columns:
        col = frame[name]
        cols[name] = (pa.array(round_significant(col.to_numpy()), type=pa.float64())
                      if col.dtype == np.float64 else pa.array(col.to_numpy(dtype=object)
                                                               if col.dtype == "str" else col.to_numpy()))
    out = pa.BufferOutputStream()
    pa_csv.write_csv(pa.table(cols), out, pa_csv.WriteOptions(quoting_style="needed"))
    return out.getvalue().to_pybytes()


def _dictionary_csv(doc: pd.DataFrame) -> bytes:
    # small and read by people: pandas' minimal quoting reads best in a spreadsheet
    return doc.to_csv(index=False, lineterminator="\n").encode("utf-8")


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
    Columns follow the data dictionary; rows follow ``crater_id``. CSV floats are
    rounded to 10 significant digits (:func:`round_significant`), missing values are
    empty fields, text is quoted, lines end in ``\\n``: the same GeoPackage always
    gives a byte-identical CSV. Rim outlines stay in the GeoPackage; the table carries the
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
        tmp_dict.write_bytes(_dictionary_csv(doc))
        tmp_prov.write_text(provenance, encoding="utf-8")
    return targets[0]
