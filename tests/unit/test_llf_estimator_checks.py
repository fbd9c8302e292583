"""scikit-learn API conformance of LocalLinearForestRegressor.

reference: sklearn.utils.estimator_checks.parametrize_with_checks (the scikit-learn
estimator contract). The default estimator too: on the checks' 10-15 row data sets its
trees cannot split and stay single leaves (warned), as in test_forest_estimator_checks.py;
min_samples_leaf=1 is the instance whose trees do split.
"""

from sklearn.utils.estimator_checks import parametrize_with_checks

from hedgerow import LocalLinearForestRegressor


@parametrize_with_checks(
    [
        LocalLinearForestRegressor(n_estimators=20),
        LocalLinearForestRegressor(n_estimators=20, min_samples_leaf=1),
        LocalLinearForestRegressor(n_estimators=20, min_samples_leaf=1, split_rule="mean",
                                   correction_features=None, ridge_penalty=0.1),
    ]
)
def test_sklearn_estimator_checks(estimator, check):
    check(estimator)
