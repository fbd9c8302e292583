"""The local linear forest's bounded-memory fit gives the numbers of the one-pass code."""

import warnings

import numpy as np
import pytest

import hedgerow.estimators._forest as forest_module
import hedgerow.estimators._local_linear_forest as llf_module
from hedgerow import LocalLinearForestRegressor
from hedgerow.local import (
    local_moments,
    moments_from_sums,
    ridge_path_intercepts,
    solve_local,
    subset_moments,
)

GRID = (0.0, 1e-4, 1e-3, 0.01, 0.1, 1.0, 10.0)


def _random_moments(seed, m=400, n=60, k=4, collinear=False):
    rng = np.random.default_rng(seed)
    X = rng.normal(size=(n, k))
    if collinear:
        X[:, 1] = X[:, 0]
    y = X @ rng.normal(size=k) + rng.normal(size=n)
    W = rng.uniform(size=(m, n)) * (rng.uniform(size=(m, n)) < 0.3)
    W[:5] = 0.0  # zero-weight queries: NaN
    W[5:10, :] = 0.0
    W[5:10, 0] = 1.0  # one row only: no local spread (the fallback)
    s = W.sum(axis=1, keepdims=True)
    W = np.divide(W, s, out=np.zeros_like(W), where=s > 0)
    Q = rng.normal(size=(m, k))
    if collinear:
        Q[:, 1] = Q[:, 0]
    return local_moments(W, X, y, Q, degree=1)


@pytest.mark.parametrize("collinear", [False, True])
@pytest.mark.parametrize("k", [1, 3, 6])
def test_path_intercepts_equal_one_solve_per_penalty(k, collinear):
    if collinear and k == 1:
        pytest.skip("one column cannot be collinear")
    mom = _random_moments(k, k=k, collinear=collinear)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", RuntimeWarning)
        want = np.stack([solve_local(mom, lam).intercept for lam in GRID], axis=1)
        flags = np.stack([solve_local(mom, lam).fallback for lam in GRID], axis=1)
    got = ridge_path_intercepts(mom, GRID)
    assert flags[:, 0].any()  # the fallback path is reached
    np.testing.assert_array_equal(np.isnan(got), np.isnan(want))
    ok = np.isfinite(want)
    np.testing.assert_allclose(got[ok], want[ok], rtol=1e-10, atol=1e-12)


def test_path_refuses_a_bad_penalty():
    with pytest.raises(ValueError, match="ridge_penalty"):
        ridge_path_intercepts(_random_moments(0), [0.1, -1.0])


@pytest.fixture(scope="module")
def data():
    rng = np.random.default_rng(4)
    n, d = 1500, 4
    X = rng.uniform(-1, 1, size=(n, d))
    y = np.exp(X[:, 0]) + X[:, 1] + rng.normal(0, 0.3, n)
    return X, y


def test_blocked_fit_equals_one_pass(data, monkeypatch):
    X, y = data
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        one = LocalLinearForestRegressor(n_estimators=40, random_state=1).fit(X, y)
        monkeypatch.setattr(forest_module, "OOB_BLOCK_ROWS", 97)
        monkeypatch.setattr(llf_module, "_SOLVE_ROWS", 113)
        blocked = LocalLinearForestRegressor(n_estimators=40, random_state=1).fit(X, y)
    assert blocked.ridge_penalty_ == one.ridge_penalty_
    np.testing.assert_allclose(blocked.ridge_path_["oob_mse"], one.ridge_path_["oob_mse"],
                               rtol=1e-12)
    # the out-of-bag moments from blocks of rows equal those from the whole leaf matrix
    leaves, usable = one._oob_parts()
    means, centre = one._leaf_features()
    R, n_used = one.forest_.weighted_sums(leaves, means, usable)
    mom = moments_from_sums(R, one._Xc, centre, one.correction_scale_)
    got_used, got = blocked._oob_moments()
    np.testing.assert_array_equal(got_used, n_used)
    for name in ("s0", "s1", "s2", "t0", "t1", "roundoff"):
        np.testing.assert_array_equal(getattr(got, name), getattr(mom, name), err_msg=name)
    np.testing.assert_array_equal(blocked.oob_predict(), one.oob_predict())
    np.testing.assert_array_equal(blocked.oob_predict(return_std=True)[1],
                                  one.oob_predict(return_std=True)[1])
    np.testing.assert_array_equal(blocked.predict(X[:300]), one.predict(X[:300]))
    # the blocked solve is the one-batch solve, field by field
    fit_one = solve_local(mom, 0.05)
    fit_blocks = blocked._solve(mom, 0.05)
    for name in ("intercept", "slopes", "gram_inv", "fallback"):
        np.testing.assert_array_equal(getattr(fit_blocks, name), getattr(fit_one, name))
    part = subset_moments(mom, slice(10, 20))
    np.testing.assert_array_equal(solve_local(part, 0.05).intercept, fit_one.intercept[10:20])


def test_fit_keeps_no_rows_by_trees_matrix(data):
    X, y = data
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        m = LocalLinearForestRegressor(n_estimators=40, random_state=1).fit(X, y)
    big = [key for key, v in m._fit_cache.items()
           for a in (v if isinstance(v, tuple) else (v,))
           if isinstance(a, np.ndarray) and a.ndim == 2 and a.shape == (X.shape[0], 40)]
    assert big == []
    lru = m._fit_cache.get("leaves", {})
    assert all(getattr(v, "shape", (0,))[0] != X.shape[0] for v in dict(lru).values())
