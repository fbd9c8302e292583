"""The effect explorer: capture a snapshot, reopen it, and what explore refuses."""

import warnings

import numpy as np
import pandas as pd
import pytest

from hedgerow import explore
from hedgerow.datasets import load_trial_demo
from hedgerow.snapshot import Snapshot, SnapshotDataMismatch


@pytest.fixture(scope="module")
def data():
    X, y, w, _ = load_trial_demo(300, random_state=5)
    return pd.DataFrame(X, columns=["a", "b", "c"]), y, w


def _explorer(data, **kw):
    X, y, w = data
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        return explore(X, y, treatment=w, n_estimators=64, random_state=7, **kw)


def test_capture_and_reopen_puts_the_reviewer_where_the_author_was(data, tmp_path):
    X, y, w = data
    ex = _explorer(data)
    ex.session.set_probe_value("b", 0.35)
    ex.session.feature = 2
    ex.selected_index = 1
    snap = Snapshot.capture(ex)
    assert snap.view["tab"] == "overlap" and snap.feature == "c"
    path = snap.save(tmp_path / "trial.json")
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        back = explore(X, y, treatment=w, snapshot=path)
    s0, s1 = ex.session, back.session
    np.testing.assert_array_equal(s1.probe, s0.probe)
    assert s1.feature == 2 and back.selected_index == 1
    np.testing.assert_array_equal(s1.model.predict_effect(X.iloc[:20]),
                                  s0.model.predict_effect(X.iloc[:20]))
    p = s1.probe_report().methods.loc["corrected forest"]
    assert snap.effect["probe_effect"] == p["effect"]
    assert Snapshot.capture(back).compare(snap, view=True)["same"].all()
    ex.close()
    back.close()


def test_a_finished_verdict_is_recorded(data):
    ex = _explorer(data, verdict_folds=2, verdict_fold_trees=32)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        v = ex.session.run_verdict()
    assert Snapshot.capture(ex).headline["verdict"] == v.conclusion
    ex.close()


def test_explore_refuses_mismatches_clearly(data, tmp_path):
    X, y, w = data
    ex = _explorer(data)
    path = Snapshot.capture(ex).save(tmp_path / "trial.json")
    with pytest.raises(SnapshotDataMismatch, match="different treatment values"):
        explore(X, y, treatment=1 - w, snapshot=path)
    with pytest.raises(ValueError, match="holds a TreatmentEffectForest: pass its "
                                         "'treatment'"):
        explore(X, y, snapshot=path)
    with pytest.raises(ValueError, match=r"pass none of \['model'\]"):
        explore(X, y, treatment=w, snapshot=path, model=ex.session.model)
    ex.close()
