"""Pure crater-shape functions: fresh impact profiles and topographic diffusion.

Shared by the synthetic-surface generator (:mod:`morpho.synth`) and by
morphometry (degradation fits). Arrays in, arrays out; no I/O, no global state
apart from a small cache of diffusion operators.

Conventions
-----------
``r_norm`` is the radial distance divided by the rim-crest radius ``R = D / 2``.
Elevations are in metres relative to the pre-impact plain; the rim crest sits
at ``r_norm = 1`` with height ``rim_height_m`` and the floor at
``rim_height_m - depth_m`` (so ``depth_m`` is rim crest to floor, as in Pike 1977).

References
----------
Pike R.J. (1977) Size-dependence in the shape of fresh impact craters on the Moon.
    In Impact and Explosion Cratering, Pergamon, 489-509.
Pike R.J. (1980) Formation of complex impact craters: evidence from Mars and other
    planets. Icarus 43, 1-19.
McGetchin T.R., Settle M., Head J.W. (1973) Radial thickness variation in impact crater
    ejecta. Earth Planet. Sci. Lett. 20, 226-236.
Fassett C.I., Thomson B.J. (2014) Crater degradation on the lunar maria: topographic
    diffusion and the rate of erosion on the Moon. J. Geophys. Res. Planets 119,
    2255-2271, doi:10.1002/2014JE004698.
"""

from __future__ import annotations

from dataclasses import dataclass
from functools import lru_cache

import numpy as np
from scipy.linalg import eigh_tridiagonal

from .bodies import Body, get_body

__all__ = [
    "PowerLaw",
    "ImpactLaws",
    "FreshMorphometry",
    "impact_laws",
    "fresh_impact_morphometry",
    "fresh_impact_profile",
    "crater_profile",
    "limit_wall_exponent",
    "diffuse_radial_profile",
]


@dataclass(frozen=True)
class PowerLaw:
    """``y = a * D**b`` with ``D`` and ``y`` in kilometres (the published form)."""

    a: float
    b: float

    def __call__(self, diameter_km):
        return self.a * np.asarray(diameter_km, dtype=np.float64) ** self.b


@dataclass(frozen=True)
class ImpactLaws:
    """Fresh-crater morphometry laws for one body (km in, km out).

    Attributes
    ----------
    depth_simple, rim_simple, depth_complex, rim_complex : PowerLaw
        Rim-crest-to-floor depth and rim height above the plain, per branch.
    floor_complex : PowerLaw
        Floor diameter of complex craters.
    peak_height_complex : PowerLaw
        Central-peak height above the floor.
    peak_base_fraction : float
        Central-peak basal diameter / D.
    interior_exponent_simple : float
        Bowl shape: ``z = floor + d * r_norm**n`` (2 = paraboloid).
    wall_exponent_complex : float
        Wall shape between floor edge and rim, same form.
    max_wall_slope_deg : float
        The exponent is lowered where the steepest wall (at the rim) would exceed this.
    flank_exponent : float
        Rim flank ``h * r_norm**-n`` (McGetchin et al. 1973: n = 3).
    flank_outer : float
        Flank tapered to zero at this ``r_norm`` (French 1998: > 90 % of ejecta within ~5 R).
    source : str
        Where the numbers come from.
    """

    depth_simple: PowerLaw
    rim_simple: PowerLaw
    depth_complex: PowerLaw
    rim_complex: PowerLaw
    floor_complex: PowerLaw
    peak_height_complex: PowerLaw
    peak_base_fraction: float = 0.22
    interior_exponent_simple: float = 2.0
    wall_exponent_complex: float = 1.6
    max_wall_slope_deg: float = 90.0
    flank_exponent: float = 3.0
    flank_outer: float = 5.0
    source: str = ""


def impact_laws(body: str | Body, hypothesis=None) -> ImpactLaws:
    """Fresh-crater laws of ``body`` from an impact hypothesis (central values).

    Parameters
    ----------
    body : str or Body
        Body name or :class:`~morpho.bodies.Body`.
    hypothesis : morpho.hypotheses.Hypothesis, optional
        An ``origin = "impact"`` hypothesis; default: the shipped ``impact.toml``.

    Raises
    ------
    HypothesisFileError
        If the hypothesis has no ``[laws.<body>]`` table.
    """
    from .errors import HypothesisFileError
    from .hypotheses import default_hypotheses

    b = body if isinstance(body, Body) else get_body(body)
    h = default_hypotheses()["impact"] if hypothesis is None else hypothesis
    if b.name not in h.laws:
        raise HypothesisFileError(
            f"[laws.{b.name}] missing: the impact hypothesis has no laws for {b.name!r}.",
            path=h.path or None, fix=f"add a [laws.{b.name}] table (copy [laws.moon] and cite a source).")
    laws = {k: PowerLaw(*p.central) for k, p in h.laws[b.name].items()}
    return ImpactLaws(
        **laws,
        peak_base_fraction=float(h.central("profile", "central_feature_base_fraction")),
        interior_exponent_simple=float(h.central("profile", "interior_exponent")),
        wall_exponent_complex=float(h.central("profile", "wall_exponent_complex")),
        max_wall_slope_deg=float(h.central("profile", "max_wall_slope_deg")),
        flank_exponent=float(h.central("profile", "flank_exponent")),
        flank_outer=float(h.central("profile", "flank_outer")),
        source="; ".join(sorted({p.source for p in h.laws[b.name].values()})),
    )


@dataclass(frozen=True)
class FreshMorphometry:
    """Profile parameters of a fresh impact crater (metres unless noted)."""

    diameter_m: np.ndarray
    depth_m: np.ndarray
    rim_height_m: np.ndarray
    complex: np.ndarray
    floor_fraction: np.ndarray
    peak_height_m: np.ndarray
    peak_base_fraction: np.ndarray
    interior_exponent: np.ndarray
    flank_exponent: float
    flank_outer: float


def fresh_impact_morphometry(diameter_m, body: str | Body, *, laws: ImpactLaws | None = None
                             ) -> FreshMorphometry:
    """Fresh-crater depth, rim height, floor and central peak for rim diameters ``diameter_m``.

    Craters with ``D >= body.transition_diameter_m`` take the complex branch (flat floor,
    central peak, lower d/D), following Pike (1977, 1980).

    Parameters
    ----------
    diameter_m : array_like
        Rim-crest diameter in metres (> 0).
    body : str or Body
        Body name in :data:`morpho.bodies.BODIES` or a ``Body``.
    laws : ImpactLaws, optional
        Override the laws (default: :func:`impact_laws` of the shipped ``impact.toml``).

    Returns
    -------
    FreshMorphometry
        Arrays broadcast to the shape of ``diameter_m``.
    """
    b = body if isinstance(body, Body) else get_body(body)
    lw = impact_laws(b) if laws is None else laws
    D = np.asarray(diameter_m, dtype=np.float64)
    if np.any(~np.isfinite(D)) or np.any(D <= 0):
        raise ValueError(f"diameter_m must be finite and > 0; got {diameter_m!r}")
    Dkm = D / 1000.0
    is_complex = D >= b.transition_diameter_m
    depth = np.where(is_complex, lw.depth_complex(Dkm), lw.depth_simple(Dkm)) * 1000.0
    rim = np.where(is_complex, lw.rim_complex(Dkm), lw.rim_simple(Dkm)) * 1000.0
    floor = np.where(is_complex, np.clip(lw.floor_complex(Dkm) / Dkm, 0.0, 0.75), 0.0)
    peak = np.where(is_complex, np.minimum(lw.peak_height_complex(Dkm) * 1000.0, 0.8 * depth), 0.0)
    n = np.where(is_complex, lw.wall_exponent_complex, lw.interior_exponent_simple)
    n = limit_wall_exponent(n, depth / D, floor, lw.max_wall_slope_deg)
    zero = np.zeros_like(D)
    return FreshMorphometry(
        diameter_m=D,
        depth_m=depth,
        rim_height_m=rim,
        complex=is_complex,
        floor_fraction=floor,
        peak_height_m=peak,
        peak_base_fraction=np.where(is_complex, lw.peak_base_fraction, zero),
        interior_exponent=n,
        flank_exponent=lw.flank_exponent,
        flank_outer=lw.flank_outer,
    )


def limit_wall_exponent(exponent, depth_diameter, floor_fraction, max_wall_slope_deg):
    """Lower the wall exponent where the steepest wall slope would exceed ``max_wall_slope_deg``.

    For ``z = floor + d * s**n`` the slope is steepest at the rim crest:
    ``n * d / (R * (1 - f))``. The exponent is kept >= 1 (a cone).
    """
    d_over_r = 2.0 * np.asarray(depth_diameter, dtype=np.float64)
    span = 1.0 - np.asarray(floor_fraction, dtype=np.float64)
    with np.errstate(divide="ignore"):
        n_max = np.tan(np.radians(max_wall_slope_deg)) * span / d_over_r
    return np.clip(np.minimum(exponent, n_max), 1.0, None)


def crater_profile(
    r_norm,
    depth_m,
    rim_height_m,
    *,
    interior_exponent=2.0,
    floor_fraction=0.0,
    peak_height_m=0.0,
    peak_base_fraction=0.0,
    flank_exponent=3.0,
    flank_outer=5.0,
    rim_width=0.0,
):
    """Generic axisymmetric crater profile (elevation in m relative to the plain).

    Interior (``r_norm <= 1``): flat floor at ``rim - depth`` out to ``floor_fraction``,
    then a wall ``floor + depth * s**interior_exponent`` with ``s`` running 0..1 from the
    floor edge to the rim crest. A central peak (or pit, if ``peak_height_m < 0``) is a
    cosine bump of basal diameter ``peak_base_fraction * D``. Exterior: a power-law flank
    ``h * r_norm**-flank_exponent`` shifted to reach 0 at ``flank_outer`` (McGetchin et al.
    1973 use exponent 3), or, when ``rim_width > 0``, a Gaussian lip
    ``h * exp(-((r_norm - 1) / rim_width)**2)`` (raised melt rims of electrode-spot craters).

    All parameters broadcast against ``r_norm``.

    Examples
    --------
    >>> import numpy as np
    >>> z = crater_profile(np.array([0.0, 1.0, 5.0]), 200.0, 36.0)
    >>> [round(float(v), 6) for v in z]
    [-164.0, 36.0, 0.0]
    """
    r = np.abs(np.asarray(r_norm, dtype=np.float64))
    d = np.asarray(depth_m, dtype=np.float64)
    h = np.asarray(rim_height_m, dtype=np.float64)
    n = np.asarray(interior_exponent, dtype=np.float64)
    f = np.clip(np.asarray(floor_fraction, dtype=np.float64), 0.0, 0.95)
    s = np.clip((r - f) / (1.0 - f), 0.0, 1.0)
    interior = h - d + d * s**n
    pb = np.asarray(peak_base_fraction, dtype=np.float64)
    ph = np.asarray(peak_height_m, dtype=np.float64)
    with np.errstate(divide="ignore", invalid="ignore"):
        u = np.where(pb > 0, r / np.where(pb > 0, pb, 1.0), np.inf)
    peak = np.where(u < 1.0, ph * 0.5 * (1.0 + np.cos(np.pi * np.minimum(u, 1.0))), 0.0)
    interior = interior + peak
    ro = np.asarray(flank_outer, dtype=np.float64)
    fe = np.asarray(flank_exponent, dtype=np.float64)
    rw = np.asarray(rim_width, dtype=np.float64)
    rr = np.maximum(r, 1.0)
    power = h * (rr**-fe - ro**-fe) / (1.0 - ro**-fe)
    with np.errstate(divide="ignore", invalid="ignore"):
        lip = h * np.exp(-(((rr - 1.0) / np.where(rw > 0, rw, 1.0)) ** 2))
    exterior = np.where(rr < ro, np.where(rw > 0, lip, power), 0.0)
    return np.where(r <= 1.0, interior, exterior)


def fresh_impact_profile(r_norm, diameter_m, body: str | Body, *, laws: ImpactLaws | None = None):
    """Radial elevation profile (m, relative to the pre-impact plain) of a fresh impact crater.

    Simple craters (``D`` below the body's transition diameter) are paraboloid-like bowls
    with Pike-law depth and rim height (wall exponent lowered where the wall would be
    steeper than the hypothesis' ``max_wall_slope_deg``); complex craters have a flat floor, a central peak and
    the lower complex-branch d/D. The rim flank decays as ``(r/R)**-3`` (McGetchin et al.
    1973), tapered to zero at 5 R.

    Parameters
    ----------
    r_norm : array_like
        Radius / rim-crest radius (dimensionless), any shape.
    diameter_m : float or array_like
        Rim-crest diameter in metres; broadcast against ``r_norm`` (e.g. shape (n, 1)).
    body : str or Body
        Body name or :class:`~morpho.bodies.Body`.
    laws : ImpactLaws, optional
        Override the laws (default: central values of the shipped ``impact.toml``,
        see :func:`impact_laws`).

    Returns
    -------
    ndarray
        Elevation in metres, shape ``broadcast(r_norm, diameter_m)``.

    Examples
    --------
    >>> import numpy as np
    >>> z = fresh_impact_profile(np.array([0.0, 1.0]), 1000.0, "moon")
    >>> round(float((z[1] - z[0]) / 1000.0), 3)  # d/D = 0.196 D_km**0.010 (Pike 1977)
    0.196
    """
    m = fresh_impact_morphometry(diameter_m, body, laws=laws)
    return crater_profile(
        r_norm,
        m.depth_m,
        m.rim_height_m,
        interior_exponent=m.interior_exponent,
        floor_fraction=m.floor_fraction,
        peak_height_m=m.peak_height_m,
        peak_base_fraction=m.peak_base_fraction,
        flank_exponent=m.flank_exponent,
        flank_outer=m.flank_outer,
    )


# --------------------------------------------------------------------------------------
# Axisymmetric topographic diffusion
# --------------------------------------------------------------------------------------


@lru_cache(maxsize=32)
def _diffusion_modes(n: int, dr: float):
    """Eigen-decomposition of the finite-volume axisymmetric Laplacian on r_i = i*dr.

    Returns ``(lam, U, sqrt_area)`` with the semi-discrete solution
    ``h(t) = diag(1/sqrt_area) U exp(lam t) U^T diag(sqrt_area) h0`` (zero flux at r=0 by
    symmetry and at the outer edge).
    """
    r = np.arange(n) * dr
    area = r * dr
    area[0] = dr * dr / 8.0  # disc of radius dr/2 per radian
    area[-1] = (r[-1] - dr / 4.0) * dr / 2.0  # half cell at the outer edge
    face = (np.arange(n - 1) + 0.5) * dr  # r at faces between i and i+1
    cond = face / dr  # flux coefficient: r_face / dr
    diag = np.zeros(n)
    diag[:-1] -= cond
    diag[1:] -= cond
    sq = np.sqrt(area)
    main = diag / area
    off = cond / (sq[:-1] * sq[1:])
    lam, U = eigh_tridiagonal(main, off)
    lam = np.minimum(lam, 0.0)
    return lam, U, sq


def diffuse_radial_profile(r_m, h_m, kappa_t_m2):
    """Diffuse an axisymmetric profile: ``dh/dt = kappa (h'' + h'/r)`` for time ``t``.

    The semi-discrete finite-volume system on a uniform radial grid is solved exactly in
    time by its eigen-decomposition, so the result is unconditionally stable and any number
    of ``kappa * t`` values costs one matrix product (Fassett & Thomson 2014 model).
    Beyond ``r_m[-1]`` the surface is taken as flat at ``h_m[..., -1]`` (the domain is padded
    so that the outer no-flux boundary does not matter).

    Parameters
    ----------
    r_m : array_like, shape (n,)
        Radii in metres, increasing, ``r_m[0] >= 0``; resampled internally to a uniform
        grid from 0 with the smallest spacing of ``r_m`` (bounded to 4000 points).
    h_m : array_like, shape (n,) or (m, n)
        Elevation in metres.
    kappa_t_m2 : float or array_like, shape (k,)
        Diffusivity times time in m^2 (>= 0).

    Returns
    -------
    ndarray
        Shape (n,) for a scalar ``kappa_t_m2`` and 1-D ``h_m``; otherwise the leading
        dimensions of ``h_m`` and ``kappa_t_m2`` broadcast together: ``(k, n)`` for 1-D ``h_m``
        and shape-(k,) ``kappa_t_m2``, ``(m, n)`` for ``(m, n)`` and shape-(m,) (one time per
        profile) or a scalar.

    Examples
    --------
    >>> import numpy as np
    >>> r = np.linspace(0.0, 5000.0, 501)
    >>> h = np.exp(-(r / 500.0) ** 2)
    >>> out = diffuse_radial_profile(r, h, [0.0, 500.0**2 / 4])
    >>> round(float(out[0, 0]), 4), round(float(out[1, 0]), 3)  # 2-D Gaussian: A / (1 + 4kt/s^2)
    (1.0, 0.5)
    """
    r = np.asarray(r_m, dtype=np.float64)
    h = np.asarray(h_m, dtype=np.float64)
    kt = np.asarray(kappa_t_m2, dtype=np.float64)
    if r.ndim != 1 or r.size < 3:
        raise ValueError(f"r_m must be 1-D with >= 3 radii; got shape {r.shape}")
    if np.any(np.diff(r) <= 0) or r[0] < 0 or not np.all(np.isfinite(r)):
        raise ValueError("r_m must be finite, increasing and start at >= 0")
    if h.shape[-1] != r.size or h.ndim > 2:
        raise ValueError(f"h_m must have shape (n,) or (m, n) with n = {r.size}; got {h.shape}")
    if np.any(~np.isfinite(kt)) or np.any(kt < 0) or kt.ndim > 1:
        raise ValueError(f"kappa_t_m2 must be a finite scalar or 1-D array >= 0; got {kappa_t_m2!r}")
    scalar_out = h.ndim == 1 and kt.ndim == 0
    h2 = np.atleast_2d(h)
    kt1 = np.atleast_1d(kt)

    dr = float(np.min(np.diff(r)))
    r_end = r[-1] + 6.0 * np.sqrt(float(kt1.max())) + 2.0 * dr
    n_grid = int(np.ceil(r_end / dr)) + 1
    if n_grid > 4000:
        dr = r_end / 3999.0
        n_grid = 4000
    grid = np.arange(n_grid) * dr
    # Resample onto the uniform grid; constant continuation beyond the last radius.
    h0 = np.stack([np.interp(grid, r, row) for row in h2])
    lam, U, sq = _diffusion_modes(n_grid, dr)
    coef = (h0 * sq) @ U  # (m, n_grid)
    decay = np.exp(np.multiply.outer(kt1, lam))  # (k, n_grid)
    # Only the grid nodes up to the last requested radius are needed for the interpolation
    # below; the padding beyond keeps the boundary away but is never read (halves the work).
    n_out = min(n_grid, int(np.searchsorted(grid, r[-1], side="right")) + 1)
    if h2.shape[0] == 1 or kt1.size in (1, h2.shape[0]):
        # (k, n_out) for one profile; (m, n_out) broadcast row-wise for one time per profile
        out_grid = (coef * decay) @ U[:n_out].T / sq[:n_out]
    else:
        raise ValueError(
            f"h_m has {h2.shape[0]} profiles but kappa_t_m2 has {kt1.size} values; give one per "
            "profile, a scalar, or a single profile"
        )
    out = np.stack([np.interp(r, grid[:n_out], row) for row in out_grid])
    return out[0] if scalar_out else out
