"""Verification of crater candidates on radial elevation profiles.

Each candidate is sampled on a polar grid (:func:`morpho.morphometry.profiles.sample_radial_profiles`,
never across nodata). A plane fitted to the surroundings (1.3-2 radii, with one round of outlier
rejection) removes the regional slope. On every azimuth the rim crest is the highest point between
0.5 and 1.5 radii; a least-squares circle through the crests (Kasa 1976) refines the centre and the
rim-crest radius, twice. The confidence combines the share of azimuths with a crest above the
floor, the roundness of the crest line, the depth relative to the surrounding roughness, and the
detector's symmetry score.

References
----------
Kasa I. (1976) A circle fitting procedure and its error analysis. IEEE Trans. Instrum. Meas.
25(1):8-14. doi:10.1109/TIM.1976.6312298
Pike R.J. (1977) Size-dependence in the shape of fresh impact craters on the Moon. In Impact and
Explosion Cratering, Pergamon, 489-509 (rim-crest diameter as the crater size).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from morpho.morphometry.profiles import sample_radial_profiles

__all__ = ["Verified", "verify_candidates"]

_N_RADII = 81  # 0 .. 2 radii in steps of 0.05
_R_MAX = 2.0
_WIN = (0.5, 1.5)  # rim-crest search window, radii
_RING = (1.3, 2.0)  # surroundings for the regional plane, radii
_SUBSAMPLE = 0.0


@dataclass(frozen=True)
class Verified:
    """Refined candidates (all arrays shape (n,))."""

    rows: np.ndarray
    cols: np.ndarray
    radius_px: np.ndarray
    confidence: np.ndarray
    rim_coverage: np.ndarray


def _plane_fit(x, y, zz, mask):
    """Least-squares plane per crater on masked samples; arrays (n, m). Returns (n, 3) coefs."""
    w = mask.astype(np.float64)
    zz = np.where(mask, zz, 0.0)
    basis = np.stack([np.ones_like(x), x, y], axis=-1)  # (n, m, 3)
    ata = np.einsum("nmi,nmj,nm->nij", basis, basis, w)
    atb = np.einsum("nmi,nm,nm->ni", basis, zz, w)
    # Tiny ridge keeps the solve defined where only a few samples survive (edge craters).
    ata += 1e-6 * (ata[:, :1, :1] + 1.0) * np.eye(3)[None]
    return np.linalg.solve(ata, atb[..., None])[..., 0]


def _detrend(prof) -> tuple[np.ndarray, np.ndarray]:
    """Elevation minus the regional plane, shape (n, A, M); and a robust roughness, shape (n,)."""
    zz = prof.z
    n, a, m = zz.shape
    rho = np.broadcast_to(prof.r_norm[None, None, :], zz.shape)
    x = (rho * np.cos(prof.azimuths)[None, :, None]).reshape(n, -1)
    y = (rho * np.sin(prof.azimuths)[None, :, None]).reshape(n, -1)
    flat = zz.reshape(n, -1)
    ring = (rho >= _RING[0]) & (rho <= _RING[1])
    mask = ring.reshape(n, -1) & np.isfinite(flat)
    coef = _plane_fit(x, y, flat, mask)
    res = flat - (coef[:, :1] + coef[:, 1:2] * x + coef[:, 2:3] * y)
    with np.errstate(invalid="ignore"):
        mad = np.nanmedian(np.where(mask, np.abs(res), np.nan), axis=1)
        mask &= np.abs(res) <= 3.0 * mad[:, None] + 1e-12
    coef = _plane_fit(x, y, flat, mask)
    res = flat - (coef[:, :1] + coef[:, 1:2] * x + coef[:, 2:3] * y)
    with np.errstate(invalid="ignore"):
        rough = 1.4826 * np.nanmedian(np.where(mask, np.abs(res), np.nan), axis=1)
    return res.reshape(n, a, m), np.nan_to_num(rough, nan=np.inf)


def _crests(d, r_norm):
    """Per-azimuth rim crest: normalised radius, height, and window-interior flag; (n, A) each."""
    i0, i1 = np.searchsorted(r_norm, _WIN[0]), np.searchsorted(r_norm, _WIN[1], side="right")
    win = d[:, :, i0:i1]
    finite = np.isfinite(win).all(axis=2)
    idx = np.argmax(np.where(np.isfinite(win), win, -np.inf), axis=2)
    height = np.take_along_axis(win, idx[..., None], axis=2)[..., 0]
    # Parabolic sub-sample peak position where both neighbours exist.
    inner = (idx > 0) & (idx < win.shape[2] - 1)
    lo = np.take_along_axis(win, np.clip(idx - 1, 0, None)[..., None], axis=2)[..., 0]
    hi = np.take_along_axis(win, np.clip(idx + 1, None, win.shape[2] - 1)[..., None], axis=2)[..., 0]
    with np.errstate(invalid="ignore", divide="ignore"):
        curv = lo - 2.0 * height + hi
        shift = np.where(inner & (curv < 0), 0.5 * (lo - hi) / curv, 0.0)
    shift = np.nan_to_num(np.clip(shift, -0.5, 0.5)) * _SUBSAMPLE
    step = r_norm[1] - r_norm[0]
    rho = r_norm[i0] + (idx + shift) * step
    return rho, height, inner & finite


def _circle_fit(dr, dc, w):
    """Weighted Kasa fit per crater; dr, dc, w shape (n, A). Returns centre offsets and radius."""
    basis = np.stack([dr, dc, np.ones_like(dr)], axis=-1)
    rhs = dr * dr + dc * dc
    ata = np.einsum("nai,naj,na->nij", basis, basis, w)
    atb = np.einsum("nai,na,na->ni", basis, rhs, w)
    ata += 1e-9 * (np.trace(ata, axis1=1, axis2=2)[:, None, None] + 1.0) * np.eye(3)[None]
    sol = np.linalg.solve(ata, atb[..., None])[..., 0]
    a, b = sol[:, 0] / 2.0, sol[:, 1] / 2.0
    r2 = sol[:, 2] + a * a + b * b
    return a, b, np.sqrt(np.clip(r2, 0.0, None))


def _assess(z, rows, cols, radius, n_az):
    """One round of sampling: crest geometry and quality terms for every candidate."""
    prof = sample_radial_profiles(z, rows, cols, radius, n_azimuths=n_az, n_radii=_N_RADII,
                                  r_max_factor=_R_MAX)
    d, rough = _detrend(prof)
    rho, height, ok = _crests(d, prof.r_norm)
    centre = prof.r_norm <= 0.3
    with np.errstate(invalid="ignore"):
        floor = np.nanmean(np.where(centre[None, None, :], d, np.nan), axis=(1, 2))
    floor = np.nan_to_num(floor, nan=np.inf)
    relief = height - floor[:, None]
    # A crest counts when it rises above the floor and is a real local maximum in the window.
    good = ok & (relief > 0)
    return prof, rho, relief, good, ok, rough


def verify_candidates(
    z: np.ndarray,
    rows: np.ndarray,
    cols: np.ndarray,
    radius_px: np.ndarray,
    score: np.ndarray,
    *,
    n_azimuths: int = 48,
    n_iter: int = 2,
) -> Verified:
    """Refine centre and rim-crest radius of each candidate and rate it.

    Parameters
    ----------
    z : ndarray, shape (H, W)
        Elevation with NaN for no data (not filled).
    rows, cols, radius_px : ndarray, shape (n,)
        Candidate centres (fractional pixel indices) and first-guess radii (pixels).
    score : ndarray, shape (n,)
        Detector response of each candidate (~1 for an ideal bowl).
    n_azimuths : int
        Profiles per crater.
    n_iter : int
        Refinement rounds before the final rating.

    Returns
    -------
    Verified
        Refined ``rows, cols, radius_px``; ``confidence`` in [0, 1]; ``rim_coverage``, the share
        of azimuths whose crest search window lies on valid data.
    """
    rows = np.asarray(rows, dtype=np.float64).copy()
    cols = np.asarray(cols, dtype=np.float64).copy()
    rad = np.asarray(radius_px, dtype=np.float64).copy()
    if rows.size == 0:
        e = np.empty(0)
        return Verified(e, e, e, e, e)
    for _ in range(n_iter):
        prof, rho, _, good, _, _ = _assess(z, rows, cols, rad, n_azimuths)
        med = np.nanmedian(np.where(good, rho, np.nan), axis=1)
        # Crests far from the typical one are neighbours' rims or terrain, not this rim.
        w = (good & (np.abs(rho - med[:, None]) < 0.25 * med[:, None])).astype(np.float64)
        dist = rho * rad[:, None]
        dr = -dist * np.sin(prof.azimuths)[None, :]
        dc = dist * np.cos(prof.azimuths)[None, :]
        a, b, r_fit = _circle_fit(dr, dc, w)
        usable = (w.sum(axis=1) >= 0.25 * n_azimuths) & np.isfinite(r_fit)
        usable &= (np.hypot(a, b) < 0.5 * rad) & (r_fit > 0.6 * rad) & (r_fit < 1.6 * rad)
        rows = np.where(usable, rows + a, rows)
        cols = np.where(usable, cols + b, cols)
        rad = np.where(usable, r_fit, rad)

    prof, rho, relief, good, ok, rough = _assess(z, rows, cols, rad, n_azimuths)
    coverage = ok.mean(axis=1)
    n_ok = np.maximum(ok.sum(axis=1), 1)
    frac_good = good.sum(axis=1) / n_ok
    with np.errstate(invalid="ignore", divide="ignore"):
        r_good = np.where(good, rho, np.nan)
        med = np.nanmedian(r_good, axis=1)
        spread = np.nanmedian(np.abs(r_good - med[:, None]), axis=1) / med
        depth = np.nanmedian(np.where(good, relief, np.nan), axis=1)
        snr = depth / (rough + 1e-12 * (np.abs(depth) + 1.0))
    round_term = np.clip(1.0 - np.nan_to_num(spread, nan=1.0) / 0.12, 0.0, 1.0)
    snr_term = 1.0 - np.exp(-np.clip(np.nan_to_num(snr), 0.0, None) / 3.0)
    score_term = np.clip(np.asarray(score, dtype=np.float64) / 0.4, 0.0, 1.0)
    conf = frac_good * round_term * snr_term * np.sqrt(score_term)
    return Verified(rows, cols, rad, np.clip(conf, 0.0, 1.0), coverage)
