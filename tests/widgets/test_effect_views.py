"""The effect explorer without a browser: its session, views and the caution on every tab."""

import time

import numpy as np
import pytest

from hedgerow import TreatmentEffectForest
from hedgerow import diagnostics as D
from hedgerow.datasets import load_trial_demo, trial_effect_truth
from hedgerow.estimators._effect_forest import EFFECT_CAUTION
from hedgerow.widgets import EffectExplorer, EffectSession, explore


@pytest.fixture(scope="module")
def trial():
    X, y, w, _ = load_trial_demo(500, random_state=6, observational=True)
    m = TreatmentEffectForest(n_estimators=256, random_state=0, n_jobs=1).fit(X, y, w)
    return X, y, w, m


@pytest.fixture
def explorer(trial):
    X, y, w, m = trial
    ex = explore(X, y, treatment=w, model=m)
    ex.session.verdict_folds = 3
    ex.session.verdict_fold_trees = 32
    yield ex
    ex.close()


def test_explore_with_treatment_gives_the_effect_explorer_with_a_caution_per_tab(explorer):
    assert isinstance(explorer, EffectExplorer)
    assert [explorer.get_title(i) for i in range(6)] == ["effect probe", "overlap",
                                                          "effect verdict", "effect slices",
                                                          "effect edges", "effect coverage"]
    assert len(explorer.children) == len(explorer.views) == 6
    import html

    for view in explorer.views:
        assert html.escape(EFFECT_CAUTION) in view.caution.value
        assert view.caution in view.children


def test_probe_view_shows_the_diagnostics_numbers_and_follows_the_sliders(explorer, trial):
    X, y, w, m = trial
    view = explorer.probe_view
    view.sliders[0].value = 0.8
    assert explorer.session.probe[0] == pytest.approx(0.8, abs=view.sliders[0].step)
    p = D.effect_probe(m, explorer.session.probe, feature=0)
    r = p.methods.loc["corrected forest"]
    assert view.probe_mark.y[0] == r["effect"]
    assert list(view.interval_mark.y) == [r["lower"], r["upper"]]
    np.testing.assert_array_equal(view.line_mark.y, p.line_effect)
    from hedgerow.widgets._style import fmt

    for name in D.EFFECT_METHODS:
        assert fmt(p.methods.loc[name, "effect"]) in view.readout_html.value
    # neighbours drawn are the rows with weight (and an out-of-bag effect)
    oob = explorer.session.oob_effects()
    assert len(view.neighbour_mark.x) == int(((p.weights > 0) & np.isfinite(oob)).sum())
    assert "Overlap" in view.overlap_html.value or "overlap" in view.overlap_html.value


def test_column_choice_moves_the_line(explorer):
    view = explorer.probe_view
    view.column_select.value = 2
    assert explorer.session.feature == 2
    assert view.figure.axes[0].label == "x2"
    p = explorer.session.probe_report()
    np.testing.assert_array_equal(view.line_mark.x, p.line_x)


def test_overlap_view_draws_the_histogram_by_arm(explorer, trial):
    X, y, w, m = trial
    o = explorer.overlap_view.redraw()
    bars = np.asarray(explorer.overlap_view.bars_mark.y)
    assert bars.shape == (2, o.edges.size - 1)
    assert bars[1].sum() == int(w.sum()) and bars[0].sum() == int((w == 0).sum())
    # the count axis reaches above the tallest bar (grouped bars do not widen it)
    y_scale = explorer.overlap_view.bars_mark.scales["y"]
    assert y_scale.min == 0 and bars.max() < y_scale.max <= 1.1 * bars.max()
    assert o.reading in explorer.overlap_view.reading_html.value.replace("&#x27;", "'")


def test_verdict_view_runs_in_the_background_and_shows_the_sentence(explorer):
    s = explorer.session
    view = explorer.verdict_view
    view.run_button.click()
    deadline = time.time() + 120
    while s.verdict_status == "running" and time.time() < deadline:
        time.sleep(0.1)
    assert s.verdict_status == "done"
    import html

    assert html.escape(s.verdict.conclusion) in view.conclusion_html.value
    assert view.progress.value == view.progress.max == 3
    assert not view.run_button.disabled and view.cancel_button.disabled


def test_a_cancelled_verdict_says_incomplete(trial):
    X, y, w, m = trial
    s = EffectSession(X, y, w, model=m, verdict_folds=3, verdict_fold_trees=32)
    from hedgerow._progress import RunControl

    ctl = RunControl()
    ctl.cancel()
    v = s.run_verdict(ctl)
    assert s.verdict_status == "cancelled" and not v.complete


def _hold_after_first_fold(session):
    """Hold the verdict's worker once the first fold is reported, until released.

    Returns (reached, release, seen): ``seen`` records the two buttons' state at that
    moment. The main thread then acts (cancel, close) while the run is mid-way.
    """
    import threading

    reached, release, seen = threading.Event(), threading.Event(), {}

    def on_progress(change):
        if change["new"][0] == 1 and not reached.is_set():
            seen["running"] = session.verdict_status
            reached.set()
            assert release.wait(60)

    session.observe(on_progress, names="verdict_progress")
    return reached, release, seen


def test_cancelling_a_background_verdict_keeps_the_folds_done(explorer, trial):
    X, y, w, m = trial
    s, view = explorer.session, explorer.verdict_view
    reached, release, seen = _hold_after_first_fold(s)
    view.run_button.click()
    job = s.verdict_job
    assert reached.wait(60) and seen["running"] == "running"
    assert view.run_button.disabled and not view.cancel_button.disabled
    assert s.start_verdict() is job  # a second click starts no second run
    with pytest.raises(RuntimeError, match="already running"):
        s.run_verdict()
    view.cancel_button.click()
    release.set()
    assert job.join(60) and job.outcome == "cancelled"
    assert s.verdict_status == "cancelled" and s.verdict_progress == (1, 3)
    v = s.verdict
    assert v is job.result and not v.complete
    # the rows scored are those of the first fold, no more
    from hedgerow.diagnostics._heldout import fold_assignment

    assert len(v.losses) == int((fold_assignment(len(y), 3, s.random_state) == 0).sum())
    assert "Incomplete" in view.conclusion_html.value
    assert not view.run_button.disabled and view.cancel_button.disabled


def test_a_failed_verdict_is_shown_and_the_earlier_one_kept(explorer, monkeypatch):
    import html

    s, view = explorer.session, explorer.verdict_view
    before = s.run_verdict()
    assert s.verdict_status == "done"

    def broken(*args, **kwargs):
        raise ValueError("no rows left in a fold")

    monkeypatch.setattr(D, "effect_verdict", broken)
    job = s.start_verdict()
    assert job.join(60) and job.outcome == "failed"
    assert s.verdict_status == "failed"
    assert s.verdict_message == "ValueError: no rows left in a fold"
    assert s.verdict is before
    assert "the effect verdict failed: ValueError: no rows left in a fold" in \
        view.error_html.value
    assert html.escape(before.conclusion) in view.conclusion_html.value
    # a run after the failure clears the error and draws the new verdict
    monkeypatch.undo()
    job = s.start_verdict()
    assert job.join(60) and job.outcome == "done" and s.verdict is job.result
    assert s.verdict_message == "" and view.error_html.value == ""


def test_closing_the_explorer_stops_a_running_verdict(trial):
    X, y, w, m = trial
    ex = explore(X, y, treatment=w, model=m, verdict_folds=4, verdict_fold_trees=32)
    s = ex.session
    reached, release, _ = _hold_after_first_fold(s)
    job = s.start_verdict()
    assert reached.wait(60)
    ex.close()
    release.set()
    assert job.join(60) and job.outcome == "cancelled"
    assert s.verdict_status == "cancelled" and s.verdict_progress == (1, 4)
    assert not s.verdict.complete
    assert s.start_verdict() is None and s.verdict_job is job  # nothing new after close


def test_in_a_kernel_like_loop_the_verdict_traits_change_on_the_loop(trial):
    # as in a Jupyter kernel: the session is made inside a running event loop, and the
    # runner's worker hands every state change to that loop (the views redraw there)
    import asyncio
    import threading

    X, y, w, m = trial

    async def run():
        s = EffectSession(X, y, w, model=m, verdict_folds=2, verdict_fold_trees=16)
        threads = []
        s.observe(lambda change: threads.append(threading.current_thread()),
                  names=["verdict_status", "verdict_progress"])
        job = s.start_verdict()
        for _ in range(3000):
            if not job.is_alive():
                break
            await asyncio.sleep(0.02)
        return s, job, threads

    s, job, threads = asyncio.run(run())
    assert job.outcome == "done" and s.verdict_status == "done" and s.verdict.complete
    assert s.verdict_progress == (2, 2)
    assert len(threads) >= 3 and all(t is threading.main_thread() for t in threads)


def test_on_a_frame_the_verdict_and_a_snapshot_warn_of_nothing(trial):
    # the session hands the diagnostics the caller's frame, not the model's bare array
    import warnings

    import pandas as pd

    from hedgerow.snapshot import Snapshot

    X, y, w, _ = trial
    frame = pd.DataFrame(X, columns=["slope", "moisture", "shade"])
    ex = explore(frame, y, treatment=w, n_estimators=64, verdict_folds=2,
                 verdict_fold_trees=16)
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        v = ex.session.run_verdict()
        snap = Snapshot.capture(ex)
    assert v.complete and snap.headline["verdict"] == v.conclusion
    ex.close()


def test_bad_input_is_named(trial):
    X, y, w, m = trial
    with pytest.raises(ValueError, match="'model'"):
        EffectSession(X, y, 1 - w, model=m)
    with pytest.raises(ValueError, match="'snapshot'"):
        explore(X, y, treatment=w, model=m, snapshot="x.json")
    s = EffectSession(X, y, w, model=m)
    with pytest.raises(Exception, match="column|feature"):
        s.feature = 7


def drag_step(view, x):
    view._on_probe_dragged(view.probe_mark, {"event": "drag", "point": {"x": x, "y": 0.0},
                                             "origin": {"x": 0.0, "y": 0.0}, "index": 0})


def release(view, x):
    view._on_probe_moved(view.probe_mark, {"event": "drag_end", "point": {"x": x, "y": 0.0},
                                           "index": 0})


def expected_neighbours(session, weights, j):
    """The neighbour mark's points and opacities for these weights (from the diagnostics)."""
    from hedgerow.widgets._style import marker_scaling

    oob = session.oob_effects()
    has, ok = weights > 0, np.isfinite(oob)
    _, opacity = marker_scaling(weights[has])
    X = session.model.X_train_
    return X[has & ok, j], oob[has & ok], opacity[ok[has]]


def test_dragging_the_diamond_sketches_and_the_release_moves_the_probe(
        explorer, trial, monkeypatch):
    from hedgerow.widgets import _base

    X, y, w, m = trial
    monkeypatch.setattr(_base, "DRAG_SKETCH_INTERVAL", 0.0)
    s, view = explorer.session, explorer.probe_view
    s.feature = 1
    j = 1
    start, readout = np.array(s.probe), view.readout_html.value
    reports = []
    real = s.probe_report
    monkeypatch.setattr(s, "probe_report", lambda *a, **k: reports.append(1) or real(*a, **k))
    for q in (0.2, 0.55, 0.85):
        target = float(np.quantile(X[:, j], q))
        drag_step(view, target)
        assert view.error_html.value == ""
        x = start.copy()
        x[j] = target
        sk = D.effect_probe_sketch(m, x, feature=j)
        nx, ny, op = expected_neighbours(s, sk.weights, j)
        np.testing.assert_array_equal(view.neighbour_mark.x, nx)
        np.testing.assert_array_equal(view.neighbour_mark.y, ny)
        np.testing.assert_allclose(view.neighbour_mark.opacities, op, rtol=1e-12)
        np.testing.assert_array_equal(view.line_mark.x, sk.line_x)
        np.testing.assert_array_equal(view.line_mark.y, sk.line_effect)
        assert view.sketch_x == target and not view.interval_mark.visible
        # the probe, the readout, the sliders and the full report wait for the release
        np.testing.assert_array_equal(s.probe, start)
        assert view.readout_html.value == readout and reports == []
        assert view.sliders[j].value == pytest.approx(start[j])
    release(view, target)
    assert view.error_html.value == "" and view.sketch_x is None
    assert s.probe[j] == target and s.probe[0] == start[0] and s.probe[2] == start[2]
    assert len(reports) == 1  # one full drawing, at the release
    p = D.effect_probe(m, s.probe, feature=j)
    r = p.methods.loc["corrected forest"]
    assert list(view.probe_mark.x) == [target] and list(view.probe_mark.y) == [r["effect"]]
    assert list(view.interval_mark.y) == [r["lower"], r["upper"]]
    assert view.interval_mark.visible
    np.testing.assert_array_equal(view.line_mark.y, p.line_effect)
    nx, _, op = expected_neighbours(s, p.weights, j)
    np.testing.assert_array_equal(view.neighbour_mark.x, nx)
    np.testing.assert_allclose(view.neighbour_mark.opacities, op, rtol=1e-12)
    from hedgerow.widgets._style import fmt

    for name in D.EFFECT_METHODS:
        assert fmt(p.methods.loc[name, "effect"]) in view.readout_html.value
    assert view.readout_html.value != readout
    assert view.sliders[j].value == pytest.approx(target, abs=view.sliders[j].step)


def test_drag_steps_are_throttled_beyond_the_data_clamped_and_a_return_redraws(
        explorer, trial, monkeypatch):
    from hedgerow.widgets import _base

    X, y, w, m = trial
    s, view = explorer.session, explorer.probe_view
    j = s.feature
    start = np.array(s.probe)
    full_line = np.asarray(view.line_mark.y).copy()
    monkeypatch.setattr(_base, "DRAG_SKETCH_INTERVAL", 60.0)
    first, second = float(np.quantile(X[:, j], 0.1)), float(np.quantile(X[:, j], 0.9))
    drag_step(view, first)
    assert view.sketch_x == first
    drag_step(view, second)  # sooner than the interval: skipped
    assert view.sketch_x == first
    assert not np.allclose(view.line_mark.y, full_line)
    release(view, start[j])  # back where it started: the probe stays, the sketch goes
    np.testing.assert_array_equal(s.probe, start)
    assert view.sketch_x is None and view.interval_mark.visible
    np.testing.assert_array_equal(view.line_mark.y, full_line)
    drag_step(view, 1e6)  # the release reset the throttle; beyond the data: clamped
    assert view.sketch_x == X[:, j].max()
    release(view, -1e6)
    assert s.probe[j] == X[:, j].min() and list(view.probe_mark.x) == [X[:, j].min()]


def test_a_release_that_cannot_be_drawn_puts_the_probe_back_and_shows_the_error(
        explorer, trial, monkeypatch):
    X, y, w, m = trial
    s, view = explorer.session, explorer.probe_view
    j = s.feature
    start = np.array(s.probe)
    effect_before = list(view.probe_mark.y)
    real = s.probe_report
    calls = []

    def broken(*a, **k):
        calls.append(1)
        if len(calls) == 1:
            raise RuntimeError("effect probe exploded")
        return real(*a, **k)

    monkeypatch.setattr(s, "probe_report", broken)
    target = float(np.quantile(X[:, j], 0.8))
    drag_step(view, target)
    view.probe_mark.x = [target]  # where the front end leaves the dragged diamond
    release(view, target)
    assert "effect probe exploded" in view.error_html.value
    assert "moving the probe failed" in view.error_html.value
    np.testing.assert_array_equal(s.probe, start)  # put back
    assert list(view.probe_mark.x) == [start[j]] and list(view.probe_mark.y) == effect_before
    assert view.sketch_x is None and view.interval_mark.visible
    assert view.sliders[j].value == pytest.approx(start[j])
    release(view, target)  # works now: the error goes
    assert view.error_html.value == "" and s.probe[j] == target


def test_a_drag_step_that_fails_is_shown_and_leaves_the_probe(explorer, monkeypatch):
    s, view = explorer.session, explorer.probe_view
    start = np.array(s.probe)

    def broken(value):
        raise RuntimeError("sketch exploded")

    monkeypatch.setattr(s, "probe_sketch", broken)
    drag_step(view, float(start[s.feature]) + 0.1)
    assert "dragging the probe failed" in view.error_html.value
    assert "sketch exploded" in view.error_html.value
    np.testing.assert_array_equal(s.probe, start)


def test_verdict_settings_are_checked_before_any_fit(trial):
    X, y, w, m = trial
    with pytest.raises(ValueError, match="'verdict_folds'.*Got 1"):
        EffectSession(X, y, w, verdict_folds=1)
    with pytest.raises(ValueError, match="'verdict_fold_trees'.*Got 1.5"):
        explore(X, y, treatment=w, model=m, verdict_fold_trees=1.5)
    ex = explore(X, y, treatment=w, model=m, verdict_folds=2, verdict_fold_trees=16)
    assert (ex.session.verdict_folds, ex.session.verdict_fold_trees) == (2, 16)
    assert "2 cross-fitted folds" in ex.verdict_view.conclusion_html.value
    ex.close()


def test_the_overlap_figure_is_put_in_when_its_tab_is_first_opened(explorer):
    # laid out inside a hidden tab, the figure had no size: bars of no height
    import ipywidgets as W

    view = explorer.overlap_view
    (slot,) = [c for c in view.children if type(c) is W.Box]
    assert slot.children == () and view.figure not in view.children
    explorer.selected_index = 1
    assert slot.children == (view.figure,)
    explorer.selected_index = 0
    explorer.selected_index = 1
    assert slot.children == (view.figure,)  # once


# -- effect slices and effect edges ----------------------------------------------------------
def test_the_new_tabs_show_the_caution_first(explorer):
    import html

    for view in (explorer.slices_view, explorer.edges_view):
        assert view.children[1] is view.caution
        assert html.escape(EFFECT_CAUTION) in view.caution.value
        assert explorer.children[explorer.views.index(view)] is view


def _slices_drawn(view, r):
    c = r.method("corrected forest")
    for name, mark in view.line_marks.items():
        np.testing.assert_array_equal(mark.x, r.method(name)["value"])
        np.testing.assert_array_equal(mark.y, r.method(name)["effect"])
    np.testing.assert_array_equal(view.band_mark.y, np.vstack([c["lower"], c["upper"]]))
    assert list(view.probe_mark.x) == [r.x[r.feature_index]] * 2


def test_slices_view_holds_the_diagnostics_numbers_and_follows_the_probe(explorer, trial):
    X, y, w, m = trial
    s, view = explorer.session, explorer.slices_view
    r0 = D.effect_slices(m, s.probe, s.feature)
    _slices_drawn(view, r0)
    before = np.array(view.line_marks["corrected forest"].y)
    s.set_probe_value(1, 0.7)  # another column: the slice along x0 moves
    r1 = D.effect_slices(m, s.probe, s.feature)
    _slices_drawn(view, r1)
    assert not np.array_equal(before, view.line_marks["corrected forest"].y)
    s.set_probe_value(0, -0.6)  # the slice's own column: only the probe's rule moves
    assert list(view.probe_mark.x) == [-0.6, -0.6]
    from hedgerow.widgets._style import fmt

    last = r1.method("uncorrected forest").iloc[-1]
    assert fmt(last["effect"]) in view.ends_html.value
    assert "clt" in view.settings_html.value and view.error_html.value == ""


def test_slices_view_follows_the_column_both_ways(explorer, trial):
    X, y, w, m = trial
    s, view = explorer.session, explorer.slices_view
    view.column_select.value = 2
    assert s.feature == 2 and view.figure.axes[0].label == "x2"
    _slices_drawn(view, D.effect_slices(m, s.probe, 2))
    s.feature = 1  # e.g. from the probe tab's column choice
    assert view.column_select.value == 1 and explorer.probe_view.column_select.value == 1


def test_slices_view_draws_a_known_truth(trial):
    from hedgerow.widgets import EffectSlicesView

    X, y, w, m = trial
    s = EffectSession(X, y, w, model=m, truth=trial_effect_truth)
    view = EffectSlicesView(s)
    r = s.slice_report()
    assert "truth" in view.line_marks and "truth" in r.methods
    np.testing.assert_array_equal(view.line_marks["truth"].y, r.method("truth")["effect"])
    with pytest.raises(TypeError, match="'truth'"):
        EffectSession(X, y, w, model=m, truth=1.0)
    ex = explore(X, y, treatment=w, model=m, truth=trial_effect_truth)  # passed through
    assert "truth" in ex.slices_view.line_marks
    ex.close()


def test_slices_view_shows_a_failure_instead_of_raising(explorer, monkeypatch):
    s, view = explorer.session, explorer.slices_view

    def broken(*args, **kwargs):
        raise RuntimeError("solver down")

    monkeypatch.setattr(s, "slice_report", broken)
    s.set_probe_value(2, 0.3)  # the observer must not raise
    assert "solver down" in view.error_html.value


def test_edges_view_holds_the_diagnostics_numbers(explorer, trial):
    X, y, w, m = trial
    view = explorer.edges_view
    e = D.effect_edges(m)
    p = e.paired
    np.testing.assert_array_equal(view.point_mark.y, p["difference"])
    np.testing.assert_array_equal(np.asarray(view.whisker_mark.y),
                                  np.column_stack([p["lower"], p["upper"]]))
    assert len(view.point_mark.x) == len(p) == 4
    from hedgerow.widgets._style import fmt

    for _, r in p.iterrows():
        assert f"<td>{int(r['n'])}</td>" in view.table_html.value
        assert fmt(r["difference"], 3) in view.table_html.value
    assert fmt(e.overall["difference"], 3) in view.table_html.value
    import html

    assert html.escape(e.reading) in view.reading_html.value
    # computed once by the session, not again on a probe move
    assert explorer.session.edge_report() is explorer.session.edge_report()



def test_the_coverage_tab_runs_the_readout_and_shows_why_it_misses(explorer, trial):
    # The tab renders what EffectSession.coverage holds (diagnostics.effect_coverage_
    # readout), row by row; the surrogate's limits are said when there is no truth.
    import html

    s, view = explorer.session, explorer.coverage_view
    s.coverage_reps, s.coverage_rows = 2, 15
    assert "Not run yet" in view.status_html.value and "stand-in" in view.status_html.value
    job = s.start_coverage()
    assert s.start_coverage() is job  # one run at a time
    assert job.join(120) and job.outcome == "done"
    rep = s.coverage
    assert rep is job.result and s.coverage_status == "done"
    assert s.coverage_progress == (2, 2)
    fr = rep.to_frame()
    assert not fr.empty and rep.mode.startswith("surrogate")
    first = fr.iloc[0]
    assert f"{first['coverage']:.3g}"[:4] in view.table_html.value
    assert view.table_html.value.count("<tr>") == len(fr) + 1
    assert "stand-in" in view.notes_html.value  # what the surrogate cannot show
    assert html.escape(EFFECT_CAUTION) in view.caution.value
    assert not view.run_button.disabled and view.cancel_button.disabled


def test_a_failed_coverage_readout_keeps_the_earlier_one(explorer, monkeypatch):
    s, view = explorer.session, explorer.coverage_view
    s.coverage_reps, s.coverage_rows = 2, 10
    before = s.run_coverage()

    def broken(*args, **kwargs):
        raise ValueError("the refit failed")

    monkeypatch.setattr(D, "effect_coverage_readout", broken)
    job = s.start_coverage()
    assert job.join(60) and job.outcome == "failed"
    assert s.coverage_status == "failed" and s.coverage is before
    assert "the coverage readout failed: ValueError: the refit failed" in \
        view.error_html.value
    with pytest.raises(ValueError, match="'coverage_reps'.*>= 2"):
        EffectSession(*trial_args(explorer), coverage_reps=1)


def trial_args(explorer):
    s = explorer.session
    return s.X, s.y, s.treatment
