"""Edge profile: held-out residuals by how close rows sit to the edge of the data."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd
from scipy.stats import t as student_t

from hedgerow._format import format_number
from hedgerow._validation import check_level, checked_rows
from hedgerow.diagnostics._checks import check_models, check_rows, check_values
from hedgerow.diagnostics._heldout import edge_depth, held_out_predictions
from hedgerow.diagnostics._report import ReportMixin
from hedgerow.diagnostics._verdict import EDGE_BAND

__all__ = ["EdgeProfile", "edges", "DEPTH_BANDS"]

#: Band edges of edge depth: outer 5%, 5-10%, 10-25%, interior.
#: Edge rows whose local slopes are solved in one batch (bounds the query state's memory).
SLOPE_BLOCK = 4096
DEPTH_BANDS = (0.0, 0.05, 0.10, 0.25, 0.5 + 1e-12)


def _mean_ci(v, level=0.95):
    v = v[np.isfinite(v)]
    n = v.size
    if n == 0:
        return np.nan, np.nan, np.nan, 0
    m = float(v.mean())
    if n < 2:
        return m, np.nan, np.nan, n
    half = student_t.ppf(0.5 + level / 2, n - 1) * v.std(ddof=1) / np.sqrt(n)
    return m, m - half, m + half, n


@dataclass(frozen=True)
class EdgeProfile(ReportMixin):
    """Held-out residuals per edge-depth band and method, and the edge-bias sign pattern.

    ``bands``: method, band, n, mean_residual (y - held-out prediction), lower, upper
    (t interval), rmse. ``bend``: per method, the mean over edge-band rows (depth < ``EDGE_BAND``)
    of residual × side × sign(local slope) with its interval: positive means predictions
    bend toward the interior at the edges (at an upper edge of a rising signal the fit is
    too low), the signature of a forest's edge bias. ``depth``, ``side``, ``column``: per
    row. ``residuals``: per row and method.
    """

    depth: np.ndarray
    column: np.ndarray
    side: np.ndarray
    residuals: pd.DataFrame
    bands: pd.DataFrame
    bend: pd.DataFrame
    _title = "edges"

    def to_frame(self) -> pd.DataFrame:
        return self.bands.copy()

    def _notes(self):
        out = []
        for _, r in self.bend.iterrows():
            out.append(f"{r['method']}: inward-bend score {format_number(r['bend'], 3)} "
                       f"(95% CI {format_number(r['lower'], 3)} to "
                       f"{format_number(r['upper'], 3)}) in the outer "
                       f"{100 * EDGE_BAND:.0f}%")
        return out


def edges(models, X=None, y=None, *, columns=None, slope_model=None, level=0.95) -> EdgeProfile:
    """Return the ``EdgeProfile`` of fitted models on their training rows.

    Parameters
    ----------
    models : a fitted model, a list or a dict name -> model, all fitted on the same rows.
    X, y : the training rows (default: the first model's ``X_train_`` / ``y_train_``).
    columns : columns defining edge depth (default: the local linear forest's correction
        columns when one is given, else all).
    slope_model : model whose ``local_slopes`` sign the local trend (default: the first
        model that has ``local_slopes``); slopes are taken at each row in its edge column.
    """
    pairs = check_models(models, "models", kinds=None)
    level = check_level(level)
    first = pairs[0][1]
    d = first.n_features_in_
    if (X is None or y is None) and not hasattr(first, "X_train_"):
        raise ValueError(
            f"The 'X' and 'y' parameters are needed with {type(first).__name__} (it keeps "
            f"no training rows): pass the rows it was fitted on."
        )
    n = first.X_train_.shape[0] if hasattr(first, "X_train_") else None
    X = check_rows("X", first.X_train_ if X is None else X, n_features=d, n_rows=n)
    n = X.shape[0]
    y = first.y_train_ if y is None else y
    y = check_values("y", y.to_numpy() if hasattr(y, "to_numpy") else y)
    if y.shape[0] != n or not np.all(np.isfinite(y)):
        raise ValueError(
            f"The 'y' parameter must hold {n} finite values (one per row of X). "
            f"Got {y.shape[0]} values instead."
        )
    for name, model in pairs:
        if model.n_features_in_ != d:
            raise ValueError(
                f"The 'models' parameter must hold models fitted on the same columns ({d}). "
                f"Got {name!r} fitted on {model.n_features_in_} columns instead."
            )
    if columns is None:
        for _, m in pairs:
            if hasattr(m, "correction_features_"):
                columns = m.correction_features_
                break
    depth, column, side = edge_depth(X, columns)
    res = {name: y - held_out_predictions(m) for name, m in pairs}
    residuals = pd.DataFrame(res)
    band_idx = np.digitize(depth, DEPTH_BANDS[1:-1])
    labels = [f"{DEPTH_BANDS[b]:.2f}-{min(DEPTH_BANDS[b + 1], 0.5):.2f}"
              for b in range(len(DEPTH_BANDS) - 1)]
    rows = []
    for name in residuals:
        r = residuals[name].to_numpy()
        for b, lab in enumerate(labels):
            sel = band_idx == b
            m, lo, hi, n = _mean_ci(r[sel], level)
            rmse = float(np.sqrt(np.nanmean(r[sel] ** 2))) if n else np.nan
            rows.append({"method": name, "band": lab, "n": n, "mean_residual": m,
                         "lower": lo, "upper": hi, "rmse": rmse})
    bands = pd.DataFrame(rows)
    if slope_model is None:
        slope_model = next((m for _, m in pairs if hasattr(m, "local_slopes")), None)
    edge = depth < EDGE_BAND
    bend_rows = []
    if slope_model is not None and np.any(edge):
        # in row blocks: one batch over every edge row (half of a large table) holds the
        # query state of all of them against every tree at once; rows are independent,
        # so the slopes are the same
        Xe = X[edge]
        slopes = np.concatenate([
            np.asarray(slope_model.local_slopes(checked_rows(Xe[i:i + SLOPE_BLOCK],
                                                             slope_model)))
            for i in range(0, Xe.shape[0], SLOPE_BLOCK)])
        if hasattr(slope_model, "correction_features_"):
            pos = {c: i for i, c in enumerate(slope_model.correction_features_)}
            idx = np.array([pos.get(c, -1) for c in column[edge]])
        else:
            idx = column[edge]
        sgn = np.where(idx >= 0, np.sign(slopes[np.arange(idx.size), np.maximum(idx, 0)]), 0)
        for name in residuals:
            score = residuals[name].to_numpy()[edge] * side[edge] * sgn
            m, lo, hi, n = _mean_ci(score[sgn != 0], level)
            bend_rows.append({"method": name, "bend": m, "lower": lo, "upper": hi, "n": n})
    bend = pd.DataFrame(bend_rows, columns=["method", "bend", "lower", "upper", "n"])
    return EdgeProfile(depth=depth, column=column, side=side, residuals=residuals,
                       bands=bands, bend=bend)
