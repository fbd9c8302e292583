"""The leave-one-out bandwidth search: its gradient, flat columns, and its optimum."""

import numpy as np
import pytest

from hedgerow.estimators._kernel import LocalLinearRegressor, NadarayaWatsonRegressor
from hedgerow.kernels import (
    CV_FLAT_FROM,
    CV_FLAT_TOLERANCE,
    KERNELS,
    kernel_weights,
    loo_cv_error,
    loo_cv_gradient,
    select_bandwidth_cv,
    silverman_bandwidth,
)

SMOOTHERS = {0: NadarayaWatsonRegressor, 1: LocalLinearRegressor}


def _design(seed, n, d):
    rng = np.random.default_rng(seed)
    X = rng.uniform(0, 3, size=(n, d)) * rng.uniform(0.5, 2.0, size=d)
    y = np.sin(2 * X[:, 0] / X[:, 0].std()) + rng.normal(scale=0.3, size=n)
    if d > 1:
        y += 0.3 * X[:, 1] ** 2
    return X, y


def _central_difference(X, y, h, kernel, degree, step=1e-5):
    out = np.empty(h.size)
    for c in range(h.size):
        up, down = h.copy(), h.copy()
        up[c] *= np.exp(step)
        down[c] *= np.exp(-step)
        out[c] = (loo_cv_error(X, y, up, kernel, degree)
                  - loo_cv_error(X, y, down, kernel, degree)) / (2 * step)
    return out


# Gaussian and tricube weights are continuously differentiable in the bandwidth, so
# central differences (step 1e-5 in log h, error O(1e-10)) agree to about 1e-7 of the
# gradient's size. The Epanechnikov weight has a kink where a row enters the support,
# so differences straddling one are off by O(step) per row: compared at 1e-3.
TOLERANCE = {"gaussian": 1e-6, "tricube": 1e-6, "epanechnikov": 1e-3}


@pytest.mark.parametrize("kernel", KERNELS)
@pytest.mark.parametrize("degree", [0, 1])
@pytest.mark.parametrize(("seed", "d", "widen"), [(0, 1, 1.5), (1, 2, 2.0), (2, 3, 3.0)])
def test_gradient_equals_finite_differences(kernel, degree, seed, d, widen):
    X, y = _design(seed, 150, d)
    h = silverman_bandwidth(X) * widen * (1.0 if kernel == "gaussian" else 2.0)
    err, grad = loo_cv_gradient(X, y, h, kernel, degree)
    assert err == pytest.approx(loo_cv_error(X, y, h, kernel, degree), rel=1e-14)
    fd = _central_difference(X, y, h, kernel, degree)
    np.testing.assert_allclose(grad, fd, rtol=0,
                               atol=TOLERANCE[kernel] * np.abs(fd).max())


@pytest.mark.parametrize("degree", [0, 1])
def test_gradient_covers_rows_refitted_directly(degree):
    # A row far from the others has leverage near one and is refitted without itself;
    # its term of the gradient comes from that refit (not the hat-matrix identity).
    X, y = _design(3, 120, 2)
    X[0] = X.max(axis=0) + 2.0 * X.std(axis=0)
    h = silverman_bandwidth(X)
    err, grad = loo_cv_gradient(X, y, h, "gaussian", degree)
    # The isolated row's nearly singular local system costs the objective digits: a step
    # of 1e-4 (truncation error about 1e-8) keeps the differences above its round-off.
    fd = _central_difference(X, y, h, "gaussian", degree, step=1e-4)
    np.testing.assert_allclose(grad, fd, rtol=0, atol=1e-6 * np.abs(fd).max())


def _with_noise_columns(seed, n, relevant, noise):
    rng = np.random.default_rng(seed)
    X = rng.uniform(0, 3, size=(n, relevant + noise))
    y = np.sin(2 * X[:, 0]) + rng.normal(scale=0.2, size=n)
    if relevant > 1:
        y += np.cos(1.5 * X[:, 1])
    return X, y


NOISE_DESIGNS = [(0, 1, 1), (1, 1, 2), (2, 2, 2), (3, 1, 3), (4, 2, 1), (5, 2, 3)]


@pytest.mark.parametrize("degree", [0, 1])
@pytest.mark.parametrize(("seed", "relevant", "noise"), NOISE_DESIGNS)
def test_irrelevant_columns_drop_out(degree, seed, relevant, noise):
    """Hall, Li & Racine (2007, REStat): CV sends the bandwidths of columns the response
    does not depend on to the upper end, where they drop out of the fit. In a finite
    sample CV may prefer a finite bandwidth for one of them: then only where the flat
    kernel really has the larger error."""
    X, y = _with_noise_columns(seed, 300, relevant, noise)
    model = SMOOTHERS[degree]().fit(X, y)
    h = model.bandwidth_
    assert np.all(np.isfinite(h[:relevant]))
    assert not model.ignored_features_[:relevant].any()
    keep = ~model.ignored_features_
    for j in range(relevant, X.shape[1]):
        if np.isfinite(h[j]) and h[j] >= CV_FLAT_FROM * X[:, j].std():
            # a candidate for a flat kernel that was refused: refused only on its merits
            flat = h.copy()
            flat[j] = np.inf
            assert (loo_cv_error(X[:, keep], y, flat[keep], "gaussian", degree)
                    > model.cv_curve_.loo_error * (1 + CV_FLAT_TOLERANCE))
        elif np.isinf(h[j]) and degree == 0:
            assert model.ignored_features_[j]  # a flat kernel ignores the column
    assert model.n_features_used_ == keep.sum()
    # the fit equals the same smoother on the columns it uses alone (same bandwidths)
    Xr = X[:, keep]
    alone = SMOOTHERS[degree](bandwidth="silverman").fit(Xr, y)
    alone.bandwidth_ = h[keep].copy()  # the chosen ones (a flat kernel cannot be asked for)
    alone._variance_cache = {}
    Q = np.random.default_rng(seed + 50).uniform(0, 3, size=(40, X.shape[1]))
    np.testing.assert_allclose(model.predict(Q), alone.predict(Q[:, keep]),
                               rtol=1e-6, atol=1e-6 * np.abs(y).max())
    np.testing.assert_allclose(model.predict(Q, return_std=True)[1],
                               alone.predict(Q[:, keep], return_std=True)[1], rtol=1e-6)
    np.testing.assert_allclose(model.loo_predict(), alone.loo_predict(), rtol=1e-6,
                               atol=1e-6 * np.abs(y).max())
    if degree:
        slopes = model.local_slopes(Q)
        assert np.all(slopes[:, ~keep] == 0.0)
        np.testing.assert_allclose(slopes[:, keep], alone.local_slopes(Q[:, keep]),
                                   rtol=1e-6, atol=1e-6)
    # and the recorded error is that fit's leave-one-out error
    assert model.cv_curve_.loo_error == pytest.approx(
        loo_cv_error(Xr, y, h[keep], "gaussian", degree), rel=1e-12)


def test_most_irrelevant_columns_end_flat_and_ignored():
    flat = ignored = total = 0
    for degree in (0, 1):
        for seed, relevant, noise in NOISE_DESIGNS:
            X, y = _with_noise_columns(seed, 300, relevant, noise)
            model = SMOOTHERS[degree]().fit(X, y)
            flat += np.isinf(model.bandwidth_[relevant:]).sum()
            ignored += model.ignored_features_[relevant:].sum()
            total += noise
    assert flat >= 0.75 * total
    assert ignored >= 0.75 * total


def _dense_grid_best(X, y, degree, points):
    sd = X.std(axis=0)
    axis = np.geomspace(0.02, 20.0, points)
    grid = np.stack(np.meshgrid(*([axis] * X.shape[1])), -1).reshape(-1, X.shape[1])
    return min(loo_cv_error(X, y, f * sd, "gaussian", degree) for f in grid)


@pytest.mark.parametrize("degree", [0, 1])
@pytest.mark.parametrize(("seed", "d"), [(4, 1), (5, 1), (6, 2), (7, 2)])
def test_search_is_within_half_a_percent_of_a_dense_grid(degree, seed, d):
    # Common practice: a dense grid as the reference optimum of a low-dimensional CV.
    X, y = _design(seed, 100, d)
    curve = select_bandwidth_cv(X, y, degree=degree)
    keep = ~curve.ignored
    ours = loo_cv_error(X[:, keep], y, curve.bandwidth[keep], "gaussian", degree)
    assert ours == pytest.approx(curve.loo_error, rel=1e-12)
    best = _dense_grid_best(X, y, degree, 40 if d == 1 else 25)
    assert ours <= best * 1.005


def test_flat_columns_cost_at_most_the_tolerance():
    X, y = _with_noise_columns(8, 200, 1, 2)
    curve = select_bandwidth_cv(X, y, degree=0)
    finite = np.isfinite(curve.path_bandwidth).all(axis=1)
    # the best point with every bandwidth finite is not better beyond the tolerance
    assert curve.loo_error <= curve.path_loo_error[finite].min() * (1 + CV_FLAT_TOLERANCE)


@pytest.mark.parametrize("kernel", KERNELS)
@pytest.mark.parametrize("degree", [0, 1])
def test_sums_within_the_kernels_reach_change_nothing(kernel, degree, monkeypatch):
    """Large n: rows beyond the kernel's reach along one column are skipped; the
    leave-one-out error and its gradient stay those of the full sums (round-off)."""
    import hedgerow.kernels._bandwidth as bandwidth_module

    X, y = _design(9, 700, 2)
    # three rows far out, close to each other: nearly alone (refitted directly for
    # narrow Gaussian bandwidths), yet with neighbours inside a compact support
    X[:3] = X.max(axis=0) + 5.0 * X.std(axis=0) + 0.02 * X[:3]
    h = silverman_bandwidth(X) * (0.5 if kernel == "gaussian" else 1.5)
    full = loo_cv_gradient(X, y, h, kernel, degree)
    assert np.isfinite(full[0]) and np.all(np.isfinite(full[1]))
    monkeypatch.setattr(bandwidth_module, "CV_WINDOW_FROM", 100)
    # the sums (and the Gaussian gradient) in reach blocks, the compact kernels'
    # gradient loop in windows along one column
    blocks = bandwidth_module._reach_blocks(X, h, kernel)
    assert blocks is not None
    queries = np.concatenate([q for q, _ in blocks])
    assert np.array_equal(np.sort(queries), np.arange(len(X)))  # each row once
    assert sum(q.size * rows.size for q, rows in blocks) < 0.8 * len(X) ** 2
    for q, rows in blocks:  # no row with weight is left out of its block
        W = kernel_weights(X, X[q], h, kernel, normalize=False).toarray()
        outside = np.setdiff1d(np.arange(len(X)), rows)
        assert not W[:, outside].any()
        assert W[:, rows].any(axis=1).all()
    assert bandwidth_module._reach_windows(X, h, kernel) is not None
    windowed = loo_cv_gradient(X, y, h, kernel, degree)
    assert windowed[0] == pytest.approx(full[0], rel=1e-12)
    np.testing.assert_allclose(windowed[1], full[1], rtol=0,
                               atol=1e-10 * np.abs(full[1]).max())


@pytest.mark.parametrize("degree", [0, 1])
def test_gradient_from_the_kept_weight_matrix_equals_the_recomputed_one(degree):
    """The search keeps the Gaussian weight matrix of its sums for the gradient; the
    error and gradient are those of the path that recomputes the weights."""
    import hedgerow.kernels._bandwidth as bandwidth_module
    from hedgerow.local import default_scale

    X, y = _design(10, 300, 3)
    X[0] = X.max(axis=0) + 3.0 * X.std(axis=0)  # one row refitted alone
    h = silverman_bandwidth(X) * 1.5
    scale = default_scale(X)
    plain = bandwidth_module._loo_parts(X, y, h, "gaussian", degree, scale)
    kept = bandwidth_module._loo_parts(X, y, h, "gaussian", degree, scale,
                                       weights=np.empty((300, 300)))
    assert plain[5] is None and kept[5] is not None
    assert plain[3].size >= 1  # the far row is refitted directly
    np.testing.assert_allclose(kept[0], plain[0], rtol=1e-12)
    g_plain = bandwidth_module._loo_gradient(X, y, h, "gaussian", degree, scale, plain)
    g_kept = bandwidth_module._loo_gradient(X, y, h, "gaussian", degree, scale, kept)
    np.testing.assert_allclose(g_kept, g_plain, rtol=0, atol=1e-11 * np.abs(g_plain).max())
    # and the search's error is the one loo_cv_error gives
    curve = select_bandwidth_cv(X, y, degree=degree)
    keep = ~curve.ignored
    assert curve.loo_error == pytest.approx(
        loo_cv_error(X[:, keep], y, curve.bandwidth[keep], "gaussian", degree), rel=1e-12)


def _untruncated_loo_error(X, y, h, degree):
    """Leave-one-out error from the full Gaussian weight matrix, nothing truncated."""
    U = X / h
    D2 = ((U[:, None, :] - U[None, :, :]) ** 2).sum(axis=2)
    W = np.exp(-0.5 * D2)
    np.fill_diagonal(W, 0.0)  # row i left out of its own fit
    if degree == 0:
        fit = W @ y / W.sum(axis=1)
    else:
        Z = np.concatenate([np.ones((len(X), 1)), X], axis=1)
        fit = np.empty(len(X))
        for i in range(len(X)):
            Zi = Z - np.append(0.0, X[i])
            M = (Zi * W[i][:, None]).T @ Zi
            fit[i] = np.linalg.solve(M, (Zi * W[i][:, None]).T @ y)[0]
    return float(np.mean((y - fit) ** 2))


@pytest.mark.parametrize("degree", [0, 1])
@pytest.mark.parametrize(("seed", "widen"), [(11, 0.5), (12, 1.0), (13, 0.75)])
def test_reach_blocks_keep_the_untruncated_objective(degree, seed, widen):
    """From CV_WINDOW_FROM rows on the sums skip rows beyond the Gaussian's reach; the
    error is still that of the untruncated kernel to round-off."""
    import hedgerow.kernels._bandwidth as bandwidth_module

    X, y = _design(seed, bandwidth_module.CV_WINDOW_FROM, 2)
    h = silverman_bandwidth(X) * widen
    assert bandwidth_module._reach_blocks(X, h, "gaussian") is not None
    ours = loo_cv_error(X, y, h, "gaussian", degree)
    assert ours == pytest.approx(_untruncated_loo_error(X, y, h, degree), rel=1e-12)
