"""The session's one background runner: jobs off the UI thread, newest first.

A job is a function of its :class:`Job` handle. It runs on the runner's single worker
thread (the work is CPU-bound and its kernels use every core already: two jobs at once
would only make both late). The runner

- starts the newest waiting job first (a job may wait ``delay`` seconds before it is
  eligible: the debounce of a slider);
- with ``replace=True`` (the default) cancels every earlier job of the same ``kind``, so
  only the latest request of each kind is finished;
- reports each state change and progress step through ``publish(job)``, called on the
  kernel's event loop (``on_ui``), never on the worker;
- completes a job on the event loop too: ``on_done(job, result)`` runs there, then
  ``publish``, and only then does ``job.join`` return, so a caller that waits sees every
  view already redrawn.

Cancelling sets a flag: ``job.report(done, total)`` raises :class:`JobCancelled` at the
next progress step, and ``job.on_cancel(fn)`` registers what else to tell (a
``RunControl``). A job cancelled after its function returned keeps the result it returned
(a partial coverage readout, say) with the outcome ``"cancelled"``.
"""

from __future__ import annotations

import asyncio
import itertools
import logging
import threading
import time

__all__ = ["BackgroundRunner", "Job", "JobCancelled", "current_loop", "run_on_loop"]

log = logging.getLogger("hedgerow.widgets")

#: Outcomes of a job that has ended.
ENDED = ("done", "cancelled", "failed")
#: Seconds the worker thread waits for work before it ends (a new job starts it again).
IDLE_SECONDS = 2.0

_counter = itertools.count()


def current_loop():
    """Return the event loop running in this thread (the kernel's), or None.

    A session calls it when it is made, on the kernel's thread, and hands the loop to
    :func:`run_on_loop` for every delivery from the worker.
    """
    try:
        return asyncio.get_running_loop()
    except RuntimeError:
        return None


def run_on_loop(loop, fn):
    """Run ``fn`` on ``loop`` when that loop is running, else here and now.

    The ``on_ui`` of a session's runner: in a kernel, trait writes and redraws happen on
    its event loop, never on the worker; without a running loop (tests, scripts) they
    happen in the caller's thread.
    """
    if loop is not None and loop.is_running() and not loop.is_closed():
        try:
            loop.call_soon_threadsafe(fn)
            return
        except RuntimeError:
            pass
    fn()


class JobCancelled(Exception):
    """Raised inside a job's progress report once the job was cancelled."""


class Job:
    """One piece of background work and its state (read it on the UI thread).

    Attributes
    ----------
    kind : what the job does ("refit", "interval width", "coverage", ...).
    key : what its result belongs to (for example the forest generation and penalty).
    params : settings the job was asked with (a refit's forest parameters).
    outcome : "waiting", "running", "done", "cancelled" or "failed".
    progress : share done, 0 to 1. message : the error text of a failed job.
    result : what the job's function returned (None until it ended).
    """

    def __init__(self, kind, fn, *, key=None, params=None, delay=0.0, on_done=None,
                 stops_itself=False):
        self.kind, self.key, self.params = str(kind), key, dict(params or {})
        self.stops_itself = bool(stops_itself)
        self.outcome = "waiting"
        self.progress = 0.0
        self.result = None
        self.message = ""
        self._fn, self._on_done = fn, on_done
        self._not_before = time.monotonic() + max(float(delay), 0.0)
        self._order = next(_counter)
        self._cancel = threading.Event()
        self._ended = threading.Event()
        self._cancel_hooks = []
        self._runner = None

    # -- asked from any thread -------------------------------------------------------
    @property
    def cancelled(self) -> bool:
        return self._cancel.is_set()

    def cancel(self):
        """Ask the job to stop (a waiting job never starts; a running one stops at its
        next progress report).

        A job made with ``stops_itself=True`` is left to its ``on_cancel`` hooks instead:
        it still starts, finishes the step it is in (at least one) and returns what it
        has. A newer job of its kind drops a waiting one all the same.
        """
        if self._cancel.is_set():
            return
        self._cancel.set()
        for hook in list(self._cancel_hooks):
            hook()
        if self._runner is not None and not self.stops_itself:
            self._runner._cancelled(self)

    def join(self, timeout=None) -> bool:
        """Wait until the job has ended and its result was delivered; True if so."""
        return self._ended.wait(timeout)

    def is_alive(self) -> bool:
        return not self._ended.is_set()

    # -- called by the job's function on the worker ------------------------------------
    def report(self, done, total=None, *, stop=True):
        """Record progress (``done`` of ``total``, or a share); stop here if cancelled.

        ``stop=False`` only records: for work that stops itself through a hook of
        :meth:`on_cancel` and returns what it finished.
        """
        if stop and self._cancel.is_set():
            raise JobCancelled
        share = float(done) / max(float(total), 1.0) if total is not None else float(done)
        self.progress = min(max(share, 0.0), 1.0)
        if self._runner is not None:
            self._runner._published(self)

    def on_cancel(self, fn):
        """Call ``fn()`` when the job is cancelled (at once if it already is)."""
        self._cancel_hooks.append(fn)
        if self._cancel.is_set():
            fn()

    def __repr__(self):
        return f"Job({self.kind!r}, {self.outcome}, progress={self.progress:.2f})"


class BackgroundRunner:
    """Runs :class:`Job` s on one worker thread, newest first (see the module docstring).

    Parameters
    ----------
    publish : callable(job), called on the UI loop at every state change or progress.
    on_ui : callable(fn) that runs ``fn`` on the kernel's event loop (or right away).
    """

    def __init__(self, publish, on_ui):
        self._publish, self._on_ui = publish, on_ui
        self._cond = threading.Condition()
        self._waiting = []
        self._running = None
        self._thread = None
        self._latest = {}

    def submit(self, job: Job, *, replace=True) -> Job:
        """Queue ``job`` and return it; with ``replace``, cancel older jobs of its kind."""
        with self._cond:
            older = [j for j in self._waiting + [self._running]
                     if j is not None and j.kind == job.kind] if replace else []
            job._runner = self
            self._latest[job.kind] = job
        for old in older:
            old.cancel()
            self._cancelled(old)  # superseded: dropped if it has not started
        # "waiting" is published before the worker can see the job, so that no
        # subscriber hears "running" first
        self._published(job)
        if job.cancelled and not job.stops_itself:  # cancelled before it was queued
            self._end(job, "cancelled", None)
            return job
        with self._cond:
            self._waiting.append(job)
            if self._thread is None:
                self._thread = threading.Thread(target=self._work, daemon=True,
                                                name="hedgerow-background")
                self._thread.start()
            self._cond.notify_all()
        return job

    def latest(self, kind) -> Job | None:
        """Return the newest job of ``kind`` ever submitted, or None."""
        with self._cond:
            return self._latest.get(kind)

    def cancel(self, kind=None):
        """Cancel the waiting and running jobs of ``kind`` (every kind if None)."""
        with self._cond:
            jobs = [j for j in self._waiting + [self._running]
                    if j is not None and (kind is None or j.kind == kind)]
        for job in jobs:
            job.cancel()

    def busy(self) -> bool:
        with self._cond:
            return bool(self._waiting) or self._running is not None

    # -- internals ---------------------------------------------------------------------
    def _cancelled(self, job):
        with self._cond:
            if job.outcome in ENDED:
                return
            waiting = job in self._waiting
            if waiting:
                self._waiting.remove(job)
            self._cond.notify_all()
        if waiting:  # never started: it ends here
            self._end(job, "cancelled", None)

    def _published(self, job):
        self._on_ui(lambda: self._publish(job))

    def _next(self):
        """Return the newest eligible waiting job, waiting for one; None when idle."""
        with self._cond:
            idle_since = time.monotonic()
            while True:
                now = time.monotonic()
                ready = [j for j in self._waiting if j._not_before <= now]
                if ready:
                    job = max(ready, key=lambda j: j._order)
                    self._waiting.remove(job)
                    self._running = job
                    job.outcome = "running"
                    return job
                if not self._waiting and now - idle_since > IDLE_SECONDS:
                    self._thread = None
                    return None
                soon = min((j._not_before for j in self._waiting), default=now + IDLE_SECONDS)
                self._cond.wait(max(min(soon - now, IDLE_SECONDS), 0.001))

    def _work(self):
        while True:
            job = self._next()
            if job is None:
                return
            self._published(job)
            try:
                result = job._fn(job)
            except JobCancelled:
                self._end(job, "cancelled", None)
            except Exception as exc:  # shown by the subscribers, never lost
                log.exception("background job %r failed", job.kind)
                job.message = f"{type(exc).__name__}: {exc}"
                self._end(job, "failed", None)
            else:
                self._on_ui(lambda job=job, result=result: self._complete(job, result))
            finally:
                with self._cond:
                    self._running = None

    def _complete(self, job, result):
        """Deliver a returned result on the UI loop: on_done, publish, then end."""
        outcome = "cancelled" if job.cancelled else "done"
        if outcome == "done" and job._on_done is not None:
            try:
                job._on_done(job, result)
            except Exception as exc:  # shown by the subscribers, never lost
                log.exception("delivering background job %r failed", job.kind)
                job.message = f"{type(exc).__name__}: {exc}"
                outcome = "failed"
        self._end(job, outcome, result)

    def _end(self, job, outcome, result):
        with self._cond:
            if job.outcome in ENDED:
                return
            job.outcome, job.result = outcome, result
            if outcome == "done":
                job.progress = 1.0

        def finish():
            try:
                self._publish(job)
            finally:
                job._ended.set()

        self._on_ui(finish)
