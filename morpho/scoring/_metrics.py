"""Held-out quality figures of a scoring model: accuracy, Brier score, calibration error by band."""

from __future__ import annotations

import numpy as np

__all__ = ["RESOLUTION_BANDS", "expected_calibration_error", "binary_metrics", "metrics_by_band"]

#: Resolution bands (pixels per rim-crest diameter) the model card reports separately.
#: 10 px is the lower limit below which crater counts become unreliable (Robbins et al.
#: 2014, Icarus 234:109); 20 and 50 are common practice.
RESOLUTION_BANDS = ((10.0, 20.0), (20.0, 50.0), (50.0, np.inf))


def expected_calibration_error(y_true, p, n_bins: int = 10) -> float:
    """Expected calibration error with equal-width probability bins.

    ``sum_b (n_b / n) |mean(y_b) - mean(p_b)|``.

    References
    ----------
    Naeini M.P., Cooper G., Hauskrecht M. (2015) "Obtaining well calibrated probabilities
    using Bayesian binning", AAAI 29:2901. Guo C. et al. (2017) "On calibration of modern
    neural networks", ICML, PMLR 70:1321.
    """
    y = np.asarray(y_true, dtype=np.float64)
    p = np.asarray(p, dtype=np.float64)
    if y.size == 0:
        return float("nan")
    # Same binning as sklearn.calibration.calibration_curve(strategy="uniform").
    edges = np.linspace(0.0, 1.0, n_bins + 1)
    idx = np.searchsorted(edges[1:-1], p)
    sum_y = np.bincount(idx, weights=y, minlength=n_bins)
    sum_p = np.bincount(idx, weights=p, minlength=n_bins)
    return float(np.sum(np.abs(sum_y - sum_p)) / y.size)


def binary_metrics(is_impact, p_impact) -> dict:
    """Accuracy at 0.5, Brier score and ECE of ``p_impact`` against truth; NaN when empty."""
    y = np.asarray(is_impact, dtype=np.float64)
    p = np.asarray(p_impact, dtype=np.float64)
    n = int(y.size)
    if n == 0:
        return {"n": 0, "accuracy": float("nan"), "brier": float("nan"), "ece": float("nan")}
    return {
        "n": n,
        "accuracy": float(np.mean((p >= 0.5) == (y == 1.0))),
        # Brier 1950, Mon. Weather Rev. 78:1.
        "brier": float(np.mean((p - y) ** 2)),
        "ece": expected_calibration_error(y, p),
    }


def metrics_by_band(is_impact, p_impact, pixels_per_diameter, bands=RESOLUTION_BANDS) -> list[dict]:
    """:func:`binary_metrics` per resolution band plus the >= 20 px pool and all craters.

    Returns
    -------
    list of dict
        Each with ``band`` (label), ``n``, ``accuracy``, ``brier``, ``ece``.
    """
    y = np.asarray(is_impact, dtype=np.float64)
    p = np.asarray(p_impact, dtype=np.float64)
    ppd = np.asarray(pixels_per_diameter, dtype=np.float64)
    rows = []
    for lo, hi in bands:
        sel = (ppd >= lo) & (ppd < hi)
        label = f">{lo:g} px" if not np.isfinite(hi) else f"{lo:g}-{hi:g} px"
        rows.append({"band": label, **binary_metrics(y[sel], p[sel])})
    rows.append({"band": ">=20 px", **binary_metrics(y[ppd >= 20], p[ppd >= 20])})
    rows.append({"band": "all", **binary_metrics(y, p)})
    return rows
