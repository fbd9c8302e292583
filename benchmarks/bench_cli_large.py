"""Wall time of ``hedgerow report`` on a large CSV with default flags.

Goal: a 300,000-row CSV with 10 feature columns (plus the target) reports in under 10
minutes on a 2-core machine. The table is an invented scenario: a greenhouse's hourly
tomato yield per bench from ten climate and irrigation readings (yield saturates in light,
peaks at a middle air temperature, rises a little with CO2; the other columns are
nuisance readings). The command runs as a user would run it (``python -m hedgerow report
DATA.csv --target yield_g``, a separate process, progress bar on stderr), and the same run
times one ``sklearn.ensemble.RandomForestRegressor(n_estimators=100, n_jobs=-1)`` fit on
the same rows as the reference the ratio is printed against. The load average is printed
beside the figures: on a shared machine read the ratio, not the seconds.

Usage: python benchmarks/bench_cli_large.py [--rows 300000] [--columns 10] [--keep DIR]
       [--extra "--trees 200"] [--skip-reference]
"""

from __future__ import annotations

import argparse
import os
import resource
import shlex
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np
import pandas as pd

NAMES = ["light_klux", "air_temp_c", "co2_ppm", "humidity_pct", "irrigation_l",
         "nutrient_ec", "root_temp_c", "fan_speed_pct", "plant_age_d", "shade_pct"]


def greenhouse_table(rows: int, columns: int, seed: int = 0) -> pd.DataFrame:
    """Return the invented greenhouse table: ``columns`` readings and ``yield_g``."""
    rng = np.random.default_rng(seed)
    spans = {"light_klux": (5, 80), "air_temp_c": (14, 34), "co2_ppm": (380, 1100),
             "humidity_pct": (40, 95), "irrigation_l": (0.2, 3.0), "nutrient_ec": (1.5, 4.0),
             "root_temp_c": (15, 26), "fan_speed_pct": (0, 100), "plant_age_d": (20, 140),
             "shade_pct": (0, 60)}
    names = NAMES[:columns] + [f"reading_{j}" for j in range(len(NAMES), columns)]
    frame = pd.DataFrame({n: rng.uniform(*spans.get(n, (0.0, 1.0)), rows) for n in names})
    light = frame["light_klux"] if "light_klux" in frame else 40.0
    temp = frame["air_temp_c"] if "air_temp_c" in frame else 24.0
    co2 = frame["co2_ppm"] if "co2_ppm" in frame else 700.0
    mean = (60.0 * (1.0 - np.exp(-light / 25.0)) - 0.12 * (temp - 24.0) ** 2
            + 0.01 * (co2 - 700.0))
    frame["yield_g"] = mean + rng.normal(0.0, 4.0, rows)
    return frame


def _load() -> str:
    try:
        return "load average {:.2f} {:.2f} {:.2f}".format(*os.getloadavg())
    except OSError:  # pragma: no cover - not every platform has it
        return "load average unknown"


def main(argv=None) -> int:
    p = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    p.add_argument("--rows", type=int, default=300_000)
    p.add_argument("--columns", type=int, default=10)
    p.add_argument("--keep", type=Path, default=None,
                   help="folder for the CSV and the report (default: a temporary one)")
    p.add_argument("--extra", default="", help="more flags for 'hedgerow report'")
    p.add_argument("--skip-reference", action="store_true")
    args = p.parse_args(argv)

    with tempfile.TemporaryDirectory() as tmp:
        folder = args.keep or Path(tmp)
        folder.mkdir(parents=True, exist_ok=True)
        data, out = folder / "greenhouse.csv", folder / "greenhouse-report.html"
        frame = greenhouse_table(args.rows, args.columns)
        frame.to_csv(data, index=False)
        print(f"table: {args.rows:,} rows x {args.columns} columns + target, "
              f"{data.stat().st_size / 1e6:.1f} MB; {os.cpu_count()} cores; {_load()}")

        ref = None
        if not args.skip_reference:
            from sklearn.ensemble import RandomForestRegressor

            X, y = frame.drop(columns="yield_g"), frame["yield_g"]
            t = time.perf_counter()
            RandomForestRegressor(n_estimators=100, n_jobs=-1, random_state=0).fit(X, y)
            ref = time.perf_counter() - t
            print(f"reference: RandomForestRegressor(100 trees).fit  {ref:8.1f} s  ({_load()})")

        cmd = [sys.executable, "-m", "hedgerow", "report", str(data), "--target", "yield_g",
               "--out", str(out), *shlex.split(args.extra)]
        print("running:", " ".join(cmd[2:]), flush=True)
        t = time.perf_counter()
        log = folder / "stderr.txt"  # the progress bar too: follow it with tail -f
        with open(log, "w", encoding="utf-8") as fh:
            done = subprocess.run(cmd, stdout=subprocess.PIPE, stderr=fh, text=True)
        wall = time.perf_counter() - t
        err = log.read_text(encoding="utf-8")
        notes = [line for line in err.splitlines() if "note:" in line]
        print(f"hedgerow report: exit {done.returncode}, {wall:8.1f} s = {wall / 60:.1f} min"
              f"  ({_load()})")
        if ref is not None:
            print(f"ratio to the reference fit: {wall / ref:.1f}x")
        # the command is the only child process: its peak resident memory (Linux: KiB)
        peak = resource.getrusage(resource.RUSAGE_CHILDREN).ru_maxrss / 2**20
        print(f"peak resident memory of the command: {peak:.2f} GiB")
        ok = done.returncode == 0 and wall < 600
        print(f"goal: under 10 min with exit 0: {'met' if ok else 'missed'}")
        for line in notes:
            print(line)
        if done.returncode != 0:
            print(err[-2000:])
        elif out.exists():
            print(f"report: {out.stat().st_size / 1e6:.2f} MB")
    return 0 if done.returncode == 0 else 1


if __name__ == "__main__":
    raise SystemExit(main())
