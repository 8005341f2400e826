"""Regional-trend removal: a robust plane fitted to the outer annulus of each crater's profiles."""

from __future__ import annotations

import numpy as np

from ._geometry import _solve_batched, nanquantile_last

__all__ = ["fit_annulus_plane", "detrend_profiles", "plain_level", "ANNULUS"]

#: Tukey biweight tuning constant (95 % efficiency at the normal; Beaton & Tukey 1974).
_TUKEY_C = 4.685


#: Annulus (crater radii) of the regional fit, and the ejecta-flank exponent modelled in it.
ANNULUS = (1.3, 2.5)
FLANK_EXPONENT = 3.0


def annulus_rings(r_norm, annulus=ANNULUS):
    """Indices of the ~10 profile radii of the annulus used by the regional fit.

    About 10 rings x n_az samples are plenty for the fit's four coefficients.
    """
    sel = np.flatnonzero((r_norm >= annulus[0]) & (r_norm <= annulus[1]))
    return sel[:: max(1, int(np.ceil(sel.size / 10)))]


def fit_annulus_plane(zp, r_norm, azimuths, radius_px, annulus=ANNULUS, n_iter=3):
    """Fit ``z = a + b u + c v + e (r/R)^-3`` to an annulus by iteratively reweighted LSQ.

    The plane ``a + b u + c v`` is the surrounding plain; the ``e (r/R)^-3`` term absorbs
    the ejecta flank (McGetchin et al. 1973 thickness law) so that the rim height is
    measured above the plain rather than above the near-rim ejecta.

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
    ndarray, shape (n, 4)
        ``(a, b, c, e)``: plain level at the centre, slopes per pixel along
        ``u = r cos(az)``, ``v = r sin(az)``, and the flank amplitude. NaN where the
        system is singular.

    References
    ----------
    McGetchin T.R., Settle M., Head J.W. (1973) Radial thickness variation in impact crater
    ejecta. Earth Planet. Sci. Lett. 20:226-236.
    Holland P.W., Welsch R.E. (1977) Robust regression using iteratively reweighted
    least-squares. Commun. Stat. Theory Methods 6(9):813-827.
    """
    sel = annulus_rings(r_norm, annulus)
    n = zp.shape[0]
    z = zp[:, :, sel].reshape(n, -1)
    # Work in crater radii (all basis columns of order 1: a well-conditioned system);
    # slopes are converted to per-pixel at the end.
    rr = np.broadcast_to(r_norm[sel][None, None, :], zp[:, :, sel].shape)
    u = (rr * np.cos(azimuths)[None, :, None]).reshape(n, -1)
    v = (rr * np.sin(azimuths)[None, :, None]).reshape(n, -1)
    f = np.broadcast_to(r_norm[sel][None, None, :] ** -FLANK_EXPONENT, zp[:, :, sel].shape).reshape(n, -1)
    ok = np.isfinite(z)
    zf = np.where(ok, z, 0.0)
    w = ok.astype(float)
    basis = (np.ones_like(u), u, v, f)
    coef = np.full((n, 4), np.nan)
    for _ in range(n_iter):
        wb = [w * b for b in basis]
        ata = np.stack([np.stack([(wi * bj).sum(1) for bj in basis], -1) for wi in wb], -2)
        atb = np.stack([(wi * zf).sum(1) for wi in wb], -1)
        coef = _solve_batched(ata, atb)
        res = zf - sum(coef[:, i : i + 1] * b for i, b in enumerate(basis))
        mad = nanquantile_last(np.where(ok, np.abs(res), np.nan), 0.5)
        scale = 1.4826 * np.where(np.isfinite(mad), mad, 0.0)
        with np.errstate(invalid="ignore", divide="ignore"):
            t = res / (_TUKEY_C * scale[:, None])
        # A perfect plane has MAD 0: keep every valid point rather than none.
        w = np.where(scale[:, None] > 0, np.where(ok & (np.abs(t) < 1), (1 - t * t) ** 2, 0.0),
                     ok.astype(float))
    coef = coef.copy()
    coef[:, 1:3] /= radius_px[:, None]
    return coef


def detrend_profiles(zp, r_norm, azimuths, radius_px, annulus=ANNULUS):
    """Subtract the robust annulus plane (not the flank term) from every profile sample.

    Returns
    -------
    detrended : ndarray, shape (n, n_az, n_r)
        Elevation relative to the fitted regional plane (the "surrounding plain").
    coef : ndarray, shape (n, 4)
        Plane coefficients from :func:`fit_annulus_plane`.
    """
    coef = fit_annulus_plane(zp, r_norm, azimuths, radius_px, annulus)
    # a + r (b cos az + c sin az): one (n, n_az, 1) x (n, 1, n_r) product.
    rr = radius_px[:, None] * r_norm[None, :]
    tilt = coef[:, 1, None] * np.cos(azimuths) + coef[:, 2, None] * np.sin(azimuths)
    out = zp - coef[:, 0, None, None]
    out -= tilt[:, :, None] * rr[:, None, :]
    return out, coef


def plain_level(profile, r_norm, annulus=ANNULUS):
    """Plain level ``a`` of axisymmetric profiles (..., n_r) by the same ``a + e r^-3`` model."""
    sel = (r_norm >= annulus[0]) & (r_norm <= annulus[1])
    basis = np.stack([np.ones(sel.sum()), r_norm[sel] ** -FLANK_EXPONENT], -1)
    coef = np.linalg.pinv(basis) @ np.moveaxis(profile[..., sel], -1, 0).reshape(sel.sum(), -1)
    return coef[0].reshape(profile.shape[:-1])
