"""Degradation state: topographic diffusion of a fresh profile fitted to the observed one.

The model of Fassett & Thomson (2014): a fresh crater of the body's published shape
(:func:`morpho.shapes.fresh_impact_profile`) relaxes by ``dh/dt = kappa laplacian(h)``
(:func:`morpho.shapes.diffuse_radial_profile`). Working in units of the crater radius the
diffused shape depends only on ``kappa t / D^2``, so one table of model profiles per
diameter bin serves every crater and every bootstrap replicate.
"""

from __future__ import annotations

from functools import lru_cache

import numpy as np

from ..bodies import Body, get_body
from ..shapes import diffuse_radial_profile, fresh_impact_profile
from ._detrend import plain_level
from ._geometry import nanquantile_last, replicate_std
from ._refine import find_crest, sharpen_crest

__all__ = ["fit_degradation", "degradation_columns", "KT_GRID"]

#: Trial values of kappa t / D^2: 0 plus log-spaced 1e-5 .. 0.25 (Fassett & Thomson 2014:
#: at ~0.18 a crater keeps ~7 % of its depth and is hardly recognisable).
KT_GRID = np.concatenate([[0.0], np.geomspace(1e-5, 0.25, 73)])
#: Radii (crater radii) compared between model and observation.
FIT_RANGE = (0.0, 1.5)
#: Relative width of the log-diameter bins sharing one model table (fresh d/D changes by
#: < 1.5 % across a bin even on the complex branch, d ~ D^0.3).
_BIN = 0.05
#: Radii of the model profiles (crater radii), beyond the 5 R flank taper of morpho.shapes.
_FINE = np.linspace(0.0, 6.0, 601)
_FINE.setflags(write=False)


def _model_table(diameter_m, body, r_norm):
    """Model profiles for every trial ``kappa t / D0^2`` in the units of the measurement.

    Diffusion rounds the rim and moves its crest outwards, and the measurement normalises
    radii by the crest it finds. So each diffused profile is rescaled to its own crest
    radius ``c`` (radii ``r_norm * c``, heights / ``c``), then levelled on the annulus like
    the data. Returns ``(table, c)`` with shapes (k, n_r) and (k,).
    """
    fine = _FINE
    fresh = fresh_impact_profile(fine, diameter_m, body) / diameter_m
    # In radius units kappa t / R^2 = 4 kappa t / D^2.
    diffused = diffuse_radial_profile(fine, fresh, 4.0 * KT_GRID)
    # Crest found as the measurement finds it (maximum, then the sharpening stencil at
    # its resolution-independent size), so both sides normalise radii the same way.
    found = find_crest(diffused[None], fine, (0.6, 2.0))
    crest = sharpen_crest(diffused[None], fine, found, np.array([1e6])).r_norm[0]
    crest = np.where(np.isfinite(crest), crest, 1.0)
    model = np.stack([np.interp(r_norm * c, fine, row) / c for row, c in zip(diffused, crest, strict=True)])
    return model - plain_level(model, r_norm)[:, None], crest


def warm_up() -> None:
    """Compute the diffusion operator every model table uses, once per process.

    Its eigen-decomposition (1203 radii) takes 0.1-0.2 s whatever the DEM; a survey does it
    while it sets up (imports), so that the tiles' time grows with their area only.
    """
    diffuse_radial_profile(_FINE, np.zeros_like(_FINE), 4.0 * KT_GRID)


@lru_cache(maxsize=512)
def _cached_table(key: int, body: Body, r_bytes: bytes):
    """Model table of one diameter bin; computing one costs ~0.1 s, so bins are memoised
    per process (every tile and bootstrap replicate of a survey reuses them)."""
    r_norm = np.frombuffer(r_bytes, dtype=np.float64)
    table, crest = _model_table(float(np.exp(key * _BIN)), body, r_norm)
    table.setflags(write=False)
    crest.setflags(write=False)
    return table, crest


def _best_kt(misfit, crest):
    """Grid minimum of ``misfit`` (..., k) refined by a parabola in log(kt).

    Returns ``(kappa t / D^2 per measured D, crest shift c)``, shapes (...) each.
    """
    k = np.argmin(np.where(np.isfinite(misfit), misfit, np.inf), axis=-1)
    lg = np.log(np.where(KT_GRID > 0, KT_GRID, KT_GRID[1] / 3.0))
    kc = np.clip(k, 1, KT_GRID.size - 2)
    y0, y1, y2 = (np.take_along_axis(misfit, (kc + o)[..., None], -1)[..., 0] for o in (-1, 0, 1))
    x0, x1, x2 = lg[kc - 1], lg[kc], lg[kc + 1]
    with np.errstate(invalid="ignore", divide="ignore"):
        num = (x1 - x0) ** 2 * (y1 - y2) - (x1 - x2) ** 2 * (y1 - y0)
        den = (x1 - x0) * (y1 - y2) - (x1 - x2) * (y1 - y0)
        x = x1 - 0.5 * num / den
    x = np.where(np.isfinite(x) & (den != 0), np.clip(x, x0, x2), x1)
    best = np.where((k == 0) | (k == KT_GRID.size - 1), KT_GRID[k], np.exp(x))
    # kappa t is one number; per measured (crest) diameter D = c * D0 the ratio is / c^2.
    c = np.interp(np.log(np.maximum(best, KT_GRID[1] / 3.0)), lg, crest)
    found = np.isfinite(misfit).any(-1)
    return np.where(found, best / (c * c), np.nan), np.where(found, c, np.nan)


def _bins(dia):
    ok = np.isfinite(dia) & (dia > 0)
    out = np.full(dia.shape, -1)
    out[ok] = np.round(np.log(dia[ok]) / _BIN).astype(int)
    return out


def _fit_pass(obs_all, dia_shape, body, r_norm, zone):
    """Best fit per crater/replicate with model tables chosen by ``dia_shape`` bins."""
    out = np.full(obs_all.shape[:2], np.nan)
    shift = np.full(obs_all.shape[:2], np.nan)
    bins = _bins(dia_shape)
    for key in np.unique(bins[bins >= 0]):
        sel = bins == key
        table, crest = _cached_table(int(key), body, np.ascontiguousarray(r_norm, np.float64).tobytes())
        table = table[:, zone]  # (k, m)
        obs = obs_all[sel]  # (s, b, m)
        good = np.isfinite(obs)
        g = good.astype(float)
        o = np.where(good, obs, 0.0)
        # sum_m g (o - t)^2 expanded into matrix products: no (s, b, k, m) temporary.
        sse = (o * o).sum(-1)[..., None] - 2.0 * (o @ table.T) + g @ (table * table).T
        with np.errstate(invalid="ignore", divide="ignore"):
            misfit = np.maximum(sse, 0.0) / good.sum(-1)[..., None]
        misfit = np.where(good.sum(-1)[..., None] >= 5, misfit, np.nan)
        out[sel], shift[sel] = _best_kt(misfit, crest)
    return out, shift


def fit_degradation(r_norm, profile_m, diameter_m, body: str | Body):
    """Fit ``kappa t / D^2`` of the diffused fresh crater to observed mean profiles.

    Parameters
    ----------
    r_norm : ndarray, shape (n_r,)
        Radii in rim-crest radii (uniform, from 0 to >= 2.5).
    profile_m : ndarray, shape (n, n_r) or (n, b, n_r)
        Azimuth-averaged elevation (m) relative to the plain fitted by :func:`~morpho.morphometry._detrend.fit_annulus_plane`;
        an optional middle axis holds bootstrap replicates of each crater.
    diameter_m : ndarray, shape (n,)
        Rim-crest diameters in metres (choose the fresh shape; NaN -> NaN result).
    body : str or Body
        Body whose fresh-crater laws give the initial profile.

    Returns
    -------
    ndarray, shape (n,) or (n, b)
        Best-fitting ``kappa t / D^2`` (dimensionless) with ``D`` the measured (present)
        rim-crest diameter, so ``kappa t = value * D**2``; least squares over 0-1.5 R.
        Model tables are shared by craters within 5 % in diameter.
        Values at the grid ends mean "fresher than the model" or "beyond resolution".
        Resolution limit: the diffusion length ``sqrt(2 kappa t)`` must span ~3 pixels to
        stand out from the sampling blur, so values below ~``4.5 / pixels_per_diameter**2``
        are not resolved (tested: 20 % recovery at 0.002 for 50 px and 0.001 for 100 px
        per diameter).

    References
    ----------
    Fassett C.I., Thomson B.J. (2014) Crater degradation on the lunar maria: topographic
    diffusion and the rate of erosion on the Moon. JGR Planets 119:2255-2271,
    doi:10.1002/2014JE004698.
    """
    b = body if isinstance(body, Body) else get_body(body)
    prof = np.asarray(profile_m, dtype=float)
    dia = np.asarray(diameter_m, dtype=float)
    squeeze = prof.ndim == 2
    if squeeze:
        prof = prof[:, None, :]
    zone = (r_norm >= FIT_RANGE[0]) & (r_norm <= FIT_RANGE[1])
    obs_all = prof[..., zone] / dia[:, None, None]
    # Pass 1 takes the fresh shape of the measured diameter; diffusion moved the crest out
    # by c, so pass 2 takes the shape of the initial diameter D / c (matters for complex
    # craters, whose fresh shape changes with D).
    out, shift = _fit_pass(obs_all, dia, b, r_norm, zone)
    initial = dia / nanquantile_last(shift, 0.5)
    redo = np.isfinite(initial) & (_bins(initial) != _bins(dia))
    if redo.any():
        out[redo], _ = _fit_pass(obs_all[redo], initial[redo], b, r_norm, zone)
    return out[:, 0] if squeeze else out


def degradation_columns(mean_prof, r_norm, diameter_m, body, boot_prof=None):
    """``kappa_t_over_d2`` and its bootstrap error for a batch (used by measure_craters)."""
    kt = fit_degradation(r_norm, mean_prof, diameter_m, body)
    err = np.full(kt.shape, np.nan)
    if boot_prof is not None and boot_prof.shape[1] > 1:
        err = replicate_std(fit_degradation(r_norm, boot_prof, diameter_m, body))
    return {"kappa_t_over_d2": kt, "kappa_t_over_d2_err": err}
