"""Directories and files of tables: OS failures as messages that name the path."""

from __future__ import annotations

import errno
import os
from pathlib import Path

from sahaboltz.errors import TableError

_HINTS = {errno.EACCES: "no permission to write there",
          errno.EPERM: "no permission to write there",
          errno.ENOTDIR: "a part of the path is a file, not a directory",
          errno.EEXIST: "a part of the path is a file, not a directory",
          errno.EROFS: "the file system is read-only",
          errno.ENOSPC: "the disk is full"}


def describe(exc: OSError) -> str:
    """'Not a directory: a part of the path is a file, not a directory' from an OSError."""
    what = exc.strerror or type(exc).__name__
    hint = _HINTS.get(exc.errno or 0)
    return f"{what} ({hint})" if hint and hint.lower() != what.lower() else what


def ensure_directory(directory: str | Path, what: str, advice: str = "") -> Path:
    """Create ``directory`` (and its parents) if needed and check that files can be written in
    it; a failure is a :class:`TableError` naming ``what`` (e.g. "the table cache directory")
    and the path, with ``advice`` (how to choose another place)."""
    d = Path(directory)
    try:
        d.mkdir(parents=True, exist_ok=True)
    except OSError as exc:
        raise TableError(f"cannot create {what} {d}: {describe(exc)}"
                         + (f"; {advice}" if advice else "")) from None
    if not os.access(d, os.W_OK | os.X_OK):
        raise TableError(f"cannot write in {what} {d}: no permission"
                         + (f"; {advice}" if advice else ""))
    return d


__all__ = ["ensure_directory", "describe"]
