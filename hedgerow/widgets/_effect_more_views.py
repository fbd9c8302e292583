"""The effect explorer's slices, edges and coverage views.

Each renders what its ``EffectSession`` returns (``slice_report`` from
``diagnostics.effect_slices``, ``edge_report`` from ``diagnostics.effect_edges``,
``coverage`` from ``diagnostics.effect_coverage_readout``); none computes a statistic.
Each shows the effect caution at its top.
"""

from __future__ import annotations

import html

import bqplot as bq
import ipywidgets as W
import numpy as np

from hedgerow.widgets._base import held, plain_figure
from hedgerow.widgets._effect_views import _EffectView, _RunView
from hedgerow.widgets._style import PROBE_COLOUR, colour_of, fmt

__all__ = ["EffectSlicesView", "EffectEdgesView", "EffectCoverageView",
           "EFFECT_METHOD_COLOURS"]

#: One colour per effect method: the corrected and uncorrected forests take the colours of
#: their regression counterparts (local linear forest, honest forest), the difference in
#: means that of the other local-constant average; the truth is near black.
EFFECT_METHOD_COLOURS = {
    "corrected forest": colour_of("local linear forest"),
    "uncorrected forest": colour_of("honest forest"),
    "neighbourhood difference": colour_of("Nadaraya-Watson"),
    "truth": PROBE_COLOUR,
}
_DASHES = {"neighbourhood difference": "dotted", "truth": "dashed"}
# weight-only estimates are constant within a leaf: drawn as steps, as the plain forest is
_STEPS = ("uncorrected forest", "neighbourhood difference")
_GUIDE_COLOUR = "#999999"


def _swatch(name):
    c = EFFECT_METHOD_COLOURS.get(name, _GUIDE_COLOUR)
    return (f"<span style='display:inline-block;width:0.9em;height:0.9em;background:{c};"
            f"margin-right:0.35em;vertical-align:-0.1em'></span>{html.escape(name)}")


class EffectSlicesView(_EffectView):
    """Each effect method along the session's column, the other columns at the probe.

    Lines: the corrected forest (with its interval band), the same trees uncorrected, the
    difference in means within each point's forest neighbourhood and, when the session
    has one, the known truth; dashed vertical: the probe's value of the column.
    """

    def __init__(self, session, **kwargs):
        super().__init__(session, **kwargs)
        from hedgerow.diagnostics import EFFECT_METHODS

        s = session
        self.add_class("hedgerow-effect-slices")
        self.column_select = W.Dropdown(options=[(c, j) for j, c in enumerate(s.columns)],
                                        value=s.feature, description="column")
        self.column_select.observe(self._on_column, names="value")
        xs, ys = bq.LinearScale(), bq.LinearScale()
        sc = {"x": xs, "y": ys}
        band = EFFECT_METHOD_COLOURS["corrected forest"]
        self.band_mark = bq.Lines(x=np.zeros(2), y=np.zeros((2, 2)), scales=sc,
                                  fill="between", colors=[band, band], fill_colors=[band],
                                  fill_opacities=[0.18], opacities=[0.0, 0.0],
                                  labels=["interval"])
        names = list(EFFECT_METHODS) + (["truth"] if s.truth is not None else [])
        self.line_marks = {
            name: bq.Lines(x=np.zeros(2), y=np.zeros(2), scales=sc,
                           colors=[EFFECT_METHOD_COLOURS[name]],
                           line_style=_DASHES.get(name, "solid"),
                           stroke_width=2.5 if name == "corrected forest" else 1.8,
                           interpolation="step-after" if name in _STEPS else "linear",
                           labels=[name])
            for name in names}
        self.zero_mark = bq.Lines(x=np.zeros(2), y=np.zeros(2), scales=sc,
                                  colors=[_GUIDE_COLOUR], line_style="dashed")
        self.probe_mark = bq.Lines(x=np.zeros(2), y=np.zeros(2), scales=sc,
                                   colors=[PROBE_COLOUR], line_style="dashed", stroke_width=1)
        self.figure = plain_figure(
            [self.zero_mark, self.band_mark, *self.line_marks.values(), self.probe_mark],
            xs, ys, str(s.columns[s.feature]), "effect", width="640px", height="320px")
        self.legend_html = W.HTML(" &nbsp; ".join(_swatch(n) for n in names)
                                  + " &nbsp; <small>band: the corrected forest's "
                                    "interval; dashed vertical: the probe</small>")
        self.ends_html = W.HTML()
        self.settings_html = W.HTML()
        self.children = [
            W.HTML("<b>effect slices</b> <small>each method's effect along one column, the "
                   "other columns held at the probe</small>"),
            self.caution, self.error_html, self.column_select, self.figure_slot(self.figure),
            self.legend_html, self.ends_html, self.settings_html]
        s.observe(self._on_session, names=["probe", "feature"])
        self.redraw()

    def _on_column(self, change):
        try:
            self._session.feature = int(change["new"])
        except Exception as exc:
            self._show_error("choosing the column", exc)

    def _on_session(self, change):
        self.redraw()

    def redraw(self):
        """Redraw from ``EffectSession.slice_report`` (also called by tests); return it."""
        s = self._session
        try:
            r = s.slice_report()
        except Exception as exc:
            self._show_error("the effect slices", exc)
            return None
        self.error_html.value = ""
        c = r.method("corrected forest")
        grid = c["value"].to_numpy()
        shown = [c["lower"], c["upper"]]
        with held(self.band_mark, self.zero_mark, self.probe_mark, *self.line_marks.values()):
            ok = np.isfinite(c["lower"].to_numpy()) & np.isfinite(c["upper"].to_numpy())
            self.band_mark.x = grid[ok]
            self.band_mark.y = np.vstack([c["lower"].to_numpy()[ok],
                                          c["upper"].to_numpy()[ok]])
            for name, mark in self.line_marks.items():
                part = r.method(name)
                x, y = part["value"].to_numpy(), part["effect"].to_numpy()
                ok = np.isfinite(y)  # a NaN point is not drawable
                mark.x, mark.y = x[ok], y[ok]
                shown.append(part["effect"])
            # guides span what is drawn (presentation only)
            vals = np.concatenate([np.asarray(v, dtype=float) for v in shown])
            vals = vals[np.isfinite(vals)]
            lo, hi = (float(vals.min()), float(vals.max())) if vals.size else (0.0, 1.0)
            self.zero_mark.x = np.array([grid.min(), grid.max()])
            self.zero_mark.y = np.zeros(2)
            xj = float(r.x[r.feature_index])
            self.probe_mark.x = np.array([xj, xj])
            self.probe_mark.y = np.array([min(lo, 0.0), max(hi, 0.0)])
        self.figure.axes[0].label = r.feature
        if self.column_select.value != r.feature_index:
            self.column_select.value = r.feature_index
        self._write_ends(r)
        self.settings_html.value = f"<small>{html.escape(r.note)}</small>"
        return r

    def _write_ends(self, r):
        lvl = f"{100 * r.level:g}%"
        first, last = r.frame["value"].min(), r.frame["value"].max()
        rows = []
        for name in r.methods:
            part = r.method(name)
            cells = []
            for k in (0, len(part) - 1):
                p = part.iloc[k]
                iv = (f" <small>({fmt(p['lower'])} to {fmt(p['upper'])})</small>"
                      if np.isfinite(p["lower"]) else "")
                cells.append(f"<td>{fmt(p['effect'])}{iv}</td>")
            rows.append(f"<tr><td>{_swatch(name)}</td>{''.join(cells)}</tr>")
        self.ends_html.value = (
            f"<table class='hedgerow-effect-slice-ends'><tr><th>method</th>"
            f"<th>at {html.escape(r.feature)} = {fmt(first)}</th>"
            f"<th>at {html.escape(r.feature)} = {fmt(last)}</th></tr>{''.join(rows)}"
            f"</table><small>effect ({lvl} interval) at the two ends of the slice, where a "
            f"forest's neighbourhoods are lopsided</small>")


class EffectEdgesView(_EffectView):
    """The correction's paired change in out-of-bag R-loss per edge-depth band, and a table."""

    def __init__(self, session, **kwargs):
        super().__init__(session, **kwargs)
        from hedgerow.diagnostics import DEPTH_BANDS

        self.add_class("hedgerow-effect-edges")
        edges_ = np.minimum(np.asarray(DEPTH_BANDS), 0.5)
        self._band_mid = (edges_[:-1] + edges_[1:]) / 2  # where each band is drawn
        xs, ys = bq.LinearScale(min=0.0, max=0.5), bq.LinearScale()
        sc = {"x": xs, "y": ys}
        colour = EFFECT_METHOD_COLOURS["corrected forest"]
        self.zero_mark = bq.Lines(x=np.array([0.0, 0.5]), y=np.zeros(2), scales=sc,
                                  colors=[_GUIDE_COLOUR], line_style="dashed")
        self.whisker_mark = bq.Lines(x=np.zeros((1, 2)), y=np.zeros((1, 2)), scales=sc,
                                     colors=[colour], stroke_width=3)
        self.point_mark = bq.Scatter(x=np.zeros(1), y=np.zeros(1), scales=sc,
                                     colors=[colour], marker="diamond", default_size=140,
                                     stroke="#111111", stroke_width=1.0)
        self.figure = plain_figure([self.zero_mark, self.whisker_mark, self.point_mark],
                                   xs, ys, "edge depth (share of the data beyond the row)",
                                   "R-loss, corrected - uncorrected", width="640px",
                                   height="300px")
        self.reading_html = W.HTML()
        self.table_html = W.HTML()
        self.children = [
            W.HTML("<b>effect edges</b> <small>out-of-bag R-loss of the corrected effect "
                   "minus that of the same trees uncorrected, paired row by row, per "
                   "edge-depth band (below the dashed line: the correction fits those rows "
                   "better); diamonds: band means, bars: their intervals</small>"),
            self.caution, self.error_html, self.figure_slot(self.figure), self.reading_html,
            self.table_html]
        self.redraw()

    def redraw(self):
        """Redraw from ``EffectSession.edge_report`` (also called by tests); return it."""
        try:
            e = self._session.edge_report()
        except Exception as exc:
            self._show_error("the effect edges", exc)
            return None
        self.error_html.value = ""
        p = e.paired
        mean = p["difference"].to_numpy()
        lo, hi = p["lower"].to_numpy(), p["upper"].to_numpy()
        ok = np.isfinite(mean)
        both = ok & np.isfinite(lo) & np.isfinite(hi)
        xm = self._band_mid
        with held(self.point_mark, self.whisker_mark):
            self.point_mark.x, self.point_mark.y = xm[ok], mean[ok]
            self.whisker_mark.x = np.column_stack([xm[both], xm[both]])
            self.whisker_mark.y = np.column_stack([lo[both], hi[both]])
        self.reading_html.value = (f"<p><b>{html.escape(e.reading)}</b></p>"
                                   f"<small>{html.escape(e.note)}</small>")
        self._write_table(e)
        return e

    def _write_table(self, e):
        b = e.bands.set_index(["method", "band"])
        rows = []
        for _, r in e.paired.iterrows():
            c = b.loc[("corrected forest", r["band"])]
            u = b.loc[("uncorrected forest", r["band"])]
            rows.append(
                f"<tr><td>{html.escape(r['band'])}</td><td>{int(r['n'])}</td>"
                f"<td>{fmt(c['mean_rloss'])}</td><td>{fmt(u['mean_rloss'])}</td>"
                f"<td class='hedgerow-value'>{fmt(r['difference'], 3)} <small>("
                f"{fmt(r['lower'], 3)} to {fmt(r['upper'], 3)})</small></td>"
                f"<td>{fmt(100 * r['relative'], 3)}%</td>"
                f"<td>{fmt(c['mean_effect'])}</td><td>{fmt(u['mean_effect'])}</td></tr>")
        o = e.overall
        rows.append(f"<tr><td><i>all rows</i></td><td>{o['n']}</td><td></td><td></td>"
                    f"<td class='hedgerow-value'>{fmt(o['difference'], 3)} <small>("
                    f"{fmt(o['lower'], 3)} to {fmt(o['upper'], 3)})</small></td>"
                    f"<td>{fmt(100 * o['relative'], 3)}%</td><td></td><td></td></tr>")
        lvl = f"{100 * e.level:g}%"
        self.table_html.value = (
            f"<table class='hedgerow-effect-edges-table'><tr><th>edge depth</th>"
            f"<th>rows</th><th>R-loss corrected</th><th>R-loss uncorrected</th>"
            f"<th>difference ({lvl} interval)</th><th>relative</th>"
            f"<th>mean effect corrected</th><th>mean effect uncorrected</th></tr>"
            f"{''.join(rows)}</table><small>R-loss (y~ - tau w~)^2 of each row's out-of-bag "
            f"effect, y~ and w~ the centred outcome and treatment; the noise is common to "
            f"both methods on a row, so the paired difference compares their errors. Not "
            f"held out as the effect verdict is: the correction was chosen on every "
            f"row.</small>")


class EffectCoverageView(_RunView):
    """Run the effect coverage readout on request; show per interval method and part
    whether the intervals cover and, where they miss, why (too narrow or off centre)."""

    _job, _what = "coverage", "the coverage readout"

    def __init__(self, session, **kwargs):
        super().__init__(session, **kwargs)
        s = session
        self.add_class("hedgerow-effect-coverage")
        controls = self._run_controls("run the coverage readout", s.coverage_reps, "refits")
        against = ("the known effect (truth)" if s.truth is not None
                   else "the model's own out-of-bag effect as a stand-in")
        self.status_html = W.HTML(
            f"<p><i>Not run yet: {s.coverage_reps} refits on outcomes redrawn around "
            f"{html.escape(against)}, coverage counted at {s.coverage_rows} rows.</i></p>")
        self.notes_html = W.HTML()
        self.table_html = W.HTML()
        self.children = [
            W.HTML("<b>effect coverage</b> <small>how often each effect interval holds the "
                   "effect it was simulated around, overall, in the edge band and inside; "
                   "where it misses, whether it is too narrow or off centre</small>"),
            self.caution, self.error_html, controls,
            self.status_html, self.notes_html, self.table_html]

    def draw(self, report):
        """Show an ``EffectCoverageReport`` (also called by tests)."""
        self.error_html.value = ""
        done = report.reps if report.reps_done is None else report.reps_done
        self.status_html.value = (f"<p><b>{html.escape(report.mode)}</b>: {done} of "
                                  f"{report.reps} refits, nominal "
                                  f"{100 * report.level:g}%</p>")
        notes = [n for n in report._notes()[1:] if not n.startswith("Caution")]
        self.notes_html.value = "".join(f"<p><small>{html.escape(n)}</small></p>"
                                        for n in notes)
        fr = report.to_frame()
        if fr.empty:
            self.table_html.value = ""
            return
        head = ("<tr><th>interval</th><th>part</th><th>coverage (95% CI)</th><th>mean "
                "width</th><th>rms bias</th><th>mean sd / sd across</th><th>with bias "
                "removed</th><th>reading</th></tr>")
        rows = "".join(
            f"<tr><td>{html.escape(r.interval.replace('_', ' '))}</td>"
            f"<td>{html.escape(r.part)}</td><td>{fmt(r.coverage, 3)} <small>("
            f"{fmt(r.lower, 3)} to {fmt(r.upper, 3)})</small></td><td>{fmt(r.mean_width)}"
            f"</td><td>{fmt(r.rms_bias)}</td><td>{fmt(r.mean_sd)} / {fmt(r.sd_across)}</td>"
            f"<td>{fmt(r.coverage_bias_removed, 3)}</td><td>{html.escape(r.flag or 'covers')}"
            f"</td></tr>" for r in fr.itertuples())
        self.table_html.value = (f"<table class='hedgerow-effect-coverage-table'>{head}"
                                 f"{rows}</table>")
