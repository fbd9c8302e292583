"""Input checks shared by every entry point.

Built on scikit-learn's validation utilities so that messages and behaviour match what
users of scikit-learn estimators already know: the parameter or column is named, with
what was expected and ``Got ...`` for what was received.
"""

from __future__ import annotations

import numbers

import numpy as np
import pandas as pd
from sklearn.utils._param_validation import (
    Interval,
    InvalidParameterError,
    validate_parameter_constraints,
)
from sklearn.utils.validation import _num_samples, check_is_fitted, validate_data

__all__ = [
    "check_fit_data",
    "check_predict_data",
    "check_level",
    "check_ridge_penalty",
    "CheckedRows",
    "checked_rows",
    "fitted_columns",
    "column_names",
    "validate_params",
    "as_float_array_1d",
    "preserve_fitted_state",
]


def validate_params(estimator) -> None:
    """Check ``estimator.get_params()`` against its ``_parameter_constraints`` table.

    Raises ``ValueError``/``TypeError`` naming the parameter, the allowed values and the
    value received. A bool is refused where an integer is expected (scikit-learn's
    ``Interval(Integral, ...)`` lets ``True`` through as 1).
    """
    params = estimator.get_params(deep=False)
    caller = type(estimator).__name__
    for name, constraints in estimator._parameter_constraints.items():
        value = params.get(name)
        if (
            isinstance(value, (bool, np.bool_))
            and "boolean" not in constraints
            and any(
                c is numbers.Integral
                or (isinstance(c, Interval) and c.type is numbers.Integral)
                for c in constraints
            )
        ):
            raise InvalidParameterError(
                f"The {name!r} parameter of {caller} must be an int, not a bool. "
                f"Got {value!r} instead."
            )
    validate_parameter_constraints(
        estimator._parameter_constraints, params, caller_name=caller
    )


def _first_non_numeric(values):
    """Return the first entry of ``values`` that float() refuses, or None."""
    for v in np.asarray(values, dtype=object).ravel():
        try:
            float(v)
        except (TypeError, ValueError):
            return v
    return None


def _non_numeric_error(X, y):
    """Return a ValueError naming the input (and column) that holds non-numeric values."""
    for name, value in (("X", X), ("y", y)):
        if value is None:
            continue
        columns = getattr(value, "columns", None)
        parts = [(col, value[col]) for col in columns] if columns is not None else [
            (None, value)
        ]
        for col, part in parts:
            bad = _first_non_numeric(part)
            if bad is None:
                continue
            where = f"Column {col!r} of {name}" if col is not None else name
            return ValueError(
                f"{where} must hold numbers only. Got the non-numeric value {bad!r} "
                f"instead."
            )
    return None


def _check_2d(X):
    """Raise naming X if it is an array with more than two dimensions."""
    ndim = getattr(X, "ndim", None)
    if ndim is None and isinstance(X, (list, tuple)):
        try:
            ndim = np.ndim(X)
        except ValueError:  # ragged nesting: left to scikit-learn's message
            ndim = None
    if ndim is not None and ndim > 2:
        raise ValueError(
            f"X must be 2-dimensional (n_samples, n_features). Got an array with "
            f"{ndim} dimensions, of shape {np.shape(X)}, instead."
        )


def _check_no_dates(X, y=None):
    """Raise naming the column if X (or y) holds dates, times or durations."""
    for name, value in (("X", X), ("y", y)):
        if value is None:
            continue
        if isinstance(value, pd.DataFrame):
            pairs = list(value.dtypes.items())
        else:  # a Series' dtypes is one dtype (pandas' own string dtype has no items)
            dtype = getattr(value, "dtype", None)
            pairs = [] if dtype is None else [(None, dtype)]
        for col, dtype in pairs:
            kind = getattr(dtype, "kind", "")
            if (kind and kind in "mM") or isinstance(dtype, pd.PeriodDtype | pd.DatetimeTZDtype):
                where = f"Column {col!r} of {name}" if col is not None else name
                raise ValueError(
                    f"{where} must hold numbers. Got dates or times (dtype {dtype}) "
                    f"instead; convert them to numbers first (for example days since a "
                    f"reference date) or leave the column out."
                )


def _validate(estimator, X, y=None, **kwargs):
    """``validate_data`` with messages that name X or y for non-numeric input."""
    _check_2d(X)
    _check_no_dates(X, y)
    try:
        # scikit-learn's finiteness check sums X first: columns near the largest float
        # overflow that sum (a RuntimeWarning) before the element-wise check decides
        with np.errstate(over="ignore", invalid="ignore"):
            if y is None:
                return validate_data(estimator, X, **kwargs)
            return validate_data(estimator, X, y, **kwargs)
    except ValueError as err:
        if "could not convert" not in str(err):
            raise
        clearer = _non_numeric_error(X, y)
        if clearer is None:
            raise
        raise clearer from err


def check_fit_data(estimator, X, y, *, min_samples: int = 2):
    """Return ``(X, y)`` as float64 arrays after checking them for fitting.

    Sets ``n_features_in_`` and, for named columns, ``feature_names_in_`` on the
    estimator (scikit-learn convention). Rejects NaN/inf, strings, wrong shapes, fewer
    than ``min_samples`` rows and a ``y`` whose length differs from ``X``'s.
    """
    if y is None:
        raise ValueError(
            f"{type(estimator).__name__} requires y to be passed, but the target y is None."
        )
    try:
        n_X, n_y = _num_samples(X), _num_samples(y)
    except TypeError:  # not array-like: left to validate_data's message
        n_X = n_y = None
    if n_X is not None and n_X != n_y:
        raise ValueError(
            f"y must have one value per row of X ({n_X} rows). Got {n_y} values instead."
        )
    X, y = _validate(
        estimator,
        X,
        y,
        reset=True,
        dtype=np.float64,
        ensure_min_samples=min_samples,
        y_numeric=True,
        multi_output=False,
    )
    try:
        # validate_data converts an object y only; a string dtype gets here unconverted
        y = np.ascontiguousarray(y, dtype=np.float64)
    except ValueError as err:
        raise (_non_numeric_error(None, y) or err) from err
    return np.ascontiguousarray(X), y


def check_predict_data(estimator, X):
    """Return ``X`` as a float64 array checked against the fitted estimator.

    Checks the estimator is fitted, that ``X`` has ``n_features_in_`` columns and, for
    named columns, the same names in the same order as at fit time.
    """
    check_is_fitted(estimator)
    fast = _fast_predict_data(estimator, X)
    if fast is not None:
        return fast
    X = _validate(estimator, X, reset=False, dtype=np.float64)
    return np.ascontiguousarray(X)


def _fast_predict_data(estimator, X):
    """The common well-formed inputs without scikit-learn's general machinery, or None.

    A probe asks a dozen predictions per move, where the general checks cost more than
    the arithmetic. Only inputs that those checks would pass unchanged take this path: a
    finite float64 2-d array for an estimator fitted without column names, or a float64
    DataFrame with exactly the fitted column names in order. Anything else (other dtypes,
    NaN, other names, a plain array for a named fit, which warns) goes the general way.
    """
    n_features = getattr(estimator, "n_features_in_", None)
    names = getattr(estimator, "feature_names_in_", None)
    if isinstance(X, CheckedRows):
        # checked once where it was made, against these very columns: no second pass
        if X.columns == fitted_columns(estimator):
            return np.asarray(X)
        return None
    if isinstance(X, np.ndarray):
        if names is not None or X.dtype != np.float64 or X.ndim != 2:
            return None
        A = X
    elif isinstance(X, pd.DataFrame):
        if names is None or X.shape[1] != len(names):
            return None
        cols = X.columns
        if not all(isinstance(c, str) for c in cols) or list(cols) != list(names):
            return None
        if not all(dt == np.float64 for dt in X.dtypes):
            return None
        A = X.to_numpy(dtype=np.float64)
    else:
        return None
    if A.shape[1] != n_features or A.shape[0] < 1 or not np.isfinite(A).all():
        return None
    return np.ascontiguousarray(A)


def fitted_columns(estimator) -> tuple:
    """Return ``(n_features_in_, column names or None)`` of a fitted estimator."""
    names = getattr(estimator, "feature_names_in_", None)
    return (int(estimator.n_features_in_),
            None if names is None else tuple(str(n) for n in names))


def column_names(estimator) -> tuple:
    """Return the fitted column names, or ``x0, x1, ...`` for columns fitted unnamed.

    The one place the default names of unnamed columns are made (reports, snapshots,
    views and ``resolve_feature`` all read them from here).
    """
    names = getattr(estimator, "feature_names_in_", None)
    if names is not None:
        return tuple(str(n) for n in names)
    return tuple(f"x{j}" for j in range(int(estimator.n_features_in_)))


class CheckedRows(np.ndarray):
    """Query rows checked once against a fitted estimator's columns (``checked_rows``).

    A float64, C-contiguous, finite 2-d array whose columns are in the fitted order.
    Every estimator fitted on the same columns (the same count and names) takes it as
    it is, without checking it again and without the feature-name warning a plain array
    gets from a model fitted on a DataFrame: a probe point goes from the view to the
    weights as one validated array. Arrays derived from it (slices, arithmetic) are
    not marked and are checked as usual.
    """

    columns = None  # (n_features, names or None) it was checked against


def checked_rows(values, estimator, what: str = "X") -> CheckedRows:
    """Return ``values`` (rows in the fitted column order) checked and marked as such.

    ``values`` is an array-like of shape (m, d) or (d,), d = ``n_features_in_`` of the
    fitted ``estimator``; the values must be finite numbers. ``what`` names the input in
    the error message.
    """
    if not hasattr(estimator, "n_features_in_"):
        check_is_fitted(estimator)  # the usual "not fitted yet" error
    try:
        A = np.array(values, dtype=np.float64, order="C", ndmin=2)
    except (TypeError, ValueError) as exc:
        raise ValueError(f"The '{what}' parameter must hold numbers only. Got {values!r} "
                         f"instead.") from exc
    d = int(estimator.n_features_in_)
    if A.ndim != 2 or A.shape[1] != d or A.shape[0] < 1:
        raise ValueError(f"The '{what}' parameter must have {d} values per row (one per "
                         f"column). Got an array of shape {np.shape(values)} instead.")
    if not np.all(np.isfinite(A)):
        raise ValueError(f"The '{what}' parameter must be finite. Got {values!r} instead.")
    out = A.view(CheckedRows)
    out.columns = fitted_columns(estimator)
    return out


def check_level(level) -> float:
    """Return ``level`` as a float after checking it lies strictly between 0 and 1."""
    if (
        isinstance(level, bool)
        or not isinstance(level, numbers.Real)
        or not np.isfinite(level)
        or not 0.0 < float(level) < 1.0
    ):
        raise ValueError(
            f"The 'level' parameter must be a float in the open interval (0, 1), "
            f"for example 0.95. Got {level!r} instead."
        )
    return float(level)


def check_ridge_penalty(value, *, allow_auto: bool = False):
    """Return the ridge penalty ``value`` as a float >= 0 (or ``"auto"`` if allowed).

    The one check of a ridge penalty, wherever it arrives: the estimator parameter, the
    per-call ``ridge_penalty=`` argument, the solver, the session trait and snapshots.
    """
    if allow_auto and isinstance(value, str) and value == "auto":
        return value
    ok = (not isinstance(value, bool | np.bool_) and isinstance(value, numbers.Real)
          and np.isfinite(value) and float(value) >= 0.0)
    if not ok:
        expected = "'auto' or a finite float >= 0" if allow_auto else "a finite float >= 0"
        raise ValueError(
            f"The 'ridge_penalty' parameter must be {expected}. Got {value!r} instead."
        )
    return float(value)


def as_float_array_1d(name: str, value, length: int | None = None) -> np.ndarray:
    """Return ``value`` as a finite 1-d float array, checking its length if given."""
    arr = np.atleast_1d(np.asarray(value, dtype=np.float64))
    if arr.ndim != 1:
        raise ValueError(f"The '{name}' parameter must be 1-dimensional. Got shape {arr.shape}.")
    if length is not None and arr.shape[0] != length:
        raise ValueError(
            f"The '{name}' parameter must have {length} entries (one per column). "
            f"Got {arr.shape[0]} instead."
        )
    if not np.all(np.isfinite(arr)):
        raise ValueError(f"The '{name}' parameter must be finite. Got {value!r} instead.")
    return arr


class preserve_fitted_state:
    """Context manager: on an exception, restore the estimator's fitted attributes.

    scikit-learn's ``validate_data(reset=True)`` writes ``n_features_in_`` and
    ``feature_names_in_`` before later checks can fail; this undoes such partial writes so
    that a failed ``fit`` leaves an earlier fitted model exactly as it was.
    """

    def __init__(self, estimator):
        self.estimator = estimator

    def __enter__(self):
        self._saved = dict(vars(self.estimator))
        return self

    def __exit__(self, exc_type, exc, tb):
        if exc_type is not None:
            state = vars(self.estimator)
            state.clear()
            state.update(self._saved)
        return False
