"""The state behind the effect explorer: one fitted effect forest, a probe, a column.

Plain Python (traitlets, no widgets): tests drive it without a browser. Every number it
holds comes from ``hedgerow.diagnostics`` (``effect_probe``, ``overlap_profile``,
``effect_verdict``, ``effect_slices``, ``effect_edges``) or the estimator's own methods.
The effect verdict (several cross-fitted folds) runs off the UI thread on the session's
:class:`~hedgerow.widgets._runner.BackgroundRunner`, the regression session's runner.
"""

from __future__ import annotations

import numpy as np
import traitlets as t

from hedgerow import diagnostics as D
from hedgerow._progress import RunControl
from hedgerow.widgets._runner import BackgroundRunner, Job, current_loop, run_on_loop

__all__ = ["EffectSession"]

#: Kind of the runner's job that computes the effect verdict.
VERDICT_JOB = "effect verdict"
#: Kind of the runner's job that computes the effect coverage readout.
COVERAGE_JOB = "effect coverage"


class EffectSession(t.HasTraits):
    """A fitted ``TreatmentEffectForest`` on (X, y, treatment) and what the views show.

    ``probe`` (d,) and ``feature`` (column index) drive the probe view;
    ``verdict_status`` is ``"not run"``, ``"running"``, ``"done"``, ``"cancelled"`` or
    ``"failed"``, with ``verdict_progress`` (folds done, folds) while it runs.
    ``truth``: a known effect function (invented data only, e.g.
    ``hedgerow.datasets.trial_effect_truth``) drawn in the effect slices; None for none.
    """

    probe = t.Any(help="The probe point, one value per column.")
    feature = t.Int(0, help="Index of the column the probe and slice views draw along.")
    verdict_status = t.Unicode("not run", help="State of the effect verdict: 'not run', "
                               "'running', 'done', 'cancelled' or 'failed'.")
    verdict_progress = t.Tuple((0, 0), help="(folds done, folds) of the verdict running "
                               "or last run.")
    verdict_message = t.Unicode("", help="Error of the last verdict run that failed ('' "
                                "once a new run starts).")
    coverage_status = t.Unicode("not run", help="State of the effect coverage readout, as "
                                "verdict_status.")
    coverage_progress = t.Tuple((0, 0), help="(replications done, replications) of the "
                                "coverage readout running or last run.")
    coverage_message = t.Unicode("", help="Error of the last coverage run that failed.")

    def __init__(self, X, y, treatment, *, model=None, verdict_folds=5,
                 verdict_fold_trees=D.EFFECT_FOLD_TREES, random_state=0, truth=None,
                 coverage_reps=12, coverage_rows=100, **forest_params):
        super().__init__()
        from hedgerow.estimators import TreatmentEffectForest

        # checked before any fit: a bad value would otherwise only show when
        # the verdict is asked for, under the diagnostics function's own parameter name
        for name, value, none_ok, low in (
                ("verdict_folds", verdict_folds, False, 2),
                ("verdict_fold_trees", verdict_fold_trees, True, 2),
                ("coverage_reps", coverage_reps, False, 2),
                ("coverage_rows", coverage_rows, False, 1)):
            if value is None and none_ok:
                continue
            if isinstance(value, bool) or not isinstance(value, int | np.integer) or \
                    value < low:
                allowed = (f"None or an integer >= {low}" if none_ok
                           else f"an integer >= {low}")
                raise ValueError(f"The '{name}' parameter must be {allowed}. Got {value!r} "
                                 f"instead.")

        if model is None:
            params = {"n_estimators": 256, "random_state": random_state, **forest_params}
            model = TreatmentEffectForest(**params).fit(X, y, treatment)
        elif forest_params:
            raise ValueError(f"Pass forest settings or a fitted 'model', not both. Got "
                             f"model and {sorted(forest_params)}.")
        D._effect._require_effect_model(model)
        if truth is not None and not callable(truth):
            raise TypeError(f"The 'truth' parameter must be None or a callable X -> effects. "
                            f"Got {type(truth).__name__} instead.")
        from hedgerow._validation import check_predict_data

        Xc = np.asarray(check_predict_data(model, X), dtype=np.float64)
        if Xc.shape != model.X_train_.shape or not np.array_equal(Xc, model.X_train_) or \
                not np.array_equal(np.asarray(treatment, dtype=np.float64).ravel(),
                                   model.treatment_):
            raise ValueError("The 'model' parameter must be fitted on these X and treatment "
                             "(or pass model=None to fit one).")
        self.model = model
        self.X, self.y, self.treatment = X, y, treatment
        self.columns = tuple(D._effect._column_names(model))
        self.verdict_folds = verdict_folds
        self.verdict_fold_trees = verdict_fold_trees
        self.coverage_reps = coverage_reps
        self.coverage_rows = coverage_rows
        self.random_state = random_state
        self._verdict = None
        self._coverage = None
        self._closed = False
        self._loop = current_loop()
        self._runner = BackgroundRunner(self._published, self._on_ui)
        self._oob = None
        self.truth = truth
        self._slices = None  # (key, report) of the last effect slices
        self._edges = {}  # level -> effect edges (the model never changes here)
        self.probe = D.probe_anchor(model.X_train_)

    # -- the probe ---------------------------------------------------------------------------
    @t.validate("probe")
    def _check_probe(self, proposal):
        return D.check_probe_point(self.model, proposal["value"])[0].copy()

    @t.validate("feature")
    def _check_feature(self, proposal):
        return D.resolve_feature(self.model, proposal["value"])

    def set_probe_value(self, column, value):
        """Set one column of the probe (name or index) to ``value``."""
        j = D.resolve_feature(self.model, column)
        x = np.array(self.probe, dtype=np.float64)
        x[j] = float(value)
        self.probe = x

    def probe_report(self, level=0.95):
        """Return ``effect_probe`` at the current probe and column."""
        return D.effect_probe(self.model, self.probe, feature=self.feature, level=level)

    def probe_sketch(self, value):
        """Return ``effect_probe_sketch`` with the probe's shown column at ``value``.

        The weights, the corrected effect and the local effect line there, the probe's
        other coordinates as they are; ``probe`` does not change. Not cached: drawn while
        the probe is dragged, each point once.
        """
        x = np.array(self.probe, dtype=np.float64)
        x[self.feature] = float(value)
        return D.effect_probe_sketch(self.model, x, feature=self.feature)

    def oob_effects(self):
        """Return the training rows' out-of-bag effects (computed once)."""
        if self._oob is None:
            self._oob = self.model.oob_effect()
        return self._oob

    def slice_report(self, level=0.95):
        """Return ``effect_slices`` along ``feature`` at the current probe (last one kept)."""
        key = (np.asarray(self.probe, dtype=np.float64).tobytes(), int(self.feature),
               float(level))
        if self._slices is None or self._slices[0] != key:
            rep = D.effect_slices(self.model, self.probe, self.feature, level=level,
                                  truth=self.truth)
            self._slices = (key, rep)
        return self._slices[1]

    def edge_report(self, level=0.95):
        """Return ``effect_edges`` of the model (computed once per level)."""
        if level not in self._edges:
            self._edges[level] = D.effect_edges(self.model, level=level)
        return self._edges[level]

    def overlap(self):
        """Return ``overlap_profile`` of the model."""
        return D.overlap_profile(self.model)

    # -- the verdict -------------------------------------------------------------------------
    @property
    def verdict(self):
        """The last finished ``EffectVerdict`` (None before one is run)."""
        return self._verdict

    def _compute_verdict(self, progress, folds, fold_trees):
        # the caller's X (a frame keeps its column names: no feature-name warning)
        return D.effect_verdict(self.X, self.y, self.treatment, model=self.model,
                                folds=folds, fold_trees=fold_trees,
                                random_state=self.random_state, progress=progress)

    def run_verdict(self, progress=None):
        """Compute the effect verdict here and now (blocking); return it.

        For tests, scripts and notebook cells; the views call :meth:`start_verdict`.
        ``progress``: None (no bar), True (a tqdm bar) or a ``RunControl`` (cancelling it
        returns the folds finished, marked incomplete). A failure sets ``verdict_status``
        to "failed", keeps the earlier verdict and raises.
        """
        job = self.verdict_job
        if job is not None and job.is_alive():
            raise RuntimeError("An effect verdict is already running in the background: "
                               "wait for its job (start_verdict's) or cancel it "
                               "(cancel_verdict) first.")
        self.verdict_message = ""
        self.verdict_status = "running"
        try:
            v = self._compute_verdict(False if progress is None else progress,
                                      self.verdict_folds, self.verdict_fold_trees)
        except Exception as exc:
            self.verdict_message = f"{type(exc).__name__}: {exc}"
            self.verdict_status = "failed"
            raise
        self._verdict = v
        self.verdict_status = "done" if v.complete else "cancelled"
        return v

    def start_verdict(self) -> Job | None:
        """Run the effect verdict on the session's background runner; return its ``Job``.

        A job of kind ``VERDICT_JOB`` with progress per fold (``verdict_progress``); the
        traits change on the kernel's event loop. While one is waiting or running that
        job is returned and no second one starts; after :meth:`close`, None. Cancelling
        (:meth:`cancel_verdict`) lets the fold in progress finish and keeps the folds
        done as an incomplete verdict ("cancelled"); a failure sets "failed" and
        ``verdict_message`` and keeps the earlier verdict.
        """
        if self._closed:
            return None
        job = self.verdict_job
        if job is not None and job.is_alive():
            return job
        # the size asked for now, even if the attributes change while the job waits
        folds, fold_trees = int(self.verdict_folds), self.verdict_fold_trees
        self.verdict_message = ""
        self.verdict_progress = (0, folds)
        self.verdict_status = "running"

        def run(job):
            control = RunControl(lambda done, total: job.report(done, total, stop=False))
            job.on_cancel(control.cancel)  # effect_verdict stops after the current fold
            return self._compute_verdict(control, folds, fold_trees)

        return self._runner.submit(Job(VERDICT_JOB, run, stops_itself=True,
                                       params={"folds": folds, "fold_trees": fold_trees}))

    @property
    def verdict_job(self) -> Job | None:
        """The newest effect verdict job of this session's runner, or None."""
        return self._runner.latest(VERDICT_JOB)

    def cancel_verdict(self):
        """Ask a running verdict to stop after its current fold."""
        self._runner.cancel(VERDICT_JOB)

    def _verdict_published(self, job):
        """The verdict job's state into the verdict traits (see ``_published``)."""
        folds = int(job.params["folds"])
        if job.outcome in ("waiting", "running"):
            self.verdict_progress = (int(round(job.progress * folds)), folds)
            self.verdict_status = "running"
        elif job.outcome == "failed":  # the earlier verdict stays
            self.verdict_message = job.message
            self.verdict_status = "failed"
        elif job.result is None:  # ended before it computed anything
            self.verdict_status = "cancelled"
        else:
            v = job.result
            self._verdict = v  # before the status: its observers draw it
            self.verdict_status = "done" if v.complete else "cancelled"

    # -- the coverage readout ----------------------------------------------------------------
    @property
    def coverage(self):
        """The last finished ``EffectCoverageReport`` (None before one is run)."""
        return self._coverage

    def _compute_coverage(self, progress, reps, n_eval):
        m = self.model
        return D.effect_coverage_readout(m, m.X_train_, m.y_train_, m.treatment_,
                                         truth=self.truth, reps=reps, n_eval=n_eval,
                                         random_state=self.random_state, progress=progress)

    def run_coverage(self, progress=None):
        """Compute the effect coverage readout here and now (blocking); return it.

        ``coverage_reps`` refits of the model's settings on redrawn outcomes around the
        known effect (``truth``) or, without one, the model's own out-of-bag effect (the
        readout's notes say what that stand-in can and cannot show). ``progress`` as for
        :meth:`run_verdict`; a failure sets "failed" and keeps the earlier readout.
        """
        job = self.coverage_job
        if job is not None and job.is_alive():
            raise RuntimeError("An effect coverage readout is already running in the "
                               "background: wait for it or cancel it (cancel_coverage).")
        self.coverage_message = ""
        self.coverage_status = "running"
        try:
            r = self._compute_coverage(False if progress is None else progress,
                                       int(self.coverage_reps), int(self.coverage_rows))
        except Exception as exc:
            self.coverage_message = f"{type(exc).__name__}: {exc}"
            self.coverage_status = "failed"
            raise
        self._coverage = r
        self.coverage_status = "done" if r.reps_done == r.reps else "cancelled"
        return r

    def start_coverage(self) -> Job | None:
        """Run the coverage readout on the background runner; return its ``Job``.

        Progress per replication in ``coverage_progress``; cancelling
        (:meth:`cancel_coverage`) keeps the finished replications (none are read below
        two); after :meth:`close`, None.
        """
        if self._closed:
            return None
        job = self.coverage_job
        if job is not None and job.is_alive():
            return job
        reps, rows = int(self.coverage_reps), int(self.coverage_rows)
        self.coverage_message = ""
        self.coverage_progress = (0, reps)
        self.coverage_status = "running"

        def run(job):
            control = RunControl(lambda done, total: job.report(done, total, stop=False))
            job.on_cancel(control.cancel)  # the readout stops after the current refit
            return self._compute_coverage(control, reps, rows)

        return self._runner.submit(Job(COVERAGE_JOB, run, stops_itself=True,
                                       params={"reps": reps, "rows": rows}))

    @property
    def coverage_job(self) -> Job | None:
        """The newest coverage readout job of this session's runner, or None."""
        return self._runner.latest(COVERAGE_JOB)

    def cancel_coverage(self):
        """Ask a running coverage readout to stop after its current replication."""
        self._runner.cancel(COVERAGE_JOB)

    def _coverage_published(self, job):
        """Runner callback (event loop): the job's state into the coverage traits."""
        reps = int(job.params["reps"])
        if job.outcome in ("waiting", "running"):
            self.coverage_progress = (int(round(job.progress * reps)), reps)
            self.coverage_status = "running"
        elif job.outcome == "failed":  # the earlier readout stays
            self.coverage_message = job.message
            self.coverage_status = "failed"
        elif job.result is None:
            self.coverage_status = "cancelled"
        else:
            r = job.result
            self._coverage = r  # before the status: its observers draw it
            self.coverage_status = "done" if r.reps_done == r.reps else "cancelled"

    def _published(self, job):
        """Runner callback (event loop): the newest job of each kind into its traits."""
        if job is not self._runner.latest(job.kind):
            return
        if job.kind == COVERAGE_JOB:
            self._coverage_published(job)
        else:
            self._verdict_published(job)

    def _on_ui(self, fn):
        run_on_loop(self._loop, fn)

    # -- snapshots ---------------------------------------------------------------------------
    def snapshot_state(self) -> dict:
        """Return what ``hedgerow.snapshot.Snapshot.capture`` records of this session.

        The fitted model and its data, the probe, the effect at the probe (the numbers the
        probe view shows), the doubly robust average effect, and the effect verdict's
        sentence when one has finished.
        """
        from hedgerow.estimators._effect_forest import EFFECT_CAUTION

        p = self.probe_report()
        row = p.methods.loc["corrected forest"]
        avg = self.model.average_effect()
        v = self._verdict
        return {
            "model": self.model, "X": self.X, "y": self.y, "treatment": self.treatment,
            "probe": [float(x) for x in self.probe],
            "ridge_penalty": float(self.model.ridge_penalty_), "compare": False,
            "headline": {"oob_rmse": None, "mean_interval_width": None,
                         "interval_level": p.level,
                         "verdict": None if v is None or not v.complete else v.conclusion,
                         "probe_prediction": row["effect"]},
            "effect": {"probe_effect": row["effect"], "probe_lower": row["lower"],
                       "probe_upper": row["upper"], "level": p.level,
                       "average_effect": avg.estimate, "average_std_error": avg.std_error,
                       "caution": EFFECT_CAUTION},
        }

    def restore_view(self, *, probe=None, feature=None):
        """Put the probe and the column where a snapshot had them (None: leave)."""
        if probe is not None:
            self.probe = [float(v) for v in probe]  # validated: one finite value per column
        if feature is not None:
            self.feature = D.resolve_feature(self.model, feature)  # a name or an index

    def close(self):
        """Cancel this session's background work (the explorer closes it); no new run
        starts after."""
        self._closed = True
        self._runner.cancel()
