"""Split-half agreement: its numbers against a direct computation, bad input, interrupts."""

import numpy as np
import pytest
from sklearn.base import clone

from hedgerow import HonestForestRegressor, LocalLinearForestRegressor
from hedgerow._progress import RunControl
from hedgerow.datasets import coverage_designs
from hedgerow.diagnostics import split_half_agreement


def _data(n=300):
    design = coverage_designs(["gentle bend"])[0]
    X, y, _ = design.sample(random_state=2, n_samples=n)
    return X, y


FOREST = LocalLinearForestRegressor(n_estimators=100)


def test_pooled_figures_follow_from_the_fold_rows_and_sum_over_rows():
    X, y = _data()
    rep = split_half_agreement(X, y, forest=FOREST, folds=3, progress=False)
    f = rep.frame
    assert rep.folds_done == 3 and len(f) == 3 * 2 * 2
    assert set(f["selection"]) == {"own", "fixed"}
    assert set(f["interval"]) == {"bias_corrected", "clt"}
    # every held-out row counted once per selection and interval
    for (_, _), g in f.groupby(["selection", "interval"]):
        assert g["n"].sum() == X.shape[0]
    np.testing.assert_allclose(f["ratio"], f["mean_sq_diff"] / f["mean_pred_var"])
    g = f[(f.selection == "own") & (f.interval == "bias_corrected")]
    want = np.sum(g["n"] * g["mean_sq_diff"]) / np.sum(g["n"] * g["mean_pred_var"])
    assert rep.ratio("own") == pytest.approx(want)
    assert 0.0 <= rep.share_within("fixed", "clt") <= 1.0


def test_fold_rows_equal_two_fits_on_the_halves_done_by_hand():
    # the same folds, halves and seeds, written out: the difference of the two halves'
    # centres against the sum of their variances
    from hedgerow.diagnostics._heldout import fold_assignment

    X, y = _data()
    rep = split_half_agreement(X, y, forest=FOREST, folds=3, selection="own",
                               intervals="clt", progress=False, random_state=7)
    rng = np.random.default_rng(7)
    fold = fold_assignment(X.shape[0], 3, rng.integers(2**31 - 1))
    seeds = rng.integers(0, 2**31 - 1, size=(3, 3))
    te, tr = np.flatnonzero(fold == 0), np.flatnonzero(fold != 0)
    perm = np.random.default_rng(seeds[0, 0]).permutation(tr)
    halves = np.sort(perm[: tr.size // 2]), np.sort(perm[tr.size // 2:])
    fits = [clone(FOREST).set_params(random_state=int(seeds[0, 2]) + h).fit(X[r], y[r])
            for h, r in enumerate(halves)]
    (ma, sa), (mb, sb) = (m.predict(X[te], return_std=True) for m in fits)
    row = rep.frame.iloc[0]
    assert row["mean_sq_diff"] == pytest.approx(np.mean((ma - mb) ** 2), rel=1e-12)
    assert row["mean_pred_var"] == pytest.approx(np.mean(sa**2 + sb**2), rel=1e-12)
    z = np.abs(ma - mb) / np.sqrt(sa**2 + sb**2)
    assert row["share_within"] == pytest.approx(np.mean(z < 1.959963984540054))


def test_fixed_selection_gives_both_halves_the_same_columns_and_penalty():
    X, y = _data()
    seen = []
    orig = LocalLinearForestRegressor.fit

    def spy(self, X_, y_, **kw):
        out = orig(self, X_, y_, **kw)
        seen.append((tuple(self.correction_features_), self.ridge_penalty_, X_.shape[0]))
        return out

    LocalLinearForestRegressor.fit = spy
    try:
        split_half_agreement(X, y, forest=FOREST, folds=2, selection="fixed",
                             intervals="clt", progress=False)
    finally:
        LocalLinearForestRegressor.fit = orig
    # per fold: the whole training fold, then its two halves with its choices
    assert len(seen) == 6
    for whole, a, b in (seen[0:3], seen[3:6]):
        assert a[:2] == b[:2] == whole[:2]
        assert a[2] + b[2] == whole[2]


def test_an_interruption_keeps_the_completed_folds():
    X, y = _data()
    control = RunControl(on_update=lambda done, total: control.cancel() if done == 2 else None)
    rep = split_half_agreement(X, y, forest=FOREST, folds=3, selection="own",
                               progress=control)
    assert rep.folds_done == 1 and set(rep.frame["fold"]) == {0}
    assert any("interrupted" in n for n in rep._notes())


@pytest.mark.parametrize("kwargs, error, match", [
    ({"forest": HonestForestRegressor()}, TypeError, "'forest' parameter must be a Local"),
    ({"folds": 1}, ValueError, "'folds' parameter must be an integer >= 2"),
    ({"selection": "each"}, ValueError, "'selection' parameter must hold values of"),
    ({"intervals": "bias_bound"}, ValueError, "'intervals' parameter must hold"),
    ({"intervals": "wide"}, ValueError, "'method' parameter must be one of"),
    ({"level": 2.0}, ValueError, "'level' parameter"),
])
def test_bad_arguments_are_named(kwargs, error, match):
    X, y = _data(60)
    with pytest.raises(error, match=match):
        split_half_agreement(X, y, progress=False, **kwargs)


def test_bad_rows_are_named():
    X, y = _data(60)
    with pytest.raises(ValueError, match="'X' and 'y' parameters must be"):
        split_half_agreement(X, y[:-1], progress=False)
    with pytest.raises(ValueError, match="at least 4 \\* folds"):
        split_half_agreement(X[:10], y[:10], folds=5, progress=False)
    X2 = X.copy()
    X2[0, 0] = np.nan
    with pytest.raises(ValueError, match="finite"):
        split_half_agreement(X2, y, progress=False)
