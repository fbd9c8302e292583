"""Snapshots without widgets: round trip, atomic saves, validation, data fingerprint."""

import json
import os
import subprocess
import sys
import warnings

import numpy as np
import pytest

from hedgerow import HonestForestRegressor, LocalLinearForestRegressor
from hedgerow import snapshot as snapshot_module
from hedgerow.datasets import load_pump_demo, split_demo
from hedgerow.snapshot import (
    FORMAT_VERSION,
    DataFingerprint,
    Snapshot,
    SnapshotDataMismatch,
    SnapshotDataWarning,
    SnapshotError,
)

pytestmark = pytest.mark.filterwarnings("ignore::RuntimeWarning")


@pytest.fixture(scope="module")
def data():
    X, y, _ = split_demo(load_pump_demo(300, random_state=3))
    return X, y


@pytest.fixture(scope="module")
def model(data):
    return LocalLinearForestRegressor(n_estimators=60, random_state=5).fit(*data)


@pytest.fixture(scope="module")
def snap(model, data):
    X, y = data
    return Snapshot.from_model(model, X, y, probe=X.iloc[7], feature="motor_speed_rpm",
                               ridge_penalty=0.2, verdict=True)


@pytest.fixture
def saved(snap, tmp_path):
    path = tmp_path / "review.json"
    snap.save(path)
    return path


def test_headline_numbers_are_the_models(snap, model, data):
    X, y = data
    assert snap.estimator == "LocalLinearForestRegressor"
    oob = model.oob_predict(ridge_penalty=0.2)
    ok = np.isfinite(oob)
    rmse = np.sqrt(np.mean((oob[ok] - y.to_numpy()[ok]) ** 2))
    assert snap.headline["oob_rmse"] == pytest.approx(rmse, rel=1e-12)
    # the headline width is the default interval's (bias-corrected, Student-t with the
    # little bags' Satterthwaite degrees of freedom), not the normal-quantile CLT band
    lo, hi = model.with_ridge_penalty(0.2).oob_interval_parts().interval(0.95)
    width = np.nanmean(hi - lo)
    assert snap.headline["mean_interval_width"] == pytest.approx(width, rel=1e-9)
    _, std = model.oob_predict(return_std=True, ridge_penalty=0.2)
    assert snap.headline["mean_interval_width"] != pytest.approx(
        2 * 1.959963984540054 * np.nanmean(std), rel=1e-3)
    assert snap.headline["probe_prediction"] == pytest.approx(
        model.predict(X.iloc[[7]], ridge_penalty=0.2)[0], rel=1e-12)
    assert snap.headline["verdict"].startswith("The local linear forest")
    assert "Decision: " in snap.headline["verdict"]
    assert snap.seed == 5 and snap.params["n_estimators"] == 60
    assert snap.view["ridge_penalty"] == 0.2 and snap.feature == "motor_speed_rpm"
    np.testing.assert_array_equal(snap.probe, X.iloc[7].to_numpy())
    assert snap.data == DataFingerprint.from_data(X, y)
    assert snap.data.columns == tuple(X.columns) and snap.data.target == "flow_lpm"


def test_round_trip_restores_settings_and_identical_predictions(snap, saved, model, data):
    X, y = data
    back = Snapshot.load(saved, data=(X, y))
    assert back == snap
    assert back.to_dict() == snap.to_dict()
    refit = back.make_estimator()
    assert not hasattr(refit, "n_features_in_")  # unfitted
    refit.fit(X, y)
    np.testing.assert_array_equal(refit.predict(X), model.predict(X))
    again = Snapshot.from_model(refit, X, y, probe=back.probe, feature=back.feature,
                                ridge_penalty=back.ridge_penalty, verdict=True)
    table = again.compare(back)
    assert table["same"].all(), table
    assert set(table.index) >= {"headline: oob_rmse", "headline: probe_prediction"}


def test_compare_shows_what_differs(snap, model, data):
    X, y = data
    other = Snapshot.from_model(model, X, y, probe=X.iloc[8], feature="inlet_pressure_kpa",
                                ridge_penalty=0.2)
    table = snap.compare(other, labels=("saved", "now"))
    assert list(table.columns) == ["saved", "now", "same"]
    assert not table.loc["view: feature", "same"]
    assert not table.loc["headline: probe_prediction", "same"]
    assert table.loc["headline: oob_rmse", "same"]  # same forest, same penalty
    assert "headline: verdict" in table.index and not table.loc["headline: verdict", "same"]
    quiet = snap.compare(other, view=False)
    assert not any(i.startswith("view:") for i in quiet.index)
    assert not quiet.loc["headline: probe_prediction", "same"]


def test_file_is_plain_json_with_format_marker(saved):
    d = json.loads(saved.read_text())
    assert d["format"] == "hedgerow-snapshot" and d["format_version"] == FORMAT_VERSION
    assert set(d) == {"format", "format_version", "hedgerow_version", "created", "settings",
                      "view", "data", "headline"}
    assert len(d["data"]["sha256"]) == 64


# -- atomic saves -----------------------------------------------------------------------------
def _leftovers(directory, keep):
    return sorted(p.name for p in directory.iterdir() if p.name != keep)


def test_failed_write_leaves_previous_file_intact(snap, saved, monkeypatch, model, data):
    before = saved.read_bytes()
    X, y = data
    newer = Snapshot.from_model(model, X, y, probe=X.iloc[1])

    def half_then_fail(obj, fh, **kwargs):
        fh.write(json.dumps(obj)[:40])
        raise OSError("disk full (injected)")

    monkeypatch.setattr(snapshot_module.json, "dump", half_then_fail)
    with pytest.raises(OSError, match="injected"):
        newer.save(saved)
    assert saved.read_bytes() == before
    assert _leftovers(saved.parent, saved.name) == []  # no temporary file left behind
    assert Snapshot.load(saved) == snap


def test_failed_rename_leaves_previous_file_intact(snap, saved, monkeypatch):
    before = saved.read_bytes()

    def fail(src, dst):
        raise OSError("rename refused (injected)")

    monkeypatch.setattr(snapshot_module.os, "replace", fail)
    with pytest.raises(OSError, match="injected"):
        snap.save(saved)
    assert saved.read_bytes() == before
    assert _leftovers(saved.parent, saved.name) == []


def test_save_replaces_and_keeps_the_file_mode(snap, saved, model, data):
    os.chmod(saved, 0o640)
    X, y = data
    Snapshot.from_model(model, X, y).save(saved)
    assert Snapshot.load(saved).probe is None
    assert saved.stat().st_mode & 0o777 == 0o640


def test_save_names_a_bad_path(snap, tmp_path):
    with pytest.raises(TypeError, match=r"'path' parameter must be a str or os.PathLike\. "
                                        r"Got 3 instead"):
        snap.save(3)
    with pytest.raises(FileNotFoundError, match="'path' parameter must be in an existing"):
        snap.save(tmp_path / "no" / "such" / "dir.json")
    with pytest.raises(IsADirectoryError, match="'path' parameter must name a file"):
        snap.save(tmp_path)


# -- validation on load ------------------------------------------------------------------------
def test_missing_file(tmp_path):
    with pytest.raises(FileNotFoundError, match="'path' parameter must name an existing"):
        Snapshot.load(tmp_path / "nope.json")


@pytest.mark.parametrize("damage", ["truncated", "garbage", "empty", "binary"])
def test_corrupted_or_truncated_files_give_clear_errors(saved, damage):
    text = saved.read_bytes()
    saved.write_bytes({"truncated": text[: len(text) // 2], "garbage": b"{not json at all",
                       "empty": b"", "binary": b"\xff\xfe\x00\x81"}[damage])
    match = "not UTF-8" if damage == "binary" else r"not valid JSON \(truncated or corrupted"
    with pytest.raises(SnapshotError, match=match):
        Snapshot.load(saved)


def _rewrite(path, change):
    d = json.loads(path.read_text())
    change(d)
    path.write_text(json.dumps(d))


def test_wrong_format_version(saved):
    _rewrite(saved, lambda d: d.update(format_version=FORMAT_VERSION + 1))
    with pytest.raises(SnapshotError, match=rf"format version {FORMAT_VERSION + 1}; this "
                                            rf"hedgerow reads version {FORMAT_VERSION}"):
        Snapshot.load(saved)


def test_not_a_snapshot(saved):
    saved.write_text(json.dumps({"cells": []}))
    with pytest.raises(SnapshotError, match="is not a hedgerow snapshot"):
        Snapshot.load(saved)
    saved.write_text("[1, 2]")
    with pytest.raises(SnapshotError, match="must hold a JSON object. Got list"):
        Snapshot.load(saved)


@pytest.mark.parametrize("section,name", [
    ("", "headline"), ("settings", "params"), ("settings", "seed"), ("view", "probe"),
    ("view", "shown"), ("data", "sha256"), ("headline", "oob_rmse"), ("", "created"),
])
def test_missing_field_is_named(saved, section, name):
    _rewrite(saved, lambda d: (d[section] if section else d).pop(name))
    where = f"{section}.{name}" if section else name
    with pytest.raises(SnapshotError, match=rf"lacks the field '{where}'"):
        Snapshot.load(saved)


@pytest.mark.parametrize("section,name,value,expected", [
    ("view", "probe", "middle", "a list of finite numbers or null"),
    ("view", "probe", [1.0, "x"], "a list of finite numbers or null"),
    ("data", "n_rows", "300", "an integer"),
    ("settings", "seed", 1.5, "an integer or null"),
    ("settings", "seed", True, "an integer or null"),
    ("view", "shown", {"local line": 1}, "an object of true/false values"),
    ("view", "compare", "yes", "true or false"),
    ("data", "sha256", "abc", "64 lower-case hex digits"),
    ("headline", "oob_rmse", "8.1", "a finite number or null"),
    ("settings", "params", [1, 2], "an object"),
])
def test_wrong_types_are_named(saved, section, name, value, expected):
    _rewrite(saved, lambda d: d[section].__setitem__(name, value))
    with pytest.raises(SnapshotError, match=rf"field '{section}\.{name}' of .* must be "
                                            rf"{expected}\. Got"):
        Snapshot.load(saved)


def test_inconsistent_or_unknown_content(saved):
    _rewrite(saved, lambda d: d["view"].__setitem__("probe", [1.0, 2.0]))
    with pytest.raises(SnapshotError, match=r"'view.probe' .* one value per column \(14\)"):
        Snapshot.load(saved)
    _rewrite(saved, lambda d: (d["view"].__setitem__("probe", None),
                               d["settings"].__setitem__("estimator", "os.system")))
    with pytest.raises(SnapshotError, match="'settings.estimator' .* must be one of"):
        Snapshot.load(saved)
    _rewrite(saved, lambda d: (d["settings"].__setitem__("estimator",
                                                         "LocalLinearForestRegressor"),
                               d["settings"]["params"].__setitem__("leaf_magic", 3)))
    with pytest.raises(SnapshotError, match=r"parameters \['leaf_magic'\] that "
                                            r"LocalLinearForestRegressor does not take"):
        Snapshot.load(saved).make_estimator()


# -- data fingerprint --------------------------------------------------------------------------
def test_fingerprint_matches_same_data_only(snap, data):
    X, y = data
    assert snap.check_data(X.copy(), y.copy()) == []
    with pytest.raises(SnapshotDataMismatch, match=r"columns \(unnamed\) instead of "
                                                   r"\['motor_speed_rpm'.*target None"):
        snap.check_data(X.to_numpy(), y.to_numpy())  # names are part of the fingerprint
    X2 = X.copy()
    X2.iloc[10, 3] += 1e-9
    with pytest.raises(SnapshotDataMismatch, match="different values .*allow_data_mismatch"):
        snap.check_data(X2, y)
    with pytest.raises(SnapshotDataMismatch, match=r"shape 299 x 14 instead of 300 x 14"):
        snap.check_data(X.iloc[1:], y.iloc[1:])
    with pytest.raises(SnapshotDataMismatch, match="columns .*'speed'"):
        snap.check_data(X.rename(columns={"motor_speed_rpm": "speed"}), y)
    with pytest.raises(SnapshotDataMismatch, match="target 'flow' instead of 'flow_lpm'"):
        snap.check_data(X, y.rename("flow"))


def test_mismatch_can_proceed_with_a_warning(snap, saved, data):
    X, y = data
    y2 = y + 0.5
    with pytest.raises(SnapshotDataMismatch):
        Snapshot.load(saved, data=(X, y2))
    with pytest.warns(SnapshotDataWarning, match="differ from the snapshot"):
        back = Snapshot.load(saved, data=(X, y2), allow_data_mismatch=True)
    assert back == snap
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        Snapshot.load(saved, data=(X, y))  # matching data: no warning


# -- building from models ----------------------------------------------------------------------
def test_from_model_checks_its_inputs(model, data):
    from sklearn.ensemble import RandomForestRegressor

    X, y = data
    with pytest.raises(TypeError, match="'model' parameter must be one of hedgerow's"):
        Snapshot.from_model(RandomForestRegressor(n_estimators=2).fit(X, y), X, y)
    with pytest.raises(ValueError, match="'model' parameter must be fitted"):
        Snapshot.from_model(LocalLinearForestRegressor(), X, y)
    with pytest.raises(ValueError, match=r"'probe' parameter must hold 14 finite values"):
        Snapshot.from_model(model, X, y, probe=[1.0, 2.0])
    with pytest.raises(ValueError, match="'X' parameter must have the model's 14 columns"):
        Snapshot.from_model(model, X.iloc[:, :3], y)


def test_honest_forest_snapshot_and_unseeded_warning(data):
    X, y = data
    hf = HonestForestRegressor(n_estimators=40, random_state=2).fit(X, y)
    s = Snapshot.from_model(hf, X, y, probe=X.iloc[0])
    assert s.estimator == "HonestForestRegressor" and s.headline["mean_interval_width"] is None
    assert s.headline["probe_prediction"] == pytest.approx(hf.predict(X.iloc[[0]])[0])
    refit = Snapshot.from_dict(s.to_dict()).make_estimator().fit(X, y)
    np.testing.assert_array_equal(refit.predict(X), hf.predict(X))
    unseeded = HonestForestRegressor(n_estimators=20).fit(X, y)
    with pytest.warns(UserWarning, match="random_state=None: a refit from this snapshot"):
        Snapshot.from_model(unseeded, X, y)


def test_snapshot_module_imports_no_widget_library(tmp_path):
    code = ("import sys, warnings; warnings.simplefilter('ignore')\n"
            "from hedgerow.snapshot import Snapshot\n"
            "from hedgerow import LocalLinearForestRegressor\n"
            "from hedgerow.datasets import load_step_demo, split_demo\n"
            "X, y, _ = split_demo(load_step_demo(80))\n"
            "m = LocalLinearForestRegressor(n_estimators=10, random_state=0).fit(X, y)\n"
            f"Snapshot.from_model(m, X, y).save({str(tmp_path / 's.json')!r})\n"
            f"Snapshot.load({str(tmp_path / 's.json')!r}).make_estimator()\n"
            "bad = [m for m in ('ipywidgets', 'bqplot', 'traitlets', 'hedgerow.widgets')"
            " if m in sys.modules]\n"
            "assert not bad, bad\n")
    subprocess.run([sys.executable, "-c", code], check=True)
