"""Regional-trend removal: a robust plane fitted to the outer annulus of each crater's profiles."""

from __future__ import annotations

import numpy as np

from ._geometry import _solve_batched, nanquantile_last

__all__ = ["fit_annulus_plane", "detrend_profiles"]

#: Tukey biweight tuning constant (95 % efficiency at the normal; Beaton & Tukey 1974).
_TUKEY_C = 4.685


def fit_annulus_plane(zp, r_norm, azimuths, radius_px, annulus=(1.5, 2.5), n_iter=4):
    """Fit ``z = a + b u + c v`` to profile samples in an annulus, by iteratively reweighted LSQ.

    Parameters
    ----------
    zp : ndarray, shape (n, n_az, n_r)
        Profile elevations; NaN ignored.
    r_norm : ndarray, shape (n_r,)
        Sample radius / crater radius.
    azimuths : ndarray, shape (n_az,)
        Radians counter-clockwise from +column.
    radius_px : ndarray, shape (n,)
        Crater radius in pixels (plane slopes come out per pixel).
    annulus : (float, float)
        Inner and outer radius of the fitting ring, in crater radii.
    n_iter : int
        Reweighting passes with Tukey's biweight on MAD-scaled residuals.

    Returns
    -------
    ndarray, shape (n, 3)
        ``(a, b, c)``: level at the centre and slopes per pixel along ``u = r cos(az)``,
        ``v = r sin(az)``. NaN where fewer than 3 valid samples.

    References
    ----------
    Holland P.W., Welsch R.E. (1977) Robust regression using iteratively reweighted
    least-squares. Commun. Stat. Theory Methods 6(9):813-827.
    """
    sel = np.flatnonzero((r_norm >= annulus[0]) & (r_norm <= annulus[1]))
    if sel.size > 16:  # ~16 rings x n_az samples are plenty for three coefficients
        sel = sel[:: int(np.ceil(sel.size / 16))]
    n = zp.shape[0]
    z = zp[:, :, sel].reshape(n, -1)
    rr = radius_px[:, None, None] * r_norm[sel][None, None, :]
    u = (rr * np.cos(azimuths)[None, :, None]).reshape(n, -1)
    v = (rr * np.sin(azimuths)[None, :, None]).reshape(n, -1)
    ok = np.isfinite(z)
    zf = np.where(ok, z, 0.0)
    w = ok.astype(float)
    coef = np.full((n, 3), np.nan)
    for _ in range(n_iter):
        wu, wv = w * u, w * v
        ata = np.stack([
            np.stack([w.sum(1), wu.sum(1), wv.sum(1)], -1),
            np.stack([wu.sum(1), (wu * u).sum(1), (wu * v).sum(1)], -1),
            np.stack([wv.sum(1), (wv * u).sum(1), (wv * v).sum(1)], -1),
        ], -2)
        atb = np.stack([(w * zf).sum(1), (wu * zf).sum(1), (wv * zf).sum(1)], -1)
        coef = _solve_batched(ata, atb)
        res = zf - coef[:, :1] - coef[:, 1:2] * u - coef[:, 2:3] * v
        mad = nanquantile_last(np.where(ok, np.abs(res), np.nan), 0.5)
        scale = 1.4826 * np.where(np.isfinite(mad), mad, 0.0)
        with np.errstate(invalid="ignore", divide="ignore"):
            t = res / (_TUKEY_C * scale[:, None])
        # A perfect plane has MAD 0: keep every valid point rather than none.
        w = np.where(scale[:, None] > 0, np.where(ok & (np.abs(t) < 1), (1 - t * t) ** 2, 0.0),
                     ok.astype(float))
    return coef


def detrend_profiles(zp, r_norm, azimuths, radius_px, annulus=(1.5, 2.5)):
    """Subtract the robust annulus plane from every profile sample.

    Returns
    -------
    detrended : ndarray, shape (n, n_az, n_r)
        Elevation relative to the fitted regional plane (the "surrounding plain").
    coef : ndarray, shape (n, 3)
        Plane coefficients from :func:`fit_annulus_plane`.
    """
    coef = fit_annulus_plane(zp, r_norm, azimuths, radius_px, annulus)
    rr = radius_px[:, None, None] * r_norm[None, None, :]
    plane = (coef[:, 0, None, None]
             + coef[:, 1, None, None] * rr * np.cos(azimuths)[None, :, None]
             + coef[:, 2, None, None] * rr * np.sin(azimuths)[None, :, None])
    return zp - plane, coef
