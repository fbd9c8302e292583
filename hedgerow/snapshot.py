"""Snapshots: a saved, reloadable state of a diagnostics session, as one JSON file.

A ``Snapshot`` records what is needed to put a reviewer in front of exactly what its
author saw, and what the author saw there:

- **settings**: the estimator class (one of hedgerow's four) and its ``get_params()``,
  including the seed (``random_state``), so that a refit on the same data grows the same
  forest;
- **view**: the probe point, the column on the probe view's x-axis, the ridge penalty
  the views were showing, which methods were shown in the legend, the active tab, and
  whether the kernel smoothers were fitted for comparison;
- **data fingerprint**: shape, column names, target name and a SHA-256 of the values (the
  data themselves are not saved);
- **headline numbers**: out-of-bag RMSE, mean interval width, the verdict sentence when it
  was computed, and the prediction at the probe;
- the hedgerow version that wrote it and the file format version.

A snapshot of a ``TreatmentEffectForest`` (the effect explorer, ``explore(X, y,
treatment=...)``) adds two sections: ``treatment`` (the treatment column's name and the
SHA-256 of its values, beside the fingerprint of X and y) and ``effect`` (the corrected
effect at the probe with its interval, the doubly robust average effect with its standard
error, and the effect caution). Its ``headline`` keeps the verdict sentence (the effect
verdict's) and the effect at the probe as ``probe_prediction``; the regression numbers
are null. Files without these sections read as before; an older hedgerow refuses an
effect snapshot by naming its estimator.

``save`` writes atomically (``hedgerow._atomic``: a temporary file in the same directory,
then ``os.replace``), so an existing snapshot is never left half-written and a failed save
leaves it intact.
``load`` validates every field and names the first one that is missing or wrong.

This module imports no widget library: ``hedgerow.widgets`` uses it to capture and
restore an explorer, and it works without the ``widgets`` extra. It sits just above the
diagnostics (``from_model`` computes the headline numbers through them).
"""

from __future__ import annotations

import datetime as _dt
import hashlib
import json
import math
import os
import warnings
from dataclasses import dataclass, field
from numbers import Integral, Real
from pathlib import Path

import numpy as np
import pandas as pd

from hedgerow._atomic import write_text_atomic
from hedgerow._format import format_number
from hedgerow._validation import checked_rows, column_names

__all__ = [
    "DataFingerprint",
    "FORMAT",
    "FORMAT_VERSION",
    "Snapshot",
    "SnapshotDataMismatch",
    "SnapshotDataWarning",
    "SnapshotError",
]

#: Marker of the file kind and the version of its layout. A change to the layout that an
#: older reader could misread bumps the version.
FORMAT = "hedgerow-snapshot"
FORMAT_VERSION = 1
#: Estimator classes a snapshot may name (looked up in ``hedgerow.estimators``; a file
#: never names an arbitrary class to import).
ESTIMATORS = ("LocalLinearForestRegressor", "HonestForestRegressor",
              "NadarayaWatsonRegressor", "LocalLinearRegressor", "TreatmentEffectForest")
#: The estimator whose snapshots carry the ``treatment`` and ``effect`` sections.
EFFECT_ESTIMATOR = "TreatmentEffectForest"


class SnapshotError(ValueError):
    """A snapshot file or dictionary that cannot be read: the message names the field."""


class SnapshotDataMismatch(ValueError):
    """The data given do not match the snapshot's fingerprint."""


class SnapshotDataWarning(UserWarning):
    """The data differ from the snapshot's fingerprint and the caller chose to proceed."""


# -- data fingerprint ------------------------------------------------------------------------
def _as_values(X, y):
    try:
        A = np.asarray(X, dtype="<f8")
        b = np.asarray(y, dtype="<f8").ravel()
    except (TypeError, ValueError) as exc:
        raise ValueError(
            f"The 'X' and 'y' parameters must be numeric to fingerprint them. Got {exc}."
        ) from exc
    if A.ndim != 2:
        raise ValueError(f"The 'X' parameter must be 2-d. Got shape {A.shape} instead.")
    if b.shape[0] != A.shape[0]:
        raise ValueError(
            f"The 'y' parameter must have one value per row of X ({A.shape[0]}). "
            f"Got {b.shape[0]} instead."
        )
    return np.ascontiguousarray(A), np.ascontiguousarray(b)


@dataclass(frozen=True)
class DataFingerprint:
    """Shape, column names, target name and SHA-256 of the values of a data set (X, y)."""

    n_rows: int
    n_columns: int
    columns: tuple | None
    target: str | None
    sha256: str

    @classmethod
    def from_data(cls, X, y) -> DataFingerprint:
        """Return the fingerprint of ``(X, y)`` (frames or arrays)."""
        A, b = _as_values(X, y)
        h = hashlib.sha256()
        # shape first, so that a reshaped copy of the same numbers differs
        h.update(np.asarray(A.shape, dtype="<i8").tobytes())
        h.update(A.tobytes())
        h.update(b.tobytes())
        columns = tuple(str(c) for c in X.columns) if isinstance(X, pd.DataFrame) else None
        name = getattr(y, "name", None)
        return cls(int(A.shape[0]), int(A.shape[1]), columns,
                   None if name is None else str(name), h.hexdigest())

    def differences(self, other: DataFingerprint) -> list[str]:
        """Return one plain sentence per way ``other`` differs from this fingerprint."""
        out = []
        if (self.n_rows, self.n_columns) != (other.n_rows, other.n_columns):
            out.append(f"shape {other.n_rows} x {other.n_columns} instead of "
                       f"{self.n_rows} x {self.n_columns}")
        if self.columns != other.columns:
            out.append(f"columns {_short(other.columns)} instead of {_short(self.columns)}")
        if self.target != other.target:
            out.append(f"target {other.target!r} instead of {self.target!r}")
        if self.sha256 != other.sha256:
            out.append("different values (SHA-256 of the data differs)")
        return out

    def to_dict(self) -> dict:
        return {"n_rows": self.n_rows, "n_columns": self.n_columns,
                "columns": None if self.columns is None else list(self.columns),
                "target": self.target, "sha256": self.sha256}


def treatment_fingerprint(treatment) -> dict:
    """Return ``{"name", "sha256"}`` of a treatment column (a Series keeps its name)."""
    try:
        w = np.ascontiguousarray(np.asarray(treatment, dtype="<f8").ravel())
    except (TypeError, ValueError) as exc:
        raise ValueError(f"The 'treatment' parameter must be numeric to fingerprint it. "
                         f"Got {exc}.") from exc
    h = hashlib.sha256()
    h.update(np.asarray(w.shape, dtype="<i8").tobytes())
    h.update(w.tobytes())
    name = getattr(treatment, "name", None)
    return {"name": None if name is None else str(name), "sha256": h.hexdigest()}


def _short(cols, limit=6):
    if cols is None:
        return "(unnamed)"
    cols = list(cols)
    more = f", ... ({len(cols)} in all)" if len(cols) > limit else ""
    return "[" + ", ".join(repr(c) for c in cols[:limit]) + more + "]"


# -- JSON-safe values ------------------------------------------------------------------------
def _plain(value, what):
    """Return ``value`` as plain JSON types (numpy scalars and arrays become Python ones)."""
    if value is None or isinstance(value, bool | str):
        return value
    if isinstance(value, np.bool_):
        return bool(value)
    if isinstance(value, Integral):
        return int(value)
    if isinstance(value, Real):
        v = float(value)
        return v if math.isfinite(v) else None
    if isinstance(value, np.ndarray | list | tuple):
        return [_plain(v, what) for v in np.asarray(value, dtype=object).ravel().tolist()]
    raise TypeError(
        f"The {what} cannot be saved in a snapshot: it must be a number, string, bool, None "
        f"or a list of those. Got {type(value).__name__} {value!r} instead."
    )


def _number_or_none(value):
    if value is None:
        return None
    v = float(value)
    return v if math.isfinite(v) else None


# -- validation of a loaded dictionary -------------------------------------------------------
_KINDS = {
    "dict": (lambda v: isinstance(v, dict), "an object"),
    "str": (lambda v: isinstance(v, str), "a string"),
    "bool": (lambda v: isinstance(v, bool), "true or false"),
    "int": (lambda v: isinstance(v, int) and not isinstance(v, bool), "an integer"),
    "number": (lambda v: isinstance(v, int | float) and not isinstance(v, bool)
               and math.isfinite(v), "a finite number"),
    "numbers": (lambda v: isinstance(v, list) and all(
        isinstance(x, int | float) and not isinstance(x, bool) and math.isfinite(x)
        for x in v), "a list of finite numbers"),
    "strs": (lambda v: isinstance(v, list) and all(isinstance(x, str) for x in v),
             "a list of strings"),
    "bools": (lambda v: isinstance(v, dict) and all(
        isinstance(k, str) and isinstance(x, bool) for k, x in v.items()),
        "an object of true/false values"),
    "sha256": (lambda v: isinstance(v, str) and len(v) == 64 and all(
        c in "0123456789abcdef" for c in v), "64 lower-case hex digits"),
}

#: Every field of format version 1: (section, name, kind, may be null).
_FIELDS = (
    ("", "format", "str", False),
    ("", "format_version", "int", False),
    ("", "hedgerow_version", "str", False),
    ("", "created", "str", False),
    ("", "settings", "dict", False),
    ("", "view", "dict", False),
    ("", "data", "dict", False),
    ("", "headline", "dict", False),
    ("settings", "estimator", "str", False),
    ("settings", "params", "dict", False),
    ("settings", "seed", "int", True),
    ("view", "probe", "numbers", True),
    ("view", "feature", "str", True),
    ("view", "ridge_penalty", "number", True),
    ("view", "shown", "bools", False),
    ("view", "tab", "str", True),
    ("view", "compare", "bool", False),
    ("data", "n_rows", "int", False),
    ("data", "n_columns", "int", False),
    ("data", "columns", "strs", True),
    ("data", "target", "str", True),
    ("data", "sha256", "sha256", False),
    ("headline", "oob_rmse", "number", True),
    ("headline", "mean_interval_width", "number", True),
    ("headline", "interval_level", "number", True),
    ("headline", "verdict", "str", True),
    ("headline", "probe_prediction", "number", True),
)


def _check_fields(d, fields, source):
    """Raise ``SnapshotError`` naming the first of ``fields`` missing or malformed in ``d``."""
    for section, name, kind, nullable in fields:
        where = f"{section}.{name}" if section else name
        holder = d[section] if section else d
        if name not in holder:
            raise SnapshotError(f"{source} lacks the field {where!r}.")
        value = holder[name]
        if value is None and nullable:
            continue
        ok, expected = _KINDS[kind]
        if not ok(value):
            raise SnapshotError(f"The field {where!r} of {source} must be {expected}"
                                f"{' or null' if nullable else ''}. Got {value!r} instead.")


def _validate(d, source):
    """Raise ``SnapshotError`` naming the first missing or malformed field of ``d``."""
    if not isinstance(d, dict):
        raise SnapshotError(f"{source} must hold a JSON object. Got {type(d).__name__} "
                            f"instead.")
    if d.get("format") != FORMAT:
        raise SnapshotError(f"{source} is not a hedgerow snapshot: the field 'format' must "
                            f"be {FORMAT!r}. Got {d.get('format')!r} instead.")
    version = d.get("format_version")
    if version != FORMAT_VERSION:
        raise SnapshotError(
            f"{source} has snapshot format version {version!r}; this hedgerow reads "
            f"version {FORMAT_VERSION}. Save it again with a matching hedgerow version."
        )
    _check_fields(d, _FIELDS, source)
    est = d["settings"]["estimator"]
    if est not in ESTIMATORS:
        raise SnapshotError(f"The field 'settings.estimator' of {source} must be one of "
                            f"{list(ESTIMATORS)}. Got {est!r} instead.")
    for key, value in d["settings"]["params"].items():
        try:
            _plain(value, f"parameter {key!r}")
        except TypeError as exc:
            raise SnapshotError(f"The field 'settings.params.{key}' of {source}: {exc}") \
                from None
    _validate_effect_sections(d, source, est)
    probe, n_cols = d["view"]["probe"], d["data"]["n_columns"]
    if probe is not None and len(probe) != n_cols:
        raise SnapshotError(f"The field 'view.probe' of {source} must hold one value per "
                            f"column ({n_cols}). Got {len(probe)} values instead.")
    cols = d["data"]["columns"]
    if cols is not None and len(cols) != n_cols:
        raise SnapshotError(f"The field 'data.columns' of {source} must name {n_cols} "
                            f"columns. Got {len(cols)} instead.")


#: Fields of the effect snapshot's sections (present exactly when the estimator is
#: ``EFFECT_ESTIMATOR``).
_EFFECT_FIELDS = (
    ("treatment", "name", "str", True),
    ("treatment", "sha256", "sha256", False),
    ("effect", "probe_effect", "number", True),
    ("effect", "probe_lower", "number", True),
    ("effect", "probe_upper", "number", True),
    ("effect", "level", "number", False),
    ("effect", "average_effect", "number", True),
    ("effect", "average_std_error", "number", True),
    ("effect", "caution", "str", False),
)


def _validate_effect_sections(d, source, est):
    effect = est == EFFECT_ESTIMATOR
    for section in ("treatment", "effect"):
        present = d.get(section) is not None
        if effect and not present:
            raise SnapshotError(f"{source} lacks the field {section!r} (a snapshot of a "
                                f"{EFFECT_ESTIMATOR} records its treatment and effect).")
        if not effect and present:
            raise SnapshotError(f"The field {section!r} of {source} belongs to snapshots of "
                                f"a {EFFECT_ESTIMATOR}. Got it with {est} instead.")
        if present and not isinstance(d[section], dict):
            raise SnapshotError(f"The field {section!r} of {source} must be an object. Got "
                                f"{d[section]!r} instead.")
    if effect:
        _check_fields(d, _EFFECT_FIELDS, source)


def _check_path(path, what="path"):
    if isinstance(path, bool) or not isinstance(path, str | os.PathLike):
        raise TypeError(f"The {what!r} parameter must be a str or os.PathLike. "
                        f"Got {path!r} instead.")
    return Path(path)


# -- the snapshot ----------------------------------------------------------------------------
@dataclass(frozen=True)
class Snapshot:
    """A saved, reloadable state of a diagnostics session (see the module docstring).

    Build one with ``Snapshot.capture(explorer)`` or ``Snapshot.from_model(model, X, y)``;
    ``save(path)`` / ``Snapshot.load(path)`` write and read it;
    ``hedgerow.explore(X, y, snapshot=...)`` restores the explorer; ``make_estimator()``
    gives the unfitted estimator with the saved settings.
    """

    estimator: str
    params: dict
    seed: int | None
    view: dict
    data: DataFingerprint
    headline: dict
    hedgerow_version: str
    created: str
    format_version: int = FORMAT_VERSION
    #: effect snapshots only: {"name", "sha256"} of the treatment, and the effect numbers
    treatment: dict | None = None
    effect: dict | None = None
    _source: str = field(default="the snapshot", compare=False, repr=False)

    # -- convenient views of the fields ----------------------------------------------------
    @property
    def probe(self) -> np.ndarray | None:
        p = self.view.get("probe")
        return None if p is None else np.asarray(p, dtype=np.float64)

    @property
    def feature(self) -> str | None:
        return self.view.get("feature")

    @property
    def ridge_penalty(self) -> float | None:
        return self.view.get("ridge_penalty")

    # -- building ----------------------------------------------------------------------------
    @classmethod
    def capture(cls, explorer) -> Snapshot:
        """Return the snapshot of a live ``Explorer`` (or of an ``ExploreSession``).

        Records the session's current forest settings, probe, ridge penalty and headline
        numbers (from its cached diagnostics), and the explorer's column, legend toggles
        and active tab.
        """
        session = getattr(explorer, "session", explorer)
        if not hasattr(session, "snapshot_state"):
            raise TypeError("The 'explorer' parameter must be a hedgerow Explorer or "
                            f"ExploreSession. Got {type(explorer).__name__} instead.")
        state = session.snapshot_state()
        view = explorer.view_state() if hasattr(explorer, "view_state") else {}
        return cls._build(state["model"], state["X"], state["y"], probe=state["probe"],
                          feature=view.get("feature"), ridge_penalty=state["ridge_penalty"],
                          shown=view.get("shown", {}), tab=view.get("tab"),
                          compare=state["compare"], headline=state["headline"],
                          treatment=state.get("treatment"), effect=state.get("effect"))

    @classmethod
    def from_model(cls, model, X, y, probe=None, feature=None, *, ridge_penalty=None,
                   verdict=False, compare=True, treatment=None) -> Snapshot:
        """Return the snapshot of a fitted hedgerow estimator on ``(X, y)``, without widgets.

        Parameters
        ----------
        model : a fitted estimator of ``hedgerow`` (fitted on X, y).
        X, y : its training data (fingerprinted, not saved).
        probe : the probe point (one value per column), or None.
        feature : the column to show on the probe view (name or index), or None.
        ridge_penalty : the penalty the numbers are computed at (local linear forests;
            default: the fitted one).
        verdict : also compute the verdict sentence (cross-fitted over 5 folds: several
            forest fits).
        compare : whether a restored explorer fits the kernel smoothers for comparison.
        treatment : with a ``TreatmentEffectForest``, the treatment it was fitted with
            (required; fingerprinted, not saved). ``verdict`` then runs the effect verdict.
        """
        from hedgerow import diagnostics as D

        _check_model(model)
        is_effect = type(model).__name__ == EFFECT_ESTIMATOR
        if is_effect and treatment is None:
            raise ValueError(f"The 'treatment' parameter is needed with a {EFFECT_ESTIMATOR}: "
                             f"pass the treatment it was fitted with.")
        if not is_effect and treatment is not None:
            raise ValueError(f"The 'treatment' parameter applies to a {EFFECT_ESTIMATOR} only. "
                             f"Got it with {type(model).__name__} instead.")
        names = _feature_names(model)
        if feature is not None:
            feature = names[D.resolve_feature(model, feature)]
        x = None
        if probe is not None:
            x = np.asarray(probe, dtype=np.float64).ravel()
            if x.size != len(names) or not np.all(np.isfinite(x)):
                raise ValueError(f"The 'probe' parameter must hold {len(names)} finite values "
                                 f"(one per column). Got {probe!r} instead.")
        if is_effect:
            if ridge_penalty is not None:
                raise ValueError("The 'ridge_penalty' parameter applies to local linear "
                                 f"forests only. Got {ridge_penalty!r} for "
                                 f"{EFFECT_ESTIMATOR} instead.")
            headline, effect = _effect_headline(model, x, verdict)
            return cls._build(model, X, y, probe=x, feature=feature,
                              ridge_penalty=model.ridge_penalty_, shown={}, tab=None,
                              compare=False, headline=headline, treatment=treatment,
                              effect=effect)
        headline, lam = _headline(model, x, ridge_penalty, verdict)
        return cls._build(model, X, y, probe=x, feature=feature, ridge_penalty=lam,
                          shown={}, tab=None, compare=bool(compare), headline=headline)

    @classmethod
    def _build(cls, model, X, y, *, probe, feature, ridge_penalty, shown, tab, compare,
               headline, treatment=None, effect=None):
        import hedgerow

        _check_model(model)
        fp = DataFingerprint.from_data(X, y)
        treated = None
        if type(model).__name__ == EFFECT_ESTIMATOR:
            given = tuple(getattr(model, "supplied_inputs_", ()))
            if given:
                raise ValueError(
                    f"The model was fitted with {list(given)} given to fit(); a snapshot "
                    f"records settings and a seed, and a refit from them would centre and "
                    f"weight differently. Snapshot a model fitted without them.")
            if treatment is None or effect is None:
                raise ValueError(f"A snapshot of a {EFFECT_ESTIMATOR} needs its 'treatment' "
                                 f"and effect numbers.")
            treated = treatment_fingerprint(treatment)
            if treated["sha256"] != treatment_fingerprint(model.treatment_)["sha256"]:
                raise SnapshotDataMismatch(
                    "The 'treatment' parameter must be the treatment the model was fitted "
                    "with (checked by fingerprint). Pass its training treatment.")
            effect = {k: (_number_or_none(v) if k != "caution" else str(v))
                      for k, v in effect.items()}
        if fp.n_columns != model.n_features_in_:
            raise ValueError(f"The 'X' parameter must have the model's {model.n_features_in_} "
                             f"columns. Got {fp.n_columns} instead.")
        if hasattr(model, "X_train_") and hasattr(model, "y_train_"):
            trained = DataFingerprint.from_data(model.X_train_, model.y_train_)
            if trained.sha256 != fp.sha256:
                raise SnapshotDataMismatch(
                    f"The 'X' and 'y' parameters must be the rows the model was fitted on "
                    f"(checked by fingerprint): the model was fitted on {trained.n_rows} "
                    f"rows, got {fp.n_rows} rows"
                    + (" with other values" if trained.n_rows == fp.n_rows else "")
                    + ". Pass its training data, or refit it on these rows.")
        params = {k: _plain(v, f"estimator parameter {k!r}")
                  for k, v in model.get_params(deep=False).items()}
        seed = params.get("random_state")
        raw_seed = model.get_params(deep=False).get("random_state")
        if raw_seed is not None and not isinstance(raw_seed, Integral):
            raise TypeError("The model's 'random_state' must be an int or None to be saved in "
                            f"a snapshot. Got {type(raw_seed).__name__} instead.")
        if "random_state" in params and seed is None:
            warnings.warn("The model has random_state=None: a refit from this snapshot grows a "
                          "different forest. Fit with an integer random_state to make it "
                          "reproducible.", UserWarning, stacklevel=3)
        view = {"probe": None if probe is None else [float(v) for v in probe],
                "feature": None if feature is None else str(feature),
                "ridge_penalty": _number_or_none(ridge_penalty),
                "shown": {str(k): bool(v) for k, v in dict(shown).items()},
                "tab": None if tab is None else str(tab), "compare": bool(compare)}
        head = {"oob_rmse": _number_or_none(headline.get("oob_rmse")),
                "mean_interval_width": _number_or_none(headline.get("mean_interval_width")),
                "interval_level": _number_or_none(headline.get("interval_level")),
                "verdict": headline.get("verdict"),
                "probe_prediction": _number_or_none(headline.get("probe_prediction"))}
        now = _dt.datetime.now(_dt.timezone.utc).replace(microsecond=0).isoformat()
        snap = cls(estimator=type(model).__name__, params=params, seed=seed, view=view,
                   data=fp, headline=head, hedgerow_version=hedgerow.__version__, created=now,
                   treatment=treated, effect=effect)
        _validate(snap.to_dict(), "the snapshot")
        return snap

    # -- dictionaries and files ------------------------------------------------------------
    def to_dict(self) -> dict:
        """Return the snapshot as plain JSON types (the file's content)."""
        d = self._core_dict()
        if self.treatment is not None:
            d["treatment"] = dict(self.treatment)
        if self.effect is not None:
            d["effect"] = dict(self.effect)
        return d

    def _core_dict(self) -> dict:
        return {
            "format": FORMAT,
            "format_version": self.format_version,
            "hedgerow_version": self.hedgerow_version,
            "created": self.created,
            "settings": {"estimator": self.estimator, "params": dict(self.params),
                         "seed": self.seed},
            "view": {**self.view, "shown": dict(self.view.get("shown", {})),
                     "probe": None if self.view.get("probe") is None
                     else list(self.view["probe"])},
            "data": self.data.to_dict(),
            "headline": dict(self.headline),
        }

    @classmethod
    def from_dict(cls, d, *, source="the snapshot") -> Snapshot:
        """Return the snapshot held by ``d`` (as ``to_dict`` gives); ``SnapshotError`` if bad."""
        try:
            _validate(d, source)
        except RecursionError:
            raise SnapshotError(f"{source} is nested too deeply to be a snapshot.") from None
        s, v, dt = d["settings"], d["view"], d["data"]
        fp = DataFingerprint(dt["n_rows"], dt["n_columns"],
                             None if dt["columns"] is None else tuple(dt["columns"]),
                             dt["target"], dt["sha256"])
        view = {k: v[k] for k in ("probe", "feature", "ridge_penalty", "shown", "tab",
                                  "compare")}
        head = {k: d["headline"][k] for k in ("oob_rmse", "mean_interval_width",
                                              "interval_level", "verdict",
                                              "probe_prediction")}
        effect = None if d.get("effect") is None else {
            k: d["effect"][k] for sec, k, _, _ in _EFFECT_FIELDS if sec == "effect"}
        treatment = None if d.get("treatment") is None else {
            k: d["treatment"][k] for k in ("name", "sha256")}
        return cls(estimator=s["estimator"], params=dict(s["params"]), seed=s["seed"],
                   view=view, data=fp, headline=head, hedgerow_version=d["hedgerow_version"],
                   created=d["created"], format_version=d["format_version"],
                   treatment=treatment, effect=effect, _source=source)

    def save(self, path) -> Path:
        """Write the snapshot to ``path`` as JSON, atomically; return the path.

        The JSON goes to a temporary file in the same directory, is flushed to disk, then
        replaces ``path`` in one step: readers see the old file or the new one, never a
        mix, and if anything fails the previous file is left as it was.
        """
        path = _check_path(path)
        payload = self.to_dict()
        _validate(payload, "the snapshot")
        directory = path.parent if str(path.parent) else Path(".")
        if not directory.is_dir():
            raise FileNotFoundError(f"The 'path' parameter must be in an existing directory. "
                                    f"Got {str(path)!r} instead ({str(directory)!r} does not "
                                    f"exist).")
        if path.is_dir():
            raise IsADirectoryError(f"The 'path' parameter must name a file. Got the "
                                    f"directory {str(path)!r} instead.")

        def write(fh):
            json.dump(payload, fh, indent=2, allow_nan=False)
            fh.write("\n")

        return write_text_atomic(path, write, what="the snapshot")

    @classmethod
    def load(cls, path, *, data=None, allow_data_mismatch=False) -> Snapshot:
        """Return the snapshot saved at ``path``, validated field by field.

        ``data=(X, y)`` also checks the data fingerprint (see ``check_data``);
        ``(X, y, treatment)`` for an effect snapshot.
        Raises ``SnapshotError`` (a ``ValueError``) for a file that is not valid JSON
        (corrupted or truncated), not a snapshot, of another format version, or with a
        missing or malformed field; ``FileNotFoundError`` if there is no such file.
        """
        path = _check_path(path)
        source = f"The snapshot file {str(path)!r}"
        try:
            text = path.read_text(encoding="utf-8")
        except FileNotFoundError:
            raise FileNotFoundError(f"The 'path' parameter must name an existing snapshot "
                                    f"file. Got {str(path)!r} instead.") from None
        except UnicodeDecodeError as exc:
            raise SnapshotError(f"{source} is not UTF-8 text (corrupted?): {exc}.") from None
        try:
            d = json.loads(text)
        except json.JSONDecodeError as exc:
            raise SnapshotError(f"{source} is not valid JSON (truncated or corrupted?): "
                                f"{exc.msg} at line {exc.lineno}, column {exc.colno}.") \
                from None
        except RecursionError:
            raise SnapshotError(f"{source} is nested too deeply to be a snapshot (corrupted "
                                f"or not a snapshot).") from None
        snap = cls.from_dict(d, source=source)
        if data is not None:
            k = 3 if snap.treatment is not None else 2
            if not isinstance(data, tuple | list) or len(data) != k:
                what = "a triple (X, y, treatment)" if k == 3 else "a pair (X, y)"
                got = (f"{len(data)} items" if isinstance(data, tuple | list)
                       else type(data).__name__)
                raise TypeError(f"The 'data' parameter must be {what} for this snapshot. "
                                f"Got {got} instead.")
            X, y, *rest = data
            snap.check_data(X, y, *rest, allow_data_mismatch=allow_data_mismatch)
        return snap

    # -- checks and use ----------------------------------------------------------------------
    def check_data(self, X, y, treatment=None, *, allow_data_mismatch=False) -> list[str]:
        """Compare ``(X, y)`` with the saved fingerprint; return the differences found.

        An effect snapshot also compares ``treatment`` (required for one, refused
        otherwise).

        Raises ``SnapshotDataMismatch`` if they differ, unless ``allow_data_mismatch``
        is True: then it warns (``SnapshotDataWarning``) and returns the differences, and
        numbers recomputed on these data will not match the saved ones.
        """
        diffs = self.data.differences(DataFingerprint.from_data(X, y))
        if self.treatment is not None:
            if treatment is None:
                raise ValueError("The 'treatment' parameter is needed to check the data of "
                                 "an effect snapshot.")
            other = treatment_fingerprint(treatment)
            if other["sha256"] != self.treatment["sha256"]:
                diffs.append("different treatment values (SHA-256 of the treatment differs)")
            if other["name"] != self.treatment["name"]:
                diffs.append(f"treatment {other['name']!r} instead of "
                             f"{self.treatment['name']!r}")
        elif treatment is not None:
            raise ValueError("The 'treatment' parameter applies to effect snapshots only; "
                             f"this one holds a {self.estimator}.")
        if diffs:
            text = "; ".join(diffs)
            if not allow_data_mismatch:
                raise SnapshotDataMismatch(
                    f"The data do not match the snapshot: {text}. Pass "
                    f"allow_data_mismatch=True to proceed anyway (numbers recomputed on "
                    f"these data will differ from the saved ones).")
            warnings.warn(f"Proceeding with data that differ from the snapshot: {text}.",
                          SnapshotDataWarning, stacklevel=2)
        return diffs

    def make_estimator(self):
        """Return a new, unfitted estimator with the saved class and parameters."""
        from hedgerow import estimators

        cls = getattr(estimators, self.estimator)
        known = cls().get_params(deep=False)
        unknown = sorted(set(self.params) - set(known))
        if unknown:
            raise SnapshotError(f"The field 'settings.params' of {self._source} holds "
                                f"parameters {unknown} that {self.estimator} does not take "
                                f"(saved by hedgerow {self.hedgerow_version}).")
        missing = sorted(set(known) - set(self.params))
        if missing:
            warnings.warn(f"{self._source} does not set {missing}; using the defaults of "
                          f"this hedgerow version.", UserWarning, stacklevel=2)
        return cls(**self.params)

    def compare(self, other: Snapshot, labels=("this", "other"), *, view=True) -> pd.DataFrame:
        """Return the headline numbers and settings of two snapshots side by side.

        One row per headline number, then per setting (and, with ``view``, per view field)
        that differs, then the data if their fingerprints differ; the ``same`` column is
        True where the values agree (numbers to 1e-9 relative). ``view=False`` suits a
        snapshot made by ``from_model``, which records no legend or tab.
        """
        if not isinstance(other, Snapshot):
            raise TypeError(f"The 'other' parameter must be a Snapshot. Got "
                            f"{type(other).__name__} instead.")
        a_lab, b_lab = labels
        rows = []
        for k in self.headline:
            rows.append((f"headline: {k}", self.headline.get(k), other.headline.get(k)))
        for k in sorted(set(self.effect or {}) | set(other.effect or {})):
            rows.append((f"effect: {k}", (self.effect or {}).get(k),
                         (other.effect or {}).get(k)))
        for k in sorted(set(self.params) | set(other.params)):
            a, b = self.params.get(k), other.params.get(k)
            if a != b:
                rows.append((f"setting: {k}", a, b))
        for k in self.view if view else ():
            a, b = self.view.get(k), other.view.get(k)
            if a != b and not (isinstance(a, list) and _same(a, b)):
                rows.append((f"view: {k}", a, b))
        if self.data != other.data:
            rows.append(("data", self.data.sha256[:12], other.data.sha256[:12]))
        if self.treatment != other.treatment:
            rows.append(("treatment", (self.treatment or {}).get("sha256", "")[:12] or None,
                         (other.treatment or {}).get("sha256", "")[:12] or None))
        frame = pd.DataFrame(rows, columns=["item", a_lab, b_lab]).set_index("item")
        frame["same"] = [_same(a, b) for a, b in zip(frame[a_lab], frame[b_lab], strict=True)]
        return frame

    def __repr__(self):
        p = self.view.get("probe")
        return (f"Snapshot({self.estimator}, seed={self.seed}, data "
                f"{self.data.n_rows}x{self.data.n_columns}, probe="
                f"{'none' if p is None else 'set'}, feature={self.feature!r}, "
                f"oob_rmse={self.headline.get('oob_rmse')!r})")

    def _repr_html_(self) -> str:
        import html

        def row(k, v):
            return f"<tr><td>{html.escape(str(k))}</td><td>{html.escape(str(v))}</td></tr>"

        h = self.headline
        items = [("estimator", self.estimator), ("seed", self.seed),
                 ("data", f"{self.data.n_rows} rows x {self.data.n_columns} columns, target "
                          f"{self.data.target!r}, sha256 {self.data.sha256[:12]}..."),
                 ("column shown", self.feature), ("ridge penalty", self.ridge_penalty),
                 ("out-of-bag RMSE", _fmt(h.get("oob_rmse"))),
                 ("mean interval width", _fmt(h.get("mean_interval_width"))),
                 ("prediction at the probe", _fmt(h.get("probe_prediction"))),
                 ("verdict", h.get("verdict") or "(not computed)"),
                 ("saved", f"{self.created} by hedgerow {self.hedgerow_version}")]
        if self.effect is not None:
            e = self.effect
            items[5:8] = [
                ("treatment", f"{self.treatment['name']!r}, sha256 "
                              f"{self.treatment['sha256'][:12]}..."),
                ("effect at the probe", f"{_fmt(e['probe_effect'])} ({100 * e['level']:g}% "
                                        f"interval {_fmt(e['probe_lower'])} to "
                                        f"{_fmt(e['probe_upper'])})"),
                ("average effect", f"{_fmt(e['average_effect'])} (standard error "
                                   f"{_fmt(e['average_std_error'])})"),
                ("caution", e["caution"])]
        return ("<table><caption style='text-align:left'><b>hedgerow snapshot</b></caption>"
                + "".join(row(k, v) for k, v in items) + "</table>")


def _fmt(v):
    return "n/a" if v is None else format_number(v)


def _same(a, b):
    if isinstance(a, int | float) and isinstance(b, int | float) and \
            not isinstance(a, bool) and not isinstance(b, bool):
        return math.isclose(a, b, rel_tol=1e-9, abs_tol=1e-12)
    if isinstance(a, list) and isinstance(b, list):
        return len(a) == len(b) and all(_same(x, y) for x, y in zip(a, b, strict=True))
    return a == b


def _check_model(model):
    from hedgerow import estimators

    if type(model).__name__ not in ESTIMATORS or not isinstance(
            model, getattr(estimators, type(model).__name__)):
        raise TypeError(f"The 'model' parameter must be one of hedgerow's estimators "
                        f"{list(ESTIMATORS)}. Got {type(model).__name__} instead.")
    if not hasattr(model, "n_features_in_"):
        raise ValueError(f"The 'model' parameter must be fitted. Got an unfitted "
                         f"{type(model).__name__} instead.")


def _feature_names(model):
    return list(column_names(model))


def _headline(model, x, ridge_penalty, want_verdict):
    """Return (headline numbers, penalty they were computed at) for a fitted model."""
    from hedgerow import diagnostics as D

    lam = None
    level = 0.95
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", RuntimeWarning)
        if hasattr(model, "ridge_penalty_"):
            view = model.with_ridge_penalty(ridge_penalty)
            lam = float(view.ridge_penalty_)
            summary = D.oob_summary(view, level=level)
            rmse, width = summary["oob_rmse"], summary["mean_width"]
        else:
            if ridge_penalty is not None:
                raise ValueError(f"The 'ridge_penalty' parameter applies to local linear "
                                 f"forests only. Got {ridge_penalty!r} for "
                                 f"{type(model).__name__} instead.")
            view = model
            pred = D.held_out_predictions(model)
            ok = np.isfinite(pred)
            rmse = float(np.sqrt(np.mean((pred[ok] - model.y_train_[ok]) ** 2)))
            width = None
        q = None if x is None else checked_rows(x[None, :], model, "probe")
        pred_at = None if q is None else float(view.predict(q)[0])
        conclusion = None
        if want_verdict:
            if lam is None:
                raise ValueError("The 'verdict' parameter needs a local linear forest. Got "
                                 f"{type(model).__name__} instead.")
            conclusion = D.verdict(model.X_train_, model.y_train_, forest=view,
                                   smoothers=None, baseline=True,
                                   progress=False).conclusion
    return ({"oob_rmse": rmse, "mean_interval_width": width, "interval_level": level,
             "verdict": conclusion, "probe_prediction": pred_at}, lam)


def _effect_headline(model, x, want_verdict):
    """Return (headline, effect section) of a fitted ``TreatmentEffectForest``."""
    from hedgerow import diagnostics as D
    from hedgerow.estimators._effect_forest import EFFECT_CAUTION

    level = 0.95
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", RuntimeWarning)
        probe_effect = lower = upper = None
        if x is not None:
            p = D.effect_probe(model, x, level=level)
            row = p.methods.loc["corrected forest"]
            probe_effect, lower, upper = row["effect"], row["lower"], row["upper"]
        avg = model.average_effect()
        conclusion = None
        if want_verdict:
            conclusion = D.effect_verdict(model.X_train_, model.y_train_, model.treatment_,
                                          model=model, progress=False).conclusion
    headline = {"oob_rmse": None, "mean_interval_width": None, "interval_level": level,
                "verdict": conclusion, "probe_prediction": probe_effect}
    effect = {"probe_effect": probe_effect, "probe_lower": lower, "probe_upper": upper,
              "level": level, "average_effect": avg.estimate,
              "average_std_error": avg.std_error, "caution": EFFECT_CAUTION}
    return headline, effect
