"""Weighted quantile and relative MAD along the azimuth axis (bootstrap statistics).

Two kinds of check:

* exact equality (``assert_array_equal``: same floats, same NaN positions) with the
  previous implementation, kept below as ``_reference_*``, over NaN, infinities, ties,
  zero weights, integer and non-integer weights: the faster code must not change any
  measured value;
* independent references: ``numpy.quantile(method="inverted_cdf")`` (numpy documentation;
  Hyndman & Fan 1996, Am. Stat. 50:361, definition 1), applied to the sample repeated by
  its integer weights, and ``scipy.stats.median_abs_deviation`` for the unweighted and
  integer-weighted MAD (Rousseeuw & Croux 1993, JASA 88:1273) on odd sample sizes, where
  every median is a sample value (scipy averages the two middle values of an even sample).
"""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from scipy import stats

from morpho.morphometry._geometry import wmad_relative, wquantile

QS = (0.0, 0.25, 0.5, 0.6, 0.75, 0.9, 1.0)  # 0.6 = RIM_QUANTILE of the features


# --- Oracle: the previous implementation, kept verbatim as the reference ----------------

def _reference_wquantile(values, q, w=None):
    order = np.argsort(np.where(np.isfinite(values), values, np.inf), axis=-1)
    srt = np.take_along_axis(values, order, -1)
    ok = np.isfinite(srt)
    if w is None:
        ws = ok.astype(float)
    else:
        ws = np.where(ok[:, None, :], w[:, order].transpose(1, 0, 2), 0.0)  # (n, b, m)
        srt = srt[:, None, :]
    return _reference_pick_quantile(np.broadcast_to(srt, ws.shape), ws, q)


def _reference_pick_quantile(srt, ws, q):
    cum = np.cumsum(ws, -1)
    total = cum[..., -1:]
    idx = np.argmax(cum >= q * total - 1e-9, axis=-1)
    out = np.take_along_axis(srt, idx[..., None], -1)[..., 0]
    return np.where(total[..., 0] > 0, out, np.nan)


def _reference_wmad_relative(values, w=None):
    med = _reference_wquantile(values, 0.5, w)
    if w is None:
        mad = _reference_wquantile(np.abs(values - med[:, None]), 0.5)
    else:
        dev = np.abs(values[:, None, :] - med[..., None])  # (n, b, m)
        order = np.argsort(np.where(np.isfinite(dev), dev, np.inf), axis=-1)
        srt = np.take_along_axis(dev, order, -1)
        ws = np.where(np.isfinite(srt), np.take_along_axis(np.broadcast_to(w, dev.shape), order, -1), 0.0)
        mad = _reference_pick_quantile(srt, ws, 0.5)
    with np.errstate(invalid="ignore", divide="ignore"):
        return np.where(med > 0, 1.4826 * mad / med, np.nan)


# --- Exact equality with the oracle -----------------------------------------------------

# A small pool of values makes ties (equal values, and deviations equal on both sides of
# the median) frequent; NaN and infinities are the invalid azimuths.
_POOL = [0.0, 1.0, 2.0, 2.0, 3.0, 5.0, -1.0, 0.5, 1.5, 2.5, 1e-3, 7.25]


@st.composite
def _case(draw):
    n = draw(st.integers(1, 4))
    m = draw(st.integers(1, 12))
    b = draw(st.integers(1, 5))
    cell = st.one_of(st.sampled_from(_POOL), st.floats(-10, 10, allow_nan=False),
                     st.just(np.nan), st.sampled_from([np.inf, -np.inf]))
    v = np.array(draw(st.lists(cell, min_size=n * m, max_size=n * m)), float).reshape(n, m)
    if draw(st.booleans()):  # whole rows without data
        v[draw(st.integers(0, n - 1))] = np.nan
    kind = draw(st.sampled_from(["none", "counts", "int64", "float", "mixed"]))
    if kind == "none":
        w = None
    elif kind in ("counts", "int64"):
        w = np.array(draw(st.lists(st.integers(0, 4), min_size=b * m, max_size=b * m)))
        w = w.reshape(b, m) if kind == "int64" else w.reshape(b, m).astype(float)
    else:
        fw = st.floats(0, 3, allow_nan=False) if kind == "float" else st.sampled_from([0.0, 1.0, 0.5, 0.1, 2.0])
        w = np.array(draw(st.lists(fw, min_size=b * m, max_size=b * m)), float).reshape(b, m)
    return v, w


@settings(max_examples=200, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(_case(), st.sampled_from((*QS, np.float32(0.6))))
def test_wquantile_identical_to_previous_implementation(case, q):
    v, w = case
    np.testing.assert_array_equal(wquantile(v, q, w), _reference_wquantile(v, q, w))


@settings(max_examples=200, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(_case())
def test_wmad_relative_identical_to_previous_implementation(case):
    v, w = case
    # inf - inf in the deviations, MAD / median overflowing for tiny medians: both versions
    with np.errstate(invalid="ignore", over="ignore"):
        ref = _reference_wmad_relative(v, w)
        new = wmad_relative(v, w)
    np.testing.assert_array_equal(new, ref)


def _bootstrap_counts(rng, b, m):
    counts = np.zeros((b, m))
    np.add.at(counts, (np.arange(b)[:, None], rng.integers(0, m, (b, m))), 1.0)
    return counts


@pytest.mark.parametrize("quantised", [False, True])
def test_pipeline_sized_bootstrap_identical_to_previous_implementation(quantised):
    # The shape the features use: 64 azimuths, 50 bootstrap replicates, some gaps; values
    # rounded to a coarse step (quantised DEM heights) make many exact ties.
    rng = np.random.default_rng(7)
    v = rng.normal(10.0, 1.0, (300, 64))
    if quantised:
        v = np.round(v, 1)
    v[rng.uniform(size=v.shape) < 0.1] = np.nan
    v[:5] = np.nan
    v[5:10, 3:] = np.nan
    v[10:15] *= -1  # non-positive medians
    w = _bootstrap_counts(rng, 50, 64)
    for q in QS:
        np.testing.assert_array_equal(wquantile(v, q, w), _reference_wquantile(v, q, w))
    np.testing.assert_array_equal(wmad_relative(v, w), _reference_wmad_relative(v, w))
    np.testing.assert_array_equal(wmad_relative(v), _reference_wmad_relative(v))


@pytest.mark.parametrize("w", [
    np.full((3, 9), 2.0 ** 52),           # sums beyond 2**53 are no longer exact in float64
    np.array([[1.0, -1.0, 2.0] * 3] * 2),  # negative weights
    np.array([[1.0, np.inf, 2.0] * 3]),
    np.array([[0.25, 0.5, 0.125] * 3], dtype=np.float32),
])
def test_unusual_weights_identical_to_previous_implementation(w):
    v = np.array([[3.0, 1.0, 2.0, 2.0, np.nan, 5.0, 1.0, 4.0, 0.5],
                  [1.0, 1.0, 1.0, 2.0, 2.0, 3.0, 3.0, 3.0, 3.0]])
    with np.errstate(invalid="ignore"):
        for q in QS:
            np.testing.assert_array_equal(wquantile(v, q, w), _reference_wquantile(v, q, w))
        np.testing.assert_array_equal(wmad_relative(v, w), _reference_wmad_relative(v, w))


def test_float32_quantile_level_identical_to_previous_implementation():
    # q * total in float32 rounds 0.6f * 5 = 3.00000012 down to 3: the threshold must be
    # formed from the float64 total, as the previous implementation did.
    v = np.array([[1.0, 2.0, 3.0, 4.0, 5.0, np.nan]])
    w = np.array([[1.0, 1.0, 1.0, 1.0, 1.0, 2.0], [2.0, 1.0, 0.0, 1.0, 1.0, 0.0]])
    for q in (np.float32(0.6), np.float32(0.9), np.float16(0.6)):
        np.testing.assert_array_equal(wquantile(v, q, w), _reference_wquantile(v, q, w))
    assert wquantile(v, np.float32(0.6), w)[0, 0] == 4.0


def test_empty_batch_identical_to_previous_implementation():
    v, w = np.zeros((0, 8)), np.ones((3, 8))
    for weights in (None, w):
        np.testing.assert_array_equal(wquantile(v, 0.5, weights), _reference_wquantile(v, 0.5, weights))
        np.testing.assert_array_equal(wmad_relative(v, weights), _reference_wmad_relative(v, weights))
        assert wmad_relative(v, weights).shape == _reference_wmad_relative(v, weights).shape


def test_huge_values_identical_to_previous_implementation():
    # |v - median| overflows to inf: the oracle treats that azimuth as missing.
    v = np.array([[1e308, -1e308, -1.5e308, 2.0, 1.0], [1e308, 1.7e308, 9e307, 1e308, 5e307]])
    w = np.array([[1.0, 2.0, 1.0, 0.0, 1.0], [3.0, 1.0, 1.0, 1.0, 1.0]])
    with np.errstate(invalid="ignore", over="ignore"):
        np.testing.assert_array_equal(wmad_relative(v, w), _reference_wmad_relative(v, w))
        np.testing.assert_array_equal(wmad_relative(v), _reference_wmad_relative(v))


# --- Independent references -------------------------------------------------------------

@pytest.mark.parametrize("q", QS)
def test_unweighted_quantile_is_numpy_inverted_cdf(q):
    # numpy.quantile(method="inverted_cdf"): Hyndman & Fan (1996) definition 1.
    rng = np.random.default_rng(3)
    v = np.round(rng.normal(0.0, 1.0, (40, 17)), 1)
    v[rng.uniform(size=v.shape) < 0.2] = np.nan
    expect = [np.quantile(row[np.isfinite(row)], q, method="inverted_cdf") for row in v]
    np.testing.assert_array_equal(wquantile(v, q), expect)


@pytest.mark.parametrize("q", [q for q in QS if q > 0])
def test_integer_weights_are_repeated_samples(q):
    # Integer weights act as repeat counts: the weighted inverted-CDF quantile is numpy's
    # inverted_cdf quantile of the sample with each value repeated (Hyndman & Fan 1996,
    # definition 1). q = 0 is left out: the implementation returns the smallest finite
    # value there even when it carries no weight.
    rng = np.random.default_rng(4)
    v = np.round(rng.normal(0.0, 1.0, (25, 13)), 1)
    v[rng.uniform(size=v.shape) < 0.15] = np.nan
    w = rng.integers(0, 4, (6, 13)).astype(float)
    got = wquantile(v, q, w)
    for i in range(v.shape[0]):
        for j in range(w.shape[0]):
            sample = np.repeat(v[i], w[j].astype(int))
            sample = sample[np.isfinite(sample)]
            expect = np.quantile(sample, q, method="inverted_cdf") if sample.size else np.nan
            np.testing.assert_array_equal(got[i, j], expect)


def test_unweighted_relative_mad_is_scipy_mad_over_median():
    # Odd sample sizes: the median and the MAD are sample values, as in scipy. 1.4826 is
    # 1 / Phi^-1(3/4) = 1.482602... rounded (Rousseeuw & Croux 1993), hence rtol 2e-6.
    rng = np.random.default_rng(5)
    v = rng.uniform(1.0, 3.0, (30, 21))
    v[:10, :4] = np.nan  # 17 valid values
    got = wmad_relative(v)
    for i, row in enumerate(v):
        x = row[np.isfinite(row)]
        assert x.size % 2 == 1
        expect = stats.median_abs_deviation(x, scale="normal") / np.median(x)
        np.testing.assert_allclose(got[i], expect, rtol=2e-6)


def test_integer_weighted_relative_mad_is_scipy_mad_of_repeated_sample():
    # Rows of weights with an odd total over the valid values; the weighted MAD is then the
    # MAD of the sample repeated by its counts (scipy.stats.median_abs_deviation).
    rng = np.random.default_rng(6)
    v = np.round(rng.uniform(1.0, 3.0, (20, 15)), 2)
    v[:, 0] = np.nan
    w = rng.integers(0, 4, (8, 15)).astype(float)
    got = wmad_relative(v, w)
    checked = 0
    for i in range(v.shape[0]):
        for j in range(w.shape[0]):
            x = np.repeat(v[i], w[j].astype(int))
            x = x[np.isfinite(x)]
            if x.size % 2 == 0:
                continue
            expect = stats.median_abs_deviation(x, scale="normal") / np.median(x)
            np.testing.assert_allclose(got[i, j], expect, rtol=2e-6)
            checked += 1
    assert checked > 40


def test_all_weight_on_missing_values_gives_nan():
    v = np.array([[np.nan, 1.0, 2.0], [np.nan, np.nan, np.nan]])
    w = np.array([[1.0, 0.0, 0.0], [0.0, 1.0, 1.0]])
    got = wquantile(v, 0.5, w)
    assert np.isnan(got[0, 0]) and got[0, 1] == 1.0 and np.isnan(got[1]).all()
    assert np.isnan(wmad_relative(v, w)[0, 0]) and np.isnan(wmad_relative(v, w)[1]).all()
