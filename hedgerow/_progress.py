"""Progress bars for long work: tqdm's notebook-aware bar, or a silent stand-in."""

from __future__ import annotations

__all__ = ["progress_bar"]


class _Silent:
    def update(self, n=1):
        pass

    def set_postfix_str(self, s):
        pass

    def close(self):
        pass

    def __enter__(self):
        return self

    def __exit__(self, *exc):
        self.close()
        return False


def progress_bar(total: int, desc: str, enabled: bool = True):
    """Return a progress bar (a notebook widget under Jupyter) or a silent stand-in."""
    if not enabled:
        return _Silent()
    try:
        from tqdm.auto import tqdm
    except ImportError:  # pragma: no cover - tqdm is a dependency, but stay usable
        return _Silent()
    return tqdm(total=total, desc=desc, leave=False)
