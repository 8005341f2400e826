"""Alignments and chains, axial orientation, rim superposition and the local metric projection."""

import itertools

import numpy as np
import pytest
import shapely
from pyproj import Geod

from morpho.population.alignments import (
    LINK_FACTOR,
    SIZE_RATIO,
    WIDTH_FACTOR,
    aligned_triplets,
    extract_chains,
)
from morpho.population.orientation import axial_rayleigh
from morpho.population.projection import local_metric_crs, to_local_metric
from morpho.population.superposition import on_larger_rim


def _triplets_brute(x, y, d, min_link):
    """Triple-loop twin of :func:`aligned_triplets`."""
    xy = np.column_stack([x, y])
    out = set()
    n = len(x)
    for i, j, k in itertools.permutations(range(n), 3):
        if i > k:
            continue
        def link(a, b):
            near = np.hypot(*(xy[a] - xy[b])) <= max(LINK_FACTOR * (d[a] + d[b]) / 2, min_link)
            return near and max(d[a], d[b]) <= SIZE_RATIO * min(d[a], d[b])

        if not (link(i, j) and link(j, k)):
            continue
        ik = xy[k] - xy[i]
        t = np.dot(xy[j] - xy[i], ik) / np.dot(ik, ik)
        perp = abs(ik[0] * (xy[j] - xy[i])[1] - ik[1] * (xy[j] - xy[i])[0]) / np.hypot(*ik)
        if 0 < t < 1 and perp <= 0.5 * WIDTH_FACTOR * (d[i] + d[j] + d[k]) / 3:
            out.add((i, j, k))
    return out


def test_aligned_triplets_match_brute_force_twin():
    rng = np.random.default_rng(1)
    x, y = rng.uniform(0, 2000, (2, 45))
    d = rng.uniform(40, 200, 45)
    got = {tuple(t) for t in aligned_triplets(x, y, d, min_link_m=150.0).tolist()}
    assert got == _triplets_brute(x, y, d, 150.0)
    assert len(got) > 0


def test_chain_of_collinear_craters_is_one_chain_with_its_azimuth():
    # nine equal craters every 1.4 diameters along azimuth 30 deg (clockwise from +y)
    t = np.arange(9) * 140.0
    az = np.deg2rad(30.0)
    x, y = 1000 + t * np.sin(az), 2000 + t * np.cos(az)
    tri = aligned_triplets(x, y, np.full(9, 100.0))
    # link 5 D = 500 m reaches 1, 2 and 3 steps (140, 280, 420 m): middle j with ends
    # (j-a, j+b), a, b in 1..3, counted by hand over j = 0..8
    n_expected = sum(min(j, 3) * min(8 - j, 3) for j in range(9))
    assert n_expected == 0 + 3 + 6 + 9 + 9 + 9 + 6 + 3 + 0
    assert len(tri) == n_expected
    chain_id, chains = extract_chains(x, y, np.full(9, 100.0), tri)
    assert np.all(chain_id == 0) and len(chains) == 1
    assert chains[0]["n_craters"] == 9
    assert chains[0]["azimuth_deg"] == pytest.approx(30.0, abs=1e-6)
    assert chains[0]["length_m"] == pytest.approx(1120.0)
    assert chains[0]["geometry"].length == pytest.approx(1120.0)


def test_axial_rayleigh_on_doubled_angles():
    # Mardia & Jupp 2000 (Directional Statistics) s. 9.3: axes theta and theta + 180 are one axis
    rng = np.random.default_rng(3)
    axes = np.r_[rng.vonmises(np.deg2rad(40), 4, 60), rng.vonmises(np.deg2rad(220), 4, 60)]
    res = axial_rayleigh(np.rad2deg(axes) % 360)
    assert res.mean_axis_deg == pytest.approx(40.0, abs=5.0)
    assert res.p_value < 1e-6
    # under uniformity the test rejects at about the nominal rate (Zar's p, from memory)
    ps = np.array([axial_rayleigh(rng.uniform(0, 180, 30)).p_value for _ in range(2000)])
    assert 0.035 <= np.mean(ps < 0.05) <= 0.065
    # large-n limit: p -> exp(-Z) (Mardia & Jupp 2000, s. 6.3.1)
    many = axial_rayleigh(rng.vonmises(0, 0.05, 5000) * 90 / np.pi)
    assert many.p_value == pytest.approx(np.exp(-many.z), rel=0.05)


def test_rim_superposition_by_hand():
    # host D = 1000 m at the origin; crater 1 on its rim (dist 505 m, |505 - 500| < 50);
    # crater 2 inside (dist 300 m); crater 3 on the rim but larger than... no: same size
    # as a second host, so not 'on a larger rim'; crater 4 just outside the band (556 m)
    x = np.array([0.0, 505.0, 300.0, 0.0, 556.0])
    y = np.array([0.0, 0.0, 0.0, -500.0, 0.0])
    d = np.array([1000.0, 80.0, 80.0, 1000.0, 80.0])
    assert on_larger_rim(x, y, d).tolist() == [False, True, False, False, False]


def test_to_local_metric_distances_are_geodesic_from_centre():
    # azimuthal equidistant (Snyder 1987, USGS PP 1395): distance from the centre equals the
    # great-circle distance on the sphere; pyproj.Geod on the same sphere is the reference
    radius = 1_737_400.0
    lon = np.array([10.0, 10.5, 9.2, 11.0])
    lat = np.array([-20.0, -19.0, -21.5, -20.3])
    x, y = to_local_metric(lon, lat, radius, lon0=10.0, lat0=-20.0)
    _, _, dist = Geod(a=radius, b=radius).inv(np.full(4, 10.0), np.full(4, -20.0), lon, lat)
    np.testing.assert_allclose(np.hypot(x, y), dist, rtol=1e-9, atol=1e-6)
    assert x[0] == pytest.approx(0.0, abs=1e-6)
    assert local_metric_crs(radius, 10.0, -20.0).coordinate_operation.method_name == "Azimuthal Equidistant"
    # default centre: mean position, across the antimeridian too
    xs, _ = to_local_metric(np.array([179.5, -179.5]), np.array([0.0, 0.0]), radius)
    np.testing.assert_allclose(xs, [-radius * np.deg2rad(0.5), radius * np.deg2rad(0.5)], rtol=1e-9)


def test_chain_geometry_is_in_input_coordinates():
    x = np.linspace(0, 800, 6)
    y = 2 * x + 10
    chain_id, chains = extract_chains(x, y, np.full(6, 120.0), aligned_triplets(x, y, np.full(6, 120.0)))
    line = chains[0]["geometry"]
    assert isinstance(line, shapely.LineString)
    assert shapely.Point(400, 810).distance(line) < 1e-6
