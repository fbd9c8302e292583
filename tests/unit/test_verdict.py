"""The verdict: cross-fitted errors, fair baselines, the decision and its guards."""

import numpy as np
import pandas as pd
import pytest
from sklearn.base import clone
from sklearn.ensemble import GradientBoostingRegressor

from hedgerow import HonestForestRegressor, LocalLinearForestRegressor
from hedgerow._progress import RunControl
from hedgerow.diagnostics import carrying_rows, paired_relative_gain, verdict
from hedgerow.diagnostics._heldout import fold_assignment
from hedgerow.diagnostics._verdict import FRAGILE_ROWS, LLF, PLAIN, PREVIEW, SAME_TREES


def _design(seed, n=200):
    rng = np.random.default_rng(seed)
    X = rng.uniform(size=(n, 3))
    y = np.exp(1.5 * X[:, 0]) + X[:, 1] + rng.normal(0, 0.3, n)
    return X, y


def _forest(**kw):
    return LocalLinearForestRegressor(n_estimators=40, random_state=3, **kw)


@pytest.mark.parametrize("seed", [0, 1])
def test_every_number_comes_from_fits_on_the_other_folds(seed):
    # cross-fitting by definition: each fold predicted by a clone fitted on the others,
    # the penalty and correction columns chosen there ("auto" in the clone)
    X, y = _design(seed)
    v = verdict(X, y, forest=_forest(), smoothers=None, baseline=False, progress=False)
    fold = fold_assignment(y.size, 5, 0)
    np.testing.assert_array_equal(v.errors["fold"], fold)
    llf, plain, same = (np.empty(y.size) for _ in range(3))
    for k in range(5):
        tr, te = fold != k, fold == k
        m = clone(_forest()).fit(X[tr], y[tr])
        llf[te] = m.predict(X[te])
        same[te] = m.local_average(X[te])
        plain[te] = HonestForestRegressor(n_estimators=40, random_state=3).fit(
            X[tr], y[tr]).predict(X[te])
    np.testing.assert_allclose(v.errors[LLF], (y - llf) ** 2, rtol=1e-10)
    np.testing.assert_allclose(v.errors[SAME_TREES], (y - same) ** 2, rtol=1e-10)
    np.testing.assert_allclose(v.errors[PLAIN], (y - plain) ** 2, rtol=1e-10)
    g, lo, hi = paired_relative_gain((y - plain) ** 2, (y - llf) ** 2)
    row = v.comparisons.loc[PLAIN]
    assert (row["gain_all"], row["lower_all"], row["upper_all"]) == pytest.approx((g, lo, hi))
    assert v.scoring == "cross-fit, 5 folds" and v.folds_done == 5
    assert v.comparisons.loc[SAME_TREES, "role"] == "diagnostic"


def test_same_trees_and_plain_rows_differ_unless_the_split_rule_is_mean():
    X, y = _design(4)
    ridge = verdict(X, y, forest=_forest(split_rule="ridge_residual"), smoothers=None,
                    baseline=False, progress=False)
    assert not np.allclose(ridge.errors[SAME_TREES], ridge.errors[PLAIN])
    mean = verdict(X, y, forest=_forest(split_rule="mean"), smoothers=None,
                   baseline=False, progress=False)
    np.testing.assert_array_equal(mean.errors[SAME_TREES], mean.errors[PLAIN])
    # the verdict reuses the trees for split_rule="mean": that is only right because a
    # plain honest forest with the same seed and settings grows exactly those trees
    a = _forest(split_rule="mean").fit(X, y)
    b = HonestForestRegressor(n_estimators=40, random_state=3).fit(X, y)
    np.testing.assert_array_equal(a.local_average(X[:50]), b.predict(X[:50]))


def test_other_rows_refit_or_raise():
    X, y = _design(5, n=300)
    fitted = _forest().fit(X, y)
    Xn, yn = X[:50].copy(), np.zeros(50)
    Xn[:, 0] = 0.0
    yn[::2] = 1.0
    with pytest.raises(ValueError, match="on_new_data='raise'"):
        verdict(Xn, yn, forest=fitted, smoothers=None, baseline=False, on_new_data="raise",
                progress=False)
    v = verdict(Xn, yn, forest=fitted, smoothers=None, baseline=False, progress=False)
    assert len(v.errors) == 50 and "other rows" in v.data_note
    ref = verdict(Xn, yn, forest=clone(fitted), smoothers=None, baseline=False,
                  progress=False)
    pd.testing.assert_frame_equal(v.comparisons, ref.comparisons)
    same = verdict(X, y, forest=fitted, smoothers=None, baseline=False, progress=False)
    assert same.data_note == "" and len(same.errors) == 300


def test_a_forest_viewed_at_a_penalty_is_scored_at_it_in_every_fold():
    from hedgerow.diagnostics import at_ridge_penalty

    X, y = _design(6)
    fitted = _forest().fit(X, y)
    cache = {}
    v = verdict(X, y, forest=at_ridge_penalty(fitted, 7.0), smoothers=None,
                baseline=False, progress=False, fold_cache=cache)
    fold = fold_assignment(y.size, 5, 0)
    pred = np.empty(y.size)
    for k in range(5):  # trees grown as the forest grew them, predictions at 7.0
        m = clone(_forest()).fit(X[fold != k], y[fold != k])
        pred[fold == k] = m.predict(X[fold == k], ridge_penalty=7.0)
    np.testing.assert_allclose(v.errors[LLF], (y - pred) ** 2, rtol=1e-10)
    # the cached fold fits give the numbers of a fresh run at another penalty
    again = verdict(X, y, forest=at_ridge_penalty(fitted, 0.5), smoothers=None,
                    baseline=False, progress=False, fold_cache=cache)
    fresh = verdict(X, y, forest=at_ridge_penalty(fitted, 0.5), smoothers=None,
                    baseline=False, progress=False)
    pd.testing.assert_frame_equal(again.errors, fresh.errors)
    assert not np.allclose(again.errors[LLF], v.errors[LLF])
    # a penalty set as the forest's parameter is that forest's setting in every fold
    fixed = verdict(X, y, forest=_forest(ridge_penalty=7.0), smoothers=None,
                    baseline=False, progress=False)
    pred = np.empty(y.size)
    for k in range(5):
        m = _forest(ridge_penalty=7.0).fit(X[fold != k], y[fold != k])
        pred[fold == k] = m.predict(X[fold == k])
    np.testing.assert_allclose(fixed.errors[LLF], (y - pred) ** 2, rtol=1e-10)


def test_constant_target_says_nothing_to_smooth():
    X, _ = _design(7, n=60)
    v = verdict(X, np.full(60, 2.5), forest=_forest(), progress=False)
    assert v.conclusion == "The target is constant: nothing to smooth."
    assert v.decision == "constant target" and v.comparisons.empty


def test_carrying_rows():
    # uniform differences: half the difference needs half the rows
    k, share = carrying_rows(np.full(100, 2.0), np.full(100, 1.0))
    assert (k, share) == (50, pytest.approx(0.5))
    # one row carries all of it
    base = np.ones(100)
    base[17] = 41.0
    assert carrying_rows(base, np.ones(100)) == (1, pytest.approx(1.0))
    # rows pulling the other way are not counted toward the direction of the total
    base = np.array([5.0, 5.0, 0.0, 0.0])
    new = np.array([0.0, 0.0, 2.0, 2.0])  # total difference +6, the two first rows give +10
    assert carrying_rows(base, new) == (1, pytest.approx(5 / 6))
    assert carrying_rows(np.ones(5), np.ones(5))[0] == 0


def test_a_result_carried_by_a_few_rows_is_flagged_fragile():
    X, y = _design(8, n=150)
    y = y.copy()
    y[np.argsort(X[:, 0])[-2:]] += 40.0  # two wild rows at the upper edge
    v = verdict(X, y, forest=_forest(), smoothers=None, baseline=False, progress=False)
    row = v.comparisons.loc[PLAIN]
    k, share = carrying_rows(v.errors[PLAIN], v.errors[LLF])
    assert row["rows_for_half"] == k and row["share_of_half"] == pytest.approx(share)
    assert row["fragile"] == (k <= FRAGILE_ROWS)
    assert row["fragile"], "two rows shifted by 40 s.d. should carry the difference"
    assert ("Fragile: 1 row carries" if k == 1 else f"Fragile: {k} rows carry") in v.conclusion


def test_cancel_leaves_a_clear_incomplete_verdict():
    X, y = _design(9)
    ctl = RunControl()
    ctl._on_update = lambda done, total: ctl.cancel() if done >= 4 else None
    v = verdict(X, y, forest=_forest(), smoothers=None, baseline=False, progress=ctl)
    assert v.decision == "incomplete" and v.folds_done == 2 and v.folds == 5
    assert v.conclusion.startswith("Incomplete: stopped after 2 of 5 folds")
    scored = v.errors["fold"].isin([0, 1])
    assert v.errors.loc[scored, LLF].notna().all()
    assert v.errors.loc[~scored, LLF].isna().all()


def test_preview_is_labelled_and_others_join_cross_fit():
    X, y = _design(10)
    p = verdict(X, y, forest=_forest(), smoothers=None, baseline=False, scoring="preview",
                progress=False)
    assert p.scoring == PREVIEW and p.conclusion.startswith("Preview (selection not held out)")
    v = verdict(X, y, forest=_forest(), smoothers=None, baseline=False, progress=False,
                others=[GradientBoostingRegressor(n_estimators=30, random_state=0)])
    assert "GradientBoostingRegressor" in v.comparisons.index
    assert v.comparisons.loc["GradientBoostingRegressor", "role"] == "alternative"
    best = v.comparisons[v.comparisons["role"] == "alternative"]["mse"].idxmin()
    assert v.best_alternative == best and f"the {best}" in v.conclusion


@pytest.mark.parametrize("kw, match", [
    ({"folds": 1}, "'folds'"), ({"folds": 2.5}, "'folds'"), ({"scoring": "oob"}, "'scoring'"),
    ({"on_new_data": "ignore"}, "'on_new_data'"), ({"level": 1.5}, "'level'"),
    ({"smoothers": "loo"}, "'smoothers'"), ({"fold_trees": 0}, "'fold_trees'"),
    ({"fold_trees": 2.5}, "'fold_trees'"), ({"fold_trees": True}, "'fold_trees'"),
])
def test_bad_parameters_name_themselves(kw, match):
    X, y = _design(11, n=40)
    with pytest.raises(ValueError, match=match):
        verdict(X, y, forest=_forest(), baseline=False, progress=False, **kw)


def test_decision_follows_the_interval_against_the_best_alternative():
    X, y = _design(12)
    v = verdict(X, y, forest=_forest(), smoothers=None, progress=False)
    r = v.comparisons.loc[v.best_alternative]
    expected = ("warranted" if r["lower_all"] > 0 else "hurts" if r["upper_all"] < 0
                else "no evidence either way")
    assert v.decision == expected and f"Decision: {expected}" in v.conclusion
    alts = v.comparisons[v.comparisons["role"] == "alternative"]
    assert r["mse"] == alts["mse"].min()


@pytest.mark.parametrize("trees, per_bag, fold_trees, grown", [
    (60, "auto", 20, 20), (60, 10, 25, 20), (60, 10, 5, 10), (60, "auto", None, 60),
    (60, "auto", 100, 60),
])
def test_fold_forests_grow_at_most_fold_trees_in_whole_bags(trees, per_bag, fold_trees, grown):
    # each fold's forests are clones of the forest at fold_trees trees (rounded down to whole
    # bags, never below one bag); the numbers are those of such clones fitted by hand
    X, y = _design(13)
    forest = LocalLinearForestRegressor(n_estimators=trees, trees_per_bag=per_bag,
                                        random_state=3)
    v = verdict(X, y, forest=forest, smoothers=None, baseline=False, progress=False,
                fold_trees=fold_trees)
    assert f"n_estimators={grown}," in v.settings[LLF]
    assert f"n_estimators={grown}," in v.settings[PLAIN]
    fold = fold_assignment(y.size, 5, 0)
    pred = np.empty(y.size)
    for k in range(5):
        tr, te = fold != k, fold == k
        pred[te] = clone(forest).set_params(n_estimators=grown).fit(X[tr], y[tr]).predict(
            X[te])
    np.testing.assert_allclose(v.errors[LLF], (y - pred) ** 2, rtol=1e-10)


def test_kernel_smoothers_are_shown_but_do_not_change_the_sentence():
    # the decision weighs the forests; smoothers get rows of their own (role "smoother")
    # and a note, so the report (with smoothers) and the decision panel and snapshot
    # (without) read the same sentence from the same folds
    from hedgerow import LocalLinearRegressor, NadarayaWatsonRegressor

    rng = np.random.default_rng(21)
    X = rng.uniform(size=(160, 1))
    y = np.sin(6 * X[:, 0]) + rng.normal(0, 0.2, 160)  # one smooth column: kernels do well
    sm = [NadarayaWatsonRegressor(), LocalLinearRegressor()]
    with_sm = verdict(X, y, forest=_forest(), smoothers=sm, progress=False)
    without = verdict(X, y, forest=_forest(), smoothers=None, progress=False)
    assert with_sm.conclusion == without.conclusion
    assert with_sm.decision == without.decision
    assert with_sm.best_alternative == without.best_alternative
    roles = with_sm.comparisons["role"]
    smoothers = list(roles[roles == "smoother"].index)
    assert len(smoothers) == 2 and "smoother" not in set(without.comparisons["role"])
    # the note names the best smoother and its gain; the kernel line beats the forest here
    best = str(with_sm.comparisons.loc[smoothers, "mse"].idxmin())
    r = with_sm.comparisons.loc[best]
    assert with_sm.smoother_note.startswith(
        f"Kernel smoothers (shown, not part of the decision): against the best, the {best},")
    assert r["upper_all"] < 0 and "The smoother does better" in with_sm.smoother_note
    assert without.smoother_note == ""
    assert with_sm.smoother_note in repr(with_sm)
    # smoothers given as a generator are taken once, whole
    gen = verdict(X, y, forest=_forest(), smoothers=(m for m in sm), progress=False)
    assert list(gen.comparisons.index) == list(with_sm.comparisons.index)
