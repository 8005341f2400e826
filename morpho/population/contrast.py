"""Region against region: feature distributions, SFDs, verdict proportions and spatial statistics."""

from __future__ import annotations

import warnings
from itertools import combinations

import numpy as np
import pandas as pd
from scipy import stats

from ..errors import InputError
from .clusters import dbscan_clusters
from .csr import check_area
from .nearest_neighbour import donnelly_expectation, nearest_neighbour_distances
from .sfd import estimate_completeness, powerlaw_slope_ml
from .statistics import ELONGATED
from .superposition import on_larger_rim

__all__ = ["contrast_regions", "CONTRAST_COLUMNS", "default_features"]

CONTRAST_COLUMNS = ("quantity", "region_a", "region_b", "statistic", "p_value", "p_adjusted",
                    "effect_size", "ci_low", "ci_high", "method")

#: Columns that are positions, identifiers or bookkeeping, never compared as features;
#: diameters are compared as SFDs, and azimuths are axial (0 = 180 degrees), which linear
#: two-sample tests would misread.
_NOT_FEATURES = {"x_m", "y_m", "center_x", "center_y", "lon", "lat", "row", "col", "radius_px",
                 "cluster_id", "chain_id", "diameter_m", "pixels_per_diameter", "detection_confidence",
                 "rim_coverage", "ellipse_azimuth_deg"}
_CI = (2.5, 97.5)


def default_features(frames) -> list[str]:
    """Numeric columns present in every region's crater table, minus positions, ids and ``*_err``."""
    common = None
    for df in frames:
        cols = {c for c in df.columns if pd.api.types.is_numeric_dtype(df[c]) and not pd.api.types.is_bool_dtype(df[c])}
        common = cols if common is None else common & cols
    return sorted(c for c in (common or set()) if c not in _NOT_FEATURES and not c.endswith("_err"))


def _row(quantity, a, b, statistic, p, effect, ci, method):
    return {"quantity": quantity, "region_a": a, "region_b": b, "statistic": float(statistic),
            "p_value": float(p), "effect_size": float(effect), "ci_low": float(ci[0]),
            "ci_high": float(ci[1]), "method": method}


#: Bootstrap index matrices are built in blocks of at most this many entries (memory).
_BLOCK = 2_000_000


def _bootstrap(rng, n_boot, samples, stat):
    """``stat(*resampled)`` for ``n_boot`` resamples (rows) of each sample, in memory-bounded blocks."""
    step = max(1, _BLOCK // max(max(v.size for v in samples), 1))
    out = []
    for start in range(0, n_boot, step):
        m = min(step, n_boot - start)
        out.append(stat(*(v[rng.integers(0, v.size, size=(m, v.size))] for v in samples)))
    return np.concatenate(out)


def _feature_rows(name, a, b, va, vb, rng, n_boot):
    """KS, Mann-Whitney and Anderson-Darling rows for one feature and one pair of regions."""
    rows = []
    if va.size < 2 or vb.size < 2:
        return rows
    scale = 1.0 / (va.size * vb.size)

    def both(ra, rb):
        u = stats.mannwhitneyu(ra, rb, alternative="two-sided", axis=1, method="asymptotic").statistic
        return np.column_stack([np.median(ra, axis=1) - np.median(rb, axis=1), 2.0 * u * scale - 1.0])

    med, d_boot = _bootstrap(rng, n_boot, (va, vb), both).T
    ks = stats.ks_2samp(va, vb)
    rows.append(_row(name, a, b, ks.statistic, ks.pvalue, np.median(va) - np.median(vb), np.percentile(med, _CI),
                     "two-sample Kolmogorov-Smirnov; effect: difference of medians (a - b), bootstrap percentile CI"))
    mw = stats.mannwhitneyu(va, vb, alternative="two-sided")
    delta = 2.0 * mw.statistic * scale - 1.0
    rows.append(_row(name, a, b, mw.statistic, mw.pvalue, delta, np.percentile(d_boot, _CI),
                     "Mann-Whitney U (two-sided); effect: Cliff's delta P(a > b) - P(a < b), bootstrap CI"))
    ad, ad_p = _anderson(va, vb)
    rows.append(_row(name, a, b, ad, ad_p, np.nan, (np.nan, np.nan),
                     "Anderson-Darling k-sample (scipy; p interpolated and held within 0.001-0.25)"))
    return rows


def _anderson(*samples):
    if np.unique(np.concatenate(samples)).size < 2:
        return np.nan, np.nan  # one distinct value in all samples: nothing to compare
    with warnings.catch_warnings():
        # scipy warns when p lies outside its interpolation table (0.001-0.25); the
        # method text says so
        warnings.filterwarnings("ignore", message="p-value (capped|floored)", category=UserWarning)
        try:
            res = stats.anderson_ksamp(list(samples), variant="midrank")
        except TypeError:  # scipy < 1.17 has no `variant`; midrank was its default
            res = stats.anderson_ksamp(list(samples))
    return float(res.statistic), float(res.pvalue)


def _sfd_rows(a, b, da, db, area_a, area_b, d_common):
    rows = []
    fa, fb = powerlaw_slope_ml(da, d_common), powerlaw_slope_ml(db, d_common)
    if fa.n >= 2 and fb.n >= 2:
        diff = fa.cumulative_slope - fb.cumulative_slope
        se = np.hypot(fa.cumulative_slope_err, fb.cumulative_slope_err)
        z = diff / se
        rows.append(_row("csfd_slope", a, b, z, 2 * stats.norm.sf(abs(z)), diff, (diff - 1.96 * se, diff + 1.96 * se),
                         f"difference of ML cumulative slopes above the common completeness {d_common:.4g} m "
                         "(Clauset et al. 2009); normal z-test and 95 % CI"))
        ka, kb = da[da >= d_common], db[db >= d_common]
        ks = stats.ks_2samp(ka, kb)
        rows.append(_row("sfd_shape", a, b, ks.statistic, ks.pvalue, np.median(ka) - np.median(kb), (np.nan, np.nan),
                         "two-sample Kolmogorov-Smirnov of diameters above the common completeness; "
                         "effect: difference of median diameters (m)"))
    na, nb = int(np.sum(da >= d_common)), int(np.sum(db >= d_common))
    if na + nb > 0:
        share = area_a / (area_a + area_b)
        bt = stats.binomtest(na, na + nb, share)
        ci = bt.proportion_ci(confidence_level=0.95)
        with np.errstate(divide="ignore"):
            to_ratio = lambda p: np.log(p / (1 - p) * (1 - share) / share)  # noqa: E731
            effect = to_ratio(na / (na + nb))
            rows.append(_row("crater_density", a, b, na / area_a * 1e6 - nb / area_b * 1e6, bt.pvalue, effect,
                             (to_ratio(ci.low), to_ratio(ci.high)),
                             "densities above the common completeness (statistic: difference per km^2); "
                             "conditional binomial test of two Poisson rates; effect: log rate ratio, exact CI"))
    return rows


def _clark_evans_boot(x, y, area, perimeter, rng, n_boot):
    nn = nearest_neighbour_distances(x, y)
    expected, _ = donnelly_expectation(nn.size, area, perimeter)
    boot = _bootstrap(rng, n_boot, (nn,), lambda r: np.mean(r, axis=1)) / expected
    return float(np.mean(nn) / expected), boot


def _proportion_rows(quantity, a, b, ka, na, kb, nb, rng, n_boot, what):
    if na == 0 or nb == 0:
        return []
    _, p = stats.fisher_exact([[ka, na - ka], [kb, nb - kb]])
    diff = ka / na - kb / nb
    boot = rng.binomial(na, ka / na, n_boot) / na - rng.binomial(nb, kb / nb, n_boot) / nb
    return [_row(quantity, a, b, diff, p, diff, np.percentile(boot, _CI),
                 f"{what}; Fisher exact test; effect: difference of proportions (a - b), parametric bootstrap CI")]


def _spatial_rows(a, b, sa, sb, rng, n_boot):
    rows = []
    if sa["n"] >= 3 and sb["n"] >= 3:
        diff = sa["R"] - sb["R"]
        boot = sa["R_boot"] - sb["R_boot"]
        se = float(np.std(boot, ddof=1))
        z = diff / se if se > 0 else np.inf * np.sign(diff)
        rows.append(_row("clark_evans_R", a, b, z, 2 * stats.norm.sf(abs(z)), diff, np.percentile(boot, _CI),
                         "difference of Clark-Evans R (Donnelly edge correction); z from the bootstrap SE over "
                         "craters' nearest-neighbour distances, normal p; bootstrap percentile CI "
                         "(Clark & Evans 1954, Ecology 35:445; Efron & Tibshirani 1993)"))
    rows += _proportion_rows("dbscan_clustered_fraction", a, b, sa["clustered"], sa["n"], sb["clustered"], sb["n"],
                             rng, n_boot, "share of craters in a DBSCAN cluster (eps = CSR NN distance)")
    rows += _proportion_rows("rim_superposition_share", a, b, sa["rim"], sa["n"], sb["rim"], sb["n"], rng, n_boot,
                             "share of craters centred on a larger crater's rim")
    return rows


def _check_region(name, item):
    try:
        df, area = item
    except (TypeError, ValueError) as err:
        raise InputError(f"region {name!r} must be a (craters DataFrame, valid_area polygon) pair.",
                         fix="pass {name: (craters, footprint)}") from err
    missing = {"x_m", "y_m", "diameter_m"} - set(df.columns)
    if missing:
        raise InputError(f"region {name!r} lacks columns {sorted(missing)}.",
                         fix="project centres with morpho.population.to_local_metric into x_m, y_m first")
    df = df[np.isfinite(df["x_m"]) & np.isfinite(df["y_m"]) & (df["diameter_m"] > 0)]
    return df, check_area(area)


def contrast_regions(regions, *, features=None, n_boot: int = 999, seed=0,
                     completeness_diameter_m=None) -> pd.DataFrame:
    """Compare crater populations of two or more regions, pair by pair.

    Parameters
    ----------
    regions : dict of str -> (pandas.DataFrame, shapely polygon)
        Per region: the crater table (columns ``x_m, y_m`` in a local metric plane,
        ``diameter_m``, optional ``verdict`` and feature columns) and its valid-data
        footprint in the same plane.
    features : sequence of str, optional
        Feature columns to compare; default :func:`default_features`.
    n_boot : int
        Bootstrap resamples for the confidence intervals.
    seed : int or numpy.random.Generator
        Randomness of the bootstrap.
    completeness_diameter_m : dict of str -> float, optional
        Per-region completeness; default the SFD roll-over of each region. Each pair is
        compared above the larger of its two limits.

    Returns
    -------
    pandas.DataFrame
        Columns ``quantity, region_a, region_b, statistic, p_value, p_adjusted,
        effect_size, ci_low, ci_high, method``; p_adjusted by Benjamini-Hochberg over
        all rows with a p-value. Spatial statistics and features use the craters above
        each region's own completeness.

    References
    ----------
    Benjamini Y., Hochberg Y. (1995) J. R. Statist. Soc. B 57:289-300.
    Scholz F.W., Stephens M.A. (1987) J. Am. Stat. Assoc. 82:918-924 (k-sample Anderson-Darling).
    Efron B., Tibshirani R.J. (1993) *An Introduction to the Bootstrap*, Chapman & Hall.

    Examples
    --------
    >>> import numpy as np, pandas as pd, shapely
    >>> rng = np.random.default_rng(0)
    >>> box = shapely.box(0, 0, 10_000, 10_000)
    >>> def region(n):
    ...     x, y = rng.uniform(0, 10_000, (2, n))
    ...     return pd.DataFrame({"x_m": x, "y_m": y, "diameter_m": rng.uniform(50, 60, n)}), box
    >>> table = contrast_regions({"west": region(150), "east": region(150)}, n_boot=199)
    >>> sorted(set(table["quantity"]))[:3]
    ['clark_evans_R', 'crater_density', 'csfd_slope']
    """
    if len(regions) < 2:
        raise InputError(f"contrast needs at least two regions, got {len(regions)}.",
                         fix="pass two or more surveys")
    rng = np.random.default_rng(seed)
    data = {name: _check_region(name, item) for name, item in regions.items()}
    feats = default_features([df for df, _ in data.values()]) if features is None else list(features)
    dc = dict(completeness_diameter_m or {})
    summary = {}
    for name, (df, area) in data.items():
        d = df["diameter_m"].to_numpy(float)
        dc.setdefault(name, estimate_completeness(d) if d.size else np.nan)
        sub = df[d >= dc[name]]
        x, y, ds = (sub[c].to_numpy(float) for c in ("x_m", "y_m", "diameter_m"))
        s = {"df": sub, "d_all": d, "area": area.area, "n": int(x.size)}
        if x.size >= 3:
            s["R"], s["R_boot"] = _clark_evans_boot(x, y, area.area, area.length, rng, n_boot)
        s["clustered"] = int(np.sum(dbscan_clusters(x, y, area.area) >= 0))
        s["rim"] = int(np.sum(on_larger_rim(x, y, ds)))
        summary[name] = s

    rows = []
    for a, b in combinations(data, 2):
        sa, sb = summary[a], summary[b]
        for f in feats:
            va = pd.to_numeric(sa["df"].get(f), errors="coerce").to_numpy(float) if f in sa["df"] else np.empty(0)
            vb = pd.to_numeric(sb["df"].get(f), errors="coerce").to_numpy(float) if f in sb["df"] else np.empty(0)
            rows += _feature_rows(f, a, b, va[np.isfinite(va)], vb[np.isfinite(vb)], rng, n_boot)
        rows += _sfd_rows(a, b, sa["d_all"], sb["d_all"], sa["area"], sb["area"], max(dc[a], dc[b]))
        rows += _verdict_rows(a, b, sa["df"], sb["df"])
        rows += _azimuth_rows(a, b, sa["df"], sb["df"], rng, n_boot)
        rows += _spatial_rows(a, b, sa, sb, rng, n_boot)
    if len(data) > 2:
        for f in feats:
            vals = [pd.to_numeric(s["df"][f], errors="coerce").dropna().to_numpy(float)
                    for s in summary.values() if f in s["df"]]
            if len(vals) == len(data) and all(v.size >= 2 for v in vals):
                ad, p = _anderson(*vals)
                rows.append(_row(f, "all", "all", ad, p, np.nan, (np.nan, np.nan),
                                 "Anderson-Darling k-sample over all regions (scipy; p held within 0.001-0.25)"))
    out = pd.DataFrame(rows, columns=[c for c in CONTRAST_COLUMNS if c != "p_adjusted"])
    out.insert(5, "p_adjusted", np.nan)
    ok = np.isfinite(out["p_value"].to_numpy(float))
    if ok.any():
        out.loc[ok, "p_adjusted"] = stats.false_discovery_control(out.loc[ok, "p_value"].to_numpy(float))
    return out


def _verdict_rows(a, b, dfa, dfb):
    if "verdict" not in dfa or "verdict" not in dfb:
        return []
    table = pd.crosstab(pd.concat([pd.Series(a, index=range(len(dfa))), pd.Series(b, index=range(len(dfb)))],
                                  ignore_index=True),
                        pd.concat([dfa["verdict"].astype(str), dfb["verdict"].astype(str)], ignore_index=True))
    if table.shape[1] < 2 or table.shape[0] < 2:
        return []
    res = stats.chi2_contingency(table.to_numpy())
    v = np.sqrt(res.statistic / (table.to_numpy().sum() * (min(table.shape) - 1)))
    return [_row("verdict", a, b, res.statistic, res.pvalue, v, (np.nan, np.nan),
                 "chi-square test of verdict proportions (Pearson); effect: Cramer's V")]


def _doubled_mean(axes_deg):
    """Mean resultant vector(s) of doubled axes along the last axis, as complex numbers."""
    return np.mean(np.exp(2j * np.deg2rad(axes_deg)), axis=-1)


def _elongated_axes(df):
    if "ellipse_azimuth_deg" not in df:
        return np.empty(0)
    az = pd.to_numeric(df["ellipse_azimuth_deg"], errors="coerce").to_numpy(float)
    keep = np.isfinite(az)
    if "ellipticity" in df:
        keep &= pd.to_numeric(df["ellipticity"], errors="coerce").to_numpy(float) >= ELONGATED
    return az[keep]


def _azimuth_rows(a, b, dfa, dfb, rng, n_perm):
    """Do two regions' crater long axes point alike? Permutation test on doubled angles."""
    va, vb = _elongated_axes(dfa), _elongated_axes(dfb)
    if va.size < 3 or vb.size < 3:
        return []
    pooled = np.r_[va, vb]
    observed = abs(_doubled_mean(va) - _doubled_mean(vb))
    perm = np.argsort(rng.uniform(size=(n_perm, pooled.size)), axis=1)
    shuffled = pooled[perm]
    null = np.abs(_doubled_mean(shuffled[:, :va.size]) - _doubled_mean(shuffled[:, va.size:]))
    p = (1 + np.sum(null >= observed)) / (1 + n_perm)
    axis_diff = (np.rad2deg(np.angle(_doubled_mean(va) / _doubled_mean(vb))) / 2.0)
    return [_row("elongation_azimuth", a, b, observed, p, axis_diff, (np.nan, np.nan),
                 f"long axes of craters with ellipticity >= {ELONGATED}: distance between the mean resultant "
                 "vectors of doubled angles, permutation test (Mardia & Jupp 2000, s. 8.3 and 9.3); "
                 "effect: difference of mean axes (degrees, a - b)")]
