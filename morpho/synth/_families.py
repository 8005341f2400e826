"""Per-crater shape parameters drawn from a hypothesis family, and tabulated radial profiles."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..bodies import Body
from ..hypotheses import Hypothesis
from ..shapes import crater_profile, diffuse_radial_profile, impact_laws, limit_wall_exponent

__all__ = ["CraterShapes", "sample_shapes", "profile_table", "crest_radius_norm", "sample_degradation",
           "R_GRID_STEP"]

#: radial step of the tabulated profiles, in rim radii
R_GRID_STEP = 0.01


@dataclass
class CraterShapes:
    """Shape parameters of n craters (arrays of length n unless noted)."""

    diameter_m: np.ndarray
    depth_m: np.ndarray
    rim_height_m: np.ndarray
    complex: np.ndarray
    floor_fraction: np.ndarray
    peak_height_m: np.ndarray
    peak_base_fraction: np.ndarray
    interior_exponent: np.ndarray
    flank_exponent: np.ndarray
    flank_outer: np.ndarray
    rim_width: np.ndarray
    asymmetry: np.ndarray  # offset of the deepest point, fraction of R
    asymmetry_dir: np.ndarray  # radians
    outline_amp: np.ndarray  # (n, n_harm) relative radius amplitudes for orders 2..n_harm+1
    outline_phase: np.ndarray
    rimvar_amp: np.ndarray  # (n, 4) relative rim-height amplitudes for orders 1..4
    rimvar_phase: np.ndarray
    degradation: np.ndarray  # kappa t / D^2


def _harmonics(rng, n, rms, max_order, slope, first_order):
    """Random-phase harmonics with amplitude ~ order^-slope scaled to a total rms of ``rms``."""
    orders = np.arange(first_order, first_order + max_order)
    shape = orders[None, :] ** -slope[:, None]
    # rms of sum a_k cos(k t + p) is sqrt(sum a_k^2 / 2)
    norm = np.sqrt(0.5 * np.sum(shape**2, axis=1))
    amp = shape * (rms / norm)[:, None] * rng.uniform(0.5, 1.5, (n, orders.size))
    return amp, rng.uniform(0.0, 2.0 * np.pi, (n, orders.size))


def sample_degradation(h: Hypothesis, n: int, degradation, rng: np.random.Generator) -> np.ndarray:
    """Normalised degradation kappa t / D^2 per crater.

    ``degradation`` is ``None``/0 (fresh), a float ``x`` (uniform on [0, x]), a pair
    ``(lo, hi)`` (uniform), or ``"hypothesis"`` (the family's ``normalised_degradation``).
    """
    if degradation is None or (np.isscalar(degradation) and not isinstance(degradation, str)
                               and float(degradation) == 0.0):
        return np.zeros(n)
    if isinstance(degradation, str):
        if degradation != "hypothesis":
            raise ValueError(f"degradation must be a number, (lo, hi) or 'hypothesis'; got {degradation!r}")
        return np.clip(h.param("degradation", "normalised_degradation").sample(rng, n), 0.0, None)
    if np.isscalar(degradation):
        return rng.uniform(0.0, float(degradation), n)
    lo, hi = (float(v) for v in degradation)
    if not 0 <= lo <= hi:
        raise ValueError(f"degradation range must satisfy 0 <= lo <= hi; got {degradation!r}")
    return rng.uniform(lo, hi, n)


def sample_shapes(h: Hypothesis, diameter_m, body: Body, rng: np.random.Generator,
                  degradation=None) -> CraterShapes:
    """Draw per-crater shape parameters of family ``h`` for rim diameters ``diameter_m``."""
    D = np.asarray(diameter_m, dtype=np.float64)
    n = D.size

    def draw(section, name, default=0.0):
        p = h.param(section, name)
        return np.full(n, float(default)) if p is None else p.sample(rng, n)

    depth_noise = np.exp(rng.normal(0.0, 1.0, n) * draw("profile", "depth_scatter"))
    rim_noise = np.exp(rng.normal(0.0, 1.0, n) * draw("profile", "rim_height_scatter"))
    feature = rng.uniform(size=n) < draw("profile", "central_feature_probability")
    base = draw("profile", "central_feature_base_fraction")
    if h.origin == "impact":
        lw = impact_laws(body, h)
        dkm = D / 1000.0
        cplx = D >= body.transition_diameter_m
        depth = np.where(cplx, lw.depth_complex(dkm), lw.depth_simple(dkm)) * 1000.0
        rim = np.where(cplx, lw.rim_complex(dkm), lw.rim_simple(dkm)) * 1000.0
        floor = np.where(cplx, np.clip(lw.floor_complex(dkm) / dkm, 0.0, 0.75), 0.0)
        peak = np.where(cplx & feature, np.minimum(lw.peak_height_complex(dkm) * 1000.0, 0.8 * depth), 0.0)
        n_exp = np.where(cplx, draw("profile", "wall_exponent_complex"), draw("profile", "interior_exponent"))
        base = np.where(cplx & feature, base, 0.0)
        feature = cplx & feature
    else:
        cplx = np.zeros(n, dtype=bool)
        depth = D * draw("profile", "depth_diameter")
        rim = D * draw("profile", "rim_height_diameter")
        floor = draw("profile", "floor_fraction")
        peak = np.where(feature, draw("profile", "central_feature_height"), 0.0)
        n_exp = draw("profile", "interior_exponent")
        base = np.where(feature, base, 0.0)
    depth = depth * depth_noise
    rim = rim * rim_noise
    if h.origin != "impact":
        peak = peak * depth  # relative to depth in the spot files
    n_exp = limit_wall_exponent(n_exp, depth / D, floor, draw("profile", "max_wall_slope_deg"))

    max_order = int(h.central("outline", "harmonic_max_order"))
    o_amp, o_ph = _harmonics(rng, n, draw("outline", "harmonic_amplitude"), max(max_order - 1, 1),
                             draw("outline", "harmonic_spectral_slope"), first_order=2)
    r_amp, r_ph = _harmonics(rng, n, draw("outline", "rim_height_variation"), 4,
                             np.ones(n), first_order=1)
    return CraterShapes(
        diameter_m=D, depth_m=depth, rim_height_m=rim, complex=cplx, floor_fraction=floor,
        peak_height_m=peak, peak_base_fraction=base, interior_exponent=n_exp,
        flank_exponent=draw("profile", "flank_exponent", 3.0),
        flank_outer=draw("profile", "flank_outer", 5.0),
        rim_width=draw("profile", "rim_width"),
        asymmetry=draw("profile", "bowl_asymmetry"),
        asymmetry_dir=rng.uniform(0.0, 2.0 * np.pi, n),
        outline_amp=o_amp, outline_phase=o_ph, rimvar_amp=r_amp, rimvar_phase=r_ph,
        degradation=sample_degradation(h, n, degradation, rng),
    )


def profile_table(s: CraterShapes, idx=None) -> tuple[np.ndarray, np.ndarray]:
    """Tabulate the (degraded) radial profiles of craters ``idx`` on a shared ``r_norm`` grid.

    Returns ``(r_grid, table)`` with ``table[i]`` in metres; diffusion by
    :func:`morpho.shapes.diffuse_radial_profile` with ``kappa t`` expressed in rim radii
    (``kappa t / R^2 = 4 * degradation``).
    """
    sel = np.arange(s.diameter_m.size) if idx is None else np.asarray(idx)
    kt_norm = 4.0 * s.degradation[sel]
    r_max = float(np.max(s.flank_outer[sel], initial=1.5)) + 5.0 * np.sqrt(kt_norm.max(initial=0.0)) + 0.1
    grid = np.arange(0.0, r_max + R_GRID_STEP, R_GRID_STEP)
    col = (slice(None), None)
    table = crater_profile(
        grid[None, :], s.depth_m[sel][col], s.rim_height_m[sel][col],
        interior_exponent=s.interior_exponent[sel][col], floor_fraction=s.floor_fraction[sel][col],
        peak_height_m=s.peak_height_m[sel][col], peak_base_fraction=s.peak_base_fraction[sel][col],
        flank_exponent=s.flank_exponent[sel][col], flank_outer=s.flank_outer[sel][col],
        rim_width=s.rim_width[sel][col],
    )
    aged = kt_norm > 0
    if np.any(aged):
        table[aged] = diffuse_radial_profile(grid, table[aged], kt_norm[aged])
    return grid, table


def crest_radius_norm(grid, table) -> np.ndarray:
    """Radius (in fresh rim radii) of each tabulated profile's rim crest.

    Diffusion moves the crest outward (about 1.3 R at kappa t / D^2 = 0.01 for the Pike
    lunar profile), so the measured rim-crest diameter of a degraded crater exceeds its
    fresh diameter.
    """
    within = np.flatnonzero((grid >= 0.5) & (grid <= 3.0))
    return grid[within[np.argmax(table[:, within], axis=1)]]
