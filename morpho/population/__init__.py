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

from .contrast import contrast_regions
from .projection import to_local_metric
from .statistics import PopulationResult, population_statistics

__all__ = ["PopulationResult", "population_statistics", "contrast_regions", "to_local_metric"]
