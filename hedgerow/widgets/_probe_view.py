"""Probe view: the training rows sized by their forest weight at a draggable probe."""

from __future__ import annotations

import html

import bqplot as bq
import ipywidgets as W
import numpy as np
import traitlets as t

from hedgerow.widgets._base import ProbeDrag, View, clamped, held
from hedgerow.widgets._style import (
    CSS,
    PROBE_COLOUR,
    ROW_COLOUR,
    colour_of,
    dash_of,
    display_rows,
    fmt,
    marker_scaling,
    swatch,
)

__all__ = ["ProbeView"]

#: Table cells of the readout: room between columns so headers never run together.
CELL = "padding:2px 18px 2px 0"

#: Significant digits the coordinate boxes show (the probe keeps full precision).
COORD_DIGITS = 4


class ProbeView(ProbeDrag, View):
    """Training rows against one column, weighted at the probe, with every method's slice.

    Drag the black triangle along the x-axis to move the probe; click a row to put the
    probe's other coordinates at that row's values; edit any coordinate in the panel.
    While the triangle is dragged only the neighbour weights and the local line follow it
    (``sketch_probe``); the slices, band and readout table follow on release.
    """

    feature = t.Unicode(help="Column on the x-axis; the probe moves along it.")
    probe_x = t.List(t.Float(), help="The probe point, one value per column.")
    anchor_row = t.Int(-1, help="Row whose values the probe takes (-1: column medians).")
    readout = t.Dict(help="Per method: prediction, half_width and ess, as the readout shows.")
    shown_rows = t.Int(0, help="Rows drawn in the scatter (a subsample above 5,000).")
    sketch_x = t.Float(None, allow_none=True,
                       help="Where the dragged probe's weights and line are drawn (None: "
                            "the figure shows probe_x).")

    def __init__(self, session, *, feature=None, **kwargs):
        super().__init__(session, **kwargs)
        s = session
        self._names = list(s.feature_names)
        self._rows = display_rows(s.X_train.shape[0])
        self.shown_rows = int(self._rows.size)
        if feature is None:
            feature = self._default_column()
        self.feature = self._names[feature] if isinstance(feature, int) else str(feature)
        self._build_figure()
        self._build_controls()
        t.link((s, "probe_x"), (self, "probe_x"))
        s.observe(self._on_model_changed, names=["generation", "ridge_penalty", "compared"])
        self._redraw()
        note = "" if self._rows.size == s.X_train.shape[0] else (
            f"<small>showing a fixed subsample of {self._rows.size:,} of "
            f"{s.X_train.shape[0]:,} rows; weights use every row</small>")
        self.children = [W.HTML(f"<b>probe</b> {note}"), self._error_area,
                         W.HBox([self._feature_pick, self._medians_button]),
                         self.figure, W.HBox([self._toggles, self._readout_html]),
                         self._panel, self._settings_line]
        self._on_settings_changed()

    def _default_column(self):
        cols = list(self._session.model.correction_features_)
        return int(cols[0]) if cols else 0

    # -- construction ------------------------------------------------------------------
    def _build_figure(self):
        s = self._session
        self._xs, self._ys = bq.LinearScale(), bq.LinearScale()
        self._size_scale = bq.LinearScale(min=0.0, max=1.0)
        sc = {"x": self._xs, "y": self._ys}
        yv = s.y_train[self._rows]
        self.rows_mark = bq.Scatter(
            x=np.zeros(self._rows.size), y=yv, scales={**sc, "size": self._size_scale},
            colors=[ROW_COLOUR], default_size=120, stroke="white", stroke_width=0.5,
            size=np.ones(self._rows.size), opacities=np.ones(self._rows.size),
            interactions={"click": "select"}, unselected_style={"opacity": 1.0},
            tooltip=bq.Tooltip(fields=["x", "y"], formats=[".3g", ".3g"]),
        )
        self.rows_mark.on_element_click(self._on_row_clicked)
        self.band_mark = bq.Lines(x=np.zeros(2), y=np.zeros((2, 2)), scales=sc,
                                  fill="between", colors=[colour_of("local linear forest")] * 2,
                                  fill_colors=[colour_of("local linear forest")],
                                  fill_opacities=[0.18], opacities=[0.0, 0.0],
                                  labels=["95% band"])
        self.slice_marks = {}
        for name in s.planned_methods():  # smoothers not in yet are drawn when they are
            self.slice_marks[name] = bq.Lines(
                x=np.zeros(2), y=np.zeros(2), scales=sc, colors=[colour_of(name)],
                line_style=dash_of(name), stroke_width=2.2, labels=[name],
                interpolation="step-after" if name.startswith("honest") else "linear")
        self.line_mark = bq.Lines(x=np.zeros(2), y=np.zeros(2), scales=sc, stroke_width=5,
                                  colors=[colour_of("local linear forest")], opacities=[0.9],
                                  labels=["local line"])
        self.point_mark = bq.Scatter(x=np.zeros(1), y=np.zeros(1), scales=sc, marker="circle",
                                     colors=[colour_of("local linear forest")],
                                     stroke=PROBE_COLOUR, default_size=70)
        self.probe_mark = bq.Scatter(x=np.zeros(1), y=np.zeros(1), scales=sc,
                                     marker="triangle-up", colors=[PROBE_COLOUR],
                                     default_size=260, enable_move=True, restrict_x=True,
                                     tooltip=bq.Tooltip(fields=["x"], formats=[".3g"]))
        self.probe_mark.on_drag(self._on_probe_dragged)
        self.probe_mark.on_drag_end(self._on_probe_moved)
        self._x_axis = bq.Axis(scale=self._xs, label="")
        axes = [self._x_axis, bq.Axis(scale=self._ys, orientation="vertical",
                                      label=str(getattr(s._y, "name", None) or "y"))]
        marks = [self.rows_mark, self.band_mark, *self.slice_marks.values(), self.line_mark,
                 self.point_mark, self.probe_mark]  # probe last: last path.dot in the DOM
        self.figure = bq.Figure(marks=marks, axes=axes, animation_duration=0,
                                fig_margin={"top": 20, "bottom": 45, "left": 60, "right": 20},
                                layout=W.Layout(width="100%", height="420px"))
        self.figure.add_class(CSS.probe_figure)
        lo, hi = float(np.min(yv)), float(np.max(yv))
        pad = 0.06 * (hi - lo or 1.0)
        self._ys.min, self._ys.max = lo - 2 * pad, hi + pad

    def _build_controls(self):
        self._feature_pick = W.Dropdown(options=self._names, value=self.feature,
                                        description="column",
                                        layout=W.Layout(width="260px"))
        t.link((self, "feature"), (self._feature_pick, "value"))
        self._medians_button = W.Button(description="probe at column medians",
                                        layout=W.Layout(width="220px"))
        self._medians_button.on_click(self._on_medians_clicked)
        self._toggles = W.VBox([])
        self._toggles.add_class(CSS.legend)
        boxes = []
        for name, mark in [*self.slice_marks.items(), ("95% band", self.band_mark),
                           ("local line", self.line_mark)]:
            colour = "local linear forest" if name in ("95% band", "local line") else name
            # a width for the whole name ("auto" cut it short); the swatch may not shrink
            # (a flex row squeezed it to nothing once the box redrew)
            box = W.Checkbox(value=True, indent=False, description=name,
                             layout=W.Layout(width=f"{max(12, len(name) + 4)}ch"))
            W.jslink((box, "value"), (mark, "visible"))
            chip = W.HTML(swatch(colour, label=False),
                          layout=W.Layout(width="18px", min_width="18px", flex="0 0 auto"))
            boxes.append(W.HBox([chip, box]))
        self._toggles.children = boxes
        self._readout_html = W.HTML(layout=W.Layout(margin="0 0 0 24px"))
        self._readout_html.add_class(CSS.probe_readout)
        # text boxes: the probe keeps full precision, the boxes show COORD_DIGITS
        # significant digits; a typed number is taken as typed
        self._coord_boxes = [W.Text(description=n, description_allow_html=False,
                                    continuous_update=False, tooltip=n,
                                    layout=W.Layout(width="300px"),
                                    style={"description_width": "170px"})
                             for n in self._names]
        for j, box in enumerate(self._coord_boxes):
            box.observe(lambda ch, j=j: self._on_coordinate_edited(j, ch["new"]), "value")
        self._panel = W.GridBox(self._coord_boxes, layout=W.Layout(
            grid_template_columns="repeat(3, 310px)"))

    # -- front-end and trait handlers (the drag handlers are ProbeDrag's) -----------------
    def sketch_probe(self, value):
        """Draw the neighbour weights and the local line with the probe at ``value``.

        ``value`` is in the shown column (clamped to the data), the other coordinates are
        the probe's. From ``diagnostics.probe_sketch``; ``probe_x``, the slices, the band,
        the coordinate boxes and the readout table stay as they are until the probe is
        moved (``move_probe``, the release of a drag).
        """
        from hedgerow.diagnostics import local_line, neighbourhood_span

        s = self._session
        j = self._names.index(self.feature)
        col = s.X_train[:, j]
        x = list(self.probe_x)
        x[j] = clamped(value, col)
        rep = s.probe_sketch(x)
        size, opacity = marker_scaling(rep.weights.toarray().ravel()[self._rows])
        lx, ly = local_line(rep, j, None, within=neighbourhood_span(rep, s.X_train, j),
                            method=rep.methods[0].name)
        with held(self.rows_mark, self.line_mark, self.point_mark):
            self.rows_mark.size, self.rows_mark.opacities = size, opacity
            self.line_mark.x, self.line_mark.y = lx, ly
            self.point_mark.x = np.array([x[j]])
            self.point_mark.y = np.array([rep.methods[0].prediction])
        self.sketch_x = x[j]

    def _on_row_clicked(self, mark, event):
        """Click on a training row: pin the probe's coordinates to that row."""
        with self._shown_errors("pinning the probe to a row"):
            self.anchor_row = int(self._rows[int(event["data"]["index"])])

    def _on_medians_clicked(self, button):
        with self._shown_errors("moving the probe to the medians"):
            self.anchor_row = -1
            self._pin(-1)

    def _on_coordinate_edited(self, j, value):
        if self._syncing:
            return
        with self._shown_errors(f"editing {self._names[j]}"):
            try:
                value = float(str(value).replace(",", "").strip())
            except ValueError:
                raise ValueError(f"The coordinate '{self._names[j]}' needs a number. Got "
                                 f"{value!r}.") from None
            if not np.isfinite(value):
                raise ValueError(f"The coordinate '{self._names[j]}' needs a finite number. "
                                 f"Got {value!r}.")
            if value == self.probe_x[j] or value == float(fmt(self.probe_x[j],
                                                               COORD_DIGITS).replace(",", "")):
                self._syncing = True
                try:  # the shown rounding of the current value: nothing moved
                    self._coord_boxes[j].value = fmt(self.probe_x[j], COORD_DIGITS)
                finally:
                    self._syncing = False
                return
            x = list(self.probe_x)
            x[j] = float(value)
            self.probe_x = x

    _syncing = False

    def move_probe(self, value):
        """Put the probe's coordinate in the shown column at ``value`` (clamped to the data).

        Returns True when the probe moved.
        """
        j = self._names.index(self.feature)
        x = list(self.probe_x)
        x[j] = clamped(value, self._session.X_train[:, j])
        before = list(self.probe_x)
        self.probe_x = x
        return self.probe_x != before

    @t.validate("feature")
    def _check_feature(self, proposal):
        if proposal["value"] not in self._names:
            raise t.TraitError(f"The 'feature' must be one of {self._names}. "
                               f"Got {proposal['value']!r} instead.")
        return proposal["value"]

    @t.observe("anchor_row")
    def _on_anchor_changed(self, change):
        with self._shown_errors("pinning the probe"):
            self._pin(change["new"])

    def _pin(self, row):
        from hedgerow.diagnostics import probe_anchor

        anchor = probe_anchor(self._session.X_train, None if row < 0 else row)
        self.probe_x = [float(v) for v in anchor]

    @t.observe("probe_x", "feature")
    def _on_probe_changed(self, change):
        self._redraw()

    def _on_model_changed(self, change):
        self._redraw()

    # -- drawing -----------------------------------------------------------------------
    def _redraw(self):
        if not self.feature or not self.probe_x:
            return
        with self._shown_errors("drawing the probe view"):
            self._draw(self._session.scene(self.probe_x, self.feature))

    def _draw(self, scene):
        from hedgerow.diagnostics import local_line, neighbourhood_span

        s, j, rep = self._session, scene.feature_index, scene.report
        size, opacity = marker_scaling(rep.weights.toarray().ravel()[self._rows])
        # the local line where its neighbours are; the x range stays on the data
        lx, ly = local_line(rep, j, None, within=neighbourhood_span(rep, s.X_train, j))
        col = s.X_train[:, j]
        pad = 0.02 * (float(col.max() - col.min()) or 1.0)
        lo, hi = min(float(col.min()), float(rep.x[j])), max(float(col.max()), float(rep.x[j]))
        self._xs.min, self._xs.max = lo - pad, hi + pad
        band = scene.slices.method("local linear forest")
        with held(self.rows_mark, self.band_mark, self.line_mark, self.point_mark,
                  self.probe_mark, *self.slice_marks.values()):
            self._x_axis.label = self.feature
            self.rows_mark.x = s.X_train[self._rows, j]
            self.rows_mark.size, self.rows_mark.opacities = size, opacity
            self.band_mark.x = band["value"].to_numpy()
            self.band_mark.y = np.vstack([band["lower"].to_numpy(), band["upper"].to_numpy()])
            for name, mark in self.slice_marks.items():
                part = scene.slices.method(name)
                if part.empty:  # a smoother still fitting in the background
                    continue
                mark.x, mark.y = part["value"].to_numpy(), part["prediction"].to_numpy()
            self.line_mark.x, self.line_mark.y = lx, ly
            self.point_mark.x = np.array([rep.x[j]])
            self.point_mark.y = np.array([rep.method("local linear forest").prediction])
            self.probe_mark.x = np.array([rep.x[j]])
            self.probe_mark.y = np.array([self._ys.min])
        self.sketch_x = None
        self._syncing = True
        try:
            for box, v in zip(self._coord_boxes, rep.x, strict=True):
                box.value = fmt(float(v), COORD_DIGITS)
        finally:
            self._syncing = False
        self._write_readout(scene.readout, rep)

    def _write_readout(self, frame, rep):
        self.readout = {name: {"prediction": float(r["prediction"]),
                               "half_width": float(r["half_width"]), "ess": float(r["ess"])}
                        for name, r in frame.iterrows()}
        rows = "".join(
            f"<tr><td style='{CELL}'>{swatch(name)}</td><td class='hedgerow-value' "
            f"style='{CELL}'>{fmt(r['prediction'])} &plusmn; {fmt(r['half_width'], 3)}</td>"
            f"<td style='{CELL}'>{fmt(r['ess'], 3)}</td></tr>"
            for name, r in frame.iterrows())
        where = ", ".join(f"{n}={fmt(v, 3)}" for n, v in zip(self._names, rep.x, strict=True))
        notes = "".join(f"<br><small class='hedgerow-column-use'>{html.escape(n)}</small>"
                        for n in rep.column_use_notes())
        if rep.extrapolating:
            notes += (f"<br><strong class='hedgerow-outside'>{html.escape(rep.outside_note())}"
                      f"</strong>")
        self._readout_html.value = (
            f"<div><small>probe at {html.escape(where)}</small>"
            f"<table style='border-collapse:collapse'><tr><th align='left' style='{CELL}'>"
            f"method</th><th align='left' style='{CELL}'>prediction &plusmn; "
            f"{100 * rep.level:.0f}% half-width</th><th align='left' style='{CELL}'>"
            f"effective n</th></tr>{rows}</table>{notes}</div>")
