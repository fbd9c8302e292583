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
    assert [explorer.get_title(i) for i in range(5)] == ["effect probe", "overlap",
                                                          "effect verdict", "effect slices",
                                                          "effect edges"]
    assert len(explorer.children) == len(explorer.views) == 5
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


def test_bad_input_is_named(trial):
    X, y, w, m = trial
    with pytest.raises(ValueError, match="'model'"):
        EffectSession(X, y, 1 - w, model=m)
    with pytest.raises(ValueError, match="'snapshot'"):
        explore(X, y, treatment=w, model=m, snapshot="x.json")
    s = EffectSession(X, y, w, model=m)
    with pytest.raises(Exception, match="column|feature"):
        s.feature = 7


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
