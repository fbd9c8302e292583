"""Effect slices: each effect method along one column, the other columns held at the probe.

The treatment-effect analogue of ``slices``. Every report carries ``EFFECT_CAUTION``.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd
from scipy.stats import norm

from hedgerow._validation import checked_rows
from hedgerow.diagnostics._checks import check_count, check_rows, check_values
from hedgerow.diagnostics._effect import (
    _caution,
    _check_level,
    _column_names,
    _require_effect_model,
    interval_method,
    neighbourhood_difference,
)
from hedgerow.diagnostics._report import (
    MethodRows,
    ReportMixin,
    check_probe_point,
    has_little_bags,
)

__all__ = ["EffectSliceReport", "effect_slices", "EFFECT_SLICE_GRID"]

#: Points of the default grid (evenly spaced over the column's training range).
EFFECT_SLICE_GRID = 40


@dataclass(frozen=True)
class EffectSliceReport(MethodRows, ReportMixin):
    """Effects along one column for several methods (long format in ``frame``).

    Attributes
    ----------
    feature : column name. feature_index : its index. x : (d,) the probe (the other
    columns' values). average : True for the partial-dependence variant. level : interval
    level. frame : DataFrame with columns method, value (the grid), effect, std, lower,
    upper; methods "corrected forest", "uncorrected forest", "neighbourhood difference"
    (pointwise only) and "truth" (when given). intervals : method -> the interval method
    of its rows ("" for none). background_rows : rows averaged over (0 when pointwise).
    caution : ``EFFECT_CAUTION``.

    In the averaged variant ``effect`` is the mean effect over the background rows with
    the column set to the grid value, and std / lower / upper are NaN: pointwise
    intervals do not average into an interval for the mean.
    """

    feature: str
    feature_index: int
    x: np.ndarray
    average: bool
    level: float
    frame: pd.DataFrame
    intervals: dict
    background_rows: int
    caution: str

    _title = "effect slices"

    def to_frame(self) -> pd.DataFrame:
        return self.frame.copy()

    @property
    def methods(self) -> tuple:
        """The methods of ``frame``, in the order drawn."""
        return tuple(self._by_method)



    @property
    def note(self) -> str:
        """What the slice holds fixed and how its intervals are made, in one line."""
        if self.average:
            return (f"partial dependence along {self.feature}: the mean effect over "
                    f"{self.background_rows} background rows, no intervals")
        how = ", ".join(f"{m}: {i.replace('_', ' ')}" for m, i in self.intervals.items() if i)
        return (f"along {self.feature}, the other columns at the probe; "
                f"{100 * self.level:g}% pointwise intervals ({how or 'none'})")

    def _notes(self):
        return [self.note, f"Caution: {self.caution}"]

    def __repr__(self):
        kind = "averaged" if self.average else "at the probe"
        return (f"EffectSliceReport(feature={self.feature!r}, {kind}, "
                f"methods={list(self.methods)}, points={self.frame['value'].nunique()})\n"
                f"Caution: {self.caution}")


def _truth_effects(truth, Q, what):
    tau = np.asarray(truth(np.array(Q, dtype=np.float64)), dtype=np.float64).ravel()
    if tau.shape != (Q.shape[0],) or not np.all(np.isfinite(tau)):
        raise ValueError(f"The 'truth' function must return one finite effect per row of the "
                         f"{what} ({Q.shape[0]}). Got shape {tau.shape} instead.")
    return tau


def effect_slices(model, x, feature, grid=None, *, level=0.95, average=False, method=None,
                  neighbourhood=True, truth=None, grid_size=EFFECT_SLICE_GRID,
                  background=None, max_background=200, random_state=0) -> EffectSliceReport:
    """Return the :class:`EffectSliceReport` of a fitted ``TreatmentEffectForest``.

    Each method's effect along ``feature`` with the other columns held at ``x``:

    - "corrected forest": ``predict_effect`` with the estimator's interval (``method``,
      default the estimator's own, the robust bias-corrected one);
    - "uncorrected forest": the same trees without the local linear correction, with
      the interval ``interval_method(method, corrected=False)`` gives (its "clt"
      interval under the default, as in ``effect_probe``);
    - "neighbourhood difference" (``neighbourhood=True``, pointwise only): the
      difference in means of the arms within each grid point's forest neighbourhood
      (``neighbourhood_difference``), with the normal interval;
    - "truth" (``truth`` given): a known effect function, for invented data such as
      ``hedgerow.datasets.trial_effect_truth``; no interval.

    Parameters
    ----------
    model : a fitted ``TreatmentEffectForest``.
    x : probe point (length d). feature : column index or name.
    grid : 1-d values of the column; default ``grid_size`` evenly spaced values from the
        column's training minimum to its maximum.
    level : interval level. method : interval method (None: the estimator's default).
    average : if True, the partial-dependence variant: each grid value set in every
        ``background`` row (default: up to ``max_background`` training rows, drawn with
        ``random_state``), effects averaged, no intervals and no neighbourhood difference
        (it is a pointwise reading of one neighbourhood).
    truth : callable taking an (m, d) float array and returning m effects, or None.

    Caution: decision support, not advice; assumes unconfoundedness (nothing here checks
    it) and overlap.
    """
    from hedgerow.diagnostics._interactive import slice_grid
    from hedgerow.diagnostics._slices import resolve_feature
    from hedgerow.estimators._effect_forest import EFFECT_INTERVAL_METHODS

    model = _require_effect_model(model)
    level = _check_level(level)
    if method is not None and method not in EFFECT_INTERVAL_METHODS:
        raise ValueError(f"The 'method' parameter must be None or one of "
                         f"{list(EFFECT_INTERVAL_METHODS)}. Got {method!r} instead.")
    if truth is not None and not callable(truth):
        raise TypeError(f"The 'truth' parameter must be None or a callable X -> effects. Got "
                        f"{type(truth).__name__} instead.")
    for name, flag in (("average", average), ("neighbourhood", neighbourhood)):
        if not isinstance(flag, bool | np.bool_):
            raise TypeError(f"The {name!r} parameter must be True or False. Got {flag!r} "
                            f"instead.")
    xq = np.asarray(check_probe_point(model, x), dtype=np.float64)[0]
    j = resolve_feature(model, feature)
    if grid is None:
        grid = slice_grid(model, j, check_count("grid_size", grid_size, minimum=2))
    else:
        if np.ndim(grid) > 1:
            raise ValueError(f"The 'grid' parameter must be 1-d. Got shape {np.shape(grid)} "
                             f"instead.")
        grid = check_values("grid", grid)
        if grid.size == 0:
            raise ValueError("The 'grid' parameter must hold at least one value. Got an "
                             "empty grid.")
        if not np.all(np.isfinite(grid)):
            raise ValueError(f"The 'grid' parameter must be finite. Got "
                             f"{grid.tolist()!r} instead.")
    m = grid.size
    rows, intervals = [], {}
    nan = np.full(m, np.nan)
    forests = (("corrected forest", True), ("uncorrected forest", False))
    if not average:
        Q = np.repeat(xq[None, :], m, axis=0)
        Q[:, j] = grid
        Q = checked_rows(Q, model, "grid")  # checked once for every call below
        bags = has_little_bags(model)
        for name, corrected in forests:
            if bags:
                how = interval_method(method, corrected)
                tau, std = model.predict_effect(Q, return_std=True, corrected=corrected)
                lo, hi = model.effect_interval(Q, level, how, corrected=corrected)
            else:  # no little bags: no standard errors, no intervals
                how, tau, std, lo, hi = "", model.predict_effect(Q, corrected=corrected), \
                    nan, nan, nan
            rows.append((name, tau, std, lo, hi))
            intervals[name] = how
        if neighbourhood:
            A = model.neighbour_weights(Q).tocsr()
            z = norm.ppf(0.5 + level / 2)
            est, se = np.empty(m), np.empty(m)
            for i in range(m):
                a = np.asarray(A[i].toarray()).ravel()
                est[i], se[i], _ = neighbourhood_difference(
                    a, model.treatment_, model.y_train_, binary=model.binary_treatment_,
                    w_centred=model.w_centred_, y_centred=model.y_centred_)
            rows.append(("neighbourhood difference", est, se, est - z * se, est + z * se))
            intervals["neighbourhood difference"] = "normal"
        if truth is not None:
            rows.append(("truth", _truth_effects(truth, Q, "grid"), nan, nan, nan))
            intervals["truth"] = ""
        nb = 0
    else:
        d = model.n_features_in_
        if background is None:
            Xb = model.X_train_
            cap = check_count("max_background", max_background)
            if Xb.shape[0] > cap:
                rng = np.random.default_rng(random_state)
                Xb = Xb[np.sort(rng.choice(Xb.shape[0], cap, replace=False))]
        else:
            Xb = check_rows("background", background, n_features=d)
        nb = Xb.shape[0]
        Q = np.tile(Xb, (m, 1))
        Q[:, j] = np.repeat(grid, nb)
        Q = checked_rows(Q, model, "background")
        for name, corrected in forests:
            tau = np.asarray(model.predict_effect(Q, corrected=corrected)).reshape(m, nb)
            rows.append((name, np.nanmean(tau, axis=1), nan, nan, nan))
            intervals[name] = ""
        if truth is not None:
            tau = _truth_effects(truth, Q, "background rows × grid").reshape(m, nb)
            rows.append(("truth", tau.mean(axis=1), nan, nan, nan))
            intervals["truth"] = ""
    frame = pd.DataFrame({
        "method": np.repeat([r[0] for r in rows], m),
        "value": np.tile(grid, len(rows)),
        **{col: np.concatenate([np.asarray(r[k], dtype=np.float64) for r in rows])
           for k, col in enumerate(("effect", "std", "lower", "upper"), start=1)},
    })
    return EffectSliceReport(feature=str(_column_names(model)[j]), feature_index=j, x=xq,
                             average=bool(average), level=level, frame=frame,
                             intervals=intervals, background_rows=int(nb), caution=_caution())
