"""Decision view: "is the correction warranted here?" in one place (the explorer's first tab).

Draws ``hedgerow.diagnostics.decision_panel`` from what the session has already computed:
the probe report, the edge profile, the cross-fitted verdict (when it is in) and the
latest coverage readout (when one has run). Nothing statistical is computed here.
"""

from __future__ import annotations

import html

import ipywidgets as W

from hedgerow.widgets._base import View
from hedgerow.widgets._style import CSS, fmt

__all__ = ["DecisionView"]

_DECISION_WORDS = {"pending": "verdict pending (cross-fitting in the background)"}


class DecisionView(View):
    """One table: verdict gain, inward bends, coverage and the difference at the probe."""

    def __init__(self, session, **kwargs):
        super().__init__(session, **kwargs)
        self.decision_html = W.HTML()
        self.decision_html.add_class(CSS.decision)
        self.table_html = W.HTML()
        self.table_html.add_class(CSS.decision_table)
        self.cautions_html = W.HTML()
        self.panel = None  # the DecisionPanel drawn last (tests and scripts read it)
        self.children = [W.HTML("<b>decision</b> <small>is the local linear correction "
                                "warranted here? each line read in plain words</small>"),
                         self._error_area, self.decision_html, self.table_html,
                         self.cautions_html, self._settings_line]
        self._follow(["generation", "ridge_penalty", "probe_x", "compared"])
        session.subscribe("verdict", self._on_job)
        session.subscribe("coverage", self._on_coverage_job)

    def _on_job(self, job):
        self._redraw_when_in(job, "computing the verdict")

    def _on_coverage_job(self, job):
        if job.outcome in ("done", "cancelled") and job.result is not None:
            self._redraw()

    def _coverage(self):
        """The latest coverage readout and the settings line it was computed for (shown)."""
        s = self._session
        job = s.latest_job("coverage")
        if job is None or job.result is None:
            return None, ""
        rep, settings = job.result
        return rep, settings

    def _redraw(self):
        from hedgerow.diagnostics import decision_panel

        with self._shown_errors("drawing the decision panel"):
            s = self._session
            verdict = s.peek_verdict()
            if verdict is None:
                s.request_verdict()
            coverage, settings = self._coverage()
            self._draw(decision_panel(s.probe_report(), s.edge_profile(), verdict, coverage,
                                      coverage_settings=settings))

    def _draw(self, panel):
        self.panel = panel
        word = _DECISION_WORDS.get(panel.decision, panel.decision)
        outside = (f"<p class='hedgerow-outside'><b>{html.escape(panel.outside_note)}</b></p>"
                   if panel.outside_note else "")
        self.decision_html.value = (f"<p><b>decision: {html.escape(word)}</b><br>"
                                    f"{html.escape(panel.sentence)}</p>{outside}")
        rows = "".join(
            f"<tr><td style='padding-right:12px'>{html.escape(r['item'])}</td>"
            f"<td style='padding-right:12px'>{html.escape(r['method'])}</td>"
            f"<td class='hedgerow-value' style='padding-right:12px'>{fmt(r['value'], 3)}</td>"
            f"<td style='padding-right:12px'>{fmt(r['lower'], 3)} to {fmt(r['upper'], 3)}</td>"
            f"<td>{html.escape(r['reading'])}</td></tr>"
            for _, r in panel.frame.iterrows())
        cov = (f"<small>coverage computed for: {html.escape(panel.coverage_settings)}</small>"
               if panel.coverage_settings else
               "<small>coverage: run the coverage readout in the tuning tab</small>")
        self.table_html.value = (
            "<table style='border-collapse:collapse'><tr><th align='left'>item</th>"
            "<th align='left'>method</th><th align='left'>value</th>"
            "<th align='left'>interval</th><th align='left'>reading</th></tr>"
            f"{rows}</table>{cov}")
        self.cautions_html.value = (
            f"<small>{html.escape(panel.cautions)} Full text: the "
            f"<a href='{html.escape(panel.cautions_link)}' target='_blank'>Cautions "
            f"section of the README</a>.</small>")
