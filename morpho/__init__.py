"""morpho: crater morphometry and hypothesis testing on planetary DEMs.

The public API mirrors the command line::

    import morpho
    result = morpho.survey("dem.tif")            # SurveyResult: craters, population, chains, run
    morpho.write_geopackage("out.gpkg", result.craters, population=result.population, ...)

The score morpho gives each crater measures morphological similarity to impact
craters and to laboratory electrode-spot craters under stated assumptions; it
says nothing about mechanism by itself. Impact is the consensus origin of
planetary craters.
"""

from __future__ import annotations

import importlib

__version__ = "0.1.0"

# name -> module that defines it; imported on first use so `import morpho` stays light.
_API = {
    "survey": "morpho.pipeline",
    "measure": "morpho.pipeline",
    "SurveyResult": "morpho.pipeline",
    "open_dem": "morpho.ingest",
    "read_dem": "morpho.ingest",
    "detect_craters": "morpho.detection",
    "measure_craters": "morpho.morphometry",
    "generate_surface": "morpho.synth",
    "score_craters": "morpho.scoring",
    "load_model": "morpho.scoring",
    "population_statistics": "morpho.population",
    "write_geopackage": "morpho.outputs",
    "read_survey": "morpho.outputs",
    "export_features": "morpho.outputs",
    "build_report": "morpho.outputs",
    "render_preview_png": "morpho.outputs",
    "run_provenance": "morpho.outputs",
    "get_body": "morpho.bodies",
    "CAVEATS": "morpho.caveats",
}

__all__ = ["__version__", *_API]


def __getattr__(name):
    if name in _API:
        return getattr(importlib.import_module(_API[name]), name)
    raise AttributeError(f"module 'morpho' has no attribute {name!r}")


def __dir__():
    return sorted(__all__)
