"""Building a report: run the diagnostics in order, with one progress bar over the steps.

Every number comes from a ``hedgerow.diagnostics`` function; this module only decides
what is run, in which order, and what the bar says while it runs.
"""

from __future__ import annotations

import datetime as _dt
import os
import warnings
from pathlib import Path

import numpy as np
import pandas as pd
from sklearn.base import clone

from hedgerow import diagnostics as D
from hedgerow._atomic import write_text_atomic
from hedgerow._progress import RunControl, progress_bar
from hedgerow.diagnostics import check_probe_point
from hedgerow.report._content import (
    CAUTION_KERNEL,
    CAUTIONS_BASE,
    HONEST,
    LLF,
    MIN_ROWS,
    DataSummary,
    Report,
    Settings,
)
from hedgerow.report._inputs import (
    check_flag,
    check_report_data,
    data_fingerprint,
    probe_input,
    resolve_model,
)

__all__ = ["build_report", "save_html", "write_html", "comparison_sample", "subsample_note"]

#: The steps of a report, in order (``smoothers`` and ``coverage`` only when asked for).
STEPS = ("fit", "smoothers", "verdict", "probe", "slice", "edges", "out-of-bag",
         "coverage", "figures")


class _Steps:
    """The report's one progress bar: a tick per step, the step's own progress beside it.

    ``with steps.step(name):`` shows the name while the step runs and ticks when it ends;
    ``steps.follow(name)`` returns a ``RunControl`` that the step's diagnostics function
    reports to, shown as "name: done/total" (at most about 20 updates a step).
    """

    def __init__(self, names, enabled):
        self._bar = progress_bar(len(names), "hedgerow report", enabled)

    def step(self, name):
        return _Step(self, name)

    def show(self, text):
        self._bar.set_postfix_str(text)

    def reporter(self, name, unit="steps"):
        """Return ``on_update(done, total)`` showing "name: done/total unit" (total: or None)."""
        shown = [0]

        def on_update(done, total):
            if total is None:
                self.show(f"{name}: {done} {unit}")
            elif done >= total or done - shown[0] >= max(total // 20, 1):
                shown[0] = done
                self.show(f"{name}: {done}/{total} {unit}")

        return on_update

    def follow(self, name, unit="steps"):
        """Return a ``RunControl`` for a diagnostics function's ``progress=``."""
        return RunControl(self.reporter(name, unit))

    def close(self):
        self._bar.close()


class _Step:
    def __init__(self, steps, name):
        self._steps, self._name = steps, name

    def __enter__(self):
        self._steps.show(self._name)
        return self

    def __exit__(self, exc_type, exc, tb):
        if exc_type is None:
            self._steps._bar.update(1)
        return False


def build_report(X, y, *, model=None, feature=None, probe=None, title=None, compare=True,
                 coverage_reps=0, progress=True, random_state=0, baseline=True,
                 comparison_rows=None) -> Report:
    """Return the :class:`Report` of a local linear forest on ``(X, y)``.

    Parameters
    ----------
    X : DataFrame or 2-d array of numbers. y : Series or 1-d array, one value per row.
    model : None (fit a ``LocalLinearForestRegressor`` with default settings and
        ``random_state``), a local linear forest fitted on ``(X, y)``, or an unfitted one
        (a clone of it is fitted here; the object passed stays unfitted).
    feature : column (name or index) the slice runs along; default the model's first
        correction column.
    probe : the probe point: None (column medians), a sequence of d values, a Series, or
        a dict column -> value (other columns at their medians).
    title : page title (default "hedgerow report: <target>").
    compare : also fit Nadaraya-Watson and kernel local linear regression (bandwidths by
        cross-validation) and show them beside the forests.
    coverage_reps : replications of ``coverage_readout`` (0: no coverage readout; each
        replication refits the forest twice).
    progress : show a progress bar over the steps.
    random_state : seed of the default model, the scikit-learn baseline, the coverage
        readout and the comparison subsample.
    baseline : include scikit-learn's random forest in the verdict.
    comparison_rows : None (every row), or at most this many rows (a seeded random
        subsample) for the expensive comparisons: the cross-fitted verdict (every method on
        the same rows) and the kernel smoothers' fits. The forests' probe, slice, edges and
        out-of-bag numbers still use every row; the report says so in ``notes``, and the
        kernel smoothers then leave the edges section. The command line sets it to
        ``COMPARISON_ROWS`` unless ``--full``.
    """
    from hedgerow import __version__

    compare = check_flag("compare", compare)
    progress = check_flag("progress", progress)
    baseline = check_flag("baseline", baseline)
    if comparison_rows is not None and (
            isinstance(comparison_rows, bool) or not isinstance(comparison_rows, int | np.integer)
            or comparison_rows < MIN_ROWS):
        raise ValueError(f"The 'comparison_rows' parameter must be None or an integer >= "
                         f"{MIN_ROWS}. Got {comparison_rows!r} instead.")
    if (isinstance(coverage_reps, bool) or not isinstance(coverage_reps, int | np.integer)
            or coverage_reps < 0):
        raise ValueError(f"The 'coverage_reps' parameter must be an integer >= 0. "
                         f"Got {coverage_reps!r} instead.")
    if title is not None and not isinstance(title, str):
        raise TypeError(f"The 'title' parameter must be a string or None. Got {title!r} "
                        f"instead.")
    Xa, ya, columns, target, stand_in = check_report_data(X, y)
    # feature and probe are checked before anything is fitted
    if feature is not None:
        D.resolve_feature(stand_in, feature)
    if probe is not None:
        check_probe_point(stand_in, probe_input(probe, columns, np.median(Xa, axis=0)))
    names = [s for s in STEPS if (s != "smoothers" or compare)
             and (s != "coverage" or coverage_reps > 0)]
    sample = comparison_sample(Xa.shape[0], comparison_rows, random_state)
    Xc, yc = (X, y) if sample is None else (_take(X, sample), _take(y, sample))
    notes = () if sample is None else (subsample_note(Xa.shape[0], sample.size, compare),)
    steps = _Steps(names, progress)
    try:
        with warnings.catch_warnings():
            # numpy probes against a DataFrame-fitted model: harmless, and noisy
            warnings.filterwarnings("ignore", message="X does not have valid feature names")
            with steps.step("fit"):
                model = resolve_model(model, X, y, Xa, random_state,
                                      on_trees=steps.reporter("fit", "trees"))
                j = D.resolve_feature(model, int(model.correction_features_[0])
                                      if feature is None else feature)
                anchor = D.probe_anchor(model.X_train_)
                x = anchor if probe is None else check_probe_point(
                    model, probe_input(probe, columns, anchor))[0]
            smoothers = ()
            if compare:
                from hedgerow.estimators import LocalLinearRegressor, NadarayaWatsonRegressor

                with steps.step("smoothers"):
                    smoothers = tuple(
                        est.fit(Xc, yc, progress=steps.follow(
                            f"smoothers: {D.method_label(est)}", "bandwidth evaluations"))
                        for est in (NadarayaWatsonRegressor(), LocalLinearRegressor()))
            models = {LLF: model, HONEST: D.local_average_model(model)}
            for s in smoothers:
                models[D.method_label(s)] = s
            with steps.step("verdict"):
                # on a subsample every method, the forest too, is cross-fitted on its rows
                verdict = D.verdict(
                    *((model.X_train_, model.y_train_) if sample is None
                      else (Xa[sample], ya[sample])),
                    forest=model if sample is None else clone(model),
                    smoothers=list(smoothers), baseline=baseline, random_state=random_state,
                    progress=steps.follow("verdict", "fits"))
            with steps.step("probe"):
                probe_report = D.probe(model, x, compare=smoothers)
                probe_table = D.probe_readout(probe_report)
            with steps.step("slice"):
                slice_report = D.slices(models, x, j, D.slice_grid(model, j))
            with steps.step("edges"):
                # edges compares models on the same rows: subsampled smoothers stay out
                edge_profile = D.edges(models if sample is None else
                                       {LLF: models[LLF], HONEST: models[HONEST]})
            with steps.step("out-of-bag"):
                oob = D.oob_summary(model)
            coverage = None
            if coverage_reps > 0:
                with steps.step("coverage"):
                    coverage = D.coverage_readout(
                        model, reps=int(coverage_reps), random_state=random_state,
                        progress=steps.follow("coverage", "replications"))
            with steps.step("figures"):
                from hedgerow.report._figures import figures

                weights = {LLF: D.weight_profile(probe_report, model.X_train_, LLF)}
                for s in smoothers:  # over the smoother's own (maybe subsampled) rows
                    name = D.method_label(s)
                    weights[name] = D.weight_profile(probe_report, s.X_train_, name)
                svgs = figures(model, columns, target, j, slice_report, probe_report,
                               edge_profile, weights)
    finally:
        steps.close()

    data = DataSummary(n_rows=int(Xa.shape[0]), n_columns=int(Xa.shape[1]),
                       columns=columns, target=target, fingerprint=data_fingerprint(Xa, ya))
    params = model.get_params()
    fitted = {
        "ridge penalty in use": model.ridge_penalty_,
        "correction columns": ", ".join(columns[c] for c in model.correction_features_),
        "trees per bag": getattr(model, "trees_per_bag_", "-"),
    }
    settings = Settings(
        estimator=type(model).__name__, parameters=params, fitted=fitted,
        seed=params.get("random_state"), feature=columns[j], feature_index=j,
        probe={c: float(v) for c, v in zip(columns, x, strict=True)},
        smoothers={D.method_label(s): dict(zip(columns, np.ravel(s.bandwidth_),
                                               strict=False))
                   for s in smoothers},
        version=__version__,
        created=_dt.datetime.now(_dt.timezone.utc).strftime("%Y-%m-%d %H:%M UTC"),
    )
    cautions = ((CAUTION_KERNEL,) if smoothers else ()) + CAUTIONS_BASE + ((
        "No coverage readout was run for this report (coverage_reps=0): the forests' "
        "intervals were not checked by simulation.",) if coverage is None else ())
    return Report(
        title=title if title is not None else f"hedgerow report: {target}",
        data=data, settings=settings, verdict=verdict, probe=probe_report,
        probe_table=probe_table, slices=slice_report, edges=edge_profile, oob=oob,
        coverage=coverage, figures=svgs, cautions=cautions, model=model,
        smoothers=smoothers, notes=notes,
    )


def comparison_sample(n, limit, random_state):
    """Return the sorted rows of the comparison subsample, or None when every row is used."""
    if limit is None or n <= limit:
        return None
    return np.sort(np.random.default_rng(random_state).choice(n, size=int(limit),
                                                              replace=False))


def subsample_note(n, m, compare) -> str:
    """Return the sentence a report shows when its comparisons ran on a subsample."""
    what = "the verdict and the kernel smoothers use" if compare else "the verdict uses"
    return (f"Large table ({n:,} rows): {what} a random {m:,} of them (the same rows for "
            f"every method), to keep the run short; the forests' probe, slice, edges and "
            f"out-of-bag numbers use every row."
            + (" The kernel smoothers, fitted on the subsample, are left out of the edges "
               "section." if compare else "")
            + " The command line's --full uses every row.")


def _take(data, rows):
    return data.iloc[rows] if isinstance(data, pd.DataFrame | pd.Series) else \
        np.asarray(data)[rows]


def save_html(path, X, y, *, model=None, feature=None, probe=None, title=None, compare=True,
              coverage_reps=0, progress=True, random_state=0, baseline=True,
              comparison_rows=None) -> Path:
    """Build the report of ``(X, y)`` and write it to ``path``; return the path.

    Parameters are those of :func:`build_report`. The file is written atomically: to a
    temporary file in the same folder, then renamed over ``path``, so a failure at any
    point (bad input, an interrupted build, a full disk) leaves an earlier file at
    ``path`` as it was.
    """
    path = _check_path(path)
    report = build_report(X, y, model=model, feature=feature, probe=probe, title=title,
                          compare=compare, coverage_reps=coverage_reps, progress=progress,
                          random_state=random_state, baseline=baseline,
                          comparison_rows=comparison_rows)
    return write_html(report, path)


def _check_path(path) -> Path:
    if not isinstance(path, str | os.PathLike):
        raise TypeError(f"The 'path' parameter must be a file path. Got {path!r} instead.")
    path = Path(path)
    if path.is_dir():
        raise ValueError(f"The 'path' parameter must be a file, not a folder. Got {str(path)!r}.")
    parent = path.parent if str(path.parent) else Path(".")
    if not parent.is_dir():
        raise ValueError(f"The folder of 'path' must exist. Got {str(path)!r}, whose folder "
                         f"{str(parent)!r} does not exist.")
    return path


def write_html(report: Report, path) -> Path:
    """Write ``report.to_html()`` to ``path`` atomically (``hedgerow._atomic``); return it.

    The page is rendered before the file is opened, so a failed render leaves an earlier
    file as it was.
    """
    path = _check_path(path)
    text = report.to_html()
    return write_text_atomic(path, lambda fh: fh.write(text), what="the report")

