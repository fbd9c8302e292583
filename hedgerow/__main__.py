"""``python -m hedgerow``: the same command as the ``hedgerow`` script."""

from hedgerow.cli import main

if __name__ == "__main__":
    raise SystemExit(main())
