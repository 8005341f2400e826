"""Rim-crest location on radial profiles and iterative circle refinement of crater centres."""

from __future__ import annotations

import warnings
from dataclasses import dataclass, replace

import numpy as np
import pandas as pd

from ._detrend import detrend_profiles
from ._geometry import fit_circle, interp_last
from ._validate import as_centres, as_dem, as_spacing
from .profiles import PolarSampler, sample_polar, sample_radial_profiles

__all__ = ["Crest", "find_crest", "find_inner_crest", "inner_summit_index",
           "sharpen_crest", "refine_craters", "detrended_profiles", "profile_grid",
           "n_radii_for", "R_MAX"]

#: Outer profile radius (crater radii) and bounds on radial samples per profile: a batch
#: samples every ~0.35 px of its largest crater, between 41 (dr = 0.0625 R) and 121 (0.021 R).
R_MAX = 2.5
N_RADII = (41, 121)
#: Minimum share of azimuths with a valid crest for a usable measurement (common practice).
MIN_COVERAGE = 0.5
ORDER = 1


@dataclass(frozen=True)
class Crest:
    """Rim crest per azimuth.

    Attributes
    ----------
    r_norm : ndarray, shape (n, n_az)
        Crest radius / crater radius (sub-sample, parabolic peak); NaN where not found.
    z : ndarray, shape (n, n_az)
        Detrended crest elevation; NaN where not found.
    """

    r_norm: np.ndarray
    z: np.ndarray


def _subsample_peak(sub, k, r_norm, sel):
    """Crest at window index ``k`` refined by a parabola through its neighbours -> Crest.

    A crest on the window's edge, or next to nodata, is rejected (NaN).
    """
    filled = np.where(np.isfinite(sub), sub, -np.inf)
    top = np.take_along_axis(filled, k[..., None], -1)[..., 0]
    inside = (k > 0) & (k < sel.size - 1)
    kc = np.clip(k, 1, sel.size - 2)
    zm = np.take_along_axis(sub, (kc - 1)[..., None], -1)[..., 0]
    z0 = np.take_along_axis(sub, kc[..., None], -1)[..., 0]
    zp = np.take_along_axis(sub, (kc + 1)[..., None], -1)[..., 0]
    with np.errstate(invalid="ignore", divide="ignore"):
        den = zm - 2.0 * z0 + zp
        off = np.where(den < 0, 0.5 * (zm - zp) / den, 0.0)
    off = np.clip(off, -0.5, 0.5)
    dr = r_norm[sel[1]] - r_norm[sel[0]]  # the window part of the grid must be uniform
    r_c = r_norm[sel[0]] + (kc + off) * dr
    z_c = z0 - 0.25 * (zm - zp) * off
    good = inside & np.isfinite(top) & np.isfinite(zm) & np.isfinite(zp)
    return Crest(np.where(good, r_c, np.nan), np.where(good, z_c, np.nan))


def find_crest(zd, r_norm, window=(0.6, 1.6)):
    """Highest detrended elevation on each azimuth inside ``window`` (crater radii).

    A crest on the window's edge is rejected (the maximum is not a crest there). The peak
    is refined to sub-sample position with a parabola through the three top samples.

    Parameters
    ----------
    zd : ndarray, shape (n, n_az, n_r)
        Detrended profiles.
    r_norm : ndarray, shape (n_r,)
        Uniform radii (crater radii).
    window : (float, float)
        Search range in crater radii.

    Returns
    -------
    Crest
    """
    sel = np.flatnonzero((r_norm >= window[0]) & (r_norm <= window[1]))
    sub = zd[:, :, sel]
    k = np.argmax(np.where(np.isfinite(sub), sub, -np.inf), axis=-1)
    return _subsample_peak(sub, k, r_norm, sel)


#: Inner-crest rule of the refinement (:func:`find_inner_crest`): a local maximum inside the
#: highest point of the window is the rim crest when it reaches this share of the window's
#: relief (highest point above the low inside it) ...
INNER_CREST_SHARE = 0.85
#: ... and the profile dips by at least this share of that relief between it and the highest
#: point (a separate summit, not a noise ripple on the upper wall). Choices made here, checked
#: on synthetic scenes (benchmarks/bench_detection.py) and the lunar named craters
#: (tests/test_realdata_survey.py).
INNER_CREST_DIP = 0.05


def inner_summit_index(sub, share=INNER_CREST_SHARE, dip=INNER_CREST_DIP):
    """Index along the last axis of the innermost prominent summit (see :func:`find_inner_crest`).

    Parameters
    ----------
    sub : ndarray, shape (..., m)
        Profiles over the search window, NaN for no data.
    share, dip : float
        Height and separation of an inner summit, as shares of the window's relief.

    Returns
    -------
    ndarray of int, shape (...)
        The highest point's index where no inner summit qualifies.
    """
    fin = np.isfinite(sub)
    filled = np.where(fin, sub, -np.inf)
    top_k = np.argmax(filled, axis=-1)
    top = np.take_along_axis(filled, top_k[..., None], -1)[..., 0]
    idx = np.arange(sub.shape[-1])
    upto = fin & (idx <= top_k[..., None])
    col = np.where(upto, sub, np.inf)
    # Lowest point from each sample to the highest point (nodata is no dip) ...
    col = np.minimum.accumulate(col[..., ::-1], axis=-1)[..., ::-1]
    low = col[..., 0]
    need = (top - low)[..., None]
    # ... and a summit's col is the lowest point after it: interior samples only (an edge sample
    # is no summit).
    mid = sub[..., 1:-1]
    with np.errstate(invalid="ignore"):
        summit = (mid >= sub[..., :-2]) & (mid > sub[..., 2:]) & (idx[1:-1] < top_k[..., None])
        summit &= (mid - low[..., None] >= share * need) & (mid - col[..., 2:] >= dip * need)
    summit = np.concatenate([np.zeros(summit.shape[:-1] + (1,), bool), summit], axis=-1)
    return np.where(summit.any(-1), np.argmax(summit, axis=-1), top_k)


def find_inner_crest(zd, r_norm, window=(0.6, 1.6), share=INNER_CREST_SHARE, dip=INNER_CREST_DIP):
    """Innermost prominent summit on each azimuth inside ``window`` (crater radii).

    Going outward from the crater floor, the rim crest is the first summit that is nearly as
    high as the highest point of the window: a local maximum reaching ``share`` of the relief
    (window maximum above the lowest point inside it) that is separated from the maximum by a
    dip of at least ``dip`` of the relief. Where there is no such summit this is the highest
    point, as in :func:`find_crest`. On a degraded crater in rough terrain, the highest point
    within 1.6 radii is often outer terrain (a neighbour's rim, an outer ring, the rim flank
    of an older basin) standing a little above the rim; taking it made the circle fit creep
    outwards (lunar complex craters of 180-540 km measured 15-20 % large on LOLA LDEM_4).
    A fresh crater's rim, a single summit, is unaffected. This is the topographic-prominence
    idea of separating summits by the depth of the col between them (common practice in
    geomorphometry).

    Parameters
    ----------
    zd : ndarray, shape (n, n_az, n_r)
        Detrended profiles.
    r_norm : ndarray, shape (n_r,)
        Uniform radii (crater radii) over the window.
    window : (float, float)
        Search range in crater radii.
    share, dip : float
        Height and separation of an inner summit, as shares of the relief.

    Returns
    -------
    Crest
    """
    sel = np.flatnonzero((r_norm >= window[0]) & (r_norm <= window[1]))
    sub = zd[:, :, sel]
    k = inner_summit_index(sub, share, dip)
    return _subsample_peak(sub, k, r_norm, sel)


def _quadratic(t, z):
    """Coefficients (c2, c1, c0) of the parabola through three points (divided differences)."""
    (t0, t1, t2), (z0, z1, z2) = t, z
    f01 = (z1 - z0) / (t1 - t0)
    f12 = (z2 - z1) / (t2 - t1)
    c2 = (f12 - f01) / (t2 - t0)
    c1 = f01 - c2 * (t0 + t1)
    return c2, c1, z0 - c1 * t0 - c2 * t0 * t0


def stencil(radius_px):
    """Inner and outer offsets (crater radii) of the crest-sharpening samples, shape (n, 1)."""
    px = 1.0 / np.asarray(radius_px, dtype=float)[:, None]  # one pixel in crater radii
    a = np.maximum(0.05, px)
    return a, a + np.maximum(0.1, 2.0 * px)


def sharpen_crest(zd, r_norm, crest, radius_px):
    """Move each crest to where the inner-wall and outer-flank curves, extrapolated, meet.

    Sampling blurs a sharp rim over about a pixel, and because the inner wall is steeper
    than the flank the blurred maximum sits outside the true crest (by ~0.35 px for
    d/D = 0.2; derived for a tent kernel). A parabola through three samples 1-3 px (at
    least 0.05-0.15 R) inside the maximum and another outside, beyond the blur, are
    extrapolated to where they meet. The shift is kept only when it stays within the blur
    zone; for a rounded, resolved crest the two curves meet near the maximum anyway.

    Returns
    -------
    Crest
        Sharpened crest radius (crater radii) and height.
    """
    dr = r_norm[1] - r_norm[0]  # r_norm must be uniform over the stencil's reach
    a, b = stencil(radius_px)
    mid = 0.5 * (a + b)
    rc = crest.r_norm
    offs = (-b, -mid, -a, a, mid, b)
    idx = (np.stack([rc + o for o in offs], -1) - r_norm[0]) / dr
    zs = np.moveaxis(interp_last(zd, idx), -1, 0)
    with np.errstate(invalid="ignore", divide="ignore", over="ignore"):
        q_in = _quadratic(offs[:3], zs[:3])
        q_out = _quadratic(offs[3:], zs[3:])
        A2, A1, A0 = (u - v for u, v in zip(q_in, q_out, strict=True))
        disc = np.sqrt(A1 * A1 - 4 * A2 * A0)
        roots = np.stack([(-A1 + disc) / (2 * A2), (-A1 - disc) / (2 * A2), -A0 / A1])
        roots = np.where(np.isfinite(roots), roots, np.inf)
        # The linear root stands in only when the curvature difference vanishes.
        lin = np.abs(A2) < 1e-9 * (np.abs(A1) + 1e-300)
        roots[:2] = np.where(lin, np.inf, roots[:2])
        roots[2] = np.where(lin, roots[2], np.inf)
        t = np.take_along_axis(roots, np.argmin(np.abs(roots), 0)[None], 0)[0]
        ok = np.isfinite(t) & (np.abs(t) < a)
        # Height where the curves meet restores the crest the blur shaved off. Bounded to
        # the rise of the inner wall over a quarter pixel: a resolved, rounded crest (whose
        # extrapolated flanks meet above it) then gains almost nothing.
        z_x = q_in[0] * t * t + q_in[1] * t + q_in[2]
        rise = np.abs(crest.z - zs[2]) / a * 0.25 / radius_px[:, None]
        z_new = np.clip(z_x, crest.z, crest.z + rise)
    return Crest(np.where(ok, rc + t, rc), np.where(ok & np.isfinite(z_new), z_new, crest.z))


def _crest_points(crest, azimuths, radius_px):
    """Crest points in pixel offsets (x east = +col, y north = -row)."""
    rp = crest.r_norm * radius_px[:, None]
    return rp * np.cos(azimuths)[None, :], rp * np.sin(azimuths)[None, :]


#: Crest points whose radius differs from the crater's median crest radius by more than this
#: fraction are not used in the circle fit (neighbours' rims, high terrain; common practice).
OUTLIER_FRACTION = 0.25

#: Craters are batched by radius class (8 per octave) and every grid a batch uses is set by
#: its class edges, never by its members: a crater's result then does not depend on which
#: other craters share the call.
CLASSES_PER_OCTAVE = 8


def radius_class_edges(radius_px):
    """Lower and upper radius (px) of the class of the largest member of a batch."""
    big = float(np.max(radius_px)) if np.size(radius_px) else 1.0
    k = np.floor(np.log2(max(big, 1e-3)) * CLASSES_PER_OCTAVE)
    return 2.0 ** (k / CLASSES_PER_OCTAVE), 2.0 ** ((k + 1) / CLASSES_PER_OCTAVE)


def radius_batches(radius_px, chunk: int) -> list:
    """Index arrays of craters grouped by radius class, each split into pieces of <= ``chunk``."""
    rad = np.asarray(radius_px, dtype=float)
    if rad.size == 0:
        return [np.zeros(0, dtype=np.int64)]
    cls = np.floor(np.log2(np.maximum(rad, 1e-3)) * CLASSES_PER_OCTAVE).astype(np.int64)
    out = []
    for k in np.unique(cls):
        idx = np.flatnonzero(cls == k)
        out.extend(np.array_split(idx, max(1, int(np.ceil(idx.size / chunk)))))
    return out


def n_radii_for(radius_px):
    """Radial samples for a batch: ~0.35 px steps at its class's upper radius, within N_RADII."""
    big = radius_class_edges(radius_px)[1]
    return int(np.clip(np.ceil(R_MAX * big / 0.35) + 1, *N_RADII))


def profile_grid(radius_px, n_azimuths):
    """``(azimuths, r_norm)`` of the profiles :func:`detrended_profiles` samples for a batch."""
    return (np.linspace(0.0, 2.0 * np.pi, n_azimuths, endpoint=False),
            np.linspace(0.0, R_MAX, n_radii_for(radius_px)))


def detrended_profiles(z, rows, cols, radius_px, n_azimuths, mask=None):
    """Sample and detrend one batch -> (RadialProfiles, detrended z, plane coefficients).

    ``mask`` (bool, shape (n, n_az, n_r) on :func:`profile_grid`), if given, marks samples
    to treat as no data (NaN) before the regional plane is fitted.
    """
    prof = sample_radial_profiles(z, rows, cols, radius_px, n_azimuths=n_azimuths,
                                  n_radii=n_radii_for(radius_px), r_max_factor=R_MAX)
    if mask is not None:
        prof = replace(prof, z=np.where(mask, np.nan, prof.z))
    zd, coef = detrend_profiles(prof.z, prof.r_norm, prof.azimuths, prof.radius_px)
    return prof, zd, coef


def refine_craters(z, spacing_m, rows, cols, radius_px, *, n_azimuths=64, n_iter=3,
                   window=(0.6, 1.6), chunk=2000):
    """Refine crater centres and rim-crest radii by circle fits to the rim crest.

    On each of ``n_azimuths`` detrended radial profiles the rim crest is the innermost
    summit within ``window`` (crater radii) of the current centre that is nearly as high as
    the window's highest point (:func:`find_inner_crest`; the highest point itself on a
    single-crested rim); a Kasa (1976) circle fitted to those crest points gives the new
    centre and radius. Repeated ``n_iter`` times. A
    crater whose fit fails, or moves by more than its radius, keeps its last good values.

    Parameters
    ----------
    z : ndarray, shape (H, W)
        Elevation in metres, NaN for no data.
    spacing_m : float or ndarray, shape (n,)
        Ground pixel size in metres (validated; the refinement itself works in pixels).
    rows, cols, radius_px : array_like, shape (n,)
        First-guess centres (fractional pixel indices) and radii (pixels).
    n_azimuths : int
        Profiles per crater.
    n_iter : int
        Refinement passes.
    window : (float, float)
        Crest search range in radii of the current guess.
    chunk : int
        Craters per vectorised batch (bounds memory).

    Returns
    -------
    pandas.DataFrame
        Columns ``row, col, radius_px`` (refined), ``rim_coverage`` (share of azimuths with
        a crest on valid data, last pass), ``ok`` (bool) and ``reason`` ("ok",
        "no_valid_data", "no_rim_crest", "low_rim_coverage", "fit_diverged").

    References
    ----------
    Kasa I. (1976) IEEE Trans. Instrum. Meas. 25(1):8-14.

    Examples
    --------
    >>> import numpy as np
    >>> yy, xx = np.mgrid[0:80, 0:80]
    >>> r = np.hypot(yy - 40.0, xx - 41.0)
    >>> z = np.where(r < 15, (r / 15) ** 2, np.maximum(r / 15, 1) ** -3)  # rim at r = 15 px
    >>> out = refine_craters(z, 1.0, [38.0], [43.0], [12.0])
    >>> [round(float(out.loc[0, k])) for k in ("row", "col", "radius_px")]
    [40, 41, 15]
    """
    z = as_dem(z)
    r0, c0, rad0 = as_centres(rows, cols, radius_px)
    as_spacing(spacing_m, r0.size)
    # Batches of one radius class share a radial grid set by the class (see radius_batches).
    batches = radius_batches(rad0, chunk)
    order = np.concatenate(batches)
    z = PolarSampler(z)  # no data found once for every batch and pass
    parts = [_refine_chunk(z, r0[idx], c0[idx], rad0[idx], n_azimuths, n_iter, window) for idx in batches]
    out = pd.concat(parts, ignore_index=True)
    result = out.copy()
    result.iloc[order] = out.to_numpy()
    return result.astype(out.dtypes.to_dict())


def _refine_chunk(z, rows, cols, rad, n_azimuths, n_iter, window):
    rows, cols, rad = rows.copy(), cols.copy(), rad.copy()
    n = rows.size
    diverged = np.zeros(n, dtype=bool)
    coverage = np.zeros(n)
    has_data = np.zeros(n, dtype=bool)
    az = np.linspace(0.0, 2.0 * np.pi, n_azimuths, endpoint=False)
    # Only the crest window (uniform) and a few rings of the plane annulus are needed here.
    # ~0.25 px steps across the window: a coarse grid biases the parabolic peak of an
    # asymmetric (steep wall, gentle flank) crest outwards.
    # The sharpening stencil reaches up to b inside the window's lower edge.
    lo_edge, hi_edge = radius_class_edges(rad)
    lo = max(0.0, window[0] - float(np.max(stencil(np.array([lo_edge]))[1], initial=0.15)) - 0.02)
    n_win = (window[1] - lo) * hi_edge / 0.25
    grid = np.linspace(lo, window[1], int(np.clip(np.ceil(n_win), 12, 500)))
    grid = np.concatenate([grid, np.linspace(1.5, R_MAX, 9)[np.linspace(1.5, R_MAX, 9) > window[1]]])
    for _ in range(n_iter):
        if n == 0:
            break
        zp = sample_polar(z, rows, cols, rad, az, grid, order=ORDER)
        zd, _ = detrend_profiles(zp, grid, az, rad)
        crest = find_inner_crest(zd, grid, window)
        crest = sharpen_crest(zd, grid, crest, rad)
        coverage = np.isfinite(crest.r_norm).mean(axis=1)
        has_data = np.isfinite(zp).any(axis=(1, 2))
        # Crests far from the crater's typical crest radius are a neighbour's rim or high
        # terrain, not this rim: left out of the circle fit (as in detection's verification).
        with np.errstate(invalid="ignore"), warnings.catch_warnings():
            warnings.simplefilter("ignore", RuntimeWarning)  # all-NaN rows stay NaN
            med = np.nanmedian(crest.r_norm, axis=1, keepdims=True)
        inlier = np.abs(crest.r_norm - med) <= OUTLIER_FRACTION * med
        x, y = _crest_points(Crest(np.where(inlier, crest.r_norm, np.nan), crest.z), az, rad)
        xc, yc, rf = fit_circle(x, y)
        good = (np.isfinite(rf) & (coverage >= MIN_COVERAGE) & ~diverged
                & (np.hypot(xc, yc) < rad) & (rf > 0.5 * rad) & (rf < 2.0 * rad))
        diverged |= np.isfinite(rf) & (coverage >= MIN_COVERAGE) & ~good
        rows = np.where(good, rows - yc, rows)
        cols = np.where(good, cols + xc, cols)
        rad = np.where(good, rf, rad)
    reason = np.where(coverage == 0, np.where(has_data, "no_rim_crest", "no_valid_data"),
                      np.where(coverage < MIN_COVERAGE, "low_rim_coverage",
                               np.where(diverged, "fit_diverged", "ok")))
    return pd.DataFrame({"row": rows, "col": cols, "radius_px": rad, "rim_coverage": coverage,
                         "ok": reason == "ok", "reason": reason.astype(object)})
