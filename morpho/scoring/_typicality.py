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

__all__ = ["robust_scale", "standardise", "fit_reference", "typicality"]


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
    dist, _ = KDTree(Z).query(Z, k=k + 1, p=p)
    return Z.copy(), np.sort(dist[:, -1]), k


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
    kk = min(k, n)
    dist, _ = KDTree(points).query(Z, k=kk, p=p)
    score = dist if dist.ndim == 1 else dist[:, -1]
    n_ge = n - np.searchsorted(loo_scores, score, side="left")
    return (1.0 + n_ge) / (n + 1.0)
