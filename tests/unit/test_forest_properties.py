"""Property tests of the forest weights on random designs (hypothesis).

Designs have random shapes, heavily tied or continuous columns, constant columns and
duplicated rows; forests have random settings. Whatever the data, the weights of a query
are a probability vector over the training rows, the prediction is that average of y, and
out-of-bag weights never look at a row's own value.
"""

import warnings

import numpy as np
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from hypothesis.extra.numpy import arrays

from hedgerow import HonestForestRegressor
from hedgerow.forest import subsample_size


@st.composite
def designs(draw):
    n = draw(st.integers(12, 60))
    d = draw(st.integers(1, 4))
    if draw(st.booleans()):
        # few distinct values per column: many tied split candidates
        X = draw(arrays(np.float64, (n, d), elements=st.integers(0, 3).map(float)))
    else:
        X = draw(arrays(np.float64, (n, d),
                        elements=st.floats(-100, 100, allow_nan=False, width=32)))
    if draw(st.booleans()):
        X[:, draw(st.integers(0, d - 1))] = 7.0
    y = draw(arrays(np.float64, n, elements=st.floats(-1e3, 1e3, allow_nan=False)))
    n_dup = draw(st.integers(0, n // 3))
    if n_dup:
        # duplicated rows, with or without the same response
        X[n - n_dup:] = X[:n_dup]
        if draw(st.booleans()):
            y[n - n_dup:] = y[:n_dup]
    return X, y


@st.composite
def forests(draw, n):
    honest = draw(st.booleans())
    msl = draw(st.integers(1, 3))
    tpb = draw(st.sampled_from([1, 2, 4]))
    n_bags = draw(st.integers(2, 5))
    rates = [0.3, 0.5] + ([0.8, 1.0] if tpb == 1 else [])
    rate = draw(st.sampled_from(rates))
    s = subsample_size(n, rate, tpb)
    if (s // 2 if honest else s) < msl:
        msl = 1  # keep the leaf constraint satisfiable (the smallest s here is 3)
    return dict(
        n_estimators=tpb * n_bags, trees_per_bag=tpb, subsample_rate=rate, honest=honest,
        min_samples_leaf=msl, max_features=draw(st.sampled_from([None, 1])),
        random_state=draw(st.integers(0, 2**16)),
    )


_SETTINGS = settings(
    max_examples=40, deadline=None, suppress_health_check=[HealthCheck.too_slow]
)


@_SETTINGS
@given(data=st.data())
def test_weights_are_an_average_of_the_training_rows(data):
    X, y = data.draw(designs())
    params = data.draw(forests(X.shape[0]))
    est = HonestForestRegressor(**params).fit(X, y)
    span = X.max(axis=0) - X.min(axis=0) + 1.0
    Xq = np.vstack([X[:5], X.min(axis=0) - span, X.max(axis=0) + span,
                    data.draw(arrays(np.float64, (4, X.shape[1]),
                                     elements=st.floats(-200, 200, allow_nan=False)))])
    W = est.neighbour_weights(Xq)
    pred = est.predict(Xq)
    assert W.shape == (Xq.shape[0], X.shape[0])
    assert not np.any(np.isnan(W.data)) and not np.any(np.isnan(pred))
    assert W.data.min() >= 0.0
    np.testing.assert_allclose(np.asarray(W.sum(axis=1)).ravel(), 1.0, atol=1e-12)
    np.testing.assert_allclose(pred, W @ y, rtol=1e-9, atol=1e-9)
    # a convex combination of y stays within its range
    assert np.all(pred >= y.min() - 1e-9) and np.all(pred <= y.max() + 1e-9)
    assert np.diff(est.forest_.leaf_ptr).min() >= params["min_samples_leaf"]


@_SETTINGS
@given(data=st.data())
def test_oob_weights_never_see_the_own_row(data):
    X, y = data.draw(designs())
    params = data.draw(forests(X.shape[0]))
    est = HonestForestRegressor(**params).fit(X, y)
    with warnings.catch_warnings():
        # rows that every tree drew are warned about; checked below instead
        warnings.simplefilter("ignore", RuntimeWarning)
        W = est.oob_neighbour_weights()
        oob = est.oob_predict()
    inbag = est.forest_.inbag(np.arange(X.shape[0]))
    has_tree = ~inbag.all(axis=1)
    np.testing.assert_array_equal(W.diagonal(), 0.0)
    assert not np.any(np.isnan(W.data)) and W.data.min(initial=0.0) >= 0.0
    sums = np.asarray(W.sum(axis=1)).ravel()
    np.testing.assert_allclose(sums[has_tree], 1.0, atol=1e-12)
    np.testing.assert_array_equal(sums[~has_tree], 0.0)
    np.testing.assert_array_equal(np.isnan(oob), ~has_tree)
    np.testing.assert_allclose(oob[has_tree], (W @ y)[has_tree], rtol=1e-9, atol=1e-9)
    # no weight on any row that shared a tree's draw with the row, in every usable tree
    W = W.tocsr()
    fr = est.forest_
    for i in np.flatnonzero(has_tree)[:5]:
        support = W.indices[W.indptr[i]:W.indptr[i + 1]]
        allowed = np.zeros(X.shape[0], dtype=bool)
        for t in np.flatnonzero(~inbag[i]):
            allowed[fr.sample_rows[fr.sample_ptr[t]:fr.sample_ptr[t + 1]]] = True
        assert allowed[support].all()


@_SETTINGS
@given(data=st.data())
def test_bagged_standard_errors_are_positive_or_nan(data):
    X, y = data.draw(designs())
    params = data.draw(forests(X.shape[0]))
    if params["trees_per_bag"] == 1:
        # rate 0.5 on n >= 12 rows: s = n // 2 >= 6, so 3 rows per half meet any leaf size
        params.update(trees_per_bag=2, n_estimators=4, subsample_rate=0.5)
    est = HonestForestRegressor(**params).fit(X, y)
    mean, std = est.predict(X[:6], return_std=True)
    np.testing.assert_array_equal(mean, est.predict(X[:6]))
    # a constant response gives zero spread: tau = 0 and the variance floors at 0
    assert np.all(std >= 0.0) and not np.any(np.isnan(std))
