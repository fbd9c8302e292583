"""The ``hedgerow`` command: batch reviews without a notebook.

``hedgerow report DATA.csv --target COLUMN [--out FILE] [--features A B ...]
[--feature COLUMN] [--seed N] [--trees N] [--no-compare] [--no-baseline] [--full]`` reads
a CSV, fits a local linear forest and writes the self-contained HTML report of
``hedgerow.report``. With ``--treatment COLUMN`` it fits a treatment-effect forest
instead (``--target`` is the outcome) and writes the effect report, its caution first.
Above ``hedgerow.report.COMPARISON_ROWS`` rows the verdict and the kernel smoothers run on
a seeded random subsample of that many rows (said in the report and on stderr) unless
``--full``. Above ``LARGE_TABLE_ROWS`` rows the forest grows ``LARGE_TABLE_TREES`` trees
unless ``--trees`` is given (said the same way): the report of a 300,000-row table then
fits in minutes and in memory. Bad input gives one line on stderr and exit code 2; the
report is written atomically, so an earlier file survives a failed run.
"""

from __future__ import annotations

import argparse
import sys
import warnings
from pathlib import Path

__all__ = ["main", "EXIT_OK", "EXIT_USAGE", "EXIT_INTERRUPTED", "LARGE_TABLE_ROWS",
           "LARGE_TABLE_TREES"]

EXIT_OK = 0
EXIT_USAGE = 2  # bad input or bad arguments
EXIT_INTERRUPTED = 130

PROG = "hedgerow"
#: Above this many rows, without ``--trees``, the forest grows ``LARGE_TABLE_TREES`` trees.
LARGE_TABLE_ROWS = 50_000
#: Trees of a large table's forest: 20 little bags of 25 (intervals stay Student-t with
#: up to 19 degrees of freedom); the forest's own memory and time grow with trees x rows.
LARGE_TABLE_TREES = 500


class InputError(Exception):
    """Bad input the user can fix; shown as one line, exit code 2."""


class _Parser(argparse.ArgumentParser):
    def error(self, message):  # one line instead of usage + message
        raise InputError(f"{message} (see '{self.prog} --help')")


def _int_at_least(minimum):
    def parse(text):
        try:
            value = int(text)
        except ValueError:
            raise argparse.ArgumentTypeError(
                f"expected a whole number, got {text!r}") from None
        if value < minimum:
            raise argparse.ArgumentTypeError(f"expected a number >= {minimum}, got {value}")
        return value

    return parse


_positive_int = _int_at_least(1)
_non_negative_int = _int_at_least(0)


def _parser() -> argparse.ArgumentParser:
    from hedgerow import __version__
    from hedgerow.report import COMPARISON_ROWS

    parser = _Parser(prog=PROG, description="Smoothing diagnostics for forest regression.")
    parser.add_argument("--version", action="version", version=f"hedgerow {__version__}")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND", parser_class=_Parser)
    rep = sub.add_parser(
        "report", help="write a self-contained HTML report for a CSV file",
        description="Fit a local linear forest to a CSV file and write a self-contained "
                    "HTML report (verdict, tables, figures) that opens offline.")
    rep.add_argument("data", metavar="DATA.csv", help="the table, one row per observation, "
                     "with a header row")
    rep.add_argument("--target", required=True, metavar="COLUMN",
                     help="the column to predict")
    rep.add_argument("--out", metavar="FILE", type=Path, default=None,
                     help="where to write the report (default: DATA-report.html in the "
                          "current folder)")
    rep.add_argument("--features", nargs="+", metavar="COLUMN", default=None,
                     help="the columns to predict from (default: every column but the "
                          "target)")
    rep.add_argument("--feature", metavar="COLUMN", default=None,
                     help="the column the slice runs along (default: the forest's first "
                          "correction column); with --treatment, the column the effect "
                          "figure runs along (default: up to three correction columns)")
    rep.add_argument("--seed", type=_non_negative_int, default=0, metavar="N",
                     help="random seed of the forest (default: 0)")
    rep.add_argument("--trees", type=_positive_int, default=None, metavar="N",
                     help=f"number of trees (default: the estimator's default, 2000; "
                          f"above {LARGE_TABLE_ROWS:,} rows {LARGE_TABLE_TREES})")
    rep.add_argument("--title", default=None, help="page title")
    rep.add_argument("--coverage-reps", type=_non_negative_int, default=0, metavar="N",
                     help="replications of the coverage readout (default: 0, none; each "
                          "refits the forest twice)")
    rep.add_argument("--no-compare", action="store_true",
                     help="leave out the kernel smoothers")
    rep.add_argument("--no-baseline", action="store_true",
                     help="leave scikit-learn's random forest out of the verdict")
    rep.add_argument("--full", action="store_true",
                     help=f"run the verdict and the kernel smoothers on every row (default: "
                          f"above {COMPARISON_ROWS:,} rows they use a random {COMPARISON_ROWS:,})")
    rep.add_argument("--treatment", metavar="COLUMN", default=None,
                     help="write the effect report of a treatment-effect forest instead: "
                          "COLUMN holds the treatment (0/1, or a continuous dose) and "
                          "--target the outcome; --coverage-reps, --no-compare, "
                          "--no-baseline and --full do not apply")
    rep.add_argument("--quiet", action="store_true", help="no progress bar")
    return parser


def _columns_text(columns) -> str:
    return ", ".join(repr(str(c)) for c in columns)


def read_table(path: Path, target: str, features=None, feature=None, treatment=None):
    """Return ``(X, y)`` read from the CSV at ``path``, or raise ``InputError``.

    With ``treatment`` (a column name) return ``(X, y, w)``: that column is the treatment,
    left out of the default features and refused among them.
    """
    import pandas as pd

    from hedgerow.report import MIN_ROWS

    if not path.exists():
        raise InputError(f"data file '{path}' not found")
    if path.is_dir():
        raise InputError(f"data file '{path}' is a folder, not a CSV file")
    try:
        # the raw header first: read_csv renames a repeated name ("u" -> "u.1")
        header = ["" if pd.isna(c) else str(c)
                  for c in pd.read_csv(path, header=None, nrows=1, dtype=str).iloc[0]]
        frame = pd.read_csv(path)
    except pd.errors.EmptyDataError:
        raise InputError(f"data file '{path}' is empty (expected a header row and data "
                         f"rows)") from None
    except (pd.errors.ParserError, UnicodeDecodeError) as exc:
        first = str(exc).strip().splitlines()[0] if str(exc).strip() else type(exc).__name__
        raise InputError(f"data file '{path}' could not be read as CSV: {first}") from None
    except OSError as exc:
        raise InputError(f"data file '{path}' could not be read: {exc.strerror}") from None
    frame.columns = [str(c) for c in frame.columns]
    available = list(frame.columns)
    chose_features = features is not None
    dup = sorted({c for c in header if header.count(c) > 1})
    if dup:
        raise InputError(f"data file '{path}' has repeated column names: {_columns_text(dup)}")
    if target not in available:
        raise InputError(f"target column {target!r} not found in '{path}'; available "
                         f"columns: {_columns_text(available)}")
    if treatment is not None:
        if treatment not in available:
            raise InputError(f"--treatment column {treatment!r} not found in '{path}'; "
                             f"available columns: {_columns_text(available)}")
        if treatment == target:
            raise InputError(f"--treatment column {treatment!r} is also the target; the "
                             f"target is the outcome the treatment acts on")
        if features is not None and treatment in features:
            raise InputError(f"the treatment column {treatment!r} cannot also be a feature "
                             f"(--features)")
    if features is None:
        features = [c for c in available if c not in (target, treatment)]
    else:
        missing = [c for c in features if c not in available]
        if missing:
            raise InputError(f"feature column{'s' if len(missing) > 1 else ''} "
                             f"{_columns_text(missing)} not found in '{path}'; available "
                             f"columns: {_columns_text(available)}")
        if target in features:
            raise InputError(f"the target column {target!r} cannot also be a feature "
                             f"(--features)")
        if len(set(features)) < len(features):
            raise InputError("--features names a column more than once")
    if not features:
        raise InputError(f"data file '{path}' has no column besides the target {target!r}")
    if feature is not None and feature not in features:
        where = "the feature columns" if feature in available else f"'{path}'"
        raise InputError(f"--feature column {feature!r} not found in {where}; feature "
                         f"columns: {_columns_text(features)}")
    if frame.shape[0] == 0:
        raise InputError(f"data file '{path}' has a header but no data rows")
    used = [target, *features] + ([treatment] if treatment is not None else [])
    bad = [c for c in used if not pd.api.types.is_numeric_dtype(frame[c])
           or pd.api.types.is_bool_dtype(frame[c])]
    if bad:
        examples = []
        for c in bad:
            col = frame[c].dropna()
            if pd.api.types.is_bool_dtype(col):
                examples.append(f"{c!r} (true/false)")
                continue
            num = pd.to_numeric(col, errors="coerce")
            sample = col[num.isna()]
            examples.append(f"{c!r} (e.g. {str(sample.iloc[0])!r})" if len(sample)
                            else repr(c))
        hint = ("; leave such columns out with --features"
                if not chose_features and target not in bad else "")
        raise InputError(f"non-numeric data in '{path}': column{'s' if len(bad) > 1 else ''} "
                         f"{', '.join(examples)}{hint}")
    gaps = [c for c in used if frame[c].isna().any()]
    if gaps:
        raise InputError(f"missing values in '{path}': column{'s' if len(gaps) > 1 else ''} "
                         f"{_columns_text(gaps)}; fill or drop those rows first")
    if frame.shape[0] < MIN_ROWS:
        raise InputError(f"too few rows in '{path}': {frame.shape[0]}; a report needs at "
                         f"least {MIN_ROWS}")
    X = frame[features].astype("float64")
    y = frame[target].astype("float64")
    if y.nunique() == 1:
        raise InputError(f"the target column {target!r} is constant (every row is "
                         f"{y.iloc[0]!r}): nothing to smooth; no report written")
    if treatment is not None:
        w = frame[treatment].astype("float64")
        if w.nunique() == 1:
            raise InputError(f"the treatment column {treatment!r} is constant (every row is "
                             f"{w.iloc[0]!r}, a single arm): no effect can be estimated; no "
                             f"report written")
        return X, y, w
    return X, y


def _report(args) -> int:
    from hedgerow.report import COMPARISON_ROWS, build_report, write_html

    data = Path(args.data)
    out = args.out if args.out is not None else Path(f"{data.stem}-report.html")
    if out.is_dir():
        raise InputError(f"--out '{out}' is a folder; give a file name")
    parent = out.parent if str(out.parent) else Path(".")
    if not parent.is_dir():
        raise InputError(f"--out folder '{parent}' does not exist")
    if args.treatment is not None:
        return _effect_report(args, data, out)
    X, y = read_table(data, args.target, args.features, args.feature)

    from hedgerow import LocalLinearForestRegressor

    params = {"random_state": args.seed}
    tree_note = None
    if args.trees is not None:
        params["n_estimators"] = args.trees
    elif len(y) > LARGE_TABLE_ROWS:
        params["n_estimators"] = LARGE_TABLE_TREES
        tree_note = (f"The forest grew {LARGE_TABLE_TREES} trees, not the default 2000: the "
                     f"table has {len(y):,} rows (more than {LARGE_TABLE_ROWS:,}). Pass "
                     f"--trees N to choose.")
    model = LocalLinearForestRegressor(**params)
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        try:
            report = build_report(X, y, model=model, feature=args.feature,
                                  title=args.title, compare=not args.no_compare,
                                  coverage_reps=args.coverage_reps,
                                  progress=not args.quiet, random_state=args.seed,
                                  baseline=not args.no_baseline,
                                  comparison_rows=None if args.full else COMPARISON_ROWS)
        except (ValueError, TypeError) as exc:
            raise InputError(str(exc).splitlines()[0]) from None
        if tree_note is not None:
            import dataclasses

            report = dataclasses.replace(report, notes=(tree_note, *report.notes))
        try:
            path = write_html(report, out)
        except OSError as exc:  # the writer's message names --out and the earlier file
            raise InputError(str(exc.strerror or exc)) from None
    _print_warnings(caught)
    for note in report.notes:
        print(f"{PROG}: note: {note}", file=sys.stderr)
    print(f"wrote {path}")
    print(f"verdict: {report.verdict.conclusion}")
    return EXIT_OK


def _print_warnings(caught):
    seen = set()
    for w in caught:
        text = f"{w.category.__name__}: {str(w.message).splitlines()[0]}"
        if text not in seen:
            seen.add(text)
            print(f"{PROG}: warning: {text}", file=sys.stderr)


def _effect_report(args, data, out) -> int:
    """``report --treatment``: the effect report of a treatment-effect forest."""
    from hedgerow.report import build_effect_report, write_html

    unused = [flag for flag, on in (("--coverage-reps", args.coverage_reps > 0),
                                    ("--no-compare", args.no_compare),
                                    ("--no-baseline", args.no_baseline),
                                    ("--full", args.full)) if on]
    if unused:
        raise InputError(f"{', '.join(unused)} do{'es' if len(unused) == 1 else ''} not "
                         f"apply with --treatment (the effect report)")
    X, y, w = read_table(data, args.target, args.features, args.feature,
                         treatment=args.treatment)

    from hedgerow import TreatmentEffectForest

    params = {"random_state": args.seed}
    if args.trees is not None:
        params["n_estimators"] = args.trees
    elif len(y) > LARGE_TABLE_ROWS:
        params["n_estimators"] = LARGE_TABLE_TREES
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        try:
            report = build_effect_report(X, y, w, model=TreatmentEffectForest(**params),
                                         feature=args.feature, title=args.title,
                                         progress=not args.quiet,
                                         random_state=args.seed)
        except (ValueError, TypeError) as exc:
            raise InputError(str(exc).splitlines()[0]) from None
        try:
            path = write_html(report, out)
        except OSError as exc:
            raise InputError(str(exc.strerror or exc)) from None
    _print_warnings(caught)
    a = report.averages["all"]
    lo, hi = a.interval(report.level)
    print(f"wrote {path}")
    print(f"average effect: {a.estimate:.4g} ({100 * report.level:g}% interval {lo:.4g} "
          f"to {hi:.4g}, {a.method})")
    print(f"caution: {report.cautions[0]}")
    return EXIT_OK


def main(argv=None) -> int:
    """Run the ``hedgerow`` command with ``argv`` (default: ``sys.argv[1:]``); return the
    exit code (0 done, 2 bad input, 130 interrupted)."""
    try:
        args = _parser().parse_args(argv)
        if args.command is None:
            _parser().print_help(sys.stderr)
            return EXIT_USAGE
        return _report(args)
    except InputError as exc:
        print(f"{PROG}: error: {exc}", file=sys.stderr)
        return EXIT_USAGE
    except KeyboardInterrupt:
        print(f"{PROG}: interrupted; no report written", file=sys.stderr)
        return EXIT_INTERRUPTED
