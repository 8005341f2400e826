"""Verification of crater candidates on radial elevation profiles.

Each candidate is sampled on a polar grid (:func:`morpho.morphometry.profiles.sample_radial_profiles`,
never across nodata). A plane fitted to the surroundings (1.3-2 radii, with one round of outlier
rejection) removes the regional slope. On every azimuth, in every pass, the rim crest is the
innermost summit between 0.5 and 1.5 radii that is nearly as high as the highest point there
(:func:`morpho.morphometry._refine.inner_summit_index`, the rule of the morphometry refinement that
follows); a least-squares circle through the crests (Kasa 1976) refines the centre and the
rim-crest radius. The work is a cascade so that most candidates cost little: a coarse pass
(16 azimuths) screens on depth/diameter and depth/roughness and refits; candidates that converged
on the same rim are merged; one refinement pass and a final rating follow at full resolution.
The confidence is the product of: the share of azimuths with a crest above the floor, the
roundness of the crest line, the depth/diameter ratio against a floor, the depth against the
surrounding roughness, the agreement of the crests with the fitted radius, and how far the
surroundings that set the regional plane enclose the crater (see :func:`_rate`).

References
----------
Kasa I. (1976) A circle fitting procedure and its error analysis. IEEE Trans. Instrum. Meas.
25(1):8-14. doi:10.1109/TIM.1976.6312298
Pike R.J. (1977) Size-dependence in the shape of fresh impact craters on the Moon. In Impact and
Explosion Cratering, Pergamon, 489-509 (rim-crest diameter as the crater size).
"""

from __future__ import annotations

import warnings
from dataclasses import dataclass

import numpy as np

from morpho.morphometry._geometry import fit_circle
from morpho.morphometry._refine import inner_summit_index
from morpho.morphometry.profiles import PolarSampler, sample_radial_profiles

from ._merge import suppress_duplicates

__all__ = ["Verified", "verify_candidates"]

_N_RADII = 49  # 0 .. 2 radii in steps of 1/24
_R_MAX = 2.0
_WIN = (0.5, 1.5)  # rim-crest search window, radii
_COVER_MIN, _COVER_MAX = 0.8, 1.2  # rim coverage: profiles valid over this band of radii
_RING = (1.3, 2.0)  # surroundings for the regional plane, radii
_SUBSAMPLE = 0.0
_CHUNK = 1500
_FLOOR_MAX = 0.6  # floor searched inside this radius (crater radii)
#: Share of azimuths whose surroundings (1.3-2 radii) must hold valid data for the regional
#: plane to count as interpolated around the crater; below it the confidence falls in
#: proportion (see :func:`_rate`). A choice made here, checked on the synthetic scenes of
#: benchmarks/bench_detection.py (no change there) and the lunar DEM of tests/test_realdata_*.
ENCLOSED_FULL = 0.75


@dataclass(frozen=True)
class Verified:
    """Refined candidates (all arrays shape (n,))."""

    rows: np.ndarray
    cols: np.ndarray
    radius_px: np.ndarray
    confidence: np.ndarray
    rim_coverage: np.ndarray
    depth: np.ndarray
    terms: dict


def _nanreduce(func, a, axis):
    """NaN-aware reduction returning NaN for all-NaN slices without a warning."""
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", RuntimeWarning)
        return func(a, axis=axis)


def _plane_basis(prof) -> np.ndarray:
    """Plane design matrix of the polar grid, shape (A * M, 3): 1, x, y in crater radii."""
    rho = prof.r_norm[None, :]
    x = rho * np.cos(prof.azimuths)[:, None]
    y = rho * np.sin(prof.azimuths)[:, None]
    return np.stack([np.ones_like(x), x, y], axis=-1).reshape(-1, 3)


def _plane_fit(basis, flat, mask):
    """Least-squares plane per crater on masked samples; flat, mask (n, m). Returns (n, 3)."""
    w = mask.astype(np.float64)
    outer = (basis[:, :, None] * basis[:, None, :]).reshape(-1, 9)
    ata = (w @ outer).reshape(-1, 3, 3)
    atb = (w * np.where(mask, flat, 0.0)) @ basis
    # Tiny ridge keeps the solve defined where only a few samples survive (edge craters).
    ata += 1e-6 * (ata[:, :1, :1] + 1.0) * np.eye(3)[None]
    return np.linalg.solve(ata, atb[..., None])[..., 0]


def _detrend(prof) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Elevation minus the regional plane, shape (n, A, M); a robust roughness, shape (n,); and
    the share of azimuths whose surroundings hold valid data (how far the plane encloses the
    crater), shape (n,)."""
    zz = prof.z
    n, a, m = zz.shape
    basis = _plane_basis(prof)
    cols = (prof.r_norm >= _RING[0]) & (prof.r_norm <= _RING[1])
    ring_basis = basis.reshape(a, m, 3)[:, cols].reshape(-1, 3)
    flat = zz[:, :, cols].reshape(n, -1)
    mask = np.isfinite(flat)
    for it in range(2):
        coef = _plane_fit(ring_basis, flat, mask)
        res = flat - coef @ ring_basis.T
        absres = np.where(mask, np.abs(res), 0.0)
        # Mean absolute deviation x 1.2533 estimates a Gaussian sigma; cheaper than a median.
        sigma = 1.2533 * absres.sum(axis=1) / np.maximum(mask.sum(axis=1), 1)
        if it == 0:
            # Neighbouring craters in the ring are outliers to the regional plane.
            with np.errstate(invalid="ignore"):
                mask &= np.abs(res) <= 2.5 * sigma[:, None] + 1e-12
    sigma = np.where(mask.sum(axis=1) >= 8, sigma, np.inf)
    enclosed = np.isfinite(zz[:, :, cols]).any(axis=2).mean(axis=1)
    return zz - (coef @ basis.T).reshape(n, a, m), sigma, enclosed


def _crests(d, r_norm):
    """Per-azimuth rim crest: normalised radius, height, crest-found and window-valid flags.

    The crest is the innermost summit nearly as high as the window's top
    (:func:`~morpho.morphometry._refine.inner_summit_index`; on a degraded crater in rough terrain
    the top is often outer terrain); on a single-crested rim, the highest point.
    """
    i0, i1 = np.searchsorted(r_norm, _WIN[0]), np.searchsorted(r_norm, _WIN[1], side="right")
    win = d[:, :, i0:i1]
    # Coverage: the rim band (0.8 .. 1.2 radii) on valid data (dictionary: rim_coverage). Nodata
    # on the inner wall or floor does not hide the rim, so it does not count against coverage.
    c0, c1 = np.searchsorted(r_norm, _COVER_MIN), np.searchsorted(r_norm, _COVER_MAX, side="right")
    finite = np.isfinite(d[:, :, c0:c1]).all(axis=2)
    idx = inner_summit_index(win)
    height = np.take_along_axis(win, idx[..., None], axis=2)[..., 0]
    # Parabolic sub-sample peak position where both neighbours exist.
    inner = (idx > 0) & (idx < win.shape[2] - 1)
    lo = np.take_along_axis(win, np.clip(idx - 1, 0, None)[..., None], axis=2)[..., 0]
    hi = np.take_along_axis(win, np.clip(idx + 1, None, win.shape[2] - 1)[..., None], axis=2)[..., 0]
    with np.errstate(invalid="ignore", divide="ignore"):
        curv = lo - 2.0 * height + hi
        shift = np.where(inner & (curv < 0), 0.5 * (lo - hi) / curv, 0.0)
    shift = np.nan_to_num(np.clip(shift, -0.5, 0.5)) * _SUBSAMPLE
    step = r_norm[1] - r_norm[0]
    rho = r_norm[i0] + (idx + shift) * step
    found = inner & np.isfinite(height) & np.isfinite(lo) & np.isfinite(hi)
    return rho, height, found & finite, finite


def _assess(z, rows, cols, radius, n_az, n_radii=_N_RADII):
    """One round of sampling: crest geometry and relief for every candidate."""
    prof = sample_radial_profiles(z, rows, cols, radius, n_azimuths=n_az, n_radii=n_radii,
                                  r_max_factor=_R_MAX)
    d, rough, enclosed = _detrend(prof)
    rho, height, found, ok = _crests(d, prof.r_norm)
    # Floor = lowest level of the azimuth-averaged interior profile, not the centre: complex
    # craters carry central peaks or mounds above their floor.
    inner = prof.r_norm <= _FLOOR_MAX
    mean_prof = _nanreduce(np.nanmean, d[:, :, inner], axis=1)
    floor = np.nan_to_num(_nanreduce(np.nanmin, mean_prof, axis=1), nan=np.inf)
    relief = height - floor[:, None]
    # A crest counts when it rises above the floor and is a real maximum inside the window.
    good = found & (relief > 0)
    return prof.azimuths, rho, relief, good, ok, rough, enclosed


def _refit(rows, cols, rad, az, rho, good, n_az):
    """Move each centre and radius to the circle through its rim crests (Kasa fit)."""
    with np.errstate(invalid="ignore"):
        med = _nanreduce(np.nanmedian, np.where(good, rho, np.nan), axis=1)
    # Crests far from the typical one are neighbours' rims or terrain, not this rim.
    w = (good & (np.abs(rho - med[:, None]) < 0.25 * med[:, None])).astype(np.float64)
    dist = np.where(w > 0, rho * rad[:, None], np.nan)
    b, a, r_fit = fit_circle(dist * np.cos(az)[None, :], -dist * np.sin(az)[None, :])
    usable = (w.sum(axis=1) >= 0.25 * n_az) & np.isfinite(r_fit) & np.isfinite(a) & np.isfinite(b)
    with np.errstate(invalid="ignore"):
        usable &= (np.hypot(a, b) < 0.5 * rad) & (r_fit > 0.6 * rad) & (r_fit < 1.6 * rad)
    return (np.where(usable, rows + a, rows), np.where(usable, cols + b, cols),
            np.where(usable, r_fit, rad))


def depth_ratio_floor(diameter_m, min_depth_ratio):
    """Depth/diameter floor for a crater of ``diameter_m``: constant, then falling as D^-0.5.

    Above ~10 km complex craters are shallower: d/D falls about as D^-0.5 on Mars (d = 0.25
    D^0.49, Garvin & Frawley 1998, GRL 25, doi:10.1029/1998GL900177) and faster on the Moon
    (d = 1.044 D^0.301, Pike 1977, from memory). The 10 km corner lies between the Mars (8 km)
    and Moon (15 km) transition diameters.
    """
    d = np.maximum(np.asarray(diameter_m, dtype=np.float64), 1e-9)
    return min_depth_ratio * np.minimum(1.0, (d / 10_000.0) ** -0.5)


def _rate(rho, relief, good, ok, rough, enclosed, rad, spacing_m, min_depth_ratio):
    """Confidence terms: roundness of the crest line, depth/diameter, depth/roughness, enclosure.

    Enclosure: the regional plane is fitted on the surroundings (1.3-2 radii) and subtracted
    inside the rim. Where the surroundings lie on valid data on only some azimuths (a crater cut
    by the DEM edge or a nodata gap beyond its rim), the plane is extrapolated across the
    missing side, and the depth and roughness measured against it are no longer measurements
    of relief around the crater but of the trend's extrapolation: e.g. a basin margin at a DEM
    edge reads as one side of a large "crater". Extrapolating a fitted trend beyond the support
    of its data is unreliable (common practice), so the confidence is scaled by
    min(1, enclosed / ENCLOSED_FULL). Craters with most of their surroundings on data are
    unaffected; a half crater at an edge keeps ~0.8 of its rating.
    """
    coverage = ok.mean(axis=1)
    with np.errstate(invalid="ignore", divide="ignore"):
        r_good = np.where(good, rho, np.nan)
        med = _nanreduce(np.nanmedian, r_good, axis=1)
        spread = _nanreduce(np.nanmedian, np.abs(r_good - med[:, None]), axis=1) / med
        depth = _nanreduce(np.nanmedian, np.where(good, relief, np.nan), axis=1)
        snr = depth / rough
    depth = np.nan_to_num(depth, nan=0.0)
    ratio = depth / (2.0 * rad * spacing_m)
    # Spread of crest radii (median absolute deviation / median): real rims wander by up to
    # ~10 % (outline irregularity, roughness); above 30 % the "rim" is terrain. Thresholds here
    # and below were set on synthetic scenes of morpho.synth (benchmarks/bench_detection.py).
    t_round = 1.0 - np.clip((np.nan_to_num(spread, nan=1.0) - 0.1) / 0.2, 0.0, 1.0)
    m = depth_ratio_floor(2.0 * rad * spacing_m, min_depth_ratio)
    t_depth = np.clip((ratio - 0.5 * m) / (1.5 * m), 0.0, 1.0)
    t_snr = 1.0 - np.exp(-np.clip(np.nan_to_num(snr, nan=0.0, posinf=1e6), 0.0, None) / 4.0)
    share = good.sum(axis=1) / np.maximum(ok.sum(axis=1), 1)
    # Crests far from the fitted radius mean the refinement did not converge on this rim.
    t_fit = 1.0 - np.clip((np.abs(np.nan_to_num(med, nan=0.0) - 1.0) - 0.1) / 0.15, 0.0, 1.0)
    t_encl = np.clip(enclosed / ENCLOSED_FULL, 0.0, 1.0)
    conf = t_round * t_depth * t_snr * share * t_fit * t_encl
    terms = {"spread": spread, "depth_ratio": ratio, "snr": snr, "share": share, "fit": t_fit,
             "enclosed": enclosed, "partial": t_round * t_depth * t_snr * share * t_encl}
    return np.clip(conf, 0.0, 1.0), coverage, depth, terms


def verify_candidates(
    z: np.ndarray,
    rows: np.ndarray,
    cols: np.ndarray,
    radius_px: np.ndarray,
    spacing_m: float,
    *,
    min_depth_ratio: float = 0.02,
    n_azimuths: int = 32,
) -> Verified:
    """Refine centre and rim-crest radius of each candidate and rate it.

    A coarse first pass (16 azimuths) drops candidates shallower than 0.75 x the depth/diameter
    floor (:func:`depth_ratio_floor`) or with relief below 2.5 x the surrounding roughness;
    duplicates are merged; survivors get one refinement pass at ``n_azimuths`` and a final
    rating.

    Parameters
    ----------
    z : ndarray, shape (H, W)
        Elevation in metres with NaN for no data (not filled).
    rows, cols, radius_px : ndarray, shape (n,)
        Candidate centres (fractional pixel indices) and first-guess radii (pixels).
    spacing_m : float
        Pixel size in metres (for the depth/diameter ratio).
    min_depth_ratio : float
        Rim-to-floor depth / rim diameter at which the depth term reaches 1/3; fresh simple
        craters have ~0.2 (Pike 1974, GRL 1:291), degraded ones reach a few hundredths.
    n_azimuths : int
        Profiles per crater.

    Returns
    -------
    Verified
        Refined ``rows, cols, radius_px``; ``confidence`` in [0, 1]; ``rim_coverage``, the share
        of azimuths whose crest search window lies on valid data; ``depth`` (rim crest above
        the central floor, metres).
    """
    rows = np.asarray(rows, dtype=np.float64)
    cols = np.asarray(cols, dtype=np.float64)
    rad = np.asarray(radius_px, dtype=np.float64)
    z = PolarSampler(z)  # no data found once for every chunk and pass
    # Chunks bound the memory of the (n, azimuths, radii) profile stacks.
    chunks = range(0, max(rows.size, 1), _CHUNK)
    parts = [_screen(z, rows[i:i + _CHUNK], cols[i:i + _CHUNK], rad[i:i + _CHUNK], spacing_m,
                     min_depth_ratio) for i in chunks]
    rows, cols, rad, rank = (np.concatenate(x) for x in zip(*parts, strict=True))
    # Candidates from neighbouring scales and pixels converge on the same rim after one
    # refit: merge them before the expensive passes.
    keep = suppress_duplicates(rows, cols, rad, rank, max_offset=0.25, max_ratio=1.25,
                               greedy=False)
    keep = keep[rank[keep] > 0]
    rows, cols, rad = rows[keep], cols[keep], rad[keep]
    parts = [_refine_and_rate(z, rows[i:i + _CHUNK], cols[i:i + _CHUNK], rad[i:i + _CHUNK],
                              spacing_m, min_depth_ratio, n_azimuths)
             for i in range(0, max(rows.size, 1), _CHUNK)]
    keys = ("rows", "cols", "radius_px", "confidence", "rim_coverage", "depth")
    merged = {k: np.concatenate([getattr(p, k) for p in parts]) for k in keys}
    terms = {k: np.concatenate([p.terms.get(k, np.empty(0)) for p in parts])
             for k in ("spread", "depth_ratio", "snr", "share", "fit", "enclosed")}
    return Verified(**merged, terms=terms)


def _screen(z, rows, cols, rad, spacing_m, min_depth_ratio):
    """Coarse pass (16 azimuths): one refit and a screening rank (0 = rejected)."""
    if rows.size == 0:
        e = np.empty(0)
        return e, e, e, e
    # The same crest rule as the later passes (innermost summit nearly as high as the window's
    # top): the refit then moves a candidate towards the rim those passes rate, not onto an
    # outer ridge that they would move it off again (a degraded crater with a higher outer
    # terrain, e.g. one overlapped by a neighbour, otherwise ends between the two).
    az, rho, relief, good, ok, rough, encl = _assess(z, rows, cols, rad, 16, 33)
    _, _, _, terms = _rate(rho, relief, good, ok, rough, encl, rad, spacing_m, min_depth_ratio)
    # Screening on what an off-centre first guess cannot spoil: depth/diameter and
    # depth/roughness, with a loose roundness bound (a 20 % centre offset spreads crest radii by
    # ~13 %, more with a wrong radius). A final confidence of 0.4 needs at least these values.
    ratio = np.nan_to_num(terms["depth_ratio"])
    snr = np.nan_to_num(terms["snr"], posinf=1e6)
    m = depth_ratio_floor(2.0 * rad * spacing_m, min_depth_ratio)
    alive = (ratio >= 0.75 * m) & (snr >= 2.0)
    alive &= np.nan_to_num(terms["spread"], nan=1.0) < 0.3
    rank = np.minimum(ratio / m, 10.0) * (1.0 - np.exp(-snr / 4.0))
    rows, cols, rad = _refit(rows, cols, rad, az, rho, good, 16)
    return rows, cols, rad, np.where(alive, rank + 1e-6, 0.0)


def _refine_and_rate(z, rows, cols, rad, spacing_m, min_depth_ratio, n_azimuths):
    """One refinement pass, then the final rating of those still plausible."""
    e = np.empty(0)
    if rows.size == 0:
        return Verified(e, e, e, e, e, e, {})
    az, rho, relief, good, ok, rough, encl = _assess(z, rows, cols, rad, n_azimuths)
    conf, *_, terms = _rate(rho, relief, good, ok, rough, encl, rad, spacing_m, min_depth_ratio)
    rows, cols, rad = _refit(rows, cols, rad, az, rho, good, n_azimuths)
    # A rim that rates below 0.15 from a centre within a few % of its own would not reach a
    # useful confidence after one more step: stop spending profiles on it. The agreement of
    # the crests with the old radius is left out: the refit just made (e.g. from an outer
    # ridge the screen took for the rim in to the inner summit) is what restores it.
    live = terms["partial"] >= 0.15
    rows, cols, rad = rows[live], cols[live], rad[live]
    if rows.size == 0:
        return Verified(e, e, e, e, e, e, {})
    az, rho, relief, good, ok, rough, encl = _assess(z, rows, cols, rad, n_azimuths)
    conf, coverage, depth, terms = _rate(rho, relief, good, ok, rough, encl, rad, spacing_m,
                                         min_depth_ratio)
    return Verified(rows, cols, rad, conf, coverage, depth, terms)
