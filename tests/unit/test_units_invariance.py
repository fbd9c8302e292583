"""A change of units never changes the answer.

CART places splits by the order of a column's values only, and its squared-error criterion
is equivariant under y -> c y + d (common practice: Breiman, Friedman, Olshen & Stone 1984,
Classification and Regression Trees, chapter 8; the split depends on order statistics).
So an honest forest fitted on ``a * X + b`` (any a != 0, per column) must predict, at the
transformed queries, what the forest fitted on X predicts at the original queries, and a
forest fitted on ``c * y + d`` must give ``c * prediction + d`` with intervals ``|c|``
times as wide. The local linear forest standardises its correction columns, so it inherits
both properties. Checked on several designs, with scales from 1e-12 to 1e12.
"""

import warnings

import numpy as np
import pytest
from sklearn.datasets import make_friedman1

from hedgerow import HonestForestRegressor, LocalLinearForestRegressor
from hedgerow.datasets import make_softplus_design

SCALES = [1e-12, 1e-9, 1e-7, 1e-5, 1e-3, 0.37, 1.0, 3e3, 1e7, 1e12]


def _designs():
    # several data sets: Friedman 1 (sklearn.datasets.make_friedman1), the softplus design
    # of hedgerow.datasets, and a step with a heavy-tailed noise column
    X1, y1 = make_friedman1(n_samples=160, n_features=5, noise=1.0, random_state=1)
    X2, y2, _ = make_softplus_design(n_samples=160, n_features=4, random_state=2)
    rng = np.random.default_rng(3)
    X3 = np.column_stack([rng.normal(size=160), rng.standard_t(2, size=160),
                          rng.uniform(-5, 5, size=160)])
    y3 = np.where(X3[:, 0] > 0.2, 2.0, -1.0) + X3[:, 2] * 0.3 + rng.normal(size=160)
    return {"friedman1": (X1, y1), "softplus": (X2, y2), "step": (X3, y3)}


DESIGNS = _designs()


def _queries(X, seed):
    rng = np.random.default_rng(seed)
    lo, hi = X.min(axis=0), X.max(axis=0)
    return rng.uniform(lo, hi, size=(60, X.shape[1]))


def _affine(X, rng):
    """Return ``(a, b)`` per column: magnitude from SCALES, random sign, offset of a few
    spreads (so the transformed values keep their order and most of their digits)."""
    d = X.shape[1]
    a = rng.choice(SCALES, size=d) * rng.choice([-1.0, 1.0], size=d)
    b = a * rng.uniform(-20, 20, size=d)
    return a, b


@pytest.mark.parametrize("name", sorted(DESIGNS))
@pytest.mark.parametrize("seed", [0, 1, 2])
def test_forest_predictions_invariant_under_affine_columns(name, seed):
    X, y = DESIGNS[name]
    Q = _queries(X, seed)
    rng = np.random.default_rng(100 + seed)
    a, b = _affine(X, rng)
    params = dict(n_estimators=40, random_state=seed)
    base = HonestForestRegressor(**params).fit(X, y)
    moved = HonestForestRegressor(**params).fit(X * a + b, y)
    p0, s0 = base.predict(Q, return_std=True)
    p1, s1 = moved.predict(Q * a + b, return_std=True)
    np.testing.assert_allclose(p1, p0, rtol=1e-10, atol=1e-12 * np.abs(y).max())
    np.testing.assert_allclose(s1, s0, rtol=1e-8, atol=1e-12 * np.abs(y).max())
    # the forest is not the plain average (which has spread 0); the softplus design is
    # mostly noise, so its fitted spread is about a fifth of y's
    assert p1.std() > 0.05 * y.std()


@pytest.mark.parametrize("scale", SCALES)
def test_every_column_at_one_scale(scale):
    # the case: one change of units for all columns, down to 1e-12 (the forest
    # used to predict the mean of y everywhere from 1e-7 on)
    X, y = DESIGNS["friedman1"]
    Q = _queries(X, 7)
    params = dict(n_estimators=30, random_state=4)
    p0 = HonestForestRegressor(**params).fit(X, y).predict(Q)
    p1 = HonestForestRegressor(**params).fit(X * scale, y).predict(Q * scale)
    np.testing.assert_allclose(p1, p0, rtol=1e-10, atol=1e-10)


@pytest.mark.parametrize("name", sorted(DESIGNS))
@pytest.mark.parametrize("c", [-2.5, 1e-12, 1e-8, 1e-3, 7.0, 1e5, 1e12])
def test_forest_equivariant_under_affine_target(name, c):
    X, y = DESIGNS[name]
    Q = _queries(X, 11)
    d = 3.0 * c + 1e3 * abs(c)
    params = dict(n_estimators=40, random_state=5)
    base = HonestForestRegressor(**params).fit(X, y)
    moved = HonestForestRegressor(**params).fit(X, c * y + d)
    p0, s0 = base.predict(Q, return_std=True)
    p1, s1 = moved.predict(Q, return_std=True)
    # the offset costs digits of c*y + d itself (|d| is ~1e3 spreads of y)
    np.testing.assert_allclose(p1, c * p0 + d, rtol=1e-9, atol=1e-9 * abs(c) * 1e3)
    np.testing.assert_allclose(s1, abs(c) * s0, rtol=1e-6, atol=1e-9 * abs(c) * 1e3)
    lo0, hi0 = base.predict_interval(Q)
    lo1, hi1 = moved.predict_interval(Q)
    np.testing.assert_allclose(hi1 - lo1, abs(c) * (hi0 - lo0), rtol=1e-6,
                               atol=1e-9 * abs(c) * 1e3)
    assert np.std(p1) > 0.05 * abs(c) * y.std()  # not the constant forest of y * 1e-8


@pytest.mark.parametrize("seed", [0, 1])
def test_local_linear_forest_invariant_under_units(seed):
    X, y = DESIGNS["softplus" if seed == 0 else "friedman1"]
    Q = _queries(X, 20 + seed)
    rng = np.random.default_rng(200 + seed)
    a, b = _affine(X, rng)
    c, d = 1e-7 * (1 + seed), 5.0
    params = dict(n_estimators=20, random_state=seed)
    base = LocalLinearForestRegressor(**params).fit(X, y)
    moved = LocalLinearForestRegressor(**params).fit(X * a + b, c * y + d)
    np.testing.assert_array_equal(moved.correction_features_, base.correction_features_)
    assert moved.ridge_penalty_ == base.ridge_penalty_
    p0, s0 = base.predict(Q, return_std=True)
    p1, s1 = moved.predict(Q * a + b, return_std=True)
    np.testing.assert_allclose(p1, c * p0 + d, rtol=1e-8, atol=1e-7 * c * np.abs(y).max())
    np.testing.assert_allclose(s1, c * s0, rtol=1e-5, atol=1e-7 * c * np.abs(y).max())


@pytest.mark.parametrize("scale", [1e-300, 1e-150, 1e150, 1e300])
def test_forests_survive_extreme_magnitudes(scale):
    # columns near 1e+-300: the spread of a column used to overflow (or underflow to a
    # "constant" column) and the local linear forest silently became the plain forest
    X, y = DESIGNS["friedman1"]
    Q = _queries(X, 30)
    for cls in (HonestForestRegressor, LocalLinearForestRegressor):
        params = dict(n_estimators=20, random_state=6)
        base = cls(**params).fit(X, y)
        with warnings.catch_warnings():
            warnings.simplefilter("error", RuntimeWarning)  # no overflow on the way
            big = cls(**params).fit(X * scale, y)
            p1, s1 = big.predict(Q * scale, return_std=True)
        p0, s0 = base.predict(Q, return_std=True)
        np.testing.assert_allclose(p1, p0, rtol=1e-9, atol=1e-9)
        np.testing.assert_allclose(s1, s0, rtol=1e-6, atol=1e-9)
        if cls is LocalLinearForestRegressor:
            np.testing.assert_array_equal(big.correction_features_,
                                          base.correction_features_)
            assert big.ridge_penalty_ == base.ridge_penalty_


@pytest.mark.parametrize("c", [1e-300, 1e-200, 1e-100, 1e100, 1e200, 1e300])
def test_local_linear_forest_screening_and_penalty_ignore_target_units(c):
    # the lasso screening raised UnboundLocalError inside LassoCV for y ~ 1e200 and kept
    # other columns for y ~ 1e+-100; squared out-of-bag errors underflowed near 1e-300
    for name in ("friedman1", "step"):
        X, y = DESIGNS[name]
        params = dict(n_estimators=20, random_state=8)
        base = LocalLinearForestRegressor(**params).fit(X, y)
        moved = LocalLinearForestRegressor(**params).fit(X, c * y)
        np.testing.assert_array_equal(moved.correction_features_, base.correction_features_)
        assert moved.ridge_penalty_ == base.ridge_penalty_
        np.testing.assert_allclose(moved.predict(X[:30]) / c, base.predict(X[:30]),
                                   rtol=1e-8)


@pytest.mark.parametrize("scale", [1e-300, 1e-150, 1e150, 1e300, 1e307])
def test_kernel_smoothers_with_a_given_bandwidth_survive_extreme_magnitudes(scale):
    # a float bandwidth is in standard deviations of each column, so a change of units
    # must not change the fit; near 1e307 the column means used to overflow (NaN fits).
    # (the automatic bandwidth: test_kernel_smoothers_with_the_automatic_bandwidth_...)
    from hedgerow import LocalLinearRegressor, NadarayaWatsonRegressor

    X, y = DESIGNS["friedman1"]
    Q = _queries(X, 40)
    for est in (NadarayaWatsonRegressor(bandwidth=0.5), LocalLinearRegressor(bandwidth=0.8)):
        p0, s0 = est.fit(X, y).predict(Q, return_std=True)
        p1, s1 = est.fit(X * scale, y).predict(Q * scale, return_std=True)
        np.testing.assert_allclose(p1, p0, rtol=1e-8)
        np.testing.assert_allclose(s1, s0, rtol=1e-6)


@pytest.mark.parametrize("scale", [1e-300, 1e-150, 1e150, 1e300, 1e307])
def test_silverman_start_scales_with_the_column(scale):
    # X.std overflowed near 1e300 (and its squares underflowed near 1e-300), so the rule
    # of thumb silently fell back to the IQR spread; it must scale with the column
    from hedgerow.kernels._bandwidth import silverman_bandwidth

    X, _ = DESIGNS["friedman1"]
    with warnings.catch_warnings():
        warnings.simplefilter("error", RuntimeWarning)
        h = silverman_bandwidth(X * scale)
    np.testing.assert_allclose(h / scale, silverman_bandwidth(X), rtol=1e-12)
    # heavy ties: the larger spread is used, at every magnitude alike
    T = np.repeat(X[:4], 30, axis=0)
    T[:100] = T[0]
    np.testing.assert_allclose(silverman_bandwidth(T * scale) / scale,
                               silverman_bandwidth(T), rtol=1e-12)


@pytest.mark.parametrize("scale", [1e-300, 1e300])
def test_kernel_smoothers_with_the_automatic_bandwidth_survive_extreme_magnitudes(scale):
    # the cross-validated bandwidth searches from the rule of thumb: in units of each
    # column, so a change of units gives the same fit
    from hedgerow import LocalLinearRegressor, NadarayaWatsonRegressor

    X, y = DESIGNS["friedman1"]
    X, y = X[:150, :3], y[:150]
    Q = _queries(X, 20)
    for cls in (NadarayaWatsonRegressor, LocalLinearRegressor):
        base = cls().fit(X, y)
        with warnings.catch_warnings():
            warnings.simplefilter("error", RuntimeWarning)
            big = cls().fit(X * scale, y)
            p1 = big.predict(Q * scale)
        np.testing.assert_allclose(big.bandwidth_ / scale, base.bandwidth_, rtol=1e-6)
        np.testing.assert_allclose(p1, base.predict(Q), rtol=1e-6, atol=1e-9)


@pytest.mark.parametrize("c", [1e-300, 1e-200, 1e150, 1e200, 1e300])
def test_standard_errors_scale_with_extreme_targets(c):
    # squared per-tree predictions overflowed from y ~ 1e150 on (inf or NaN errors)
    X, y = DESIGNS["friedman1"]
    Q = _queries(X, 50)
    for cls in (HonestForestRegressor, LocalLinearForestRegressor):
        params = dict(n_estimators=20, random_state=9)
        base = cls(**params).fit(X, y)
        moved = cls(**params).fit(X, c * y)
        p0, s0 = base.predict(Q, return_std=True)
        p1, s1 = moved.predict(Q, return_std=True)
        np.testing.assert_allclose(p1 / c, p0, rtol=1e-8)
        np.testing.assert_allclose(s1 / c, s0, rtol=1e-6)
        o0, os0 = base.oob_predict(return_std=True)
        o1, os1 = moved.oob_predict(return_std=True)
        np.testing.assert_allclose(os1 / c, os0, rtol=1e-6)


def test_columns_spanning_the_whole_float_range():
    # values from -1.7e308 to 1.7e308: the column spread (3.4e308) is not a float, yet
    # every estimator standardises by halves or powers of two and gives the same answer
    from hedgerow import LocalLinearRegressor, NadarayaWatsonRegressor

    X, y = DESIGNS["friedman1"]
    Q = _queries(X, 60)
    def wide(A):
        return (A - 0.5) * 2 * 1.7e308
    for est in (HonestForestRegressor(n_estimators=20, random_state=0),
                LocalLinearForestRegressor(n_estimators=20, random_state=0),
                NadarayaWatsonRegressor(bandwidth=0.6), LocalLinearRegressor(bandwidth=0.8)):
        p0, s0 = est.fit(X, y).predict(Q, return_std=True)
        with warnings.catch_warnings():
            warnings.simplefilter("error", RuntimeWarning)
            p1, s1 = est.fit(wide(X), y).predict(wide(Q), return_std=True)
        np.testing.assert_allclose(p1, p0, rtol=1e-10, atol=1e-10)
        np.testing.assert_allclose(s1, s0, rtol=1e-8, atol=1e-10)
