"""Input checks shared by the morphometry entry points (one place, one message style)."""

from __future__ import annotations

import numpy as np

from ..errors import InputError

__all__ = ["as_dem", "as_centres", "as_spacing"]


def as_dem(z):
    """Return ``z`` as a 2-D float64 array or raise :class:`~morpho.errors.InputError`."""
    arr = np.asarray(z, dtype=np.float64)
    if arr.ndim != 2:
        raise InputError(f"z must be a 2-D elevation array; got shape {arr.shape}.",
                         fix="pass one band of the DEM as a 2-D array.")
    return arr


def as_centres(rows, cols, radius_px):
    """Validate crater centres and radii (pixels) and return three 1-D float arrays."""
    r = np.atleast_1d(np.asarray(rows, dtype=np.float64))
    c = np.atleast_1d(np.asarray(cols, dtype=np.float64))
    rad = np.atleast_1d(np.asarray(radius_px, dtype=np.float64))
    if not (r.shape == c.shape == rad.shape) or r.ndim != 1:
        raise InputError(
            f"rows, cols and radius_px must be 1-D and of one length; got shapes {r.shape}, "
            f"{c.shape}, {rad.shape}.", fix="pass one value per crater.")
    bad = ~np.isfinite(r) | ~np.isfinite(c) | ~np.isfinite(rad) | (rad <= 0)
    if np.any(bad):
        raise InputError(
            f"{int(bad.sum())} crater(s) have a non-finite centre or a radius <= 0 "
            f"(first at index {int(np.argmax(bad))}).", fix="drop or repair those rows.")
    return r, c, rad


def as_spacing(spacing_m, n):
    """Ground pixel size in metres: a scalar or one value per crater -> shape (n,)."""
    s = np.asarray(spacing_m, dtype=np.float64)
    if s.ndim == 0:
        s = np.full(n, float(s))
    if s.shape != (n,) or np.any(~np.isfinite(s)) or np.any(s <= 0):
        raise InputError(
            f"spacing_m must be a finite positive scalar or one value per crater ({n}); got "
            f"{np.asarray(spacing_m)!r}.", fix="pass the ground pixel size in metres (spacing / k).")
    return s
