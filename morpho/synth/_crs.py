"""Planetary coordinate reference systems for synthetic tiles."""

from __future__ import annotations

from affine import Affine
from pyproj import CRS

from ..bodies import Body

__all__ = ["tile_crs", "tile_transform"]


def tile_crs(body: Body, lat0_deg: float, lon0_deg: float) -> CRS:
    """Stereographic projection on the body's sphere centred on the tile (conformal, k = 1)."""
    return CRS.from_proj4(
        f"+proj=stere +lat_0={lat0_deg:.10g} +lon_0={lon0_deg:.10g} +k=1 +x_0=0 +y_0=0 "
        f"+R={body.radius_m:.10g} +units=m +no_defs +type=crs"
    )


def tile_transform(shape, pixel_size_m: float) -> Affine:
    """North-up affine transform of a tile centred on the projection origin."""
    h, w = shape
    return Affine(pixel_size_m, 0.0, -w * pixel_size_m / 2.0, 0.0, -pixel_size_m, h * pixel_size_m / 2.0)
