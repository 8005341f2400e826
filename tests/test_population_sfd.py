"""Size-frequency distributions: CATWG tables, completeness, ML slope, production function."""

import numpy as np
import pytest

from morpho.population.production import neukum2001_cumulative, production_function_fit
from morpho.population.sfd import (
    catwg_bin_edges,
    estimate_completeness,
    powerlaw_slope_ml,
    sfd_table,
)

SQRT2 = np.sqrt(2.0)


def pareto_diameters(rng, n, d_min_m, cumulative_slope):
    """Inverse-CDF draws with N(>=D) ~ D^cumulative_slope above d_min_m."""
    return d_min_m * (1.0 - rng.uniform(size=n)) ** (1.0 / cumulative_slope)


def test_catwg_bin_edges_are_root2_steps_anchored_at_1km():
    # Crater Analysis Techniques Working Group 1979, Icarus 37:467: bins a factor sqrt(2)
    # wide on the standard sequence 2^(k/2) km (from memory, reference sheet s. 3.1)
    edges = catwg_bin_edges(1100.0, 3000.0)
    np.testing.assert_allclose(edges, [1000.0, 1000 * SQRT2, 2000.0, 2000 * SQRT2, 4000.0])
    np.testing.assert_allclose(catwg_bin_edges(60.0, 90.0), 1000 * 2.0 ** (np.arange(-9, -5) / 2))


def test_catwg_worked_example_by_hand():
    # six craters on 100 km^2; hand computation of the CATWG 1979 (Icarus 37:467) forms:
    # bin [1, sqrt2) km holds 1.0, 1.2 -> n = 2, D_mean = 2^(1/4) km, D_mean^3 = 2^(3/4) = 1.681793,
    # width sqrt2 - 1 = 0.414214 km -> R = 1.681793 * 2 / (100 * 0.414214) = 0.081205
    # bin [sqrt2, 2) holds 1.5, 1.9 -> D_mean^3 = 2^(9/4) = 4.756828, width 0.585786
    # -> R = 4.756828 * 2 / (100 * 0.585786) = 0.162408
    # bins [2, 2 sqrt2) and [2 sqrt2, 4) hold one each -> R = 2^(15/4)/(100*0.828427) = 0.162408
    # and 2^(21/4)/(100*1.171573) = 0.324815
    d = np.array([1.0, 1.2, 1.5, 1.9, 2.1, 3.0]) * 1000
    t = sfd_table(d, area_m2=100e6)
    assert t["n"].tolist() == [2, 2, 1, 1]
    np.testing.assert_allclose(t["R"], [0.081205, 0.162408, 0.162408, 0.324815], rtol=2e-5)
    # Poisson errors: R / sqrt(n)
    np.testing.assert_allclose(t["R_err"], t["R"] / np.sqrt([2, 2, 1, 1]))
    # cumulative N(>= D_low) per km^2 and sqrt(N)/A: 6, 4, 2, 1 craters on 100 km^2
    np.testing.assert_allclose(t["cumulative_per_km2"], [0.06, 0.04, 0.02, 0.01])
    np.testing.assert_allclose(t["cumulative_per_km2_err"], np.sqrt([6, 4, 2, 1]) / 100)
    np.testing.assert_allclose(t["incremental_per_km2"], [0.02, 0.02, 0.01, 0.01])


def test_bin_is_closed_below_open_above():
    # a crater exactly at sqrt(2) km belongs to the upper bin [sqrt2, 2) (CATWG 1979 convention, from memory)
    t = sfd_table(np.array([1000.0, 1000 * SQRT2]), area_m2=1e6)
    assert t["n"].tolist()[:2] == [1, 1]


def test_ml_slope_recovers_known_power_law():
    # Clauset, Shalizi & Newman 2009 (SIAM Rev. 51:661) eq. 3.1: alpha = 1 + n / sum ln(x/x_min)
    rng = np.random.default_rng(11)
    fit = powerlaw_slope_ml(pareto_diameters(rng, 4000, 200.0, -2.0), 200.0)
    assert fit.cumulative_slope == pytest.approx(-2.0, abs=3 * fit.cumulative_slope_err)
    assert fit.cumulative_slope_err == pytest.approx(1.0 / np.sqrt(4000) * 2.0, rel=0.05)
    # eq. 3.2: the standard error (alpha - 1)/sqrt(n) matches the scatter over replicates
    fits = [powerlaw_slope_ml(pareto_diameters(rng, 400, 50.0, -1.5), 50.0).alpha for _ in range(300)]
    assert np.mean(fits) == pytest.approx(2.5, abs=0.02)
    assert np.std(fits) == pytest.approx(1.5 / np.sqrt(400), rel=0.15)


def test_completeness_found_at_roll_over():
    # a population complete above 400 m with a detection roll-over below it (half the
    # craters between 200 and 400 m lost): the modal root-2 bin starts at the roll-over
    # (common practice)
    rng = np.random.default_rng(2)
    d = pareto_diameters(rng, 5000, 200.0, -2.0)
    lost = (d < 400) & (rng.uniform(size=d.size) < (400 - d) / 200)
    dc = estimate_completeness(d[~lost])
    assert 280 <= dc <= 400
    # a sample that only falls off toward small sizes (uniform diameters) has no roll-over
    assert estimate_completeness(rng.uniform(100, 300, 500)) == pytest.approx(100, abs=2)


def test_neukum_2001_production_function_values():
    # derived from the Neukum, Ivanov & Hartmann 2001 (Space Sci. Rev. 96:55) coefficients,
    # reference sheet s. 3.2 (coefficients from memory; values derived there)
    n = neukum2001_cumulative([0.01, 0.1, 1.0, 10.0, 100.0, 300.0])
    np.testing.assert_allclose(n, [3.703e3, 2.833, 8.173e-4, 4.491e-6, 5.639e-8, 3.807e-9], rtol=1e-3)
    assert np.isnan(neukum2001_cumulative(1000.0))


def _draw_from_pf(rng, n, d_min_km):
    grid = np.geomspace(d_min_km, 300.0, 4000)
    surv = neukum2001_cumulative(grid) / neukum2001_cumulative(d_min_km)
    u = rng.uniform(size=n)
    return np.interp(-u, -surv, grid) * 1000.0


def test_production_function_shape_test_accepts_pf_and_rejects_other_slopes():
    # a sample drawn from the PF shape itself passes at about the nominal rate; a D^-3
    # cumulative law does not (Neukum et al. 2001; KS: Massey 1951, JASA 46:68)
    rng = np.random.default_rng(4)
    ps = [production_function_fit(_draw_from_pf(rng, 300, 0.5), 1e9, 500.0).p_value for _ in range(60)]
    assert np.mean(np.array(ps) < 0.05) <= 0.15
    other = production_function_fit(pareto_diameters(rng, 1000, 500.0, -3.0), 1e9, 500.0)
    assert other.p_value < 1e-6


def test_production_function_normalisation_recovered():
    # 2000 craters >= 0.5 km drawn on an area chosen so that N(>=1 km) equals the PF's
    # 10^a0 = 8.173e-4 km^-2 (Neukum et al. 2001, from memory): the fit returns that value
    rng = np.random.default_rng(5)
    area_km2 = 2000 / float(neukum2001_cumulative(0.5))
    fit = production_function_fit(_draw_from_pf(rng, 2000, 0.5), area_km2 * 1e6, 500.0)
    assert fit.n1_per_km2 == pytest.approx(8.173e-4, rel=1e-3)
