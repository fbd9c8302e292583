"""Argument checks at the entry of every diagnostics function.

Each raises a ``ValueError`` or ``TypeError`` naming the parameter, what was expected and
what was received, before any internal call can fail with an ``AttributeError``,
``IndexError`` or a numpy / pandas message.
"""

from __future__ import annotations

import numbers

import numpy as np
from sklearn.base import BaseEstimator
from sklearn.exceptions import NotFittedError
from sklearn.utils.validation import check_is_fitted

from hedgerow.estimators import (
    HonestForestRegressor,
    LocalLinearForestRegressor,
    LocalLinearRegressor,
    NadarayaWatsonRegressor,
)

__all__ = ["FORESTS", "SMOOTHERS", "check_count", "check_model", "check_models",
           "check_rows", "check_values"]

FORESTS = (HonestForestRegressor, LocalLinearForestRegressor)
SMOOTHERS = (NadarayaWatsonRegressor, LocalLinearRegressor)


def _names(kinds) -> str:
    return " or ".join(k.__name__ for k in kinds)


def check_model(model, name: str = "model", kinds=FORESTS + SMOOTHERS):
    """Return ``model`` after checking it is a fitted instance of one of ``kinds``.

    ``kinds=None`` accepts any fitted estimator with ``predict``.
    """
    if isinstance(model, type):
        raise TypeError(
            f"The {name!r} parameter must be a fitted estimator instance, not a class. "
            f"Got the class {model.__name__} instead (call {model.__name__}().fit(X, y))."
        )
    if kinds is not None and not isinstance(model, kinds):
        raise TypeError(
            f"The {name!r} parameter must be a fitted {_names(kinds)}. "
            f"Got {type(model).__name__} instead."
        )
    if kinds is None and not hasattr(model, "predict"):
        raise TypeError(
            f"The {name!r} parameter must be a fitted estimator with a predict method. "
            f"Got {type(model).__name__} instead."
        )
    try:
        if isinstance(model, BaseEstimator):
            check_is_fitted(model)
        elif not hasattr(model, "n_features_in_"):  # a view of a fitted model (duck type)
            raise NotFittedError(name)
    except NotFittedError as err:
        raise NotFittedError(
            f"The {name!r} parameter must be a fitted estimator: this "
            f"{type(model).__name__} is not fitted yet. Call its fit(X, y) first."
        ) from err
    return model


def check_models(models, name: str = "models", kinds=FORESTS + SMOOTHERS) -> list:
    """Return ``[(label, model), ...]`` from one model, a list or a dict, all fitted."""
    from hedgerow.diagnostics._slices import method_label

    if isinstance(models, dict):
        pairs = list(models.items())
    elif hasattr(models, "predict") or isinstance(models, type):
        pairs = [(None, models)]
    elif isinstance(models, list | tuple):
        pairs = [(None, m) for m in models]
    else:
        raise TypeError(
            f"The {name!r} parameter must be a fitted model, a list of them or a dict "
            f"name -> model. Got {type(models).__name__} instead."
        )
    if not pairs:
        raise ValueError(
            f"The {name!r} parameter must hold at least one fitted model. Got an empty "
            f"{type(models).__name__} instead."
        )
    out = []
    for i, (label, model) in enumerate(pairs):
        where = f"{name}[{label!r}]" if label is not None else (
            name if len(pairs) == 1 else f"{name}[{i}]")
        check_model(model, where, kinds)
        out.append((method_label(model) if label is None else label, model))
    return out


def check_rows(name: str, X, *, n_features: int, n_rows: int | None = None) -> np.ndarray:
    """Return ``X`` as a finite (n_rows, n_features) float array, or raise naming it."""
    if hasattr(X, "to_numpy"):
        X = X.to_numpy()
    try:
        arr = np.asarray(X, dtype=np.float64)
    except (TypeError, ValueError) as err:
        raise TypeError(
            f"The {name!r} parameter must be a numeric 2-d array. Got {type(X).__name__} "
            f"with non-numeric values instead."
        ) from err
    if arr.ndim != 2 or arr.shape[1] != n_features or (
        n_rows is not None and arr.shape[0] != n_rows
    ):
        rows = f"{n_rows}" if n_rows is not None else "n"
        raise ValueError(
            f"The {name!r} parameter must have shape ({rows}, {n_features}) (one column "
            f"per column the model was fitted on). Got shape {arr.shape} instead."
        )
    if arr.shape[0] == 0:
        raise ValueError(f"The {name!r} parameter must hold at least one row. Got none.")
    if not np.all(np.isfinite(arr)):
        raise ValueError(f"The {name!r} parameter must hold finite values only (no NaN/inf).")
    return arr


def check_values(name: str, values) -> np.ndarray:
    """Return ``values`` as a 1-d float array; strings and other non-numbers are refused."""
    flat = np.asarray(values, dtype=object).ravel()
    for v in flat:
        if isinstance(v, bool | np.bool_) or not isinstance(v, numbers.Real):
            raise TypeError(
                f"The {name!r} parameter must hold numbers. Got the value {v!r} "
                f"({type(v).__name__}) instead."
            )
    return np.asarray(flat.tolist(), dtype=np.float64)


def check_count(name: str, value, minimum: int = 1) -> int:
    """Return ``value`` as an int after checking it is an integer >= ``minimum``."""
    if isinstance(value, bool | np.bool_) or not isinstance(value, numbers.Integral) or (
        value < minimum
    ):
        raise ValueError(
            f"The {name!r} parameter must be an integer >= {minimum}. Got {value!r} instead."
        )
    return int(value)
