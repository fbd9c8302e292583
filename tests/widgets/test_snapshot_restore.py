"""Snapshots of a live explorer: capture, save, restore with identical numbers and view."""

import json
import warnings

import numpy as np
import pytest

pytest.importorskip("ipywidgets")
pytest.importorskip("bqplot")

import hedgerow  # noqa: E402
from hedgerow import HonestForestRegressor  # noqa: E402
from hedgerow.datasets import load_pump_demo, split_demo  # noqa: E402
from hedgerow.snapshot import Snapshot, SnapshotDataMismatch, SnapshotDataWarning  # noqa: E402
from hedgerow.widgets import explore  # noqa: E402

pytestmark = [pytest.mark.filterwarnings("ignore:X does not have valid feature names"),
              pytest.mark.filterwarnings("ignore::RuntimeWarning")]


@pytest.fixture(scope="module")
def data():
    X, y, _ = split_demo(load_pump_demo(260, random_state=11))
    return X, y


@pytest.fixture(scope="module")
def original(data):
    """An explorer moved away from every default, and its snapshot saved to disk."""
    X, y = data
    app = explore(X, y, n_estimators=80, random_state=4, min_samples_leaf=8, refit_delay=0.05)
    assert app.session.wait_for("smoothers", 120) == "done"  # fitted in the background
    assert app.session.wait_for("verdict", 300) == "done"  # cross-fitted in the background
    app.probe_view.feature = "inlet_pressure_kpa"
    app.probe_view.anchor_row = 17  # the probe takes row 17's values ...
    app.probe_view.move_probe(float(X["inlet_pressure_kpa"].quantile(0.93)))  # ... then moves
    app.tuning_view.ridge_slider.value = 0.25  # the handler sets the session's penalty
    legend = app.view_state()["shown"]
    assert legend["local line"] and legend["Nadaraya-Watson"]
    app.apply_view_state(shown={"local line": False, "Nadaraya-Watson": False}, tab="verdict")
    return app


@pytest.fixture(scope="module")
def saved(original, tmp_path_factory):
    path = tmp_path_factory.mktemp("snap") / "pump-review.json"
    Snapshot.capture(original).save(path)
    return path


@pytest.fixture(scope="module")
def restored(saved, data):
    X, y = data
    app = hedgerow.explore(X, y, snapshot=str(saved), refit_delay=0.05)
    assert app.session.wait_for("smoothers", 120) == "done"
    assert app.session.wait_for("verdict", 300) == "done"
    return app


def test_capture_records_what_the_explorer_shows(original, saved, data):
    X, y = data
    s, pv = original.session, original.probe_view
    snap = Snapshot.load(saved, data=(X, y))
    assert snap.params["min_samples_leaf"] == 8 and snap.seed == 4
    assert snap.view["ridge_penalty"] == pytest.approx(0.25) == s.ridge_penalty
    assert snap.feature == "inlet_pressure_kpa"
    assert snap.view["probe"] == list(s.probe_x)
    assert snap.view["probe"][0] == X["motor_speed_rpm"].iloc[17]
    assert snap.view["tab"] == "verdict" and snap.view["compare"] is True
    assert snap.view["shown"]["local line"] is False
    assert snap.view["shown"]["local linear forest"] is True
    assert snap.headline["probe_prediction"] == pytest.approx(
        pv.readout["local linear forest"]["prediction"], rel=1e-12)
    assert snap.headline["oob_rmse"] == pytest.approx(s.oob_summary()["oob_rmse"], rel=1e-12)
    assert snap.headline["verdict"] == s.verdict_report().conclusion
    assert f"{snap.headline['oob_rmse']:.4g}" in original.tuning_view.readout_html.value


def test_restore_gives_identical_predictions(original, restored, data):
    X, _ = data
    a, b = original.session, restored.session
    np.testing.assert_array_equal(b.model.predict(X), a.model.predict(X))
    np.testing.assert_array_equal(b.penalised_model().oob_predict(),
                                  a.penalised_model().oob_predict())
    assert b.model.get_params() == a.model.get_params()
    assert restored.probe_view.readout == original.probe_view.readout
    assert restored.verdict_view.conclusion_html.value == \
        original.verdict_view.conclusion_html.value


def test_restore_gives_identical_view_state(original, restored):
    assert restored.view_state() == original.view_state()
    assert restored.session.probe_x == original.session.probe_x
    assert restored.session.ridge_penalty == original.session.ridge_penalty
    assert restored.tuning_view.ridge_slider.value == original.tuning_view.ridge_slider.value
    assert restored.selected_index == original.selected_index == 5
    pv = restored.probe_view
    assert pv.line_mark.visible is False and pv.slice_marks["Nadaraya-Watson"].visible is False
    assert pv.slice_marks["local linear forest"].visible is True
    assert pv._x_axis.label == "inlet_pressure_kpa"
    assert all(v.error == "" for v in restored.views)


def test_capture_of_the_restored_explorer_equals_the_saved_one(restored, saved):
    table = Snapshot.capture(restored).compare(Snapshot.load(saved))
    assert table["same"].all(), table
    assert Snapshot.capture(restored).to_dict() | {"created": 0} == \
        json.loads(saved.read_text()) | {"created": 0}


def test_restore_refuses_other_data_unless_told(saved, data):
    X, y = data
    with pytest.raises(SnapshotDataMismatch, match="do not match the snapshot"):
        explore(X, y * 1.01, snapshot=saved)
    with pytest.warns(SnapshotDataWarning, match="differ from the snapshot"):
        app = explore(X, y * 1.01, snapshot=saved, allow_data_mismatch=True, refit_delay=0.05)
    assert app.probe_view.feature == "inlet_pressure_kpa"
    assert app.session.model.get_params()["min_samples_leaf"] == 8


def test_restore_rejects_conflicting_arguments(saved, data):
    X, y = data
    with pytest.raises(ValueError, match=r"pass none of \['feature'\]"):
        explore(X, y, snapshot=saved, feature="motor_speed_rpm")
    with pytest.raises(ValueError, match=r"pass none of \['n_estimators'\]"):
        explore(X, y, snapshot=saved, n_estimators=10)


def test_restore_needs_a_local_linear_forest_snapshot(data, tmp_path):
    X, y = data
    hf = HonestForestRegressor(n_estimators=20, random_state=0).fit(X, y)
    path = Snapshot.from_model(hf, X, y).save(tmp_path / "hf.json")
    with pytest.raises(ValueError, match="must hold a LocalLinearForestRegressor"):
        explore(X, y, snapshot=path)


def test_capture_follows_a_refit(data):
    X, y = data
    app = explore(X, y, n_estimators=50, random_state=1, compare=False, refit_delay=0.01)
    app.session.request_refit(min_samples_leaf=12)
    assert app.session.wait_for_refit(60) == "done"
    snap = Snapshot.capture(app)
    assert snap.params["min_samples_leaf"] == 12 and snap.view["compare"] is False
    assert set(snap.view["shown"]) == {"local linear forest", "honest forest (same trees)",
                                       "95% band", "local line"}
    with warnings.catch_warnings():
        warnings.simplefilter("error", SnapshotDataWarning)
        back = explore(X, y, snapshot=snap, refit_delay=0.01)
    np.testing.assert_array_equal(back.session.model.predict(X), app.session.model.predict(X))


def test_apply_view_state_checks_its_input(restored):
    with pytest.raises(ValueError, match="'tab' parameter must be one of"):
        restored.apply_view_state(tab="summary")
    with pytest.warns(UserWarning, match=r"Legend entries \['gradient boosting'\]"):
        restored.apply_view_state(shown={"gradient boosting": True})
