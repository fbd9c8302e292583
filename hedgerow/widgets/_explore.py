"""``explore``: every view of one session in a single tabbed widget."""

from __future__ import annotations

import ipywidgets as W

from hedgerow.widgets._edges_view import EdgesView
from hedgerow.widgets._probe_view import ProbeView
from hedgerow.widgets._session import ExploreSession
from hedgerow.widgets._tuning_view import TuningView
from hedgerow.widgets._verdict_view import VerdictView
from hedgerow.widgets._weights_view import WeightsView

__all__ = ["Explorer", "explore"]

TAB_TITLES = ("probe", "neighbour weights", "edges", "tuning", "verdict")


class Explorer(W.Tab):
    """The tabbed widget ``explore`` returns; each view is an attribute."""

    def __init__(self, session, *, feature=None):
        self.session = session
        self.probe_view = ProbeView(session, feature=feature)
        self.weights_view = WeightsView(session)
        self.edges_view = EdgesView(session)
        self.tuning_view = TuningView(session)
        self.verdict_view = VerdictView(session)
        views = [self.probe_view, self.weights_view, self.edges_view, self.tuning_view,
                 self.verdict_view]
        super().__init__(children=views, titles=TAB_TITLES)
        self.add_class("hedgerow-explorer")

    @property
    def views(self):
        return list(self.children)


def explore(X, y, *, model=None, feature=None, compare=True, refit_delay=0.5,
            **forest_params) -> Explorer:
    """Return an ``Explorer``: probe, neighbour weights, edges, tuning and verdict views.

    Parameters
    ----------
    X, y : training data.
    model : a fitted ``LocalLinearForestRegressor`` on (X, y); None fits one with
        ``forest_params`` (default 200 trees, ``random_state=0``).
    feature : column (name or index) on the probe view's x-axis (default: the first
        column of the local line).
    compare : also fit Nadaraya-Watson and kernel local linear regression.
    refit_delay : seconds a settings change waits for the next before refitting.
    """
    session = ExploreSession(X, y, model=model, compare=compare, refit_delay=refit_delay,
                             **forest_params)
    return Explorer(session, feature=feature)
