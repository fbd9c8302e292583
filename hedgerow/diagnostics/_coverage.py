"""Coverage readout: how often the intervals cover, by simulation around the data."""

from __future__ import annotations

import warnings
from dataclasses import dataclass

import numpy as np
import pandas as pd
from scipy.stats import binomtest
from sklearn.base import clone

from hedgerow._progress import progress_bar
from hedgerow.diagnostics._heldout import edge_depth
from hedgerow.diagnostics._report import ReportMixin
from hedgerow.diagnostics._verdict import EDGE_BAND

__all__ = ["FLAG_OFF_CENTRE", "FLAG_TOO_NARROW", "CoverageReport", "coverage_readout"]


#: Words of the flags (the repr, the flag column, the tuning view and the report).
FLAG_OFF_CENTRE = "under-covers: off centre"
FLAG_TOO_NARROW = "under-covers: too narrow"
_PART_WORDS = {"all": "overall", "edge": "at the edges", "interior": "in the interior"}

#: Frame columns (the first eight are those of the first readout; callers rely on them).
COLUMNS = ["method", "part", "covered", "n", "coverage", "lower", "upper", "mean_width",
           "interval", "rms_bias", "mean_sd", "sd_across", "coverage_bias_removed", "flag"]


@dataclass(frozen=True)
class CoverageReport(ReportMixin):
    """Interval coverage per forest, interval method and part, and why it misses.

    ``frame`` columns: method (the forest), part (all, edge, interior), covered, n,
    coverage, lower, upper (Clopper-Pearson 95% interval of the coverage), mean_width,
    interval (the interval method, ``predict_interval(method=...)``), rms_bias (root mean
    square over the evaluation rows of the interval centre's mean over replications minus
    the truth, less the noise of that mean, sd^2 / R), mean_sd (mean little-bags standard
    error), sd_across (mean over rows of the centre's standard deviation across
    replications), coverage_bias_removed (coverage of the same intervals shifted by each
    row's bias, estimated from the other replications; needs >= 2 replications) and flag
    ("" or words such as "under-covers: off centre at the edges"). A coverage whose
    binomial interval lies below the nominal level is flagged "off centre" when removing
    the bias recovers at least half of the shortfall, else "too narrow".

    ``mode`` is "known truth", "surrogate truth (fitted model)" or "surrogate truth
    (additive spline)". ``reps_done`` < ``reps`` after an interruption.
    """

    frame: pd.DataFrame
    mode: str
    reps: int
    reps_done: int
    level: float
    _title = "coverage readout"

    def to_frame(self) -> pd.DataFrame:
        return self.frame.copy()

    def coverage(self, method: str, part: str = "all", interval: str | None = None) -> float:
        """Return the coverage of one forest's interval (default method) in one part."""
        return float(self._row(method, part, interval)["coverage"])

    def _row(self, method, part, interval):
        from hedgerow.estimators._forest import DEFAULT_INTERVAL

        f = self.frame
        sel = f[(f["method"] == method) & (f["part"] == part)
                & (f["interval"] == (interval or DEFAULT_INTERVAL))]
        if sel.empty:
            raise KeyError(f"No coverage row for method={method!r}, part={part!r}, "
                           f"interval={interval!r}.")
        return sel.iloc[0]

    @property
    def flags(self) -> list[str]:
        """Return "forest, interval: flag" for every flagged row."""
        f = self.frame[self.frame["flag"] != ""]
        return [f"{r.method}, {r.interval} interval: {r.flag}" for r in f.itertuples()]

    def _notes(self):
        notes = [f"{self.mode}; {self.reps_done} of {self.reps} replications; nominal "
                 f"{100 * self.level:.0f}%"]
        if self.reps_done < self.reps:
            notes.append("interrupted: partial counts")
        if self.mode.startswith("surrogate"):
            notes.append(_SURROGATE_NOTE)
        notes.extend(self.flags)
        if self.reps_done < 2:
            notes.append("fewer than 2 replications: bias and sd across replications "
                         "cannot be estimated")
        return notes


_SURROGATE_NOTE = (
    "surrogate truth: the readout measures the intervals around a stand-in surface, not "
    "the unknown truth. It can show a variance problem (too narrow) and bias that the "
    "stand-in shares with the truth; it cannot show bias the stand-in smooths away. A "
    "stand-in fitted by the forest under test carries that forest's own bias (its "
    "edges are flattened already), so it understates the bias; the additive spline does "
    "not share the forest's bias but misses interactions between columns."
)


def _seed_sequence(random_state) -> np.random.SeedSequence:
    if isinstance(random_state, np.random.SeedSequence):
        return random_state
    if random_state is None or (
        isinstance(random_state, int | np.integer)
        and not isinstance(random_state, bool) and random_state >= 0
    ):
        return np.random.SeedSequence(random_state)
    raise ValueError(
        f"The 'random_state' parameter must be None, an int >= 0 or a "
        f"numpy.random.SeedSequence. Got {random_state!r} instead."
    )


def _as_rows(X, names):
    # the models were fitted with column names: pass them, so that scikit-learn raises no
    # "X does not have valid feature names" warning from the library's own calls
    return X if names is None else pd.DataFrame(X, columns=names)


def _replication(task, X, mean, resid, eval_idx) -> dict:
    """Return ``{(forest, method): (centre, std, half-width)}`` at the evaluation rows.

    ``task`` is ``(seed sequence, known truth?, {forest: unfitted estimator}, level,
    column names or None)``. Everything random comes from the replication's own seed
    sequence, so a replication gives the same numbers wherever and in whatever order it
    runs.
    """
    from hedgerow.estimators._forest import INTERVAL_METHODS, FewBagsWarning

    seq, known_truth, templates, level, names = task
    rng = np.random.default_rng(seq)
    n = X.shape[0]
    signs = rng.choice([-1.0, 1.0], size=n)
    noise = rng.choice(resid, size=n, replace=True) if known_truth else resid
    y_star = mean + signs * noise
    seed = int(rng.integers(0, 2**31 - 1))
    Xf, Xe = _as_rows(X, names), _as_rows(X[eval_idx], names)
    out = {}
    for name, template in templates.items():
        est = clone(template).set_params(random_state=seed)
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", RuntimeWarning)
            # the refits have the model's own settings: its fit already said so
            warnings.simplefilter("ignore", FewBagsWarning)
            est.fit(Xf, y_star)
            for method in INTERVAL_METHODS:
                parts = est.interval_parts(Xe, method)
                out[(name, method)] = (parts.centre, parts.std, parts.half_width(level))
    return out


def _additive_spline_surrogate(X, y):
    """Return the fitted values of an additive cubic spline (ridge by cross-validation).

    Not the method under test: a global smoother whose curvature at the edges is its own
    (a forest-fitted stand-in has the forest's edges flattened already). It misses
    interactions between columns, whose signal then counts as noise.
    """
    from sklearn.linear_model import RidgeCV
    from sklearn.pipeline import make_pipeline
    from sklearn.preprocessing import SplineTransformer, StandardScaler

    model = make_pipeline(StandardScaler(), SplineTransformer(n_knots=6, degree=3),
                          RidgeCV(alphas=np.logspace(-4, 3, 15)))
    return model.fit(X, y).predict(X)


def _summarise(results, done, templates, target, edge, level):
    from hedgerow.estimators._forest import DEFAULT_INTERVAL, INTERVAL_METHODS

    methods = [DEFAULT_INTERVAL] + [m for m in INTERVAL_METHODS if m != DEFAULT_INTERVAL]
    rows = []
    R = len(done)
    for name in templates:
        for method in methods:
            C = np.stack([results[r][(name, method)][0] for r in done])
            S = np.stack([results[r][(name, method)][1] for r in done])
            H = np.stack([results[r][(name, method)][2] for r in done])
            covered = np.abs(C - target) <= H
            if R >= 2:
                # each replication's bias from the others, so that its own error does not
                # pull the shifted interval onto the truth
                # C - loo has variance sd^2 * R / (R - 1); rescaled, it has the variance
                # of one replication's error, so only the bias is taken away
                loo = (C.sum(axis=0) - C) / (R - 1)
                shifted = np.abs(C - loo) * np.sqrt((R - 1) / R) <= H
                bias = C.mean(axis=0) - target
                across = C.std(axis=0, ddof=1)
            else:
                shifted = np.full(C.shape, np.nan)
                bias = across = np.full(C.shape[1], np.nan)
            for part, sel in (("all", np.ones_like(edge)), ("edge", edge), ("interior", ~edge)):
                c = covered[:, sel]
                k, m = int(c.sum()), int(c.size)
                ci = binomtest(k, m).proportion_ci(0.95) if m else None
                row = {"method": name, "part": part, "covered": k, "n": m,
                       "coverage": k / m if m else np.nan,
                       "lower": ci.low if ci else np.nan,
                       "upper": ci.high if ci else np.nan,
                       "mean_width": float(2 * H[:, sel].mean()) if m else np.nan,
                       "interval": method}
                if m and R >= 2:
                    ks = int(shifted[:, sel].sum())
                    # the mean over R replications still carries sd^2 / R of noise: take
                    # it out, so that the column is the bias, not the noise of its estimate
                    b2 = np.mean(bias[sel] ** 2) - np.mean(across[sel] ** 2) / R
                    row.update(rms_bias=float(np.sqrt(max(b2, 0.0))),
                               mean_sd=float(S[:, sel].mean()),
                               sd_across=float(across[sel].mean()),
                               coverage_bias_removed=ks / m)
                else:
                    row.update(rms_bias=np.nan, mean_sd=float(S[:, sel].mean()) if m
                               else np.nan, sd_across=np.nan, coverage_bias_removed=np.nan)
                flag = ""
                if ci is not None and ci.high < level:
                    # off centre when taking the bias away recovers at least half of
                    # the shortfall; otherwise the width is what is missing
                    cov, cov_s = k / m, row["coverage_bias_removed"]
                    off = bool(np.isfinite(cov_s) and cov_s - cov >= 0.5 * (level - cov))
                    flag = f"{FLAG_OFF_CENTRE if off else FLAG_TOO_NARROW} {_PART_WORDS[part]}"
                row["flag"] = flag
                rows.append(row)
    return pd.DataFrame(rows, columns=COLUMNS)


def run_replications(fn, tasks, shared, *, client, progress, what, desc) -> dict:
    """Return ``{r: fn(tasks[r], *shared)}`` for the replications that finished.

    In this process in order, or one task per replication on the dask cluster of
    ``client``; ``progress`` as in ``progress_bar`` (a bar, none, or a ``RunControl``). A
    ``KeyboardInterrupt`` or a cancel stops the run (outstanding cluster tasks are
    cancelled) and the finished replications are returned.
    """
    from hedgerow._distributed import run_tasks

    results = {}
    bar = progress_bar(len(tasks), desc, progress)

    def finished(r, value):
        results[r] = value
        bar.update(1)

    try:
        if client is None:
            for r, task in enumerate(tasks):
                finished(r, fn(task, *shared))
        else:
            run_tasks(client, fn, tasks, shared=shared, what=what, on_result=finished)
    except KeyboardInterrupt:
        pass
    finally:
        bar.close()
    return results


def coverage_readout(model, X=None, y=None, *, truth=None, reps=20, level=0.95,
                     n_eval=200, progress=True, random_state=0, client=None,
                     surrogate="model") -> CoverageReport:
    """Return the ``CoverageReport`` of a fitted local linear forest and its plain forest.

    Every interval method (``predict_interval(method=...)``) of both forests is read from
    the same fits.

    Parameters
    ----------
    model : fitted LocalLinearForestRegressor; it and an ``HonestForestRegressor`` with
        the same forest settings are refitted in every replication.
    X, y : the rows (default: the model's training rows).
    truth : callable X -> mean, or None. With it, each replication redraws the noise
        (residuals y - truth(X) resampled with replacement, with random signs) around the
        truth. Without it a surrogate stands in for the truth and each replication redraws
        y* = s(X) + v_i r_i with r = y - s(X) and v Rademacher signs (wild bootstrap).
    surrogate : {"model", "additive spline"}, default="model". The stand-in s when truth
        is None. "model": the fitted local linear forest, the method under test. It
        carries the forest's own bias (its edges are already flattened), so the bias the
        readout measures around it understates the bias around the real truth: the
        readout can show intervals that are too narrow, not bias the model smooths away.
        "additive spline": cubic splines per column with a cross-validated ridge
        (scikit-learn ``SplineTransformer`` + ``RidgeCV``), a smoother that does not share
        the forest's bias; it misses interactions between columns (their signal becomes
        noise), so on designs driven by interactions its verdict can differ.
    reps : replications (>= 1; >= 2 for the bias and sd columns). n_eval : rows (a fixed
        random subset) where coverage is counted. level : nominal level.
    random_state : None, int >= 0 or numpy SeedSequence. The evaluation subset and every
        replication draw from their own child of ``SeedSequence(random_state)`` (child 0:
        the subset, child r: replication r), so replication r is the same whether run
        alone, in a longer run or on another machine.
    client : dask.distributed.Client, optional. Run one task per replication on its
        workers (the rows are sent once); the report is the same as without it.
    A ``KeyboardInterrupt`` returns the counts of the completed replications (and cancels
    the outstanding tasks on a cluster).
    """
    from hedgerow._distributed import check_client
    from hedgerow.diagnostics._checks import check_count, check_model
    from hedgerow.estimators import HonestForestRegressor, LocalLinearForestRegressor

    check_model(model, "model", (LocalLinearForestRegressor,))
    n_eval = check_count("n_eval", n_eval)
    if isinstance(reps, bool) or not isinstance(reps, int | np.integer) or reps < 1:
        raise ValueError(f"The 'reps' parameter must be an integer >= 1. Got {reps!r} instead.")
    if surrogate not in ("model", "additive spline"):
        raise ValueError(f"The 'surrogate' parameter must be one of ['model', 'additive "
                         f"spline']. Got {surrogate!r} instead.")
    root = _seed_sequence(random_state)
    client = check_client(client)
    names = getattr(model, "feature_names_in_", None)
    names = None if names is None else list(names)
    X = np.asarray(model.X_train_ if X is None else X, dtype=np.float64)
    y = np.asarray(model.y_train_ if y is None else y, dtype=np.float64).ravel()
    seqs = root.spawn(int(reps) + 1)
    n = X.shape[0]
    eval_idx = np.sort(np.random.default_rng(seqs[0]).choice(n, size=min(n_eval, n),
                                                             replace=False))
    if truth is not None:
        mean = np.asarray(truth(X), dtype=np.float64).ravel()
        if mean.shape != y.shape or not np.all(np.isfinite(mean)):
            raise ValueError("The 'truth' function must return one finite value per row of X.")
        mode = "known truth"
    elif surrogate == "model":
        mean = model.predict(_as_rows(X, names))
        mode = "surrogate truth"
    else:
        mean = _additive_spline_surrogate(X, y)
        mode = "surrogate truth (additive spline)"
    resid = y - mean
    depth, _, _ = edge_depth(X, model.correction_features_)
    edge = depth[eval_idx] < EDGE_BAND
    params = model.get_params()
    forest_keys = HonestForestRegressor().get_params().keys()
    templates = {
        "local linear forest": clone(model),
        "honest forest": HonestForestRegressor(**{k: params[k] for k in forest_keys}),
    }
    tasks = [(seq, truth is not None, templates, level, names) for seq in seqs[1:]]
    results = run_replications(_replication, tasks, (X, mean, resid, eval_idx),
                               client=client, progress=progress, what="replication",
                               desc="coverage readout")
    done = sorted(results)  # replication order, whatever order they finished in
    if done:
        frame = _summarise(results, done, templates, mean[eval_idx], edge, level)
    else:
        frame = pd.DataFrame(columns=COLUMNS)
    return CoverageReport(frame=frame, mode=mode, reps=int(reps), reps_done=len(done),
                          level=level)
