"""Unit tests of the batched local solver (hedgerow.local)."""

import warnings

import numpy as np
import pytest
import scipy.sparse as sp
from hypothesis import given, settings
from hypothesis import strategies as st
from sklearn.linear_model import LinearRegression, Ridge

from hedgerow.local import (
    LocalFit,
    LocalMoments,
    default_scale,
    equivalent_kernel,
    local_moments,
    solve_local,
)


def _design(n=80, k=3, m=7, seed=0):
    rng = np.random.default_rng(seed)
    # Columns on very different scales and far from zero, so that standardising and
    # algebraic centring are both exercised.
    spread = np.array([1.0, 50.0, 0.01])[:k]
    offset = np.array([0.0, 1000.0, 3.0])[:k]
    X = rng.normal(size=(n, k)) * spread + offset
    Q = rng.normal(size=(m, k)) * spread + offset
    y = np.sin(X[:, 0]) + X @ (1.0 / spread) + rng.normal(scale=0.3, size=n)
    return X, y, Q


def _random_weights(m, n, seed, density=0.5):
    rng = np.random.default_rng(seed)
    W = sp.random(m, n, density=density, random_state=rng, format="csr")
    W.data += 0.05
    return sp.csr_matrix(W.multiply(1.0 / W.sum(axis=1)))


@pytest.mark.parametrize("lam", [0.0, 0.01, 0.3, 5.0])
def test_uniform_weights_equal_sklearn_ridge(lam):
    # Reference: sklearn.linear_model.Ridge. With weights 1/n the local objective
    # sum w (y - a - z b)^2 + lam |b|^2 equals Ridge(alpha=n*lam) on z = (x - q)/scale.
    X, y, Q = _design()
    n, m = X.shape[0], Q.shape[0]
    W = sp.csr_matrix(np.full((m, n), 1.0 / n))
    moments = local_moments(W, X, y, Q, degree=1)
    fit = solve_local(moments, lam)
    scale = X.std(axis=0)
    for i in range(m):
        Z = (X - Q[i]) / scale
        ref = Ridge(alpha=n * lam).fit(Z, y) if lam > 0 else LinearRegression().fit(Z, y)
        np.testing.assert_allclose(fit.intercept[i], ref.intercept_, rtol=1e-8, atol=1e-8)
        np.testing.assert_allclose(fit.slopes_std[i], ref.coef_, rtol=1e-8, atol=1e-8)
        np.testing.assert_allclose(fit.slopes[i], ref.coef_ / scale, rtol=1e-8, atol=1e-8)
    assert not fit.fallback.any()


def test_one_moments_object_serves_every_penalty():
    # A ridge change re-solves from the same moments: each solve must agree with a fresh
    # computation of moments and solve at that penalty.
    X, y, Q = _design(seed=1)
    W = _random_weights(Q.shape[0], X.shape[0], seed=2)
    moments = local_moments(W, X, y, Q, degree=1)
    for lam in (0.0, 0.1, 1.0):
        fresh = solve_local(local_moments(W, X, y, Q, degree=1), lam)
        again = solve_local(moments, lam)
        np.testing.assert_array_equal(again.intercept, fresh.intercept)
        assert again.ridge_penalty == lam
    # A larger penalty shrinks the standardised slopes.
    small = np.linalg.norm(solve_local(moments, 0.01).slopes_std, axis=1)
    large = np.linalg.norm(solve_local(moments, 10.0).slopes_std, axis=1)
    assert np.all(large < small)


def test_weighted_least_squares_matches_lstsq():
    # Reference: numpy.linalg.lstsq on sqrt(w)-scaled rows, one query at a time.
    X, y, Q = _design(n=60, seed=3)
    W = _random_weights(Q.shape[0], X.shape[0], seed=4)
    fit = solve_local(local_moments(W, X, y, Q, degree=1), 0.0)
    Wd = W.toarray()
    for i in range(Q.shape[0]):
        sw = np.sqrt(Wd[i])
        A = np.column_stack([np.ones(len(y)), X - Q[i]]) * sw[:, None]
        coef = np.linalg.lstsq(A, y * sw, rcond=None)[0]
        np.testing.assert_allclose(fit.intercept[i], coef[0], rtol=1e-8, atol=1e-8)
        np.testing.assert_allclose(fit.slopes[i], coef[1:], rtol=1e-7, atol=1e-8)


def test_degree_zero_is_weighted_mean():
    X, y, Q = _design(seed=5)
    W = _random_weights(Q.shape[0], X.shape[0], seed=6)
    fit = solve_local(local_moments(W, X, y, Q, degree=0), 3.0)
    np.testing.assert_allclose(fit.intercept, W @ y / np.asarray(W.sum(axis=1)).ravel())
    assert fit.slopes.shape == (Q.shape[0], 0)
    assert fit.gram_inv.shape == (Q.shape[0], 1, 1)


def test_local_linear_reproduces_a_linear_truth_nadaraya_watson_does_not():
    rng = np.random.default_rng(7)
    X = rng.uniform(size=(100, 2))
    y = 1.0 + 2.0 * X[:, 0] - 3.0 * X[:, 1]
    Q = rng.uniform(size=(10, 2))
    W = _random_weights(10, 100, seed=8, density=0.3)
    truth = 1.0 + 2.0 * Q[:, 0] - 3.0 * Q[:, 1]
    ll = solve_local(local_moments(W, X, y, Q, degree=1))
    nw = solve_local(local_moments(W, X, y, Q, degree=0))
    np.testing.assert_allclose(ll.intercept, truth, atol=1e-10)
    np.testing.assert_allclose(ll.slopes, np.tile([2.0, -3.0], (10, 1)), atol=1e-9)
    assert np.max(np.abs(nw.intercept - truth)) > 0.05


def test_row_scaling_does_not_change_the_fit():
    # The penalty is applied as lam * s0, so only the normalised weights matter.
    X, y, Q = _design(seed=9)
    W = _random_weights(Q.shape[0], X.shape[0], seed=10)
    a = solve_local(local_moments(W, X, y, Q, degree=1), 0.5)
    b = solve_local(local_moments(sp.diags(np.arange(1.0, 8.0)) @ W, X, y, Q, degree=1), 0.5)
    np.testing.assert_allclose(a.intercept, b.intercept, rtol=1e-10)
    np.testing.assert_allclose(a.slopes, b.slopes, rtol=1e-9)


def test_empty_rows_give_nan_with_a_warning():
    X, y, Q = _design(m=3, seed=11)
    W = _random_weights(3, X.shape[0], seed=12).tolil()
    W[1, :] = 0.0
    W = W.tocsr()
    W.eliminate_zeros()
    for degree in (0, 1):
        with pytest.warns(RuntimeWarning, match="1 of 3 queries have zero total weight"):
            fit = solve_local(local_moments(W, X, y, Q, degree=degree))
        assert np.isnan(fit.intercept[1])
        assert np.all(np.isfinite(fit.intercept[[0, 2]]))
        assert not fit.fallback[1]
        L = equivalent_kernel(W, X, Q, fit)
        assert L[1].nnz == 0 or np.all(L[1].data == 0)


def test_singular_neighbourhoods_fall_back_to_the_weighted_mean():
    rng = np.random.default_rng(13)
    X = rng.uniform(size=(30, 2))
    y = rng.normal(size=30)
    X[:5] = [0.5, 0.5]  # five tied rows
    X[5:10, 1] = 2.0 * X[5:10, 0]  # five rows on one line
    Q = np.array([[0.4, 0.6], [0.3, 0.3], [0.5, 0.5]])
    W = np.zeros((3, 30))
    W[0, :5] = 0.2  # all weight on one point: no spread at all
    W[1, 5:10] = 0.2  # collinear neighbourhood
    W[2] = 1.0 / 30
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        fit = solve_local(local_moments(sp.csr_matrix(W), X, y, Q, degree=1))
    np.testing.assert_array_equal(fit.fallback, [True, True, False])
    np.testing.assert_allclose(fit.intercept[:2], W[:2] @ y)
    np.testing.assert_array_equal(fit.slopes[:2], 0.0)
    # With a ridge penalty the collinear system is well posed again.
    ridge = solve_local(local_moments(sp.csr_matrix(W), X, y, Q, degree=1), 0.1)
    assert not ridge.fallback[1]


@pytest.mark.parametrize("lam", [0.0, 0.3])
def test_first_row_only_is_the_first_row_of_the_full_inverse(lam):
    X, y, Q = _design(n=120, k=3, m=25, seed=4)
    W = _random_weights(25, 120, 5)
    W = W.toarray()
    W[0] = 0.0  # an empty row
    W[1, :] = 0.0
    W[1, :3] = 1.0  # too few rows for a line in three columns: the fallback
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", RuntimeWarning)
        moments = local_moments(sp.csr_matrix(W), X, y, Q, degree=1)
        full = solve_local(moments, lam)
        first = solve_local(moments, lam, first_row=True)
    assert first.gram_inv.shape == (25, 1, 4) and full.gram_inv.shape == (25, 4, 4)
    np.testing.assert_array_equal(first.fallback, full.fallback)
    assert full.fallback[1] == (lam == 0.0)  # a ridge makes the system well posed
    np.testing.assert_allclose(first.gram_inv[:, 0], full.gram_inv[:, 0], rtol=1e-12,
                               equal_nan=True)
    np.testing.assert_allclose(first.intercept, full.intercept, rtol=1e-12, equal_nan=True)
    np.testing.assert_allclose(first.slopes, full.slopes, rtol=1e-12, equal_nan=True)


def test_equivalent_kernel_reproduces_intercept_and_sums_to_one():
    X, y, Q = _design(seed=14)
    W = _random_weights(Q.shape[0], X.shape[0], seed=15, density=0.4)
    moments = local_moments(W, X, y, Q, degree=1)
    for lam in (0.0, 0.7):
        fit = solve_local(moments, lam)
        L = equivalent_kernel(W, X, Q, fit, moments.scale)
        assert sp.isspmatrix_csr(L) and L.shape == W.shape
        np.testing.assert_array_equal(L.indptr, W.indptr)
        np.testing.assert_allclose(L @ y, fit.intercept, rtol=1e-10, atol=1e-10)
        # Rows sum to one at any penalty: the intercept is unpenalised, so constants are
        # reproduced exactly even when lines are not.
        np.testing.assert_allclose(np.asarray(L.sum(axis=1)).ravel(), 1.0, atol=1e-10)
    nw = solve_local(local_moments(W, X, y, Q, degree=0))
    np.testing.assert_allclose(equivalent_kernel(W, X, Q, nw).toarray(), W.toarray())


@settings(max_examples=25, deadline=None)
@given(
    n=st.integers(8, 40),
    k=st.integers(1, 3),
    lam=st.floats(0.0, 10.0),
    seed=st.integers(0, 2**16),
)
def test_equivalent_kernel_property(n, k, lam, seed):
    rng = np.random.default_rng(seed)
    X = rng.normal(size=(n, k))
    y = rng.normal(size=n)
    Q = rng.normal(size=(4, k))
    W = _random_weights(4, n, seed=seed, density=0.8)
    moments = local_moments(W, X, y, Q, degree=1)
    fit = solve_local(moments, lam)
    L = equivalent_kernel(W, X, Q, fit, moments.scale)
    np.testing.assert_allclose(L @ y, fit.intercept, rtol=1e-8, atol=1e-8)
    np.testing.assert_allclose(fit.slopes * moments.scale, fit.slopes_std, rtol=1e-12)


def test_dataclasses_are_frozen_and_default_scale():
    X, y, Q = _design(seed=16)
    W = _random_weights(Q.shape[0], X.shape[0], seed=17)
    moments = local_moments(W, X, y, Q, degree=1)
    fit = solve_local(moments)
    assert isinstance(moments, LocalMoments) and isinstance(fit, LocalFit)
    with pytest.raises(AttributeError):
        moments.degree = 0
    np.testing.assert_allclose(moments.scale, X.std(axis=0))
    np.testing.assert_array_equal(default_scale(np.ones((5, 1))), [1.0])


def test_bad_arguments_are_named():
    X, y, Q = _design(seed=18)
    W = _random_weights(Q.shape[0], X.shape[0], seed=19)
    with pytest.raises(ValueError, match=r"'degree' parameter must be 0 or 1\. Got 2 instead"):
        local_moments(W, X, y, Q, degree=2)
    with pytest.raises(ValueError, match=r"'y' parameter must have one entry per column"):
        local_moments(W, X, y[:-1], Q, degree=1)
    with pytest.raises(ValueError, match=r"'Q_c' parameter must have shape \(7, 3\)"):
        local_moments(W, X, y, Q[:, :2], degree=1)
    with pytest.raises(ValueError, match=r"'scale' parameter must hold 3 positive finite"):
        local_moments(W, X, y, Q, degree=1, scale=[1.0, 0.0, 1.0])
    moments = local_moments(W, X, y, Q, degree=1)
    for bad in (-1.0, np.nan, np.inf, "big", True):
        with pytest.raises(ValueError, match=r"'ridge_penalty' parameter must be a finite float"):
            solve_local(moments, bad)


def test_cholesky_screen_clears_only_what_the_eigenvalue_rule_passes():
    # The collinearity rule compares the extreme eigenvalues of each local correlation
    # matrix; a shifted Cholesky factorisation clears the clear cases first.
    from hedgerow.local._solver import COLLINEARITY_RCOND, _clears_collinearity

    rng = np.random.default_rng(4)
    k = 6
    mats, ratios = [], []
    for log_ratio in np.linspace(-16, 0, 200):
        Qm, _ = np.linalg.qr(rng.normal(size=(k, k)))
        ev = np.geomspace(10.0**log_ratio, 1.0, k)
        if log_ratio < -12:
            ev[0] = -(10.0**log_ratio)  # indefinite by round-off, as centring can leave
        A = (Qm * ev) @ Qm.T
        d = np.sqrt(np.abs(np.diag(A)))
        C = A / d[:, None] / d[None, :]
        w = np.linalg.eigvalsh(C)
        mats.append(C)
        ratios.append(w[0] / w[-1])
    ratios = np.array(ratios)
    cleared = _clears_collinearity(np.array(mats), 2.0 * k * COLLINEARITY_RCOND)
    # never clears a system the rule would flag, and clears the well-conditioned ones
    assert not np.any(cleared & (ratios <= COLLINEARITY_RCOND))
    assert np.all(cleared[ratios > 1e-6])


def test_fallback_flags_follow_the_eigenvalue_rule_everywhere():
    # Near-collinear and tied columns in narrow windows: the flags must be those of the
    # eigenvalue rule applied to every system (the Cholesky screen only saves time).
    from hedgerow.local._solver import COLLINEARITY_RCOND

    rng = np.random.default_rng(7)
    n, k = 300, 4
    X = rng.normal(size=(n, k))
    # collinear where the third column is negative, not elsewhere
    X[:, 1] = 2.0 * X[:, 0] + np.where(X[:, 2] < 0, 1e-9, 1.0) * rng.normal(size=n)
    X[:, 3] = np.round(X[:, 3])
    y = rng.normal(size=n)
    Q = np.vstack([X[:60], 3.0 * rng.normal(size=(20, k))])
    D = np.exp(-0.5 * (((X[None, :, :] - Q[:, None, :]) / 0.4) ** 2).sum(axis=2))
    moments = local_moments(sp.csr_matrix(D * (D > 1e-12)), X, y, Q, degree=1)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", RuntimeWarning)
        fit = solve_local(moments, 0.0)
    empty = ~(moments.s0 > 0)
    s0, s1 = np.where(empty, 1.0, moments.s0), moments.s1
    S = moments.s2 - s1[:, :, None] * s1[:, None, :] / s0[:, None, None]
    S = 0.5 * (S + np.swapaxes(S, 1, 2))
    dS = np.diagonal(S, axis1=1, axis2=2)
    flagged = np.any(dS <= moments.roundoff, axis=1) | empty
    d = np.sqrt(np.where(dS > 0, dS, 1.0))
    C = np.where(flagged[:, None, None], np.eye(k), S / d[:, :, None] / d[:, None, :])
    ev = np.linalg.eigvalsh(C)
    flagged |= ev[:, 0] <= COLLINEARITY_RCOND * ev[:, -1]
    flagged &= ~empty
    assert 0 < flagged.sum() < (~empty).sum()  # both kinds occur here
    np.testing.assert_array_equal(fit.fallback, flagged)
