"""The state every view shares: the fitted models, the probe, the penalty, and refits.

The session calls diagnostics functions and caches their reports by what they depend on
(forest generation, ridge penalty, probe point); it computes nothing itself.
"""

from __future__ import annotations

import contextlib
import logging
import threading
import warnings
from collections import OrderedDict
from dataclasses import dataclass

import numpy as np
import pandas as pd
import traitlets as t

from hedgerow import diagnostics as D
from hedgerow._format import format_number
from hedgerow._validation import check_ridge_penalty, column_names
from hedgerow.widgets._runner import (
    ENDED,
    BackgroundRunner,
    Job,
    JobCancelled,
    current_loop,
    run_on_loop,
)

__all__ = ["ExploreSession", "ProbeScene", "RefitCancelled"]

log = logging.getLogger("hedgerow.widgets")

#: Forest settings a session starts from when the caller gives none (small and quick).
DEFAULT_FOREST = {"n_estimators": 200, "random_state": 0}
#: Settings the tuning view can change by refitting.
REFIT_KEYS = ("subsample_rate", "min_samples_leaf", "n_estimators")
_CACHE = 64
#: The tuning surface the tuning view draws: subsample rates (one refit each) and ridge
#: penalties (no refit).
SURFACE_RATES = (0.1, 0.2, 0.3, 0.4, 0.5)
SURFACE_PENALTIES = (0.0, 0.001, 0.01, 0.1, 1.0, 10.0)


#: Raised inside a refit's (any job's) progress report once it was cancelled.
RefitCancelled = JobCancelled


@dataclass(frozen=True)
class ProbeScene:
    """Everything the probe view draws at one probe: all from diagnostics functions."""

    report: object  # ProbeReport
    slices: object  # SliceReport
    readout: pd.DataFrame
    feature_index: int
    grid: np.ndarray


@contextlib.contextmanager
def _quiet():
    """Silence the feature-name warnings of numpy probes against DataFrame-fitted models."""
    with warnings.catch_warnings():
        warnings.filterwarnings("ignore", message="X does not have valid feature names")
        warnings.simplefilter("ignore", RuntimeWarning)
        yield


class ExploreSession(t.HasTraits):
    """Fitted models, the shared probe and penalty, cached diagnostics and the refit worker.

    Parameters
    ----------
    X, y : training data (array or DataFrame / Series).
    model : a fitted ``LocalLinearForestRegressor`` on (X, y), or None to fit one with
        ``forest_params`` (defaults ``DEFAULT_FOREST``).
    compare : fit Nadaraya-Watson and kernel local linear regression for comparison, in
        the background (job kind "smoothers"): the session is usable at once, the views
        draw the forests first and add the smoothers when ``compared`` changes.
    refit_delay : seconds a refit request waits for further requests (debounce).
    """

    probe_x = t.List(t.Float(), help="The probe point, one value per column.")
    ridge_penalty = t.Float(0.0, help="Ridge penalty every view reflects (no refit).")
    generation = t.Int(0, help="Counts the forests put in place; views redraw on change.")
    settings = t.Dict(help="Forest settings and penalty the views currently reflect.")
    refit_status = t.Unicode("idle", help="idle, waiting, running, cancelled or failed.")
    refit_progress = t.Float(0.0, help="Share of the trees grown by the running refit.")
    refit_message = t.Unicode("", help="Plain-language state of the last refit.")
    job_states = t.Dict(help="Outcome of the newest background job of each kind.")
    compared = t.List(t.Unicode(), help="Labels of the comparison smoothers in place.")
    smoothers_message = t.Unicode("", help="Plain-language state of the smoother fits "
                                  "('' when none are pending).")

    def __init__(self, X, y, *, model=None, compare=True, refit_delay=0.5, **forest_params):
        super().__init__()
        from hedgerow.estimators import LocalLinearForestRegressor

        self._X, self._y = X, y
        self._lock = threading.RLock()
        self._cache = OrderedDict()
        self._refit_delay = float(refit_delay)
        self._subscribers = {}
        self._surface = {}  # (forest settings, penalties, rate) -> that column's cells
        self._surface_jobs = {}  # the same keys -> the job computing it
        self._runner = BackgroundRunner(self._publish, self._on_ui)
        self.refit_log = []  # (params, outcome) of every refit, oldest first
        self._loop = current_loop()
        if model is None:
            params = {**DEFAULT_FOREST, **forest_params}
            with _quiet():
                model = LocalLinearForestRegressor(**params).fit(X, y)
        self._model = model
        self._compare = bool(compare)
        self._smoothers = []
        self.feature_names = list(column_names(model))
        self.ridge_penalty = float(model.ridge_penalty_)
        self.probe_x = [float(v) for v in D.probe_anchor(model.X_train_)]
        self._update_settings()
        if self._compare:
            self.request_smoothers()

    # -- models ------------------------------------------------------------------------
    #: The comparison smoothers, in the order the views list them.
    SMOOTHER_CLASSES = ("NadarayaWatsonRegressor", "LocalLinearRegressor")

    @property
    def compare(self) -> bool:
        """Whether this session compares the kernel smoothers (fitted or still pending)."""
        return self._compare

    def planned_methods(self) -> list:
        """Labels of every method the views show once all background fits are in.

        The forests, then the comparison smoothers (with ``compare``), fitted or not: the
        views make room for each from the start and draw a smoother once it is in place.
        """
        from hedgerow import estimators as E

        out = list(self.slice_models())
        if self._compare:
            out += [n for n in (D.method_label(getattr(E, c)()) for c in self.SMOOTHER_CLASSES)
                    if n not in out]
        return out

    def request_smoothers(self) -> Job | None:
        """Fit the comparison smoothers in the background; the job (None if in place).

        Kind "smoothers": the two bandwidth searches report every objective evaluation
        as progress (``smoothers_message``), a cancel stops them at the next one, and
        the fitted smoothers are put in place on the event loop (``compared`` changes,
        the views redraw). A refit cancels a running smoother job and asks again after.
        """
        if not self._compare or self._smoothers or self._closed:
            return None
        job = self._runner.latest("smoothers")
        if job is not None and job.outcome in ("waiting", "running"):
            return job
        return self.submit("smoothers", self._fit_smoothers, on_done=self._install_smoothers)

    def _fit_smoothers(self, job):
        from hedgerow import estimators as E
        from hedgerow._progress import RunControl

        fitted = []
        for k, name in enumerate(self.SMOOTHER_CLASSES):
            def step(done, total, k=k):
                # each search is one half of the job; its length is known only roughly
                share = done / total if total else 1.0 - 1.0 / (1.0 + done / 40.0)
                job.report(k + min(share, 1.0), len(self.SMOOTHER_CLASSES))

            job.report(k, len(self.SMOOTHER_CLASSES))
            with _quiet():
                fitted.append(getattr(E, name)().fit(self._X, self._y,
                                                     progress=RunControl(step)))
        return fitted

    def _install_smoothers(self, job, smoothers):
        with self._lock:
            self._smoothers = list(smoothers)
            # entries showing the smoothers are keyed by their count: drop the old ones
            # (forest-only entries stay)
            drop = {"probe", "scene", "edges", "weights"}
            for key in [k for k in self._cache if len(k) > 2 and k[2] in drop]:
                del self._cache[key]
        self.compared = [D.method_label(s) for s in smoothers]

    def _smoothers_published(self, job):
        if job.outcome == "waiting":
            self.smoothers_message = "comparison smoothers: waiting for the background worker"
        elif job.outcome == "running":
            self.smoothers_message = (f"fitting the comparison smoothers "
                                      f"({100 * job.progress:.0f}%)")
        elif job.outcome == "failed":
            self.smoothers_message = f"the comparison smoothers failed: {job.message}"
        else:  # done, or cancelled (a refit asks again when it ends)
            self.smoothers_message = ""

    def close(self):
        """Cancel every background job of this session (the explorer closes it)."""
        self._closed = True
        self._runner.cancel()

    _closed = False

    @property
    def model(self):
        """The fitted local linear forest currently in place (at its own penalty)."""
        return self._model

    @property
    def X_train(self) -> np.ndarray:
        return self._model.X_train_

    @property
    def y_train(self) -> np.ndarray:
        return self._model.y_train_

    def _state_key(self, per_penalty=True):
        return ((self.generation, self.ridge_penalty) if per_penalty
                else (self.generation, "any penalty"))

    def _cached(self, key, compute, per_penalty=True):
        key = self._state_key(per_penalty) + key
        with self._lock:
            if key in self._cache:
                self._cache.move_to_end(key)
                return self._cache[key]
        with _quiet():
            value = compute()
        self._store(key, value)
        return value

    def _store(self, full_key, value):
        with self._lock:
            self._cache[full_key] = value
            while len(self._cache) > _CACHE:
                self._cache.popitem(last=False)

    def peek(self, key, per_penalty=True):
        """Return what ``_cached`` holds under ``key`` for the current state, or None."""
        with self._lock:
            return self._cache.get(self._state_key(per_penalty) + key)

    def penalised_model(self):
        """The current forest seen at the session's ridge penalty (shared trees, no refit)."""
        return self._cached(("model",), lambda: D.at_ridge_penalty(self._model,
                                                                    self.ridge_penalty))

    def slice_models(self) -> dict:
        m = self.penalised_model()
        out = {"local linear forest": m, "honest forest (same trees)": D.local_average_model(m)}
        for s in self._smoothers:
            out[D.method_label(s)] = s
        return out

    def held_out_models(self) -> dict:
        """Models with held-out predictions (what ``edges`` and ``verdict`` compare)."""
        return {k: v for k, v in self.slice_models().items()
                if hasattr(v, "oob_predict") or hasattr(v, "loo_predict")}

    # -- diagnostics, cached -----------------------------------------------------------
    def probe_report(self, x=None):
        x = np.asarray(self.probe_x if x is None else x, dtype=np.float64)
        smoothers = list(self._smoothers)  # keyed by what it is computed with
        return self._cached(("probe", x.tobytes(), len(smoothers)), lambda: D.probe(
            self.penalised_model(), x, compare=smoothers))

    def probe_sketch(self, x):
        """Return ``diagnostics.probe_sketch`` at ``x``: the weights and the local line.

        Not cached: drawn while the probe is dragged, each point once.
        """
        with _quiet():
            return D.probe_sketch(self.penalised_model(), np.asarray(x, dtype=np.float64))

    def scene(self, x, feature, grid_size=80) -> ProbeScene:
        """Return the ``ProbeScene`` at ``x`` with ``feature`` on the x-axis."""
        x = np.asarray(x, dtype=np.float64)

        def compute():
            report = self.probe_report(x)
            j = D.resolve_feature(self._model, feature)
            grid = D.slice_grid(self._model, j, grid_size)
            sl = D.slices(self.slice_models(), x, j, grid)
            return ProbeScene(report, sl, D.probe_readout(report), j, grid)

        return self._cached(("scene", x.tobytes(), feature, grid_size,
                             len(self._smoothers)), compute)

    def edge_profile(self):
        models = self.held_out_models()
        return self._cached(("edges", len(models)), lambda: D.edges(models))

    #: set once a view asked for the verdict in the background (request_verdict)
    _verdict_wanted = False

    def _verdict_of(self, model, progress=False):
        # The forests a user would fit instead, as in a snapshot's headline. Kernel
        # smoothers are left out here: cross-fitting them re-runs the bandwidth search
        # in every fold (minutes on wide data), too slow for a view; the report has them.
        # Fold fits are kept per forest: a penalty change re-predicts, it does not refit.
        folds = self._cached(("verdict folds",), dict, per_penalty=False)
        return D.verdict(model.X_train_, model.y_train_, forest=model, smoothers=None,
                         baseline=True, progress=progress, fold_cache=folds)

    def verdict_report(self):
        """The cross-fitted verdict at the current penalty (computed here if not cached).

        Views do not call this: five cross-fitted folds take several fits' time, so they
        ask :meth:`request_verdict` and draw :meth:`peek_verdict` when it arrives.
        Snapshots and scripts call it and wait.
        """
        return self._cached(("verdict",), lambda: self._verdict_of(self.penalised_model()))

    def peek_verdict(self):
        """The verdict at the current state if it is computed, else None."""
        return self.peek(("verdict",))

    def request_verdict(self):
        """Compute :meth:`verdict_report` in the background; the job, or None if cached.

        A job of kind "verdict", keyed by (generation, ridge penalty), with progress per
        fold; a newer state cancels it (an interrupted verdict is not kept). The result is
        stored in the cache under its key, then the subscribers hear of it.
        """
        from hedgerow._progress import RunControl

        self._verdict_wanted = True  # asked for again after a refit cancelled it

        def run(job, model):
            control = RunControl(lambda done, total: job.report(done, total, stop=False))
            job.on_cancel(control.cancel)
            with _quiet():
                return self._verdict_of(model, progress=control)

        # an interrupted verdict is not kept
        return self._request_once("verdict", ("verdict",), run, stops_itself=True,
                                  keep=lambda value: value.decision != "incomplete")

    def oob_summary(self):
        """The out-of-bag summary at the current penalty, interval width included."""
        return self._cached(("oob",), lambda: D.oob_summary(self.penalised_model()))

    def quick_oob_summary(self):
        """The out-of-bag RMSE at the current penalty without the interval width (fast)."""
        full = self.peek(("oob",))
        if full is not None:
            return full
        return self._cached(("oob quick",), lambda: D.oob_summary(
            self.penalised_model(), interval_width=False))

    def _unfinished(self, kind, key):
        """The newest ``kind`` job for ``key`` if it is still waiting or running, else None."""
        job = self._runner.latest(kind)
        if job is not None and job.key == key and job.outcome in ("waiting", "running"):
            return job
        return None

    def request_oob_summary(self):
        """Compute :meth:`oob_summary` in the background; return the job, or None if cached.

        A job of kind "interval width", keyed by (generation, ridge penalty): the
        little-bags errors of every training row are the slow part. The result is stored
        in the cache under its key, then the subscribers hear of it.
        """
        def compute(job, model):
            with _quiet():
                return D.oob_summary(model)

        return self._request_once("interval width", ("oob",), compute)

    def _request_once(self, kind, slot, compute, *, keep=None, stops_itself=False):
        """Run ``compute(job, model)`` as a ``kind`` job for the current state, at most once.

        None when the cache already holds ``slot`` for this state; the running job when
        one for this state is waiting or running; else a new job on the current
        ``penalised_model()``, whose result is stored under ``slot`` (when ``keep(value)``
        allows) before the subscribers hear of it.
        """
        if self.peek(slot) is not None:
            return None
        key = self._state_key()
        job = self._unfinished(kind, key)
        if job is not None:
            return job
        model = self.penalised_model()

        def store(job, value):
            if value is not None and (keep is None or keep(value)):
                self._store(key + slot, value)

        return self.submit(kind, lambda job: compute(job, model), key=key, on_done=store,
                           stops_itself=stops_itself)

    def request_coverage(self, reps) -> Job:
        """Run the coverage readout of the current forest in the background; the job.

        Kind "coverage"; progress after every replication. Cancelling it ends the run
        after the current replication (at least one, even if it had not started), and
        the job (outcome "cancelled") still carries the readout of the replications
        done. Its result is ``(CoverageReport, the settings line it was computed for)``.
        """
        from hedgerow._progress import RunControl

        model, settings = self.penalised_model(), self.describe_settings()

        def run(job):
            control = RunControl(lambda done, total: job.report(done, total, stop=False))
            job.on_cancel(control.cancel)
            with _quiet():
                return D.coverage_readout(model, reps=int(reps), progress=control), settings

        return self.submit("coverage", run, params={"reps": int(reps)}, stops_itself=True)

    # -- the tuning surface, one background refit per subsample rate ----------------------
    def _surface_settings(self):
        """The forest settings a surface column shares with the forest in place."""
        p = {k: v for k, v in self._model.get_params().items() if k != "subsample_rate"}
        return p, tuple(sorted((k, repr(v)) for k, v in p.items()))

    def surface_frame(self, penalties=SURFACE_PENALTIES) -> pd.DataFrame:
        """The surface cells computed so far for the forest settings in place.

        Columns of ``TuningSurface.frame`` (without coverage); the subsample rates whose
        background refit has not finished are missing.
        """
        _, key = self._surface_settings()
        lams = tuple(float(v) for v in penalties)
        cols = [f for (k, lam_key, _), f in sorted(self._surface.items(), key=lambda kv:
                                                    kv[0][2]) if k == key and lam_key == lams]
        if not cols:
            return pd.DataFrame(columns=list(D.SURFACE_COLUMNS))
        return pd.concat(cols, ignore_index=True)

    def request_surface(self, rates=SURFACE_RATES, penalties=SURFACE_PENALTIES) -> list:
        """Grow the surface's columns in the background, one refit per subsample rate.

        Each missing rate is one job of kind "surface column" (``surface_column``: the
        same numbers ``tuning_surface`` prints), with progress per tree and cancel; the
        jobs queue (none replaces another) and the runner takes the newest first. A refit
        cancels them (the settings they share change). Returns the jobs submitted.
        """
        params, key = self._surface_settings()
        lams = tuple(float(v) for v in penalties)
        forest = {k: v for k, v in params.items() if k not in ("random_state", "n_jobs")}
        X, y = self._X, self._y
        jobs = []
        for rate in rates:
            rate = float(rate)
            full = (key, lams, rate)
            pending = self._surface_jobs.get(full)
            if full in self._surface or (pending is not None and pending.is_alive()):
                continue

            def run(job, rate=rate):
                total = max(int(params["n_estimators"]), 1)
                with _quiet():
                    cells, _ = D.surface_column(
                        X, y, rate, lams, random_state=params["random_state"],
                        n_jobs=params["n_jobs"], progress=lambda d: job.report(d, total),
                        **forest)
                return cells

            def store(job, cells, full=full):
                if cells is not None:
                    self._surface[full] = cells

            job = self.submit("surface column", run, key=full, params={"rate": rate},
                              on_done=store, replace=False)
            self._surface_jobs[full] = job
            jobs.append(job)
        return jobs

    def surface_pending(self) -> int:
        """How many surface columns are waiting or being refitted."""
        return sum(1 for j in self._surface_jobs.values()
                   if j.is_alive() and j.outcome not in ENDED)

    def load_setting(self, subsample_rate, ridge_penalty):
        """Show ``ridge_penalty`` now and refit at ``subsample_rate`` if it differs."""
        self.ridge_penalty = check_ridge_penalty(ridge_penalty)
        rate = float(subsample_rate)
        if rate != float(self._model.get_params()["subsample_rate"]):
            return self.request_refit(subsample_rate=rate)
        return None

    def ridge_curve(self, penalties):
        key = ("ridge", np.asarray(penalties, dtype=float).tobytes())
        # the curve does not depend on the current penalty: key it on generation only
        return self._cached(key, lambda: D.ridge_curve(self._model, penalties),
                            per_penalty=False)

    def weight_profile(self, method):
        return self._cached(("weights", np.asarray(self.probe_x).tobytes(), method,
                             len(self._smoothers)),
                            lambda: D.weight_profile(self.probe_report(), self.X_train,
                                                     method))

    # -- snapshots ---------------------------------------------------------------------
    def snapshot_state(self) -> dict:
        """Return what ``hedgerow.snapshot.Snapshot.capture`` records of this session.

        The current forest and the data it was fitted on, the probe, the ridge penalty the
        views show, whether smoothers are compared, and the headline numbers the views
        show (from the cached diagnostics: nothing is recomputed that a view has drawn).
        """
        summary = self.oob_summary()
        report = self.probe_report()
        return {
            "model": self._model, "X": self._X, "y": self._y,
            "probe": [float(v) for v in self.probe_x],
            "ridge_penalty": float(self.ridge_penalty),
            "compare": self._compare,
            "headline": {
                "oob_rmse": summary["oob_rmse"], "mean_interval_width": summary["mean_width"],
                "interval_level": summary["level"],
                "verdict": self.verdict_report().conclusion,
                "probe_prediction": report.method("local linear forest").prediction,
            },
        }

    def restore_view(self, *, probe=None, ridge_penalty=None):
        """Put the probe and the ridge penalty where a snapshot had them (None: leave)."""
        if probe is not None:
            p = [float(v) for v in probe]
            if len(p) != self.X_train.shape[1]:
                raise ValueError(f"The 'probe' parameter must hold {self.X_train.shape[1]} "
                                 f"values (one per column). Got {len(p)} instead.")
            self.probe_x = p
        if ridge_penalty is not None:
            self.ridge_penalty = check_ridge_penalty(ridge_penalty)

    # -- settings ----------------------------------------------------------------------
    @t.validate("ridge_penalty")
    def _check_ridge_penalty(self, proposal):
        return check_ridge_penalty(proposal["value"])

    @t.observe("ridge_penalty")
    def _ridge_changed(self, change):
        self._update_settings()

    def _update_settings(self):
        p = self._model.get_params()
        self.settings = {"n_estimators": int(p["n_estimators"]),
                         "subsample_rate": float(p["subsample_rate"]),
                         "min_samples_leaf": int(p["min_samples_leaf"]),
                         "ridge_penalty": float(self.ridge_penalty),
                         "generation": int(self.generation)}

    def describe_settings(self) -> str:
        s = self.settings
        return (f"showing forest #{s.get('generation', 0) + 1}: {s.get('n_estimators')} trees, "
                f"subsample rate {s.get('subsample_rate', 0):.2f}, min leaf "
                f"{s.get('min_samples_leaf')}, ridge penalty "
                f"{format_number(s.get('ridge_penalty', 0), 3)}")

    # -- background work: one runner for refits, interval widths, coverage, ... -------
    def submit(self, kind, fn, *, key=None, params=None, delay=0.0, on_done=None,
               replace=True, stops_itself=False) -> Job:
        """Run ``fn(job)`` on the session's background runner; return the ``Job``.

        The one way to work off the UI thread (views never start threads): the runner
        starts the newest waiting job first, ``replace`` cancels older jobs of the same
        ``kind``, ``fn`` reports progress with ``job.report(done, total)`` (which stops
        a cancelled job), and ``on_done(job, result)`` runs on the kernel's event loop
        before the job's subscribers hear of it (:meth:`subscribe`). ``stops_itself``:
        see ``Job.cancel``.
        """
        job = Job(kind, fn, key=key, params=params, delay=delay, on_done=on_done,
                  stops_itself=stops_itself)
        return self._runner.submit(job, replace=replace)

    def subscribe(self, kind, callback):
        """Call ``callback(job)`` on the event loop at every state change of ``kind`` jobs.

        Waiting, running (with each progress step), then done, cancelled or failed; the
        job carries ``outcome``, ``progress``, ``result`` and ``message``.
        """
        self._subscribers.setdefault(str(kind), []).append(callback)

    def latest_job(self, kind) -> Job | None:
        """The newest job of ``kind`` submitted to this session's runner, or None."""
        return self._runner.latest(kind)

    def cancel_jobs(self, kind=None):
        """Cancel the waiting and running jobs of ``kind`` (every kind if None)."""
        self._runner.cancel(kind)

    def wait_for(self, kind, timeout=60.0) -> str:
        """Block until the newest ``kind`` job has ended and been delivered; its outcome.

        "none" when no such job was submitted.
        """
        job = self._runner.latest(kind)
        if job is None:
            return "none"
        if not job.join(timeout):
            raise TimeoutError(f"The {kind} did not finish within {timeout} s.")
        return job.outcome

    def _publish(self, job):
        """Runner callback (event loop): refit traits, job states, then the subscribers."""
        latest = self._runner.latest(job.kind) is job
        if latest:
            self.job_states = {**self.job_states, job.kind: job.outcome}
        if job.kind == "refit":
            self._refit_published(job, latest)
        elif job.kind == "smoothers" and latest:
            self._smoothers_published(job)
        for callback in list(self._subscribers.get(job.kind, ())):
            callback(job)

    # -- refits ------------------------------------------------------------------------
    def request_refit(self, **changes):
        """Refit with ``changes`` after ``refit_delay`` s, replacing any pending or running one.

        Returns the ``Job`` at once. A running refit is cancelled (it stops at its next
        progress report) so that only the latest request is finished.
        """
        bad = set(changes) - set(REFIT_KEYS)
        if bad:
            raise ValueError(f"A refit can change {list(REFIT_KEYS)}. Got {sorted(bad)}.")
        previous = self._runner.latest("refit")
        base = previous.params if previous is not None and previous.outcome in (
            "waiting", "running") else self._model.get_params()
        params = {**base, **changes}
        # the refit goes first: smoothers being fitted and a verdict being cross-fitted
        # (one runner thread) stop and are asked for again after
        self._runner.cancel("smoothers")
        self._runner.cancel("verdict")
        self._runner.cancel("surface column")
        return self.submit("refit", self._refit, params=params, delay=self._refit_delay,
                           on_done=self._install)

    def cancel_refit(self):
        """Cancel the pending or running refit, if any."""
        self._runner.cancel("refit")

    def wait_for_refit(self, timeout=60.0) -> str:
        """Block until the latest refit ends and the views have redrawn; its outcome."""
        return self.wait_for("refit", timeout)

    def _refit(self, job):
        from sklearn.base import clone

        total = max(int(job.params["n_estimators"]), 1)
        model = clone(self._model).set_params(**job.params)
        model.fit(self._X, self._y, progress=lambda done: job.report(done, total))
        return model

    def _install(self, job, model):
        with self._lock:
            self._model = model
            self._cache.clear()
        self.generation += 1
        self._update_settings()

    def _refit_published(self, job, latest):
        if job.outcome in ENDED:
            self.refit_log.append((job.params, job.outcome))
        if not latest:
            return
        if job.outcome in ENDED and not self._closed:
            self.request_smoothers()
            if self._verdict_wanted:
                self.request_verdict()
        if job.outcome == "waiting":
            self._set_status("waiting", "refit requested")
        elif job.outcome == "running":
            if job.progress == 0.0:
                self._set_status("running", "refitting; the views show the previous forest "
                                 "meanwhile", 0.0)
            else:
                self.refit_progress = job.progress
        elif job.outcome == "done":
            self._set_status("idle", "refit done", 1.0)
        else:
            self._set_status(job.outcome, f"refit failed: {job.message}" if job.message
                             else f"refit {job.outcome}")

    def _set_status(self, status, message, progress=None):
        self.refit_status = status
        self.refit_message = message
        if progress is not None:
            self.refit_progress = progress

    def _on_ui(self, fn):
        """Run ``fn`` on the kernel's event loop when there is one, else right here."""
        run_on_loop(self._loop, fn)
