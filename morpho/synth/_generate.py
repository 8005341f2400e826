"""`generate_surface`: a synthetic planetary DEM with a truth catalogue measured as stamped."""

from __future__ import annotations

import logging
import warnings
from dataclasses import dataclass, field

import numpy as np
import pandas as pd
from affine import Affine
from pyproj import CRS, Transformer

from ..bodies import Body, get_body
from ..errors import InputError
from ..hypotheses import Hypothesis, default_hypotheses
from ._crs import tile_crs, tile_transform
from ._families import crest_radius_norm, profile_table, sample_shapes
from ._layout import LAYOUTS, place_craters, sample_diameters
from ._stamp import measure_stamped, stamp_craters
from ._terrain import add_noise, apply_psf, fractal_terrain, nodata_holes

__all__ = ["SyntheticSurface", "generate_surface", "TRUTH_COLUMNS"]

log = logging.getLogger(__name__)

#: truth-catalogue columns, in order (units in the names; see write_surface for definitions)
TRUTH_COLUMNS = (
    "crater_id", "center_x", "center_y", "lon", "lat", "row", "col", "diameter_m", "depth_m",
    "rim_height_m", "depth_diameter", "origin", "spot_family", "layout_group", "degradation",
    "kappa_t_m2", "complex", "central_feature", "diameter_nominal_m", "depth_nominal_m",
    "rim_height_nominal_m", "visible_fraction", "truncated", "stamp_order", "pixel_size_m",
)


@dataclass
class SyntheticSurface:
    """A synthetic DEM and its truth catalogue.

    Attributes
    ----------
    z : ndarray of float32, shape (H, W)
        Elevation in metres (NaN = nodata), with sensor blur and noise.
    transform : affine.Affine
        Pixel -> map transform; pixel centre ``transform * (col + 0.5, row + 0.5)``.
    crs : pyproj.CRS
        Stereographic projection on the body's sphere centred on the tile.
    truth : pandas.DataFrame
        One row per crater recognisable in the DEM (columns :data:`TRUTH_COLUMNS`), measured
        on the noise-free stamped and blurred surface.
    body : str
    pixel_size_m : float
    z_clean : ndarray of float32
        The noise-free, blurred surface the truth was measured on.
    hidden : pandas.DataFrame
        Craters that were stamped but later mostly covered (visible fraction < 0.5) or
        could not be measured; same columns.
    params : dict
        The generation parameters (for provenance).
    """

    z: np.ndarray
    transform: Affine
    crs: CRS
    truth: pd.DataFrame
    body: str
    pixel_size_m: float
    z_clean: np.ndarray | None = None
    hidden: pd.DataFrame = field(default_factory=pd.DataFrame)
    params: dict = field(default_factory=dict)


def _split_counts(n: int, weights: dict[str, float]) -> dict[str, int]:
    """Largest-remainder split of n into the (normalised) weights."""
    names = list(weights)
    w = np.array([float(weights[k]) for k in names])
    if np.any(w < 0) or w.sum() <= 0:
        raise InputError(f"family weights must be >= 0 with a positive sum; got {weights!r}.",
                         fix='e.g. families={"impact": 0.8, "cathode_spot": 0.2}')
    exact = n * w / w.sum()
    base = np.floor(exact).astype(int)
    rest = n - base.sum()
    base[np.argsort(-(exact - base), kind="stable")[:rest]] += 1
    return dict(zip(names, base.tolist(), strict=True))


def _check_families(families, hyps: dict[str, Hypothesis]) -> dict[str, float]:
    if families is None:
        families = {"impact": 1.0}
    elif isinstance(families, str):
        families = {families: 1.0}
    elif not isinstance(families, dict):
        families = {f: 1.0 for f in families}
    for name in families:
        if name not in hyps:
            raise InputError(f"unknown crater family {name!r}; known: {', '.join(sorted(hyps))}.",
                             fix="use one of the known families or add a hypothesis file for it")
    return dict(families)


def generate_surface(
    body: str | Body = "moon",
    shape: tuple[int, int] = (1024, 1024),
    pixel_size_m: float | None = None,
    n_craters: int | None = None,
    families=None,
    layout: str = "random",
    degradation=None,
    seed: int = 0,
    *,
    diameter_range_px: tuple[float, float] = (16.0, 160.0),
    sfd_slope: float | None = None,
    hypotheses: dict[str, Hypothesis] | None = None,
    regions: dict | None = None,
    spot_median_px: float | None = None,
    roughness_m: float | None = None,
    spectral_slope: float = 3.0,
    tilt_deg: tuple[float, float] = (0.0, 0.0),
    psf_sigma_px: float = 0.5,
    noise_m: float | None = None,
    nodata_fraction: float = 0.0,
    center_lat_deg: float = 0.0,
    center_lon_deg: float = 0.0,
) -> SyntheticSurface:
    """Generate a synthetic DEM with craters stamped from hypothesis families.

    Parameters
    ----------
    body : str or Body
        Body in :data:`morpho.bodies.BODIES` (radius for the CRS; transition diameter and
        per-body laws for impact craters).
    shape : (int, int)
        Rows, columns.
    pixel_size_m : float, optional
        Ground pixel size (m). Default: transition diameter / 600 (craters of 10-150 px are
        then simple; Moon: 25 m).
    n_craters : int, optional
        Craters to stamp (default: one per 4000 px). Clusters or chains cut by the tile
        edge give a few less.
    families : dict, str or list, optional
        ``{family: weight}`` (default ``{"impact": 1.0}``); families are the hypothesis names
        (``impact``, ``cathode_spot``, ``anode_spot``, ``spark_edm`` or a user's own).
    layout : str
        ``"random"`` (uniform), ``"clustered"`` (Thomas process), ``"chains"``,
        ``"rim_on_rim"``, or ``"hypothesis"`` (each family's own arrangement weights).
    degradation : None, float, (float, float) or "hypothesis"
        Normalised degradation ``kappa t / D^2`` per crater: fresh (None/0), uniform on
        [0, x], uniform on [lo, hi], or the family's ``normalised_degradation``.
    seed : int
        Seed of the only random generator used; same inputs + seed = same output.
    diameter_range_px : (float, float)
        Smallest and largest rim diameter in pixels. Below ~15 px the sensor PSF rounds the
        rim crest enough to lower the measured d/D by > 10 % (Robbins et al. 2014, Icarus
        234: caution for craters <= 10 px).
    sfd_slope : float, optional
        Cumulative power-law exponent for every family (overrides the files' SFD models).
    hypotheses : dict, optional
        ``{name: Hypothesis}`` (default: the shipped files; see
        :func:`morpho.hypotheses.load_hypotheses_dir`).
    regions : dict, optional
        ``{family: (x_frac, y_frac, radius_frac)}`` confines a family's centres to a disc
        (fractions of the tile width/height/min side; y from the top).
    spot_median_px : float, optional
        Median diameter of lognormal (spot) families; default the geometric mean of
        ``diameter_range_px`` (an assumption: lab data do not predict planetary sizes).
    roughness_m : float, optional
        RMS of the fractal background (default 0.1 * pixel size).
    spectral_slope : float
        Power-spectrum exponent of the background (3 = Brownian surface).
    tilt_deg : (float, float)
        Regional slope towards east and north (degrees).
    psf_sigma_px : float
        Gaussian point-spread function sigma (pixels).
    noise_m : float, optional
        White noise sd (m; default 0.01 * pixel size).
    nodata_fraction : float
        Fraction of the tile set to NaN in blob-shaped holes.
    center_lat_deg, center_lon_deg : float
        Centre of the tile (projection origin), planetocentric degrees.

    Returns
    -------
    SyntheticSurface

    Examples
    --------
    >>> s = generate_surface("moon", shape=(256, 256), n_craters=5, seed=1)
    >>> s.z.dtype.name, len(s.truth) > 0, s.crs.to_json_dict()["conversion"]["method"]["name"]
    ('float32', True, 'Stereographic')
    """
    b = body if isinstance(body, Body) else get_body(body)
    H, W = (int(v) for v in shape)
    if H < 16 or W < 16:
        raise InputError(f"shape must be at least 16 x 16 pixels; got {shape!r}.")
    px = float(pixel_size_m) if pixel_size_m is not None else b.transition_diameter_m / 600.0
    if not np.isfinite(px) or px <= 0:
        raise InputError(f"pixel_size_m must be > 0; got {pixel_size_m!r}.")
    dmin_px, dmax_px = (float(v) for v in diameter_range_px)
    if not 2.0 <= dmin_px < dmax_px:
        raise InputError(f"diameter_range_px must satisfy 2 <= min < max; got {diameter_range_px!r}.")
    if layout not in LAYOUTS:
        raise InputError(f"layout must be one of {', '.join(LAYOUTS)}; got {layout!r}.")
    n_total = int(n_craters) if n_craters is not None else max(1, H * W // 4000)
    if n_total < 0:
        raise InputError(f"n_craters must be >= 0; got {n_craters!r}.")
    hyps = default_hypotheses() if hypotheses is None else hypotheses
    fam = _check_families(families, hyps)
    rng = np.random.default_rng(seed)
    roughness = 0.1 * px if roughness_m is None else float(roughness_m)
    noise = 0.01 * px if noise_m is None else float(noise_m)

    z = fractal_terrain((H, W), px, rms_m=roughness, spectral_slope=spectral_slope, tilt_deg=tilt_deg,
                        rng=rng)

    parts = []
    for name, n_f in _split_counts(n_total, fam).items():
        if n_f == 0:
            continue
        h = hyps[name]
        med = None if spot_median_px is None else spot_median_px * px

        def draw(k, h=h, med=med):
            return sample_diameters(h, k, (dmin_px * px, dmax_px * px), rng, sfd_slope=sfd_slope,
                                    median_m=med) / px

        region = None
        if regions and name in regions:
            xf, yf, rf = regions[name]
            region = (yf * H, xf * W, rf * min(H, W))
        rows, cols, dpx, group, host = place_craters(h, draw(n_f), (H, W), layout, rng, region=region,
                                                     draw_sizes=draw)
        shapes = sample_shapes(h, dpx * px, b, rng, degradation)
        parts.append((name, h, rows, cols, group, host, shapes))

    if not parts:
        return _empty_surface(z, b, px, H, W, noise, psf_sigma_px, center_lat_deg, center_lon_deg, rng,
                              nodata_fraction)
    rows = np.concatenate([p[2] for p in parts])
    cols = np.concatenate([p[3] for p in parts])
    group = np.concatenate([p[4] for p in parts])
    offsets = np.cumsum([0] + [p[2].size for p in parts])[:-1]
    host = np.concatenate([np.where(p[5] >= 0, p[5] + o, -1) for p, o in zip(parts, offsets, strict=True)])
    family = np.concatenate([np.full(p[2].size, p[0], dtype=object) for p in parts])
    origin = np.concatenate([np.full(p[2].size, p[1].origin, dtype=object) for p in parts])
    shapes = _concat_shapes([p[6] for p in parts])
    n = rows.size

    # ages: older = larger kappa t; a rim-on-rim crater is younger than its host
    kt = shapes.degradation * shapes.diameter_m**2
    generation = np.zeros(n, dtype=np.int64)
    for i in np.flatnonzero(host >= 0):
        j = host[i]
        kt[i] = min(kt[i], kt[j])
        generation[i] = generation[j] + 1
    shapes.degradation = kt / shapes.diameter_m**2
    order = np.lexsort((rng.uniform(size=n), generation, -kt))

    grid, table = profile_table(shapes)
    ref_level, owner = stamp_craters(z, rows, cols, px, shapes, grid, table, order)
    clean = apply_psf(z, psf_sigma_px)

    radius_px = 0.5 * shapes.diameter_m / px
    m = measure_stamped(clean, rows, cols, radius_px * crest_radius_norm(grid, table))
    visible = _visible_fraction(owner, rows, cols, radius_px, shapes)
    transform = tile_transform((H, W), px)
    crs = tile_crs(b, center_lat_deg, center_lon_deg)
    t = transform  # pixel centre: transform * (col + 0.5, row + 0.5), vectorised
    x = t.a * (cols + 0.5) + t.b * (rows + 0.5) + t.c
    y = t.d * (cols + 0.5) + t.e * (rows + 0.5) + t.f
    lon, lat = Transformer.from_crs(crs, crs.geodetic_crs, always_xy=True).transform(x, y)
    truncated = ((rows - radius_px < -0.5) | (rows + radius_px > H - 0.5)
                 | (cols - radius_px < -0.5) | (cols + radius_px > W - 0.5))
    stamp_rank = np.empty(n, dtype=np.int64)
    stamp_rank[order] = np.arange(n)
    depth = m["rim_elev"] - m["floor_elev"]
    diameter = 2.0 * m["rim_radius_px"] * px
    table_df = pd.DataFrame({
        "crater_id": np.arange(n, dtype=np.int64),
        "center_x": x, "center_y": y, "lon": lon, "lat": lat, "row": rows, "col": cols,
        "diameter_m": diameter, "depth_m": depth, "rim_height_m": m["rim_elev"] - ref_level,
        "depth_diameter": depth / diameter,
        "origin": np.where(origin == "impact", "impact", family).astype(str),
        "spot_family": np.where(origin == "impact", "", family).astype(str),
        "layout_group": group.astype(str),
        "degradation": shapes.degradation, "kappa_t_m2": kt,
        "complex": shapes.complex, "central_feature": shapes.peak_height_m != 0,
        "diameter_nominal_m": shapes.diameter_m, "depth_nominal_m": shapes.depth_m,
        "rim_height_nominal_m": shapes.rim_height_m,
        "visible_fraction": visible, "truncated": truncated, "stamp_order": stamp_rank,
        "pixel_size_m": np.full(n, px),
    }, columns=list(TRUTH_COLUMNS))
    ok = ((visible >= 0.5) & (m["valid_fraction"] >= 0.75) & np.isfinite(depth) & (depth > 0)
          & np.isfinite(diameter))
    truth = table_df[ok].reset_index(drop=True)
    hidden = table_df[~ok].reset_index(drop=True)

    out = add_noise(clean, noise, rng)
    holes = nodata_holes((H, W), nodata_fraction, rng)
    out[holes] = np.nan
    log.info("synth: %d craters stamped, %d recognisable", n, len(truth))
    params = dict(body=b.name, shape=(H, W), pixel_size_m=px, n_craters=n_total, families=fam,
                  layout=layout, degradation=degradation, seed=seed, diameter_range_px=(dmin_px, dmax_px),
                  sfd_slope=sfd_slope, regions=regions, spot_median_px=spot_median_px, roughness_m=roughness,
                  spectral_slope=spectral_slope, tilt_deg=tuple(tilt_deg), psf_sigma_px=psf_sigma_px,
                  noise_m=noise, nodata_fraction=nodata_fraction, center_lat_deg=center_lat_deg,
                  center_lon_deg=center_lon_deg,
                  hypotheses={k: hyps[k].sha256 for k in fam})
    return SyntheticSurface(z=out.astype(np.float32), transform=transform, crs=crs, truth=truth, body=b.name,
                            pixel_size_m=px, z_clean=clean.astype(np.float32), hidden=hidden, params=params)


def _empty_surface(z, b, px, H, W, noise, psf, lat0, lon0, rng, nodata_fraction):
    clean = apply_psf(z, psf)
    out = add_noise(clean, noise, rng)
    out[nodata_holes((H, W), nodata_fraction, rng)] = np.nan
    return SyntheticSurface(z=out.astype(np.float32), transform=tile_transform((H, W), px),
                            crs=tile_crs(b, lat0, lon0), truth=pd.DataFrame(columns=list(TRUTH_COLUMNS)),
                            body=b.name, pixel_size_m=px, z_clean=clean.astype(np.float32))


def _concat_shapes(items):
    from ._families import CraterShapes

    if len(items) == 1:
        return items[0]
    out = {}
    for f in CraterShapes.__dataclass_fields__:
        arrs = [getattr(s, f) for s in items]
        if arrs[0].ndim == 2:
            width = max(a.shape[1] for a in arrs)
            arrs = [np.pad(a, ((0, 0), (0, width - a.shape[1]))) for a in arrs]
        out[f] = np.concatenate(arrs)
    return CraterShapes(**out)


def _visible_fraction(owner, rows, cols, radius_px, shapes):
    """Fraction of each crater's interior disc (within the tile) that no later crater covers."""
    n = rows.size
    own = np.bincount(owner[owner >= 0].ravel(), minlength=n).astype(np.float64)
    H, W = owner.shape
    area = np.pi * radius_px**2
    edge = ((rows - radius_px < 0) | (rows + radius_px > H - 1) | (cols - radius_px < 0)
            | (cols + radius_px > W - 1))
    for i in np.flatnonzero(edge):
        r = radius_px[i]
        r0, r1 = max(int(rows[i] - r) - 1, 0), min(int(rows[i] + r) + 2, H)
        c0, c1 = max(int(cols[i] - r) - 1, 0), min(int(cols[i] + r) + 2, W)
        yy = np.arange(r0, r1)[:, None] - rows[i]
        xx = np.arange(c0, c1)[None, :] - cols[i]
        area[i] = max(float(np.count_nonzero(np.hypot(yy, xx) <= r)), 1.0)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", RuntimeWarning)
        return np.clip(own / area, 0.0, 1.0)
