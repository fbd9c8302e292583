"""Unit tests of kernel weights, bandwidth rules and the two kernel smoothers."""

import contextlib

import numpy as np
import pytest
import scipy.sparse as sp
from sklearn.base import clone
from sklearn.utils.estimator_checks import parametrize_with_checks

from hedgerow.estimators._kernel import LocalLinearRegressor, NadarayaWatsonRegressor
from hedgerow.kernels import (
    CV_FLAT_TOLERANCE,
    GAUSSIAN_TRUNCATION,
    KERNELS,
    CVCurve,
    KernelRows,
    kernel_profile,
    kernel_sums,
    kernel_weights,
    loo_cv_error,
    select_bandwidth_cv,
    silverman_bandwidth,
)
from hedgerow.local import (
    default_scale,
    equivalent_kernel,
    local_moments,
    moment_features,
    solve_local,
)

SMOOTHERS = (NadarayaWatsonRegressor, LocalLinearRegressor)
_no_warning = contextlib.nullcontext


@parametrize_with_checks([NadarayaWatsonRegressor(), LocalLinearRegressor()])
def test_sklearn_compatible(estimator, check):
    # No check is expected to fail. scikit-learn itself skips check_array_api_input
    # unless SCIPY_ARRAY_API=1 is set; the smoothers take NumPy input only (numba).
    check(estimator)


# --------------------------------------------------------------------- kernel weights


def _dense_product_kernel(X, Q, h, kernel):
    U = (X[None, :, :] - Q[:, None, :]) / h
    return np.prod(kernel_profile(kernel, U), axis=2)


def test_profiles_follow_their_definitions():
    # Definitions of the three kernels, Hastie, Tibshirani & Friedman (2009), ESL
    # section 6.1 (up to the normalising constant, which cancels in the weights).
    u = np.array([-1.5, -1.0, -0.5, 0.0, 0.3, 0.999])
    np.testing.assert_allclose(kernel_profile("gaussian", u), np.exp(-(u**2) / 2))
    np.testing.assert_allclose(
        kernel_profile("epanechnikov", u), np.where(np.abs(u) < 1, 1 - u**2, 0.0)
    )
    np.testing.assert_allclose(
        kernel_profile("tricube", u), np.where(np.abs(u) < 1, (1 - np.abs(u) ** 3) ** 3, 0)
    )


@pytest.mark.parametrize("kernel", KERNELS)
def test_weights_are_normalised_sparse_and_match_dense(kernel):
    rng = np.random.default_rng(0)
    X = rng.normal(size=(300, 2)) * [1.0, 10.0]
    Q = rng.normal(size=(40, 2)) * [1.0, 10.0]
    h = np.array([0.3, 2.0])
    W = kernel_weights(X, Q, h, kernel)
    assert sp.isspmatrix_csr(W) and W.shape == (40, 300)
    assert np.all(W.data > 0)
    dense = _dense_product_kernel(X, Q, h, kernel)
    # A query with no row inside a compact kernel's support has an empty row; every
    # other row sums to one.
    empty = dense.sum(axis=1) == 0
    assert empty.any() == (kernel != "gaussian")
    sums = np.asarray(W.sum(axis=1)).ravel()
    np.testing.assert_allclose(sums[~empty], 1.0, rtol=1e-12)
    np.testing.assert_array_equal(sums[empty], 0.0)
    with np.errstate(invalid="ignore"):
        ref = np.nan_to_num(dense / dense.sum(axis=1, keepdims=True))
    kept = W.toarray() > 0
    np.testing.assert_allclose(W.toarray()[kept], ref[kept], rtol=1e-10)
    # Gaussian rows are truncated only at negligible weights; compact ones are exact.
    dropped = ~kept & (ref > 0)
    if kernel == "gaussian":
        row_max = ref.max(axis=1, keepdims=True)
        assert np.all(ref[dropped] <= (GAUSSIAN_TRUNCATION * row_max).repeat(300, 1)[dropped])
        assert W.nnz < 0.9 * W.shape[0] * W.shape[1]
    else:
        assert not dropped.any()


@pytest.mark.parametrize("kernel", KERNELS)
def test_unnormalised_rows_are_proportional(kernel):
    rng = np.random.default_rng(21)
    X, Q = rng.normal(size=(80, 2)), rng.normal(size=(10, 2))
    W = kernel_weights(X, Q, [0.8, 0.8], kernel)
    R = kernel_weights(X, Q, [0.8, 0.8], kernel, normalize=False)
    np.testing.assert_array_equal(R.indptr, W.indptr)
    sums = np.asarray(R.sum(axis=1)).ravel()
    np.testing.assert_allclose(R.toarray() / sums[:, None], W.toarray(), rtol=1e-12)
    if kernel == "gaussian":
        np.testing.assert_allclose(R.max(axis=1).toarray().ravel(), 1.0)
    else:
        np.testing.assert_allclose(R.toarray(), _dense_product_kernel(X, Q, 0.8, kernel))


def test_far_gaussian_queries_do_not_underflow_and_compact_ones_are_empty():
    X = np.linspace(0, 1, 50)[:, None]
    Q = np.array([[60.0]])
    W = kernel_weights(X, Q, [0.1])
    # exp(-(59/0.1)^2/2) underflows; normalising against the row maximum keeps the nearest
    # row.
    assert W.nnz >= 1 and np.isclose(W.sum(), 1.0)
    assert W[0, 49] == W.max()
    assert kernel_weights(X, Q, [0.1], "epanechnikov").nnz == 0


def test_blocks_of_queries_give_the_same_matrix(monkeypatch):
    import hedgerow.kernels._kernels as module

    rng = np.random.default_rng(1)
    X, Q = rng.normal(size=(100, 2)), rng.normal(size=(37, 2))
    whole = kernel_weights(X, Q, [0.5, 0.5])
    monkeypatch.setattr(module, "_BLOCK_ENTRIES", 500)  # five queries per block
    blocked = kernel_weights(X, Q, [0.5, 0.5])
    np.testing.assert_array_equal(blocked.indptr, whole.indptr)
    np.testing.assert_array_equal(blocked.toarray(), whole.toarray())


def test_kernel_weight_arguments_are_checked():
    X = np.zeros((5, 2))
    with pytest.raises(ValueError, match=r"'kernel' parameter must be one of .*Got 'box'"):
        kernel_weights(X, X, [1.0, 1.0], "box")
    with pytest.raises(ValueError, match=r"'bandwidth' parameter must hold 2 positive finite"):
        kernel_weights(X, X, [1.0, -1.0])
    with pytest.raises(ValueError, match=r"'Q' parameter must be a 2-d array with 2 columns"):
        kernel_weights(X, np.zeros((3, 3)), [1.0, 1.0])


@pytest.mark.parametrize("kernel", KERNELS)
@pytest.mark.parametrize("d", [1, 2, 3])
@pytest.mark.parametrize("width", ["wide", "narrow"])
def test_dense_sums_equal_the_sparse_product(kernel, d, width, monkeypatch):
    import hedgerow.kernels._kernels as module

    rng = np.random.default_rng(40 + d)
    X = rng.normal(size=(150, d)) * np.arange(1.0, d + 1.0)
    # queries inside the data, beside it and far outside (empty compact rows, Gaussian
    # rows that only the shift keeps from underflowing)
    Q = np.vstack([rng.normal(size=(30, d)), np.full((2, d), 40.0)])
    y = np.sin(X[:, 0]) + rng.normal(size=150)
    h = (2.0 if width == "wide" else 0.01) * np.arange(1.0, d + 1.0)
    exclude = rng.integers(-1, 150, size=Q.shape[0])
    B, _ = moment_features(X, y, default_scale(X))
    for excl in (None, exclude):
        W = kernel_weights(X, Q, h, kernel, normalize=False, exclude=excl)
        # narrow rows take the sparse loop (fewer than 1/8 non-zero), wide ones mostly not
        sparse_rows = np.diff(W.indptr) * module._SPARSE_ROW_SHARE < W.shape[1]
        assert sparse_rows.all() if width == "narrow" else sparse_rows.mean() < 0.5
        ref = W @ B
        monkeypatch.setattr(module, "_DENSE_BLOCK_ENTRIES", 1 << 16)
        whole = kernel_sums(X, Q, h, B, kernel, exclude=excl)
        with_blas = kernel_sums(X, Q, h, B, kernel, exclude=excl, stable=False)
        monkeypatch.setattr(module, "_DENSE_BLOCK_ENTRIES", 700)  # four queries a block
        blocked = kernel_sums(X, Q, h, B, kernel, exclude=excl)
        # the same entries summed in another order: equal up to round-off
        np.testing.assert_allclose(whole, ref, rtol=1e-12, atol=1e-12 * np.abs(ref).max())
        np.testing.assert_allclose(with_blas, ref, rtol=1e-12, atol=1e-12 * np.abs(ref).max())
        # the stable sums of a query do not depend on the block it was summed in
        np.testing.assert_array_equal(blocked, whole)
        # squared weights from the same pass, over other features; the plain sums unchanged
        S = B[:, ::2] * rng.uniform(0.5, 2.0, size=(150, 1))
        plain, sq = kernel_sums(X, Q, h, B, kernel, exclude=excl, squared=S)
        np.testing.assert_array_equal(plain, blocked)
        ref2 = W.multiply(W) @ S
        np.testing.assert_allclose(sq, ref2, rtol=1e-12, atol=1e-12 * np.abs(ref2).max())
        empty = np.asarray(W.sum(axis=1)).ravel() == 0
        assert empty[-2:].all() == (kernel != "gaussian")
        np.testing.assert_array_equal(whole[empty], 0.0)
        assert np.all(whole[~empty, 0] > 0)


@pytest.mark.parametrize("kernel", KERNELS)
def test_own_unnormalised_weight_is_one(kernel):
    # Leave-one-out leverages rely on it: L_ii = w_ii (M_i^-1)_00 with w_ii = k(0) = 1.
    rng = np.random.default_rng(8)
    X = rng.normal(size=(60, 3)) * [1.0, 100.0, 0.01] + [0.0, 1e4, -3.0]
    X[10] = X[11]  # a tied pair
    W = kernel_weights(X, X, [0.3, 20.0, 0.004], kernel, normalize=False)
    np.testing.assert_array_equal(W.diagonal(), 1.0)


@pytest.mark.parametrize("est", SMOOTHERS)
@pytest.mark.parametrize("shape", [(300, 2), (2000, 2), (700, 6)])
@pytest.mark.parametrize("bandwidth", [0.5, 0.08])  # dense rows; mostly sparse rows
def test_predictions_do_not_depend_on_the_other_queries(est, shape, bandwidth):
    # A query's prediction is the same bits alone, in chunks or in another order (dask
    # blocks and probes rely on it).
    n, d = shape
    rng = np.random.default_rng(n + d)
    X = rng.uniform(size=(n, d))
    y = np.sin(4 * X[:, 0]) + X.sum(axis=1) + rng.normal(scale=0.2, size=n)
    Q = rng.uniform(size=(203, d))
    model = est(bandwidth=bandwidth).fit(X, y)
    whole = model.predict(Q)
    chunks = np.concatenate([model.predict(Q[a : a + 37]) for a in range(0, len(Q), 37)])
    order = rng.permutation(len(Q))
    np.testing.assert_array_equal(chunks, whole)
    np.testing.assert_array_equal(model.predict(Q[order]), whole[order])
    np.testing.assert_array_equal([model.predict(Q[i : i + 1])[0] for i in range(9)], whole[:9])


def test_dense_sums_leave_out_the_excluded_row_entirely():
    X = np.array([[0.0], [5.0]])
    B = np.array([[1.0, 2.0], [1.0, 3.0]])
    # Row 0 is its own nearest row; without it the Gaussian row is rescaled to row 1 alone.
    np.testing.assert_array_equal(kernel_sums(X, X[:1], [0.5], B, exclude=[0]), [[1.0, 3.0]])
    got = kernel_sums(X, X[:1], [0.5], B, "tricube", exclude=[0])
    np.testing.assert_array_equal(got, [[0.0, 0.0]])
    assert kernel_sums(X, np.zeros((0, 1)), [0.5], B).shape == (0, 2)


def test_prepared_rows_answer_like_the_one_off_functions():
    rng = np.random.default_rng(12)
    X, Q = rng.normal(size=(90, 2)), rng.normal(size=(14, 2))
    B = rng.normal(size=(90, 3))
    rows = KernelRows(X, [0.4, 0.7], "tricube")
    for _ in range(2):  # the prepared rows are not changed by a query
        np.testing.assert_array_equal(rows.sums(Q, B), kernel_sums(X, Q, [0.4, 0.7], B,
                                                                   "tricube"))
        np.testing.assert_array_equal(rows.weights(Q).toarray(),
                                      kernel_weights(X, Q, [0.4, 0.7], "tricube").toarray())


def test_dense_sum_arguments_are_checked():
    X = np.zeros((5, 2))
    with pytest.raises(ValueError, match=r"'B' parameter must be a 2-d array with 5 rows"):
        kernel_sums(X, X, [1.0, 1.0], np.zeros((4, 2)))
    with pytest.raises(ValueError, match=r"'squared' parameter must be a 2-d array with 5"):
        kernel_sums(X, X, [1.0, 1.0], np.zeros((5, 2)), squared=np.zeros(5))
    with pytest.raises(ValueError, match=r"'kernel' parameter must be one of .*Got 'box'"):
        kernel_sums(X, X, [1.0, 1.0], np.zeros((5, 2)), "box")
    with pytest.raises(ValueError, match=r"'exclude' parameter must hold 5 indices"):
        kernel_sums(X, X, [1.0, 1.0], np.zeros((5, 2)), exclude=[0, 1])


def test_compiled_exponential_is_within_one_ulp_of_numpy():
    # numpy's exp is the reference (its float64 loops are accurate to within about one
    # ulp, common practice); the Gaussian weights use the compiled one on [-700, 0].
    from hedgerow.kernels._kernels import _EXP_LOWEST, _exp_inplace

    rng = np.random.default_rng(3)
    x = np.concatenate([
        rng.uniform(_EXP_LOWEST, 0.0, 400_000),
        rng.uniform(-1.0, 0.0, 100_000),
        -np.log(2.0) * np.arange(0.0, 1000.0, 0.5),  # reduction boundaries
        [0.0, -0.0, -1e-300, -5e-324, _EXP_LOWEST],
    ])
    x = x[x >= _EXP_LOWEST]
    got = x.copy()
    _exp_inplace(got)
    ref = np.exp(x)
    assert np.all(np.abs(got - ref) <= np.spacing(ref))
    assert got[x == 0.0].tolist() == [1.0] * int((x == 0.0).sum())


# ---------------------------------------------------------------------- bandwidth rules


def test_silverman_rule():
    # Silverman (1986), section 3.4.2: 0.9 * min(sd, IQR/1.34) * n^(-1/5).
    rng = np.random.default_rng(2)
    normal = rng.normal(size=500)  # sd is the smaller spread
    heavy = rng.standard_t(1, size=500)  # IQR/1.34 is the smaller spread
    X = np.column_stack([normal, heavy, np.full(500, 3.0)])
    h = silverman_bandwidth(X)
    iqr = np.subtract(*np.percentile(heavy, [75, 25])) / 1.34
    assert normal.std(ddof=1) < np.subtract(*np.percentile(normal, [75, 25])) / 1.34
    assert iqr < heavy.std(ddof=1)
    np.testing.assert_allclose(h[0], 0.9 * normal.std(ddof=1) * 500**-0.2)
    np.testing.assert_allclose(h[1], 0.9 * iqr * 500**-0.2)
    assert h[2] > 0  # constant column: documented fallback to 1.0 * 0.9 n^(-1/5)


@pytest.mark.parametrize("kernel", KERNELS)
@pytest.mark.parametrize("degree", [0, 1])
def test_loo_error_equals_explicit_refits(kernel, degree):
    rng = np.random.default_rng(3)
    X = rng.uniform(size=(40, 2))
    y = np.sin(3 * X[:, 0]) + X[:, 1] + rng.normal(scale=0.2, size=40)
    h = np.array([0.4, 0.6])
    errors = []
    for i in range(40):
        keep = np.arange(40) != i
        W = kernel_weights(X[keep], X[i : i + 1], h, kernel)
        fit = solve_local(local_moments(W, X[keep], y[keep], X[i : i + 1], degree=degree))
        errors.append((y[i] - fit.intercept[0]) ** 2)
    np.testing.assert_allclose(loo_cv_error(X, y, h, kernel, degree), np.mean(errors), rtol=1e-9)


def test_loo_error_for_isolated_rows():
    X = np.array([[0.0], [0.1], [0.2], [5.0]])
    y = np.array([0.0, 1.0, 4.0, 2.0])
    # Compact kernel: the row at 5 has no neighbour, its leave-one-out fit is undefined.
    assert loo_cv_error(X, y, [0.5], "epanechnikov") == np.inf
    # Gaussian: the row at 5 is ~10 bandwidths away, so its own weight dominates (leverage
    # ~1) and the others fall under the truncation; its leave-one-out value must still
    # be the weighted mean of the others, computed here densely with no truncation.
    K = np.exp(-0.5 * ((X - X.T) / 0.5) ** 2)
    np.fill_diagonal(K, 0.0)
    loo = K @ y / K.sum(axis=1)
    np.testing.assert_allclose(
        loo_cv_error(X, y, [0.5], "gaussian"), np.mean((y - loo) ** 2), rtol=1e-12
    )


def test_excluded_rows_are_left_out():
    rng = np.random.default_rng(20)
    X = rng.normal(size=(30, 2))
    W = kernel_weights(X, X[:3], [1.0, 1.0], exclude=[0, 1, -1])
    assert W[0, 0] == 0 and W[1, 1] == 0 and W[2, 2] > 0
    np.testing.assert_allclose(np.asarray(W.sum(axis=1)).ravel(), 1.0)
    with pytest.raises(ValueError, match=r"'exclude' parameter must hold 3 indices"):
        kernel_weights(X, X[:3], [1.0, 1.0], exclude=[0])


def test_cv_search_gives_irrelevant_columns_large_bandwidths():
    rng = np.random.default_rng(4)
    X = rng.uniform(size=(150, 3))
    y = np.sin(6 * X[:, 0]) + rng.normal(scale=0.1, size=150)
    curve = select_bandwidth_cv(X, y, degree=1)
    assert isinstance(curve, CVCurve)
    sd = X.std(axis=0)
    assert curve.bandwidth[0] / sd[0] < 0.5
    assert np.all(curve.bandwidth[1:] / sd[1:] > 3 * curve.bandwidth[0] / sd[0])
    # The search only improves on its best grid point, and reports what it evaluated.
    assert curve.loo_error <= curve.grid_loo_error.min()
    # (the error of the selected fit: without the columns it ignores)
    keep = ~curve.ignored
    assert curve.loo_error == pytest.approx(
        loo_cv_error(X[:, keep], y, curve.bandwidth[keep], degree=1))
    assert curve.path_bandwidth.shape == (curve.path_loo_error.size, 3)
    assert curve.grid_bandwidth.shape == (curve.grid_factor.size, 3)


# -------------------------------------------------------------------------- estimators


def _uniform_line(n, seed, noise):
    rng = np.random.default_rng(seed)
    X = rng.uniform(size=(n, 1))
    return X, 3.0 * X[:, 0] + rng.normal(scale=noise, size=n)


def test_boundary_bias_nadaraya_watson_versus_local_linear():
    # Fan & Gijbels (1996), section 3.2.5; Hastie et al. (2009), section 6.1.1: with a
    # linear truth, Nadaraya-Watson is biased by O(h) at the edges (pulled towards the
    # interior) while local linear is unbiased. Averaging over replications isolates bias.
    edges = np.concatenate([np.linspace(0.0, 0.05, 20), np.linspace(0.95, 1.0, 20)])
    inward = np.where(edges < 0.5, 1.0, -1.0)
    bias = {}
    for est in SMOOTHERS:
        errs = []
        for seed in range(20):
            X, y = _uniform_line(800, seed, noise=0.2)
            model = est(bandwidth=0.3).fit(X, y)
            errs.append((model.predict(edges[:, None]) - 3.0 * edges) * inward)
        bias[est] = np.mean(errs)
    nw, ll = bias[NadarayaWatsonRegressor], bias[LocalLinearRegressor]
    h = 0.3 * np.sqrt(1 / 12)  # bandwidth in original units (sd of U[0,1] is 1/sqrt(12))
    assert 0.3 * 3.0 * h < nw < 3.0 * h
    assert abs(ll) < 0.1 * nw


def test_local_slopes_in_original_units():
    rng = np.random.default_rng(5)
    X = rng.uniform(size=(200, 2)) * [1.0, 100.0]
    y = 1.0 + 2.0 * X[:, 0] - 0.03 * X[:, 1]
    model = LocalLinearRegressor(bandwidth=[0.5, 0.5]).fit(X, y)
    slopes = model.local_slopes(X[:10])
    assert slopes.shape == (10, 2)
    np.testing.assert_allclose(slopes, np.tile([2.0, -0.03], (10, 1)), rtol=1e-8)
    np.testing.assert_allclose(model.bandwidth_, 0.5 * X.std(axis=0))


@pytest.mark.parametrize("est", SMOOTHERS)
def test_neighbour_weights_and_predictions_agree(est):
    X, y = _uniform_line(120, 6, noise=0.3)
    model = est(bandwidth="silverman", kernel="tricube").fit(X, y)
    Q = np.linspace(0.1, 0.9, 9)[:, None]
    W = model.neighbour_weights(Q)
    assert sp.isspmatrix_csr(W) and W.shape == (9, 120) and W.min() >= 0
    np.testing.assert_allclose(np.asarray(W.sum(axis=1)).ravel(), 1.0)
    if est is NadarayaWatsonRegressor:
        np.testing.assert_allclose(model.predict(Q), W @ y)
    assert model.cv_curve_ is None
    np.testing.assert_allclose(model.bandwidth_, silverman_bandwidth(X))


@pytest.mark.parametrize("kernel", KERNELS)
@pytest.mark.parametrize("est", SMOOTHERS)
@pytest.mark.parametrize("d", [1, 3])
def test_standard_errors_equal_the_equivalent_kernel_sum(est, kernel, d):
    # Var yhat(x) = sum_i l_i(x)^2 sigma^2(x_i) computed term by term from the sparse
    # weights and the equivalent kernel; the estimators form it from squared-weight sums.
    rng = np.random.default_rng(60 + d)
    X = rng.uniform(size=(250, d)) * np.arange(1.0, d + 1.0) + 100.0
    y = np.sin(3 * X[:, 0]) + rng.normal(scale=0.4, size=250)
    model = est(bandwidth=0.35, kernel=kernel).fit(X, y)
    # inside, at the edges, just beyond and far beyond them (compact kernels leave the
    # last query empty)
    edge = X[[np.argmin(X[:, 0]), np.argmax(X[:, 0])]]
    Q = np.vstack([X[:20], edge, edge[1] + np.r_[0.05, np.zeros(d - 1)], X.max(0) + 5.0])
    with pytest.warns(RuntimeWarning) if kernel != "gaussian" else _no_warning():
        mean, std = model.predict(Q, return_std=True)
        fit = solve_local(local_moments(
            kernel_weights(model.X_train_, Q, model.bandwidth_, kernel, normalize=False),
            model.X_train_, y, Q, degree=est._degree, scale=model.scale_,
        ))
    W = kernel_weights(model.X_train_, Q, model.bandwidth_, kernel, normalize=False)
    L = equivalent_kernel(W, model.X_train_, Q, fit, model.scale_)
    ref = np.sqrt(np.asarray(L.multiply(L) @ model._training_variance()).ravel())
    ok = ~np.isnan(fit.intercept)
    assert ok.sum() == len(Q) - (kernel != "gaussian")
    near = np.arange(len(Q)) < len(Q) - 1
    np.testing.assert_allclose(std[near], ref[near], rtol=1e-9)
    np.testing.assert_allclose(mean[near], fit.intercept[near], rtol=1e-11)
    if kernel == "gaussian":
        # Far beyond the data (here some 40 bandwidths) centring the moments at the query
        # cancels digits: against a long-double evaluation the squared-weight form was
        # 1e-8 off there and the term-by-term sum 2e-10, both 1e-13 or better inside.
        np.testing.assert_allclose(std[-1], ref[-1], rtol=1e-7)
    else:
        assert np.isnan(std[-1]) and np.isnan(mean[-1])
    # the smoothed squared residuals, term by term
    Wt = kernel_weights(X, X, model.bandwidth_, kernel)
    resid2 = (y - model._compute_local_fit(X)[0].intercept) ** 2
    # absolute round-off allowance: rows the fit nearly interpolates have sigma^2 ~ 1e-11
    sigma2 = Wt @ resid2
    np.testing.assert_allclose(model._training_variance(), sigma2, rtol=1e-10,
                               atol=1e-12 * sigma2.max())


@pytest.mark.parametrize("est", SMOOTHERS)
def test_standard_errors_track_monte_carlo_spread(est):
    # The sandwich variance sum_i l_i(x)^2 sigma^2(x_i) (Fan & Gijbels 1996, ch. 4) should
    # match the spread of the estimate over replications with known noise sd 0.5.
    Q = np.array([[0.02], [0.3], [0.7]])
    preds, stds = [], []
    for seed in range(150):
        X, y = _uniform_line(200, 100 + seed, noise=0.5)
        mean, std = est(bandwidth=0.4).fit(X, y).predict(Q, return_std=True)
        preds.append(mean)
        stds.append(std)
    ratio = np.mean(stds, axis=0) / np.std(preds, axis=0, ddof=1)
    # Monte Carlo error of an sd from 150 draws is about 6%; in-sample residuals shrink
    # sigma^2 by a few per cent more.
    assert np.all((ratio > 0.8) & (ratio < 1.2)), ratio


@pytest.mark.parametrize("est", SMOOTHERS)
def test_prediction_intervals(est):
    X, y = _uniform_line(150, 7, noise=0.3)
    model = est(bandwidth=0.5).fit(X, y)
    Q = np.linspace(0, 1, 11)[:, None]
    mean, std = model.predict(Q, return_std=True)
    lo90, hi90 = model.predict_interval(Q, level=0.9)
    lo, hi = model.predict_interval(Q)
    assert np.all(std > 0)
    np.testing.assert_allclose((lo + hi) / 2, mean)
    np.testing.assert_allclose((hi - lo) / (hi90 - lo90), 1.959964 / 1.644854, rtol=1e-5)
    np.testing.assert_allclose(model.predict(Q), mean)
    with pytest.raises(ValueError, match=r"'level' parameter must be a float in the open"):
        model.predict_interval(Q, level=1.5)


def test_outside_compact_support_is_nan_with_warning():
    X, y = _uniform_line(50, 8, noise=0.1)
    model = NadarayaWatsonRegressor(bandwidth=0.2, kernel="epanechnikov").fit(X, y)
    with pytest.warns(RuntimeWarning, match="1 of 2 queries have zero total weight"):
        pred = model.predict([[0.5], [4.0]])
    assert np.isfinite(pred[0]) and np.isnan(pred[1])


@pytest.mark.parametrize("est", SMOOTHERS)
def test_cv_fit_records_the_search(est):
    rng = np.random.default_rng(9)
    X = rng.uniform(size=(80, 2))
    y = np.cos(4 * X[:, 0]) + rng.normal(scale=0.2, size=80)
    model = est().fit(X, y)
    curve = model.cv_curve_
    assert isinstance(curve, CVCurve)
    np.testing.assert_array_equal(model.bandwidth_, curve.bandwidth)
    degree = int(est is LocalLinearRegressor)
    keep = ~model.ignored_features_
    assert curve.loo_error == pytest.approx(
        loo_cv_error(X[:, keep], y, model.bandwidth_[keep], degree=degree))
    # the chosen bandwidths are the best evaluated (up to the flat-kernel tolerance), and
    # nudging any finite one by 1% does not lower the error by more than the optimiser's
    # tolerance (a column cos(4 x0) ignores may be flat: its error barely moves)
    assert curve.loo_error <= min(curve.path_loo_error.min(), curve.grid_loo_error.min()) * (
        1 + CV_FLAT_TOLERANCE)
    for j in np.flatnonzero(np.isfinite(model.bandwidth_)):
        for factor in (1.01, 1 / 1.01):
            h = model.bandwidth_.copy()
            h[j] *= factor
            assert loo_cv_error(X[:, keep], y, h[keep], degree=degree) > curve.loo_error * (
                1 - 1e-6)


BAD_BANDWIDTHS = [
    (0.0, r"'bandwidth' parameter of \w+ must be .*Got 0\.0 instead"),
    (-1.0, r"'bandwidth' parameter of \w+ must be .*Got -1\.0 instead"),
    (np.inf, r"'bandwidth' parameter of \w+ must be .*Got inf instead"),
    (np.nan, r"'bandwidth' parameter of \w+ must be .*Got nan instead"),
    ("scott", r"'bandwidth' parameter of \w+ must be .*'cv'.*Got 'scott' instead"),
    ([0.1, 0.2], r"'bandwidth' parameter must have 3 entries \(one per column\)\. Got 2"),
    ([0.1, -0.2, 0.3], r"'bandwidth' parameter must be positive .*Got \[0\.1, -0\.2, 0\.3\]"),
    ([0.1, np.inf, 0.3], r"'bandwidth' parameter must be finite\. Got \[0\.1, inf, 0\.3\]"),
    ([[0.1, 0.2, 0.3]], r"'bandwidth' parameter must be 1-dimensional"),
    (["a", "b", "c"], r"'bandwidth' parameter must be 'cv', 'silverman', a positive float"),
]


@pytest.mark.parametrize("est", SMOOTHERS)
@pytest.mark.parametrize(("bandwidth", "message"), BAD_BANDWIDTHS)
def test_bad_bandwidths_are_rejected_and_leave_the_fit_intact(est, bandwidth, message):
    rng = np.random.default_rng(10)
    X, y = rng.uniform(size=(30, 3)), rng.normal(size=30)
    model = est(bandwidth=0.5).fit(X[:, :2], y)
    before = model.predict(X[:5, :2])
    with pytest.raises(ValueError, match=message):
        model.set_params(bandwidth=bandwidth).fit(X, y)
    assert model.n_features_in_ == 2
    np.testing.assert_array_equal(model.predict(X[:5, :2]), before)


@pytest.mark.parametrize("est", SMOOTHERS)
def test_unknown_kernel(est):
    X, y = np.random.default_rng(11).uniform(size=(20, 1)), np.arange(20.0)
    with pytest.raises(ValueError, match=r"'kernel' parameter of \w+ must be a str among .*"
                       r"Got 'box' instead"):
        est(kernel="box").fit(X, y)


def test_float_bandwidth_means_standard_deviations():
    rng = np.random.default_rng(12)
    X = rng.normal(size=(60, 2)) * [2.0, 0.1]
    y = rng.normal(size=60)
    a = NadarayaWatsonRegressor(bandwidth=0.7).fit(X, y)
    b = clone(a).set_params(bandwidth=[0.7, 0.7]).fit(X, y)
    np.testing.assert_allclose(a.bandwidth_, 0.7 * X.std(axis=0))
    np.testing.assert_array_equal(a.predict(X), b.predict(X))


def test_cv_search_reports_each_evaluation_and_can_be_stopped():
    """progress=RunControl sees one step per leave-one-out evaluation of the search; a
    cancel stops the fit, which keeps the earlier fitted state."""
    from hedgerow._progress import RunCancelled, RunControl

    rng = np.random.default_rng(1)
    X = rng.uniform(size=(120, 2))
    y = np.sin(3 * X[:, 0]) + rng.normal(0, 0.1, 120)
    seen = []
    est = NadarayaWatsonRegressor(bandwidth="cv")
    est.fit(X, y, progress=RunControl(lambda done, total: seen.append((done, total))))
    curve = est.cv_curve_
    # every distinct bandwidth evaluated once: the grid plus the recorded refinement path
    assert seen[-1][0] == len(curve.grid_loo_error) + len(curve.path_loo_error)
    assert all(total is None for _, total in seen)
    before = est.predict(X[:5])
    control = RunControl(lambda done, total: control.cancel() if done == 3 else None)
    with pytest.raises(RunCancelled):
        est.fit(X[::-1] * 2.0, y[::-1], progress=control)
    np.testing.assert_array_equal(est.predict(X[:5]), before)
