"""The one data dictionary: every column morpho writes, with unit, dtype, definition and source.

Sections live in underscore modules, one per pipeline step; this module merges
them in pipeline order. Exports and the GeoPackage read their column order,
dtypes and documentation from here, never from a second list.
"""

from __future__ import annotations

from . import _core, _morphometry, _population, _scaling, _scores
from ._field import Field

__all__ = [
    "Field",
    "FIELDS",
    "CRATER_FIELDS",
    "CRATER_COLUMNS",
    "POPULATION_FIELDS",
    "CHAIN_FIELDS",
    "ENVELOPE_FIELDS",
    "get_field",
    "dictionary_table",
]


def _expand(fields):
    out = []
    for f in fields:
        out.append(f)
        if f.has_error:
            out.append(f.error_field())
    return tuple(out)


#: Columns of the ``craters`` layer, in export order.
CRATER_FIELDS: tuple[Field, ...] = _expand(
    _core.FIELDS + _morphometry.FIELDS + _scaling.FIELDS + _scores.FIELDS + _population.CRATER_FIELDS
)
#: Columns of the ``population`` layer.
POPULATION_FIELDS: tuple[Field, ...] = tuple(_population.FIELDS)
#: Columns of the ``chains`` layer.
CHAIN_FIELDS: tuple[Field, ...] = tuple(_population.CHAIN_FIELDS)
#: Columns of the ``ripley_l`` layer (Besag's L with its CSR envelope).
ENVELOPE_FIELDS: tuple[Field, ...] = tuple(_population.ENVELOPE_FIELDS)

FIELDS: dict[str, Field] = {f.name: f for f in CRATER_FIELDS}
if len(FIELDS) != len(CRATER_FIELDS):  # pragma: no cover - guards editing mistakes
    dup = sorted({f.name for f in CRATER_FIELDS if sum(g.name == f.name for g in CRATER_FIELDS) > 1})
    raise RuntimeError(f"duplicate data-dictionary columns: {dup}")

CRATER_COLUMNS: tuple[str, ...] = tuple(FIELDS)


def get_field(name: str) -> Field:
    """Return the :class:`Field` documenting crater column ``name``."""
    try:
        return FIELDS[name]
    except KeyError:
        raise KeyError(f"column {name!r} is not in the morpho data dictionary") from None


def dictionary_table(columns=None):
    """The dictionary as a :class:`pandas.DataFrame` (column, unit, dtype, definition, method, reference).

    Parameters
    ----------
    columns : sequence of str, optional
        Restrict (and order) the rows to these crater columns.
    """
    import pandas as pd

    names = CRATER_COLUMNS if columns is None else list(columns)
    rows = [get_field(n) for n in names]
    return pd.DataFrame(
        {
            "column": [f.name for f in rows],
            "unit": [f.unit for f in rows],
            "dtype": [f.dtype for f in rows],
            "definition": [f.definition for f in rows],
            "method": [f.method for f in rows],
            "reference": [f.reference for f in rows],
        }
    )
