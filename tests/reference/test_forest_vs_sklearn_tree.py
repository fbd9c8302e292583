"""A classical tree of the engine reproduces scikit-learn's CART partition.

With ``honest=False, subsample_rate=1.0, trees_per_bag=1, n_estimators=1`` and every column
searched at every node (``max_features=None`` is all columns for d <= 10), the single tree
sees all rows in both roles, so it must be
``sklearn.tree.DecisionTreeRegressor(min_samples_leaf=k)`` fitted on the same rows.

scikit-learn splits on float32 values, so X is rounded to float32 first (both builders
then see identical values and place thresholds at the same midpoints). Both builders take
the first best split in the order they draw columns, and they draw columns in different
orders; where two columns give exactly the same reduction (common in tiny nodes, and in
the diabetes data, whose target is integer and whose ``sex`` column has two values) they
may pick different columns. The training rows are still cut the same way in nodes of two
rows, so training predictions agree for every k, but new points can fall differently; new
points are therefore compared at k = 20, where no such ties occur in these data.
"""

import numpy as np
import pytest
from sklearn.datasets import load_diabetes, make_friedman1
from sklearn.tree import DecisionTreeRegressor

from hedgerow import HonestForestRegressor


def _as_float32_values(X):
    return np.asarray(X, dtype=np.float32).astype(np.float64)


@pytest.fixture(scope="module", params=["diabetes", "friedman1"])
def data(request):
    if request.param == "diabetes":
        # reference dataset: sklearn.datasets.load_diabetes (Efron et al. 2004)
        X, y = load_diabetes(return_X_y=True)
    else:
        # reference design: sklearn.datasets.make_friedman1 (Friedman 1991)
        X, y = make_friedman1(n_samples=500, n_features=10, noise=1.0, random_state=0)
    X = _as_float32_values(X)
    rng = np.random.default_rng(42)
    lo, hi = X.min(axis=0), X.max(axis=0)
    pad = 0.1 * (hi - lo)
    X_new = _as_float32_values(rng.uniform(lo - pad, hi + pad, size=(400, X.shape[1])))
    return X, np.asarray(y, dtype=np.float64), X_new


def _classical_tree(X, y, **kw):
    return HonestForestRegressor(
        n_estimators=1, honest=False, subsample_rate=1.0, trees_per_bag=1,
        max_features=None, random_state=0, **kw,
    ).fit(X, y)


def _same_partition(a, b):
    """True if leaf labels ``a`` and ``b`` group the rows identically."""
    pairs = set(zip(a.tolist(), b.tolist(), strict=True))
    return len(pairs) == len(set(a.tolist())) == len(set(b.tolist()))


@pytest.mark.parametrize("k", [1, 5, 20])
def test_training_predictions_match_decision_tree(data, k):
    X, y, _ = data
    ours = _classical_tree(X, y, min_samples_leaf=k)
    # reference: sklearn.tree.DecisionTreeRegressor (same CART partition)
    ref = DecisionTreeRegressor(min_samples_leaf=k, random_state=0).fit(X, y)
    assert ours.max_features_ == X.shape[1]
    np.testing.assert_allclose(ours.predict(X), ref.predict(X), rtol=0, atol=1e-10)
    assert ours.forest_.leaf_ptr.size - 1 == ref.get_n_leaves()


@pytest.mark.parametrize("k", [5, 20])
def test_training_partition_matches_decision_tree(data, k):
    X, y, _ = data
    ours = _classical_tree(X, y, min_samples_leaf=k)
    # reference: sklearn.tree.DecisionTreeRegressor.apply (leaf of every training row)
    ref = DecisionTreeRegressor(min_samples_leaf=k, random_state=0).fit(X, y)
    assert _same_partition(ours.forest_.apply(X)[:, 0], ref.apply(X))
    # leaf sizes respect the constraint on both sides
    assert np.diff(ours.forest_.leaf_ptr).min() >= k


def test_new_point_predictions_match_decision_tree(data):
    X, y, X_new = data
    ours = _classical_tree(X, y, min_samples_leaf=20)
    # reference: sklearn.tree.DecisionTreeRegressor (same CART partition, same thresholds)
    ref = DecisionTreeRegressor(min_samples_leaf=20, random_state=0).fit(X, y)
    np.testing.assert_allclose(ours.predict(X_new), ref.predict(X_new), rtol=0, atol=1e-10)
    np.testing.assert_array_equal(
        np.sort(ours.forest_.threshold[ours.forest_.feature >= 0]),
        np.sort(ref.tree_.threshold[ref.tree_.feature >= 0]),
    )


@pytest.mark.parametrize("depth", [1, 2, 3, 5])
def test_max_depth_matches_decision_tree_on_training_rows(data, depth):
    X, y, _ = data
    ours = _classical_tree(X, y, min_samples_leaf=1, max_depth=depth)
    # reference: sklearn.tree.DecisionTreeRegressor(max_depth=...) (same CART partition)
    ref = DecisionTreeRegressor(max_depth=depth, random_state=0).fit(X, y)
    np.testing.assert_allclose(ours.predict(X), ref.predict(X), rtol=0, atol=1e-10)
    assert ours.forest_.leaf_ptr.size - 1 == ref.get_n_leaves()


@pytest.mark.parametrize("depth", [2, 4, 8])
def test_max_depth_matches_decision_tree_on_new_points(data, depth):
    X, y, X_new = data
    ours = _classical_tree(X, y, min_samples_leaf=20, max_depth=depth)
    # reference: sklearn.tree.DecisionTreeRegressor(max_depth=..., min_samples_leaf=20)
    ref = DecisionTreeRegressor(max_depth=depth, min_samples_leaf=20, random_state=0).fit(X, y)
    np.testing.assert_allclose(ours.predict(X_new), ref.predict(X_new), rtol=0, atol=1e-10)
    assert ours.forest_.leaf_ptr.size - 1 == ref.get_n_leaves()


def test_unrounded_float64_inputs_still_match_on_training_rows():
    # Without rounding, scikit-learn compares float32 copies; a tree on make_friedman1's
    # continuous columns still cuts the training rows the same way (no ties in float32).
    X, y = make_friedman1(n_samples=300, n_features=5, noise=1.0, random_state=3)
    ours = _classical_tree(X, y, min_samples_leaf=5)
    # reference: sklearn.tree.DecisionTreeRegressor (same CART partition)
    ref = DecisionTreeRegressor(min_samples_leaf=5, random_state=0).fit(X, y)
    assert _same_partition(ours.forest_.apply(X)[:, 0], ref.apply(X))
