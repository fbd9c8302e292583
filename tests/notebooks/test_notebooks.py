"""The notebooks: committed without outputs, and each runs top to bottom with nbclient."""

import importlib.util
import sys
import time
from pathlib import Path

import pytest

nbformat = pytest.importorskip("nbformat")
nbclient = pytest.importorskip("nbclient")

ROOT = Path(__file__).resolve().parents[2]
NOTEBOOKS = ROOT / "notebooks"
GUIDES = sorted(NOTEBOOKS.glob("0*.ipynb"))
#: Each guide notebook must run in under this many seconds (the budget they are kept to).
BUDGET_S = 120.0
#: A single cell may take at most this long before nbclient stops it.
CELL_TIMEOUT_S = 300

pytestmark = pytest.mark.filterwarnings("ignore::DeprecationWarning")


def test_the_five_guides_are_there():
    assert [p.name for p in GUIDES] == [
        "01-quickstart.ipynb", "02-is-a-smooth-correction-warranted.ipynb",
        "03-tuning-by-eye.ipynb", "04-reviewing-a-model.ipynb",
        "05-does-the-effect-vary.ipynb"]


@pytest.mark.parametrize("path", sorted(NOTEBOOKS.glob("*.ipynb")), ids=lambda p: p.name)
def test_committed_without_outputs(path):
    book = nbformat.read(path, as_version=4)
    nbformat.validate(book)
    dirty = [i for i, c in enumerate(book.cells) if c.cell_type == "code"
             and (c.get("outputs") or c.get("execution_count") is not None)]
    assert not dirty, f"{path.name}: cells {dirty} have outputs or execution counts; " \
                      f"clear them before committing"
    assert book.metadata["kernelspec"]["name"] == "python3"


def _needs_report(path):
    if path.name.startswith("04") and importlib.util.find_spec("hedgerow.report") is None:
        return pytest.mark.xfail(reason="hedgerow.report (save_html) has not landed yet",
                                 strict=True)
    return ()


@pytest.mark.parametrize("path", [pytest.param(p, marks=_needs_report(p)) for p in GUIDES],
                         ids=lambda p: p.name)
def test_notebook_runs_top_to_bottom(path, tmp_path):
    book = nbformat.read(path, as_version=4)
    client = nbclient.NotebookClient(book, timeout=CELL_TIMEOUT_S, kernel_name="python3",
                                     resources={"metadata": {"path": str(tmp_path)}})
    start = time.perf_counter()
    client.execute()  # raises CellExecutionError naming the cell on any error
    seconds = time.perf_counter() - start
    print(f"{path.name}: {seconds:.1f} s", file=sys.stderr)
    errors = [o for c in book.cells if c.cell_type == "code" for o in c.outputs
              if o.get("output_type") == "error"]
    assert not errors
    assert seconds < BUDGET_S, f"{path.name} took {seconds:.0f} s (budget {BUDGET_S:.0f} s)"
