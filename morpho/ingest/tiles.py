"""Tile windows: overlapping reads whose cores partition the raster exactly once.

Pure window arithmetic, no I/O (the pattern of ``rasterio.windows``).
"""

from __future__ import annotations

from dataclasses import dataclass

__all__ = ["TileSpec", "plan_windows"]


@dataclass(frozen=True)
class TileSpec:
    """One tile: the window read (core + overlap, clipped to the raster) and its core.

    All offsets and sizes are in source pixels. Cores of all tiles of a plan
    cover every pixel exactly once; a crater belongs to the tile whose core holds
    its centre, which makes merging across tiles deterministic.
    """

    index: int
    row_off: int
    col_off: int
    height: int
    width: int
    core_row_off: int
    core_col_off: int
    core_height: int
    core_width: int

    @property
    def key(self) -> str:
        return f"r{self.core_row_off:06d}_c{self.core_col_off:06d}"


def plan_windows(height: int, width: int, tile_size: int, overlap: int) -> list[TileSpec]:
    """Plan tiles over a ``height`` x ``width`` raster.

    Parameters
    ----------
    height, width : int
        Raster size in pixels.
    tile_size : int
        Core size in pixels (> 0).
    overlap : int
        Extra pixels read on every side of the core (>= 0); should exceed the
        largest crater diameter searched so every crater is whole in the tile
        that owns it.

    Returns
    -------
    list of TileSpec
        Row-major order.

    Examples
    --------
    >>> [(t.row_off, t.height) for t in plan_windows(10, 4, 4, 1)]
    [(0, 5), (3, 6), (7, 3)]
    """
    if tile_size <= 0 or overlap < 0 or height <= 0 or width <= 0:
        raise ValueError(
            f"tile_size must be > 0, overlap >= 0 and the raster non-empty; got tile_size={tile_size}, "
            f"overlap={overlap}, shape=({height}, {width})"
        )
    specs = []
    for r0 in range(0, height, tile_size):
        ch = min(tile_size, height - r0)
        for c0 in range(0, width, tile_size):
            cw = min(tile_size, width - c0)
            rs = max(0, r0 - overlap)
            cs = max(0, c0 - overlap)
            re = min(height, r0 + ch + overlap)
            ce = min(width, c0 + cw + overlap)
            specs.append(TileSpec(len(specs), rs, cs, re - rs, ce - cs, r0, c0, ch, cw))
    return specs
