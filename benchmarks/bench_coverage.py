"""Coverage of every interval method on the family of smooth designs.

Prints, per design, forest and interval method: coverage overall / edge band / interior,
mean width and its ratio to today's interval ("clt") of the same forest, the columns the
default interval's curvature test finds bending, and the bias/variance split (rms bias
over replications, mean little-bags sd, sd across replications, coverage with the bias
removed). The reference is the "clt" interval
measured in the same run. Modest by default; the full family with default forests is

    python benchmarks/bench_coverage.py --reps 20 --n-eval 200

Flags: --designs NAME ... (a subset), --trees N, --reps R, --n-eval M, --seed S.
"""

from __future__ import annotations

import argparse
import time

import numpy as np
import pandas as pd

from hedgerow import LocalLinearForestRegressor
from hedgerow.datasets import coverage_designs
from hedgerow.diagnostics import coverage_readout


def run(design, trees, reps, n_eval, seed):
    X, y, _ = design.sample(random_state=seed)
    model = LocalLinearForestRegressor(n_estimators=trees, random_state=seed, n_jobs=2)
    model.fit(X, y)
    Q = X[:200]
    print(f"  {design.name}: bending columns {model.bending_columns().tolist()} of the "
          f"local line's {model.correction_features_.tolist()}; Satterthwaite degrees of "
          f"freedom of the default interval, median {np.median(model.interval_parts(Q).df):.0f}",
          flush=True)
    rep = coverage_readout(model, truth=design.truth, reps=reps, n_eval=n_eval,
                           progress=False, random_state=seed)
    f = rep.frame
    clt = f[f["interval"] == "clt"].set_index(["method", "part"])["mean_width"]
    f = f.assign(width_vs_clt=[w / clt[(m, p)] for m, p, w in
                               zip(f["method"], f["part"], f["mean_width"], strict=True)])
    return f.assign(design=design.name)


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--designs", nargs="*", default=None)
    ap.add_argument("--trees", type=int, default=2000)
    ap.add_argument("--reps", type=int, default=8)
    ap.add_argument("--n-eval", type=int, default=150)
    ap.add_argument("--seed", type=int, default=0)
    a = ap.parse_args(argv)
    frames = []
    for design in coverage_designs(a.designs):
        t0 = time.perf_counter()
        frames.append(run(design, a.trees, a.reps, a.n_eval, a.seed))
        print(f"{design!r}: {time.perf_counter() - t0:.0f} s", flush=True)
    f = pd.concat(frames, ignore_index=True)
    wide = f.pivot_table(index=["design", "method", "interval"], columns="part",
                         values="coverage", sort=False)[["all", "edge", "interior"]]
    al = f[f["part"] == "all"].set_index(["design", "method", "interval"])
    wide["width"] = al["mean_width"]
    wide["width/clt"] = al["width_vs_clt"]
    wide["rms bias"] = al["rms_bias"]
    wide["mean sd"] = al["mean_sd"]
    wide["sd across"] = al["sd_across"]
    wide["cov. bias removed"] = al["coverage_bias_removed"]
    ed = f[f["part"] == "edge"].set_index(["design", "method", "interval"])
    wide["edge rms bias"] = ed["rms_bias"]
    with pd.option_context("display.width", 250, "display.max_rows", 500,
                           "display.max_columns", 20,
                           "display.float_format", "{:.3f}".format):
        print(wide)
    flagged = f[f["flag"] != ""]
    print("\nflags:")
    for r in flagged.itertuples():
        print(f"  {r.design} / {r.method} / {r.interval}: {r.flag}")
    print(f"\n(trees {a.trees}, replications {a.reps}, {a.n_eval} evaluation rows; "
          f"the honest forest's clt interval missing at the edges is the known finding)")
    return wide


if __name__ == "__main__":
    np.seterr(all="ignore")
    main()
