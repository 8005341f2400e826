"""Near-collinear crater triplets and straight crater chains.

A triplet (i, j, k) is aligned when j lies between i and k, each of i and k is linked
to j (near, and of similar size), and j's centre is within half a strip width of the
line through i and k. Link length and strip width scale with crater size, so a chain
of touching small craters and a chain of large craters are judged alike. Triplets that
share two craters and keep their direction join into chains, trimmed to the craters
inside one strip. The expected numbers under chance come from Monte Carlo CSR in the
survey mask with the observed diameters: the simulation approach of Broadbent (1980)
for alignments of random points, restricted here to neighbouring craters as in crater
chains (catenae)."""

from __future__ import annotations

from itertools import chain

import numpy as np
import shapely
from scipy.sparse import coo_matrix
from scipy.sparse.csgraph import connected_components
from scipy.spatial import cKDTree

__all__ = ["aligned_triplets", "extract_chains", "longest_chain", "LINK_FACTOR", "SIZE_RATIO", "WIDTH_FACTOR",
           "MAX_BEND", "MIN_CHAIN"]

ALIGNMENT_REFERENCE = ("Broadbent 1980, JRSS A 143:109 (chance alignments by simulation); "
                       "Kendall & Kendall 1980, Adv. Appl. Prob. 12:380")

#: Craters i, j are linked when their centres are closer than LINK_FACTOR times their
#: mean diameter (crater chains are spaced about 1-3 diameters; common practice, from memory) or
#: than the CSR nearest-neighbour distance, whichever is larger.
LINK_FACTOR = 5.0
#: Linked craters differ in diameter by at most this factor: chains are strings of
#: similar craters (common practice), and a large crater next to small ones would
#: otherwise dominate the chance count through its long links.
SIZE_RATIO = 2.0
#: Full strip width in units of the triplet's mean diameter: the middle crater's centre
#: must lie within a quarter diameter of the line through the outer two, so the line
#: crosses the middle crater well inside its rim.
WIDTH_FACTOR = 0.5
#: Largest change of direction (degrees) between two triplets that continue one chain.
MAX_BEND = 10.0
#: Largest group searched exhaustively for its best strip (pairs grow as n^2); larger
#: groups, which only arise in saturated fields, are trimmed point by point instead.
_MAX_CONSENSUS = 80
#: Fewest craters in a reported chain.
MIN_CHAIN = 5


def _neighbour_edges(xy, diameter_m, min_link_m):
    """Directed (centre, other) links within the size-scaled link length."""
    reach = np.maximum(LINK_FACTOR * diameter_m, min_link_m)
    hits = cKDTree(xy).query_ball_point(xy, reach)
    counts = np.fromiter(map(len, hits), dtype=np.int64, count=len(xy))
    centre = np.repeat(np.arange(len(xy)), counts)
    other = np.fromiter(chain.from_iterable(hits), dtype=np.int64, count=int(counts.sum()))
    dist = np.hypot(*(xy[other] - xy[centre]).T)
    d_c, d_o = diameter_m[centre], diameter_m[other]
    keep = ((other != centre) & (dist <= np.maximum(LINK_FACTOR * 0.5 * (d_c + d_o), min_link_m))
            & (np.maximum(d_c, d_o) <= SIZE_RATIO * np.minimum(d_c, d_o)))
    # a link may be found from one end only (the larger crater reaches further): add
    # both directions, then drop the copies found from both ends
    c, o = centre[keep], other[keep]
    n = np.int64(len(xy))
    key = np.unique(np.r_[c * n + o, o * n + c])
    return np.column_stack([key // n, key % n])


def aligned_triplets(x_m, y_m, diameter_m, *, min_link_m: float = 0.0) -> np.ndarray:
    """All aligned crater triplets, each once, as rows (end, middle, end).

    Parameters
    ----------
    x_m, y_m, diameter_m : array_like, shape (n,)
        Centres and diameters (m).
    min_link_m : float
        Link length floor (m), e.g. the CSR mean nearest-neighbour distance, so that
        small craters spaced at the background scale can still form a chain.

    Returns
    -------
    numpy.ndarray of int64, shape (m, 3)
        Indices (i, j, k) with j the middle crater and i < k.

    References
    ----------
    Broadbent S.R. (1980) Simulating the ley hunter, J. R. Statist. Soc. A 143(2):109-140.
    """
    xy = np.column_stack([np.asarray(x_m, float), np.asarray(y_m, float)])
    d = np.asarray(diameter_m, float)
    if len(xy) < 3:
        return np.empty((0, 3), dtype=np.int64)
    edges = _neighbour_edges(xy, d, min_link_m)
    if len(edges) < 2:
        return np.empty((0, 3), dtype=np.int64)
    # self-join the links on their centre: every pair of neighbours of j
    order = np.argsort(edges[:, 0], kind="stable")
    edges = edges[order]
    starts = np.searchsorted(edges[:, 0], np.arange(len(xy)))
    deg = np.bincount(edges[:, 0], minlength=len(xy))
    n_pairs = deg * (deg - 1) // 2
    j = np.repeat(np.arange(len(xy)), n_pairs)
    if j.size == 0:
        return np.empty((0, 3), dtype=np.int64)
    # enumerate (a, b), a < b, within each centre's block of neighbours
    local = np.arange(j.size) - np.repeat(np.cumsum(n_pairs) - n_pairs, n_pairs)
    dj = deg[j]
    # invert the triangular numbering: local index -> (a, b) with 0 <= a < b < deg
    a = (2 * dj - 1 - np.sqrt((2 * dj - 1) ** 2 - 8 * local)) // 2
    a = a.astype(np.int64)
    b = local - (a * (2 * dj - a - 1)) // 2 + a + 1
    i = edges[starts[j] + a, 1]
    k = edges[starts[j] + b, 1]
    pi, pj, pk = xy[i], xy[j], xy[k]
    ik = pk - pi
    length = np.hypot(*ik.T)
    t = np.einsum("ij,ij->i", pj - pi, ik) / length**2
    perp = np.abs(ik[:, 0] * (pj - pi)[:, 1] - ik[:, 1] * (pj - pi)[:, 0]) / length
    half_width = 0.5 * WIDTH_FACTOR * (d[i] + d[j] + d[k]) / 3.0
    ok = (t > 0) & (t < 1) & (perp <= half_width)
    tri = np.column_stack([np.minimum(i, k), j, np.maximum(i, k)])[ok]
    return tri.astype(np.int64)


def _triplet_components(tri, x, y):
    """Component label per triplet.

    Two triplets continue each other when they share a pair of craters and their end-to-end
    directions differ by at most MAX_BEND degrees, so a chain stays straight and chance
    triplets do not join into long winding groups.
    """
    m = len(tri)
    pair_keys = np.sort(np.concatenate([tri[:, [0, 1]], tri[:, [1, 2]], tri[:, [0, 2]]]), axis=1)
    owner = np.tile(np.arange(m), 3)
    span = np.int64(tri.max() + 1)
    _, pair_idx = np.unique(pair_keys[:, 0] * span + pair_keys[:, 1], return_inverse=True)
    axis = np.arctan2(y[tri[:, 2]] - y[tri[:, 0]], x[tri[:, 2]] - x[tri[:, 0]]) % np.pi
    # every two triplets holding the same pair: a self-join on the pair
    order = np.argsort(pair_idx, kind="stable")
    key, own = pair_idx[order], owner[order]
    ends = np.searchsorted(key, key, side="right")
    count = ends - np.arange(key.size) - 1  # later members of the same group
    a = np.repeat(np.arange(key.size), count)
    b = a + 1 + (np.arange(a.size) - np.repeat(np.cumsum(count) - count, count))
    ta, tb = own[a], own[b]
    bend = np.abs(axis[ta] - axis[tb])
    bend = np.minimum(bend, np.pi - bend)
    ok = bend <= np.deg2rad(MAX_BEND)
    graph = coo_matrix((np.ones(int(ok.sum())), (ta[ok], tb[ok])), shape=(m, m))
    return connected_components(graph, directed=False)[1]


def _groups(tri, x, y):
    """Crater indices of each triplet component, largest first."""
    comp = _triplet_components(tri, x, y)
    span = np.int64(tri.max() + 1)
    key = np.unique(np.repeat(comp, 3).astype(np.int64) * span + tri.ravel())
    groups = np.split(key % span, np.flatnonzero(np.diff(key // span)) + 1)
    return sorted(groups, key=len, reverse=True)


def _straighten(idx, x, y, d):
    """Members of a group that lie within one strip, with the strip's axis and centre.

    The strip (half-width WIDTH_FACTOR/2 of the members' mean diameter) is placed along
    the line through the two members that leaves the most members inside it (an exhaustive
    consensus search, robust to a stray crater at a chain's end); the axis is then the
    total-least-squares line through those members. This is the Broadbent (1980)
    definition of an alignment: all points within one strip.
    """
    idx = np.asarray(idx)
    pts = np.column_stack([x[idx], y[idx]])
    half_width = 0.5 * WIDTH_FACTOR * d[idx].mean()
    if 3 < len(idx) <= _MAX_CONSENSUS:
        a, b = np.triu_indices(len(idx), 1)
        u = pts[b] - pts[a]
        normal = np.column_stack([-u[:, 1], u[:, 0]]) / np.hypot(u[:, 0], u[:, 1])[:, None]
        dist = np.abs(np.einsum("pk,pmk->pm", normal, pts[None, :, :] - pts[a][:, None, :]))
        inside = dist <= half_width
        best = inside[int(np.argmax(inside.sum(axis=1)))]
        idx, pts = idx[best], pts[best]
    while True:
        centre = pts.mean(axis=0)
        _, _, vt = np.linalg.svd(pts - centre, full_matrices=False)
        resid = np.abs((pts - centre) @ vt[1])
        if len(idx) <= 3 or resid.max() <= half_width:
            return idx, vt[0], centre
        keep = np.arange(len(idx)) != int(np.argmax(resid))
        idx, pts = idx[keep], pts[keep]


def longest_chain(x_m, y_m, diameter_m, triplets) -> int:
    """Craters in the longest straight chain: the largest group of aligned triplets joined by
    shared pairs, trimmed to the members inside one strip (0 if there is no triplet)."""
    tri = np.asarray(triplets, dtype=np.int64).reshape(-1, 3)
    if len(tri) == 0:
        return 0
    x, y, d = (np.asarray(a, float) for a in (x_m, y_m, diameter_m))
    best = 0
    for group in _groups(tri, x, y):
        if len(group) <= best:
            break
        best = max(best, len(_straighten(group, x, y, d)[0]))
    return best


def extract_chains(x_m, y_m, diameter_m, triplets, *, min_craters: int = MIN_CHAIN):
    """Join aligned triplets that share two craters into straight chains.

    Parameters
    ----------
    x_m, y_m, diameter_m : array_like, shape (n,)
        Centres and diameters (m).
    triplets : numpy.ndarray, shape (m, 3)
        From :func:`aligned_triplets`.
    min_craters : int
        Fewest craters in a chain.

    Returns
    -------
    chain_id : numpy.ndarray of int64, shape (n,)
        Chain of each crater (the longest one when it sits in several), -1 for none.
    chains : list of dict
        Per chain: ``chain_id``, ``n_craters``, ``length_m``, ``azimuth_deg`` (axis
        clockwise from +y, in [0, 180)) and ``geometry`` (shapely LineString, metres):
        the total-least-squares line through the members, from end to end.

    References
    ----------
    Broadbent S.R. (1980) J. R. Statist. Soc. A 143(2):109-140 (points within one strip).
    """
    x, y, d = (np.asarray(a, float) for a in (x_m, y_m, diameter_m))
    chain_id = np.full(x.size, -1, dtype=np.int64)
    tri = np.asarray(triplets, dtype=np.int64).reshape(-1, 3)
    if len(tri) == 0:
        return chain_id, []
    straight = [_straighten(g, x, y, d) for g in _groups(tri, x, y) if len(g) >= min_craters]
    chains = []
    for idx, u, centre in sorted(straight, key=lambda s: len(s[0]), reverse=True):
        free = idx[chain_id[idx] < 0]
        # a group that mostly re-uses craters of a longer chain is a side branch of it
        if len(idx) < min_craters or len(free) < 2:
            continue
        cid = len(chains)
        chain_id[free] = cid
        proj = (np.column_stack([x[idx], y[idx]]) - centre) @ u
        ends = centre + np.outer([proj.min(), proj.max()], u)
        chains.append({
            "chain_id": cid,
            "n_craters": len(idx),
            "length_m": float(proj.max() - proj.min()),
            "azimuth_deg": float(np.rad2deg(np.arctan2(u[0], u[1])) % 180.0),
            "geometry": shapely.LineString(ends),
        })
    return chain_id, chains
