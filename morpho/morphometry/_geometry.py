"""Batched least-squares geometry on crest points: circle, ellipse, azimuthal harmonics.

Every function takes per-azimuth arrays of shape (n_craters, n_az) and optional weights of
shape (n_replicates, n_az) (bootstrap counts); sums over azimuths become one matrix product
per batch, so every replicate of every crater is fitted at once. NaN points are ignored.
"""

from __future__ import annotations

import numpy as np

__all__ = ["fit_circle", "fit_ellipse", "harmonic_amplitudes", "wquantile", "wsum",
           "nanquantile_last", "interp_last", "replicate_std"]


def _solve_batched(a, b):
    """Solve ``a x = b`` for stacks of small symmetric systems; NaN where singular.

    The test for singularity is made on the Jacobi-scaled matrix ``D a D`` with
    ``D = diag(a)^-1/2`` (unit diagonal), so it does not depend on the units of the
    unknowns: normal equations mixing counts, metres and square metres (a circle fit to
    a 400 km rim in metres) are judged by their conditioning, not by their scale.
    """
    d = np.einsum("...ii->...i", a)
    pos = np.isfinite(d) & (d > 0)
    s = 1.0 / np.sqrt(np.where(pos, d, 1.0))
    a_s = a * s[..., :, None] * s[..., None, :]
    det = np.linalg.det(a_s)
    ok = pos.all(-1) & np.isfinite(det) & (np.abs(det) > 1e-12)
    eye = np.broadcast_to(np.eye(a.shape[-1]), a.shape)
    safe = np.where(ok[..., None, None], a_s, eye)
    with np.errstate(invalid="ignore", over="ignore"):
        y = np.linalg.solve(safe, (b * s)[..., None])[..., 0]
    return np.where(ok[..., None], y * s, np.nan)


def wsum(products, w=None):
    """Weighted sums over the azimuth axis.

    Parameters
    ----------
    products : ndarray, shape (n, m, f)
        Per-azimuth quantities (0 where invalid).
    w : ndarray, shape (b, m), optional
        Weights per replicate (bootstrap counts); ``None`` = plain sum.

    Returns
    -------
    ndarray, shape (n, f) or (n, b, f)
        One matrix product per batch: every bootstrap replicate costs one BLAS call.
    """
    if w is None:
        return products.sum(1)
    return np.matmul(products.transpose(0, 2, 1), w.T).transpose(0, 2, 1)


def _valid_xy(x, y):
    ok = np.isfinite(x) & np.isfinite(y)
    return ok, np.where(ok, x, 0.0), np.where(ok, y, 0.0)


def _n_used(ok, w):
    """Number of distinct valid azimuths carrying weight, shape (n,) or (n, b)."""
    return wsum(ok[..., None].astype(float), None if w is None else (w > 0).astype(float))[..., 0]


def _centred(ok, x, y):
    """Coordinates about the valid-point centroid (conditioning only; fits are covariant)."""
    cnt = ok.sum(-1)
    with np.errstate(invalid="ignore", divide="ignore"):
        mx = x.sum(-1) / cnt
        my = y.sum(-1) / cnt
    mx, my = np.where(cnt > 0, mx, 0.0), np.where(cnt > 0, my, 0.0)
    return mx, my, np.where(ok, x - mx[:, None], 0.0), np.where(ok, y - my[:, None], 0.0)


def _expand(a, like):
    """Broadcast per-crater values (n,) against results of shape (n,) or (n, b)."""
    return a if like.ndim == 1 else a[:, None]


def fit_circle(x, y, w=None):
    """Kasa (1976) algebraic circle fit of crest points, batched over craters (and replicates).

    Parameters
    ----------
    x, y : ndarray, shape (n, m)
        Point coordinates; NaN points are ignored.
    w : ndarray, shape (b, m), optional
        Non-negative weights per replicate (bootstrap counts of each azimuth).

    Returns
    -------
    xc, yc, radius : ndarray, shape (n,) or (n, b)
        NaN where fewer than 3 usable points.

    References
    ----------
    Kasa I. (1976) A circle fitting procedure and its error analysis. IEEE Trans. Instrum.
    Meas. 25(1):8-14, doi:10.1109/TIM.1976.6312298.
    """
    ok, x, y = _valid_xy(x, y)
    mx, my, u, v = _centred(ok, x, y)
    rho = u * u + v * v
    one = ok.astype(float)
    S = wsum(np.stack([one, u, v, u * u, u * v, v * v, rho, u * rho, v * rho], -1), w)
    s1, su, sv, suu, suv, svv, sr, sur, svr = np.moveaxis(S, -1, 0)
    ata = np.stack([np.stack([suu, suv, su], -1), np.stack([suv, svv, sv], -1),
                    np.stack([su, sv, s1], -1)], -2)
    sol = _solve_batched(ata, np.stack([sur, svr, sr], -1))
    a, b, c = sol[..., 0] / 2.0, sol[..., 1] / 2.0, sol[..., 2]
    with np.errstate(invalid="ignore"):
        radius = np.sqrt(c + a * a + b * b)
    enough = _n_used(ok, w) >= 3
    return (np.where(enough, _expand(mx, a) + a, np.nan), np.where(enough, _expand(my, b) + b, np.nan),
            np.where(enough, radius, np.nan))


def fit_ellipse(x, y, w=None):
    """Algebraic conic fit ``A u^2 + B uv + C v^2 + D u + E v = 1`` about the point centroid.

    Parameters
    ----------
    x, y : ndarray, shape (n, m)
        Points (metres); NaN ignored. ``y`` points up (north), ``x`` right (east).
    w : ndarray, shape (b, m), optional
        Non-negative weights per replicate.

    Returns
    -------
    major, minor : ndarray, shape (n,) or (n, b)
        Full axis lengths (same unit as ``x``), ``major >= minor``.
    azimuth_deg : ndarray, shape (n,) or (n, b)
        Direction of the major axis, degrees clockwise from north (+y), in [0, 180).

    References
    ----------
    Fitzgibbon A., Pilu M., Fisher R.B. (1999) Direct least square fitting of ellipses. IEEE
    TPAMI 21(5):476-480 (the unconstrained general-conic variant is used here).
    """
    ok, x, y = _valid_xy(x, y)
    _, _, u, v = _centred(ok, x, y)
    cnt = ok.sum(-1)
    with np.errstate(invalid="ignore", divide="ignore"):
        s = np.sqrt((u * u + v * v).sum(-1) / cnt)
    s = np.where(np.isfinite(s) & (s > 0), s, 1.0)
    u, v = u / s[:, None], v / s[:, None]
    cols = [u * u, u * v, v * v, u, v]
    pairs = [(i, j) for i in range(5) for j in range(i, 5)]
    S = wsum(np.stack([cols[i] * cols[j] for i, j in pairs] + cols, -1), w)
    ata = np.empty(S.shape[:-1] + (5, 5))
    for k, (i, j) in enumerate(pairs):
        ata[..., i, j] = ata[..., j, i] = S[..., k]
    A, B, C, D, E = np.moveaxis(_solve_batched(ata, S[..., len(pairs):]), -1, 0)
    s = _expand(s, A)
    with np.errstate(invalid="ignore", divide="ignore"):
        det = 4 * A * C - B * B
        # Centre of the conic and the constant term after moving the origin there.
        u0 = (B * E - 2 * C * D) / det
        v0 = (B * D - 2 * A * E) / det
        k = 1.0 + (A * u0 * u0 + B * u0 * v0 + C * v0 * v0)
        tr, diff = A + C, np.sqrt((A - C) ** 2 + B * B)
        l1, l2 = (tr - diff) / 2.0, (tr + diff) / 2.0  # l1 <= l2: l1 along the major axis
        major = 2.0 * np.sqrt(k / l1) * s
        minor = 2.0 * np.sqrt(k / l2) * s
    # 0.5 atan2(B, A - C) is the direction (from +u) of the larger eigenvalue, i.e. the
    # minor axis; the major axis is 90 degrees on. Azimuth: clockwise from +v (north).
    major_dir = 0.5 * np.arctan2(B, A - C) + np.pi / 2.0
    az = np.degrees(np.pi / 2.0 - major_dir) % 180.0
    bad = ~(det > 0) | ~(k > 0) | (_n_used(ok, w) < 5)
    return (np.where(bad, np.nan, major), np.where(bad, np.nan, minor), np.where(bad, np.nan, az))


def harmonic_amplitudes(theta, values, kmax, w=None):
    """Amplitudes of azimuthal harmonics 0..kmax of ``values(theta)`` (DFT over valid samples).

    Parameters
    ----------
    theta : ndarray, shape (m,)
        Azimuths in radians.
    values : ndarray, shape (n, m)
        Samples; NaN ignored.
    kmax : int
        Highest harmonic.
    w : ndarray, shape (b, m), optional
        Weights per replicate.

    Returns
    -------
    ndarray, shape (n, kmax + 1) or (n, b, kmax + 1)
        ``amp[..., 0]`` is the mean; ``amp[..., k]`` the amplitude of ``cos(k theta - phase)``.
    """
    ok = np.isfinite(values)
    val = np.where(ok, values, 0.0)
    one = ok.astype(float)
    k = np.arange(1, kmax + 1)
    cos, sin = np.cos(np.outer(theta, k)), np.sin(np.outer(theta, k))  # (m, k)
    parts = [one[..., None], val[..., None], val[..., None] * cos, val[..., None] * sin,
             one[..., None] * cos, one[..., None] * sin]
    S = wsum(np.concatenate(parts, -1), w)
    s1, sv = S[..., 0], S[..., 1]
    svc, svs = S[..., 2 : 2 + kmax], S[..., 2 + kmax : 2 + 2 * kmax]
    sc, ss = S[..., 2 + 2 * kmax : 2 + 3 * kmax], S[..., 2 + 3 * kmax :]
    with np.errstate(invalid="ignore", divide="ignore"):
        mean = sv / s1
        # Removing the mean first stops it leaking into k >= 1 when the azimuths are
        # unevenly represented (gaps, bootstrap resamples).
        c = (svc - mean[..., None] * sc) / s1[..., None]
        s = (svs - mean[..., None] * ss) / s1[..., None]
    return np.concatenate([mean[..., None], 2.0 * np.hypot(c, s)], -1)


def _sort_valid(values):
    """``(order, sorted values, finite mask)`` along the last axis; NaN and infinities last."""
    order = np.argsort(np.where(np.isfinite(values), values, np.inf), axis=-1)
    srt = np.take_along_axis(values, order, -1)
    return order, srt, np.isfinite(srt)


def _sorted_cumweights(order, ok, w):
    """Running sums of the weights along the sorted values, and their totals.

    The sums, shape (m + 1, n, b) with row 0 zero, are laid out (position, crater,
    replicate) so that each step is one contiguous vector addition; the additions are made
    one position at a time, left to right, as ``np.cumsum`` makes them, so every partial
    sum is the float it gives. Counts (:func:`_exact_counts`) are summed as the narrowest
    integers that hold their totals: the same sums, exact either way, in a fraction of the
    memory. The totals, shape (n, b), are in the float type of the weights (as the sums
    would be), so that thresholds made from them round alike.
    """
    n, m = order.shape
    dtype = total_dtype = np.result_type(w, 0.0)
    if _exact_counts(w):
        top = w.sum(-1).max(initial=0)
        dtype = next((t for t in (np.int8, np.int16, np.int32) if top <= np.iinfo(t).max), dtype)
    wt = np.zeros((m + 1, w.shape[0]), dtype=dtype)
    wt[1:] = w.T
    rows = np.zeros((m + 1, n), dtype=np.intp)  # row 0 of wt: invalid values weigh 0
    rows[1:] = np.where(ok, order + 1, 0).T
    cum = _accumulate_rows(wt[rows])
    return cum, cum[-1].astype(total_dtype, copy=False)


def _accumulate_rows(a):
    """Running sum along axis 0, in place, one row at a time (as ``np.cumsum``, faster)."""
    for j in range(1, a.shape[0]):
        np.add(a[j - 1], a[j], out=a[j])
    return a


def _first_reaching(cum, thr):
    """First sorted position ``j`` with ``cum[j + 1] >= thr``; 0 where none (as ``argmax``)."""
    below = np.ones(thr.shape, dtype=bool)
    idx = np.zeros(thr.shape, dtype=np.intp)
    for c in cum[1:]:
        below &= ~(c >= thr)  # not ``c < thr``: a NaN sum must not end the search
        idx += below
    return np.where(idx == cum.shape[0] - 1, 0, idx)


def wquantile(values, q, w=None):
    """Weighted quantile (inverted empirical CDF) along the azimuth axis, ignoring NaN.

    The smallest finite value whose cumulative weight, in increasing order of the values,
    reaches ``q`` times the total (to 1e-9); NaN where no finite value carries weight. The
    values are sorted once per crater; only the running sums of the weights differ between
    replicates.

    Parameters
    ----------
    values : ndarray, shape (n, m)
    q : float
        In [0, 1].
    w : ndarray, shape (b, m), optional
        Weights per replicate; ``None`` = all ones.

    Returns
    -------
    ndarray, shape (n,) or (n, b)
    """
    if w is None:
        _, srt, ok = _sort_valid(values)
        return _pick_quantile(srt, ok.astype(float), q)
    return _weighted_pick(values, np.asarray(w), q)[0]


def _weighted_pick(values, w, q):
    """Weighted ``q``-quantiles of every replicate, and what they were found from.

    Returns ``(quantile (n, b), sorted values, finite mask, running sums, totals, sorted
    position of each quantile)``; see :func:`_sorted_cumweights` and :func:`_first_reaching`.
    """
    order, srt, ok = _sort_valid(values)
    cum, total = _sorted_cumweights(order, ok, w)
    pos = _first_reaching(cum, q * total - 1e-9)
    out = np.where(total > 0, np.take_along_axis(srt, pos, -1), np.nan)
    return out, srt, ok, cum, total, pos


def _pick_quantile(srt, ws, q):
    """Quantile ``q`` from values sorted along the last axis and their weights (same shape)."""
    cum = np.cumsum(ws, -1)
    total = cum[..., -1:]
    idx = np.argmax(cum >= q * total - 1e-9, axis=-1)
    out = np.take_along_axis(srt, idx[..., None], -1)[..., 0]
    return np.where(total[..., 0] > 0, out, np.nan)


def _exact_counts(w):
    """Whether ``w`` holds counts whose float64 sums are exact in any order of addition."""
    if np.result_type(w, 0.0) != np.float64:
        return False
    wf = w.astype(np.float64)
    ok = np.isfinite(wf) & (wf >= 0) & (wf == np.floor(wf))
    return bool(ok.all()) and float(wf.sum(-1).max(initial=0.0)) <= 2.0 ** 52


def _mad_from_sorted(srt, ok, cum, pos, total):
    """Weighted median absolute deviation about ``srt[pos]``, shape (n, b); None if overflow.

    For counts only (sums exact in any order) and float64 values. About a median at sorted
    position ``p`` the deviations grow away from ``p`` on both sides, so the values within
    a deviation ``d`` form a window of sorted positions, whose weight is a difference of two
    running sums. The windows depend on a replicate only through ``p``: the deviations are
    ordered once per distinct (crater, ``p``), and each replicate's answer, the smallest
    deviation whose window holds half the weight, is found by bisection along that order.
    """
    n, m = srt.shape
    has = total > 0
    crater = np.broadcast_to(np.arange(n)[:, None], pos.shape)[has]
    key = crater * m + pos[has]
    mark = np.zeros(n * m, dtype=bool)
    mark[key] = True
    pair = np.cumsum(mark)[key] - 1
    pn, pp = np.divmod(np.flatnonzero(mark), m)
    dev = srt[pn]
    med = dev[np.arange(pn.size), pp][:, None]
    np.abs(np.subtract(dev, med, out=dev), out=dev)  # |v - median|, the oracle's expression
    valid = ok[pn]
    if not np.isfinite(dev[valid]).all():  # |v - median| overflowed: the oracle drops v
        return None
    # Sort keys: the bits of a non-negative float order as the float does; the spare low
    # bit tells the side of the median (1 = below), so a plain (vectorised) sort gives the
    # order of the deviations and how many of the first k come from below.
    bits = np.left_shift(dev.view(np.uint64), np.uint64(1), out=dev.view(np.uint64))
    bits |= np.arange(m) < pp[:, None]
    bits[~valid] = np.iinfo(np.uint64).max
    bits.sort(axis=-1)
    below = np.empty((m, pn.size), dtype=np.int16 if m < 2 ** 15 else np.intp)
    np.bitwise_and(bits.T, np.uint64(1), out=below, casting="unsafe")
    below = _accumulate_rows(below).ravel()
    # The first k + 1 deviations cover the sorted positions [p - b_k, p + k - b_k]
    # (b_k = how many lie below p); every value in there deviates by at most the k-th, and
    # once all of the k-th's ties are in, the window is every value within that deviation.
    # Its weight grows with k; the first k where it reaches half the total gives the MAD.
    flat = cum.reshape(-1)
    col = np.flatnonzero(has)
    ncol = has.size
    start = pos[has] * ncol + col  # flat index of cum[p] (n, b) for each replicate
    thr = (0.5 * total - 1e-9)[has]
    lo = np.zeros(col.size, dtype=np.intp)
    hi = ok.sum(-1)[crater] - 1
    for _ in range((m - 1).bit_length()):
        mid = (lo + hi) >> 1
        nb = below[mid * pn.size + pair].astype(np.intp)
        reach = flat[start + (mid + 1 - nb) * ncol] - flat[start - nb * ncol] >= thr
        hi = np.where(reach, mid, hi)
        lo = np.where(reach, lo, mid + 1)
    mad = np.full(pos.shape, np.nan)
    mad[has] = (bits[pair, lo] >> np.uint64(1)).view(np.float64)
    return mad


def _mad_by_sorting(values, med, w):
    """Weighted MAD for any weights: every replicate's deviations sorted, shape (n, b).

    Non-integer weights sum to different last bits in different orders, so the deviations
    are ordered exactly as before (same sort, same ties) to keep every result.
    """
    dev = np.abs(values[:, None, :] - med[..., None])  # (n, b, m)
    order, dsrt, ok = _sort_valid(dev)
    ws = np.take_along_axis(np.broadcast_to(w, dev.shape), order, -1)
    return _pick_quantile(dsrt, np.where(ok, ws, 0.0), 0.5)


def wmad_relative(values, w=None):
    """Robust relative spread ``1.4826 MAD / median`` along the azimuth axis, NaN ignored.

    The median absolute deviation ignores a minority of disturbed azimuths (a neighbour's
    rim, a gap), so the spread stays that of the crater itself (Rousseeuw & Croux 1993,
    JASA 88:1273; 1.4826 makes it the standard deviation for normal data). Median and MAD
    are weighted medians as in :func:`wquantile`. With count weights (bootstrap) the MAD
    comes from windows of the sorted values about the median, without sorting the
    deviations of every replicate; other weights sort them.

    Parameters
    ----------
    values : ndarray, shape (n, m)
    w : ndarray, shape (b, m), optional
        Weights per replicate.

    Returns
    -------
    ndarray, shape (n,) or (n, b)
        NaN where the median is not positive.
    """
    if w is None:
        med = wquantile(values, 0.5)
        mad = wquantile(np.abs(values - med[:, None]), 0.5)
    else:
        w = np.asarray(w)
        med, srt, ok, cum, total, pos = _weighted_pick(values, w, 0.5)
        mad = None
        if srt.dtype == np.float64 and cum.dtype.kind == "i":  # counts (exact sums)
            mad = _mad_from_sorted(srt, ok, cum, pos, total)
        if mad is None:
            mad = _mad_by_sorting(values, med, w)
    with np.errstate(invalid="ignore", divide="ignore"):
        return np.where(med > 0, 1.4826 * mad / med, np.nan)


def nanquantile_last(a, q):
    """Linear-interpolated quantile ``q`` (0..1) along the last axis, ignoring NaN (fast path)."""
    srt = np.sort(a, axis=-1)  # NaN sorts last
    n = np.isfinite(srt).sum(-1)
    pos = q * np.maximum(n - 1, 0)
    lo = np.floor(pos).astype(np.intp)
    hi = np.minimum(lo + 1, np.maximum(n - 1, 0))
    f = pos - lo
    vlo = np.take_along_axis(srt, lo[..., None], -1)[..., 0]
    vhi = np.take_along_axis(srt, hi[..., None], -1)[..., 0]
    out = vlo + f * (vhi - vlo)
    return np.where(n > 0, out, np.nan)


def interp_last(a, idx):
    """Linear interpolation of ``a`` (..., n) at fractional indices ``idx`` (..., k); NaN outside."""
    n = a.shape[-1]
    fin = np.isfinite(idx)
    i = np.where(fin, idx, 0.0)
    lo = np.clip(np.floor(i).astype(np.intp), 0, n - 2)
    f = i - lo
    vlo = np.take_along_axis(a, lo, -1)
    vhi = np.take_along_axis(a, lo + 1, -1)
    out = vlo + f * (vhi - vlo)
    return np.where(fin & (i >= 0) & (i <= n - 1), out, np.nan)


def replicate_std(samples):
    """Sample standard deviation over replicates (axis 1) ignoring NaN; NaN if < 2 values.

    Parameters
    ----------
    samples : ndarray, shape (n, b)

    Returns
    -------
    ndarray, shape (n,)
    """
    b = np.asarray(samples, dtype=float)
    fin = np.isfinite(b)
    nb = fin.sum(1)
    with np.errstate(invalid="ignore", divide="ignore"):
        mu = np.where(fin, b, 0.0).sum(1) / nb
        var = np.where(fin, (b - mu[:, None]) ** 2, 0.0).sum(1) / (nb - 1)
    return np.where(nb > 1, np.sqrt(var), np.nan)
