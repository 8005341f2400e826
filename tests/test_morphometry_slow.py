"""An independent, plain-loop re-implementation of the core measurement agrees with the
vectorised one (pattern of scikit-image's brute-force twins in tests/.../test_regionprops.py).

The twin re-derives, one sample at a time: bilinear sampling (NaN if a contributing pixel is
NaN), the regional plane + r^-3 flank by numpy.linalg.lstsq, the rim crest per azimuth
(maximum, parabolic peak, tangent-curve sharpening), the Kasa circle by lstsq, the rim level
(60th percentile, inverted CDF), the floor (weighted polyfit in r^2), depth, d/D, the
10-90 % wall secant and the cavity volume (numpy.trapezoid). Inputs are exact (no noise) so
the robust and plain plane fits coincide.
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from morpho.morphometry import measure_craters
from morpho.morphometry._detrend import ANNULUS
from morpho.morphometry._refine import R_MAX, n_radii_for
from tests.test_morphometry_support import bowl, cone, flat_with_peak, stamp


def _bilinear(z, r, c):
    h, w = z.shape
    if not (0 <= r <= h - 1 and 0 <= c <= w - 1):
        return math.nan
    r0, c0 = min(int(math.floor(r)), h - 2), min(int(math.floor(c)), w - 2)
    fr, fc = r - r0, c - c0
    total = 0.0
    for dr, wr in ((0, 1 - fr), (1, fr)):
        for dc, wc in ((0, 1 - fc), (1, fc)):
            wt = wr * wc
            if wt > 1e-6:
                v = z[r0 + dr, c0 + dc]
                if math.isnan(v):
                    return math.nan
                total += wt * v
    return total


def _slow_measure(z, spacing, row, col, radius, n_az=64):
    n_r = n_radii_for(np.array([radius]))
    r_norm = [R_MAX * i / (n_r - 1) for i in range(n_r)]
    az = [2 * math.pi * k / n_az for k in range(n_az)]
    prof = [[_bilinear(z, row - rn * radius * math.sin(a), col + rn * radius * math.cos(a))
             for rn in r_norm] for a in az]
    # Regional plane + flank: Tukey-biweight IRLS (c = 4.685, MAD scale) on <= 10 rings.
    ring = [i for i, rn in enumerate(r_norm) if ANNULUS[0] <= rn <= ANNULUS[1]]
    if len(ring) > 10:
        ring = ring[:: math.ceil(len(ring) / 10)]
    rows_a, rhs = [], []
    for k, a in enumerate(az):
        for i in ring:
            if not math.isnan(prof[k][i]):
                rr = r_norm[i] * radius
                rows_a.append([1.0, rr * math.cos(a), rr * math.sin(a), r_norm[i] ** -3.0])
                rhs.append(prof[k][i])
    X, y = np.array(rows_a), np.array(rhs)
    wts = np.ones(len(y))
    for _ in range(3):
        coef = np.linalg.lstsq(X * np.sqrt(wts)[:, None], y * np.sqrt(wts), rcond=None)[0]
        res = y - X @ coef
        scale = 1.4826 * sorted(abs(v) for v in res)[(len(res) - 1) // 2]
        if len(res) % 2 == 0:  # median of an even count: mean of the middle two
            srt = sorted(abs(v) for v in res)
            scale = 1.4826 * 0.5 * (srt[len(res) // 2 - 1] + srt[len(res) // 2])
        wts = np.array([(1 - (v / (4.685 * scale)) ** 2) ** 2 if abs(v) < 4.685 * scale else 0.0
                        for v in res]) if scale > 0 else np.ones(len(y))
    for k, a in enumerate(az):
        for i, rn in enumerate(r_norm):
            rr = rn * radius
            prof[k][i] -= coef[0] + coef[1] * rr * math.cos(a) + coef[2] * rr * math.sin(a)
    dr = r_norm[1]
    # Crest per azimuth.
    crest_r, crest_z = [], []
    win = [i for i, rn in enumerate(r_norm) if 0.7 <= rn <= 1.3]
    a_off = max(0.05, 1.0 / radius)
    b_off = a_off + max(0.1, 2.0 / radius)
    for k in range(n_az):
        p = prof[k]
        best = max(win, key=lambda i: -math.inf if math.isnan(p[i]) else p[i])
        if best in (win[0], win[-1]) or math.isnan(p[best - 1]) or math.isnan(p[best + 1]):
            crest_r.append(math.nan)
            crest_z.append(math.nan)
            continue
        zm, z0, zp = p[best - 1], p[best], p[best + 1]
        den = zm - 2 * z0 + zp
        off = max(-0.5, min(0.5, 0.5 * (zm - zp) / den)) if den < 0 else 0.0
        rc = r_norm[win[0]] + (best - win[0] + off) * dr
        zc = z0 - 0.25 * (zm - zp) * off

        def at(x, p=p):
            j = x / dr
            j0 = min(max(int(math.floor(j)), 0), len(p) - 2)
            return p[j0] + (j - j0) * (p[j0 + 1] - p[j0])

        mid = 0.5 * (a_off + b_off)
        t_in, t_out = (-b_off, -mid, -a_off), (a_off, mid, b_off)
        v_in, v_out = [at(rc + t) for t in t_in], [at(rc + t) for t in t_out]
        if any(math.isnan(v) for v in v_in + v_out):
            crest_r.append(rc)
            crest_z.append(zc)
            continue
        q_in, q_out = np.polyfit(t_in, v_in, 2), np.polyfit(t_out, v_out, 2)
        roots = [x.real for x in np.roots(q_in - q_out) if abs(x.imag) < 1e-12]
        if roots and min(abs(x) for x in roots) < a_off:
            t = min(roots, key=abs)
            rise = abs(zc - at(rc - a_off)) / a_off * 0.25 / radius
            zc = min(max(np.polyval(q_in, t), zc), zc + rise)
            rc += t
        crest_r.append(rc)
        crest_z.append(zc)
    pts = [(r * radius * spacing * math.cos(a), r * radius * spacing * math.sin(a))
           for r, a in zip(crest_r, az, strict=True) if not math.isnan(r)]
    A = np.array([[x, y, 1.0] for x, y in pts])
    sol = np.linalg.lstsq(A, np.array([x * x + y * y for x, y in pts]), rcond=None)[0]
    diameter = 2 * math.sqrt(sol[2] + (sol[0] / 2) ** 2 + (sol[1] / 2) ** 2)
    zs = sorted(v for v in crest_z if not math.isnan(v))
    rim = zs[next(i for i in range(len(zs)) if (i + 1) >= 0.6 * len(zs) - 1e-9)]
    mean = []
    for i in range(n_r):
        vals = [prof[k][i] for k in range(n_az) if not math.isnan(prof[k][i])]
        mean.append(sum(vals) / len(vals))
    interior = [i for i in range(n_r) if r_norm[i] <= 0.9]
    fmin = min(mean[i] for i in interior)
    sel = [i for i in interior if (mean[i] - fmin) / (rim - fmin) <= 0.1]
    wts = [max(r_norm[i], dr / 2) for i in sel]
    # np.polyfit weights multiply residuals: sqrt of the area weights.
    b, a = np.polyfit([r_norm[i] ** 2 for i in sel], [mean[i] for i in sel], 1, w=np.sqrt(wts))
    xs = [r_norm[i] ** 2 for i in sel]
    floor = a + b * (min(xs) if b > 0 else max(xs))
    depth = rim - floor
    crest_i = next(i for i in range(n_r) if r_norm[i] >= 1.0 - 1e-12)

    def crossing(q):
        for j in range(crest_i, -1, -1):
            if (mean[j] - floor) / depth <= q:
                lo, hi = (mean[j] - floor) / depth, (mean[j + 1] - floor) / depth
                return (j + min(max((q - lo) / (hi - lo), 0.0), 1.0)) * dr
        return math.nan

    radius_m = radius * spacing
    slope = math.degrees(math.atan(0.8 * depth / ((crossing(0.9) - crossing(0.1)) * radius_m)))
    g = [r_norm[i] * max(rim - mean[i], 0.0) for i in range(n_r)]
    inner = [i for i in range(n_r) if r_norm[i] <= 1.0]
    xs_v = [r_norm[i] for i in inner] + [1.0]
    ys_v = [g[i] for i in inner] + [float(np.interp(1.0, r_norm, g))]
    volume = 2 * math.pi * radius_m**2 * np.trapezoid(ys_v, xs_v)
    return {"diameter_m": diameter, "rim_height_m": rim, "depth_m": depth,
            "d_over_D": depth / diameter, "wall_slope_mean_deg": slope, "cavity_volume_m3": volume}


@pytest.mark.parametrize(
    ("profile", "radius", "nan_patch"),
    [(bowl(8.0, 1.5), 10.0, False), (cone(12.0, 2.0), 14.0, True),
     (flat_with_peak(6.0, 1.2, 0.4, 2.0, 0.2), 17.0, False)],
)
def test_loop_twin_agrees(profile, radius, nan_patch):
    z = stamp((110, 120), (54.3, 61.7), radius, profile, tilt=(0.03, -0.02), offset=250.0)
    if nan_patch:
        z[20:40, 70:100] = np.nan  # part of the rim and of the plane annulus
    fast = measure_craters(z, 2.5, [54.3], [61.7], [radius], refine=False, n_boot=0).iloc[0]
    slow = _slow_measure(z, 2.5, 54.3, 61.7, radius)
    for name, value in slow.items():
        assert fast[name] == pytest.approx(value, rel=1e-6, abs=1e-9), name
