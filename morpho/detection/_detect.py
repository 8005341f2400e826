"""Public crater detector: candidates on a pyramid, verification on profiles, duplicate merging."""

from __future__ import annotations

import numpy as np
import pandas as pd

from morpho.errors import InputError

from ._candidates import _WINDOW_BUFFER, find_candidates, prepare_surface
from ._merge import suppress_duplicates
from ._verify import verify_candidates

__all__ = ["detect_craters", "COLUMNS"]

#: Output columns, in order.
COLUMNS = ("row", "col", "radius_px", "detection_confidence", "rim_coverage")


def _empty() -> pd.DataFrame:
    return pd.DataFrame({c: np.empty(0, dtype=np.float64) for c in COLUMNS})


def _check(z, spacing_m, min_diameter_px, max_diameter_px):
    z = np.asarray(z, dtype=np.float64)
    if z.ndim != 2 or min(z.shape) < 8:
        raise InputError(f"z must be a 2-D grid of at least 8 x 8 pixels; got shape {z.shape}.",
                         fix="pass one band of the DEM as a 2-D array.")
    s = float(spacing_m)
    if not np.isfinite(s) or s <= 0:
        raise InputError(f"spacing_m must be a finite pixel size > 0 in metres; got {spacing_m!r}.",
                         fix="pass the ground size of one (square) pixel in metres.")
    if not np.isfinite(min_diameter_px) or min_diameter_px < 4:
        raise InputError(f"min_diameter_px must be >= 4 pixels; got {min_diameter_px!r}.",
                         fix="craters below ~8 pixels across cannot be told from noise; use >= 8.")
    if max_diameter_px is None:
        # A tile too small for the smallest crater simply has none.
        max_diameter_px = max(0.8 * min(z.shape), float(min_diameter_px) + 1.0)
    if not max_diameter_px > min_diameter_px:
        raise InputError(f"max_diameter_px ({max_diameter_px!r}) must exceed min_diameter_px "
                         f"({min_diameter_px!r}).", fix="widen the diameter range.")
    return z, float(max_diameter_px)


def _may_reach(region, rows, cols, radius_px) -> np.ndarray:
    """Candidates that may end in ``region`` or merge with one there: centres within two radii
    (refinement moves a centre by less than one; duplicates lie within 0.75 of the larger
    radius) plus the base level's buffer of it."""
    r0, r1, c0, c1 = region
    dr = np.maximum.reduce([r0 - rows, rows - (r1 - 1), np.zeros_like(rows)])
    dc = np.maximum.reduce([c0 - cols, cols - (c1 - 1), np.zeros_like(cols)])
    return np.hypot(dr, dc) <= 2.0 * radius_px + _WINDOW_BUFFER


def detect_craters(
    z,
    spacing_m: float,
    *,
    min_diameter_px: float = 8.0,
    max_diameter_px: float | None = None,
    min_confidence: float = 0.4,
    min_depth_ratio: float = 0.02,
    min_rim_coverage: float = 0.6,
    n_azimuths: int = 32,
    region: tuple[int, int, int, int] | None = None,
) -> pd.DataFrame:
    """Find craters in a DEM tile.

    Candidates are scale-space maxima of a radial gradient-symmetry transform computed on a
    Gaussian pyramid (Loy & Zelinsky 2003; Lindeberg 1998), plus, on coarse octaves, maxima of
    rim-ring minus interior relief (for central peaks and filled floors). Each candidate is then
    verified and refined on radial elevation profiles (rim crest per azimuth, least-squares
    circle through the crests, Kasa 1976); duplicates across scales are merged by non-maximum
    suppression.
    The elevation is used directly (no shading); a best-fit plane is removed first and every
    profile is detrended by its own surroundings, so a constant offset or a regional tilt does
    not change the result. Nodata (NaN) is never interpolated into a measurement: profiles stop
    at it, and craters cut by nodata or the tile edge are kept when at least
    ``min_rim_coverage`` of their rim is on valid data.

    Parameters
    ----------
    z : array_like, shape (H, W)
        Elevation in metres on a square grid, NaN for no data.
    spacing_m : float
        Pixel size in metres (for the depth/diameter floor; the geometry works in pixels).
    min_diameter_px, max_diameter_px : float
        Rim-crest diameter range in pixels. ``max_diameter_px`` defaults to 0.8 x the shorter
        side of the tile.
    min_confidence : float
        Craters rated below this are dropped.
    min_depth_ratio : float
        Depth/diameter floor for craters up to 10 km across (falling as D^-0.5 above, as
        complex craters are shallower; Garvin & Frawley 1998). The depth part of the confidence
        is 0 at half the floor and 1 at twice it. Fresh simple craters have ~0.2 (Pike 1974,
        GRL 1:291); 0.02 keeps strongly degraded ones.
    min_rim_coverage : float
        Minimum share of profile azimuths whose rim-crest window lies on valid data.
    n_azimuths : int
        Radial profiles per crater in the verification step.
    region : (row0, row1, col0, col1), optional
        Only craters centred in this box (half-open, pixels; a tile's core) are wanted. The
        finest scales are then searched only around it and candidates that cannot reach it are
        not verified, so the tile's overlap costs less; craters in the box and near it come out
        as without ``region``, others may be missing.

    Returns
    -------
    pandas.DataFrame
        One crater per row: ``row, col`` (centre, fractional pixel indices, pixel centres at
        integers), ``radius_px`` (rim-crest radius, pixels), ``detection_confidence`` in [0, 1],
        ``rim_coverage`` in [0, 1]; sorted by decreasing confidence.

    References
    ----------
    Loy G., Zelinsky A. (2003) IEEE Trans. Pattern Anal. Mach. Intell. 25(8):959-973.
    doi:10.1109/TPAMI.2003.1217601
    Lindeberg T. (1998) Int. J. Comput. Vis. 30(2):79-116. doi:10.1023/A:1008045108935
    Kasa I. (1976) IEEE Trans. Instrum. Meas. 25(1):8-14. doi:10.1109/TIM.1976.6312298

    Examples
    --------
    >>> import numpy as np
    >>> from morpho.detection._shapes import stamp_craters
    >>> z = stamp_craters(np.zeros((128, 128)), [64.0], [60.0], [15.0])
    >>> df = detect_craters(z, 100.0)
    >>> bool(abs(df.radius_px.iloc[0] - 15.0) < 1.0)
    True
    """
    z, max_diameter_px = _check(z, spacing_m, min_diameter_px, max_diameter_px)
    if not np.isfinite(z).any():
        return _empty()
    min_r, max_r = 0.5 * float(min_diameter_px), 0.5 * max_diameter_px
    filled, valid = prepare_surface(z)
    cand = find_candidates(filled, valid, min_radius_px=min_r, max_radius_px=max_r,
                           spacing_m=float(spacing_m), min_depth_ratio=min_depth_ratio, region=region)
    # Cheap first merge on the detector score: many scale-space maxima are the same bowl.
    keep = suppress_duplicates(cand.rows, cand.cols, cand.radius_px, cand.score, max_offset=0.3,
                               greedy=False)
    if region is not None:
        keep = keep[_may_reach(region, cand.rows[keep], cand.cols[keep], cand.radius_px[keep])]
    ver = verify_candidates(z, cand.rows[keep], cand.cols[keep], cand.radius_px[keep],
                            float(spacing_m), min_depth_ratio=min_depth_ratio,
                            n_azimuths=n_azimuths)
    h, w = z.shape
    sel = (
        (ver.confidence >= min_confidence)
        & (ver.rim_coverage >= min_rim_coverage)
        & (ver.radius_px >= min_r * 0.97)
        & (ver.radius_px <= max_r * 1.03)
        & (ver.rows > -0.5) & (ver.rows < h - 0.5) & (ver.cols > -0.5) & (ver.cols < w - 0.5)
    )
    idx = np.nonzero(sel)[0]
    order = suppress_duplicates(ver.rows[idx], ver.cols[idx], ver.radius_px[idx],
                                ver.confidence[idx])
    idx = idx[order]
    return pd.DataFrame({
        "row": ver.rows[idx],
        "col": ver.cols[idx],
        "radius_px": ver.radius_px[idx],
        "detection_confidence": ver.confidence[idx],
        "rim_coverage": ver.rim_coverage[idx],
    }).reset_index(drop=True)
