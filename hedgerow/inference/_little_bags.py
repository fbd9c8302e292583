"""Variance of forest predictions by the bootstrap of little bags, never negative.

Trees come in bags g = 1..G that share one half-sample. Let psi_gj(x) be tree j of bag g's
(linearised) prediction at x, psibar_g the bag mean over its k_g usable trees, s_g^2 the
bag's own sample variance of its trees (ddof=1) and psibar the mean of the bag means.
Then (Sexton & Laake 2009; Athey, Tibshirani & Wager 2019, Sec. 4)

    u_g   = G / (G - 1) * (psibar_g - psibar)^2  -  s_g^2 / k_g
    V_hat = mean_g u_g

is unbiased for the variance V of the forest prediction (between-bag spread minus the
part of it that within-bag tree noise explains). V_hat can be negative: single honest
trees are tens of times noisier than the forest, so the difference is noisy. Rather than
clamping at zero (which biases intervals both ways), V_hat is treated as an observation
of V with standard error tau_hat = sqrt(var_g(u_g) / G) (central limit theorem over bags)
and replaced by the posterior mean of V under a flat prior on V >= 0, the mean of a
normal truncated at 0:

    V_tilde = V_hat + tau_hat * phi(t) / Phi(t),   t = V_hat / tau_hat,

computed through log phi - log Phi for stability. V_tilde > 0 always and V_tilde -> V_hat
when V_hat >> tau_hat.

For a local linear forest the tree predictions are linearised with the forest-level Gram
matrix held fixed: with a(x), b(x) the forest's local intercept and slopes, z_i(x) the
standardised correction columns of row i centred at x, M(x) the penalised weighted Gram
matrix of the forest and c(x) the first row of M(x)^-1,

    rho_i(x)  = c(x) . [1, z_i(x)] * (y_i - a(x) - z_i(x)' b(x))
    psi_t(x)  = a(x) + mean over the fill rows i of x's leaf in tree t of rho_i(x),

so that the forest prediction is (up to the ridge term) the mean of the psi_t. With no
correction columns (the plain honest forest) c = [1] and psi_t(x) is the tree's leaf mean.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from numba import njit
from scipy.special import log_ndtr

__all__ = [
    "LittleBagsVariance",
    "forest_monte_carlo_variance",
    "linearisation_coefficients",
    "linearised_from_leaf_means",
    "linearised_tree_predictions",
    "little_bags_variance",
    "satterthwaite_df",
    "truncated_normal_mean",
]


@dataclass(frozen=True)
class LittleBagsVariance:
    """Per-query variance of a forest prediction and what went into it."""

    variance: np.ndarray  # V_tilde, > 0
    raw: np.ndarray  # V_hat, can be negative
    tau: np.ndarray  # standard error of V_hat
    n_bags: np.ndarray  # bags with at least two usable trees

    @property
    def std(self) -> np.ndarray:
        return np.sqrt(self.variance)

    @property
    def raw_nonpositive(self) -> np.ndarray:
        """True where the unbiased estimate was <= 0 (a plain clamp would have floored it)."""
        return self.raw <= 0


# Below t = -5, t + phi(t)/Phi(t) is taken from Laplace's continued fraction of the Mills
# ratio, 1 / (x + 2/(x + 3/(x + ...))) with x = -t: the direct form cancels there (it
# loses ~x^2 eps relative and overflows to inf near t = -1e6, which bags whose u_g agree
# to rounding, tau ~ 1e-19, do reach). 60 terms reach machine precision for x >= 5.
_TAIL_FROM = -5.0
_TAIL_TERMS = 60


def truncated_normal_mean(v_hat: np.ndarray, tau: np.ndarray) -> np.ndarray:
    """Return the mean of N(v_hat, tau^2) truncated to [0, inf) (the module docstring)."""
    v_hat = np.asarray(v_hat, dtype=np.float64)
    tau = np.asarray(tau, dtype=np.float64)
    out = np.maximum(v_hat, 0.0).astype(np.float64)
    ok = tau > 0
    t = v_hat[ok] / tau[ok]
    res = np.empty_like(t)
    near = t >= _TAIL_FROM
    tn = t[near]
    log_phi = -0.5 * tn * tn - 0.5 * np.log(2.0 * np.pi)
    res[near] = v_hat[ok][near] + tau[ok][near] * np.exp(log_phi - log_ndtr(tn))
    x = -t[~near]
    acc = x.copy()
    for k in range(_TAIL_TERMS, 1, -1):
        acc = x + k / acc
    res[~near] = tau[ok][~near] / acc
    out[ok] = res
    return out


@njit(cache=True, nogil=True, error_model="numpy")
def _bag_terms(psi, l):
    """Per query: (V_hat, tau_hat, number of bags with >= 2 usable trees); one pass."""
    m, B = psi.shape
    G = B // l
    raw = np.full(m, np.nan)
    tau = np.full(m, np.nan)
    n_bags = np.zeros(m, dtype=np.int64)
    bag_mean = np.empty(G)
    bag_corr = np.empty(G)
    for i in range(m):
        g_ok = 0
        for g in range(G):
            k = 0
            s1 = 0.0
            for j in range(g * l, g * l + l):
                v = psi[i, j]
                if not np.isnan(v):
                    k += 1
                    s1 += v
            if k < 2:
                continue
            mu = s1 / k
            ss = 0.0
            for j in range(g * l, g * l + l):
                v = psi[i, j]
                if not np.isnan(v):
                    ss += (v - mu) * (v - mu)
            bag_mean[g_ok] = mu
            bag_corr[g_ok] = ss / (k - 1) / k  # s_g^2 / k_g
            g_ok += 1
        n_bags[i] = g_ok
        if g_ok < 2:
            continue
        grand = 0.0
        for g in range(g_ok):
            grand += bag_mean[g]
        grand /= g_ok
        f = g_ok / (g_ok - 1.0)
        tot = 0.0
        for g in range(g_ok):
            u = f * (bag_mean[g] - grand) ** 2 - bag_corr[g]
            bag_corr[g] = u
            tot += u
        r = tot / g_ok
        vu = 0.0
        for g in range(g_ok):
            vu += (bag_corr[g] - r) ** 2
        raw[i] = r
        tau[i] = np.sqrt(vu / (g_ok - 1.0) / g_ok)
    return raw, tau, n_bags


def little_bags_variance(psi: np.ndarray, trees_per_bag: int) -> LittleBagsVariance:
    """Return the little-bags variance of the mean of ``psi`` along axis 1.

    Parameters
    ----------
    psi : (m, B) per-tree predictions, NaN where a tree is unusable for a query (for
        example a tree that drew the row, out-of-bag). Trees ``g*l .. g*l + l - 1`` form
        bag g (``l = trees_per_bag``). Bags with fewer than two usable trees are left out.
    trees_per_bag : int >= 2.
    """
    psi = np.ascontiguousarray(psi, dtype=np.float64)
    m = psi.shape[0]
    raw, tau, Gx = _bag_terms(psi, int(trees_per_bag))
    bad = Gx < 2
    raw = np.where(bad, np.nan, raw)
    tau = np.where(bad, np.nan, tau)
    variance = np.full(m, np.nan)
    good = ~bad
    variance[good] = truncated_normal_mean(raw[good], tau[good])
    return LittleBagsVariance(variance=variance, raw=raw, tau=tau, n_bags=Gx)


@njit(cache=True, nogil=True, error_model="numpy")
def _linearised_direct_chunk(leaves, usable, leaf_ptr, leaf_rows, Xc, y, Qc, scale, coef,
                             c0):
    """Per-tree linearised predictions of a query chunk, rho_i(x) at every leaf row."""
    m, B = leaves.shape
    k = Xc.shape[1]
    all_usable = usable.shape[0] == 0
    out = np.full((m, B), np.nan)
    al = np.empty(k)
    be = np.empty(k)
    for i in range(m):
        lev0 = c0[i, 0]
        res0 = -coef[i, 0]
        for j in range(k):
            al[j] = c0[i, j + 1] / scale[j]
            be[j] = coef[i, j + 1] / scale[j]
            lev0 -= al[j] * Qc[i, j]
            res0 += be[j] * Qc[i, j]
        for t in range(B):
            if not all_usable and not usable[i, t]:
                continue
            leaf = leaves[i, t]
            a = leaf_ptr[leaf]
            b = leaf_ptr[leaf + 1]
            if b <= a:
                continue
            acc = 0.0
            for p in range(a, b):
                r = leaf_rows[p]
                lev = lev0
                res = res0 + y[r]
                for j in range(k):
                    x = Xc[r, j]
                    lev += al[j] * x
                    res -= be[j] * x
                acc += lev * res
            out[i, t] = coef[i, 0] + acc / (b - a)
    return out


def linearised_tree_predictions(
    leaves, usable, forest, Xc, y, Qc, scale, coef, c0, n_jobs=1
) -> np.ndarray:
    """Return the (m, B) per-tree linearised predictions psi_t(x), row by row.

    The reference implementation of the module docstring's formula: every leaf row's
    term is computed where it is met. ``coef`` (m, k+1) holds the local intercept and
    standardised slopes, ``c0`` (m, k+1) a row of the inverse penalised Gram matrix; with
    k = 0 and c0 = 1 this is every tree's leaf mean. ``usable`` is (m, B) bool or None.
    The estimators use the equivalent, faster ``linearised_from_leaf_means``.
    """
    from hedgerow.forest._storage import _chunks, _map

    u_all = np.zeros((0, 0), dtype=np.bool_)
    Xc = np.ascontiguousarray(Xc, dtype=np.float64)
    y = np.ascontiguousarray(y, dtype=np.float64)
    Qc = np.ascontiguousarray(Qc, dtype=np.float64)
    scale = np.ascontiguousarray(scale, dtype=np.float64)
    coef = np.ascontiguousarray(coef, dtype=np.float64)
    c0 = np.ascontiguousarray(c0, dtype=np.float64)

    def run(ab):
        lo, hi = ab
        u = u_all if usable is None else np.ascontiguousarray(usable[lo:hi])
        return _linearised_direct_chunk(
            np.ascontiguousarray(leaves[lo:hi]), u, forest.leaf_ptr, forest.leaf_rows,
            Xc, y, Qc[lo:hi], scale, coef[lo:hi], c0[lo:hi],
        )

    parts = _map(run, _chunks(leaves.shape[0], n_jobs), n_jobs)
    if not parts:
        return np.empty((0, leaves.shape[1]))
    return np.concatenate(parts, axis=0)


# Trees are visited in blocks so that the leaf means of one block stay in cache while
# every row of the chunk reads them (leaf means of a whole forest are far larger than the
# cache); the dot product is allowed to reassociate (SIMD) but NaN semantics are kept.
_TREE_BLOCK = 8


@njit(cache=True, nogil=True, error_model="numpy", fastmath={"reassoc", "contract"})
def _dot_leaf_means_chunk(leaves, usable, leaf_ptr, leaf_means, offset, gamma):
    m, B = leaves.shape
    p = leaf_means.shape[1]
    all_usable = usable.shape[0] == 0
    out = np.full((m, B), np.nan)
    for t0 in range(0, B, _TREE_BLOCK):
        t1 = min(B, t0 + _TREE_BLOCK)
        for i in range(m):
            g = gamma[i]
            for t in range(t0, t1):
                if not all_usable and not usable[i, t]:
                    continue
                leaf = leaves[i, t]
                if leaf_ptr[leaf + 1] <= leaf_ptr[leaf]:
                    continue
                lm = leaf_means[leaf]
                acc = 0.0
                for j in range(p):
                    acc += g[j] * lm[j]
                out[i, t] = offset[i] + acc
    return out


def linearisation_coefficients(Qc, centre, scale, intercept, slopes_scaled, c0):
    """Return (offset, gamma) with psi_t(x) = offset + gamma . (leaf mean of the features).

    The features are ``hedgerow.local.moment_features`` of the rows,
    [1, u, u u^T (upper triangle), y, u y] with u = (x - centre) / scale. Expanding
    rho_i(x) = (L0 + c'u_i)(R0 + y_i - b'u_i), with z_i = u_i - q_u, L0 = c_0 - c'q_u and
    R0 = -a + b'q_u, makes the leaf average of rho linear in the leaf means of those
    features, so a tree's term costs one dot product instead of a pass over its rows.
    """
    Qc = np.asarray(Qc, dtype=np.float64)
    m, k = Qc.shape
    qu = (Qc - centre) / scale
    a = np.asarray(intercept, dtype=np.float64)
    b = np.asarray(slopes_scaled, dtype=np.float64).reshape(m, k)
    c = np.asarray(c0, dtype=np.float64)[:, 1:]
    L0 = c0[:, 0] - np.einsum("ij,ij->i", c, qu)
    R0 = -a + np.einsum("ij,ij->i", b, qu)
    iu, ju = np.triu_indices(k)
    pair = np.where(iu == ju, c[:, iu] * b[:, ju], c[:, iu] * b[:, ju] + c[:, ju] * b[:, iu])
    gamma = np.concatenate(
        [(L0 * R0)[:, None], -L0[:, None] * b + R0[:, None] * c, -pair, L0[:, None], c], axis=1
    )
    return a.copy(), np.ascontiguousarray(gamma)


def linearised_from_leaf_means(leaves, usable, forest, leaf_means, offset, gamma, n_jobs=1):
    """Return the (m, B) per-tree linearised predictions from per-leaf feature means."""
    from hedgerow.forest._storage import _chunks, _map

    u_all = np.zeros((0, 0), dtype=np.bool_)

    def run(ab):
        lo, hi = ab
        u = u_all if usable is None else np.ascontiguousarray(usable[lo:hi])
        return _dot_leaf_means_chunk(
            np.ascontiguousarray(leaves[lo:hi]), u, forest.leaf_ptr, leaf_means,
            offset[lo:hi], gamma[lo:hi],
        )

    parts = _map(run, _chunks(leaves.shape[0], n_jobs), n_jobs)
    if not parts:
        return np.empty((0, leaves.shape[1]))
    return np.concatenate(parts, axis=0)


def forest_monte_carlo_variance(psi: np.ndarray, trees_per_bag: int) -> np.ndarray:
    """Return the Monte Carlo variance of a finite forest's mean of ``psi`` (per query).

    ``little_bags_variance`` estimates the variance V of the infinite forest (the mean
    over every possible tree): the tree draw's own noise is taken out. A forest of G bags
    carries that noise as well: given the data its mean over bags varies by
    Var(psibar_g | data) / G, and the between-bag spread b = sum_g (psibar_g - psibar)^2 /
    (G - 1) estimates Var(psibar_g | data) (half-sample draw and tree noise together), so
    the forest's Monte Carlo variance is b / G. The error of a forest prediction is its
    statistical error plus this one; a new seed redraws it (so do the coverage readout's
    replications). Bags with fewer than two usable trees are left out, as in
    ``little_bags_variance``; NaN where fewer than two bags remain.
    """
    psi = np.asarray(psi, dtype=np.float64)
    m, B = psi.shape
    l = int(trees_per_bag)
    G = B // l
    bags = psi[:, : G * l].reshape(m, G, l)
    counts = np.sum(np.isfinite(bags), axis=2)
    with np.errstate(invalid="ignore", divide="ignore"):
        means = np.nansum(np.where(np.isfinite(bags), bags, 0.0), axis=2) / counts
    means = np.where(counts >= 2, means, np.nan)
    g_ok = np.sum(np.isfinite(means), axis=1)
    out = np.full(m, np.nan)
    ok = g_ok >= 2
    if np.any(ok):
        mu = np.nanmean(means[ok], axis=1, keepdims=True)
        b = np.nansum((means[ok] - mu) ** 2, axis=1) / (g_ok[ok] - 1)
        out[ok] = b / g_ok[ok]
    return out


def satterthwaite_df(variance, tau, n_bags) -> np.ndarray:
    """Return the degrees of freedom of a variance estimate with standard error ``tau``.

    A variance estimate V with Var(V) = tau^2 is treated as V / (f) chi-square_f with
    f = 2 V^2 / tau^2 (Satterthwaite 1946, Biometrics Bulletin 2(6): matching the first
    two moments of a scaled chi-square). The little-bags estimate averages G bag terms, so
    f is capped at G - 1, and floored at 1. A Student-t quantile with f degrees of freedom
    then makes an interval account for the noise of its own standard error.
    """
    v = np.asarray(variance, dtype=np.float64)
    tau = np.asarray(tau, dtype=np.float64)
    cap = np.maximum(np.asarray(n_bags, dtype=np.float64) - 1.0, 1.0)
    with np.errstate(divide="ignore", invalid="ignore"):
        f = np.where(tau > 0, 2.0 * v * v / (tau * tau), cap)
    f = np.clip(np.where(np.isfinite(f), f, cap), 1.0, cap)
    return np.where(np.isfinite(v), f, np.nan)
