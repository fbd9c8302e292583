"""Dask path: tuning surface on 1 vs 2 worker processes, lazy intervals on a million rows.

1. A 4 × 4 tuning surface (subsample rate × ridge penalty) at n = 20,000 on the softplus
   design (10 columns): one task per rate on a LocalCluster of 1, then 2 worker processes
   of 1 thread each. Prints both times, the speed-up, each worker's peak RSS, and checks
   the two surfaces (and the local one, with ``--local``) are identical.
2. ``predict_interval`` of a local linear forest on a 1,000,000-row dask array generated
   lazily in chunks, computed on the 2-worker cluster down to a few summary numbers, so no
   process ever holds all rows: prints the time and the peak RSS of workers and client,
   next to what holding the rows and their leaf matrix at once would take.

Run with ``.venv/bin/python benchmarks/bench_dask.py`` on a quiet machine (other work
shares its cores; read the ratio, not the seconds). ``--trees`` and ``--rows`` shrink it.
"""

from __future__ import annotations

import argparse
import os
import resource
import threading
import time

import numpy as np


def _start_sampler(dask_worker=None, interval=0.02):
    """Start sampling this process's RSS in a thread (a worker or the client)."""
    import psutil

    proc = psutil.Process(os.getpid())
    state = {"peak": proc.memory_info().rss, "stop": False}

    def loop():
        while not state["stop"]:
            state["peak"] = max(state["peak"], proc.memory_info().rss)
            time.sleep(interval)

    threading.Thread(target=loop, daemon=True).start()
    if dask_worker is not None:
        dask_worker._bench_rss = state
    return state


def _reset_peak(dask_worker):
    import psutil

    dask_worker._bench_rss["peak"] = psutil.Process(os.getpid()).memory_info().rss


def _read_peak(dask_worker):
    return dask_worker._bench_rss["peak"]


def _cpu_seconds(dask_worker=None):
    import psutil

    t = psutil.Process(os.getpid()).cpu_times()
    return t.user + t.system


def _warm(dask_worker=None):
    from hedgerow.forest import warm_up

    warm_up()


def _mib(b):
    return b / 2**20


def surface_on(n_workers, X, y, rates, lams, trees):
    from distributed import Client, LocalCluster

    from hedgerow.diagnostics import tuning_surface

    with LocalCluster(n_workers=n_workers, threads_per_worker=1, processes=True,
                      dashboard_address=None) as cluster, Client(cluster) as client:
        client.run(_warm)
        client.run(_start_sampler)
        cpu0 = client.run(_cpu_seconds)
        t = time.perf_counter()
        ts = tuning_surface(X, y, rates, lams, n_estimators=trees, progress=False,
                            random_state=0, client=client)
        seconds = time.perf_counter() - t
        cpu = sum(client.run(_cpu_seconds).values()) - sum(cpu0.values())
        peaks = client.run(_read_peak)
    return ts, seconds, peaks, cpu


def main():
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--n", type=int, default=20_000)
    ap.add_argument("--trees", type=int, default=400)
    ap.add_argument("--rows", type=int, default=1_000_000)
    ap.add_argument("--chunk", type=int, default=20_000)
    ap.add_argument("--predict-trees", type=int, default=200)
    ap.add_argument("--local", action="store_true", help="also time the local surface")
    args = ap.parse_args()

    from hedgerow.datasets import make_softplus_design
    from hedgerow.diagnostics import tuning_surface

    X, y, _ = make_softplus_design(args.n, n_features=10, random_state=0)
    # four rates of unequal cost (a tree's cost grows with the rows it draws); the
    # surface submits the largest first so the two workers finish close together
    rates, lams = [0.1, 0.2, 0.35, 0.5], [0.0, 0.01, 0.1, 1.0]
    print(f"tuning surface {len(rates)} x {len(lams)}, n={args.n}, d=10, "
          f"{args.trees} trees per rate; load average before: {os.getloadavg()}")
    if args.local:
        from hedgerow.forest import warm_up

        warm_up()
        t = time.perf_counter()
        local = tuning_surface(X, y, rates, lams, n_estimators=args.trees, progress=False,
                               random_state=0)
        print(f"  local, 1 thread:          {time.perf_counter() - t:7.1f} s")
    results = {}
    for workers in (1, 2):
        ts, seconds, peaks, cpu = surface_on(workers, X, y, rates, lams, args.trees)
        results[workers] = (ts, seconds)
        peak_text = ", ".join(f"{_mib(p):.0f}" for p in peaks.values())
        # CPU seconds the workers got per wall second: 2.0 would be both cores to
        # ourselves; less means other processes took their share of the machine
        print(f"  {workers} worker process(es): {seconds:7.1f} s   workers used "
              f"{cpu / seconds:4.2f} cores   peak RSS per worker (MiB): {peak_text}")
    same = results[1][0].frame.equals(results[2][0].frame)
    if args.local:
        same = same and local.frame.equals(results[2][0].frame)
    print(f"  speed-up 2 vs 1 workers:  {results[1][1] / results[2][1]:5.2f}x "
          f"(target >= 1.6); surfaces identical: {same}")
    print(f"  load average after: {os.getloadavg()}")

    lazy_intervals(X, y, args)


def lazy_intervals(X, y, args):
    import dask
    import dask.array as da
    from distributed import Client, LocalCluster

    from hedgerow import LocalLinearForestRegressor

    model = LocalLinearForestRegressor(n_estimators=args.predict_trees, random_state=0,
                                       n_jobs=2).fit(X, y)
    m, d, B = args.rows, X.shape[1], args.predict_trees
    print(f"\npredict_interval on a {m:,}-row dask array ({args.chunk:,}-row chunks, "
          f"{B} trees, 2 worker processes of 1 thread)")
    client_state = _start_sampler()
    with LocalCluster(n_workers=2, threads_per_worker=1, processes=True,
                      dashboard_address=None) as cluster, Client(cluster) as client:
        client.run(_warm)
        client.run(_start_sampler)
        base = client.run(_read_peak)
        client_state["peak"] = 0
        # rows generated lazily on the workers, never held whole anywhere
        rng = da.random.default_rng(1)
        Q = rng.uniform(-1.0, 1.0, size=(m, d), chunks=(args.chunk, d))
        lo, hi = model.predict_interval(Q, level=0.95)
        width = hi - lo
        t = time.perf_counter()
        mean_width, n_nan, first = dask.compute(da.nanmean(width), da.isnan(width).sum(),
                                                lo[:5])
        seconds = time.perf_counter() - t
        peaks = client.run(_read_peak)
        want = model.predict_interval(Q[:5].compute(), level=0.95)[0]
    print(f"  first lower limits equal the eager ones: {np.array_equal(first, want)}")
    print(f"  {seconds:.1f} s ({m / seconds:,.0f} rows/s); mean width {mean_width:.3f}, "
          f"{int(n_nan)} NaN")
    for p, b in zip(peaks.values(), base.values(), strict=True):
        print(f"  worker peak RSS {_mib(p):6.0f} MiB (idle with the model: {_mib(b):.0f} MiB)")
    whole_run = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024
    print(f"  client peak RSS {_mib(client_state['peak']):6.0f} MiB "
          f"(ru_maxrss over the whole run {whole_run:.0f} MiB)")
    print(f"  held at once the rows would take {_mib(m * d * 8):.0f} MiB and their leaf "
          f"matrix {_mib(m * B * 4):.0f} MiB")


if __name__ == "__main__":
    main()
