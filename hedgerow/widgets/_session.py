"""The state every view shares: the fitted models, the probe, the penalty, and refits.

The session calls diagnostics functions and caches their reports by what they depend on
(forest generation, ridge penalty, probe point); it computes nothing itself.
"""

from __future__ import annotations

import asyncio
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

__all__ = ["ExploreSession", "ProbeScene", "RefitCancelled"]

log = logging.getLogger("hedgerow.widgets")

#: Forest settings a session starts from when the caller gives none (small and quick).
DEFAULT_FOREST = {"n_estimators": 200, "random_state": 0}
#: Settings the tuning view can change by refitting.
REFIT_KEYS = ("subsample_rate", "min_samples_leaf", "n_estimators")
_CACHE = 64


class RefitCancelled(Exception):
    """Raised inside a refit's progress callback to stop it."""


@dataclass(frozen=True)
class ProbeScene:
    """Everything the probe view draws at one probe: all from diagnostics functions."""

    report: object  # ProbeReport
    slices: object  # SliceReport
    readout: pd.DataFrame
    feature_index: int
    grid: np.ndarray


class _Job:
    def __init__(self, params):
        self.params = dict(params)
        self.cancel = threading.Event()
        self.outcome = "waiting"
        self.thread = None


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
    compare : fit Nadaraya-Watson and kernel local linear regression for comparison.
    refit_delay : seconds a refit request waits for further requests (debounce).
    """

    probe_x = t.List(t.Float(), help="The probe point, one value per column.")
    ridge_penalty = t.Float(0.0, help="Ridge penalty every view reflects (no refit).")
    generation = t.Int(0, help="Counts the forests put in place; views redraw on change.")
    settings = t.Dict(help="Forest settings and penalty the views currently reflect.")
    refit_status = t.Unicode("idle", help="idle, waiting, running, cancelled or failed.")
    refit_progress = t.Float(0.0, help="Share of the trees grown by the running refit.")
    refit_message = t.Unicode("", help="Plain-language state of the last refit.")

    def __init__(self, X, y, *, model=None, compare=True, refit_delay=0.5, **forest_params):
        super().__init__()
        from hedgerow.estimators import LocalLinearForestRegressor

        self._X, self._y = X, y
        self._lock = threading.RLock()
        self._cache = OrderedDict()
        self._refit_delay = float(refit_delay)
        self._timer = None
        self._job = None
        self.refit_log = []  # (params, outcome) of every refit, oldest first
        try:
            self._loop = asyncio.get_running_loop()
        except RuntimeError:
            self._loop = None
        if model is None:
            params = {**DEFAULT_FOREST, **forest_params}
            with _quiet():
                model = LocalLinearForestRegressor(**params).fit(X, y)
        self._model = model
        self._smoothers = self._fit_smoothers() if compare else []
        names = getattr(model, "feature_names_in_", None)
        self.feature_names = ([str(n) for n in names] if names is not None
                              else [f"x{j}" for j in range(model.n_features_in_)])
        self.ridge_penalty = float(model.ridge_penalty_)
        self.probe_x = [float(v) for v in D.probe_anchor(model.X_train_)]
        self._update_settings()

    # -- models ------------------------------------------------------------------------
    def _fit_smoothers(self):
        from hedgerow.estimators._kernel import LocalLinearRegressor, NadarayaWatsonRegressor

        # cross-validating bandwidths can take a while on wide data: show a bar each
        with _quiet():
            return [NadarayaWatsonRegressor().fit(self._X, self._y, progress=True),
                    LocalLinearRegressor().fit(self._X, self._y, progress=True)]

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

    def _cached(self, key, compute, per_penalty=True):
        key = ((self.generation, self.ridge_penalty) if per_penalty
               else (self.generation, "any penalty")) + key
        with self._lock:
            if key in self._cache:
                self._cache.move_to_end(key)
                return self._cache[key]
        with _quiet():
            value = compute()
        with self._lock:
            self._cache[key] = value
            while len(self._cache) > _CACHE:
                self._cache.popitem(last=False)
        return value

    def peek(self, key, per_penalty=True):
        """Return what ``_cached`` holds under ``key`` for the current state, or None."""
        key = ((self.generation, self.ridge_penalty) if per_penalty
               else (self.generation, "any penalty")) + key
        with self._lock:
            return self._cache.get(key)

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
        return self._cached(("probe", x.tobytes()), lambda: D.probe(
            self.penalised_model(), x, compare=self._smoothers))

    def scene(self, x, feature, grid_size=80) -> ProbeScene:
        """Return the ``ProbeScene`` at ``x`` with ``feature`` on the x-axis."""
        x = np.asarray(x, dtype=np.float64)

        def compute():
            report = self.probe_report(x)
            j = D.resolve_feature(self._model, feature)
            grid = D.slice_grid(self._model, j, grid_size)
            sl = D.slices(self.slice_models(), x, j, grid)
            return ProbeScene(report, sl, D.probe_readout(report), j, grid)

        return self._cached(("scene", x.tobytes(), feature, grid_size), compute)

    def edge_profile(self):
        return self._cached(("edges",), lambda: D.edges(self.held_out_models()))

    def verdict_report(self):
        def compute():
            # The forests a user would fit instead, as in a snapshot's headline. Kernel
            # smoothers are left out here: cross-fitting them re-runs the bandwidth search
            # in every fold (minutes on wide data), too slow for a view; the report has them.
            # Fold fits are kept per forest: a penalty change re-predicts, it does not refit.
            folds = self._cached(("verdict folds",), dict, per_penalty=False)
            return D.verdict(self._model.X_train_, self._model.y_train_,
                             forest=self.penalised_model(), smoothers=None, baseline=True,
                             progress=False, fold_cache=folds)

        return self._cached(("verdict",), compute)

    def oob_summary(self):
        return self._cached(("oob",), lambda: D.oob_summary(self.penalised_model()))

    def ridge_curve(self, penalties):
        key = ("ridge", np.asarray(penalties, dtype=float).tobytes())
        # the curve does not depend on the current penalty: key it on generation only
        return self._cached(key, lambda: D.ridge_curve(self._model, penalties),
                            per_penalty=False)

    def weight_profile(self, method):
        return self._cached(("weights", np.asarray(self.probe_x).tobytes(), method),
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
            "compare": bool(self._smoothers),
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
            lam = float(ridge_penalty)
            if not np.isfinite(lam) or lam < 0:
                raise ValueError(f"The 'ridge_penalty' parameter must be a finite float >= 0. "
                                 f"Got {ridge_penalty!r} instead.")
            self.ridge_penalty = lam

    # -- settings ----------------------------------------------------------------------
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
                f"{s.get('min_samples_leaf')}, ridge penalty {s.get('ridge_penalty', 0):.3g}")

    # -- refits off the UI thread ------------------------------------------------------
    def request_refit(self, **changes):
        """Refit with ``changes`` after ``refit_delay`` s, replacing any pending or running one.

        Returns at once. A running refit is cancelled (it stops at its next progress
        report) so that only the latest request is finished.
        """
        bad = set(changes) - set(REFIT_KEYS)
        if bad:
            raise ValueError(f"A refit can change {list(REFIT_KEYS)}. Got {sorted(bad)}.")
        with self._lock:
            base = self._job.params if self._job is not None and \
                self._job.outcome in ("waiting", "running") else self._model.get_params()
            params = {**base, **changes}
            if self._timer is not None:
                self._timer.cancel()
            previous = self._job
            if previous is not None and previous.outcome in ("waiting", "running"):
                previous.cancel.set()
            job = _Job(params)
            self._job = job
            if previous is not None and previous.thread is None:
                self._finish(previous, "cancelled")  # superseded before it started
            self._timer = threading.Timer(self._refit_delay, self._start, args=(job,))
            self._timer.daemon = True
            self._timer.start()
        self._on_ui(lambda: self._set_status("waiting", "refit requested"))
        return job

    def cancel_refit(self):
        """Cancel the pending or running refit, if any."""
        with self._lock:
            if self._timer is not None:
                self._timer.cancel()
            job = self._job
            if job is not None and job.outcome in ("waiting", "running"):
                job.cancel.set()
                if job.thread is None:
                    self._finish(job, "cancelled")

    def wait_for_refit(self, timeout=60.0) -> str:
        """Block until the latest refit ends; return its outcome."""
        import time

        end = time.monotonic() + timeout
        while time.monotonic() < end:
            job = self._job
            if job is None or job.outcome not in ("waiting", "running"):
                return "none" if job is None else job.outcome
            thread = job.thread
            # _start names the thread before it starts it; a thread not started yet
            # cannot be joined (ident is None until it runs)
            if thread is not None and thread.ident is not None:
                thread.join(timeout=0.05)
            else:
                time.sleep(0.02)
        raise TimeoutError(f"The refit did not finish within {timeout} s.")

    def _start(self, job):
        with self._lock:
            if job.cancel.is_set() or job is not self._job:
                self._finish(job, "cancelled")
                return
            job.outcome = "running"
            job.thread = threading.Thread(target=self._run, args=(job,), daemon=True,
                                          name="hedgerow-refit")
        self._on_ui(lambda: self._set_status("running", "refitting; the views show the "
                                             "previous forest meanwhile", 0.0))
        job.thread.start()

    def _run(self, job):
        from sklearn.base import clone

        total = max(int(job.params["n_estimators"]), 1)

        def progress(done):
            if job.cancel.is_set():
                raise RefitCancelled
            self._on_ui(lambda: setattr(self, "refit_progress", min(done / total, 1.0)))

        try:
            model = clone(self._model).set_params(**job.params)
            model.fit(self._X, self._y, progress=progress)
        except RefitCancelled:
            self._finish(job, "cancelled")
            return
        except Exception as exc:  # shown in the tuning view, never lost
            log.exception("refit failed")
            self._finish(job, "failed", f"refit failed: {type(exc).__name__}: {exc}")
            return
        if job.cancel.is_set():
            self._finish(job, "cancelled")
            return
        self._on_ui(lambda: self._install(job, model))

    def _install(self, job, model):
        with self._lock:
            if job.cancel.is_set():
                self._finish(job, "cancelled")
                return
            self._model = model
            self._cache.clear()
        self.generation += 1
        self._update_settings()
        self._set_status("idle", "refit done", 1.0)
        with self._lock:
            # last, so that wait_for_refit returns only once every view has redrawn
            self.refit_log.append((job.params, "done"))
            job.outcome = "done"

    def _finish(self, job, outcome, message=None):
        with self._lock:
            if job.outcome in ("done", "cancelled", "failed"):
                return
            job.outcome = outcome
            self.refit_log.append((job.params, outcome))
            latest = job is self._job
        if latest:
            self._on_ui(lambda: self._set_status(outcome, message or f"refit {outcome}"))

    def _set_status(self, status, message, progress=None):
        self.refit_status = status
        self.refit_message = message
        if progress is not None:
            self.refit_progress = progress

    def _on_ui(self, fn):
        """Run ``fn`` on the kernel's event loop when there is one, else right here."""
        loop = self._loop
        if loop is not None and loop.is_running() and not loop.is_closed():
            try:
                loop.call_soon_threadsafe(fn)
                return
            except RuntimeError:
                pass
        fn()
