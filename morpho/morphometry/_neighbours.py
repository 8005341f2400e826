"""Neighbouring craters: which profile samples they cover, and how crowded a crater is.

A crater's surroundings (the 1.3-2.5 R annulus that defines its plain, its outer flank) are
often cut by an older neighbour's cavity. The robust annulus fit cannot reject a sector that
large, so the plain, rim height and flank come out biased. The neighbours are known (the
other craters of the same measurement), so their cavities and rims are masked out of each
crater's profiles beyond its own rim, and the overlap geometry is reported as context
columns for the scoring model, which must learn how crowding changes the measured shape.
Only crater positions and radii are used here; no elevation.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy.spatial import cKDTree

from ._detrend import ANNULUS

__all__ = ["NeighbourPairs", "neighbour_pairs", "neighbour_mask", "neighbour_context", "NEIGHBOUR_DISK",
           "OWN_ZONE", "MIN_ANNULUS_KEPT"]

#: A neighbour's cavity, rim crest and near flank, in the neighbour's radii.
NEIGHBOUR_DISK = 1.3
#: Profile samples inside this many of the crater's own radii are never masked (its own rim).
OWN_ZONE = 1.2
#: A crater keeps its whole annulus when masking would leave less than this share of it
#: (e.g. a small crater on a larger one's floor: the "plain" there is that floor).
MIN_ANNULUS_KEPT = 0.4


@dataclass(frozen=True)
class NeighbourPairs:
    """Ordered pairs ``(i, j)`` of craters close enough for ``j`` to reach ``i``'s profiles.

    Attributes
    ----------
    i, j : ndarray of int, shape (m,)
        Crater and neighbour indices, sorted by ``i`` then ``j``.
    distance : ndarray, shape (m,)
        Centre distance in pixels.
    """

    i: np.ndarray
    j: np.ndarray
    distance: np.ndarray

    @classmethod
    def none(cls) -> NeighbourPairs:
        """No pairs (a crater alone, or neighbours turned off)."""
        return cls(np.zeros(0, int), np.zeros(0, int), np.zeros(0))


def neighbour_pairs(rows, cols, radius_px, reach: float) -> NeighbourPairs:
    """All pairs whose neighbour disk (``NEIGHBOUR_DISK`` radii) reaches ``reach`` radii of the crater.

    Parameters
    ----------
    rows, cols, radius_px : ndarray, shape (n,)
        Crater centres (pixels) and radii (pixels).
    reach : float
        Outer radius of the crater's profiles, in its radii (2.5 for the morphometry).

    Returns
    -------
    NeighbourPairs
        ``distance < reach * R_i + NEIGHBOUR_DISK * R_j``, ``i != j``.
    """
    rows, cols, rad = (np.asarray(a, dtype=np.float64) for a in (rows, cols, radius_px))
    if rows.size < 2:
        return NeighbourPairs.none()
    tree = cKDTree(np.column_stack([rows, cols]))
    # One global search radius, then the exact per-pair condition.
    limit = float(reach * rad.max() + NEIGHBOUR_DISK * rad.max())
    pairs = tree.query_pairs(limit, output_type="ndarray")
    if pairs.size == 0:
        return NeighbourPairs.none()
    i = np.concatenate([pairs[:, 0], pairs[:, 1]])
    j = np.concatenate([pairs[:, 1], pairs[:, 0]])
    d = np.hypot(rows[i] - rows[j], cols[i] - cols[j])
    keep = d < reach * rad[i] + NEIGHBOUR_DISK * rad[j]
    i, j, d = i[keep], j[keep], d[keep]
    order = np.lexsort((j, i))
    return NeighbourPairs(i[order], j[order], d[order])


def _pair_cover(rows, cols, rad, pairs, sel, azimuths, r_norm, block=256):
    """Per selected pair, which samples (n_az, n_r) of crater i fall in neighbour j's disk."""
    i, j = pairs.i[sel], pairs.j[sel]
    out = np.empty((i.size, azimuths.size, r_norm.size), dtype=bool)
    cos, sin = np.cos(azimuths)[:, None], np.sin(azimuths)[:, None]
    for s in range(0, i.size, block):
        ii, jj = i[s:s + block], j[s:s + block]
        rr = rad[ii, None, None] * r_norm[None, None, :]
        # Same sampling geometry as morpho.morphometry.profiles.sample_polar (row grows south).
        dr = (rows[ii] - rows[jj])[:, None, None] - rr * sin[None]
        dc = (cols[ii] - cols[jj])[:, None, None] + rr * cos[None]
        out[s:s + block] = dr * dr + dc * dc < (NEIGHBOUR_DISK * rad[jj])[:, None, None] ** 2
    return out


def _any_by_crater(flags, owner, n):
    """OR of ``flags`` (m, ...) grouped by ``owner`` (sorted) into shape (n, ...)."""
    out = np.zeros((n, *flags.shape[1:]), dtype=bool)
    if owner.size:
        starts = np.flatnonzero(np.r_[True, owner[1:] != owner[:-1]])
        out[owner[starts]] = np.logical_or.reduceat(flags, starts, axis=0)
    return out


def neighbour_mask(rows, cols, radius_px, pairs: NeighbourPairs, index, azimuths, r_norm):
    """Profile samples of craters ``index`` that lie in a neighbour's disk beyond their own rim.

    Parameters
    ----------
    rows, cols, radius_px : ndarray, shape (n,)
        Every crater of the measurement (the neighbours).
    pairs : NeighbourPairs
        From :func:`neighbour_pairs` on the same craters.
    index : ndarray of int, shape (k,)
        The craters of this batch.
    azimuths, r_norm : ndarray
        The batch's profile grid (radians; radii in crater radii).

    Returns
    -------
    mask : ndarray of bool, shape (k, n_az, n_r)
        True where the sample is beyond ``OWN_ZONE`` radii and inside ``NEIGHBOUR_DISK``
        radii of a neighbour whose rim does not enclose the crater's centre; all False for
        a crater that would keep less than ``MIN_ANNULUS_KEPT`` of its annulus.
    cover : ndarray, shape (k,)
        Share of the 1.3-2.5 R annulus samples inside any neighbour's disk.
    """
    index = np.asarray(index, dtype=int)
    local = np.full(rows.size, -1)
    local[index] = np.arange(index.size)
    sel = local[pairs.i] >= 0
    hit = _pair_cover(rows, cols, radius_px, pairs, sel, azimuths, r_norm)
    owner = local[pairs.i[sel]]
    ann = (r_norm >= ANNULUS[0]) & (r_norm <= ANNULUS[1])
    every = _any_by_crater(hit[:, :, ann], owner, index.size)
    cover = every.mean(axis=(1, 2)) if ann.any() else np.zeros(index.size)
    # A crater standing inside a neighbour's rim has that neighbour's floor and wall as its
    # surroundings: only neighbours whose rim does not enclose the centre are masked.
    outside = pairs.distance[sel] >= radius_px[pairs.j[sel]]
    mask = _any_by_crater(hit[outside], owner[outside], index.size)
    mask &= (r_norm > OWN_ZONE)[None, None, :]
    if ann.any():
        mask[mask[:, :, ann].mean(axis=(1, 2)) > 1.0 - MIN_ANNULUS_KEPT] = False
    return mask, cover


def neighbour_context(radius_px, pairs: NeighbourPairs, n: int) -> dict[str, np.ndarray]:
    """Overlap geometry of each crater with its neighbours (positions and radii only).

    Returns
    -------
    dict
        ``neighbour_overlap``: largest ``(R_i + R_j - d_ij) / R_i`` over neighbours, 0 if no
        rim overlaps; ``neighbour_size_log_ratio``: ``ln(R_j / R_i)`` of that neighbour (0 if
        none); ``inside_neighbour``: the centre lies inside a neighbour's rim (``d_ij < R_j``).
    """
    rad = np.asarray(radius_px, dtype=np.float64)
    overlap = np.zeros(n)
    size = np.zeros(n)
    inside = np.zeros(n, dtype=bool)
    if pairs.i.size:
        i, j, d = pairs.i, pairs.j, pairs.distance
        ov = (rad[i] + rad[j] - d) / rad[i]
        # Largest overlap per crater: sort by (i, overlap) and take each group's last.
        order = np.lexsort((ov, i))
        last = order[np.r_[i[order][1:] != i[order][:-1], True]]
        pos = ov[last] > 0
        overlap[i[last]] = np.where(pos, ov[last], 0.0)
        size[i[last]] = np.where(pos, np.log(rad[j[last]] / rad[i[last]]), 0.0)
        np.logical_or.at(inside, i, d < rad[j])
    return {"neighbour_overlap": overlap, "neighbour_size_log_ratio": size, "inside_neighbour": inside}
