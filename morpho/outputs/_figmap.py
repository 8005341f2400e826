"""Map figures: shaded relief with crater rim outlines coloured by verdict or p_impact.

The DEM is read only through :func:`morpho.ingest.read_dem`; figures are drawn with
matplotlib's Agg canvas (no display, no global pyplot state).
"""

from __future__ import annotations

import math
from pathlib import Path

import numpy as np
import shapely
from matplotlib import colormaps
from matplotlib.collections import PolyCollection
from matplotlib.colors import LightSource, ListedColormap
from matplotlib.figure import Figure
from matplotlib.patches import Patch

from ._style import verdict_colour

__all__ = ["load_relief", "map_figure", "P_IMPACT_CMAP"]

#: p_impact 0 (electrode-spot-like) to 1 (impact-like): viridis (perceptually uniform,
#: colour-blind safe) without its palest tenth, which vanishes on white paper.
#: Unscored craters (NaN) stay visible, in grey.
P_IMPACT_CMAP = ListedColormap(colormaps["viridis"](np.linspace(0.0, 0.88, 256)),
                               name="p_impact").with_extremes(bad="0.55")
_MAX_RELIEF_PX = 900


def load_relief(dem_path, crs):
    """Shaded relief of the DEM in the craters' CRS, or ``(None, reason)``.

    Returns
    -------
    relief : dict or None
        ``{"shade": (h, w) array}`` plus either ``"extent"`` (north-up grids) or
        ``"x", "y"`` pixel-corner coordinates (h+1, w+1) in the source CRS (warped
        tiles, drawn as a mesh so the relief stays exact).
    note : str
        Why the relief is missing, or where it comes from.
    """
    if dem_path is None:
        return None, "No DEM given: crater outlines only (pass --dem to add shaded relief)."
    try:
        from ..ingest import read_dem
    except ImportError:  # pragma: no cover - ingestion ships with morpho
        return None, "DEM reading is not available in this morpho version: outlines only."
    from ..errors import MorphoError

    try:
        tile = read_dem(dem_path)
    except (MorphoError, OSError) as err:
        return None, f"The DEM could not be read ({err}): outlines only."
    src_crs = getattr(tile.info, "crs", tile.crs)
    if crs is not None and src_crs is not None and not src_crs.equals(crs, ignore_axis_order=True):
        return None, "The DEM's CRS differs from the GeoPackage's: outlines only."
    z = np.asarray(tile.z, dtype=np.float64)
    step = max(1, math.ceil(max(z.shape) / _MAX_RELIEF_PX))
    zs = z[::step, ::step]
    valid = np.isfinite(zs)
    if not valid.any():
        return None, "The DEM holds no valid elevations: outlines only."
    filled = np.where(valid, zs, np.nanmedian(zs))
    # vertical exaggeration 1 with true pixel spacing: slopes shade as they are
    shade = LightSource(azdeg=315, altdeg=45).hillshade(
        filled, vert_exag=1.0, dx=tile.spacing_m * step, dy=tile.spacing_m * step)
    shade = np.ma.masked_array(shade, ~valid)
    relief = {"shade": shade}
    t = tile.transform
    if not getattr(tile, "warped", False) and t.b == 0 and t.d == 0:
        # north-up grid in the source CRS: an image with an extent is exact and fast
        h, w = z.shape
        relief["extent"] = (t.c, t.c + t.a * w, t.f + t.e * h, t.f)
    else:
        rows = np.arange(zs.shape[0] + 1) * step - 0.5
        cols = np.arange(zs.shape[1] + 1) * step - 0.5
        rr, cc = np.meshgrid(rows, cols, indexing="ij")
        x, y = tile.to_source(rr, cc)
        relief["x"], relief["y"] = np.asarray(x), np.asarray(y)
    return (relief,
            f"Shaded relief of {Path(dem_path).name} (sun azimuth 315 deg, "
            "elevation 45 deg, no vertical exaggeration).")


def _rings(geoms) -> list[np.ndarray]:
    """Exterior rings of (multi)polygons as vertex arrays, vectorised through shapely."""
    parts = shapely.get_parts(np.asarray(geoms, dtype=object))
    rings = shapely.get_exterior_ring(parts[~shapely.is_empty(parts)])
    coords, index = shapely.get_coordinates(rings, return_index=True)
    splits = np.flatnonzero(np.diff(index)) + 1
    return np.split(coords, splits) if len(coords) else []


def _draw_base(ax, relief, footprint):
    if relief is not None and "extent" in relief:
        # row 0 sits at extent[3] (the grid origin) whichever way the rows run
        ax.imshow(relief["shade"], cmap="gray", vmin=0, vmax=1, extent=relief["extent"],
                  origin="upper", interpolation="nearest")
        if ax.yaxis_inverted():
            ax.invert_yaxis()
    elif relief is not None:
        ax.pcolormesh(relief["x"], relief["y"], relief["shade"], cmap="gray", vmin=0, vmax=1,
                      shading="flat", rasterized=True)
    if footprint is not None and len(footprint):
        for ring in _rings(footprint.geometry.values):
            ax.plot(ring[:, 0], ring[:, 1], color="black", lw=0.8, ls="--")
    ax.ticklabel_format(useOffset=False, style="plain")
    ax.tick_params(labelsize=7)


def _polys(craters):
    geoms = craters.geometry.values
    ok = ~(shapely.is_missing(geoms) | shapely.is_empty(geoms))
    keep = np.flatnonzero(ok)
    # the largest part's exterior ring per crater: vectorised for any size
    largest = shapely.get_exterior_ring(_largest_part(geoms[keep]))
    coords, index = shapely.get_coordinates(largest, return_index=True)
    splits = np.flatnonzero(np.diff(index)) + 1
    return keep, (np.split(coords, splits) if len(coords) else [])


def _largest_part(geoms):
    parts, owner = shapely.get_parts(geoms, return_index=True)
    if len(parts) == len(geoms):
        return parts
    area = shapely.area(parts)
    order = np.lexsort((-area, owner))
    first = np.r_[True, np.diff(owner[order]) != 0]
    return parts[order[first]]


def _axes_units(ax, crs):
    """Equal ground scale on both axes, labelled in the CRS's units."""
    if crs is not None and crs.is_geographic:
        # a degree of longitude spans cos(latitude) of a degree of latitude
        lat = np.clip(np.mean(ax.get_ylim()), -85.0, 85.0)
        ax.set_aspect(1.0 / np.cos(np.deg2rad(lat)))
        ax.set_xlabel("longitude (degree)", fontsize=8)
        ax.set_ylabel("latitude (degree)", fontsize=8)
        return
    ax.set_aspect("equal")
    unit = crs.axis_info[0].unit_name if crs is not None and crs.axis_info else "map unit"
    ax.set_xlabel(f"easting ({unit})", fontsize=8)
    ax.set_ylabel(f"northing ({unit})", fontsize=8)


def map_figure(craters, *, colour_by: str, relief=None, footprint=None, title: str = "",
               figsize=(7.0, 6.2)) -> Figure:
    """Map of crater rim outlines over shaded relief.

    Parameters
    ----------
    craters : geopandas.GeoDataFrame
        Crater outlines (any CRS; axes are in its units).
    colour_by : {"verdict", "p_impact"}
        Categorical verdict colours or a continuous p_impact scale.
    relief : dict, optional
        From :func:`load_relief`.
    footprint : geopandas.GeoDataFrame, optional
        Valid-data outline, drawn dashed.
    """
    fig = Figure(figsize=figsize, layout="constrained")
    ax = fig.add_subplot()
    _draw_base(ax, relief, footprint)
    keep, polys = _polys(craters)
    if len(polys) and colour_by in craters.columns:
        values = craters[colour_by].to_numpy()[keep]
        if colour_by == "verdict":
            labels = sorted({str(v) for v in values})
            lut = {v: np.array(verdict_colour(v, i)) / 255.0 for i, v in enumerate(labels)}
            colours = [lut[str(v)] for v in values]
            ax.add_collection(PolyCollection(polys, facecolors="none", edgecolors=colours,
                                             linewidths=0.7))
            counts = {v: int(np.sum(values.astype(str) == v)) for v in labels}
            ax.legend(handles=[Patch(facecolor="none", edgecolor=lut[v], label=f"{v} ({counts[v]})")
                               for v in labels], loc="upper right", fontsize=7, framealpha=0.85)
        else:
            pc = PolyCollection(polys, facecolors="none", cmap=P_IMPACT_CMAP, linewidths=0.7)
            pc.set_array(np.asarray(values, dtype=float))
            pc.set_clim(0.0, 1.0)
            pc.set_facecolor("none")
            ax.add_collection(pc)
            pc.set_edgecolor(pc.to_rgba(np.asarray(values, dtype=float)))
            fig.colorbar(pc, ax=ax, shrink=0.7, label="p_impact (0 spot-like ... 1 impact-like)")
    elif len(polys):
        ax.add_collection(PolyCollection(polys, facecolors="none", edgecolors="tab:red", linewidths=0.7))
    if len(polys) or relief is not None:
        ax.autoscale_view()
    ax.set_title(title or f"Crater rims coloured by {colour_by}", fontsize=9)
    _axes_units(ax, craters.crs)
    if not len(polys):
        ax.text(0.5, 0.5, "no craters", transform=ax.transAxes, ha="center", va="center")
    return fig
