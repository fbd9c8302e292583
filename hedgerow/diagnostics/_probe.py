"""What the forest does at one query point (the probe)."""

from __future__ import annotations

import weakref
from dataclasses import dataclass, field

import numpy as np
import pandas as pd
import scipy.sparse as sp

from hedgerow._format import format_number
from hedgerow._validation import check_level, column_names, fitted_columns
from hedgerow.diagnostics._checks import FORESTS, SMOOTHERS, check_model
from hedgerow.diagnostics._report import (
    ReportMixin,
    check_probe_point,
    has_little_bags,
    kish_ess,
)
from hedgerow.diagnostics._slices import method_label
from hedgerow.inference import normal_interval

__all__ = ["MethodAtProbe", "ProbeReport", "probe", "probe_sketch", "TOP_ROWS",
           "WIDE_COLUMNS", "column_summary", "rows_with_weight"]

#: Rows counted in ``ProbeReport.top_share``.
TOP_ROWS = 10
#: From this many columns on, the notes say how many each smoother effectively uses
#: (also below it when a smoother drops a column).
WIDE_COLUMNS = 5


@dataclass(frozen=True)
class MethodAtProbe:
    """One method's answer at the probe: prediction, interval, local slope, weights."""

    name: str
    prediction: float
    lower: float
    upper: float
    slopes: np.ndarray  # over ProbeReport.slope_columns; NaN where the method has none
    slope_se: np.ndarray
    weights: sp.csr_matrix  # 1 × n
    ess: float
    #: Columns the method effectively uses (a smoother's ``n_features_used_``: columns
    #: whose bandwidth reached the upper bound drop out); None for the forests.
    columns_used: int | None = None


@dataclass(frozen=True)
class ProbeReport(ReportMixin):
    """Neighbour weights, local line and every method's prediction at one probe point.

    Attributes
    ----------
    x : ndarray of shape (d,)
        The probe point.
    feature_names : tuple of str
        Column names (``x0, x1, ...`` for columns fitted unnamed).
    weights : scipy.sparse.csr_matrix of shape (1, n)
        Forest weights of the probe.
    ess : float
        Kish effective sample size (sum w)^2 / sum w^2 of the forest weights.
    top_share : float
        Share of the weight held by the ``TOP_ROWS`` heaviest rows.
    neighbour_offset : ndarray of shape (d,)
        Weighted mean of X_i - x per column, in training standard deviations: near 0 for
        a balanced neighbourhood, far from 0 for a lopsided one (the edge problem:
        neighbours all on one side of the probe).
    neighbour_spread : ndarray of shape (d,)
        Weighted mean |X_i - x| per column, same units.
    slope_columns : ndarray of int
        Indices of the columns the local line uses.
    methods : tuple of MethodAtProbe
        The local linear forest, the honest local average on the same trees and each
        comparison smoother, in that order.
    level : float
        Interval level.
    outside : tuple of (str, float, float, float)
        ``(column, probe value, data minimum, data maximum)`` for each column where the
        probe lies outside the training data's range: every method extrapolates there.
    """

    x: np.ndarray
    feature_names: tuple
    weights: sp.csr_matrix
    ess: float
    top_share: float
    neighbour_offset: np.ndarray
    neighbour_spread: np.ndarray
    slope_columns: np.ndarray
    methods: tuple = field(default_factory=tuple)
    level: float = 0.95
    outside: tuple = ()
    _title = "probe"

    @property
    def extrapolating(self) -> bool:
        """True when the probe lies outside the training data in some column."""
        return bool(self.outside)

    def outside_note(self) -> str:
        """One line naming the columns where the probe is outside the data; '' if none."""
        if not self.outside:
            return ""
        parts = [f"{name}={format_number(v)} (data span {format_number(lo)} to "
                 f"{format_number(hi)})" for name, v, lo, hi in self.outside]
        return "outside the data: extrapolating in " + ", ".join(parts)

    def method(self, name: str) -> MethodAtProbe:
        """Return the entry of the method called ``name``."""
        for m in self.methods:
            if m.name == name:
                return m
        raise KeyError(f"No method {name!r}; known: {[m.name for m in self.methods]}.")

    def to_frame(self) -> pd.DataFrame:
        rows = []
        for m in self.methods:
            row = {"method": m.name, "prediction": m.prediction, "lower": m.lower,
                   "upper": m.upper, "ess": m.ess}
            for j, c in enumerate(self.slope_columns):
                row[f"slope[{self.feature_names[c]}]"] = m.slopes[j]
                row[f"slope_se[{self.feature_names[c]}]"] = m.slope_se[j]
            rows.append(row)
        return pd.DataFrame(rows).set_index("method")

    def neighbourhood_frame(self) -> pd.DataFrame:
        """Return per-column probe value, neighbour offset and spread."""
        return pd.DataFrame(
            {"probe": self.x, "neighbour_offset_sd": self.neighbour_offset,
             "neighbour_spread_sd": self.neighbour_spread},
            index=list(self.feature_names),
        )

    def column_use_notes(self) -> list:
        """Sentences saying how many columns each smoother effectively uses.

        Given on wide data (``WIDE_COLUMNS`` or more) and whenever a smoother drops a
        column; empty otherwise, and for the forests.
        """
        d = len(self.feature_names)
        return [f"{m.name} uses {m.columns_used} of {d} columns"
                for m in self.methods if m.columns_used is not None
                and (d >= WIDE_COLUMNS or m.columns_used < d)]

    def _notes(self):
        return [f"effective sample size {self.ess:.1f}; top {TOP_ROWS} rows hold "
                f"{100 * self.top_share:.0f}% of the weight; {100 * self.level:.0f}% intervals",
                *self.column_use_notes(), *([self.outside_note()] if self.outside else [])]


def _method_entry(name, w, pred, std, slopes, slope_se, level, interval=None,
                  columns_used=None):
    # ``interval``: the estimator's own (lower, upper) where it has a default interval
    # method of its own (the forests' bias-corrected one); otherwise mean -/+ z * std
    if std is None or not np.isfinite(std):
        lo = hi = np.nan
    elif interval is not None:
        lo, hi = (float(np.asarray(v).ravel()[0]) for v in interval)
    else:
        lo, hi = normal_interval(pred, std, level)
    w = sp.csr_matrix(w)
    return MethodAtProbe(
        name=name, prediction=float(pred), lower=float(lo), upper=float(hi),
        slopes=np.asarray(slopes, dtype=float), slope_se=np.asarray(slope_se, dtype=float),
        weights=w, ess=kish_ess(w.data), columns_used=columns_used,
    )


_SUMMARIES = weakref.WeakKeyDictionary()


def _summary_of_rows(X):
    """Return (sd with 1.0 for constant columns, min, max) of the columns of ``X``.

    Kept while the array lives (a weak reference): the probe's neighbourhood offset, the
    outside-the-data check, the weight profile's distances and the slice grid read it at
    every move, and each is a pass over every training row.
    """
    try:
        return _SUMMARIES[X]
    except (KeyError, TypeError):
        pass
    sd = X.std(axis=0)
    out = (np.where(sd > 0, sd, 1.0), X.min(axis=0), X.max(axis=0))
    try:
        _SUMMARIES[X] = out
    except TypeError:  # not weak-referenceable: computed each time
        pass
    return out


def column_summary(model):
    """Return (sd with 1.0 for constant columns, min, max) of a fitted model's columns.

    A local linear forest keeps them from its fit (``column_scale_``, ``column_min_``,
    ``column_max_``); a model without them (an honest forest, or a forest pickled before
    they existed) gets them from its training rows once per training array.
    """
    scale = getattr(model, "column_scale_", None)
    if scale is not None:
        return scale, model.column_min_, model.column_max_
    return _summary_of_rows(model.X_train_)


def rows_with_weight(W):
    """Return (row indices ascending, weights) of the non-zero entries of a 1 × n row."""
    W = sp.csr_matrix(W)
    idx, val = W.indices, W.data
    if not W.has_sorted_indices or W.nnz != np.unique(idx).size:
        W = W.copy()
        W.sum_duplicates()  # also sorts
        idx, val = W.indices, W.data
    keep = val != 0
    return idx[keep], val[keep]


def probe(model, x, *, compare=(), level: float = 0.95) -> ProbeReport:
    """Return the ``ProbeReport`` of a fitted forest at the point ``x``.

    Parameters
    ----------
    model : LocalLinearForestRegressor or HonestForestRegressor
        Fitted; a local linear forest gives the local line plus the local average on the
        same trees, an honest forest the local average only.
    x : array-like or pandas Series of length d
        The probe point (checked once, then passed on as one array).
    compare : sequence of fitted smoothers, default=()
        ``NadarayaWatsonRegressor`` / ``LocalLinearRegressor`` fitted on the same data;
        each adds its prediction, interval, local slope and kernel weights.
    level : float in (0, 1), default=0.95
        Interval level.
    """
    from hedgerow.estimators import LocalLinearForestRegressor

    check_model(model, "model", FORESTS)
    if hasattr(compare, "predict") or isinstance(compare, type):
        compare = (compare,)
    if not isinstance(compare, list | tuple):
        raise TypeError(
            f"The 'compare' parameter must be a list of fitted smoothers. "
            f"Got {type(compare).__name__} instead."
        )
    for i, smoother in enumerate(compare):
        check_model(smoother, f"compare[{i}]", SMOOTHERS + FORESTS)
        if smoother.n_features_in_ != model.n_features_in_:
            raise ValueError(
                f"The 'compare' parameter must hold models fitted on the same columns "
                f"({model.n_features_in_}). Got compare[{i}] fitted on "
                f"{smoother.n_features_in_} columns instead."
            )
    level = check_level(level)
    # one validated array from here to the weights: every estimator fitted on these
    # columns takes it without checking it again
    q = check_probe_point(model, x)
    hood = _neighbourhood(model, q)
    W, xq = hood["weights"], np.asarray(q)
    bags = has_little_bags(model)
    is_llf = isinstance(model, LocalLinearForestRegressor)
    cols = model.correction_features_ if is_llf else np.arange(0)
    k = cols.size
    methods = []
    if is_llf:
        # one local solve: prediction, slopes and their little-bags errors
        fit, std, slope_se = model.local_readout(q)
        if std is None:
            slope_se = np.full(k, np.nan)
        else:
            std, slope_se = float(std[0]), slope_se[0]
        # the interval is the estimator's default method (the one that covers), not
        # prediction -/+ z * std
        methods.append(_method_entry(
            "local linear forest", W, fit.intercept[0], std, fit.slopes[0], slope_se, level,
            interval=model.predict_interval(q, level=level) if bags else None,
        ))
    avg = model.local_average(q, return_std=bags)
    mean, std = (avg[0][0], float(avg[1][0])) if bags else (avg[0], None)
    # the same-trees row of a local linear forest is a diagnostic: its CLT interval;
    # an honest forest's own row takes its default interval
    own = bags and not is_llf
    methods.append(_method_entry(
        "honest forest (same trees)", W, mean, std, np.full(k, np.nan), np.full(k, np.nan),
        level, interval=model.predict_interval(q, level=level) if own else None,
    ))
    for smoother in compare:
        qs = q if fitted_columns(smoother) == q.columns else xq
        pred, sstd = smoother.predict(qs, return_std=True)
        if hasattr(smoother, "local_slopes"):
            slopes = np.asarray(smoother.local_slopes(qs))[0][cols]
        else:
            slopes = np.full(k, np.nan)
        label = method_label(smoother)
        methods.append(_method_entry(
            label, smoother.neighbour_weights(qs), pred[0], float(sstd[0]), slopes,
            np.full(k, np.nan), level,
            columns_used=int(getattr(smoother, "n_features_used_", smoother.n_features_in_)),
        ))
    return ProbeReport(slope_columns=np.asarray(cols), methods=tuple(methods), level=level,
                       **hood)


def _neighbourhood(model, q):
    """The probe's weights and where its neighbours lie: the fields every report shares.

    Only the rows with weight are visited (and the column summary kept from the fit), so
    the cost follows the neighbourhood's size, not n; the numbers are those of the dense
    computation over every row (a test compares them).
    """
    names = column_names(model)
    xq = np.asarray(q)
    W = sp.csr_matrix(model.neighbour_weights(q))
    sd, lo, hi = column_summary(model)
    nz, w = rows_with_weight(W)
    diff = (model.X_train_[nz] - xq) / sd
    x0 = xq.reshape(-1)
    outside = tuple((names[j], float(x0[j]), float(lo[j]), float(hi[j]))
                    for j in np.flatnonzero((x0 < lo) | (x0 > hi)))
    return {"x": xq[0], "feature_names": names, "weights": W,
            "ess": kish_ess(W.data), "top_share": float(np.sort(W.data)[::-1][:TOP_ROWS].sum()),
            "neighbour_offset": w @ diff, "neighbour_spread": w @ np.abs(diff),
            "outside": outside}


def probe_sketch(model, x) -> ProbeReport:
    """Return the cheap part of ``probe(model, x)``: the neighbour weights and the local line.

    A ``ProbeReport`` with the same weights, effective sample size, neighbourhood and
    outside-the-data fields as ``probe`` and one method: the local linear forest's
    prediction and slopes from its local solve (an honest forest: its local average,
    slope-free). No standard errors, intervals (NaN) or comparison smoothers: what the
    probe view draws while the probe is being dragged; ``probe`` gives the rest on release.
    """
    from hedgerow.estimators import LocalLinearForestRegressor

    check_model(model, "model", FORESTS)
    q = check_probe_point(model, x)
    hood = _neighbourhood(model, q)
    W = hood["weights"]
    if isinstance(model, LocalLinearForestRegressor):
        cols = model.correction_features_
        fit = model.local_fit(q)
        entry = _method_entry("local linear forest", W, fit.intercept[0], None,
                              fit.slopes[0], np.full(cols.size, np.nan), 0.95)
    else:
        cols = np.arange(0)
        entry = _method_entry("honest forest (same trees)", W, model.local_average(q)[0],
                              None, np.full(0, np.nan), np.full(0, np.nan), 0.95)
    return ProbeReport(slope_columns=np.asarray(cols), methods=(entry,), **hood)
