"""Progress for long work: tqdm's notebook-aware bar, a silent stand-in, or a run control.

Long loops (tuning surface, coverage readout) take ``progress``: ``True`` for a tqdm bar,
``False`` for none, or a :class:`RunControl`, through which another thread (a widget)
follows the progress and asks the run to stop. A stop request raises
:class:`RunCancelled` at the next progress step; it subclasses ``KeyboardInterrupt``, so
the loops that already return partial results on Ctrl-C do the same on a cancel.
"""

from __future__ import annotations

import threading

__all__ = ["RunCancelled", "RunControl", "progress_bar"]


class RunCancelled(KeyboardInterrupt):
    """Raised inside a long run whose :class:`RunControl` was cancelled."""


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


class RunControl:
    """Follow a long run from another thread and stop it between steps.

    Parameters
    ----------
    on_update : callable(done, total) or None
        Called (in the worker's thread) after every completed step.
    """

    def __init__(self, on_update=None):
        self._on_update = on_update
        self._cancel = threading.Event()
        self.done = 0
        self.total = 0
        self.desc = ""

    def cancel(self):
        """Ask the run to stop at its next step (it returns what it has finished)."""
        self._cancel.set()

    @property
    def cancelled(self) -> bool:
        return self._cancel.is_set()

    # the progress-bar protocol used by the loops
    def _start(self, total, desc):
        self.total, self.desc, self.done = (None if total is None else int(total)), desc, 0
        return self

    def update(self, n=1):
        self.done += n
        if self._on_update is not None:
            self._on_update(self.done, self.total)
        if self._cancel.is_set():
            of = "" if self.total is None else f" of {self.total}"
            raise RunCancelled(f"{self.desc} cancelled after {self.done}{of} steps")

    def set_postfix_str(self, s):
        pass

    def close(self):
        pass


def progress_bar(total: int | None, desc: str, enabled=True):
    """Return a progress bar (a notebook widget under Jupyter), a run control or a stand-in.

    ``enabled`` is a bool or a :class:`RunControl` (which is returned, set to ``total``).
    """
    if isinstance(enabled, RunControl):
        return enabled._start(total, desc)
    if not enabled:
        return _Silent()
    try:
        from tqdm.auto import tqdm
    except ImportError:  # pragma: no cover - tqdm is a dependency, but stay usable
        return _Silent()
    return tqdm(total=total, desc=desc, leave=False)
