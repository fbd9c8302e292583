"""Lazy entry point: ``hedgerow.explore`` without importing the widgets at package import."""

__all__ = ["explore"]


def explore(X, y, *, model=None, feature=None, snapshot=None, **kwargs):
    """Return ``hedgerow.widgets.explore(X, y, ...)`` (needs the ``widgets`` extra).

    ``snapshot`` (a ``hedgerow.snapshot.Snapshot`` or the path of a saved one) restores
    the saved settings, probe, column, ridge penalty and view toggles.
    """
    try:
        from hedgerow.widgets import explore as _explore
    except ImportError as exc:  # pragma: no cover - depends on the installed extras
        raise ImportError(
            "hedgerow.explore needs the widgets extra: pip install 'hedgerow[widgets]' "
            f"({exc})."
        ) from exc
    return _explore(X, y, model=model, feature=feature, snapshot=snapshot, **kwargs)
