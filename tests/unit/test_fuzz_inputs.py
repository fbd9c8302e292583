"""Fuzz of the public estimators and diagnostics with hostile inputs (hypothesis).

Random shapes, dtypes, magnitudes (1e-300 .. 1e300), NaN/inf patterns and constant or
duplicated columns. The only accepted outcomes: a result (finite predictions for finite
input), a ``ValueError`` / ``TypeError`` whose message names what was wrong, or one of the
documented warnings. Anything else (AttributeError, IndexError, ZeroDivisionError, a NaN
prediction without a warning, ...) fails.
"""

import warnings

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

import hedgerow.diagnostics as D
from hedgerow import (
    HonestForestRegressor,
    LocalLinearForestRegressor,
    LocalLinearRegressor,
    NadarayaWatsonRegressor,
)
from hedgerow.estimators import TinyDataWarning

_FUZZ = settings(max_examples=30, deadline=None,
                 suppress_health_check=[HealthCheck.too_slow, HealthCheck.data_too_large])

_MAKERS = {
    "forest": lambda: HonestForestRegressor(n_estimators=8, random_state=0),
    "llf": lambda: LocalLinearForestRegressor(n_estimators=8, random_state=0),
    "nw": lambda: NadarayaWatsonRegressor(bandwidth=0.5),
    "ll": lambda: LocalLinearRegressor(bandwidth=0.8),
}


@st.composite
def inputs(draw):
    n = draw(st.integers(0, 40))
    d = draw(st.integers(0, 4))
    rng = np.random.default_rng(draw(st.integers(0, 2**16)))
    X = rng.normal(size=(n, d)) * draw(st.sampled_from([1e-300, 1e-12, 1.0, 1e12, 1e300]))
    y = rng.normal(size=n) * draw(st.sampled_from([1e-300, 1e-8, 1.0, 1e8, 1e300]))
    if n and d and draw(st.booleans()):
        X[:, draw(st.integers(0, d - 1))] = 3.0  # a constant column
    if n and d and draw(st.booleans()):
        X[draw(st.integers(0, n - 1)), draw(st.integers(0, d - 1))] = draw(
            st.sampled_from([np.nan, np.inf, -np.inf]))
    if n and draw(st.booleans()):
        y[draw(st.integers(0, n - 1))] = draw(st.sampled_from([np.nan, np.inf]))
    kind = draw(st.sampled_from(["float64", "float32", "int64", "object", "str"]))
    if kind == "str":
        X = X.astype(str)
    elif kind == "object":
        X = X.astype(object)
    elif kind == "int64":
        X = np.nan_to_num(X, posinf=0, neginf=0).clip(-1e9, 1e9).astype(np.int64)
    else:
        with np.errstate(over="ignore"):  # 1e300 is inf in float32 (refused by fit)
            X = X.astype(kind)
    if draw(st.booleans()):
        X = X.ravel() if draw(st.booleans()) else X[..., None]  # wrong dimensions
    return X, y


def _finite_input(X, y):
    try:
        A = np.asarray(X, dtype=np.float64)
    except (TypeError, ValueError):
        return False
    return A.ndim == 2 and np.isfinite(A).all() and np.isfinite(y).all()


@pytest.mark.parametrize("which", sorted(_MAKERS))
@_FUZZ
@given(case=inputs())
def test_estimators_answer_or_refuse_clearly(which, case):
    X, y = case
    est = _MAKERS[which]()
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", RuntimeWarning)  # documented: overflow, fallback
        warnings.simplefilter("ignore", TinyDataWarning)  # documented: no tree can split
        try:
            est.fit(X, y)
        except (ValueError, TypeError) as err:
            assert str(err).strip(), "an error without a message"
            return
        assert _finite_input(X, y)  # nothing non-finite or non-numeric got through
        A = np.asarray(X, dtype=np.float64)
        pred = est.predict(A)
        assert pred.shape == (A.shape[0],)
    if which in ("forest", "llf") and np.abs(A).max() < 1e150 and np.abs(y).max() < 1e150:
        assert np.all(np.isfinite(pred))


@_FUZZ
@given(case=inputs(), grid=st.one_of(
    st.lists(st.floats(allow_nan=True, allow_infinity=True), max_size=4),
    st.lists(st.text(max_size=3), min_size=1, max_size=3)),
    n_eval=st.integers(-3, 3))
def test_diagnostics_answer_or_refuse_clearly(fitted_forest, case, grid, n_eval):
    X, _ = case
    calls = [
        lambda: D.probe(fitted_forest, X[0] if len(X) else X),
        lambda: D.slices(fitted_forest, np.zeros(3), 0, grid),
        lambda: D.slices(fitted_forest, np.zeros(3), 0, [0.5], average=True, background=X),
        lambda: D.edges(fitted_forest, X, np.zeros(len(X))),
    ]
    for call in calls:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", RuntimeWarning)
            try:
                call()
            except (ValueError, TypeError) as err:
                assert str(err).strip()


@pytest.fixture(scope="module")
def fitted_forest():
    rng = np.random.default_rng(0)
    X = rng.uniform(size=(80, 3))
    return HonestForestRegressor(n_estimators=20, random_state=0).fit(X, X[:, 0])
