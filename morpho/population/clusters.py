"""Density-based clusters of crater centres (DBSCAN) with a scale set by CSR."""

from __future__ import annotations

import numpy as np
from scipy.sparse import coo_matrix
from scipy.sparse.csgraph import connected_components
from scipy.spatial import cKDTree
from sklearn.cluster import DBSCAN

from .nearest_neighbour import csr_mean_nn_distance

__all__ = ["dbscan_clusters", "dbscan_counts", "default_eps", "MIN_SAMPLES"]

DBSCAN_REFERENCE = ("Ester, Kriegel, Sander & Xu 1996, Proc. KDD-96:226 (DBSCAN); eps from "
                    "Clark & Evans 1954, Ecology 35:445")

#: A point is a core point when >= 4 others lie within eps. With eps the CSR mean
#: nearest-neighbour distance the expected count there is pi/4, and the Poisson
#: probability of >= 4 is 0.9 %, so CSR yields almost no clusters.
MIN_SAMPLES = 5


def default_eps(n: int, area_m2: float) -> float:
    """DBSCAN radius (m): the CSR expected nearest-neighbour distance 0.5/sqrt(n/A)."""
    return float(csr_mean_nn_distance(n / area_m2))


def dbscan_clusters(x_m, y_m, area_m2: float, *, eps_m: float | None = None,
                    min_samples: int = MIN_SAMPLES) -> np.ndarray:
    """Cluster label per crater centre, -1 for craters in no cluster.

    Parameters
    ----------
    x_m, y_m : array_like, shape (n,)
        Crater centres (m).
    area_m2 : float
        Valid-data area (m^2); sets the CSR density scale.
    eps_m : float, optional
        Neighbourhood radius (m); default :func:`default_eps`.
    min_samples : int
        Points (the point itself included) within eps_m that make a core point.

    Returns
    -------
    numpy.ndarray of int64, shape (n,)

    References
    ----------
    Ester M., Kriegel H.-P., Sander J., Xu X. (1996) A density-based algorithm for
    discovering clusters in large spatial databases with noise, Proc. KDD-96, 226-231.
    """
    xy = np.column_stack([np.asarray(x_m, float), np.asarray(y_m, float)])
    n = len(xy)
    if n < min_samples:
        return np.full(n, -1, dtype=np.int64)
    eps = default_eps(n, area_m2) if eps_m is None else float(eps_m)
    return DBSCAN(eps=eps, min_samples=min_samples).fit_predict(xy).astype(np.int64)


def dbscan_counts(x_m, y_m, area_m2: float, *, eps_m: float | None = None,
                  min_samples: int = MIN_SAMPLES) -> tuple[int, float]:
    """Number of DBSCAN clusters and the share of craters in one, without the labels.

    The same partition as :func:`dbscan_clusters` (Ester et al. 1996): clusters are the
    connected components of core points linked within ``eps``; a non-core point within
    ``eps`` of a core point is a border point and belongs to a cluster. Which cluster a
    border point joins depends on the visiting order, but the counts do not, so the Monte
    Carlo envelopes (99 patterns per survey) need only a k-d tree and a connected-components
    pass: 3x faster than fitting the estimator at 2,600 points, ~15x at 40 (measured).

    Returns
    -------
    n_clusters : int
    clustered_share : float
        Fraction of the points that are core or border points (0 for < ``min_samples`` points).
    """
    xy = np.column_stack([np.asarray(x_m, float), np.asarray(y_m, float)])
    n = len(xy)
    if n < min_samples:
        return 0, 0.0
    eps = default_eps(n, area_m2) if eps_m is None else float(eps_m)
    pairs = cKDTree(xy).query_pairs(eps, output_type="ndarray")
    # a point's neighbourhood includes the point itself, as in scikit-learn
    count = 1 + np.bincount(pairs.ravel(), minlength=n)
    core = count >= min_samples
    both = core[pairs[:, 0]] & core[pairs[:, 1]]
    one = core[pairs[:, 0]] ^ core[pairs[:, 1]]
    border = np.zeros(n, bool)
    border[np.where(core[pairs[one, 0]], pairs[one, 1], pairs[one, 0])] = True
    idx = np.flatnonzero(core)
    if idx.size == 0:
        return 0, 0.0
    pos = np.full(n, -1)
    pos[idx] = np.arange(idx.size)
    cp = pairs[both]
    graph = coo_matrix((np.ones(len(cp)), (pos[cp[:, 0]], pos[cp[:, 1]])), shape=(idx.size, idx.size))
    n_clusters, _ = connected_components(graph, directed=False)
    return int(n_clusters), float((core | border).sum() / n)
