"""What every view shares: the session, an error area and a line saying what it reflects."""

from __future__ import annotations

import contextlib
import html
import logging
import time

import bqplot as bq
import ipywidgets as W
import numpy as np
import traitlets as t

from hedgerow.widgets._style import CSS

__all__ = ["DRAG_SKETCH_INTERVAL", "FIGURE_MARGIN", "ProbeDrag", "View", "clamped",
           "held", "plain_figure"]

#: Margins (pixels) of the views' two-axis figures.
FIGURE_MARGIN = {"top": 10, "bottom": 45, "left": 70, "right": 20}

log = logging.getLogger("hedgerow.widgets")

#: Least time (s) from one drawing to the next while a probe is dragged: drag events
#: that arrive sooner are skipped, so a burst of them never delays the release's drawing.
DRAG_SKETCH_INTERVAL = 0.05


@contextlib.contextmanager
def held(*marks):
    """Hold the syncs of several marks: one message, one redraw each."""
    with contextlib.ExitStack() as stack:
        for m in marks:
            stack.enter_context(m.hold_sync())
        yield


def powers_of_ten(low, high) -> np.ndarray:
    """Whole powers of ten from the one at or below ``low`` to the one at or above ``high``.

    The ticks of a log axis: labelled plainly ("0.001", "1", "100"), they never run
    together as every 2 and 5 between them would.
    """
    lo, hi = np.floor(np.log10(low)), np.ceil(np.log10(max(high, low)))
    return 10.0 ** np.arange(lo, hi + 1)


#: d3 format of log-axis tick labels: plain digits, no trailing zeros ("0.01", "100").
LOG_TICK_FORMAT = "~g"


def plain_figure(marks, x_scale, y_scale, x_label, y_label, *, y_format=".3g",
                 width="520px", height="240px", margin=None, x_ticks=None):
    """Return a bqplot figure of ``marks`` with a labelled x axis and vertical y axis.

    ``x_ticks``: tick values of the x axis (for a log axis, ``powers_of_ten``), labelled
    with ``LOG_TICK_FORMAT``.
    """
    x_axis = (bq.Axis(scale=x_scale, label=x_label) if x_ticks is None else
              bq.Axis(scale=x_scale, label=x_label, tick_values=np.asarray(x_ticks, float),
                      tick_format=LOG_TICK_FORMAT))
    return bq.Figure(
        marks=list(marks), animation_duration=0,
        axes=[x_axis,
              bq.Axis(scale=y_scale, orientation="vertical", label=y_label,
                      tick_format=y_format)],
        fig_margin=dict(margin or FIGURE_MARGIN), layout=W.Layout(width=width, height=height))


def clamped(value, column) -> float:
    """Return ``value`` as a float inside the range of the training ``column``'s values."""
    return float(np.clip(value, np.min(column), np.max(column)))


class ProbeDrag:
    """The drag handlers of a probe marker moved along the x-axis (a bqplot ``Scatter``
    with ``enable_move=True, restrict_x=True``; wire ``on_drag(self._on_probe_dragged)``
    and ``on_drag_end(self._on_probe_moved)``).

    A drag step draws only the cheap parts with the probe at the dragged value
    (``sketch_probe(value)``, which sets the ``sketch_x`` trait), at most once per
    ``DRAG_SKETCH_INTERVAL``; the release moves the probe (``move_probe(value)``, True
    when the probe changed), and a release where the drag started redraws the view
    (``_redraw()``) so the sketch goes. Failures are shown by ``_shown_errors(what)``.
    """

    _sketched_at = -np.inf

    def _on_probe_dragged(self, mark, event):
        """A drag step of the probe marker: draw the cheap parts there (throttled)."""
        if time.perf_counter() - self._sketched_at < DRAG_SKETCH_INTERVAL:
            return
        with self._shown_errors("dragging the probe"):
            self.sketch_probe(float(event["point"]["x"]))
        self._sketched_at = time.perf_counter()

    def _on_probe_moved(self, mark, event):
        """Drag end of the probe marker: move the probe along the shown column."""
        with self._shown_errors("moving the probe"):
            moved = self.move_probe(float(event["point"]["x"]))
            if self.sketch_x is not None and not moved:
                self._redraw()  # released where it started: the sketch goes
        self._sketched_at = -np.inf


class View(W.VBox):
    """Base of the views: a VBox with a session, an error area and a settings line."""

    error = t.Unicode("", help="Last error shown in the view's error area ('' when none).")

    def __init__(self, session, **kwargs):
        super().__init__(**kwargs)
        self._session = session
        self._error_area = W.HTML(layout=W.Layout(display="none"))
        self._error_area.add_class(CSS.error)
        self._settings_line = W.HTML()
        self._settings_line.add_class(CSS.settings)
        session.observe(self._on_settings_changed,
                        names=["settings", "refit_status", "smoothers_message"])

    _error_depth = 0

    @contextlib.contextmanager
    def _shown_errors(self, what):
        """Catch an exception of a callback: log it and show it in the error area.

        The outermost callback clears the area first; a failure anywhere inside it
        (including nested observers) stays shown until the next action succeeds.
        """
        if self._error_depth == 0:
            self.error = ""
        self._error_depth += 1
        try:
            yield
        except Exception as exc:
            log.exception("%s failed", what)
            self.error = f"{what} failed: {type(exc).__name__}: {exc}"
        finally:
            self._error_depth -= 1

    @t.observe("error")
    def _on_error_changed(self, change):
        self._error_area.value = (f"<div style='color:#8b1a1a;border-left:3px solid #8b1a1a;"
                                  f"padding-left:6px'>{html.escape(change['new'])}</div>")
        self._error_area.layout.display = "" if change["new"] else "none"

    def _follow(self, names):
        """Draw now, and again whenever one of the session traits ``names`` changes."""
        self._session.observe(self._on_changed, names=names)
        self._redraw()
        self._on_settings_changed()

    def _on_changed(self, change):
        self._redraw()

    def _redraw_when_in(self, job, what):
        """Redraw once a session job for the current state is in; show it if it failed."""
        s = self._session
        if job.outcome == "failed":
            self.error = f"{what}: {job.message}"
        elif job.outcome == "done" and job.key == (s.generation, s.ridge_penalty):
            self._redraw()

    def _redraw(self):  # pragma: no cover - views that follow the session override it
        raise NotImplementedError

    def _on_settings_changed(self, change=None):
        s = self._session
        busy = " (a refit is running; this view shows the forest above)" \
            if s.refit_status in ("waiting", "running") else ""
        pending = f"; {s.smoothers_message}" if s.smoothers_message else ""
        text = html.escape(s.describe_settings() + busy + pending)
        self._settings_line.value = f"<small style='color:#555'>{text}</small>"
