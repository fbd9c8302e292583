"""The effect explorer without a browser: its session, views and the caution on every tab."""

import time

import numpy as np
import pytest

from hedgerow import TreatmentEffectForest
from hedgerow import diagnostics as D
from hedgerow.datasets import load_trial_demo
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
    assert [explorer.get_title(i) for i in range(3)] == ["effect probe", "overlap",
                                                          "effect verdict"]
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
