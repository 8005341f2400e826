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


def test_scoring_methods_run_with_one_openmp_thread():
    # threadpoolctl (the reference for native thread pools): inside a scoring method every
    # OpenMP runtime scikit-learn loaded reports one thread, and the limit is lifted after.
    import sklearn.ensemble  # noqa: F401 - loads scikit-learn's OpenMP runtime
    from threadpoolctl import threadpool_info

    from morpho.scoring._estimator import _single_thread

    def openmp():
        return [p["num_threads"] for p in threadpool_info() if p["user_api"] == "openmp"]

    before = openmp()
    inside = _single_thread(openmp)()
    assert inside and set(inside) == {1}
    assert openmp() == before  # restored to what it was
    assert _single_thread(lambda: 7)() == 7
