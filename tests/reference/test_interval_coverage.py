"""Coverage of the interval methods on the family of smooth designs (slow, seeded).

Goals (issue "intervals that cover where the forest is biased"): the default interval
(robust bias correction; Calonico, Cattaneo & Farrell 2018, JASA 113(522)) covers
0.93-0.97 overall and at least 0.91 in the edge band, at most 1.4x as wide as today's
little-bags CLT interval (Friedberg, Tibshirani, Athey & Wager 2021, Sec. on intervals).
A nominal 95% interval should cover close to 95% of the time (common practice). Where a
design misses a goal, the test is an xfail that states the measured figure: the miss is
reported, not tuned away. Each design: default forests, 10 replications of the noise at
fixed X, 150 evaluation rows; the binomial interval of a coverage over 1500 (row,
replication) pairs is about +-0.011, wider in truth because rows share replications.
"""

import pytest

from hedgerow import LocalLinearForestRegressor
from hedgerow.datasets import coverage_designs
from hedgerow.diagnostics import coverage_readout

REPS, N_EVAL = 10, 150

# measured with this test's seeds (the numbers in the reason are the test's own output)
_SHORT = {
    "strong curvature": "measured overall 0.928 (goal >= 0.93), edges 0.922; width 1.08x "
                        "clt (clt overall 0.768)",
    "large n, eight columns": "measured overall 0.973 (goal <= 0.97: over-covers), edges "
                              "0.974, width 1.27x clt (clt overall 0.824): the Student-t "
                              "quantile with ~18 Satterthwaite degrees of freedom (W/V "
                              "grows with n, so 80 bags estimate the variance loosely)",
}

GOAL_DESIGNS = [d.name for d in coverage_designs()]  # every design of the family

_CACHE = {}


def _readout(name):
    if name not in _CACHE:
        design = coverage_designs([name])[0]
        X, y, _ = design.sample(random_state=0)
        model = LocalLinearForestRegressor(random_state=0, n_jobs=2).fit(X, y)
        _CACHE[name] = coverage_readout(model, truth=design.truth, reps=REPS,
                                        n_eval=N_EVAL, progress=False, random_state=0)
    return _CACHE[name]


def _params():
    out = []
    for name in GOAL_DESIGNS:
        marks = [pytest.mark.xfail(strict=True, reason=_SHORT[name])] if name in _SHORT else []
        out.append(pytest.param(name, marks=marks, id=name))
    return out


@pytest.mark.slow
@pytest.mark.parametrize("name", _params())
def test_default_interval_meets_the_coverage_goals(name, report):
    rep = _readout(name)
    llf = "local linear forest"
    overall, edge = rep.coverage(llf, "all"), rep.coverage(llf, "edge")
    f = rep.frame.set_index(["method", "interval", "part"])
    ratio = (f.loc[(llf, "bias_corrected", "all"), "mean_width"]
             / f.loc[(llf, "clt", "all"), "mean_width"])
    report(f"{name}: default interval overall {overall:.3f}, edges {edge:.3f}, "
           f"width {ratio:.2f}x clt; clt overall {rep.coverage(llf, 'all', 'clt'):.3f}")
    assert 0.93 <= overall <= 0.97, rep.frame
    assert edge >= 0.91, rep.frame
    assert ratio <= 1.4, rep.frame


@pytest.mark.slow
@pytest.mark.parametrize("name", [
    "skewed columns", "correlated normal columns", "gentle bend"])
def test_honest_forest_edges_bias_aware_covers_clt_does_not(name, report):
    # The finding (Friedberg et al. 2021; VARIANCE-NOTES): the plain honest forest's CLT
    # interval under-covers at the edges because its prediction is off centre there. Its
    # bias-corrected interval (centred on a local quadratic under the same weights)
    # covers there.
    rep = _readout(name)
    hf = "honest forest"
    clt_edge = rep.coverage(hf, "edge", "clt")
    fixed_edge = rep.coverage(hf, "edge")
    row = rep.frame[(rep.frame.method == hf) & (rep.frame.interval == "clt")
                    & (rep.frame.part == "edge")].iloc[0]
    report(f"{name}: honest forest edges, clt {clt_edge:.3f} (flag: {row.flag!r}), "
           f"bias corrected {fixed_edge:.3f}")
    assert row.upper < 0.95 and row.flag == "under-covers: off centre at the edges"
    assert fixed_edge >= 0.91


def _spline_readout(name):
    key = ("spline", name)
    if key not in _CACHE:
        design = coverage_designs([name])[0]
        X, y, _ = design.sample(random_state=0)
        model = LocalLinearForestRegressor(random_state=0, n_jobs=2).fit(X, y)
        _CACHE[key] = coverage_readout(model, surrogate="additive spline", reps=REPS,
                                       n_eval=N_EVAL, progress=False, random_state=0)
    return _CACHE[key]


def _flag(rep, method, interval, part):
    f = rep.frame
    return f[(f.method == method) & (f.interval == interval) & (f.part == part)].iloc[0].flag


@pytest.mark.slow
@pytest.mark.parametrize("name", ["skewed columns", "steep rise at an edge"])
def test_spline_surrogate_gives_the_same_headline_verdict(name):
    # the additive spline stands in for the truth (truth=None) on additive designs: the
    # finding (the honest forest's CLT interval off centre at the edges) and the
    # curvature-bound interval covering everywhere must read the same as with the truth
    known, stand_in = _readout(name), _spline_readout(name)
    assert stand_in.mode == "surrogate truth (additive spline)"
    for rep in (known, stand_in):
        assert _flag(rep, "honest forest", "clt", "edge") == (
            "under-covers: off centre at the edges")
        for forest in ("local linear forest", "honest forest"):
            for part in ("all", "edge", "interior"):
                assert _flag(rep, forest, "bias_bound", part) == ""


@pytest.mark.slow
@pytest.mark.xfail(strict=True, reason=(
    "measured: around the additive spline the bias-corrected intervals covered 0.85-0.91 "
    "(flagged) where around the truth they covered 0.94-0.97 (skewed columns) and "
    "0.93-0.97 (steep rise): the spline stand-in, fitted to every column including the "
    "noise columns, bends more than the truth, so its readout is pessimistic"))
@pytest.mark.parametrize("name", ["skewed columns", "steep rise at an edge"])
def test_spline_surrogate_gives_the_same_flags_as_the_truth(name):
    keep = ["method", "interval", "part", "flag"]
    a = _readout(name).frame[keep].reset_index(drop=True)
    b = _spline_readout(name).frame[keep].reset_index(drop=True)
    assert a.equals(b)
