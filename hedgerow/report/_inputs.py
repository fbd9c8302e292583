"""Input checks of a report: data, flags, the model, the probe; all before any fit.

The data go through ``hedgerow._validation.check_fit_data`` (the estimators' own check);
the report adds what a whole-table review needs to say more clearly: every non-numeric
column at once, the target's name, the columns holding missing values, and a row minimum.
"""

from __future__ import annotations

from collections.abc import Mapping
from types import SimpleNamespace

import numpy as np
import pandas as pd
from sklearn.base import BaseEstimator

from hedgerow._validation import check_fit_data, column_names
from hedgerow.report._content import MIN_ROWS

__all__ = ["check_flag", "check_report_data", "data_fingerprint", "resolve_model",
           "probe_input", "TableColumns"]


def check_flag(name, value) -> bool:
    """Return ``value`` as a bool, or raise naming the parameter."""
    if not isinstance(value, bool | np.bool_):
        raise TypeError(f"The {name!r} parameter must be True or False. Got {value!r} instead.")
    return bool(value)


class TableColumns(BaseEstimator):
    """Stands in for a fitted model where only the columns matter (checks before a fit).

    ``check_fit_data`` records ``n_features_in_`` and, for named columns,
    ``feature_names_in_`` on it, exactly as on an estimator, so ``resolve_feature`` and
    ``check_probe_point`` can check a column or a probe before anything is fitted.
    """


def _target_name(y) -> str:
    return str(y.name) if isinstance(y, pd.Series) and y.name is not None else "y"


def _refuse_non_numeric(X, y, target):
    """Raise listing every non-numeric column of X, or naming the target, if any."""
    if isinstance(X, pd.DataFrame):
        bad = [str(c) for c in X.columns if not pd.api.types.is_numeric_dtype(X[c])]
        if bad:
            raise ValueError(f"X must hold numbers only; non-numeric columns: {bad}.")
    if isinstance(y, pd.Series) and not pd.api.types.is_numeric_dtype(y):
        raise ValueError(f"y ({target!r}) must hold numbers only. Got dtype {y.dtype} "
                         f"instead.")


def _missing_values_error(X, y):
    """Return a ValueError naming the columns with missing or infinite values, or None."""
    try:
        Xa = np.asarray(X, dtype=np.float64)
        ya = np.asarray(y, dtype=np.float64)
    except (TypeError, ValueError):
        return None
    if Xa.ndim == 2:
        bad = ~np.isfinite(Xa).all(axis=0)
        if bad.any():
            named = np.asarray(X.columns, dtype=object) if isinstance(X, pd.DataFrame) else None
            table = SimpleNamespace(n_features_in_=Xa.shape[1], feature_names_in_=named)
            cols = [column_names(table)[j] for j in np.flatnonzero(bad)]
            return ValueError(f"X must be finite: missing or infinite values (columns "
                              f"{cols}). Drop or fill those rows first.")
    if ya.size and not np.isfinite(ya).all():
        return ValueError("y must be finite: missing or infinite values. Drop or fill "
                          "those rows first.")
    return None


def check_report_data(X, y):
    """Return ``(X, y, columns, target, stand_in)`` checked for a report, or raise.

    ``X, y`` come back as float64 arrays, ``columns`` as names (``x0, x1, ...`` for an
    array), ``stand_in`` a :class:`TableColumns` holding them. Messages name X, y or the
    column at fault.
    """
    target = _target_name(y)
    _refuse_non_numeric(X, y, target)
    if np.ndim(X) == 2 and np.shape(X)[1] == 0:
        raise ValueError("X must have at least one column. Got none.")
    stand_in = TableColumns()
    try:
        Xa, ya = check_fit_data(stand_in, X, y, min_samples=1)
    except ValueError as err:
        clearer = _missing_values_error(X, y)
        if clearer is None:
            raise
        raise clearer from err
    if Xa.shape[0] < MIN_ROWS:
        raise ValueError(f"A report needs at least {MIN_ROWS} rows. Got {Xa.shape[0]} "
                         f"instead.")
    return Xa, ya, column_names(stand_in), target, stand_in


def data_fingerprint(X, y) -> str:
    """Return the data fingerprint a report shows for ``(X, y)`` (16 hex digits).

    The first 16 hex digits of ``hedgerow.snapshot.DataFingerprint``'s SHA-256 (shape and
    float64 values of X and y): one changed value or row order changes it; the column
    and target names are shown beside it, not hashed, exactly as a snapshot keeps them.
    """
    from hedgerow.snapshot import DataFingerprint

    return DataFingerprint.from_data(X, y).sha256[:16]


def _is_fitted(model) -> bool:
    return hasattr(model, "forest_") or hasattr(model, "X_train_")


def resolve_model(model, X, y, Xa, random_state, on_trees):
    """Return the fitted local linear forest the report is about, or raise naming 'model'.

    None: a default forest seeded with ``random_state``; a forest fitted on ``X`` is used
    as it is; an unfitted one is cloned and the clone fitted (``on_trees(done, total)``
    follows the tree growth), so the caller's object stays unfitted.
    """
    from sklearn.base import clone

    from hedgerow.estimators import LocalLinearForestRegressor

    if model is None:
        model = LocalLinearForestRegressor(random_state=random_state)
    if not isinstance(model, LocalLinearForestRegressor):
        raise TypeError(
            f"The 'model' parameter must be a LocalLinearForestRegressor (fitted on X, y, "
            f"or unfitted) or None. Got {type(model).__name__} instead."
        )
    if _is_fitted(model):
        if model.X_train_.shape != Xa.shape or not np.array_equal(model.X_train_, Xa):
            raise ValueError(
                f"The 'model' parameter was fitted on other data ({model.X_train_.shape[0]} "
                f"rows x {model.X_train_.shape[1]} columns); pass the X and y it was fitted "
                f"on, or an unfitted model. Got X of shape {Xa.shape}."
            )
        names = getattr(model, "feature_names_in_", None)
        if names is not None and isinstance(X, pd.DataFrame) and [str(c) for c in names] != [
                str(c) for c in X.columns]:
            raise ValueError(
                f"The 'model' parameter was fitted on columns {[str(c) for c in names]}; "
                f"X has columns {[str(c) for c in X.columns]}. Pass the X it was fitted on."
            )
        return model
    total = max(int(model.n_estimators), 1)
    return clone(model).fit(X, y, progress=lambda done: on_trees(done, total))


def probe_input(probe, columns, anchor):
    """Return ``probe`` in a form ``check_probe_point`` takes (a dict becomes a Series)."""
    if isinstance(probe, Mapping):
        unknown = [k for k in probe if str(k) not in columns]
        if unknown:
            raise ValueError(f"The 'probe' parameter names unknown columns {unknown}; "
                             f"known columns are {list(columns)}.")
        base = pd.Series(anchor, index=list(columns))
        for k, v in probe.items():
            base[str(k)] = v
        return base
    if isinstance(probe, pd.Series):
        return probe.rename(index=str)
    return probe
