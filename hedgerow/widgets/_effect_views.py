"""The effect explorer's views: effect probe, overlap and the held-out effect verdict.

Each view renders what its ``EffectSession`` returns from ``hedgerow.diagnostics``; none
computes a statistic. Every view shows the effect caution at its top.
"""

from __future__ import annotations

import html

import bqplot as bq
import ipywidgets as W
import numpy as np

from hedgerow.widgets._base import held, plain_figure
from hedgerow.widgets._style import PROBE_COLOUR, ROW_COLOUR, fmt, marker_scaling

__all__ = ["EffectProbeView", "OverlapView", "EffectVerdictView", "EffectExplorer",
           "EFFECT_TAB_TITLES", "caution_html"]

EFFECT_TAB_TITLES = ("effect probe", "overlap", "effect verdict", "effect slices",
                     "effect edges")
EFFECT_COLOUR = "#1d5fa8"
ARM_COLOURS = {"untreated": "#e3891b", "treated": "#1d5fa8", "all rows": ROW_COLOUR}


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

    def _show_error(self, what, exc):
        self.error_html.value = (f"<div style='color:#8b1a1a'>{html.escape(what)} failed: "
                                 f"{html.escape(type(exc).__name__)}: "
                                 f"{html.escape(str(exc))}</div>")


class EffectProbeView(_EffectView):
    """Sliders move the probe; the readout and figure show the effect there."""

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
            self.sliders.append(sl)
        self.column_select.observe(self._on_column, names="value")
        xs, ys = bq.LinearScale(), bq.LinearScale()
        self.rows_mark = bq.Scatter(x=[0.0], y=[0.0], scales={"x": xs, "y": ys},
                                    colors=[ROW_COLOUR], default_size=8, default_opacities=[0.3])
        self.neighbour_mark = bq.Scatter(x=[0.0], y=[0.0], scales={"x": xs, "y": ys},
                                         colors=[EFFECT_COLOUR], default_size=24)
        self.line_mark = bq.Lines(x=[0.0, 1.0], y=[0.0, 0.0], scales={"x": xs, "y": ys},
                                  colors=["#111111"], stroke_width=2.5)
        self.interval_mark = bq.Lines(x=[0.0, 0.0], y=[0.0, 0.0], scales={"x": xs, "y": ys},
                                      colors=[PROBE_COLOUR], stroke_width=2)
        self.probe_mark = bq.Scatter(x=[0.0], y=[0.0], scales={"x": xs, "y": ys},
                                     colors=[PROBE_COLOUR], marker="diamond", default_size=90)
        self.figure = plain_figure(
            [self.rows_mark, self.neighbour_mark, self.line_mark, self.interval_mark,
             self.probe_mark], xs, ys, str(s.columns[s.feature]), "effect", height="300px")
        self.readout_html = W.HTML()
        self.overlap_html = W.HTML()
        self.children = [
            W.HTML("<b>effect probe</b> <small>grey: out-of-bag effect of each training row; "
                   "blue: the probe's forest neighbours (darker: more weight); black: the local "
                   "effect line; diamond: the corrected effect at the probe with its "
                   "interval</small>"),
            self.caution, self.error_html, self.column_select,
            W.HBox([self.figure, W.VBox(self.sliders)]), self.readout_html,
            self.overlap_html]
        s.observe(self._on_session, names=["probe", "feature"])
        self.redraw()

    def _on_slider(self, change):
        j = self.sliders.index(change["owner"])
        try:
            self._session.set_probe_value(j, change["new"])
        except Exception as exc:
            self._show_error("moving the probe", exc)

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
            self._show_error("the effect probe", exc)
            return None
        self.error_html.value = ""
        j = p.feature
        X = s.model.X_train_
        oob = s.oob_effects()
        ok = np.isfinite(oob)
        has = p.weights > 0
        _, opacity = marker_scaling(p.weights[has])
        m = p.methods.loc["corrected forest"]
        with held(self.rows_mark, self.neighbour_mark, self.line_mark, self.interval_mark,
                  self.probe_mark):
            self.rows_mark.x, self.rows_mark.y = X[ok, j], oob[ok]
            nb = has & ok
            self.neighbour_mark.x, self.neighbour_mark.y = X[nb, j], oob[nb]
            self.neighbour_mark.opacities = [float(o) for o in opacity[ok[has]]]
            self.line_mark.x, self.line_mark.y = p.line_x, p.line_effect
            self.interval_mark.x = [p.x[j], p.x[j]]
            self.interval_mark.y = [m["lower"], m["upper"]]
            self.probe_mark.x, self.probe_mark.y = [p.x[j]], [m["effect"]]
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
                         self.caution, self.error_html, self.figure, self.legend_html,
                         self.reading_html]
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
        with held(self.bars_mark):
            self.bars_mark.x = mids
            self.bars_mark.y = np.array([o.counts[a] for a in arms], dtype=float)
            self.bars_mark.colors = [ARM_COLOURS.get(a, ROW_COLOUR) for a in arms]
        self.legend_html.value = " ".join(
            f"<span style='color:{ARM_COLOURS.get(a, ROW_COLOUR)}'>&#9632;</span> "
            f"{html.escape(a)} ({int(o.counts[a].sum())} rows)" for a in arms)
        self.reading_html.value = f"<p>{html.escape(o.reading)}</p>"
        return o


class EffectVerdictView(_EffectView):
    """Run the cross-fitted R-loss verdict on request; show its sentence and table."""

    def __init__(self, session, **kwargs):
        super().__init__(session, **kwargs)
        self.run_button = W.Button(description="run the effect verdict", icon="play")
        self.cancel_button = W.Button(description="cancel", disabled=True)
        self.progress = W.IntProgress(value=0, min=0, max=max(1, session.verdict_folds),
                                      description="folds")
        self.conclusion_html = W.HTML(
            f"<p><i>Not run yet: {session.verdict_folds} cross-fitted folds, each with at "
            f"most {session.verdict_fold_trees} trees.</i></p>")
        self.table_html = W.HTML()
        self.run_button.on_click(lambda _: self._session.start_verdict())
        self.cancel_button.on_click(lambda _: self._session.cancel_verdict())
        self.children = [W.HTML("<b>effect verdict</b> <small>held-out R-loss, paired row "
                                "by row: the corrected forest against the same trees "
                                "uncorrected and against a constant effect</small>"),
                         self.caution, self.error_html,
                         W.HBox([self.run_button, self.cancel_button, self.progress]),
                         self.conclusion_html, self.table_html]
        session.observe(self._on_status, names=["verdict_status", "verdict_progress"])

    def _on_status(self, change=None):
        s = self._session
        running = s.verdict_status == "running"
        self.run_button.disabled = running
        self.cancel_button.disabled = not running
        done, total = s.verdict_progress
        self.progress.max = max(1, total)
        self.progress.value = min(done, self.progress.max)
        if s.verdict_status == "failed":
            self.error_html.value = (f"<div style='color:#8b1a1a'>the effect verdict failed: "
                                     f"{html.escape(s.verdict_message)}</div>")
        elif s.verdict_status in ("done", "cancelled") and s.verdict is not None:
            self.draw(s.verdict)

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
        from hedgerow.widgets._effect_more_views import EffectEdgesView, EffectSlicesView

        self.session = session
        self.probe_view = EffectProbeView(session)
        self.overlap_view = OverlapView(session)
        self.verdict_view = EffectVerdictView(session)
        self.slices_view = EffectSlicesView(session)
        self.edges_view = EffectEdgesView(session)
        super().__init__(children=self.views, titles=EFFECT_TAB_TITLES)
        self.add_class("hedgerow-effect-explorer")

    @property
    def views(self):
        return [self.probe_view, self.overlap_view, self.verdict_view, self.slices_view,
                self.edges_view]

    def close(self):
        self.session.close()
        super().close()
