"""Spatial randomness: Clark-Evans with Donnelly's correction, Ripley's K/L, CSR in a mask, clusters."""

import numpy as np
import pandas as pd
import pytest
import shapely
from scipy import stats
from scipy.spatial import cKDTree

from morpho.errors import InputError
from morpho.population.clusters import dbscan_clusters, dbscan_counts
from morpho.population.csr import simulate_csr
from morpho.population.nearest_neighbour import (
    clark_evans,
    csr_mean_nn_distance,
    donnelly_expectation,
)
from morpho.population.ripley import besag_l, default_radii, pair_correlation, ripley_k
from morpho.population.statistics import population_statistics

from .test_population_layouts import clustered_layout

UNIT = shapely.box(0, 0, 1, 1)


def test_donnelly_expectation_unit_square_n100():
    # reference sheet s. 5 (derived from Donnelly 1978, coefficients from memory):
    # n = 100 in the unit square -> E = 0.05222, Var = 8.51e-6
    mean, var = donnelly_expectation(100, 1.0, 4.0)
    assert mean == pytest.approx(0.05222, abs=5e-6)
    assert var == pytest.approx(8.51e-6, rel=2e-3)


def test_clark_evans_under_csr_rejects_at_nominal_rate_and_matches_donnelly():
    # Clark & Evans 1954 (Ecology 35:445) test with Donnelly's 1978 correction: under CSR the
    # 5 % test rejects ~5 % of 2000 patterns (binomial sd 0.5 %), and the simulated mean
    # NN distance agrees with 0.05222
    rng = np.random.default_rng(20)
    pts = rng.uniform(size=(2000, 100, 2))
    p = np.empty(2000)
    means = np.empty(2000)
    for k, xy in enumerate(pts):
        ce = clark_evans(xy[:, 0], xy[:, 1], 1.0, 4.0)
        p[k], means[k] = ce.p_value, ce.mean_nn_m
    assert 0.03 <= np.mean(p < 0.05) <= 0.07
    assert np.mean(means) == pytest.approx(0.05222, rel=0.005)
    assert np.var(means) == pytest.approx(8.51e-6, rel=0.15)


def test_mean_nn_distance_without_edges_is_half_over_sqrt_density():
    # Clark & Evans 1954: E[r] = 0.5/sqrt(rho) for an unbounded Poisson pattern; a periodic
    # (toroidal) square has no edge, so its simulated mean NN distance must match
    rng = np.random.default_rng(21)
    n = 400
    d = [cKDTree(xy, boxsize=1.0).query(xy, k=2)[0][:, 1].mean() for xy in rng.uniform(size=(200, n, 2))]
    assert np.mean(d) == pytest.approx(csr_mean_nn_distance(n), rel=0.005)
    assert csr_mean_nn_distance(n) == pytest.approx(0.025)


def test_csr_sampler_is_uniform_inside_a_polygon_with_a_hole():
    # uniform in area (Diggle 2003, ch. 1): share in a sub-region equals its area share,
    # nothing falls in the hole
    poly = shapely.Polygon([(0, 0), (4, 0), (4, 2), (0, 2)], holes=[[(1, 0.5), (2, 0.5), (2, 1.5), (1, 1.5)]])
    pts = simulate_csr(poly, 500, 20, rng=3).reshape(-1, 2)
    assert np.all(shapely.contains_xy(poly, pts[:, 0], pts[:, 1]))
    right = np.mean(pts[:, 0] > 2)
    assert right == pytest.approx(4 / 7, abs=4 * np.sqrt(4 / 7 * 3 / 7 / pts.shape[0]))
    # the x-coordinates of the right half are uniform (scipy.stats KS as independent reference)
    assert stats.kstest(pts[pts[:, 0] > 2, 0], stats.uniform(2, 2).cdf).pvalue > 0.001
    with pytest.raises(InputError):
        simulate_csr(shapely.Point(0, 0), 10)


def _ripley_border_brute(x, y, poly, r):
    """Double-loop twin of the border-corrected K estimator (Ripley 1988)."""
    b = np.array([poly.boundary.distance(shapely.Point(a, c)) for a, c in zip(x, y, strict=True)])
    n = len(x)
    out = []
    for rr in r:
        centres = [i for i in range(n) if b[i] >= rr]
        count = sum(1 for i in centres for j in range(n) if j != i and np.hypot(x[i] - x[j], y[i] - y[j]) <= rr)
        out.append(poly.area * count / ((n - 1) * len(centres)))
    return np.array(out)


def test_ripley_k_matches_brute_force_twin():
    rng = np.random.default_rng(7)
    x, y = rng.uniform(0, 1, (2, 60))
    r = np.array([0.05, 0.1, 0.17, 0.25])
    np.testing.assert_allclose(ripley_k(x, y, UNIT, r), _ripley_border_brute(x, y, UNIT, r))
    # the evenly spaced default grid takes an arithmetic shortcut: same answer
    r = default_radii(UNIT, 8)
    np.testing.assert_allclose(ripley_k(x, y, UNIT, r), _ripley_border_brute(x, y, UNIT, r))


def test_ripley_k_of_poisson_is_pi_r2_and_inside_envelope():
    # Ripley 1976 (J. Appl. Prob. 13:255), 1977 (JRSS B 39:172): K(r) = pi r^2 under CSR;
    # Besag 1977: L(r) = r
    r = default_radii(UNIT)
    sims = simulate_csr(UNIT, 300, 200, rng=8)
    k = np.array([ripley_k(s[:, 0], s[:, 1], UNIT, r) for s in sims])
    np.testing.assert_allclose(k[:, 5:].mean(axis=0), np.pi * r[5:] ** 2, rtol=0.02)
    np.testing.assert_allclose(besag_l(np.pi * r**2), r)
    # a further Poisson pattern lies inside the pointwise envelope of 199 simulations
    env_lo, env_hi = np.nanmin(besag_l(k[1:]), axis=0), np.nanmax(besag_l(k[1:]), axis=0)
    obs = besag_l(k[0])
    assert np.mean((obs >= env_lo) & (obs <= env_hi)) >= 0.95
    # pair correlation of CSR is 1 on average (Stoyan & Stoyan 1994)
    _, g = pair_correlation(r, k.mean(axis=0))
    np.testing.assert_allclose(g[5:], 1.0, atol=0.1)


def test_thomas_cluster_process_is_detected():
    # Thomas process (Diggle 2003, s. 5.3): K(r) = pi r^2 + (1 - exp(-r^2/(4 sigma^2)))/rho_parents,
    # so L exceeds r at cluster scales; Monte Carlo test of Besag & Diggle 1977 at 99 simulations
    rng = np.random.default_rng(9)
    x, y, _ = clustered_layout(rng, 25, 12, 0.02, side=1.0)
    res = population_statistics(x * 1e4, y * 1e4, np.full(x.size, 30.0), shapely.box(0, 0, 1e4, 1e4), seed=1)
    assert res.p("ripley_L_max_deviation") <= 0.01
    assert res.stat("clark_evans_R") < 0.7
    assert res.p("pair_correlation_peak") <= 0.01
    assert res.stat("dbscan_n_clusters") >= 15
    # most craters carry a cluster label
    assert np.mean(res.cluster_id >= 0) > 0.8


def test_dbscan_finds_almost_nothing_under_csr():
    # eps = CSR NN distance, min_samples 5: Poisson(pi/4) >= 4 has probability 0.009
    # (Ester et al. 1996 DBSCAN; Clark & Evans 1954 scale), so < 5 % of CSR points cluster
    rng = np.random.default_rng(10)
    shares = [np.mean(dbscan_clusters(*rng.uniform(0, 1, (2, 400)), 1.0) >= 0) for _ in range(20)]
    assert np.mean(shares) < 0.05


@pytest.mark.parametrize("pattern", ["csr", "clustered", "dense", "sparse"])
def test_dbscan_counts_match_scikit_learn(pattern):
    # The Monte Carlo envelopes count clusters with a k-d tree and connected components;
    # scikit-learn's DBSCAN (Ester et al. 1996) is the independent reference for the counts.
    rng = np.random.default_rng({"csr": 1, "clustered": 2, "dense": 3, "sparse": 4}[pattern])
    if pattern == "clustered":
        x, y = _thomas(rng)
        area = 1.0
    else:
        n = {"csr": 400, "dense": 3000, "sparse": 6}[pattern]
        x, y = rng.uniform(0, 1, (2, n))
        area = 1.0 if pattern != "dense" else 0.05  # small area: large eps, many core points
    labels = dbscan_clusters(x, y, area)
    n_clusters, share = dbscan_counts(x, y, area)
    assert n_clusters == labels.max() + 1
    assert share == pytest.approx(np.mean(labels >= 0), abs=1e-12)
    if pattern == "clustered":
        assert n_clusters >= 10  # the check is not vacuous


@pytest.mark.parametrize("pattern", ["csr", "clustered", "dense", "sparse", "touching"])
def test_dbscan_labels_equal_scikit_learn_label_for_label(pattern):
    # Ester et al. 1996 as scikit-learn implements it is the reference: clusters numbered by
    # their lowest-index core point, a border point in the first cluster that reaches it.
    # "touching": two clusters 1.5 eps apart share border points (the order matters there).
    from sklearn.cluster import DBSCAN

    rng = np.random.default_rng({"csr": 11, "clustered": 12, "dense": 13, "sparse": 14, "touching": 15}[pattern])
    area, eps = 1.0, None
    if pattern == "clustered":
        x, y = _thomas(rng)
    elif pattern == "touching":
        # two 5-point clusters whose central core points are 1.9 eps apart, and between them a
        # point 0.95 eps from both that has only those two as neighbours: a border point of both
        eps = 1.0
        a = np.array([[0.0, -0.5, -0.5, -0.6, -0.3], [0.0, 0.2, -0.2, 0.0, 0.0]])
        b = np.array([[1.9, 2.4, 2.4, 2.5, 2.2], [0.0, 0.2, -0.2, 0.0, 0.0]])
        x, y = np.concatenate([a, b, [[0.95], [0.0]]], axis=1)[:, rng.permutation(11)]
    else:
        n = {"csr": 400, "dense": 3000, "sparse": 6}[pattern]
        x, y = rng.uniform(0, 1, (2, n))
        area = 1.0 if pattern != "dense" else 0.05
    ours = dbscan_clusters(x, y, area, eps_m=eps)
    eps = eps if eps is not None else csr_mean_nn_distance(len(x) / area)
    ref = DBSCAN(eps=eps, min_samples=5).fit_predict(np.column_stack([x, y]))
    np.testing.assert_array_equal(ours, ref)
    if pattern in ("clustered", "touching"):
        assert ours.max() >= 1  # two or more clusters: the numbering is tested


def _thomas(rng, parents=20, per=15, sigma=0.01):
    """Thomas cluster process in the unit square (Diggle 2013, ch. 5; common practice)."""
    px, py = rng.uniform(0.05, 0.95, (2, parents))
    x = np.repeat(px, per) + rng.normal(0, sigma, parents * per)
    y = np.repeat(py, per) + rng.normal(0, sigma, parents * per)
    return x, y


def test_population_package_loads_its_statistics_on_first_use():
    # A survey's main process projects positions without importing the statistics' heavy
    # dependencies (they run on a Dask worker); the public names still resolve.
    import subprocess
    import sys

    code = ("import sys, morpho.population as p; from morpho.population.projection import to_local_metric; "
            "print('sklearn' in sys.modules, 'scipy.stats' in sys.modules); "
            "print(p.population_statistics.__module__, p.contrast_regions.__module__)")
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True).stdout.split("\n")
    assert out[0] == "False False"
    assert out[1] == "morpho.population.statistics morpho.population.contrast"
    # The statistics themselves need no scikit-learn (DBSCAN labels are computed here, checked
    # against scikit-learn above): the Dask worker that runs them is spared its ~1.5 s import.
    code = "import sys, morpho.population.statistics; print('sklearn' in sys.modules)"
    assert subprocess.run([sys.executable, "-c", code], capture_output=True, text=True,
                          check=True).stdout.strip() == "False"


def test_simulations_measured_in_parts_give_exactly_the_one_call_result():
    # Besag & Diggle 1977 (Appl. Stat. 26:327): a Monte Carlo test needs the same simulated
    # patterns however they are computed, so parts measured apart must reproduce one call bit
    # for bit (a survey splits them between two Dask workers).
    from morpho.population.statistics import simulated_measures

    x, y, d = clustered_layout(np.random.default_rng(3), 12, 10, 0.02, side=1.0)
    x, y, d = x * 1e4, y * 1e4, np.full(x.size, 30.0)
    area = shapely.box(0, 0, 1e4, 1e4)
    kw = dict(n_simulations=19, seed=7)
    whole = population_statistics(x, y, d, area, **kw)
    parts = simulated_measures(x, y, d, area, start=0, stop=6, **kw) + simulated_measures(x, y, d, area, start=6, **kw)
    split = population_statistics(x, y, d, area, simulated=parts, **kw)
    pd.testing.assert_frame_equal(split.stats, whole.stats, check_exact=True)
    pd.testing.assert_frame_equal(split.envelope, whole.envelope, check_exact=True)
    assert np.array_equal(split.cluster_id, whole.cluster_id)
    # the clustered layout is seen as such (p at its floor 1/20 for the L deviation)
    assert whole.p("ripley_L_max_deviation") == pytest.approx(1 / 20)
    with pytest.raises(InputError, match="simulated holds 6 measures for 19"):
        population_statistics(x, y, d, area, simulated=parts[:6], **kw)
