"""Typicality of a feature vector under one class: a conformal p-value of its k-NN distance.

A crater's feature vector is *typical* of a class when its distance to the k-th
nearest training example of that class is no larger than the same leave-one-out
distance of most of the class's own training examples. The share of training
examples at least as far out is a conformal p-value: for a new example drawn from
the class it is uniform, so a threshold of 0.01 flags about 1 % of genuine members
as atypical, whatever the shape of the class (multimodal impact populations are
fine; a Gaussian ellipsoid would not be).

References
----------
Vovk V., Gammerman A., Shafer G. (2005) *Algorithmic Learning in a Random World*,
Springer (conformal p-values). Laxhammar R., Falkman G. (2015) "Inductive conformal
anomaly detection for sequential detection of anomalous sub-trajectories",
Ann. Math. Artif. Intell. 74:67-94 (k-NN nonconformity score).
"""

from __future__ import annotations

import numpy as np
from scipy.spatial import KDTree

__all__ = ["robust_scale", "standardise", "kth_distance", "fit_reference", "typicality"]


def robust_scale(X: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Per-feature median and robust spread (IQR / 1.349) of ``X``, NaN-aware.

    Parameters
    ----------
    X : ndarray, shape (n, p)

    Returns
    -------
    center, scale : ndarray, shape (p,)
        ``scale`` is never 0 or NaN: a constant or empty column gets 1 so it does not
        dominate (or poison) distances.
    """
    all_nan = np.all(np.isnan(X), axis=0)
    Xs = np.where(all_nan[None, :], 0.0, X)
    center = np.nanmedian(Xs, axis=0)
    q75, q25 = np.nanpercentile(Xs, [75.0, 25.0], axis=0)
    # 1.349 = IQR of the standard normal: makes the spread comparable to a standard deviation.
    scale = (q75 - q25) / 1.349
    std = np.nanstd(Xs, axis=0)
    scale = np.where(scale > 0, scale, std)
    scale = np.where((scale > 0) & np.isfinite(scale), scale, 1.0)
    return center, scale


#: Distance that a missing value adds along its own axis (log1p(6): a 6-robust-SD departure):
#: a feature that could not be measured where the class's craters have one is evidence of
#: an unusual shape (a dome has no rim crest), not a free pass at the median.
NAN_DISTANCE = 2.0


def standardise(X: np.ndarray, center: np.ndarray, scale: np.ndarray, mask: np.ndarray) -> np.ndarray:
    """Log-compressed robust z-scores of the columns in ``mask`` plus a missing-value indicator per column.

    ``sign(z) log(1 + |z|)``; NaN becomes 0 (the pooled median) in the z-score and
    :data:`NAN_DISTANCE` in its indicator column, so shape (n, 2 * mask.sum()).
    """
    sub = X[:, mask]
    Z = (sub - center[mask]) / scale[mask]
    Z = np.nan_to_num(Z, nan=0.0, posinf=1e6, neginf=-1e6)
    # Ratios of small numbers (wall steepness per d/D, rim-to-depth) have tails of 100s of
    # robust SDs; unsquashed, a few such features decide every distance. log1p keeps the
    # order (monotone) but lets all features count.
    Z = np.sign(Z) * np.log1p(np.abs(Z))
    return np.hstack([Z, np.isnan(sub) * NAN_DISTANCE])


def kth_distance(Z: np.ndarray, points: np.ndarray, k: int, p: float = 2.0, chunk: int = 2048) -> np.ndarray:
    """Distance from each row of ``Z`` to its k-th nearest row of ``points``, shape (n,).

    Euclidean distances by the ``|a|^2 + |b|^2 - 2 a.b`` expansion in row chunks (one
    matrix product per chunk: in the ~50 dimensions of the typicality space a k-d tree
    degenerates to brute force anyway); other Minkowski exponents through a k-d tree.
    """
    if p != 2.0:
        dist, _ = KDTree(points).query(Z, k=k, p=p)
        return dist if dist.ndim == 1 else dist[:, -1]
    sq_pts = np.einsum("ij,ij->i", points, points)
    out = np.empty(Z.shape[0])
    for start in range(0, Z.shape[0], chunk):
        block = Z[start:start + chunk]
        d2 = np.einsum("ij,ij->i", block, block)[:, None] + sq_pts[None, :] - 2.0 * block @ points.T
        out[start:start + chunk] = np.partition(d2, k - 1, axis=1)[:, k - 1]
    # Rounding can make an exact zero slightly negative.
    return np.sqrt(np.maximum(out, 0.0))


def fit_reference(Z: np.ndarray, n_neighbors: int, p: float = 2.0) -> tuple[np.ndarray, np.ndarray, int]:
    """Reference points of one class and their sorted leave-one-out k-NN distances.

    Parameters
    ----------
    Z : ndarray, shape (m, q)
        Standardised training examples of the class.
    n_neighbors : int
        k of the k-NN nonconformity score (capped at m - 1).
    p : float
        Minkowski exponent of the distance (2 Euclidean, ``inf`` Chebyshev).

    Returns
    -------
    points : ndarray, shape (m, q)
    loo_scores : ndarray, shape (m,)
        Sorted ascending.
    k : int
        The k actually used.
    """
    m = Z.shape[0]
    k = int(max(1, min(n_neighbors, m - 1)))
    if m < 2:
        return Z.copy(), np.zeros(m), k
    # k + 1 neighbours because each point is its own nearest neighbour.
    return Z.copy(), np.sort(kth_distance(Z, Z, k + 1, p)), k


def typicality(Z: np.ndarray, points: np.ndarray, loo_scores: np.ndarray, k: int, p: float = 2.0) -> np.ndarray:
    """Conformal p-value in (0, 1] of each row of ``Z`` under the class given by ``points``.

    ``(1 + #{training scores >= score}) / (n + 1)`` with the score the distance to the
    k-th nearest reference point.
    """
    n = points.shape[0]
    if Z.shape[0] == 0:
        return np.zeros(0)
    if n == 0:
        return np.zeros(Z.shape[0])
    half = Z.shape[1] // 2
    if p == 2.0 and Z.shape[1] == 2 * half and not np.any(points[:, half:]):
        # No reference crater has a missing value (the usual case): the indicator part adds
        # the same |indicator|^2 to every distance of a query, so search the z-part only.
        extra = np.einsum("ij,ij->i", Z[:, half:], Z[:, half:])
        score = np.sqrt(kth_distance(Z[:, :half], points[:, :half], min(k, n), p) ** 2 + extra)
    else:
        score = kth_distance(Z, points, min(k, n), p)
    n_ge = n - np.searchsorted(loo_scores, score, side="left")
    return (1.0 + n_ge) / (n + 1.0)
