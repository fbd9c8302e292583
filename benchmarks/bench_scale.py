"""Fit time, peak memory and saved size of both forests and scikit-learn's at large n.

Every fit runs in a child process of its own (a fresh interpreter), which reports its
own peak resident memory (``ru_maxrss`` of ``getrusage(RUSAGE_SELF)``, read right after
the fit, before anything is saved), its resident memory before the fit (imports and data
in place), the fit time and the size of the pickled model (streamed to a byte counter,
so saving adds no copy). The parent prints, per n: seconds, time / scikit-learn's, peak
and pre-fit RSS, pickled size, and peak / pickled size.

Data: an invented field-trial surface in 10 columns (uniform design, smooth main effects,
one interaction, normal noise). Settings as the issue states them: 500 trees, n_jobs=2;
scikit-learn's ``RandomForestRegressor(max_samples=0.25, min_samples_leaf=5,
n_estimators=500, n_jobs=2)``.

    python benchmarks/bench_scale.py                    # n = 100k and 300k
    python benchmarks/bench_scale.py --sizes 100000     # one size
    python benchmarks/bench_scale.py --million --only honest   # adds n = 1M

The machine is shared: the load average is printed before and after each fit.
"""

from __future__ import annotations

import argparse
import json
import os
import subprocess
import sys
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
MODELS = ("sklearn", "honest", "local_linear")
D = 10
TREES = 500


def _rss_kib() -> int:
    with open("/proc/self/status") as fh:
        for line in fh:
            if line.startswith("VmRSS:"):
                return int(line.split()[1])
    return 0


class _Counter:
    """A file-like sink that only counts the bytes written to it."""

    def __init__(self):
        self.n = 0

    def write(self, b):
        self.n += memoryview(b).nbytes
        return memoryview(b).nbytes


def child(model: str, n: int, seed: int, trees: int = TREES) -> dict:
    """Fit one model on n rows in this process; return its figures."""
    import pickle
    import resource

    import numpy as np

    rng = np.random.default_rng(seed)
    X = rng.uniform(0.0, 1.0, size=(n, D))
    y = (np.sin(3.0 * X[:, 0]) + 2.0 * (X[:, 1] - 0.5) ** 2 + X[:, 2] * X[:, 3]
         + 0.5 * X[:, 4] + rng.normal(scale=0.3, size=n))
    if model == "sklearn":
        from sklearn.ensemble import RandomForestRegressor

        est = RandomForestRegressor(n_estimators=trees, max_samples=0.25, min_samples_leaf=5,
                                    n_jobs=2, random_state=0)
    else:
        from hedgerow import HonestForestRegressor, LocalLinearForestRegressor
        from hedgerow.forest import warm_up

        warm_up()  # compile or load the kernels before the clock starts
        cls = HonestForestRegressor if model == "honest" else LocalLinearForestRegressor
        est = cls(n_estimators=trees, n_jobs=2, random_state=0)
    before = _rss_kib()
    t0 = time.perf_counter()
    est.fit(X, y)
    seconds = time.perf_counter() - t0
    peak = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss  # KiB on Linux
    after = _rss_kib()
    sink = _Counter()
    pickle.dump(est, sink, protocol=5)
    return {"model": model, "n": n, "seconds": seconds, "peak_kib": peak,
            "before_kib": before, "after_kib": after, "pickle_bytes": sink.n}


def _load() -> str:
    return " ".join(f"{v:.2f}" for v in os.getloadavg())


def run_child(model: str, n: int, seed: int, trees: int = TREES) -> dict:
    env = dict(os.environ)
    env["PYTHONPATH"] = str(ROOT) + os.pathsep + env.get("PYTHONPATH", "")
    load0 = _load()
    out = subprocess.run(
        [sys.executable, __file__, "--child", model, str(n), str(seed), str(trees)],
        env=env, capture_output=True, text=True, check=False,
    )
    if out.returncode != 0:
        return {"model": model, "n": n, "error": (out.stderr or "")[-600:],
                "returncode": out.returncode, "load": (load0, _load())}
    rec = json.loads(out.stdout.strip().splitlines()[-1])
    rec["load"] = (load0, _load())
    return rec


def _gib(kib_or_bytes: float, unit: str) -> float:
    return kib_or_bytes / (2**20 if unit == "kib" else 2**30)


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--sizes", type=int, nargs="*", default=[100_000, 300_000],
                    help="row counts (none with --million: 1M alone)")
    ap.add_argument("--million", action="store_true", help="add n = 1,000,000")
    ap.add_argument("--only", nargs="+", choices=MODELS, default=list(MODELS))
    ap.add_argument("--seed", type=int, default=1)
    ap.add_argument("--trees", type=int, default=TREES, help="trees per forest (500)")
    ap.add_argument("--child", nargs=4, help=argparse.SUPPRESS)
    args = ap.parse_args(argv)
    if args.child:
        model, n, seed, trees = args.child
        print(json.dumps(child(model, int(n), int(seed), int(trees))))
        return 0
    sizes = list(args.sizes) + ([1_000_000] if args.million else [])
    print(f"d = {D}, {args.trees} trees, n_jobs = 2; load average (1, 5, 15 min) shown per fit")
    header = (f"{'n':>9} {'model':>13} {'fit s':>8} {'/sklearn':>8} {'peak GiB':>9} "
              f"{'pre-fit':>8} {'pickle':>8} {'peak/pkl':>8} {'(peak-pre)/pkl':>14}  load")
    print(header)
    for n in sizes:
        ref = None
        for model in [m for m in MODELS if m in args.only]:
            rec = run_child(model, n, args.seed, args.trees)
            if "error" in rec:
                print(f"{n:>9} {model:>13} failed (exit {rec['returncode']}): "
                      f"{rec['error'].strip().splitlines()[-1] if rec['error'] else ''}")
                continue
            if model == "sklearn":
                ref = rec["seconds"]
            ratio = f"{rec['seconds'] / ref:8.2f}" if ref else f"{'-':>8}"
            peak = _gib(rec["peak_kib"], "kib")
            pre = _gib(rec["before_kib"], "kib")
            pkl = _gib(rec["pickle_bytes"], "bytes")
            print(f"{n:>9} {model:>13} {rec['seconds']:8.1f} {ratio} {peak:9.2f} {pre:8.2f} "
                  f"{pkl:8.2f} {peak / pkl:8.2f} {(peak - pre) / pkl:14.2f}  "
                  f"{rec['load'][0]} -> {rec['load'][1]}", flush=True)
    return 0


if __name__ == "__main__":
    sys.exit(main())
