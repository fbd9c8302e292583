"""Unit tests of LocalLinearForestRegressor (seeded, small forests)."""

import pickle

import numpy as np
import pandas as pd
import pytest
from scipy import sparse

from hedgerow import HonestForestRegressor, LocalLinearForestRegressor
from hedgerow.datasets import make_softplus_design
from hedgerow.local import local_moments, solve_local


@pytest.fixture(scope="module")
def design():
    X, y, _ = make_softplus_design(400, n_features=5, random_state=3)
    Xq, _, _ = make_softplus_design(60, n_features=5, random_state=4)
    return X, y, Xq


@pytest.fixture(scope="module")
def fitted(design):
    X, y, _ = design
    return LocalLinearForestRegressor(n_estimators=100, random_state=0).fit(X, y)


def test_infinite_ridge_equals_honest_forest(design):
    # With the slopes penalised away, the local line is the forest-weighted mean, which is
    # the honest forest's prediction (same seed, same sampling, CART splits).
    X, y, Xq = design
    params = dict(n_estimators=60, random_state=5, min_samples_leaf=3)
    hf = HonestForestRegressor(**params).fit(X, y)
    llf = LocalLinearForestRegressor(
        **params, split_rule="mean", ridge_penalty=1e10, correction_features=None
    ).fit(X, y)
    np.testing.assert_allclose(llf.predict(Xq), hf.predict(Xq), atol=1e-6)
    np.testing.assert_allclose(llf.oob_predict(), hf.oob_predict(), atol=1e-6)


def test_prediction_is_local_solve_on_forest_weights(design, fitted):
    X, y, Xq = design
    W = fitted.neighbour_weights(Xq)
    cols = fitted.correction_features_
    mom = local_moments(W, X[:, cols], y, Xq[:, cols], degree=1,
                        scale=fitted.correction_scale_)
    fit = solve_local(mom, fitted.ridge_penalty_)
    np.testing.assert_allclose(fitted.predict(Xq), fit.intercept, rtol=1e-12, atol=1e-12)
    np.testing.assert_allclose(fitted.local_slopes(Xq), fit.slopes, rtol=1e-12, atol=1e-12)


def test_oob_uses_only_trees_that_did_not_draw_the_row(design, fitted):
    # By construction: rebuild each row's out-of-bag weights from the trees whose
    # subsample excludes it, then solve locally with them.
    X, y, _ = design
    forest = fitted.forest_
    leaves = forest.apply(X)
    rows = np.arange(0, X.shape[0], 37)
    W_oob = fitted.oob_neighbour_weights()
    for i in rows:
        w = np.zeros(X.shape[0])
        used = 0
        for t in range(forest.n_trees):
            drawn = forest.sample_rows[forest.sample_ptr[t]:forest.sample_ptr[t + 1]]
            if i in drawn:
                continue
            leaf = leaves[i, t]
            members = forest.leaf_rows[forest.leaf_ptr[leaf]:forest.leaf_ptr[leaf + 1]]
            w[members] += 1.0 / members.size
            used += 1
        assert used > 0
        w /= used
        assert w[i] == 0.0
        np.testing.assert_allclose(W_oob[i].toarray().ravel(), w, atol=1e-12)
    cols = fitted.correction_features_
    mom = local_moments(W_oob, X[:, cols], y, X[:, cols], degree=1,
                        scale=fitted.correction_scale_)
    with pytest.warns(RuntimeWarning) if np.any(W_oob.sum(axis=1) == 0) else _null():
        fit = solve_local(mom, fitted.ridge_penalty_)
    np.testing.assert_allclose(fitted.oob_predict(), fit.intercept, atol=1e-10)


class _null:
    def __enter__(self):
        return self

    def __exit__(self, *a):
        return False


def test_ridge_override_matches_refit_when_trees_do_not_depend_on_it(design):
    # With CART splits the trees ignore the penalty, so re-solving cached moments with a
    # new penalty must equal a model fitted with that penalty.
    X, y, Xq = design
    base = dict(n_estimators=40, random_state=2, split_rule="mean", correction_features=[0, 1])
    auto = LocalLinearForestRegressor(**base).fit(X, y)
    fixed = LocalLinearForestRegressor(**base, ridge_penalty=0.5).fit(X, y)
    np.testing.assert_allclose(auto.predict(Xq, ridge_penalty=0.5), fixed.predict(Xq),
                               atol=1e-12)
    np.testing.assert_allclose(auto.oob_predict(ridge_penalty=0.5), fixed.oob_predict(),
                               atol=1e-12)


def test_auto_ridge_is_the_oob_argmin(fitted):
    path = fitted.ridge_path_
    assert path is not None
    best = path["ridge_penalty"][np.nanargmin(path["oob_mse"])]
    assert fitted.ridge_penalty_ == best
    oob = fitted.oob_predict()
    ok = ~np.isnan(oob)
    mse = np.mean((oob[ok] - fitted.y_train_[ok]) ** 2)
    assert mse == pytest.approx(np.nanmin(path["oob_mse"]), rel=1e-10)


def test_lasso_screening_finds_the_signal_column(fitted):
    # eq.-1 design: only X1 carries signal (Friedberg et al. 2021, eq. 1)
    assert 0 in fitted.correction_features_
    assert fitted.correction_features_.size <= 3


def test_correction_features_by_name_and_index(design):
    X, y, Xq = design
    cols = [f"c{j}" for j in range(X.shape[1])]
    df = pd.DataFrame(X, columns=cols)
    by_name = LocalLinearForestRegressor(
        n_estimators=20, random_state=0, correction_features=["c0", "c2"]
    ).fit(df, y)
    by_index = LocalLinearForestRegressor(
        n_estimators=20, random_state=0, correction_features=[2, 0]
    ).fit(X, y)
    np.testing.assert_array_equal(by_name.correction_features_, [0, 2])
    np.testing.assert_allclose(
        by_name.predict(pd.DataFrame(Xq, columns=cols)), by_index.predict(Xq), atol=1e-12
    )
    assert by_name.local_slopes(pd.DataFrame(Xq, columns=cols)).shape == (Xq.shape[0], 2)


def test_local_slope_recovers_a_linear_truth():
    rng = np.random.default_rng(0)
    X = rng.uniform(size=(600, 3))
    y = 3.0 * X[:, 0] - 2.0 * X[:, 1] + rng.normal(0, 0.1, 600)
    m = LocalLinearForestRegressor(
        n_estimators=100, random_state=0, correction_features=None, ridge_penalty=0.0
    ).fit(X, y)
    slopes = m.local_slopes(X[:50])
    np.testing.assert_allclose(np.median(slopes, axis=0), [3.0, -2.0, 0.0], atol=0.15)


def test_std_and_interval(design, fitted):
    _, _, Xq = design
    mean, std = fitted.predict(Xq, return_std=True)
    assert np.all(std > 0) and np.all(np.isfinite(std))
    lo, hi = fitted.predict_interval(Xq, level=0.9, method="clt")
    np.testing.assert_allclose((lo + hi) / 2, mean, atol=1e-12)
    lo95, hi95 = fitted.predict_interval(Xq, level=0.95, method="clt")
    assert np.all(hi95 - lo95 > hi - lo)
    _, oob_std = fitted.oob_predict(return_std=True)
    assert np.nanmin(oob_std) > 0


def test_std_needs_bags(design):
    X, y, Xq = design
    m = LocalLinearForestRegressor(n_estimators=10, trees_per_bag=1, random_state=0)
    m.fit(X, y)
    with pytest.raises(ValueError, match="trees_per_bag"):
        m.predict(Xq, return_std=True)
    with pytest.raises(ValueError, match="trees_per_bag"):
        m.predict_interval(Xq)


def test_weights_rows_sum_to_one(design, fitted):
    _, _, Xq = design
    W = fitted.neighbour_weights(Xq)
    assert sparse.issparse(W)
    np.testing.assert_allclose(np.asarray(W.sum(axis=1)).ravel(), 1.0, atol=1e-12)


def test_pickle_round_trip(design, fitted):
    _, _, Xq = design
    fitted.predict(Xq)  # fills the cache, which must not be pickled
    clone = pickle.loads(pickle.dumps(fitted))
    np.testing.assert_array_equal(clone.predict(Xq), fitted.predict(Xq))
    np.testing.assert_array_equal(clone.oob_predict(), fitted.oob_predict())


@pytest.mark.parametrize(
    "params, match",
    [
        ({"ridge_penalty": -1.0}, "ridge_penalty"),
        ({"ridge_penalty": np.inf}, "ridge_penalty"),
        ({"ridge_penalty": np.nan}, "ridge_penalty"),
        ({"ridge_penalty": "big"}, "ridge_penalty"),
        ({"correction_features": ["nope"]}, "correction_features"),
        ({"correction_features": [7]}, "correction_features"),
        ({"correction_features": []}, "correction_features"),
        ({"split_rule": "median"}, "split_rule"),
    ],
)
def test_bad_parameters(design, params, match):
    X, y, _ = design
    with pytest.raises((ValueError, TypeError), match=match):
        LocalLinearForestRegressor(n_estimators=10, **params).fit(X, y)


def test_unknown_name_lists_known_columns(design):
    X, y, _ = design
    df = pd.DataFrame(X, columns=[f"c{j}" for j in range(X.shape[1])])
    with pytest.raises(ValueError, match=r"unknown name 'zz'.*|known columns"):
        LocalLinearForestRegressor(n_estimators=10, correction_features=["zz"]).fit(df, y)


@pytest.mark.parametrize("level", [0.0, 1.0, -0.5, 1.5, np.nan, "95%"])
def test_bad_level(design, fitted, level):
    _, _, Xq = design
    with pytest.raises(ValueError, match="level"):
        fitted.predict_interval(Xq, level=level)


def test_bad_penalty_override(design, fitted):
    _, _, Xq = design
    with pytest.raises(ValueError, match="ridge_penalty"):
        fitted.predict(Xq, ridge_penalty=-0.1)


def test_failed_fit_keeps_earlier_model(design, fitted):
    X, y, Xq = design
    m = pickle.loads(pickle.dumps(fitted))
    before = m.predict(Xq)
    with pytest.raises(ValueError):
        m.set_params(ridge_penalty=-3.0).fit(X[:, :3], y)
    m.set_params(ridge_penalty="auto")
    np.testing.assert_array_equal(m.predict(Xq), before)
    assert m.n_features_in_ == X.shape[1]


def test_leaf_mean_linearisation_equals_row_by_row(design, fitted):
    # psi_t(x) = a + mean over leaf rows of c'[1, z] (y - a - b'z): the fast path expands
    # it into leaf means of the moment features; the reference path walks the rows.
    from hedgerow.inference import linearised_tree_predictions

    X, y, Xq = design
    leaves = fitted.forest_.apply(Xq)
    fit = fitted.local_fit(Xq)
    cols = fitted.correction_features_
    for row in range(fit.gram_inv.shape[1]):
        fast = fitted._tree_terms(leaves, None, Xq[:, cols], fit, row=row)
        coef = np.column_stack([fit.intercept, fit.slopes_std])
        slow = linearised_tree_predictions(
            leaves, None, fitted.forest_, X[:, cols], y, Xq[:, cols],
            fitted.correction_scale_, coef, fit.gram_inv[:, row, :],
        )
        np.testing.assert_allclose(fast, slow, rtol=1e-9, atol=1e-9)
    leaves_oob = fitted.forest_.apply(X)
    usable = ~fitted.forest_.inbag(np.arange(X.shape[0]))
    fit_oob = fitted._solve(fitted._oob_state()[3], fitted.ridge_penalty_)
    fast = fitted._tree_terms(leaves_oob, usable, X[:, cols], fit_oob)
    slow = linearised_tree_predictions(
        leaves_oob, usable, fitted.forest_, X[:, cols], y, X[:, cols],
        fitted.correction_scale_, np.nan_to_num(np.column_stack([fit_oob.intercept,
                                                                 fit_oob.slopes_std])),
        np.nan_to_num(fit_oob.gram_inv[:, 0, :]),
    )
    np.testing.assert_allclose(fast, slow, rtol=1e-9, atol=1e-9)


def test_shallow_copy_shares_fit_caches_and_pickle_drops_them(design, fitted):
    import copy

    fitted.oob_predict()
    view = copy.copy(fitted)
    assert view._fit_cache is fitted._fit_cache and "oob moments" in view._fit_cache
    clone = pickle.loads(pickle.dumps(fitted))
    assert clone._fit_cache == {}
