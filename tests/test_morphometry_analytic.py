"""Morphometry of analytic craters whose features have closed forms, at 10-200 px per diameter.

Shapes come from :func:`morpho.shapes.crater_profile` (paraboloid or conical interior, flat
floor, cosine central peak, r^-3 flank after McGetchin et al. 1973 EPSL 20). The expected
numbers below follow from the feature definitions in morpho/dictionary/_morphometry.py:

* paraboloid z = floor + d (r/R)^2: the 10 %-90 % wall secant has slope
  0.8 d / (R (sqrt(0.9) - sqrt(0.1))), the 60 %-90 % secant 0.3 d / (R (sqrt(0.9) - sqrt(0.6))),
  the 5 % floor edge lies at sqrt(0.05) R, the cavity volume is pi R^2 d / 2 (derived);
* cone: every wall secant has slope d / R exactly; volume pi R^2 d / 3 (derived);
* flat floor of radius f R with conical walls: walls slope d / ((1 - f) R); the 5 % level
  sits at f + 0.05 (1 - f); a cosine peak of base radius b R falls to 10 % of its height at
  r = b acos(-0.8) / pi (derived).
"""

from __future__ import annotations

import numpy as np
import pytest

from morpho.dictionary import FIELDS
from morpho.morphometry import measure_crater, measure_craters
from tests.test_morphometry_support import bowl, cone, flat_with_peak, stamp

# Resolutions (radius in px -> 10, 20, 50, 200 px per diameter) and the relative tolerance
# for depth/diameter-type features at each: the sharp synthetic rim crest is under-sampled
# at low resolution (rim lower, crest further out by a fraction of a pixel).
RESOLUTIONS = [(5.0, 0.15), (10.0, 0.07), (25.0, 0.03), (100.0, 0.01)]
SPACING = 2.0  # metres per pixel


def _measure(profile, radius_px, *, noise=0.0, seed=0, **kw):
    size = int(5.4 * radius_px) + 8
    c = (size / 2 + 0.27, size / 2 - 0.31)
    z = stamp((size, size), c, radius_px, profile, noise=noise, seed=seed)
    t = measure_craters(z, SPACING, [c[0] + 0.1 * radius_px], [c[1]], [0.95 * radius_px],
                        n_boot=kw.pop("n_boot", 20), **kw)
    return t.iloc[0]


@pytest.mark.parametrize(("radius_px", "rel"), RESOLUTIONS)
def test_paraboloid_bowl(radius_px, rel):
    d, h = 0.4 * radius_px * SPACING, 0.07 * radius_px * SPACING  # d/D 0.2 (Pike 1974 GRL 1)
    t = _measure(bowl(d, h), radius_px)
    R = radius_px * SPACING
    assert t.measure_status == "ok"
    assert t.depth_m == pytest.approx(d, rel=rel)
    assert t.diameter_m == pytest.approx(2 * R, rel=rel)
    assert t.d_over_D == pytest.approx(0.2, rel=2 * rel)
    assert t.rim_height_m == pytest.approx(h, rel=3 * rel)  # thin sharp rim: worst sampled
    k_mean = 0.8 / (np.sqrt(0.9) - np.sqrt(0.1))
    k_up = 0.3 / (np.sqrt(0.9) - np.sqrt(0.6))
    assert t.wall_slope_mean_deg == pytest.approx(np.degrees(np.arctan(k_mean * d / R)), rel=rel)
    assert t.wall_slope_upper_deg == pytest.approx(np.degrees(np.arctan(k_up * d / R)), rel=2 * rel)
    assert t.interior_shape_exponent == pytest.approx(2.0, rel=rel)
    assert t.floor_diameter_fraction == pytest.approx(np.sqrt(0.05), rel=max(rel, 0.03))
    assert t.cavity_volume_m3 == pytest.approx(np.pi * R**2 * d / 2, rel=3 * rel)
    assert t.rim_flank_decay_exponent == pytest.approx(3.0, rel=max(rel, 0.02))
    assert not t.central_peak_present and not t.central_pit_present
    assert t.ellipticity == pytest.approx(1.0, abs=rel)
    assert t.pixels_per_diameter == pytest.approx(2 * radius_px, rel=rel)


@pytest.mark.parametrize(("radius_px", "rel"), RESOLUTIONS)
def test_cone_wall_slope_is_exact(radius_px, rel):
    d, h = 0.5 * radius_px * SPACING, 0.06 * radius_px * SPACING
    t = _measure(cone(d, h), radius_px)
    R = radius_px * SPACING
    slope = np.degrees(np.arctan(d / R))  # 26.57 degrees
    assert t.wall_slope_mean_deg == pytest.approx(slope, rel=rel)
    assert t.wall_slope_upper_deg == pytest.approx(slope, rel=2 * rel)
    # The floor fit (z = a + b r^2 near the bottom) rounds the cone's point and raises the
    # floor a little, so the bowl exponent is only asked to tell a cone (1) from a bowl (2).
    assert 0.9 < t.interior_shape_exponent < 1.25
    assert t.cavity_volume_m3 == pytest.approx(np.pi * R**2 * d / 3, rel=3 * rel)
    if radius_px >= 25:  # from 50 px per D; below, the pointed bottom spans ~1 pixel
        assert t.floor_flatness < 0.3  # no floor: slope continues to the centre


@pytest.mark.parametrize(("radius_px", "rel"), RESOLUTIONS)
def test_flat_floor_with_central_peak(radius_px, rel):
    f, pb = 0.5, 0.25  # floor radius / R, peak base radius / R
    d, h, H = 0.3 * radius_px * SPACING, 0.05 * radius_px * SPACING, 0.1 * radius_px * SPACING
    t = _measure(flat_with_peak(d, h, f, H, pb), radius_px)
    R = radius_px * SPACING
    # Below 50 px per D the peak is <= 5 px wide and its tip is clipped by the sampling:
    # only presence and a loose height are asked there.
    loose = rel if radius_px >= 25 else 0.5
    assert t.depth_m == pytest.approx(d, rel=rel)
    assert t.floor_diameter_fraction == pytest.approx(f + 0.05 * (1 - f), rel=max(rel, 0.04) + (radius_px < 10) * 0.1)
    assert t.wall_slope_mean_deg == pytest.approx(np.degrees(np.arctan(d / ((1 - f) * R))), rel=rel)
    assert t.central_peak_present
    assert t.central_peak_height_m == pytest.approx(H, rel=max(loose, 0.04))
    width = 2 * pb * R * np.arccos(-0.8) / np.pi
    assert t.central_peak_basal_width_m == pytest.approx(width, rel=max(loose, 2 * rel, 0.05))
    if radius_px >= 10:
        assert t.floor_flatness > 0.8


@pytest.mark.parametrize(("radius_px", "rel"), [(10.0, 0.10), (25.0, 0.05), (100.0, 0.03)])
def test_noisy_bowl(radius_px, rel):
    # White noise of 2 % of the depth (a DEM with SNR ~50 on the cavity; common practice).
    d, h = 0.4 * radius_px * SPACING, 0.07 * radius_px * SPACING
    t = _measure(bowl(d, h), radius_px, noise=0.02 * d, seed=7)
    assert t.depth_m == pytest.approx(d, rel=rel)
    assert t.diameter_m == pytest.approx(2 * radius_px * SPACING, rel=rel)
    assert t.wall_slope_mean_deg == pytest.approx(
        np.degrees(np.arctan(0.8 / (np.sqrt(0.9) - np.sqrt(0.1)) * d / (radius_px * SPACING))),
        rel=rel)
    assert 0 < t.depth_m_err < 0.1 * d


def test_bootstrap_error_matches_spread_over_noise():
    # The azimuth bootstrap should estimate the scatter of depth between independent noise
    # draws to within a factor ~2.5 (Efron & Tibshirani 1993: bootstrap SE of a smooth
    # statistic; loose because azimuths are spatially correlated).
    depth, err = [], []
    for seed in range(8):
        t = _measure(bowl(8.0, 1.4), 10.0, noise=0.3, seed=seed, n_boot=40)
        depth.append(t.depth_m)
        err.append(t.depth_m_err)
    spread = np.std(depth, ddof=1)
    assert spread / 2.5 < np.median(err) < 2.5 * spread


def test_columns_declared_and_nodata_handling():
    z = stamp((120, 120), (60.0, 60.0), 20.0, bowl(16.0, 2.8))
    z[:, :55] = np.nan  # most of the western half is missing
    t = measure_craters(z, 1.0, [60.0, 60.0], [60.0, 400.0], [20.0, 10.0], n_boot=10)
    extra = set(t.columns) - set(FIELDS) - {"row", "col", "radius_px"}
    assert not extra
    from morpho.dictionary import _morphometry

    declared = {f.name for f in _morphometry.FIELDS}
    declared |= {f"{f.name}_err" for f in _morphometry.FIELDS if f.has_error}
    assert declared <= set(t.columns), declared - set(t.columns)
    assert 0.4 < t.rim_coverage[0] < 0.6
    assert t.measure_status[0] == "ok"
    assert t.depth_m[0] == pytest.approx(16.0, rel=0.05)  # measured from the valid half
    assert t.measure_status[1] == "no_valid_data" and np.isnan(t.depth_m[1])
    empty = measure_craters(z, 1.0, [], [], [], n_boot=10)
    assert empty.empty and list(empty.columns) == list(t.columns)
    no_boot = measure_craters(z, 1.0, [60.0], [60.0], [20.0], n_boot=0)
    assert list(no_boot.columns) == list(t.columns) and np.isnan(no_boot.depth_m_err[0])
    flat = measure_craters(np.zeros((60, 60)), 1.0, [30.0], [30.0], [8.0], n_boot=0)
    assert flat.measure_status[0] == "no_rim_crest"  # nothing to measure on a flat plain


def test_per_crater_spacing_and_transform():
    from affine import Affine

    z = stamp((100, 100), (50.0, 50.0), 15.0, bowl(12.0, 2.0))
    t = measure_craters(z, [1.0, 3.0], [50.0, 50.0], [50.0, 50.0], [15.0, 15.0], n_boot=0)
    assert t.diameter_m[1] == pytest.approx(3 * t.diameter_m[0], rel=1e-9)
    assert t.depth_m[1] == pytest.approx(t.depth_m[0], rel=1e-9)  # elevations stay metres
    tr = Affine(3.0, 0.0, 1000.0, 0.0, -3.0, 5000.0)
    x, y = tr @ (50.5, 50.5)  # centre of pixel (row 50, col 50)
    one = measure_crater(z, None, (x, y), 45.0, transform=tr, n_boot=0)
    assert one["diameter_m"] == pytest.approx(t.diameter_m[1], rel=1e-6)


@pytest.mark.parametrize(("radius_px", "rel"), [(25.0, 0.1), (100.0, 0.02)])  # pit 7 or 30 px wide
def test_flat_floor_with_central_pit(radius_px, rel):
    # A cosine pit (morpho.shapes.crater_profile with a negative peak) of base radius 0.15 R
    # and depth 0.3 d below a flat floor of radius 0.5 R: the pit depth is 0.3 d and the
    # crater depth (rim to floor, Pike 1977) excludes the pit (derived).
    f, d = 0.5, 0.3 * radius_px * SPACING
    pit = 0.3 * d
    prof = flat_with_peak(d, 0.05 * radius_px * SPACING, f, -pit, 0.15)
    t = _measure(prof, radius_px, noise=0.005 * d, seed=2)
    assert t.central_pit_present and not t.central_peak_present
    assert t.central_pit_depth_m == pytest.approx(pit, rel=rel)
    assert t.depth_m == pytest.approx(d, rel=rel)
    assert t.floor_diameter_fraction == pytest.approx(f + 0.05 * (1 - f), rel=max(rel, 0.04))
