"""Scoring model on toy feature tables: calibration, typicality, verdicts, attributions, columns.

Independent references: sklearn.calibration.calibration_curve and
sklearn.metrics.brier_score_loss for the calibration figures (Pedregosa et al. 2011,
JMLR 12:2825); Pike 1977 (Impact and Explosion Cratering, Pergamon, 489-509) for the
fresh-bowl depth/diameter ratio of 0.2.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from sklearn.calibration import calibration_curve
from sklearn.metrics import brier_score_loss

from morpho.dictionary import get_field
from morpho.errors import InputError, MorphoWarning
from morpho.scoring import (
    SCORE_COLUMNS,
    ImpactSpotClassifier,
    expected_calibration_error,
    metrics_by_band,
    score_craters,
)

from ._scoring_toy import FEATURES, fresh_pike_bowl, toy_features


@pytest.fixture(scope="module")
def toy_model():
    X, y = toy_features(600, seed=1)
    return ImpactSpotClassifier(random_state=0, max_iter=60).fit(X, y)


@pytest.fixture(scope="module")
def held_out():
    # Different seed: none of these rows was seen in training.
    return toy_features(1500, seed=2)


def test_reliability_curve_on_held_out(toy_model, held_out):
    X, y = held_out
    is_impact = (y == "impact").astype(int)
    # Balanced held-out set (impact : spot = 1 : 1) so equal-prior probabilities are checkable.
    keep = np.concatenate([np.flatnonzero(is_impact == 1),
                           np.flatnonzero(is_impact == 0)[: int(is_impact.sum())]])
    X, is_impact = X.iloc[keep], is_impact[keep]
    p = toy_model.predict_p_impact(X)
    prob_true, prob_pred = calibration_curve(is_impact, p, n_bins=10, strategy="uniform")
    counts = np.bincount(np.searchsorted(np.linspace(0, 1, 11)[1:-1], p), minlength=10)
    counts = counts[counts > 0]
    ece_ref = float(np.sum(counts / counts.sum() * np.abs(prob_true - prob_pred)))
    # Our ECE must equal the one rebuilt from scikit-learn's reliability curve.
    assert expected_calibration_error(is_impact, p) == pytest.approx(ece_ref, abs=1e-12)
    # Target of the issue: ECE <= 0.05 (Guo et al. 2017 ICML define ECE; threshold: issue 6).
    assert ece_ref <= 0.05
    rows = {r["band"]: r for r in metrics_by_band(is_impact, p, X["pixels_per_diameter"])}
    assert rows["all"]["brier"] == pytest.approx(brier_score_loss(is_impact, p), rel=1e-12)
    assert rows[">=20 px"]["accuracy"] >= 0.9
    assert rows["10-20 px"]["n"] + rows["20-50 px"]["n"] + rows[">50 px"]["n"] == len(p)


def test_equal_priors_is_balanced(held_out):
    # Class-balanced weights: 3:1 imbalance in training must not move p_impact for an
    # uninformative feature towards the majority (common practice: prior shift, Saerens 2002,
    # Neural Comput. 14:21).
    rng = np.random.default_rng(5)
    X = pd.DataFrame({"noise": rng.normal(size=4000)})
    y = np.where(np.arange(4000) < 3000, "impact", "cathode_spot")
    m = ImpactSpotClassifier(random_state=0, max_iter=20).fit(X, y)
    assert np.mean(m.predict_p_impact(X)) == pytest.approx(0.5, abs=0.05)


def test_deepening_a_pike_bowl_lowers_typicality_impact(toy_model):
    # Pike 1977: fresh simple lunar craters d/D ~ 0.2. Far deeper bowls are not impact-like.
    dd = np.array([0.2, 0.35, 0.6, 1.0])
    rows = pd.concat([fresh_pike_bowl(v) for v in dd], ignore_index=True)
    t = toy_model.typicality(rows)[:, 0]
    assert t[0] >= ImpactSpotClassifier.TYPICALITY_THRESHOLD
    assert np.all(np.diff(t) <= 0) and t[-1] < t[0]
    assert t[-1] < ImpactSpotClassifier.TYPICALITY_THRESHOLD


def test_far_from_both_classes_is_neither(toy_model):
    # A positive-relief dome (negative depth, no rim) and a perfectly flat cylinder
    # (sharp rim, very deep, perfectly round) are far from every training crater.
    far = pd.DataFrame({"depth_diameter_ratio": [-0.2, 0.9], "rim_height_ratio": [0.0, 0.0],
                        "rim_sharpness": [0.0, 5.0], "outline_irregularity": [0.0, 0.0],
                        "pixels_per_diameter": [40.0, 40.0]})
    assert list(toy_model.verdict(far)) == ["neither", "neither"]
    X, y = toy_features(200, seed=9)
    v = toy_model.verdict(X)
    # Genuine members are rarely 'neither' (conformal p-value: ~1 % per class by construction).
    assert np.mean(v == "neither") < 0.03
    assert np.mean(v[y == "impact"] == "impact") > 0.8


def test_verdict_rule_by_hand():
    t = ImpactSpotClassifier.TYPICALITY_THRESHOLD
    lr = np.array([2.0, -2.0, 0.1, 2.0, 2.0, -2.0])
    typ = np.array([[0.5, 0.5], [0.5, 0.5], [0.5, 0.5], [t / 2, t / 2], [t / 2, 0.5], [0.5, t / 2]])
    got = ImpactSpotClassifier.verdict_from(lr, typ)
    assert list(got) == ["impact", "discharge", "undecided", "neither", "undecided", "undecided"]


def test_attribution_names_the_changed_feature(toy_model):
    base = fresh_pike_bowl(0.2)
    deep = fresh_pike_bowl(0.07)  # cathode-like depth, everything else impact-like
    d = toy_model.attributions(pd.concat([base, deep], ignore_index=True))
    assert d.shape == (2, len(FEATURES))
    # Brute-force twin: replace the feature by the median and rescore one row at a time.
    for j, name in enumerate(FEATURES):
        occl = deep.copy()
        occl[name] = toy_model.center_[j]
        twin = toy_model.predict_log10_lr(deep)[0] - toy_model.predict_log10_lr(occl)[0]
        assert d[1, j] == pytest.approx(twin, abs=1e-9)
    scored = score_craters(deep, toy_model)
    assert scored["evidence"].iloc[0].startswith("depth_diameter_ratio:-")


def test_tree_attributions_equal_the_generic_occlusion(toy_model, held_out):
    # The fast path re-evaluates only the trees that split on each feature; the generic
    # path rescoring every occluded copy is the reference. Some values are made missing
    # so that the trees' NaN branches are exercised too.
    X, _ = held_out
    rows = X.iloc[:max(300, ImpactSpotClassifier.TREE_PATH_MIN_ROWS)].copy()  # large enough for the tree path
    rng = np.random.default_rng(0)
    rows = rows.mask(rng.random(rows.shape) < 0.1)
    assert toy_model._tree_parts() is not None, "fast path unavailable with this scikit-learn"
    fast = toy_model.attributions(rows)
    twin = ImpactSpotClassifier.__new__(ImpactSpotClassifier)
    twin.__dict__.update(toy_model.__dict__)
    twin._tree_parts = lambda: None  # forces the generic occlusion
    slow = twin.attributions(rows)
    assert np.abs(slow).max() > 0.1  # the comparison is not between zeros
    np.testing.assert_allclose(fast, slow, rtol=0, atol=1e-9)


def test_score_columns_follow_the_dictionary(toy_model, held_out):
    X, _ = held_out
    df = X.iloc[:50].copy()
    df["radius_px"] = df.pop("pixels_per_diameter") / 2.0  # derived back by score_craters
    df.loc[df.index[0], FEATURES[:-1]] = np.nan  # nothing measured: unscored
    df["unrelated"] = "x"
    out = score_craters(df, toy_model)
    assert tuple(out.columns) == SCORE_COLUMNS
    assert out.index.equals(df.index)
    for col in SCORE_COLUMNS:
        kind = get_field(col).dtype
        if kind == "float64":
            assert out[col].dtype == np.float64, col
        else:
            assert pd.api.types.is_string_dtype(out[col]), col
    assert out["verdict"].iloc[0] == "unscored" and np.isnan(out["p_impact"].iloc[0])
    ok = out.iloc[1:]
    assert set(ok["verdict"]) <= {"impact", "discharge", "neither", "undecided"}
    assert ok["p_impact"].between(0, 1).all() and ok["typicality_spot"].between(0, 1).all()
    assert set(ok["spot_family"]) <= {"cathode_spot", "anode_spot"}
    lr = np.log10(ok["p_impact"] / (1 - ok["p_impact"]))
    np.testing.assert_allclose(ok["log10_lr"], lr, atol=1e-9)
    with pytest.warns(MorphoWarning, match="rim_sharpness"):
        partial = score_craters(df.drop(columns="rim_sharpness"), toy_model)
    assert partial["p_impact"].iloc[1:].notna().all()
    # A missing feature counts against typicality, never for it.
    assert (partial["typicality_impact"].iloc[1:] <= out["typicality_impact"].iloc[1:] + 1e-12).all()
    with pytest.raises(InputError, match="most of the model's feature columns"):
        score_craters(df[["radius_px", "depth_diameter_ratio"]], toy_model)


def test_spot_family_is_told_apart(toy_model, held_out):
    X, y = held_out
    spot = y != "impact"
    fam, p = toy_model.predict_spot_family(X[spot])
    assert np.mean(fam == y[spot]) > 0.9
    assert np.all((p >= 0.5) & (p <= 1.0))  # two families: the winner has at least half


def test_fit_refuses_bad_labels():
    X, y = toy_features(20, seed=3)
    with pytest.raises(ValueError, match="impact_label='crater'"):
        ImpactSpotClassifier(impact_label="crater").fit(X, y)
    with pytest.raises(ValueError, match="at least 2 classes"):
        ImpactSpotClassifier().fit(X, np.full(len(y), "impact"))


def test_same_seed_same_model(held_out):
    # Common practice: randomness only through random_state, so a rebuild is identical.
    X, y = toy_features(150, seed=6)
    a = ImpactSpotClassifier(random_state=3, max_iter=15).fit(X, y)
    b = ImpactSpotClassifier(random_state=3, max_iter=15).fit(X, y)
    Xh = held_out[0].iloc[:200]
    np.testing.assert_array_equal(a.predict_proba(Xh), b.predict_proba(Xh))
    np.testing.assert_array_equal(a.typicality(Xh), b.typicality(Xh))


def test_kth_distance_matches_scipy_kdtree():
    # Independent reference: scipy.spatial.KDTree (Virtanen et al. 2020, Nat. Methods 17:261).
    from scipy.spatial import KDTree

    from morpho.scoring._typicality import kth_distance

    rng = np.random.default_rng(0)
    A, B = rng.normal(size=(500, 30)), rng.normal(size=(300, 30))
    np.testing.assert_allclose(kth_distance(A, B, 5), KDTree(B).query(A, k=5)[0][:, -1], atol=1e-9)
    np.testing.assert_allclose(kth_distance(A, B, 3, p=np.inf), KDTree(B).query(A, k=3, p=np.inf)[0][:, -1])


def test_missing_feature_counts_as_departure(toy_model):
    # A crater with an unmeasurable feature is less typical than the same crater measured.
    row = fresh_pike_bowl(0.2)
    holed = row.copy()
    holed["rim_height_ratio"] = np.nan
    t = toy_model.typicality(pd.concat([row, holed], ignore_index=True))[:, 0]
    assert t[1] < t[0]
