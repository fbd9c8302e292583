"""The probe visits only the rows with weight, and its numbers are the full-row ones."""

import copy
import pickle
import warnings

import numpy as np
import pytest

from hedgerow import HonestForestRegressor, LocalLinearForestRegressor
from hedgerow import diagnostics as D
from hedgerow.diagnostics._interactive import neighbourhood_span, weight_profile


@pytest.fixture(scope="module")
def fitted():
    rng = np.random.default_rng(8)
    n, d = 900, 5
    X = rng.normal(size=(n, d)) * [1.0, 30.0, 0.01, 2.0, 1.0] + [0, 100, 0, -3, 0]
    X[:, 4] = 2.5  # a constant column: its scale is 1.0
    y = X[:, 0] + np.sin(X[:, 1] / 30) + rng.normal(0, 0.2, n)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        llf = LocalLinearForestRegressor(n_estimators=40, random_state=2).fit(X, y)
        hf = HonestForestRegressor(n_estimators=40, random_state=2).fit(X, y)
    probes = np.vstack([X[3], np.median(X, axis=0), X.min(axis=0) - 0.5])
    return llf, hf, X, probes


def _full_row_neighbourhood(model, x):
    """The computation before the probe's work was limited to rows with weight."""
    X = model.X_train_
    w = model.neighbour_weights(x[None, :]).toarray().ravel()
    sd = X.std(axis=0)
    sd = np.where(sd > 0, sd, 1.0)
    diff = (X - x) / sd
    return w @ diff, w @ np.abs(diff), X.min(axis=0), X.max(axis=0)


def test_fitted_column_summary_is_the_training_rows_one(fitted):
    llf, _, X, _ = fitted
    sd = X.std(axis=0)
    np.testing.assert_array_equal(llf.column_scale_, np.where(sd > 0, sd, 1.0))
    assert llf.column_scale_[4] == 1.0
    np.testing.assert_array_equal(llf.column_min_, X.min(axis=0))
    np.testing.assert_array_equal(llf.column_max_, X.max(axis=0))


@pytest.mark.parametrize("which", ["llf", "honest"])
def test_probe_neighbourhood_equals_the_full_row_computation(fitted, which):
    llf, hf, _, probes = fitted
    model = llf if which == "llf" else hf
    for x in probes:
        for rep in (D.probe(model, x), D.probe_sketch(model, x)):
            off, spread, lo, hi = _full_row_neighbourhood(model, x)
            np.testing.assert_allclose(rep.neighbour_offset, off, rtol=1e-12, atol=1e-15)
            np.testing.assert_allclose(rep.neighbour_spread, spread, rtol=1e-12, atol=1e-15)
            outside = [j for j in range(x.size) if x[j] < lo[j] or x[j] > hi[j]]
            assert [rep.feature_names.index(o[0]) for o in rep.outside] == outside
    assert D.probe(model, probes[-1]).extrapolating


def test_span_profile_and_grid_equal_the_full_row_computation(fitted):
    llf, _, X, probes = fitted
    for x in probes:
        rep = D.probe(llf, x)
        w = rep.weights.toarray().ravel()
        for j in range(X.shape[1]):
            keep = w > 0
            order = np.argsort(X[keep, j], kind="stable")
            c, cw = X[keep, j][order], np.cumsum(w[keep][order])
            cw = cw / cw[-1]
            lo = c[min(np.searchsorted(cw, 0.1), c.size - 1)]
            hi = c[min(np.searchsorted(cw, 0.9), c.size - 1)]
            assert neighbourhood_span(rep, X, j) == (min(lo, x[j]), max(hi, x[j]))
        for cols in ("line", "all", [1], [0, 3]):
            prof = weight_profile(rep, X, "local linear forest", columns=cols)
            use = ([int(c) for c in rep.slope_columns] if cols == "line"
                   else list(range(X.shape[1])) if cols == "all" else cols)
            sd = X[:, use].std(axis=0)
            sd = np.where(sd > 0, sd, 1.0)
            rows = prof["row"].to_numpy()
            want = np.sqrt((((X[rows][:, use] - x[use]) / sd) ** 2).sum(axis=1))
            np.testing.assert_allclose(prof["distance"], want, rtol=1e-12, atol=0)
            np.testing.assert_array_equal(prof["weight"], w[rows])
    for j in range(X.shape[1]):
        np.testing.assert_array_equal(D.slice_grid(llf, j, 80),
                                      np.linspace(X[:, j].min(), X[:, j].max(), 80))


def test_probe_reads_no_training_row_without_weight(fitted):
    # rows without weight replaced by NaN: a pass over every row would turn the
    # neighbourhood NaN; the probe must give the same numbers
    llf, _, X, probes = fitted
    for x in probes:
        want = D.probe(llf, x)
        nz = want.weights.indices
        blind = copy.copy(llf)  # shares the trees and fit caches
        Xb = np.full_like(X, np.nan)
        Xb[nz] = X[nz]
        blind.X_train_ = Xb
        for rep in (D.probe(blind, x), D.probe_sketch(blind, x)):
            np.testing.assert_array_equal(rep.neighbour_offset, want.neighbour_offset)
            np.testing.assert_array_equal(rep.neighbour_spread, want.neighbour_spread)
            assert rep.outside == want.outside
        assert neighbourhood_span(want, Xb, 0) == neighbourhood_span(want, X, 0)


def test_forest_pickled_without_the_column_summary_still_probes(fitted):
    llf, _, X, probes = fitted
    old = pickle.loads(pickle.dumps(llf))
    for name in ("column_scale_", "column_min_", "column_max_"):
        delattr(old, name)  # as a forest pickled before they existed
    for x in probes:
        a, b = D.probe(llf, x), D.probe(old, x)
        np.testing.assert_array_equal(a.neighbour_offset, b.neighbour_offset)
        np.testing.assert_array_equal(a.neighbour_spread, b.neighbour_spread)
        assert a.outside == b.outside
    np.testing.assert_array_equal(D.slice_grid(old, 1), D.slice_grid(llf, 1))
