"""Held-out predictions of the training rows, whatever the method."""

from __future__ import annotations

import warnings

import numpy as np

__all__ = ["held_out_predictions", "edge_depth"]


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
