"""Every entry point checks its input: bad input gets an error naming the parameter.

Each case used to fail with an internal error (AttributeError, IndexError, a numpy or
pandas message) or succeed silently with a wrong answer.
"""

import warnings

import numpy as np
import pandas as pd
import pytest
from sklearn.exceptions import NotFittedError
from sklearn.linear_model import LinearRegression

import hedgerow.diagnostics as D
from hedgerow import (
    HonestForestRegressor,
    LocalLinearForestRegressor,
    NadarayaWatsonRegressor,
)
from hedgerow.datasets import make_softplus_design


@pytest.fixture(scope="module")
def data():
    X, y, _ = make_softplus_design(n_samples=120, n_features=3, random_state=0)
    return X, y


@pytest.fixture(scope="module")
def llf(data):
    X, y = data
    return LocalLinearForestRegressor(n_estimators=20, random_state=0).fit(X, y)


@pytest.fixture(scope="module")
def forest(data):
    X, y = data
    return HonestForestRegressor(n_estimators=20, random_state=0).fit(X, y)


@pytest.fixture(scope="module")
def smoother(data):
    X, y = data
    return NadarayaWatsonRegressor(bandwidth=0.5).fit(X, y)


# -- diagnostics: models -------------------------------------------------------------------
@pytest.mark.parametrize("call", [
    lambda m, X: D.probe(m, X[0]),
    lambda m, X: D.slices(m, X[0], 0, [0.1, 0.5]),
    lambda m, X: D.edges(m),
    lambda m, X: D.coverage_readout(m, reps=1, progress=False),
], ids=["probe", "slices", "edges", "coverage"])
def test_unfitted_model_is_named(data, call):
    X, _ = data
    with pytest.raises(NotFittedError, match=r"'model(s)?' parameter must be a fitted .*"
                                             r"not fitted yet"):
        call(LocalLinearForestRegressor(), X)


@pytest.mark.parametrize("call", [
    lambda m, X: D.probe(m, X[0]),
    lambda m, X: D.coverage_readout(m, reps=1, progress=False),
], ids=["probe", "coverage"])
def test_wrong_estimator_type_is_named(data, call):
    X, y = data
    wrong = LinearRegression().fit(X, y)
    with pytest.raises(TypeError, match=r"'model' parameter must be a fitted "
                                        r".*Got LinearRegression instead"):
        call(wrong, X)


def test_estimator_class_instead_of_instance(data):
    X, _ = data
    with pytest.raises(TypeError, match="instance, not a class"):
        D.probe(LocalLinearForestRegressor, X[0])


def test_probe_compare_checks(data, llf, forest):
    X, y = data
    with pytest.raises(NotFittedError, match=r"'compare\[0\]'"):
        D.probe(llf, X[0], compare=[NadarayaWatsonRegressor()])
    with pytest.raises(TypeError, match=r"'compare\[0\]'.*Got LinearRegression"):
        D.probe(llf, X[0], compare=[LinearRegression().fit(X, y)])
    other = NadarayaWatsonRegressor(bandwidth=0.5).fit(X[:, :2], y)
    with pytest.raises(ValueError, match="'compare' parameter must hold models fitted on "
                                         "the same columns"):
        D.probe(llf, X[0], compare=[other])
    # a single smoother (not in a list) is accepted
    report = D.probe(forest, X[0], compare=NadarayaWatsonRegressor(bandwidth=0.5).fit(X, y))
    assert len(report.methods) == 2


@pytest.mark.parametrize("empty", [[], (), {}])
def test_empty_model_list(data, empty):
    X, _ = data
    with pytest.raises(ValueError, match="'models' parameter must hold at least one"):
        D.edges(empty)
    with pytest.raises(ValueError, match="'models' parameter must hold at least one"):
        D.slices(empty, X[0], 0, [0.2])


def test_models_not_a_collection(data):
    X, _ = data
    with pytest.raises(TypeError, match="'models' parameter must be a fitted model"):
        D.edges("forest")


# -- diagnostics: arrays -------------------------------------------------------------------
def test_edges_mis_shaped_rows(data, llf):
    X, y = data
    with pytest.raises(ValueError, match=r"'X' parameter must have shape \(120, 3\)"):
        D.edges(llf, X[:, :2], y)
    with pytest.raises(ValueError, match=r"'X' parameter must have shape \(120, 3\)"):
        D.edges(llf, X[:50], y[:50])
    with pytest.raises(ValueError, match="'y' parameter must hold 120 finite values"):
        D.edges(llf, X, y[:-1])
    with pytest.raises(TypeError, match="'y' parameter must hold numbers"):
        D.edges(llf, X, np.array(["a"] * 120, dtype=object))


def test_slices_background_and_grid(data, llf):
    X, _ = data
    with pytest.raises(ValueError, match=r"'background' parameter must have shape "
                                         r"\(n, 3\).*Got shape \(10, 2\)"):
        D.slices(llf, X[0], 0, [0.2, 0.4], average=True, background=X[:10, :2])
    with pytest.raises(ValueError, match=r"'background' parameter must have shape"):
        D.slices(llf, X[0], 0, [0.2, 0.4], average=True, background=X[0])
    with pytest.raises(TypeError, match="'grid' parameter must hold numbers. Got the value "
                                        "'low'"):
        D.slices(llf, X[0], 0, ["low", "high"])
    with pytest.raises(TypeError, match="'grid' parameter must hold numbers"):
        D.slices(llf, X[0], 0, "0.1")
    with pytest.raises(ValueError, match="'level' parameter"):
        D.slices(llf, X[0], 0, [0.1], level=95)
    ok = D.slices(llf, X[0], 0, [0.2, 0.4], average=True, background=X[:10])
    assert ok.frame.shape[0] == 2  # one model, two grid values


def test_tuning_surface_string_grids(data):
    X, y = data
    with pytest.raises(TypeError, match="'subsample_rates' parameter must hold numbers"):
        D.tuning_surface(X, y, ["0.2", "0.4"], [0.1], progress=False)
    with pytest.raises(TypeError, match="'ridge_penalties' parameter must hold numbers"):
        D.tuning_surface(X, y, [0.2], ["auto"], progress=False)


@pytest.mark.parametrize("n_eval", [0, -3, 2.5, True, "10"])
def test_coverage_n_eval_must_be_positive_integer(llf, n_eval):
    with pytest.raises(ValueError, match="'n_eval' parameter must be an integer >= 1"):
        D.coverage_readout(llf, reps=1, n_eval=n_eval, progress=False)


def test_edges_on_a_frame_fit_warns_nothing(data):
    X, y = data
    frame = pd.DataFrame(X, columns=["a", "b", "c"])
    llf = LocalLinearForestRegressor(n_estimators=20, random_state=0).fit(frame, y)
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        profile = D.edges(llf)
        D.slices(llf, frame.iloc[0], "a", [0.2, 0.5], average=True)
    assert profile.residuals.shape == (120, 1)


# -- estimators ----------------------------------------------------------------------------
def test_auto_penalty_needs_out_of_bag_rows(data, llf):
    X, y = data
    before = llf.predict(X[:5])
    model = LocalLinearForestRegressor(n_estimators=10, subsample_rate=1.0, trees_per_bag=1)
    with pytest.raises(ValueError, match="'ridge_penalty' parameter 'auto' .*no row is out "
                                         "of bag.*subsample_rate < 1"):
        model.fit(X, y)
    assert not hasattr(model, "forest_")
    # a numeric penalty needs no out-of-bag rows
    LocalLinearForestRegressor(n_estimators=10, subsample_rate=1.0, trees_per_bag=1,
                               ridge_penalty=0.1).fit(X, y)
    np.testing.assert_array_equal(llf.predict(X[:5]), before)
