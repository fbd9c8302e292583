"""The honest forest regressor and the machinery every forest estimator shares."""

from __future__ import annotations

import copy
import math
import warnings
from numbers import Integral, Real

import numpy as np
from joblib import effective_n_jobs
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
from hedgerow.inference import little_bags_variance, normal_interval
from hedgerow.local import binary_scale

__all__ = ["HonestForestRegressor", "TinyDataWarning", "resolve_trees_per_bag"]


class TinyDataWarning(UserWarning):
    """The data are too few for any tree to split; every tree is a single leaf."""

# Bags much larger than this gain little (VARIANCE-NOTES: any l within a factor two of the
# optimum 1 + W/V costs at most ~15% extra variance, and W/V was 33-66 here).
_MAX_AUTO_BAG = 32


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
        """Return the out-of-bag forest-weighted mean of y at the training rows."""
        check_is_fitted(self)
        if return_std:
            self._require_bags()
        leaves, usable = self._oob_parts()
        self._warn_unusable(usable.sum(axis=1), "training rows (out-of-bag)")
        if return_std:
            mean, std = self._predict_from_leaves(leaves, usable, True)
            self._warn_missing_std(mean, std, "training rows (out-of-bag)")
            return mean, std
        cache = self._fit_cache
        if "oob average" not in cache:
            cache["oob average"] = self._predict_from_leaves(leaves, usable, False)
        return cache["oob average"].copy()

    def local_average(self, X, return_std=False):
        """Return the forest-weighted mean of y at X (the honest forest's prediction).

        For a local linear forest this is the local-constant fit on the *same* trees and
        weights, the comparison that isolates what the local line adds.
        """
        X = check_predict_data(self, X)
        if return_std:
            self._require_bags()
        return self._predict_from_leaves(self._leaves(X), None, return_std)

    def predict_interval(self, X, level=0.95):
        """Return ``(lower, upper)`` pointwise normal confidence intervals at ``level``.

        For a dask array or DataFrame ``X``, two lazy dask arrays or Series.
        """
        if is_dask_collection(X):
            check_level(level)
            self._check_lazy(True)
            return lazy_predict(self, X, "predict_interval", ("lower", "upper"), level=level)
        mean, std = self.predict(X, return_std=True)
        return normal_interval(mean, std, level)

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
