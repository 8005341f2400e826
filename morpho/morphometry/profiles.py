"""Radial elevation profiles around crater centres, vectorised over craters and azimuths.

Pattern of ``skimage.measure.profile_line``: arrays in, arrays out, interpolation by
:func:`scipy.ndimage.map_coordinates`, no I/O.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy import ndimage

from ._validate import as_centres

__all__ = ["RadialProfiles", "PolarSampler", "sample_radial_profiles", "sample_polar"]


@dataclass(frozen=True)
class RadialProfiles:
    """Elevation sampled on a polar grid around each crater.

    Attributes
    ----------
    z : ndarray, shape (n_craters, n_azimuths, n_radii)
        Elevation (same unit as the DEM); NaN where the sample falls off the grid or on nodata.
    r_norm : ndarray, shape (n_radii,)
        Sample radius as a fraction of the guessed crater radius (0 .. r_max_factor).
    azimuths : ndarray, shape (n_azimuths,)
        Azimuth in radians, counter-clockwise from the +column axis (east on a north-up grid).
    radius_px : ndarray, shape (n_craters,)
        The guessed crater radius in pixels used to scale ``r_norm``.
    rows, cols : ndarray, shape (n_craters,)
        Centre in fractional pixel indices (pixel centres at integer indices).
    """

    z: np.ndarray
    r_norm: np.ndarray
    azimuths: np.ndarray
    radius_px: np.ndarray
    rows: np.ndarray
    cols: np.ndarray

    def radii_px(self) -> np.ndarray:
        """Sample radius in pixels, shape (n_craters, n_radii)."""
        return self.radius_px[:, None] * self.r_norm[None, :]


class PolarSampler:
    """One DEM prepared for :func:`sample_polar`: its no-data found once, not on every call.

    Finding the NaN cells takes a pass over the whole DEM (and, where there are some, a filled
    copy and a float mask), which a tile's many batches of craters would otherwise each repeat
    (47 times on a 2688 x 2688 benchmark tile, ~6 % of its time). Pass the sampler wherever
    :func:`sample_polar` or :func:`sample_radial_profiles` takes ``z``; the samples are the same.
    The DEM must not be changed while the sampler is in use.

    Parameters
    ----------
    z : array_like, shape (H, W)
        Elevation, NaN for no data.
    """

    def __init__(self, z):
        z = np.asarray(z, dtype=np.float64)
        nan_mask = ~np.isfinite(z)
        self.has_nan = bool(nan_mask.any())
        self.shape = z.shape
        #: the DEM with 0 in no-data cells (the DEM itself when it has none)
        self.filled = np.where(nan_mask, 0.0, z) if self.has_nan else z
        #: 1 on no-data cells, as float32 for interpolation (None when there are none)
        self.nan_weight = nan_mask.astype(np.float32) if self.has_nan else None

    def sample(self, coords, *, order=1):
        """Values at ``coords`` (shape (2, m): fractional rows, cols); NaN where any pixel
        that contributes is no data, or off the grid."""
        # mode="constant" with cval=NaN: samples beyond the outer pixel centres come back NaN.
        vals = ndimage.map_coordinates(self.filled, coords, order=order, mode="constant", cval=np.nan)
        if self.has_nan:
            # Any NaN neighbour contaminates the interpolated value: flag it, never invent data.
            bad = ndimage.map_coordinates(self.nan_weight, coords, order=1, mode="constant", cval=1.0)
            vals[bad > 1e-6] = np.nan
        return vals


def sample_radial_profiles(
    z: np.ndarray,
    rows,
    cols,
    radius_px,
    *,
    n_azimuths: int = 64,
    n_radii: int = 96,
    r_max_factor: float = 2.5,
    order: int = 1,
) -> RadialProfiles:
    """Sample the DEM along ``n_azimuths`` rays from each centre out to ``r_max_factor`` radii.

    Parameters
    ----------
    z : ndarray, shape (H, W), or PolarSampler
        Elevation, NaN for no data (a :class:`PolarSampler` of it for many calls on one DEM).
    rows, cols : array_like, shape (n,)
        Centres in fractional pixel indices (row, column).
    radius_px : array_like, shape (n,)
        Guessed crater radii in pixels (> 0).
    n_azimuths, n_radii : int
        Polar grid size.
    r_max_factor : float
        Outer sampling radius as a multiple of ``radius_px``.
    order : int
        Spline order for :func:`scipy.ndimage.map_coordinates` (1 = bilinear; NaN-safe).

    Returns
    -------
    RadialProfiles
        Samples are NaN where any contributing pixel is NaN or outside the grid.

    Raises
    ------
    morpho.errors.InputError
        (a ``ValueError``) for mismatched shapes, non-finite centres or radii <= 0.

    Examples
    --------
    >>> import numpy as np
    >>> yy, xx = np.mgrid[0:64, 0:64]
    >>> bowl = ((yy - 32.0) ** 2 + (xx - 32.0) ** 2) / 100.0
    >>> p = sample_radial_profiles(bowl, [32], [32], [10], n_azimuths=8, n_radii=11, r_max_factor=1.0)
    >>> bool(np.allclose(p.z[0, :, -1], 1.0, atol=0.01))
    True
    """
    # InputError subclasses ValueError: callers catching ValueError keep working.
    rows, cols, radius_px = as_centres(rows, cols, radius_px)
    az = np.linspace(0.0, 2.0 * np.pi, n_azimuths, endpoint=False)
    r_norm = np.linspace(0.0, r_max_factor, n_radii)
    vals = sample_polar(z, rows, cols, radius_px, az, r_norm, order=order)
    return RadialProfiles(vals, r_norm, az, radius_px, rows, cols)


def sample_polar(z, rows, cols, radius_px, azimuths, r_norm, *, order=1):
    """Sample ``z`` at ``centre + r_norm * radius * (cos az, sin az)`` -> shape (n, n_az, n_r).

    Same conventions as :func:`sample_radial_profiles` but on any (e.g. non-uniform) radii.
    NaN where a contributing pixel is NaN or the point is off the grid. ``z`` may be a
    :class:`PolarSampler` (prepared once for many calls on one DEM).
    """
    n = rows.size
    if n == 0:
        return np.empty((0, azimuths.size, r_norm.size))
    sampler = z if isinstance(z, PolarSampler) else PolarSampler(z)
    rr = radius_px[:, None, None] * r_norm[None, None, :]
    coords = np.empty((2, n, azimuths.size, r_norm.size))
    # Row index grows downwards (south on a north-up grid): +azimuth turns east -> north.
    np.multiply(rr, -np.sin(azimuths)[None, :, None], out=coords[0])
    coords[0] += rows[:, None, None]
    np.multiply(rr, np.cos(azimuths)[None, :, None], out=coords[1])
    coords[1] += cols[:, None, None]
    vals = sampler.sample(coords.reshape(2, -1), order=order)
    return vals.reshape(n, azimuths.size, r_norm.size)
