"""DEM ingestion: any GDAL raster -> elevations in metres on a square metric grid.

This is the only module that opens rasters for reading. It turns a file into
:class:`DemInfo` (metadata, checked up front) and then into :class:`DemTile`
objects: float64 elevations in metres with NaN for no data, on a grid whose
pixels are square with a known side in ground metres.

Geographic DEMs, and projected DEMs whose map scale differs between the two
axes (e.g. equirectangular away from its standard parallel), are warped tile by
tile to a stereographic projection centred on the tile, on the body's own
ellipsoid. Stereographic is conformal, so craters stay round; what is left is
an isotropic map scale ``k`` at each point, which :meth:`DemTile.scale_factor`
returns so that lengths can be converted to ground metres (``spacing_m / k``).
"""

from __future__ import annotations

import logging
import math
import warnings
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pyproj
import rasterio
from affine import Affine
from rasterio.errors import NotGeoreferencedWarning, RasterioIOError
from rasterio.warp import Resampling, reproject
from rasterio.windows import Window

from ..bodies import Body, body_from_radius, get_body
from ..errors import CrsError, DemError
from .tiles import TileSpec, plan_windows

__all__ = ["DemInfo", "DemTile", "open_dem", "read_tile", "read_dem", "plan_tiles", "ground_pixel_size"]

log = logging.getLogger(__name__)

#: Map-scale anisotropy (|h/k - 1|) above which a projected tile is warped.
ANISOTROPY_TOLERANCE = 0.005
#: Elevations beyond this magnitude (m) are treated as no data: no body has relief of 10,000 km.
MAX_ABS_ELEVATION_M = 1.0e7


@dataclass(frozen=True)
class DemInfo:
    """What morpho knows about a DEM file before reading any tile.

    Attributes
    ----------
    path : Path
    width, height, count, band : int
        Raster size, number of bands, and the band used (1-based).
    dtype : str
    crs : pyproj.CRS or None
        Source CRS (None when the file has none and ``pixel_size`` was given).
    transform : Affine
        Source geotransform (pixel corner convention, as rasterio).
    nodata : float or None
    z_scale, z_offset : float
        Applied as ``z_m = raw * z_scale + z_offset``.
    body : Body
    needs_warp : bool
        True when tiles are warped to a local stereographic grid.
    ground_pixel_m : tuple of float
        (east-west, north-south) ground size of a source pixel at the raster centre, metres.
    """

    path: Path
    width: int
    height: int
    count: int
    band: int
    dtype: str
    crs: pyproj.CRS | None
    transform: Affine
    nodata: float | None
    z_scale: float
    z_offset: float
    body: Body
    needs_warp: bool
    ground_pixel_m: tuple[float, float]
    linear_unit_m: float = 1.0

    @property
    def shape(self) -> tuple[int, int]:
        return (self.height, self.width)

    @property
    def crs_wkt(self) -> str:
        return "" if self.crs is None else self.crs.to_wkt()

    def geodetic_crs(self) -> pyproj.CRS:
        """Geographic CRS (degrees, lon/lat order) of the body."""
        if self.crs is not None and self.crs.geodetic_crs is not None:
            return self.crs.geodetic_crs
        return pyproj.CRS.from_proj4(f"+proj=longlat +R={self.body.radius_m} +no_defs +type=crs")


@dataclass(frozen=True)
class DemTile:
    """Elevations of one tile on a square metric grid.

    Attributes
    ----------
    z : ndarray, shape (H, W), float64
        Elevation in metres, NaN where there is no data.
    spacing_m : float
        Pixel side in metres of the grid's map units (ground metres = ``spacing_m / scale_factor``).
    transform : Affine
        Grid geotransform (corner convention); pixel centre of (row, col) is
        ``transform * (col + 0.5, row + 0.5)``.
    crs : pyproj.CRS or None
        CRS of the grid (the source CRS, or the local stereographic one when warped).
    info : DemInfo
        The source file's metadata.
    spec : TileSpec
        The source window this tile covers and its core (non-overlap) part.
    warped : bool
    """

    z: np.ndarray
    spacing_m: float
    transform: Affine
    crs: pyproj.CRS | None
    info: DemInfo
    spec: TileSpec
    warped: bool = False
    _cache: dict = field(default_factory=dict, repr=False, compare=False)

    @property
    def body(self) -> Body:
        return self.info.body

    @property
    def valid_mask(self) -> np.ndarray:
        return np.isfinite(self.z)

    # -- coordinates -------------------------------------------------------------------------
    def xy(self, rows, cols):
        """Map coordinates in the grid CRS of fractional pixel indices (pixel centres at integers)."""
        rows = np.asarray(rows, dtype=np.float64)
        cols = np.asarray(cols, dtype=np.float64)
        t = self.transform
        x = t.c + t.a * (cols + 0.5) + t.b * (rows + 0.5)
        y = t.f + t.d * (cols + 0.5) + t.e * (rows + 0.5)
        return x, y

    def rowcol(self, x, y):
        """Fractional pixel indices in this grid of map coordinates in the grid CRS."""
        inv = ~self.transform
        x = np.asarray(x, dtype=np.float64)
        y = np.asarray(y, dtype=np.float64)
        cols = inv.c + inv.a * x + inv.b * y - 0.5
        rows = inv.f + inv.d * x + inv.e * y - 0.5
        return rows, cols

    def _transformer(self, src, dst):
        key = (id(src), id(dst))
        if key not in self._cache:
            self._cache[key] = pyproj.Transformer.from_crs(src, dst, always_xy=True)
        return self._cache[key]

    def to_source(self, rows, cols):
        """Source-CRS map coordinates of grid pixel positions."""
        x, y = self.xy(rows, cols)
        if not self.warped:
            return x, y
        return self._transformer(self.crs, self.info.crs).transform(x, y)

    def from_source(self, x, y):
        """Grid pixel positions of source-CRS map coordinates."""
        x = np.asarray(x, dtype=np.float64)
        y = np.asarray(y, dtype=np.float64)
        if self.warped:
            x, y = self._transformer(self.info.crs, self.crs).transform(x, y)
        return self.rowcol(x, y)

    def to_lonlat(self, rows, cols):
        """Longitude (-180..180) and latitude in degrees of grid pixel positions (NaN without CRS)."""
        x, y = self.xy(rows, cols)
        if self.crs is None:
            nan = np.full(np.shape(x), np.nan)
            return nan, nan.copy()
        lon, lat = self._transformer(self.crs, self.info.geodetic_crs()).transform(x, y)
        return (np.asarray(lon) + 180.0) % 360.0 - 180.0, np.asarray(lat)

    def source_rowcol(self, rows, cols):
        """Fractional pixel indices in the *source* raster of grid pixel positions."""
        x, y = self.to_source(rows, cols)
        inv = ~self.info.transform
        x = np.asarray(x)
        y = np.asarray(y)
        return inv.f + inv.d * x + inv.e * y - 0.5, inv.c + inv.a * x + inv.b * y - 0.5

    def in_core(self, rows, cols) -> np.ndarray:
        """True where a grid position falls in this tile's core (each source pixel is in one core)."""
        sr, sc = self.source_rowcol(rows, cols)
        s = self.spec
        sr = np.floor(np.asarray(sr) + 0.5)
        sc = np.floor(np.asarray(sc) + 0.5)
        return (
            (sr >= s.core_row_off) & (sr < s.core_row_off + s.core_height)
            & (sc >= s.core_col_off) & (sc < s.core_col_off + s.core_width)
        )

    def core_box(self) -> tuple[int, int, int, int]:
        """Grid pixel box ``(row0, row1, col0, col1)`` (half-open) holding every position
        :meth:`in_core` accepts: the core itself, or on a warped grid the bounding box of the
        core's outline (sampled every few source pixels) plus one pixel."""
        s = self.spec
        h, w = self.z.shape
        if not self.warped:
            r0, c0 = s.core_row_off - s.row_off, s.core_col_off - s.col_off
            return r0, r0 + s.core_height, c0, c0 + s.core_width
        # the core's edge in source pixel positions (pixel centres at integers)
        edge = np.linspace(0.0, 1.0, 129)
        top, left = s.core_row_off - 0.5, s.core_col_off - 0.5
        sr = top + np.concatenate([np.zeros(129), edge, np.ones(129), edge[::-1]]) * s.core_height
        sc = left + np.concatenate([edge, np.ones(129), edge[::-1], np.zeros(129)]) * s.core_width
        x, y = self.info.transform @ (sc + 0.5, sr + 0.5)
        rows, cols = self.from_source(x, y)
        r0 = max(0, int(np.floor(np.min(rows))) - 1)
        c0 = max(0, int(np.floor(np.min(cols))) - 1)
        return r0, min(h, int(np.ceil(np.max(rows))) + 2), c0, min(w, int(np.ceil(np.max(cols))) + 2)

    def scale_factor(self, rows, cols) -> np.ndarray:
        """Isotropic map scale k (map length / ground length) at grid positions; 1 without CRS."""
        rows = np.asarray(rows, dtype=np.float64)
        if self.crs is None or self.crs.is_geographic:
            return np.ones(rows.shape)
        x, y = self.xy(rows, cols)
        lon, lat = self._transformer(self.crs, self.info.geodetic_crs()).transform(x, y)
        f = pyproj.Proj(self.crs).get_factors(np.atleast_1d(lon), np.atleast_1d(lat), errcheck=False)
        k = np.sqrt(np.asarray(f.meridional_scale) * np.asarray(f.parallel_scale))
        return np.reshape(k, rows.shape)

    def ground_spacing_m(self, rows, cols) -> np.ndarray:
        """Ground metres per grid pixel at grid positions (``spacing_m / k``)."""
        return self.spacing_m / self.scale_factor(rows, cols)


# ---------------------------------------------------------------------------------------------
def _fail_open(path: Path, err: Exception) -> DemError:
    text = str(err).split("\n")[0]
    return DemError(
        f"not a raster GDAL can read, or the file is truncated/corrupt ({text}).",
        path=path,
        fix="check the file is a complete GeoTIFF, PDS3 .IMG (with its label), ISIS3 .cub or VRT.",
    )


def _body_for(crs: pyproj.CRS | None, body: str | None, path: Path) -> Body:
    if body is not None:
        return get_body(body)
    if crs is None:
        raise CrsError(
            "the DEM has no CRS, so the planetary body cannot be told.",
            path=path,
            fix="pass --body (e.g. --body moon) together with --pixel-size.",
        )
    ell = crs.ellipsoid
    found = None if ell is None else body_from_radius(ell.semi_major_metre)
    if found is None:
        radius = "unknown" if ell is None else f"{ell.semi_major_metre:.0f} m"
        raise CrsError(
            f"cannot tell the planetary body from the CRS (ellipsoid semi-major axis {radius}).",
            path=path,
            fix="pass --body NAME (moon, mars, mercury, earth, ganymede, callisto).",
        )
    return found


def _local_factors(crs: pyproj.CRS, lon, lat):
    f = pyproj.Proj(crs).get_factors(np.atleast_1d(lon), np.atleast_1d(lat), errcheck=False)
    return np.asarray(f.meridional_scale), np.asarray(f.parallel_scale)


def ground_pixel_size(info: DemInfo, row: float, col: float) -> tuple[float, float]:
    """Ground size (east-west, north-south) in metres of the source pixel at (row, col).

    For geographic CRSs this uses the ellipsoid's radii of curvature
    (east-west ``N(phi) cos(phi) dlambda``, north-south ``M(phi) dphi``); on a
    sphere these reduce to ``R dlambda cos(phi)`` and ``R dphi``. For projected
    CRSs it divides the pixel size by PROJ's meridional and parallel scale factors.

    Parameters
    ----------
    info : DemInfo
    row, col : float
        Source pixel indices (pixel centres at integers).

    Returns
    -------
    (dx_m, dy_m) : tuple of float
    """
    t = info.transform
    px = math.hypot(t.a, t.d)
    py = math.hypot(t.b, t.e)
    if info.crs is None:
        return px, py
    x = t.c + t.a * (col + 0.5) + t.b * (row + 0.5)
    y = t.f + t.d * (col + 0.5) + t.e * (row + 0.5)
    if info.crs.is_geographic:
        ell = info.crs.ellipsoid
        a = ell.semi_major_metre
        e2 = 0.0 if ell.inverse_flattening == 0 else (lambda f: f * (2 - f))(1.0 / ell.inverse_flattening)
        phi = math.radians(y)
        w = math.sqrt(1.0 - e2 * math.sin(phi) ** 2)
        n_radius = a / w
        m_radius = a * (1.0 - e2) / w**3
        return n_radius * math.cos(phi) * math.radians(px), m_radius * math.radians(py)
    lon, lat = pyproj.Transformer.from_crs(info.crs, info.geodetic_crs(), always_xy=True).transform(x, y)
    h, k = _local_factors(info.crs, lon, lat)
    u = info.linear_unit_m
    return float(px * u / k[0]), float(py * u / h[0])


def open_dem(
    path,
    *,
    band: int | None = None,
    body: str | None = None,
    pixel_size: float | None = None,
    z_scale: float | None = None,
    z_offset: float | None = None,
    min_size_px: int = 8,
) -> DemInfo:
    """Open and check a DEM; read only metadata and a sample of its values.

    Parameters
    ----------
    path : str or Path
        Any raster GDAL reads (GeoTIFF, PDS3 .IMG with label, ISIS3 .cub, VRT).
    band : int, optional
        1-based band; required for multi-band files.
    body : str, optional
        Planetary body; overrides the body told from the CRS ellipsoid.
    pixel_size : float, optional
        Pixel size in metres for files without a CRS (requires ``body``).
    z_scale, z_offset : float, optional
        Override the file's scale/offset metadata: ``z_m = raw * z_scale + z_offset``.
    min_size_px : int
        Smallest crater searched, in pixels; a smaller raster is refused.

    Returns
    -------
    DemInfo

    Raises
    ------
    DemError, CrsError
        With the file name and the fix.
    """
    path = Path(path)
    if not path.exists():
        raise DemError("file not found.", path=path, fix="check the path and the current folder.")
    if path.is_dir():
        raise DemError("is a folder, not a raster file.", path=path, fix="give the DEM file itself.")
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", NotGeoreferencedWarning)
            src = rasterio.open(path)
    except (RasterioIOError, OSError) as err:
        raise _fail_open(path, err) from err
    with src:
        if src.count > 1 and band is None:
            raise DemError(
                f"has {src.count} bands and no band was chosen.",
                path=path,
                fix=f"pass --band N with N in 1..{src.count}.",
            )
        band = 1 if band is None else int(band)
        if not 1 <= band <= src.count:
            raise DemError(f"band {band} does not exist (the file has {src.count}).", path=path,
                           fix=f"pass --band N with N in 1..{src.count}.")
        if min(src.width, src.height) < 2 * min_size_px:
            raise DemError(
                f"is {src.width} x {src.height} pixels, smaller than twice the smallest crater searched "
                f"({min_size_px} px).",
                path=path,
                fix="use a larger DEM or lower --min-diameter-px.",
            )
        crs = None if src.crs is None else pyproj.CRS.from_wkt(src.crs.to_wkt())
        transform = src.transform
        if crs is None:
            if pixel_size is None:
                raise CrsError(
                    "has no CRS, so its pixel size in metres is unknown.",
                    path=path,
                    fix="pass --pixel-size METRES and --body NAME.",
                )
            if transform.is_identity:
                transform = Affine(pixel_size, 0, 0, 0, -pixel_size, 0)
            else:
                transform = Affine(pixel_size, 0, transform.c, 0, -pixel_size, transform.f)
        elif pixel_size is not None:
            log.warning("%s has a CRS; --pixel-size %.3f ignored.", path, pixel_size)
        the_body = _body_for(crs, body, path)
        linear_unit = 1.0
        if crs is not None and not crs.is_geographic:
            unit = crs.axis_info[0].unit_conversion_factor if crs.axis_info else 1.0
            linear_unit = float(unit or 1.0)
        scale = src.scales[band - 1] if src.scales else 1.0
        offset = src.offsets[band - 1] if src.offsets else 0.0
        scale = float(scale if z_scale is None else z_scale)
        offset = float(offset if z_offset is None else z_offset)
        nodata = src.nodatavals[band - 1]
        # A sample proves the data are readable and not all nodata without reading it all.
        try:
            sample = _sample(src, band)
        except (RasterioIOError, OSError, ValueError) as err:
            raise _fail_open(path, err) from err
        if _all_invalid(sample):
            try:
                full = src.read(band, masked=True)
            except (RasterioIOError, OSError, ValueError) as err:
                raise _fail_open(path, err) from err
            if _all_invalid(full):
                raise DemError("holds no valid elevation: every pixel is nodata or NaN.", path=path,
                               fix="check the nodata value and the band, or choose another file.")
        info = DemInfo(
            path=path, width=src.width, height=src.height, count=src.count, band=band,
            dtype=src.dtypes[band - 1], crs=crs, transform=transform,
            nodata=None if nodata is None else float(nodata), z_scale=scale, z_offset=offset,
            body=the_body, needs_warp=False, ground_pixel_m=(float("nan"), float("nan")),
            linear_unit_m=linear_unit,
        )
    gp = ground_pixel_size(info, (info.height - 1) / 2, (info.width - 1) / 2)
    needs_warp = _needs_warp(info)
    return DemInfo(**{**info.__dict__, "needs_warp": needs_warp, "ground_pixel_m": gp})


def _sample(src, band: int, n: int = 8, size: int = 32):
    """A sample of the raster's values: all of a small raster, else ``n`` x ``n`` small windows.

    A decimated read of the whole raster decompresses every block (1.1 s for an 8192^2
    deflate GeoTIFF); the windows read ~``n * n`` blocks. They span the raster corner to
    corner, so the first and last blocks of the file are among them (a truncated file
    fails here).
    """
    h, w = src.height, src.width
    if h * w <= (1 << 20):
        return src.read(band, out_shape=(min(h, 256), min(w, 256)), masked=True)
    size_r, size_c = min(size, h), min(size, w)
    rows = np.linspace(0, h - size_r, n).round().astype(int)
    cols = np.linspace(0, w - size_c, n).round().astype(int)
    parts = [src.read(band, window=Window(int(c), int(r), size_c, size_r), masked=True).ravel()
             for r in rows for c in cols]
    return np.ma.concatenate(parts)


def _all_invalid(masked) -> bool:
    data = np.ma.getdata(masked).astype(np.float64)
    bad = np.ma.getmaskarray(masked) | ~np.isfinite(data) | (np.abs(data) > MAX_ABS_ELEVATION_M)
    return bool(bad.all())


def _needs_warp(info: DemInfo) -> bool:
    if info.crs is None:
        return False
    if info.crs.is_geographic:
        return True
    t = info.transform
    if abs(t.b) > 0 or abs(t.d) > 0 or not math.isclose(abs(t.a), abs(t.e), rel_tol=1e-3):
        return True
    rows = np.linspace(0, info.height - 1, 5)
    cols = np.linspace(0, info.width - 1, 5)
    rr, cc = np.meshgrid(rows, cols, indexing="ij")
    x = t.c + t.a * (cc + 0.5)
    y = t.f + t.e * (rr + 0.5)
    lon, lat = pyproj.Transformer.from_crs(info.crs, info.geodetic_crs(), always_xy=True).transform(x, y)
    h, k = _local_factors(info.crs, np.ravel(lon), np.ravel(lat))
    aniso = np.nanmax(np.abs(h / k - 1.0))
    return bool(aniso > ANISOTROPY_TOLERANCE)


def plan_tiles(info: DemInfo, tile_size: int = 1024, overlap: int = 128) -> list[TileSpec]:
    """Overlapping source windows whose cores cover the raster exactly once (row-major order)."""
    return plan_windows(info.height, info.width, tile_size, overlap)


def _read_window(info: DemInfo, spec: TileSpec) -> np.ndarray:
    window = Window(spec.col_off, spec.row_off, spec.width, spec.height)
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", NotGeoreferencedWarning)
            with rasterio.open(info.path) as src:
                raw = src.read(info.band, window=window, masked=True)
    except (RasterioIOError, OSError, ValueError) as err:
        raise _fail_open(info.path, err) from err
    z, mask = _elevation(raw, info)
    z[mask] = np.nan
    return z


def _elevation(raw, info: DemInfo) -> tuple[np.ndarray, np.ndarray]:
    """Elevation in metres (float64) and its invalid mask from a masked band read.

    Invalid: masked (nodata), not finite, or beyond :data:`MAX_ABS_ELEVATION_M` after
    scaling. Computed in place after one conversion, so a tile makes no other full-size
    temporaries here.
    """
    z = np.ma.getdata(raw).astype(np.float64)
    mask = np.ma.getmaskarray(raw).copy()
    if info.z_scale != 1.0:
        z *= info.z_scale
    if info.z_offset != 0.0:
        z += info.z_offset
    mask |= ~np.isfinite(z)
    with np.errstate(invalid="ignore"):
        mask |= z > MAX_ABS_ELEVATION_M
        mask |= z < -MAX_ABS_ELEVATION_M
    return z, mask


def _local_crs(info: DemInfo, lon0: float, lat0: float) -> pyproj.CRS:
    ell = info.geodetic_crs().ellipsoid
    a = ell.semi_major_metre
    shape = f"+R={a}" if not ell.inverse_flattening else f"+a={a} +rf={ell.inverse_flattening}"
    return pyproj.CRS.from_proj4(
        f"+proj=stere +lat_0={lat0:.9f} +lon_0={lon0:.9f} +k=1 +x_0=0 +y_0=0 {shape} +units=m +no_defs +type=crs"
    )


def read_tile(info: DemInfo, spec: TileSpec) -> DemTile:
    """Read one source window and return it on a square metric grid.

    Parameters
    ----------
    info : DemInfo
    spec : TileSpec
        From :func:`plan_tiles`.

    Returns
    -------
    DemTile
    """
    z = _read_window(info, spec)
    t = info.transform @ Affine.translation(spec.col_off, spec.row_off)
    if not info.needs_warp:
        spacing = abs(t.a) * info.linear_unit_m
        return DemTile(z=z, spacing_m=spacing, transform=t, crs=info.crs, info=info, spec=spec)
    return _warp_tile(info, spec, z, t)


def _warp_tile(info: DemInfo, spec: TileSpec, z: np.ndarray, src_t: Affine) -> DemTile:
    h, w = z.shape
    to_geo = pyproj.Transformer.from_crs(info.crs, info.geodetic_crs(), always_xy=True)
    cx, cy = src_t @ (w / 2.0, h / 2.0)
    lon0, lat0 = to_geo.transform(cx, cy)
    local = _local_crs(info, float(lon0), float(lat0))
    # Ground size at the tile centre; keep the finer axis so no resolution is thrown away.
    dx, dy = ground_pixel_size(info, spec.row_off + h / 2.0, spec.col_off + w / 2.0)
    res = min(dx, dy)
    # Cap the upsampling so a very anisotropic tile cannot explode memory.
    res = max(res, math.sqrt(dx * dy) / 2.0)
    edge = np.linspace(0, 1, 65)
    bx = np.concatenate([edge * w, np.full(65, w), edge[::-1] * w, np.zeros(65)])
    by = np.concatenate([np.zeros(65), edge * h, np.full(65, h), edge[::-1] * h])
    sx, sy = src_t @ (bx, by)
    to_local = pyproj.Transformer.from_crs(info.crs, local, always_xy=True)
    lx, ly = to_local.transform(sx, sy)
    xmin, xmax = float(np.min(lx)), float(np.max(lx))
    ymin, ymax = float(np.min(ly)), float(np.max(ly))
    out_w = max(1, int(math.ceil((xmax - xmin) / res)))
    out_h = max(1, int(math.ceil((ymax - ymin) / res)))
    dst_t = Affine(res, 0.0, xmin, 0.0, -res, ymax)
    out = np.full((out_h, out_w), np.nan, dtype=np.float64)
    reproject(
        source=z,
        destination=out,
        src_transform=src_t,
        src_crs=rasterio.crs.CRS.from_wkt(info.crs.to_wkt()),
        dst_transform=dst_t,
        dst_crs=rasterio.crs.CRS.from_wkt(local.to_wkt()),
        src_nodata=np.nan,
        dst_nodata=np.nan,
        resampling=Resampling.bilinear,
        num_threads=1,
    )
    return DemTile(z=out, spacing_m=res, transform=dst_t, crs=local, info=info, spec=spec, warped=True)


def read_dem(path, **kwargs) -> DemTile:
    """Open a (small) DEM and return it whole as one :class:`DemTile`.

    Keyword arguments are those of :func:`open_dem`.
    """
    info = open_dem(path, **kwargs)
    spec = plan_windows(info.height, info.width, max(info.height, info.width), 0)[0]
    return read_tile(info, spec)


def valid_footprint(info: DemInfo, max_size: int = 1024):
    """Polygon (source CRS) of the valid-data area, from a decimated read of the mask.

    Parameters
    ----------
    info : DemInfo
    max_size : int
        Longest side of the decimated mask; the outline is accurate to about
        ``max(width, height) / max_size`` source pixels.

    Returns
    -------
    shapely.Geometry
        (Multi)Polygon in the source CRS map units.
    """
    import shapely
    from rasterio import features

    step = max(1, math.ceil(max(info.width, info.height) / max_size))
    out_h = max(1, math.ceil(info.height / step))
    out_w = max(1, math.ceil(info.width / step))
    raw = _decimated(info, out_h, out_w)
    ok = ~_elevation(raw, info)[1]
    t = info.transform @ Affine.scale(info.width / out_w, info.height / out_h)
    polys = [shapely.geometry.shape(geom) for geom, val in
             features.shapes(ok.astype(np.uint8), mask=ok, transform=t) if val == 1]
    if not polys:
        return shapely.geometry.Polygon()
    return shapely.union_all(polys)


def _decimated(info: DemInfo, out_h: int, out_w: int, strip_bytes: int = 8 << 20):
    """Nearest-neighbour decimation of the band, read in strips of whole rows.

    The samples are GDAL's nearest-neighbour ones (source index ``floor((i + 0.5) * n / out)``),
    so the result equals ``src.read(out_shape=...)``; reading strips through a dataset opened
    per strip keeps GDAL's block cache, and so memory, to one strip (a whole-raster decimated
    read caches every decompressed block until the file is closed: +250 MiB at 8192^2).
    """
    rows = np.floor((np.arange(out_h) + 0.5) * info.height / out_h).astype(np.int64)
    cols = np.floor((np.arange(out_w) + 0.5) * info.width / out_w).astype(np.int64)
    itemsize = np.dtype(info.dtype).itemsize
    per_strip = max(1, strip_bytes // max(1, info.width * itemsize))
    parts = []
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", NotGeoreferencedWarning)
            for r0 in range(0, info.height, per_strip):
                r1 = min(info.height, r0 + per_strip)
                sel = rows[(rows >= r0) & (rows < r1)]
                if sel.size == 0:
                    continue
                with rasterio.open(info.path) as src:
                    strip = src.read(info.band, window=Window(0, r0, info.width, r1 - r0), masked=True)
                parts.append(strip[sel - r0][:, cols])
    except (RasterioIOError, OSError, ValueError) as err:
        raise _fail_open(info.path, err) from err
    return np.ma.concatenate(parts, axis=0)


def sha256_of(path, chunk: int = 1 << 20) -> str:
    """SHA-256 of a file, streamed."""
    import hashlib

    digest = hashlib.sha256()
    with open(path, "rb") as fh:
        while block := fh.read(chunk):
            digest.update(block)
    return digest.hexdigest()

