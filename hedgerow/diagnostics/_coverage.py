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

__all__ = ["CoverageReport", "coverage_readout"]


@dataclass(frozen=True)
class CoverageReport(ReportMixin):
    """Interval coverage per method, overall / edge band / interior, with binomial CIs.

    ``frame`` columns: method, part (all, edge, interior), covered, n, coverage, lower,
    upper (Clopper-Pearson 95% interval of the coverage), mean_width. ``mode`` is
    "known truth" or "surrogate truth" (the fitted local linear forest taken as the truth,
    responses redrawn with wild-bootstrap residuals). ``reps_done`` < ``reps`` after an
    interruption.
    """

    frame: pd.DataFrame
    mode: str
    reps: int
    reps_done: int
    level: float
    _title = "coverage readout"

    def to_frame(self) -> pd.DataFrame:
        return self.frame.copy()

    def coverage(self, method: str, part: str = "all") -> float:
        """Return the coverage of one method in one part."""
        f = self.frame
        return float(f[(f["method"] == method) & (f["part"] == part)]["coverage"].iloc[0])

    def _notes(self):
        notes = [f"{self.mode}; {self.reps_done} of {self.reps} replications; nominal "
                 f"{100 * self.level:.0f}%"]
        if self.reps_done < self.reps:
            notes.append("interrupted: partial counts")
        return notes


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


def _replication(task, X, mean, resid, eval_idx) -> dict:
    """Return ``{method: (covered, width)}`` at the evaluation rows for one replication.

    ``task`` is ``(seed sequence, known truth?, {method: unfitted estimator}, level)``.
    Everything random comes from the replication's own seed sequence, so a replication
    gives the same numbers wherever and in whatever order it runs.
    """
    seq, known_truth, templates, level = task
    rng = np.random.default_rng(seq)
    n = X.shape[0]
    signs = rng.choice([-1.0, 1.0], size=n)
    noise = rng.choice(resid, size=n, replace=True) if known_truth else resid
    y_star = mean + signs * noise
    seed = int(rng.integers(0, 2**31 - 1))
    target = mean[eval_idx]
    out = {}
    for name, template in templates.items():
        est = clone(template).set_params(random_state=seed)
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", RuntimeWarning)
            est.fit(X, y_star)
        lo, hi = est.predict_interval(X[eval_idx], level=level)
        out[name] = ((lo <= target) & (target <= hi), hi - lo)
    return out


def coverage_readout(model, X=None, y=None, *, truth=None, reps=20, level=0.95,
                     n_eval=200, progress=True, random_state=0, client=None) -> CoverageReport:
    """Return the ``CoverageReport`` of a fitted local linear forest and its plain forest.

    Parameters
    ----------
    model : fitted LocalLinearForestRegressor; it and an ``HonestForestRegressor`` with
        the same forest settings are refitted in every replication.
    X, y : the rows (default: the model's training rows).
    truth : callable X -> mean, or None. With it, each replication redraws the noise
        (residuals y - truth(X) resampled with replacement, with random signs) around the
        truth. Without it, the fitted model is the surrogate truth and each replication
        redraws y* = f(X) + v_i r_i with r the model's residuals and v Rademacher signs
        (wild bootstrap).
    reps : replications (>= 1). n_eval : rows (a fixed random subset) where coverage is
        counted. level : nominal level.
    random_state : None, int >= 0 or numpy SeedSequence. The evaluation subset and every
        replication draw from their own child of ``SeedSequence(random_state)`` (child 0:
        the subset, child r: replication r), so replication r is the same whether run
        alone, in a longer run or on another machine.
    client : dask.distributed.Client, optional. Run one task per replication on its
        workers (the rows are sent once); the report is the same as without it.
    A ``KeyboardInterrupt`` returns the counts of the completed replications (and cancels
    the outstanding tasks on a cluster).
    """
    from hedgerow._distributed import check_client, run_tasks
    from hedgerow.diagnostics._checks import check_count, check_model
    from hedgerow.estimators import HonestForestRegressor, LocalLinearForestRegressor

    check_model(model, "model", (LocalLinearForestRegressor,))
    n_eval = check_count("n_eval", n_eval)
    if isinstance(reps, bool) or not isinstance(reps, int | np.integer) or reps < 1:
        raise ValueError(f"The 'reps' parameter must be an integer >= 1. Got {reps!r} instead.")
    root = _seed_sequence(random_state)
    client = check_client(client)
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
    else:
        from hedgerow.diagnostics._slices import _frame_like

        mean = model.predict(_frame_like(model, X))  # the fitted names: no sklearn warning
        mode = "surrogate truth"
    resid = y - mean
    depth, _, _ = edge_depth(X, model.correction_features_)
    edge = depth[eval_idx] < 0.10
    params = model.get_params()
    forest_keys = HonestForestRegressor().get_params().keys()
    templates = {
        "local linear forest": clone(model),
        "honest forest": HonestForestRegressor(**{k: params[k] for k in forest_keys}),
    }
    tasks = [(seq, truth is not None, templates, level) for seq in seqs[1:]]
    results = {}
    bar = progress_bar(reps, "coverage readout", progress)

    def finished(r, value):
        results[r] = value
        bar.update(1)

    try:
        if client is None:
            for r, task in enumerate(tasks):
                finished(r, _replication(task, X, mean, resid, eval_idx))
        else:
            run_tasks(client, _replication, tasks, shared=(X, mean, resid, eval_idx),
                      what="replication", on_result=finished)
    except KeyboardInterrupt:
        pass
    finally:
        bar.close()
    done = sorted(results)  # replication order, whatever order they finished in
    rows = []
    for name in templates:
        if not done:
            continue
        c = np.concatenate([results[r][name][0] for r in done])
        w = np.concatenate([results[r][name][1] for r in done])
        e = np.tile(edge, len(done))
        for part, sel in (("all", np.ones_like(e)), ("edge", e), ("interior", ~e)):
            k, m = int(c[sel].sum()), int(sel.sum())
            ci = binomtest(k, m).proportion_ci(0.95) if m else None
            rows.append({"method": name, "part": part, "covered": k, "n": m,
                         "coverage": k / m if m else np.nan,
                         "lower": ci.low if ci else np.nan, "upper": ci.high if ci else np.nan,
                         "mean_width": float(w[sel].mean()) if m else np.nan})
    frame = pd.DataFrame(rows, columns=["method", "part", "covered", "n", "coverage", "lower",
                                        "upper", "mean_width"])
    return CoverageReport(frame=frame, mode=mode, reps=int(reps), reps_done=len(done),
                          level=level)
