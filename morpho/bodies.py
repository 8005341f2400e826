"""Planetary bodies: radius, surface gravity and simple-to-complex transition diameter.

Each value carries its published source. The transition diameter is the
morphological onset of complex craters (flat floors, central peaks).
"""

from __future__ import annotations

from dataclasses import dataclass

from .errors import CrsError

__all__ = ["Body", "BODIES", "get_body", "body_from_radius"]


@dataclass(frozen=True)
class Body:
    """A planetary body.

    Attributes
    ----------
    name : str
        Lower-case key (``"moon"``).
    radius_m : float
        Mean (reference-sphere) radius in metres.
    gravity_ms2 : float
        Surface gravity in m s^-2.
    transition_diameter_m : float
        Simple-to-complex transition rim diameter in metres.
    source : str
        Where each value comes from.
    """

    name: str
    radius_m: float
    gravity_ms2: float
    transition_diameter_m: float
    source: str

    @property
    def semi_major_m(self) -> float:
        return self.radius_m


BODIES: dict[str, Body] = {
    b.name: b
    for b in (
        Body(
            "moon", 1_737_400.0, 1.62, 15_000.0,
            "R: LOLA reference sphere 1737.4 km (LRO LOLA GDR label); g: JPL Horizons 1.62; "
            "D_t ~15 km: Pike 1974 GRL 1:291, Pike 1977 (bend at 10-15 km).",
        ),
        Body(
            "mars", 3_396_190.0, 3.71, 8_000.0,
            "R: Mars 2000 (IAU) equatorial 3396.19 km; g 3.71 (secondary); "
            "D_t 8 +/- 0.5 km: Garvin & Frawley 1998 GRL 25.",
        ),
        Body(
            "mercury", 2_439_400.0, 3.7, 10_300.0,
            "R: IAU 2439.4 km; g 3.7 (MESSENGER); D_t ~10.3 km: Pike 1988 in Mercury (UAz Press), "
            "from memory, uncertain.",
        ),
        Body(
            "earth", 6_378_137.0, 9.80665, 3_200.0,
            "R: WGS84 semi-major axis; g: standard gravity; D_t 2 km (sedimentary) to 4 km "
            "(crystalline), Dence 1972; 3.2 km as used by Collins et al. 2005 MAPS 40:817.",
        ),
        Body(
            "ganymede", 2_631_200.0, 1.43, 2_500.0,
            "R: IAU 2631.2 km; g 1.43; D_t ~2-3 km: Schenk 2002 Nature 417 context, from memory, uncertain.",
        ),
        Body(
            "callisto", 2_410_300.0, 1.24, 2_500.0,
            "R: IAU 2410.3 km; g 1.24; D_t ~2-3 km: from memory, uncertain.",
        ),
    )
}


def get_body(name: str) -> Body:
    """Return the body called ``name`` (case-insensitive).

    Raises
    ------
    CrsError
        If the body is not in :data:`BODIES`.
    """
    key = str(name).strip().lower()
    if key not in BODIES:
        raise CrsError(
            f"unknown body {name!r}; known bodies are {', '.join(sorted(BODIES))}.",
            fix="pass one of the known names with --body.",
        )
    return BODIES[key]


def body_from_radius(radius_m: float, rel_tol: float = 0.002) -> Body | None:
    """Identify a body from an ellipsoid semi-major axis in metres, or ``None``."""
    best = None
    for body in BODIES.values():
        if abs(radius_m - body.radius_m) <= rel_tol * body.radius_m:
            if best is None or abs(radius_m - body.radius_m) < abs(radius_m - best.radius_m):
                best = body
    return best
