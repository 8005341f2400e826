"""The scorer's training-domain guard: per-measure ranges and the joint context check.

The joint check is a data-depth test of a classifier's applicability domain (common practice
for models applied beyond their training data; e.g. Netzeva et al. 2005, ATLA 33:155, from
memory): a crater is outside when almost no training crater was seen under conditions at least
as hard on every context measure at once. Counts here are checked against direct loops.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from morpho.bodies import get_body
from morpho.scoring import default_model_path, load_model
from morpho.scoring._domain import (
    CONTEXT_COLUMNS,
    MIN_CONTEXT_SHARE,
    context_reference,
    context_share,
    training_domain_notes,
)


def test_context_share_counts_the_craters_at_least_as_hard_to_see():
    # Columns: roughness (higher is harder), neighbour cover (higher), px per diameter (lower).
    ref = np.array([[1.0, 1.0, 10.0], [2.0, 2.0, 5.0], [0.5, 0.5, 20.0], [1.0, 0.9, 10.0]])
    got = context_share([[1.0, 1.0, 10.0], [3.0, 0.0, 50.0], [0.0, 0.0, 4.0], [np.nan, 1.0, 1.0]], ref)
    # [1, 1, 10]: rows 0 and 1 (row 3 is less crowded); [3, 0, 50]: none is as rough;
    # [0, 0, 4]: none is as coarse; a missing measure gives no share.
    np.testing.assert_array_equal(got[:3], [0.5, 0.0, 0.0])
    assert np.isnan(got[3])


def test_context_share_agrees_with_a_direct_loop_across_chunks():
    rng = np.random.default_rng(7)
    ref = np.column_stack([rng.gamma(1.0, 0.1, 900), rng.uniform(0, 1, 900), rng.uniform(10, 80, 900)])
    val = np.column_stack([rng.gamma(1.0, 0.2, 1500), rng.uniform(0, 1, 1500), rng.uniform(5, 90, 1500)])
    got = context_share(val, ref)  # 1500 craters: three chunks of 512
    direct = [np.mean((ref[:, 0] >= a) & (ref[:, 1] >= b) & (ref[:, 2] <= c)) for a, b, c in val]
    np.testing.assert_allclose(got, direct, rtol=0, atol=1e-15)


def test_context_reference_keeps_craters_with_all_three_measures():
    table = pd.DataFrame({"exterior_roughness": [0.1, np.nan, 0.3], "neighbour_cover": [0.2, 0.1, 0.0],
                          "pixels_per_diameter": [15.0, 20.0, 40.0], "family": ["impact"] * 3})
    np.testing.assert_array_equal(context_reference(table), [[0.1, 0.2, 15.0], [0.3, 0.0, 40.0]])


def test_notes_flag_the_joint_corner_not_a_single_extreme_measure():
    rng = np.random.default_rng(3)
    ref = np.column_stack([rng.uniform(0, 1, 4000), rng.uniform(0, 1, 4000), rng.uniform(10, 80, 4000)])
    craters = pd.DataFrame({
        "exterior_roughness": [0.95, 0.99, 0.2], "neighbour_cover": [0.95, 0.1, 0.2],
        "pixels_per_diameter": [11.0, 40.0, 40.0], "diameter_m": [1000.0] * 3,
    })
    notes = training_domain_notes(craters, get_body("moon"), ref)
    # rough, crowded and coarse at once: ~0.05 * 0.05 * 0.014 of a uniform reference, i.e. none
    assert "as rough, as crowded and as coarse" in notes[0]
    # very rough alone, or typical: inside (about 1 % and 45 % of the reference are as hard)
    assert notes[1] == "" and notes[2] == ""
    # without a reference the joint check is skipped (models trained before it existed)
    assert training_domain_notes(craters, get_body("moon"))[0] == ""


def test_shipped_model_carries_the_context_of_its_training_craters():
    model = load_model(default_model_path())
    ref = model.context_reference_
    assert ref.shape[1] == len(CONTEXT_COLUMNS) and np.isfinite(ref).all()
    # the balanced training set of the default model (model card: 7,933 craters measured)
    assert 5000 <= len(ref) <= 7933
    # its own craters are almost all inside: the share of the others as hard to see as each one
    harder = np.array([1.0, 1.0, -1.0])
    r = ref * harder
    n_as_hard = np.array([np.sum((r >= row).all(axis=1)) - 1 for row in r])
    flagged = np.mean(n_as_hard / (len(r) - 1) < MIN_CONTEXT_SHARE)
    assert flagged == pytest.approx(0.016, abs=0.012)


def test_model_card_reports_what_the_joint_check_costs_on_held_out_craters():
    _, card = load_model(default_model_path(), with_card=True)
    flagged = card["training"]["held_out_outside_joint_context_check"]
    # held-out craters come from the training generator, so few of them lie in the corner the
    # check guards (1.7 % of the training craters themselves, measured above)
    assert set(flagged) == {"impact", "spot"}
    assert 0.0 < flagged["impact"] < 0.04 and 0.0 < flagged["spot"] < 0.06
