"""Radial profile sampling and the robust regional plane.

Independent references: scikit-image's ``measure.profile_line`` (same bilinear
interpolation along one ray) and ``numpy.linalg.lstsq`` on outlier-free data.
"""

from __future__ import annotations

import numpy as np
import pytest
from skimage.measure import profile_line

from morpho.morphometry import sample_radial_profiles
from morpho.morphometry._detrend import detrend_profiles, fit_annulus_plane
from morpho.morphometry.profiles import PolarSampler, sample_polar


def _surface(shape=(80, 90), seed=1):
    rng = np.random.default_rng(seed)
    yy, xx = np.mgrid[0 : shape[0], 0 : shape[1]].astype(float)
    return np.sin(yy / 7.0) * np.cos(xx / 5.0) * 10.0 + 0.3 * yy + rng.normal(0, 0.1, shape)


@pytest.mark.parametrize("k", [0, 1, 2, 3])  # azimuths 0, 90, 180, 270 degrees
def test_rays_match_skimage_profile_line(k):
    z = _surface()
    row, col, radius = 40.0, 44.0, 10.0
    p = sample_radial_profiles(z, [row], [col], [radius], n_azimuths=4, n_radii=31, r_max_factor=3.0)
    az = p.azimuths[k]
    dst = (round(row - 30.0 * np.sin(az), 9), round(col + 30.0 * np.cos(az), 9))
    ref = profile_line(z, (row, col), dst, order=1, mode="constant", cval=np.nan)
    # profile_line samples every pixel along the 30 px segment (31 points), as we do here.
    assert ref.size == 31
    np.testing.assert_allclose(p.z[0, k], ref, rtol=0, atol=1e-9)


def test_diagonal_ray_matches_hand_bilinear():
    z = _surface()
    p = sample_radial_profiles(z, [40.0], [44.0], [10.0], n_azimuths=8, n_radii=5, r_max_factor=1.0)
    r, c = 40.0 - 10.0 * np.sin(3 * np.pi / 4), 44.0 + 10.0 * np.cos(3 * np.pi / 4)  # 135 deg
    r0, c0 = int(r), int(c)
    fr, fc = r - r0, c - c0
    hand = ((1 - fr) * ((1 - fc) * z[r0, c0] + fc * z[r0, c0 + 1])
            + fr * ((1 - fc) * z[r0 + 1, c0] + fc * z[r0 + 1, c0 + 1]))
    assert p.z[0, 3, -1] == pytest.approx(hand, abs=1e-9)


def test_nodata_and_off_grid_samples_are_nan_never_filled():
    z = _surface()
    z[40, 50] = np.nan
    p = sample_radial_profiles(z, [40.0, 5.0], [44.0, 5.0], [10.0, 10.0], n_azimuths=4,
                               n_radii=11, r_max_factor=1.0)
    east = p.z[0, 0]  # samples at cols 44..54 on row 40: cols 49 < c < 51 touch the hole
    cols = 44.0 + np.linspace(0, 10, 11)
    assert np.isnan(east[np.abs(cols - 50) < 1]).all()
    assert np.isfinite(east[np.abs(cols - 50) >= 1]).all()
    assert np.isnan(p.z[1, 2, -1]) and np.isfinite(p.z[1, 2, 0])  # west of (5, 5) leaves the grid
    assert p.radii_px().shape == (2, 11)


def test_prepared_sampler_gives_the_same_samples_with_nodata():
    # A PolarSampler finds the no-data once; what it samples must be exactly what the array
    # gives (profile_line is checked against the array above), NaN holes included.
    z = _surface()
    z[38:43, 48:52] = np.nan
    rows, cols, rad = np.array([40.0, 20.0, 70.0]), np.array([44.0, 20.0, 80.0]), np.array([10.0, 6.0, 12.0])
    az = np.linspace(0.0, 2.0 * np.pi, 24, endpoint=False)
    radii = np.linspace(0.0, 2.5, 40)
    ref = sample_polar(z, rows, cols, rad, az, radii)
    sampler = PolarSampler(z)
    assert sampler.has_nan
    got = sample_polar(sampler, rows, cols, rad, az, radii)
    np.testing.assert_array_equal(got, ref)
    assert np.isnan(ref).any() and np.isfinite(ref).any()
    p = sample_radial_profiles(sampler, rows, cols, rad, n_azimuths=24, n_radii=40)
    np.testing.assert_array_equal(p.z, sample_radial_profiles(z, rows, cols, rad, n_azimuths=24, n_radii=40).z)


def test_measurement_finds_the_nodata_once_per_call_not_per_batch(monkeypatch):
    # Design check (DEVELOPERS.md): refine_craters and measure_craters each prepare one sampler
    # for all their batches (craters of 2, 5 and 12 px radius: three radius classes).
    from morpho.morphometry import _measure, _refine, measure_craters, profiles

    made = []

    class Counting(PolarSampler):
        def __init__(self, z):
            made.append(1)
            super().__init__(z)

    monkeypatch.setattr(_measure, "PolarSampler", Counting)
    monkeypatch.setattr(_refine, "PolarSampler", Counting)
    monkeypatch.setattr(profiles, "PolarSampler", Counting)  # a sampler made per batch would count too
    z = _surface()
    z[0:3, :] = np.nan
    measure_craters(z, 10.0, [40.0, 20.0, 60.0], [44.0, 20.0, 50.0], [12.0, 5.0, 2.0], n_boot=0)
    assert len(made) == 2


def test_sample_polar_equals_uniform_sampler_on_any_radii():
    z = _surface()
    p = sample_radial_profiles(z, [40.0], [44.0], [8.0], n_azimuths=16, n_radii=21)
    radii = p.r_norm[[0, 3, 7, 20]]
    q = sample_polar(z, p.rows, p.cols, p.radius_px, p.azimuths, radii)
    np.testing.assert_array_equal(q, p.z[:, :, [0, 3, 7, 20]])


def test_robust_plane_recovers_tilt_despite_outliers():
    # A plane plus an r^-3 flank, with 15 % gross outliers in the annulus (e.g. a
    # neighbouring crater). Tukey IRLS (Holland & Welsch 1977) recovers the plane; plain
    # least squares (numpy.linalg.lstsq) does not.
    yy, xx = np.mgrid[0:120, 0:120].astype(float)
    r = np.hypot(yy - 60.0, xx - 60.0) / 20.0
    z = 100.0 + 0.05 * yy - 0.08 * xx + 3.0 * np.maximum(r, 1.0) ** -3
    p = sample_radial_profiles(z, [60.0], [60.0], [20.0], n_azimuths=64, n_radii=61)
    zp = p.z.copy()
    rng = np.random.default_rng(0)
    ring = (p.r_norm >= 1.3) & (p.r_norm <= 2.5)
    mask = (rng.uniform(size=zp.shape) < 0.15) & ring[None, None, :]
    zp[mask] += 40.0
    coef = fit_annulus_plane(zp, p.r_norm, p.azimuths, p.radius_px)[0]
    # Plane in (u east, v north) per pixel: z = a + b u + c v, v = -(row offset).
    assert coef[0] == pytest.approx(100.0 + 0.05 * 60 - 0.08 * 60, abs=0.05)
    assert coef[1] == pytest.approx(-0.08, abs=1e-3)
    assert coef[2] == pytest.approx(-0.05, abs=1e-3)
    assert coef[3] == pytest.approx(3.0, rel=0.05)
    rr = p.r_norm[ring] * 20.0
    u = (rr[None, :] * np.cos(p.azimuths)[:, None]).ravel()
    v = (rr[None, :] * np.sin(p.azimuths)[:, None]).ravel()
    X = np.column_stack([np.ones_like(u), u, v, np.tile(p.r_norm[ring] ** -3, 64)])
    ols = np.linalg.lstsq(X, zp[0][:, ring].ravel(), rcond=None)[0]
    assert abs(ols[0] - coef[0]) > 1.0  # the outliers drag plain least squares
    zd, _ = detrend_profiles(p.z, p.r_norm, p.azimuths, p.radius_px)
    rr = p.r_norm[None, :] * 20.0
    plane = 100.0 + 0.05 * 60 - 0.08 * 60 - 0.08 * rr * np.cos(p.azimuths)[:, None] \
        - 0.05 * rr * np.sin(p.azimuths)[:, None]
    # 1e-3: bilinear sampling of the convex r^-3 flank lifts it by ~2e-4 (not a plane error).
    np.testing.assert_allclose(zd[0], p.z[0] - plane, atol=1e-3)
