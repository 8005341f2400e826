"""Background terrain and sensor effects: fractal (power-law spectrum) surfaces, PSF blur, noise, holes."""

from __future__ import annotations

import numpy as np
from scipy import ndimage

__all__ = ["fractal_terrain", "apply_psf", "add_noise", "nodata_holes"]


def fractal_terrain(shape, pixel_size_m: float, *, rms_m: float, spectral_slope: float = 3.0,
                    tilt_deg: tuple[float, float] = (0.0, 0.0), rng: np.random.Generator) -> np.ndarray:
    """Gaussian random surface with an isotropic power spectrum ``P(k) ~ k**-spectral_slope``.

    Parameters
    ----------
    shape : (int, int)
        Rows, columns.
    pixel_size_m : float
        Ground pixel size (m); sets the units of the tilt.
    rms_m : float
        Standard deviation of the rough component (m), before the tilt.
    spectral_slope : float
        Exponent of the 2-D power spectral density (``beta = 2 H + 2`` for Hurst exponent H;
        3 gives H = 0.5, a Brownian surface; common practice in planetary roughness studies).
    tilt_deg : (float, float)
        Regional slope in degrees towards +x (east) and +y (north).
    rng : numpy.random.Generator

    Returns
    -------
    ndarray of float64, shape ``shape``
    """
    h, w = int(shape[0]), int(shape[1])
    ky = np.fft.fftfreq(h)[:, None]
    kx = np.fft.rfftfreq(w)[None, :]
    k = np.hypot(ky, kx)
    k[0, 0] = np.inf
    amp = k ** (-spectral_slope / 2.0)
    k_low = 1.0 / max(h, w)  # roll off wavelengths longer than the tile (no runaway tilt)
    amp = np.where(k < k_low, 0.0, amp)
    spec = amp * (rng.standard_normal(amp.shape) + 1j * rng.standard_normal(amp.shape))
    z = np.fft.irfft2(spec, s=(h, w))
    sd = z.std()
    z = z * (rms_m / sd) if sd > 0 and rms_m > 0 else np.zeros((h, w))
    if any(tilt_deg):
        yy, xx = np.mgrid[0:h, 0:w].astype(np.float64)
        gx, gy = np.tan(np.radians(tilt_deg[0])), np.tan(np.radians(tilt_deg[1]))
        z += pixel_size_m * (gx * (xx - w / 2.0) - gy * (yy - h / 2.0))
    return z


def apply_psf(z: np.ndarray, sigma_px: float) -> np.ndarray:
    """Gaussian point-spread function of standard deviation ``sigma_px`` (pixels); 0 = none."""
    if sigma_px <= 0:
        return z
    return ndimage.gaussian_filter(z, sigma_px, mode="nearest", truncate=4.0)


def add_noise(z: np.ndarray, noise_m: float, rng: np.random.Generator) -> np.ndarray:
    """Add white Gaussian noise of standard deviation ``noise_m`` (m)."""
    if noise_m <= 0:
        return z
    return z + rng.normal(0.0, noise_m, z.shape)


def nodata_holes(shape, fraction: float, rng: np.random.Generator, blob_px: float = 12.0) -> np.ndarray:
    """Boolean mask of blob-shaped gaps covering about ``fraction`` of the tile (True = nodata)."""
    if fraction <= 0:
        return np.zeros(shape, dtype=bool)
    field = ndimage.gaussian_filter(rng.standard_normal(shape), blob_px, mode="wrap")
    return field > np.quantile(field, 1.0 - fraction)
