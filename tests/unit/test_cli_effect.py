"""``hedgerow report --treatment``: the effect report from a CSV of an invented trial."""

from __future__ import annotations

import pandas as pd
import pytest

from hedgerow import cli
from hedgerow.datasets import load_trial_demo
from hedgerow.estimators._effect_forest import EFFECT_CAUTION


@pytest.fixture
def trial_csv(tmp_path):
    X, y, w, _ = load_trial_demo(300, random_state=4)
    frame = pd.DataFrame(X, columns=["slope", "moisture", "shade"])
    frame["treated"] = w
    frame["yield"] = y
    path = tmp_path / "trial.csv"
    frame.to_csv(path, index=False)
    return path


def _run(argv, capsys):
    code = cli.main(argv)
    out, err = capsys.readouterr()
    return code, out, err


def test_treatment_writes_the_effect_report(tmp_path, trial_csv, capsys):
    out = tmp_path / "effect.html"
    code, stdout, _ = _run(["report", str(trial_csv), "--target", "yield", "--treatment",
                            "treated", "--out", str(out), "--trees", "64", "--quiet"],
                           capsys)
    assert code == cli.EXIT_OK
    page = out.read_text()
    assert 'id="effect-caution"' in page and "augmented IPW" in page
    # the treatment column is not a feature: the page lists the three others only
    assert "<code>treated</code>" not in page.split("column names", 1)[1].split("</tr>")[0]
    assert "average effect:" in stdout and EFFECT_CAUTION in stdout


@pytest.mark.parametrize("extra, message", [
    (["--treatment", "nope"], "--treatment column 'nope' not found"),
    (["--treatment", "yield"], "is also the target"),
    (["--treatment", "treated", "--features", "slope", "treated"],
     "cannot also be a feature"),
    (["--treatment", "treated", "--full"], "--full does not apply with --treatment"),
    (["--treatment", "treated", "--coverage-reps", "2", "--no-compare"],
     "--coverage-reps, --no-compare do not apply"),
    (["--treatment", "treated", "--feature", "treated"],
     "--feature column 'treated' not found in the feature columns"),
])
def test_bad_treatment_arguments_are_one_line_and_exit_2(tmp_path, trial_csv, capsys, extra,
                                                         message):
    out = tmp_path / "effect.html"
    out.write_text("earlier")
    code, _, err = _run(["report", str(trial_csv), "--target", "yield", "--out", str(out),
                         "--quiet", *extra], capsys)
    assert code == cli.EXIT_USAGE
    assert message in err and len(err.strip().splitlines()) == 1
    assert out.read_text() == "earlier"


def test_a_constant_treatment_is_refused(tmp_path, capsys):
    X, y, w, _ = load_trial_demo(60, random_state=1)
    frame = pd.DataFrame(X, columns=["a", "b", "c"])
    frame["t"] = 1.0
    frame["y"] = y
    path = tmp_path / "one_arm.csv"
    frame.to_csv(path, index=False)
    code, _, err = _run(["report", str(path), "--target", "y", "--treatment", "t",
                         "--quiet", "--out", str(tmp_path / "o.html")], capsys)
    assert code == cli.EXIT_USAGE and "single arm" in err
    assert not (tmp_path / "o.html").exists()


def test_feature_picks_the_column_the_effect_figure_runs_along(tmp_path, trial_csv, capsys):
    out = tmp_path / "effect.html"
    code, _, _ = _run(["report", str(trial_csv), "--target", "yield", "--treatment",
                       "treated", "--feature", "moisture", "--out", str(out), "--trees", "64",
                       "--quiet"], capsys)
    assert code == cli.EXIT_OK
    page = out.read_text()
    along = page[page.index('<section id="effect-along"'):]
    along = along[:along.index("</section>")]
    assert along.count('<svg class="hr-figure"') == 1
    assert "<h3>Along <code>moisture</code></h3>" in along
    assert "effect along moisture" in along
