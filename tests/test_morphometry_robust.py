"""Robust shape features: rim-height variation, outline spread, bowl offset, ejecta-flank ratio.

Closed forms used below (derived from the definitions in morpho/dictionary/_morphometry.py):

* for values ``v(theta) = m (1 + a cos(k theta))`` sampled evenly in theta, the median is ``m``
  and the median of ``|cos|`` is ``cos(pi / 4)``, so ``1.4826 MAD / median = 1.4826 a / sqrt(2)``
  (Rousseeuw & Croux 1993, JASA 88:1273, for the 1.4826 normal-consistency constant);
* the centroid of a region cut from a DEM is checked against ``scipy.ndimage.center_of_mass``
  as an independent reference;
* a flank ``h (r / R)^-3`` continuous with the rim (McGetchin et al. 1973, EPSL 20:226) gives an
  ejecta-flank ratio of 1; a lip that ends at the rim gives 0.
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy import ndimage

from morpho.morphometry import measure_craters
from morpho.morphometry._geometry import wmad_relative

MAD_COS = 1.4826 / np.sqrt(2.0)


def test_relative_mad_of_a_cosine_has_its_closed_form():
    theta = np.linspace(0, 2 * np.pi, 256, endpoint=False)
    v = 5.0 * (1 + 0.1 * np.cos(3 * theta))
    assert wmad_relative(v[None, :])[0] == pytest.approx(0.1 * MAD_COS, rel=0.02)


def test_relative_mad_ignores_a_disturbed_quarter():
    # A neighbour's rim lifting a quarter of the azimuths moves the MAD little (breakdown
    # point 50 %, Rousseeuw & Croux 1993) while the standard deviation jumps.
    rng = np.random.default_rng(0)
    v = 10.0 * (1 + 0.02 * rng.standard_normal(256))
    disturbed = v.copy()
    disturbed[:64] += 8.0
    clean = wmad_relative(v[None, :])[0]
    assert clean == pytest.approx(0.02, rel=0.2)
    assert wmad_relative(disturbed[None, :])[0] < 2.0 * clean
    assert np.std(disturbed) / np.median(disturbed) > 10 * clean


def test_weighted_mad_with_unit_weights_equals_unweighted():
    rng = np.random.default_rng(1)
    v = rng.uniform(1, 2, size=(3, 64))
    w = np.ones((4, 64))
    np.testing.assert_allclose(wmad_relative(v, w), np.repeat(wmad_relative(v)[:, None], 4, 1))


def _crater(radius_px=30.0, size=200, rim_var=0.0, ellipse=0.0, offset=0.0, flank=True):
    yy, xx = np.mgrid[0:size, 0:size].astype(float)
    c = size / 2.0
    th = np.arctan2(yy - c, xx - c)
    rad = radius_px * (1 + ellipse * np.cos(2 * th))
    r = np.hypot(yy - c, xx - c) / rad
    h = 4.0 * (1 + rim_var * np.cos(3 * th))
    depth = 12.0
    # interior: paraboloid whose lowest point is shifted by `offset` radii along +col
    rb = np.hypot(yy - c, xx - c - offset * radius_px) / rad
    inner = np.minimum(-depth + (h + depth) * rb**2, h)
    outer = h * np.maximum(r, 1) ** -3 if flank else np.where(r <= 1.05, h, 0.0)
    return np.where(r <= 1, inner, outer), (c, c), radius_px


@pytest.mark.parametrize("a", [0.05, 0.15, 0.3])
def test_rim_height_variation_recovers_a_cosine_rim(a):
    z, (r0, c0), rad = _crater(rim_var=a)
    t = measure_craters(z, 10.0, [r0], [c0], [rad], n_boot=0).iloc[0]
    assert t["rim_height_variation"] == pytest.approx(a * MAD_COS, rel=0.15, abs=0.01)


@pytest.mark.parametrize("e", [0.03, 0.08])
def test_outline_spread_recovers_an_oval_rim(e):
    z, (r0, c0), rad = _crater(ellipse=e)
    t = measure_craters(z, 10.0, [r0], [c0], [rad], n_boot=0).iloc[0]
    assert t["outline_spread"] == pytest.approx(e * MAD_COS, rel=0.25, abs=0.005)


def test_bowl_offset_matches_scipy_centre_of_mass():
    z, (r0, c0), rad = _crater(offset=0.25)
    t = measure_craters(z, 10.0, [r0], [c0], [rad], n_boot=0, refine=False).iloc[0]
    # Independent reference: pixel centroid of the cavity below half its depth inside 0.8 R,
    # weighted by depth below that level (scipy.ndimage.center_of_mass).
    yy, xx = np.mgrid[0:z.shape[0], 0:z.shape[1]]
    inside = np.hypot(yy - r0, xx - c0) <= 0.8 * rad
    low = z[inside].min()
    w = np.where(inside, np.clip(0.5 * low - z, 0, None), 0.0)
    cy, cx = ndimage.center_of_mass(w)
    expected = np.hypot(cy - r0, cx - c0) / rad
    assert expected > 0.05
    # the profile version uses the azimuth-averaged low point: a few % apart at most
    assert t["bowl_offset"] == pytest.approx(expected, rel=0.2)


def test_bowl_offset_of_a_centred_bowl_is_zero():
    z, (r0, c0), rad = _crater()
    t = measure_craters(z, 10.0, [r0], [c0], [rad], n_boot=0).iloc[0]
    assert t["bowl_offset"] < 0.01


def test_ejecta_flank_ratio_separates_a_continuous_flank_from_a_lip():
    z, (r0, c0), rad = _crater(flank=True)
    z2, _, _ = _crater(flank=False)
    t = measure_craters(np.stack([z, z2]).reshape(-1, z.shape[1]), 10.0, [r0, r0 + z.shape[0]], [c0, c0],
                        [rad, rad], n_boot=0)
    assert t["ejecta_flank_ratio"].iloc[0] == pytest.approx(1.0, abs=0.1)
    assert abs(t["ejecta_flank_ratio"].iloc[1]) < 0.1


def test_exterior_roughness_of_white_noise_lies_between_its_bilinear_bounds():
    # Bilinear sampling of white noise of sd s gives sd between s/2 (cell centre, four equal
    # weights) and s (on a node) - derived; the 90th percentile of |N(0, sd)| is 1.645 sd
    # (normal table, e.g. Abramowitz & Stegun 1964, 26.2).
    z, (r0, c0), rad = _crater()
    s = 0.5
    z = z + np.random.default_rng(3).normal(0, s, z.shape)
    t = measure_craters(z, 10.0, [r0], [c0], [rad], n_boot=0).iloc[0]
    low, high = 1.645 * 0.5 * s / t["depth_m"], 1.645 * s / t["depth_m"]
    assert t["exterior_roughness"] >= low
    assert t["exterior_roughness"] <= high


def test_exterior_roughness_rises_when_a_neighbour_cuts_the_surroundings():
    z, (r0, c0), rad = _crater()
    clean = measure_craters(z, 10.0, [r0], [c0], [rad], n_boot=0).iloc[0]
    yy, xx = np.mgrid[0:z.shape[0], 0:z.shape[1]]
    hole = np.hypot(yy - r0, xx - (c0 + 2.0 * rad)) / rad  # a same-size neighbour, rims touching
    cut = np.where(hole <= 1, np.minimum(z, -8.0 * (1 - hole**2)), z)
    busy = measure_craters(cut, 10.0, [r0], [c0], [rad], n_boot=0).iloc[0]
    assert clean["exterior_roughness"] < 0.01
    assert busy["exterior_roughness"] > 3 * clean["exterior_roughness"] + 0.01


@pytest.mark.parametrize("scale", [1.0, 1e3, 1e6])
def test_circle_fit_of_a_partial_arc_does_not_depend_on_units(scale):
    # A 120-degree arc of a circle: the Kasa (1976) fit is exact for points on a circle,
    # whatever the unit (pixels, metres, or metres of a 400 km basin rim).
    from morpho.morphometry._geometry import fit_circle

    theta = np.linspace(0, 2 * np.pi / 3, 40)
    x = scale * (3.0 + 200.0 * np.cos(theta))
    y = scale * (-2.0 + 200.0 * np.sin(theta))
    u0, v0, r = (np.asarray(v).ravel()[0] for v in fit_circle(x[None, :], y[None, :]))
    assert r == pytest.approx(200.0 * scale, rel=1e-9)
    assert u0 == pytest.approx(3.0 * scale, rel=1e-6, abs=1e-6 * scale)
