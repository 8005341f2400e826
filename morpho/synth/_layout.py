"""Crater sizes (size-frequency distributions) and spatial layouts in pixel coordinates."""

from __future__ import annotations

import numpy as np
from scipy import stats

from ..hypotheses import Hypothesis

__all__ = ["sample_diameters", "place_craters", "LAYOUTS"]

LAYOUTS = ("random", "clustered", "chains", "rim_on_rim", "hypothesis")


def _neukum_cumulative(d_km, coeffs) -> np.ndarray:
    """Neukum et al. (2001) cumulative density N(>=D), per km^2 (polynomial in log10 D)."""
    return 10.0 ** np.polynomial.polynomial.polyval(np.log10(d_km), coeffs)


def sample_diameters(h: Hypothesis, n: int, d_range_m: tuple[float, float], rng: np.random.Generator,
                     *, sfd_slope: float | None = None, median_m: float | None = None) -> np.ndarray:
    """Draw ``n`` rim diameters (m) within ``d_range_m`` from the family's size-frequency model.

    Parameters
    ----------
    h : Hypothesis
    n : int
    d_range_m : (float, float)
        Smallest and largest diameter (m).
    rng : numpy.random.Generator
    sfd_slope : float, optional
        Cumulative power-law exponent ``b`` (N(>=D) ~ D^-b); overrides the family's model.
    median_m : float, optional
        Median of lognormal families (default: geometric mean of ``d_range_m``). The
        laboratory data do not predict a planetary size; this is an assumption.
    """
    dmin, dmax = (float(v) for v in d_range_m)
    if not 0 < dmin < dmax:
        raise ValueError(f"diameter range must satisfy 0 < min < max; got {d_range_m!r}")
    model = h.central("sfd", "model")
    u = rng.uniform(size=n)
    if sfd_slope is not None or model == "power_law":
        b = float(sfd_slope) if sfd_slope is not None else float(h.param("sfd", "cumulative_slope").sample(rng, 1)[0])
        if b <= 0:
            raise ValueError(f"sfd_slope must be > 0; got {b}")
        # inverse CDF of a power law truncated to [dmin, dmax]
        return dmin * (1.0 - u * (1.0 - (dmin / dmax) ** b)) ** (-1.0 / b)
    if model == "neukum2001":
        coeffs = h.central("sfd", "neukum_coefficients")
        lo, hi = max(dmin / 1000.0, 0.01), min(dmax / 1000.0, 300.0)
        if lo >= hi:
            raise ValueError(f"diameter range {d_range_m} m lies outside the Neukum 2001 range 10 m-300 km")
        grid = np.geomspace(lo, hi, 2048)
        cum = _neukum_cumulative(grid, coeffs)
        cdf = (cum[0] - cum) / (cum[0] - cum[-1])
        return 1000.0 * np.exp(np.interp(u, cdf, np.log(grid)))
    sigma = float(h.param("sfd", "lognormal_sigma").sample(rng, 1)[0])
    med = float(median_m) if median_m is not None else float(np.sqrt(dmin * dmax))
    a, b = (np.log(dmin) - np.log(med)) / sigma, (np.log(dmax) - np.log(med)) / sigma
    z = stats.truncnorm.ppf(u, a, b)
    return med * np.exp(sigma * z)


def _weights(h: Hypothesis, layout: str, rng) -> np.ndarray:
    keys = ("random_weight", "clustered_weight", "chain_weight", "rim_on_rim_weight")
    if layout == "hypothesis":
        w = np.array([h.param("arrangement", k).sample(rng, 1)[0] for k in keys])
        return w / w.sum() if w.sum() > 0 else np.array([1.0, 0, 0, 0])
    return np.eye(4)[("random", "clustered", "chains", "rim_on_rim").index(layout)]


def place_craters(h: Hypothesis, diameters_px: np.ndarray, shape, layout: str, rng: np.random.Generator,
                  region=None, draw_sizes=None):
    """Place craters of one family; returns ``(rows, cols, diameters_px, group, host)``.

    ``group`` labels each crater (``"random"``, ``"cluster:<k>"``, ``"chain:<k>"``,
    ``"rim_on_rim"``); ``host`` is the index (within this family) of the older crater a
    rim-on-rim crater sits on, else -1. Chains take similar sizes (the first crater's size
    with 15 % lognormal jitter). ``region`` = (row, col, radius) in px confines centres to a
    disc; ``draw_sizes(k)`` draws k more diameters (px) for cluster/chain members.
    """
    if layout not in LAYOUTS:
        raise ValueError(f"layout must be one of {LAYOUTS}; got {layout!r}")
    n = diameters_px.size
    H, W = shape

    def uniform(k):
        if region is None:
            return rng.uniform(-0.5, H - 0.5, k), rng.uniform(-0.5, W - 0.5, k)
        r0, c0, rad = region
        rr = rad * np.sqrt(rng.uniform(size=k))
        th = rng.uniform(0, 2 * np.pi, k)
        return r0 + rr * np.sin(th), c0 + rr * np.cos(th)

    def inside(r, c):
        ok = (r >= -0.5) & (r < H - 0.5) & (c >= -0.5) & (c < W - 0.5)
        if region is not None:
            ok &= np.hypot(r - region[0], c - region[1]) <= region[2]
        return ok

    counts = rng.multinomial(n, _weights(h, layout, rng))
    rows, cols, diam, group, host = [], [], [], [], []
    sizes = list(diameters_px)
    take = iter(sizes)

    def next_size():
        try:
            return next(take)
        except StopIteration:
            return float(draw_sizes(1)[0]) if draw_sizes is not None else float(np.median(diameters_px))

    # random
    k = counts[0]
    r, c = uniform(k)
    for i in range(k):
        rows.append(r[i]), cols.append(c[i]), diam.append(next_size()), group.append("random"), host.append(-1)
    # clusters (Thomas process: Poisson children, Gaussian offsets around uniform parents)
    left, g = counts[1], 0
    while left > 0:
        m = min(left, max(1, rng.poisson(h.param("arrangement", "cluster_mean_size").sample(rng, 1)[0])))
        pr, pc = uniform(1)
        ds = [next_size() for _ in range(m)]
        sd = h.param("arrangement", "cluster_radius_diameters").sample(rng, 1)[0] * float(np.mean(ds))
        placed = 0
        for _ in range(50):
            cr, cc = pr[0] + rng.normal(0, sd, m - placed), pc[0] + rng.normal(0, sd, m - placed)
            ok = np.flatnonzero(inside(cr, cc))
            for j in ok:
                rows.append(cr[j]), cols.append(cc[j]), diam.append(ds[placed]), group.append(f"cluster:{g}")
                host.append(-1)
                placed += 1
            if placed >= m:
                break
        left -= m
        g += 1
    # chains (random walk of overlapping or spaced craters of similar size)
    left, g = counts[2], 0
    while left > 0:
        m = min(left, int(round(h.param("arrangement", "chain_length").sample(rng, 1)[0])))
        m = max(m, 1)
        d0 = next_size()
        (r0,), (c0,) = uniform(1)
        heading = rng.uniform(0, 2 * np.pi)
        d_prev = d0
        for j in range(m):
            d = d0 * float(np.exp(rng.normal(0, 0.15))) if j else d0
            if j:
                step = h.param("arrangement", "chain_spacing_diameters").sample(rng, 1)[0] * 0.5 * (d + d_prev)
                heading += np.radians(rng.normal(0.0, h.param("arrangement", "chain_turn_deg").sample(rng, 1)[0]))
                r0, c0 = r0 - step * np.sin(heading), c0 + step * np.cos(heading)
            if not inside(np.array([r0]), np.array([c0]))[0]:
                break
            rows.append(r0), cols.append(c0), diam.append(d), group.append(f"chain:{g}"), host.append(-1)
            d_prev = d
        left -= m
        g += 1
    # rim-on-rim: centred on an earlier crater's rim
    for _ in range(counts[3]):
        d = next_size()
        if rows:
            j = int(rng.integers(len(rows)))
            off = h.param("arrangement", "rim_on_rim_offset").sample(rng, 1)[0] * 0.5 * diam[j]
            th = rng.uniform(0, 2 * np.pi)
            rr, cc = rows[j] - off * np.sin(th), cols[j] + off * np.cos(th)
            if inside(np.array([rr]), np.array([cc]))[0]:
                rows.append(rr), cols.append(cc), diam.append(d), group.append("rim_on_rim"), host.append(j)
                continue
        (rr,), (cc,) = uniform(1)
        rows.append(rr), cols.append(cc), diam.append(d), group.append("random"), host.append(-1)
    return (np.asarray(rows, float), np.asarray(cols, float), np.asarray(diam, float),
            np.asarray(group, dtype=object), np.asarray(host, dtype=np.int64))
