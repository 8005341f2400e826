"""Complete spatial randomness (CSR) inside a survey mask, and validation of point inputs.

CSR, the homogeneous Poisson (here binomial, n fixed) process, is the null model of
every spatial test in :mod:`morpho.population`. Simulating it inside the real
valid-data polygon, not its bounding box, keeps edge effects and holes in the
null distribution exactly as they are in the data.
"""

from __future__ import annotations

import numpy as np
import shapely

from ..errors import InputError

__all__ = ["simulate_csr", "check_points", "check_area"]

# Rejection sampling draws this many candidates per wanted point and round; a mask
# filling < 1/_OVERSAMPLE of its bounding box just needs more rounds.
_OVERSAMPLE = 1.5
_MAX_ROUNDS = 200


def check_area(valid_area):
    """Validate the valid-data polygon and return it.

    Parameters
    ----------
    valid_area : shapely.Polygon or shapely.MultiPolygon
        Survey footprint in metres.

    Raises
    ------
    InputError
        If it is not a non-empty polygonal geometry with positive area.
    """
    if not isinstance(valid_area, shapely.Polygon | shapely.MultiPolygon):
        raise InputError(
            f"valid_area must be a shapely Polygon or MultiPolygon, got {type(valid_area).__name__}.",
            fix="pass the survey footprint polygon in the same metric coordinates as the craters",
        )
    if valid_area.is_empty or not valid_area.area > 0:
        raise InputError("valid_area is empty or has zero area.",
                         fix="pass the footprint of the valid DEM data")
    return valid_area


def check_points(x_m, y_m, *others, names=("x_m", "y_m")):
    """Return ``x_m, y_m, *others`` as equal-length finite float arrays.

    Raises
    ------
    InputError
        On unequal lengths or non-finite values.
    """
    arrays = [np.asarray(a, dtype=float).ravel() for a in (x_m, y_m, *others)]
    n = arrays[0].size
    for name, a in zip(list(names) + [f"array {k}" for k in range(2, len(arrays))], arrays, strict=False):
        if a.size != n:
            raise InputError(f"{name} has {a.size} values, expected {n} (one per crater).",
                             fix="pass one value per crater in every array")
        if not np.all(np.isfinite(a)):
            raise InputError(f"{name} holds {int(np.sum(~np.isfinite(a)))} non-finite values.",
                             fix="drop craters without a measured position or diameter first")
    return arrays


def simulate_csr(valid_area, n_points: int, n_simulations: int = 1, *, rng=None) -> np.ndarray:
    """Draw binomial point patterns uniformly inside a polygon.

    Parameters
    ----------
    valid_area : shapely.Polygon or shapely.MultiPolygon
        Region to fill (metres).
    n_points : int
        Points per pattern.
    n_simulations : int
        Number of independent patterns.
    rng : numpy.random.Generator or int, optional
        Source of randomness (seed or generator).

    Returns
    -------
    numpy.ndarray, shape (n_simulations, n_points, 2)
        x, y of each point.

    Notes
    -----
    Vectorised rejection sampling from the bounding box with
    :func:`shapely.contains_xy`; exact in distribution for any polygon with holes.

    References
    ----------
    Diggle P.J. (2003) *Statistical Analysis of Spatial Point Patterns*, 2nd ed., Arnold, ch. 1-2.
    """
    valid_area = check_area(valid_area)
    rng = np.random.default_rng(rng)
    total = int(n_points) * int(n_simulations)
    xmin, ymin, xmax, ymax = valid_area.bounds
    fill = valid_area.area / ((xmax - xmin) * (ymax - ymin))
    shapely.prepare(valid_area)
    out = np.empty((total, 2))
    got = 0
    for _ in range(_MAX_ROUNDS):
        if got >= total:
            break
        want = int((total - got) * _OVERSAMPLE / fill) + 16
        cx = rng.uniform(xmin, xmax, want)
        cy = rng.uniform(ymin, ymax, want)
        keep = shapely.contains_xy(valid_area, cx, cy)
        take = min(int(keep.sum()), total - got)
        out[got:got + take, 0] = cx[keep][:take]
        out[got:got + take, 1] = cy[keep][:take]
        got += take
    if got < total:  # pragma: no cover - only for pathological slivers
        raise InputError("valid_area is too thin to sample random points inside it.",
                         fix="check the footprint polygon")
    return out.reshape(int(n_simulations), int(n_points), 2)
