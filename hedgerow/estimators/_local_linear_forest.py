"""The local linear forest: forest weights × a ridge-penalised local linear fit."""

from __future__ import annotations

import copy
import warnings
from numbers import Integral, Real

import numpy as np
from sklearn.linear_model import Lasso, LassoCV
from sklearn.utils._param_validation import StrOptions
from sklearn.utils.validation import check_is_fitted

from hedgerow._cache import array_key, lru_lookup
from hedgerow._distributed import check_client, is_dask_collection, lazy_predict
from hedgerow._validation import (
    check_fit_data,
    check_predict_data,
    check_ridge_penalty,
    preserve_fitted_state,
    validate_params,
)
from hedgerow.estimators._forest import (
    _fit_rows,
    _ForestBase,
    bag_std,
    resolve_trees_per_bag,
)
from hedgerow.forest import RULE_MEAN, RULE_RIDGE_RESIDUAL, subsample_size
from hedgerow.inference import (
    linearisation_coefficients,
    linearised_from_leaf_means,
    little_bags_variance,
)
from hedgerow.local import (
    LocalFit,
    binary_scale,
    column_centre,
    default_scale,
    moment_features,
    moments_from_sums,
    ridge_path_intercepts,
    solve_local,
    standardise,
    subset_moments,
    warn_fallback,
)

__all__ = ["LocalLinearForestRegressor", "RIDGE_GRID", "SPLIT_PENALTY_AUTO"]

#: Largest number of (query, tree) terms slope_std stacks into one pass.
_STACKED_TERMS = 20_000_000

#: Penalties tried by ``ridge_penalty="auto"`` (on standardised slopes; see the solver).
RIDGE_GRID = (0.0, 1e-4, 3e-4, 1e-3, 3e-3, 0.01, 0.03, 0.1, 0.3, 1.0, 3.0, 10.0)

#: Penalty of the ridge fits inside the split rule when ``ridge_penalty="auto"``: the
#: automatic choice needs the trees first, and node-level fits on few rows need some
#: shrinkage whatever the final penalty.
SPLIT_PENALTY_AUTO = 0.1

_CACHE_SIZE = 4


#: Queries per block of the batched local solve: its temporaries (a few (k+2)^2 arrays
#: per query) stay bounded whatever the number of queries; each query's solve is its own,
#: so the blocks give the same bits as one batch.
_SOLVE_ROWS = 65_536


def _lasso_screen(Xs, y) -> np.ndarray:
    """Return the columns whose linear or quadratic lasso term is non-zero (1-s.e. penalty).

    ``LassoCV`` (5 folds) gives the cross-validated error path; the penalty used is the
    largest one whose mean error is within one standard error of the minimum (the
    one-standard-error rule, Hastie, Tibshirani & Friedman 2009, Sec. 7.10). The
    error-minimising penalty is tuned for prediction and keeps many noise columns, and
    every noise column in the local line costs variance and edge bias.
    """
    d = Xs.shape[1]
    # The screening is a question about y's units no more than X's: on y / sd(y) the
    # path, the one-standard-error choice and the 1e-10 cut on coefficients below do not
    # depend on the units (LassoCV itself failed on y ~ 1e200 and kept other columns on
    # y ~ 1e100). Centred and divided in binary magnitude first, so y near 1e300 stays
    # finite.
    y = np.asarray(y, dtype=np.float64)
    p = float(binary_scale(y))
    yc = y / p - np.mean(y / p)
    sd = float(np.std(yc))
    y = yc / sd if sd > 0 else yc
    # linear and centred quadratic terms: a column whose effect is curved but not
    # monotone (a valley) has no linear association, yet a local line in it still helps
    sq = Xs**2
    sq = sq - sq.mean(axis=0)
    sd = sq.std(axis=0)
    basis = np.hstack([Xs, sq / np.where(sd > 0, sd, 1.0)])
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        cv = LassoCV(cv=min(5, Xs.shape[0]), random_state=0).fit(basis, y)
        mean = cv.mse_path_.mean(axis=1)
        se = cv.mse_path_.std(axis=1, ddof=1) / np.sqrt(cv.mse_path_.shape[1])
        best = int(np.argmin(mean))
        ok = np.flatnonzero(mean <= mean[best] + se[best])
        alpha = float(np.max(cv.alphas_[ok]))
        coef = Lasso(alpha=alpha).fit(basis, y).coef_
    hit = np.abs(coef) > 1e-10
    return np.flatnonzero(hit[:d] | hit[d:])


class LocalLinearForestRegressor(_ForestBase):
    """Local linear forest: honest forest weights in a ridge-penalised local linear fit.

    At a query x the prediction is the intercept a(x) of

        min_{a, b}  sum_i alpha_i(x) (y_i - a - z_i(x)' b)^2 + lambda ||b||^2,

    with alpha_i(x) the forest weights (rows sum to 1), z_i(x) the correction columns of
    row i minus those of x, divided by the training standard deviation of each column
    (so lambda acts on standardised slopes), and the intercept unpenalised.

    Parameters
    ----------
    n_estimators, subsample_rate, trees_per_bag, honest, min_samples_leaf, max_features,
    max_depth, random_state, n_jobs
        As in :class:`HonestForestRegressor`.
    ridge_penalty : float >= 0 or "auto", default="auto"
        lambda above. "auto" picks it from ``RIDGE_GRID`` by out-of-bag squared error,
        re-solving cached out-of-bag moments (no refit).
    correction_features : "auto", None or list, default="auto"
        Columns entering the local line. "auto": lasso screening on standardised
        columns and their centred squares (``LassoCV``, 5 folds, penalty by the
        one-standard-error rule) keeps a column if its linear or quadratic term is
        non-zero, at least the one most correlated with y. None: all columns. A list of
        column indices or, for DataFrame input, column names.
    split_rule : {"ridge_residual", "mean"}, default="ridge_residual"
        "ridge_residual": each node is split by CART on the residuals of a ridge fit of y
        on the correction columns in that node (penalty ``ridge_penalty``, or
        ``SPLIT_PENALTY_AUTO`` when that is "auto"). "mean": plain CART on y.

    Attributes
    ----------
    correction_features_ : ndarray of int
        Indices of the correction columns.
    ridge_penalty_ : float
        The penalty in use.
    ridge_path_ : dict or None
        With "auto": ``{"ridge_penalty": grid, "oob_mse": errors}``.
    correction_scale_ : ndarray
        Standard deviations standardising the correction columns.
    column_scale_, column_min_, column_max_ : ndarray of shape (n_features,)
        Training standard deviation (ddof=0; 1.0 for a constant column), minimum and
        maximum of every column: the probe's units and the data's span, kept so that a
        probe move never passes over the training rows. A forest pickled before these
        existed gets them from its training rows when first asked.

    Notes
    -----
    Standard errors: little bags on per-tree linearised predictions with the forest-level
    Gram matrix held fixed (see ``hedgerow.inference._little_bags``):
    psi_t(x) = a(x) + mean over the fill rows i of x's leaf in tree t of
    c(x)'[1, z_i(x)] (y_i - a(x) - z_i(x)' b(x)), c(x) the first row of the inverse
    penalised Gram matrix.
    """

    _parameter_constraints: dict = {
        **_ForestBase._parameter_constraints,
        "ridge_penalty": [StrOptions({"auto"}), Real],
        "correction_features": [StrOptions({"auto"}), None, "array-like"],
        "split_rule": [StrOptions({"ridge_residual", "mean"})],
    }

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
        ridge_penalty="auto",
        correction_features="auto",
        split_rule="ridge_residual",
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
        self.ridge_penalty = ridge_penalty
        self.correction_features = correction_features
        self.split_rule = split_rule
        self.random_state = random_state
        self.n_jobs = n_jobs

    # -- fitting -------------------------------------------------------------------------
    def _resolve_correction_features(self, X, y) -> np.ndarray:
        d = X.shape[1]
        spec = self.correction_features
        if isinstance(spec, str):  # "auto": lasso screening
            scale = default_scale(X)
            Xs = standardise(X, column_centre(X), scale)
            keep = _lasso_screen(Xs, y)
            if keep.size == 0:
                yc = y - y.mean()
                corr = np.abs(Xs.T @ yc)
                keep = np.array([int(np.argmax(corr))])
            return keep.astype(np.int64)
        if spec is None:
            return np.arange(d, dtype=np.int64)
        items = list(np.asarray(spec, dtype=object).ravel())
        if len(items) == 0:
            raise ValueError(
                "The 'correction_features' parameter must name at least one column. "
                "Got an empty list instead."
            )
        names = getattr(self, "feature_names_in_", None)
        out = []
        for item in items:
            if isinstance(item, str):
                if names is None:
                    raise ValueError(
                        f"The 'correction_features' parameter holds the column name "
                        f"{item!r}, but X has no column names (pass a DataFrame or use "
                        f"column indices)."
                    )
                where = np.flatnonzero(names == item)
                if where.size == 0:
                    raise ValueError(
                        f"The 'correction_features' parameter must list columns of X; "
                        f"known columns are {list(names)}. Got unknown name {item!r}."
                    )
                out.append(int(where[0]))
            elif isinstance(item, Integral | np.integer) and not isinstance(item, bool):
                if not -d <= int(item) < d:
                    raise ValueError(
                        f"The 'correction_features' parameter must hold column indices in "
                        f"[0, {d}). Got {item!r} instead."
                    )
                out.append(int(item) % d)
            else:
                raise TypeError(
                    f"The 'correction_features' parameter must be 'auto', None, or a list of "
                    f"column indices or names. Got element {item!r} instead."
                )
        return np.array(sorted(set(out)), dtype=np.int64)

    def _check_out_of_bag_rows(self, n: int) -> None:
        """Refuse ``ridge_penalty="auto"`` when no tree leaves a row out (nothing to score)."""
        l = resolve_trees_per_bag(self.trees_per_bag, self.n_estimators, self.subsample_rate)
        if subsample_size(n, self.subsample_rate, l) >= n:
            raise ValueError(
                f"The 'ridge_penalty' parameter 'auto' chooses the penalty by out-of-bag "
                f"error, but with subsample_rate={self.subsample_rate!r} every tree draws "
                f"all {n} rows, so no row is out of bag. Use subsample_rate < 1 or a "
                f"numeric ridge_penalty. Got ridge_penalty={self.ridge_penalty!r} instead."
            )

    def fit(self, X, y, *, progress=None, client=None):
        """Grow the forest, choose the correction columns and penalty; return ``self``.

        Parameters
        ----------
        X : array-like of shape (n_samples, n_features)
        y : array-like of shape (n_samples,)
        progress : callable, optional
            Called with the number of trees finished so far.
        client : dask.distributed.Client, optional
            Grow chunks of trees on its workers (the data are sent once); screening and
            the penalty choice stay here. The fit is the same as without it; a chunk the
            cluster loses for good raises a ``RuntimeError`` and leaves an earlier fit in
            place.

        Returns
        -------
        self
        """
        with preserve_fitted_state(self):
            validate_params(self)
            client = check_client(client)
            check_ridge_penalty(self.ridge_penalty, allow_auto=True)
            X, y = check_fit_data(self, X, y)
            if isinstance(self.ridge_penalty, str):
                self._check_out_of_bag_rows(X.shape[0])
            cols = self._resolve_correction_features(X, y)
            Xc = np.ascontiguousarray(X[:, cols])
            scale = default_scale(Xc)
            Z = standardise(Xc, column_centre(Xc), scale)
            auto = isinstance(self.ridge_penalty, str)
            split_penalty = SPLIT_PENALTY_AUTO if auto else float(self.ridge_penalty)
            rule = RULE_RIDGE_RESIDUAL if self.split_rule == "ridge_residual" else RULE_MEAN
            forest, l, mtry, s = self._grow(
                X, y, rule=rule, Z=Z, split_penalty=split_penalty, progress=progress,
                client=client,
            )
        self._set_forest_state(X, y, forest, l, mtry, s)
        # column sd / span of every column, kept for the probe (each is a pass over n)
        with np.errstate(over="ignore", invalid="ignore"):
            sd = X.std(axis=0)
        wide = ~np.isfinite(sd)
        if np.any(wide):  # columns near 1e300 overflow when squared: scale them first
            top = np.abs(X[:, wide]).max(axis=0)
            sd[wide] = (X[:, wide] / top).std(axis=0) * top
        self.column_scale_ = np.where(sd > 0, sd, 1.0)
        self.column_min_ = X.min(axis=0)
        self.column_max_ = X.max(axis=0)
        self.correction_features_ = cols
        self.correction_scale_ = scale
        self._Xc = Xc
        if auto:
            grid = np.array(RIDGE_GRID)
            unit = self._ridge_path_in_units(grid)
            with np.errstate(over="ignore"):  # inf: an error beyond float64 (y ~ 1e200)
                mse = unit * np.float64(self._y_unit) ** 2
            self.ridge_path_ = {"ridge_penalty": grid, "oob_mse": mse}
            # chosen on the errors in y's binary magnitude: the same choice as on mse for
            # ordinary y, and no underflow of squared errors when y is near 1e-300
            self.ridge_penalty_ = float(grid[int(np.nanargmin(unit))])
        else:
            self.ridge_path_ = None
            self.ridge_penalty_ = float(self.ridge_penalty)
        return self

    # -- cached pieces -------------------------------------------------------------------
    _QUERY_CACHES = ("leaves", "query state")

    def _prime_fit_caches(self, with_std: bool):
        self._leaf_features()

    def _query_state(self, X):
        """Return (leaves, moments) of the queries X, cached by the bytes of X."""
        def compute():
            leaves = self._leaves(X)
            # W @ [moment features] as averages of per-leaf means: no m × n weight matrix
            means, centre = self._leaf_features()
            R, _ = self.forest_.weighted_sums(leaves, means, n_jobs=self._n_threads())
            mom = moments_from_sums(R, X[:, self.correction_features_], centre,
                                    self.correction_scale_)
            return leaves, mom

        return lru_lookup(self._fit_cache, "query state", array_key(X), compute,
                          size=_CACHE_SIZE)

    def _leaf_features(self):
        """Return the per-leaf means of the moment features (computed once per fit)."""
        # kept in a dict created at fit, so that predicting never rebinds attributes
        lazy = self._fit_cache
        if "means" not in lazy:
            F, centre = moment_features(self._Xc, self.y_train_, self.correction_scale_)
            lazy["means"] = self.forest_.leaf_feature_means(F)
            lazy["centre"] = centre
        return lazy["means"], lazy["centre"]

    def _oob_moments(self):
        """Return (usable trees per training row, out-of-bag moments), cached per fit.

        Gathered in blocks of ``OOB_BLOCK_ROWS`` training rows (``_oob_weighted_sums``:
        each block's leaves and in-bag mask made and dropped): every row's sums are its
        own, so the blocks give the bits of one pass over the whole leaf matrix, without
        holding it.
        """
        cache = self._fit_cache
        if "oob moments" not in cache:
            means, centre = self._leaf_features()
            R, n_used = self._oob_weighted_sums(means)
            # rows without an out-of-bag tree have zero total weight: NaN in the solve
            cache["oob moments"] = (n_used, moments_from_sums(R, self._Xc, centre,
                                                              self.correction_scale_))
        return cache["oob moments"]

    def _oob_state(self):
        """Return (leaves, usable, n_used, moments) of the training rows out of bag.

        The leaf matrix and the in-bag mask (n x trees each) are made on first use (out-of-
        bag standard errors need them); choosing the penalty does not.
        """
        leaves, usable = self._oob_parts()
        return (leaves, usable, *self._oob_moments())

    def _penalty(self, ridge_penalty):
        if ridge_penalty is None:
            return self.ridge_penalty_
        return check_ridge_penalty(ridge_penalty)

    def _solve(self, mom, lam):
        with warnings.catch_warnings():
            # zero-weight rows are reported by the caller, once
            warnings.simplefilter("ignore", RuntimeWarning)
            m = mom.n_queries
            if m <= _SOLVE_ROWS:
                return solve_local(mom, lam)
            parts = [solve_local(subset_moments(mom, slice(a, min(m, a + _SOLVE_ROWS))), lam)
                     for a in range(0, m, _SOLVE_ROWS)]
        return LocalFit(
            intercept=np.concatenate([f.intercept for f in parts]),
            slopes=np.concatenate([f.slopes for f in parts]),
            slopes_scaled=np.concatenate([f.slopes_scaled for f in parts]),
            gram_inv=np.concatenate([f.gram_inv for f in parts]),
            fallback=np.concatenate([f.fallback for f in parts]),
            ridge_penalty=parts[0].ridge_penalty,
        )

    def _tree_terms(self, leaves, usable, Qc, fit, row=0):
        """Return per-tree linearised predictions for row ``row`` of the inverse Gram."""
        means, centre = self._leaf_features()
        offset, gamma = linearisation_coefficients(
            Qc, centre, self.correction_scale_, np.nan_to_num(fit.intercept),
            np.nan_to_num(fit.slopes_scaled), np.nan_to_num(fit.gram_inv[:, row, :]),
        )
        return linearised_from_leaf_means(
            leaves, usable, self.forest_, means, offset, gamma, n_jobs=self._n_threads()
        )

    def _std(self, leaves, usable, Qc, fit):
        self._require_bags()
        psi = self._tree_terms(leaves, usable, Qc, fit)
        return little_bags_variance(psi, self.trees_per_bag_)

    # -- intervals ------------------------------------------------------------------------
    def _line_columns(self) -> np.ndarray:
        return self.correction_features_

    def _bias_line(self) -> dict:
        # the local linear forest's own local line: its bias-bound interval keeps the
        # prediction as centre and the little-bags std, and adds the curvature bound
        means, centre = self._leaf_features()
        return {"cols": self.correction_features_, "squared": np.zeros(0, dtype=np.int64),
                "Xc": self._Xc, "scale": self.correction_scale_, "means": means,
                "centre": centre, "penalty": self.ridge_penalty_, "own": True}

    def _line_fit(self, X, leaves, line, Qc):
        if not line.get("own"):
            return super()._line_fit(X, leaves, line, Qc)
        _, mom = self._query_state(X)
        return self._solve(mom, self.ridge_penalty_)

    def _clt_parts(self, X):
        leaves, mom = self._query_state(X)
        fit = self._solve(mom, self.ridge_penalty_)
        var = self._std(leaves, None, X[:, self.correction_features_], fit)
        return fit.intercept, var.std

    # -- public --------------------------------------------------------------------------
    def ridge_path(self, ridge_penalties) -> np.ndarray:
        """Return out-of-bag mean squared error for each penalty (cached moments, no refit)."""
        check_is_fitted(self)
        with np.errstate(over="ignore"):  # inf: an error beyond float64 (y ~ 1e200)
            return self._ridge_path_in_units(ridge_penalties) * np.float64(self._y_unit) ** 2

    @property
    def _y_unit(self) -> float:
        """The power of two near the largest |y| (exact to divide by)."""
        return float(binary_scale(self.y_train_))

    def _ridge_path_in_units(self, ridge_penalties) -> np.ndarray:
        """The out-of-bag errors of ``ridge_path`` divided by ``_y_unit ** 2`` (exactly)."""
        n_used, mom = self._oob_moments()
        ok = n_used > 0
        unit = self._y_unit
        lams = [self._penalty(lam) for lam in np.atleast_1d(ridge_penalties)]
        if not lams:
            return np.zeros(0)
        if not ok.any():  # no out-of-bag row: no error to measure
            return np.full(len(lams), np.nan)
        # one eigendecomposition per row serves every penalty (ridge_path_intercepts),
        # in blocks of rows so that its temporaries stay bounded
        sq = np.zeros(len(lams))
        y = self.y_train_
        for a in range(0, mom.n_queries, _SOLVE_ROWS):
            b = min(mom.n_queries, a + _SOLVE_ROWS)
            keep = ok[a:b]
            fits = ridge_path_intercepts(subset_moments(mom, slice(a, b)), lams)
            resid = (fits[keep] - y[a:b][keep, None]) / unit
            sq += np.sum(resid**2, axis=0)
        return sq / int(ok.sum())

    def predict(self, X, return_std=False, *, ridge_penalty=None):
        """Return predictions (and little-bags standard errors) at the rows of X.

        ``ridge_penalty`` overrides the fitted penalty for this call; the weighted moments
        of X are cached, so another penalty re-solves only the small local systems. For a
        dask array or DataFrame ``X``, the same as lazy dask arrays or Series.
        """
        if is_dask_collection(X):
            self._check_lazy(return_std)
            self._penalty(ridge_penalty)
            names = ("mean", "std") if return_std else ("mean",)
            return lazy_predict(self, X, "predict", names, return_std=bool(return_std),
                                ridge_penalty=ridge_penalty)
        X = check_predict_data(self, X)
        lam = self._penalty(ridge_penalty)
        if return_std:
            self._require_bags()
        leaves, mom = self._query_state(X)
        fit = self._solve(mom, lam)
        warn_fallback(fit, "local linear forest")
        if not return_std:
            return fit.intercept
        psi = self._tree_terms(leaves, None, X[:, self.correction_features_], fit)
        return fit.intercept, bag_std(psi, self.trees_per_bag_)

    def local_fit(self, X, *, ridge_penalty=None):
        """Return the solver's ``LocalFit`` (intercept, slopes, Gram inverse) at X."""
        return self._checked_fit(X, ridge_penalty)[2]

    def _checked_fit(self, X, ridge_penalty, need_bags=False):
        """Return ``(X checked, leaves, LocalFit)`` of the queries at ``ridge_penalty``."""
        X = check_predict_data(self, X)
        if need_bags:
            self._require_bags()
        leaves, mom = self._query_state(X)
        return X, leaves, self._solve(mom, self._penalty(ridge_penalty))

    def local_slopes(self, X, *, ridge_penalty=None):
        """Return the local slopes (m × k) in original units of ``correction_features_``."""
        return self.local_fit(X, ridge_penalty=ridge_penalty).slopes

    def slope_std(self, X, *, ridge_penalty=None):
        """Return little-bags standard errors of the local slopes (m × k, original units).

        Same linearisation as the prediction's, with row j+1 of the inverse Gram matrix
        in place of the first row.
        """
        X, leaves, fit = self._checked_fit(X, ridge_penalty, need_bags=True)
        return self._slope_std_of(leaves, X, fit)

    def _slope_std_of(self, leaves, X, fit):
        Qc = X[:, self.correction_features_]
        m, k = fit.slopes.shape
        out = np.empty_like(fit.slopes)
        if k == 0:
            return out
        # all k rows of the inverse Gram in one pass (a probe asks for one point, where
        # per-call overhead dominates); loop over rows when the stacked terms grow large
        step = max(1, min(k, _STACKED_TERMS // max(1, m * leaves.shape[1])))
        for j0 in range(0, k, step):
            js = range(j0, min(k, j0 + step))
            n_j = len(js)
            stacked = LocalFit(
                intercept=np.tile(fit.intercept, n_j),
                slopes=np.tile(fit.slopes, (n_j, 1)),
                slopes_scaled=np.tile(fit.slopes_scaled, (n_j, 1)),
                gram_inv=np.concatenate([fit.gram_inv[:, [0, j + 1], :] for j in js]),
                fallback=np.tile(fit.fallback, n_j),
                ridge_penalty=fit.ridge_penalty,
            )
            psi = self._tree_terms(np.tile(leaves, (n_j, 1)), None, np.tile(Qc, (n_j, 1)),
                                   stacked, row=1)
            std = little_bags_variance(psi, self.trees_per_bag_).std
            out[:, j0:j0 + n_j] = std.reshape(n_j, m).T
        return out / self.correction_scale_

    def predict_variance(self, X, *, ridge_penalty=None):
        """Return the ``LittleBagsVariance`` of the predictions at X (raw and debiased)."""
        X, leaves, fit = self._checked_fit(X, ridge_penalty, need_bags=True)
        return self._std(leaves, None, X[:, self.correction_features_], fit)

    def oob_predict(self, return_std=False, *, ridge_penalty=None):
        """Return out-of-bag predictions of the training rows (NaN, warned, if no tree)."""
        check_is_fitted(self)
        lam = self._penalty(ridge_penalty)
        if return_std:
            self._require_bags()
        n_used, mom = self._oob_moments()
        self._warn_unusable(n_used, "training rows (out-of-bag)")
        fit = self._solve(mom, lam)
        if not return_std:
            return fit.intercept
        if "oob parts" in self._fit_cache:  # another out-of-bag method made them
            leaves, usable, _, _ = self._oob_state()
            std = bag_std(self._tree_terms(leaves, usable, self._Xc, fit),
                          self.trees_per_bag_)
        else:  # in blocks of rows: the same bits (each row's terms are its own)
            std = np.empty(fit.intercept.shape[0])
            for a, b, leaves, usable in self._oob_blocks():
                std[a:b] = bag_std(self._tree_terms(leaves, usable, self._Xc[a:b],
                                                    _fit_rows(fit, a, b)),
                                   self.trees_per_bag_)
        self._warn_missing_std(fit.intercept, std, "training rows (out-of-bag)")
        return fit.intercept, std

    # -- one penalty without a refit; one solve for a whole readout -----------------------
    def with_ridge_penalty(self, ridge_penalty):
        """Return this fitted forest seen at ``ridge_penalty``: the same trees, no refit.

        The returned estimator is a light copy that shares the trees and every fit-scoped
        cache (weighted moments, out-of-bag state) with ``self``; only the penalty in use
        (``ridge_penalty_``) differs, so each of its predictions re-solves the small local
        systems and nothing else. ``self`` is left unchanged, and so are the parameters
        (``get_params``): cloning the view gives the original's settings. None gives the
        fitted penalty.
        """
        check_is_fitted(self)
        lam = self._penalty(ridge_penalty)
        view = copy.copy(self)
        view.ridge_penalty_ = lam
        return view

    def local_readout(self, X, *, ridge_penalty=None):
        """Return ``(fit, std, slope_std)`` at the rows of X from one local solve.

        ``fit`` is the solver's ``LocalFit`` (prediction = ``fit.intercept``, slopes in
        original units), ``std`` the little-bags standard errors of the predictions and
        ``slope_std`` those of the slopes (m × k); both are None for a forest without
        little bags. The numbers equal those of ``local_fit``, ``predict(return_std=True)``
        and ``slope_std``.
        """
        X, leaves, fit = self._checked_fit(X, ridge_penalty)
        if self.trees_per_bag_ < 2:
            return fit, None, None
        psi = self._tree_terms(leaves, None, X[:, self.correction_features_], fit)
        std = bag_std(psi, self.trees_per_bag_)
        return fit, std, self._slope_std_of(leaves, X, fit)

