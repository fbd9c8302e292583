"""scikit-learn API conformance of HonestForestRegressor.

reference: sklearn.utils.estimator_checks.parametrize_with_checks (the scikit-learn
estimator contract: get_params/set_params, clone, fitted attributes, input validation,
pickling, n_features_in_).
"""

import numpy as np
from sklearn.base import clone
from sklearn.model_selection import cross_val_score
from sklearn.pipeline import make_pipeline
from sklearn.preprocessing import StandardScaler
from sklearn.utils.estimator_checks import parametrize_with_checks

from hedgerow import HonestForestRegressor


# The checks fit 10-15 rows: with the default leaf constraint (min_samples_leaf=5 rows of
# each honest half) no tree can split, so every tree stays a single leaf (with a warning),
# as scikit-learn's trees do; the default estimator passes every check, like the
# min_samples_leaf=1 one that does split.
@parametrize_with_checks(
    [
        HonestForestRegressor(n_estimators=20),
        HonestForestRegressor(n_estimators=20, min_samples_leaf=1),
    ],
)
def test_sklearn_estimator_checks(estimator, check):
    check(estimator)


def test_clone_keeps_parameters_and_drops_fit(friedman_small):
    X, y = friedman_small
    est = HonestForestRegressor(n_estimators=20, subsample_rate=0.3, trees_per_bag=5,
                                min_samples_leaf=2, random_state=3).fit(X, y)
    twin = clone(est)
    assert twin.get_params() == est.get_params()
    assert not hasattr(twin, "forest_")
    np.testing.assert_array_equal(twin.fit(X, y).predict(X[:10]), est.predict(X[:10]))


def test_in_pipeline_and_cross_validation(friedman_small):
    X, y = friedman_small
    forest = HonestForestRegressor(n_estimators=20, random_state=0)
    pipe = make_pipeline(StandardScaler(), forest)
    # Tree partitions are invariant to an increasing affine map of each column (common
    # practice: CART depends on the order of values only), and the seed fixes the rows
    # and column draws, so the scaled pipeline cuts the training rows the same way.
    np.testing.assert_allclose(pipe.fit(X, y).predict(X), clone(forest).fit(X, y).predict(X),
                               rtol=1e-12, atol=1e-10)
    scores = cross_val_score(pipe, X, y, cv=3)
    # R^2 above 0: better than predicting the training mean on held-out folds
    assert np.all(np.isfinite(scores)) and scores.min() > 0.0
