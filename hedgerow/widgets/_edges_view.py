"""Edges view: held-out residuals against edge depth, banded, with the probe's rows."""

from __future__ import annotations

import bqplot as bq
import ipywidgets as W
import numpy as np

from hedgerow.diagnostics import EDGE_BAND
from hedgerow.widgets._base import View, held, plain_figure
from hedgerow.widgets._style import (
    HIGHLIGHT_COLOUR,
    colour_of,
    display_rows,
    fmt,
    marker_scaling,
    swatch,
)

__all__ = ["EdgesView"]

#: Opacity of the per-row residual dots (context behind the band means).
ROW_FADE = 0.12


class EdgesView(View):
    """Residuals (y minus held-out prediction) by edge depth, per method.

    Dots: every row's residual; diamonds and whiskers: the banded mean residual and its
    interval; ringed dots: the rows carrying the probe's forest weight (larger = more).
    """

    def __init__(self, session, **kwargs):
        from hedgerow.diagnostics import DEPTH_BANDS

        super().__init__(session, **kwargs)
        self._rows = display_rows(session.X_train.shape[0])
        edges_ = np.minimum(np.asarray(DEPTH_BANDS), 0.5)
        self._band_mid = (edges_[:-1] + edges_[1:]) / 2  # where each band's mean is drawn
        xs, ys = bq.LinearScale(min=0.0, max=0.5), bq.LinearScale()
        sc = {"x": xs, "y": ys}
        self._sizes = bq.LinearScale(min=0.0, max=1.0)
        # smoothers still fitting in the background get their marks now, drawn when in
        ready = list(session.held_out_models())
        names = ready + [n for n in session.planned_methods()
                         if n not in ready and n not in session.slice_models()]
        self.dot_marks, self.mean_marks, self.whisker_marks = {}, {}, {}
        for name in names:
            c = colour_of(name)
            # the rows are context (faint, small); the band means and their whiskers are
            # the figure's subject
            self.dot_marks[name] = bq.Scatter(x=np.zeros(1), y=np.zeros(1), scales=sc,
                                              colors=[c], default_size=7,
                                              opacities=[ROW_FADE])
            self.mean_marks[name] = bq.Scatter(x=np.zeros(1), y=np.zeros(1), scales=sc,
                                               colors=[c], marker="diamond",
                                               default_size=160, stroke="#111111",
                                               stroke_width=1.0, labels=[name])
            self.whisker_marks[name] = bq.Lines(x=np.zeros((1, 2)), y=np.zeros((1, 2)),
                                                scales=sc, colors=[c], stroke_width=3.5)
        self._order = names
        self._offset = 0.006  # spreads the methods' band means apart (presentation)
        self.probe_rows_mark = bq.Scatter(
            x=np.zeros(1), y=np.zeros(1), scales={**sc, "size": self._sizes},
            colors=["white"], fill=False, stroke=HIGHLIGHT_COLOUR, stroke_width=1.5,
            default_size=160,
            size=np.ones(1))
        self.zero_mark = bq.Lines(x=np.array([0.0, 0.5]), y=np.zeros(2), scales=sc,
                                  colors=["#999999"], line_style="dashed")
        marks = [self.zero_mark, *self.dot_marks.values(), self.probe_rows_mark,
                 *self.whisker_marks.values(), *self.mean_marks.values()]
        self.figure = plain_figure(marks, xs, ys,
                                   "edge depth (share of the data beyond the row)",
                                   "held-out residual", width="100%", height="380px")
        self.bend_html = W.HTML()
        legend = " &nbsp; ".join(swatch(n) for n in names)
        self.children = [W.HTML(f"<b>edges</b> <small>{legend}; ringed: rows carrying the "
                                f"probe's weight</small>"), self._error_area, self.figure,
                         self.bend_html, self._settings_line]
        self._follow(["generation", "ridge_penalty", "probe_x", "compared"])

    def _redraw(self):
        with self._shown_errors("drawing the edges view"):
            self._draw(self._session.edge_profile(), self._session.probe_report())

    def _draw(self, prof, rep):
        w = rep.weights.toarray().ravel()
        heavy = np.flatnonzero(w > 0)
        size, _ = marker_scaling(w[heavy])
        first = self._order[0]
        marks = [*self.dot_marks.values(), *self.mean_marks.values(),
                 *self.whisker_marks.values(), self.probe_rows_mark]
        with held(*marks):
            for k, name in enumerate(self._order):
                if name not in prof.residuals:  # not fitted yet
                    continue
                shift = (k - (len(self._order) - 1) / 2) * self._offset
                # rows without a held-out prediction (NaN residual) and empty bands are
                # left out: a NaN point is not drawable (the browser rejects its position)
                r = prof.residuals[name].to_numpy()
                ok = np.isfinite(r[self._rows])
                self.dot_marks[name].x = prof.depth[self._rows][ok]
                self.dot_marks[name].y = r[self._rows][ok]
                b = prof.bands[prof.bands["method"] == name]
                xm = self._band_mid + shift
                mean = b["mean_residual"].to_numpy()
                lo, hi = b["lower"].to_numpy(), b["upper"].to_numpy()
                ok = np.isfinite(mean)
                self.mean_marks[name].x, self.mean_marks[name].y = xm[ok], mean[ok]
                ok &= np.isfinite(lo) & np.isfinite(hi)
                self.whisker_marks[name].x = np.column_stack([xm[ok], xm[ok]])
                self.whisker_marks[name].y = np.column_stack([lo[ok], hi[ok]])
            r = prof.residuals[first].to_numpy()[heavy]
            ok = np.isfinite(r)
            self.probe_rows_mark.x = prof.depth[heavy][ok]
            self.probe_rows_mark.y = r[ok]
            self.probe_rows_mark.size = size[ok]
        rows = "".join(
            f"<tr><td>{swatch(r['method'])}</td><td class='hedgerow-value'>{fmt(r['bend'], 3)}"
            f"</td><td>{fmt(r['lower'], 3)} to {fmt(r['upper'], 3)}</td><td>{r['n']}</td></tr>"
            for _, r in prof.bend.iterrows())
        self.bend_html.value = (
            f"<small>inward-bend score in the outer {100 * EDGE_BAND:.0f}% (residual "
            "&times; side &times; sign of the local slope; above 0: predictions bend toward "
            "the interior)</small>"
            f"<table><tr><th>method</th><th>score</th><th>95% interval</th><th>rows</th></tr>"
            f"{rows}</table>")
