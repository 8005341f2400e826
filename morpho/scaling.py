"""Published depth and rim-height laws of fresh impact craters, per body, with validity ranges.

Each law is ``y = a * D**b`` with ``D`` and ``y`` in kilometres, the form the papers use.
Every law carries its citation, the diameter range it was fitted on and how sure we are of
the coefficients: ``"verified"`` (seen in the paper or its abstract) or ``"from memory"``
(not checked against the primary source; treat as approximate). The simple/complex branch
is chosen by the body's transition diameter (:mod:`morpho.bodies`). Published branches do
not meet at the transition (Pike 1977 cross near 10.6 km; Garvin & Frawley 1998 near
4.1 km), so each branch is only trusted inside its own range.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd

from .bodies import Body, get_body
from .errors import InputError

__all__ = ["ScalingLaw", "LawSet", "LAW_SETS", "DEFAULT_LAW_SET", "law_set", "expected_fresh",
           "add_scaling_columns", "central_peak_onset_m"]


@dataclass(frozen=True)
class ScalingLaw:
    """``y_km = a * D_km**b``, valid for ``d_min_km <= D < d_max_km``."""

    a: float
    b: float
    d_min_km: float
    d_max_km: float
    citation: str
    status: str  # "verified" or "from memory"

    def __call__(self, diameter_km):
        return self.a * np.asarray(diameter_km, dtype=np.float64) ** self.b

    def in_range(self, diameter_km):
        d = np.asarray(diameter_km, dtype=np.float64)
        return (d >= self.d_min_km) & (d < self.d_max_km)


@dataclass(frozen=True)
class LawSet:
    """Depth and rim-height laws of one body from one source (``None`` = no published law)."""

    key: str
    body: str
    depth_simple: ScalingLaw | None
    depth_complex: ScalingLaw | None
    rim_simple: ScalingLaw | None = None
    rim_complex: ScalingLaw | None = None
    note: str = ""


_PIKE77 = "Pike 1977, Impact and Explosion Cratering (Pergamon) 489-509"
_GF98 = "Garvin & Frawley 1998, GRL 25, doi:10.1029/1998GL900177"
_G03 = "Garvin, Sakimoto & Frawley 2003, 6th Int. Conf. Mars (NTRS 20030066704)"
_PIKE88 = "Pike 1988, in Mercury (Univ. Arizona Press) 165-273"
_GP96 = "Grieve & Pilkington 1996, AGSO J. Aust. Geol. Geophys. 16:399-420"
_MEM = "from memory"

LAW_SETS: dict[str, LawSet] = {
    s.key: s
    for s in (
        LawSet(
            "pike1977", "moon",
            depth_simple=ScalingLaw(0.196, 1.010, 0.0, 15.0, _PIKE77, _MEM),
            depth_complex=ScalingLaw(1.044, 0.301, 15.0, 275.0, _PIKE77, _MEM),
            rim_simple=ScalingLaw(0.036, 1.014, 0.0, 15.0, _PIKE77, _MEM),
            rim_complex=ScalingLaw(0.236, 0.399, 15.0, 275.0, _PIKE77, _MEM),
            note="Fresh lunar craters (Apollo photogrammetry); branches cross near 10.6 km.",
        ),
        LawSet(
            "garvin_frawley1998", "mars",
            depth_simple=ScalingLaw(0.14, 0.90, 0.0, 8.0, _GF98, "verified"),
            depth_complex=ScalingLaw(0.25, 0.49, 8.0, np.inf, _GF98, "verified"),
            note="98 minimally degraded craters, MOLA tracks, 80N-12S; transition 8 +/- 0.5 km. "
            "No rim-height law in this source.",
        ),
        LawSet(
            "garvin2003", "mars",
            depth_simple=ScalingLaw(0.21, 0.81, 0.0, 8.0, _G03, "from memory (UNCERTAIN)"),
            depth_complex=ScalingLaw(0.36, 0.49, 8.0, np.inf, _G03, "from memory (UNCERTAIN)"),
            note="~6000 craters on gridded MOLA; coefficients often quoted, not seen.",
        ),
        LawSet(
            "pike1988", "mercury",
            depth_simple=ScalingLaw(0.199, 0.995, 0.0, 10.3, _PIKE88, "from memory (UNCERTAIN)"),
            depth_complex=ScalingLaw(0.353, 0.496, 10.3, np.inf, _PIKE88, "from memory (UNCERTAIN)"),
            note="Mariner-10 shadow measurements; MESSENGER confirmed fresh-crater d/D "
            "(Barnouin et al. 2012 Icarus 219).",
        ),
        LawSet(
            "grieve_pilkington1996", "earth",
            depth_simple=ScalingLaw(0.13, 1.06, 0.0, 3.2, _GP96, "from memory (UNCERTAIN)"),
            depth_complex=ScalingLaw(0.15, 0.43, 3.2, np.inf, _GP96, "from memory (UNCERTAIN)"),
            note="Apparent depth (to the top of the breccia lens), eroded terrestrial structures.",
        ),
    )
}
#: The law set used for each body when none is named.
DEFAULT_LAW_SET = {"moon": "pike1977", "mars": "garvin_frawley1998", "mercury": "pike1988",
                   "earth": "grieve_pilkington1996"}


def _body(body) -> Body:
    return body if isinstance(body, Body) else get_body(body)


def law_set(body, key: str | None = None) -> LawSet | None:
    """The law set ``key`` (or the body's default); ``None`` if the body has no published law."""
    b = _body(body)
    if key is None:
        key = DEFAULT_LAW_SET.get(b.name)
        if key is None:
            return None
    if key not in LAW_SETS:
        raise InputError(f"unknown scaling-law set {key!r}; known: {', '.join(sorted(LAW_SETS))}.",
                         fix="pass one of the known keys or leave it unset.")
    return LAW_SETS[key]


def central_peak_onset_m(body) -> float:
    """Diameter (m) above which fresh craters are expected to have a central peak.

    Taken as the body's simple-to-complex transition diameter: central peaks appear with
    flat floors at the transition (Pike 1980, Icarus 43; Pike 1977 for the Moon).
    """
    return float(_body(body).transition_diameter_m)


def _branch(law_s, law_c, dkm, complex_):
    value = np.full(dkm.shape, np.nan)
    inside = np.zeros(dkm.shape, dtype=bool)
    for law, sel in ((law_s, ~complex_), (law_c, complex_)):
        if law is not None:
            value = np.where(sel, law(dkm), value)
            inside = np.where(sel, law.in_range(dkm), inside)
    return value * 1000.0, inside


def expected_fresh(diameter_m, body, *, source: str | None = None) -> pd.DataFrame:
    """Expected fresh-crater depth and rim height for rim-crest diameters ``diameter_m``.

    Parameters
    ----------
    diameter_m : array_like, shape (n,)
        Rim-crest diameters in metres.
    body : str or Body
        Body name (``"moon"``, ``"mars"``, ``"mercury"``, ``"earth"``; others have no law).
    source : str, optional
        Law-set key in :data:`LAW_SETS` (default: :data:`DEFAULT_LAW_SET` of the body).

    Returns
    -------
    pandas.DataFrame
        ``depth_m``, ``rim_height_m`` (NaN where the source has no law), ``regime``
        ("simple"/"complex" by the body's transition diameter), ``in_validity_range``
        (the diameter lies in the fitted range of the branch used), ``law`` (set key),
        ``status`` (certainty of the coefficients).

    References
    ----------
    Pike R.J. (1977); Garvin J.B., Frawley J.J. (1998) GRL 25; Pike R.J. (1988);
    Grieve R.A.F., Pilkington M. (1996) AGSO J. Aust. Geol. Geophys. 16:399-420.

    Examples
    --------
    >>> t = expected_fresh([10_000.0], "moon")
    >>> round(float(t.depth_m[0])), t.regime[0]  # Pike 1977: 0.196 * 10**1.010 km
    (2006, 'simple')
    """
    b = _body(body)
    d = np.atleast_1d(np.asarray(diameter_m, dtype=np.float64))
    dkm = d / 1000.0
    complex_ = d >= b.transition_diameter_m
    laws = law_set(b, source)
    if laws is None:
        nan = np.full(d.shape, np.nan)
        depth, rim, inside = nan, nan, np.zeros(d.shape, dtype=bool)
        key, status = "none", "no published law"
    else:
        depth, inside = _branch(laws.depth_simple, laws.depth_complex, dkm, complex_)
        rim, _ = _branch(laws.rim_simple, laws.rim_complex, dkm, complex_)
        key = laws.key
        status = laws.depth_simple.status if laws.depth_simple else ""
    inside = inside & np.isfinite(d) & (d > 0)
    return pd.DataFrame({
        "depth_m": depth,
        "rim_height_m": rim,
        "regime": np.where(complex_, "complex", "simple").astype(object),
        "in_validity_range": inside,
        "law": np.full(d.shape, key, dtype=object),
        "status": np.full(d.shape, status, dtype=object),
    })


def add_scaling_columns(df: pd.DataFrame, body, *, source: str | None = None) -> pd.DataFrame:
    """Copy of ``df`` with expected fresh values and log10 residuals per crater.

    Needs ``diameter_m``; uses ``depth_m`` and ``rim_height_m`` when present. Adds
    ``expected_depth_m``, ``depth_residual_log10`` (log10 of measured / expected),
    ``expected_rim_height_m``, ``rim_height_residual_log10``, ``scaling_regime``,
    ``scaling_out_of_range``, ``scaling_law`` and ``expects_central_peak``.
    Residuals are NaN where a value is missing or not positive.

    Examples
    --------
    >>> import pandas as pd
    >>> t = add_scaling_columns(pd.DataFrame({"diameter_m": [10_000.0], "depth_m": [1003.0]}), "moon")
    >>> round(float(t.depth_residual_log10[0]), 2), t.scaling_law[0]  # half the Pike 1977 depth
    (-0.3, 'pike1977')
    """
    if "diameter_m" not in df:
        raise InputError("add_scaling_columns needs a 'diameter_m' column.",
                         fix="measure the craters first (morpho.morphometry.measure_craters).")
    out = df.copy()
    exp = expected_fresh(out["diameter_m"].to_numpy(float), body, source=source)
    out["expected_depth_m"] = exp["depth_m"].to_numpy()
    out["expected_rim_height_m"] = exp["rim_height_m"].to_numpy()
    for name, col in (("depth_residual_log10", "depth_m"), ("rim_height_residual_log10", "rim_height_m")):
        meas = out[col].to_numpy(float) if col in out else np.full(len(out), np.nan)
        expected = out[f"expected_{col}"].to_numpy(float)
        with np.errstate(invalid="ignore", divide="ignore"):
            ok = (meas > 0) & (expected > 0)
            out[name] = np.where(ok, np.log10(np.where(ok, meas / expected, 1.0)), np.nan)
    out["scaling_regime"] = exp["regime"].to_numpy()
    out["scaling_out_of_range"] = ~exp["in_validity_range"].to_numpy()
    out["scaling_law"] = exp["law"].to_numpy()
    out["expects_central_peak"] = out["diameter_m"].to_numpy(float) >= central_peak_onset_m(body)
    return out
