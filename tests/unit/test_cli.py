"""The ``hedgerow`` command on CSV files the tests write from invented data."""

from __future__ import annotations

import html
import os
import shutil
import subprocess
import sys
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from hedgerow import cli
from hedgerow.report import data_fingerprint

FEATURES = ["speed", "temp <C>", "hum"]


def _frame(n=160, seed=2):
    rng = np.random.default_rng(seed)
    frame = pd.DataFrame({"speed": rng.uniform(0.0, 10.0, n),
                          "temp <C>": rng.normal(20.0, 3.0, n),
                          "hum": rng.uniform(0.0, 1.0, n)})
    frame["output"] = 10.0 * np.tanh(frame["speed"] / 3.0) + rng.normal(0.0, 1.0, n)
    return frame


@pytest.fixture
def csv(tmp_path):
    path = tmp_path / "line_a.csv"
    _frame().to_csv(path, index=False)
    return path


def _run(argv, capsys):
    code = cli.main(argv)
    out, err = capsys.readouterr()
    return code, out, err


def test_report_from_a_csv(tmp_path, csv, capsys):
    out = tmp_path / "review.html"
    # 200 trees: 8 little bags of 25, so no few-bags warning joins stderr (checked below)
    code, stdout, err = _run(["report", str(csv), "--target", "output", "--trees", "200",
                              "--seed", "7", "--feature", "hum", "--out", str(out),
                              "--quiet"], capsys)
    assert code == 0, err
    assert f"wrote {out}" in stdout
    assert "verdict: " in stdout
    page = out.read_text(encoding="utf-8")
    frame = pd.read_csv(csv)
    # the report was built on exactly the table in the file, with the options given
    assert data_fingerprint(frame[FEATURES], frame["output"]) in page
    assert "<td>n_estimators</td><td>200</td>" in page
    assert "<td>random_state</td><td>7</td>" in page
    assert "sliced column</th><td class='hr-text'><code>hum</code>" in page
    conclusion = stdout.split("verdict: ", 1)[1].strip()
    assert html.escape(conclusion) in page
    assert "temp &lt;C&gt;" in page
    assert err == ""  # --quiet: no progress bar


def test_features_and_default_output_name(tmp_path, csv, capsys, monkeypatch):
    monkeypatch.chdir(tmp_path)
    code, stdout, err = _run(["report", str(csv), "--target", "output", "--features",
                              "speed", "hum", "--trees", "20", "--no-compare"], capsys)
    assert code == 0, err
    out = tmp_path / "line_a-report.html"
    page = out.read_text(encoding="utf-8")
    assert "temp &lt;C&gt;" not in page  # left out by --features
    frame = pd.read_csv(csv)
    assert data_fingerprint(frame[["speed", "hum"]], frame["output"]) in page
    assert "Nadaraya-Watson" not in page
    assert "hedgerow report" in err  # the progress bar goes to stderr


def _bad_csvs(tmp_path):
    frame = _frame()
    files = {}
    files["empty"] = tmp_path / "empty.csv"
    files["empty"].write_text("")
    files["header"] = tmp_path / "header.csv"
    frame.head(0).to_csv(files["header"], index=False)
    files["text"] = tmp_path / "text.csv"
    frame.assign(site=["north", "south"] * (len(frame) // 2)).to_csv(files["text"],
                                                                        index=False)
    files["gaps"] = tmp_path / "gaps.csv"
    g = frame.copy()
    g.loc[5, "hum"] = np.nan
    g.to_csv(files["gaps"], index=False)
    files["few"] = tmp_path / "few.csv"
    frame.head(6).to_csv(files["few"], index=False)
    files["good"] = tmp_path / "good.csv"
    frame.to_csv(files["good"], index=False)
    return files


@pytest.mark.parametrize(
    "args, message",
    [
        (["{missing}", "--target", "output"], r"data file '.*nowhere\.csv' not found"),
        (["{good}", "--target", "yield"],
         r"target column 'yield' not found in '.*good\.csv'; available columns: 'speed', "
         r"'temp <C>', 'hum', 'output'"),
        (["{good}", "--target", "output", "--features", "speed", "rpm"],
         r"feature column 'rpm' not found in '.*good\.csv'; available columns: 'speed'"),
        (["{good}", "--target", "output", "--feature", "rpm"],
         r"--feature column 'rpm' not found in '.*good\.csv'; feature columns: 'speed'"),
        (["{good}", "--target", "output", "--features", "speed", "output"],
         r"target column 'output' cannot also be a feature"),
        (["{text}", "--target", "output"],
         r"non-numeric data in '.*text\.csv': column 'site' \(e\.g\. 'north'\); leave such "
         r"columns out with --features"),
        (["{text}", "--target", "site", "--features", "speed"],
         r"non-numeric data in '.*text\.csv': column 'site' \(e\.g\. 'north'\)$"),
        (["{gaps}", "--target", "output"], r"missing values in '.*gaps\.csv': column 'hum'"),
        (["{empty}", "--target", "output"], r"data file '.*empty\.csv' is empty"),
        (["{header}", "--target", "output"], r"has a header but no data rows"),
        (["{few}", "--target", "output"], r"too few rows in '.*few\.csv': 6; a report needs "
                                           r"at least 20"),
        (["{good}", "--target", "output", "--trees", "0"],
         r"argument --trees: expected a number >= 1, got 0"),
        (["{good}"], r"the following arguments are required: --target"),
        (["{good}", "--target", "output", "--out", "{missing_dir}"],
         r"--out folder '.*no_such_folder' does not exist"),
    ],
)
def test_bad_input_is_one_line_and_exit_code_2(tmp_path, capsys, args, message):
    import re

    files = _bad_csvs(tmp_path)
    names = {k: str(v) for k, v in files.items()}
    names["missing"] = str(tmp_path / "nowhere.csv")
    names["missing_dir"] = str(tmp_path / "no_such_folder" / "r.html")
    out = tmp_path / "keep.html"
    out.write_text("earlier report")
    argv = ["report", *(a.format(**names) for a in args)]
    if "--out" not in argv:
        argv += ["--out", str(out)]
    code, stdout, err = _run(argv + ["--trees", "10"] if "--trees" not in argv else argv,
                             capsys)
    assert code == cli.EXIT_USAGE == 2
    lines = err.strip().splitlines()
    assert len(lines) == 1, err
    assert lines[0].startswith("hedgerow: error: ")
    assert re.search(message, lines[0]), lines[0]
    assert "Traceback" not in err and stdout == ""
    assert out.read_text() == "earlier report"


def test_no_command_prints_help_and_exits_2(capsys):
    code, _, err = _run([], capsys)
    assert code == 2 and "report" in err


def _script():
    here = Path(sys.executable).parent / ("hedgerow.exe" if os.name == "nt" else "hedgerow")
    return str(here) if here.exists() else shutil.which("hedgerow")


def test_installed_script_writes_a_report(tmp_path, csv):
    script = _script()
    if script is None:
        if os.environ.get("CI", "").lower() == "true":
            pytest.fail("CI=true but the hedgerow script is not installed")
        pytest.skip("the hedgerow script is not installed (pip install -e .)")
    out = tmp_path / "from_script.html"
    done = subprocess.run([script, "report", str(csv), "--target", "output", "--trees", "20",
                           "--out", str(out)], capture_output=True, text=True, timeout=300)
    assert done.returncode == 0, done.stderr
    assert "hedgerow report" in done.stderr  # tqdm on the terminal's stderr
    assert out.read_text(encoding="utf-8").startswith("<!DOCTYPE html>")
    bad = subprocess.run([script, "report", str(tmp_path / "absent.csv"), "--target", "y"],
                         capture_output=True, text=True, timeout=300)
    assert bad.returncode == 2
    assert bad.stderr.strip().splitlines() == [
        f"hedgerow: error: data file '{tmp_path / 'absent.csv'}' not found"]


def test_python_dash_m(tmp_path):
    done = subprocess.run([sys.executable, "-m", "hedgerow", "report", "--help"],
                          capture_output=True, text=True, timeout=300)
    assert done.returncode == 0
    assert "--target" in done.stdout and "--features" in done.stdout
    bad = subprocess.run([sys.executable, "-m", "hedgerow", "report",
                          str(tmp_path / "absent.csv"), "--target", "y"],
                         capture_output=True, text=True, timeout=300)
    assert bad.returncode == 2 and "not found" in bad.stderr


# -- large tables: subsampled comparisons, --full, --no-baseline, progress ---------------------
def _verdict_rows(page):
    import re

    sec = re.search(r'<section id="verdict">(.*?)</section>', page, flags=re.S).group(1)
    return sec


def test_no_baseline_leaves_the_scikit_learn_forest_out(tmp_path, csv, capsys):
    runs = {}
    for flag in ([], ["--no-baseline"]):
        out = tmp_path / f"r{len(flag)}.html"
        code, _, err = _run(["report", str(csv), "--target", "output", "--trees", "20",
                             "--no-compare", "--quiet", "--out", str(out), *flag], capsys)
        assert code == 0, err
        runs[bool(flag)] = _verdict_rows(out.read_text(encoding="utf-8"))
    assert "random forest (scikit-learn)" in runs[False]
    assert "random forest (scikit-learn)" not in runs[True]
    assert "honest forest" in runs[True]


def test_above_the_threshold_comparisons_use_a_subsample_unless_full(tmp_path, csv, capsys,
                                                                      monkeypatch):
    import hedgerow.report as R

    monkeypatch.setattr(R, "COMPARISON_ROWS", 60)  # the table has 160 rows
    out = tmp_path / "sub.html"
    code, _, err = _run(["report", str(csv), "--target", "output", "--trees", "20",
                         "--quiet", "--out", str(out)], capsys)
    assert code == 0, err
    page = out.read_text(encoding="utf-8")
    assert "note: Large table (160 rows)" in err and "a random 60 of them" in err
    assert "<p class='hr-note'>Large table (160 rows)" in page
    assert "--full uses every row" in page
    out = tmp_path / "full.html"
    code, _, err = _run(["report", str(csv), "--target", "output", "--trees", "20",
                         "--quiet", "--full", "--out", str(out)], capsys)
    assert code == 0, err
    assert "Large table" not in err
    assert "hr-note" not in out.read_text(encoding="utf-8").split("</header>")[0].split(
        "</style>")[1]


def test_progress_names_every_long_step(tmp_path, csv, capsys):
    out = tmp_path / "p.html"
    code, _, err = _run(["report", str(csv), "--target", "output", "--trees", "20",
                         "--coverage-reps", "1", "--out", str(out)], capsys)
    assert code == 0, err
    # the tree growth, both bandwidth searches, the verdict's fits and the readout
    for text in ("fit: 20/20 trees", "smoothers: Nadaraya-Watson", "smoothers: local linear",
                 "bandwidth evaluations", "verdict: ", " fits", "coverage: 1/1 replications"):
        assert text in err, text


def test_few_trees_warn_on_stderr_naming_the_tree_count_to_grow(tmp_path, csv, capsys):
    out = tmp_path / "few.html"
    code, _, err = _run(["report", str(csv), "--target", "output", "--trees", "40",
                         "--no-compare", "--no-baseline", "--out", str(out), "--quiet"],
                        capsys)
    assert code == 0 and out.exists()
    assert "hedgerow: warning: FewBagsWarning" in err and "n_estimators >= 160" in err


def test_a_large_table_grows_fewer_trees_unless_trees_is_given(tmp_path, csv, capsys,
                                                               monkeypatch):
    import hedgerow.cli as C

    # the table has 160 rows: above a threshold of 100 the forest grows LARGE_TABLE_TREES
    monkeypatch.setattr(C, "LARGE_TABLE_ROWS", 100)
    monkeypatch.setattr(C, "LARGE_TABLE_TREES", 40)
    out = tmp_path / "large.html"
    code, _, err = _run(["report", str(csv), "--target", "output", "--no-compare",
                         "--no-baseline", "--quiet", "--out", str(out)], capsys)
    assert code == 0, err
    page = out.read_text(encoding="utf-8")
    assert "<td>n_estimators</td><td>40</td>" in page
    assert "note: The forest grew 40 trees, not the default 2000" in err
    assert "<p class='hr-note'>The forest grew 40 trees" in page and "--trees N" in page
    out = tmp_path / "chosen.html"
    code, _, err = _run(["report", str(csv), "--target", "output", "--no-compare",
                         "--no-baseline", "--quiet", "--trees", "20", "--out", str(out)],
                        capsys)
    assert code == 0, err
    assert "<td>n_estimators</td><td>20</td>" in out.read_text(encoding="utf-8")
    assert "The forest grew" not in err
