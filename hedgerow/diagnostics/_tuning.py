"""Tuning surface over subsample rate × ridge penalty from out-of-bag quantities."""

from __future__ import annotations

import time
from dataclasses import dataclass

import numpy as np
import pandas as pd

from hedgerow._progress import progress_bar
from hedgerow.diagnostics._interactive import oob_summary
from hedgerow.diagnostics._report import ReportMixin

__all__ = ["TuningSurface", "surface_column", "tuning_surface"]


#: Columns of a tuning-surface cell (``TuningSurface.frame`` without coverage), in order.
SURFACE_COLUMNS = ("subsample_rate", "ridge_penalty", "oob_rmse", "mean_width", "n_rows")


@dataclass(frozen=True)
class TuningSurface(ReportMixin):
    """Out-of-bag RMSE and mean interval width for every (subsample rate, penalty) cell.

    ``frame`` columns: subsample_rate, ridge_penalty, oob_rmse, mean_width (of the
    out-of-bag ``level`` intervals), n_rows (rows with an out-of-bag prediction); with
    ``coverage_reps > 0`` also coverage (the local linear forest's default interval,
    overall, from a ``coverage_readout`` of that cell) and coverage_flag (its flags for
    that interval joined by "; ", "" when none).
    ``complete`` is False when the run was interrupted: ``frame`` then holds the cells
    finished before the interruption. ``refit_seconds`` / ``total_seconds``: time spent
    growing forests / in all.
    """

    frame: pd.DataFrame
    complete: bool
    refit_seconds: float
    total_seconds: float
    level: float
    _title = "tuning surface"

    def to_frame(self) -> pd.DataFrame:
        return self.frame.copy()

    def best(self) -> pd.Series:
        """Return the cell with the lowest out-of-bag RMSE."""
        return self.frame.loc[self.frame["oob_rmse"].idxmin()]

    def recommended(self) -> pd.Series | None:
        """Return the lowest out-of-bag RMSE among cells whose coverage is not flagged.

        Needs a surface computed with ``coverage_reps > 0``; None when every cell is
        flagged (then no setting gave intervals that cover: say so, do not pick one).
        """
        if "coverage_flag" not in self.frame:
            raise ValueError("The surface has no coverage flags: compute it with "
                             "tuning_surface(..., coverage_reps=R) with R >= 2.")
        ok = self.frame[self.frame["coverage_flag"] == ""]
        return None if ok.empty else ok.loc[ok["oob_rmse"].idxmin()]

    def grid(self, value: str = "oob_rmse") -> pd.DataFrame:
        """Return ``value`` as a subsample-rate × ridge-penalty table."""
        return self.frame.pivot(index="subsample_rate", columns="ridge_penalty", values=value)

    def _notes(self):
        state = "" if self.complete else " (interrupted: partial surface)"
        share = self.refit_seconds / self.total_seconds if self.total_seconds else 0.0
        return [f"{len(self.frame)} cells in {self.total_seconds:.1f} s, {100 * share:.0f}% "
                f"refitting{state}"]


def _check_grid(name, values, low, high, closed_low):
    from hedgerow.diagnostics._checks import check_values

    arr = check_values(name, values)
    if arr.size == 0:
        raise ValueError(f"The '{name}' parameter must hold at least one value. Got an empty "
                         f"grid.")
    bad = ~np.isfinite(arr) | (arr > high) | ((arr < low) if closed_low else (arr <= low))
    if np.any(bad):
        rng = f"[{low}, {high}]" if closed_low else f"({low}, {high}]"
        raise ValueError(f"The '{name}' parameter must hold finite values in {rng}. "
                         f"Got {arr[bad].tolist()!r}.")
    return arr


def _fit_rate(X, y, rate, random_state, n_jobs, forest_params, progress=None):
    """Return (the forest of one subsample rate, seconds spent fitting it)."""
    from hedgerow.estimators import LocalLinearForestRegressor

    t = time.perf_counter()
    model = LocalLinearForestRegressor(
        subsample_rate=float(rate), random_state=random_state, n_jobs=n_jobs, **forest_params,
    ).fit(X, y, progress=progress)
    return model, time.perf_counter() - t


def surface_column(X, y, subsample_rate, ridge_penalties, *, level=0.95, random_state=0,
                   n_jobs=None, progress=None, **forest_params) -> tuple:
    """Return ``(cells, model)``: one subsample rate's column of the tuning surface.

    ``cells`` is a DataFrame with the columns of ``TuningSurface.frame`` (without
    coverage) for every penalty in ``ridge_penalties``, the same numbers
    ``tuning_surface`` gives for that rate with the same arguments; ``model`` is the
    forest grown for it (one fit; the penalties re-solve its out-of-bag moments).
    ``progress``: callable(trees grown), passed to ``fit`` (it may raise to stop).
    """
    rates = _check_grid("subsample_rate", [subsample_rate], 0.0, 1.0, closed_low=False)
    lams = _check_grid("ridge_penalties", ridge_penalties, 0.0, np.inf, closed_low=True)
    forest_params = {k: v for k, v in forest_params.items() if k != "subsample_rate"}
    model, _ = _fit_rate(X, y, rates[0], random_state, n_jobs, forest_params, progress)
    rows = [_cell(model, rates[0], lam, level) for lam in lams]
    return pd.DataFrame(rows, columns=list(SURFACE_COLUMNS)), model


def _cell(model, rate, lam, level) -> dict:
    """Return one row of the surface: out-of-bag RMSE and mean width at penalty ``lam``."""
    summary = oob_summary(model, lam, level)
    return {"subsample_rate": float(rate), "ridge_penalty": float(lam),
            "oob_rmse": summary["oob_rmse"], "mean_width": summary["mean_width"],
            "n_rows": summary["n_rows"]}


def _rate_task(task, X, y):
    """Return (cells, refit seconds) of one subsample rate: the unit of distributed work."""
    rate, lams, level, random_state, n_jobs, forest_params = task
    model, refit = _fit_rate(X, y, rate, random_state, n_jobs, forest_params)
    return [_cell(model, rate, lam, level) for lam in lams], refit


def _coverage_cell(model, lam, reps, truth, level, random_state, client) -> dict:
    """Return the coverage and flags of one cell (the model's forest at penalty lam)."""
    from hedgerow.diagnostics._coverage import coverage_readout
    from hedgerow.diagnostics._interactive import at_ridge_penalty
    from hedgerow.estimators._forest import DEFAULT_INTERVAL

    view = at_ridge_penalty(model, lam)
    view.ridge_penalty = float(lam)  # the refits use this penalty (and split with it)
    rep = coverage_readout(view, truth=truth, reps=reps, level=level, progress=False,
                           random_state=random_state, client=client)
    f = rep.frame
    f = f[(f["method"] == "local linear forest") & (f["interval"] == DEFAULT_INTERVAL)]
    flags = [x for x in f["flag"] if x]
    if rep.reps_done < rep.reps:
        raise KeyboardInterrupt
    return {"coverage": float(f[f["part"] == "all"]["coverage"].iloc[0]),
            "coverage_flag": "; ".join(flags)}


def tuning_surface(X, y, subsample_rates, ridge_penalties, *, level=0.95, progress=True,
                   random_state=0, n_jobs=None, client=None, coverage_reps=0,
                   coverage_truth=None, **forest_params) -> TuningSurface:
    """Return the ``TuningSurface`` of a local linear forest over two axes.

    Each subsample rate grows one forest (``LocalLinearForestRegressor(**forest_params)``
    with that ``subsample_rate``); every ridge penalty is then solved from that forest's
    cached out-of-bag moments, without refitting. A ``KeyboardInterrupt`` (Ctrl-C, kernel
    interrupt) stops the run and returns the cells completed so far (``complete=False``).

    With a ``dask.distributed.Client`` as ``client``, each subsample rate is one task on
    its workers (the data are sent once; the costliest rates, the largest, go first) and
    the surface is the same as without it; an interruption cancels the tasks not finished.
    ``refit_seconds`` then adds up the workers' fitting time.

    ``coverage_reps`` (default 0: off): replications of a ``coverage_readout`` per cell
    (``coverage_truth`` as its ``truth``), which adds the columns coverage and
    coverage_flag; the tuning rule is then ``TuningSurface.recommended()``, the lowest
    out-of-bag error among cells whose coverage is not flagged. It costs
    2 * coverage_reps forest fits per cell.
    """
    if (isinstance(coverage_reps, bool) or not isinstance(coverage_reps, int | np.integer)
            or coverage_reps < 0 or coverage_reps == 1):
        raise ValueError(f"The 'coverage_reps' parameter must be 0 (off) or an integer >= 2. "
                         f"Got {coverage_reps!r} instead.")
    from hedgerow._distributed import check_client

    rates = _check_grid("subsample_rates", subsample_rates, 0.0, 1.0, closed_low=False)
    lams = _check_grid("ridge_penalties", ridge_penalties, 0.0, np.inf, closed_low=True)
    client = check_client(client)
    t0 = time.perf_counter()
    refit = [0.0]  # a list, so that the cluster path's callback adds to it
    by_rate = {}
    complete = True
    bar = progress_bar(rates.size * lams.size, "tuning surface", progress)
    try:
        if client is None:
            for i, rate in enumerate(rates):
                model, seconds = _fit_rate(X, y, rate, random_state, n_jobs, forest_params)
                refit[0] += seconds
                by_rate[i] = []
                for lam in lams:
                    by_rate[i].append(_cell(model, rate, lam, level))
                    bar.update(1)
        else:
            _surface_on_cluster(client, X, y, rates, lams, level, random_state, n_jobs,
                                forest_params, by_rate, refit, bar)
    except KeyboardInterrupt:
        complete = False
    finally:
        bar.close()
    # cells in grid order whatever order the rates finished in
    rows = [row for i in sorted(by_rate) for row in by_rate[i]]
    columns = list(SURFACE_COLUMNS)
    if coverage_reps and complete:
        try:
            cbar = progress_bar(len(rows), "coverage per cell", progress)
            models = {}  # one forest per rate, as for the surface itself
            for row in rows:
                rate = row["subsample_rate"]
                if rate not in models:
                    models[rate], seconds = _fit_rate(X, y, rate, random_state, n_jobs,
                                                      forest_params)
                    refit[0] += seconds
                model = models[rate]
                row.update(_coverage_cell(model, row["ridge_penalty"], int(coverage_reps),
                                          coverage_truth, level, random_state, client))
                cbar.update(1)
        except KeyboardInterrupt:
            complete = False
            rows = [r for r in rows if "coverage_flag" in r]
        finally:
            cbar.close()
    if coverage_reps:
        columns += ["coverage", "coverage_flag"]
    frame = pd.DataFrame(rows, columns=columns)
    return TuningSurface(frame=frame, complete=complete, refit_seconds=refit[0],
                         total_seconds=time.perf_counter() - t0, level=level)


def _surface_on_cluster(client, X, y, rates, lams, level, random_state, n_jobs,
                        forest_params, by_rate, refit, bar) -> None:
    """Fill ``by_rate`` from one task per subsample rate, adding fit times to ``refit``."""
    from hedgerow._distributed import run_tasks
    from hedgerow._validation import check_fit_data
    from hedgerow.estimators import LocalLinearForestRegressor

    # bad data fail here, as in the local path, rather than once per task on the workers
    check_fit_data(LocalLinearForestRegressor(), X, y)

    def finished(i, result):
        cells, seconds = result
        by_rate[i] = cells
        refit[0] += seconds
        bar.update(len(cells))

    tasks = [(float(rate), lams, level, random_state, n_jobs, forest_params) for rate in rates]
    # a tree's cost grows with the rows it draws: the largest rates first, so that the
    # last task to start is a cheap one and workers finish together (longest first)
    rank = np.argsort(np.argsort(rates, kind="stable"), kind="stable")
    run_tasks(client, _rate_task, tasks, shared=(X, y), what="subsample rate",
              priorities=rank, on_result=finished)
