"""A shareable, self-contained HTML report of one model review.

``build_report(X, y, ...)`` runs the diagnostics (``hedgerow.diagnostics``) and returns a
frozen :class:`Report`: the computed reports, the settings, a data fingerprint and the
figures as SVG strings. ``Report.to_html()`` renders one HTML page; ``save_html(path, ...)``
builds and writes it atomically.

Why static SVG: a reviewer's file must open anywhere and keep opening, offline and years
later, in any browser, without a kernel. Figures are drawn once with matplotlib (imported
lazily, object-oriented, no pyplot state) and inlined as SVG; the page carries no
JavaScript, fetches nothing (a Content-Security-Policy forbids it) and uses system fonts.
Saved widget state would need the widget renderer bundles shipped inside the file and
would still only show state, not recompute it.

The package formats what the diagnostics functions return; it computes no statistics.
Its modules: ``_content`` (value objects, sections, cautions), ``_inputs`` (checks before
any fit), ``_build`` (the steps and their progress, writing), ``_figures`` (matplotlib),
``_html`` (the page), ``_numbers`` (the one number formatter); ``_effect`` and
``_effect_html`` the effect report of a ``TreatmentEffectForest`` (``build_effect_report``,
``save_effect_html``), its caution first and last; ``_effect_figures`` its figures, drawn
with ``_figures``' helpers.
"""

from __future__ import annotations

from hedgerow.report._build import build_report, save_html, write_html
from hedgerow.report._content import (
    CAUTION_KERNEL,
    CAUTIONS_BASE,
    COMPARISON_ROWS,
    MIN_ROWS,
    REPORT_COLOURS,
    SECTIONS,
    DataSummary,
    Report,
    Settings,
)
from hedgerow.report._effect import (
    EFFECT_REPORT_CAUTIONS,
    EFFECT_SECTIONS,
    EffectReport,
    build_effect_report,
    save_effect_html,
)
from hedgerow.report._inputs import data_fingerprint

__all__ = ["DataSummary", "Report", "Settings", "build_report", "save_html", "write_html",
           "data_fingerprint", "MIN_ROWS", "COMPARISON_ROWS", "SECTIONS", "REPORT_COLOURS",
           "CAUTION_KERNEL", "CAUTIONS_BASE", "EffectReport", "build_effect_report",
           "save_effect_html", "EFFECT_SECTIONS", "EFFECT_REPORT_CAUTIONS"]
