"""Bad input to HonestForestRegressor: one test per case, each asserting its message.

Messages name the parameter or column, what was expected and what was received.
"""

import warnings

import numpy as np
import pandas as pd
import pytest

from hedgerow import HonestForestRegressor
from hedgerow.estimators._forest import TinyDataWarning


@pytest.fixture(scope="module")
def Xy():
    rng = np.random.default_rng(0)
    X = rng.random((120, 3))
    y = X[:, 0] + 0.1 * rng.normal(size=120)
    return X, y


@pytest.fixture(scope="module")
def frame(Xy):
    X, y = Xy
    return pd.DataFrame(X, columns=["alpha", "beta", "gamma"]), y


def _est(**kw):
    kw.setdefault("n_estimators", 20)
    kw.setdefault("random_state", 0)
    return HonestForestRegressor(**kw)


# -- X and y contents ---------------------------------------------------------------------

def test_nan_in_X(Xy):
    X, y = Xy
    X = X.copy()
    X[4, 1] = np.nan
    with pytest.raises(ValueError, match="Input X contains NaN"):
        _est().fit(X, y)


def test_inf_in_X(Xy):
    X, y = Xy
    X = X.copy()
    X[4, 1] = np.inf
    with pytest.raises(ValueError, match="Input X contains infinity"):
        _est().fit(X, y)


def test_nan_in_y(Xy):
    X, y = Xy
    y = y.copy()
    y[7] = np.nan
    with pytest.raises(ValueError, match="Input y contains NaN"):
        _est().fit(X, y)


def test_inf_in_y(Xy):
    X, y = Xy
    y = y.copy()
    y[7] = -np.inf
    with pytest.raises(ValueError, match="Input y contains infinity"):
        _est().fit(X, y)


def test_nan_in_X_at_predict(Xy):
    X, y = Xy
    est = _est().fit(X, y)
    Xq = X[:3].copy()
    Xq[0, 0] = np.nan
    with pytest.raises(ValueError, match="Input X contains NaN"):
        est.predict(Xq)


def test_three_dimensional_X(Xy):
    X, y = Xy
    with pytest.raises(ValueError, match=r"X must be 2-dimensional.*Got an array with 3 "
                                         r"dimensions, of shape \(120, 3, 1\)"):
        _est().fit(X[:, :, None], y)


def test_three_dimensional_X_at_predict(Xy):
    X, y = Xy
    est = _est().fit(X, y)
    with pytest.raises(ValueError, match="X must be 2-dimensional.*3 dimensions"):
        est.predict(X[:5, :, None])


def test_one_dimensional_X(Xy):
    X, y = Xy
    with pytest.raises(ValueError, match="Expected 2D array, got 1D array instead"):
        _est().fit(X[:, 0], y)


def test_two_column_y(Xy):
    X, y = Xy
    with pytest.raises(ValueError, match=r"y should be a 1d array, got an array of shape "
                                         r"\(120, 2\) instead"):
        _est().fit(X, np.c_[y, y])


def test_strings_in_X(Xy):
    X, y = Xy
    Xs = X.astype(object)
    Xs[3, 2] = "high"
    with pytest.raises(ValueError, match="X must hold numbers only. Got the non-numeric "
                                         "value 'high' instead"):
        _est().fit(Xs, y)


def test_strings_in_y(Xy):
    X, y = Xy
    ys = np.array(["low"] * y.size)
    with pytest.raises(ValueError, match="y must hold numbers only. Got the non-numeric "
                                         "value 'low' instead"):
        _est().fit(X, ys)


def test_string_column_of_dataframe_is_named(frame):
    df, y = frame
    df = df.assign(beta=["b"] * len(df))
    with pytest.raises(ValueError, match="Column 'beta' of X must hold numbers only. Got the "
                                         "non-numeric value 'b' instead"):
        _est().fit(df, y)


def test_strings_at_predict(Xy):
    X, y = Xy
    est = _est().fit(X, y)
    with pytest.raises(ValueError, match="X must hold numbers only.*'z'"):
        est.predict([[0.1, "z", 0.3]])


def test_numeric_strings_are_numbers(Xy):
    # like scikit-learn, strings that spell numbers convert
    X, y = Xy
    est = _est().fit(X, y)
    assert est.predict([["0.1", "0.2", "0.3"]]) == pytest.approx(est.predict([[0.1, 0.2, 0.3]]))


def test_empty_data():
    with pytest.raises(ValueError, match=r"Found array with 0 sample\(s\).*minimum of 2"):
        _est().fit(np.empty((0, 3)), np.empty(0))


def test_one_row():
    with pytest.raises(ValueError, match=r"Found array with 1 sample\(s\).*minimum of 2"):
        _est().fit(np.ones((1, 3)), np.ones(1))


def test_y_length_mismatch(Xy):
    X, y = Xy
    with pytest.raises(ValueError, match=r"y must have one value per row of X \(120 rows\). "
                                         r"Got 60 values instead"):
        _est().fit(X, y[:60])


def test_y_none(Xy):
    X, _ = Xy
    with pytest.raises(ValueError, match="requires y to be passed"):
        _est().fit(X, None)


def test_fewer_rows_than_honest_leaf_constraint_allows(Xy):
    # 15 rows, rate 0.5: a tree gets 7 rows, 3 to place splits and 4 to fill leaves; as
    # scikit-learn's trees do on such data, every tree stays a single leaf (warned)
    X, y = Xy
    with pytest.warns(TinyDataWarning, match=r"Too few rows to split: with n=15 rows.*3 rows "
                                             r"to place splits and 4 to fill leaves, but a "
                                             r"split needs 2 \* min_samples_leaf = 10"):
        est = _est(trees_per_bag=1).fit(X[:15], y[:15])
    assert np.all(est.forest_.feature == -1)  # single leaves
    np.testing.assert_allclose(est.predict(X[:3]), est.predict(X[3:6]))


def test_fewer_rows_than_classical_leaf_constraint_allows(Xy):
    X, y = Xy
    with pytest.warns(TinyDataWarning, match=r"n=12 rows.*honest=False, a tree has 6 rows to "
                                             r"place splits and 6 to fill leaves"):
        est = _est(honest=False, min_samples_leaf=7).fit(X[:12], y[:12])
    assert np.all(est.forest_.feature == -1)


def test_no_tiny_data_warning_when_trees_can_split(Xy):
    import warnings

    X, y = Xy
    with warnings.catch_warnings():
        warnings.simplefilter("error", TinyDataWarning)
        est = _est(trees_per_bag=1).fit(X[:40], y[:40])  # 20 rows: 10 + 10, leaf 5
    assert np.any(est.forest_.feature >= 0)


def test_smallest_data_the_leaf_constraint_allows(Xy):
    # the boundary of the case above: 20 rows, rate 0.5 -> 10 rows, 5 + 5, leaf 5: fits
    X, y = Xy
    est = _est(trees_per_bag=1).fit(X[:20], y[:20])
    assert np.diff(est.forest_.leaf_ptr).min() >= 5


# -- parameters -----------------------------------------------------------------------------

@pytest.mark.parametrize("rate", [0.0, -0.1, 1.5])
def test_subsample_rate_outside_unit_interval(Xy, rate):
    X, y = Xy
    with pytest.raises(ValueError, match=r"'subsample_rate' parameter of HonestForestRegressor "
                                         r"must be a float in the range \(0.0, 1.0\]. Got "
                                         + repr(rate) + " instead"):
        _est(subsample_rate=rate).fit(X, y)


def test_subsample_rate_above_half_with_bags(Xy):
    X, y = Xy
    with pytest.raises(ValueError, match=r"'subsample_rate' parameter must be at most 0.5 when "
                                         r"trees_per_bag >= 2.*Got 0.7 instead "
                                         r"\(trees_per_bag=4\)"):
        _est(subsample_rate=0.7, trees_per_bag=4).fit(X, y)


def test_subsample_rate_above_half_without_bags_is_fine(Xy):
    X, y = Xy
    est = _est(subsample_rate=0.7, trees_per_bag=1).fit(X, y)
    assert est.subsample_size_ == 84


def test_trees_per_bag_not_dividing_n_estimators(Xy):
    X, y = Xy
    with pytest.raises(ValueError, match="'trees_per_bag' parameter must divide "
                                         "n_estimators=20.*Got 3 instead"):
        _est(trees_per_bag=3).fit(X, y)


def test_trees_per_bag_larger_than_n_estimators(Xy):
    X, y = Xy
    with pytest.raises(ValueError, match="must divide n_estimators=20.*Got 40 instead"):
        _est(trees_per_bag=40).fit(X, y)


@pytest.mark.parametrize("value", [0, "pairs"])
def test_trees_per_bag_invalid(Xy, value):
    X, y = Xy
    with pytest.raises(ValueError, match=r"'trees_per_bag' parameter of HonestForestRegressor "
                                         r"must be a str among \{'auto'\} or an int.*Got "
                                         + repr(value) + " instead"):
        _est(trees_per_bag=value).fit(X, y)


def test_max_features_above_number_of_columns(Xy):
    X, y = Xy
    with pytest.raises(ValueError, match=r"'max_features' parameter must be at most the number "
                                         r"of columns \(3\). Got 5 instead"):
        _est(max_features=5).fit(X, y)


@pytest.mark.parametrize("value", [0.0, 1.5, -1])
def test_max_features_invalid(Xy, value):
    X, y = Xy
    with pytest.raises(ValueError, match="'max_features' parameter of HonestForestRegressor "
                                         "must be None, an int.*Got " + repr(value)):
        _est(max_features=value).fit(X, y)


@pytest.mark.parametrize("value", [2.5, "20", 20.0, None])
def test_non_integer_n_estimators(Xy, value):
    X, y = Xy
    with pytest.raises(ValueError, match=r"'n_estimators' parameter of HonestForestRegressor "
                                         r"must be an int in the range \[1, inf\). Got "
                                         + repr(value) + " instead"):
        _est(n_estimators=value).fit(X, y)


def test_zero_n_estimators(Xy):
    X, y = Xy
    with pytest.raises(ValueError, match=r"'n_estimators'.*\[1, inf\). Got 0 instead"):
        _est(n_estimators=0).fit(X, y)


def test_bool_n_estimators(Xy):
    # bug fixed: True used to pass the Integral constraint and crash in the sampling plan
    X, y = Xy
    with pytest.raises(ValueError, match="'n_estimators' parameter of HonestForestRegressor "
                                         "must be an int, not a bool. Got True instead"):
        _est(n_estimators=True).fit(X, y)


def test_bool_min_samples_leaf(Xy):
    X, y = Xy
    with pytest.raises(ValueError, match="'min_samples_leaf'.*not a bool. Got True instead"):
        _est(min_samples_leaf=True).fit(X, y)


def test_numpy_integer_parameters_are_accepted(Xy):
    X, y = Xy
    est = _est(n_estimators=np.int64(20), min_samples_leaf=np.int32(3),
               trees_per_bag=np.int64(4)).fit(X, y)
    assert est.forest_.n_trees == 20 and est.trees_per_bag_ == 4


def test_min_samples_leaf_zero(Xy):
    X, y = Xy
    with pytest.raises(ValueError, match=r"'min_samples_leaf'.*\[1, inf\). Got 0 instead"):
        _est(min_samples_leaf=0).fit(X, y)


def test_max_depth_zero(Xy):
    X, y = Xy
    with pytest.raises(ValueError, match=r"'max_depth'.*must be None or an int in the range "
                                         r"\[1, inf\). Got 0 instead"):
        _est(max_depth=0).fit(X, y)


def test_honest_not_bool(Xy):
    X, y = Xy
    with pytest.raises(ValueError, match="'honest' parameter.*bool.*Got 'yes' instead"):
        _est(honest="yes").fit(X, y)


@pytest.mark.parametrize("level", [0.0, 1.0, 95, "0.9"])
def test_interval_level_outside_unit_interval(Xy, level):
    X, y = Xy
    est = _est(trees_per_bag=4).fit(X, y)
    with pytest.raises(ValueError, match=r"'level' parameter must be a float in the open "
                                         r"interval \(0, 1\).*Got " + repr(level)):
        est.predict_interval(X[:3], level=level)


# -- predicting -----------------------------------------------------------------------------

def test_predict_before_fit(Xy):
    X, _ = Xy
    with pytest.raises(ValueError, match="This HonestForestRegressor instance is not fitted"):
        _est().predict(X)


def test_predict_with_wrong_number_of_columns(Xy):
    X, y = Xy
    est = _est().fit(X, y)
    with pytest.raises(ValueError, match="X has 2 features, but HonestForestRegressor is "
                                         "expecting 3 features"):
        est.predict(X[:, :2])


def test_predict_with_columns_in_wrong_order(frame):
    df, y = frame
    est = _est().fit(df, y)
    with pytest.raises(ValueError, match="Feature names must be in the same order as they "
                                         "were in fit"):
        est.predict(df[["beta", "alpha", "gamma"]])


def test_predict_with_missing_named_column(frame):
    df, y = frame
    est = _est().fit(df, y)
    with pytest.raises(ValueError, match="Feature names seen at fit time, yet now "
                                         "missing:\n- gamma"):
        est.predict(df[["alpha", "beta"]])


def test_predict_with_extra_named_column(frame):
    df, y = frame
    est = _est().fit(df, y)
    with pytest.raises(ValueError, match="Feature names unseen at fit time:\n- delta"):
        est.predict(df.assign(delta=1.0))


def test_predict_with_renamed_column(frame):
    df, y = frame
    est = _est().fit(df, y)
    with pytest.raises(ValueError, match="unseen at fit time:\n- g\n.*missing:\n- gamma"):
        est.predict(df.rename(columns={"gamma": "g"}))


def test_named_columns_are_remembered(frame):
    df, y = frame
    est = _est().fit(df, y)
    np.testing.assert_array_equal(est.feature_names_in_, ["alpha", "beta", "gamma"])
    assert est.n_features_in_ == 3
    # same columns in the same order: same predictions as the bare array
    np.testing.assert_array_equal(est.predict(df.iloc[:5]),
                                  _est().fit(df.to_numpy(), y).predict(df.to_numpy()[:5]))


def test_unnamed_query_after_named_fit_warns(frame):
    df, y = frame
    est = _est().fit(df, y)
    with pytest.warns(UserWarning, match="X does not have valid feature names"):
        est.predict(df.to_numpy()[:3])


# -- a failed fit changes nothing ----------------------------------------------------------

def _snapshot(est):
    return {k: v for k, v in vars(est).items()}


def _assert_same_state(before, after):
    assert before.keys() == after.keys()
    for k, v in before.items():
        # the very same objects: nothing was rebuilt or overwritten
        assert after[k] is v, k


def _bad_fits(df, y):
    X = df.to_numpy()
    X_nan = X.copy()
    X_nan[0, 0] = np.nan
    renamed = df.rename(columns={"alpha": "a", "beta": "b", "gamma": "c"})
    return {
        "nan": (X_nan, y),
        "three_d": (X[:, :, None], y),
        "length": (X, y[:10]),
        "strings": (df.assign(beta=["s"] * len(df)), y),
        # pass scikit-learn's checks (which reset the column names and count) and then
        # fail the forest's own cross-check (max_features=3 > 2 columns), so the names
        # written on the way must be rolled back (tiny data no longer fails: it warns)
        "two_columns_renamed": (renamed[["a", "b"]], y),
        "two_columns": (df[["alpha", "beta"]].iloc[:12], y[:12]),
    }


@pytest.mark.parametrize(
    "case", ["nan", "three_d", "length", "strings", "two_columns_renamed", "two_columns"],
)
def test_failed_fit_leaves_fitted_model_intact(frame, case):
    df, y = frame
    est = _est(trees_per_bag=4, max_features=3).fit(df, y)
    Xq = df.iloc[:20]
    pred = est.predict(Xq)
    mean, std = est.predict(Xq, return_std=True)
    before = _snapshot(est)
    X_bad, y_bad = _bad_fits(df, y)[case]
    with pytest.raises(ValueError):
        est.fit(X_bad, y_bad)
    _assert_same_state(before, _snapshot(est))
    np.testing.assert_array_equal(est.feature_names_in_, ["alpha", "beta", "gamma"])
    assert est.n_features_in_ == 3
    np.testing.assert_array_equal(est.predict(Xq), pred)
    np.testing.assert_array_equal(est.predict(Xq, return_std=True)[1], std)


def test_failed_fit_with_bad_parameter_leaves_fitted_model_intact(frame):
    df, y = frame
    est = _est(trees_per_bag=4).fit(df, y)
    pred = est.predict(df)
    est.set_params(trees_per_bag=3)
    before = _snapshot(est)
    with pytest.raises(ValueError, match="must divide"):
        est.fit(df, y)
    _assert_same_state(before, _snapshot(est))
    np.testing.assert_array_equal(est.predict(df), pred)


def test_failed_first_fit_leaves_estimator_unfitted(Xy):
    X, y = Xy
    est = _est(max_features=X.shape[1] + 1)  # fails after validate_data wrote attributes
    with pytest.raises(ValueError, match="'max_features' parameter must be at most"):
        est.fit(X, y)
    assert not hasattr(est, "n_features_in_")
    with pytest.raises(ValueError, match="not fitted"):
        est.predict(X)


def test_fast_predict_path_keeps_the_checks_of_the_general_one():
    """Well-formed float64 input skips scikit-learn's general checks; everything else
    still gets them: wrong names or order raise, a plain array for a named fit warns,
    NaN raises, and the values reaching the model are the same either way."""

    from hedgerow._validation import _fast_predict_data, check_predict_data

    rng = np.random.default_rng(0)
    X = rng.uniform(size=(120, 3))
    y = X[:, 0] + rng.normal(0, 0.1, 120)
    frame = pd.DataFrame(X, columns=["a", "b", "c"])
    named = HonestForestRegressor(n_estimators=10, random_state=0).fit(frame, y)
    plain = HonestForestRegressor(n_estimators=10, random_state=0).fit(X, y)
    np.testing.assert_array_equal(_fast_predict_data(plain, X[:5]), X[:5])
    np.testing.assert_array_equal(_fast_predict_data(named, frame.iloc[:5]), X[:5])
    assert _fast_predict_data(named, frame[["b", "a", "c"]]) is None
    assert _fast_predict_data(named, X[:5]) is None
    assert _fast_predict_data(plain, X[:5, :2]) is None
    with pytest.raises(ValueError, match="feature names"):
        check_predict_data(named, frame[["b", "a", "c"]])
    with pytest.warns(UserWarning, match="valid feature names"):
        check_predict_data(named, X[:5])
    bad = X[:5].copy()
    bad[2, 1] = np.nan
    assert _fast_predict_data(plain, bad) is None
    with pytest.raises(ValueError, match="NaN"):
        check_predict_data(plain, bad)
    np.testing.assert_array_equal(named.predict(frame.iloc[:7]), plain.predict(X[:7]))


# -- few little bags (issue: intervals) ---------------------------------------------------
def test_few_little_bags_warn_with_the_width_cost_and_the_tree_count_to_grow():
    # 60 trees fall into 2 bags of 30: the variance has 1 degree of freedom and the
    # Student-t 95% quantile is 12.71 / 1.96 = 6.5x the normal one (t tables)
    import re

    from hedgerow.estimators import MIN_INTERVAL_BAGS, FewBagsWarning

    rng = np.random.default_rng(0)
    X = rng.uniform(size=(300, 3))
    y = X[:, 0] + rng.normal(scale=0.1, size=300)
    with pytest.warns(FewBagsWarning) as rec:
        few = HonestForestRegressor(n_estimators=60, random_state=0).fit(X, y)
    msg = str(rec[0].message)
    assert few.trees_per_bag_ == 30
    assert "2 bags" in msg and "n_estimators=60" in msg and "trees_per_bag=30" in msg
    assert float(re.search(r"at least ([0-9.]+)x", msg).group(1)) == pytest.approx(6.48,
                                                                                  abs=0.01)
    assert f"n_estimators >= {MIN_INTERVAL_BAGS * 30}" in msg
    # predictions are those of the same forest without the warning: it changes nothing
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", FewBagsWarning)
        again = HonestForestRegressor(n_estimators=60, random_state=0).fit(X, y)
    np.testing.assert_array_equal(few.predict(X[:20]), again.predict(X[:20]))


@pytest.mark.parametrize("params", [
    {"n_estimators": 200},                      # 8 bags of 25: the explorer's default
    {"n_estimators": 60, "trees_per_bag": 1},   # no bags asked for: no intervals to warn of
    {"n_estimators": 7},                        # a prime: "auto" gives bags of 1
])
def test_enough_bags_or_none_do_not_warn(params):
    from hedgerow.estimators import FewBagsWarning

    rng = np.random.default_rng(1)
    X = rng.uniform(size=(200, 2))
    y = X[:, 0] + rng.normal(scale=0.1, size=200)
    with warnings.catch_warnings():
        warnings.simplefilter("error", FewBagsWarning)
        HonestForestRegressor(random_state=0, **params).fit(X, y)
