"""What a report holds: its value objects, section ids, limits and cautions."""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass, field

import pandas as pd

from hedgerow._palette import METHOD_COLOURS

__all__ = ["DataSummary", "Report", "Settings", "MIN_ROWS", "COMPARISON_ROWS", "SECTIONS",
           "REPORT_COLOURS",
           "CAUTION_KERNEL", "CAUTIONS_BASE", "LLF", "HONEST"]

#: Fewest rows a report is built on: below this, held-out comparisons and edge bands
#: hold a handful of rows each and say nothing.
MIN_ROWS = 20

#: Section ids of the page, in order (``coverage`` only when a readout was run).
SECTIONS = ("verdict", "data", "settings", "probe", "slice", "edges", "neighbour-weights",
            "out-of-bag", "coverage", "cautions")

#: Method colours: the palette the interactive views use (``hedgerow._palette``).
REPORT_COLOURS = METHOD_COLOURS

#: Above this many rows the command line runs the expensive comparisons (the cross-fitted
#: verdict with its baseline forest, the kernel smoothers' bandwidth searches, which grow
#: with the square of the rows) on a seeded random subsample of this many rows, unless
#: ``--full``; ``build_report(comparison_rows=...)`` is the same switch from Python.
COMPARISON_ROWS = 5_000

#: Method labels of the two forests in every report.
HONEST = "honest forest (same trees)"
LLF = "local linear forest"

CAUTION_KERNEL = (
    "Intervals of the kernel smoothers (Nadaraya-Watson, local linear) ignore smoothing "
    "bias: they measure how much the smoothed curve varies, not how far it sits from the "
    "truth, so they are too narrow where the curve bends and near the edges of the data.")
CAUTIONS_BASE = (
    "Observational data: every number here is a predictive diagnostic, how well each method "
    "predicts rows it did not see. A slice or a local slope is not a causal effect; setting "
    "a column to a new value in the world need not move the response the way the slice "
    "does.",
    "The slice holds every other column at the probe. The grey points behind it are the "
    "rows at their own values of those columns, shown for where the data lie, not as a fit "
    "target.",
    "Held-out errors are out-of-bag (forests) and leave-one-out (kernel smoothers) errors "
    "of the training rows, not errors on a fresh test set.",
)


@dataclass(frozen=True)
class DataSummary:
    """Rows, columns, target name and a fingerprint of the data a report was built on.

    ``fingerprint``: the first 16 hex digits of the data SHA-256 a ``Snapshot`` stores
    (``hedgerow.snapshot.DataFingerprint``: over the shape and the float64 bytes of X and
    y; the names are listed beside it), so a report and a snapshot of the same data can be
    matched by eye; equal data give equal fingerprints,
    so a reviewer can tell whether two reports (or a refit) used the same table.
    """

    n_rows: int
    n_columns: int
    columns: tuple
    target: str
    fingerprint: str


@dataclass(frozen=True)
class Settings:
    """What produced the numbers: estimator, parameters, seed, sliced column, probe."""

    estimator: str
    parameters: Mapping
    fitted: Mapping  # chosen penalty, correction columns, trees per bag
    seed: object
    feature: str
    feature_index: int
    probe: Mapping  # column -> value
    smoothers: Mapping  # method -> {column: bandwidth}
    version: str
    created: str


@dataclass(frozen=True)
class Report:
    """Everything a saved report shows, computed once; ``to_html()`` renders it.

    Attributes
    ----------
    title : page title. data : :class:`DataSummary`. settings : :class:`Settings`.
    verdict : ``hedgerow.diagnostics.Verdict``. probe : ``ProbeReport`` at the probe.
    probe_table : ``probe_readout(probe)``. slices : ``SliceReport`` along the feature.
    edges : ``EdgeProfile``. oob : ``oob_summary(model)``. coverage : ``CoverageReport``
    or None. figures : name -> SVG markup (``slice``, ``edges``, ``neighbour_weights``).
    cautions : plain sentences. model : the fitted local linear forest.
    smoothers : the fitted comparison smoothers. notes : plain sentences on how the run
    was cut short for a large table (empty when every row was used everywhere).
    """

    title: str
    data: DataSummary
    settings: Settings
    verdict: object
    probe: object
    probe_table: pd.DataFrame
    slices: object
    edges: object
    oob: Mapping
    coverage: object
    figures: Mapping
    cautions: tuple
    model: object = field(repr=False)
    smoothers: tuple = field(default=(), repr=False)
    notes: tuple = ()

    @property
    def sections(self) -> tuple:
        """Return the ids of the sections the page shows, in order."""
        return tuple(s for s in SECTIONS if s != "coverage" or self.coverage is not None)

    def to_html(self) -> str:
        """Return the report as one self-contained HTML document."""
        from hedgerow.report._html import render

        return render(self)
