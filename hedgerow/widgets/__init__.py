"""Jupyter views of the diagnostics (needs the ``widgets`` extra: ipywidgets, bqplot).

``explore(X, y)`` returns every view in one tabbed widget; each view is also usable on
its own, built on an ``ExploreSession``. ``explore(X, y, treatment=w)`` returns the effect
explorer (``EffectExplorer`` on an ``EffectSession``), every tab with the effect caution.
"""

from hedgerow.widgets._decision_view import DecisionView
from hedgerow.widgets._edges_view import EdgesView
from hedgerow.widgets._effect_more_views import EffectEdgesView, EffectSlicesView
from hedgerow.widgets._effect_session import EffectSession
from hedgerow.widgets._effect_views import (
    EffectExplorer,
    EffectProbeView,
    EffectVerdictView,
    OverlapView,
)
from hedgerow.widgets._explore import SAVED_OUTPUT_NOTE, Explorer, explore
from hedgerow.widgets._probe_view import ProbeView
from hedgerow.widgets._session import ExploreSession, ProbeScene, RefitCancelled
from hedgerow.widgets._tuning_view import TuningView
from hedgerow.widgets._verdict_view import VerdictView
from hedgerow.widgets._weights_view import WeightsView

__all__ = ["DecisionView", "EdgesView", "EffectExplorer", "EffectProbeView", "EffectSession",
           "EffectVerdictView", "OverlapView", "EffectSlicesView", "EffectEdgesView",
           "ExploreSession", "Explorer", "ProbeScene", "ProbeView",
           "RefitCancelled", "SAVED_OUTPUT_NOTE", "TuningView", "VerdictView", "WeightsView",
           "explore"]
