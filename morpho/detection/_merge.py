"""Non-maximum suppression of duplicate crater detections by centre distance and size ratio."""

from __future__ import annotations

import itertools

import numpy as np
from scipy.spatial import cKDTree

__all__ = ["suppress_duplicates"]


def suppress_duplicates(
    rows: np.ndarray,
    cols: np.ndarray,
    radius_px: np.ndarray,
    rank: np.ndarray,
    *,
    max_offset: float = 0.5,
    max_ratio: float = 1.5,
    greedy: bool = True,
) -> np.ndarray:
    """Indices of detections kept after greedy suppression, best ``rank`` first.

    Two detections are the same crater when their centres are closer than ``max_offset`` times
    the larger radius and their radii differ by less than a factor ``max_ratio``; a small crater
    inside a large one (ratio beyond ``max_ratio``) is kept. This is the greedy non-maximum
    suppression of object detection (common practice).

    Parameters
    ----------
    rows, cols, radius_px, rank : ndarray, shape (n,)
        Centres and radii (pixels) and the quantity to prefer (higher is better).
    max_offset, max_ratio : float
        Duplicate criteria.
    greedy : bool
        True: classic sequential suppression (a suppressed detection suppresses nothing).
        False: one vectorised pass where every detection with a better-ranked duplicate goes,
        slightly more aggressive and much faster; used to thin candidates before profiling.

    Returns
    -------
    ndarray of int
        Kept indices, in decreasing ``rank``.
    """
    n = rows.size
    if n == 0:
        return np.empty(0, dtype=np.int64)
    order = np.argsort(-rank, kind="stable")
    tree = cKDTree(np.column_stack([rows, cols]))
    if not greedy:
        return _parallel(tree, rows, cols, radius_px, rank, order, max_offset, max_ratio)
    alive = np.ones(n, dtype=bool)
    kept = []
    # A loop over detections (not pixels): each pass removes the neighbours of one survivor.
    for i in order:
        if not alive[i]:
            continue
        kept.append(i)
        near = np.asarray(tree.query_ball_point((rows[i], cols[i]),
                                                max_offset * max_ratio * radius_px[i]), dtype=int)
        if near.size == 0:
            continue
        big = np.maximum(radius_px[near], radius_px[i])
        small = np.minimum(radius_px[near], radius_px[i])
        dist = np.hypot(rows[near] - rows[i], cols[near] - cols[i])
        dup = (dist < max_offset * big) & (big < max_ratio * small)
        alive[near[dup]] = False
    return np.asarray(kept, dtype=np.int64)


def _parallel(tree, rows, cols, radius_px, rank, order, max_offset, max_ratio):
    """Drop every detection that has a better-ranked duplicate (vectorised over pairs)."""
    near = tree.query_ball_point(np.column_stack([rows, cols]), max_offset * max_ratio * radius_px)
    counts = np.fromiter((len(x) for x in near), dtype=np.int64, count=rows.size)
    i = np.repeat(np.arange(rows.size), counts)
    j = np.fromiter(itertools.chain.from_iterable(near), dtype=np.int64, count=int(counts.sum()))
    big = np.maximum(radius_px[i], radius_px[j])
    small = np.minimum(radius_px[i], radius_px[j])
    dist = np.hypot(rows[i] - rows[j], cols[i] - cols[j])
    position = np.empty(rows.size, dtype=np.int64)
    position[order] = np.arange(rows.size)
    # j loses to i when they are duplicates and i comes first in the ranking.
    loses = (dist < max_offset * big) & (big < max_ratio * small) & (position[i] < position[j])
    dead = np.zeros(rows.size, dtype=bool)
    dead[j[loses]] = True
    return order[~dead[order]]
