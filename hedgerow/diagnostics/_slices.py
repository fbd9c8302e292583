"""Each method's prediction along one column, the others held at the probe."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd

from hedgerow._validation import checked_rows, column_names
from hedgerow.diagnostics._report import (
    MethodRows,
    ReportMixin,
    check_probe_point,
    has_little_bags,
)
from hedgerow.inference import normal_interval

__all__ = ["SliceReport", "slices", "method_label", "resolve_feature"]

_LABELS = {
    "LocalLinearForestRegressor": "local linear forest",
    "HonestForestRegressor": "honest forest",
    "NadarayaWatsonRegressor": "Nadaraya-Watson",
    "LocalLinearRegressor": "local linear (kernel)",
}


def method_label(model) -> str:
    """Return the display name of a fitted model."""
    return _LABELS.get(type(model).__name__, type(model).__name__)


def resolve_feature(model, feature) -> int:
    """Return the column index of ``feature`` (an index or a fitted column name)."""
    names = getattr(model, "feature_names_in_", None)
    d = model.n_features_in_
    if isinstance(feature, str):
        if names is None and feature in column_names(model):
            # the default names reports give to unnamed columns
            return int(feature[1:])
        if names is None or feature not in list(names):
            known = (list(names) if names is not None
                     else f"indices 0..{d - 1} or names x0..x{d - 1}")
            raise ValueError(
                f"The 'feature' parameter must name a column the model was fitted on "
                f"({known}). Got {feature!r} instead."
            )
        return int(list(names).index(feature))
    if isinstance(feature, int | np.integer) and not isinstance(feature, bool):
        if 0 <= int(feature) < d:
            return int(feature)
    raise ValueError(
        f"The 'feature' parameter must be a column index in [0, {d}) or a column name. "
        f"Got {feature!r} instead."
    )


@dataclass(frozen=True)
class SliceReport(MethodRows, ReportMixin):
    """Predictions along one column for several methods (long format in ``frame``).

    ``frame`` columns: method, value (the grid), prediction, lower, upper. In the
    averaged variant (``average=True``) prediction is the partial dependence, the mean
    prediction over the background rows with the column set to the grid value, and
    lower/upper are NaN: pointwise intervals do not average into an interval for the mean.
    """

    feature: str
    feature_index: int
    x: np.ndarray
    average: bool
    level: float
    frame: pd.DataFrame
    _title = "slices"

    def to_frame(self) -> pd.DataFrame:
        return self.frame.copy()




def slices(models, x, feature, grid, *, average=False, background=None, level=0.95,
           max_background=200, random_state=0) -> SliceReport:
    """Return each model's prediction along ``feature`` with the other columns at ``x``.

    Parameters
    ----------
    models : a fitted model, a list of them or a dict name -> model (same columns).
    x : probe point (length d). feature : column index or name. grid : 1-d values.
    average : if True, the partial-dependence variant over ``background`` rows (default:
        up to ``max_background`` training rows of the first model).
    level : interval level.
    """
    from hedgerow._validation import check_level
    from hedgerow.diagnostics._checks import check_models, check_rows, check_values

    pairs = check_models(models, "models", kinds=None)
    first = pairs[0][1]
    d = first.n_features_in_
    for name, model in pairs[1:]:
        if model.n_features_in_ != d:
            raise ValueError(
                f"The 'models' parameter must hold models fitted on the same columns ({d}). "
                f"Got {name!r} fitted on {model.n_features_in_} columns instead."
            )
    level = check_level(level)
    xq = check_probe_point(first, x)[0]
    j = resolve_feature(first, feature)
    grid = check_values("grid", grid)
    if grid.size == 0:
        raise ValueError("The 'grid' parameter must hold at least one value. Got an empty grid.")
    if not np.all(np.isfinite(grid)):
        raise ValueError("The 'grid' parameter must be finite.")
    fname = column_names(first)[j]
    rows = []
    if not average:
        Q = np.repeat(xq[None, :], grid.size, axis=0)
        Q[:, j] = grid
        Q = checked_rows(Q, first, "grid")  # checked once for every model below
        for name, model in pairs:
            # kernel smoothers always give intervals, forests with little bags only
            forest = hasattr(model, "trees_per_bag_")
            if forest and has_little_bags(model) and hasattr(model, "interval_parts"):
                # a forest's default interval (bias-corrected: the one that covers)
                pred = model.predict(Q)
                lo, hi = model.predict_interval(Q, level=level)
            elif not forest or has_little_bags(model):
                # smoothers, and the same-trees local average (a diagnostic): CLT
                try:
                    pred, std = model.predict(Q, return_std=True)
                except TypeError:  # a regressor without return_std: no interval
                    pred, std = model.predict(Q), np.full(grid.size, np.nan)
                lo, hi = normal_interval(pred, std, level)
            else:  # a forest without little bags: no intervals
                pred = model.predict(Q)
                lo = hi = np.full(grid.size, np.nan)
            rows.append((name, grid, np.asarray(pred, dtype=np.float64), lo, hi))
    else:
        if background is None and not hasattr(first, "X_train_"):
            raise ValueError(
                f"The 'background' parameter is needed for average=True with "
                f"{type(first).__name__} (it keeps no training rows). Got None instead."
            )
        if background is None:
            Xb = first.X_train_
            if Xb.shape[0] > max_background:
                rng = np.random.default_rng(random_state)
                Xb = Xb[rng.choice(Xb.shape[0], max_background, replace=False)]
        else:
            Xb = check_rows("background", background, n_features=d)
        nb = Xb.shape[0]
        Q = np.tile(Xb, (grid.size, 1))
        Q[:, j] = np.repeat(grid, nb)
        Q = checked_rows(Q, first, "background")
        for name, model in pairs:
            pred = np.asarray(model.predict(Q)).reshape(grid.size, nb)
            nan = np.full(grid.size, np.nan)
            rows.append((name, grid, pred.mean(axis=1), nan, nan))
    # one frame from stacked columns (cheaper than one frame per method and a concat)
    frame = pd.DataFrame({
        "method": np.repeat([r[0] for r in rows], [r[1].size for r in rows]),
        "value": np.concatenate([r[1] for r in rows]),
        "prediction": np.concatenate([r[2] for r in rows]),
        "lower": np.concatenate([np.asarray(r[3], dtype=np.float64) for r in rows]),
        "upper": np.concatenate([np.asarray(r[4], dtype=np.float64) for r in rows]),
    })
    return SliceReport(feature=fname, feature_index=j, x=xq, average=bool(average),
                       level=level, frame=frame)
