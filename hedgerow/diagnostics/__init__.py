"""Diagnostics as plain functions returning frozen reports (``to_frame``, ``_repr_html_``).

- ``probe``: neighbour weights, local line and every method's prediction at one point.
- ``slices``: predictions along one column (or partial dependence).
- ``edges``: held-out residuals by edge depth and the edge-bias sign pattern.
- ``verdict``: cross-fitted paired errors against plain forests and a stated decision.
- ``decision_panel``: is the correction warranted here? verdict gain, inward bends,
  coverage and the difference at the probe, each with a one-line reading.
- ``tuning_surface``: out-of-bag RMSE and interval width over subsample rate × penalty.
- ``coverage_readout``: simulated interval coverage around a known or surrogate truth.
- ``effect_probe`` (``effect_probe_sketch``: its cheap part), ``overlap_profile``,
  ``effect_verdict``: a treatment-effect forest's effect at a point, the overlap of its
  arms and a held-out R-loss verdict (each with the effect caution).
- ``effect_slices``, ``effect_edges``: effects along one column (or their partial
  dependence), and the out-of-bag R-loss of the effect by edge depth; ``effect_slice``:
  the corrected and uncorrected effect along one column side by side (what the effect
  report draws, read from ``effect_slices``).
- ``split_half_agreement``: on real data, do forests fitted on disjoint halves disagree
  as much as their standard errors say?
- ``at_ridge_penalty``, ``probe_readout``, ``local_line``, ``oob_summary``, ...: the
  small, refit-free pieces the interactive views render.
"""

from hedgerow.diagnostics._coverage import CoverageReport, coverage_readout
from hedgerow.diagnostics._decision import CAUTIONS, CAUTIONS_LINK, DecisionPanel, decision_panel
from hedgerow.diagnostics._edges import DEPTH_BANDS, EdgeProfile, edges
from hedgerow.diagnostics._effect import (
    EFFECT_DECISIONS,
    EFFECT_FOLD_TREES,
    EFFECT_METHODS,
    EffectProbe,
    EffectSketch,
    EffectVerdict,
    OverlapProfile,
    effect_probe,
    effect_probe_sketch,
    effect_verdict,
    interval_method,
    neighbourhood_difference,
    overlap_profile,
    r_loss,
)
from hedgerow.diagnostics._effect_coverage import EffectCoverageReport, effect_coverage_readout
from hedgerow.diagnostics._effect_edges import EffectEdgeProfile, effect_edges
from hedgerow.diagnostics._effect_slice import EFFECT_SLICE_POINTS, EffectSlice, effect_slice
from hedgerow.diagnostics._effect_slices import (
    EFFECT_SLICE_GRID,
    EffectSliceReport,
    effect_slices,
)
from hedgerow.diagnostics._heldout import edge_depth, held_out_predictions
from hedgerow.diagnostics._interactive import (
    at_ridge_penalty,
    has_little_bags,
    local_average_model,
    local_line,
    neighbourhood_span,
    oob_summary,
    probe_anchor,
    probe_readout,
    ridge_curve,
    slice_grid,
    weight_profile,
)
from hedgerow.diagnostics._probe import (
    TOP_ROWS,
    WIDE_COLUMNS,
    MethodAtProbe,
    ProbeReport,
    probe,
    probe_sketch,
)
from hedgerow.diagnostics._report import check_probe_point, kish_ess
from hedgerow.diagnostics._slices import SliceReport, method_label, resolve_feature, slices
from hedgerow.diagnostics._split_half import SELECTIONS, SplitHalfReport, split_half_agreement
from hedgerow.diagnostics._tuning import (
    SURFACE_COLUMNS,
    TuningSurface,
    surface_column,
    tuning_surface,
)
from hedgerow.diagnostics._verdict import (
    DECISIONS,
    EDGE_BAND,
    Verdict,
    carrying_rows,
    paired_relative_gain,
    verdict,
)

__all__ = [
    "EFFECT_DECISIONS", "EFFECT_FOLD_TREES", "EFFECT_METHODS", "EffectProbe",
    "EffectVerdict", "OverlapProfile", "effect_probe", "effect_verdict",
    "EffectSketch", "effect_probe_sketch",
    "neighbourhood_difference", "overlap_profile", "r_loss", "interval_method",
    "EffectSliceReport", "EffectEdgeProfile", "effect_slices", "effect_edges",
    "EFFECT_SLICE_GRID",
    "EffectCoverageReport",
    "effect_coverage_readout",
    "EFFECT_SLICE_POINTS", "EffectSlice", "effect_slice",
    "CAUTIONS",
    "CAUTIONS_LINK",
    "DecisionPanel",
    "decision_panel",
    "SURFACE_COLUMNS",
    "surface_column",
    "at_ridge_penalty",
    "check_probe_point",
    "has_little_bags",
    "local_average_model",
    "local_line",
    "neighbourhood_span",
    "method_label",
    "resolve_feature",
    "oob_summary",
    "probe_anchor",
    "probe_readout",
    "probe_sketch",
    "ridge_curve",
    "slice_grid",
    "weight_profile",
    "CoverageReport",
    "SELECTIONS",
    "SplitHalfReport",
    "split_half_agreement",
    "TuningSurface",
    "coverage_readout",
    "tuning_surface",
    "DEPTH_BANDS",
    "EDGE_BAND",
    "EdgeProfile",
    "MethodAtProbe",
    "ProbeReport",
    "SliceReport",
    "TOP_ROWS",
    "WIDE_COLUMNS",
    "Verdict",
    "DECISIONS",
    "carrying_rows",
    "edge_depth",
    "edges",
    "held_out_predictions",
    "kish_ess",
    "paired_relative_gain",
    "probe",
    "slices",
    "verdict",
]
