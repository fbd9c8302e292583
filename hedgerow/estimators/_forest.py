"""The honest forest regressor and the machinery every forest estimator shares."""

from __future__ import annotations

import copy
import math
import warnings
from dataclasses import dataclass
from numbers import Integral, Real

import numpy as np
from joblib import effective_n_jobs
from scipy.stats import t as student_t
from sklearn.base import BaseEstimator, RegressorMixin
from sklearn.utils import check_random_state
from sklearn.utils._param_validation import Interval, RealNotInt, StrOptions
from sklearn.utils.validation import check_is_fitted

from hedgerow._cache import array_key, lru_lookup
from hedgerow._distributed import check_client, is_dask_collection, lazy_predict
from hedgerow._validation import (
    check_fit_data,
    check_level,
    check_predict_data,
    preserve_fitted_state,
    validate_params,
)
from hedgerow.forest import RULE_MEAN, grow_forest, plan_samples, subsample_size
from hedgerow.inference import (
    bias_aware_half_width,
    curvature_bias_bound,
    curvature_rule_of_thumb,
    curved_columns,
    forest_monte_carlo_variance,
    linearisation_coefficients,
    linearised_from_leaf_means,
    little_bags_variance,
    normal_interval,
    satterthwaite_df,
    student_interval_half_width,
)
from hedgerow.local import (
    binary_scale,
    default_scale,
    moment_features,
    moments_from_sums,
    solve_local,
)

__all__ = [
    "DEFAULT_INTERVAL",
    "INTERVAL_METHODS",
    "HonestForestRegressor",
    "IntervalParts",
    "TinyDataWarning",
    "resolve_trees_per_bag",
]

#: Interval methods of the forests: "bias_corrected" (robust bias correction: a local
#: quadratic under the same forest weights, studentised by its own little-bags standard
#: error), "bias_bound" (the little-bags interval of a local line widened by a worst-case
#: curvature bias) and "clt" (the normal interval from little bags centred on the
#: prediction, which ignores its bias).
INTERVAL_METHODS = ("bias_corrected", "bias_bound", "clt")

#: The default interval method: the one that covered on the design family
#: (``hedgerow.datasets.coverage_designs``; see DEVELOPERS.md, "Intervals").
DEFAULT_INTERVAL = "bias_corrected"

#: Most bending columns whose squares enter the local quadratic of the bias correction,
#: and most of them (the most significant) whose pairwise products enter too. A memory
#: bound: the per-leaf means grow with the square of the number of columns.
_MAX_SQUARED = 8
_MAX_PAIRED = 4

#: Ridge penalty of the bias correction's local quadratic. Robust bias correction wants
#: the bias estimate (nearly) unpenalised; a penalty chosen by out-of-bag error (0.3 on
#: the "gentle bend" design) shrank the linear and square terms alike and left bias there
#: (coverage 0.90, against 0.95 at 1e-3). Only 1e-3 was tried besides that choice.
BIAS_CORRECTION_PENALTY = 1e-3

# Queries per block when the bias bound needs the sparse forest weights (memory bound).
_BOUND_BLOCK = 512


@dataclass(frozen=True)
class IntervalParts:
    """What an interval is made of at each query: centre, standard error, bias bound.

    The interval is ``centre -/+ cv(bias_bound / std) * std`` (``cv`` the folded normal
    quantile); for ``method="clt"`` and ``"bias_corrected"`` the bias bound is 0 and
    ``cv`` the normal quantile.
    ``curvature_bound`` is the constant M the bias bound used. ``df``: None, or the
    Satterthwaite degrees of freedom of the variance estimate (``"bias_corrected"``),
    and then ``cv`` is the Student-t quantile with ``df`` degrees of freedom.
    """

    method: str
    centre: np.ndarray
    std: np.ndarray
    bias_bound: np.ndarray
    curvature_bound: float
    df: np.ndarray | None = None

    def half_width(self, level: float = 0.95) -> np.ndarray:
        """Return the half-width at ``level``."""
        if self.df is not None:
            return student_interval_half_width(self.std, self.df, level)
        return bias_aware_half_width(self.std, self.bias_bound, level)

    def interval(self, level: float = 0.95):
        """Return ``(lower, upper)`` at ``level``."""
        if self.method != "bias_bound" and self.df is None:
            return normal_interval(self.centre, self.std, level)
        h = self.half_width(level)
        return self.centre - h, self.centre + h


def check_interval_method(method) -> str:
    """Return ``method`` after checking it names an interval method."""
    if not isinstance(method, str) or method not in INTERVAL_METHODS:
        raise ValueError(
            f"The 'method' parameter must be one of {list(INTERVAL_METHODS)}. "
            f"Got {method!r} instead."
        )
    return method


def check_curvature_bound(value):
    """Return ``value`` (None or a finite float >= 0) after checking it."""
    if value is None:
        return None
    if isinstance(value, bool) or not isinstance(value, Real) or not (
        np.isfinite(value) and value >= 0
    ):
        raise ValueError(
            f"The 'curvature_bound' parameter must be None (rule of thumb from the data) "
            f"or a finite float >= 0. Got {value!r} instead."
        )
    return float(value)


class TinyDataWarning(UserWarning):
    """The data are too few for any tree to split; every tree is a single leaf."""


class FewBagsWarning(UserWarning):
    """The forest has too few little bags for its intervals to be narrow enough to use."""


#: Below this many little bags a fit warns (``FewBagsWarning``): with G bags the
#: little-bags variance rests on at most G - 1 degrees of freedom, and the Student-t
#: quantile of the default interval is then more than 1.2x the normal one at 95%
#: (t(0.975, 7) / z(0.975) = 1.21; t(0.975, 1) / z(0.975) = 6.5).
MIN_INTERVAL_BAGS = 8


def _warn_few_bags(n_estimators: int, trees_per_bag: int, stacklevel: int) -> None:
    n_bags = n_estimators // trees_per_bag
    if trees_per_bag < 2 or n_bags >= MIN_INTERVAL_BAGS:
        return
    ratio = float(student_t.ppf(0.975, max(n_bags - 1, 1)) / student_t.ppf(0.975, np.inf))
    warnings.warn(
        f"Few little bags for intervals: n_estimators={n_estimators} in bags of "
        f"trees_per_bag={trees_per_bag} gives {n_bags} bags, so each interval's variance "
        f"rests on at most {max(n_bags - 1, 1)} "
        f"{'degree' if n_bags <= 2 else 'degrees'} of freedom and the default "
        f"95% interval is at least {ratio:.2f}x as wide as a normal one. Grow "
        f"n_estimators >= {MIN_INTERVAL_BAGS * trees_per_bag} ({MIN_INTERVAL_BAGS} bags) "
        f"for intervals; predictions are not affected.",
        FewBagsWarning, stacklevel=stacklevel,
    )


# Bags much larger than this gain little (VARIANCE-NOTES: any l within a factor two of the
# optimum 1 + W/V costs at most ~15% extra variance, and W/V was 33-66 here).
_MAX_AUTO_BAG = 32


#: Training rows per block of the out-of-bag mean and standard error when the full
#: out-of-bag leaves are not cached (``oob_local_average``): 16384 rows x 500 trees hold
#: about 0.1 GB of leaf indices, mask and per-tree values.
OOB_BLOCK_ROWS = 16384


def bag_std(psi: np.ndarray, trees_per_bag: int) -> np.ndarray:
    """Return the little-bags standard error of the mean of ``psi`` along axis 1.

    Computed on ``psi`` divided by a power of two near its largest finite magnitude (exact,
    so the same bits on ordinary data), so that squared per-tree predictions of y near
    1e+-200 neither overflow nor underflow; the standard error scales back linearly.
    """
    finite = np.abs(psi[np.isfinite(psi)])
    p = float(binary_scale(finite.max())) if finite.size else 1.0
    return little_bags_variance(psi / p, trees_per_bag).std * p


def resolve_trees_per_bag(trees_per_bag, n_estimators: int, subsample_rate: float) -> int:
    """Return the bag size in trees.

    ``"auto"``: the largest divisor of ``n_estimators`` that is at most 32 and leaves at
    least two bags; 1 (no variance) when there is none (``n_estimators`` of 1, or a prime
    above 32) or when ``subsample_rate`` exceeds 0.5 (a tree could not draw its rows from
    a half-sample). Bags of 2 are avoided on purpose: single honest trees are tens of times
    noisier than the forest, and the between-minus-within difference of bags of 2 drowns in
    that noise.
    """
    if trees_per_bag != "auto":
        return int(trees_per_bag)
    if subsample_rate > 0.5 or n_estimators < 2:
        return 1
    for size in range(min(_MAX_AUTO_BAG, n_estimators // 2), 1, -1):
        if n_estimators % size == 0:
            return size
    return 1


def _check_method_and_bound(method, curvature_bound):
    method = check_interval_method(method)
    M = check_curvature_bound(curvature_bound)
    if M is not None and method != "bias_bound":
        raise ValueError(
            f"The 'curvature_bound' parameter applies to method='bias_bound' only. "
            f"Got curvature_bound={curvature_bound!r} with method={method!r} instead."
        )
    return method, M


def _line_queries(line, X):
    """Return the columns of a local line at the rows of X.

    The line's columns, then the squares of ``line["squared"]`` and the products of the
    pairs ``line["pairs"]`` (indices into the columns), all centred on the training means.
    """
    Xc = X[:, line["cols"]]
    pairs = line.get("pairs", ())
    if line["squared"].size == 0 and len(pairs) == 0:
        return np.ascontiguousarray(Xc)
    D = Xc - line["mu"]
    extra = [D[:, line["squared"]] ** 2] + [(D[:, a] * D[:, b])[:, None] for a, b in pairs]
    return np.ascontiguousarray(np.hstack([Xc, *extra]))


def _slice_fit(fit, a, b):
    return type(fit)(intercept=fit.intercept[a:b], slopes=fit.slopes[a:b],
                     slopes_scaled=fit.slopes_scaled[a:b], gram_inv=fit.gram_inv[a:b],
                     fallback=fit.fallback[a:b], ridge_penalty=fit.ridge_penalty)


class _ForestBase(RegressorMixin, BaseEstimator):
    """Fitting, forest weights, out-of-bag and little-bags plumbing shared by the forests."""

    _parameter_constraints: dict = {
        "n_estimators": [Interval(Integral, 1, None, closed="left")],
        "subsample_rate": [Interval(Real, 0.0, 1.0, closed="right")],
        "trees_per_bag": [StrOptions({"auto"}), Interval(Integral, 1, None, closed="left")],
        "honest": ["boolean"],
        "min_samples_leaf": [Interval(Integral, 1, None, closed="left")],
        "max_features": [
            None,
            Interval(Integral, 1, None, closed="left"),
            Interval(RealNotInt, 0.0, 1.0, closed="right"),
        ],
        "max_depth": [None, Interval(Integral, 1, None, closed="left")],
        "random_state": ["random_state"],
        "n_jobs": [None, Integral],
    }

    # -- fitting -------------------------------------------------------------------------
    def _check_forest_params(self, n: int, d: int):
        """Return (trees_per_bag, max_features, subsample size) after cross-checks."""
        validate_params(self)
        l = resolve_trees_per_bag(self.trees_per_bag, self.n_estimators, self.subsample_rate)
        if self.trees_per_bag != "auto":
            if self.n_estimators % l != 0:
                raise ValueError(
                    f"The 'trees_per_bag' parameter must divide n_estimators="
                    f"{self.n_estimators} (trees come in whole bags). Got {l!r} instead."
                )
            if l >= 2 and self.subsample_rate > 0.5:
                raise ValueError(
                    f"The 'subsample_rate' parameter must be at most 0.5 when "
                    f"trees_per_bag >= 2 (each tree draws from its bag's half-sample). "
                    f"Got {self.subsample_rate!r} instead (trees_per_bag={l})."
                )
        if self.max_features is None:
            mtry = min(d, math.ceil(math.sqrt(d)) + 20)
        elif isinstance(self.max_features, Integral):
            if self.max_features > d:
                raise ValueError(
                    f"The 'max_features' parameter must be at most the number of columns "
                    f"({d}). Got {self.max_features!r} instead."
                )
            mtry = int(self.max_features)
        else:
            mtry = max(1, int(self.max_features * d))
        s = subsample_size(n, self.subsample_rate, l)
        n_grow = s // 2 if self.honest else s
        n_fill = s - n_grow if self.honest else s
        if min(n_grow, n_fill) < 2 * self.min_samples_leaf:
            # as scikit-learn's trees do: a node that cannot meet the leaf constraint stays
            # a leaf; here no tree can split at all, which is said rather than hidden
            warnings.warn(
                f"Too few rows to split: with n={n} rows, subsample_rate="
                f"{self.subsample_rate}, trees_per_bag={l} and honest={self.honest}, a tree "
                f"has {n_grow} rows to place splits and {n_fill} to fill leaves, but a split "
                f"needs 2 * min_samples_leaf = {2 * self.min_samples_leaf} of each. Every "
                f"tree is a single leaf (the forest averages its rows). Use more rows, a "
                f"larger subsample_rate or a smaller min_samples_leaf.",
                TinyDataWarning, stacklevel=4,
            )
        _warn_few_bags(self.n_estimators, l, stacklevel=4)
        return l, mtry, s

    def _n_threads(self) -> int:
        with warnings.catch_warnings():
            # inside a dask worker joblib answers 1 with a warning about processes; ours
            # are threads, but one per task is right there (the worker's threads are the
            # parallelism), so only the warning goes
            warnings.filterwarnings("ignore", message=".*Dask worker", category=UserWarning)
            return max(1, effective_n_jobs(self.n_jobs))

    def _grow(self, X, y, *, rule=RULE_MEAN, Z=None, split_penalty=0.0, progress=None,
              client=None):
        """Validate, then return (forest, trees_per_bag, max_features, subsample size)."""
        n, d = X.shape
        l, mtry, s = self._check_forest_params(n, d)
        seed = int(check_random_state(self.random_state).randint(0, 2**31 - 1))
        plan = plan_samples(n, self.n_estimators, l, self.subsample_rate, self.honest, seed)
        forest = grow_forest(
            X, y, plan, min_samples_leaf=self.min_samples_leaf, max_features=mtry,
            max_depth=self.max_depth, rule=rule, Z=Z, ridge_penalty=split_penalty,
            n_jobs=self._n_threads(), progress=progress, client=client,
        )
        n_trees = forest.node_start.shape[0] - 1
        if n_trees != self.n_estimators:  # never keep a silently smaller forest
            raise RuntimeError(
                f"Growing the forest gave {n_trees} trees instead of "
                f"n_estimators={self.n_estimators}; the estimator is left unchanged."
            )
        return forest, l, mtry, s

    def _set_forest_state(self, X, y, forest, l, mtry, s):
        self.forest_ = forest
        self.X_train_ = X
        self.y_train_ = y
        self.trees_per_bag_ = l
        self.max_features_ = mtry
        self.subsample_size_ = s
        self.leaf_values_ = forest.leaf_means(y)
        # fit-scoped caches live in one dict created here: predicting never rebinds an
        # attribute, and shallow copies (another ridge penalty) share what they can
        self._fit_cache = {}

    # -- shared queries ------------------------------------------------------------------
    def _leaves(self, X):
        # the probe, its local average and its weights ask for the same query in turn
        return lru_lookup(self._fit_cache, "leaves", array_key(X),
                          lambda: self.forest_.apply(X, n_jobs=self._n_threads()))

    def _oob_parts(self):
        """Return (leaves of the training rows, usable mask) for out-of-bag work (cached)."""
        cache = self._fit_cache
        if "oob parts" not in cache:
            leaves = self._leaves(self.X_train_)
            usable = ~self.forest_.inbag(np.arange(self.X_train_.shape[0]))
            cache["oob parts"] = (leaves, usable)
        return cache["oob parts"]

    def _warn_unusable(self, n_used, what: str):
        bad = n_used == 0
        if np.any(bad):
            warnings.warn(
                f"{int(bad.sum())} of {bad.size} {what} have no usable tree (every tree "
                f"drew them); their prediction is NaN. Use more trees or a smaller "
                f"subsample_rate.",
                RuntimeWarning,
                stacklevel=3,
            )
        return bad

    def _warn_missing_std(self, mean, std, what: str):
        """Warn about rows with a finite prediction but no standard error (NaN)."""
        lost = np.isfinite(mean) & ~np.isfinite(std)
        if np.any(lost):
            warnings.warn(
                f"{int(lost.sum())} of {lost.size} {what} have a prediction but no "
                f"standard error (NaN): their out-of-bag trees lie in fewer than two little "
                f"bags with two or more such trees (a row is in-bag for every tree of a bag "
                f"whose sample holds it), and the between-bag variance needs two. Use more "
                f"trees (more bags) or a smaller subsample_rate.",
                RuntimeWarning,
                stacklevel=3,
            )
        return lost

    def _require_bags(self):
        if self.trees_per_bag_ < 2:
            raise ValueError(
                f"A standard error needs trees grouped in little bags, but this forest has "
                f"trees_per_bag={self.trees_per_bag_} (set trees_per_bag to an integer >= 2 "
                f"that divides n_estimators, or 'auto' with subsample_rate <= 0.5 and "
                f"n_estimators with a divisor between 2 and 32). Got "
                f"trees_per_bag={self.trees_per_bag!r}, n_estimators={self.n_estimators!r}, "
                f"subsample_rate={self.subsample_rate!r}."
            )

    def neighbour_weights(self, X):
        """Return the forest weights as a CSR matrix (m × n_train); rows sum to 1.

        Entry (q, i) is alpha_i(x_q) = mean over trees of 1{i in leaf} / |leaf| (fill rows
        of the honest trees only).
        """
        X = check_predict_data(self, X)
        W, _ = self.forest_.weights(self._leaves(X), n_jobs=self._n_threads())
        return W

    def oob_neighbour_weights(self):
        """Return the out-of-bag forest weights of the training rows (CSR, n × n).

        Row i uses only the trees whose subsample did not contain row i, so its own value
        gets weight 0. Rows with no such tree are all-zero (and warned about).
        """
        check_is_fitted(self)
        leaves, usable = self._oob_parts()
        W, n_used = self.forest_.weights(leaves, usable, n_jobs=self._n_threads())
        self._warn_unusable(n_used, "training rows (out-of-bag)")
        return W

    def _tree_predictions(self, leaves, usable=None):
        psi = self.leaf_values_[leaves]
        if usable is not None:
            psi = np.where(usable, psi, np.nan)
        return psi

    def _predict_from_leaves(self, leaves, usable, return_std):
        psi = self._tree_predictions(leaves, usable)
        with np.errstate(invalid="ignore"), warnings.catch_warnings():
            warnings.simplefilter("ignore", RuntimeWarning)
            mean = np.nanmean(psi, axis=1) if usable is not None else psi.mean(axis=1)
        if not return_std:
            return mean
        self._require_bags()
        return mean, bag_std(psi, self.trees_per_bag_)

    def oob_local_average(self, return_std=False):
        """Return the out-of-bag forest-weighted mean of y at the training rows.

        When the out-of-bag leaves are not cached already (another out-of-bag method
        asked for them), the rows go in blocks of ``OOB_BLOCK_ROWS``: the leaf indices,
        usable mask and per-tree values (n x trees each, 7 GB at a million rows and 500
        trees) are never all held at once. Each row's numbers depend on its own trees
        only, so the blocks give the same bits.
        """
        check_is_fitted(self)
        if return_std:
            self._require_bags()
        cache = self._fit_cache
        if not return_std and "oob average" in cache:
            return cache["oob average"].copy()
        if "oob parts" in cache:
            leaves, usable = cache["oob parts"]
            n_used = usable.sum(axis=1)
            out = self._predict_from_leaves(leaves, usable, return_std)
        else:
            n_used, out = self._oob_in_blocks(return_std)
        self._warn_unusable(n_used, "training rows (out-of-bag)")
        if return_std:
            mean, std = out
            self._warn_missing_std(mean, std, "training rows (out-of-bag)")
            return mean, std
        cache["oob average"] = out
        return out.copy()

    def _oob_blocks(self, rows=None):
        """Yield (a, b, leaves, usable) of the training rows a:b, block after block.

        Each block's leaf matrix and in-bag mask are made when it is reached and dropped
        after it, so out-of-bag work never holds the n x trees matrices.
        """
        X = self.X_train_
        n = X.shape[0]
        rows = OOB_BLOCK_ROWS if rows is None else rows
        for a in range(0, n, rows):
            b = min(n, a + rows)
            yield (a, b, self.forest_.apply(X[a:b], n_jobs=self._n_threads()),
                   ~self.forest_.inbag(np.arange(a, b)))

    def _oob_parts_or_blocks(self):
        """Yield (a, b, leaves, usable): the cached whole n x trees parts, else blocks."""
        cache = self._fit_cache
        if "oob parts" in cache:
            leaves, usable = cache["oob parts"]
            yield 0, leaves.shape[0], leaves, usable
        else:
            yield from self._oob_blocks()

    def _oob_weighted_sums(self, means):
        """Return (out-of-bag forest-weighted sums of the per-leaf ``means``, usable trees).

        One row per training row, over its out-of-bag trees, gathered block by block (or
        from the cached whole parts): every row's sums are its own, so the same bits.
        """
        n = self.X_train_.shape[0]
        R = np.empty((n, means.shape[1]))
        n_used = np.empty(n, dtype=np.int64)
        for a, b, leaves, usable in self._oob_parts_or_blocks():
            R[a:b], n_used[a:b] = self.forest_.weighted_sums(leaves, means, usable,
                                                             n_jobs=self._n_threads())
        return R, n_used

    def _oob_in_blocks(self, return_std):
        """Return (usable trees per row, mean or (mean, std)) over blocks of training rows."""
        n = self.X_train_.shape[0]
        n_used = np.empty(n, dtype=np.int64)
        mean = np.empty(n)
        std = np.empty(n) if return_std else None
        for a, b, leaves, usable in self._oob_blocks():
            n_used[a:b] = usable.sum(axis=1)
            part = self._predict_from_leaves(leaves, usable, return_std)
            if return_std:
                mean[a:b], std[a:b] = part
            else:
                mean[a:b] = part
        return n_used, ((mean, std) if return_std else mean)

    def local_average(self, X, return_std=False):
        """Return the forest-weighted mean of y at X (the honest forest's prediction).

        For a local linear forest this is the local-constant fit on the *same* trees and
        weights, the comparison that isolates what the local line adds.
        """
        X = check_predict_data(self, X)
        if return_std:
            self._require_bags()
        return self._predict_from_leaves(self._leaves(X), None, return_std)

    def predict_interval(self, X, level=0.95, method=DEFAULT_INTERVAL, *,
                         curvature_bound=None):
        """Return ``(lower, upper)`` pointwise confidence intervals at ``level``.

        Parameters
        ----------
        X : array-like of shape (m, n_features)
        level : float in (0, 1), default=0.95
        method : {"bias_corrected", "bias_bound", "clt"}, default="bias_corrected"
            "bias_corrected" (the default: it is the one that covered on the design
            family ``hedgerow.datasets.coverage_designs``): robust bias correction
            (Calonico, Cattaneo & Farrell 2018). The interval is centred on a local
            quadratic (the local line's columns and their centred squares) under the
            same forest weights, which is the prediction minus an estimate of its
            curvature bias (and, for the plain honest forest, of its first-order edge
            bias), and studentised by the little-bags standard error of that corrected
            estimator, so the bias estimate's own variance is in the width. Squares and
            products enter only for the columns a spline test finds bending
            (``bending_columns``); where none bends it is the local line itself. The
            variance adds the forest's Monte Carlo variance and the quantile is
            Student-t with the Satterthwaite degrees of freedom of the little-bags
            estimate.
            "bias_bound": centred on the local line, half-width ``cv(b / se) * se``
            with ``b`` a curvature bias bound from the equivalent kernel and a constant
            M (Armstrong & Kolesar 2018, 2020; ``hedgerow.inference._bias_aware``);
            conservative on forest weights with the rule-of-thumb M.
            "clt": the normal interval from little bags centred on the prediction (the
            interval before bias-aware methods were added). It ignores the prediction's
            bias, so it misses where the truth is curved and, for the plain honest
            forest, at the edges.
        curvature_bound : float >= 0 or None
            M of ``method="bias_bound"``, in standardised units of the local line's
            columns. None: the rule of thumb (``rule_of_thumb_curvature``). For a local
            linear forest 0 gives the "clt" interval exactly.

        For a dask array or DataFrame ``X``, two lazy dask arrays or Series. The interval
        conditions on the fitted forest's settings: columns screened for the local line,
        the ridge penalty and the bending columns are taken as fixed, not as chosen from
        the same data (``hedgerow.diagnostics.split_half_agreement`` measures the cost).
        """
        _check_method_and_bound(method, curvature_bound)
        if is_dask_collection(X):
            check_level(level)
            self._check_lazy(True)
            # (lazy_predict's own positional argument is called method)
            return lazy_predict(self, X, "_interval_block", ("lower", "upper"), level=level,
                                interval=method, curvature_bound=curvature_bound)
        check_level(level)
        return self.interval_parts(X, method, curvature_bound=curvature_bound).interval(level)

    def _interval_block(self, X, level, interval, curvature_bound):
        """Return ``predict_interval(X, level, interval, ...)``: one lazy block's work."""
        return self.predict_interval(X, level, interval, curvature_bound=curvature_bound)

    def interval_parts(self, X, method=DEFAULT_INTERVAL, *, curvature_bound=None):
        """Return the ``IntervalParts`` (centre, little-bags std, bias bound) at X."""
        method, M = _check_method_and_bound(method, curvature_bound)
        X = check_predict_data(self, X)
        self._require_bags()
        if method == "clt":
            centre, std = self._clt_parts(X)
            return IntervalParts(method, centre, std, np.zeros_like(centre), 0.0)
        line = self._corrected_line() if method == "bias_corrected" else self._bias_line()
        leaves = self._leaves(X)
        Qc = _line_queries(line, X)
        fit = self._line_fit(X, leaves, line, Qc)
        psi = self._line_tree_terms(leaves, None, Qc, line, fit)
        lb = little_bags_variance(psi, self.trees_per_bag_)
        bound = np.zeros(X.shape[0])
        if method == "bias_corrected":
            return self._corrected_parts(fit.intercept, psi, lb)
        std = lb.std
        if M is None:
            M = self.rule_of_thumb_curvature()
        if M > 0:
            for a in range(0, X.shape[0], _BOUND_BLOCK):
                b = min(X.shape[0], a + _BOUND_BLOCK)
                W, _ = self.forest_.weights(leaves[a:b], n_jobs=self._n_threads())
                bound[a:b] = curvature_bias_bound(W, line["Xc"], Qc[a:b], _slice_fit(fit, a, b),
                                                  line["scale"], M)
        return IntervalParts(method, fit.intercept, std, bound, float(M))

    def oob_interval_parts(self, method=DEFAULT_INTERVAL) -> IntervalParts:
        """Return the ``IntervalParts`` of the training rows from their out-of-bag trees.

        ``method``: "bias_corrected" (the default interval) or "clt". Each row's interval
        uses only the trees that did not draw it, as ``oob_predict``; rows with no such
        tree are NaN (and warned about). For "bias_corrected" the local quadratic's
        out-of-bag fit does not depend on the ridge penalty (its own penalty is fixed), so
        it is computed once per fit; where no column bends it is the local linear
        forest's own out-of-bag line at the penalty in use.
        """
        check_is_fitted(self)
        method = check_interval_method(method)
        if method == "bias_bound":
            raise ValueError(
                "The 'method' parameter must be one of ['bias_corrected', 'clt'] for "
                "out-of-bag intervals (the curvature bound needs every row's weights). "
                f"Got {method!r} instead."
            )
        self._require_bags()
        if method == "clt":
            centre, std = self.oob_predict(return_std=True)
            return IntervalParts(method, centre, std, np.zeros_like(centre), 0.0)
        line = self._corrected_line()
        n = self.X_train_.shape[0]
        if line.get("own"):
            n_used, mom = self._oob_moments()
            fit = self._solve(mom, self.ridge_penalty_)
        else:
            cache = self._fit_cache
            if "oob corrected" not in cache:
                R, n_used = self._oob_weighted_sums(line["means"])
                mom = moments_from_sums(R, line["Xc"], line["centre"], line["scale"])
                with warnings.catch_warnings():
                    warnings.simplefilter("ignore", RuntimeWarning)
                    cache["oob corrected"] = (solve_local(mom, line["penalty"]), n_used)
            fit, n_used = cache["oob corrected"]
        Qc = line["Xc"]
        self._warn_unusable(n_used, "training rows (out-of-bag)")
        centre, std, df = np.empty(n), np.empty(n), np.empty(n)
        for a, b, leaves, usable in self._oob_parts_or_blocks():
            sub = _fit_rows(fit, a, b)
            psi = self._line_tree_terms(leaves, usable, Qc[a:b], line, sub)
            part = self._corrected_parts(sub.intercept, psi,
                                         little_bags_variance(psi, self.trees_per_bag_))
            centre[a:b], std[a:b], df[a:b] = part.centre, part.std, part.df
        parts = IntervalParts("bias_corrected", centre, std, np.zeros_like(centre), 0.0,
                              df=df)
        self._warn_missing_std(parts.centre, parts.std, "training rows (out-of-bag)")
        return parts

    def _line_tree_terms(self, leaves, usable, Qc, line, fit):
        """Return each tree's linearised estimate of a local line's intercept (little bags).

        ``line``: the columns, centre, scale and per-leaf means of the local line fitted
        as ``fit`` at the queries ``Qc`` (their line columns); ``usable`` masks trees per
        query (out-of-bag), None for all.
        """
        offset, gamma = linearisation_coefficients(
            Qc, line["centre"], line["scale"], np.nan_to_num(fit.intercept),
            np.nan_to_num(fit.slopes_scaled), np.nan_to_num(fit.gram_inv[:, 0, :]),
        )
        return linearised_from_leaf_means(leaves, usable, self.forest_, line["means"],
                                          offset, gamma, n_jobs=self._n_threads())

    def _corrected_parts(self, centre, psi, lb) -> IntervalParts:
        """Return the bias-corrected ``IntervalParts`` from its per-tree terms ``psi``.

        Variance: the little-bags variance of the corrected estimator plus the finite
        forest's own Monte Carlo variance (``forest_monte_carlo_variance``); quantile:
        Student-t with the Satterthwaite degrees of freedom of the little-bags estimate
        (``satterthwaite_df``), so the interval accounts for the noise of its own
        standard error (with bags of ~25 trees and 80 bags it had 15-55 degrees of
        freedom on the design family).
        """
        var = lb.variance + forest_monte_carlo_variance(psi, self.trees_per_bag_)
        df = satterthwaite_df(var, lb.tau, lb.n_bags)
        return IntervalParts("bias_corrected", centre, np.sqrt(var), np.zeros_like(centre),
                             0.0, df=df)

    def rule_of_thumb_curvature(self) -> float:
        """Return the curvature constant M that ``method="bias_bound"`` uses by default.

        The largest Hessian norm of a global quartic in the local line's columns
        (standardised), fitted to the training rows by least squares (cached per fit).
        """
        check_is_fitted(self)
        cache = self._fit_cache
        if "curvature" not in cache:
            line = self._bias_line()
            cache["curvature"] = curvature_rule_of_thumb(line["Xc"], self.y_train_,
                                                         line["scale"])
        return cache["curvature"]

    def _clt_parts(self, X):
        return self._predict_from_leaves(self._leaves(X), None, True)

    def _line_columns(self) -> np.ndarray:
        """Return the columns of the local lines the bias-aware intervals use (cached).

        The honest forest has no correction columns of its own: it takes those lasso
        screening keeps (as the local linear forest's ``correction_features="auto"``).
        """
        cache = self._fit_cache
        if "line columns" not in cache:
            from hedgerow.estimators._local_linear_forest import _lasso_screen

            X, y = self.X_train_, self.y_train_
            Xs = (X - X.mean(axis=0)) / default_scale(X)
            cols = _lasso_screen(Xs, y)
            if cols.size == 0:
                cols = np.array([int(np.argmax(np.abs(Xs.T @ (y - y.mean()))))])
            cache["line columns"] = cols.astype(np.int64)
        return cache["line columns"]

    def _make_line(self, cols, squared, penalty=None, pairs=()) -> dict:
        """Return a local line under the forest weights: columns, leaf means, penalty.

        ``squared``: indices (into ``cols``) of the columns whose centred squares join the
        line; ``pairs``: index pairs whose products join it (a local quadratic).
        ``penalty``: None for the value of ``RIDGE_GRID`` with the lowest out-of-bag error
        of this line.
        """
        from hedgerow.estimators._local_linear_forest import RIDGE_GRID

        X, y = self.X_train_, self.y_train_
        line = {"cols": np.asarray(cols, dtype=np.int64),
                "squared": np.asarray(squared, dtype=np.int64),
                "pairs": [(int(a), int(b)) for a, b in pairs],
                "mu": X[:, cols].mean(axis=0)}
        Xc = _line_queries(line, X)
        scale = default_scale(Xc)
        F, centre = moment_features(Xc, y, scale)
        means = self.forest_.leaf_feature_means(F)
        line.update(Xc=Xc, scale=scale, means=means, centre=centre, penalty=penalty)
        if penalty is not None:
            return line
        R, n_used = self._oob_weighted_sums(means)
        mom = moments_from_sums(R, Xc, centre, scale)
        ok = n_used > 0
        errs = []
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", RuntimeWarning)
            for lam in RIDGE_GRID:
                a = solve_local(mom, lam).intercept
                errs.append(float(np.mean((a[ok] - y[ok]) ** 2)))
        line["penalty"] = float(RIDGE_GRID[int(np.nanargmin(errs))])
        return line

    def bending_columns(self) -> np.ndarray:
        """Return the columns (indices into X) whose squares the bias correction uses.

        The local line's columns that the curvature test finds bending
        (``hedgerow.inference.curved_columns``: additive spline F tests, Holm at
        ``CURVATURE_TEST_LEVEL``), most significant first, at most ``_MAX_SQUARED``.
        Empty on a truth the test finds linear: the correction is then the local line
        itself (cached per fit).
        """
        check_is_fitted(self)
        cache = self._fit_cache
        if "bending" not in cache:
            cols = self._line_columns()
            bent, _ = curved_columns(self.X_train_[:, cols], self.y_train_)
            cache["bending"] = bent[:_MAX_SQUARED]
        return self._line_columns()[self._fit_cache["bending"]]

    def with_bending_columns(self, columns):
        """Return this fitted forest with the bias correction's bending columns given.

        A light copy (the same trees and fit-scoped caches, as ``with_ridge_penalty``)
        whose bias-corrected interval squares ``columns`` (indices into X, all among the
        local line's columns; order kept, at most ``_MAX_SQUARED``) instead of those its
        curvature test chose: for comparing fits with the selection held fixed (the
        split-half check). ``self`` is unchanged.
        """
        check_is_fitted(self)
        line = [int(c) for c in self._line_columns()]
        try:
            cols = [int(c) for c in np.asarray(columns).ravel()]
        except (TypeError, ValueError) as err:
            raise TypeError(f"The 'columns' parameter must list column indices. Got "
                            f"{columns!r} instead.") from err
        missing = [c for c in cols if c not in line]
        if missing or len(set(cols)) != len(cols):
            raise ValueError(f"The 'columns' parameter must list distinct columns of the "
                             f"local line {line}. Got {cols!r} instead.")
        view = copy.copy(self)
        view._fit_cache = {k: v for k, v in self._fit_cache.items()
                           if k not in ("bending", "corrected line", "oob corrected")}
        view._fit_cache["bending"] = np.array([line.index(c) for c in cols],
                                              dtype=np.int64)[:_MAX_SQUARED]
        return view

    def _corrected_line(self) -> dict:
        """Return the local quadratic of the robust bias correction (cached per fit).

        The local line's columns plus the centred squares of the columns that bend
        (``bending_columns``) and the products of the ``_MAX_PAIRED`` most significant of
        them, under the same forest weights, penalty ``BIAS_CORRECTION_PENALTY``. When no
        column bends, the local linear forest's own line (its prediction and penalty:
        the correction costs nothing where the data show no curvature) and, for the
        honest forest, the local line at ``BIAS_CORRECTION_PENALTY`` (its first-order
        edge correction).
        """
        self.bending_columns()
        bent = self._fit_cache["bending"]
        if bent.size == 0:
            own = self._bias_line()
            if own.get("own"):
                return own
        cache = self._fit_cache
        if "corrected line" not in cache:
            top = bent[:_MAX_PAIRED]
            pairs = [(int(a), int(b)) for i, a in enumerate(top) for b in top[i + 1:]]
            line = self._make_line(self._line_columns(), np.sort(bent),
                                   penalty=BIAS_CORRECTION_PENALTY, pairs=pairs)
            cache["corrected line"] = line
        return cache["corrected line"]

    def _bias_line(self) -> dict:
        """Return the local line ``method="bias_bound"`` is centred on (cached per fit).

        The plain forest's bias is first order where its neighbourhoods are lopsided (at
        the edges): a curvature bound cannot bound it, but the local slope under the same
        weights estimates it. So the honest forest's bias-bound interval is centred on the
        ridge-penalised local line under its own weights.
        """
        cache = self._fit_cache
        if "bias line" not in cache:
            cache["bias line"] = self._make_line(self._line_columns(), [])
        return cache["bias line"]

    def _line_fit(self, X, leaves, line, Qc):
        R, _ = self.forest_.weighted_sums(leaves, line["means"], n_jobs=self._n_threads())
        mom = moments_from_sums(R, Qc, line["centre"], line["scale"])
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", RuntimeWarning)
            return solve_local(mom, line["penalty"])

    # -- lazy (dask) predictions ------------------------------------------------------------
    #: entries of ``_fit_cache`` that depend on the query rows (LRU caches); the others
    #: depend on the fit only and are shared by every block of a lazy prediction
    _QUERY_CACHES = ("leaves",)

    def _check_lazy(self, with_std: bool):
        """Raise now, not at compute time, what a lazy prediction would raise per block."""
        check_is_fitted(self)
        if with_std:
            self._require_bags()

    def _prime_fit_caches(self, with_std: bool):
        """Compute the fit-scoped pieces every prediction needs (none for local averages)."""

    def _block_view(self, with_std: bool):
        """Return a shallow copy for one block of a lazy prediction.

        It shares the fit-scoped caches (computed once per worker copy of the model) but
        keeps its own query caches, so that concurrent blocks neither hold each other's
        leaf matrices in memory nor race on one LRU.
        """
        self._prime_fit_caches(with_std)
        view = copy.copy(self)
        view._fit_cache = {k: v for k, v in self._fit_cache.items()
                           if k not in self._QUERY_CACHES}
        return view

    def __copy__(self):
        # a shallow copy shares the fit-scoped caches (pickling drops them instead)
        new = type(self).__new__(type(self))
        new.__dict__.update(self.__dict__)
        return new

    def __getstate__(self):
        state = dict(vars(self))
        if "_fit_cache" in state:
            state["_fit_cache"] = {}  # derived from the fit; rebuilt on demand
        return state

    def __sklearn_tags__(self):
        tags = super().__sklearn_tags__()
        tags.input_tags.allow_nan = False
        return tags


class HonestForestRegressor(_ForestBase):
    """Honest subsampled regression forest: a local average under forest weights.

    Parameters
    ----------
    n_estimators : int, default=2000
        Number of trees.
    subsample_rate : float in (0, 1], default=0.5
        Share of the n rows one tree draws without replacement (from its bag's half-sample
        when ``trees_per_bag >= 2``, hence then at most 0.5).
    trees_per_bag : int or "auto", default="auto"
        Trees that share one half-sample (little bags, for variance). 1 turns variance off.
        "auto": the largest divisor of ``n_estimators`` up to 32 leaving at least two bags.
    honest : bool, default=True
        Split every tree's rows in two: one half places the splits, the other fills leaves.
    min_samples_leaf : int, default=5
        Each child of a split keeps at least this many rows of each half.
    max_features : int, float or None, default=None
        Columns drawn at each node; None means min(d, ceil(sqrt(d)) + 20).
    max_depth : int or None, default=None
    random_state : int, RandomState or None
    n_jobs : int or None
        Threads for growing and querying; results do not depend on it.

    Attributes
    ----------
    forest_ : ForestArrays
    trees_per_bag_, max_features_, subsample_size_ : resolved settings.
    n_features_in_, feature_names_in_ : scikit-learn conventions.
    """

    def __init__(
        self,
        n_estimators=2000,
        *,
        subsample_rate=0.5,
        trees_per_bag="auto",
        honest=True,
        min_samples_leaf=5,
        max_features=None,
        max_depth=None,
        random_state=None,
        n_jobs=None,
    ):
        self.n_estimators = n_estimators
        self.subsample_rate = subsample_rate
        self.trees_per_bag = trees_per_bag
        self.honest = honest
        self.min_samples_leaf = min_samples_leaf
        self.max_features = max_features
        self.max_depth = max_depth
        self.random_state = random_state
        self.n_jobs = n_jobs

    def fit(self, X, y, *, progress=None, client=None):
        """Grow the forest on ``(X, y)`` and return ``self``.

        Parameters
        ----------
        X : array-like of shape (n_samples, n_features)
        y : array-like of shape (n_samples,)
        progress : callable, optional
            Called with the number of trees finished so far.
        client : dask.distributed.Client, optional
            Grow chunks of trees on its workers (the data are sent once); the forest is
            the same as without it. A chunk the cluster loses for good raises a
            ``RuntimeError`` and leaves an earlier fit in place.

        Returns
        -------
        self
        """
        with preserve_fitted_state(self):
            validate_params(self)
            client = check_client(client)
            X, y = check_fit_data(self, X, y)
            forest, l, mtry, s = self._grow(X, y, progress=progress, client=client)
        self._set_forest_state(X, y, forest, l, mtry, s)
        return self

    def predict(self, X, return_std=False):
        """Return forest predictions (and their little-bags standard errors).

        For a dask array or DataFrame ``X``, the same as lazy dask arrays or Series
        (computed block by block on the dask scheduler in use).
        """
        if is_dask_collection(X):
            self._check_lazy(return_std)
            names = ("mean", "std") if return_std else ("mean",)
            return lazy_predict(self, X, "predict", names, return_std=bool(return_std))
        return self.local_average(X, return_std=return_std)

    def predict_variance(self, X):
        """Return the ``LittleBagsVariance`` of the predictions at X (raw and debiased)."""
        X = check_predict_data(self, X)
        self._require_bags()
        return little_bags_variance(
            self._tree_predictions(self._leaves(X)), self.trees_per_bag_
        )

    def oob_predict(self, return_std=False):
        """Return out-of-bag predictions of the training rows (NaN, warned, if no tree)."""
        return self.oob_local_average(return_std=return_std)


def _fit_rows(fit, a, b):
    """Return the ``LocalFit`` of queries a:b of ``fit`` (its per-query arrays sliced)."""
    import dataclasses

    if a == 0 and b == fit.intercept.shape[0]:
        return fit
    return dataclasses.replace(fit, intercept=fit.intercept[a:b], slopes=fit.slopes[a:b],
                               slopes_scaled=fit.slopes_scaled[a:b],
                               gram_inv=fit.gram_inv[a:b], fallback=fit.fallback[a:b])
