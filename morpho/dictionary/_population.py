"""Columns of the data dictionary owned by the population step (see DEVELOPERS.md).

``FIELDS`` are the columns of the non-spatial ``population`` layer (one row per
statistic); ``CRATER_FIELDS`` are the columns the population step adds to the
``craters`` layer; ``CHAIN_FIELDS`` those of the ``chains`` line layer.
"""

from ._field import Field

FIELDS = (
    Field("statistic", "", "str", "Name of the population statistic (e.g. clark_evans_R, csfd_slope).",
          "see morpho.population.population_statistics", "common practice"),
    Field("value", "see statistic", "float64", "Value of the statistic, in the unit its name states (m, km^-2) "
          "or dimensionless.", "see the method column", "see the reference column"),
    Field("p_value", "1", "float64", "p-value of the statistic's null hypothesis (complete spatial randomness, "
          "power law, uniform orientation); NaN for descriptive values.",
          "analytic approximation or Monte Carlo (1 + #{sim >= obs})/(1 + n_sim) against CSR simulated inside "
          "the valid-data mask", "Besag & Diggle 1977, Appl. Stat. 26:327"),
    Field("n", "1", "int64", "Number of craters (or chains) the statistic rests on.",
          "craters at or above the completeness diameter", "common practice"),
    Field("method", "", "str", "How the statistic was computed, in words.", "", "common practice"),
    Field("reference", "", "str", "Published source of the method (author, year, journal).", "",
          "common practice"),
)

CRATER_FIELDS = (
    Field("cluster_id", "", "int64", "DBSCAN cluster of the crater centre; -1 for none or below completeness.",
          "DBSCAN on centres above completeness, eps = CSR mean nearest-neighbour distance 0.5/sqrt(n/A), "
          "min_samples 5", "Ester et al. 1996, Proc. KDD-96:226; Clark & Evans 1954, Ecology 35:445"),
    Field("chain_id", "", "int64", "Crater chain the crater belongs to; -1 for none or below completeness.",
          "aligned neighbouring triplets (middle centre within 0.25 mean diameter of the line through the outer "
          "two) joined when they share two craters; chains of >= 5 craters",
          "Broadbent 1980, JRSS A 143:109"),
)

CHAIN_FIELDS = (
    Field("chain_id", "", "int64", "Chain identifier, as in the craters layer.", "", "common practice"),
    Field("n_craters", "1", "int64", "Craters in the chain.", "", "common practice"),
    Field("length_m", "m", "float64", "Distance between the outermost crater centres along the chain axis.",
          "total-least-squares line through the member centres", "common practice"),
    Field("azimuth_deg", "degree", "float64", "Chain axis, clockwise from local north (+y), in [0, 180).",
          "first principal axis of the member centres", "Mardia & Jupp 2000, Directional Statistics (axial data)"),
)

ENVELOPE_FIELDS = (
    Field("r_m", "m", "float64", "Distance r at which Besag's L is evaluated.", "", "Besag 1977, JRSS B 39:193"),
    Field("L_m", "m", "float64", "Observed Besag's L(r) = sqrt(K(r)/pi) of the craters above completeness.",
          "Ripley's K with border edge correction", "Ripley 1977, JRSS B 39:172; Besag 1977"),
    Field("L_low_m", "m", "float64", "Lower edge of the CSR envelope of L(r).",
          "minimum over Monte Carlo CSR patterns simulated inside the valid-data mask", "Besag & Diggle 1977, Appl. Stat. 26:327"),
    Field("L_high_m", "m", "float64", "Upper edge of the CSR envelope of L(r).",
          "maximum over the same simulations", "Besag & Diggle 1977, Appl. Stat. 26:327"),
    Field("L_mean_m", "m", "float64", "Mean L(r) over the CSR simulations (about r under CSR).",
          "mean over the same simulations", "Ripley 1976, J. Appl. Prob. 13:255"),
)
