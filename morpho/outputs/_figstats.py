"""Statistical figures of a survey: d/D against D, size-frequency, Ripley L, feature distributions.

Each function returns ``(Figure or None, note)``: the note tells the reader where a
curve comes from or why a panel is missing, and goes into the report beside it.
"""

from __future__ import annotations

import numpy as np
from matplotlib.figure import Figure

from .. import dictionary
from ._style import verdict_colour

__all__ = ["counted_area_m2", "dd_figure", "sfd_figure", "ripley_figure", "distributions_figure",
           "feature_columns"]

#: the features a reviewer looks at first when they exist (shape ratios, walls, residuals, score)
_PREFERRED = ("d_over_D", "h_over_D", "wall_slope_upper_deg", "floor_diameter_fraction",
              "interior_shape_exponent", "depth_residual_log10", "ellipticity", "p_impact")
_SKIP = {"center_x", "center_y", "lon", "lat", "cluster_id", "chain_id"}


def _by_verdict(craters):
    """(label, mask, colour) per verdict, or one group when there is no verdict."""
    if "verdict" not in craters.columns:
        yield "all craters", np.ones(len(craters), bool), "tab:blue"
        return
    v = craters["verdict"].astype(str).to_numpy()
    for i, name in enumerate(sorted(set(v))):
        yield name, v == name, np.array(verdict_colour(name, i)) / 255.0


def counted_area_m2(footprint, population) -> tuple[float | None, str]:
    """Counted area for SFD densities: geodesic area of the footprint, else from the statistics."""
    if footprint is not None and len(footprint) and footprint.crs is not None:
        crs = footprint.crs
        geod = crs.get_geod()
        if geod is not None:
            geo = footprint.to_crs(crs.geodetic_crs).union_all()
            area = abs(geod.geometry_area_perimeter(geo)[0])
            if area > 0:
                return area, "valid-data footprint, geodesic area on the body's ellipsoid (pyproj.Geod)"
    stats = dict(zip(population.get("statistic", []), population.get("value", []), strict=False))
    n, dens = stats.get("n_craters"), stats.get("crater_density_per_km2")
    if n and dens and np.isfinite(dens) and dens > 0:
        return n / dens * 1e6, "from n_craters / crater_density_per_km2 in the population table"
    return None, "no footprint or density in the GeoPackage: SFD densities cannot be computed"


def _fresh_relation(diameter_m, body):
    """Published fresh-crater depth d(D) for the body, validity flags and the law's name."""
    from ..scaling import expected_fresh

    res = expected_fresh(diameter_m, body)
    inside = res["in_validity_range"].to_numpy(bool)
    law = str(res["law"].iloc[0]) if len(res) else ""
    return res["depth_m"].to_numpy(float), inside, f"morpho.scaling law set {law!r}"


def _depth_ratio(craters):
    for ratio in ("depth_diameter_ratio", "d_over_D", "depth_to_diameter"):
        if ratio in craters.columns:
            err = craters.get(f"{ratio}_err")
            return craters[ratio].to_numpy(float), None if err is None else err.to_numpy(float)
    if "depth_m" in craters.columns:
        d = craters["diameter_m"].to_numpy(float)
        err = craters.get("depth_m_err")
        return (craters["depth_m"].to_numpy(float) / d,
                None if err is None else err.to_numpy(float) / d)
    return None, None


def dd_figure(craters, body: str | None):
    """d/D against D on log axes, with the published fresh-crater relation for ``body``."""
    if "diameter_m" not in craters.columns or not len(craters):
        return None, "No craters with diameters."
    ratio, ratio_err = _depth_ratio(craters)
    if ratio is None:
        return None, "No depth column in the crater table: d/D cannot be plotted."
    fig = Figure(figsize=(6.4, 4.6), layout="constrained")
    ax = fig.add_subplot()
    D = craters["diameter_m"].to_numpy(float)
    for label, m, colour in _by_verdict(craters):
        ok = m & np.isfinite(ratio) & (ratio > 0) & (D > 0)
        # error bars only while they stay readable
        yerr = None if ratio_err is None or len(D) > 400 else ratio_err[ok]
        ax.errorbar(D[ok] / 1000, ratio[ok], yerr=yerr, fmt="o", ms=2.5 if len(D) > 400 else 3.5,
                    color=colour, alpha=0.6, elinewidth=0.6, label=label)
    note = "No body recorded: no reference relation drawn."
    if body:
        grid = np.geomspace(max(np.nanmin(D) * 0.8, 1.0), np.nanmax(D) * 1.25, 200)
        try:
            depth, inside, source = _fresh_relation(grid, body)
            ratio_law = depth / grid
            ax.plot(grid / 1000, np.where(inside, ratio_law, np.nan), color="black", lw=1.4,
                    label=f"fresh impact ({body})")
            ax.plot(grid / 1000, np.where(inside, np.nan, ratio_law), color="black", lw=1.0, ls=":",
                    label="outside the law's fitted range")
            note = (f"Black line: published fresh-crater depth relation for {body} ({source}); "
                    "dotted where extrapolated beyond the diameters it was fitted on. Error bars: "
                    "1-sigma bootstrap uncertainty, drawn up to 400 craters.")
            if not np.isfinite(depth).any():
                note = f"No published fresh-crater depth law for body {body!r}."
        except (ValueError, KeyError, LookupError) as err:
            note = f"No fresh-crater relation for body {body!r}: {err}"
    ax.set_xscale("log")
    ax.set_yscale("log")
    ax.set_xlabel("rim diameter D (km)")
    ax.set_ylabel("depth / diameter")
    ax.legend(fontsize=7)
    ax.grid(True, which="both", alpha=0.3)
    return fig, note


def sfd_figure(craters, area_m2: float | None):
    """Cumulative SFD and R-plot with Poisson error bars in root-2 bins."""
    if area_m2 is None or "diameter_m" not in craters.columns:
        return None, "No counted area or diameters: no size-frequency plots."
    d = craters["diameter_m"].to_numpy(float)
    d = d[np.isfinite(d) & (d > 0)]
    if d.size == 0:
        return None, "No craters with diameters: no size-frequency plots."
    from ..population.sfd import sfd_table

    table = sfd_table(d, area_m2)
    t = table[table["n"] > 0]
    fig = Figure(figsize=(9.0, 4.0), layout="constrained")
    ax1, ax2 = fig.subplots(1, 2)
    ax1.errorbar(t["d_low_m"] / 1000, t["cumulative_per_km2"], yerr=t["cumulative_per_km2_err"],
                 fmt="o", ms=4, capsize=2)
    ax1.set_ylabel("N(>= D) per km$^2$")
    ax1.set_title("Cumulative", fontsize=9)
    ax2.errorbar(t["d_mean_m"] / 1000, t["R"], yerr=t["R_err"], fmt="s", ms=4, capsize=2)
    ax2.set_ylabel("R")
    ax2.set_title("Relative (R-plot)", fontsize=9)
    for ax in (ax1, ax2):
        ax.set_xscale("log")
        ax.set_yscale("log")
        ax.set_xlabel("D (km)")
        ax.grid(True, which="both", alpha=0.3)
    note = (f"Root-2 diameter bins, Poisson errors sqrt(N)/A and R/sqrt(n) (Crater Analysis Techniques "
            f"Working Group 1979, Icarus 37:467); {len(d)} craters over {area_m2 / 1e6:.6g} km2.")
    return fig, note


def ripley_figure(envelope):
    """Besag's L(r) - r with the envelope of the CSR simulations."""
    if envelope is None or not len(envelope):
        return None, "No Ripley L envelope in the GeoPackage (fewer than 5 craters, or not computed)."
    r = envelope["r_m"].to_numpy(float) / 1000
    fig = Figure(figsize=(6.4, 4.0), layout="constrained")
    ax = fig.add_subplot()
    rm = envelope["r_m"].to_numpy(float)
    ax.fill_between(r, (envelope["L_low_m"] - rm) / 1000, (envelope["L_high_m"] - rm) / 1000,
                    color="0.8", label="CSR simulation envelope")
    ax.plot(r, (envelope["L_mean_m"] - rm) / 1000, color="0.4", ls="--", lw=1, label="CSR mean")
    ax.plot(r, (envelope["L_m"] - rm) / 1000, color="tab:red", lw=1.5, label="observed")
    ax.axhline(0, color="black", lw=0.5)
    ax.set_xlabel("r (km)")
    ax.set_ylabel("L(r) - r (km)")
    ax.legend(fontsize=7)
    return fig, ("Above the envelope: clustering at that scale; below: regularity (Besag 1977 L "
                 "function, pointwise envelope of simulations of complete spatial randomness in the mask).")


def feature_columns(craters, limit: int = 9) -> list[str]:
    """Numeric feature columns worth a distribution panel.

    Diameter first, then the morphometry and scaling features, then the scores, in
    dictionary order; uncertainties, positions and ids are left out.
    """
    from ..dictionary import _morphometry, _scaling

    def usable(name):
        return (name in craters.columns and name not in _SKIP and not name.endswith("_err")
                and dictionary.get_field(name).dtype == "float64")

    shape = [f.name for f in _morphometry.FIELDS + _scaling.FIELDS]
    ordered = ["diameter_m", *_PREFERRED, *shape, *dictionary.CRATER_COLUMNS]
    out = list(dict.fromkeys(n for n in ordered if usable(n)))
    return out[:limit]


def distributions_figure(craters):
    """Histograms of the main features, one colour per verdict."""
    cols = feature_columns(craters)
    if not cols or not len(craters):
        return None, "No numeric features to show."
    ncol = 3
    nrow = -(-len(cols) // ncol)
    fig = Figure(figsize=(9.0, 2.5 * nrow), layout="constrained")
    axes = np.atleast_1d(fig.subplots(nrow, ncol)).ravel()
    for ax, col in zip(axes, cols, strict=False):
        vals = craters[col].to_numpy(float)
        finite = vals[np.isfinite(vals)]
        if finite.size == 0:
            ax.set_visible(False)
            continue
        log = col == "diameter_m" and finite.min() > 0
        edges = (np.geomspace(finite.min(), finite.max() * 1.0001, 21) if log
                 else np.histogram_bin_edges(finite, 20))
        for label, m, colour in _by_verdict(craters):
            sel = vals[m & np.isfinite(vals)]
            if sel.size:
                ax.hist(sel, edges, histtype="step", color=colour, lw=1.2, label=label)
        if log:
            ax.set_xscale("log")
        unit = dictionary.get_field(col).unit
        ax.set_xlabel(f"{col} ({unit})" if unit not in ("", "1") else col, fontsize=8)
        ax.tick_params(labelsize=7)
    for ax in axes[len(cols):]:
        ax.set_visible(False)
    axes[0].legend(fontsize=6)
    return fig, "Counts per bin; the legend gives the verdict colours (same as the map)."
