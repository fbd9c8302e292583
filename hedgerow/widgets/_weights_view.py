"""Weights view: forest weights against kernel weights at the same probe."""

from __future__ import annotations

import bqplot as bq
import ipywidgets as W
import numpy as np

from hedgerow.widgets._base import View, held, plain_figure, powers_of_ten
from hedgerow.widgets._style import colour_of, dash_of, swatch

__all__ = ["WeightsView"]


class WeightsView(View):
    """Weight against distance to the probe, and cumulative weight against rank.

    A lopsided or far-reaching neighbourhood shows as weight at large distances; a
    concentrated one as a cumulative curve that rises steeply over the first ranks.
    """

    def __init__(self, session, **kwargs):
        super().__init__(session, **kwargs)
        # the two forests share their weights: one entry stands for both
        # smoothers still fitting in the background get their marks now, drawn when in
        self._methods = [n for n in session.planned_methods() if not n.startswith("honest")]
        dx, dy = bq.LinearScale(min=0.0), bq.LinearScale(min=0.0)
        rx, ry = bq.LogScale(), bq.LinearScale(min=0.0, max=1.0)
        self.weight_marks, self.cumulative_marks = {}, {}
        for name in self._methods:
            c = colour_of(name)
            self.weight_marks[name] = bq.Scatter(x=np.zeros(1), y=np.zeros(1),
                                                 scales={"x": dx, "y": dy}, colors=[c],
                                                 default_size=18, opacities=[0.6])
            self.cumulative_marks[name] = bq.Lines(x=np.ones(1), y=np.zeros(1),
                                                   scales={"x": rx, "y": ry}, colors=[c],
                                                   line_style=dash_of(name), stroke_width=2)
        side = {"width": "49%", "height": "320px",
                "margin": {"top": 10, "bottom": 45, "left": 65, "right": 15}}
        self.distance_figure = plain_figure(
            self.weight_marks.values(), dx, dy, "distance to the probe (standard deviations)",
            "weight", y_format=".2g", **side)
        self.rank_figure = plain_figure(
            self.cumulative_marks.values(), rx, ry, "rank (1 = heaviest row)",
            "cumulative weight", y_format=".0%",
            x_ticks=powers_of_ten(1, max(len(session.X_train), 10)), **side)
        legend = " &nbsp; ".join(
            swatch(n) + (" <small>(both forests)</small>" if n == "local linear forest" else "")
            for n in self._methods)
        self.children = [W.HTML(f"<b>neighbour weights</b> <small>{legend}</small>"),
                         self._error_area, W.HBox([self.distance_figure, self.rank_figure]),
                         self._settings_line]
        self._follow(["generation", "ridge_penalty", "probe_x", "compared"])

    def _redraw(self):
        with self._shown_errors("drawing the neighbour weights"):
            ready = set(self._session.slice_models())
            self._draw({m: self._session.weight_profile(m) for m in self._methods
                        if m in ready})

    def _draw(self, profiles):
        cols = next((p.attrs.get("distance_columns") for p in profiles.values()), None)
        if cols:
            shown = ", ".join(cols[:4]) + (f" and {len(cols) - 4} more" if len(cols) > 4
                                          else "")
            which = ("the local line's column" + ("s" if len(cols) > 1 else "")
                     if len(cols) < len(self._session.feature_names) else "all columns")
            self.distance_figure.axes[0].label = (
                f"distance to the probe in {which} ({shown}; standard deviations)")
        with held(*self.weight_marks.values(), *self.cumulative_marks.values()):
            for name, prof in profiles.items():
                self.weight_marks[name].x = prof["distance"].to_numpy()
                self.weight_marks[name].y = prof["weight"].to_numpy()
                self.cumulative_marks[name].x = prof["rank"].to_numpy().astype(float)
                self.cumulative_marks[name].y = prof["cumulative"].to_numpy()
