"""Everything morpho writes: the survey GeoPackage, feature exports and the HTML report.

This is the only package (with the synthetic-surface writer) that writes files.
Every writer checks its inputs first, writes to a temporary file beside the
target and renames it into place, and never replaces an existing file unless
``overwrite=True``. Every output carries the caveats of :mod:`morpho.caveats`.
"""

from __future__ import annotations

from ._export import companion_paths, export_features, feature_table
from ._geopackage import LAYERS, SurveyOutput, read_survey, write_geopackage
from ._provenance import run_provenance, sha256_file

# The report and the preview pull in matplotlib (~0.4 s): imported on first use, so a
# survey that writes only the GeoPackage never pays for it.
_LAZY = {"build_report": "._report", "render_preview_png": "._report"}


def __getattr__(name):
    if name in _LAZY:
        import importlib

        return getattr(importlib.import_module(_LAZY[name], __name__), name)
    raise AttributeError(f"module {__name__!r} has no attribute {name!r}")


__all__ = [
    "LAYERS",
    "SurveyOutput",
    "write_geopackage",
    "read_survey",
    "run_provenance",
    "sha256_file",
    "export_features",
    "feature_table",
    "companion_paths",
    "build_report",
    "render_preview_png",
]
