"""Whole surveys of the two real NASA DEMs in ../shared/data (skipped when absent).

Lunar reference centres and rim diameters: IAU Gazetteer of Planetary Nomenclature (IAU WGPSN /
USGS), current entries (the LOLA-era revision, two-decimal diameters), as quoted by Wikipedia
infoboxes that cite the gazetteer (de, ru, en editions), found with the search tool in 2026; the
gazetteer site itself was not read. Older gazetteer / NASA RP-1097 (Andersson & Whitaker 1982)
values differ by up to 10 % for the basins (Hertzsprung 591 km, Korolev 437 km, Mendeleev 313 km).
"""

from __future__ import annotations

import numpy as np
import pytest

from morpho.pipeline import survey

# name, latitude, east longitude (-180..180), rim diameter km -- IAU gazetteer (see module docstring);
# Daedalus: diameter from the gazetteer (93.61 km, pt.wikipedia), centre 5.9 S 179.4 E from the
# older entry (en.wikipedia).
LUNAR_NAMED = [("Gagarin", -20.02, 149.17, 267.32), ("Korolev", -4.14, -157.22, 423.41),
               ("Hertzsprung", 0.71, -129.22, 536.37), ("Mendeleev", 5.38, 141.17, 325.13),
               ("Tsiolkovskiy", -20.38, 128.97, 184.39), ("Daedalus", -5.9, 179.4, 93.61),
               ("Keeler", -9.78, 161.78, 158.1), ("Heaviside", -10.44, 166.77, 164.5),
               ("Fermi", -19.61, 123.24, 241.41)]
R_MOON_KM = 1737.4


@pytest.fixture(scope="module")
def lunar(shared_data_module):
    return survey(shared_data_module / "moon_lola_ldem4_farside_eqc.tif").craters


@pytest.fixture(scope="module")
def shared_data_module():
    from .conftest import SHARED_DATA

    if not SHARED_DATA.is_dir():
        pytest.skip(f"real DEMs not present at {SHARED_DATA}")
    return SHARED_DATA


@pytest.mark.realdata
def test_lunar_highlands_yield_hundreds_of_craters(lunar):
    # shared/data/README.md: a saturated highland surface with hundreds of craters of 5-80 px.
    assert len(lunar) >= 300


@pytest.mark.realdata
def test_lunar_named_craters_within_15_percent(lunar):
    errors = {}
    for name, lat, lon, d_km in LUNAR_NAMED:
        dlon = (lunar["lon"] - lon + 180.0) % 360.0 - 180.0
        dist_km = np.hypot(dlon * np.cos(np.radians(lat)), lunar["lat"] - lat) * np.radians(1) * R_MOON_KM
        near = dist_km < 0.3 * d_km
        got = lunar.loc[near, "diameter_m"] / 1000.0
        errors[name] = float((got / d_km - 1).abs().min()) if near.any() else np.inf
    within = sorted(name for name, e in errors.items() if e <= 0.15)
    # Issue figure: the large named craters are found ...
    assert all(np.isfinite(e) for e in errors.values()), errors
    # ... within 15 %. Measured: 9 of 9, rim-crest diameters +3 to +15 % of the gazetteer's
    # (Gagarin +3.5, Korolev +9.7, Hertzsprung +13.5, Mendeleev +10.6, Tsiolkovskiy +14.4,
    # Daedalus +5.6, Keeler +6.1, Heaviside +5.3, Fermi +14.7 %). LDEM_4's crest lies outside
    # the gazetteer rim on several of them (crest to crest through Tsiolkovskiy: 199-220 km);
    # Hertzsprung is a two-ring basin and Fermi has lost its south and east rim, so the last
    # two sit close to the limit.
    assert len(within) == len(LUNAR_NAMED), errors
    assert {"Gagarin", "Mendeleev", "Tsiolkovskiy", "Daedalus", "Keeler", "Heaviside"} <= set(within), errors


@pytest.mark.realdata
def test_lunar_craters_outside_training_domain_are_not_called_discharge(lunar):
    outside = lunar["scoring_domain"] != ""
    assert outside.any()
    assert (lunar.loc[outside, "verdict"] == "neither").all()


@pytest.mark.realdata
def test_lunar_highland_craters_seen_unlike_any_training_crater_are_not_called_discharge(lunar):
    # shared/data/README.md: saturated highlands, impact craters by consensus. The joint context
    # check (scoring/_domain.py) finds the crowded, rough and coarse corner that almost no training
    # crater reaches: measured 59 of the 66 craters inside the per-measure ranges, which the
    # scorer had called 'discharge' 58 times; 7 'discharge' verdicts are left.
    joint = lunar["scoring_domain"].str.contains("as rough, as crowded and as coarse")
    assert joint.sum() >= 50
    assert (lunar.loc[joint, "verdict"] == "neither").all()
    assert (lunar["verdict"] == "discharge").sum() <= 10


@pytest.mark.realdata
def test_mars_large_crater_in_degrees(shared_data_module):
    # The ~80 km crater near 73 N 164.5 E (81.4 km in the IAU gazetteer, from memory).
    c = survey(shared_data_module / "mars_korolev_mola128_native.tif").craters
    best = c.loc[c["diameter_m"].idxmax()]
    assert best["diameter_m"] / 1000 == pytest.approx(81.4, rel=0.15)
    assert best["lat"] == pytest.approx(72.75, abs=0.3) and best["lon"] == pytest.approx(164.5, abs=0.5)
