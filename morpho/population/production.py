"""The lunar production function of Neukum et al. (2001) and a goodness-of-fit test of an SFD's shape."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy import stats

__all__ = ["NEUKUM2001_COEFFICIENTS", "neukum2001_cumulative", "ProductionFit", "production_function_fit"]

NEUKUM_REFERENCE = ("Neukum, Ivanov & Hartmann 2001, Space Sci. Rev. 96:55 "
                    "(coefficients from memory, not checked against Table 1)")

#: a_0..a_11 of log10 N(>=D) = sum a_n (log10 D)^n, N per km^2, D in km. From memory.
NEUKUM2001_COEFFICIENTS = np.array([
    -3.0876, -3.557528, 0.781027, 1.021521, -0.156012, -0.444058,
    0.019977, 0.086850, -0.005874, -0.006809, 8.25e-4, 5.54e-5,
])
#: diameter range (km) over which the polynomial is defined
NEUKUM2001_RANGE_KM = (0.01, 300.0)


def neukum2001_cumulative(diameter_km) -> np.ndarray:
    """Cumulative crater density N(>=D) per km^2 of the 2001 lunar production function at N(1 km) = 10^a0.

    Parameters
    ----------
    diameter_km : array_like
        Diameters (km); NaN outside 0.01-300 km, where the polynomial is not defined.

    Returns
    -------
    numpy.ndarray
        N(>=D) (km^-2), same shape as the input.

    References
    ----------
    Neukum G., Ivanov B.A., Hartmann W.K. (2001) Space Sci. Rev. 96:55-86,
    doi:10.1023/A:1011989004263 (coefficients from memory).
    """
    d = np.asarray(diameter_km, dtype=float)
    with np.errstate(divide="ignore", invalid="ignore"):
        logn = np.polynomial.polynomial.polyval(np.log10(d), NEUKUM2001_COEFFICIENTS)
    inside = (d >= NEUKUM2001_RANGE_KM[0]) & (d <= NEUKUM2001_RANGE_KM[1])
    return np.where(inside, 10.0**logn, np.nan)


@dataclass(frozen=True)
class ProductionFit:
    """Shape comparison of an SFD with the production function above ``d_min_m``.

    Attributes
    ----------
    ks_statistic, p_value : float
        One-sample Kolmogorov-Smirnov distance and p-value of the diameters against the
        production-function shape truncated at d_min_m (NaN if out of range).
    n1_per_km2 : float
        Fitted normalisation: N(>=1 km) per km^2 of the production function scaled to
        the observed count above d_min_m.
    n : int
        Craters used.
    """

    ks_statistic: float
    p_value: float
    n1_per_km2: float
    n: int


def production_function_fit(diameter_m, area_m2: float, d_min_m: float) -> ProductionFit:
    """Compare the diameters above ``d_min_m`` with the Neukum et al. (2001) shape.

    The production function's normalisation is a free parameter (it encodes surface
    age), so only the shape is tested: under the PF, P(D >= x | D >= d_min) =
    N(x)/N(d_min), and the diameters are tested against that distribution with a
    one-sample Kolmogorov-Smirnov test. The normalisation is fitted by matching the
    count above d_min_m.

    Parameters
    ----------
    diameter_m : array_like
        Diameters (m).
    area_m2 : float
        Counted area (m^2).
    d_min_m : float
        Lower cut-off (m), e.g. the completeness diameter.

    Returns
    -------
    ProductionFit
        NaN statistics when d_min_m or the largest crater lies outside 10 m-300 km.

    References
    ----------
    Neukum G., Ivanov B.A., Hartmann W.K. (2001) Space Sci. Rev. 96:55-86.
    Massey F.J. (1951) J. Am. Stat. Assoc. 46:68-78 (Kolmogorov-Smirnov test).
    """
    d_km = np.asarray(diameter_m, dtype=float) / 1000.0
    dmin_km = d_min_m / 1000.0
    d_km = d_km[d_km >= dmin_km]
    n = d_km.size
    n_min = float(neukum2001_cumulative(dmin_km))
    if n < 2 or not np.isfinite(n_min) or np.isnan(neukum2001_cumulative(d_km.max())):
        return ProductionFit(np.nan, np.nan, np.nan, n)

    def cdf(x):
        return 1.0 - neukum2001_cumulative(np.maximum(x, dmin_km)) / n_min

    res = stats.kstest(d_km, cdf)
    n1 = n / (area_m2 / 1e6) * float(neukum2001_cumulative(1.0)) / n_min
    return ProductionFit(float(res.statistic), float(res.pvalue), n1, n)
