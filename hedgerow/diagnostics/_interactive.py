"""Small pieces the interactive views need, kept here so the widgets compute nothing.

Each function is cheap enough to run on every probe move or slider step: none refits.
"""

from __future__ import annotations

import warnings
import weakref

import numpy as np
import pandas as pd

from hedgerow._validation import check_level
from hedgerow.diagnostics._probe import column_summary, rows_with_weight
from hedgerow.diagnostics._report import has_little_bags
from hedgerow.diagnostics._slices import resolve_feature

__all__ = [
    "at_ridge_penalty",
    "has_little_bags",
    "local_average_model",
    "local_line",
    "oob_summary",
    "probe_anchor",
    "probe_readout",
    "ridge_curve",
    "slice_grid",
    "weight_profile",
]


def at_ridge_penalty(model, ridge_penalty):
    """Return ``model.with_ridge_penalty(ridge_penalty)``: the same trees at that penalty.

    The view shares the trees and the cached weighted moments with ``model`` (nothing is
    refitted or copied in depth), so every diagnostic run on it re-solves only the small
    local systems. ``model`` itself is left unchanged.
    """
    return model.with_ridge_penalty(ridge_penalty)


class _LocalAverage:
    """A fitted forest seen through its local average (the honest forest on its trees)."""

    def __init__(self, model):
        self._model = model
        self.n_features_in_ = model.n_features_in_
        self.X_train_ = model.X_train_
        self.y_train_ = model.y_train_
        self.trees_per_bag_ = model.trees_per_bag_
        names = getattr(model, "feature_names_in_", None)
        if names is not None:
            self.feature_names_in_ = names

    def predict(self, X, return_std=False):
        return self._model.local_average(X, return_std=return_std)

    def oob_predict(self, return_std=False):
        return self._model.oob_local_average(return_std=return_std)


def local_average_model(model):
    """Return an object whose ``predict`` / ``oob_predict`` are ``model``'s local average.

    For a local linear forest this is the honest forest on the same trees and weights,
    usable wherever a fitted model is expected (``slices``, ``edges``).
    """
    return _LocalAverage(model)


def probe_anchor(X, row=None) -> np.ndarray:
    """Return the probe's starting point: the column medians of X, or row ``row`` of X."""
    X = np.asarray(X, dtype=np.float64)
    if row is None:
        return np.median(X, axis=0)
    if isinstance(row, bool) or not isinstance(row, int | np.integer) or not (
        0 <= int(row) < X.shape[0]
    ):
        raise ValueError(
            f"The 'row' parameter must be None or a row index in [0, {X.shape[0]}). "
            f"Got {row!r} instead."
        )
    return X[int(row)].copy()


def slice_grid(model, feature, size: int = 80) -> np.ndarray:
    """Return ``size`` evenly spaced values spanning the training range of ``feature``."""
    j = resolve_feature(model, feature)
    # the span kept from the fit (or once per training array): no pass over the rows
    _, lo, hi = column_summary(model)
    return np.linspace(float(lo[j]), float(hi[j]), int(size))


def neighbourhood_span(report, X_train, feature, share=0.8):
    """Return ``(low, high)``: where the probe's neighbours lie along ``feature``.

    The weighted ``(1 - share) / 2`` and ``(1 + share) / 2`` quantiles of the column over
    the training rows, weighted by the probe's forest weights (``report.weights``): the
    stretch the local line is fitted on. The probe's own value is always inside.
    """
    names = list(report.feature_names)
    j = names.index(feature) if isinstance(feature, str) else int(feature)
    # the rows with weight only, in row order (the dense mask's order): no pass over n
    idx, w = rows_with_weight(report.weights)
    keep = w > 0
    idx, w = idx[keep], w[keep]
    x0 = float(report.x[j])
    if not idx.size:
        return x0, x0
    col = np.asarray(X_train, dtype=np.float64)[idx, j]
    order = np.argsort(col, kind="stable")
    c, cw = col[order], np.cumsum(w[order])
    cw = cw / cw[-1]
    lo = float(c[min(np.searchsorted(cw, (1 - share) / 2), c.size - 1)])
    hi = float(c[min(np.searchsorted(cw, (1 + share) / 2), c.size - 1)])
    return min(lo, x0), max(hi, x0)


def local_line(report, feature, span, *, method="local linear forest", within=None):
    """Return ``(xs, ys)``: the two ends of the local line of ``method`` along ``feature``.

    The segment passes through the method's prediction at the probe with its local slope
    in that column, ``span`` (column units) to either side, or over ``within`` =
    ``(low, high)`` when given (for example ``neighbourhood_span``: the line is drawn where
    it was fitted, not past the data). A column outside the local line's columns, or a
    method without slopes, has slope 0 there.
    """
    names = list(report.feature_names)
    j = names.index(feature) if isinstance(feature, str) else int(feature)
    m = report.method(method)
    cols = [int(c) for c in np.asarray(report.slope_columns)]
    slope = float(m.slopes[cols.index(j)]) if j in cols else 0.0
    if not np.isfinite(slope):
        slope = 0.0
    x0 = float(report.x[j])
    if within is not None:
        lo, hi = (float(v) for v in within)
        xs = np.array([min(lo, x0), max(hi, x0)])
    else:
        span = max(float(span), 1e-12)
        xs = np.array([x0 - span, x0 + span])
    ys = m.prediction + slope * (xs - x0)
    return xs, ys


def probe_readout(report) -> pd.DataFrame:
    """Return per method: prediction, interval half-width, lower, upper, effective n and
    columns used (a smoother's effective column count; NaN for the forests)."""
    rows = []
    for m in report.methods:
        half = (m.upper - m.lower) / 2 if np.isfinite(m.upper - m.lower) else np.nan
        rows.append({"method": m.name, "prediction": m.prediction, "half_width": half,
                     "lower": m.lower, "upper": m.upper, "ess": m.ess,
                     "columns_used": np.nan if m.columns_used is None else m.columns_used})
    return pd.DataFrame(rows).set_index("method")


def oob_summary(model, ridge_penalty=None, level: float = 0.95, *,
                interval_width: bool = True, method: str | None = None) -> dict:
    """Return out-of-bag RMSE, mean interval width and usable rows at one ridge penalty.

    The one out-of-bag summary: the tuning surface's cells, the tuning view, the
    snapshot headline and the report all read it. ``model`` is a fitted forest;
    ``ridge_penalty`` (local linear forests only; None: the penalty in use) is applied
    through ``with_ridge_penalty``. The width is that of the interval ``method``
    (``model.oob_interval_parts``; None: the default interval, ``DEFAULT_INTERVAL``,
    the one ``predict_interval`` gives; "clt" for today's), named under "interval".
    The RMSE is always the prediction's. ``interval_width=False`` skips the little-bags
    standard errors of every training row (the expensive part: one linearised term per
    row and tree) and reports the width as NaN, as does a forest without little bags; the
    interactive views show the RMSE at once and the width when it is ready.
    """
    from hedgerow.estimators._forest import DEFAULT_INTERVAL, check_interval_method

    level = check_level(level)
    method = check_interval_method(DEFAULT_INTERVAL if method is None else method)
    if hasattr(model, "with_ridge_penalty"):
        model = model.with_ridge_penalty(ridge_penalty)
    elif ridge_penalty is not None:
        raise ValueError(f"The 'ridge_penalty' parameter applies to local linear forests "
                         f"only. Got {ridge_penalty!r} for {type(model).__name__} instead.")
    width = float("nan")
    with np.errstate(invalid="ignore"), warnings.catch_warnings():
        # rows without an out-of-bag tree are counted in n_rows instead
        warnings.simplefilter("ignore", RuntimeWarning)
        mean = model.oob_predict()
        if interval_width and has_little_bags(model):
            lo, hi = model.oob_interval_parts(method).interval(level)
            width = float(np.nanmean(hi - lo))
    ok = np.isfinite(mean)
    rmse = float(np.sqrt(np.mean((mean[ok] - model.y_train_[ok]) ** 2)))
    lam = getattr(model, "ridge_penalty_", None)
    return {"ridge_penalty": None if lam is None else float(lam), "oob_rmse": rmse,
            "mean_width": width, "interval": method, "n_rows": int(ok.sum()),
            "level": level}


def ridge_curve(model, ridge_penalties) -> pd.DataFrame:
    """Return out-of-bag RMSE per ridge penalty (cached moments, no refit)."""
    lams = np.asarray(ridge_penalties, dtype=np.float64).ravel()
    return pd.DataFrame({"ridge_penalty": lams,
                         "oob_rmse": np.sqrt(model.ridge_path(lams))})


_DISTANCE_SCALES = weakref.WeakKeyDictionary()


def _distance_scale(X, cols):
    """Return the sds of ``X[:, cols]`` (1.0 where constant), once per array and columns.

    Computed on the column subset as before (a one-column copy sums pairwise, several
    columns row by row: the bits differ from a subset of every column's sd), and kept
    while ``X`` lives, so a probe move does not pass over the training rows.
    """
    key = tuple(int(c) for c in cols)
    try:
        memo = _DISTANCE_SCALES.setdefault(X, {})
    except TypeError:  # not weak-referenceable: computed each time
        memo = {}
    if key not in memo:
        sd = X[:, list(key)].std(axis=0)
        memo[key] = np.where(sd > 0, sd, 1.0)
    return memo[key]


def weight_profile(report, X, method, columns="line") -> pd.DataFrame:
    """Return the rows ``method`` weights at the probe, heaviest first.

    Columns: row, weight, distance (Euclidean, in training standard deviations, from the
    probe), rank (1 = heaviest) and cumulative (share of the weight held by the rows up
    to this rank). Shows how far the neighbourhood reaches and how concentrated it is.

    ``columns``: the columns the distance is measured in. "line" (default): the local
    line's columns (``report.slope_columns``; every column when it has none), since on
    wide data every row sits several standard deviations away in all columns and the
    distance shows little; "all"; or a list of column indices. The frame's
    ``attrs["distance_columns"]`` names them.
    """
    X = np.asarray(X, dtype=np.float64)
    names = list(report.feature_names)
    if isinstance(columns, str) and columns == "line":
        cols = [int(c) for c in np.asarray(report.slope_columns)] or list(range(X.shape[1]))
    elif isinstance(columns, str) and columns == "all":
        cols = list(range(X.shape[1]))
    else:
        try:
            cols = [int(c) for c in columns]
        except (TypeError, ValueError):
            raise ValueError(f"The 'columns' parameter must be 'line', 'all' or a list of "
                             f"column indices. Got {columns!r} instead.") from None
        bad = [c for c in cols if not 0 <= c < X.shape[1]]
        if not cols or bad:
            raise ValueError(f"The 'columns' parameter must list column indices in "
                             f"[0, {X.shape[1] - 1}]. Got {columns!r} instead.")
    w = report.method(method).weights.tocsr()
    idx, vals = w.indices, w.data
    keep = vals > 0
    idx, vals = idx[keep], vals[keep]
    order = np.argsort(-vals, kind="stable")
    idx, vals = idx[order], vals[order]
    sd = _distance_scale(X, cols)
    dist = np.sqrt((((X[idx][:, cols] - np.asarray(report.x)[cols]) / sd) ** 2).sum(axis=1))
    total = vals.sum()
    cum = np.cumsum(vals) / total if total > 0 else np.zeros_like(vals)
    out = pd.DataFrame({"row": idx, "weight": vals, "distance": dist,
                        "rank": np.arange(1, idx.size + 1), "cumulative": cum})
    out.attrs["distance_columns"] = [names[c] for c in cols]
    return out
