"""Ripley's K, Besag's L and the pair-correlation function, with border edge correction."""

from __future__ import annotations

import numpy as np
import shapely
from scipy.spatial import cKDTree

__all__ = ["default_radii", "ripley_k", "besag_l", "pair_correlation", "boundary_distance"]

RIPLEY_REFERENCE = ("Ripley 1976, J. Appl. Prob. 13:255; Ripley 1977, JRSS B 39:172; "
                    "Besag 1977, JRSS B 39:193; border correction: Ripley 1988, Statistical "
                    "Inference for Spatial Processes, CUP")


def boundary_distance(x_m, y_m, valid_area) -> np.ndarray:
    """Distance from each point to the boundary of ``valid_area`` (m), shape (n,)."""
    return shapely.distance(valid_area.boundary, shapely.points(np.asarray(x_m), np.asarray(y_m)))


def default_radii(valid_area, n_radii: int = 40, n_points: int | None = None) -> np.ndarray:
    """Radii at which K is evaluated: up to a quarter of sqrt(area), capped by the inradius.

    Beyond a quarter of the region's size the border-corrected estimator rests on few
    points (common practice; Ripley 1988). With ``n_points`` given, the range also stops
    at 15 CSR nearest-neighbour distances (0.5 sqrt(A/n) each), which keeps the pair
    count of large surveys in bounds while covering the scales where crater clustering
    shows. Returns an increasing array r_k = (k + 1) r_max / n_radii, shape (n_radii,).
    """
    side = np.sqrt(valid_area.area)
    # the largest inscribed circle bounds how far the border correction can reach
    inradius = _inradius(valid_area)
    r_max = min(0.25 * side, 0.9 * inradius)
    if n_points:
        r_max = min(r_max, 15 * 0.5 * side / np.sqrt(n_points))
    return r_max / n_radii * np.arange(1, n_radii + 1)


def _inradius(valid_area) -> float:
    centre = shapely.maximum_inscribed_circle(valid_area, tolerance=np.sqrt(valid_area.area) / 200)
    return float(shapely.length(centre))


def ripley_k(x_m, y_m, valid_area, radii_m) -> np.ndarray:
    """Border-corrected estimate of Ripley's K function.

    K(r) = A / (n - 1) * sum_i 1{b_i >= r} #{j != i: d_ij <= r} / #{i: b_i >= r},
    where b_i is the distance of point i to the region boundary: only points at least
    r inside the region serve as centres, so no circle is cut by the edge.

    Parameters
    ----------
    x_m, y_m : array_like, shape (n,)
        Point coordinates inside ``valid_area`` (m).
    valid_area : shapely.Polygon or shapely.MultiPolygon
        Study region (m).
    radii_m : array_like, shape (k,)
        Increasing radii (m).

    Returns
    -------
    numpy.ndarray, shape (k,)
        K(r) in m^2; NaN where no point is r inside the region. pi r^2 under CSR.

    References
    ----------
    Ripley B.D. (1977) J. R. Statist. Soc. B 39:172-212; Ripley B.D. (1988) *Statistical
    Inference for Spatial Processes*, Cambridge Univ. Press (border method).
    """
    x = np.asarray(x_m, dtype=float)
    y = np.asarray(y_m, dtype=float)
    r = np.asarray(radii_m, dtype=float)
    n = x.size
    if n < 2:
        return np.full(r.shape, np.nan)
    b = boundary_distance(x, y, valid_area)
    pairs = cKDTree(np.column_stack([x, y])).query_pairs(r[-1], output_type="ndarray")
    i, j = pairs[:, 0], pairs[:, 1]
    d = np.hypot(x[i] - x[j], y[i] - y[j])
    # A pair counts once per end that serves as centre, at radii r_k with d <= r_k <= b_centre:
    # a +1/-1 difference array. Radius indices of the boundary distances are taken per point
    # and gathered per pair, and the pair's own index once for both ends.
    lo, hi_pt = _radius_index(r, d, b)
    diff = np.zeros(r.size + 1, dtype=np.int64)
    for hi in (hi_pt[i], hi_pt[j]):
        ok = lo < hi
        diff += np.bincount(lo[ok], minlength=r.size + 1) - np.bincount(hi[ok], minlength=r.size + 1)
    counts = np.cumsum(diff)[: r.size]
    centres = n - np.searchsorted(np.sort(b), r, side="left")
    with np.errstate(divide="ignore", invalid="ignore"):
        k = valid_area.area * counts / ((n - 1) * centres)
    return np.where(centres > 0, k, np.nan)


def _radius_index(r, d, b):
    """First radius index >= d and first index > b (searchsorted), fast on the default grid."""
    step = r[0]
    if np.allclose(r, step * np.arange(1, r.size + 1), rtol=1e-12, atol=0):
        # r_k = (k + 1) step: arithmetic instead of a binary search over millions of pairs
        lo = np.clip(np.ceil(d / step - 1 - 1e-12), 0, r.size).astype(np.int64)
        hi = np.clip(np.floor(b / step + 1e-12), 0, r.size).astype(np.int64)
        return lo, hi
    return np.searchsorted(r, d, side="left"), np.searchsorted(r, b, side="right")


def besag_l(k_m2) -> np.ndarray:
    """Besag's variance-stabilised L(r) = sqrt(K(r)/pi) (m); r under CSR.

    References
    ----------
    Besag J. (1977) discussion of Ripley (1977), J. R. Statist. Soc. B 39:193-195.
    """
    return np.sqrt(np.asarray(k_m2) / np.pi)


def pair_correlation(radii_m, k_m2) -> tuple[np.ndarray, np.ndarray]:
    """Pair-correlation function g(r) = K'(r) / (2 pi r) by finite differences of K.

    Parameters
    ----------
    radii_m : array_like, shape (k,)
    k_m2 : array_like, shape (..., k)
        K on those radii (last axis).

    Returns
    -------
    r_mid : numpy.ndarray, shape (k - 1,)
        Shell mid-radii (m).
    g : numpy.ndarray, shape (..., k - 1)
        Pair correlation (1 under CSR, > 1 at clustering scales).

    References
    ----------
    Stoyan D., Stoyan H. (1994) *Fractals, Random Shapes and Point Fields*, Wiley, ch. 14.
    """
    r = np.asarray(radii_m, dtype=float)
    k = np.asarray(k_m2, dtype=float)
    shell = np.pi * np.diff(r**2)
    return 0.5 * (r[1:] + r[:-1]), np.diff(k, axis=-1) / shell
