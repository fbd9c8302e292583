"""Snapshots of a TreatmentEffectForest and of the effect explorer: round trip and refusals."""

import json
import warnings

import numpy as np
import pandas as pd
import pytest

from hedgerow import TreatmentEffectForest
from hedgerow.datasets import load_trial_demo
from hedgerow.snapshot import Snapshot, SnapshotDataMismatch, SnapshotError


@pytest.fixture(scope="module")
def data():
    X, y, w, _ = load_trial_demo(400, random_state=2)
    X = pd.DataFrame(X, columns=["dose_site", "soil", "slope"])
    return X, pd.Series(y, name="yield"), pd.Series(w, name="sprayed")


@pytest.fixture(scope="module")
def model(data):
    X, y, w = data
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        return TreatmentEffectForest(n_estimators=96, random_state=4).fit(X, y, w)


@pytest.fixture(scope="module")
def snap(model, data):
    X, y, w = data
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        return Snapshot.from_model(model, X, y, probe=[0.6, 0.1, -0.2], feature="soil",
                                   treatment=w)


def test_effect_numbers_are_the_models(snap, model):
    from hedgerow.diagnostics import effect_probe

    p = effect_probe(model, [0.6, 0.1, -0.2], level=0.95).methods.loc["corrected forest"]
    e = snap.effect
    assert (e["probe_effect"], e["probe_lower"], e["probe_upper"]) == (
        p["effect"], p["lower"], p["upper"])
    avg = model.average_effect()
    assert (e["average_effect"], e["average_std_error"]) == (avg.estimate, avg.std_error)
    assert snap.headline["probe_prediction"] == p["effect"]
    assert snap.headline["oob_rmse"] is None
    assert "unconfoundedness" in e["caution"]
    assert snap.treatment["name"] == "sprayed"
    assert snap.feature == "soil"
    assert "unconfoundedness" in snap._repr_html_()


def test_round_trip_refits_the_same_forest(snap, model, data, tmp_path):
    X, y, w = data
    path = snap.save(tmp_path / "effect.json")
    back = Snapshot.load(path, data=(X, y, w))
    assert back == snap
    assert json.loads(path.read_text())["effect"]["level"] == 0.95
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        refit = back.make_estimator().fit(X, y, w)
    Q = X.iloc[:25]
    np.testing.assert_array_equal(refit.predict_effect(Q), model.predict_effect(Q))
    assert back.compare(snap)["same"].all()


def test_treatment_is_checked_by_fingerprint(snap, data, tmp_path):
    X, y, w = data
    path = snap.save(tmp_path / "effect.json")
    other = w.copy()
    other.iloc[0] = 1 - other.iloc[0]
    with pytest.raises(SnapshotDataMismatch, match="treatment"):
        Snapshot.load(path, data=(X, y, other))
    with pytest.warns(UserWarning, match="different treatment values"):
        diffs = snap.check_data(X, y, other, allow_data_mismatch=True)
    assert diffs == ["different treatment values (SHA-256 of the treatment differs)"]
    with pytest.raises(TypeError, match=r"'data'.*triple \(X, y, treatment\).*2 items"):
        Snapshot.load(path, data=(X, y))
    with pytest.raises(ValueError, match="'treatment' parameter is needed"):
        snap.check_data(X, y)


def test_sections_are_validated_by_name(snap, tmp_path):
    d = snap.to_dict()
    bad = dict(d)
    del bad["treatment"]
    with pytest.raises(SnapshotError, match="lacks the field 'treatment'"):
        Snapshot.from_dict(bad)
    bad = json.loads(json.dumps(d))
    bad["effect"]["level"] = "high"
    with pytest.raises(SnapshotError, match="'effect.level'.*a finite number"):
        Snapshot.from_dict(bad)
    bad = json.loads(json.dumps(d))
    del bad["effect"]["average_effect"]
    with pytest.raises(SnapshotError, match="lacks the field 'effect.average_effect'"):
        Snapshot.from_dict(bad)
    bad = json.loads(json.dumps(d))
    bad["settings"]["estimator"] = "LocalLinearForestRegressor"
    with pytest.raises(SnapshotError, match="'treatment'.*belongs to snapshots of a "
                                            "TreatmentEffectForest"):
        Snapshot.from_dict(bad)


def test_refusals_name_what_is_wrong(model, data):
    X, y, w = data
    with pytest.raises(ValueError, match="'treatment' parameter is needed"):
        Snapshot.from_model(model, X, y)
    with pytest.raises(SnapshotDataMismatch, match="'treatment'.*fitted with"):
        Snapshot.from_model(model, X, y, treatment=1 - w)
    with pytest.raises(ValueError, match="'ridge_penalty'.*local linear forests only"):
        Snapshot.from_model(model, X, y, treatment=w, ridge_penalty=0.1)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        given = TreatmentEffectForest(n_estimators=32, random_state=0).fit(
            X, y, w, propensity_model=np.full(len(w), 0.5))
    with pytest.raises(ValueError, match=r"\['propensity_model'\] given to fit\(\)"):
        Snapshot.from_model(given, X, y, treatment=w)
