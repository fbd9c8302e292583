"""``explore``: every view of one session in a single tabbed widget."""

from __future__ import annotations

import html
import warnings

import ipywidgets as W

from hedgerow.snapshot import Snapshot
from hedgerow.widgets._decision_view import DecisionView
from hedgerow.widgets._edges_view import EdgesView
from hedgerow.widgets._probe_view import ProbeView
from hedgerow.widgets._session import ExploreSession
from hedgerow.widgets._style import CSS, SAVED_NOTE_RULES
from hedgerow.widgets._tuning_view import TuningView
from hedgerow.widgets._verdict_view import VerdictView
from hedgerow.widgets._weights_view import WeightsView

__all__ = ["Explorer", "explore", "SAVED_OUTPUT_NOTE"]

TAB_TITLES = ("decision", "probe", "neighbour weights", "edges", "tuning", "verdict")

#: What a saved output shows where the live explorer was (no kernel, no widget state).
SAVED_OUTPUT_NOTE = "hedgerow explorer: run the cell again to bring it back"


class Explorer(W.Tab):
    """The tabbed widget ``explore`` returns; each view is an attribute."""

    def __init__(self, session, *, feature=None):
        self.session = session
        self.probe_view = ProbeView(session, feature=feature)
        self.decision_view = DecisionView(session)
        self.weights_view = WeightsView(session)
        self.edges_view = EdgesView(session)
        self.tuning_view = TuningView(session)
        self.verdict_view = VerdictView(session)
        self._views = [self.decision_view, self.probe_view, self.weights_view,
                       self.edges_view, self.tuning_view, self.verdict_view]
        # each tab holds an empty box until it is first opened: a bqplot figure laid out
        # inside a hidden tab has no width and draws negative-width rectangles (console
        # errors); put in when its tab shows, it is laid out at its real size
        self._slots = [W.Box(layout=W.Layout(width="100%")) for _ in self._views]
        super().__init__(children=self._slots, titles=TAB_TITLES)
        self.add_class("hedgerow-explorer")
        self.observe(self._on_tab_opened, "selected_index")
        self._on_tab_opened()

    def _on_tab_opened(self, change=None):
        k = self.selected_index if self.selected_index is not None else 0
        if not self._slots[k].children:
            self._slots[k].children = [self._views[k]]

    def _repr_mimebundle_(self, **kwargs):
        """The widget's view reference plus a static note for front ends that cannot show it.

        A front end draws the widget-view entry when it has the widget's model; without a
        model (a saved output reopened, no widget state) a front end that picks another
        entry of the bundle shows the note instead of the widget's repr. See
        DEVELOPERS.md ("Saved outputs") for which front ends do.
        """
        bundle = super()._repr_mimebundle_(**kwargs)
        if bundle is None:  # a closed widget has no view to refer to
            return None
        bundle["text/plain"] = SAVED_OUTPUT_NOTE
        bundle["text/html"] = (f"<div class='{CSS.saved_output}'><em>"
                               f"{html.escape(SAVED_OUTPUT_NOTE)}</em></div>")
        return bundle

    def _ipython_display_(self, **kwargs):
        """Display the widget, then a note shown only where the widget cannot be drawn.

        JupyterLab draws a trusted saved output with the widget renderer even when the
        widget's model is gone (no kernel-side widget, no saved widget state), which
        writes "Error displaying widget: model not found" and never uses the bundle's
        other entries. The second output holds the note collapsed (an inline style that
        survives the sanitiser of untrusted outputs) and ``SAVED_NOTE_RULES``, which hide
        that error and show the note. Front ends without those classes, or where the
        rules are stripped, keep the second output collapsed.
        """
        from IPython.display import display

        bundle = self._repr_mimebundle_() if callable(self._repr_mimebundle_) else None
        if bundle is None:  # closed
            display({"text/plain": repr(self)}, raw=True)
            return
        display(bundle, raw=True)
        display({"text/html": (
            f"<style>{SAVED_NOTE_RULES}</style><div class='{CSS.saved_note}' "
            f"style='max-height:0;overflow:hidden'><em>{html.escape(SAVED_OUTPUT_NOTE)}"
            f"</em></div>")}, raw=True)

    def close(self):
        """Close the widget and cancel the session's background jobs (smoothers, ...)."""
        self.session.close()
        super().close()

    @property
    def views(self):
        """The views, in tab order (each is put in its tab when the tab is first opened)."""
        return list(self._views)

    # -- view state (what a snapshot records besides the session) -------------------------
    def _legend(self):
        """Return {legend entry: (checkbox, mark)} of the probe view's show/hide toggles."""
        pv = self.probe_view
        marks = {**pv.slice_marks, "95% band": pv.band_mark, "local line": pv.line_mark}
        out = {}
        for row in pv._toggles.children:
            box = row.children[-1]
            out[box.description] = (box, marks[box.description])
        return out

    def view_state(self) -> dict:
        """Return the column shown, the legend toggles and the active tab."""
        tab = self.selected_index
        return {"feature": self.probe_view.feature,
                "shown": {name: bool(box.value) for name, (box, _) in self._legend().items()},
                "tab": TAB_TITLES[tab] if tab is not None else None}

    def apply_view_state(self, *, feature=None, shown=None, tab=None):
        """Show ``feature`` on the probe view, set the legend toggles, open tab ``tab``.

        Unknown legend entries (a snapshot from a session with other methods) are skipped
        with a warning; an unknown column or tab is an error.
        """
        if tab is not None and tab not in TAB_TITLES:
            raise ValueError(f"The 'tab' parameter must be one of {list(TAB_TITLES)}. "
                             f"Got {tab!r} instead.")
        if feature is not None:
            self.probe_view.feature = feature  # validated by the view
        legend = self._legend()
        unknown = sorted(set(shown or {}) - set(legend))
        if unknown:
            warnings.warn(f"Legend entries {unknown} are not in this explorer; they were "
                          f"left out. Known: {sorted(legend)}.", UserWarning, stacklevel=2)
        for name, value in (shown or {}).items():
            if name in legend:
                box, mark = legend[name]
                box.value = bool(value)
                mark.visible = bool(value)  # the jslink does this once a front end is there
        if tab is not None:
            self.selected_index = TAB_TITLES.index(tab)


def explore(X, y, *, treatment=None, model=None, feature=None, compare=True, refit_delay=0.5,
            snapshot=None, allow_data_mismatch=False, **forest_params) -> Explorer:
    """Return an ``Explorer``: probe, neighbour weights, edges, tuning and verdict views.

    With ``treatment`` (0/1 or a continuous dose per row) return an ``EffectExplorer``
    instead: the effect probe, overlap, effect verdict, effect slices and effect edges of a
    ``TreatmentEffectForest`` (``model``: one fitted on (X, y, treatment), or None to fit
    one with ``forest_params``; ``feature`` the effect line's column; ``truth=`` a known
    effect function, invented data only, drawn in the slices). Every effect tab carries
    the effect caution: decision support, not advice; unconfoundedness is assumed and
    checked by nothing here; overlap is shown, not guaranteed.

    Parameters
    ----------
    X, y : training data.
    model : a fitted ``LocalLinearForestRegressor`` on (X, y); None fits one with
        ``forest_params`` (default 200 trees, ``random_state=0``).
    feature : column (name or index) on the probe view's x-axis (default: the first
        column of the local line).
    compare : also fit Nadaraya-Watson and kernel local linear regression.
    refit_delay : seconds a settings change waits for the next before refitting.
    snapshot : a ``hedgerow.snapshot.Snapshot`` or the path of a saved one. The explorer
        then fits the saved settings with the saved seed on (X, y) and restores the
        probe, column, ridge penalty, legend toggles, active tab and ``compare``; do not
        pass ``model``, ``feature`` or forest settings with it.
    allow_data_mismatch : with ``snapshot``, proceed (with a warning) when (X, y) differ
        from the snapshot's data fingerprint instead of raising.

    With ``treatment`` and ``snapshot`` (an effect snapshot: ``Snapshot.capture`` of an
    ``EffectExplorer`` or ``Snapshot.from_model(effect_forest, X, y, treatment=...)``)
    the effect forest is refitted with the saved settings and seed on (X, y, treatment),
    checked against the saved fingerprints of X, y and the treatment, and the probe,
    column and tab are restored.
    """
    if treatment is not None:
        return _effect_explorer(X, y, treatment, model=model, feature=feature,
                                snapshot=snapshot, compare=compare,
                                allow_data_mismatch=allow_data_mismatch, **forest_params)
    if snapshot is None:
        session = ExploreSession(X, y, model=model, compare=compare, refit_delay=refit_delay,
                                 **forest_params)
        return Explorer(session, feature=feature)
    snap = _load_snapshot(snapshot, model, feature, forest_params)
    if snap.estimator == "TreatmentEffectForest":
        raise ValueError("The 'snapshot' parameter holds a TreatmentEffectForest: pass its "
                         "'treatment' to open the effect explorer.")
    snap.check_data(X, y, allow_data_mismatch=allow_data_mismatch)
    if snap.estimator != "LocalLinearForestRegressor":
        raise ValueError(f"The 'snapshot' parameter must hold a LocalLinearForestRegressor "
                         f"to open in the explorer. Got {snap.estimator} instead; use "
                         f"snapshot.make_estimator() to refit it.")
    params = snap.make_estimator().get_params(deep=False)
    session = ExploreSession(X, y, compare=snap.view["compare"], refit_delay=refit_delay,
                             **params)
    view = snap.view
    probe = view["probe"]
    if probe is not None and len(probe) != session.X_train.shape[1]:
        warnings.warn("The snapshot's probe has another number of columns than X; the probe "
                      "starts at the column medians.", UserWarning, stacklevel=2)
        probe = None
    session.restore_view(probe=probe, ridge_penalty=view["ridge_penalty"])
    feature = view["feature"]
    if feature is not None and feature not in session.feature_names:
        warnings.warn(f"The snapshot's column {feature!r} is not in X; showing the default "
                      f"column.", UserWarning, stacklevel=2)
        feature = None
    explorer = Explorer(session, feature=feature)
    explorer.apply_view_state(shown=view["shown"], tab=view["tab"])
    return explorer


def _load_snapshot(snapshot, model, feature, forest_params) -> Snapshot:
    """Return the snapshot (loaded from a path if need be), refusing what it fixes itself."""
    clash = [k for k, v in (("model", model), ("feature", feature)) if v is not None]
    clash += sorted(forest_params)
    if clash:
        raise ValueError(f"The 'snapshot' parameter fixes the model, its settings and the "
                         f"view; pass none of {clash} with it. Got snapshot={snapshot!r}.")
    return snapshot if isinstance(snapshot, Snapshot) else Snapshot.load(snapshot)


def _effect_explorer(X, y, treatment, *, model, feature, snapshot, compare,
                     allow_data_mismatch=False, **forest_params):
    from hedgerow.snapshot import EFFECT_ESTIMATOR
    from hedgerow.widgets._effect_session import EffectSession
    from hedgerow.widgets._effect_views import EffectExplorer

    if compare is not True:
        raise ValueError("The 'compare' parameter does not apply with 'treatment' (the "
                         "effect explorer compares its own methods).")
    if snapshot is None:
        session = EffectSession(X, y, treatment, model=model, **forest_params)
        if feature is not None:
            session.feature = feature
        return EffectExplorer(session)
    snap = _load_snapshot(snapshot, model, feature, forest_params)
    if snap.estimator != EFFECT_ESTIMATOR:
        raise ValueError(f"The 'snapshot' parameter must hold a {EFFECT_ESTIMATOR} to open "
                         f"with 'treatment'. Got {snap.estimator} instead; open it without "
                         f"'treatment'.")
    snap.check_data(X, y, treatment, allow_data_mismatch=allow_data_mismatch)
    params = snap.make_estimator().get_params(deep=False)
    session = EffectSession(X, y, treatment, **params)
    view = snap.view
    probe = view["probe"]
    if probe is not None and len(probe) != len(session.columns):
        warnings.warn("The snapshot's probe has another number of columns than X; the probe "
                      "starts at its default.", UserWarning, stacklevel=3)
        probe = None
    feature = view["feature"]
    if feature is not None and feature not in session.columns:
        warnings.warn(f"The snapshot's column {feature!r} is not in X; showing the default "
                      f"column.", UserWarning, stacklevel=3)
        feature = None
    session.restore_view(probe=probe, feature=feature)
    explorer = EffectExplorer(session)
    explorer.apply_view_state(tab=view["tab"])
    return explorer
