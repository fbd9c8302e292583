"""Fit time and peak resident memory of the local linear forest beside scikit-learn's forest.

Each fit runs in a child process of its own (d = 10, 500 trees, n_jobs=2); the child
prints its wall time and peak RSS (``getrusage(RUSAGE_SELF).ru_maxrss``), and the parent
prints ratios against scikit-learn's ``RandomForestRegressor(max_samples=0.25,
min_samples_leaf=5, n_estimators=500, n_jobs=2)`` fitted in the same run on the same rows.
The rows are an invented kiln scenario (temperatures, humidity and nuisance readings).

Usage: python benchmarks/bench_llf_memory.py [--sizes 100000 300000] [--trees 500]
       [--skip-reference]
"""

from __future__ import annotations

import argparse
import json
import os
import subprocess
import sys

CHILD = r"""
import json, resource, sys, time, warnings
import numpy as np
n, trees, which = int(sys.argv[1]), int(sys.argv[2]), sys.argv[3]
rng = np.random.default_rng(0)
X = rng.uniform(0, 1, size=(n, 10))
y = (40 * np.log1p(3 * X[:, 0]) + 8 * np.sin(4 * X[:, 1]) + 5 * X[:, 2] * X[:, 3]
     + rng.normal(0, 2, n))
warnings.simplefilter("ignore")
t = time.perf_counter()
if which == "sklearn":
    from sklearn.ensemble import RandomForestRegressor
    RandomForestRegressor(n_estimators=trees, max_samples=0.25, min_samples_leaf=5,
                          n_jobs=2, random_state=0).fit(X, y)
else:
    from hedgerow import LocalLinearForestRegressor
    m = LocalLinearForestRegressor(n_estimators=trees, random_state=0, n_jobs=2).fit(X, y)
fit = time.perf_counter() - t
print(json.dumps({"fit_s": fit,
                  "peak_gb": resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 2**20}))
"""


def run(n, trees, which):
    out = subprocess.run([sys.executable, "-c", CHILD, str(n), str(trees), which],
                         capture_output=True, text=True, env=os.environ.copy(), check=True)
    return json.loads(out.stdout.strip().splitlines()[-1])


def main(argv=None):
    p = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    p.add_argument("--sizes", type=int, nargs="+", default=[100_000, 300_000])
    p.add_argument("--trees", type=int, default=500)
    p.add_argument("--skip-reference", action="store_true")
    args = p.parse_args(argv)
    import hedgerow

    print(f"hedgerow from {hedgerow.__file__}")
    for n in args.sizes:
        llf = run(n, args.trees, "llf")
        line = (f"n={n:>8,}: local linear forest fit {llf['fit_s']:.1f} s, peak RSS "
                f"{llf['peak_gb']:.2f} GB")
        if not args.skip_reference:
            ref = run(n, args.trees, "sklearn")
            line += (f"; scikit-learn {ref['fit_s']:.1f} s, {ref['peak_gb']:.2f} GB; ratios "
                     f"time {llf['fit_s'] / ref['fit_s']:.2f}, peak "
                     f"{llf['peak_gb'] / ref['peak_gb']:.2f}")
        print(line, flush=True)


if __name__ == "__main__":
    main()
