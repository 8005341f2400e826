"""The issue's figures on layouts built here: random, clustered, a planted chain; the result contract.

Layouts come from the small numpy generators below (not from morpho.synth), so these
checks do not depend on another part of morpho.
"""

import geopandas as gpd
import numpy as np
import pytest
import shapely

from morpho.dictionary import _population
from morpho.errors import InputError
from morpho.population import population_statistics

SIDE = 20_000.0
BOX = shapely.box(0, 0, SIDE, SIDE)
# an irregular footprint with a data hole: areas must come from the mask, not the bounds
MASK = shapely.Polygon([(0, 0), (SIDE, 0), (SIDE, 0.6 * SIDE), (0.5 * SIDE, SIDE), (0, SIDE)],
                       holes=[[(4000, 4000), (8000, 4000), (8000, 7000), (4000, 7000)]])


def powerlaw_diameters(rng, n, d_min=60.0, cumulative_slope=-2.0):
    return d_min * (1.0 - rng.uniform(size=n)) ** (1.0 / cumulative_slope)


def random_layout(rng, n, area=BOX):
    xmin, ymin, xmax, ymax = area.bounds
    x, y = rng.uniform(xmin, xmax, 4 * n), rng.uniform(ymin, ymax, 4 * n)
    inside = shapely.contains_xy(area, x, y)
    x, y = x[inside][:n], y[inside][:n]
    return x, y, powerlaw_diameters(rng, x.size)


def clustered_layout(rng, n_parents=20, children=15, sigma=400.0, side=SIDE, d_min=60.0):
    """Thomas process: Gaussian clusters around Poisson parents (Diggle 2003, s. 5.3)."""
    px, py = rng.uniform(0, side, (2, n_parents))
    k = rng.poisson(children, n_parents)
    x = np.repeat(px, k) + rng.normal(0, sigma, k.sum())
    y = np.repeat(py, k) + rng.normal(0, sigma, k.sum())
    keep = (x > 0) & (x < side) & (y > 0) & (y < side)
    return x[keep], y[keep], powerlaw_diameters(rng, int(keep.sum()), d_min)


def chain_layout(rng, n_background=250, d_chain=300.0, spacing=1.6, jitter=0.05):
    """Random background plus nine equal craters on a line, slightly jittered."""
    x, y, d = random_layout(rng, n_background)
    az = rng.uniform(0, np.pi)
    t = np.arange(9) * spacing * d_chain
    cx = 6000 + t * np.sin(az) + rng.normal(0, jitter * d_chain, 9)
    cy = 9000 + t * np.cos(az) + rng.normal(0, jitter * d_chain, 9)
    return np.r_[x, cx], np.r_[y, cy], np.r_[d, np.full(9, d_chain)]


@pytest.mark.parametrize("seed, n, area", [(1, 300, BOX), (2, 120, BOX), (3, 400, MASK)])
def test_random_layout_clark_evans_in_range(seed, n, area):
    # issue 7 figure: random layout R in 0.85-1.2 (Clark & Evans 1954; Donnelly 1978 edge correction)
    res = population_statistics(*random_layout(np.random.default_rng(seed), n, area), area, seed=seed,
                                n_simulations=39)
    assert 0.85 <= res.stat("clark_evans_R") <= 1.2
    assert res.p("ripley_L_max_deviation") > 0.05


def test_clustered_layout_clark_evans_low_and_significant():
    # issue 7 figure: clustered R < 0.7 with p < 0.001
    res = population_statistics(*clustered_layout(np.random.default_rng(4)), BOX, seed=4)
    assert res.stat("clark_evans_R") < 0.7
    assert res.p("clark_evans_R") < 0.001
    assert res.p("dbscan_clustered_fraction") <= 0.01


@pytest.mark.parametrize("seed, n_background, d_chain, spacing",
                         [(5, 250, 300.0, 1.6), (6, 250, 300.0, 1.6), (7, 900, 150.0, 2.5), (8, 120, 80.0, 1.0)])
def test_planted_chain_of_nine_is_significant_and_extracted(seed, n_background, d_chain, spacing):
    # issue 7 figure: alignment p < 0.05 (Monte Carlo in the spirit of Broadbent 1980, JRSS A 143:109);
    # sparse and dense backgrounds, touching and spaced chains
    x, y, d = chain_layout(np.random.default_rng(seed), n_background, d_chain, spacing)
    res = population_statistics(x, y, d, BOX, seed=seed)
    assert res.p("alignment_excess") < 0.05
    assert res.stat("alignment_excess") > 5
    planted = res.chain_id[-9:]
    assert planted[0] >= 0 and np.all(planted == planted[0])
    chain = res.chains[planted[0]]
    assert chain["n_craters"] >= 9


def test_random_layout_has_no_alignment_or_rim_excess():
    # the Monte Carlo null is the layout's own generating process: p-values well away from 0
    res = population_statistics(*random_layout(np.random.default_rng(7), 300), BOX, seed=7)
    assert res.p("alignment_excess") > 0.05
    assert res.p("rim_superposition_excess") > 0.05


def test_result_contract_and_dictionary():
    rng = np.random.default_rng(8)
    x, y, d = random_layout(rng, 200)
    az, ell = rng.uniform(0, 180, x.size), rng.uniform(1.0, 1.5, x.size)
    res = population_statistics(x, y, d, BOX, ellipse_azimuth_deg=az, ellipticity=ell, n_simulations=19,
                                completeness_diameter_m=80.0)
    assert list(res.stats.columns) == [f.name for f in _population.FIELDS]
    names = set(res.stats["statistic"])
    for required in ("clark_evans_R", "ripley_L_max_deviation", "alignment_excess",
                     "rim_superposition_excess", "csfd_slope", "csfd_slope_err", "completeness_diameter_m",
                     "production_function_ks", "dbscan_n_clusters", "chain_azimuth_rayleigh_rbar",
                     "elongation_rayleigh_rbar"):
        assert required in names
    assert res.completeness_diameter_m == 80.0
    assert res.n_craters == int(np.sum(d >= 80.0))
    assert res.cluster_id.shape == res.chain_id.shape == x.shape
    assert np.all(res.cluster_id[d < 80.0] == -1)
    # the ML slope of this D^-2 population is about -2 (Clauset et al. 2009)
    assert res.stat("csfd_slope") == pytest.approx(-2.0, abs=4 * res.stat("csfd_slope_err"))
    assert {f.name for f in _population.CRATER_FIELDS} == {"cluster_id", "chain_id"}
    gdf = gpd.GeoDataFrame(res.chains, geometry="geometry") if res.chains else None
    assert gdf is None or set(gdf.columns) >= {f.name for f in _population.CHAIN_FIELDS}
    # same input and seed, same output
    again = population_statistics(x, y, d, BOX, ellipse_azimuth_deg=az, ellipticity=ell, n_simulations=19,
                                  completeness_diameter_m=80.0)
    assert res.stats.equals(again.stats)


def test_diameter_classes_split_clark_evans():
    # large craters clustered, small ones random: only the large class is clustered
    rng = np.random.default_rng(9)
    xs, ys, _ = random_layout(rng, 300)
    xl, yl, _ = clustered_layout(rng, n_parents=10, children=12, sigma=300.0)
    x, y = np.r_[xs, xl], np.r_[ys, yl]
    d = np.r_[np.full(xs.size, 100.0), np.full(xl.size, 400.0)]
    res = population_statistics(x, y, d, BOX, completeness_diameter_m=50.0, diameter_classes_m=[50, 200, 800],
                                n_simulations=19)
    assert 0.85 <= res.stat("clark_evans_R_D50-200m") <= 1.2
    assert res.stat("clark_evans_R_D200-800m") < 0.7 and res.p("clark_evans_R_D200-800m") < 0.001


def test_mask_null_and_craters_outside_the_mask():
    # in an irregular footprint with a hole the CSR-in-mask ratio is ~1 for CSR (exact null,
    # Besag & Diggle 1977); a crater centred outside the footprint is left out and counted
    rng = np.random.default_rng(10)
    x, y, d = random_layout(rng, 300, MASK)
    x, y, d = np.r_[x, 6000.0], np.r_[y, 5500.0], np.r_[d, 500.0]   # inside the hole
    res = population_statistics(x, y, d, MASK, seed=10, n_simulations=49)
    assert res.stat("clark_evans_R_mask") == pytest.approx(1.0, abs=0.1)
    assert res.p("clark_evans_R_mask") > 0.05
    assert res.stat("n_outside_area") == 1
    assert res.cluster_id[-1] == -1
    assert res.n_craters == int(np.sum(d[:-1] >= res.completeness_diameter_m))


@pytest.mark.parametrize("n", [0, 2, 6])
def test_tiny_surveys_give_nan_not_errors(n):
    # six craters in a row hugging a corner: no point lies far enough inside for K; the
    # statistics that cannot be had are NaN (warnings are errors in this test run)
    x = np.arange(n) * 10.0
    res = population_statistics(x, x * 0.7, np.full(n, 20.0), BOX, n_simulations=9)
    assert res.n_craters == n and len(res.stats) > 20
    assert np.isnan(res.stat("ripley_L_max_deviation"))
    assert res.cluster_id.shape == (n,)


def test_bad_inputs_raise_morpho_errors():
    with pytest.raises(InputError):
        population_statistics([0, 1], [0], [1, 1], BOX)
    with pytest.raises(InputError):
        population_statistics([0, 1], [0, 1], [1, np.nan], BOX)
    with pytest.raises(InputError):
        population_statistics([0, 1], [0, 1], [1, 1], shapely.box(0, 0, 1, 1).exterior)
