"""Population statistics of crater fields and comparison of regions.

Pure numerics: arrays and shapely polygons in a local metric plane in, dataclasses
and DataFrames out. One module per concept:

- :mod:`.sfd` and :mod:`.production`: size-frequency distributions, completeness,
  maximum-likelihood slope, production-function shape test.
- :mod:`.nearest_neighbour`, :mod:`.ripley`, :mod:`.clusters`: spatial randomness and
  clustering; :mod:`.csr` simulates the null inside the survey mask.
- :mod:`.alignments`, :mod:`.orientation`, :mod:`.superposition`: chains, axial
  orientation, craters on crater rims.
- :mod:`.statistics`: everything at once (the ``population`` layer);
  :mod:`.contrast`: region against region; :mod:`.projection`: lon/lat to metres.
"""

from .._lazy import lazy_attributes

__all__ = ["PopulationResult", "population_statistics", "contrast_regions", "to_local_metric"]

# Loaded on first use (PEP 562): the statistics pull in scipy.stats (~1.4 s with its kin), which a
# survey's main process does not need when its statistics run on a Dask worker.
_WHERE = {"PopulationResult": ".statistics", "population_statistics": ".statistics",
          "contrast_regions": ".contrast", "to_local_metric": ".projection"}


__getattr__, __dir__ = lazy_attributes(__name__, _WHERE, globals(), __all__)
