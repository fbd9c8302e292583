"""The effect report: its numbers are the estimator's own, its caution leads and closes."""

import re
import xml.etree.ElementTree as ET

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


# -- figures ----------------------------------------------------------------------------
@pytest.fixture(scope="module")
def plain(trial):
    """The same forest's report without the verdict."""
    X, y, w, model = trial
    return build_effect_report(X, y, w, model=model, probe=[0.9, 0.0, 0.0], verdict=False,
                               progress=False)


def _gid(ax, gid):
    """Return the artists of ``ax`` (lines, collections, patches) whose gid is ``gid``."""
    found = [a for a in (*ax.lines, *ax.collections, *ax.patches) if a.get_gid() == gid]
    assert found, f"nothing drawn with gid {gid!r}"
    return found


def test_figures_are_inline_svg_in_their_sections(report):
    from hedgerow.report._effect_figures import slice_figure_key

    keys = {"overlap", "verdict"} | {slice_figure_key(i) for i in range(len(report.slices))}
    assert set(report.figures) == keys
    page = report.to_html()
    ids = re.findall(r'\bid="([^"]+)"', page)
    assert len(ids) == len(set(ids))  # several SVGs on one page, no id twice
    assert "http://" not in page and "https://" not in page
    sections = {sid: page[page.index(f'<section id="{sid}"'):] for sid in report.sections}
    for sid in sections:
        sections[sid] = sections[sid][:sections[sid].index("</section>")]
    assert report.figures["overlap"] in sections["overlap"]
    assert report.figures["verdict"] in sections["verdict"]
    for i in range(len(report.slices)):
        assert report.figures[slice_figure_key(i)] in sections["effect-along"]
    for name, svg in report.figures.items():
        assert svg.startswith('<svg class="hr-figure"') and "viewBox" in svg, name
        assert svg.rstrip().endswith("</svg>"), name
        # the caution box is above every figure; every figure has a caption right after it
        assert page.index('id="effect-caution"') < page.index(svg), name
        assert page[page.index(svg) + len(svg):].startswith("<figcaption>"), name
    assert 'id="fig-effect-0-corrected"' in report.figures[slice_figure_key(0)]
    assert 'id="fig-overlap-bins-treated"' in report.figures["overlap"]
    assert 'id="fig-overlap-zone-high"' in report.figures["overlap"]


def test_sections_carry_their_ids_headings_and_nav_links_in_order(report, plain):
    # the page's sections come from the helper the regression page uses (_html.sections)
    import html

    from hedgerow.report._effect_html import _HEADINGS

    for rep in (report, plain):
        page = rep.to_html()
        nav = page[page.index("<nav"):page.index("</nav>")]
        heads = [page.index(f'<section id="{sid}"><h2>{html.escape(_HEADINGS[sid])}</h2>')
                 for sid in rep.sections]
        links = [nav.index(f'<a href="#{sid}">{html.escape(_HEADINGS[sid])}</a>')
                 for sid in rep.sections]
        assert heads == sorted(heads) and links == sorted(links)
        assert page.count("<section id=") == len(rep.sections)
    assert "verdict" in report.sections and "verdict" not in plain.sections


def test_the_effect_along_a_column_is_the_estimators(trial, report):
    X, y, w, model = trial
    cols = [int(c) for c in model.correction_features_][:3] or [0]
    assert [sl.feature_index for sl in report.slices.values()] == cols
    assert list(report.slices) == [f"x{j}" for j in cols]
    for sl in report.slices.values():
        f = sl.frame
        Q = np.repeat(np.array([[0.9, 0.0, 0.0]]), len(f), axis=0)
        Q[:, sl.feature_index] = f["value"]
        np.testing.assert_array_equal(f["corrected"], model.predict_effect(Q))
        np.testing.assert_array_equal(f["uncorrected"],
                                      model.predict_effect(Q, corrected=False))
        lo, hi = model.effect_interval(Q, 0.95, D.interval_method(None, True))
        np.testing.assert_array_equal(f["lower"], lo)
        np.testing.assert_array_equal(f["upper"], hi)
        assert sl.interval == "bias_corrected"
        col = X[:, sl.feature_index]
        assert f["value"].iloc[0] == col.min() and f["value"].iloc[-1] == col.max()
        assert np.all(np.diff(f["value"]) > 0)
    np.testing.assert_array_equal(report.oob_effects, model.oob_effect())


def test_the_figures_draw_the_reports_numbers(trial, report):
    from matplotlib.figure import Figure

    from hedgerow.report import _effect_figures as F

    X, y, w, model = trial
    name, sl = next(iter(report.slices.items()))
    ax = F.effect_slice_figure(Figure, sl, name, model.X_train_, report.oob_effects,
                               "y").axes[0]
    assert ax.get_xlabel() == name
    f = sl.frame
    np.testing.assert_array_equal(_gid(ax, "corrected")[0].get_ydata(), f["corrected"])
    np.testing.assert_array_equal(_gid(ax, "corrected")[0].get_xdata(), f["value"])
    np.testing.assert_array_equal(_gid(ax, "uncorrected")[0].get_ydata(), f["uncorrected"])
    band = _gid(ax, "band")[0].get_paths()[0].vertices
    lows = band[1:1 + len(f)]  # fill_between: start, the lower edge, then the upper back
    np.testing.assert_allclose(lows, np.c_[f["value"], f["lower"]])
    np.testing.assert_allclose(band[len(f) + 2:2 * len(f) + 2][::-1],
                               np.c_[f["value"], f["upper"]])
    pts = _gid(ax, "rows")[0].get_offsets()
    ok = np.isfinite(report.oob_effects)
    np.testing.assert_array_equal(pts, np.c_[model.X_train_[ok, sl.feature_index],
                                             report.oob_effects[ok]])

    ov = report.overlap
    ax = F.overlap_figure(Figure, ov).axes[0]
    for arm in ("treated", "untreated"):
        counts, edges, _ = _gid(ax, f"bins-{arm}")[0].get_data()
        np.testing.assert_array_equal(counts, ov.counts[arm])
        np.testing.assert_array_equal(edges, ov.edges)
    for gid, span in (("zone-low", (0.0, ov.margin)), ("zone-high", (1 - ov.margin, 1.0))):
        box = _gid(ax, gid)[0].get_bbox()  # the span's rectangle, x in data units
        assert (box.x0, box.x1) == pytest.approx(span)

    v = report.verdict
    ax = F.verdict_gain_figure(Figure, v).axes[0]
    for k, (_, row) in enumerate(v.comparisons.iterrows()):
        want = [100 * row[f"gain_{p}"] for p, _ in F.VERDICT_PARTS]
        np.testing.assert_allclose(_gid(ax, f"gain-{k}")[0].get_xdata(), want)
        segs = _gid(ax, f"interval-{k}")[0].get_segments()
        np.testing.assert_allclose([s[:, 0] for s in segs],
                                   [[100 * row[f"lower_{p}"], 100 * row[f"upper_{p}"]]
                                    for p, _ in F.VERDICT_PARTS])


def test_figures_are_a_function_of_the_reports_numbers(trial, report):
    from hedgerow.report._effect_figures import effect_figures

    X, y, w, model = trial
    again = effect_figures(report.overlap, report.slices, report.oob_effects, model.X_train_,
                           report.data.target, report.verdict)
    assert again == dict(report.figures)


def test_without_the_verdict_there_is_no_verdict_figure_and_the_page_says_so(report, plain):
    assert "verdict" not in plain.figures and "overlap" in plain.figures
    page = plain.to_html()
    assert "fig-verdict" not in page
    note = page.index('id="effect-no-verdict"')
    assert page.index('id="effect-caution"') < note < page.index('<section id="average"')
    assert "No held-out verdict was run" in page
    assert 'id="effect-no-verdict"' not in report.to_html()


def test_a_verdict_part_without_rows_is_named_not_drawn(report):
    import dataclasses

    from matplotlib.figure import Figure

    from hedgerow.report._effect_figures import verdict_gain_figure

    comps = report.verdict.comparisons.copy()
    comps.loc[:, ["gain_edge", "lower_edge", "upper_edge"]] = np.nan
    v = dataclasses.replace(report.verdict, comparisons=comps)
    ax = verdict_gain_figure(Figure, v).axes[0]
    for k in range(len(comps)):
        assert len(_gid(ax, f"gain-{k}")[0].get_xdata()) == 2  # all rows and interior
        assert len(_gid(ax, f"interval-{k}")[0].get_segments()) == 2
    assert sum("too few rows" in t.get_text() for t in ax.texts) == len(comps)


@pytest.mark.filterwarnings("ignore::hedgerow.estimators.FewBagsWarning")
def test_a_continuous_treatment_has_no_weak_overlap_zones():
    from matplotlib.figure import Figure

    from hedgerow.report._effect_figures import overlap_figure

    # an invented dose that follows x0, with an effect that grows along x0
    rng = np.random.default_rng(2)
    X = rng.uniform(-1, 1, size=(300, 2))
    w = X[:, 0] + rng.normal(size=300)
    y = X[:, 1] + w * (1 + X[:, 0]) + rng.normal(scale=0.5, size=300)
    r = build_effect_report(X, y, w, model=TreatmentEffectForest(
        n_estimators=100, random_state=0, n_jobs=1), feature=0, verdict=False,
        progress=False)
    assert r.treatment == "continuous" and set(r.figures) == {"overlap", "effect along 0"}
    ax = overlap_figure(Figure, r.overlap).axes[0]
    gids = {a.get_gid() for a in (*ax.patches, *ax.collections)}
    assert "bins-all rows" in gids and not {"zone-low", "zone-high"} & gids
    assert "fitted mean of the treatment" in ax.get_xlabel()
    assert "fig-overlap-zone" not in r.figures["overlap"]
    assert "no zone of weak overlap to mark" in r.to_html()
    f = r.slices["x0"].frame
    Q = np.repeat(r.slices["x0"].x[None, :], len(f), axis=0)
    Q[:, 0] = f["value"]
    np.testing.assert_array_equal(f["corrected"], r.model.predict_effect(Q))


@pytest.mark.filterwarnings("ignore::hedgerow.estimators.FewBagsWarning")
def test_column_names_are_escaped_in_figures_and_captions(trial):
    import pandas as pd

    X, y, w, _ = trial
    names = ["dose <mg> & co", "shade $1", "moisture"]
    Xd = pd.DataFrame(X, columns=names)
    r = build_effect_report(Xd, y, w, model=TreatmentEffectForest(
        n_estimators=100, correction_features=[0], random_state=0, n_jobs=1),
        feature=["dose <mg> & co", 1], verdict=False, progress=False)
    assert list(r.slices) == ["dose <mg> & co", "shade $1"]
    page = r.to_html()
    assert "<mg>" not in page and "& co" not in page
    assert page.count("dose &lt;mg&gt; &amp; co") >= 4  # heading, caption, axis, title
    svg = r.figures["effect along 0"]
    assert "dose &lt;mg&gt; &amp; co" in svg
    # well-formed markup, every text escaped (the namespaces inline SVG in HTML implies)
    spaces = 'xmlns="http://www.w3.org/2000/svg" xmlns:xlink="http://www.w3.org/1999/xlink" '
    for markup in r.figures.values():
        ET.fromstring(markup.replace('class="hr-figure"', spaces + 'class="hr-figure"', 1))
    assert "shade $1" in r.figures["effect along 1"]  # '$' kept literal, not mathtext
    # a column outside the correction (only column 0 corrects) is said to be so
    assert r.slices["shade $1"].corrected_column is False
    assert r.slices["dose <mg> & co"].corrected_column is True
    cap = page[page.index(r.figures["effect along 1"]):]
    cap = cap[:cap.index("</figcaption>")]
    assert "The correction does not use shade $1 (it kept dose &lt;mg&gt; &amp; co)" in cap
    cap0 = page[page.index(r.figures["effect along 0"]):]
    assert "does not use" not in cap0[:cap0.index("</figcaption>")]
    assert EFFECT_CAUTION.split(":")[0] in cap


@pytest.mark.parametrize("feature, match", [
    ("nope", r"'feature'.*names \['x0', 'x1', 'x2'\].*'nope'"),
    (3, r"'feature'.*indices 0\.\.2.*Got 3"),
    ([0, 1, 2, 0], r"'feature'.*list of 1 to 3 columns"),
    ([], r"'feature'.*list of 1 to 3 columns"),
    (True, r"'feature'.*Got True"),
])
def test_a_bad_feature_is_refused_before_any_fit(trial, feature, match, tmp_path):
    X, y, w, _ = trial
    est = TreatmentEffectForest(n_estimators=100, random_state=0, n_jobs=1)
    path = tmp_path / "e.html"
    path.write_text("earlier report")
    with pytest.raises(ValueError, match=match):
        save_effect_html(path, X, y, w, model=est, feature=feature, progress=False)
    with pytest.raises(NotFittedError):
        check_is_fitted(est)
    assert path.read_text() == "earlier report"


def test_effect_slice_refuses_a_bad_grid_and_feature(trial):
    X, y, w, model = trial
    with pytest.raises(ValueError, match="'grid'.*at least one value"):
        D.effect_slice(model, X[0], 0, grid=[])
    with pytest.raises(ValueError, match="'grid'.*finite"):
        D.effect_slice(model, X[0], 0, grid=[0.0, np.inf])
    with pytest.raises(TypeError, match="'grid'.*numbers"):
        D.effect_slice(model, X[0], 0, grid=["a"])
    with pytest.raises(ValueError, match="'feature'"):
        D.effect_slice(model, X[0], 7)
    with pytest.raises(TypeError, match="'model'"):
        D.effect_slice(object(), X[0], 0)
    sl = D.effect_slice(model, X[0], "x1", grid=[-0.5, 0.5])
    assert sl.feature == "x1" and list(sl.frame["value"]) == [-0.5, 0.5]
    assert EFFECT_CAUTION in repr(sl)
