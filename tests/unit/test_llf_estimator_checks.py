"""scikit-learn API conformance of LocalLinearForestRegressor.

reference: sklearn.utils.estimator_checks.parametrize_with_checks (the scikit-learn
estimator contract). min_samples_leaf=1 so that the checks' 10-15 row data sets satisfy
the honest leaf constraint (see test_forest_estimator_checks.py for the default).
"""

from sklearn.utils.estimator_checks import parametrize_with_checks

from hedgerow import LocalLinearForestRegressor


@parametrize_with_checks(
    [
        LocalLinearForestRegressor(n_estimators=20, min_samples_leaf=1),
        LocalLinearForestRegressor(n_estimators=20, min_samples_leaf=1, split_rule="mean",
                                   correction_features=None, ridge_penalty=0.1),
    ]
)
def test_sklearn_estimator_checks(estimator, check):
    check(estimator)
