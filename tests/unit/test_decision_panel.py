"""The decision panel's plain function and one column of the tuning surface."""

import numpy as np
import pytest

from hedgerow import LocalLinearForestRegressor
from hedgerow import diagnostics as D
from hedgerow.datasets import load_pump_demo, split_demo

pytestmark = pytest.mark.filterwarnings("ignore::RuntimeWarning")


@pytest.fixture(scope="module")
def fitted():
    X, y, _ = split_demo(load_pump_demo(300, random_state=4))
    model = LocalLinearForestRegressor(n_estimators=100, random_state=2).fit(X, y)
    return X.to_numpy(), y.to_numpy(), model


@pytest.fixture(scope="module")
def reports(fitted):
    X, y, model = fitted
    probe = D.probe(model, np.median(X, axis=0))
    profile = D.edges({"local linear forest": model,
                       "honest forest (same trees)": D.local_average_model(model)})
    v = D.verdict(X, y, forest=model, smoothers=None, folds=3, progress=False)
    cov = D.coverage_readout(model, reps=2, n_eval=60, progress=False)
    return probe, profile, v, cov


def test_panel_pending_until_the_verdict_is_in(reports):
    probe = reports[0]
    panel = D.decision_panel(probe)
    assert panel.decision == "pending"
    assert "cross-fitting" in panel.sentence
    assert list(panel.frame["item"]) == ["difference at the probe"]
    assert "unconfoundedness" in panel.cautions and "overlap" in panel.cautions
    assert panel.cautions_link.endswith("#cautions")


def test_panel_items_are_the_reports_numbers(reports):
    probe, profile, v, cov = reports
    panel = D.decision_panel(probe, profile, v, cov, coverage_settings="forest #1")
    assert panel.decision == v.decision and panel.sentence == v.conclusion
    best = v.best_alternative
    row = panel.item("verdict gain", best)
    c = v.comparisons.loc[best]
    assert (row["value"], row["lower"], row["upper"]) == (
        c["gain_all"], c["lower_all"], c["upper_all"])
    for _, b in profile.bend.iterrows():
        r = panel.item("inward-bend score", b["method"])
        assert r["value"] == b["bend"] and r["lower"] == b["lower"]
    f = cov.frame[(cov.frame["part"] == "all") & (cov.frame["interval"] == "bias_corrected")]
    assert len(f) == 2  # both forests
    for _, c in f.iterrows():
        r = panel.item("coverage", c["method"])
        assert r["value"] == c["coverage"]
        assert ("rms bias" in r["reading"]) == np.isfinite(c["rms_bias"])
        if c["flag"]:
            assert r["reading"].startswith(c["flag"])
    d = panel.item("difference at the probe")
    llf, hon = probe.method("local linear forest"), probe.method("honest forest (same trees)")
    assert d["value"] == pytest.approx(llf.prediction - hon.prediction, rel=1e-12)
    half = np.hypot((llf.upper - llf.lower) / 2, (hon.upper - hon.lower) / 2)
    assert d["upper"] - d["value"] == pytest.approx(half, rel=1e-9)
    assert panel.coverage_settings == "forest #1"
    html = panel._repr_html_()
    assert v.conclusion.split(":")[0] in html


def test_panel_keeps_the_outside_the_data_note(fitted):
    X, _, model = fitted
    x = np.median(X, axis=0)
    x[0] = X[:, 0].max() + 10 * X[:, 0].std()
    panel = D.decision_panel(D.probe(model, x))
    assert panel.outside_note.startswith("outside the data")
    assert panel.outside_note in " ".join(panel._notes())
    inside = D.decision_panel(D.probe(model, np.median(X, axis=0)))
    assert inside.outside_note == ""


def test_panel_readings_follow_the_interval(reports):
    probe, profile, v, _ = reports
    panel = D.decision_panel(probe, profile, v)
    for _, r in panel.frame.iterrows():
        if r["lower"] > 0 and r["item"] == "verdict gain":
            assert "above 0" in r["reading"]
        if r["lower"] <= 0 <= r["upper"] and r["item"] == "verdict gain":
            assert "includes 0" in r["reading"]
        if r["item"] == "inward-bend score" and r["lower"] <= 0 <= r["upper"]:
            assert r["reading"] == "no clear bend at the edges"


def test_panel_refuses_what_is_not_a_probe_report(reports):
    with pytest.raises(TypeError, match="'probe_report'"):
        D.decision_panel({"x": 1})


def test_surface_column_is_the_surfaces_numbers(fitted):
    X, y, _ = fitted
    lams = [0.0, 0.01, 0.3]
    params = dict(n_estimators=50, min_samples_leaf=5)
    surface = D.tuning_surface(X, y, [0.3], lams, progress=False, random_state=3, **params)
    cells, model = D.surface_column(X, y, 0.3, lams, random_state=3, **params)
    assert model.subsample_rate == 0.3
    want = surface.frame[["subsample_rate", "ridge_penalty", "oob_rmse", "mean_width",
                          "n_rows"]].reset_index(drop=True)
    np.testing.assert_array_equal(cells.to_numpy(dtype=float), want.to_numpy(dtype=float))


def test_surface_column_checks_its_grid(fitted):
    X, y, _ = fitted
    with pytest.raises(ValueError, match="'subsample_rate'"):
        D.surface_column(X, y, 1.5, [0.1])
    with pytest.raises(ValueError, match="'ridge_penalties'"):
        D.surface_column(X, y, 0.3, [-1.0])


def test_neighbourhood_span_is_the_weighted_middle_of_the_neighbours(fitted):
    X, _, model = fitted
    x = np.median(X, axis=0)
    rep = D.probe(model, x)
    w = rep.weights.toarray().ravel()
    for j in range(3):
        lo, hi = D.neighbourhood_span(rep, X, j)
        col = X[:, j]
        inside = (col >= lo) & (col <= hi)
        # at least the middle 80% of the weight lies in the span, and the probe too
        assert w[inside].sum() / w.sum() >= 0.8 - 1e-12
        assert lo <= x[j] <= hi
        assert col[w > 0].min() <= lo and hi <= col[w > 0].max()
        xs, _ = D.local_line(rep, j, None, within=(lo, hi))
        assert (xs[0], xs[-1]) == (lo, hi)


def test_weight_profile_measures_distance_in_the_columns_asked(fitted):
    X, _, model = fitted
    rep = D.probe(model, np.median(X, axis=0))
    line = [int(c) for c in rep.slope_columns]
    assert 0 < len(line) < X.shape[1]  # the pump demo's line uses some of its columns
    prof = D.weight_profile(rep, X, "local linear forest")
    sd = X[:, line].std(axis=0)
    want = np.sqrt((((X[prof["row"]][:, line] - rep.x[line]) / sd) ** 2).sum(axis=1))
    np.testing.assert_allclose(prof["distance"], want, rtol=1e-12)
    assert prof.attrs["distance_columns"] == [rep.feature_names[c] for c in line]
    every = D.weight_profile(rep, X, "local linear forest", columns="all")
    assert len(every.attrs["distance_columns"]) == X.shape[1]
    assert np.all(every["distance"].to_numpy() >= prof["distance"].to_numpy() - 1e-12)
    one = D.weight_profile(rep, X, "local linear forest", columns=[0])
    assert one.attrs["distance_columns"] == [rep.feature_names[0]]
    with pytest.raises(ValueError, match="'columns'"):
        D.weight_profile(rep, X, "local linear forest", columns=[X.shape[1]])
    with pytest.raises(ValueError, match="'columns'"):
        D.weight_profile(rep, X, "local linear forest", columns="some")
