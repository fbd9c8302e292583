"""effect_coverage_readout: simulated coverage of effect intervals, and bad input."""

import numpy as np
import pytest

from hedgerow import TreatmentEffectForest
from hedgerow.datasets import load_trial_demo, trial_effect_truth
from hedgerow.diagnostics import effect_coverage_readout


@pytest.fixture(scope="module")
def fitted():
    X, y, w, _ = load_trial_demo(600, random_state=8)
    f = TreatmentEffectForest(n_estimators=200, random_state=0).fit(X, y, w)
    return f, X, y, w


def test_known_effect_readout_columns_and_split(fitted):
    # Coverage of the trial's known effect, 12 replications x 60 rows: a nominal 95%
    # interval should cover close to 95% (common practice); the default must not be
    # flagged, and the readout's split must be consistent: mean estimated sd and the sd
    # across replications of the same order, the bias small against both.
    f, X, y, w = fitted
    rep = effect_coverage_readout(f, X, y, w, truth=trial_effect_truth, reps=12,
                                  n_eval=60, random_state=1)
    fr = rep.to_frame()
    assert list(fr["interval"].unique()) == ["bias_corrected", "bias_bound", "clt"]
    assert set(fr["part"]) == {"all", "edge", "interior"}
    row = fr[(fr["interval"] == "bias_corrected") & (fr["part"] == "all")].iloc[0]
    print(fr[["interval", "part", "coverage", "lower", "upper", "mean_width", "rms_bias",
              "mean_sd", "sd_across", "coverage_bias_removed", "flag"]])
    assert row["n"] == 12 * 60
    assert row["lower"] <= row["coverage"] <= row["upper"]
    assert row["coverage"] >= 0.88 and row["flag"] == ""
    assert 0.6 < row["mean_sd"] / row["sd_across"] < 1.6
    assert row["rms_bias"] < 0.5 * row["sd_across"]
    clt = fr[(fr["interval"] == "clt") & (fr["part"] == "all")].iloc[0]
    assert row["mean_width"] > clt["mean_width"]  # t quantile and Monte Carlo variance
    assert rep.coverage() == row["coverage"]
    assert rep.mode == "known effect"
    assert "unconfoundedness" in repr(rep)


def test_surrogate_readout_says_so(fitted):
    f, X, y, w = fitted
    rep = effect_coverage_readout(f, X, y, w, reps=2, n_eval=20, random_state=2)
    assert rep.mode.startswith("surrogate")
    assert any("stand-in" in n for n in rep._notes())
    assert np.isfinite(rep.to_frame()["coverage"]).all()


def test_bad_input(fitted):
    f, X, y, w = fitted
    with pytest.raises(TypeError, match="'model'.*fitted TreatmentEffectForest"):
        effect_coverage_readout(TreatmentEffectForest(), X, y, w)
    with pytest.raises(ValueError, match="'reps'.*>= 2"):
        effect_coverage_readout(f, X, y, w, reps=1)
    with pytest.raises(ValueError, match="'X', 'y' and 'treatment'.*600 rows"):
        effect_coverage_readout(f, X, y, w[:-1])
    with pytest.raises(ValueError, match="'truth'.*one finite effect"):
        effect_coverage_readout(f, X, y, w, truth=lambda Z: np.zeros(3), reps=2)
    with pytest.raises(ValueError, match="'level'"):
        effect_coverage_readout(f, X, y, w, level=1.5, reps=2)


def test_cancel_returns_the_finished_replications_and_says_so(fitted):
    # A RunControl cancelled after the third replication: the report holds the counts of
    # three replications, the same numbers a three-replication run gives (replication r
    # draws from its own seed child), and its notes say it was interrupted.
    from hedgerow._progress import RunControl

    f, X, y, w = fitted
    seen, held = [], []

    def stop_after_three(done, total):
        seen.append((done, total))
        if done == 3:
            held[0].cancel()

    control = RunControl(stop_after_three)
    held.append(control)
    part = effect_coverage_readout(f, X, y, w, truth=trial_effect_truth, reps=6, n_eval=15,
                                   random_state=4, progress=control)
    assert part.reps_done == 3 and part.reps == 6
    assert seen == [(1, 6), (2, 6), (3, 6)]
    assert "interrupted: partial counts" in repr(part)
    three = effect_coverage_readout(f, X, y, w, truth=trial_effect_truth, reps=3, n_eval=15,
                                    random_state=4, progress=False)
    a, b = part.to_frame(), three.to_frame()
    for col in ("covered", "n", "mean_width", "rms_bias", "mean_sd", "sd_across"):
        np.testing.assert_array_equal(a[col].to_numpy(), b[col].to_numpy())


def test_fewer_than_two_replications_read_no_coverage(fitted):
    from hedgerow._progress import RunControl

    f, X, y, w = fitted
    held = []
    control = RunControl(lambda done, total: held[0].cancel())
    held.append(control)
    rep = effect_coverage_readout(f, X, y, w, truth=trial_effect_truth, reps=4, n_eval=10,
                                  random_state=4, progress=control)
    assert rep.reps_done == 1 and rep.to_frame().empty
    assert "fewer than 2 replications" in repr(rep)
    with pytest.raises(KeyError):
        rep.coverage()
