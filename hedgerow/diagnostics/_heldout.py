"""Held-out predictions of the training rows, whatever the method; cross-fitting folds."""

from __future__ import annotations

import warnings

import numpy as np

__all__ = ["held_out_predictions", "edge_depth", "fold_assignment", "same_rows",
           "take_rows", "cross_fit_fold"]


def held_out_predictions(model) -> np.ndarray:
    """Return out-of-bag (forests) or leave-one-out (kernel smoothers) predictions.

    Forests: ``oob_predict()`` (trees that did not draw the row). Kernel smoothers:
    ``loo_predict()`` (the hat-matrix diagonal, no refits). scikit-learn's random forest
    fitted with ``oob_score=True``: ``oob_prediction_``.
    """
    if hasattr(model, "oob_predict"):
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", RuntimeWarning)
            return np.asarray(model.oob_predict(), dtype=np.float64)
    if hasattr(model, "loo_predict"):
        return np.asarray(model.loo_predict(), dtype=np.float64)
    if hasattr(model, "oob_prediction_"):
        return np.asarray(model.oob_prediction_, dtype=np.float64).ravel()
    raise TypeError(
        f"The model must offer held-out predictions (oob_predict, loo_predict or "
        f"oob_prediction_). Got {type(model).__name__} instead."
    )


def edge_depth(X, columns=None) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Return ``(depth, column, side)`` of every row.

    The edge depth of row i in column j is its empirical-CDF distance to the nearer end
    of the data, min(F_j, 1 - F_j) with F_j = (rank - 1/2) / n (ties share their mean
    rank); a row's edge depth is the minimum over ``columns`` (default: all), ``column``
    the column attaining it and ``side`` -1 at the lower end, +1 at the upper end. Depth
    0.05 means 5% of the data lie beyond the row in that column.
    """
    from scipy.stats import rankdata

    X = np.asarray(X, dtype=np.float64)
    n = X.shape[0]
    cols = np.arange(X.shape[1]) if columns is None else np.asarray(columns, dtype=int)
    F = (rankdata(X[:, cols], axis=0) - 0.5) / n
    depth_all = np.minimum(F, 1.0 - F)
    pick = np.argmin(depth_all, axis=1)
    rows = np.arange(n)
    depth = depth_all[rows, pick]
    side = np.where(F[rows, pick] > 0.5, 1, -1)
    return depth, cols[pick], side


# -- cross-fitting ---------------------------------------------------------------------------
def fold_assignment(n: int, folds: int, random_state=0) -> np.ndarray:
    """Return the fold (0 .. folds-1) of each of ``n`` rows: a seeded shuffle, sizes within 1.

    The same assignment is used for every method of a comparison, so errors pair row by row.
    """
    rng = np.random.default_rng(random_state)
    fold = np.empty(n, dtype=np.int64)
    fold[rng.permutation(n)] = np.arange(n) % folds
    return fold


def same_rows(model, X, y) -> bool:
    """Return True when ``(X, y)`` are exactly the rows ``model`` was fitted on (fingerprint).

    The fingerprint is the training arrays themselves: same shape, same values in the same
    order (NaN never occurs in accepted training data).
    """
    Xt, yt = getattr(model, "X_train_", None), getattr(model, "y_train_", None)
    if Xt is None or yt is None:
        return False
    try:
        Xa = np.asarray(X, dtype=np.float64)
        ya = np.asarray(y, dtype=np.float64).ravel()
    except (TypeError, ValueError):
        return False
    return (Xa.shape == Xt.shape and ya.shape == yt.shape and np.array_equal(Xa, Xt)
            and np.array_equal(ya, yt))


def take_rows(X, rows):
    """Return rows ``rows`` of X, keeping a DataFrame a DataFrame (column names matter)."""
    if hasattr(X, "iloc"):
        return X.iloc[rows]
    return X[rows]


def cross_fit_fold(k, X, y, fold, specs, step=None, cache=None) -> dict:
    """Fit every method of ``specs`` on the rows outside fold ``k``; predict fold ``k``.

    ``specs``: ``(label, template, extra)``. ``extra`` is ``None``; a dict for the local
    linear forest (``{"penalty": λ or None}``: predict at λ, and also return its local
    average under ``"_local_average <label>"``); or ``"local average of <label>"`` (reuse
    that method's local average instead of a fit). Returns ``{"rows": held-out row indices,
    label: predictions, "correction_features": ..., "ridge_penalty": ...}``. Each template is
    cloned, so every choice it makes (penalty, columns, bandwidth) is made on the training
    rows of the fold alone. ``step()`` is called between methods (the caller counts the last
    step once it holds the result, so a stop there loses nothing). ``cache``: a dict keyed
    by (fold, label, settings) holding fitted models, so a later call that changes only the
    penalty a forest is viewed at refits nothing.
    """
    from sklearn.base import clone

    train, test = np.flatnonzero(fold != k), np.flatnonzero(fold == k)
    Xtr, ytr, Xte = take_rows(X, train), y[train], take_rows(X, test)
    out = {"rows": test}
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", RuntimeWarning)
        warnings.filterwarnings("ignore", message="X does not have valid feature names")
        for label, template, extra in specs:
            if isinstance(extra, str):
                out[label] = out[f"_local_average {extra[len('local average of '):]}"]
            else:
                key = (k, label, repr(template.get_params(deep=True)))
                model = None if cache is None else cache.get(key)
                if model is None:
                    model = clone(template).fit(Xtr, ytr)
                    if cache is not None:
                        cache[key] = model
                if isinstance(extra, dict):
                    lam = extra.get("penalty")
                    pred = (model.predict(Xte) if lam is None
                            else model.predict(Xte, ridge_penalty=lam))
                    out[f"_local_average {label}"] = np.asarray(
                        model.local_average(Xte), dtype=np.float64)
                    out["correction_features"] = np.asarray(model.correction_features_)
                    out["ridge_penalty"] = float(model.ridge_penalty_ if lam is None else lam)
                else:
                    pred = model.predict(Xte)
                out[label] = np.asarray(pred, dtype=np.float64).ravel()
            if step is not None and label != specs[-1][0]:
                step()
    return out
