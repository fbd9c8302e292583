"""Split-half agreement: do two forests fitted on disjoint halves agree as their errors say?

On real data no truth is known, but two local linear forests fitted on disjoint halves of
the same training rows are independent given X. At a held-out row their predictions
differ by d = c_A - c_B with variance s_A^2 + s_B^2 if each interval's standard error is
right and each centre unbiased (or biased alike). So

    ratio = mean(d^2) / mean(s_A^2 + s_B^2)

is about 1 when the standard errors are right, and above 1 when they are too small or
the two halves are biased differently (their selection differs, or bias depends on the
sample). The share of |d| / sqrt(s_A^2 + s_B^2) below the normal quantile of ``level``
should be near ``level``. Neither number can show a bias both halves share.

Selection: each half normally chooses its own correction columns (lasso screening) and
ridge penalty (out of bag), and the interval treats both as fixed. ``selection="fixed"``
chooses them once on the whole training fold and gives both halves the same (and the
same bending columns for the bias correction, ``with_bending_columns``), so the
comparison of the two readings shows how much of the disagreement the selection explains.
"""

from __future__ import annotations

import warnings
from dataclasses import dataclass

import numpy as np
import pandas as pd
from sklearn.base import clone

from hedgerow._progress import progress_bar
from hedgerow._validation import check_level
from hedgerow.diagnostics._report import ReportMixin

__all__ = ["SELECTIONS", "SplitHalfReport", "split_half_agreement"]

#: How the halves choose their correction columns and penalty: each its own ("own"), or
#: both the columns and penalty chosen on the whole training fold ("fixed").
SELECTIONS = ("own", "fixed")

_COLUMNS = ["fold", "selection", "interval", "n", "ratio", "share_within", "mean_sq_diff",
            "mean_pred_var"]


@dataclass(frozen=True)
class SplitHalfReport(ReportMixin):
    """Agreement of forests fitted on disjoint halves of each training fold.

    ``frame``: one row per fold, selection ("own", "fixed") and interval method, with n
    (held-out rows), ratio (mean squared difference / mean predicted variance of the
    difference), share_within (share of |z| below the normal quantile of ``level``),
    mean_sq_diff and mean_pred_var. ``summary()`` pools the folds. ``folds_done`` <
    ``folds`` after an interruption.
    """

    frame: pd.DataFrame
    folds: int
    folds_done: int
    level: float
    _title = "split-half agreement"

    def to_frame(self) -> pd.DataFrame:
        return self.frame.copy()

    def summary(self) -> pd.DataFrame:
        """Return the folds pooled: per selection and interval, n, ratio and share_within."""
        f = self.frame
        if f.empty:
            return pd.DataFrame(columns=["selection", "interval", "n", "ratio",
                                         "share_within"])
        rows = []
        for (sel, interval), g in f.groupby(["selection", "interval"], sort=False):
            n = g["n"].to_numpy(float)
            rows.append({"selection": sel, "interval": interval, "n": int(n.sum()),
                         "ratio": float(np.sum(n * g["mean_sq_diff"])
                                        / np.sum(n * g["mean_pred_var"])),
                         "share_within": float(np.sum(n * g["share_within"]) / n.sum())})
        return pd.DataFrame(rows)

    def ratio(self, selection: str = "own", interval: str | None = None) -> float:
        """Return the pooled ratio of one selection and interval (default interval)."""
        return float(self._pooled(selection, interval)["ratio"])

    def share_within(self, selection: str = "own", interval: str | None = None) -> float:
        """Return the pooled share of |z| below the quantile (default interval)."""
        return float(self._pooled(selection, interval)["share_within"])

    def _pooled(self, selection, interval):
        from hedgerow.estimators._forest import DEFAULT_INTERVAL

        s = self.summary()
        sel = s[(s["selection"] == selection)
                & (s["interval"] == (interval or DEFAULT_INTERVAL))]
        if sel.empty:
            raise KeyError(f"No split-half row for selection={selection!r}, "
                           f"interval={interval!r}.")
        return sel.iloc[0]

    def _notes(self):
        notes = [f"{self.folds_done} of {self.folds} folds; nominal {100 * self.level:.0f}%",
                 "ratio about 1: the standard errors match the disagreement of independent "
                 "halves; above 1: too small, or the halves are biased differently. A bias "
                 "both halves share does not show."]
        if self.folds_done < self.folds:
            notes.append("interrupted: partial folds")
        return notes


def _check_args(X, y, forest, folds, selection, intervals):
    from hedgerow.diagnostics._checks import check_count
    from hedgerow.estimators import LocalLinearForestRegressor
    from hedgerow.estimators._forest import check_interval_method

    if forest is None:
        forest = LocalLinearForestRegressor()
    if not isinstance(forest, LocalLinearForestRegressor):
        raise TypeError(f"The 'forest' parameter must be a LocalLinearForestRegressor (its "
                        f"settings are cloned). Got {type(forest).__name__} instead.")
    folds = check_count("folds", folds, minimum=2)
    X = np.asarray(X.to_numpy() if hasattr(X, "to_numpy") else X, dtype=np.float64)
    y = np.asarray(y.to_numpy() if hasattr(y, "to_numpy") else y, dtype=np.float64).ravel()
    if X.ndim != 2 or X.shape[0] != y.shape[0]:
        raise ValueError(f"The 'X' and 'y' parameters must be a 2-d array and a vector with "
                         f"one value per row. Got shapes {X.shape} and {y.shape} instead.")
    if not (np.all(np.isfinite(X)) and np.all(np.isfinite(y))):
        raise ValueError("The 'X' and 'y' parameters must hold finite values only.")
    if X.shape[0] < 4 * folds:
        raise ValueError(f"The 'X' parameter must hold at least 4 * folds = {4 * folds} rows "
                         f"(two halves of each training fold). Got {X.shape[0]} instead.")
    selection = (selection,) if isinstance(selection, str) else tuple(selection)
    bad = [s for s in selection if s not in SELECTIONS]
    if bad or not selection:
        raise ValueError(f"The 'selection' parameter must hold values of {list(SELECTIONS)}. "
                         f"Got {list(selection)!r} instead.")
    intervals = (intervals,) if isinstance(intervals, str) else tuple(intervals)
    for m in intervals:
        if m == "bias_bound":
            raise ValueError("The 'intervals' parameter must hold 'bias_corrected' or 'clt' "
                             "(the split-half check compares standard errors). Got "
                             "'bias_bound' instead.")
        check_interval_method(m)
    return X, y, forest, folds, selection, intervals


def split_half_agreement(X, y, *, forest=None, folds=5, selection=SELECTIONS,
                         intervals=("bias_corrected", "clt"), level=0.95, random_state=0,
                         progress=True) -> SplitHalfReport:
    """Return the ``SplitHalfReport`` of forests fitted on disjoint halves of each fold.

    For each of ``folds`` folds (seeded, sizes within 1) the other folds' rows are split
    at random into two halves A and B; a clone of ``forest`` is fitted on each, and both
    predict the fold's rows with each method of ``intervals`` (``interval_parts``:
    centre and standard error). See the module docstring for what the ratio and the
    share measure and what they cannot.

    Parameters
    ----------
    X, y : the rows (finite; at least 4 * folds).
    forest : unfitted or fitted LocalLinearForestRegressor whose settings are cloned
        (default: the defaults).
    folds : int >= 2.
    selection : "own", "fixed" or both. "own": each half chooses its correction columns
        and penalty as ``forest`` says. "fixed": one clone fitted on the whole training
        fold chooses them and both halves get that columns list, that numeric penalty (a
        numeric penalty is also the split rule's, so these trees split with it) and its
        bending columns for the bias correction.
    intervals : interval methods read ("bias_corrected", "clt").
    level : the share's nominal level. random_state : int seed of folds, halves and fits.
    progress : bool or ``RunControl``; one step per fit. A ``KeyboardInterrupt`` returns
        the folds completed.
    """
    X, y, forest, folds, selection, intervals = _check_args(X, y, forest, folds, selection,
                                                            intervals)
    level = check_level(level)
    from hedgerow.diagnostics._heldout import fold_assignment
    from hedgerow.inference._intervals import _normal_quantile

    z = _normal_quantile(0.5 + level / 2.0)
    rng = np.random.default_rng(random_state)
    fold = fold_assignment(X.shape[0], folds, rng.integers(2**31 - 1))
    seeds = rng.integers(0, 2**31 - 1, size=(folds, 3))
    fits_per_fold = 2 * len(selection) + ("fixed" in selection)
    bar = progress_bar(folds * fits_per_fold, "split-half agreement", progress)
    rows = []
    done = 0
    try:
        for k in range(folds):
            te = np.flatnonzero(fold == k)
            tr = np.flatnonzero(fold != k)
            perm = np.random.default_rng(seeds[k, 0]).permutation(tr)
            halves = (np.sort(perm[: tr.size // 2]), np.sort(perm[tr.size // 2:]))
            fold_rows = []
            for sel in selection:
                template = clone(forest)
                if sel == "fixed":
                    whole = clone(forest).set_params(random_state=int(seeds[k, 1]))
                    with warnings.catch_warnings():
                        warnings.simplefilter("ignore", RuntimeWarning)
                        whole.fit(X[tr], y[tr])
                    bar.update(1)
                    template.set_params(correction_features=whole.correction_features_.tolist(),
                                        ridge_penalty=float(whole.ridge_penalty_))
                    bending = whole.bending_columns()
                parts = []
                for h, rows_h in enumerate(halves):
                    est = clone(template).set_params(random_state=int(seeds[k, 2]) + h)
                    with warnings.catch_warnings():
                        warnings.simplefilter("ignore", RuntimeWarning)
                        est.fit(X[rows_h], y[rows_h])
                        if sel == "fixed":
                            est = est.with_bending_columns(bending)
                        parts.append({m: est.interval_parts(X[te], m) for m in intervals})
                    if not (sel == selection[-1] and h == 1):
                        bar.update(1)  # the fold's last step is counted once it is kept
                for m in intervals:
                    a, b = parts[0][m], parts[1][m]
                    d = a.centre - b.centre
                    v = a.std**2 + b.std**2
                    ok = np.isfinite(d) & np.isfinite(v) & (v > 0)
                    fold_rows.append({
                        "fold": k, "selection": sel, "interval": m, "n": int(ok.sum()),
                        "ratio": float(np.mean(d[ok] ** 2) / np.mean(v[ok])),
                        "share_within": float(np.mean(np.abs(d[ok]) < z * np.sqrt(v[ok]))),
                        "mean_sq_diff": float(np.mean(d[ok] ** 2)),
                        "mean_pred_var": float(np.mean(v[ok])),
                    })
            rows.extend(fold_rows)  # a fold counts once it is complete
            done += 1
            bar.update(1)
    except KeyboardInterrupt:
        pass
    finally:
        bar.close()
    return SplitHalfReport(frame=pd.DataFrame(rows, columns=_COLUMNS), folds=folds,
                           folds_done=done, level=level)
