"""Verdict view: the plain-language conclusion and the paired held-out gains behind it."""

from __future__ import annotations

import html

import bqplot as bq
import ipywidgets as W
import numpy as np

from hedgerow.diagnostics import EDGE_BAND
from hedgerow.widgets._base import View, held, plain_figure
from hedgerow.widgets._style import CSS, VERDICT_PENDING, colour_of, fmt, swatch

__all__ = ["VerdictView"]

PARTS = ("all", "edge", "interior")


class VerdictView(View):
    """Share of each method's held-out squared error the local linear forest removes."""

    def __init__(self, session, **kwargs):
        super().__init__(session, **kwargs)
        self.conclusion_html = W.HTML()
        self.conclusion_html.add_class(CSS.verdict_conclusion)
        xs, ys = bq.OrdinalScale(), bq.LinearScale()
        self.bars_mark = bq.Bars(x=list(PARTS), y=np.zeros((1, 3)), scales={"x": xs, "y": ys},
                                 type="grouped", colors=["#999999"], padding=0.25)
        self.whisker_mark = bq.Lines(x=[[p, p] for p in PARTS], y=np.zeros((3, 2)),
                                     scales={"x": xs, "y": ys}, colors=["#222222"],
                                     stroke_width=1.5)
        self.figure = plain_figure(
            [self.bars_mark, self.whisker_mark], xs, ys,
            f"rows (edge: outer {100 * EDGE_BAND:.0f}% of the data)", "held-out error removed",
            y_format=".0%", height="280px")
        self.table_html = W.HTML()
        self.children = [W.HTML("<b>verdict</b> <small>the local linear forest against each "
                                "method: paired held-out errors (cross-fitted unless marked "
                                "preview)</small>"),
                         self._error_area, self.conclusion_html, self.figure,
                         self.table_html, self._settings_line]
        self._follow(["generation", "ridge_penalty"])
        session.subscribe("verdict", self._on_verdict_job)

    def _redraw(self):
        with self._shown_errors("drawing the verdict"):
            s = self._session
            v = s.peek_verdict()
            if v is None:  # five cross-fitted folds: computed by the session's runner
                s.request_verdict()
                self.conclusion_html.value = VERDICT_PENDING
                self.table_html.value = ""
                return
            self._draw(v)

    def _on_verdict_job(self, job):
        self._redraw_when_in(job, "computing the verdict")

    def _draw(self, v):
        comp = v.comparisons
        gains = np.array([[comp.loc[m, f"gain_{p}"] for p in PARTS] for m in comp.index])
        with held(self.bars_mark, self.whisker_mark):
            self.bars_mark.y = gains if len(comp) else np.zeros((1, len(PARTS)))
            self.bars_mark.colors = [colour_of(m) for m in comp.index] or ["#999999"]
            # whiskers: the interval against the best alternative (the sentence's row)
            best = v.best_alternative
            self.whisker_mark.y = (np.zeros((len(PARTS), 2)) if best is None else np.array(
                [[comp.loc[best, f"lower_{p}"], comp.loc[best, f"upper_{p}"]] for p in PARTS]))
        self.conclusion_html.value = f"<p><b>{html.escape(v.conclusion)}</b></p>" + (
            f"<p>{html.escape(v.smoother_note)}</p>" if v.smoother_note else "")
        head = "".join(f"<th>{p}</th>" for p in PARTS)
        rows = "".join(
            f"<tr><td>{swatch(m)}</td>" + "".join(
                f"<td>{fmt(100 * comp.loc[m, f'gain_{p}'], 3)}% "
                f"<small>({fmt(100 * comp.loc[m, f'lower_{p}'], 3)} to "
                f"{fmt(100 * comp.loc[m, f'upper_{p}'], 3)})</small></td>" for p in PARTS)
            + "</tr>" for m in comp.index)
        self.table_html.value = (f"<table><tr><th>against</th>{head}</tr>{rows}</table>"
                                 f"<small>{100 * v.level:.0f}% intervals; whiskers on the "
                                 f"best alternative's bars; scored by "
                                 f"{html.escape(v.scoring)}</small>")
