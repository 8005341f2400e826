"""The shipped default model on hand-made DEMs measured by the real morphometry.

DEMs are drawn here from analytic profiles (``morpho.shapes.crater_profile``, not the
training generator): fresh Pike-shaped simple bowls (Pike 1977, Impact and Explosion
Cratering, Pergamon, 489-509: d/D ~ 0.196, h/D ~ 0.036 for fresh simple lunar craters;
McGetchin et al. 1973 EPSL 20:226 flank decay), the same bowl deepened far beyond
Pike's d/D, a positive-relief dome and a flat-floored cylinder without rim.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from morpho.morphometry import measure_craters
from morpho.scoring import default_model_path, load_model, score_craters
from morpho.shapes import crater_profile

PIXEL_M = 25.0


@pytest.fixture(scope="module")
def model():
    return load_model(default_model_path())


def _dem(profile_fn, d_px, seed, noise_rel=0.005):
    """Square DEM (3 D wide) of one axisymmetric feature of diameter d_px pixels."""
    side = int(np.ceil(3 * d_px))
    c = (side - 1) / 2.0
    yy, xx = np.mgrid[0:side, 0:side]
    r_norm = np.hypot(yy - c, xx - c) / (d_px / 2.0)
    D = d_px * PIXEL_M
    z = profile_fn(r_norm, D)
    rng = np.random.default_rng(seed)
    return z + rng.normal(0.0, noise_rel * D, z.shape), c


def _measure(dems, d_px):
    rows = []
    for z, c in dems:
        rows.append(measure_craters(z, PIXEL_M, [c], [c], [d_px / 2.0], n_boot=0, seed=0))
    return pd.concat(rows, ignore_index=True)


def _pike_bowl(depth_ratio=0.196):
    def fn(r, D):
        return crater_profile(r, depth_ratio * D, 0.036 * D, interior_exponent=2.0)
    return fn


def test_fresh_pike_bowls_score_as_impact(model):
    # Target of issue 6: >= 80 % of fresh Pike-shaped bowls get p_impact >= 0.5.
    d_px = [24.0, 32.0, 40.0, 56.0, 72.0]
    dems = [_dem(_pike_bowl(), d, seed=i) for i, d in enumerate(d_px)]
    feats = pd.concat([_measure([dem], d) for dem, d in zip(dems, d_px, strict=True)], ignore_index=True)
    s = score_craters(feats, model)
    assert np.mean(s["p_impact"] >= 0.5) >= 0.8, s[["p_impact", "verdict", "evidence"]]


def test_deepening_a_pike_bowl_lowers_typicality_impact(model):
    # Pike 1977: d/D ~ 0.2 for fresh simple craters; 0.6-0.8 is far beyond any impact crater.
    d_px = 40.0
    ratios = [0.196, 0.45, 0.8]
    feats = pd.concat([_measure([_dem(_pike_bowl(q), d_px, seed=3)], d_px) for q in ratios],
                      ignore_index=True)
    t = score_craters(feats, model)["typicality_impact"].to_numpy()
    assert np.all(np.isfinite(t))
    assert t[-1] < t[0] and t[1] <= t[0], t


def test_dome_and_flat_cylinder_are_neither(model):
    d_px = 40.0

    def dome(r, D):  # positive relief: 0.1 D high, no depression
        return np.where(r <= 1.0, 0.1 * D * (1.0 - r**2), 0.0)

    def cylinder(r, D):  # flat floor, vertical wall, no rim, no flank
        return np.where(r <= 1.0, -0.2 * D, 0.0)

    feats = _measure([_dem(dome, d_px, seed=4, noise_rel=0.001), _dem(cylinder, d_px, seed=5, noise_rel=0.001)],
                     d_px)
    s = score_craters(feats, model)
    assert list(s["verdict"]) == ["neither", "neither"], s


def test_documented_rebuild_command_is_the_one_the_shipped_card_records():
    # Reproducibility (the model card's own record): the command the docs give must rebuild
    # the shipped model, i.e. be the card's rebuild_command verbatim (seed and sizes included).
    import json
    from pathlib import Path

    card = json.loads(default_model_path().with_suffix(".card.json").read_text())
    root = Path(__file__).resolve().parents[1]
    for doc in ("models/README.md", "DEVELOPERS.md"):
        assert card["rebuild_command"] in (root / doc).read_text(), doc
