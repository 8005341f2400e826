"""Small single-crater DEM patches of one family, for training and testing the scorer."""

from __future__ import annotations

import numpy as np
import pandas as pd

from ..bodies import Body, get_body
from ..errors import InputError
from ..hypotheses import Hypothesis, default_hypotheses
from ._families import crest_radius_norm, profile_table, sample_shapes
from ._stamp import measure_stamped, stamp_craters
from ._terrain import add_noise, apply_psf, fractal_terrain

__all__ = ["render_crater_patches"]


def render_crater_patches(
    family: str,
    n: int,
    pixels_per_diameter: tuple[float, float] = (10.0, 80.0),
    noise_m: float | None = None,
    body: str | Body = "moon",
    seed: int = 0,
    *,
    hypotheses: dict[str, Hypothesis] | None = None,
    degradation=(0.0, 0.1),
    diameter_range_m: tuple[float, float] | None = None,
    context: float = 3.0,
    psf_sigma_px: float = 0.5,
    roughness_rel: float = 0.03,
) -> tuple[list[np.ndarray], pd.DataFrame]:
    """Render ``n`` small DEM patches, each holding one crater of ``family`` at a known centre.

    Every family gets the same diameter and degradation distributions, so neither size nor
    degradation state tells the families apart; only the shape (from the hypothesis file) does.

    Parameters
    ----------
    family : str
        ``"impact"`` or a spot family (``"cathode_spot"``, ``"anode_spot"``, ``"spark_edm"``, or
        a user's own hypothesis name).
    n : int
        Number of patches.
    pixels_per_diameter : (float, float)
        Range of the rim-crest diameter as stamped, in pixels (log-uniform; degraded craters'
        crests sit outside their fresh rim).
    noise_m : float, optional
        White-noise sd in metres; default 1 % of each crater's nominal depth.
    body : str or Body
    seed : int
    hypotheses : dict, optional
        ``{name: Hypothesis}``; default the shipped files.
    degradation : float, (float, float), "hypothesis" or None
        Normalised degradation ``kappa t / D^2`` (default uniform on 0-0.1: fresh to strongly
        degraded, cf. Fassett & Thomson 2014 d/d0 ~ 0.07 at 0.183).
    diameter_range_m : (float, float), optional
        Rim diameters (log-uniform). Default: D_t / 5 to 5 D_t of the body, so impact craters
        span simple to complex.
    context : float
        Patch side in crater diameters.
    psf_sigma_px : float
        Gaussian PSF sigma in pixels.
    roughness_rel : float
        Background roughness rms as a fraction of the nominal depth.

    Returns
    -------
    patches : list of ndarray (float32)
        Square patches (side ``ceil(context * D_px)``, at least 24 px).
    truth : pandas.DataFrame
        One row per patch: ``patch, row, col, radius_px, diameter_m, depth_m, rim_height_m,
        pixel_size_m, origin, spot_family, degradation, complex, central_feature,
        diameter_nominal_m, depth_nominal_m, rim_height_nominal_m`` (measured on the
        noise-free patch, as in :func:`generate_surface`).

    Examples
    --------
    >>> patches, truth = render_crater_patches("cathode_spot", 2, seed=3)
    >>> len(patches), list(truth["origin"])
    (2, ['cathode_spot', 'cathode_spot'])
    """
    hyps = default_hypotheses() if hypotheses is None else hypotheses
    if family not in hyps:
        raise InputError(f"unknown crater family {family!r}; known: {', '.join(sorted(hyps))}.",
                         fix="use one of the known families or add a hypothesis file for it")
    n = int(n)
    if n < 0:
        raise InputError(f"n must be >= 0; got {n}.")
    lo, hi = (float(v) for v in pixels_per_diameter)
    if not 4.0 <= lo <= hi:
        raise InputError(f"pixels_per_diameter must satisfy 4 <= min <= max; got {pixels_per_diameter!r}.")
    b = body if isinstance(body, Body) else get_body(body)
    h = hyps[family]
    rng = np.random.default_rng(seed)
    dmin, dmax = diameter_range_m if diameter_range_m is not None else (
        b.transition_diameter_m / 5.0, b.transition_diameter_m * 5.0)
    D = np.exp(rng.uniform(np.log(dmin), np.log(dmax), n))
    ppd = np.exp(rng.uniform(np.log(lo), np.log(hi), n))
    shapes = sample_shapes(h, D, b, rng, degradation)
    grid, table = profile_table(shapes)
    crest = crest_radius_norm(grid, table)

    patches, rows_out = [], []
    for i in range(n):
        px = D[i] * crest[i] / ppd[i]  # ppd counts pixels across the rim crest as stamped
        side = max(int(np.ceil(context * ppd[i])), 24)
        c = (side - 1) / 2.0 + rng.uniform(-0.5, 0.5, 2)
        z = fractal_terrain((side, side), px, rms_m=roughness_rel * shapes.depth_m[i], rng=rng)
        ref, _ = stamp_craters(z, np.array([c[0]]), np.array([c[1]]), px, _one(shapes, i), grid,
                               table[i:i + 1], np.array([0]))
        clean = apply_psf(z, psf_sigma_px)
        m = measure_stamped(clean, np.array([c[0]]), np.array([c[1]]), np.array([0.5 * ppd[i]]))
        noise = 0.01 * shapes.depth_m[i] if noise_m is None else float(noise_m)
        patches.append(add_noise(clean, noise, rng).astype(np.float32))
        rows_out.append(dict(
            patch=i, row=c[0], col=c[1], radius_px=float(m["rim_radius_px"][0]),
            diameter_m=float(2.0 * m["rim_radius_px"][0] * px),
            depth_m=float(m["rim_elev"][0] - m["floor_elev"][0]),
            rim_height_m=float(m["rim_elev"][0] - ref[0]), pixel_size_m=px,
            origin="impact" if h.origin == "impact" else family,
            spot_family="" if h.origin == "impact" else family,
            degradation=float(shapes.degradation[i]), complex=bool(shapes.complex[i]),
            central_feature=bool(shapes.peak_height_m[i] != 0),
            diameter_nominal_m=float(D[i]), depth_nominal_m=float(shapes.depth_m[i]),
            rim_height_nominal_m=float(shapes.rim_height_m[i]), noise_m=noise,
        ))
    return patches, pd.DataFrame(rows_out)


def _one(shapes, i):
    """The i-th crater of a CraterShapes as a CraterShapes of length 1."""
    from ._families import CraterShapes

    return CraterShapes(**{f: getattr(shapes, f)[i:i + 1] for f in CraterShapes.__dataclass_fields__})
