"""Tuning surface and coverage readout against direct computations."""

import numpy as np
import pytest

from hedgerow import LocalLinearForestRegressor
from hedgerow.datasets import make_softplus_design, softplus_truth
from hedgerow.diagnostics import coverage_readout, tuning_surface
from hedgerow.inference import normal_interval


@pytest.fixture(scope="module")
def data():
    X, y, _ = make_softplus_design(400, n_features=4, random_state=8)
    return X, y


def test_tuning_cells_equal_direct_oob_computation(data):
    X, y = data
    rates, lams = [0.3, 0.5], [0.0, 0.1, 1.0]
    ts = tuning_surface(X, y, rates, lams, n_estimators=60, progress=False, random_state=3)
    assert ts.complete and len(ts.frame) == 6
    m = LocalLinearForestRegressor(n_estimators=60, subsample_rate=0.3, random_state=3).fit(X, y)
    for lam in lams:
        with _nowarn():
            mean, std = m.oob_predict(return_std=True, ridge_penalty=lam)
        ok = np.isfinite(mean)
        cell = ts.frame[(ts.frame.subsample_rate == 0.3) & (ts.frame.ridge_penalty == lam)]
        rmse = np.sqrt(np.mean((mean[ok] - y[ok]) ** 2))
        assert cell["oob_rmse"].iloc[0] == pytest.approx(rmse, rel=1e-12)
        # the width is the default interval's (bias corrected), out of bag
        with _nowarn():
            lo, hi = m.with_ridge_penalty(lam).oob_interval_parts().interval()
        assert cell["mean_width"].iloc[0] == pytest.approx(np.nanmean(hi - lo), rel=1e-12)
        lo, hi = normal_interval(mean, std)  # today's, for contrast: a different width
        assert cell["mean_width"].iloc[0] != pytest.approx(np.nanmean(hi - lo), rel=1e-6)
    assert ts.grid().shape == (2, 3)
    assert ts.best()["oob_rmse"] == ts.frame["oob_rmse"].min()
    assert 0 < ts.refit_seconds <= ts.total_seconds


class _nowarn:
    def __enter__(self):
        import warnings

        self._c = warnings.catch_warnings()
        self._c.__enter__()
        warnings.simplefilter("ignore", RuntimeWarning)

    def __exit__(self, *a):
        return self._c.__exit__(*a)


def test_tuning_interrupt_keeps_completed_cells(data, monkeypatch):
    X, y = data
    calls = {"n": 0}
    real_fit = LocalLinearForestRegressor.fit

    def fit(self, *a, **k):
        calls["n"] += 1
        if calls["n"] == 2:
            raise KeyboardInterrupt
        return real_fit(self, *a, **k)

    monkeypatch.setattr(LocalLinearForestRegressor, "fit", fit)
    ts = tuning_surface(X, y, [0.2, 0.4, 0.5], [0.0, 0.5], n_estimators=40, progress=False)
    assert not ts.complete
    assert ts.frame["subsample_rate"].tolist() == [0.2, 0.2]


@pytest.mark.parametrize(
    "rates, lams, match",
    [([], [0.1], "subsample_rates"), ([0.5], [], "ridge_penalties"),
     ([1.5], [0.1], "subsample_rates"), ([0.5], [-1.0], "ridge_penalties"),
     ([0.0], [0.1], "subsample_rates")],
)
def test_tuning_bad_grids(data, rates, lams, match):
    X, y = data
    with pytest.raises(ValueError, match=match):
        tuning_surface(X, y, rates, lams, n_estimators=20, progress=False)


@pytest.mark.parametrize("reps", [0, -1, 2.5, True])
def test_coverage_bad_reps(data, reps):
    X, y = data
    m = LocalLinearForestRegressor(n_estimators=20, random_state=0).fit(X, y)
    with pytest.raises(ValueError, match="reps"):
        coverage_readout(m, reps=reps, progress=False)


def test_coverage_counts_are_consistent(data):
    X, y = data
    m = LocalLinearForestRegressor(n_estimators=50, random_state=0).fit(X, y)
    cr = coverage_readout(m, reps=2, n_eval=50, progress=False)
    assert cr.mode == "surrogate truth" and cr.reps_done == 2
    f = cr.frame.set_index(["method", "interval", "part"])
    for method in ("local linear forest", "honest forest"):
        for interval in ("bias_corrected", "bias_bound", "clt"):
            key = (method, interval)
            assert f.loc[(*key, "all"), "n"] == 100
            assert (f.loc[(*key, "edge"), "covered"] + f.loc[(*key, "interior"), "covered"]
                    == f.loc[(*key, "all"), "covered"])
            lo, hi = f.loc[(*key, "all"), ["lower", "upper"]]
            assert lo <= f.loc[(*key, "all"), "coverage"] <= hi


def test_coverage_interrupt_returns_partial(data, monkeypatch):
    X, y = data
    m = LocalLinearForestRegressor(n_estimators=30, random_state=0).fit(X, y)
    from hedgerow import HonestForestRegressor

    calls = {"n": 0}
    real_fit = HonestForestRegressor.fit

    def fit(self, *a, **k):
        calls["n"] += 1
        if calls["n"] == 2:
            raise KeyboardInterrupt
        return real_fit(self, *a, **k)

    monkeypatch.setattr(HonestForestRegressor, "fit", fit)
    cr = coverage_readout(m, reps=4, n_eval=20, progress=False)
    assert cr.reps_done == 1
    f = cr.frame.set_index(["method", "interval", "part"])
    assert f.loc[("honest forest", "clt", "all"), "n"] == 20


@pytest.mark.slow
def test_coverage_readout_with_truth_on_softplus_design():
    # Friedberg et al. (2021), eq. 1, n = 1000, defaults; the seeded coverage check in
    # tests/reference/test_forest_statistics.py measured 0.932 overall on these settings:
    # the readout must agree within 3 points (0.902-0.962).
    X, y, _ = make_softplus_design(1000, random_state=31)
    m = LocalLinearForestRegressor(random_state=0, n_jobs=2).fit(X, y)
    cr = coverage_readout(m, truth=softplus_truth, reps=8, n_eval=150, progress=False)
    cov = cr.coverage("local linear forest", interval="clt")
    assert abs(cov - 0.932) <= 0.03, cr.frame
    assert (cr.coverage("honest forest", "edge", "clt")
            < cr.coverage("local linear forest", "edge", "clt"))


def test_run_control_follows_and_stops_a_long_run():
    """A RunControl sees every step and stops the run at the next step after cancel()."""
    from hedgerow._progress import RunCancelled, RunControl, progress_bar

    seen = []
    control = RunControl(lambda done, total: seen.append((done, total)))
    bar = progress_bar(4, "steps", control)
    bar.update(1)
    bar.update(1)
    control.cancel()
    with pytest.raises(RunCancelled, match="after 3 of 4"):
        bar.update(1)
    assert seen == [(1, 4), (2, 4), (3, 4)]
    assert isinstance(RunCancelled(), KeyboardInterrupt)


@pytest.mark.parametrize("seed", [-1, 2.5, "x", True])
def test_coverage_bad_random_state(data, seed):
    X, y = data
    m = LocalLinearForestRegressor(n_estimators=20, random_state=0).fit(X, y)
    with pytest.raises(ValueError, match="The 'random_state' parameter must be None, an int"):
        coverage_readout(m, reps=1, progress=False, random_state=seed)


def test_coverage_seed_sequence_is_the_same_as_its_int(data):
    # replications draw from children of SeedSequence(random_state): an int and the
    # sequence made from it give the same report, another int another one
    X, y = data
    m = LocalLinearForestRegressor(n_estimators=20, random_state=0).fit(X, y)
    kw = dict(reps=2, n_eval=30, progress=False)
    a = coverage_readout(m, random_state=5, **kw).frame
    b = coverage_readout(m, random_state=np.random.SeedSequence(5), **kw).frame
    c = coverage_readout(m, random_state=6, **kw).frame
    assert a.equals(b)
    assert not a["mean_width"].equals(c["mean_width"])


def test_tuning_surface_carries_a_coverage_flag_per_cell(data):
    X, y = data
    kw = dict(n_estimators=40, progress=False, random_state=3)
    ts = tuning_surface(X, y, [0.5], [0.0, 10.0], coverage_reps=2, **kw)
    assert {"coverage", "coverage_flag"} <= set(ts.frame.columns)
    # each cell's numbers are those of a coverage readout of that cell's forest
    from hedgerow.diagnostics import at_ridge_penalty

    m = LocalLinearForestRegressor(subsample_rate=0.5, n_estimators=40, random_state=3)
    m.fit(X, y)
    view = at_ridge_penalty(m, 10.0)
    view.ridge_penalty = 10.0
    rep = coverage_readout(view, reps=2, progress=False, random_state=3)
    cell = ts.frame[ts.frame.ridge_penalty == 10.0].iloc[0]
    assert cell["coverage"] == rep.coverage("local linear forest")
    flags = [f for f in rep.frame[(rep.frame.method == "local linear forest")
                                  & (rep.frame.interval == "bias_corrected")]["flag"] if f]
    assert cell["coverage_flag"] == "; ".join(flags)
    best = ts.recommended()
    ok = ts.frame[ts.frame.coverage_flag == ""]
    assert (best is None) == ok.empty
    if best is not None:
        assert best["oob_rmse"] == ok["oob_rmse"].min()
    # without coverage the surface has no flag and says how to get one
    plain = tuning_surface(X, y, [0.5], [0.0], **kw)
    assert "coverage_flag" not in plain.frame
    with pytest.raises(ValueError, match="coverage_reps"):
        plain.recommended()
    with pytest.raises(ValueError, match="The 'coverage_reps' parameter must be 0"):
        tuning_surface(X, y, [0.5], [0.0], coverage_reps=1, **kw)
