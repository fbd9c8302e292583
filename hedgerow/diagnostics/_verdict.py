"""Is the local linear correction warranted? Cross-fitted paired errors and a plain answer.

Every number comes from K-fold cross-fitting (seeded, the same folds for every method):
each method is cloned and fitted on the training rows of a fold, so whatever it chooses
from data (ridge penalty, correction columns, bandwidths) is chosen without the rows it is
scored on. The local linear forest is compared with the forests a user would otherwise
fit: a plain honest forest grown on its own (``split_rule="mean"``), scikit-learn's random
forest, and any regressor passed in. The local average on the local linear forest's own
trees stays as a labelled diagnostic row: those trees were split for the correction, so as
a plain forest they are handicapped.
"""

from __future__ import annotations

import numbers
import warnings
from dataclasses import dataclass

import numpy as np
import pandas as pd
from scipy.stats import norm

from hedgerow.diagnostics._heldout import (
    cross_fit_fold,
    edge_depth,
    fold_assignment,
    held_out_predictions,
    same_rows,
)
from hedgerow.diagnostics._report import ReportMixin
from hedgerow.diagnostics._slices import method_label

__all__ = ["Verdict", "verdict", "paired_relative_gain", "carrying_rows", "EDGE_BAND",
           "DECISIONS", "FRAGILE_ROWS", "SKLEARN_FOREST", "FOLD_TREES"]

#: Rows with edge depth below this form the edge band (the outer 10% of the data).
EDGE_BAND = 0.10
#: The decisions the sentence can name (plus "incomplete" and "constant target").
DECISIONS = ("warranted", "no evidence either way", "hurts")
#: A comparison is flagged fragile when this many rows or fewer carry half its difference.
FRAGILE_ROWS = 5
#: scikit-learn's random forest as a user would fit it: 200 trees (twice scikit-learn's
#: default of 100; beyond a couple of hundred trees its held-out error barely moves, common
#: practice, measured against 500 trees in tests/reference/test_verdict_cost.py), leaves
#: of at least 5 rows, every other setting scikit-learn's default (bootstrap, all columns
#: at each split).
SKLEARN_FOREST = {"n_estimators": 200, "min_samples_leaf": 5}
#: At most this many trees grow in each fold's forest of ours (the local linear forest and
#: the plain honest forest; ``fold_trees=``). A finite forest's error exceeds the infinite
#: forest's by the mean single-tree variance over the tree count, the same order for
#: both forests and a small share of the held-out error at 500 trees; the full tree count
#: (2000 by default) is there for the intervals, which the verdict does not use.
FOLD_TREES = 500

LLF = "local linear forest"
PLAIN = "honest forest"
SAME_TREES = "honest forest (same trees, diagnostic)"
SKLEARN = "random forest (scikit-learn)"
PREVIEW = "preview (selection not held out)"


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


def carrying_rows(err_base, err_new) -> tuple[int, float]:
    """Return ``(k, share)``: the fewest rows carrying half the squared-error difference.

    With d_i = err_base_i - err_new_i and D = sum d_i, rows are taken in decreasing order
    of their contribution in the direction of D until they sum to at least |D| / 2; ``share``
    is what those k rows carry, as a share of |D|. ``(0, nan)`` when D is 0 or no row pairs.
    """
    a = np.asarray(err_base, dtype=np.float64)
    b = np.asarray(err_new, dtype=np.float64)
    ok = np.isfinite(a) & np.isfinite(b)
    d = a[ok] - b[ok]
    total = float(d.sum())
    if d.size == 0 or total == 0.0:
        return 0, float("nan")
    c = np.sort(np.sign(total) * d)[::-1]
    cum = np.cumsum(c)
    k = int(np.searchsorted(cum, abs(total) / 2)) + 1
    k = min(k, d.size)
    return k, float(cum[k - 1] / abs(total))


@dataclass(frozen=True)
class Verdict(ReportMixin):
    """Paired comparison of held-out squared errors and the conclusion drawn from it.

    ``errors``: per-row squared held-out errors per method, the row's ``fold`` and its
    ``edge_depth``. ``comparisons``: one row per method the local linear forest is compared
    with: its gain over that method (share of the method's held-out squared error it
    removes; negative = worse) with the interval, overall, in the edge band and in the
    interior; ``mse`` of that method; ``role``: "alternative" (a forest a user would
    otherwise fit, or a regressor passed in ``others``: these decide), "diagnostic" (the
    same-trees local average) or "smoother" (a kernel smoother: shown, and said in
    ``smoother_note``, but the decision weighs the local linear forest against forests, so
    it reads the same with or without smoothers);
    ``rows_for_half`` / ``share_of_half`` (``carrying_rows``) and ``fragile``.
    ``decision``: one of ``DECISIONS``, ``"incomplete"`` or ``"constant target"``.
    ``best_alternative``: the alternative with the lowest held-out error, the one the
    sentence leads with. ``scoring``: ``"cross-fit, K folds"`` or ``PREVIEW``.
    ``folds_done`` of ``folds``; ``data_note``: what was done with a fitted forest's rows.
    ``smoother_note``: the gain against the best kernel smoother, in words ("" without
    smoothers).
    """

    errors: pd.DataFrame
    comparisons: pd.DataFrame
    conclusion: str
    level: float
    decision: str = ""
    best_alternative: str | None = None
    scoring: str = ""
    folds: int = 0
    folds_done: int = 0
    settings: dict | None = None
    data_note: str = ""
    smoother_note: str = ""
    _title = "verdict"

    def to_frame(self) -> pd.DataFrame:
        return self.comparisons.copy()

    def _notes(self):
        notes = [self.conclusion, f"scored by {self.scoring}"]
        if self.smoother_note:
            notes.append(self.smoother_note)
        if self.settings and SKLEARN in self.settings:
            notes.append(f"{SKLEARN}: {self.settings[SKLEARN]}")
        if self.data_note:
            notes.append(self.data_note)
        return notes


# -- the sentence -----------------------------------------------------------------------------
def _smoother_note(comparisons, level):
    """Return the gain against the best kernel smoother in words ("" when none scored)."""
    sm = comparisons[(comparisons["role"] == "smoother") & np.isfinite(comparisons["mse"])]
    if sm.empty:
        return ""
    best = str(sm["mse"].idxmin())
    r = sm.loc[best]
    g, lo, hi = r["gain_all"], r["lower_all"], r["upper_all"]
    if not np.isfinite(g):
        return ""
    pct = f"{100 * level:.0f}%"
    if g >= 0:
        head = (f"lowers held-out error by {_pc(g)} ({pct} interval {_pc(lo, True)} to "
                f"{_pc(hi, True)})")
    else:
        head = (f"raises held-out error by {_pc(-g)} ({pct} interval {_pc(-hi, True)} to "
                f"{_pc(-lo, True)})")
    tail = (" The smoother does better: a forest may not be needed here." if hi < 0 else "")
    return (f"Kernel smoothers (shown, not part of the decision): against the best, the "
            f"{best}, the local linear forest {head}.{tail}")



def _pc(v, signed=False):
    """Return a percentage; one decimal below 10% so a small change does not read as 0."""
    digits = 1 if abs(v) < 0.095 else 0
    return f"{100 * v:+.{digits}f}%" if signed else f"{100 * v:.{digits}f}%"


def _source(errors, best, edge):
    """Return the clause saying where the difference against ``best`` comes from."""
    d = (errors[best] - errors[LLF]).to_numpy()
    ok = np.isfinite(d)
    total = d[ok].sum()
    if total == 0 or not edge[ok].any():
        return ""
    share = d[ok & edge].sum() / total
    band = (f"the edge band (the outer {100 * EDGE_BAND:.0f}% of the data in any corrected "
            f"column: {_pc(edge[ok].mean())} of rows)")
    if share > 0.5:
        return f"; {band} carries {_pc(share)} of the difference"
    return f"; most of the difference comes from the interior ({band} carries {_pc(share)})"


def _conclusion(comparisons, errors, edge, best, level, scoring):
    pct = f"{100 * level:.0f}%"
    lead = "Preview (selection not held out): " if scoring == PREVIEW else ""
    if best is None:
        return "no evidence either way", lead + "Not enough held-out predictions to compare."
    r = comparisons.loc[best]
    g, lo, hi = r["gain_all"], r["lower_all"], r["upper_all"]
    if not np.isfinite(g):
        return "no evidence either way", lead + "Not enough held-out predictions to compare."
    against = f"against the best alternative, the {best}"
    # where a difference comes from means something only once there is one
    where = _source(errors, best, edge) if (lo > 0 or hi < 0) else ""
    if g >= 0:
        interval = f"({pct} interval {_pc(lo, True)} to {_pc(hi, True)})"
        head = f"The local linear forest lowers held-out error by {_pc(g)} {interval} {against}"
    else:  # the interval of the rise, so its ends read in the same sense as the number
        interval = f"({pct} interval {_pc(-hi, True)} to {_pc(-lo, True)})"
        head = f"The local linear forest raises held-out error by {_pc(-g)} {interval} {against}"
    if lo > 0:
        decision, tail = "warranted", "Decision: warranted."
    elif hi < 0:
        decision, tail = "hurts", "Decision: hurts; keep the simpler model."
    else:
        decision, tail = ("no evidence either way",
                          "Decision: no evidence either way; keep the simpler model.")
    parts = [f"{lead}{head}{where}.", tail]
    if r["fragile"]:
        k, share = int(r["rows_for_half"]), r["share_of_half"]
        rows = "1 row carries" if k == 1 else f"{k} rows carry"
        if share > 1:
            parts.append(f"Fragile: {rows} more than the whole difference ({_pc(share)}; "
                         f"the other rows pull the other way).")
        else:
            parts.append(f"Fragile: {rows} {_pc(share)} of the difference.")
    if decision != "warranted" and SAME_TREES in comparisons.index:
        s = comparisons.loc[SAME_TREES]
        if s["lower_all"] > 0:
            parts.append(
                f"It beats only the local average on its own trees, a handicapped baseline "
                f"(those trees are split for the correction): {_pc(s['gain_all'])} "
                f"({pct} interval {_pc(s['lower_all'], True)} to "
                f"{_pc(s['upper_all'], True)}).")
    return decision, " ".join(parts)


# -- checks -----------------------------------------------------------------------------------
def _check_choice(name, value, allowed):
    if not isinstance(value, str) or value not in allowed:
        raise ValueError(f"The '{name}' parameter must be one of {set(allowed)}. "
                         f"Got {value!r} instead.")
    return value


def _check_folds(folds, n):
    if isinstance(folds, bool) or not isinstance(folds, numbers.Integral) or not (
            2 <= int(folds) <= n):
        raise ValueError(f"The 'folds' parameter must be an integer from 2 to the number of "
                         f"rows ({n}). Got {folds!r} instead.")
    return int(folds)


def _as_arrays(X, y):
    try:
        Xa = np.asarray(X, dtype=np.float64)
    except (TypeError, ValueError) as exc:
        raise ValueError(f"The 'X' parameter must be a numeric 2-d array or DataFrame. "
                         f"Got {type(X).__name__} with non-numeric values instead.") from exc
    if Xa.ndim != 2:
        raise ValueError(f"The 'X' parameter must be 2-d (rows x columns). Got an array of "
                         f"shape {Xa.shape} instead.")
    try:
        ya = np.asarray(y, dtype=np.float64).ravel()
    except (TypeError, ValueError) as exc:
        raise ValueError(f"The 'y' parameter must be numeric. Got {type(y).__name__} "
                         f"with non-numeric values instead.") from exc
    if ya.shape[0] != Xa.shape[0]:
        raise ValueError(f"The 'y' parameter must have one value per row of X "
                         f"({Xa.shape[0]}). Got {ya.shape[0]} values instead.")
    if not np.all(np.isfinite(ya)):
        raise ValueError("The 'y' parameter must be finite. Got NaN or infinite values "
                         "instead.")
    return Xa, ya


# -- the methods ------------------------------------------------------------------------------
def _forest_template(forest, X, y, on_new_data, random_state, n_jobs, forest_params):
    """Return (unfitted template, fitted forest on these rows or None, data note, penalty).

    ``penalty``: the value a fitted forest is viewed at (``at_ridge_penalty``) when it
    differs from its own out-of-bag choice; the folds then grow their trees as the forest
    did (``"auto"``) and predict at that value. None otherwise.
    """
    from sklearn.base import clone

    from hedgerow.estimators import LocalLinearForestRegressor

    if forest is None:
        params = {"random_state": random_state, "n_jobs": n_jobs, **forest_params}
        return LocalLinearForestRegressor(**params), None, "", None
    if not isinstance(forest, LocalLinearForestRegressor):
        raise TypeError(f"The 'forest' parameter must be a LocalLinearForestRegressor or "
                        f"None. Got {type(forest).__name__} instead.")
    if forest_params:
        raise TypeError(f"Forest settings {sorted(forest_params)} are given together with a "
                        f"'forest'; set them on the forest instead.")
    template = clone(forest)
    fitted, note, view_penalty = None, "", None
    if hasattr(forest, "ridge_penalty_"):
        if same_rows(forest, X, y):
            fitted = forest
        elif on_new_data == "raise":
            raise ValueError(
                f"The 'X' and 'y' parameters must be the rows the fitted 'forest' was "
                f"trained on (its {forest.X_train_.shape[0]} rows), since "
                f"on_new_data='raise'. Got {np.shape(X)[0]} rows that differ instead; pass "
                f"on_new_data='refit' to score its settings on these rows.")
        else:
            note = (f"The forest passed was fitted on other rows ({forest.X_train_.shape[0]}); "
                    f"its settings were fitted and scored on the {np.shape(X)[0]} rows given.")
        path = forest.ridge_path_
        if isinstance(forest.ridge_penalty, str) and path is not None and (
                forest.ridge_penalty_ != float(
                    path["ridge_penalty"][int(np.nanargmin(path["oob_mse"]))])):
            # a view at a penalty picked by hand: that penalty in every fold
            view_penalty = float(forest.ridge_penalty_)
    if template.random_state is None:
        template.set_params(random_state=random_state)
    if n_jobs is not None:
        template.set_params(n_jobs=n_jobs)
    return template, fitted, note, view_penalty


def _check_fold_trees(value):
    if value is None:
        return None
    if isinstance(value, numbers.Integral) and not isinstance(value, bool) and value >= 1:
        return int(value)
    raise ValueError(f"The 'fold_trees' parameter must be an integer >= 1 or None (the "
                     f"forest's own tree count). Got {value!r} instead.")


def _with_fold_trees(template, fold_trees):
    """Return ``template`` growing at most ``fold_trees`` trees (whole bags), or itself."""
    n = template.n_estimators
    if fold_trees is None or n <= fold_trees:
        return template
    bag = template.trees_per_bag
    k = fold_trees if bag == "auto" else max(int(bag), fold_trees // int(bag) * int(bag))
    if k >= n:
        return template
    from sklearn.base import clone

    return clone(template).set_params(n_estimators=k)


def _plain_template(llf):
    from hedgerow.estimators import HonestForestRegressor

    p = llf.get_params()
    keep = ("n_estimators", "subsample_rate", "trees_per_bag", "honest", "min_samples_leaf",
            "max_features", "max_depth", "random_state", "n_jobs")
    return HonestForestRegressor(**{k: p[k] for k in keep})


def _sklearn_template(random_state, n_jobs):
    from sklearn.ensemble import RandomForestRegressor

    return RandomForestRegressor(**SKLEARN_FOREST, random_state=random_state, n_jobs=n_jobs)


def _specs(template, smoothers, baseline, others, random_state, n_jobs, view_penalty=None):
    """Return ``[(label, template, extra)]`` and the labels of the kernel smoothers."""
    from sklearn.base import clone

    specs = [(LLF, template, {"penalty": view_penalty})]
    if template.split_rule == "mean":
        # the same seed and settings grow the same trees (a test pins it): reuse them
        specs.append((PLAIN, None, f"local average of {LLF}"))
    else:
        specs.append((PLAIN, _plain_template(template), None))
    if baseline:
        specs.append((SKLEARN, _sklearn_template(random_state, n_jobs), None))
    if isinstance(smoothers, str):
        _check_choice("smoothers", smoothers, ("cv",))
        from hedgerow.estimators import LocalLinearRegressor, NadarayaWatsonRegressor

        smoothers = [NadarayaWatsonRegressor(), LocalLinearRegressor()]
    taken = {s[0] for s in specs}
    smoothers = list(smoothers or ())  # once: a generator would be empty the second time
    smoother_labels = []
    for i_m, m in enumerate(smoothers + list(others or ())):
        if not hasattr(m, "fit") or not hasattr(m, "predict"):
            raise TypeError(f"The 'smoothers' and 'others' parameters must hold regressors "
                            f"with fit and predict. Got {type(m).__name__} instead.")
        label, i = method_label(m), 2
        while label in taken:
            label, i = f"{method_label(m)} ({i})", i + 1
        taken.add(label)
        specs.append((label, clone(m), None))
        if i_m < len(smoothers):
            smoother_labels.append(label)
    return specs, smoother_labels


def _settings(specs):
    out = {}
    for label, template, _ in specs:
        if template is None:
            out[label] = "the local linear forest's settings and trees (split_rule='mean')"
        elif label == SKLEARN:
            out[label] = ", ".join(f"{k}={v}" for k, v in SKLEARN_FOREST.items()) + \
                ", other settings scikit-learn's defaults"
        else:
            p = template.get_params(deep=False)
            out[label] = ", ".join(f"{k}={p[k]!r}" for k in sorted(p))
    return out


# -- assembling ---------------------------------------------------------------------------
def _compare(errors, labels, roles, edge, level):
    rows = []
    for name in labels:
        if name == LLF:
            continue
        base, new = errors[name].to_numpy(), errors[LLF].to_numpy()
        row = {"method": name, "role": roles[name], "mse": float(np.nanmean(base))}
        for part, sel in (("all", slice(None)), ("edge", edge), ("interior", ~edge)):
            g, lo, hi = paired_relative_gain(base[sel], new[sel], level)
            row[f"gain_{part}"], row[f"lower_{part}"], row[f"upper_{part}"] = g, lo, hi
        k, share = carrying_rows(base, new)
        row["rows_for_half"], row["share_of_half"] = k, share
        row["fragile"] = bool(0 < k <= FRAGILE_ROWS)
        rows.append(row)
    return pd.DataFrame(rows).set_index("method")


def _constant(y, level, scoring):
    errors = pd.DataFrame({"fold": np.zeros(y.size, dtype=np.int64)})
    cols = ["role", "mse", "gain_all", "lower_all", "upper_all", "gain_edge", "lower_edge",
            "upper_edge", "gain_interior", "lower_interior", "upper_interior",
            "rows_for_half", "share_of_half", "fragile"]
    comp = pd.DataFrame(columns=cols, index=pd.Index([], name="method"))
    return Verdict(errors=errors, comparisons=comp,
                   conclusion="The target is constant: nothing to smooth.", level=level,
                   decision="constant target", scoring=scoring)


def verdict(X, y, *, forest=None, smoothers="cv", baseline=True, others=None, folds=5,
            scoring="cross-fit", on_new_data="refit", level=0.95, random_state=0,
            n_jobs=None, progress=True, client=None, fold_cache=None,
            fold_trees=FOLD_TREES, **forest_params) -> Verdict:
    """Return the ``Verdict`` on whether the local linear correction is warranted.

    Parameters
    ----------
    X, y : the rows to score. They are the rows scored, whatever ``forest`` was fitted on.
    forest : LocalLinearForestRegressor or None
        Its settings are the ones judged (None: ``LocalLinearForestRegressor(**forest_params)``
        with ``random_state`` and ``n_jobs``). A fitted forest whose ridge penalty was set
        (or viewed) at a value keeps that value in every fold; one left at ``"auto"`` has it
        chosen inside each fold.
    smoothers : "cv", None or a list of regressors
        ``"cv"``: Nadaraya-Watson and kernel local linear regression, bandwidths chosen
        inside each training fold. Regressors passed are cloned and refitted per fold.
    baseline : bool
        Add scikit-learn's ``RandomForestRegressor(**SKLEARN_FOREST)``.
    others : list of scikit-learn regressors, optional
        Further alternatives (a boosting model, say), cloned and refitted per fold.
    folds : int, default 5
        Cross-fitting folds; ``random_state`` seeds them, the same folds for every method.
    scoring : {"cross-fit", "preview"}
        ``"preview"`` scores out-of-bag / leave-one-out errors of full-data fits instead:
        fast, but the penalty and columns were chosen on the rows scored, so the sentence
        says "preview (selection not held out)". ``others`` are skipped in a preview.
    on_new_data : {"refit", "raise"}
        What to do when a fitted ``forest`` was trained on rows other than ``X, y``
        (fingerprint: the exact training arrays): ``"refit"`` scores its settings on
        ``X, y`` and says so in ``data_note``; ``"raise"`` raises ``ValueError``.
    progress : bool or RunControl
        One step per method and fold. Ctrl-C or a cancel returns a ``Verdict`` whose
        decision is ``"incomplete"`` (rows of unfinished folds are NaN; no decision drawn).
    client : dask.distributed.Client, optional
        Run the folds as tasks on its workers; the numbers are those of the local run.
    fold_cache : dict, optional
        Kept by the caller between calls (the decision panel keeps one per model): fold
        fits are reused when the rows, folds and a method's settings are unchanged, so
        viewing the forest at another penalty refits nothing. Not used with ``client``.
    fold_trees : int or None, default ``FOLD_TREES`` (500)
        With cross-fitting, each fold's local linear forest and plain honest forest grow
        at most this many trees (rounded down to whole bags when ``trees_per_bag`` is set;
        ``settings`` shows the count grown). None grows the forest's own count. Fewer
        trees add a little Monte Carlo error to both forests alike; the verdict's gains
        and decisions match the full count's on the checks of
        ``tests/reference/test_verdict_cost.py``, at a quarter of the fits' time.
    """
    from hedgerow._validation import check_level

    level = check_level(level)
    _check_choice("scoring", scoring, ("cross-fit", "preview"))
    _check_choice("on_new_data", on_new_data, ("refit", "raise"))
    Xa, ya = _as_arrays(X, y)
    n = ya.size
    if scoring == "cross-fit":
        folds = _check_folds(folds, n)
    template, fitted, note, view_penalty = _forest_template(
        forest, X, y, on_new_data, random_state, n_jobs, forest_params)
    label_scoring = f"cross-fit, {folds} folds" if scoring == "cross-fit" else PREVIEW
    if n > 0 and np.ptp(ya) == 0:
        return _constant(ya, level, label_scoring)
    if client is not None:
        from hedgerow._distributed import check_client

        client = check_client(client)
    fold_trees = _check_fold_trees(fold_trees)
    specs, smoother_labels = _specs(
        _with_fold_trees(template, fold_trees) if scoring == "cross-fit" else template,
        smoothers, baseline, others if scoring == "cross-fit" else None, random_state,
        n_jobs, view_penalty)
    roles = {label: "alternative" for label, _, _ in specs}
    roles[SAME_TREES] = "diagnostic"
    for label in smoother_labels:
        roles[label] = "smoother"
    labels = [LLF, SAME_TREES] + [s[0] for s in specs[1:]]
    if scoring == "preview":
        preds, cols = _preview(X, ya, template, fitted, specs, view_penalty)
        fold = np.zeros(n, dtype=np.int64)
        done, folds = 1, 1
    else:
        fold = fold_assignment(n, folds, random_state)
        cache = None
        if fold_cache is not None and client is None:
            from hedgerow._cache import array_key

            cache = fold_cache.setdefault((array_key(Xa), array_key(ya), folds, str(
                random_state)), {})
        results = _run_folds(X, ya, fold, folds, specs, progress, client, cache)
        done = len(results)
        preds = {label: np.full(n, np.nan) for label in labels}
        chosen = np.zeros(Xa.shape[1])
        for r in results.values():
            for label in labels:
                src = f"_local_average {LLF}" if label == SAME_TREES else label
                preds[label][r["rows"]] = r[src]
            chosen[r["correction_features"]] += 1
        # the edge band is measured in the columns most folds corrected on
        cols = np.flatnonzero(chosen >= max(1, done) / 2) if done else None
        if cols is not None and cols.size == 0:
            cols = None
    depth, _, _ = edge_depth(Xa, cols)
    edge = depth < EDGE_BAND
    errors = pd.DataFrame({k: (ya - preds[k]) ** 2 for k in labels})
    errors["fold"] = fold
    errors["edge_depth"] = depth
    comparisons = _compare(errors, labels, roles, edge, level)
    alts = comparisons[(comparisons["role"] == "alternative") & np.isfinite(comparisons["mse"])]
    best = None if alts.empty else str(alts["mse"].idxmin())
    if done < folds:
        decision = "incomplete"
        conclusion = (f"Incomplete: stopped after {done} of {folds} folds; no decision is "
                      f"drawn (the numbers below cover the finished folds only).")
    else:
        decision, conclusion = _conclusion(comparisons, errors, edge, best, level,
                                           label_scoring)
    return Verdict(errors=errors, comparisons=comparisons, conclusion=conclusion,
                   level=level, decision=decision, best_alternative=best,
                   scoring=label_scoring, folds=folds, folds_done=done,
                   settings=_settings(specs), data_note=note,
                   smoother_note=_smoother_note(comparisons, level))


def _run_folds(X, y, fold, folds, specs, progress, client, cache=None):
    """Return ``{k: cross_fit_fold(k, ...)}`` of the folds finished before any interrupt."""
    from hedgerow._progress import progress_bar

    results = {}
    bar = progress_bar(folds * len(specs), "verdict: cross-fitting", progress)
    try:
        if client is None:
            for k in range(folds):
                results[k] = cross_fit_fold(k, X, y, fold, specs, step=bar.update,
                                            cache=cache)
                bar.update(1)
        else:
            from hedgerow._distributed import run_tasks

            def collect(k, r):
                results[k] = r
                bar.update(len(specs))

            run_tasks(client, cross_fit_fold, list(range(folds)),
                      shared=(X, y, fold, specs), what="verdict fold", on_result=collect)
    except KeyboardInterrupt:
        pass  # the finished folds are kept; the verdict says it is incomplete
    finally:
        bar.close()
    return results


def _preview(X, y, template, fitted, specs, view_penalty):
    """Return out-of-bag / leave-one-out predictions of full-data fits (selection not held out)."""
    from sklearn.base import clone

    with warnings.catch_warnings():
        warnings.simplefilter("ignore", RuntimeWarning)
        llf = fitted if fitted is not None else clone(template).fit(X, y)
        preds = {LLF: llf.oob_predict(ridge_penalty=view_penalty),
                 SAME_TREES: llf.oob_local_average()}
        for label, tmpl, _ in specs[1:]:
            if tmpl is None:
                preds[label] = preds[SAME_TREES]
            elif label == SKLEARN:
                rf = clone(tmpl).set_params(oob_score=True).fit(X, y)
                preds[label] = rf.oob_prediction_.ravel()
            else:
                preds[label] = held_out_predictions(clone(tmpl).fit(X, y))
    return preds, llf.correction_features_
