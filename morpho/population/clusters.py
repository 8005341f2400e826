"""Density-based clusters of crater centres (DBSCAN) with a scale set by CSR."""

from __future__ import annotations

import numpy as np
from scipy.sparse import coo_matrix
from scipy.sparse.csgraph import connected_components
from scipy.spatial import cKDTree

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
    labels = np.full(n, -1, dtype=np.int64)
    if n < min_samples:
        return labels
    eps = default_eps(n, area_m2) if eps_m is None else float(eps_m)
    core, n_clusters, component, (c_end, b_end) = _partition(xy, eps, min_samples)
    if n_clusters == 0:
        return labels
    idx = np.flatnonzero(core)
    # Ester et al.'s algorithm (as scikit-learn runs it) grows clusters in the order of their
    # lowest-index core point, and a border point joins the first cluster that reaches it:
    # number the components by their lowest core index, give each border point the lowest.
    first = np.full(n_clusters, n)
    np.minimum.at(first, component, idx)
    rank = np.empty(n_clusters, dtype=np.int64)
    rank[np.argsort(first)] = np.arange(n_clusters)
    labels[idx] = rank[component]
    best = np.full(n, np.iinfo(np.int64).max)
    np.minimum.at(best, b_end, labels[c_end])
    border = best < np.iinfo(np.int64).max
    labels[border] = best[border]
    return labels


def _partition(xy, eps, min_samples):
    """Core points, the connected components of the core points, and the core-border links.

    Returns ``(core, n_clusters, component, (core_end, border_end))``: ``component`` labels
    the core points in index order (scipy's numbering, not the clusters' order); each link
    joins a core point to a non-core point within ``eps`` of it (a border point).
    """
    n = len(xy)
    pairs = cKDTree(xy).query_pairs(eps, output_type="ndarray")
    # a point's neighbourhood includes the point itself, as in scikit-learn
    count = 1 + np.bincount(pairs.ravel(), minlength=n)
    core = count >= min_samples
    one = pairs[core[pairs[:, 0]] ^ core[pairs[:, 1]]]
    first_core = core[one[:, 0]]
    links = (np.where(first_core, one[:, 0], one[:, 1]), np.where(first_core, one[:, 1], one[:, 0]))
    idx = np.flatnonzero(core)
    if idx.size == 0:
        return core, 0, np.zeros(0, dtype=np.int64), links
    pos = np.full(n, -1)
    pos[idx] = np.arange(idx.size)
    cp = pairs[core[pairs[:, 0]] & core[pairs[:, 1]]]
    graph = coo_matrix((np.ones(len(cp)), (pos[cp[:, 0]], pos[cp[:, 1]])), shape=(idx.size, idx.size))
    n_clusters, component = connected_components(graph, directed=False)
    return core, int(n_clusters), component.astype(np.int64), links


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
    core, n_clusters, _, (_, border_end) = _partition(xy, eps, min_samples)
    if n_clusters == 0:
        return 0, 0.0
    border = np.zeros(n, bool)
    border[border_end] = True
    return n_clusters, float((core | border).sum() / n)
