"""Synthetic crater DEMs with closed-form shapes, shared by the morphometry tests (no tests here)."""

from __future__ import annotations

import numpy as np

from morpho.shapes import crater_profile


def stamp(shape, centre_rc, radius_px, profile, *, tilt=(0.0, 0.0), offset=0.0, noise=0.0, seed=0):
    """DEM of one axisymmetric crater: ``profile(r_norm)`` in metres at pixel centres.

    ``tilt`` is the regional slope (metres per pixel) along (rows, cols).
    """
    yy, xx = np.mgrid[0 : shape[0], 0 : shape[1]].astype(float)
    r = np.hypot(yy - centre_rc[0], xx - centre_rc[1]) / radius_px
    z = profile(r) + offset + tilt[0] * yy + tilt[1] * xx
    if noise:
        z = z + np.random.default_rng(seed).normal(0.0, noise, shape)
    return z


def bowl(depth, rim):
    """Paraboloid bowl with a McGetchin et al. (1973) r^-3 flank (via morpho.shapes)."""
    return lambda r: crater_profile(r, depth, rim, interior_exponent=2.0, flank_outer=1e6)


def cone(depth, rim):
    """Conical crater: interior slope depth / R exactly."""
    return lambda r: crater_profile(r, depth, rim, interior_exponent=1.0, flank_outer=1e6)


def flat_with_peak(depth, rim, floor_fraction, peak_height, peak_base_fraction):
    """Flat floor, conical walls and a cosine central peak (morpho.shapes.crater_profile)."""
    return lambda r: crater_profile(
        r, depth, rim, interior_exponent=1.0, floor_fraction=floor_fraction,
        peak_height_m=peak_height, peak_base_fraction=peak_base_fraction, flank_outer=1e6)
