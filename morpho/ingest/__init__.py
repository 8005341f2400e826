"""Ingestion: DEM files -> metres on square metric grids; crater lists -> tables in the DEM CRS."""

from .dem import (
    DemInfo,
    DemTile,
    ground_pixel_size,
    open_dem,
    plan_tiles,
    read_dem,
    read_tile,
    sha256_of,
    valid_footprint,
)
from .tiles import TileSpec, plan_windows

__all__ = [
    "DemInfo",
    "DemTile",
    "TileSpec",
    "ground_pixel_size",
    "open_dem",
    "plan_tiles",
    "plan_windows",
    "read_dem",
    "read_tile",
    "sha256_of",
    "valid_footprint",
]
