"""Batched least-squares geometry on crest points: circle, ellipse, azimuthal harmonics.

Every function takes arrays with arbitrary leading batch dimensions (craters, bootstrap
replicates) and a trailing azimuth axis; NaN or zero-weight points are ignored.
"""

from __future__ import annotations

import numpy as np

__all__ = ["fit_circle", "fit_ellipse", "harmonic_amplitudes", "nanquantile_last", "interp_last"]


def _solve_batched(a, b):
    """Solve ``a x = b`` for stacks of small systems; NaN where singular."""
    det = np.linalg.det(a)
    scale = np.einsum("...ii->...", np.abs(a)) ** a.shape[-1] + 1e-300
    ok = np.isfinite(det) & (np.abs(det) > 1e-12 * scale)
    eye = np.broadcast_to(np.eye(a.shape[-1]), a.shape)
    safe = np.where(ok[..., None, None], a, eye)
    with np.errstate(invalid="ignore", over="ignore"):
        x = np.linalg.solve(safe, b[..., None])[..., 0]
    return np.where(ok[..., None], x, np.nan)


def fit_circle(x, y, w=None):
    """Kasa (1976) algebraic circle fit, batched.

    Parameters
    ----------
    x, y : ndarray, shape (..., m)
        Point coordinates; NaN points are ignored.
    w : ndarray, shape (..., m), optional
        Non-negative weights (e.g. bootstrap counts).

    Returns
    -------
    xc, yc, radius : ndarray, shape (...)
        NaN where fewer than 3 usable points.

    References
    ----------
    Kasa I. (1976) A circle fitting procedure and its error analysis. IEEE Trans. Instrum.
    Meas. 25(1):8-14, doi:10.1109/TIM.1976.6312298.
    """
    ok = np.isfinite(x) & np.isfinite(y)
    ww = ok.astype(float) if w is None else np.where(ok, w, 0.0)
    x0 = np.where(ok, x, 0.0)
    y0 = np.where(ok, y, 0.0)
    # Centre the points first: keeps the normal equations well conditioned.
    sw = ww.sum(-1)
    with np.errstate(invalid="ignore", divide="ignore"):
        mx = (ww * x0).sum(-1) / sw
        my = (ww * y0).sum(-1) / sw
    u = np.where(ok, x0 - mx[..., None], 0.0)
    v = np.where(ok, y0 - my[..., None], 0.0)
    rhs = u * u + v * v
    wu, wv = ww * u, ww * v
    suu, suv, svv = (wu * u).sum(-1), (wu * v).sum(-1), (wv * v).sum(-1)
    su, sv = wu.sum(-1), wv.sum(-1)
    ata = np.stack([np.stack([suu, suv, su], -1), np.stack([suv, svv, sv], -1),
                    np.stack([su, sv, sw], -1)], -2)
    atb = np.stack([(wu * rhs).sum(-1), (wv * rhs).sum(-1), (ww * rhs).sum(-1)], -1)
    sol = _solve_batched(ata, atb)
    a, b, c = sol[..., 0] / 2.0, sol[..., 1] / 2.0, sol[..., 2]
    with np.errstate(invalid="ignore"):
        radius = np.sqrt(c + a * a + b * b)
    enough = (ww > 0).sum(-1) >= 3
    return (np.where(enough, mx + a, np.nan), np.where(enough, my + b, np.nan),
            np.where(enough, radius, np.nan))


def fit_ellipse(x, y, w=None):
    """Algebraic conic fit ``A u^2 + B uv + C v^2 + D u + E v = 1`` about the point centroid.

    Parameters
    ----------
    x, y : ndarray, shape (..., m)
        Points (metres); NaN ignored. ``y`` points up (north), ``x`` right (east).
    w : ndarray, shape (..., m), optional
        Non-negative weights.

    Returns
    -------
    major, minor : ndarray, shape (...)
        Full axis lengths (same unit as ``x``), ``major >= minor``.
    azimuth_deg : ndarray, shape (...)
        Direction of the major axis, degrees clockwise from north (+y), in [0, 180).

    References
    ----------
    Fitzgibbon A., Pilu M., Fisher R.B. (1999) Direct least square fitting of ellipses. IEEE
    TPAMI 21(5):476-480 (the unconstrained general-conic variant is used here).
    """
    ok = np.isfinite(x) & np.isfinite(y)
    ww = ok.astype(float) if w is None else np.where(ok, w, 0.0)
    sw = ww.sum(-1)
    with np.errstate(invalid="ignore", divide="ignore"):
        mx = (ww * np.where(ok, x, 0.0)).sum(-1) / sw
        my = (ww * np.where(ok, y, 0.0)).sum(-1) / sw
        u = np.where(ok, x - mx[..., None], 0.0)
        v = np.where(ok, y - my[..., None], 0.0)
        s = np.sqrt((ww * (u * u + v * v)).sum(-1) / sw)
    s = np.where(np.isfinite(s) & (s > 0), s, 1.0)[..., None]
    u, v = u / s, v / s
    cols = np.stack([u * u, u * v, v * v, u, v], -1)
    ata = np.einsum("...mi,...mj,...m->...ij", cols, cols, ww)
    atb = np.einsum("...mi,...m->...i", cols, ww)
    A, B, C, D, E = np.moveaxis(_solve_batched(ata, atb), -1, 0)
    with np.errstate(invalid="ignore", divide="ignore"):
        det = 4 * A * C - B * B
        # Centre of the conic and the constant term after moving the origin there.
        u0 = (B * E - 2 * C * D) / det
        v0 = (B * D - 2 * A * E) / det
        k = 1.0 + (A * u0 * u0 + B * u0 * v0 + C * v0 * v0)
        tr, diff = A + C, np.sqrt((A - C) ** 2 + B * B)
        l1, l2 = (tr - diff) / 2.0, (tr + diff) / 2.0  # l1 <= l2: l1 along the major axis
        major = 2.0 * np.sqrt(k / l1) * s[..., 0]
        minor = 2.0 * np.sqrt(k / l2) * s[..., 0]
        theta = 0.5 * np.arctan2(B, A - C)  # angle (from +u) of the eigenvector of l2... see below
    # arctan2 gives the axis of the larger eigenvalue (minor axis) rotated by 90 degrees from the major.
    major_dir = theta + np.pi / 2.0
    az = np.degrees(np.pi / 2.0 - major_dir) % 180.0
    bad = ~(det > 0) | ~(k > 0) | ((ww > 0).sum(-1) < 5)
    nan = np.nan
    return (np.where(bad, nan, major), np.where(bad, nan, minor), np.where(bad, nan, az))


def harmonic_amplitudes(theta, values, kmax):
    """Amplitudes of azimuthal harmonics 0..kmax of ``values(theta)`` (DFT over valid samples).

    Parameters
    ----------
    theta : ndarray, shape (m,) or (b, m)
        Azimuths in radians; broadcast against the trailing axes of ``values`` (the same
        azimuth draw serves every crater, so the trigonometric table is built once).
    values : ndarray, shape (..., m) or (..., b, m)
        Samples; NaN ignored.
    kmax : int
        Highest harmonic.

    Returns
    -------
    ndarray, shape (..., kmax + 1)
        ``amp[..., 0]`` is the mean; ``amp[..., k]`` the amplitude of ``cos(k theta - phase)``.
    """
    ok = np.isfinite(values)
    sw = ok.sum(-1)
    k = np.arange(kmax + 1)
    ang = np.asarray(theta)[..., None] * k  # (..., m, k), no crater axis
    with np.errstate(invalid="ignore", divide="ignore"):
        mean = np.where(ok, values, 0.0).sum(-1) / sw
        # Removing the mean first stops it leaking into k >= 1 when the azimuths are
        # unevenly represented (gaps, bootstrap resamples).
        val = np.where(ok, values - mean[..., None], 0.0)[..., None, :]
        c = np.matmul(val, np.cos(ang))[..., 0, :] / sw[..., None]
        s = np.matmul(val, np.sin(ang))[..., 0, :] / sw[..., None]
    amp = 2.0 * np.hypot(c, s)
    amp[..., 0] = mean
    return amp


def nanquantile_last(a, q):
    """Linear-interpolated quantile ``q`` (0..1) along the last axis, ignoring NaN (fast path)."""
    srt = np.sort(a, axis=-1)  # NaN sorts last
    n = np.isfinite(srt).sum(-1)
    pos = q * np.maximum(n - 1, 0)
    lo = np.floor(pos).astype(np.intp)
    hi = np.minimum(lo + 1, np.maximum(n - 1, 0))
    f = pos - lo
    vlo = np.take_along_axis(srt, lo[..., None], -1)[..., 0]
    vhi = np.take_along_axis(srt, hi[..., None], -1)[..., 0]
    out = vlo + f * (vhi - vlo)
    return np.where(n > 0, out, np.nan)


def interp_last(a, idx):
    """Linear interpolation of ``a`` (..., n) at fractional indices ``idx`` (..., k); NaN outside."""
    n = a.shape[-1]
    fin = np.isfinite(idx)
    i = np.where(fin, idx, 0.0)
    lo = np.clip(np.floor(i).astype(np.intp), 0, n - 2)
    f = i - lo
    vlo = np.take_along_axis(a, lo, -1)
    vhi = np.take_along_axis(a, lo + 1, -1)
    out = vlo + f * (vhi - vlo)
    return np.where(fin & (i >= 0) & (i <= n - 1), out, np.nan)
