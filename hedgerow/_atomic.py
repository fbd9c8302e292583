"""One atomic text-file writer, shared by saved reports and snapshots.

Ground layer (no imports from hedgerow). The text goes to a temporary file in the same
folder, is flushed and ``fsync``-ed, takes the earlier file's permission bits, then
replaces ``path`` in one ``os.replace``: a reader sees the old file or the new one, never a
mix, and a failure at any point (an exception while writing, a full disk, Ctrl-C) removes
the temporary file and leaves the earlier file as it was.

An ``OSError`` is raised again with a message naming the path the caller gave (the
operating system would name the temporary file), what was being written and whether an
earlier file survives; any other exception passes through unchanged.
"""

from __future__ import annotations

import contextlib
import os
import tempfile
from collections.abc import Callable
from pathlib import Path
from typing import TextIO

__all__ = ["write_text_atomic"]


def write_text_atomic(path, write: Callable[[TextIO], object], *, what: str) -> Path:
    """Return ``path`` after writing it atomically through ``write(fh)``.

    Parameters
    ----------
    path : str or os.PathLike
        The file to write; its folder must exist (callers check and name it first).
    write : callable(fh)
        Writes the text to the open file ``fh`` (UTF-8, ``\\n`` line ends).
    what : str
        What is written, for messages ("the report", "the snapshot").
    """
    path = Path(path)
    directory = path.parent if str(path.parent) else Path(".")
    mode = (path.stat().st_mode & 0o777) if path.exists() else 0o644
    try:
        fd, tmp = tempfile.mkstemp(prefix=f".{path.name}.", suffix=".tmp", dir=directory)
    except OSError as exc:
        raise _naming_the_path(exc, what, path, "choose a writable place") from exc
    try:
        with os.fdopen(fd, "w", encoding="utf-8", newline="\n") as fh:
            write(fh)
            fh.flush()
            os.fsync(fh.fileno())
        os.chmod(tmp, mode)
        os.replace(tmp, path)
    except OSError as exc:
        with contextlib.suppress(OSError):
            os.unlink(tmp)
        raise _naming_the_path(exc, what, path, "the earlier file is unchanged") from exc
    except BaseException:
        with contextlib.suppress(OSError):
            os.unlink(tmp)
        raise
    return path


def _naming_the_path(exc: OSError, what: str, path: Path, then: str) -> OSError:
    """Return an error of the same kind as ``exc`` whose message names ``path``."""
    message = f"Cannot write {what} to {str(path)!r} ({exc.strerror or exc}); {then}"
    try:
        return type(exc)(exc.errno, message, str(path))
    except TypeError:  # an OSError subclass with its own signature
        return OSError(exc.errno, message, str(path))
