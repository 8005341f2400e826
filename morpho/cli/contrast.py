"""`morpho contrast`: compare crater populations of two or more survey GeoPackages.

Reads each survey's ``craters``, ``run`` and ``footprint`` layers, puts crater
centres and the footprint into a local azimuthal-equidistant plane on the body's
sphere (one plane per region, centred on it, so distances and areas are true
metres in each), runs :func:`morpho.population.contrast_regions` and writes
``DIR/contrast.csv`` plus figures, all atomically.
"""

from __future__ import annotations

import logging
from pathlib import Path

import click
import numpy as np
import pandas as pd
import pyproj
import shapely

from ..errors import CrsError, InputError

__all__ = ["command", "read_region"]

log = logging.getLogger("morpho.contrast")

CSV_NAME = "contrast.csv"
FIGURES = ("contrast_sfd.png", "contrast_features.png")


def _body_radius(run: dict, crs: pyproj.CRS | None, path) -> float:
    """Body radius (m) from the run table, else the body's name, else the CRS ellipsoid."""
    try:
        return float(run["body_radius_m"])
    except (KeyError, ValueError):
        pass
    if run.get("body"):
        from ..bodies import get_body

        try:
            return float(get_body(run["body"]).radius_m)
        except InputError:
            pass
    if crs is not None and crs.ellipsoid is not None:
        return float(crs.ellipsoid.semi_major_metre)
    raise CrsError("the run layer gives no body radius (body_radius_m) and the CRS has no ellipsoid.",
                   path=path, fix="re-run the survey with a known body, or add body_radius_m to the run layer")


def _lonlat(craters, crs, path):
    if {"lon", "lat"} <= set(craters.columns):
        return craters["lon"].to_numpy(float), craters["lat"].to_numpy(float)
    if crs is None or not {"center_x", "center_y"} <= set(craters.columns):
        raise CrsError("craters have neither lon/lat nor center_x/center_y with a CRS.", path=path,
                       fix="give a GeoPackage written by morpho survey or measure")
    to_geo = pyproj.Transformer.from_crs(crs, crs.geodetic_crs, always_xy=True)
    lon, lat = to_geo.transform(craters["center_x"].to_numpy(float), craters["center_y"].to_numpy(float))
    return np.asarray(lon), np.asarray(lat)


def _footprint_metric(footprint, crs, radius, lon0, lat0):
    """Footprint polygons (source CRS) -> the local metric plane, edges densified first."""
    from ..population.projection import to_local_metric

    geom = shapely.union_all(np.asarray(footprint.geometry.dropna().values))
    if geom.is_empty:
        return None
    xmin, ymin, xmax, ymax = geom.bounds
    # straight edges in the source CRS are curves in the local plane
    geom = shapely.segmentize(geom, max(xmax - xmin, ymax - ymin) / 200.0)
    to_geo = pyproj.Transformer.from_crs(crs, crs.geodetic_crs, always_xy=True)

    def project(xy):
        lon, lat = to_geo.transform(xy[:, 0], xy[:, 1])
        x, y = to_local_metric(lon, lat, radius, lon0=lon0, lat0=lat0)
        return np.column_stack([x, y])

    out = shapely.make_valid(shapely.transform(geom, project))
    polys = [g for g in getattr(out, "geoms", [out]) if isinstance(g, shapely.Polygon | shapely.MultiPolygon)]
    return shapely.union_all(polys) if polys else None


def read_region(path):
    """One survey GeoPackage as ``(craters, valid_area)`` in a local metric plane.

    Parameters
    ----------
    path : path-like
        GeoPackage written by ``morpho survey`` or ``morpho measure``.

    Returns
    -------
    craters : pandas.DataFrame
        Crater attributes plus ``x_m, y_m`` (metres), rows with a positive diameter.
    valid_area : shapely.Polygon or shapely.MultiPolygon
        Footprint in the same plane; the convex hull of the centres (with a warning)
        when the file has no footprint.
    notes : list of str
        Warnings for the user.
    """
    from ..outputs import read_survey
    from ..population.projection import to_local_metric

    survey = read_survey(path)
    craters = pd.DataFrame(survey.craters.drop(columns=survey.craters.geometry.name, errors="ignore"))
    if "diameter_m" not in craters:
        raise InputError("the craters layer has no diameter_m column.", path=path,
                         fix="give a GeoPackage written by morpho survey or measure")
    craters = craters[pd.to_numeric(craters["diameter_m"], errors="coerce") > 0].reset_index(drop=True)
    wkt = survey.run.get("crs_wkt") or (survey.craters.crs.to_wkt() if survey.craters.crs else "")
    crs = pyproj.CRS.from_wkt(wkt) if wkt else None
    radius = _body_radius(survey.run, crs, path)
    lon, lat = _lonlat(craters, crs, path)
    ok = np.isfinite(lon) & np.isfinite(lat)
    craters, lon, lat = craters[ok].reset_index(drop=True), lon[ok], lat[ok]
    if len(craters) == 0:
        raise InputError("no crater with a position and a positive diameter.", path=path,
                         fix="check the survey; contrast needs craters in every region")
    rad = np.deg2rad(lon)
    lon0 = float(np.rad2deg(np.arctan2(np.sin(rad).mean(), np.cos(rad).mean())))
    lat0 = float(np.mean(lat))
    x, y = to_local_metric(lon, lat, radius, lon0=lon0, lat0=lat0)
    craters["x_m"], craters["y_m"] = x, y
    notes = []
    area = None
    if crs is not None and len(survey.footprint):
        area = _footprint_metric(survey.footprint, crs, radius, lon0, lat0)
    if area is None or area.area <= 0:
        area = shapely.MultiPoint(np.column_stack([x, y])).convex_hull
        notes.append(f"{path}: no footprint layer; using the convex hull of the crater centres as the "
                     "counted area (densities are overestimated, edge effects are not corrected)")
        if not isinstance(area, shapely.Polygon) or area.area <= 0:
            raise InputError("no footprint and too few craters for a convex hull.", path=path,
                             fix="re-run the survey so that it writes the footprint layer")
    return craters, area, notes


def _tick(value, _pos):
    mantissa = round(value / 10 ** np.floor(np.log10(value)), 6)
    return f"{value:g}" if mantissa in (1.0, 2.0, 5.0) else ""


def _sfd_figure(regions, dc):
    from matplotlib.figure import Figure
    from matplotlib.ticker import FuncFormatter

    from ..population.sfd import sfd_table

    fig = Figure(figsize=(10, 4.2), layout="constrained")
    ax1, ax2 = fig.subplots(1, 2)
    for name, (df, area) in regions.items():
        t = sfd_table(df["diameter_m"].to_numpy(float), area.area)
        t = t[t["n"] > 0]
        d_km = t["d_low_m"] / 1000
        line = ax1.errorbar(d_km, t["cumulative_per_km2"], yerr=t["cumulative_per_km2_err"], fmt="o-", ms=3,
                            capsize=2, label=name)
        ax2.errorbar(t["d_mean_m"] / 1000, t["R"], yerr=t["R_err"], fmt="s-", ms=3, capsize=2,
                     color=line[0].get_color(), label=name)
        ax1.axvline(dc[name] / 1000, color=line[0].get_color(), ls=":", lw=1)
    for ax in (ax1, ax2):
        ax.set_xscale("log")
        ax.set_yscale("log")
        # plain numbers at 1, 2 and 5 per decade; all minor labels would run into each other
        ax.xaxis.set_major_formatter(FuncFormatter(_tick))
        ax.xaxis.set_minor_formatter(FuncFormatter(_tick))
        ax.set_xlabel("Diameter D (km)")
        ax.legend(fontsize=8)
    ax1.set_ylabel("Cumulative N(>=D) per km$^2$")
    ax1.set_title("Cumulative SFD (dotted: completeness)", fontsize=9)
    ax2.set_ylabel("R = D$^3$ n / (A dD)")
    ax2.set_title("Relative (R-plot), root-2 bins", fontsize=9)
    return fig


def _feature_figure(regions, features):
    from matplotlib.figure import Figure

    cols = list(features)[:12]
    ncol = max(1, min(3, len(cols)))
    nrow = max(1, -(-len(cols) // ncol))
    fig = Figure(figsize=(4 * ncol, 3 * nrow), layout="constrained")
    axes = np.atleast_1d(fig.subplots(nrow, ncol)).ravel()
    for ax, col in zip(axes, cols, strict=False):
        for name, (df, _) in regions.items():
            v = np.sort(pd.to_numeric(df.get(col), errors="coerce").dropna().to_numpy(float)) if col in df else []
            if len(v):
                ax.step(v, np.arange(1, len(v) + 1) / len(v), where="post", label=f"{name} (n={len(v)})")
        ax.set_title(col, fontsize=9)
        ax.set_ylabel("ECDF")
        ax.legend(fontsize=7)
    for ax in axes[len(cols):]:
        ax.set_visible(False)
    if not cols:
        axes[0].set_visible(True)
        axes[0].text(0.5, 0.5, "no feature columns shared by all regions", ha="center", va="center")
        axes[0].set_axis_off()
    return fig


@click.command(name="contrast")
@click.argument("surveys", nargs=-1, required=True, type=click.Path(dir_okay=False, path_type=Path))
@click.option("-o", "--out", "out_dir", required=True, type=click.Path(file_okay=False, path_type=Path),
              help="Output folder for contrast.csv and the figures (created if missing).")
@click.option("--overwrite", is_flag=True, help="Replace existing outputs.")
@click.option("--seed", type=int, default=0, show_default=True, help="Seed of the bootstrap resampling.")
@click.option("--n-boot", type=click.IntRange(min=99), default=999, show_default=True,
              help="Bootstrap resamples for the confidence intervals.")
def command(surveys, out_dir, overwrite, seed, n_boot):
    """Compare crater populations of two or more survey GeoPackages.

    Region names are the file stems. Tests: feature distributions (Kolmogorov-Smirnov,
    Mann-Whitney, Anderson-Darling), size-frequency distributions above the common
    completeness, verdict proportions and spatial statistics, with effect sizes,
    bootstrap confidence intervals and Benjamini-Hochberg adjusted p-values.
    """
    from ..outputs._atomic import atomic_paths, check_targets
    from ..population.contrast import contrast_regions, default_features
    from ..population.sfd import estimate_completeness

    if len(surveys) < 2:
        raise InputError(f"contrast needs at least two surveys, got {len(surveys)}.",
                         fix="give two or more .gpkg files")
    names = [p.stem for p in surveys]
    if len(set(names)) != len(names):
        raise InputError(f"region names (file stems) must differ, got {names}.",
                         fix="rename the files so that each stem is unique")
    out_dir.mkdir(parents=True, exist_ok=True)
    targets = check_targets([out_dir / CSV_NAME] + [out_dir / f for f in FIGURES], overwrite=overwrite)
    regions = {}
    for name, path in zip(names, surveys, strict=True):
        craters, area, notes = read_region(path)
        for note in notes:
            click.echo(f"morpho contrast: warning: {note}", err=True)
        regions[name] = (craters, area)
        log.info("%s: %d craters on %.4g km^2", name, len(craters), area.area / 1e6)
    table = contrast_regions(regions, n_boot=n_boot, seed=seed)
    dc = {n: estimate_completeness(df["diameter_m"].to_numpy(float)) for n, (df, _) in regions.items()}
    figs = [_sfd_figure(regions, dc), _feature_figure(regions, default_features([d for d, _ in regions.values()]))]
    with atomic_paths(targets) as tmp:
        table.to_csv(tmp[0], index=False)
        for fig, p in zip(figs, tmp[1:], strict=True):
            fig.savefig(p, dpi=120)
    flagged = table[table["p_adjusted"] < 0.05]
    click.echo(f"morpho contrast: {len(table)} comparisons, {len(flagged)} with adjusted p < 0.05; "
               f"wrote {targets[0]}")
