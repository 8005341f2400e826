"""Analytic crater shapes with a known rim-crest radius, for tests and benchmarks.

Each function returns the elevation change a crater of rim-crest radius ``radius_px`` adds to a
grid; the rim crest sits exactly at ``radius_px`` so detection and refinement can be checked
against a number written down by hand.
"""

from __future__ import annotations

import numpy as np
from scipy import ndimage

from morpho.shapes import crater_profile

__all__ = ["crater_relief", "stamp_craters"]


def crater_relief(
    rho: np.ndarray,
    *,
    shape: str = "paraboloid",
    depth: float = 0.2,
    rim_height: float = 0.04,
    floor_fraction: float = 0.5,
    ejecta_exponent: float = 3.0,
) -> np.ndarray:
    """Elevation of an axisymmetric crater as a function of normalised radius.

    Parameters
    ----------
    rho : ndarray
        Distance from the centre divided by the rim-crest radius (dimensionless, >= 0).
    shape : {"paraboloid", "cone", "flat"}
        Interior form: paraboloid bowl, cone, or flat floor (``floor_fraction`` of the radius)
        with a paraboloid wall.
    depth, rim_height : float
        Rim-crest-to-floor depth and rim height above the far surroundings, as fractions of the
        rim-crest **diameter** (fresh lunar simple craters: d/D ~ 0.2, h/D ~ 0.04; Pike 1977,
        Impact and Explosion Cratering, Pergamon, 489-509, from memory).
    floor_fraction : float
        Floor radius / rim radius for ``shape="flat"``.
    ejecta_exponent : float
        Outer flank decays as ``rho ** -ejecta_exponent`` (McGetchin et al. 1973, EPSL 20:226,
        from memory), shifted to reach zero at 3 radii.

    Returns
    -------
    ndarray
        Elevation in units of the rim-crest diameter, same shape as ``rho``; the maximum is at
        ``rho == 1``.
    """
    forms = {"paraboloid": (2.0, 0.0), "cone": (1.0, 0.0), "flat": (2.0, floor_fraction)}
    if shape not in forms:
        raise ValueError(f"shape must be 'paraboloid', 'cone' or 'flat'; got {shape!r}")
    exponent, floor = forms[shape]
    # The project's generic profile (morpho.shapes); the flank reaches zero at 3 radii, the
    # extent of the stamping window below.
    return crater_profile(rho, depth, rim_height, interior_exponent=exponent,
                          floor_fraction=floor, flank_exponent=ejecta_exponent, flank_outer=3.0)


def stamp_craters(
    z: np.ndarray,
    rows,
    cols,
    radius_px,
    *,
    shape: str = "paraboloid",
    depth: float = 0.2,
    rim_height: float = 0.04,
    diameter_scale_m: float = 1.0,
    degradation=0.0,
) -> np.ndarray:
    """Add craters to a grid, later craters replacing what lies inside their rim.

    Parameters
    ----------
    z : ndarray, shape (H, W)
        Surface to stamp on (not modified).
    rows, cols, radius_px : array_like, shape (n,)
        Centres (fractional pixel indices) and rim-crest radii in pixels.
    shape, depth, rim_height :
        As :func:`crater_relief`.
    diameter_scale_m : float
        Metres of elevation per unit of diameter-relative relief times pixels (pixel size in m).
    degradation : float or array_like, shape (n,)
        Gaussian smoothing of each crater's relief, as a fraction of its radius: a stand-in for
        diffusive degradation (topographic diffusion, Fassett & Thomson 2014, JGR Planets
        119:2255, from memory). 0 = fresh.

    Returns
    -------
    ndarray, shape (H, W)
        New surface. Inside each rim the pre-existing relief is blended out towards the centre
        (a fresh crater excavates what was there), outside it is kept and ejecta added.
    """
    out = np.array(z, dtype=np.float64, copy=True)
    h, w = out.shape
    rows, cols, radius_px = np.atleast_1d(rows), np.atleast_1d(cols), np.atleast_1d(radius_px)
    degr = np.broadcast_to(np.asarray(degradation, dtype=np.float64), rows.shape)
    for r0, c0, rad, deg in zip(rows, cols, radius_px, degr, strict=True):
        ext = int(np.ceil(3.0 * rad))
        r_lo, r_hi = max(0, int(r0) - ext), min(h, int(r0) + ext + 2)
        c_lo, c_hi = max(0, int(c0) - ext), min(w, int(c0) + ext + 2)
        if r_lo >= r_hi or c_lo >= c_hi:
            continue
        yy, xx = np.mgrid[r_lo:r_hi, c_lo:c_hi]
        rho = np.hypot(yy - r0, xx - c0) / rad
        relief = crater_relief(rho, shape=shape, depth=depth, rim_height=rim_height)
        relief *= 2.0 * rad * diameter_scale_m
        if deg > 0:
            relief = ndimage.gaussian_filter(relief, deg * rad, mode="nearest")
        win = out[r_lo:r_hi, c_lo:c_hi]
        # Local base level = mean of the pre-existing surface on the rim ring, so the new crater
        # sits on the terrain instead of floating at zero.
        ring = (rho > 0.9) & (rho < 1.1)
        base = np.nanmean(win[ring]) if np.any(ring & np.isfinite(win)) else 0.0
        keep = np.clip(rho, 0.0, 1.0) ** 4  # fraction of old relief kept inside the rim
        inside = rho <= 1.0
        win[inside] = base + relief[inside] + keep[inside] * (win[inside] - base)
        win[~inside] += relief[~inside]
    return out
