"""Unit tests of the forest engine: weights, out-of-bag, honesty, sampling, reproducibility.

Every check recomputes its quantity independently from the stored flat arrays
(``sample_ptr``/``sample_rows``, ``leaf_ptr``/``leaf_rows``, ``apply``) rather than through
the code path under test.
"""

import math
import pickle
import warnings
from fractions import Fraction

import joblib
import numpy as np
import pytest
from scipy.stats import norm

from hedgerow import HonestForestRegressor
from hedgerow.estimators._forest import resolve_trees_per_bag
from hedgerow.forest import grow_forest, plan_samples, subsample_size


def _tree_rows(forest, t):
    return forest.sample_rows[forest.sample_ptr[t]:forest.sample_ptr[t + 1]]


def _leaf_members(forest, leaf):
    return forest.leaf_rows[forest.leaf_ptr[leaf]:forest.leaf_ptr[leaf + 1]]


def _tree_leaves(forest, t):
    return np.arange(forest.leaf_start[t], forest.leaf_start[t + 1])


@pytest.fixture(scope="module")
def bagged(friedman_small):
    """A small honest forest in little bags of 5 (so OOB and variance are defined)."""
    X, y = friedman_small
    est = HonestForestRegressor(
        n_estimators=40, trees_per_bag=5, subsample_rate=0.3, min_samples_leaf=3,
        random_state=0,
    )
    return est.fit(X, y)


# -- forest weights ---------------------------------------------------------------------

def test_weight_rows_sum_to_one_and_are_nonnegative(bagged, friedman_query):
    W = bagged.neighbour_weights(friedman_query)
    assert W.shape == (friedman_query.shape[0], bagged.X_train_.shape[0])
    np.testing.assert_allclose(np.asarray(W.sum(axis=1)).ravel(), 1.0, atol=1e-12)
    assert W.data.min() > 0.0  # stored entries are the support: strictly positive


def test_predict_equals_weights_times_y(bagged, friedman_query):
    W = bagged.neighbour_weights(friedman_query)
    np.testing.assert_allclose(
        bagged.predict(friedman_query), W @ bagged.y_train_, rtol=1e-12, atol=1e-10
    )


def test_weights_rebuilt_from_leaf_rows(bagged, friedman_query):
    # alpha_i(x) = mean over trees of 1{i in leaf of x} / |leaf| (forest weights of
    # Athey, Tibshirani & Wager 2019, eq. 3), rebuilt here with a plain Python loop.
    forest = bagged.forest_
    n = bagged.X_train_.shape[0]
    leaves = forest.apply(friedman_query)
    W = bagged.neighbour_weights(friedman_query).toarray()
    for q in range(0, friedman_query.shape[0], 7):
        w = np.zeros(n)
        for t in range(forest.n_trees):
            members = _leaf_members(forest, leaves[q, t])
            w[members] += 1.0 / members.size
        w /= forest.n_trees
        np.testing.assert_allclose(W[q], w, atol=1e-14)


def test_weights_of_many_queries_do_not_depend_on_leaf_grouping(bagged, friedman_small):
    """From _GROUP_QUERIES queries on, rows are built grouped by leaf and put back: the
    matrix must equal the one built query by query in the given order (also OOB)."""
    from hedgerow.forest import _storage

    forest = bagged.forest_
    X, _ = friedman_small
    rng = np.random.default_rng(4)
    Q = np.vstack([X[rng.permutation(X.shape[0])], X[:37] + 0.01])
    assert Q.shape[0] >= _storage._GROUP_QUERIES
    leaves = forest.apply(Q)
    usable = ~forest.inbag(np.arange(X.shape[0]))
    for use, L in ((None, leaves), (usable, forest.apply(X))):
        grouped, n_grouped = forest.weights(L, use, n_jobs=2)
        plain, n_plain = forest._weights_in_order(L, use, 1)
        assert grouped.has_sorted_indices
        np.testing.assert_array_equal(grouped.indptr, plain.indptr)
        np.testing.assert_array_equal(grouped.indices, plain.indices)
        np.testing.assert_array_equal(grouped.data, plain.data)
        np.testing.assert_array_equal(n_grouped, n_plain)


def test_branch_free_descent_equals_the_general_one(bagged, friedman_query):
    """Our trees number children consecutively, so apply takes the arithmetic descent;
    it must land in the same leaves as the general left/right descent (any remainder of
    the four-query interleave included)."""
    from hedgerow.forest._storage import _apply_chunk, _apply_chunk_adjacent

    forest = bagged.forest_
    assert forest._children_adjacent
    for m in (1, 3, 4, 7, friedman_query.shape[0]):
        Q = np.ascontiguousarray(friedman_query[:m])
        general = np.empty((m, forest.n_trees), dtype=np.int32)
        fast = np.empty_like(general)
        _apply_chunk(Q, forest.feature, forest.threshold, forest.left, forest.right,
                     forest.node_start, forest.leaf_start, general)
        _apply_chunk_adjacent(Q, forest.feature, forest.threshold, forest.left,
                              forest.node_start, forest.leaf_start, fast)
        np.testing.assert_array_equal(fast, general)
        np.testing.assert_array_equal(forest.apply(Q), general)


def test_apply_descends_by_threshold(bagged, friedman_query):
    # Rebuild the leaf of each query by walking the stored nodes in Python.
    forest = bagged.forest_
    leaves = forest.apply(friedman_query)
    for t in range(0, forest.n_trees, 9):
        off = forest.node_start[t]
        for q in range(friedman_query.shape[0]):
            node = off
            while forest.feature[node] >= 0:
                go_left = friedman_query[q, forest.feature[node]] <= forest.threshold[node]
                node = off + (forest.left[node] if go_left else forest.right[node])
            assert leaves[q, t] == forest.leaf_start[t] + forest.left[node]


def test_leaf_values_are_means_of_leaf_rows(bagged):
    forest = bagged.forest_
    for leaf in range(0, forest.leaf_ptr.size - 1, 13):
        members = _leaf_members(forest, leaf)
        assert bagged.leaf_values_[leaf] == pytest.approx(bagged.y_train_[members].mean())


# -- out-of-bag ----------------------------------------------------------------------------

def test_oob_weights_give_no_weight_to_own_row(bagged):
    W = bagged.oob_neighbour_weights()
    n = bagged.X_train_.shape[0]
    assert W.shape == (n, n)
    np.testing.assert_array_equal(W.diagonal(), 0.0)
    np.testing.assert_allclose(np.asarray(W.sum(axis=1)).ravel(), 1.0, atol=1e-12)
    assert W.data.min() > 0.0


def test_oob_weights_avoid_every_row_drawn_with_it(bagged):
    # A row's OOB weight may sit only on rows that appear in some tree that did not draw it.
    forest = bagged.forest_
    W = bagged.oob_neighbour_weights().tocsr()
    for i in range(0, W.shape[0], 29):
        allowed = set()
        for t in range(forest.n_trees):
            rows = _tree_rows(forest, t)
            if i not in rows:
                allowed.update(rows.tolist())
        support = set(W.indices[W.indptr[i]:W.indptr[i + 1]].tolist())
        assert i not in support
        assert support <= allowed


def test_oob_predict_recomputed_from_trees_that_did_not_draw_the_row(bagged):
    # Independent recomputation from sample_ptr/sample_rows, apply and leaf_values_.
    forest = bagged.forest_
    X, y = bagged.X_train_, bagged.y_train_
    leaves = forest.apply(X)
    expected = np.empty(X.shape[0])
    for i in range(X.shape[0]):
        vals = [
            bagged.leaf_values_[leaves[i, t]]
            for t in range(forest.n_trees)
            if i not in _tree_rows(forest, t)
        ]
        expected[i] = np.mean(vals)
    np.testing.assert_allclose(bagged.oob_predict(), expected, rtol=1e-12)
    # and the same through the OOB weights
    np.testing.assert_allclose(bagged.oob_neighbour_weights() @ y, expected, rtol=1e-10)


def test_oob_predict_differs_from_in_sample_predict(bagged):
    # Guards the recomputation above against a forest in which no tree draws any row.
    assert not np.allclose(bagged.oob_predict(), bagged.predict(bagged.X_train_))


def test_oob_rows_drawn_by_every_tree_are_nan_and_warned(friedman_small):
    X, y = friedman_small
    est = HonestForestRegressor(
        n_estimators=2, trees_per_bag=1, subsample_rate=0.9, min_samples_leaf=5,
        random_state=1,
    ).fit(X, y)
    forest = est.forest_
    drawn_by_all = np.array(
        [all(i in _tree_rows(forest, t) for t in range(2)) for i in range(X.shape[0])]
    )
    assert drawn_by_all.any() and not drawn_by_all.all()
    with pytest.warns(RuntimeWarning, match=f"{drawn_by_all.sum()} of {X.shape[0]} training"):
        oob = est.oob_predict()
    np.testing.assert_array_equal(np.isnan(oob), drawn_by_all)
    with pytest.warns(RuntimeWarning, match="no usable tree"):
        W = est.oob_neighbour_weights()
    sums = np.asarray(W.sum(axis=1)).ravel()
    np.testing.assert_allclose(sums[~drawn_by_all], 1.0, atol=1e-12)
    np.testing.assert_array_equal(sums[drawn_by_all], 0.0)


# -- honesty by construction ----------------------------------------------------------------

def _engine_forest(X, y, *, honest, n_estimators=6, trees_per_bag=1, rate=0.6, msl=4,
                   seed=3):
    plan = plan_samples(X.shape[0], n_estimators, trees_per_bag, rate, honest, seed)
    forest = grow_forest(X, y, plan, min_samples_leaf=msl, max_features=X.shape[1])
    return plan, forest


@pytest.mark.parametrize("honest", [True, False])
def test_leaf_rows_are_exactly_the_fill_rows_routed_to_each_leaf(friedman_small, honest):
    X, y = friedman_small
    msl = 4
    plan, forest = _engine_forest(X, y, honest=honest, msl=msl)
    leaves = forest.apply(X)
    for t in range(forest.n_trees):
        rows = plan.sample_rows[t]
        fill = set(rows[plan.fill_masks[t]].tolist())
        grow = rows[plan.grow_masks[t]]
        tree_leaves = _tree_leaves(forest, t)
        seen = []
        for leaf in tree_leaves:
            members = _leaf_members(forest, leaf)
            assert members.size >= msl
            # each stored row really falls in that leaf when sent down the tree
            np.testing.assert_array_equal(leaves[members, t], leaf)
            seen.extend(members.tolist())
            # the split-placing rows also respect the leaf constraint
            assert np.sum(leaves[grow, t] == leaf) >= msl
        assert sorted(seen) == sorted(fill)  # every fill row exactly once
        if honest:
            assert fill.isdisjoint(grow.tolist())
        else:
            assert fill == set(grow.tolist())


def test_honest_split_roles_are_disjoint_halves(friedman_small):
    X, _ = friedman_small
    n = X.shape[0]
    plan = plan_samples(n, 8, 1, 0.5, True, 7)
    s = subsample_size(n, 0.5, 1)
    for rows, grow, fill in zip(plan.sample_rows, plan.grow_masks, plan.fill_masks,
                                strict=True):
        assert rows.size == s == np.unique(rows).size
        assert grow.sum() == s // 2 and fill.sum() == s - s // 2
        assert not np.any(grow & fill)
        assert np.all(grow | fill)


def test_splits_do_not_depend_on_fill_responses(friedman_small):
    # Honesty (Athey & Imbens 2016, PNAS 113(27); Wager & Athey 2018, JASA 113): the
    # partition is a function of the split-placing rows only. Rewrite every fill row's y
    # and the tree structure must not move.
    X, y = friedman_small
    plan, forest = _engine_forest(X, y, honest=True, n_estimators=1)
    rows = plan.sample_rows[0]
    fill_only = rows[plan.fill_masks[0]]
    y2 = y.copy()
    y2[fill_only] = np.random.default_rng(0).normal(size=fill_only.size) * 100.0
    forest2 = grow_forest(X, y2, plan, min_samples_leaf=4, max_features=X.shape[1])
    np.testing.assert_array_equal(forest2.feature, forest.feature)
    np.testing.assert_array_equal(forest2.threshold, forest.threshold)
    np.testing.assert_array_equal(forest2.leaf_rows, forest.leaf_rows)
    # control: rewriting the split-placing rows does move the splits
    grow = rows[plan.grow_masks[0]]
    y3 = y.copy()
    y3[grow] = np.random.default_rng(0).normal(size=grow.size) * 100.0
    forest3 = grow_forest(X, y3, plan, min_samples_leaf=4, max_features=X.shape[1])
    assert not (
        forest3.feature.shape == forest.feature.shape
        and np.array_equal(forest3.threshold, forest.threshold)
    )


@pytest.mark.parametrize("msl", [1, 5, 12])
def test_estimator_leaves_hold_at_least_min_samples_leaf_fill_rows(friedman_small, msl):
    X, y = friedman_small
    est = HonestForestRegressor(
        n_estimators=10, trees_per_bag=2, min_samples_leaf=msl, random_state=4
    ).fit(X, y)
    forest = est.forest_
    assert np.diff(forest.leaf_ptr).min() >= msl
    s = est.subsample_size_
    for t in range(forest.n_trees):
        tree_rows = set(_tree_rows(forest, t).tolist())
        members = forest.leaf_rows[
            forest.leaf_ptr[forest.leaf_start[t]]:forest.leaf_ptr[forest.leaf_start[t + 1]]
        ]
        # honest: the leaves hold the fill half of the tree's own subsample, once each
        assert members.size == s - s // 2 == np.unique(members).size
        assert set(members.tolist()) <= tree_rows


# -- sampling plan ------------------------------------------------------------------------

@pytest.mark.parametrize(
    ("n", "rate", "tpb"),
    [(300, 0.5, 1), (301, 0.5, 2), (100, 0.29, 1), (100, 0.29, 4), (57, 0.1, 1),
     (200, 1.0, 1), (99, 0.33, 3)],
)
def test_subsample_size_is_floor_of_rate_times_n(n, rate, tpb):
    # exact rational arithmetic: 0.29 * 100 is 28.999... in binary floating point
    expected = math.floor(Fraction(str(rate)) * n)
    if tpb >= 2:
        expected = min(expected, n // 2)
    assert subsample_size(n, rate, tpb) == expected
    plan = plan_samples(n, 2 * tpb, tpb, rate, True, 0)
    assert all(r.size == expected for r in plan.sample_rows)


def test_trees_of_a_bag_draw_from_one_half_sample():
    n, tpb, n_bags = 200, 10, 4
    plan = plan_samples(n, tpb * n_bags, tpb, 0.4, True, 5)
    unions = []
    for g in range(n_bags):
        bag = [plan.sample_rows[g * tpb + j] for j in range(tpb)]
        union = np.unique(np.concatenate(bag))
        # ten independent draws of 80 of 200 rows would cover ~199 rows; a half-sample
        # caps the union at n // 2
        assert union.size <= n // 2
        for r in bag:
            assert r.size == 80 == np.unique(r).size
        unions.append(set(union.tolist()))
    # bags draw different half-samples
    assert len(set.union(*unions)) > n // 2


def test_unbagged_trees_draw_from_all_rows():
    n = 200
    plan = plan_samples(n, 10, 1, 0.4, False, 5)
    union = np.unique(np.concatenate(plan.sample_rows))
    assert union.size > n // 2


def test_full_rate_unbagged_tree_draws_every_row_once():
    plan = plan_samples(50, 3, 1, 1.0, False, 0)
    for r in plan.sample_rows:
        np.testing.assert_array_equal(np.sort(r), np.arange(50))


def test_estimator_subsample_sizes_follow_the_plan(friedman_small):
    X, y = friedman_small
    est = HonestForestRegressor(
        n_estimators=20, trees_per_bag=4, subsample_rate=0.37, random_state=2
    ).fit(X, y)
    sizes = np.diff(est.forest_.sample_ptr)
    assert est.subsample_size_ == math.floor(Fraction("0.37") * X.shape[0]) == 111
    np.testing.assert_array_equal(sizes, 111)
    for g in range(5):
        bag = np.concatenate([_tree_rows(est.forest_, 4 * g + j) for j in range(4)])
        assert np.unique(bag).size <= X.shape[0] // 2


# -- trees_per_bag = "auto" ------------------------------------------------------------------

def _auto_rule(n_estimators, rate):
    # the documented rule, written out independently of the implementation
    if rate > 0.5:
        return 1
    sizes = [b for b in range(2, 33) if n_estimators % b == 0 and n_estimators // b >= 2]
    return max(sizes, default=1)


@pytest.mark.parametrize(
    ("n_estimators", "expected"),
    [(2000, 25), (100, 25), (64, 32), (60, 30), (40, 20), (20, 10), (4, 2), (2, 1),
     (1, 1), (31, 1), (37, 1), (97, 1), (101, 1), (74, 2), (33 * 2, 22)],
)
def test_auto_trees_per_bag_named_cases(n_estimators, expected):
    assert resolve_trees_per_bag("auto", n_estimators, 0.5) == expected


def test_auto_trees_per_bag_matches_rule_everywhere():
    for n_estimators in range(1, 400):
        for rate in (0.1, 0.5):
            assert resolve_trees_per_bag("auto", n_estimators, rate) == _auto_rule(
                n_estimators, rate
            ), n_estimators


@pytest.mark.parametrize("n_estimators", [20, 64, 2000])
def test_auto_trees_per_bag_is_one_above_half_rate(n_estimators):
    assert resolve_trees_per_bag("auto", n_estimators, 0.51) == 1
    assert resolve_trees_per_bag("auto", n_estimators, 1.0) == 1


def test_explicit_trees_per_bag_passes_through():
    assert resolve_trees_per_bag(7, 70, 0.9) == 7


def test_estimator_resolves_auto(friedman_small):
    X, y = friedman_small
    est = HonestForestRegressor(n_estimators=36, random_state=0).fit(X, y)
    assert est.trees_per_bag_ == 18
    est = HonestForestRegressor(n_estimators=36, subsample_rate=0.6, random_state=0).fit(X, y)
    assert est.trees_per_bag_ == 1


# -- reproducibility ----------------------------------------------------------------------

def _forest_arrays_equal(a, b):
    for name in ("feature", "threshold", "left", "right", "node_start", "leaf_ptr",
                 "leaf_rows", "leaf_start", "sample_ptr", "sample_rows"):
        np.testing.assert_array_equal(getattr(a, name), getattr(b, name), err_msg=name)


def test_same_seed_same_forest_for_any_n_jobs(friedman_small, friedman_query):
    X, y = friedman_small
    params = dict(n_estimators=48, trees_per_bag=4, min_samples_leaf=3, random_state=21)
    # a chunk of 16 trees per task: three tasks, so two threads really interleave
    one = HonestForestRegressor(**params, n_jobs=1).fit(X, y)
    two = HonestForestRegressor(**params, n_jobs=2).fit(X, y)
    _forest_arrays_equal(one.forest_, two.forest_)
    np.testing.assert_array_equal(one.predict(friedman_query), two.predict(friedman_query))
    np.testing.assert_array_equal(one.oob_predict(), two.oob_predict())
    m1, s1 = one.predict(friedman_query, return_std=True)
    m2, s2 = two.predict(friedman_query, return_std=True)
    np.testing.assert_array_equal(s1, s2)


def test_different_seed_different_forest(friedman_small, friedman_query):
    X, y = friedman_small
    a = HonestForestRegressor(n_estimators=20, random_state=1).fit(X, y)
    b = HonestForestRegressor(n_estimators=20, random_state=2).fit(X, y)
    assert not np.array_equal(a.predict(friedman_query), b.predict(friedman_query))


def test_refit_with_int_seed_is_identical(friedman_small, friedman_query):
    X, y = friedman_small
    est = HonestForestRegressor(n_estimators=20, random_state=5)
    p1 = est.fit(X, y).predict(friedman_query)
    p2 = est.fit(X, y).predict(friedman_query)
    np.testing.assert_array_equal(p1, p2)


def test_pickle_round_trip(bagged, friedman_query):
    clone = pickle.loads(pickle.dumps(bagged))
    np.testing.assert_array_equal(clone.predict(friedman_query), bagged.predict(friedman_query))
    np.testing.assert_array_equal(clone.oob_predict(), bagged.oob_predict())
    m1, s1 = bagged.predict(friedman_query, return_std=True)
    m2, s2 = clone.predict(friedman_query, return_std=True)
    np.testing.assert_array_equal(s1, s2)
    _forest_arrays_equal(clone.forest_, bagged.forest_)


def test_joblib_round_trip(bagged, friedman_query, tmp_path):
    path = tmp_path / "forest.joblib"
    joblib.dump(bagged, path)
    clone = joblib.load(path)
    np.testing.assert_array_equal(clone.predict(friedman_query), bagged.predict(friedman_query))
    np.testing.assert_array_equal(
        clone.neighbour_weights(friedman_query).toarray(),
        bagged.neighbour_weights(friedman_query).toarray(),
    )


def test_progress_reports_every_tree(friedman_small):
    X, y = friedman_small
    seen = []
    HonestForestRegressor(n_estimators=40, random_state=0).fit(X, y, progress=seen.append)
    assert seen[-1] == 40
    assert seen == sorted(seen)


# -- standard errors ----------------------------------------------------------------------

def test_return_std_is_positive_and_interval_brackets_prediction(bagged, friedman_query):
    mean, std = bagged.predict(friedman_query, return_std=True)
    np.testing.assert_array_equal(mean, bagged.predict(friedman_query))
    assert np.all(np.isfinite(std)) and np.all(std > 0)
    lo, hi = bagged.predict_interval(friedman_query, level=0.9, method="clt")
    assert np.all(lo < mean) and np.all(mean < hi)
    # reference: scipy.stats.norm.ppf (two-sided 90% normal interval: z = ppf(0.95))
    np.testing.assert_allclose((hi - lo) / (2 * std), norm.ppf(0.95), rtol=1e-12)


def test_return_std_without_bags_raises(friedman_small):
    X, y = friedman_small
    est = HonestForestRegressor(n_estimators=20, trees_per_bag=1, random_state=0).fit(X, y)
    msg = r"needs trees grouped in little bags.*Got trees_per_bag=1"
    with pytest.raises(ValueError, match=msg):
        est.predict(X[:5], return_std=True)
    with pytest.raises(ValueError, match="trees_per_bag=1"):
        est.oob_predict(return_std=True)
    with pytest.raises(ValueError, match="trees_per_bag=1"):
        est.predict_interval(X[:5])


def test_no_warning_in_ordinary_use(bagged, friedman_query):
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        bagged.predict(friedman_query, return_std=True)
        bagged.oob_predict(return_std=True)


# -- numerical robustness -----------------------------------------------------------------

@pytest.mark.parametrize("offset", [1e8, 1e10, 1e12])
def test_predictions_follow_a_shift_of_y(friedman_small, friedman_query, offset):
    # Bug fixed: splits depend on y only through differences, but the split search summed
    # squares of the raw y, which cancel when y carries a large offset; y + 1e8 gave other,
    # worse trees (RMSE 0.6-2.8 from the unshifted forest's predictions, noise sd 1). With
    # y centred before the search only near-tie flips from rounding remain (~0.01).
    X, y = friedman_small
    params = dict(n_estimators=40, random_state=0)
    base = HonestForestRegressor(**params).fit(X, y).predict(friedman_query)
    shifted = HonestForestRegressor(**params).fit(X, y + offset).predict(friedman_query)
    rmse = np.sqrt(np.mean((shifted - offset - base) ** 2))
    # tolerance: a tenth of the noise standard deviation of make_friedman1(noise=1.0)
    assert rmse < 0.1


def test_small_scale_features_are_split(friedman_small, friedman_query):
    X, y = friedman_small
    params = dict(n_estimators=20, random_state=0)
    base = HonestForestRegressor(**params).fit(X, y).predict(friedman_query)
    small = HonestForestRegressor(**params).fit(X * 1e-8, y).predict(friedman_query * 1e-8)
    # a change of units must not switch the forest off
    assert small.std() > 0.5 * base.std()


# -- compact storage: one row set per little bag --------------------------------------------

@pytest.mark.parametrize(("rate", "tpb"), [(0.5, 4), (0.3, 4), (0.6, 1)])
def test_bag_storage_gives_the_plan_draws(friedman_small, rate, tpb):
    """inbag, tree_rows and the per-tree view equal the plan's draws, replayed from the
    seed; with bags at rate 0.5 every tree draws its whole half-sample and no per-tree
    mask is stored."""
    X, y = friedman_small
    n = X.shape[0]
    plan = plan_samples(n, 12, tpb, rate, True, 9)
    forest = grow_forest(X, y, plan, min_samples_leaf=3, max_features=2, n_jobs=2, chunk=4)
    drawn = plan.sample_rows
    expected = np.zeros((n, 12), dtype=bool)
    for t, rows in enumerate(drawn):
        expected[rows, t] = True
        np.testing.assert_array_equal(forest.tree_rows(t), np.sort(rows))
    np.testing.assert_array_equal(forest.inbag(np.arange(n)), expected)
    np.testing.assert_array_equal(forest.sample_rows, np.concatenate([np.sort(r) for r in drawn]))
    assert forest.n_bags == 12 // tpb
    assert forest.trees_draw_whole_bag == (rate == 0.5 or tpb == 1)
    if tpb >= 2:
        assert forest.bag_rows.size == forest.n_bags * (n // 2)
    if forest.trees_draw_whole_bag:
        bags = forest.bag_inbag(np.arange(n))
        np.testing.assert_array_equal(np.repeat(bags, tpb, axis=1), expected)


def test_pickle_keeps_one_row_set_per_bag(friedman_small):
    X, y = friedman_small
    est = HonestForestRegressor(n_estimators=40, trees_per_bag=10, random_state=0).fit(X, y)
    forest = est.forest_
    per_tree = forest.sample_rows.nbytes + forest.sample_ptr.nbytes  # the old layout
    stored = forest.bag_rows.nbytes + forest.bag_ptr.nbytes + forest.tree_draws.nbytes
    assert stored * 9 < per_tree  # ten trees share a bag's rows
    assert forest._children_adjacent  # a cached property: derived, so not pickled
    clone = pickle.loads(pickle.dumps(forest))
    assert "_children_adjacent" not in vars(clone) and clone.nbytes == forest.nbytes
    np.testing.assert_array_equal(clone.inbag(np.arange(X.shape[0])),
                                  forest.inbag(np.arange(X.shape[0])))
    size = len(pickle.dumps(forest))
    assert size < forest.nbytes + 4096  # nothing besides the arrays (no per-tree view)


def test_unknown_storage_layout_is_refused_by_name(bagged):
    state = bagged.forest_.__getstate__()
    state["layout"] = 99
    blank = object.__new__(type(bagged.forest_))
    with pytest.raises(ValueError, match="storage layout 99.*reads layouts 1 and 2"):
        blank.__setstate__(state)


@pytest.mark.parametrize("oob", [False, True])
def test_sorted_gather_weights_equal_the_accumulator(oob):
    # The probe's weights by gather-and-sort (chosen when the queries touch few training
    # rows) are the same bits as the accumulator over every row: the same additions in
    # the same order.
    from hedgerow import HonestForestRegressor
    from hedgerow.forest._storage import (
        _weights_chunk,
        _weights_chunk_auto,
        _weights_chunk_sorted,
    )

    rng = np.random.default_rng(53)
    X = rng.uniform(size=(20000, 4))
    y = X[:, 0] + rng.normal(scale=0.2, size=20000)
    f = HonestForestRegressor(n_estimators=32, random_state=1).fit(X, y).forest_
    rows = np.arange(0, 20000, 211)
    leaves = f.apply(X[rows])
    usable = ~f.inbag(rows) if oob else np.zeros((0, 0), dtype=np.bool_)
    queries = np.arange(rows.size)
    most = int(max((f.leaf_ptr[leaves[i] + 1] - f.leaf_ptr[leaves[i]])[
        usable[i] if oob else slice(None)].sum() for i in queries))
    dense = _weights_chunk(leaves, queries, usable, f.leaf_ptr, f.leaf_rows, f.n_train)
    sparse = _weights_chunk_sorted(leaves, queries, usable, f.leaf_ptr, f.leaf_rows, most)
    for a, b in zip(dense, sparse, strict=True):
        np.testing.assert_array_equal(a, b)
    assert most * 16 < f.n_train  # this case takes the sorted path in weights()
    auto = _weights_chunk_auto(leaves, queries, usable, f.leaf_ptr, f.leaf_rows, f.n_train)
    for a, b in zip(dense, auto, strict=True):
        np.testing.assert_array_equal(a, b)
    # a small forest, whose queries touch many of its rows, keeps the accumulator
    g = HonestForestRegressor(n_estimators=64, random_state=1).fit(X[:1500], y[:1500]).forest_
    lv = g.apply(X[:40])
    u = ~g.inbag(np.arange(40)) if oob else usable
    q = np.arange(40)
    small = _weights_chunk_auto(lv, q, u, g.leaf_ptr, g.leaf_rows, g.n_train)
    for a, b in zip(_weights_chunk(lv, q, u, g.leaf_ptr, g.leaf_rows, g.n_train), small,
                    strict=True):
        np.testing.assert_array_equal(a, b)
