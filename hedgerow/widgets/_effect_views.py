"""The effect explorer's views: effect probe, overlap and the held-out effect verdict.

Each view renders what its ``EffectSession`` returns from ``hedgerow.diagnostics``; none
computes a statistic. Every view shows the effect caution at its top.
"""

from __future__ import annotations

import contextlib
import html
import logging

import bqplot as bq
import ipywidgets as W
import numpy as np
import traitlets as t

from hedgerow._palette import ARM_COLOURS, EFFECT_COLOURS
from hedgerow.widgets._base import ProbeDrag, clamped, held, plain_figure
from hedgerow.widgets._style import (
    CSS,
    PROBE_COLOUR,
    ROW_COLOUR,
    axis_top,
    fmt,
    marker_scaling,
)

__all__ = ["EffectProbeView", "OverlapView", "EffectVerdictView", "EffectExplorer",
           "EFFECT_TAB_TITLES", "caution_html"]

EFFECT_TAB_TITLES = ("effect probe", "overlap", "effect verdict", "effect slices",
                     "effect edges", "effect coverage")
EFFECT_COLOUR = EFFECT_COLOURS["corrected forest"]

log = logging.getLogger("hedgerow.widgets")


def caution_html(caution) -> str:
    """Return the caution box every effect view shows at its top."""
    return ("<div class='hedgerow-effect-caution' style='border-left:4px solid #8b5a00;"
            "background:#fbf6ec;padding:4px 8px;margin:2px 0 6px'><small><b>Caution.</b> "
            f"{html.escape(caution)}</small></div>")


class _EffectView(W.VBox):
    def __init__(self, session, **kwargs):
        super().__init__(**kwargs)
        self._session = session
        from hedgerow.estimators._effect_forest import EFFECT_CAUTION

        self.caution = W.HTML(caution_html(EFFECT_CAUTION))
        self.error_html = W.HTML()
        self.error_html.add_class(CSS.error)  # the browser test looks for its text

    def figure_slot(self, figure):
        """Return an empty box that ``on_shown`` fills with ``figure``.

        A bqplot figure first laid out inside a hidden tab has no size: it drew
        negative-size rectangles (console errors) and bars of no height. Put in when its
        tab is first opened, it is laid out at its real size.
        """
        slot = W.Box(layout=W.Layout(width="100%"))
        self._figure_slots = (*self._figure_slots, (slot, figure))
        return slot

    _figure_slots = ()

    def on_shown(self):
        """The explorer opened this view's tab: put its figures in their slots."""
        for slot, figure in self._figure_slots:
            if not slot.children:
                slot.children = [figure]

    def _show_error(self, what, exc):
        self.error_html.value = (f"<div style='color:#8b1a1a'>{html.escape(what)} failed: "
                                 f"{html.escape(type(exc).__name__)}: "
                                 f"{html.escape(str(exc))}</div>")

    @contextlib.contextmanager
    def _shown_errors(self, what):
        """Catch an exception of a front-end callback: log it and show it in the view."""
        try:
            yield
        except Exception as exc:
            log.exception("%s failed", what)
            self._show_error(what, exc)


class EffectProbeView(ProbeDrag, _EffectView):
    """Sliders or a drag of the diamond move the probe; the readout and figure follow.

    While the diamond is dragged along the x-axis only the neighbours and the local effect
    line follow it (``sketch_probe``, from ``EffectSession.probe_sketch``); the interval,
    readout, overlap note and sliders follow on release (``move_probe``).
    """

    sketch_x = t.Float(None, allow_none=True,
                       help="Where the dragged probe's neighbours and line are drawn (None: "
                            "the figure shows the session's probe).")

    def __init__(self, session, **kwargs):
        super().__init__(session, **kwargs)
        s = session
        X = s.model.X_train_
        self.column_select = W.Dropdown(options=[(c, j) for j, c in enumerate(s.columns)],
                                        value=s.feature, description="column")
        self.sliders = []
        for j, c in enumerate(s.columns):
            lo, hi = float(X[:, j].min()), float(X[:, j].max())
            step = (hi - lo) / 200 if hi > lo else 0.01
            sl = W.FloatSlider(value=float(s.probe[j]), min=lo, max=hi, step=step,
                               description=str(c), continuous_update=False,
                               readout_format=".3g")
            sl.observe(self._on_slider, names="value")
            sl.add_class("hedgerow-effect-slider")
            self.sliders.append(sl)
        self.column_select.observe(self._on_column, names="value")
        xs, ys = bq.LinearScale(), bq.LinearScale()
        self.rows_mark = bq.Scatter(x=[0.0], y=[0.0], scales={"x": xs, "y": ys},
                                    colors=[ROW_COLOUR], default_size=8, opacities=[0.3])
        self.neighbour_mark = bq.Scatter(x=[0.0], y=[0.0], scales={"x": xs, "y": ys},
                                         colors=[EFFECT_COLOUR], default_size=24)
        self.line_mark = bq.Lines(x=[0.0, 1.0], y=[0.0, 0.0], scales={"x": xs, "y": ys},
                                  colors=["#111111"], stroke_width=2.5)
        self.interval_mark = bq.Lines(x=[0.0, 0.0], y=[0.0, 0.0], scales={"x": xs, "y": ys},
                                      colors=[PROBE_COLOUR], stroke_width=2)
        self.probe_mark = bq.Scatter(x=[0.0], y=[0.0], scales={"x": xs, "y": ys},
                                     colors=[PROBE_COLOUR], marker="diamond", default_size=90,
                                     enable_move=True, restrict_x=True,
                                     tooltip=bq.Tooltip(fields=["x"], formats=[".3g"]))
        self.probe_mark.on_drag(self._on_probe_dragged)
        self.probe_mark.on_drag_end(self._on_probe_moved)
        self.figure = plain_figure(  # probe last: the last path.dot in the DOM
            [self.rows_mark, self.neighbour_mark, self.line_mark, self.interval_mark,
             self.probe_mark], xs, ys, str(s.columns[s.feature]), "effect", height="300px")
        self.figure.add_class("hedgerow-effect-probe-figure")
        self.readout_html = W.HTML()
        self.readout_html.add_class("hedgerow-effect-probe-readout")
        self.overlap_html = W.HTML()
        self.children = [
            W.HTML("<b>effect probe</b> <small>grey: out-of-bag effect of each training row; "
                   "blue: the probe's forest neighbours (darker: more weight); black: the local "
                   "effect line; diamond: the corrected effect at the probe with its "
                   "interval (drag it along the x-axis)</small>"),
            self.caution, self.error_html, self.column_select,
            W.HBox([self.figure, W.VBox(self.sliders)]), self.readout_html,
            self.overlap_html]
        s.observe(self._on_session, names=["probe", "feature"])
        self.redraw()

    def _on_slider(self, change):
        j = self.sliders.index(change["owner"])
        with self._shown_errors("moving the probe"):
            self._move(j, change["new"])

    def sketch_probe(self, value):
        """Draw the neighbours and the local effect line with the probe at ``value``.

        ``value`` is in the shown column (clamped to the data), the other coordinates are
        the probe's. From ``EffectSession.probe_sketch``; the session's probe, the
        interval (hidden meanwhile), the readout and the sliders wait for ``move_probe``.
        """
        s = self._session
        j = s.feature
        sk = s.probe_sketch(clamped(value, s.model.X_train_[:, j]))
        with held(self.neighbour_mark, self.line_mark, self.interval_mark):
            self._draw_neighbours(sk.weights, j)
            self.line_mark.x, self.line_mark.y = sk.line_x, sk.line_effect
            self.interval_mark.visible = False
        self.sketch_x = float(sk.x[j])

    def move_probe(self, value):
        """Put the probe's value in the shown column at ``value`` (clamped to the data).

        Returns True when the probe moved. A failure (of the move or of its drawing) is
        raised with the probe back where it was and drawn there.
        """
        s = self._session
        j = s.feature
        target = clamped(value, s.model.X_train_[:, j])
        if target == s.probe[j]:
            return False
        self._move(j, target)
        return True

    _draw_failure = None

    def _move(self, j, value):
        """Set the probe's column ``j`` to ``value``; on failure put the probe back, raise."""
        s = self._session
        before = np.array(s.probe, dtype=np.float64)
        self._draw_failure = None
        try:
            s.set_probe_value(j, value)  # the session's observers redraw
            if self._draw_failure is not None:
                raise self._draw_failure
        except Exception:
            s.probe = before
            self.redraw()  # drawn again where it was: diamond, sliders, no sketch
            raise

    def _redraw(self):
        self.redraw()

    def _on_column(self, change):
        self._session.feature = int(change["new"])

    def _on_session(self, change):
        self.redraw()

    def redraw(self):
        """Redraw from ``EffectSession.probe_report`` (also called by tests)."""
        s = self._session
        try:
            p = s.probe_report()
        except Exception as exc:
            self._draw_failure = exc
            self._show_error("the effect probe", exc)
            return None
        self.error_html.value = ""
        j = p.feature
        X = s.model.X_train_
        oob = s.oob_effects()
        ok = np.isfinite(oob)
        m = p.methods.loc["corrected forest"]
        with held(self.rows_mark, self.neighbour_mark, self.line_mark, self.interval_mark,
                  self.probe_mark):
            self.rows_mark.x, self.rows_mark.y = X[ok, j], oob[ok]
            self._draw_neighbours(p.weights, j)
            self.line_mark.x, self.line_mark.y = p.line_x, p.line_effect
            self.interval_mark.x = [p.x[j], p.x[j]]
            self.interval_mark.y = [m["lower"], m["upper"]]
            self.interval_mark.visible = True
            self.probe_mark.x, self.probe_mark.y = [p.x[j]], [m["effect"]]
        self.sketch_x = None
        self.figure.axes[0].label = str(s.columns[j])
        if self.column_select.value != j:
            self.column_select.value = j
        for k, sl in enumerate(self.sliders):
            if abs(sl.value - p.x[k]) > 1e-12 and sl.min <= p.x[k] <= sl.max:
                sl.unobserve(self._on_slider, names="value")
                sl.value = float(p.x[k])
                sl.observe(self._on_slider, names="value")
        lvl = f"{100 * p.level:g}%"
        rows = "".join(
            f"<tr><td>{html.escape(name)}</td><td>{fmt(r['effect'])}</td>"
            f"<td>{fmt(r['std'])}</td><td>{fmt(r['lower'])} to {fmt(r['upper'])} "
            f"<small>({html.escape(r['interval'].replace('_', ' '))})</small></td></tr>"
            for name, r in p.methods.iterrows())
        self.readout_html.value = (
            f"<table class='hedgerow-effect-readout'><tr><th>method</th><th>effect</th>"
            f"<th>std</th><th>{lvl} interval</th></tr>{rows}</table><small>effective n "
            f"{p.ess:.1f}; local slope of the effect along {html.escape(str(s.columns[j]))}"
            f": {fmt(p.slopes[j])}</small>")
        colour = "#8b1a1a" if p.weak_overlap else "#2d5a27"
        self.overlap_html.value = (f"<p style='color:{colour}'>"
                                   f"{html.escape(p.overlap_note())}</p>")
        return p

    def _draw_neighbours(self, weights, j):
        """The rows with weight (and an out-of-bag effect), opacity growing with weight."""
        X = self._session.model.X_train_
        oob = self._session.oob_effects()
        ok = np.isfinite(oob)
        has = weights > 0
        _, opacity = marker_scaling(weights[has])
        nb = has & ok
        self.neighbour_mark.x, self.neighbour_mark.y = X[nb, j], oob[nb]
        self.neighbour_mark.opacities = [float(o) for o in opacity[ok[has]]]


class OverlapView(_EffectView):
    """The propensity by arm on shared bins, and the reading."""

    def __init__(self, session, **kwargs):
        super().__init__(session, **kwargs)
        xs, ys = bq.LinearScale(), bq.LinearScale(min=0.0)
        self.bars_mark = bq.Bars(x=[0.0], y=[[0.0]], scales={"x": xs, "y": ys},
                                 type="grouped", padding=0.1)
        self.figure = plain_figure([self.bars_mark], xs, ys, "propensity e(x)", "rows",
                                   y_format="d", height="260px")
        self.legend_html = W.HTML()
        self.reading_html = W.HTML()
        self.children = [W.HTML("<b>overlap</b> <small>the estimated propensity of each "
                                "training row, by arm (out-of-bag centring forest)</small>"),
                         self.caution, self.error_html, self.figure_slot(self.figure),
                         self.legend_html, self.reading_html]
        self.redraw()

    def redraw(self):
        """Redraw from ``EffectSession.overlap`` (also called by tests)."""
        try:
            o = self._session.overlap()
        except Exception as exc:
            self._show_error("the overlap profile", exc)
            return None
        mids = (o.edges[:-1] + o.edges[1:]) / 2
        arms = list(o.counts)
        counts = np.array([o.counts[a] for a in arms], dtype=float)
        self.bars_mark.scales["y"].max = axis_top(counts)  # see axis_top: grouped bars
        with held(self.bars_mark):
            self.bars_mark.x = mids
            self.bars_mark.y = counts
            self.bars_mark.colors = [ARM_COLOURS.get(a, ROW_COLOUR) for a in arms]
        self.legend_html.value = " ".join(
            f"<span style='color:{ARM_COLOURS.get(a, ROW_COLOUR)}'>&#9632;</span> "
            f"{html.escape(a)} ({int(o.counts[a].sum())} rows)" for a in arms)
        self.reading_html.value = f"<p>{html.escape(o.reading)}</p>"
        return o


class _RunView(_EffectView):
    """An effect view that runs one background job of its session on request and draws
    its result: a run button, a cancel button and a progress bar.

    ``_job`` names the session's members: traits ``{job}_status``, ``{job}_progress``,
    ``{job}_message``, methods ``start_{job}`` / ``cancel_{job}`` and the result
    ``{job}``; ``_what`` names the job in a failure message. Subclasses draw the result
    (``draw``).
    """

    _job = ""
    _what = ""

    def _run_controls(self, label, total, unit):
        """Return the run / cancel / progress row, wired to the session's job."""
        s, job = self._session, self._job
        self.run_button = W.Button(description=label, icon="play")
        self.cancel_button = W.Button(description="cancel", disabled=True)
        self.progress = W.IntProgress(value=0, min=0, max=max(1, total), description=unit)
        self.run_button.on_click(lambda _: getattr(self._session, f"start_{job}")())
        self.cancel_button.on_click(lambda _: getattr(self._session, f"cancel_{job}")())
        s.observe(self._on_status, names=[f"{job}_status", f"{job}_progress"])
        return W.HBox([self.run_button, self.cancel_button, self.progress])

    def _on_status(self, change=None):
        s, job = self._session, self._job
        status = getattr(s, f"{job}_status")
        running = status == "running"
        self.run_button.disabled = running
        self.cancel_button.disabled = not running
        done, total = getattr(s, f"{job}_progress")
        self.progress.max = max(1, total)
        self.progress.value = min(done, self.progress.max)
        if status == "failed":
            self.error_html.value = (f"<div style='color:#8b1a1a'>{html.escape(self._what)} "
                                     f"failed: {html.escape(getattr(s, f'{job}_message'))}"
                                     f"</div>")
        elif status in ("done", "cancelled") and getattr(s, job) is not None:
            self.draw(getattr(s, job))

    def draw(self, result):  # pragma: no cover - every subclass draws its own
        raise NotImplementedError


class EffectVerdictView(_RunView):
    """Run the cross-fitted R-loss verdict on request; show its sentence and table."""

    _job, _what = "verdict", "the effect verdict"

    def __init__(self, session, **kwargs):
        super().__init__(session, **kwargs)
        controls = self._run_controls("run the effect verdict", session.verdict_folds,
                                      "folds")
        self.conclusion_html = W.HTML(
            f"<p><i>Not run yet: {session.verdict_folds} cross-fitted folds, each with at "
            f"most {session.verdict_fold_trees} trees.</i></p>")
        self.table_html = W.HTML()
        self.children = [W.HTML("<b>effect verdict</b> <small>held-out R-loss, paired row "
                                "by row: the corrected forest against the same trees "
                                "uncorrected and against a constant effect</small>"),
                         self.caution, self.error_html, controls,
                         self.conclusion_html, self.table_html]

    def draw(self, v):
        """Show an ``EffectVerdict`` (also called by tests)."""
        self.error_html.value = ""
        self.conclusion_html.value = f"<p><b>{html.escape(v.conclusion)}</b></p>"
        parts = ("all", "edge", "interior")
        head = "".join(f"<th>{p}</th>" for p in parts)
        rows = "".join(
            f"<tr><td>{html.escape(name)}</td>" + "".join(
                f"<td>{fmt(100 * r[f'gain_{p}'], 3)}% <small>({fmt(100 * r[f'lower_{p}'], 3)}"
                f" to {fmt(100 * r[f'upper_{p}'], 3)})</small></td>" for p in parts)
            + "</tr>" for name, r in v.comparisons.iterrows())
        self.table_html.value = (
            f"<table class='hedgerow-effect-verdict'><tr><th>against</th>{head}</tr>{rows}"
            f"</table><small>share of the alternative's held-out R-loss the corrected forest "
            f"removes, {100 * v.level:g}% intervals; {v.folds} folds of at most "
            f"{v.fold_trees} trees; centring values out-of-bag</small>")


class EffectExplorer(W.Tab):
    """The tabbed effect explorer ``explore(..., treatment=...)`` returns."""

    def __init__(self, session):
        # here, not at the top: that module builds on this one's _EffectView
        from hedgerow.widgets._effect_more_views import (
            EffectCoverageView,
            EffectEdgesView,
            EffectSlicesView,
        )

        self.session = session
        self.probe_view = EffectProbeView(session)
        self.overlap_view = OverlapView(session)
        self.verdict_view = EffectVerdictView(session)
        self.slices_view = EffectSlicesView(session)
        self.edges_view = EffectEdgesView(session)
        self.coverage_view = EffectCoverageView(session)
        super().__init__(children=self.views, titles=EFFECT_TAB_TITLES)
        self.add_class("hedgerow-effect-explorer")
        self.observe(self._on_tab_opened, "selected_index")
        self._on_tab_opened()

    def _on_tab_opened(self, change=None):
        k = self.selected_index if self.selected_index is not None else 0
        view = self.children[k]
        if hasattr(view, "on_shown"):
            view.on_shown()

    @property
    def views(self):
        return [self.probe_view, self.overlap_view, self.verdict_view, self.slices_view,
                self.edges_view, self.coverage_view]

    # -- view state (what a snapshot records besides the session) -------------------------
    def view_state(self) -> dict:
        """Return the column shown and the active tab."""
        tab = self.selected_index
        return {"feature": self.session.columns[self.session.feature], "shown": {},
                "tab": EFFECT_TAB_TITLES[tab] if tab is not None else None}

    def apply_view_state(self, *, feature=None, shown=None, tab=None):
        """Show ``feature`` on the effect probe and open tab ``tab`` (a title).

        ``shown`` (legend toggles of the regression explorer) does not apply here and is
        ignored; an unknown column or tab is an error.
        """
        if tab is not None and tab not in EFFECT_TAB_TITLES:
            raise ValueError(f"The 'tab' parameter must be one of {list(EFFECT_TAB_TITLES)}. "
                             f"Got {tab!r} instead.")
        if feature is not None:
            self.session.restore_view(feature=feature)  # a name or an index, validated
        if tab is not None:
            self.selected_index = EFFECT_TAB_TITLES.index(tab)

    def close(self):
        self.session.close()
        super().close()
