"""Is the local linear correction warranted? Paired held-out errors and a plain answer."""

from __future__ import annotations

import warnings
from dataclasses import dataclass

import numpy as np
import pandas as pd
from scipy.stats import norm

from hedgerow.diagnostics._heldout import edge_depth, held_out_predictions
from hedgerow.diagnostics._report import ReportMixin
from hedgerow.diagnostics._slices import method_label

__all__ = ["Verdict", "verdict", "paired_relative_gain", "EDGE_BAND"]

#: Rows with edge depth below this form the edge band (the outer 10% of the data).
EDGE_BAND = 0.10


def paired_relative_gain(err_base, err_new, level=0.95):
    """Return ``(gain, lower, upper)``: 1 - mean(err_new) / mean(err_base) with a CI.

    ``err_*`` are per-row squared held-out errors of the same rows. The interval is the
    delta-method interval of the ratio of paired means (common practice): with
    R = mean(new) / mean(base) and u_i = new_i - R * base_i,
    se(R) = sd(u) / (sqrt(n) * mean(base)).
    """
    a = np.asarray(err_base, dtype=np.float64)
    b = np.asarray(err_new, dtype=np.float64)
    ok = np.isfinite(a) & np.isfinite(b)
    a, b = a[ok], b[ok]
    n = a.size
    if n < 2 or a.mean() <= 0:
        return np.nan, np.nan, np.nan
    R = b.mean() / a.mean()
    u = b - R * a
    se = u.std(ddof=1) / (np.sqrt(n) * a.mean())
    z = norm.ppf(0.5 + level / 2)
    return float(1 - R), float(1 - R - z * se), float(1 - R + z * se)


@dataclass(frozen=True)
class Verdict(ReportMixin):
    """Paired comparison of held-out squared errors and the conclusion drawn from it.

    ``errors``: per-row squared held-out errors per method plus ``edge_depth``.
    ``comparisons``: for each method against the honest forest on the same trees, the
    relative gain (share of held-out squared error removed; negative = worse) with its
    interval, overall, in the edge band and in the interior. ``conclusion``: one plain
    sentence derived from the local linear forest's row of ``comparisons``.
    """

    errors: pd.DataFrame
    comparisons: pd.DataFrame
    conclusion: str
    level: float
    _title = "verdict"

    def to_frame(self) -> pd.DataFrame:
        return self.comparisons.copy()

    def _notes(self):
        return [self.conclusion]


def _conclusion(row_all, row_edge, row_inner, level):
    g, lo, hi = row_all
    pct = f"{100 * level:.0f}%"
    if not np.isfinite(g):
        return "Not enough held-out predictions to compare."
    if lo > 0:
        where = ""
        ge, gi = row_edge[0], row_inner[0]
        if np.isfinite(ge) and np.isfinite(gi) and ge > gi:
            where = ", most of it in the outer 10% of the data"
        return (f"The local linear correction lowers held-out error by {100 * g:.0f}% "
                f"({pct} interval {100 * lo:.0f}-{100 * hi:.0f}%){where}.")
    if hi < 0:
        return (f"The correction hurts: held-out error rises by {100 * -g:.0f}% "
                f"({pct} interval {100 * -hi:.0f}-{100 * -lo:.0f}%).")
    return (f"No evidence either way: the change in held-out error is {100 * g:+.0f}% "
            f"({pct} interval {100 * lo:+.0f}% to {100 * hi:+.0f}%).")


def verdict(X, y, *, forest=None, smoothers="cv", baseline=True, level=0.95,
            random_state=0, n_jobs=None, **forest_params) -> Verdict:
    """Return the ``Verdict`` on whether the local linear correction is warranted.

    One ``LocalLinearForestRegressor`` (``forest``, fitted here if None with
    ``forest_params``) supplies both forests on the same trees: its out-of-bag local line
    and its out-of-bag local average (the honest forest). ``smoothers="cv"`` adds
    Nadaraya-Watson and kernel local linear regression with cross-validated bandwidths
    (leave-one-out errors), ``None`` skips them, or pass fitted smoothers. ``baseline``
    adds ``sklearn.ensemble.RandomForestRegressor(min_samples_leaf=5)`` with its
    out-of-bag predictions. Errors are compared row by row against the honest forest.
    """
    from hedgerow.estimators import LocalLinearForestRegressor

    if forest is None:
        forest = LocalLinearForestRegressor(random_state=random_state, n_jobs=n_jobs,
                                            **forest_params).fit(X, y)
    Xa, ya = forest.X_train_, forest.y_train_
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", RuntimeWarning)
        preds = {"honest forest": forest.oob_local_average(),
                 "local linear forest": forest.oob_predict()}
    if smoothers == "cv":
        from hedgerow.estimators import LocalLinearRegressor, NadarayaWatsonRegressor

        smoothers = [NadarayaWatsonRegressor().fit(Xa, ya), LocalLinearRegressor().fit(Xa, ya)]
    for s in smoothers or ():
        preds[method_label(s)] = held_out_predictions(s)
    if baseline:
        from sklearn.ensemble import RandomForestRegressor

        rf = RandomForestRegressor(min_samples_leaf=5, oob_score=True,
                                   random_state=random_state, n_jobs=n_jobs).fit(Xa, ya)
        preds["random forest (scikit-learn)"] = rf.oob_prediction_.ravel()
    depth, _, _ = edge_depth(Xa, forest.correction_features_)
    edge = depth < EDGE_BAND
    errors = pd.DataFrame({k: (ya - v) ** 2 for k, v in preds.items()})
    errors["edge_depth"] = depth
    base = errors["honest forest"].to_numpy()
    rows = []
    for name in preds:
        if name == "honest forest":
            continue
        e = errors[name].to_numpy()
        row = {"method": name}
        for part, sel in (("all", slice(None)), ("edge", edge), ("interior", ~edge)):
            g, lo, hi = paired_relative_gain(base[sel], e[sel], level)
            row[f"gain_{part}"], row[f"lower_{part}"], row[f"upper_{part}"] = g, lo, hi
        rows.append(row)
    comparisons = pd.DataFrame(rows).set_index("method")
    r = comparisons.loc["local linear forest"]
    conclusion = _conclusion(
        (r["gain_all"], r["lower_all"], r["upper_all"]),
        (r["gain_edge"], r["lower_edge"], r["upper_edge"]),
        (r["gain_interior"], r["lower_interior"], r["upper_interior"]), level,
    )
    return Verdict(errors=errors, comparisons=comparisons, conclusion=conclusion, level=level)
