"""One call for all population statistics of a survey: the ``population`` layer rows."""

from __future__ import annotations

import warnings
from dataclasses import dataclass, field

import numpy as np
import pandas as pd
import shapely

from ..errors import InputError
from .alignments import ALIGNMENT_REFERENCE, aligned_triplets, extract_chains, longest_chain
from .clusters import DBSCAN_REFERENCE, dbscan_clusters, dbscan_counts
from .csr import check_area, check_points, simulate_csr
from .nearest_neighbour import (
    CLARK_EVANS_REFERENCE,
    clark_evans,
    csr_mean_nn_distance,
    nearest_neighbour_distances,
)
from .orientation import RAYLEIGH_REFERENCE, axial_rayleigh
from .production import NEUKUM_REFERENCE, production_function_fit
from .ripley import RIPLEY_REFERENCE, besag_l, default_radii, pair_correlation, ripley_k
from .sfd import (
    CATWG_REFERENCE,
    CLAUSET_REFERENCE,
    estimate_completeness,
    powerlaw_slope_ml,
    sfd_table,
)
from .superposition import SUPERPOSITION_REFERENCE, on_larger_rim

__all__ = ["PopulationResult", "population_statistics", "simulated_measures", "STAT_COLUMNS", "ELONGATED"]

STAT_COLUMNS = ("statistic", "value", "p_value", "n", "method", "reference")
#: Craters with ellipticity (long/short axis) below this carry no usable azimuth.
ELONGATED = 1.1
_MC = "Monte Carlo p-value (1 + #{sim >= obs})/(1 + n_sim) against CSR simulated inside the valid-data mask"
_MC_REF = "Besag & Diggle 1977, Appl. Stat. 26:327 (Monte Carlo tests)"


@dataclass
class PopulationResult:
    """Population statistics of one survey.

    Attributes
    ----------
    stats : pandas.DataFrame
        One row per statistic: ``statistic, value, p_value, n, method, reference``.
    cluster_id : numpy.ndarray of int64, shape (n_input,)
        DBSCAN cluster per input crater, -1 for none or below completeness.
    chain_id : numpy.ndarray of int64, shape (n_input,)
        Chain per input crater, -1 for none or below completeness.
    chains : list of dict
        ``chain_id, n_craters, length_m, azimuth_deg, geometry`` (shapely LineString in
        the input coordinates); ready for ``geopandas.GeoDataFrame(chains)``.
    n_craters : int
        Craters at or above the completeness diameter (those the statistics use).
    completeness_diameter_m : float
    sfd : pandas.DataFrame
        Root-2 SFD table of all craters inside the valid area (see
        :func:`morpho.population.sfd.sfd_table`).
    envelope : pandas.DataFrame
        ``r_m, L_m, L_low_m, L_high_m, L_mean_m`` for plotting Besag's L with its envelope.
    """

    stats: pd.DataFrame
    cluster_id: np.ndarray
    chain_id: np.ndarray
    chains: list
    n_craters: int
    completeness_diameter_m: float
    sfd: pd.DataFrame
    envelope: pd.DataFrame = field(default_factory=pd.DataFrame)

    def stat(self, name: str) -> float:
        """Value of statistic ``name``."""
        return float(self.stats.loc[self.stats["statistic"] == name, "value"].iloc[0])

    def p(self, name: str) -> float:
        """p-value of statistic ``name``."""
        return float(self.stats.loc[self.stats["statistic"] == name, "p_value"].iloc[0])


def _mc_p(observed: float, simulated: np.ndarray) -> float:
    if not np.isfinite(observed):
        return np.nan
    return float((1 + np.sum(simulated >= observed)) / (1 + simulated.size))


def _min_p_combined(observed, simulated) -> float:
    """Monte Carlo p of several statistics at once by the minimum-p rule.

    Each of the n_sim + 1 patterns (observed first) gets its rank p-value for every
    statistic among all patterns; the combined statistic is the smallest of them, and
    its p-value is its rank among the patterns. Exchangeability under the null keeps
    the test exact, whichever statistic carries the signal.

    References
    ----------
    Westfall P.H., Young S.S. (1993) *Resampling-Based Multiple Testing*, Wiley, ch. 2.
    """
    table = np.column_stack([np.r_[o, s] for o, s in zip(observed, simulated, strict=True)])
    rank_p = (table[None, :, :] >= table[:, None, :]).sum(axis=1) / table.shape[0]
    combined = rank_p.min(axis=1)
    return float(np.mean(combined <= combined[0]))


def _spatial_measures(x, y, d, valid_area, radii, min_link, labels=False):
    """Statistics recomputed on every CSR simulation, as a dict of scalars (and, with
    ``labels``, the cluster labels of the observed pattern)."""
    area = valid_area.area
    k = ripley_k(x, y, valid_area, radii)
    _, g = pair_correlation(radii, k)
    if labels:
        lab = dbscan_clusters(x, y, area)
        n_clusters, clustered = lab.max() + 1, np.mean(lab >= 0)
    else:  # simulated patterns: only the counts enter the test
        lab = None
        n_clusters, clustered = dbscan_counts(x, y, area)
    tri = aligned_triplets(x, y, d, min_link_m=min_link)
    rim = on_larger_rim(x, y, d)
    return {
        "nn_mean": float(np.mean(nearest_neighbour_distances(x, y))),
        "L": besag_l(k), "g_peak": float(np.nanmax(g)) if np.any(np.isfinite(g)) else np.nan,
        "n_clusters": float(n_clusters), "clustered": float(clustered),
        "triplets": float(len(tri)), "longest_chain": float(longest_chain(x, y, d, tri)), "rim_share": float(np.mean(rim)),
        "_labels": lab, "_tri": tri,
    }


def _counted(x_m, y_m, diameter_m, valid_area, completeness_diameter_m, n_simulations):
    """Validated inputs and the craters the statistics count (inside the area, >= completeness)."""
    x, y, d = check_points(x_m, y_m, diameter_m, names=("x_m", "y_m", "diameter_m"))
    valid_area = check_area(valid_area)
    if int(n_simulations) < 1:
        raise InputError(f"n_simulations must be >= 1, got {n_simulations}.",
                         fix="use 99 (p >= 0.01) or 999 (p >= 0.001)")
    if np.any(d <= 0):
        raise InputError("diameter_m must be positive.", fix="drop craters without a measured diameter")
    # centres outside the mask would meet an empty null: they are left out and counted
    inside = shapely.intersects_xy(valid_area, x, y)
    d_in = d[inside]
    dc = estimate_completeness(d_in) if completeness_diameter_m is None else float(completeness_diameter_m)
    keep = (d >= dc) & inside
    return x, y, d, valid_area, inside, dc, keep


def _null_setup(valid_area, n, n_simulations, seed):
    """Radii, chain link length and the CSR patterns of the Monte Carlo tests (n >= 5 craters)."""
    rng = np.random.default_rng(seed)
    radii = default_radii(valid_area, n_points=n)
    min_link = csr_mean_nn_distance(n / valid_area.area)
    return radii, min_link, simulate_csr(valid_area, n, n_simulations, rng=rng)


def simulated_measures(x_m, y_m, diameter_m, valid_area, *, completeness_diameter_m=None,
                       n_simulations: int = 99, seed=0, start: int = 0, stop: int | None = None) -> list:
    """The Monte Carlo part of :func:`population_statistics`, for simulations ``start:stop``.

    The same arguments draw the same CSR patterns, so parts computed apart (e.g. on two
    workers) and passed back as ``population_statistics(..., simulated=part_a + part_b)``
    give exactly the result of one call. ``seed`` must then be an int (or equal-state
    generators), as each call draws all the patterns afresh (cheap beside their measures).

    Returns
    -------
    list of dict
        One entry per simulation in ``start:stop``; empty when fewer than 5 craters count.
    """
    x, y, d, valid_area, _, _, keep = _counted(x_m, y_m, diameter_m, valid_area, completeness_diameter_m,
                                               n_simulations)
    n = int(keep.sum())
    if n < 5:
        return []
    radii, min_link, sims = _null_setup(valid_area, n, n_simulations, seed)
    return _measure_simulations(sims[start:stop], d[keep], valid_area, radii, min_link)


def _measure_simulations(sims, d, valid_area, radii, min_link) -> list:
    """:func:`_spatial_measures` of each simulated pattern (shape (k, n, 2)), with the observed diameters."""
    return [_spatial_measures(s[:, 0], s[:, 1], d, valid_area, radii, min_link) for s in sims]


def population_statistics(x_m, y_m, diameter_m, valid_area, *, ellipse_azimuth_deg=None, ellipticity=None,
                          completeness_diameter_m=None, diameter_classes_m=None, n_simulations: int = 99,
                          seed=0, simulated: list | None = None) -> PopulationResult:
    """Size-frequency, spatial-randomness, clustering, alignment and superposition statistics.

    Statistics use the craters at or above the completeness diameter; p-values of the
    spatial statistics come from CSR simulated inside ``valid_area`` with the observed
    diameters, except Clark-Evans (Donnelly's normal approximation) and the Rayleigh
    and production-function tests (analytic).

    Parameters
    ----------
    x_m, y_m : array_like, shape (n,)
        Crater centres in a local metric plane (m), e.g. from
        :func:`morpho.population.to_local_metric`.
    diameter_m : array_like, shape (n,)
        Rim-crest diameters (m).
    valid_area : shapely.Polygon or shapely.MultiPolygon
        Valid-data footprint in the same plane; all areas come from it.
    ellipse_azimuth_deg, ellipticity : array_like, shape (n,), optional
        Long-axis azimuth (degrees) and long/short axis ratio of each crater, for the
        axial Rayleigh test of elongation (craters with ellipticity >= 1.1 only).
    completeness_diameter_m : float, optional
        Set the completeness limit; default from the SFD roll-over.
    diameter_classes_m : sequence of float, optional
        Class edges (m); adds a Clark-Evans row per class ``[lo, hi)`` holding >= 10
        craters above completeness, named ``clark_evans_R_D<lo>-<hi>m``.
    n_simulations : int
        CSR simulations for the Monte Carlo tests (99 gives p >= 0.01).
    seed : int or numpy.random.Generator
        Randomness of the simulations.
    simulated : list of dict, optional
        The simulations' measures from :func:`simulated_measures` with the same arguments
        (all ``n_simulations`` of them, in order), computed elsewhere; default: computed here.

    Returns
    -------
    PopulationResult

    References
    ----------
    See the ``reference`` column of ``stats``; Besag J., Diggle P.J. (1977) Simple Monte
    Carlo tests for spatial pattern, Applied Statistics 26:327-333.

    Examples
    --------
    >>> import numpy as np, shapely
    >>> rng = np.random.default_rng(1)
    >>> x, y = rng.uniform(0, 10_000, (2, 200))
    >>> d = 50 * (1 - rng.uniform(size=200)) ** -0.5
    >>> res = population_statistics(x, y, d, shapely.box(0, 0, 10_000, 10_000), n_simulations=19)
    >>> 0.85 < res.stat("clark_evans_R") < 1.15
    True
    """
    x, y, d, valid_area, inside, dc, keep = _counted(x_m, y_m, diameter_m, valid_area, completeness_diameter_m,
                                                     n_simulations)
    n_all = x.size
    area = valid_area.area
    d_in = d[inside]
    xs, ys, ds = x[keep], y[keep], d[keep]
    n = xs.size
    rows = []

    def add(name, value, p, count, method, reference):
        rows.append((name, float(value), float(p), int(count), method, reference))

    add("n_craters", n, np.nan, n, "craters with diameter >= completeness diameter", "common practice")
    add("n_outside_area", int(np.sum(~inside)), np.nan, n_all,
        "craters whose centre lies outside valid_area (left out of every statistic)", "common practice")
    add("completeness_diameter_m", dc, np.nan, n_all,
        "lower edge of the modal root-2 bin (SFD roll-over)" if completeness_diameter_m is None
        else "set by the user", CATWG_REFERENCE)
    add("crater_density_per_km2", n / (area / 1e6), np.nan, n,
        "N(>= completeness diameter) / valid-data area", CATWG_REFERENCE)
    fit = powerlaw_slope_ml(d_in, dc) if d_in.size else powerlaw_slope_ml([], 1.0)
    add("csfd_slope", fit.cumulative_slope, np.nan, fit.n,
        "cumulative log-log slope 1 - alpha; alpha by maximum likelihood above completeness", CLAUSET_REFERENCE)
    add("csfd_slope_err", fit.cumulative_slope_err, np.nan, fit.n,
        "standard error (alpha - 1)/sqrt(n)", CLAUSET_REFERENCE)
    pf = production_function_fit(d_in, area, dc) if d_in.size else production_function_fit([], area, 1.0)
    add("production_function_ks", pf.ks_statistic, pf.p_value, pf.n,
        "one-sample Kolmogorov-Smirnov of diameters above completeness against the production-function "
        "shape, normalisation fitted", NEUKUM_REFERENCE)
    add("production_function_n1_per_km2", pf.n1_per_km2, np.nan, pf.n,
        "production function N(>=1 km) scaled to the count above completeness", NEUKUM_REFERENCE)

    ce = clark_evans(xs, ys, area, valid_area.length)
    add("clark_evans_R", ce.R, ce.p_value, n,
        "mean nearest-neighbour distance / Donnelly edge-corrected CSR expectation; two-sided normal test",
        CLARK_EVANS_REFERENCE)
    add("clark_evans_z", ce.z, ce.p_value, n, "normal deviate of the mean nearest-neighbour distance",
        CLARK_EVANS_REFERENCE)

    edges = np.asarray(diameter_classes_m if diameter_classes_m is not None else [], float)
    for lo, hi in zip(edges[:-1], edges[1:], strict=True):
        cls = (ds >= lo) & (ds < hi)
        if cls.sum() >= 10:
            ce_k = clark_evans(xs[cls], ys[cls], area, valid_area.length)
            add(f"clark_evans_R_D{lo:g}-{hi:g}m", ce_k.R, ce_k.p_value, ce_k.n,
                f"as clark_evans_R, craters with {lo:g} <= D < {hi:g} m", CLARK_EVANS_REFERENCE)

    cluster_id = np.full(n_all, -1, dtype=np.int64)
    chain_id = np.full(n_all, -1, dtype=np.int64)
    chains: list = []
    envelope = pd.DataFrame()
    if n >= 5:
        radii, min_link, sims = _null_setup(valid_area, n, n_simulations, seed)
        obs = _spatial_measures(xs, ys, ds, valid_area, radii, min_link, labels=True)
        if simulated is None:
            sim = _measure_simulations(sims, ds, valid_area, radii, min_link)
        elif len(simulated) == len(sims):
            sim = list(simulated)
        else:
            raise InputError(f"simulated holds {len(simulated)} measures for {len(sims)} simulations.",
                             fix="pass every part of simulated_measures with the same arguments, in order")
        l_sim = np.array([s["L"] for s in sim])
        with warnings.catch_warnings():
            # radii no point reaches inside the mask are NaN throughout; they stay NaN
            warnings.simplefilter("ignore", RuntimeWarning)
            l_mean = np.nanmean(l_sim, axis=0)
            dev_sim = np.nanmax(np.abs(l_sim - l_mean), axis=1)
            dev_obs = float(np.nanmax(np.abs(obs["L"] - l_mean)))
            envelope = pd.DataFrame({"r_m": radii, "L_m": obs["L"], "L_low_m": np.nanmin(l_sim, axis=0),
                                     "L_high_m": np.nanmax(l_sim, axis=0), "L_mean_m": l_mean})
        add("ripley_L_max_deviation", dev_obs, _mc_p(dev_obs, dev_sim), n,
            f"max over r <= {radii[-1]:.4g} m of |L(r) - mean simulated L(r)| (m), border-corrected K; "
            "global deviation test", RIPLEY_REFERENCE)
        nn_sim = np.array([s["nn_mean"] for s in sim])
        r_mask = obs["nn_mean"] / nn_sim.mean()
        # two-sided: the rarer tail, doubled (Besag & Diggle 1977)
        p_mask = min(1.0, 2 * min(_mc_p(obs["nn_mean"], nn_sim), _mc_p(-obs["nn_mean"], -nn_sim)))
        add("clark_evans_R_mask", r_mask, p_mask, n,
            "mean nearest-neighbour distance / its mean under CSR simulated in the mask (exact edge "
            "treatment for any footprint); two-sided " + _MC, CLARK_EVANS_REFERENCE + "; " + _MC_REF)
        simulated = {key: np.array([s[key] for s in sim]) for key in ("g_peak", "n_clusters", "clustered",
                                                                       "triplets", "longest_chain", "rim_share")}
        add("pair_correlation_peak", obs["g_peak"], _mc_p(obs["g_peak"], simulated["g_peak"]), n,
            "maximum of g(r) = K'(r)/(2 pi r) over the K radii; " + _MC, RIPLEY_REFERENCE)
        add("dbscan_n_clusters", obs["n_clusters"], _mc_p(obs["n_clusters"], simulated["n_clusters"]), n,
            "DBSCAN clusters, eps = CSR mean nearest-neighbour distance 0.5/sqrt(n/A), min_samples 5; " + _MC,
            DBSCAN_REFERENCE)
        add("dbscan_clustered_fraction", obs["clustered"], _mc_p(obs["clustered"], simulated["clustered"]), n,
            "share of craters in a DBSCAN cluster; " + _MC, DBSCAN_REFERENCE)
        add("aligned_triplets", obs["triplets"], _mc_p(obs["triplets"], simulated["triplets"]), n,
            "neighbouring triplets whose middle centre is within 0.25 mean diameter of the line through the "
            "outer two; " + _MC, ALIGNMENT_REFERENCE)
        add("alignment_excess", obs["triplets"] - simulated["triplets"].mean(),
            _min_p_combined((obs["triplets"], obs["longest_chain"]),
                            (simulated["triplets"], simulated["longest_chain"])), n,
            "aligned triplets observed minus the CSR mean; p: Monte Carlo test of triplet count and longest "
            "chain together (minimum-p rule, Westfall & Young 1993) against CSR in the mask", ALIGNMENT_REFERENCE)
        add("longest_chain", obs["longest_chain"], _mc_p(obs["longest_chain"], simulated["longest_chain"]), n,
            "craters in the largest group of aligned triplets joined by shared pairs; " + _MC,
            ALIGNMENT_REFERENCE)
        add("rim_superposition_share", obs["rim_share"], _mc_p(obs["rim_share"], simulated["rim_share"]), n,
            "share of craters centred within +-10 % of the radius of a larger crater's rim; " + _MC,
            SUPERPOSITION_REFERENCE)
        add("rim_superposition_excess", obs["rim_share"] - simulated["rim_share"].mean(),
            _mc_p(obs["rim_share"], simulated["rim_share"]), n,
            "rim-superposed share observed minus the CSR mean; " + _MC, SUPERPOSITION_REFERENCE)
        cluster_id[keep] = obs["_labels"]
        chain_sub, chains = extract_chains(xs, ys, ds, obs["_tri"])
        chain_id[keep] = chain_sub
    else:
        for name in ("clark_evans_R_mask", "ripley_L_max_deviation", "pair_correlation_peak", "dbscan_n_clusters",
                     "dbscan_clustered_fraction", "aligned_triplets", "alignment_excess", "longest_chain",
                     "rim_superposition_share", "rim_superposition_excess"):
            add(name, np.nan, np.nan, n, "fewer than 5 craters above completeness", "common practice")
    add("n_chains", len(chains), np.nan, n, "chains of >= 5 craters joined from aligned triplets sharing two craters",
        ALIGNMENT_REFERENCE)
    ray = axial_rayleigh([c["azimuth_deg"] for c in chains])
    add("chain_azimuth_rayleigh_rbar", ray.rbar, ray.p_value, ray.n,
        "axial Rayleigh test on doubled chain azimuths", RAYLEIGH_REFERENCE)
    add("chain_mean_azimuth_deg", ray.mean_axis_deg, np.nan, ray.n, "mean chain axis, clockwise from +y",
        RAYLEIGH_REFERENCE)
    if ellipse_azimuth_deg is not None:
        az = np.asarray(ellipse_azimuth_deg, float)[keep]
        if ellipticity is not None:
            az = az[np.asarray(ellipticity, float)[keep] >= ELONGATED]
        ray = axial_rayleigh(az)
        add("elongation_rayleigh_rbar", ray.rbar, ray.p_value, ray.n,
            f"axial Rayleigh test on doubled long-axis azimuths of craters with ellipticity >= {ELONGATED}",
            RAYLEIGH_REFERENCE)
        add("elongation_mean_azimuth_deg", ray.mean_axis_deg, np.nan, ray.n, "mean long-axis azimuth",
            RAYLEIGH_REFERENCE)
    stats_df = pd.DataFrame(rows, columns=list(STAT_COLUMNS))
    table = sfd_table(d_in, area)
    return PopulationResult(stats=stats_df, cluster_id=cluster_id, chain_id=chain_id, chains=chains, n_craters=n,
                            completeness_diameter_m=dc, sfd=table, envelope=envelope)
