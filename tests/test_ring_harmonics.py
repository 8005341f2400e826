"""Azimuthal ring harmonics of the detrended topography (morphometry._features.ring_harmonics).

Reference: the discrete Fourier transform as computed by numpy.fft (an independent
implementation); amplitude of order k of N evenly spaced samples = 2 |F_k| / N.
"""

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from morpho.dictionary import _morphometry
from morpho.morphometry import measure_craters
from morpho.morphometry._features import RING_COLUMNS, RING_ORDERS, RING_RADII, ring_harmonics
from morpho.shapes import crater_profile

N_AZ = 64
THETA = np.linspace(0.0, 2.0 * np.pi, N_AZ, endpoint=False)
R_NORM = np.linspace(0.0, 2.5, 81)


def _profiles(func):
    """(1, n_az, n_r) profiles z = func(theta, r)."""
    return func(THETA[:, None], R_NORM[None, :])[None]


def test_columns_are_documented_in_the_data_dictionary():
    names = {f.name for f in _morphometry.FIELDS}
    assert set(RING_COLUMNS) <= names
    assert len(RING_COLUMNS) == len(RING_RADII) * len(RING_ORDERS) == 20


def test_axisymmetric_crater_has_no_harmonics():
    zd = _profiles(lambda t, r: -50.0 * np.maximum(0.0, 1.0 - r**2) + 0.0 * t)
    out = ring_harmonics(zd, R_NORM, THETA, np.array([50.0]))
    assert max(abs(v[0]) for v in out.values()) < 1e-12


@given(k=st.sampled_from(RING_ORDERS), amp=st.floats(0.1, 20.0), phase=st.floats(0.0, 2.0 * np.pi),
       level=st.floats(-100.0, 100.0), relief=st.floats(1.0, 500.0), seed=st.integers(0, 2**16))
@settings(max_examples=40, deadline=None)
def test_amplitudes_match_numpy_fft(k, amp, phase, level, relief, seed):
    # A mixture of the four orders plus a level: each column must equal numpy.fft's
    # amplitude of its order on that ring, over the relief.
    rng = np.random.default_rng(seed)
    amps = rng.uniform(0.0, 5.0, size=5)
    amps[k] = amp

    def z(t, r):
        out = level + 3.0 * r + 0.0 * t
        for order in range(1, 5):
            out = out + amps[order] * (1.0 + r) * np.cos(order * t - phase * order)
        return out

    zd = _profiles(z)
    out = ring_harmonics(zd, R_NORM, THETA, np.array([relief]))
    for rho in RING_RADII:
        ring = z(THETA, rho)
        spectrum = 2.0 * np.abs(np.fft.rfft(ring)) / N_AZ
        for order in RING_ORDERS:
            got = out[f"ring_h{order}_r{round(100 * rho):03d}"][0]
            assert got == pytest.approx(spectrum[order] / relief, rel=1e-9, abs=1e-12)


def test_ring_between_samples_is_interpolated_linearly():
    # z linear in r on every azimuth: the interpolated ring is exact wherever it falls.
    r_coarse = np.linspace(0.0, 2.5, 41)  # 0.0625 steps: 0.2, 0.4, 0.6 fall between samples
    zd = (np.cos(2 * THETA)[:, None] * r_coarse[None, :])[None]
    out = ring_harmonics(zd, r_coarse, THETA, np.array([1.0]))
    for rho in RING_RADII:
        assert out[f"ring_h2_r{round(100 * rho):03d}"][0] == pytest.approx(rho, rel=1e-12)


def test_few_valid_azimuths_give_nan_and_a_bad_relief_gives_nan():
    zd = _profiles(lambda t, r: np.cos(t) * r)
    zd[:, 16:, :] = np.nan  # only 16 of 64 azimuths left: exactly the quarter needed
    ok = ring_harmonics(zd, R_NORM, THETA, np.array([1.0]))
    assert np.isfinite(ok["ring_h1_r100"][0])
    zd[:, 15, :] = np.nan  # 15 of 64: below a quarter
    out = ring_harmonics(zd, R_NORM, THETA, np.array([1.0]))
    assert all(np.isnan(v[0]) for v in out.values())
    for bad in (0.0, -1.0, np.nan):
        out = ring_harmonics(_profiles(lambda t, r: np.cos(t) * r), R_NORM, THETA, np.array([bad]))
        assert all(np.isnan(v[0]) for v in out.values())


def test_missing_azimuths_do_not_leak_the_ring_level_into_order_one():
    # A constant ring with half its azimuths masked: after removing the mean of the valid
    # samples there is nothing left, whatever the level.
    zd = _profiles(lambda t, r: 40.0 + 0.0 * t * r)
    zd[:, :32, :] = np.nan
    out = ring_harmonics(zd, R_NORM, THETA, np.array([10.0]))
    assert max(abs(v[0]) for v in out.values()) < 1e-12


def _measured_bowl(e, pixel_m=25.0, d_px=60):
    """A Pike-shaped paraboloid bowl stretched to semi-axes (1 + e) R (columns) and (1 - e) R
    (rows), measured at its nominal centre and radius: (feature row, crest radius / R)."""
    side = 3 * d_px
    c = (side - 1) / 2.0
    yy, xx = np.mgrid[0:side, 0:side]
    s = np.hypot((yy - c) / (1 - e), (xx - c) / (1 + e)) / (d_px / 2.0)
    dia = d_px * pixel_m
    z = crater_profile(s, 0.196 * dia, 0.036 * dia, interior_exponent=2.0)
    m = measure_craters(z, pixel_m, [c], [c], [d_px / 2.0], n_boot=0, seed=0).iloc[0]
    return m, m["diameter_m"] / 2.0 / pixel_m / (d_px / 2.0)


@pytest.mark.parametrize("e", [0.05, 0.1, 0.2])
def test_elongated_paraboloid_bowl_measured_end_to_end(e):
    # Analytic source: the interior of morpho.shapes.crater_profile with interior exponent 2
    # is z = h - d + d s^2 (a paraboloid; Pike 1977 d/D = 0.196, h/D = 0.036 for the fresh
    # simple bowl). Stretched to semi-axes (1 + e) R and (1 - e) R, on a ring of radius rho R
    # s^2 = rho^2 (A + B cos 2 theta) with B = (1/(1 - e)^2 - 1/(1 + e)^2) / 2, so order 2 has
    # amplitude d rho^2 B over the relief d, and orders 1, 3, 4 vanish by symmetry. The
    # measured relief (azimuth-mean profile) is a little smaller than d on an elongated rim,
    # hence the 6 % tolerance; radii are scaled by the measured crest radius.
    m, scale = _measured_bowl(e)
    b = abs(1.0 / (1.0 - e) ** 2 - 1.0 / (1.0 + e) ** 2) / 2.0
    for rho in (0.2, 0.4, 0.6, 0.8):
        tag = f"r{round(100 * rho):03d}"
        assert m[f"ring_h2_{tag}"] == pytest.approx((rho * scale) ** 2 * b, rel=0.06)
        for k in (1, 3):
            assert m[f"ring_h{k}_{tag}"] < 1e-3 * m[f"ring_h2_{tag}"] + 1e-6


def test_round_paraboloid_bowl_has_no_ring_harmonics():
    m, _ = _measured_bowl(0.0)
    # A centred round bowl sampled on 64 azimuths: only the square pixel grid's order 4
    # could show, and it stays far below the elongated bowls' order-2 amplitudes (> 0.01).
    assert max(m[name] for name in RING_COLUMNS) < 1e-3
