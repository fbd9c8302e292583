"""The little-bags variance estimate and its truncated-normal (never negative) version.

Synthetic per-tree predictions come from a two-level normal model: tree j of bag g predicts
psi_gj = mu + a_g + e_gj with bag effects a_g ~ N(0, V) and within-bag noise
e_gj ~ N(0, W). Between-bag spread minus the share of it explained by within-bag noise is
then unbiased for V (Sexton & Laake 2009, CSDA 53(3); Athey, Tibshirani & Wager 2019,
Annals of Statistics 47(2), Sec. 4). Every replication is one row of ``psi``, so many
replications are one call.
"""

import numpy as np
import pytest
from scipy.stats import norm, truncnorm

from hedgerow import HonestForestRegressor
from hedgerow.inference import little_bags_variance, truncated_normal_mean


def _two_level(rng, reps, n_bags, per_bag, V, W, mu=3.0):
    a = rng.normal(0.0, np.sqrt(V), size=(reps, n_bags, 1))
    e = rng.normal(0.0, np.sqrt(W), size=(reps, n_bags, per_bag))
    return (mu + a + e).reshape(reps, n_bags * per_bag)


def _by_hand(row, per_bag):
    """The estimate of the module docstring of _little_bags, with plain loops."""
    bags = []
    for g in range(row.size // per_bag):
        vals = [v for v in row[g * per_bag:(g + 1) * per_bag] if not np.isnan(v)]
        if len(vals) >= 2:
            bags.append(vals)
    G = len(bags)
    if G < 2:
        return np.nan, np.nan
    means = [sum(b) / len(b) for b in bags]
    grand = sum(means) / G
    u = []
    for b, m in zip(bags, means, strict=True):
        s2 = sum((v - m) ** 2 for v in b) / (len(b) - 1)
        u.append(G / (G - 1) * (m - grand) ** 2 - s2 / len(b))
    raw = sum(u) / G
    tau = np.sqrt(sum((x - raw) ** 2 for x in u) / (G - 1) / G)
    return raw, tau


# -- the raw estimate -------------------------------------------------------------------

@pytest.mark.parametrize(
    ("n_bags", "per_bag", "V", "W"),
    [(10, 4, 1.0, 4.0), (25, 8, 0.05, 2.0), (6, 2, 2.0, 1.0), (50, 20, 0.01, 0.5)],
)
def test_raw_estimate_is_unbiased_for_the_bag_variance(n_bags, per_bag, V, W):
    rng = np.random.default_rng(1000 + n_bags)
    reps = 20000
    res = little_bags_variance(_two_level(rng, reps, n_bags, per_bag, V, W), per_bag)
    se = res.raw.std(ddof=1) / np.sqrt(reps)
    # tolerance: 4 standard errors of the mean over replications (a fair estimate misses
    # by more with probability ~6e-5)
    assert abs(res.raw.mean() - V) < 4 * se
    # the check has power: ignoring the within-bag correction would be biased by W/l
    assert W / per_bag > 8 * se
    np.testing.assert_array_equal(res.n_bags, n_bags)


def test_raw_estimate_stays_unbiased_with_unusable_trees():
    # Trees masked at random (as out-of-bag masks do) leave bags of unequal size; the mean
    # over bags of between-minus-within is still unbiased for V.
    rng = np.random.default_rng(7)
    reps, n_bags, per_bag, V, W = 20000, 12, 5, 0.5, 3.0
    psi = _two_level(rng, reps, n_bags, per_bag, V, W)
    psi[rng.random(psi.shape) < 0.35] = np.nan
    res = little_bags_variance(psi, per_bag)
    ok = ~np.isnan(res.raw)
    assert ok.mean() > 0.99
    se = res.raw[ok].std(ddof=1) / np.sqrt(ok.sum())
    # tolerance: 4 standard errors of the mean over replications
    assert abs(res.raw[ok].mean() - V) < 4 * se
    assert res.n_bags.min() < n_bags  # some bags really were dropped


def test_raw_and_tau_follow_the_formula():
    rng = np.random.default_rng(3)
    psi = _two_level(rng, 40, 5, 4, 1.0, 2.0)
    psi[rng.random(psi.shape) < 0.2] = np.nan
    res = little_bags_variance(psi, 4)
    for i in range(psi.shape[0]):
        raw, tau = _by_hand(psi[i], 4)
        np.testing.assert_allclose(res.raw[i], raw, rtol=1e-10, atol=1e-12)
        np.testing.assert_allclose(res.tau[i], tau, rtol=1e-10, atol=1e-12)


def test_tau_is_the_spread_of_the_raw_estimate():
    # tau_hat estimates the standard error of V_hat: averaged over replications it should
    # be close to the standard deviation of V_hat across them. Both are computed from the
    # same 20000 replications, so 10% is generous for 40 bags (CLT over bags).
    rng = np.random.default_rng(11)
    res = little_bags_variance(_two_level(rng, 20000, 40, 5, 1.0, 5.0), 5)
    spread = res.raw.std(ddof=1)
    assert np.sqrt(np.mean(res.tau**2)) == pytest.approx(spread, rel=0.1)


# -- the truncated-normal version ----------------------------------------------------------

def test_truncated_result_is_positive_and_at_least_raw():
    rng = np.random.default_rng(5)
    # V small against W: the raw estimate is often negative
    res = little_bags_variance(_two_level(rng, 5000, 10, 4, 0.02, 4.0), 4)
    assert (res.raw < 0).mean() > 0.2
    np.testing.assert_array_equal(res.raw_nonpositive, res.raw <= 0)
    assert np.all(res.variance > 0.0)
    assert np.all(res.variance >= res.raw)
    assert np.all(res.variance > np.maximum(res.raw, 0.0))  # tau > 0: strictly above a clamp
    np.testing.assert_array_equal(res.std, np.sqrt(res.variance))


def test_truncated_result_is_the_truncated_normal_mean():
    rng = np.random.default_rng(6)
    res = little_bags_variance(_two_level(rng, 300, 8, 4, 0.3, 2.0), 4)
    # reference: scipy.stats.truncnorm (N(raw, tau^2) truncated to [0, inf))
    expected = truncnorm.mean(-res.raw / res.tau, np.inf, loc=res.raw, scale=res.tau)
    np.testing.assert_allclose(res.variance, expected, rtol=1e-10)


def test_truncated_result_approaches_raw_when_raw_dominates_tau():
    rng = np.random.default_rng(8)
    res = little_bags_variance(_two_level(rng, 500, 200, 2, 5.0, 0.1), 2)
    t = res.raw / res.tau
    far = t > 5
    assert far.mean() > 0.5
    gap = res.variance[far] - res.raw[far]
    assert np.all(gap >= 0)
    # the excess is tau * phi(t) / Phi(t) <= tau * phi(5) / Phi(5) beyond t = 5
    # reference: scipy.stats.norm.pdf / norm.cdf
    assert np.all(gap <= res.tau[far] * norm.pdf(5.0) / norm.cdf(5.0))
    near = t < 1
    assert np.all(res.variance[near] - res.raw[near] > 0.2 * res.tau[near])


@pytest.mark.parametrize("t", [-6.0, -3.0, -1.5, -0.5, 0.0, 0.4, 1.0, 2.5, 5.0, 8.0])
@pytest.mark.parametrize("tau", [1e-3, 0.7, 12.0])
def test_truncated_normal_mean_matches_scipy(t, tau):
    v = t * tau
    # reference: scipy.stats.truncnorm (mean of N(v, tau^2) truncated to [0, inf))
    expected = truncnorm.mean((0.0 - v) / tau, np.inf, loc=v, scale=tau)
    got = truncated_normal_mean(np.array([v]), np.array([tau]))[0]
    np.testing.assert_allclose(got, expected, rtol=1e-10)


def _far_tail_mean(x, terms=400):
    """Mean of N(-x, 1) truncated to [0, inf), for x > 0, without cancellation.

    t + phi(t)/Phi(t) at t = -x equals 1 / (x + 2/(x + 3/(x + ...))) by Laplace's
    continued fraction of the Mills ratio (Abramowitz & Stegun 26.2.14; value from
    memory); every step adds positive terms, so it is accurate in floating point.
    """
    acc = x
    for k in range(terms, 1, -1):
        acc = x + k / acc
    return 1.0 / acc


@pytest.mark.parametrize("x", [3.0, 4.99, 5.01, 10.0, 40.0, 100.0, 1e3, 1e4, 1e6, 1e12])
def test_truncated_normal_mean_far_below_zero(x):
    # raw far below zero in standard errors: phi/Phi is 0/0 there and t + phi/Phi cancels
    tau = 2.0
    got = truncated_normal_mean(np.array([-x * tau]), np.array([tau]))[0]
    np.testing.assert_allclose(got, tau * _far_tail_mean(x), rtol=1e-12)
    # reference: the asymptotic series tau * (1/x - 2/x^3 + O(x^-5)) (value from memory)
    if x >= 10:
        assert got == pytest.approx(tau * (1 / x - 2 / x**3), rel=20.0 / x**4)


def test_tail_forms_join_continuously():
    # the two ways of computing the mean meet at t = -5
    t = np.array([-5.0 - 1e-9, -5.0, -5.0 + 1e-9])
    got = truncated_normal_mean(t, np.ones(3))
    np.testing.assert_allclose(got, got[1], rtol=1e-8)


def test_bags_agreeing_to_rounding_give_a_tiny_variance_not_inf():
    # Bug fixed: two bags whose between-minus-within terms u_g agree up to rounding have
    # tau ~ 1e-19, so t = raw / tau ~ -1e16; the log(phi) - log(Phi) form overflowed and
    # returned an infinite variance (seen on a fitted forest with a binary response,
    # whose leaf means repeat). The truncated mean there is ~tau / |t|, about 0.
    psi = np.array([[0.6, 0.5, 0.8, 0.7, 0.8, 0.5]])
    with np.errstate(over="raise"):
        res = little_bags_variance(psi, 3)
    assert res.raw[0] < 0 and 0 < res.tau[0] < 1e-15
    assert np.isfinite(res.variance[0]) and 0 < res.variance[0] <= res.tau[0]


def test_truncated_normal_mean_with_zero_tau_is_a_clamp():
    got = truncated_normal_mean(np.array([-1.0, 0.0, 2.0]), np.zeros(3))
    np.testing.assert_array_equal(got, [0.0, 0.0, 2.0])


# -- unusable trees and bags -----------------------------------------------------------------

def test_bags_with_fewer_than_two_usable_trees_are_left_out():
    rng = np.random.default_rng(9)
    psi = _two_level(rng, 1, 4, 3, 1.0, 1.0)[0]
    full = little_bags_variance(psi[None, 3:], 3)  # bags 1..3 only
    masked = psi.copy()
    masked[[0, 1]] = np.nan  # bag 0 keeps one tree: unusable
    res = little_bags_variance(masked[None, :], 3)
    assert res.n_bags[0] == 3
    np.testing.assert_allclose(res.raw, full.raw, rtol=1e-12)
    np.testing.assert_allclose(res.variance, full.variance, rtol=1e-12)


def test_fewer_than_two_usable_bags_give_nan():
    psi = np.arange(12, dtype=float)[None, :].repeat(3, axis=0)
    psi[0, 3:] = np.nan  # one bag left
    psi[1, :] = np.nan  # nothing left
    psi[2, [0, 3, 6, 9]] = np.nan  # every bag keeps two of three trees: fine
    with np.errstate(all="raise"):
        res = little_bags_variance(psi, 3)
    np.testing.assert_array_equal(res.n_bags, [1, 0, 4])
    assert np.isnan(res.variance[:2]).all() and np.isnan(res.raw[:2]).all()
    assert np.isnan(res.tau[:2]).all()
    assert np.isfinite(res.variance[2]) and res.variance[2] > 0


# -- through the estimator --------------------------------------------------------------------

@pytest.fixture(scope="module")
def bagged(friedman_small):
    X, y = friedman_small
    return HonestForestRegressor(n_estimators=40, trees_per_bag=8, subsample_rate=0.4,
                                 random_state=2).fit(X, y)


def test_estimator_variance_uses_the_trees_leaf_means(bagged, friedman_query):
    # per-tree predictions rebuilt from apply and the leaf rows of each tree
    forest = bagged.forest_
    leaves = forest.apply(friedman_query)
    y = bagged.y_train_
    psi = np.array([
        [y[forest.leaf_rows[forest.leaf_ptr[lf]:forest.leaf_ptr[lf + 1]]].mean() for lf in row]
        for row in leaves
    ])
    expected = little_bags_variance(psi, 8)
    got = bagged.predict_variance(friedman_query)
    np.testing.assert_allclose(got.raw, expected.raw, rtol=1e-10)
    np.testing.assert_allclose(got.variance, expected.variance, rtol=1e-10)
    _, std = bagged.predict(friedman_query, return_std=True)
    np.testing.assert_allclose(std, np.sqrt(expected.variance), rtol=1e-10)


def test_estimator_oob_variance_skips_trees_that_drew_the_row(bagged):
    forest = bagged.forest_
    X = bagged.X_train_
    leaves = forest.apply(X)
    psi = bagged.leaf_values_[leaves]
    psi[forest.inbag(np.arange(X.shape[0]))] = np.nan
    expected = little_bags_variance(psi, 8)
    _, std = bagged.oob_predict(return_std=True)
    np.testing.assert_allclose(std, np.sqrt(expected.variance), rtol=1e-10, equal_nan=True)


def test_std_without_bags_raises_a_clear_error(friedman_small):
    X, y = friedman_small
    est = HonestForestRegressor(n_estimators=20, trees_per_bag=1, random_state=0).fit(X, y)
    msg = (r"A standard error needs trees grouped in little bags, but this forest has "
           r"trees_per_bag=1 .*Got trees_per_bag=1, n_estimators=20, subsample_rate=0.5")
    with pytest.raises(ValueError, match=msg):
        est.predict(X[:3], return_std=True)
    with pytest.raises(ValueError, match=msg):
        est.predict_variance(X[:3])


def test_auto_bags_switch_off_above_half_rate(friedman_small):
    X, y = friedman_small
    est = HonestForestRegressor(n_estimators=20, subsample_rate=0.8, random_state=0).fit(X, y)
    with pytest.raises(ValueError, match="Got trees_per_bag='auto', n_estimators=20, "
                                         "subsample_rate=0.8"):
        est.predict(X[:3], return_std=True)


def test_forest_monte_carlo_variance_is_the_between_bag_spread_over_bags():
    from hedgerow.inference import forest_monte_carlo_variance

    rng = np.random.default_rng(3)
    psi = rng.normal(size=(7, 40))
    l, G = 5, 8
    bag_means = psi.reshape(7, G, l).mean(axis=2)
    want = bag_means.var(axis=1, ddof=1) / G
    np.testing.assert_allclose(forest_monte_carlo_variance(psi, l), want, rtol=1e-12)
    # the Monte Carlo variance of a forest mean of independent trees, about Var / B
    big = rng.normal(size=(400, 2000))
    assert np.mean(forest_monte_carlo_variance(big, 25)) == pytest.approx(1 / 2000, rel=0.05)
    # bags with fewer than two usable trees are left out
    psi[0, :4] = np.nan  # bag 0 keeps one tree
    got = forest_monte_carlo_variance(psi, l)[0]
    bm = bag_means[0, 1:]
    assert got == pytest.approx(bm.var(ddof=1) / (G - 1))


def test_satterthwaite_df_matches_a_chi_square_variance_estimate():
    # for s^2 from f + 1 normal draws, Var(s^2) = 2 sigma^4 / f, so 2 E[s^2]^2 / Var = f
    # (Satterthwaite 1946, Biometrics Bulletin 2(6))
    from hedgerow.inference import satterthwaite_df

    sigma2, f = 2.0, 12.0
    tau = np.sqrt(2 * sigma2**2 / f)
    assert satterthwaite_df(np.array([sigma2]), np.array([tau]), np.array([100]))[0] == (
        pytest.approx(f))
    # capped at bags - 1, floored at 1, NaN stays NaN
    out = satterthwaite_df(np.array([1.0, 1e-6, np.nan]), np.array([1e-3, 1.0, 1.0]),
                           np.array([10, 10, 10]))
    assert out[0] == 9 and out[1] == 1 and np.isnan(out[2])
