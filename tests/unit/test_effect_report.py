"""The effect report: its numbers are the estimator's own, its caution leads and closes."""

import re

import numpy as np
import pytest
from sklearn.exceptions import NotFittedError
from sklearn.utils.validation import check_is_fitted

from hedgerow import TreatmentEffectForest
from hedgerow import diagnostics as D
from hedgerow.datasets import load_trial_demo
from hedgerow.estimators._effect_forest import EFFECT_CAUTION
from hedgerow.report import (
    EFFECT_REPORT_CAUTIONS,
    build_effect_report,
    save_effect_html,
)


@pytest.fixture(scope="module")
def trial():
    X, y, w, tau = load_trial_demo(500, random_state=3, observational=True)
    model = TreatmentEffectForest(n_estimators=256, random_state=0, n_jobs=1).fit(X, y, w)
    return X, y, w, model


@pytest.fixture(scope="module")
def report(trial):
    X, y, w, model = trial
    return build_effect_report(X, y, w, model=model, probe=[0.9, 0.0, 0.0], progress=False)


def test_the_caution_leads_and_closes_the_page(report):
    page = report.to_html()
    assert report.cautions[0] == EFFECT_CAUTION
    assert report.cautions[1:] == EFFECT_REPORT_CAUTIONS
    head = page.index('id="effect-caution"')
    assert head < page.index('id="average"')
    assert page.count("unconfoundedness") >= 2  # the leading box and the cautions list
    assert page.index('id="cautions"') > page.index('id="probe"')
    assert "<script" not in page.lower()
    assert "default-src 'none'" in page


def test_averages_are_the_estimators_own(trial, report):
    X, y, w, model = trial
    overall = model.average_effect()
    assert report.averages["all"].estimate == overall.estimate
    assert report.averages["all"].std_error == overall.std_error
    edge = D.edge_depth(X)[0] < D.EDGE_BAND
    a_edge = model.average_effect(edge)
    a_in = model.average_effect(~edge)
    assert report.averages["edge band"].estimate == a_edge.estimate
    assert report.averages["interior"].estimate == a_in.estimate
    assert report.averages["edge band"].n + report.averages["interior"].n == X.shape[0]
    # the page shows them through the one number formatter
    from hedgerow.report._numbers import number

    assert number(a_edge.estimate) in report.to_html()


def test_effect_at_the_probe_is_predict_effect_with_and_without_the_correction(trial, report):
    X, y, w, model = trial
    q = np.array([[0.9, 0.0, 0.0]])
    for name, corrected in (("corrected forest", True), ("uncorrected forest", False)):
        tau, std = model.predict_effect(q, return_std=True, corrected=corrected)
        lo, hi = model.effect_interval(q, 0.95, D.interval_method(None, corrected),
                                       corrected=corrected)
        got = report.at_probe[name]
        assert got["effect"] == tau[0] and got["std"] == std[0]
        assert (got["lower"], got["upper"]) == (lo[0], hi[0])
    assert list(report.slopes) == ["x0", "x1", "x2"]
    assert report.slopes["x0"] == model.local_slopes(q)[0, 0]


def test_overlap_is_the_diagnostics_profile(trial, report):
    X, y, w, model = trial
    ov = model.overlap()
    assert report.overlap.flagged.sum() == int(ov["flagged"].sum())
    arms = report.overlap.summary()
    assert arms.loc["treated", "n"] == int((w == 1).sum())
    assert arms.loc["untreated", "max"] == ov["by_arm"][0].max()
    assert arms.loc["treated", "median"] == np.median(ov["by_arm"][1])


def test_the_verdict_leads_and_is_the_diagnostics_verdict(trial, report):
    X, y, w, model = trial
    v = D.effect_verdict(X, y, w, model=model, progress=False)
    assert report.verdict.conclusion == v.conclusion
    page = report.to_html()
    assert page.index('id="effect-verdict-conclusion"') < page.index('id="average"')
    assert report.sections[0] == "verdict"
    r = build_effect_report(X, y, w, model=model, verdict=False, progress=False)
    assert r.verdict is None and "verdict" not in r.sections
    assert 'id="verdict"' not in r.to_html()


def test_weak_overlap_is_counted_on_the_page():
    # an invented design where the treatment follows x0 almost deterministically
    rng = np.random.default_rng(5)
    X = rng.uniform(-1, 1, size=(400, 2))
    e = 1 / (1 + np.exp(-8 * X[:, 0]))
    w = (rng.random(400) < e).astype(float)
    y = X[:, 1] + w + rng.normal(scale=0.5, size=400)
    r = build_effect_report(X, y, w, model=TreatmentEffectForest(
        n_estimators=256, random_state=0, n_jobs=1), verdict=False, progress=False)
    k = int(r.overlap.flagged.sum())
    assert k > 0
    assert re.search(rf"Weak overlap on {k} of 400 rows", r.to_html())


def test_an_unfitted_model_is_cloned_and_left_unfitted(trial):
    X, y, w, _ = trial
    est = TreatmentEffectForest(n_estimators=256, random_state=1, n_jobs=1)
    r = build_effect_report(X, y, w, model=est, verdict=False, progress=False)
    with pytest.raises(NotFittedError):
        check_is_fitted(est)
    assert r.model is not est and r.settings["random_state"] == 1


def test_bad_input_names_the_parameter_and_keeps_an_earlier_file(trial, tmp_path):
    X, y, w, model = trial
    path = tmp_path / "effect.html"
    path.write_text("earlier report")
    with pytest.raises(ValueError, match="'treatment'"):
        save_effect_html(path, X, y, w[:-1], model=model, progress=False)
    bad = w.copy()
    bad[3] = np.nan
    with pytest.raises(ValueError, match="'treatment'"):
        save_effect_html(path, X, y, bad, model=model, progress=False)
    with pytest.raises(ValueError, match="'treatment'.*single arm"):
        save_effect_html(path, X, y, np.ones_like(w), model=model, progress=False)
    with pytest.raises(TypeError, match="'model'"):
        save_effect_html(path, X, y, w, model=object(), progress=False)
    with pytest.raises(ValueError, match="'model'"):
        save_effect_html(path, X[:-1], y[:-1], w[:-1], model=model, progress=False)
    assert path.read_text() == "earlier report"
    check_is_fitted(model)  # the fitted model passed is untouched


def test_save_writes_the_page(trial, tmp_path):
    X, y, w, model = trial
    out = save_effect_html(tmp_path / "e.html", X, y, w, model=model, progress=False,
                           title="Soil treatment review")
    page = out.read_text()
    assert "<title>Soil treatment review</title>" in page
    assert EFFECT_CAUTION.split(":")[0] in page
