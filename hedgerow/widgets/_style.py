"""Presentation only: the palette, CSS class names and weight-to-marker scaling."""

from __future__ import annotations

import html

import numpy as np

# the palette lives in the ground layer so the static report shares it
from hedgerow._format import format_number
from hedgerow._palette import METHOD_COLOURS, METHOD_DASHES, ROW_COLOUR, colour_of, dash_of

__all__ = ["METHOD_COLOURS", "METHOD_DASHES", "ROW_COLOUR", "colour_of", "dash_of",
           "marker_scaling", "display_rows", "DISPLAY_LIMIT", "CSS", "swatch", "fmt",
           "axis_top"]

PROBE_COLOUR = "#111111"  # near black: the probe marker
HIGHLIGHT_COLOUR = "#111111"

#: Above this many rows the scatter shows a fixed subsample (weights still use every row).
DISPLAY_LIMIT = 5000

#: What a view shows while the session's runner cross-fits the verdict.
VERDICT_PENDING = ("<p><i>verdict: cross-fitting the forests fold by fold in the "
                   "background&hellip;</i></p>")


class CSS:
    """CSS classes on the widgets tests and users select on."""

    error = "hedgerow-error"
    probe_readout = "hedgerow-probe-readout"
    probe_figure = "hedgerow-probe-figure"
    settings = "hedgerow-settings"
    tuning_readout = "hedgerow-tuning-readout"
    refit_status = "hedgerow-refit-status"
    verdict_conclusion = "hedgerow-verdict-conclusion"
    coverage_result = "hedgerow-coverage-result"
    ridge_slider = "hedgerow-ridge-slider"
    ridge_value = "hedgerow-ridge-value"
    decision = "hedgerow-decision"
    decision_table = "hedgerow-decision-table"
    surface = "hedgerow-surface"
    surface_cell = "hedgerow-surface-cell"
    saved_output = "hedgerow-saved-output"
    saved_note = "hedgerow-saved-note"
    trees_slider = "hedgerow-trees-slider"
    refit_cancel = "hedgerow-refit-cancel"
    legend = "hedgerow-legend"


def marker_scaling(weights, *, floor=0.04, opacity_floor=0.12):
    """Return ``(size, opacity)`` per row: marker area and opacity growing with weight.

    Pure presentation: weight over the largest weight, lifted to a floor so that rows
    the probe ignores stay visible as faint dots.
    """
    w = np.asarray(weights, dtype=np.float64)
    top = w.max() if w.size and w.max() > 0 else 1.0
    share = np.clip(w / top, 0.0, 1.0)
    size = floor + (1.0 - floor) * share
    opacity = opacity_floor + (1.0 - opacity_floor) * np.sqrt(share)
    return size, opacity


def axis_top(values, *, pad=0.08) -> float:
    """Return the top of a count axis starting at 0: the largest value plus ``pad`` of it.

    Pure presentation. Grouped bqplot bars do not widen their y scale to the data
    (bqplot 0.13's front end reads a field its grouped bars never set: the scale's domain
    stays at the base, every bar has no height), so their scale gets this as ``max``.
    """
    v = np.asarray(values, dtype=np.float64)
    top = float(np.nanmax(v)) if v.size and np.isfinite(v).any() else 0.0
    return top * (1.0 + pad) if top > 0 else 1.0


def display_rows(n: int, limit: int = DISPLAY_LIMIT) -> np.ndarray:
    """Return the rows the scatter draws: all of them, or a fixed subsample of ``limit``."""
    if n <= limit:
        return np.arange(n)
    return np.sort(np.random.default_rng(20240).choice(n, size=limit, replace=False))


def swatch(name: str, label: bool = True) -> str:
    """Return HTML: the method's colour square, followed by its name if ``label``."""
    c = colour_of(name)
    box = (f"<span style='display:inline-block;width:0.9em;height:0.9em;"
           f"background:{c};margin-right:0.35em;vertical-align:-0.1em'></span>")
    return box + (html.escape(name) if label else "")


def fmt(v, digits=4) -> str:
    """Return a number for display ('-' when missing): the shared plain-number rule."""
    return format_number(v, digits)


def sequential_colour(share) -> str:
    """Return a light-to-dark blue for ``share`` in [0, 1] (grey when not finite)."""
    if share is None or not np.isfinite(share):
        return "#e6e6e6"
    share = float(np.clip(share, 0.0, 1.0))
    light, dark = np.array([0xf2, 0xf6, 0xfb]), np.array([0x1f, 0x3d, 0x73])
    r, g, b = (light + share * (dark - light)).round().astype(int)
    return f"#{r:02x}{g:02x}{b:02x}"


#: Rules the explorer's second output carries (see ``Explorer._ipython_display_``). In
#: JupyterLab / Notebook 7 a widget output whose model is gone is the output element itself
#: with the class ``jupyter-widgets`` and the manager's error as text; a live or loading
#: one does not have that class (a live view's own elements do, one level down). Only
#: that error state right before a saved note is hidden, and only then the note is shown.
SAVED_NOTE_RULES = (
    ".jp-OutputArea-child:has(.hedgerow-saved-note){display:none}"
    ".jp-OutputArea-child:has(> .jp-OutputArea-output.jupyter-widgets)"
    ":has(+ .jp-OutputArea-child .hedgerow-saved-note){display:none}"
    ".jp-OutputArea-child:has(> .jp-OutputArea-output.jupyter-widgets)"
    " + .jp-OutputArea-child:has(.hedgerow-saved-note){display:flex !important}"
    ".jp-OutputArea-child:has(> .jp-OutputArea-output.jupyter-widgets)"
    " + .jp-OutputArea-child .hedgerow-saved-note"
    "{max-height:none !important;overflow:visible !important}"
)
