"""Tuning view: the ridge penalty (no refit) and the forest settings (refit, off-thread).

The view starts no thread: the interval width, the coverage readout and refits are jobs
of the session's background runner; the view asks for them and subscribes to results.
"""

from __future__ import annotations

import html
import logging
import threading

import bqplot as bq
import ipywidgets as W
import numpy as np
import traitlets as t

from hedgerow.diagnostics import has_little_bags
from hedgerow.widgets._base import View, held, plain_figure, powers_of_ten
from hedgerow.widgets._session import SURFACE_PENALTIES, SURFACE_RATES
from hedgerow.widgets._style import (
    CSS,
    PROBE_COLOUR,
    VERDICT_PENDING,
    colour_of,
    fmt,
    sequential_colour,
)

__all__ = ["TuningView"]

log = logging.getLogger("hedgerow.widgets")

#: Penalties the out-of-bag curve is drawn at (log-spaced; presentation grid).
CURVE_PENALTIES = np.logspace(-4, 2, 25)
#: Width of the forest sliders: room for a fine drag (their readout takes typed values).
FOREST_SLIDER_WIDTH = "560px"
#: What the refit status line says when the session gives no message.
REFIT_STATES = {"idle": "no refit running; the views show the forest in place"}
#: What the surface's colour can show: label -> column of the surface frame.
SURFACE_MEASURES = {"out-of-bag RMSE": "oob_rmse", "mean interval width": "mean_width"}
#: Smallest penalty the log slider shows; 0 is shown at this end.
SLIDER_MIN_EXP, SLIDER_MAX_EXP = -4, 2


#: What the coverage readout says for a forest without little bags (no intervals).
NO_BAGS_NOTE = ("<small>the coverage readout needs little bags: this forest has none (a "
                "subsample rate above 0.5, or a tree count with no divisor from 2 to 32), so "
                "it has no intervals to check</small>")

class TuningView(View):
    """Ridge-penalty slider, out-of-bag readouts, refit controls and the coverage readout."""

    coverage_status = t.Unicode("not run",
                                help="not run, running, done, cancelled or failed.")
    coverage_reps = t.Int(10, help="Replications of the coverage readout.")

    def __init__(self, session, **kwargs):
        super().__init__(session, **kwargs)
        s = session
        p = s.model.get_params()
        self.ridge_slider = W.FloatLogSlider(
            value=self._slider_value(s.ridge_penalty), base=10, min=SLIDER_MIN_EXP,
            max=SLIDER_MAX_EXP, step=0.1, description="ridge penalty",
            continuous_update=False, readout=False, style={"description_width": "120px"},
            layout=W.Layout(width="480px"))
        # the log slider cannot show 0: the value shown is the session's, and a button
        # sets the penalty to 0 (the slider then rests at its left end)
        self.ridge_value = W.HTML(layout=W.Layout(width="70px"))
        self.ridge_value.add_class(CSS.ridge_value)
        self._zero_button = W.Button(description="no penalty (0)",
                                     layout=W.Layout(width="130px"))
        self._zero_button.on_click(self._on_zero_clicked)
        self.ridge_slider.add_class(CSS.ridge_slider)
        self.ridge_slider.observe(self._on_ridge_slid, "value")
        self._oob_choice = W.Button(description="back to the out-of-bag choice",
                                    layout=W.Layout(width="240px"))
        self._oob_choice.on_click(self._on_oob_choice_clicked)
        self._fitted_penalty = float(s.model.ridge_penalty_)
        self.readout_html = W.HTML()
        self.readout_html.add_class(CSS.tuning_readout)
        self._build_curve()
        style = {"description_width": "120px"}
        self.rate_slider = W.FloatSlider(value=float(p["subsample_rate"]), min=0.05, max=0.5,
                                         step=0.05, description="subsample rate",
                                         continuous_update=False, style=style,
                                         layout=W.Layout(width=FOREST_SLIDER_WIDTH))
        self.leaf_slider = W.IntSlider(value=int(p["min_samples_leaf"]), min=1, max=50,
                                       description="min leaf", continuous_update=False,
                                       style=style, layout=W.Layout(width=FOREST_SLIDER_WIDTH))
        self.trees_slider = W.IntSlider(value=int(p["n_estimators"]), min=50, max=4000,
                                        step=50, description="trees", continuous_update=False,
                                        style=style, layout=W.Layout(width=FOREST_SLIDER_WIDTH))
        for key, w in (("subsample_rate", self.rate_slider),
                       ("min_samples_leaf", self.leaf_slider),
                       ("n_estimators", self.trees_slider)):
            w.observe(lambda ch, key=key: self._on_setting_changed(key, ch["new"]), "value")
        self.progress = W.FloatProgress(value=0.0, min=0.0, max=1.0, description="refit",
                                        style=style)
        self.trees_slider.add_class(CSS.trees_slider)
        self.cancel_button = W.Button(description="cancel refit", disabled=True)
        self.cancel_button.add_class(CSS.refit_cancel)
        self.cancel_button.on_click(self._on_cancel_clicked)
        self.status_html = W.HTML()
        self.status_html.add_class(CSS.refit_status)
        self.verdict_html = W.HTML()
        self.coverage_button = W.Button(description="run coverage readout",
                                        layout=W.Layout(width="220px"))
        self.coverage_button.on_click(self._on_coverage_clicked)
        self.coverage_cancel_button = W.Button(description="stop coverage readout",
                                               disabled=True, layout=W.Layout(width="200px"))
        self.coverage_cancel_button.on_click(self._on_coverage_cancel_clicked)
        # without an event loop (scripts, tests) results arrive on the runner's worker:
        # one redraw at a time, so that a slow one never overwrites a newer readout
        self._draw_lock = threading.RLock()
        self.coverage_progress = W.FloatProgress(value=0.0, min=0.0, max=1.0,
                                                 layout=W.Layout(width="200px"))
        self.coverage_html = W.HTML("<small>not run yet</small>")
        self.coverage_html.add_class(CSS.coverage_result)
        s.observe(self._on_refit_state, names=["refit_status", "refit_progress",
                                               "refit_message"])
        s.observe(self._on_model_changed, names=["generation", "ridge_penalty"])
        s.subscribe("interval width", self._on_width_job)
        s.subscribe("coverage", self._on_coverage_job)
        s.subscribe("verdict", self._on_verdict_job)
        self._build_surface()
        s.subscribe("surface column", self._on_surface_job)
        self.children = [
            W.HTML("<b>tuning</b> <small>the ridge penalty re-solves the local lines on the "
                   "same trees; the other settings grow a new forest</small>"),
            self._error_area, W.HBox([self.ridge_slider, self.ridge_value, self._zero_button,
                                      self._oob_choice]), self.readout_html,
            self.curve, W.HTML("<b>forest settings</b> <small>(refit in the background)"
                               "</small>"),
            self.rate_slider, self.leaf_slider, self.trees_slider,
            W.HBox([self.progress, self.cancel_button]), self.status_html,
            W.HTML("<b>verdict</b>"), self.verdict_html,
            W.HTML("<b>tuning surface</b> <small>subsample rate (rows; one background "
                   "refit each) &times; ridge penalty (columns; no refit). Click a cell to "
                   "load that setting; the current one is framed</small>"),
            W.HBox([self.surface_button, self.surface_cancel_button, self.surface_measure,
                    self.surface_progress]),
            self.surface_grid, self.surface_note,
            W.HTML("<b>coverage readout</b>"),
            W.HBox([self.coverage_button, self.coverage_progress,
                    self.coverage_cancel_button]), self.coverage_html,
            self._settings_line,
        ]
        self._redraw()
        self._on_refit_state()
        self._on_settings_changed()
        self._show_coverage_availability()

    @staticmethod
    def _slider_value(lam):
        return float(np.clip(lam, 10.0**SLIDER_MIN_EXP, 10.0**SLIDER_MAX_EXP))

    def _build_curve(self):
        xs, ys = bq.LogScale(), bq.LinearScale()
        sc = {"x": xs, "y": ys}
        c = colour_of("local linear forest")
        self.curve_mark = bq.Lines(x=CURVE_PENALTIES, y=np.zeros(CURVE_PENALTIES.size),
                                   scales=sc, colors=[c], stroke_width=2,
                                   labels=["out-of-bag RMSE"])
        self.current_mark = bq.Scatter(x=np.ones(1), y=np.zeros(1), scales=sc,
                                       colors=[PROBE_COLOUR], default_size=80)
        self.curve = plain_figure([self.curve_mark, self.current_mark], xs, ys,
                                  "ridge penalty", "out-of-bag RMSE",
                                  x_ticks=powers_of_ten(CURVE_PENALTIES[0],
                                                        CURVE_PENALTIES[-1]))

    # -- handlers ----------------------------------------------------------------------
    def _on_ridge_slid(self, change):
        with self._shown_errors("changing the ridge penalty"):
            if not np.isclose(change["new"], self._slider_value(self._session.ridge_penalty)):
                self._session.ridge_penalty = float(change["new"])

    def _on_zero_clicked(self, button):
        with self._shown_errors("setting the ridge penalty to 0"):
            self._session.ridge_penalty = 0.0

    def _on_oob_choice_clicked(self, button):
        with self._shown_errors("restoring the out-of-bag penalty"):
            self._session.ridge_penalty = float(self._session.model.ridge_penalty_)

    _syncing_settings = False

    def _on_setting_changed(self, key, value):
        if self._syncing_settings:
            return
        with self._shown_errors(f"requesting a refit ({key})"):
            self._session.request_refit(**{key: value})

    def _on_cancel_clicked(self, button):
        with self._shown_errors("cancelling the refit"):
            self._session.cancel_refit()

    def _on_refit_state(self, change=None):
        s = self._session
        running = s.refit_status in ("waiting", "running")
        if s.refit_status in ("cancelled", "failed"):
            # the forest in place did not change: the sliders and the bar say so again
            self._show_forest_settings()
            self.progress.value = 0.0
        else:
            self.progress.value = float(s.refit_progress)
        self.progress.bar_style = {"failed": "danger", "cancelled": "warning"}.get(
            s.refit_status, "info" if running else "success")
        self.cancel_button.disabled = not running
        message = s.refit_message or REFIT_STATES.get(s.refit_status, "")
        self.status_html.value = (f"<small>{html.escape(s.refit_status)}"
                                  + (f": {html.escape(message)}" if message else "")
                                  + "</small>")
        if s.refit_status == "failed":
            self.error = s.refit_message

    def _on_model_changed(self, change):
        self._redraw()
        self._draw_surface()
        self._show_coverage_availability()
        if self._session.refit_status not in ("waiting", "running"):
            self._show_forest_settings()

    def _show_forest_settings(self):
        """Put the forest sliders at the settings of the forest in place (no refit)."""
        p = self._session.model.get_params()
        self._syncing_settings = True
        try:
            self.rate_slider.value = float(p["subsample_rate"])
            self.leaf_slider.value = int(p["min_samples_leaf"])
            self.trees_slider.value = int(p["n_estimators"])
        finally:
            self._syncing_settings = False

    def _redraw(self):
        with self._draw_lock, self._shown_errors("drawing the tuning view"):
            s = self._session
            # the RMSE now; the interval width (little-bags errors of every training row,
            # the slow part) arrives from the session's background runner
            summary = s.quick_oob_summary()
            pending = not np.isfinite(summary["mean_width"]) and \
                s.request_oob_summary() is not None
            # the cross-fitted verdict (several fits' time) arrives from the runner too
            verdict = s.peek_verdict()
            if verdict is None:
                s.request_verdict()
            self._draw(summary, s.ridge_curve(CURVE_PENALTIES), verdict,
                       width_pending=pending)

    def _on_verdict_job(self, job):
        self._redraw_when_in(job, "computing the verdict")

    def _on_width_job(self, job):
        self._redraw_when_in(job, "computing the interval width")

    def wait_for_width(self, timeout=60.0) -> bool:
        """Block until the interval-width readout is filled (tests, scripts); True if so."""
        s = self._session
        job = s.latest_job("interval width")
        if job is not None:
            job.join(timeout)
        return s.peek(("oob",)) is not None

    def _draw(self, summary, curve, verdict, width_pending=False):
        s = self._session
        with held(self.curve_mark, self.current_mark):
            self.curve_mark.y = curve["oob_rmse"].to_numpy()
            self.current_mark.x = np.array([self._slider_value(summary["ridge_penalty"])])
            self.current_mark.y = np.array([summary["oob_rmse"]])
        if width_pending:
            width = "computing&hellip;"
        elif np.isfinite(summary["mean_width"]):
            width = fmt(summary["mean_width"])
        else:
            width = "none (no little bags)"
        self.ridge_value.value = f"<b>{fmt(s.ridge_penalty, 3)}</b>"
        value = self._slider_value(s.ridge_penalty)
        if not np.isclose(self.ridge_slider.value, value):
            self.ridge_slider.value = value
        self.readout_html.value = (
            f"<table><tr><td>ridge penalty</td><td class='hedgerow-value'>"
            f"{fmt(summary['ridge_penalty'], 3)}</td></tr>"
            f"<tr><td>out-of-bag RMSE</td><td class='hedgerow-value'>"
            f"{fmt(summary['oob_rmse'])}</td></tr>"
            f"<tr><td>mean width of {100 * summary['level']:.0f}% intervals "
            f"({summary.get('interval', 'clt').replace('_', ' ')})</td>"
            f"<td class='hedgerow-value'>{width}</td></tr>"
            f"<tr><td>rows with an out-of-bag prediction</td><td>{summary['n_rows']}</td></tr>"
            f"</table>")
        self.verdict_html.value = (VERDICT_PENDING if verdict is None
                                   else f"<p>{html.escape(verdict.conclusion)}</p>")

    # -- the tuning surface (one background refit per subsample rate) -------------------
    def _build_surface(self):
        self.surface_button = W.Button(description="fill the surface",
                                       layout=W.Layout(width="160px"))
        self.surface_button.on_click(self._on_surface_clicked)
        self.surface_cancel_button = W.Button(description="stop filling", disabled=True,
                                              layout=W.Layout(width="120px"))
        self.surface_cancel_button.on_click(self._on_surface_cancel_clicked)
        self.surface_measure = W.ToggleButtons(options=list(SURFACE_MEASURES),
                                               style={"button_width": "170px"})
        self.surface_measure.observe(lambda ch: self._draw_surface(), "value")
        self.surface_progress = W.FloatProgress(value=0.0, min=0.0, max=1.0,
                                                layout=W.Layout(width="160px"))
        self.surface_note = W.HTML()
        n = len(SURFACE_PENALTIES)
        head = [W.HTML("<small>rate \\ penalty</small>")] + [
            W.HTML(f"<b>{fmt(lam, 3)}</b>") for lam in SURFACE_PENALTIES]
        self.surface_cells = {}
        body = []
        for rate in SURFACE_RATES:
            body.append(W.HTML(f"<b>{fmt(rate, 3)}</b>"))
            for lam in SURFACE_PENALTIES:
                b = W.Button(description="", layout=W.Layout(width="98%", height="30px"))
                b.add_class(CSS.surface_cell)
                b.on_click(lambda _b, rate=rate, lam=lam: self._on_surface_cell(rate, lam))
                self.surface_cells[(rate, lam)] = b
                body.append(b)
        self.surface_grid = W.GridBox(head + body, layout=W.Layout(
            grid_template_columns=f"90px repeat({n}, 110px)", grid_gap="2px"))
        self.surface_grid.add_class(CSS.surface)
        self._draw_surface()

    def _on_surface_clicked(self, button):
        with self._shown_errors("filling the tuning surface"):
            self.fill_surface()

    def _on_surface_cancel_clicked(self, button):
        with self._shown_errors("stopping the tuning surface"):
            self._session.cancel_jobs("surface column")
            self._draw_surface()

    def fill_surface(self):
        """Ask the session for the surface's missing columns; return the jobs."""
        jobs = self._session.request_surface(SURFACE_RATES, SURFACE_PENALTIES)
        self._draw_surface()
        return jobs

    def _on_surface_cell(self, rate, lam):
        with self._shown_errors("loading a surface setting"):
            self._session.load_setting(rate, lam)

    def _on_surface_job(self, job):
        if job.outcome == "failed":
            self.error = f"tuning surface: {job.message}"
        self._draw_surface(job)

    def _draw_surface(self, job=None):
        s = self._session
        frame = s.surface_frame(SURFACE_PENALTIES)
        column = SURFACE_MEASURES[self.surface_measure.value]
        values = {(float(r), float(lam)): v for r, lam, v in zip(
            frame["subsample_rate"], frame["ridge_penalty"], frame[column], strict=True)}
        finite = [v for v in values.values() if np.isfinite(v)]
        lo, hi = (min(finite), max(finite)) if finite else (0.0, 1.0)
        p = s.model.get_params()
        current_rate = float(p["subsample_rate"])
        # the current penalty is framed in the nearest column (in log terms; 0 is its own)
        lams = np.asarray(SURFACE_PENALTIES, dtype=float)
        lam = float(s.ridge_penalty)
        near = lams[np.argmin(np.abs(np.log10(np.maximum(lams, 1e-6)) -
                                     np.log10(max(lam, 1e-6))))]
        for (rate, cell_lam), b in self.surface_cells.items():
            v = values.get((float(rate), float(cell_lam)))
            share = (v - lo) / (hi - lo) if v is not None and hi > lo else (
                0.0 if v is not None else None)
            b.style.button_color = sequential_colour(share)
            b.style.text_color = "#ffffff" if share is not None and share > 0.55 else "#111111"
            b.description = "…" if v is None else fmt(v, 4)
            b.tooltip = (f"subsample rate {fmt(rate, 3)}, ridge penalty {fmt(cell_lam, 3)}"
                         + ("" if v is None else f": {self.surface_measure.value} {fmt(v, 4)}"))
            current = rate == current_rate and cell_lam == near
            b.layout.border = "3px solid #111111" if current else ""
        alive = s.surface_pending()
        done = len({float(r) for r in frame["subsample_rate"]})
        running = job.progress if job is not None and job.outcome == "running" else 0.0
        self.surface_progress.value = min((done + running) / len(SURFACE_RATES), 1.0)
        self.surface_cancel_button.disabled = not alive
        self.surface_note.value = (
            f"<small>{done} of {len(SURFACE_RATES)} subsample rates filled"
            + (" (refitting in the background)" if alive else "")
            + f"; colour: {html.escape(self.surface_measure.value)} (darker = larger); "
              f"the numbers of <code>tuning_surface</code> with this forest's other "
              f"settings</small>")

    # -- coverage readout (a button; runs in the background) ---------------------------
    def _on_coverage_clicked(self, button):
        with self._shown_errors("starting the coverage readout"):
            self.start_coverage()

    def _on_coverage_cancel_clicked(self, button):
        with self._shown_errors("stopping the coverage readout"):
            self.cancel_coverage()

    def cancel_coverage(self):
        """Ask a running coverage readout to stop after its current replication."""
        self._session.cancel_jobs("coverage")

    def _show_coverage_availability(self):
        """Disable the coverage readout, saying why, for a forest without little bags."""
        if self.coverage_status == "running":
            return  # the run in progress finishes, and says what it found
        if has_little_bags(self._session.model):
            self.coverage_button.disabled = False
            if self.coverage_html.value == NO_BAGS_NOTE:
                self.coverage_html.value = "<small>not run yet</small>"
        else:
            self.coverage_button.disabled = True
            self.coverage_html.value = NO_BAGS_NOTE

    def start_coverage(self):
        """Ask the session for the coverage readout of the current forest; return the job.

        Progress arrives after every replication; :meth:`cancel_coverage` (the stop
        button) ends the run after the current one and shows the replications done.
        None, with the button disabled and the reason shown, for a forest without little
        bags (its intervals need them).
        """
        if not has_little_bags(self._session.model):
            self._show_coverage_availability()
            return None
        self.coverage_status, self.coverage_progress.bar_style = "running", "info"
        self.coverage_progress.value, self.coverage_button.disabled = 0.0, True
        self.coverage_cancel_button.disabled = False
        self.coverage_html.value = "<small>running&hellip;</small>"
        return self._session.request_coverage(int(self.coverage_reps))

    def _on_coverage_job(self, job):
        if job is not self._session.latest_job("coverage"):
            return
        if job.outcome == "running":
            self.coverage_progress.value = job.progress
        elif job.outcome == "failed":
            self._coverage_failed(job.message)
        elif job.result is not None:
            self._coverage_done(*job.result)
        elif job.outcome == "cancelled":  # stopped before its first replication
            self.coverage_status, self.coverage_button.disabled = "cancelled", False
            self.coverage_cancel_button.disabled = True
            self.coverage_progress.bar_style = "warning"
            self.coverage_html.value = "<small>stopped before it started</small>"

    def _coverage_failed(self, message):
        self.coverage_status, self.coverage_button.disabled = "failed", False
        self.coverage_cancel_button.disabled = True
        self.coverage_progress.bar_style = "danger"
        self.error = f"coverage readout failed: {message}"

    def _coverage_done(self, rep, settings):
        self.coverage_button.disabled, self.coverage_cancel_button.disabled = False, True
        if rep.reps_done < rep.reps:
            self.coverage_status, self.coverage_progress.bar_style = "cancelled", "warning"
        else:
            self.coverage_status, self.coverage_progress.bar_style = "done", "success"
        self.coverage_progress.value = rep.reps_done / rep.reps
        rows = "".join(
            f"<tr><td>{html.escape(r['method'])}</td>"
            f"<td>{html.escape(str(r.get('interval', '')))}</td><td>{html.escape(r['part'])}</td>"
            f"<td class='hedgerow-value'>{fmt(r['coverage'], 3)}</td>"
            f"<td>{fmt(r['lower'], 3)} to {fmt(r['upper'], 3)}</td><td>{r['n']}</td>"
            f"<td class='hedgerow-flag'>{html.escape(str(r.get('flag', '')))}</td></tr>"
            for _, r in rep.frame.iterrows())
        self.coverage_html.value = (
            f"<small>{html.escape(rep.mode)}, {rep.reps_done} of {rep.reps} replications, "
            f"nominal {100 * rep.level:.0f}%; computed for: {html.escape(settings)}</small>"
            f"<table><tr><th>method</th><th>interval</th><th>rows</th><th>coverage</th>"
            f"<th>95% binomial interval</th><th>n</th><th>flag</th></tr>{rows}</table>")
