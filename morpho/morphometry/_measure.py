"""Crater morphometry table: refined rims, features and bootstrap uncertainties."""

from __future__ import annotations

import numpy as np
import pandas as pd

from ._degradation import degradation_columns
from ._detrend import FLANK_EXPONENT, annulus_rings
from ._features import azimuth_features, bowl_offset, crest_shape, profile_features, ring_harmonics
from ._geometry import nanquantile_last, replicate_std
from ._neighbours import NeighbourPairs, neighbour_context, neighbour_mask, neighbour_pairs
from ._refine import (
    MIN_COVERAGE,
    R_MAX,
    detrended_profiles,
    find_inner_crest,
    profile_grid,
    radius_batches,
    refine_craters,
    sharpen_crest,
)
from ._validate import as_centres, as_dem, as_spacing
from .profiles import PolarSampler

__all__ = ["measure_craters", "measure_crater", "FEATURES_WITH_ERROR"]

#: Features that get a ``<name>_err`` column (bootstrap standard deviation over azimuths).
FEATURES_WITH_ERROR = (
    "diameter_m", "ellipse_major_m", "ellipse_minor_m", "ellipticity", "depth_m",
    "rim_height_m", "d_over_D", "h_over_D", "wall_slope_mean_deg", "wall_slope_upper_deg",
    "floor_diameter_fraction", "floor_flatness", "central_peak_height_m",
    "central_peak_basal_width_m", "central_pit_depth_m", "rim_curvature_norm",
    "rim_crest_angle_deg", "interior_shape_exponent", "cavity_volume_m3",
    "rim_flank_decay_exponent", "outline_irregularity", "polygonality_index",
    "rim_height_asymmetry", "rim_height_variation", "outline_spread", "bowl_offset",
)
#: Quantile of the absolute annulus residuals reported by :func:`exterior_roughness`.
EXTERIOR_QUANTILE = 0.9
#: Refinement passes before measuring (the measurement itself is a third crest pass).
REFINE_PASSES = 2
#: Crest search window around the refined radius (crater radii).
FINAL_WINDOW = (0.7, 1.3)
#: Below this many pixels across, a crater is not measured (Robbins et al. 2014 Icarus 234
#: advise caution at <= 10 px; below 5 px the rim cannot be located at all).
MIN_PIXELS = 5.0


def exterior_roughness(zd, r_norm, coef, depth):
    """How far the surroundings depart from the fitted plain and flank, over the depth.

    The 90th percentile of the absolute residuals of the 1.3-2.5 R annulus about the
    robust fit (plane + ``e (r/R)^-3``), divided by the crater depth: near 0 on an open
    plain, large where a neighbouring crater cuts a sector of the surroundings (then rim
    and flank features are less trustworthy). A high quantile, not the MAD, on purpose:
    the robust fit ignores a disturbed sector, this measure must see it.
    """
    sel = annulus_rings(r_norm)  # the rings the fit itself used
    res = zd[:, :, sel] - coef[:, 3, None, None] * r_norm[sel] ** -FLANK_EXPONENT
    n = res.shape[0]
    q90 = nanquantile_last(np.abs(res.reshape(n, -1)), EXTERIOR_QUANTILE)
    with np.errstate(invalid="ignore", divide="ignore"):
        return np.where(depth > 0, q90 / depth, np.nan)


def _combine(az, pr):
    out = {**az, **pr}
    with np.errstate(invalid="ignore", divide="ignore"):
        out["d_over_D"] = out["depth_m"] / out["diameter_m"]
        out["h_over_D"] = out["rim_height_m"] / out["diameter_m"]
    out.pop("rim_z")
    return out


class _Neighbours:
    """The other craters of a measurement, as seen from one batch."""

    def __init__(self, rows, cols, rad, enabled):
        self.rows, self.cols, self.rad = rows, cols, rad
        self.pairs = neighbour_pairs(rows, cols, rad, R_MAX) if enabled else NeighbourPairs.none()
        self.context = neighbour_context(rad, self.pairs, rows.size)

    def mask(self, idx, n_azimuths):
        """``(mask, cover)`` of batch ``idx`` on its profile grid; mask None when it masks nothing."""
        if not np.isin(self.pairs.i, idx).any():
            return None, np.zeros(len(idx))
        az, r_norm = profile_grid(self.rad[idx], n_azimuths)
        return neighbour_mask(self.rows, self.cols, self.rad, self.pairs, idx, az, r_norm)


def _relief(mean_prof, r_norm):
    """Rim-to-floor relief (m) of azimuth-mean profiles: highest point within 0.8-1.2 R
    minus lowest inside 1 R (the scale of :func:`ring_harmonics`)."""
    near = (r_norm >= 0.8) & (r_norm <= 1.2)
    inner = r_norm <= 1.0
    top = np.where(np.isfinite(mean_prof[:, near]), mean_prof[:, near], -np.inf).max(1)
    low = np.where(np.isfinite(mean_prof[:, inner]), mean_prof[:, inner], np.inf).min(1)
    with np.errstate(invalid="ignore"):
        rel = top - low
    return np.where(np.isfinite(rel) & (rel > 0), rel, np.nan)


def _measure_chunk(z, rows, cols, rad, spacing, n_azimuths, boot_idx, body, mask=None, cover=0.0):
    prof, zd, coef = detrended_profiles(z, rows, cols, rad, n_azimuths, mask=mask)
    r_norm, az = prof.r_norm, prof.azimuths
    crest = find_inner_crest(zd, r_norm, FINAL_WINDOW)
    crest = sharpen_crest(zd, r_norm, crest, rad)
    radius_m = rad * spacing
    crest_r_m = crest.r_norm * radius_m[:, None]
    curv, angle = crest_shape(zd, r_norm, crest.r_norm, crest.z, radius_m)
    valid = np.isfinite(zd)
    zf = np.where(valid, zd, 0.0)
    with np.errstate(invalid="ignore", divide="ignore"):
        mean_prof = zf.sum(1) / valid.sum(1)
    az_point = azimuth_features(az, crest_r_m, crest.z, curv, angle)
    rim_z = az_point["rim_z"]
    point = _combine(az_point, profile_features(mean_prof, r_norm, radius_m, rim_z))
    point["bowl_offset"] = bowl_offset(zd, r_norm, az)
    point.update(ring_harmonics(zd, r_norm, az, _relief(mean_prof, r_norm)))
    with np.errstate(invalid="ignore", divide="ignore"):
        # The annulus fit's r^-3 term over the rim height: ~1 for a flank continuous with
        # the rim (McGetchin et al. 1973 ejecta), ~0 for a lip that ends near the rim.
        point["ejecta_flank_ratio"] = np.where(rim_z > 0, coef[:, 3] / rim_z, np.nan)
    point["exterior_roughness"] = exterior_roughness(zd, r_norm, coef, point["depth_m"])
    n_boot = boot_idx.shape[0]
    # Without replicates the _err columns stay, as NaN: one schema whatever n_boot is.
    errs = {f"{name}_err": np.full(rows.size, np.nan) for name in FEATURES_WITH_ERROR}
    boot_prof = None
    if n_boot > 1:
        # Resampling azimuths with replacement = integer weights per azimuth; the same
        # draw serves every crater, and every weighted sum is one matrix product.
        counts = np.zeros((n_boot, n_azimuths))
        np.add.at(counts, (np.arange(n_boot)[:, None], boot_idx), 1.0)
        with np.errstate(invalid="ignore", divide="ignore"):
            boot_prof = (np.matmul(zf.transpose(0, 2, 1), counts.T)
                         / np.matmul(valid.transpose(0, 2, 1).astype(float), counts.T)).transpose(0, 2, 1)
        azb = azimuth_features(az, crest_r_m, crest.z, curv, angle, counts)
        boot = _combine(azb, profile_features(boot_prof, r_norm, radius_m[:, None], azb["rim_z"]))
        boot["bowl_offset"] = bowl_offset(zd, r_norm, az, counts)
        for name in FEATURES_WITH_ERROR:
            errs[f"{name}_err"] = replicate_std(boot[name])
    # Columns gathered first and the frame built once (column-by-column inserts cost more
    # than the measurement itself on small batches).
    cols_out = {"row": rows, "col": cols, "radius_px": rad}
    for name, val in point.items():
        cols_out[name] = val
        if f"{name}_err" in errs:
            cols_out[f"{name}_err"] = errs[f"{name}_err"]
    diameter = np.asarray(point["diameter_m"], dtype=np.float64)
    cols_out["pixels_per_diameter"] = diameter / spacing
    cols_out["rim_coverage"] = np.isfinite(crest.r_norm).mean(1)
    cols_out["regional_slope_deg"] = np.degrees(np.arctan(np.hypot(coef[:, 1], coef[:, 2]) / spacing))
    cols_out["neighbour_cover"] = cover
    if body is not None:
        deg = degradation_columns(mean_prof, r_norm, diameter, body, boot_prof=boot_prof)
    else:  # keep the schema stable; the fit needs the body's fresh-crater shape
        deg = {"kappa_t_over_d2": np.nan, "kappa_t_over_d2_err": np.nan}
    cols_out.update(deg)
    n = rows.size
    return pd.DataFrame({k: np.full(n, v) if np.ndim(v) == 0 else v for k, v in cols_out.items()})


def measure_craters(z, spacing_m, rows, cols, radius_px, *, n_azimuths=64, n_boot=50, seed=0,
                    refine=True, body=None, chunk=1000, neighbours=True):
    """Measure crater morphometry on a DEM, one row per crater, with bootstrap errors.

    Profiles are sampled along ``n_azimuths`` rays out to 2.5 R (bilinear,
    :func:`scipy.ndimage.map_coordinates`), a robust plane (plus an r^-3 ejecta-flank term) fitted
    in the 1.3-2.5 R annulus is removed, and the rim crest is taken on every azimuth. Each feature's ``_err`` is
    the standard deviation over ``n_boot`` resamples (with replacement) of the azimuths.

    Parameters
    ----------
    z : ndarray, shape (H, W)
        Elevation in metres on a square metric grid; NaN for no data.
    spacing_m : float or ndarray, shape (n,)
        Ground metres per pixel at each crater (``spacing / k`` for map-scale factor ``k``).
    rows, cols, radius_px : array_like, shape (n,)
        Crater centres (fractional pixel indices, pixel centres at integers) and radii (px).
    n_azimuths : int
        Profiles per crater (default 64).
    n_boot : int
        Bootstrap resamples (default 50; 0 or 1 leaves the ``_err`` columns NaN).
    seed : int
        Seed of the :class:`numpy.random.Generator` drawing the resamples.
    refine : bool
        Refine centres and radii with :func:`refine_craters` first.
    body : str or morpho.bodies.Body, optional
        If given, the topographic-diffusion degradation ``kappa_t_over_d2`` is fitted too
        (Fassett & Thomson 2014), starting from that body's fresh-crater profile.
    chunk : int
        Craters per vectorised batch (memory bound).
    neighbours : bool
        Treat the other craters of the call as neighbours (default): profile samples
        beyond 1.2 R that fall within 1.3 radii of a neighbour's centre are left out of the
        measurement (unless that neighbour's rim encloses the centre, or less than 40 % of
        the 1.3-2.5 R annulus would remain), and the ``neighbour_*`` context columns
        describe the overlap (:mod:`morpho.morphometry._neighbours`). False measures every
        crater as if alone (the context columns are then 0).

    Returns
    -------
    pandas.DataFrame
        ``row, col, radius_px`` (refined) plus the morphometry columns declared in
        :mod:`morpho.dictionary._morphometry` and the core columns ``diameter_m(_err)``,
        ``pixels_per_diameter``, ``rim_coverage``, ``measure_status``. Input order kept.
        ``measure_status`` is "ok" or one of "no_valid_data" (no DEM samples),
        "no_rim_crest" (no crest on any azimuth), "low_rim_coverage" (crest on < 50 % of
        azimuths; values still come from the valid ones), "fit_diverged", "no_depression",
        "too_small" (< 5 px across). Values are measured from valid samples only; nothing
        is filled in.

    Notes
    -----
    Cost: about 2 s per 1,000 craters (n_boot = 50) on one core of a loaded 2-core
    machine, dominated by the bilinear sampling (``benchmarks/bench_morphometry.py``).
    Bootstrap replicates are weighted sums (one matrix product each batch), so ``n_boot``
    adds little.

    References
    ----------
    Pike R.J. (1977) Impact and Explosion Cratering, Pergamon, 489-509.
    Breton S. et al. (2019) MethodsX 6:2293-2304.
    Efron B., Tibshirani R. (1993) An Introduction to the Bootstrap, Chapman & Hall.

    Examples
    --------
    >>> import numpy as np
    >>> yy, xx = np.mgrid[0:100, 0:100]
    >>> r = np.hypot(yy - 50.0, xx - 50.0) / 20.0
    >>> z = np.where(r <= 1, 8.0 * r**2 - 6.0, 2.0 * np.maximum(r, 1) ** -3)
    >>> t = measure_craters(z, 10.0, [50.0], [50.0], [20.0], n_boot=0)
    >>> round(float(t.depth_m[0]), 1), round(float(t.diameter_m[0]) / 400.0, 2)
    (8.0, 1.0)
    """
    z = as_dem(z)
    r0, c0, rad0 = as_centres(rows, cols, radius_px)
    spacing = as_spacing(spacing_m, r0.size)
    if refine:
        ref = refine_craters(z, spacing, r0, c0, rad0, n_azimuths=n_azimuths, n_iter=REFINE_PASSES)
        r0, c0, rad0 = (ref[k].to_numpy() for k in ("row", "col", "radius_px"))
        status = ref["reason"].to_numpy(dtype=object)
    else:
        status = np.full(r0.size, "ok", dtype=object)
    rng = np.random.default_rng(seed)
    boot_idx = rng.integers(0, n_azimuths, size=(max(int(n_boot), 0), n_azimuths))
    if r0.size == 0:
        # Same columns and dtypes as a real result: measure one dummy crater, keep no rows.
        probe = _measure_chunk(np.zeros((16, 16)), np.array([8.0]), np.array([8.0]),
                               np.array([3.0]), np.array([1.0]), n_azimuths, boot_idx, body)
        context = neighbour_context(np.zeros(0), NeighbourPairs.none(), 0)
        return probe.iloc[:0].assign(**context, measure_status=pd.Series(dtype=object))
    near = _Neighbours(r0, c0, rad0, neighbours)
    sampler = PolarSampler(z)  # no data found once for every batch
    parts = []
    for idx in radius_batches(rad0, chunk):
        part = _measure_chunk(sampler, r0[idx], c0[idx], rad0[idx], spacing[idx], n_azimuths,
                              boot_idx, body, *near.mask(idx, n_azimuths))
        part.index = idx
        parts.append(part)
    out = pd.concat(parts).sort_index()
    for name, values in near.context.items():
        out[name] = values
    cov = out["rim_coverage"].to_numpy()
    st = np.where((status == "ok") & (cov < MIN_COVERAGE),
                  np.where(cov == 0, "no_rim_crest", "low_rim_coverage"), status)
    st = np.where((st == "ok") & ~(out["depth_m"] > 0), "no_depression", st)
    st = np.where((st == "ok") & (out["pixels_per_diameter"] < MIN_PIXELS), "too_small", st)
    out["measure_status"] = st.astype(object)
    return out.reset_index(drop=True)


def measure_crater(z, spacing_m, center_rc, radius_px, *, transform=None, **kwargs):
    """Measure one crater: a convenience wrapper of :func:`measure_craters` (no I/O).

    Parameters
    ----------
    z : ndarray, shape (H, W)
        Elevation in metres.
    spacing_m : float or None
        Ground pixel size in metres; may be None when ``transform`` is given.
    center_rc : (float, float)
        Centre as (row, col) pixel indices; with ``transform``, as map (x, y) instead.
    radius_px : float
        Radius in pixels (with ``transform``: in map units).
    transform : affine.Affine, optional
        North-up square-pixel transform of ``z`` (pixel corner convention, as rasterio).
    **kwargs
        Passed to :func:`measure_craters`.

    Returns
    -------
    dict
        Column name -> value for the crater.

    Examples
    --------
    >>> import numpy as np
    >>> from affine import Affine
    >>> yy, xx = np.mgrid[0:100, 0:100]
    >>> r = np.hypot(yy - 50.0, xx - 50.0) / 20.0
    >>> z = np.where(r <= 1, 8.0 * r**2 - 6.0, 2.0 * np.maximum(r, 1) ** -3)
    >>> tr = Affine(10.0, 0.0, 5000.0, 0.0, -10.0, 9000.0)  # 10 m pixels
    >>> f = measure_crater(z, None, tr @ (50.5, 50.5), 200.0, transform=tr, n_boot=0)
    >>> round(f["diameter_m"], -1), round(f["depth_m"], 1)
    (400.0, 8.0)
    """
    if transform is not None:
        a, b, _, d, e, _ = tuple(transform)[:6]
        if abs(b) > 1e-12 * abs(a) or abs(d) > 1e-12 * abs(a) or not np.isclose(abs(a), abs(e)):
            from ..errors import InputError

            raise InputError(f"transform must be north-up with square pixels; got {transform!r}.",
                             fix="warp the DEM to a square metric grid first (morpho.ingest).")
        col, row = ~transform @ (center_rc[0], center_rc[1])
        center_rc = (row - 0.5, col - 0.5)  # pixel centres sit at integer indices
        spacing_m = abs(a) if spacing_m is None else spacing_m
        radius_px = radius_px / abs(a)
    t = measure_craters(z, spacing_m, [center_rc[0]], [center_rc[1]], [radius_px], **kwargs)
    return t.iloc[0].to_dict()
