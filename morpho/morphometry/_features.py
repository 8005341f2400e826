"""Morphometric features from crest points and azimuth-averaged profiles (batched kernels).

Two kernels, each taking arrays with any leading batch shape (craters, or craters x
bootstrap replicates) so the same code gives the estimate and its bootstrap spread:

* :func:`azimuth_features` - from per-azimuth crest quantities (circle/ellipse fits,
  rim elevation, outline harmonics, crest shape);
* :func:`profile_features` - from the mean detrended profile ``m(r / R)`` (floor, walls,
  peak, pit, bowl exponent, volume, flank).

Elevations are metres relative to the robust annulus plane (the surrounding plain).
"""

from __future__ import annotations

import numpy as np

# One definition of the rings, shared with the data dictionary that names their columns.
from ..dictionary._morphometry import RING_COLUMNS, RING_ORDERS, RING_RADII
from ._geometry import (
    fit_circle,
    fit_ellipse,
    harmonic_amplitudes,
    interp_last,
    nanquantile_last,
    wmad_relative,
    wquantile,
)

__all__ = ["azimuth_features", "profile_features", "crest_shape", "bowl_offset", "ring_harmonics",
           "RIM_QUANTILE", "FLOOR_LEVEL", "RING_COLUMNS", "RING_RADII", "RING_ORDERS"]

#: Rim elevation = this quantile of per-azimuth crest elevations (Breton et al. 2019 use the
#: 60th percentile of rim elevations).
RIM_QUANTILE = 0.6
#: Floor edge: where the mean profile rises this share of the depth above the floor.
FLOOR_LEVEL = 0.05
#: Half-width of the crest-shape stencil, in crater radii.
CREST_STEP = 0.1
#: Central peak / pit counted as present above this share of the depth (choice made here).
FEATURE_THRESHOLD = 0.1
#: Radius (crater radii) within which a central pit is sought.
PIT_ZONE = 0.2
#: Fewest valid azimuths, as a share of the profiles, for a ring's harmonics (choice made here).
RING_MIN_SHARE = 0.25


def crest_shape(zd, r_norm, crest_r, crest_z, radius_m):
    """Per-azimuth crest curvature (x D) and crest angle from a 3-point stencil of +-0.1 R.

    Returns
    -------
    curvature_norm, angle_deg : ndarray, shape (n, n_az)
        ``-z'' * D`` (dimensionless, > 0 for a crest) and the angle (degrees) between the
        inner-wall and outer-flank secants through the crest (180 = flat).
    """
    dr = r_norm[1] - r_norm[0]
    idx = np.stack([crest_r - CREST_STEP, crest_r + CREST_STEP], -1) / dr
    z_in, z_out = np.moveaxis(interp_last(zd, idx), -1, 0)
    h = CREST_STEP * radius_m[:, None]
    s_in = (crest_z - z_in) / h
    s_out = (crest_z - z_out) / h
    curv = -(z_in - 2.0 * crest_z + z_out) / (h * h) * 2.0 * radius_m[:, None]
    angle = 180.0 - np.degrees(np.arctan(s_in)) - np.degrees(np.arctan(s_out))
    return curv, angle


def azimuth_features(theta, crest_r_m, crest_z, curv, angle, w=None):
    """Features from per-azimuth rim-crest quantities.

    Parameters
    ----------
    theta : ndarray, shape (n_az,)
        Azimuths (radians, counter-clockwise from east).
    crest_r_m : ndarray, shape (n, n_az)
        Crest distance from the refined centre, metres (NaN = no crest).
    crest_z : ndarray, shape (n, n_az)
        Crest elevation above the plain, metres.
    curv, angle : ndarray, shape (n, n_az)
        Output of :func:`crest_shape`.
    w : ndarray, shape (b, n_az), optional
        Bootstrap counts of each azimuth per replicate.

    Returns
    -------
    dict of str -> ndarray, shape (n,) or (n, b)
    """
    x = crest_r_m * np.cos(theta)
    y = crest_r_m * np.sin(theta)
    _, _, radius = fit_circle(x, y, w)
    major, minor, az = fit_ellipse(x, y, w)
    amp = harmonic_amplitudes(theta, crest_r_m, 8, w)
    with np.errstate(invalid="ignore", divide="ignore"):
        rel = amp[..., 2:9] / amp[..., :1]
        power = (rel * rel).sum(-1)
        zamp = harmonic_amplitudes(theta, crest_z, 1, w)
        out = {
            "diameter_m": 2.0 * radius,
            "ellipse_major_m": major,
            "ellipse_minor_m": minor,
            "ellipse_azimuth_deg": az,
            "ellipticity": major / minor,
            "rim_z": wquantile(crest_z, RIM_QUANTILE, w),
            "outline_irregularity": np.sqrt(power),
            "polygonality_index": (rel[..., 1:] ** 2).max(-1) / power,
            "rim_height_asymmetry": zamp[..., 1] / zamp[..., 0],
            "rim_height_variation": wmad_relative(crest_z, w),
            "outline_spread": wmad_relative(crest_r_m, w),
            "rim_curvature_norm": wquantile(curv, 0.5, w),
            "rim_crest_angle_deg": wquantile(angle, 0.5, w),
        }
    for k in range(2, 9):
        out[f"rim_harmonic_{k}"] = rel[..., k - 2]
    return out


#: Bowl offset: centroid of the cavity below half its depth, within this radius (crater radii).
BOWL_ZONE = 0.8


def bowl_offset(zd, r_norm, theta, w=None):
    """Offset of the deep part of the cavity from the rim-crest centre, in crater radii.

    The centroid (area-weighted, r dr dtheta) of the cavity below half its depth, inside
    0.8 R; depth is measured from the plain (0 m after detrending) down to the lowest
    point of the azimuth-averaged interior. 0 for an axisymmetric bowl; an off-centre
    deepest point moves it towards that side.

    Parameters
    ----------
    zd : ndarray, shape (n, n_az, n_r)
        Detrended profiles (metres above the plain), NaN = no data.
    r_norm : ndarray, shape (n_r,)
    theta : ndarray, shape (n_az,)
    w : ndarray, shape (b, n_az), optional
        Bootstrap counts of each azimuth.

    Returns
    -------
    ndarray, shape (n,) or (n, b)
    """
    sel = r_norm <= BOWL_ZONE
    z = zd[:, :, sel]
    r = r_norm[sel]
    ok = np.isfinite(z)
    with np.errstate(invalid="ignore", divide="ignore"):
        mean = np.where(ok, z, 0.0).sum(1) / ok.sum(1)  # azimuth-averaged interior (n, n_r)
    low = np.where(np.isfinite(mean), mean, np.inf).min(-1)  # its lowest point
    half = np.where(np.isfinite(low) & (low < 0), 0.5 * low, np.nan)
    dep = np.clip(half[:, None, None] - z, 0.0, None)
    dep = np.where(np.isfinite(dep), dep, 0.0) * r  # area element r dr
    s0 = dep.sum(-1)  # (n, n_az)
    s1 = (dep * r).sum(-1)
    cx, sy = s1 * np.cos(theta), s1 * np.sin(theta)
    if w is None:
        X, Y, M = cx.sum(-1), sy.sum(-1), s0.sum(-1)
    else:
        X, Y, M = cx @ w.T, sy @ w.T, s0 @ w.T
    with np.errstate(invalid="ignore", divide="ignore"):
        return np.where(M > 0, np.hypot(X, Y) / M, np.nan)


def _last_true(mask):
    """Index of the last True along the last axis (-1 where none)."""
    n = mask.shape[-1]
    rev = np.argmax(mask[..., ::-1], axis=-1)
    return np.where(mask.any(-1), n - 1 - rev, -1)


def _crossing(level, q, hi):
    """Radius index (fractional) where ``level`` falls to ``q`` going inward from index ``hi``.

    ``level`` (..., n) is the profile as a share of the depth above the floor; the result is
    the last index ``j <= hi`` with ``level <= q``, interpolated towards ``j + 1``.
    """
    n = level.shape[-1]
    pos = np.arange(n)
    mask = (level <= q) & (pos <= hi[..., None])
    j = _last_true(mask)
    jc = np.clip(j, 0, n - 2)
    l0 = np.take_along_axis(level, jc[..., None], -1)[..., 0]
    l1 = np.take_along_axis(level, (jc + 1)[..., None], -1)[..., 0]
    with np.errstate(invalid="ignore", divide="ignore"):
        f = np.clip((q - l0) / (l1 - l0), 0.0, 1.0)
    return np.where(j >= 0, jc + np.where(np.isfinite(f), f, 0.0), np.nan)


def _loglog_slope(x, y, mask):
    """Least-squares slope of log y against log x over ``mask`` (1-D); NaN if < 3 points."""
    x, y = x[mask], y[..., mask]
    ok = (y > 0) & (x > 0)
    with np.errstate(invalid="ignore", divide="ignore"):
        lx = np.where(ok, np.log(np.where(ok, x, 1.0)), 0.0)
        ly = np.where(ok, np.log(np.where(ok, y, 1.0)), 0.0)
        n = ok.sum(-1)
        mx = lx.sum(-1) / n
        my = ly.sum(-1) / n
        dx = np.where(ok, lx - mx[..., None], 0.0)
        slope = (dx * (ly - my[..., None])).sum(-1) / (dx * dx).sum(-1)
    return np.where(n >= 3, slope, np.nan)


def _floor_level(m, r_norm, interior, floor_min, depth_min):
    """Floor elevation from an area-weighted fit ``z = a + b r^2`` to the lowest 10 % of relief.

    The lowest sample alone is one or two noisy pixels near the centre. The fit uses every
    interior sample within 10 % of the depth above that minimum (a disc for a bowl, a ring
    around a central peak) and returns the fitted curve's lowest value on those radii:
    exact for a paraboloid and for a flat floor (derived).
    """
    ni = int(interior.sum())  # interior is a prefix of the radii: work on that slice only
    m, r_norm = m[..., :ni], r_norm[:ni]
    with np.errstate(invalid="ignore", divide="ignore"):
        level = (m - floor_min[..., None]) / depth_min[..., None]
    sel = np.isfinite(m) & (level <= 0.1)
    x = r_norm**2
    w = np.where(sel, np.maximum(r_norm, 0.5 * (r_norm[1] - r_norm[0])), 0.0)
    y = np.where(sel, m, 0.0)
    s0, s1, s2 = w.sum(-1), (w * x).sum(-1), (w * x * x).sum(-1)
    sy, sxy = (w * y).sum(-1), (w * x * y).sum(-1)
    with np.errstate(invalid="ignore", divide="ignore"):
        det = s0 * s2 - s1 * s1
        b = (s0 * sxy - s1 * sy) / det
        a = (sy - b * s1) / s0
        x_lo = np.where(sel, x, np.inf).min(-1)
        x_hi = np.where(sel, x, -np.inf).max(-1)
        fitted = a + b * np.where(b > 0, x_lo, x_hi)
    ok = (sel.sum(-1) >= 3) & np.isfinite(fitted) & (np.abs(det) > 0)
    return np.where(ok, fitted, floor_min)


def _central_pit(m, r_norm, rim_z):
    """Depth of a central pit and whether one is present, shape (...) each.

    Pit depth = median of the mean profile on the ring PIT_ZONE..2 PIT_ZONE minus its lowest
    value inside PIT_ZONE. Present when deeper than 10 % of the (pit-inclusive) depth and the
    ring is flat (10-90 % spread below a quarter of the pit depth; a bowl or cone is not).
    """
    inner = r_norm <= PIT_ZONE
    ring = (r_norm > PIT_ZONE) & (r_norm <= 2 * PIT_ZONE)
    low = np.where(inner & np.isfinite(m), m, np.inf).min(-1)
    vals = m[..., ring]
    med = nanquantile_last(vals, 0.5)
    spread = nanquantile_last(vals, 0.9) - nanquantile_last(vals, 0.1)
    pit = np.maximum(med - low, 0.0)
    depth_all = rim_z - np.where(r_norm <= 0.9, np.where(np.isfinite(m), m, np.inf), np.inf).min(-1)
    present = (pit > FEATURE_THRESHOLD * depth_all) & (spread < 0.25 * pit)
    return np.where(np.isfinite(pit), pit, 0.0), present


def profile_features(m, r_norm, radius_m, rim_z):
    """Features of the azimuth-averaged detrended profile.

    Parameters
    ----------
    m : ndarray, shape (..., n_r)
        Mean elevation above the plain (metres) at ``r_norm`` crater radii.
    r_norm : ndarray, shape (n_r,)
        Uniform radii from 0 (crater radii).
    radius_m : ndarray, shape (...)
        Rim-crest radius in metres (converts ``r_norm`` to metres).
    rim_z : ndarray, shape (...)
        Rim-crest elevation above the plain (from :func:`azimuth_features`).

    Returns
    -------
    dict of str -> ndarray, shape (...)
        Definitions in :mod:`morpho.dictionary._morphometry`.

    References
    ----------
    Breton S., Quantin-Nataf C., Bodin T., et al. (2019) Semi-automated crater depth
    measurements. MethodsX 6:2293-2304 (robust rim and floor levels).
    Pike R.J. (1977) Size-dependence in the shape of fresh impact craters on the Moon.
    Impact and Explosion Cratering, Pergamon, 489-509 (definitions of d, h, D).
    """
    dr = r_norm[1] - r_norm[0]
    pos = np.arange(r_norm.size)
    interior = r_norm <= 0.9
    i_crest = np.full(m.shape[:-1], int(np.searchsorted(r_norm, 1.0)))
    with np.errstate(invalid="ignore", divide="ignore"):
        # Central pit: a depression in the middle of an otherwise flat inner floor. Once
        # found, it is masked so that floor and depth refer to the floor around it.
        pit, pit_present = _central_pit(m, r_norm, rim_z)
        m = np.where(pit_present[..., None] & (r_norm <= PIT_ZONE), np.nan, m)
        m_in = np.where(interior & np.isfinite(m), m, np.inf)
        i_floor = np.argmin(m_in, axis=-1)
        floor_min = np.take_along_axis(m, i_floor[..., None], -1)[..., 0]
        floor_min = np.where(np.isfinite(m_in).any(-1), floor_min, np.nan)
        floor_z = _floor_level(m, r_norm, interior, floor_min, rim_z - floor_min)
        depth = rim_z - floor_z
        level = (m - floor_z[..., None]) / depth[..., None]
        r10, r60, r90, r_fl = (_crossing(level, q, i_crest) * dr for q in (0.1, 0.6, 0.9, FLOOR_LEVEL))
        slope_mean = np.degrees(np.arctan(0.8 * depth / ((r90 - r10) * radius_m)))
        slope_upper = np.degrees(np.arctan(0.3 * depth / ((r90 - r60) * radius_m)))

        # Floor flatness: mean |slope| on the floor relative to the mean wall gradient.
        grad = np.abs(np.gradient(m, dr, axis=-1)) / radius_m[..., None]
        on_floor = (r_norm <= r_fl[..., None]) & (level <= FLOOR_LEVEL)
        floor_grad = np.where(on_floor, grad, 0.0).sum(-1) / on_floor.sum(-1)
        flatness = np.clip(1.0 - floor_grad / np.tan(np.radians(slope_mean)), 0.0, 1.0)
        flatness = np.where(on_floor.sum(-1) >= 2, flatness, 0.0)

        # Central peak: highest point inside the lowest ring of the floor.
        inside_low = pos <= i_floor[..., None]
        peak_z = np.where(inside_low, np.where(np.isfinite(m), m, -np.inf), -np.inf).max(-1)
        i_peak = np.argmax(np.where(inside_low, np.where(np.isfinite(m), m, -np.inf), -np.inf), -1)
        peak_h = np.maximum(peak_z - floor_z, 0.0)
        peak_level = (m - floor_z[..., None]) / peak_h[..., None]
        beyond = (pos >= i_peak[..., None]) & (peak_level <= 0.1)
        first = np.argmax(beyond, axis=-1)
        has_base = beyond.any(-1)
        prev = np.clip(first - 1, 0, None)
        l0 = np.take_along_axis(peak_level, prev[..., None], -1)[..., 0]
        l1 = np.take_along_axis(peak_level, first[..., None], -1)[..., 0]
        frac = np.clip((l0 - 0.1) / (l0 - l1), 0.0, 1.0)
        base_r = np.where(has_base, (prev + np.where(np.isfinite(frac), frac, 1.0)) * dr, np.nan)
        peak_present = peak_h > FEATURE_THRESHOLD * depth
        basal_width = np.where(peak_present, 2.0 * base_r * radius_m, 0.0)

        # Bowl exponent: m - floor = a (r/R)^n between 0.3 and 0.9 R.
        fit_zone = (r_norm >= 0.3) & (r_norm <= 0.9)
        shape_n = _loglog_slope(r_norm, m - floor_z[..., None], fit_zone)

        # Cavity volume below the rim level: trapezoid of 2 pi r (rim - z) dr from 0 to
        # exactly R (the last partial interval closed with the value interpolated at R).
        j = int(np.searchsorted(r_norm, 1.0, side="right")) - 1  # last sample <= R
        g = r_norm * np.clip(rim_z[..., None] - m, 0.0, None)
        g = np.where(np.isfinite(g), g, 0.0)
        inner = dr * (g[..., : j + 1].sum(-1) - 0.5 * g[..., j])
        t = (1.0 - r_norm[j]) / dr
        g_r = g[..., j] + t * (g[..., j + 1] - g[..., j])
        volume = 2.0 * np.pi * (inner + 0.5 * (1.0 - r_norm[j]) * (g[..., j] + g_r)) * radius_m**2

        # Rim flank: m = h (r/R)^-b between 1.1 and 1.5 R (above the annulus plane).
        flank = (r_norm >= 1.1) & (r_norm <= 1.5)
        flank_b = -_loglog_slope(r_norm, m, flank)

    return {
        "depth_m": depth,
        "rim_height_m": rim_z,
        "wall_slope_mean_deg": slope_mean,
        "wall_slope_upper_deg": slope_upper,
        "floor_diameter_fraction": r_fl,
        "floor_flatness": flatness,
        "central_peak_present": peak_present,
        "central_peak_height_m": np.where(peak_present, peak_h, 0.0),
        "central_peak_basal_width_m": basal_width,
        "central_pit_present": pit_present,
        "central_pit_depth_m": np.where(pit_present, pit, 0.0),
        "interior_shape_exponent": shape_n,
        "cavity_volume_m3": volume,
        "rim_flank_decay_exponent": flank_b,
    }


def ring_harmonics(zd, r_norm, theta, relief):
    """Azimuthal harmonic amplitudes of the detrended elevation on rings at fixed r/R.

    On each ring of :data:`RING_RADII` (profiles interpolated linearly in r), the
    elevations around the crater minus their mean are projected on ``cos k theta`` and
    ``sin k theta`` for the orders of :data:`RING_ORDERS`; the amplitude
    ``sqrt(a_k^2 + b_k^2)`` is divided by the crater's ``relief``. An axisymmetric crater
    gives 0 everywhere; order 1 is a tilt or offset of the cavity, 2 an elongation, 3 and 4
    a triangular or square (polygonal, lobate) planform of the walls or rim at that radius.
    The outline-radius harmonics (``rim_harmonic_k``) describe the crest line only; these
    describe the topography of the cavity and the rim.

    Parameters
    ----------
    zd : ndarray, shape (n, n_az, n_r)
        Detrended profiles (metres above the plain), NaN = no data or masked.
    r_norm : ndarray, shape (n_r,)
        Radii of the samples in crater radii (increasing, covering the rings).
    theta : ndarray, shape (n_az,)
        Azimuths of the profiles (radians, evenly spaced).
    relief : ndarray, shape (n,)
        Rim-to-floor relief (m) the amplitudes are divided by; NaN or <= 0 gives NaN.

    Returns
    -------
    dict of str to ndarray, shape (n,)
        One entry per name of :data:`RING_COLUMNS` (orders then rings). NaN where a ring has fewer valid
        azimuths than :data:`RING_MIN_SHARE` of them.
    """
    zd = np.asarray(zd, dtype=np.float64)
    n_az, n_r = zd.shape[1], zd.shape[2]
    pos = np.interp(RING_RADII, r_norm, np.arange(n_r, dtype=np.float64))
    j = np.minimum(np.floor(pos).astype(np.intp), n_r - 2)
    f = pos - j
    ring = zd[:, :, j] * (1.0 - f) + zd[:, :, j + 1] * f  # (n, n_az, n_ring)
    ok = np.isfinite(ring)
    cnt = ok.sum(1)  # (n, n_ring)
    rel = np.asarray(relief, dtype=np.float64)
    rel = np.where(np.isfinite(rel) & (rel > 0), rel, np.nan)
    with np.errstate(invalid="ignore", divide="ignore"):
        mean = np.where(ok, ring, 0.0).sum(1) / cnt
        # The ring mean is removed first, so azimuths missing on one side do not leak
        # the ring's level into the low orders.
        dev = np.where(ok, ring - mean[:, None, :], 0.0)
        k = np.asarray(RING_ORDERS, dtype=np.float64)[:, None] * np.asarray(theta, dtype=np.float64)[None, :]
        a = np.einsum("nar,ka->nkr", dev, np.cos(k))
        b = np.einsum("nar,ka->nkr", dev, np.sin(k))
        amp = 2.0 * np.hypot(a, b) / cnt[:, None, :] / rel[:, None, None]
    good = (cnt >= RING_MIN_SHARE * n_az)[:, None, :] & np.isfinite(amp)
    amp = np.where(good, amp, np.nan)
    flat = amp.reshape(amp.shape[0], -1)  # orders then rings, as RING_COLUMNS
    return {name: flat[:, i] for i, name in enumerate(RING_COLUMNS)}
