"""Effect coverage readout: how often the effect intervals cover, by simulation.

The rows X and the treatment w stay as observed; each replication redraws the outcome
around a known effect function (or a stand-in) and refits the effect forest, so the
readout measures the intervals' behaviour on the design at hand. Caution: decision
support, not advice; effect readings assume unconfoundedness (no diagnostic here checks
it) and overlap; defer to the study design and to domain review.
"""

from __future__ import annotations

import warnings
from dataclasses import dataclass

import numpy as np
import pandas as pd
from scipy.stats import binomtest
from sklearn.base import clone

from hedgerow.diagnostics._coverage import FLAG_OFF_CENTRE, FLAG_TOO_NARROW, run_replications
from hedgerow.diagnostics._heldout import edge_depth
from hedgerow.diagnostics._report import ReportMixin
from hedgerow.diagnostics._verdict import EDGE_BAND

__all__ = ["EffectCoverageReport", "effect_coverage_readout"]

_PART_WORDS = {"all": "overall", "edge": "at the edges", "interior": "in the interior"}

#: Frame columns, as the regression coverage readout's (method is always the effect
#: forest; interval names the interval method).
COLUMNS = ["method", "part", "covered", "n", "coverage", "lower", "upper", "mean_width",
           "interval", "rms_bias", "mean_sd", "sd_across", "coverage_bias_removed", "flag"]

_SURROGATE_NOTE = (
    "surrogate effect: the fitted forest's own effect stands in for the unknown one. It "
    "carries that forest's bias (flattened edges, smoothed steps), so the readout can "
    "show intervals that are too narrow but understates bias the forest shares with the "
    "stand-in."
)


@dataclass(frozen=True)
class EffectCoverageReport(ReportMixin):
    """Effect-interval coverage per interval method and part, and why it misses.

    ``frame``: one row per interval method and part (all, edge, interior) with the
    columns of ``COLUMNS``: covered, n, coverage and its Clopper-Pearson 95% interval
    (lower, upper), mean_width, rms_bias (of the interval centre's mean over
    replications, less the noise of that mean), mean_sd (mean estimated sd), sd_across
    (sd of the centre across replications), coverage_bias_removed (each row's interval
    shifted by its bias estimated from the other replications) and flag.
    ``mode``: "known effect" or "surrogate effect (fitted model)". ``reps_done`` <
    ``reps`` after an interruption (the counts are those of the finished replications).
    """

    frame: pd.DataFrame
    mode: str
    reps: int
    level: float
    reps_done: int | None = None
    _title = "effect coverage readout"

    def to_frame(self) -> pd.DataFrame:
        return self.frame.copy()

    def coverage(self, interval: str | None = None, part: str = "all") -> float:
        """Return the coverage of one interval method (default: the default) in one part."""
        from hedgerow.estimators._effect_forest import DEFAULT_EFFECT_INTERVAL

        f = self.frame
        sel = f[(f["interval"] == (interval or DEFAULT_EFFECT_INTERVAL)) & (f["part"] == part)]
        if sel.empty:
            raise KeyError(f"No coverage row for interval={interval!r}, part={part!r}.")
        return float(sel.iloc[0]["coverage"])

    @property
    def flags(self) -> list[str]:
        """Return "interval: flag" for every flagged row."""
        f = self.frame[self.frame["flag"] != ""]
        return [f"{r.interval} interval: {r.flag}" for r in f.itertuples()]

    def _notes(self):
        from hedgerow.estimators._effect_forest import EFFECT_CAUTION

        done = self.reps if self.reps_done is None else self.reps_done
        notes = [f"{self.mode}; {done} of {self.reps} replications; nominal "
                 f"{100 * self.level:.0f}%"]
        if done < self.reps:
            notes.append("interrupted: partial counts")
        if done < 2:
            notes.append("fewer than 2 replications: no coverage is read (the bias and "
                         "the sd across replications need two)")
        if self.mode.startswith("surrogate"):
            notes.append(_SURROGATE_NOTE)
        notes.extend(self.flags)
        notes.append(f"Caution: {EFFECT_CAUTION}")
        return notes

    def __repr__(self):
        return "\n".join([f"EffectCoverageReport ({self.mode})", *self._notes(),
                          self.frame.to_string(index=False)])


def _summary_rows(method, C, S, H, target, edge, level):
    R = C.shape[0]
    covered = np.abs(C - target) <= H
    # each replication's bias from the others (its own error must not pull the shifted
    # interval onto the truth); C - loo rescaled has one replication's error variance
    loo = (C.sum(axis=0) - C) / (R - 1)
    shifted = np.abs(C - loo) * np.sqrt((R - 1) / R) <= H
    bias = C.mean(axis=0) - target
    across = C.std(axis=0, ddof=1)
    rows = []
    for part, sel in (("all", np.ones_like(edge)), ("edge", edge), ("interior", ~edge)):
        c = covered[:, sel]
        k, m = int(c.sum()), int(c.size)
        row = {"method": "effect forest", "part": part, "covered": k, "n": m,
               "interval": method}
        if m == 0:
            row.update({c: np.nan for c in COLUMNS if c not in row}, flag="")
            rows.append(row)
            continue
        ci = binomtest(k, m).proportion_ci(0.95)
        b2 = np.mean(bias[sel] ** 2) - np.mean(across[sel] ** 2) / R
        cov, cov_s = k / m, float(shifted[:, sel].mean())
        flag = ""
        if ci.high < level:
            off = cov_s - cov >= 0.5 * (level - cov)
            flag = f"{FLAG_OFF_CENTRE if off else FLAG_TOO_NARROW} {_PART_WORDS[part]}"
        row.update(coverage=cov, lower=ci.low, upper=ci.high,
                   mean_width=float(2 * H[:, sel].mean()),
                   rms_bias=float(np.sqrt(max(b2, 0.0))), mean_sd=float(S[:, sel].mean()),
                   sd_across=float(across[sel].mean()), coverage_bias_removed=cov_s,
                   flag=flag)
        rows.append(row)
    return rows


def _effect_replication(task, X, w, mean, resid, eval_idx) -> dict:
    """One replication: redraw the outcome, refit a clone, read every interval method.

    A module-level function of plain inputs, so that a dask worker can run it; the
    result depends on the replication's seed only.
    """
    from hedgerow.estimators._forest import FewBagsWarning

    seq, resample, template, methods, level = task
    rng = np.random.default_rng(seq)
    n = X.shape[0]
    noise = rng.choice(resid, size=n, replace=True) if resample else resid
    y_star = mean + rng.choice([-1.0, 1.0], size=n) * noise
    est = clone(template).set_params(random_state=int(rng.integers(0, 2**31 - 1)))
    out = {}
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", FewBagsWarning)  # the model's own settings
        est.fit(X, y_star, w)
        for m in methods:
            parts = est.effect_interval_parts(X[eval_idx], m)
            out[m] = (parts.centre, parts.std, parts.half_width(level))
    return out


def effect_coverage_readout(model, X, y, treatment, *, truth=None, reps=20, level=0.95,
                            n_eval=200, random_state=0, progress=True,
                            client=None) -> EffectCoverageReport:
    """Return the ``EffectCoverageReport`` of a fitted ``TreatmentEffectForest``.

    Every replication keeps X and the treatment w, draws the outcome
    y* = m(x) + (w - e(x)) tau(x) + v_i r_i with m, e the model's centring fits, tau the
    known effect ``truth(X)`` (or, with ``truth=None``, the model's out-of-bag effect as a
    stand-in), r_i = y_i - [m(x_i) + (w_i - e(x_i)) tau(x_i)] and v Rademacher signs
    (wild bootstrap; with a known effect the residuals are also resampled), refits a clone
    of the model with a new seed and reads every effect interval method at ``n_eval``
    fixed rows. Edge rows: edge depth below ``EDGE_BAND`` in the correction columns.

    Parameters
    ----------
    model : fitted TreatmentEffectForest (its settings are refitted).
    X, y, treatment : the rows it was fitted on.
    truth : callable X -> tau (n,), or None (the surrogate; see the report's note).
    reps : replications (>= 2). level : nominal level in (0, 1).
    n_eval : rows (a fixed random subset) where coverage is counted.
    random_state : int >= 0. The evaluation subset and every replication draw from their
        own child of ``SeedSequence(random_state)``, so replication r is the same whether
        run alone, in a longer run or on a cluster.
    progress : True for a progress bar, False for none, or a ``RunControl`` (a widget
        follows it and may cancel). A ``KeyboardInterrupt`` or a cancel returns the
        counts of the finished replications (``reps_done``; none are read below two).
    client : dask.distributed.Client, optional. One task per replication on its workers
        (the rows are sent once); the report is the same as without it.

    Caution: decision support, not advice; the effect reading assumes unconfoundedness
    (not checked here) and overlap; defer to the study design and to domain review.
    """
    from hedgerow._distributed import check_client
    from hedgerow._validation import check_level
    from hedgerow.estimators._effect_forest import (
        DEFAULT_EFFECT_INTERVAL,
        EFFECT_INTERVAL_METHODS,
        TreatmentEffectForest,
    )
    if not isinstance(model, TreatmentEffectForest) or not hasattr(model, "forest_"):
        raise TypeError(f"The 'model' parameter must be a fitted TreatmentEffectForest. "
                        f"Got {type(model).__name__} instead.")
    level = check_level(level)
    for name, value, low in (("reps", reps, 2), ("n_eval", n_eval, 1)):
        if isinstance(value, bool) or not isinstance(value, int | np.integer) or value < low:
            raise ValueError(f"The '{name}' parameter must be an integer >= {low}. Got "
                             f"{value!r} instead.")
    if isinstance(random_state, bool) or not isinstance(random_state, int | np.integer) or (
            random_state < 0):
        raise ValueError(f"The 'random_state' parameter must be an int >= 0. Got "
                         f"{random_state!r} instead.")
    client = check_client(client)
    X = np.asarray(X, dtype=np.float64)
    y = np.asarray(y, dtype=np.float64).ravel()
    w = np.asarray(treatment, dtype=np.float64).ravel()
    n = model.X_train_.shape[0]
    if X.shape != model.X_train_.shape or y.shape != (n,) or w.shape != (n,):
        raise ValueError(f"The 'X', 'y' and 'treatment' parameters must be the model's "
                         f"training rows ({n} rows, {model.X_train_.shape[1]} columns). "
                         f"Got shapes {X.shape}, {y.shape}, {w.shape} instead.")
    if truth is not None:
        tau = np.asarray(truth(X), dtype=np.float64).ravel()
        if tau.shape != (n,) or not np.all(np.isfinite(tau)):
            raise ValueError("The 'truth' function must return one finite effect per row "
                             "of X.")
        mode = "known effect"
    else:
        tau = model.oob_effect()
        lost = ~np.isfinite(tau)
        if np.any(lost):
            tau[lost] = model.predict_effect(X[lost])
        mode = "surrogate effect (fitted model)"
    mean = model.outcome_fit_ + (w - model.propensity_) * tau
    resid = y - mean
    seqs = np.random.SeedSequence(int(random_state)).spawn(int(reps) + 1)
    eval_idx = np.sort(np.random.default_rng(seqs[0]).choice(n, size=min(n_eval, n),
                                                             replace=False))
    cols = model.correction_features_
    depth, _, _ = edge_depth(X, cols if cols.size else None)
    edge = depth[eval_idx] < EDGE_BAND
    methods = [DEFAULT_EFFECT_INTERVAL] + [m for m in EFFECT_INTERVAL_METHODS
                                           if m != DEFAULT_EFFECT_INTERVAL]
    tasks = [(seq, truth is not None, clone(model), methods, level) for seq in seqs[1:]]
    results = run_replications(_effect_replication, tasks, (X, w, mean, resid, eval_idx),
                               client=client, progress=progress, what="effect replication",
                               desc="effect coverage readout")
    done = sorted(results)  # replication order, whatever order they finished in
    rows = []
    if len(done) >= 2:
        for m in methods:
            C, S, H = (np.stack([results[r][m][k] for r in done]) for k in range(3))
            rows.extend(_summary_rows(m, C, S, H, tau[eval_idx], edge, level))
    return EffectCoverageReport(frame=pd.DataFrame(rows, columns=COLUMNS), mode=mode,
                                reps=int(reps), level=level, reps_done=len(done))
