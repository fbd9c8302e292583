"""The effect report: one self-contained page on a treatment-effect forest.

``build_effect_report(X, y, treatment, ...)`` fits (or takes) a ``TreatmentEffectForest``
and gathers, from the estimator's own methods and ``hedgerow.diagnostics``, the numbers a
reviewer of an effect reading needs: the doubly robust average effect overall, in the edge
band and in the interior; the overlap of the two arms; the effect at the probe with and
without the local linear correction, and along a few columns through the probe
(``diagnostics.effect_slice``); and the cautions. Its figures (``_effect_figures``) draw
those numbers and nothing else. ``EffectReport.to_html()`` renders
the page (same style, security policy and number formatter as the regression report).

The caution leads the page and closes it: an effect reading assumes unconfoundedness,
which nothing here checks, and overlap; it is decision support, not advice.
"""

from __future__ import annotations

import datetime as _dt
import warnings
from collections.abc import Mapping
from dataclasses import dataclass, field

import numpy as np

from hedgerow import diagnostics as D
from hedgerow._progress import progress_bar
from hedgerow.report._content import DataSummary
from hedgerow.report._inputs import check_flag, check_report_data, data_fingerprint, probe_input

__all__ = ["EffectReport", "EFFECT_SECTIONS", "build_effect_report", "save_effect_html",
           "EFFECT_REPORT_CAUTIONS", "EFFECT_SLICE_COLUMNS"]

#: Section ids of the effect page, in order.
EFFECT_SECTIONS = ("verdict", "average", "overlap", "probe", "effect-along", "data",
                   "settings", "cautions")

#: Cautions of every effect report, after ``EFFECT_CAUTION`` itself.
EFFECT_REPORT_CAUTIONS = (
    "Overlap is checked only as far as the propensity model sees: a propensity near 0 or "
    "1 means few comparable units in the other arm, and the effect there rests on "
    "extrapolation by the forest.",
    "The effect at the probe and its interval are for units like the probe's neighbours; "
    "they do not say what happens to a unit outside the data.",
    "Intervals come from little bags of the forest's trees and measure how much the "
    "estimate varies; they do not include the centring models' errors beyond what the "
    "out-of-bag centring absorbs, nor any confounding.",
)

#: At most this many correction columns get an effect-along-a-column figure.
EFFECT_SLICE_COLUMNS = 3

_STEPS = ("fit", "verdict", "average effect", "overlap", "probe", "effect along columns",
          "figures")


@dataclass(frozen=True)
class EffectReport:
    """Everything an effect page shows, computed once; ``to_html()`` renders it.

    Attributes
    ----------
    title : page title. data : ``DataSummary`` of (X, y). treatment : ``"binary"`` or
    ``"continuous"``. averages : part -> ``AverageEffect`` (``all``, ``edge band``,
    ``interior``; the edge band is rows with edge depth below ``D.EDGE_BAND``).
    verdict : ``diagnostics.EffectVerdict`` (cross-fitted held-out R-loss) or None.
    overlap : ``diagnostics.OverlapProfile``. probe : column -> value of the probe.
    at_probe : method -> dict(effect, lower, upper, std). slopes : column -> local slope
    of the effect at the probe. slices : column -> ``diagnostics.EffectSlice`` (the
    effect along that column, the others at the probe; the numbers its figure draws).
    oob_effects : (n,) out-of-bag corrected effects of the training rows (the figures'
    points; NaN for a row every tree drew). figures : name -> inline SVG (``"overlap"``,
    ``"effect along 0"``, ... in the order of ``slices``, and ``"verdict"`` when it ran).
    settings : estimator parameters. cautions : sentences, ``EFFECT_CAUTION`` first.
    model : the fitted forest. level : interval level.
    """

    title: str
    data: DataSummary
    treatment: str
    averages: Mapping
    verdict: object
    overlap: object
    probe: Mapping
    at_probe: Mapping
    slopes: Mapping
    slices: Mapping
    oob_effects: np.ndarray = field(repr=False)
    figures: Mapping = field(repr=False)
    settings: Mapping
    cautions: tuple
    level: float
    created: str
    version: str
    model: object = field(repr=False)

    @property
    def sections(self) -> tuple:
        """Return the ids of the sections the page shows, in order."""
        return tuple(s for s in EFFECT_SECTIONS if s != "verdict" or self.verdict is not None)

    def to_html(self) -> str:
        """Return the report as one self-contained HTML document."""
        from hedgerow.report._effect_html import render_effect

        return render_effect(self)


def _check_treatment_column(treatment, n):
    from hedgerow.estimators._effect_forest import _check_treatment

    return _check_treatment(treatment, n)


def _resolve_effect_model(model, Xa, ya, w, random_state):
    from sklearn.base import clone
    from sklearn.exceptions import NotFittedError
    from sklearn.utils.validation import check_is_fitted

    from hedgerow.estimators import TreatmentEffectForest

    if model is None:
        return TreatmentEffectForest(random_state=random_state).fit(Xa, ya, w)
    if not isinstance(model, TreatmentEffectForest):
        raise TypeError(f"The 'model' parameter must be a TreatmentEffectForest or None. "
                        f"Got {type(model).__name__} instead.")
    try:
        check_is_fitted(model)
    except NotFittedError:
        return clone(model).fit(Xa, ya, w)
    if model.X_train_.shape != Xa.shape or not np.array_equal(model.X_train_, Xa):
        raise ValueError("The 'model' parameter must be fitted on this X (or be unfitted): "
                         "its training rows differ from the rows given.")
    return model


def _check_slice_features(feature, columns):
    """Return the column indices of ``feature`` (None: decided after the fit)."""
    if feature is None:
        return None
    many = isinstance(feature, list | tuple)
    items = list(feature) if many else [feature]
    if not items or len(items) > EFFECT_SLICE_COLUMNS:
        raise ValueError(f"The 'feature' parameter must be None, a column or a list of 1 to "
                         f"{EFFECT_SLICE_COLUMNS} columns. Got {feature!r} instead.")
    out = []
    for f in items:
        if isinstance(f, str) and f in columns:
            j = columns.index(f)
        elif isinstance(f, int | np.integer) and not isinstance(f, bool) and \
                0 <= int(f) < len(columns):
            j = int(f)
        else:
            raise ValueError(f"The 'feature' parameter must name columns of X (names "
                             f"{list(columns)} or indices 0..{len(columns) - 1}). Got {f!r} "
                             f"instead.")
        if j not in out:
            out.append(j)
    return out


def slice_columns(model, chosen=None) -> list:
    """Return the columns the effect report draws the effect along.

    ``chosen`` (indices) as given; otherwise the model's correction columns, at most
    ``EFFECT_SLICE_COLUMNS`` of them (the first ones), or column 0 when the correction
    kept none.
    """
    if chosen is not None:
        return list(chosen)
    cols = [int(c) for c in np.asarray(model.correction_features_).tolist()]
    return cols[:EFFECT_SLICE_COLUMNS] if cols else [0]


def build_effect_report(X, y, treatment, *, model=None, probe=None, feature=None, title=None,
                        level=0.95, verdict=True, progress=True,
                        random_state=0) -> EffectReport:
    """Return the :class:`EffectReport` of a treatment-effect forest on ``(X, y, treatment)``.

    Parameters
    ----------
    X : DataFrame or 2-d array of numbers. y : the outcome, one value per row.
    treatment : 0/1 per row (binary) or a continuous dose.
    model : None (fit a ``TreatmentEffectForest`` with default settings and
        ``random_state``), one fitted on these rows, or an unfitted one (a clone is
        fitted; the object passed stays unfitted).
    probe : the probe point: None (column medians), a sequence of d values, a Series or a
        dict column -> value (other columns at their medians).
    feature : the column(s) the effect is drawn along, through the probe: None (the
        correction columns, at most ``EFFECT_SLICE_COLUMNS``; column 0 when the
        correction kept none), a column name or index, or a list of at most
        ``EFFECT_SLICE_COLUMNS`` of them.
    title : page title (default "hedgerow effect report: <target>").
    level : interval level of the averages and of the effect at the probe.
    verdict : run ``diagnostics.effect_verdict`` (five cross-fitted folds of at most
        ``EFFECT_FOLD_TREES`` trees) and lead the page with its sentence.
    progress : show a progress bar over the steps.

    Caution: decision support, not advice. The reading assumes unconfoundedness (no
    diagnostic here checks it) and overlap; defer to the study design and domain review.
    """
    from hedgerow import __version__
    from hedgerow._validation import check_level
    from hedgerow.estimators._effect_forest import EFFECT_CAUTION

    progress = check_flag("progress", progress)
    verdict = check_flag("verdict", verdict)
    level = check_level(level)
    if title is not None and not isinstance(title, str):
        raise TypeError(f"The 'title' parameter must be a string or None. Got {title!r} "
                        f"instead.")
    Xa, ya, columns, target, stand_in = check_report_data(X, y)
    w, binary = _check_treatment_column(treatment, Xa.shape[0])
    chosen = _check_slice_features(feature, list(columns))
    anchor = D.probe_anchor(Xa)
    x = anchor if probe is None else D.check_probe_point(
        stand_in, probe_input(probe, columns, anchor))[0]
    bar = progress_bar(len(_STEPS), "effect report", enabled=progress)
    try:
        with warnings.catch_warnings():
            warnings.filterwarnings("ignore", message="X does not have valid feature names")
            bar.set_postfix_str("fit")
            model = _resolve_effect_model(model, Xa, ya, w, random_state)
            bar.update(1)
            bar.set_postfix_str("verdict")
            held_out = (D.effect_verdict(Xa, ya, w, model=model, level=level,
                                         random_state=random_state, progress=False)
                        if verdict else None)
            bar.update(1)
            bar.set_postfix_str("average effect")
            depth = D.edge_depth(Xa)[0]
            edge = depth < D.EDGE_BAND
            averages = {"all": model.average_effect()}
            for part, mask in (("edge band", edge), ("interior", ~edge)):
                if mask.sum() >= 2:
                    averages[part] = model.average_effect(mask)
            bar.update(1)
            bar.set_postfix_str("overlap")
            overlap = D.overlap_profile(model)
            bar.update(1)
            bar.set_postfix_str("probe")
            q = x.reshape(1, -1)
            at_probe = {}
            for name, corrected in (("corrected forest", True), ("uncorrected forest", False)):
                how = D.interval_method(None, corrected)
                tau, std = model.predict_effect(q, return_std=True, corrected=corrected)
                lo, hi = model.effect_interval(q, level, how, corrected=corrected)
                at_probe[name] = {"effect": float(tau[0]), "std": float(std[0]),
                                  "lower": float(lo[0]), "upper": float(hi[0]),
                                  "interval": how}
            slopes = dict(zip(columns, map(float, model.local_slopes(q)[0]), strict=True))
            bar.update(1)
            bar.set_postfix_str("effect along columns")
            slices = {columns[j]: D.effect_slice(model, q, j, level=level)
                      for j in slice_columns(model, chosen)}
            oob_effects = np.asarray(model.oob_effect(), dtype=np.float64)
            bar.update(1)
            bar.set_postfix_str("figures")
            from hedgerow.report._effect_figures import effect_figures

            svgs = effect_figures(overlap, slices, oob_effects, model.X_train_, target,
                                  held_out)
            bar.update(1)
    finally:
        bar.close()
    data = DataSummary(n_rows=int(Xa.shape[0]), n_columns=int(Xa.shape[1]),
                       columns=columns, target=target, fingerprint=data_fingerprint(Xa, ya))
    return EffectReport(
        title=title if title is not None else f"hedgerow effect report: {target}",
        data=data, treatment="binary" if binary else "continuous", averages=averages,
        verdict=held_out, overlap=overlap,
        probe={c: float(v) for c, v in zip(columns, x, strict=True)},
        at_probe=at_probe, slopes=slopes, slices=slices, oob_effects=oob_effects,
        figures=svgs, settings=model.get_params(),
        cautions=(EFFECT_CAUTION,) + EFFECT_REPORT_CAUTIONS, level=level,
        created=_dt.datetime.now(_dt.timezone.utc).strftime("%Y-%m-%d %H:%M UTC"),
        version=__version__, model=model,
    )


def save_effect_html(path, X, y, treatment, **kwargs):
    """Build the effect report and write it to ``path`` atomically; return the path.

    Parameters are those of :func:`build_effect_report`. A failure at any point leaves an
    earlier file at ``path`` as it was.
    """
    from hedgerow.report._build import _check_path, write_html

    path = _check_path(path)
    return write_html(build_effect_report(X, y, treatment, **kwargs), path)
