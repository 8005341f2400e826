"""Stamping crater profiles into a DEM (younger over older) and measuring them as stamped."""

from __future__ import annotations

import warnings

import numpy as np

from ..morphometry.profiles import sample_radial_profiles
from ._families import CraterShapes

__all__ = ["stamp_craters", "measure_stamped"]

_BLEND_OUTER = 1.5  # terrain inside R is replaced, blended out to 1.5 R


def _harmonic_sum(e, amp, phase, first_order):
    """``sum_k amp_k cos((k + first_order) theta + phase_k)`` with ``e = exp(i theta)``.

    Horner evaluation in ``e`` (complex multiply-adds instead of one cosine per harmonic).
    """
    acc = np.zeros_like(e)
    for ck in (amp * np.exp(1j * phase))[::-1]:
        acc = acc * e + ck
    return (acc * e**first_order).real


def stamp_craters(z: np.ndarray, rows, cols, pixel_size_m: float, shapes: CraterShapes, grid, table,
                  order) -> tuple[np.ndarray, np.ndarray]:
    """Stamp craters into ``z`` (in place) in ``order`` (oldest first).

    Each crater replaces the terrain inside its rim with a plane fitted to the terrain in
    the ring R..1.5 R (blended out to 1.5 R), then adds its profile: bowl, rim and flank.
    Returns ``(ref_level, owner)``: the pre-impact reference level at each centre (m) and
    a raster holding, per pixel, the index of the last crater whose interior covers it (-1).
    """
    H, W = z.shape
    owner = np.full(z.shape, -1, dtype=np.int32)
    ref_level = np.zeros(rows.size)
    extent = np.empty(rows.size)
    nz = np.abs(table) > 1e-6 * np.maximum(shapes.depth_m, 1e-9)[:, None]
    last = np.where(nz.any(axis=1), nz.shape[1] - 1 - np.argmax(nz[:, ::-1], axis=1), 0)
    extent[:] = np.maximum(grid[last], _BLEND_OUTER)
    for i in order:
        R = 0.5 * shapes.diameter_m[i] / pixel_size_m
        wobble = 1.0 + 2.0 * shapes.outline_amp[i].sum()
        reach = extent[i] * R * wobble + 1.0
        r0, r1 = max(int(np.floor(rows[i] - reach)), 0), min(int(np.ceil(rows[i] + reach)) + 1, H)
        c0, c1 = max(int(np.floor(cols[i] - reach)), 0), min(int(np.ceil(cols[i] + reach)) + 1, W)
        if r0 >= r1 or c0 >= c1:
            continue
        dy = np.arange(r0, r1)[:, None] - rows[i]
        dx = np.arange(c0, c1)[None, :] - cols[i]
        r = np.hypot(dy, dx)
        # e = exp(i theta), theta counter-clockwise from east on a north-up grid
        e = np.where(r > 0, (dx - 1j * dy) / np.where(r > 0, r, 1.0), 1.0 + 0j)
        rad = R * (1.0 + _harmonic_sum(e, shapes.outline_amp[i], shapes.outline_phase[i], 2))
        rn = r / rad
        prof = np.interp(rn, grid, table[i], right=0.0)
        rim_var = _harmonic_sum(e, shapes.rimvar_amp[i], shapes.rimvar_phase[i], 1)
        prof += shapes.rim_height_m[i] * rim_var * np.exp(-(((rn - 1.0) / 0.2) ** 2))
        if shapes.asymmetry[i]:
            inner = rn < 1.0
            prof += np.where(inner, shapes.asymmetry[i] * shapes.depth_m[i] * rn
                             * (e * np.exp(-1j * shapes.asymmetry_dir[i])).real * (1.0 - rn**2), 0.0)
        w = np.where(rn <= 1.0, 1.0, np.where(rn < _BLEND_OUTER,
                                              0.5 * (1.0 + np.cos(np.pi * (rn - 1.0) / (_BLEND_OUTER - 1.0))), 0.0))
        win = z[r0:r1, c0:c1]
        ring = (rn >= 1.0) & (rn <= _BLEND_OUTER)
        plane = _fit_plane(win, dx, dy, ring)
        ref_level[i] = plane[0]
        base = plane[0] + plane[1] * dx + plane[2] * dy
        z[r0:r1, c0:c1] = win * (1.0 - w) + w * base + prof
        owner[r0:r1, c0:c1][rn <= 1.0] = i
    return ref_level, owner


def _fit_plane(win, dx, dy, mask):
    """Least-squares plane ``a + b dx + c dy`` of ``win`` over ``mask``; the mean if too few points."""
    vals = win[mask]
    if vals.size < 12:
        return np.array([float(win.mean()), 0.0, 0.0])
    X = np.column_stack([np.ones(vals.size), np.broadcast_to(dx, win.shape)[mask],
                         np.broadcast_to(dy, win.shape)[mask]])
    coef, *_ = np.linalg.lstsq(X, vals, rcond=None)
    return coef


def measure_stamped(z, rows, cols, radius_px, *, n_azimuths: int = 64):
    """Measure craters on the noise-free stamped (and blurred) DEM.

    The regional slope is removed first (a plane fitted to the ring 1.5-2 R, so a crater on
    an older crater's wall is measured against its own surroundings). Per azimuth the rim
    crest is the highest sample in 0.7-1.3 R; the rim elevation and radius are medians
    over azimuths; the floor is the lowest sample inside 0.8 R.

    Returns
    -------
    dict of arrays: ``rim_elev``, ``rim_radius_px``, ``floor_elev``, ``valid_fraction``.
    """
    p = sample_radial_profiles(z, rows, cols, radius_px, n_azimuths=n_azimuths, n_radii=101,
                               r_max_factor=2.0)
    rn = p.r_norm
    ex = np.cos(p.azimuths)[:, None] * rn[None, :]
    ey = np.sin(p.azimuths)[:, None] * rn[None, :]
    ring = (rn >= 1.5) & (rn <= 2.0)
    with warnings.catch_warnings():  # all-NaN rows (craters off the grid) give NaN, flagged later
        warnings.simplefilter("ignore", RuntimeWarning)
        zr = p.z[:, :, ring]
        zr = zr - np.nanmean(zr, axis=(1, 2), keepdims=True)
        w = np.isfinite(zr)
        zr0 = np.where(w, zr, 0.0)
        gx = (zr0 * ex[:, ring]).sum(axis=(1, 2)) / np.maximum((w * ex[:, ring] ** 2).sum(axis=(1, 2)), 1e-12)
        gy = (zr0 * ey[:, ring]).sum(axis=(1, 2)) / np.maximum((w * ey[:, ring] ** 2).sum(axis=(1, 2)), 1e-12)
        zd = p.z - gx[:, None, None] * ex[None] - gy[:, None, None] * ey[None]
        band = (rn >= 0.7) & (rn <= 1.3)
        zb = zd[:, :, band]
        valid_az = np.isfinite(zb).all(axis=2)
        zb_f = np.where(np.isfinite(zb), zb, -np.inf)
        k = np.argmax(zb_f, axis=2)
        crest = np.take_along_axis(zb_f, k[..., None], axis=2)[..., 0]
        crest_r = rn[band][k]
        crest = np.where(valid_az, crest, np.nan)
        crest_r = np.where(valid_az, crest_r, np.nan)
        rim_elev = np.nanmedian(crest, axis=1)
        rim_r = np.nanmedian(crest_r, axis=1) * radius_px
        inner = zd[:, :, rn <= 0.8]
        floor = np.nanmin(inner.reshape(inner.shape[0], -1), axis=1)
    return {"rim_elev": rim_elev, "rim_radius_px": rim_r, "floor_elev": floor,
            "valid_fraction": valid_az.mean(axis=1)}
