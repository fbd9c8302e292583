"""A shareable, self-contained HTML report of one model review.

``build_report(X, y, ...)`` runs the diagnostics (``hedgerow.diagnostics``) and returns a
frozen :class:`Report`: the computed reports, the settings, a data fingerprint and the
figures as SVG strings. ``Report.to_html()`` renders one HTML page; ``save_html(path, ...)``
builds and writes it atomically.

Why static SVG: a reviewer's file must open anywhere and keep opening, offline and years
later, in any browser, without a kernel. Figures are drawn once with matplotlib (imported
lazily, object-oriented, no pyplot state) and inlined as SVG; the page carries no
JavaScript, fetches nothing (a Content-Security-Policy forbids it) and uses system fonts.
Saved widget state would need the widget renderer bundles shipped inside the file and
would still only show state, not recompute it.

This module formats what the diagnostics functions return; it computes no statistics.
"""

from __future__ import annotations

import datetime as _dt
import html
import io
import os
import re
import tempfile
import warnings
from collections.abc import Mapping
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pandas as pd

from hedgerow import diagnostics as D
from hedgerow._palette import METHOD_COLOURS, colour_of, dash_of
from hedgerow._progress import progress_bar
from hedgerow.diagnostics import check_probe_point

__all__ = ["DataSummary", "Report", "Settings", "build_report", "save_html", "write_html",
           "data_fingerprint",
           "MIN_ROWS", "SECTIONS", "REPORT_COLOURS"]

#: Fewest rows a report is built on: below this, held-out comparisons and edge bands
#: hold a handful of rows each and say nothing.
MIN_ROWS = 20

#: Section ids of the page, in order (``coverage`` only when a readout was run).
SECTIONS = ("verdict", "data", "settings", "probe", "slice", "edges", "neighbour-weights",
            "out-of-bag", "coverage", "cautions")

#: Method colours: the palette the interactive views use (``hedgerow._palette``).
REPORT_COLOURS = METHOD_COLOURS
#: matplotlib line styles for the palette's named dash patterns
_DASH_STYLES = {"solid": "-", "dashed": "--", "dash_dotted": "-.", "dotted": ":"}
_ROW_COLOUR = "#5b6470"
_INK = "#1b1f24"

_HONEST = "honest forest (same trees)"
_LLF = "local linear forest"


def _colour(name: str) -> str:
    return colour_of(name)


def _dash(name: str) -> str:
    return _DASH_STYLES[dash_of(name)]


# -- value objects --------------------------------------------------------------------
@dataclass(frozen=True)
class DataSummary:
    """Rows, columns, target name and a fingerprint of the data a report was built on.

    ``fingerprint``: the first 16 hex digits of the data SHA-256 a ``Snapshot`` stores
    (``hedgerow.snapshot.DataFingerprint``: over the shape and the float64 bytes of X and
    y; the names are listed beside it), so a report and a snapshot of the same data can be
    matched by eye; equal data give equal fingerprints,
    so a reviewer can tell whether two reports (or a refit) used the same table.
    """

    n_rows: int
    n_columns: int
    columns: tuple
    target: str
    fingerprint: str


@dataclass(frozen=True)
class Settings:
    """What produced the numbers: estimator, parameters, seed, sliced column, probe."""

    estimator: str
    parameters: Mapping
    fitted: Mapping  # chosen penalty, correction columns, trees per bag
    seed: object
    feature: str
    feature_index: int
    probe: Mapping  # column -> value
    smoothers: Mapping  # method -> {column: bandwidth}
    version: str
    created: str


@dataclass(frozen=True)
class Report:
    """Everything a saved report shows, computed once; ``to_html()`` renders it.

    Attributes
    ----------
    title : page title. data : :class:`DataSummary`. settings : :class:`Settings`.
    verdict : ``hedgerow.diagnostics.Verdict``. probe : ``ProbeReport`` at the probe.
    probe_table : ``probe_readout(probe)``. slices : ``SliceReport`` along the feature.
    edges : ``EdgeProfile``. oob : ``oob_summary(model)``. coverage : ``CoverageReport``
    or None. figures : name -> SVG markup (``slice``, ``edges``, ``neighbour_weights``).
    cautions : plain sentences. model : the fitted local linear forest.
    smoothers : the fitted comparison smoothers.
    """

    title: str
    data: DataSummary
    settings: Settings
    verdict: object
    probe: object
    probe_table: pd.DataFrame
    slices: object
    edges: object
    oob: Mapping
    coverage: object
    figures: Mapping
    cautions: tuple
    model: object = field(repr=False)
    smoothers: tuple = field(default=(), repr=False)

    @property
    def sections(self) -> tuple:
        """Return the ids of the sections the page shows, in order."""
        return tuple(s for s in SECTIONS if s != "coverage" or self.coverage is not None)

    def to_html(self) -> str:
        """Return the report as one self-contained HTML document."""
        return _render(self)


# -- input checks ---------------------------------------------------------------------
def _check_flag(name, value):
    if not isinstance(value, bool | np.bool_):
        raise TypeError(f"The {name!r} parameter must be True or False. Got {value!r} instead.")
    return bool(value)


def _as_arrays(X, y):
    """Return ``(X, y, columns, target)`` as float arrays and names, or raise naming X or y."""
    if isinstance(X, pd.DataFrame):
        bad = [str(c) for c in X.columns if not pd.api.types.is_numeric_dtype(X[c])]
        if bad:
            raise ValueError(f"X must hold numbers only; non-numeric columns: {bad}.")
        columns = tuple(str(c) for c in X.columns)
        Xa = X.to_numpy(dtype=np.float64)
    else:
        try:
            Xa = np.asarray(X, dtype=np.float64)
        except (TypeError, ValueError) as exc:
            raise ValueError(f"X must be a numeric table (a DataFrame or a 2-d array). "
                             f"Got {type(X).__name__} with non-numeric entries.") from exc
        if Xa.ndim != 2:
            raise ValueError(f"X must be 2-dimensional (rows, columns). Got shape "
                             f"{Xa.shape} instead.")
        columns = tuple(f"x{j}" for j in range(Xa.shape[1]))
    target = str(y.name) if isinstance(y, pd.Series) and y.name is not None else "y"
    if isinstance(y, pd.Series) and not pd.api.types.is_numeric_dtype(y):
        raise ValueError(f"y ({target!r}) must hold numbers only. Got dtype {y.dtype} "
                         f"instead.")
    try:
        ya = np.asarray(y, dtype=np.float64)
    except (TypeError, ValueError) as exc:
        raise ValueError("y must hold numbers only.") from exc
    if ya.ndim == 2 and ya.shape[1] == 1:
        ya = ya.ravel()
    if ya.ndim != 1:
        raise ValueError(f"y must be 1-dimensional (one value per row). Got shape "
                         f"{ya.shape} instead.")
    if Xa.shape[0] != ya.shape[0]:
        raise ValueError(f"y must have one value per row of X ({Xa.shape[0]} rows). "
                         f"Got {ya.shape[0]} values instead.")
    return Xa, ya, columns, target


def _check_data(X, y):
    Xa, ya, columns, target = _as_arrays(X, y)
    if Xa.shape[0] < MIN_ROWS:
        raise ValueError(f"A report needs at least {MIN_ROWS} rows. Got {Xa.shape[0]} "
                         f"instead.")
    if Xa.shape[1] < 1:
        raise ValueError("X must have at least one column. Got none.")
    for name, arr in (("X", Xa), ("y", ya)):
        if not np.all(np.isfinite(arr)):
            where = ""
            if name == "X":
                cols = [columns[j] for j in np.flatnonzero(~np.isfinite(arr).all(axis=0))]
                where = f" (columns {cols})"
            raise ValueError(f"{name} must be finite: missing or infinite values{where}. "
                             f"Drop or fill those rows first.")
    return Xa, ya, columns, target


def data_fingerprint(X, y) -> str:
    """Return the data fingerprint a report shows for ``(X, y)`` (16 hex digits).

    The first 16 hex digits of ``hedgerow.snapshot.DataFingerprint``'s SHA-256 (shape and
    float64 values of X and y): one changed value or row order changes it; the column
    and target names are shown beside it, not hashed, exactly as a snapshot keeps them.
    """
    return _fingerprint(*_as_arrays(X, y))


def _fingerprint(Xa, ya, columns, target) -> str:
    from hedgerow.snapshot import DataFingerprint

    return DataFingerprint.from_data(Xa, ya).sha256[:16]


def _is_fitted(model) -> bool:
    return hasattr(model, "forest_") or hasattr(model, "X_train_")


def _resolve_model(model, X, y, Xa, random_state, bar):
    from sklearn.base import clone

    from hedgerow.estimators import LocalLinearForestRegressor

    if model is None:
        model = LocalLinearForestRegressor(random_state=random_state)
    if not isinstance(model, LocalLinearForestRegressor):
        raise TypeError(
            f"The 'model' parameter must be a LocalLinearForestRegressor (fitted on X, y, "
            f"or unfitted) or None. Got {type(model).__name__} instead."
        )
    if _is_fitted(model):
        if model.X_train_.shape != Xa.shape or not np.array_equal(model.X_train_, Xa):
            raise ValueError(
                f"The 'model' parameter was fitted on other data ({model.X_train_.shape[0]} "
                f"rows x {model.X_train_.shape[1]} columns); pass the X and y it was fitted "
                f"on, or an unfitted model. Got X of shape {Xa.shape}."
            )
        names = getattr(model, "feature_names_in_", None)
        if names is not None and isinstance(X, pd.DataFrame) and [str(c) for c in names] != [
                str(c) for c in X.columns]:
            raise ValueError(
                f"The 'model' parameter was fitted on columns {[str(c) for c in names]}; "
                f"X has columns {[str(c) for c in X.columns]}. Pass the X it was fitted on."
            )
        return model
    total = max(int(model.n_estimators), 1)
    step = max(total // 20, 1)
    seen = [0]

    def on_trees(done):  # show tree growth inside the 'fit' step
        if done - seen[0] >= step or done >= total:
            seen[0] = done
            bar.set_postfix_str(f"fit: {done}/{total} trees")

    # a clone, so that the caller's unfitted object stays as it was
    return clone(model).fit(X, y, progress=on_trees)


class _Columns:
    """Stands in for a fitted model where only the column names matter (early checks)."""

    def __init__(self, columns, named):
        self.n_features_in_ = len(columns)
        self.feature_names_in_ = np.asarray(columns, dtype=object) if named else None


def _probe_input(probe, columns, anchor):
    """Return ``probe`` in a form ``check_probe_point`` takes (a dict becomes a Series)."""
    if isinstance(probe, Mapping):
        unknown = [k for k in probe if str(k) not in columns]
        if unknown:
            raise ValueError(f"The 'probe' parameter names unknown columns {unknown}; "
                             f"known columns are {list(columns)}.")
        base = pd.Series(anchor, index=list(columns))
        for k, v in probe.items():
            base[str(k)] = v
        return base
    if isinstance(probe, pd.Series):
        return probe.rename(index=str)
    return probe


# -- building -------------------------------------------------------------------------
_STEPS = ("fit", "smoothers", "verdict", "probe", "slice", "edges", "out-of-bag",
          "coverage", "figures")

CAUTION_KERNEL = (
    "Intervals of the kernel smoothers (Nadaraya-Watson, local linear) ignore smoothing "
    "bias: they measure how much the smoothed curve varies, not how far it sits from the "
    "truth, so they are too narrow where the curve bends and near the edges of the data.")
CAUTIONS_BASE = (
    "Observational data: every number here is a predictive diagnostic, how well each method "
    "predicts rows it did not see. A slice or a local slope is not a causal effect; setting "
    "a column to a new value in the world need not move the response the way the slice "
    "does.",
    "The slice holds every other column at the probe. The grey points behind it are the "
    "rows at their own values of those columns, shown for where the data lie, not as a fit "
    "target.",
    "Held-out errors are out-of-bag (forests) and leave-one-out (kernel smoothers) errors "
    "of the training rows, not errors on a fresh test set.",
)


def build_report(X, y, *, model=None, feature=None, probe=None, title=None, compare=True,
                 coverage_reps=0, progress=True, random_state=0) -> Report:
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
    random_state : seed of the default model, the scikit-learn baseline and the coverage
        readout.
    """
    from hedgerow import __version__

    compare = _check_flag("compare", compare)
    progress = _check_flag("progress", progress)
    if (isinstance(coverage_reps, bool) or not isinstance(coverage_reps, int | np.integer)
            or coverage_reps < 0):
        raise ValueError(f"The 'coverage_reps' parameter must be an integer >= 0. "
                         f"Got {coverage_reps!r} instead.")
    if title is not None and not isinstance(title, str):
        raise TypeError(f"The 'title' parameter must be a string or None. Got {title!r} "
                        f"instead.")
    Xa, ya, columns, target = _check_data(X, y)
    # feature and probe are checked before anything is fitted
    stand_in = _Columns(columns, isinstance(X, pd.DataFrame))
    if feature is not None:
        D.resolve_feature(stand_in, feature)
    if probe is not None:
        check_probe_point(stand_in, _probe_input(probe, columns, np.median(Xa, axis=0)))
    steps = [s for s in _STEPS if (s != "smoothers" or compare)
             and (s != "coverage" or coverage_reps > 0)]
    bar = progress_bar(len(steps), "hedgerow report", progress)

    def step(name):
        bar.set_postfix_str(name)

    try:
        with warnings.catch_warnings():
            # numpy probes against a DataFrame-fitted model: harmless, and noisy
            warnings.filterwarnings("ignore", message="X does not have valid feature names")
            step("fit")
            model = _resolve_model(model, X, y, Xa, random_state, bar)
            j = D.resolve_feature(model, int(model.correction_features_[0])
                                  if feature is None else feature)
            x = (D.probe_anchor(model.X_train_) if probe is None else check_probe_point(
                model, _probe_input(probe, columns, D.probe_anchor(model.X_train_)))[0])
            bar.update(1)
            smoothers = ()
            if compare:
                from hedgerow.estimators import LocalLinearRegressor, NadarayaWatsonRegressor

                step("smoothers")
                smoothers = (NadarayaWatsonRegressor().fit(X, y),
                             LocalLinearRegressor().fit(X, y))
                bar.update(1)
            models = {_LLF: model, _HONEST: D.local_average_model(model)}
            for s in smoothers:
                models[D.method_label(s)] = s
            step("verdict")
            verdict = D.verdict(model.X_train_, model.y_train_, forest=model,
                                smoothers=list(smoothers), baseline=True,
                                random_state=random_state, progress=False)
            bar.update(1)
            step("probe")
            probe_report = D.probe(model, x, compare=smoothers)
            probe_table = D.probe_readout(probe_report)
            bar.update(1)
            step("slice")
            grid = D.slice_grid(model, j)
            slice_report = D.slices(models, x, j, grid)
            bar.update(1)
            step("edges")
            edge_profile = D.edges(models)
            bar.update(1)
            step("out-of-bag")
            oob = D.oob_summary(model)
            bar.update(1)
            coverage = None
            if coverage_reps > 0:
                step("coverage")
                coverage = D.coverage_readout(model, reps=int(coverage_reps),
                                              progress=progress, random_state=random_state)
                bar.update(1)
            step("figures")
            weights = {_LLF: D.weight_profile(probe_report, model.X_train_, _LLF)}
            for s in smoothers:
                name = D.method_label(s)
                weights[name] = D.weight_profile(probe_report, model.X_train_, name)
            figures = _figures(model, columns, target, j, slice_report, probe_report,
                               edge_profile, weights)
            bar.update(1)
    finally:
        bar.close()

    data = DataSummary(n_rows=int(Xa.shape[0]), n_columns=int(Xa.shape[1]),
                       columns=columns, target=target,
                       fingerprint=_fingerprint(Xa, ya, columns, target))
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
        coverage=coverage, figures=figures, cautions=cautions, model=model,
        smoothers=tuple(smoothers),
    )


def save_html(path, X, y, *, model=None, feature=None, probe=None, title=None, compare=True,
              coverage_reps=0, progress=True, random_state=0) -> Path:
    """Build the report of ``(X, y)`` and write it to ``path``; return the path.

    Parameters are those of :func:`build_report`. The file is written atomically: to a
    temporary file in the same folder, then renamed over ``path``, so a failure at any
    point (bad input, an interrupted build, a full disk) leaves an earlier file at
    ``path`` as it was.
    """
    path = _check_path(path)
    report = build_report(X, y, model=model, feature=feature, probe=probe, title=title,
                          compare=compare, coverage_reps=coverage_reps, progress=progress,
                          random_state=random_state)
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
    """Write ``report.to_html()`` to ``path`` atomically; return the path."""
    path = _check_path(path)
    text = report.to_html()
    mode = (path.stat().st_mode & 0o777) if path.exists() else 0o644
    fd, tmp = tempfile.mkstemp(prefix=f".{path.name}.", suffix=".tmp",
                               dir=path.parent if str(path.parent) else ".")
    try:
        with os.fdopen(fd, "w", encoding="utf-8", newline="\n") as fh:
            fh.write(text)
            fh.flush()
            os.fsync(fh.fileno())
        os.chmod(tmp, mode)
        os.replace(tmp, path)
    except BaseException:
        try:
            os.unlink(tmp)
        except FileNotFoundError:
            pass
        raise
    return path


# -- figures --------------------------------------------------------------------------
def _mpl(text) -> str:
    """Return ``text`` safe for a matplotlib label ('$' would start mathtext)."""
    return str(text).replace("$", r"\$")


_ID = re.compile(r'\bid="([^"]+)"')
_REF = re.compile(r'(\bid="|url\(#|href="#)([^")]+)(?=[")])')


def _svg(fig, prefix: str, title: str) -> str:
    """Return the figure as inline SVG markup: no prolog, no metadata, ids prefixed.

    Several figures share one page, so every id (and every reference to it) gets the
    figure's prefix; namespace declarations and the DTD line are not needed inline.
    """
    buf = io.StringIO()
    fig.savefig(buf, format="svg", metadata={"Date": None, "Creator": None,
                                             "Format": None, "Type": None})
    s = buf.getvalue()
    s = s[s.index("<svg"):]
    s = re.sub(r"<metadata>.*?</metadata>\s*", "", s, flags=re.S)
    s = re.sub(r'\s+xmlns(:\w+)?="[^"]*"', "", s)
    ids = set(_ID.findall(s))
    s = _REF.sub(lambda m: f"{m[1]}{prefix}-{m[2]}" if m[2] in ids else m[0], s)
    # the page's CSS sizes the figure; the viewBox keeps its aspect ratio
    s = re.sub(r'^<svg([^>]*?)\swidth="[^"]*"\s+height="[^"]*"', r"<svg\1", s, count=1)
    head = s.index(">") + 1
    return (f'<svg class="hr-figure" role="img" aria-labelledby="{prefix}-title"'
            f"{s[4:head]}<title id=\"{prefix}-title\">{_e(title)}</title>{s[head:]}")


def _figures(model, columns, target, j, slice_report, probe_report, edge_profile, weights):
    import matplotlib
    from matplotlib.figure import Figure

    rc = {"svg.fonttype": "none", "svg.hashsalt": "hedgerow-report", "font.size": 9,
          "font.family": ["sans-serif"], "axes.edgecolor": "#8a929c",
          "axes.labelcolor": _INK, "xtick.color": "#4a525c", "ytick.color": "#4a525c",
          "axes.spines.top": False, "axes.spines.right": False, "legend.frameon": False,
          "path.simplify": True}
    with matplotlib.rc_context(rc):
        return {
            "slice": _svg(_slice_figure(Figure, model, columns, target, j, slice_report,
                                        probe_report), "fig-slice",
                          f"predictions along {columns[j]}"),
            "edges": _svg(_edges_figure(Figure, target, edge_profile), "fig-edges",
                          "held-out residuals against edge depth"),
            "neighbour_weights": _svg(_weights_figure(Figure, probe_report, weights),
                                      "fig-weights", "neighbour weights at the probe"),
        }


def _slice_figure(Figure, model, columns, target, j, sl, pr):
    fig = Figure(figsize=(7.2, 4.0), layout="constrained")
    ax = fig.add_subplot()
    ax.scatter(model.X_train_[:, j], model.y_train_, s=6, color=_ROW_COLOUR, alpha=0.18,
               linewidths=0, label="rows (other columns at their own values)")
    for name in sl.frame["method"].unique():
        part = sl.method(name)
        c = _colour(name)
        if name == _LLF:
            ax.fill_between(part["value"], part["lower"], part["upper"], color=c,
                            alpha=0.18, linewidth=0,
                            label=f"{name}: {100 * sl.level:.0f}% band")
            ax.plot(part["value"], part["prediction"], color=c, lw=2.0, label=name)
        elif name.startswith("honest forest"):
            ax.plot(part["value"], part["prediction"], color=c, lw=1.5,
                    drawstyle="steps-mid", label=f"{name}: steps")
        else:
            ax.plot(part["value"], part["prediction"], color=c, lw=1.5, ls=_dash(name),
                    label=name)
    xs, ys = D.local_line(pr, j, span=0.08 * float(np.ptp(sl.frame["value"]) or 1.0))
    ax.plot(xs, ys, color=_INK, lw=2.5, solid_capstyle="round", label="local line at probe")
    ax.axvline(sl.x[j], color=_INK, lw=0.8, ls=":")
    ax.plot([sl.x[j]], [pr.method(_LLF).prediction], "o", color=_INK, ms=4)
    ax.set_xlabel(_mpl(columns[j]))
    ax.set_ylabel(_mpl(target))
    ax.set_title(_mpl(f"prediction along {columns[j]}, other columns at the probe"),
                 loc="left", fontsize=10)
    ax.legend(loc="upper left", bbox_to_anchor=(1.01, 1.0), fontsize=8)
    return fig


def _edges_figure(Figure, target, ep):
    names = list(ep.residuals.columns)
    fig = Figure(figsize=(7.2, 1.2 + 1.45 * len(names)), layout="constrained")
    axes = fig.subplots(len(names), 1, sharex=True, sharey=True, squeeze=False)[:, 0]
    edges = D.DEPTH_BANDS
    for ax, name in zip(axes, names, strict=True):
        c = _colour(name)
        r = ep.residuals[name].to_numpy()
        ok = np.isfinite(r)
        ax.scatter(ep.depth[ok], r[ok], s=5, color=c, alpha=0.35, linewidths=0)
        ax.axhline(0.0, color="#8a929c", lw=0.8)
        for b in edges[1:-1]:
            ax.axvline(b, color="#c3c8ce", lw=0.8, ls=":")
        bands = ep.bands[ep.bands["method"] == name].reset_index(drop=True)
        for b, row in bands.iterrows():
            lo, hi = edges[b], min(edges[b + 1], 0.5)
            if np.isfinite(row["mean_residual"]):
                ax.plot([lo, hi], [row["mean_residual"]] * 2, color=_INK, lw=2.0)
            if np.isfinite(row["lower"]) and np.isfinite(row["upper"]):
                mid = (lo + hi) / 2
                ax.plot([mid, mid], [row["lower"], row["upper"]], color=_INK, lw=1.0)
        bend = ep.bend[ep.bend["method"] == name]
        note = (f"  (inward-bend score {bend['bend'].iloc[0]:.3g})"
                if len(bend) and np.isfinite(bend["bend"].iloc[0]) else "")
        ax.set_title(_mpl(name + note), loc="left", fontsize=9, color=c)
        ax.set_ylabel("residual")
    axes[-1].set_xlabel("edge depth (share of the data beyond the row; 0 = at the edge)")
    axes[-1].set_xlim(0.0, 0.5)
    fig.suptitle(_mpl(f"held-out residuals of {target} against edge depth; bars: band mean "
                      f"and 95% interval"), x=0.01, ha="left", fontsize=10)
    return fig


def _weights_figure(Figure, pr, weights):
    fig = Figure(figsize=(7.2, 3.2), layout="constrained")
    a, b = fig.subplots(1, 2)
    for name, prof in weights.items():
        c = _colour(name)
        label = name if name != _LLF else "forest weights"
        ess = pr.method(name).ess
        a.scatter(prof["distance"], prof["weight"], s=8, color=c, alpha=0.6, linewidths=0,
                  label=_mpl(f"{label} (effective n {ess:.0f})"))
        b.plot(prof["rank"], prof["cumulative"], color=c, lw=1.6, ls=_dash(name),
               drawstyle="steps-post", label=_mpl(label))
    a.set_xlabel("distance from the probe (training s.d.)")
    a.set_ylabel("weight")
    a.set_title("who the probe listens to", loc="left", fontsize=10)
    a.legend(fontsize=7.5, loc="best")
    b.set_xscale("log")
    b.set_ylim(0.0, 1.02)
    b.set_xlabel("rows, heaviest first")
    b.set_ylabel("share of the weight")
    b.set_title("how concentrated the weights are", loc="left", fontsize=10)
    return fig


# -- HTML -----------------------------------------------------------------------------
_CSS = """
:root{--ink:#1b1f24;--muted:#5a6370;--rule:#d9dde2;--band:#f4f6f8;--accent:#1d5fa8}
*{box-sizing:border-box}
body{margin:0;color:var(--ink);background:#fff;
 font:15px/1.5 system-ui,-apple-system,"Segoe UI",Roboto,"Helvetica Neue",Arial,sans-serif}
main{max-width:62rem;margin:0 auto;padding:1.5rem 1.25rem 3rem}
h1{font-size:1.6rem;margin:0 0 .25rem}
h2{font-size:1.15rem;margin:2.2rem 0 .6rem;padding-bottom:.2rem;
 border-bottom:2px solid var(--rule)}
h3{font-size:1rem;margin:1.2rem 0 .4rem}
p{margin:.4rem 0}
.hr-meta{color:var(--muted);font-size:.9rem}
nav ol{display:flex;flex-wrap:wrap;gap:.2rem 1rem;list-style:none;padding:0;margin:.8rem 0 0}
nav a{color:var(--accent);text-decoration:none;font-size:.9rem}
table{border-collapse:collapse;margin:.4rem 0 .8rem;font-size:.88rem;
 font-variant-numeric:tabular-nums}
th,td{padding:.25rem .6rem;border-bottom:1px solid var(--rule);text-align:right;
 vertical-align:top}
.hr-grid{display:flex;flex-wrap:wrap;gap:0 2.2rem;align-items:flex-start}
th{background:var(--band);font-weight:600}
th:first-child,td:first-child{text-align:left}
td.hr-text{text-align:left}
.hr-wrap{overflow-x:auto}
.hr-conclusion{font-size:1.08rem;padding:.7rem .9rem;background:var(--band);
 border-left:4px solid var(--accent);margin:.6rem 0}
.hr-swatch{display:inline-block;width:.8em;height:.8em;margin-right:.4em;
 vertical-align:-.05em;border-radius:2px}
figure{margin:.6rem 0 1rem}
svg.hr-figure{display:block;width:100%;height:auto;max-width:52rem}
figcaption{color:var(--muted);font-size:.88rem;margin-top:.3rem}
.hr-cautions li{margin:.35rem 0}
code{font-size:.88em;background:var(--band);padding:0 .2em;border-radius:3px}
@media print{nav{display:none}h2{break-after:avoid}figure,table{break-inside:avoid}}
"""

_CSP = ("default-src 'none'; style-src 'unsafe-inline'; img-src data:; "
        "base-uri 'none'; form-action 'none'")

_HEADINGS = {
    "data": "Data", "settings": "Settings", "verdict": "Verdict",
    "probe": "At the probe", "slice": "Slice", "edges": "Edges",
    "neighbour-weights": "Neighbour weights", "out-of-bag": "Out-of-bag summary",
    "coverage": "Coverage readout", "cautions": "Cautions",
}


def _e(v) -> str:
    return html.escape(str(v), quote=True)


def _num(v, digits=4) -> str:
    """Return a number for display ('-' when missing)."""
    if isinstance(v, bool | np.bool_):
        return str(bool(v))
    if isinstance(v, int | np.integer):
        return str(int(v))
    try:
        f = float(v)
    except (TypeError, ValueError):
        return _e(v)
    return f"{f:.{digits}g}" if np.isfinite(f) else "-"


def _pct(v) -> str:
    try:
        f = float(v)
    except (TypeError, ValueError):
        return "-"
    return f"{100 * f:+.1f}%" if np.isfinite(f) else "-"


def _method_cell(name) -> str:
    return (f'<span class="hr-swatch" style="background:{_colour(name)}"></span>'
            f"{_e(name)}")


def _table(header, rows, cls=None) -> str:
    """Return an HTML table; cells are pre-rendered HTML, header cells plain text."""
    head = "".join(f"<th scope='col'>{_e(h)}</th>" for h in header)
    body = "".join("<tr>" + "".join(f"<td>{c}</td>" for c in r) + "</tr>" for r in rows)
    attr = f' class="{cls}"' if cls else ""
    return (f'<div class="hr-wrap"><table{attr}><thead><tr>{head}</tr></thead>'
            f"<tbody>{body}</tbody></table></div>")


def _kv_table(pairs) -> str:
    rows = "".join(f"<tr><th scope='row'>{_e(k)}</th><td class='hr-text'>{v}</td></tr>"
                   for k, v in pairs)
    return f'<div class="hr-wrap"><table><tbody>{rows}</tbody></table></div>'


def _section(sid, body) -> str:
    return f'<section id="{sid}"><h2>{_e(_HEADINGS[sid])}</h2>{body}</section>'


def _figure(svg, caption) -> str:
    return f"<figure>{svg}<figcaption>{_e(caption)}</figcaption></figure>"


def _data_html(r: Report) -> str:
    d = r.data
    return _kv_table([
        ("rows", _num(d.n_rows)), ("columns", _num(d.n_columns)),
        ("target", _e(d.target)),
        ("column names", ", ".join(f"<code>{_e(c)}</code>" for c in d.columns)),
        ("data fingerprint", f"<code>{_e(d.fingerprint)}</code>"),
    ]) + ("<p class='hr-meta'>The fingerprint is a hash of the shape and every value (the "
          "first 16 digits of the SHA-256 a snapshot of the same data stores): a report "
          "built on the same table shows the same fingerprint.</p>")


def _block(heading, table) -> str:
    return f"<div><h3>{_e(heading)}</h3>{table}</div>"


def _settings_html(r: Report) -> str:
    s = r.settings
    blocks = [
        _block("Model", _kv_table([
            ("estimator", f"<code>{_e(s.estimator)}</code>"),
            ("seed", _e(s.seed)),
            ("sliced column", f"<code>{_e(s.feature)}</code>"),
            ("hedgerow version", _e(s.version)),
        ])),
        _block("Estimator parameters", _table(
            ["parameter", "value"], [[_e(k), _e(v)] for k, v in sorted(s.parameters.items())])),
        _block("Chosen when fitting", _table(
            ["quantity", "value"], [[_e(k), _num(v) if not isinstance(v, str) else _e(v)]
                                    for k, v in s.fitted.items()])),
        _block("Probe point", _table(
            ["column", "value"], [[_e(c), _num(v)] for c, v in s.probe.items()])),
    ]
    out = f'<div class="hr-grid">{"".join(blocks)}</div>'
    if s.smoothers:
        cols = list(s.probe)
        out += _block("Kernel smoothers: bandwidths (column units, by cross-validation)",
                      _table(["method", *cols],
                             [[_method_cell(m), *(_num(bw.get(c)) for c in cols)]
                              for m, bw in s.smoothers.items()]))
    return out


def _sklearn_note(v) -> str:
    s = (v.settings or {}).get("random forest (scikit-learn)")
    return f" The scikit-learn forest: {_e(s)}." if s else ""


def _verdict_html(r: Report) -> str:
    v = r.verdict
    lvl = f"{100 * v.level:.0f}%"
    rows = []
    for name, row in v.comparisons.iterrows():
        cells = [_method_cell(name)]
        for part in ("all", "edge", "interior"):
            cells.append(f"{_pct(row[f'gain_{part}'])}<br><small>{_pct(row[f'lower_{part}'])}"
                         f" to {_pct(row[f'upper_{part}'])}</small>")
        rows.append(cells)
    return (f'<p class="hr-conclusion" id="verdict-conclusion">{_e(v.conclusion)}</p>'
            f"<p>Share of each method's held-out squared error the local linear forest "
            f"removes (negative: worse), paired row by row on the same rows, with {lvl} "
            f"intervals; scored by {_e(v.scoring)}. The diagnostic row is the local average "
            f"on the local linear forest's own trees (split for the correction, so a "
            f"handicapped plain forest). Edge band: rows with edge depth below "
            f"{D.EDGE_BAND:.2f}.{_sklearn_note(v)}</p>"
            + _table(["against", "all rows", "edge band", "interior"], rows, "hr-verdict"))


def _probe_html(r: Report) -> str:
    p, t = r.probe, r.probe_table
    lvl = f"{100 * p.level:.0f}%"
    rows = [[_method_cell(name), _num(row["prediction"]), _num(row["lower"]),
             _num(row["upper"]), _num(row["half_width"]), _num(row["ess"], 3)]
            for name, row in t.iterrows()]
    out = [f"<p>Each method's prediction at the probe with its {lvl} interval. Effective "
           f"n: Kish's effective number of rows behind the prediction. The forest's top "
           f"{D.TOP_ROWS} rows hold {100 * p.top_share:.0f}% of its weight.</p>",
           _table(["method", "prediction", "lower", "upper", "half-width", "effective n"],
                  rows, "hr-probe")]
    nb = p.neighbourhood_frame()
    out.append("<h3>The forest's neighbourhood of the probe</h3><p>Offset: weighted mean of "
               "(row - probe) per column in training standard deviations. Near 0 the "
               "neighbours sit on both sides; far from 0 they are lopsided, as at an edge.</p>")
    out.append(_table(["column", "probe", "offset (s.d.)", "spread (s.d.)"],
                      [[_e(c), _num(row["probe"]), _num(row["neighbour_offset_sd"], 3),
                        _num(row["neighbour_spread_sd"], 3)] for c, row in nb.iterrows()]))
    return "".join(out)


def _slice_html(r: Report) -> str:
    s = r.slices
    lvl = f"{100 * s.level:.0f}%"
    return _figure(r.figures["slice"], (
        f"Predictions along {s.feature} with every other column held at the probe: the local "
        f"linear forest with its {lvl} band, the honest forest's steps on the same trees"
        + (", and the kernel smoothers" if r.smoothers else "")
        + ". The black segment is the local line at the probe (dotted vertical line)."))


def _edges_html(r: Report) -> str:
    ep = r.edges
    rows = [[_method_cell(row["method"]), _e(row["band"]), _num(row["n"]),
             _num(row["mean_residual"]), f"{_num(row['lower'])} to {_num(row['upper'])}",
             _num(row["rmse"])] for _, row in ep.bands.iterrows()]
    out = ["<p>Held-out residuals (target minus held-out prediction) by edge depth band. "
           "Edge depth of a row: the share of the data beyond it in the nearer direction, "
           "over the correction columns (0 = at the edge, 0.5 = the middle).</p>",
           _table(["method", "edge depth band", "rows", "mean residual", "95% interval",
                   "RMSE"], rows, "hr-edges")]
    if len(ep.bend):
        out.append("<h3>Inward-bend score (outer 10%)</h3><p>Mean of residual x side x "
                   "sign(local slope) over the edge band: positive means the predictions "
                   "bend toward the interior at the edges, a forest's edge bias.</p>")
        out.append(_table(["method", "score", "95% interval", "rows"],
                          [[_method_cell(row["method"]), _num(row["bend"]),
                            f"{_num(row['lower'])} to {_num(row['upper'])}", _num(row["n"])]
                           for _, row in ep.bend.iterrows()], "hr-bend"))
    out.append(_figure(r.figures["edges"], "Held-out residuals against edge depth, one panel "
                       "per method; black bars: band mean and its 95% interval."))
    return "".join(out)


def _weights_html(r: Report) -> str:
    kernel = [D.method_label(s) for s in r.smoothers]
    cap = ("The training rows the probe's prediction draws on: the forest's weights"
           + (f" against the kernel weights of {', '.join(kernel)}" if kernel else "")
           + ". Left: each row's weight against its distance from the probe; right: the "
           "share of the weight held by the heaviest rows.")
    return _figure(r.figures["neighbour_weights"], cap)


def _oob_html(r: Report) -> str:
    o = r.oob
    return ("<p>The local linear forest on its own out-of-bag rows (trees that did not draw "
            "a row predict it).</p>" + _kv_table([
                ("ridge penalty", _num(o["ridge_penalty"])),
                ("out-of-bag RMSE", _num(o["oob_rmse"])),
                (f"mean {100 * o['level']:.0f}% interval width "
                 f"({o.get('interval', 'clt').replace('_', ' ')})", _num(o["mean_width"])),
                ("rows with an out-of-bag prediction", _num(o["n_rows"])),
            ]))


def _coverage_html(r: Report) -> str:
    c = r.coverage
    rows = [[_method_cell(row["method"]), _e(str(row.get("interval", ""))), _e(row["part"]),
             _num(row["covered"]), _num(row["n"]), _num(row["coverage"]),
             f"{_num(row['lower'])} to {_num(row['upper'])}", _num(row["mean_width"]),
             _e(str(row.get("flag", "")))]
            for _, row in c.frame.iterrows()]
    note = (f"{c.mode}; {c.reps_done} of {c.reps} replications; nominal "
            f"{100 * c.level:.0f}%.")
    return (f"<p>Share of simulated intervals that cover the mean ({_e(note)}) with a "
            f"Clopper-Pearson 95% interval of that share.</p>"
            + _table(["method", "interval", "part", "covered", "intervals", "coverage",
                      "95% interval", "mean width", "flag"], rows, "hr-coverage"))


def _cautions_html(r: Report) -> str:
    return ('<ul class="hr-cautions">' + "".join(f"<li>{_e(c)}</li>" for c in r.cautions)
            + "</ul>")


_BODIES = {
    "data": _data_html, "settings": _settings_html, "verdict": _verdict_html,
    "probe": _probe_html, "slice": _slice_html, "edges": _edges_html,
    "neighbour-weights": _weights_html, "out-of-bag": _oob_html,
    "coverage": _coverage_html, "cautions": _cautions_html,
}


def _render(r: Report) -> str:
    nav = "".join(f'<li><a href="#{s}">{_e(_HEADINGS[s])}</a></li>' for s in r.sections)
    body = "".join(_section(s, _BODIES[s](r)) for s in r.sections)
    return (
        "<!DOCTYPE html>\n<html lang=\"en\"><head><meta charset=\"utf-8\">"
        f'<meta http-equiv="Content-Security-Policy" content="{_CSP}">'
        '<meta name="viewport" content="width=device-width, initial-scale=1">'
        f'<meta name="generator" content="hedgerow {_e(r.settings.version)}">'
        f"<title>{_e(r.title)}</title><style>{_CSS}</style></head>\n<body><main>"
        f"<header><h1>{_e(r.title)}</h1><p class='hr-meta'>{_e(r.data.n_rows)} rows, "
        f"{_e(r.data.n_columns)} columns, target <code>{_e(r.data.target)}</code>; data "
        f"fingerprint <code>{_e(r.data.fingerprint)}</code>; made {_e(r.settings.created)} "
        f"by hedgerow {_e(r.settings.version)}. A static page: it opens offline and "
        f"computes nothing.</p><nav aria-label='sections'><ol>{nav}</ol></nav></header>"
        f"{body}</main></body></html>\n"
    )
