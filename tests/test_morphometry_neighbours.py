"""Neighbouring craters: pair search, overlap geometry, and the masking of a neighbour's cavity.

References used below:

* pair search and point-in-disk tests against brute force with ``scipy.spatial.distance.cdist``
  (an independent implementation of the same definitions);
* overlap geometry: plane geometry of two circles (worked by hand in each test);
* crater profiles built with Pike's (1977, Impact and Explosion Cratering, Pergamon, 489-509)
  fresh simple-crater ratios d/D = 0.196 and h/D = 0.036 and a McGetchin et al. (1973,
  EPSL 20:226) (r/R)^-3 flank: the measured h/D of the crater alone is the reference the
  crowded measurement must approach.
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy.spatial.distance import cdist

from morpho.morphometry import measure_craters
from morpho.morphometry._neighbours import (
    NEIGHBOUR_DISK,
    OWN_ZONE,
    neighbour_context,
    neighbour_mask,
    neighbour_pairs,
)

PIKE_DD, PIKE_HD = 0.196, 0.036


def test_pairs_match_brute_force():
    rng = np.random.default_rng(3)
    n = 60
    rows, cols = rng.uniform(0, 400, n), rng.uniform(0, 400, n)
    rad = rng.uniform(3, 30, n)
    pairs = neighbour_pairs(rows, cols, rad, 2.5)
    d = cdist(np.column_stack([rows, cols]), np.column_stack([rows, cols]))
    want = (d < 2.5 * rad[:, None] + NEIGHBOUR_DISK * rad[None, :]) & ~np.eye(n, dtype=bool)
    wi, wj = np.nonzero(want)  # row-major: sorted by i, then j
    np.testing.assert_array_equal(pairs.i, wi)
    np.testing.assert_array_equal(pairs.j, wj)
    np.testing.assert_allclose(pairs.distance, d[wi, wj])


def test_overlap_geometry_of_two_circles():
    # R = 10 and 20 px, centres 25 px apart: the rims overlap by 10 + 20 - 25 = 5 px,
    # i.e. 0.5 of the small crater's radius and 0.25 of the large one's; neither centre
    # lies inside the other rim (25 > 20).
    rows, cols, rad = np.array([0.0, 0.0]), np.array([0.0, 25.0]), np.array([10.0, 20.0])
    ctx = neighbour_context(rad, neighbour_pairs(rows, cols, rad, 2.5), 2)
    np.testing.assert_allclose(ctx["neighbour_overlap"], [0.5, 0.25])
    np.testing.assert_allclose(ctx["neighbour_size_log_ratio"], [np.log(2.0), np.log(0.5)])
    np.testing.assert_array_equal(ctx["inside_neighbour"], [False, False])
    # 15 px apart: the small crater's centre is inside the large rim (15 < 20).
    cols[1] = 15.0
    ctx = neighbour_context(rad, neighbour_pairs(rows, cols, rad, 2.5), 2)
    np.testing.assert_array_equal(ctx["inside_neighbour"], [True, False])
    # 40 px apart: rims clear of each other (10 + 20 < 40), the neighbour still in reach.
    cols[1] = 40.0
    ctx = neighbour_context(rad, neighbour_pairs(rows, cols, rad, 2.5), 2)
    np.testing.assert_array_equal(ctx["neighbour_overlap"], [0.0, 0.0])
    np.testing.assert_array_equal(ctx["neighbour_size_log_ratio"], [0.0, 0.0])


def test_mask_is_the_neighbour_disk_beyond_the_own_rim():
    rows, cols, rad = np.array([50.0, 50.0]), np.array([50.0, 100.0]), np.array([20.0, 15.0])
    pairs = neighbour_pairs(rows, cols, rad, 2.5)
    az = np.linspace(0, 2 * np.pi, 64, endpoint=False)
    r_norm = np.linspace(0, 2.5, 51)
    mask, cover = neighbour_mask(rows, cols, rad, pairs, np.array([0]), az, r_norm)
    # Brute force on the same sample points (row grows south: row = r0 - r sin az).
    pr = rows[0] - rad[0] * r_norm[None, :] * np.sin(az)[:, None]
    pc = cols[0] + rad[0] * r_norm[None, :] * np.cos(az)[:, None]
    inside = cdist(np.column_stack([pr.ravel(), pc.ravel()]), [[rows[1], cols[1]]])[:, 0] < NEIGHBOUR_DISK * rad[1]
    inside = inside.reshape(pr.shape)
    np.testing.assert_array_equal(mask[0], inside & (r_norm > OWN_ZONE)[None, :])
    ann = (r_norm >= 1.3) & (r_norm <= 2.5)
    assert cover[0] == pytest.approx(inside[:, ann].mean())
    assert 0.05 < cover[0] < 0.3


def test_small_crater_on_a_large_floor_keeps_its_annulus():
    # The large crater's rim encloses the small one's centre: its floor is the small
    # crater's plain, so nothing is masked (cover still reports the crowding).
    rows, cols, rad = np.array([50.0, 50.0]), np.array([50.0, 60.0]), np.array([5.0, 40.0])
    pairs = neighbour_pairs(rows, cols, rad, 2.5)
    mask, cover = neighbour_mask(rows, cols, rad, pairs, np.array([0]), np.linspace(0, 6, 32),
                                 np.linspace(0, 2.5, 41))
    assert not mask.any()
    assert cover[0] == 1.0


def _bowl(yy, xx, r0, c0, radius):
    diameter = 2.0 * radius
    r = np.hypot(yy - r0, xx - c0) / radius
    d, h = PIKE_DD * diameter, PIKE_HD * diameter
    return np.where(r <= 1, (d + h) * r**2 - d, h * np.maximum(r, 1) ** -3)


def test_masking_removes_most_of_a_neighbour_cavity_bias():
    yy, xx = np.mgrid[0:240, 0:330].astype(float)
    alone = 3.0 + _bowl(yy, xx, 120, 90, 20.0)
    crowded = alone + _bowl(yy, xx, 120, 155, 40.0)  # rims clear (20 + 40 < 65), ~30 % of the annulus cut
    ref = measure_craters(alone, 1.0, [120], [90], [20.0], n_boot=0)
    assert ref.h_over_D[0] == pytest.approx(PIKE_HD, rel=0.05)
    kw = {"n_boot": 0}
    masked = measure_craters(crowded, 1.0, [120, 120], [90, 155], [20.0, 40.0], **kw)
    plain = measure_craters(crowded, 1.0, [120, 120], [90, 155], [20.0, 40.0], neighbours=False, **kw)
    assert masked.neighbour_cover[0] == pytest.approx(0.3, abs=0.05)
    assert plain.neighbour_cover[0] == 0.0
    bias_masked = abs(masked.h_over_D[0] - ref.h_over_D[0])
    bias_plain = abs(plain.h_over_D[0] - ref.h_over_D[0])
    # The neighbour's cavity lowers the fitted plain, so the rim reads ~20 % high without
    # the mask; with it the bias is halved (the neighbour's outer flank still leaks in).
    assert bias_plain > 0.15 * PIKE_HD
    assert bias_masked < 0.6 * bias_plain
    assert masked.h_over_D[0] == pytest.approx(PIKE_HD, rel=0.12)


def test_a_crater_out_of_reach_changes_nothing():
    yy, xx = np.mgrid[0:200, 0:400].astype(float)
    z = _bowl(yy, xx, 100, 80, 20.0) + _bowl(yy, xx, 100, 300, 25.0)
    both = measure_craters(z, 1.0, [100, 100], [80, 300], [20.0, 25.0], n_boot=10)
    one = measure_craters(z, 1.0, [100], [80], [20.0], n_boot=10)
    cols = [c for c in one.columns if c != "measure_status"]
    np.testing.assert_array_equal(both.loc[[0], cols].to_numpy(float), one[cols].to_numpy(float))
    assert both.neighbour_cover[0] == 0.0 and not both.inside_neighbour[0]


def test_empty_measurement_has_the_context_columns():
    out = measure_craters(np.zeros((32, 32)), 1.0, [], [], [])
    assert out.empty
    assert out["inside_neighbour"].dtype == bool
    assert out["neighbour_overlap"].dtype == np.float64
