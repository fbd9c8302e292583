"""The session's one background runner: newest first, replace, cancel, progress, status;
and views that start no thread of their own."""

import inspect
import pathlib
import threading
import time

import numpy as np
import pytest

pytest.importorskip("ipywidgets")
pytest.importorskip("bqplot")

from hedgerow.datasets import load_orchard_demo  # noqa: E402
from hedgerow.widgets import ExploreSession, explore  # noqa: E402
from hedgerow.widgets._runner import BackgroundRunner, Job, JobCancelled  # noqa: E402

pytestmark = pytest.mark.filterwarnings("ignore:X does not have valid feature names")


def make_runner():
    seen = []
    runner = BackgroundRunner(lambda job: seen.append((job.kind, job.outcome, job.progress)),
                              lambda fn: fn())
    return runner, seen


def gate_job(kind="gate"):
    """A job that holds the worker until its event is set."""
    gate, started = threading.Event(), threading.Event()

    def run(job):
        started.set()
        assert gate.wait(30)
        return "gate"

    return Job(kind, run), gate, started


def test_newest_waiting_job_starts_first():
    runner, _ = make_runner()
    order = []
    blocker, gate, started = gate_job()
    runner.submit(blocker)
    assert started.wait(30)
    jobs = [runner.submit(Job(f"kind {i}", lambda job, i=i: order.append(i)), replace=False)
            for i in range(4)]
    gate.set()
    for job in jobs:
        assert job.join(30) and job.outcome == "done"
    assert order == [3, 2, 1, 0]


def test_a_newer_job_of_the_same_kind_replaces_the_older():
    runner, seen = make_runner()
    blocker, gate, started = gate_job()
    runner.submit(blocker)
    assert started.wait(30)
    ran = []
    old = runner.submit(Job("width", lambda job: ran.append("old")))
    new = runner.submit(Job("width", lambda job: ran.append("new")))
    assert old.join(5) and old.outcome == "cancelled"  # dropped before it started
    gate.set()
    assert new.join(30) and new.outcome == "done" and ran == ["new"]
    assert runner.latest("width") is new
    assert ("width", "cancelled", 0.0) in seen and ("width", "done", 1.0) in seen


def test_running_job_reports_progress_and_stops_when_cancelled():
    runner, seen = make_runner()
    reached = threading.Event()

    def run(job):
        for i in range(1000):
            job.report(i, 1000)
            if i == 3:
                reached.set()
            time.sleep(0.005)
        return "never"

    job = runner.submit(Job("long", run))
    assert reached.wait(30)
    job.cancel()
    assert job.join(30)
    assert job.outcome == "cancelled" and job.result is None
    shares = [p for k, o, p in seen if o == "running"]
    assert shares[:4] == [0.0, 0.0, 0.001, 0.002] and 0 < job.progress < 1


def test_failure_is_kept_with_its_message_and_the_runner_goes_on():
    runner, _ = make_runner()

    def broken(job):
        raise ZeroDivisionError("no rows")

    bad = runner.submit(Job("a", broken))
    good = runner.submit(Job("b", lambda job: 41 + 1))
    assert bad.join(30) and good.join(30)
    assert bad.outcome == "failed" and bad.message == "ZeroDivisionError: no rows"
    assert good.outcome == "done" and good.result == 42


def test_a_delayed_job_waits_and_a_self_stopping_job_keeps_its_partial_result():
    runner, _ = make_runner()
    t0 = time.monotonic()
    started = []
    job = runner.submit(Job("slow start", lambda job: started.append(time.monotonic()),
                            delay=0.3))
    assert job.join(30) and started[0] - t0 >= 0.3

    def steps(job):
        stop = threading.Event()
        job.on_cancel(stop.set)
        done = 0
        while not stop.is_set() or done == 0:
            done += 1
            job.report(done, 100, stop=False)
        return done

    partial = Job("steps", steps, stops_itself=True)
    partial.cancel()  # before it started: it still does one step and returns it
    runner.submit(partial)
    assert partial.join(30)
    assert partial.outcome == "cancelled" and partial.result == 1


def test_a_session_job_like_fitting_the_smoothers():
    # how another piece of work (the comparison smoothers, say) runs on the session's
    # runner: submit with progress, on_done on the event loop, subscribers, status
    X, y = load_orchard_demo(200, random_state=1)
    s = ExploreSession(X, y, n_estimators=40, compare=False)
    heard, delivered = [], []
    s.subscribe("smoothers", lambda job: heard.append(job.outcome))

    def fit(job):
        from hedgerow.estimators import NadarayaWatsonRegressor

        job.report(0, 1)
        model = NadarayaWatsonRegressor().fit(X, y)
        job.report(1, 1)
        return model

    job = s.submit("smoothers", fit, on_done=lambda job, m: delivered.append(m))
    assert s.wait_for("smoothers", 60) == "done"
    assert delivered == [job.result] and hasattr(job.result, "bandwidth_")
    assert heard[0] == "waiting" and heard[-1] == "done" and "running" in heard
    assert s.job_states["smoothers"] == "done"
    cancelled = s.submit("smoothers", lambda job: job.report(0.5) or time.sleep(30),
                         delay=5.0)
    s.cancel_jobs("smoothers")
    assert cancelled.join(5) and s.job_states["smoothers"] == "cancelled"
    with pytest.raises(JobCancelled):
        cancelled.report(0.5)


def test_views_start_no_thread(monkeypatch):
    """Every thread made while the views are built and driven comes from the runner
    (or from worker pools below the widgets), none from a view."""
    widgets = pathlib.Path(__file__).resolve().parents[2] / "hedgerow" / "widgets"
    real = threading.Thread
    makers = []

    class Recorded(real):
        def __init__(self, *args, **kwargs):
            frame = inspect.currentframe().f_back
            makers.append(pathlib.Path(frame.f_code.co_filename).resolve())
            super().__init__(*args, **kwargs)

    monkeypatch.setattr(threading, "Thread", Recorded)
    X, y = load_orchard_demo(250, random_state=2)
    app = explore(X, y, n_estimators=60, refit_delay=0.01, compare=False)
    probe, tuning = app.probe_view, app.tuning_view
    probe._on_probe_moved(probe.probe_mark, {"event": "drag_end", "index": 0, "point": {
        "x": float(np.quantile(app.session.X_train[:, 0], 0.8)), "y": 0.0}})
    tuning.ridge_slider.value = 3.0
    assert tuning.wait_for_width(60)
    tuning.coverage_reps = 2
    tuning.start_coverage().join(120)
    tuning.leaf_slider.value = 7
    assert app.session.wait_for_refit(60) == "done"
    from_widgets = [m for m in makers if m.parent == widgets]
    assert from_widgets, "the patch saw no thread: the runner's own should be there"
    assert {m.name for m in from_widgets} == {"_runner.py"}
    assert all(v.error == "" for v in app.views)


def test_the_effect_explorer_starts_no_thread(monkeypatch):
    """The effect verdict runs on the runner too: no thread of the effect session's own."""
    from hedgerow.datasets import load_trial_demo

    widgets = pathlib.Path(__file__).resolve().parents[2] / "hedgerow" / "widgets"
    real = threading.Thread
    makers = []

    class Recorded(real):
        def __init__(self, *args, **kwargs):
            frame = inspect.currentframe().f_back
            makers.append(pathlib.Path(frame.f_code.co_filename).resolve())
            super().__init__(*args, **kwargs)

    monkeypatch.setattr(threading, "Thread", Recorded)
    X, y, w, _ = load_trial_demo(300, random_state=3)
    app = explore(X, y, treatment=w, n_estimators=64, verdict_folds=2,
                  verdict_fold_trees=16)
    app.verdict_view.run_button.click()
    job = app.session.verdict_job
    assert job.join(60) and job.outcome == "done"
    assert app.session.verdict_status == "done"
    from_widgets = [m for m in makers if m.parent == widgets]
    assert {m.name for m in from_widgets} == {"_runner.py"}
    app.close()
