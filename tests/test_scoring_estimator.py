"""scikit-learn's own conformance suite for ImpactSpotClassifier.

Reference: sklearn.utils.estimator_checks.parametrize_with_checks (Pedregosa et al.
2011, JMLR 12:2825; the scikit-learn developers' estimator contract). No check is
expected to fail. ``impact_label=None`` lets the generic checks use arbitrary labels
(the first class in sorted order plays the impact hypothesis).
"""

from __future__ import annotations

from sklearn.utils.estimator_checks import parametrize_with_checks

from morpho.scoring import ImpactSpotClassifier


@parametrize_with_checks([ImpactSpotClassifier(impact_label=None, max_iter=20, random_state=0)])
def test_sklearn_estimator_checks(estimator, check):
    check(estimator)
