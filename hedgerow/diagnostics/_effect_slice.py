"""The effect of a ``TreatmentEffectForest`` along one column, the others held at the probe.

``effect_slice(model, x, feature)`` is the side-by-side reading of ``effect_slices`` the
effect report draws: on a grid of the column's values with every other column at the
probe, the corrected effect (``predict_effect``) with its interval (``effect_interval``,
the method ``interval_method`` picks for the corrected row) and the uncorrected effect of
the same trees (``corrected=False``), one row per grid value. The numbers are
``effect_slices``' (one path); a test compares them with the estimator's.

Caution: decision support, not advice; an effect reading assumes unconfoundedness (no
diagnostic here checks it) and overlap.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd

from hedgerow.diagnostics._effect import _caution, _check_level, _require_effect_model
from hedgerow.diagnostics._effect import interval_method as _interval_method
from hedgerow.diagnostics._report import ReportMixin, check_probe_point

__all__ = ["EffectSlice", "effect_slice", "EFFECT_SLICE_POINTS"]

#: Grid points of an effect slice when no grid is given.
EFFECT_SLICE_POINTS = 41


@dataclass(frozen=True)
class EffectSlice(ReportMixin):
    """The effect along one column with the other columns at the probe.

    Attributes
    ----------
    x : (d,) the probe. feature : the column's name. feature_index : its index.
    level : interval level. interval : method of the corrected effect's interval.
    frame : DataFrame with columns value (the grid), corrected, lower, upper (the
    corrected effect and its interval) and uncorrected (the same trees without the
    correction). corrected_column : whether the column is among the correction columns
    (outside them the correction holds the local line flat). caution : ``EFFECT_CAUTION``.
    """

    x: np.ndarray
    feature: str
    feature_index: int
    level: float
    interval: str
    frame: pd.DataFrame
    corrected_column: bool
    caution: str

    _title = "effect along a column"

    def to_frame(self) -> pd.DataFrame:
        return self.frame.copy()

    def _notes(self):
        return [f"effect along {self.feature}, other columns at the probe; interval "
                f"{self.interval.replace('_', ' ')}", f"Caution: {self.caution}"]

    def __repr__(self):
        return (f"EffectSlice(feature={self.feature!r}, points={len(self.frame)})\n"
                f"Caution: {self.caution}")


def effect_slice(model, x, feature, grid=None, *, level=0.95, method=None) -> EffectSlice:
    """Return the :class:`EffectSlice` of a fitted ``TreatmentEffectForest``.

    Parameters
    ----------
    model : a fitted ``TreatmentEffectForest``. x : the probe (d values).
    feature : column index or name. grid : 1-d finite values of the column (default
        ``EFFECT_SLICE_POINTS`` evenly spaced over the training range and the probe).
    level : interval level. method : interval method (default the estimator's; see
        ``interval_method``).

    Caution: decision support, not advice; assumes unconfoundedness and overlap.
    """
    from hedgerow._validation import column_names
    from hedgerow.diagnostics._checks import check_values
    from hedgerow.diagnostics._effect_slices import effect_slices
    from hedgerow.diagnostics._slices import resolve_feature

    model = _require_effect_model(model)
    level = _check_level(level)
    j = resolve_feature(model, feature)
    xq = np.asarray(check_probe_point(model, x)[0], dtype=np.float64)
    if grid is None:
        col = model.X_train_[:, j]
        grid = np.linspace(min(float(col.min()), float(xq[j])),
                           max(float(col.max()), float(xq[j])), EFFECT_SLICE_POINTS)
    else:
        grid = check_values("grid", grid)
    r = effect_slices(model, xq, j, grid, level=level, method=method, neighbourhood=False)
    c, u = r.method("corrected forest"), r.method("uncorrected forest")
    frame = pd.DataFrame({"value": c["value"].to_numpy(), "corrected": c["effect"].to_numpy(),
                          "lower": c["lower"].to_numpy(), "upper": c["upper"].to_numpy(),
                          "uncorrected": u["effect"].to_numpy()})
    return EffectSlice(x=xq.copy(), feature=str(column_names(model)[j]), feature_index=j,
                       level=level, interval=r.intervals["corrected forest"] or
                       _interval_method(method, True), frame=frame,
                       corrected_column=bool(j in set(np.asarray(
                           model.correction_features_).tolist())),
                       caution=_caution())
