"""Synthetic planetary surfaces with known craters.

Fractal background terrain, craters stamped from any hypothesis family (younger over
older), per-crater degradation by topographic diffusion, sensor effects, any body in
:mod:`morpho.bodies`; a truth catalogue measured on the crater as actually stamped.

Public API: :func:`generate_surface`, :class:`SyntheticSurface`, :func:`write_surface`,
:func:`render_crater_patches`.
"""

from ._generate import TRUTH_COLUMNS, SyntheticSurface, generate_surface
from ._io import write_surface
from ._patches import render_crater_patches

__all__ = ["SyntheticSurface", "generate_surface", "write_surface", "render_crater_patches", "TRUTH_COLUMNS"]
