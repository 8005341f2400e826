"""Published fresh-crater laws: values, branches, validity flags and residual columns."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from morpho.bodies import get_body
from morpho.dictionary import FIELDS
from morpho.errors import InputError
from morpho.scaling import LAW_SETS, add_scaling_columns, central_peak_onset_m, expected_fresh


@pytest.mark.parametrize(
    ("body", "diameter_km", "depth_km", "rim_km", "rel"),
    [
        # Pike 1977 (from memory): d = 0.196 D^1.010, h = 0.036 D^1.014 (simple);
        # d = 1.044 D^0.301, h = 0.236 D^0.399 (complex). Derived check values from
        # ../shared/reference/published-values.md section 1.1: d(10) = 2.006, h(10) = 0.372,
        # d(50) = 3.389, h(50) = 1.124 km. Pike 1974 GRL 1:291 (verified): d ~ 0.2 D.
        ("moon", 10.0, 2.006, 0.372, 1e-3),
        ("moon", 50.0, 3.389, 1.124, 1e-3),
        # Garvin & Frawley 1998 GRL 25 (verified): d = 0.14 D^0.90 (simple), 0.25 D^0.49
        # (complex); derived d(5) = 0.596 km, d(20) = 1.085 km. No rim law in that source.
        ("mars", 5.0, 0.596, np.nan, 1e-3),
        ("mars", 20.0, 1.085, np.nan, 1e-3),
        # Pike 1988 (from memory, UNCERTAIN): 0.199 D^0.995 and 0.353 D^0.496 (derived values).
        ("mercury", 5.0, 0.199 * 5.0**0.995, np.nan, 1e-9),
        ("mercury", 40.0, 0.353 * 40.0**0.496, np.nan, 1e-9),
    ],
)
def test_published_values(body, diameter_km, depth_km, rim_km, rel):
    t = expected_fresh([diameter_km * 1000.0], body)
    assert t.depth_m[0] == pytest.approx(depth_km * 1000.0, rel=rel)
    if np.isnan(rim_km):
        assert np.isnan(t.rim_height_m[0])
    else:
        assert t.rim_height_m[0] == pytest.approx(rim_km * 1000.0, rel=rel)
    assert t.in_validity_range[0]


def test_branches_follow_transition_and_ranges():
    # Pike 1977 lunar fits: simple branch below ~15 km, complex to ~275 km (from memory).
    d = np.array([1.0, 14.9, 15.0, 100.0, 300.0]) * 1000.0
    t = expected_fresh(d, "moon")
    assert list(t.regime) == ["simple", "simple", "complex", "complex", "complex"]
    assert list(t.in_validity_range) == [True, True, True, True, False]
    # Simple branch d/D ~ 0.2 (Pike 1974 GRL 1:291, verified); complex never deeper than
    # ~3.4 km below 275 km (Pike 1977 Proc. LSC 8 abstract: apparent depth <= 3400 m).
    assert t.depth_m[0] / d[0] == pytest.approx(0.196, rel=0.01)
    assert t.depth_m[3] < 5000.0
    # Garvin & Frawley 1998: transition at 8 km on Mars (verified), as in morpho.bodies.
    assert get_body("mars").transition_diameter_m == 8000.0
    assert list(expected_fresh([7999.0, 8000.0], "mars").regime) == ["simple", "complex"]


def test_each_law_records_citation_and_status():
    for laws in LAW_SETS.values():
        for law in (laws.depth_simple, laws.depth_complex):
            assert law.citation and law.status.split()[0] in {"verified", "from"}
            assert law.d_min_km < law.d_max_km


def test_alternative_mars_set_and_unknown_body():
    t = expected_fresh([5000.0], "mars", source="garvin2003")
    assert t.depth_m[0] == pytest.approx(0.21 * 5.0**0.81 * 1000.0)  # Garvin et al. 2003 (from memory)
    g = expected_fresh([5000.0], "ganymede")
    assert np.isnan(g.depth_m[0]) and g.law[0] == "none" and not g.in_validity_range[0]
    with pytest.raises(InputError):
        expected_fresh([5000.0], "moon", source="nope")


def test_add_scaling_columns_residuals_and_dictionary():
    df = pd.DataFrame({"diameter_m": [10_000.0, 50_000.0, 2_000.0],
                       "depth_m": [2 * 2005.654, 3389.147, np.nan],
                       "rim_height_m": [371.794, 1124.09 / 10.0, 40.0]})
    out = add_scaling_columns(df, "moon")
    assert out.depth_residual_log10[0] == pytest.approx(np.log10(2.0), abs=1e-4)
    assert out.depth_residual_log10[1] == pytest.approx(0.0, abs=1e-4)
    assert np.isnan(out.depth_residual_log10[2])
    assert out.rim_height_residual_log10[1] == pytest.approx(-1.0, abs=1e-4)
    assert list(out.expects_central_peak) == [False, True, False]
    assert central_peak_onset_m("moon") == 15_000.0
    new = set(out.columns) - set(df.columns)
    assert new <= set(FIELDS), new - set(FIELDS)
    with pytest.raises(InputError):
        add_scaling_columns(pd.DataFrame({"x": [1.0]}), "moon")
