"""``make demo DEMO_CHECK=1``: the non-interactive part of ``make demo`` runs the quickstart."""

import os
import shutil
import subprocess
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[2]
VENV = ROOT / ".venv"


def _installed_since_pyproject():
    """True when a stamp says .venv holds the lab extra and pyproject.toml has not changed.

    Then the target only warms the numba cache and runs the notebook; otherwise it would
    (rightly) install packages first, which a test run should not do behind one's back.
    """
    ref = (ROOT / "pyproject.toml").stat().st_mtime
    stamps = [VENV / ".installed-lab", VENV / ".installed-test"]
    return any(s.is_file() and s.stat().st_mtime > ref for s in stamps)


@pytest.mark.skipif(shutil.which("make") is None and os.environ.get("CI") != "true",
                    reason="make is not installed")
def test_make_demo_check_runs_the_quickstart_headless():
    if not _installed_since_pyproject():
        if os.environ.get("CI") == "true":
            pytest.fail("no up-to-date .venv: .ci/run runs `make test`, which installs it")
        pytest.skip(".venv is missing or older than pyproject.toml; run `make test` first")
    env = {k: v for k, v in os.environ.items() if k not in ("MAKEFLAGS", "MFLAGS")}
    proc = subprocess.run(["make", "--no-print-directory", "demo", "DEMO_CHECK=1"], cwd=ROOT,
                          env=env, capture_output=True, text=True, timeout=600)
    assert proc.returncode == 0, proc.stdout + proc.stderr
    assert "notebooks/01-quickstart.ipynb ran top to bottom" in proc.stdout
    assert "pip install" not in proc.stdout  # the existing .venv was reused
    assert "jupyter lab" not in proc.stdout  # headless: no server started


def test_demo_check_fails_when_a_cell_fails(tmp_path):
    nbformat = pytest.importorskip("nbformat")
    pytest.importorskip("nbclient")
    import sys

    book = nbformat.v4.new_notebook(metadata={"kernelspec": {
        "name": "python3", "display_name": "Python 3", "language": "python"}})
    book.cells = [nbformat.v4.new_code_cell("x = 1"),
                  nbformat.v4.new_code_cell("raise RuntimeError('cell two breaks')")]
    path = tmp_path / "broken.ipynb"
    nbformat.write(book, path)
    proc = subprocess.run([sys.executable, str(ROOT / "examples" / "run_notebook.py"),
                           str(path)], capture_output=True, text=True, timeout=300)
    assert proc.returncode == 1
    assert "cell two breaks" in proc.stderr and "broken.ipynb failed" in proc.stderr
