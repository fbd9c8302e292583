"""The comparison smoothers fit in the session's background runner: the explorer opens
before them, draws them when they are in, and a refit or a close cancels their job."""

import threading

import numpy as np
import pytest

pytest.importorskip("ipywidgets")
pytest.importorskip("bqplot")

from hedgerow import diagnostics as D  # noqa: E402
from hedgerow.datasets import load_orchard_demo, load_pump_demo, split_demo  # noqa: E402
from hedgerow.estimators import NadarayaWatsonRegressor  # noqa: E402
from hedgerow.estimators._kernel import _KernelSmoother  # noqa: E402
from hedgerow.widgets import explore  # noqa: E402

pytestmark = [pytest.mark.filterwarnings("ignore:X does not have valid feature names"),
              pytest.mark.filterwarnings("ignore::RuntimeWarning")]

SMOOTHERS = ("Nadaraya-Watson", "local linear (kernel)")


@pytest.fixture
def held_fit(monkeypatch):
    """Make every smoother fit wait on an event; yield (release event, started event)."""
    release, started = threading.Event(), threading.Event()
    fit = _KernelSmoother.fit

    def waiting_fit(self, X, y, *, progress=False):
        started.set()
        while not release.wait(0.02):
            if progress is not False:
                progress.update(0)  # a cancelled job stops here, as in a real search
        return fit(self, X, y, progress=False)

    monkeypatch.setattr(_KernelSmoother, "fit", waiting_fit)
    yield release, started
    release.set()


@pytest.mark.parametrize("seed", [1, 2])
def test_explorer_opens_and_works_before_the_smoothers_are_fitted(held_fit, seed):
    release, started = held_fit
    X, y = load_orchard_demo(220, random_state=seed)
    app = explore(X, y, n_estimators=40, refit_delay=0.01)
    s = app.session
    assert started.wait(30)
    assert s.latest_job("smoothers").outcome == "running" and s.compared == []
    # every view drew the forests; the smoothers have marks, not yet data
    assert all(v.error == "" for v in app.views)
    assert set(SMOOTHERS) <= set(app.probe_view.slice_marks)
    assert set(app.probe_view.readout) == {"local linear forest", "honest forest (same trees)"}
    assert "fitting the comparison smoothers" in s.smoothers_message
    assert "fitting the comparison smoothers" in app.probe_view._settings_line.value
    # the session is usable meanwhile: move the probe, change the penalty
    before = app.probe_view.readout["local linear forest"]["prediction"]
    app.probe_view.move_probe(float(np.quantile(s.X_train[:, 0], 0.9)))
    s.ridge_penalty = 0.3
    assert app.probe_view.error == ""
    assert app.probe_view.readout["local linear forest"]["prediction"] != before
    # then the job finishes: the smoothers appear in the readout, marks and edges
    release.set()
    assert s.wait_for("smoothers", 60) == "done"
    assert s.compared == list(SMOOTHERS) and s.smoothers_message == ""
    assert set(SMOOTHERS) <= set(app.probe_view.readout)
    direct = D.probe(D.at_ridge_penalty(s.model, s.ridge_penalty), np.asarray(s.probe_x),
                     compare=s._smoothers)
    for name in SMOOTHERS:
        assert app.probe_view.readout[name]["prediction"] == pytest.approx(
            direct.method(name).prediction, rel=1e-12)
        assert len(app.probe_view.slice_marks[name].x) > 2
        assert len(app.edges_view.dot_marks[name].x) == len(app.edges_view._rows)
        assert len(app.weights_view.weight_marks[name].x) > 1
    assert all(v.error == "" for v in app.views)
    app.close()


def test_a_refit_cancels_the_pending_smoother_job_and_asks_again_after(held_fit):
    release, started = held_fit
    X, y = load_orchard_demo(200, random_state=4)
    app = explore(X, y, n_estimators=30, refit_delay=0.01)
    s = app.session
    assert started.wait(30)
    first = s.latest_job("smoothers")
    refit = s.request_refit(min_samples_leaf=9)
    assert first.join(30) and first.outcome == "cancelled"
    assert s.wait_for_refit(60) == "done" and refit.outcome == "done"
    second = s.latest_job("smoothers")
    assert second is not first and second.outcome in ("waiting", "running")
    release.set()
    assert s.wait_for("smoothers", 60) == "done"
    assert s.compared == list(SMOOTHERS)
    assert set(SMOOTHERS) <= set(app.probe_view.readout)
    app.close()


def test_closing_the_explorer_cancels_the_smoother_job(held_fit):
    release, started = held_fit
    X, y = load_orchard_demo(200, random_state=5)
    app = explore(X, y, n_estimators=30)
    s = app.session
    assert started.wait(30)
    job = s.latest_job("smoothers")
    app.close()
    assert job.join(30) and job.outcome == "cancelled"
    assert s.compared == [] and s.request_smoothers() is None


def test_without_compare_no_smoother_job_is_submitted():
    X, y = load_orchard_demo(150, random_state=6)
    app = explore(X, y, n_estimators=20, compare=False)
    assert app.session.latest_job("smoothers") is None
    assert not set(SMOOTHERS) & set(app.probe_view.slice_marks)


@pytest.mark.parametrize("n_rows, seed", [(300, 2), (260, 7)])
def test_readout_notes_the_columns_each_smoother_uses_on_wide_data(n_rows, seed):
    X, y, _ = split_demo(load_pump_demo(n_rows, random_state=seed))
    assert X.shape[1] >= D.WIDE_COLUMNS
    app = explore(X, y, n_estimators=40)
    s = app.session
    assert s.wait_for("smoothers", 180) == "done"
    rep = s.probe_report()
    html = app.probe_view._readout_html.value
    for smoother in s._smoothers:
        name = D.method_label(smoother)
        used = int(smoother.n_features_used_)
        assert rep.method(name).columns_used == used
        assert f"{name} uses {used} of {X.shape[1]} columns" in html
    assert "local linear forest uses" not in html
    app.close()


def test_narrow_data_without_a_dropped_column_gets_no_note():
    X, y = load_orchard_demo(200, random_state=8)
    X = X.iloc[:, :2]
    model = NadarayaWatsonRegressor(bandwidth=[0.4, 0.5]).fit(X, y)
    from hedgerow.estimators import LocalLinearForestRegressor

    forest = LocalLinearForestRegressor(n_estimators=20, random_state=0).fit(X, y)
    rep = D.probe(forest, X.iloc[0].to_numpy(), compare=[model])
    assert rep.method("Nadaraya-Watson").columns_used == 2 and rep.column_use_notes() == []


def test_explorer_opens_before_the_verdict_is_cross_fitted(monkeypatch):
    # the verdict's five cross-fitted folds run on the session's runner: the views open
    # with a "cross-fitting" line, then show the sentence the function gives
    from hedgerow.widgets._style import VERDICT_PENDING

    X, y, _ = split_demo(load_pump_demo())
    X, y = X.iloc[:300, :4], y.iloc[:300]
    gate = threading.Event()
    real = D.verdict

    def held_verdict(*args, **kwargs):
        gate.wait(60)
        return real(*args, **kwargs)

    monkeypatch.setattr(D, "verdict", held_verdict)
    app = explore(X, y, n_estimators=40, compare=False, refit_delay=0.05)
    try:
        assert app.verdict_view.conclusion_html.value == VERDICT_PENDING
        assert VERDICT_PENDING in app.tuning_view.verdict_html.value
        assert app.session.peek_verdict() is None
        gate.set()
        assert app.session.wait_for("verdict", 300) == "done"
        v = app.session.peek_verdict()
        assert v is not None
        assert v.conclusion.replace("'", "&#x27;") in app.verdict_view.conclusion_html.value
    finally:
        gate.set()
        app.close()
