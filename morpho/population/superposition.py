"""Rim superposition: craters centred on the rim of a larger crater."""

from __future__ import annotations

from itertools import chain

import numpy as np
from scipy.spatial import cKDTree

__all__ = ["on_larger_rim", "RIM_TOLERANCE"]

SUPERPOSITION_REFERENCE = ("common practice (rim band of +-10 % of the host radius); "
                           "null by Monte Carlo CSR in the mask, Besag & Diggle 1977, Appl. Stat. 26:327")

#: Half-width of the rim band as a fraction of the larger crater's radius. Rim crests
#: of fresh craters are a few per cent of the radius wide; 10 % allows for measurement
#: error of both centres (common practice).
RIM_TOLERANCE = 0.1


def on_larger_rim(x_m, y_m, diameter_m, *, tolerance: float = RIM_TOLERANCE) -> np.ndarray:
    """Whether each crater's centre lies on the rim of a larger crater.

    Crater i is on the rim of crater k when D_k > D_i and
    abs(dist(i, k) - R_k) < tolerance * R_k.

    Parameters
    ----------
    x_m, y_m, diameter_m : array_like, shape (n,)
        Centres and rim-crest diameters (m).
    tolerance : float
        Half-width of the rim band in units of the larger crater's radius.

    Returns
    -------
    numpy.ndarray of bool, shape (n,)
    """
    x = np.asarray(x_m, float)
    y = np.asarray(y_m, float)
    d = np.asarray(diameter_m, float)
    out = np.zeros(x.size, dtype=bool)
    if x.size < 2:
        return out
    xy = np.column_stack([x, y])
    r_host = d / 2.0
    # from each host, everything out to the outer edge of its rim band
    hits = cKDTree(xy).query_ball_point(xy, r_host * (1 + tolerance))
    counts = np.fromiter(map(len, hits), dtype=np.int64, count=x.size)
    if counts.sum() == 0:
        return out
    host = np.repeat(np.arange(x.size), counts)
    guest = np.fromiter(chain.from_iterable(hits), dtype=np.int64, count=int(counts.sum()))
    dist = np.hypot(x[guest] - x[host], y[guest] - y[host])
    ok = (d[host] > d[guest]) & (np.abs(dist - r_host[host]) < tolerance * r_host[host])
    out[guest[ok]] = True
    return out
