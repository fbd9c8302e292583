"""What every diagnostics result shares: a frame view and a compact notebook view."""

from __future__ import annotations

import html
from functools import cached_property

import numpy as np
import pandas as pd

from hedgerow._format import format_number
from hedgerow._validation import CheckedRows, checked_rows, fitted_columns

__all__ = ["MethodRows", "ReportMixin", "check_probe_point", "has_little_bags", "kish_ess"]


class ReportMixin:
    """Mixin for frozen result dataclasses: ``to_frame()`` and ``_repr_html_``."""

    _title = "report"

    def to_frame(self) -> pd.DataFrame:  # pragma: no cover - every report overrides it
        raise NotImplementedError

    def _notes(self) -> list[str]:
        return []

    def _repr_html_(self) -> str:
        frame = self.to_frame()
        notes = "".join(f"<p style='margin:2px 0'>{html.escape(n)}</p>" for n in self._notes())
        table = frame.to_html(float_format=format_number, border=0, max_rows=30)
        return (
            f"<div class='hedgerow-report'><strong>{html.escape(self._title)}</strong>"
            f"{notes}{table}</div>"
        )


def has_little_bags(model) -> bool:
    """Return True when a fitted forest groups its trees in little bags (intervals)."""
    return int(getattr(model, "trees_per_bag_", 1)) >= 2


def kish_ess(w) -> float:
    """Return Kish's effective sample size (sum w)^2 / sum w^2 (Kish 1965)."""
    w = np.asarray(w, dtype=np.float64)
    s2 = float(np.sum(w * w))
    return float(np.sum(w) ** 2 / s2) if s2 > 0 else 0.0


def check_probe_point(model, x) -> np.ndarray:
    """Return the probe point as a (1, d) float array, or raise naming what was wrong.

    The array is a ``CheckedRows``: every estimator fitted on the model's columns takes
    it without a second check (and without a feature-name warning).
    """
    if isinstance(x, CheckedRows) and x.shape[0] == 1 and x.columns == fitted_columns(model):
        return x
    if isinstance(x, pd.Series):
        names = getattr(model, "feature_names_in_", None)
        if names is not None:
            missing = [c for c in names if c not in x.index]
            if missing:
                raise ValueError(
                    f"The probe point 'x' must give every column the model was fitted on; "
                    f"missing {missing}."
                )
            x = x[list(names)]
        x = x.to_numpy()
    try:
        arr = np.asarray(x, dtype=np.float64).reshape(-1)
    except (TypeError, ValueError) as exc:
        raise TypeError(f"The probe point 'x' must be numeric. Got {x!r} instead.") from exc
    d = model.n_features_in_
    if arr.shape[0] != d:
        raise ValueError(
            f"The probe point 'x' must have {d} values (one per column). "
            f"Got {arr.shape[0]} instead."
        )
    if not np.all(np.isfinite(arr)):
        raise ValueError(f"The probe point 'x' must be finite. Got {arr.tolist()!r} instead.")
    return checked_rows(arr.reshape(1, -1), model, "x")


class MethodRows:
    """Mixin for reports with a long ``frame`` that has a ``method`` column."""

    def method(self, name: str) -> pd.DataFrame:
        """Return the rows of one method (empty when it is not in the report)."""
        part = self._by_method.get(name)
        if part is None:
            return self.frame.iloc[:0].reset_index(drop=True)
        return part.copy(deep=False)

    @cached_property
    def _by_method(self) -> dict:
        # grouped once: views ask for every method at every probe move
        return {str(name): part.reset_index(drop=True)
                for name, part in self.frame.groupby("method", sort=False)}
