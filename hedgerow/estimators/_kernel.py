"""Classical kernel smoothers: Nadaraya--Watson and local linear regression.

Both are a kernel weighting of the training rows (:func:`hedgerow.kernels.kernel_weights`)
times a local model (:mod:`hedgerow.local`), the same two pieces the forests use, so their
neighbour weights, predictions and standard errors are directly comparable.
"""

from __future__ import annotations

from numbers import Real

import numpy as np
from scipy.stats import norm
from sklearn.base import BaseEstimator, RegressorMixin
from sklearn.utils._param_validation import Interval, StrOptions
from sklearn.utils.validation import check_is_fitted

from hedgerow._cache import array_key, lru_lookup
from hedgerow._distributed import is_dask_collection, lazy_predict
from hedgerow._validation import (
    as_float_array_1d,
    check_fit_data,
    check_level,
    check_predict_data,
    validate_params,
)
from hedgerow.kernels import (
    KERNELS,
    KernelRows,
    loo_residuals,
    select_bandwidth_cv,
    silverman_bandwidth,
)
from hedgerow.local import (
    default_scale,
    moment_features,
    moments_from_sums,
    solve_local,
    warn_fallback,
)

__all__ = ["LocalLinearRegressor", "NadarayaWatsonRegressor"]

# Set by check_fit_data; restored if a fit fails so that a failed fit changes nothing.
_INPUT_ATTRS = ("n_features_in_", "feature_names_in_")


class _KernelSmoother(RegressorMixin, BaseEstimator):
    """Shared implementation; subclasses set the local polynomial degree."""

    _degree = 0

    _parameter_constraints: dict = {
        "bandwidth": [
            StrOptions({"cv", "silverman"}),
            Interval(Real, 0, None, closed="neither"),
            "array-like",
        ],
        "kernel": [StrOptions(set(KERNELS))],
    }

    def __init__(self, bandwidth="cv", kernel="gaussian"):
        self.bandwidth = bandwidth
        self.kernel = kernel

    def __sklearn_tags__(self):
        tags = super().__sklearn_tags__()
        tags.input_tags.allow_nan = False
        tags.input_tags.sparse = False
        return tags

    def _resolve_bandwidth(self, X, y, scale, progress=False):
        """Return ``(bandwidth in the units of X, CVCurve or None)``.

        A bandwidth from ``"cv"`` is ``inf`` for a column the kernel is flat in.
        """
        bw = self.bandwidth
        d = X.shape[1]
        if isinstance(bw, str):
            if bw == "silverman":
                return silverman_bandwidth(X), None
            curve = select_bandwidth_cv(X, y, kernel=self.kernel, degree=self._degree,
                                        progress=progress)
            return curve.bandwidth.copy(), curve
        if isinstance(bw, bool | np.bool_):
            raise ValueError(
                "The 'bandwidth' parameter must be 'cv', 'silverman', a positive float or "
                f"{d} positive floats (one per column). Got {bw!r} instead."
            )
        if np.ndim(bw) == 0:
            values = np.full(d, float(bw))
        else:
            try:
                values = as_float_array_1d("bandwidth", bw, length=d)
            except (TypeError, ValueError) as exc:
                if any(word in str(exc) for word in ("entries", "finite", "dimensional")):
                    raise
                raise ValueError(
                    "The 'bandwidth' parameter must be 'cv', 'silverman', a positive float "
                    f"or {d} positive floats (one per column). Got {bw!r} instead."
                ) from exc
        if not np.all(values > 0):
            raise ValueError(
                "The 'bandwidth' parameter must be positive (in standard deviations of each "
                f"column). Got {bw!r} instead."
            )
        return values * scale, None

    def fit(self, X, y, *, progress=False):
        """Return the fitted estimator after choosing the bandwidths.

        Parameters
        ----------
        X : array-like of shape (n_samples, n_features)
        y : array-like of shape (n_samples,)
        progress : bool or RunControl, default=False
            With ``bandwidth="cv"``, a bar counting the leave-one-out evaluations of the
            search (it can take a while on wide data); Ctrl-C stops it and the
            estimator keeps its earlier fitted state.

        Returns
        -------
        self
        """
        validate_params(self)
        saved = {a: self.__dict__[a] for a in _INPUT_ATTRS if a in self.__dict__}
        try:
            X, y = check_fit_data(self, X, y)
            scale = default_scale(X)
            bandwidth, curve = self._resolve_bandwidth(X, y, scale, progress)
        except BaseException:
            for a in _INPUT_ATTRS:
                self.__dict__.pop(a, None)
            self.__dict__.update(saved)
            raise
        self.X_train_ = X
        self.y_train_ = y
        self.scale_ = scale
        self.bandwidth_ = bandwidth
        self.cv_curve_ = curve
        self.ignored_features_ = (curve.ignored.copy() if curve is not None
                                  else np.zeros(X.shape[1], dtype=bool))
        self.n_features_used_ = int(X.shape[1] - self.ignored_features_.sum())
        # The columns the fit is computed on (all of them if every one is ignored: then
        # the kernel is flat everywhere and the fit is global).
        used = np.flatnonzero(~self.ignored_features_)
        self._columns = used if used.size else np.arange(X.shape[1])
        # Filled on the first request for standard errors (see _training_variance).
        self._variance_cache = {}
        return self

    def _local_fit(self, X, with_variance=False):
        """Return ``(fit, variance or None)`` at the rows of ``X``.

        Cached by the contents of ``X``: one probe asks for the same point several times,
        and a fit computed with its variance also serves later requests without.
        """
        key = array_key(X)
        entry = lru_lookup(self._variance_cache, "local fits", key,
                           lambda: self._compute_local_fit(X, with_variance))
        if with_variance and entry[1] is None:
            entry = self._compute_local_fit(X, True)
            self._variance_cache["local fits"][key] = entry
        return entry

    def _used(self, X):
        """Return the columns of ``X`` the fit is computed on (see ignored_features_)."""
        cols = self.__dict__.get("_columns")
        if cols is None or cols.size == X.shape[1]:
            return X
        return np.ascontiguousarray(X[:, cols])

    def _kernel_rows(self):
        """Return the training rows prepared for kernel queries (fit-scoped)."""
        cache = self._variance_cache
        if "rows" not in cache:
            cache["rows"] = KernelRows(self._used(self.X_train_),
                                       self._used(self.bandwidth_[None, :])[0], self.kernel)
        return cache["rows"]

    def _features(self):
        """Return ``(B, centre)`` of the training rows (fit-scoped, built once)."""
        cache = self._variance_cache
        if "features" not in cache:
            cache["features"] = moment_features(
                self._used(self.X_train_), self.y_train_, self._used(self.scale_[None, :])[0],
                degree=self._degree,
            )
        return cache["features"]

    def _compute_local_fit(self, X, with_variance=False, stable=True):
        # The weighted sums come from dense kernel blocks without forming the weight
        # matrix (a local fit does not depend on the scaling of a row of weights); the
        # variance sums of squared weights come from the same pass.
        B, centre = self._features()
        rows = self._kernel_rows()
        X = self._used(X)
        scale = self._used(self.scale_[None, :])[0]
        if with_variance:
            R, V = rows.sums(X, B, squared=self._variance_features(), stable=stable)
        else:
            R, V = rows.sums(X, B, stable=stable), None
        fit = solve_local(moments_from_sums(R, X, centre, scale, degree=self._degree), 0.0)
        return fit, (None if V is None else self._variance_from_sums(V, X, fit))

    def _variance_features(self):
        """Return ``sigma^2(x_i) [1, u_i, u_i u_i^T]`` of the training rows (fit-scoped).

        Their sums under squared weights are the moments from which
        :meth:`_variance_from_sums` forms the variance of the fit.
        """
        cache = self._variance_cache
        if "variance features" not in cache:
            B, _ = self._features()
            k = self._columns.size if self._degree else 0
            width = 1 + k + k * (k + 1) // 2  # the [1, u, u u^T] columns of B
            cache["variance features"] = np.ascontiguousarray(
                B[:, :width] * self._training_variance()[:, None]
            )
        return cache["variance features"]

    def _variance_from_sums(self, V, X, fit):
        """Return ``Var yhat(x) = sum_i l_i(x)^2 sigma^2(x_i)`` at the rows of ``X``.

        The equivalent kernel is ``l_i(x) = w_i(x) g(x)^T [1, z_i(x)]`` with ``g`` the
        first row of the inverse local Gram matrix (:func:`hedgerow.local.equivalent_kernel`),
        so the sum is ``g^T V g`` with ``V = sum_i w_i^2 sigma^2(x_i) [1, z_i][1, z_i]^T``:
        ``V`` holds the squared-weight sums over :meth:`_variance_features`, centred here.
        ``X`` holds the used columns only.
        """
        g = fit.gram_inv[:, 0, :]
        if self._degree == 0:
            return g[:, 0] ** 2 * V[:, 0]
        m, k = V.shape[0], self._columns.size
        _, centre = self._features()
        # moments_from_sums expects the response columns too; they are not needed here
        mom = moments_from_sums(np.hstack([V, np.zeros((m, 1 + k))]), X, centre,
                                self._used(self.scale_[None, :])[0])
        gram = np.empty((m, k + 1, k + 1))
        gram[:, 0, 0] = mom.s0
        gram[:, 0, 1:] = mom.s1
        gram[:, 1:, 0] = mom.s1
        gram[:, 1:, 1:] = mom.s2
        return np.einsum("mi,mij,mj->m", g, gram, g)

    def _training_variance(self):
        """Return sigma^2(x_i) at the training rows: smoothed squared residuals."""
        if "sigma2" not in self._variance_cache:
            X = self.X_train_
            # The training rows are one fixed set of queries: BLAS products (stable=False).
            fit, _ = self._compute_local_fit(X, stable=False)  # not cached: n queries
            resid2 = (self.y_train_ - fit.intercept) ** 2
            R = self._kernel_rows().sums(self._used(X),
                                         np.stack([np.ones_like(resid2), resid2], 1),
                                         stable=False)
            self._variance_cache["sigma2"] = R[:, 1] / R[:, 0]
        return self._variance_cache["sigma2"]

    def __getstate__(self):
        state = dict(vars(self))
        state["_variance_cache"] = {}  # derived from the fit; rebuilt on demand
        return state

    def _block_view(self, with_std: bool):
        """Return a shallow copy for one block of a lazy prediction.

        The fit-scoped pieces (training moment features, smoothed squared residuals) are
        computed once on this object and shared; the per-query local fits stay with the
        block, so concurrent blocks do not pile up in one LRU.
        """
        self._features()
        if with_std:
            self._variance_features()
        view = type(self).__new__(type(self))
        view.__dict__.update(self.__dict__)
        view._variance_cache = {
            k: v for k, v in self._variance_cache.items()
            if k != "local fits"
        }
        return view

    def loo_predict(self):
        """Return leave-one-out predictions of the training rows (hat-matrix diagonal).

        Row i's value is the smoother fitted without row i, evaluated at x_i, from the
        leverages (rows nearly alone in their neighbourhood are refitted directly); NaN
        where no other row carries weight.
        """
        check_is_fitted(self)
        cache = self._variance_cache  # fit-scoped: the values depend on the fit only
        if "loo" not in cache:
            resid = loo_residuals(
                self._used(self.X_train_), self.y_train_,
                self._used(self.bandwidth_[None, :])[0], self.kernel, self._degree,
                self._used(self.scale_[None, :])[0],
            )
            cache["loo"] = self.y_train_ - resid
        return cache["loo"].copy()

    def neighbour_weights(self, X):
        """Return the kernel weights of the training rows for each row of ``X``.

        Parameters
        ----------
        X : array-like of shape (m, n_features)

        Returns
        -------
        scipy.sparse.csr_matrix of shape (m, n_train)
            Non-negative entries, rows summing to one (empty for a query with no training
            row inside a compact kernel's support). Gaussian weights below
            ``hedgerow.kernels.GAUSSIAN_TRUNCATION`` of their row's maximum are dropped.
        """
        X = check_predict_data(self, X)
        return self._kernel_rows().weights(self._used(X))

    def predict(self, X, return_std=False):
        """Return the smoother's estimate of E[y | x] (and its standard error).

        Parameters
        ----------
        X : array-like of shape (m, n_features), dask array or dask DataFrame
            For a dask collection the outputs are lazy dask arrays or Series.
        return_std : bool, default=False
            Also return the standard error of each estimate.

        Returns
        -------
        mean : ndarray of shape (m,)
            NaN (with a ``RuntimeWarning``) where a compact kernel covers no training row.
        std : ndarray of shape (m,)
            Only if ``return_std``. The conditional-variance sandwich of a linear
            smoother, ``Var yhat(x) = sum_i l_i(x)^2 sigma^2(x_i)``, with ``l`` the
            equivalent kernel and ``sigma^2(x_i)`` the squared residuals smoothed with the
            same weights (Fan & Gijbels 1996, ch. 4). It ignores smoothing bias.
        """
        if is_dask_collection(X):
            check_is_fitted(self)
            names = ("mean", "std") if return_std else ("mean",)
            return lazy_predict(self, X, "predict", names, return_std=bool(return_std))
        X = check_predict_data(self, X)
        fit, var = self._local_fit(X, with_variance=bool(return_std))
        if self._degree:
            warn_fallback(fit, type(self).__name__)
        if not return_std:
            return fit.intercept
        std = np.sqrt(np.maximum(var, 0.0))
        std[np.isnan(fit.intercept)] = np.nan
        return fit.intercept, std

    def local_fit(self, X):
        """Return the solver's ``LocalFit`` at X (``fallback`` flags the local constants)."""
        return self._local_fit(check_predict_data(self, X))[0]

    def predict_interval(self, X, level=0.95):
        """Return normal-theory confidence limits for E[y | x].

        The interval is ``mean -/+ z * std`` with ``std`` from ``predict(X,
        return_std=True)``. It is an interval for the smoother's mean and ignores
        smoothing bias, so it undercovers where the bias is large (for example
        Nadaraya--Watson near the edges of the data).

        Parameters
        ----------
        X : array-like of shape (m, n_features), dask array or dask DataFrame
        level : float, default=0.95
            Nominal coverage, in (0, 1).

        Returns
        -------
        lower, upper : ndarray of shape (m,)
            Lazy dask arrays or Series for a dask collection ``X``.
        """
        level = check_level(level)
        if is_dask_collection(X):
            check_is_fitted(self)
            return lazy_predict(self, X, "predict_interval", ("lower", "upper"), level=level)
        mean, std = self.predict(X, return_std=True)
        z = norm.ppf(0.5 + 0.5 * level)
        return mean - z * std, mean + z * std


_PARAMS_DOC = """
    Parameters
    ----------
    bandwidth : {"cv", "silverman"}, float or array-like of shape (n_features,), \
default="cv"
        A float (or one float per column) is a bandwidth in standard deviations of each
        column (ddof=0; a constant column counts as 1). ``"silverman"`` is Silverman's
        rule of thumb per column. ``"cv"`` minimises the leave-one-out squared error with
        one bandwidth per column (common factors of a rule of thumb, then L-BFGS-B in log
        bandwidth with the closed-form gradient; a column the response does not depend
        on gets a flat kernel; see :func:`hedgerow.kernels.select_bandwidth_cv`).
    kernel : {"gaussian", "epanechnikov", "tricube"}, default="gaussian"
        Product kernel over the columns.

    Attributes
    ----------
    bandwidth_ : ndarray of shape (n_features,)
        The bandwidth of each column in the column's own units; ``inf`` (only from
        ``"cv"``) where the kernel is flat in the column (Hall, Li & Racine 2007): a
        local constant fit then ignores it, a local linear fit keeps one global slope
        in it unless it is also in ``ignored_features_``.
    ignored_features_ : ndarray of shape (n_features,), bool
        Columns the fit does not use at all (predictions do not change with them).
    n_features_used_ : int
        The number of columns the fit uses.
    scale_ : ndarray of shape (n_features,)
        Column standard deviations used to express ``bandwidth`` in original units.
    cv_curve_ : hedgerow.kernels.CVCurve or None
        The bandwidth search (grid, path, leave-one-out errors) when ``bandwidth="cv"``,
        otherwise None.
    X_train_ : ndarray of shape (n_samples, n_features)
    y_train_ : ndarray of shape (n_samples,)
    n_features_in_ : int
    feature_names_in_ : ndarray of str
        Only when ``X`` had string column names.
"""


class NadarayaWatsonRegressor(_KernelSmoother):
    """Nadaraya--Watson (local constant) kernel regression.

    The estimate at ``x`` is the kernel-weighted mean of the training responses
    (Nadaraya 1964; Watson 1964). Its bias near the edges of the data is of order ``h``
    (Fan & Gijbels 1996), which local linear regression removes.
    """

    _degree = 0


class LocalLinearRegressor(_KernelSmoother):
    """Local linear kernel regression.

    The estimate at ``x`` is the intercept of a kernel-weighted least-squares line
    centred at ``x``; its slopes are available from :meth:`local_slopes`.
    """

    _degree = 1

    def local_slopes(self, X):
        """Return the local slopes at each row of ``X``, in the units of the columns.

        Parameters
        ----------
        X : array-like of shape (m, n_features)

        Returns
        -------
        ndarray of shape (m, n_features)
            ``d yhat / d x_j`` of the local line at each query (zero where the local
            design was singular and the fit fell back to the weighted mean, and in the
            columns of ``ignored_features_``).
        """
        X = check_predict_data(self, X)
        slopes = self._local_fit(X)[0].slopes
        if slopes.shape[1] == X.shape[1]:
            return slopes
        full = np.zeros((X.shape[0], X.shape[1]))
        full[:, self._columns] = slopes
        return full


# One parameter section for both smoothers, kept in one place.
NadarayaWatsonRegressor.__doc__ += _PARAMS_DOC
LocalLinearRegressor.__doc__ += _PARAMS_DOC
