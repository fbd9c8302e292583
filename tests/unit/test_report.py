"""The shareable HTML report: content, escaping, offline-ness, atomic writes, bad input.

Data are invented: a machine's output rising and saturating with its load, plus two
nuisance columns whose names hold characters HTML must escape.
"""

from __future__ import annotations

import os
import re
import subprocess
import sys
import warnings
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from hedgerow import (
    HonestForestRegressor,
    LocalLinearForestRegressor,
    LocalLinearRegressor,
    NadarayaWatsonRegressor,
)
from hedgerow import diagnostics as D
from hedgerow import report as R

LOAD, TEMP, HUM = "load <kW>", "temp $C", "hum & dust"
TITLE = 'Line 3 review <b>"draft"</b>'


def _invented(n=240, seed=5):
    rng = np.random.default_rng(seed)
    X = pd.DataFrame({LOAD: rng.uniform(0.0, 10.0, n), TEMP: rng.normal(40.0, 5.0, n),
                      HUM: rng.uniform(0.0, 1.0, n)})
    y = pd.Series(20.0 * np.tanh(X[LOAD] / 4.0) + rng.normal(0.0, 1.5, n),
                  name="output <units>")
    return X, y


@pytest.fixture(scope="module")
def data():
    return _invented()


@pytest.fixture(scope="module")
def model(data):
    X, y = data
    return LocalLinearForestRegressor(n_estimators=60, random_state=3).fit(*data)


@pytest.fixture(scope="module")
def report(data, model):
    X, y = data
    return R.build_report(X, y, model=model, title=TITLE, progress=False)


@pytest.fixture(scope="module")
def page(report):
    return report.to_html()


@pytest.fixture(scope="module")
def direct(data, model):
    """The same diagnostics called directly, without the report module."""
    X, y = data
    sm = [NadarayaWatsonRegressor().fit(X, y), LocalLinearRegressor().fit(X, y)]
    models = {"local linear forest": model,
              "honest forest (same trees)": D.local_average_model(model)}
    for s in sm:
        models[D.method_label(s)] = s
    x = D.probe_anchor(model.X_train_)
    j = int(model.correction_features_[0])
    pr = D.probe(model, x, compare=sm)
    with warnings.catch_warnings():
        # edges() asks a DataFrame-fitted model for slopes at NumPy rows (harmless)
        warnings.filterwarnings("ignore", message="X does not have valid feature names")
        profile = D.edges(models)
    return {
        "verdict": D.verdict(model.X_train_, model.y_train_, forest=model, smoothers=sm,
                             baseline=True, random_state=0),
        "probe": pr,
        "readout": D.probe_readout(pr),
        "slices": D.slices(models, x, j, D.slice_grid(model, j)),
        "edges": profile,
        "oob": D.oob_summary(model),
        "feature": j,
    }


def _section(page, sid):
    m = re.search(rf'<section id="{re.escape(sid)}">(.*?)</section>', page, flags=re.S)
    assert m is not None, f"no section {sid!r}"
    return m.group(1)


def _g(v):
    return f"{float(v):.4g}"


def _pct(v):
    return f"{100 * float(v):+.1f}%"


# -- content --------------------------------------------------------------------------
def test_every_section_is_present_in_order(report, page):
    assert report.sections == tuple(s for s in R.SECTIONS if s != "coverage")
    positions = [page.index(f'<section id="{s}">') for s in report.sections]
    assert positions == sorted(positions)
    for s in report.sections:
        assert f'href="#{s}"' in page
    assert '<section id="coverage">' not in page
    assert report.coverage is None


def test_the_page_is_the_one_it_was_before_the_shared_section_helper(report, page):
    # Both report pages now build their sections with _html.sections. This is the
    # regression page's former rendering, kept here verbatim as the reference: the
    # shared helper must give the same bytes.
    import html

    from hedgerow.report import _html as H

    def former_section(sid, body):
        return f'<section id="{sid}"><h2>{html.escape(H._HEADINGS[sid], quote=True)}</h2>' \
               f"{body}</section>"

    body = "".join(former_section(s, H._BODIES[s](report)) for s in report.sections)
    meta = (f"{H._e(report.data.n_rows)} rows, {H._e(report.data.n_columns)} columns, "
            f"target <code>{H._e(report.data.target)}</code>; data fingerprint "
            f"<code>{H._e(report.data.fingerprint)}</code>; made "
            f"{H._e(report.settings.created)} by hedgerow {H._e(report.settings.version)}. "
            f"A static page: it opens offline and computes nothing.")
    notes = "".join(f"<p class='hr-note'>{H._e(n)}</p>" for n in report.notes)
    former = H.page(report.title, report.settings.version, meta, notes,
                    [(s, H._HEADINGS[s]) for s in report.sections], body)
    assert page == former


def test_a_section_escapes_its_heading_and_id():
    from hedgerow.report._html import section

    assert section("a&b", 'x < "y"', "<p>kept</p>") == \
        '<section id="a&amp;b"><h2>x &lt; &quot;y&quot;</h2><p>kept</p></section>'


def test_data_summary_and_settings(report, page, data, model):
    X, y = data
    d = report.data
    assert (d.n_rows, d.n_columns) == X.shape
    assert d.columns == (LOAD, TEMP, HUM)
    assert d.target == "output <units>"
    assert d.fingerprint == R.data_fingerprint(X, y)
    sec = _section(page, "data")
    assert f"<td class='hr-text'>{X.shape[0]}</td>" in sec
    assert d.fingerprint in sec
    s = report.settings
    assert s.parameters == model.get_params()
    assert s.seed == 3
    assert s.feature == X.columns[int(model.correction_features_[0])]
    assert list(s.probe.values()) == pytest.approx(list(D.probe_anchor(model.X_train_)))
    sec = _section(page, "settings")
    assert "<td>n_estimators</td><td>60</td>" in sec
    assert _g(model.ridge_penalty_) in sec
    for value in s.probe.values():
        assert _g(value) in sec


def test_fingerprint_tracks_the_data(data):
    X, y = data
    fp = R.data_fingerprint(X, y)
    assert R.data_fingerprint(X.copy(), y.copy()) == fp
    X2 = X.copy()
    X2.iloc[7, 1] += 1e-9
    assert R.data_fingerprint(X2, y) != fp
    # the same hash a snapshot stores (names are kept beside it, not hashed)
    from hedgerow.snapshot import DataFingerprint

    assert fp == DataFingerprint.from_data(X, y).sha256[:16]
    assert R.data_fingerprint(X.rename(columns={HUM: "hum"}), y) == fp
    assert R.data_fingerprint(X.iloc[::-1], y.iloc[::-1]) != fp
    assert re.fullmatch(r"[0-9a-f]{16}", fp)


def test_verdict_matches_the_direct_call(report, page, direct):
    v = direct["verdict"]
    pd.testing.assert_frame_equal(report.verdict.comparisons, v.comparisons)
    assert report.verdict.conclusion == v.conclusion
    sec = _section(page, "verdict")
    import html

    assert html.escape(v.conclusion) in sec
    for name, row in v.comparisons.iterrows():
        assert html.escape(name) in sec
        for part in ("all", "edge", "interior"):
            for key in ("gain", "lower", "upper"):
                if np.isfinite(row[f"{key}_{part}"]):
                    assert _pct(row[f"{key}_{part}"]) in sec


def test_probe_slice_edges_and_oob_match_the_direct_calls(report, page, direct):
    pd.testing.assert_frame_equal(report.probe_table, direct["readout"])
    pd.testing.assert_frame_equal(report.slices.frame, direct["slices"].frame)
    pd.testing.assert_frame_equal(report.edges.bands, direct["edges"].bands)
    pd.testing.assert_frame_equal(report.edges.bend, direct["edges"].bend)
    assert report.oob == direct["oob"]
    sec = _section(page, "probe")
    for _, row in direct["readout"].iterrows():
        assert _g(row["prediction"]) in sec
        assert _g(row["lower"]) in sec and _g(row["upper"]) in sec
    sec = _section(page, "edges")
    for _, row in direct["edges"].bands.iterrows():
        assert _g(row["rmse"]) in sec and _g(row["mean_residual"]) in sec
    sec = _section(page, "out-of-bag")
    assert _g(direct["oob"]["oob_rmse"]) in sec
    assert _g(direct["oob"]["mean_width"]) in sec


def test_figures_are_inline_svg_with_unique_ids(report, page):
    assert set(report.figures) == {"slice", "edges", "neighbour_weights"}
    for name, svg in report.figures.items():
        assert svg.startswith('<svg class="hr-figure"'), name
        assert svg.rstrip().endswith("</svg>"), name
        assert "<path" in svg and "viewBox" in svg, name
        assert svg in page
    # text stays text (searchable), names escaped inside the SVG too
    assert "local linear forest" in report.figures["slice"]
    assert "load &lt;kW&gt;" in report.figures["slice"]
    ids = re.findall(r'\bid="([^"]+)"', page)
    assert len(ids) == len(set(ids)), "element ids repeat across the page"
    refs = set(re.findall(r'(?:url\(#|href="#)([^")]+)', page))
    assert refs <= set(ids), f"references without a target: {sorted(refs - set(ids))[:5]}"


def test_figures_are_reproducible(data, model, report):
    X, y = data
    again = R.build_report(X, y, model=model, title=TITLE, progress=False)
    assert again.figures == report.figures


def test_slice_figure_shows_each_method(report):
    svg = report.figures["slice"]
    for name in ("local linear forest: 95% band", "honest forest (same trees): steps",
                 "Nadaraya-Watson", "local linear (kernel)", "local line at probe"):
        assert name in svg
    assert "Nadaraya-Watson" in report.figures["neighbour_weights"]
    for name in report.edges.residuals.columns:
        assert name in report.figures["edges"]


def test_names_and_title_are_escaped(page):
    assert "<b>" not in page and "&lt;b&gt;" in page
    assert "<kW>" not in page and "load &lt;kW&gt;" in page
    assert "hum &amp; dust" in page and "hum & dust" not in page
    assert "<units>" not in page
    assert f"<title>{'Line 3 review &lt;b&gt;&quot;draft&quot;&lt;/b&gt;'}</title>" in page


def test_page_references_nothing_outside_itself(page):
    assert "http://" not in page and "https://" not in page
    assert "<script" not in page.lower()
    assert "@import" not in page and "@font-face" not in page
    for ref in re.findall(r'\b(?:src|href)\s*=\s*"([^"]*)"', page):
        assert ref.startswith("#"), ref
    for ref in re.findall(r"url\(([^)]*)\)", page):
        assert ref.startswith("#"), ref
    assert "Content-Security-Policy" in page and "default-src 'none'" in page


def test_cautions(report, page):
    sec = _section(page, "cautions")
    assert "smoothing bias" in sec
    assert "not a causal effect" in sec
    assert "coverage_reps=0" in sec
    assert len(report.cautions) == sec.count("<li>")


def test_figures_draw_each_method_in_its_palette_colour(report):
    """Views and report share hedgerow._palette; the SVG must actually use it."""
    from hedgerow._palette import METHOD_COLOURS, METHOD_DASHES

    slice_svg = report.figures["slice"].lower()
    for name in ("local linear forest", "honest forest"):
        assert METHOD_COLOURS[name].lower() in slice_svg, name
    # every named dash pattern has a matplotlib style
    assert {R._figures.line_style(m) for m in METHOD_DASHES} <= {"-", "--", "-.", ":"}


def test_report_needs_neither_widgets_nor_matplotlib_at_import():
    code = ("import sys, hedgerow.report; "
            "bad = [m for m in sys.modules if m.startswith(('hedgerow.widgets', 'matplotlib',"
            " 'ipywidgets', 'bqplot'))]; print(bad); sys.exit(1 if bad else 0)")
    done = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True)
    assert done.returncode == 0, done.stdout + done.stderr


def test_coverage_section_when_requested(data, model):
    X, y = data
    rep = R.build_report(X, y, model=model, compare=False, coverage_reps=2, progress=False)
    assert "coverage" in rep.sections
    with warnings.catch_warnings():
        # coverage_readout predicts a DataFrame-fitted model at NumPy rows (harmless)
        warnings.filterwarnings("ignore", message="X does not have valid feature names")
        direct = D.coverage_readout(model, reps=2, progress=False, random_state=0)
    pd.testing.assert_frame_equal(rep.coverage.frame, direct.frame)
    sec = _section(rep.to_html(), "coverage")
    for _, row in direct.frame.iterrows():
        assert _g(row["mean_width"]) in sec
    assert "coverage_reps=0" not in _section(rep.to_html(), "cautions")
    # without comparison smoothers: forests only, and no bandwidth table
    assert rep.smoothers == ()
    assert "Nadaraya-Watson" not in rep.figures["slice"]
    assert "bandwidths" not in _section(rep.to_html(), "settings")
    assert "smoothing bias" not in _section(rep.to_html(), "cautions")


def test_unfitted_model_is_fitted_on_a_clone(data):
    X, y = data
    est = LocalLinearForestRegressor(n_estimators=30, random_state=11)
    rep = R.build_report(X, y, model=est, feature=HUM, probe={LOAD: 9.5}, compare=False,
                         progress=False)
    assert not hasattr(est, "X_train_")
    assert rep.model is not est and rep.model.get_params() == est.get_params()
    assert rep.settings.feature == HUM and rep.slices.feature == HUM
    assert rep.settings.probe[LOAD] == 9.5
    assert rep.probe.x[0] == 9.5
    assert rep.settings.probe[TEMP] == pytest.approx(float(np.median(X[TEMP])))


def test_default_model_has_a_fixed_seed(data):
    X, y = data
    rep = R.build_report(X.iloc[:120], y.iloc[:120], compare=False, progress=False)
    assert rep.model.get_params() == LocalLinearForestRegressor(random_state=0).get_params()


def test_numpy_input_gets_default_names(data, model):
    X, y = data
    rep = R.build_report(X.to_numpy(), y.to_numpy(), model=LocalLinearForestRegressor(
        n_estimators=20, random_state=0), feature="x2", compare=False, progress=False)
    assert rep.data.columns == ("x0", "x1", "x2") and rep.data.target == "y"
    assert rep.settings.feature == "x2"


def test_progress_bar_over_the_steps(data, model, capsys):
    X, y = data
    R.build_report(X, y, model=model, compare=False, progress=True)
    err = capsys.readouterr().err
    assert "hedgerow report" in err and "figures" in err
    R.build_report(X, y, model=model, compare=False, progress=False)
    assert "hedgerow report" not in capsys.readouterr().err


# -- writing --------------------------------------------------------------------------
def test_save_html_writes_and_returns_the_path(tmp_path, data, model):
    X, y = data
    out = R.save_html(tmp_path / "review.html", X, y, model=model, feature=LOAD,
                      probe=X.iloc[0], title="review", progress=False)
    assert out == tmp_path / "review.html"
    text = out.read_text(encoding="utf-8")
    assert text.startswith("<!DOCTYPE html>") and text.rstrip().endswith("</html>")
    assert "<title>review</title>" in text
    assert [p.name for p in tmp_path.iterdir()] == ["review.html"]


def _old(tmp_path):
    path = tmp_path / "report.html"
    path.write_text("earlier report", encoding="utf-8")
    return path


def _only(tmp_path, path):
    assert path.read_text(encoding="utf-8") == "earlier report"
    assert [p.name for p in tmp_path.iterdir()] == [path.name], "temporary file left behind"


def test_failed_rename_leaves_the_earlier_file(tmp_path, report, monkeypatch):
    path = _old(tmp_path)

    def fail(src, dst):
        raise OSError(28, "No space left on device")

    monkeypatch.setattr(os, "replace", fail)
    with pytest.raises(OSError, match="No space"):
        R.write_html(report, path)
    _only(tmp_path, path)


def test_interrupted_write_leaves_the_earlier_file(tmp_path, report, monkeypatch):
    path = _old(tmp_path)

    def interrupt(fd):
        raise KeyboardInterrupt

    monkeypatch.setattr(os, "fsync", interrupt)
    with pytest.raises(KeyboardInterrupt):
        R.write_html(report, path)
    _only(tmp_path, path)


def test_failed_render_leaves_the_earlier_file(tmp_path, report, monkeypatch):
    path = _old(tmp_path)

    def broken(self):
        raise RuntimeError("render failed")

    monkeypatch.setattr(R.Report, "to_html", broken)
    with pytest.raises(RuntimeError, match="render failed"):
        R.write_html(report, path)
    _only(tmp_path, path)


def test_bad_input_leaves_the_earlier_file(tmp_path, data, model):
    X, y = data
    path = _old(tmp_path)
    with pytest.raises(ValueError, match="'feature'"):
        R.save_html(path, X, y, model=model, feature="speed", progress=False)
    _only(tmp_path, path)


def test_write_keeps_the_earlier_file_mode(tmp_path, report):
    path = _old(tmp_path)
    path.chmod(0o640)
    R.write_html(report, path)
    assert path.stat().st_mode & 0o777 == 0o640
    assert path.read_text(encoding="utf-8").startswith("<!DOCTYPE html>")


# -- bad input ------------------------------------------------------------------------
@pytest.mark.parametrize(
    "change, error, match",
    [
        ({"feature": "speed"}, ValueError, r"'feature' parameter must name a column"),
        ({"feature": 7}, ValueError, r"'feature' parameter must be a column index in \[0, 3\)"),
        ({"probe": [1.0, 2.0]}, ValueError, r"probe point 'x' must have 3 values"),
        ({"probe": {"speed": 1.0}}, ValueError, r"'probe' parameter names unknown columns"),
        ({"probe": [1.0, np.nan, 0.0]}, ValueError, r"probe point 'x' must be finite"),
        ({"model": HonestForestRegressor()}, TypeError, r"'model' parameter must be a "
                                                        r"LocalLinearForestRegressor"),
        ({"coverage_reps": -1}, ValueError, r"'coverage_reps' parameter must be an integer"),
        ({"coverage_reps": 1.5}, ValueError, r"'coverage_reps' parameter must be an integer"),
        ({"compare": "yes"}, TypeError, r"'compare' parameter must be True or False"),
        ({"title": 3}, TypeError, r"'title' parameter must be a string"),
    ],
)
def test_bad_parameters_are_named(data, change, error, match):
    X, y = data
    est = LocalLinearForestRegressor(n_estimators=10, random_state=0)
    kwargs = {"model": est, "progress": False, **change}
    with pytest.raises(error, match=match):
        R.build_report(X, y, **kwargs)
    assert not hasattr(est, "X_train_")  # refused before anything was fitted


def test_bad_data_is_named(data, model):
    X, y = data
    Xs = X.assign(site=["north"] * len(X))
    with pytest.raises(ValueError, match=r"non-numeric columns: \['site'\]"):
        R.build_report(Xs, y, progress=False)
    Xn = X.copy()
    Xn.iloc[3, 2] = np.nan
    with pytest.raises(ValueError, match=r"missing or infinite values \(columns \['hum & dust'\]"):
        R.build_report(Xn, y, progress=False)
    with pytest.raises(ValueError, match=r"at least 20 rows\. Got 12"):
        R.build_report(X.iloc[:12], y.iloc[:12], progress=False)
    with pytest.raises(ValueError, match=r"one value per row of X \(240 rows\)\. Got 239"):
        R.build_report(X, y.iloc[:-1], progress=False)
    with pytest.raises(ValueError, match=r"y \('output <units>'\) must hold numbers"):
        R.build_report(X, y.astype(str), progress=False)
    with pytest.raises(ValueError, match="fitted on other data"):
        R.build_report(X.iloc[:200], y.iloc[:200], model=model, progress=False)
    with pytest.raises(ValueError, match="fitted on columns"):
        R.build_report(X.set_axis(["a", "b", "c"], axis=1), y, model=model, progress=False)


def test_bad_paths_are_named(tmp_path, report, data, model):
    X, y = data
    with pytest.raises(ValueError, match="does not exist"):
        R.save_html(tmp_path / "missing" / "r.html", X, y, model=model, progress=False)
    with pytest.raises(ValueError, match="not a folder"):
        R.write_html(report, tmp_path)
    with pytest.raises(TypeError, match="'path' parameter must be a file path"):
        R.write_html(report, 42)
    assert list(Path(tmp_path).iterdir()) == []


def test_failed_write_names_the_given_path_not_the_temporary_file(tmp_path, report,
                                                                  monkeypatch):
    # reports and snapshots share one writer (hedgerow._atomic); the OS would name the
    # temporary file
    import tempfile

    path = _old(tmp_path)

    def refuse(prefix, suffix, dir):
        raise PermissionError(13, "Permission denied", f"{dir}/{prefix}x1y2{suffix}")

    monkeypatch.setattr(tempfile, "mkstemp", refuse)
    with pytest.raises(PermissionError) as info:
        R.write_html(report, path)
    assert str(path) in str(info.value) and "Permission denied" in str(info.value)
    assert ".tmp" not in str(info.value)
    _only(tmp_path, path)


# -- large tables ---------------------------------------------------------------------------
def test_comparisons_on_a_subsample_are_the_direct_calls_on_those_rows(data, model):
    from sklearn.base import clone

    X, y = data
    rep = R.build_report(X, y, model=model, comparison_rows=60, progress=False,
                         random_state=4)
    assert rep.verdict.errors.shape[0] == 60
    rows_of = {tuple(r): i for i, r in enumerate(X.to_numpy())}
    for s in rep.smoothers:
        assert s.X_train_.shape[0] == 60
        picked = [rows_of[tuple(r)] for r in s.X_train_]
        assert picked == sorted(set(picked))  # distinct rows of X, in their order
    Xs = X.iloc[picked]
    ys = y.iloc[picked]
    direct = D.verdict(Xs.to_numpy(), ys.to_numpy(), forest=clone(model),
                       smoothers=list(rep.smoothers), baseline=True, random_state=4,
                       progress=False)
    pd.testing.assert_frame_equal(rep.verdict.comparisons, direct.comparisons)
    # the forests' own numbers still use every row; subsampled smoothers leave the edges
    assert list(rep.edges.residuals.columns) == ["local linear forest",
                                                 "honest forest (same trees)"]
    assert rep.edges.residuals.shape[0] == len(X)
    assert rep.oob == D.oob_summary(model)
    assert len(rep.notes) == 1 and "Large table (240 rows)" in rep.notes[0]
    assert rep.notes[0] in html_unescape(rep.to_html())


def html_unescape(text):
    import html

    return html.unescape(text)


def test_no_subsample_when_the_table_is_small_enough(data, model, report):
    X, y = data
    rep = R.build_report(X, y, model=model, compare=False, comparison_rows=len(X),
                         baseline=False, progress=False)
    assert rep.notes == () and rep.verdict.errors.shape[0] == len(X)
    assert "random forest (scikit-learn)" not in rep.verdict.comparisons.index
    assert "random forest (scikit-learn)" in report.verdict.comparisons.index


@pytest.mark.parametrize("change, error, match", [
    ({"comparison_rows": 5}, ValueError, r"'comparison_rows' parameter must be None or an "
                                         r"integer >= 20\. Got 5"),
    ({"comparison_rows": 100.0}, ValueError, r"'comparison_rows' parameter"),
    ({"baseline": "no"}, TypeError, r"'baseline' parameter must be True or False"),
])
def test_bad_large_table_parameters_are_named(data, change, error, match):
    X, y = data
    est = LocalLinearForestRegressor(n_estimators=10, random_state=0)
    with pytest.raises(error, match=match):
        R.build_report(X, y, model=est, progress=False, **change)
    assert not hasattr(est, "X_train_")


def test_figures_draw_a_bounded_number_of_points(data, model, monkeypatch):
    import hedgerow.report._figures as F

    X, y = data
    # matplotlib writes one <use> per scatter point (and a dozen for ticks and legend)
    uncapped = R.build_report(X, y, model=model, compare=False, progress=False)
    monkeypatch.setattr(F, "FIGURE_POINTS", 50)
    capped = R.build_report(X, y, model=model, compare=False, progress=False)
    for name in ("slice", "edges", "neighbour_weights"):
        others = uncapped.figures[name].count("<use ") - len(X) * (2 if name == "edges" else 1)
        if name != "neighbour_weights":  # every row is drawn (the weights: rows with weight)
            assert others < 30, name
        assert capped.figures[name].count("<use ") < uncapped.figures[name].count("<use "), name
    assert capped.figures["slice"].count("<use ") < 50 + 30
    assert capped.figures["edges"].count("<use ") < 2 * 50 + 30


def test_report_panel_and_snapshot_read_the_same_verdict_sentence(data, model, report):
    # the report compares kernel smoothers; the decision panel and the snapshot headline do
    # not (a bandwidth search per fold): the smoothers never decide, so all three carry one
    # sentence (issue: a verdict a reviewer can trust)
    from hedgerow.snapshot import Snapshot
    from hedgerow.widgets._session import ExploreSession

    X, y = data
    assert (report.verdict.comparisons["role"] == "smoother").sum() == 2
    assert report.verdict.smoother_note.startswith("Kernel smoothers")
    snap = Snapshot.from_model(model, X, y, verdict=True, compare=False)
    assert snap.headline["verdict"] == report.verdict.conclusion
    session = ExploreSession(X, y, model=model, compare=False)
    try:
        panel = session.verdict_report()
    finally:
        session.close()
    assert panel.conclusion == report.verdict.conclusion
    assert panel.decision == report.verdict.decision
