"""Run notebooks top to bottom without a browser (what ``make demo DEMO_CHECK=1`` does).

    python examples/run_notebook.py notebooks/01-quickstart.ipynb [more.ipynb ...]

Each notebook runs with nbclient in a fresh ``python3`` kernel (this interpreter's) from
its own folder; nothing is written back, so the committed notebooks stay without outputs.
Exits 0 when every cell of every notebook ran, 1 otherwise (naming the failing cell).
"""

from __future__ import annotations

import argparse
import sys
import time
from pathlib import Path

#: Longest a single cell may run before it counts as hanging.
CELL_TIMEOUT_S = 600


def run(path: Path) -> float:
    """Execute the notebook at ``path``; return the seconds it took."""
    import nbclient
    import nbformat

    book = nbformat.read(path, as_version=4)
    client = nbclient.NotebookClient(book, timeout=CELL_TIMEOUT_S, kernel_name="python3",
                                     resources={"metadata": {"path": str(path.parent)}})
    start = time.perf_counter()
    client.execute()
    return time.perf_counter() - start


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("notebooks", nargs="+", type=Path)
    args = parser.parse_args(argv)
    from nbclient.exceptions import CellExecutionError

    for path in args.notebooks:
        if not path.is_file():
            print(f"run_notebook: no notebook at {str(path)!r}", file=sys.stderr)
            return 1
        try:
            seconds = run(path)
        except CellExecutionError as exc:
            print(f"run_notebook: {path} failed:\n{exc}", file=sys.stderr)
            return 1
        print(f"run_notebook: {path} ran top to bottom in {seconds:.1f} s")
    return 0


if __name__ == "__main__":
    sys.exit(main())
