"""Atomic writes: a file appears under its name only when complete (grid files, column files, tile parts)."""

from __future__ import annotations

import contextlib
import os
from pathlib import Path

__all__ = ["atomic_output", "fsync_dir"]


@contextlib.contextmanager
def atomic_output(path: Path, tmp: Path | None = None):
    """Write a file so that it appears under ``path`` only when complete.

    Yields a temporary sibling path to write to; when the block ends without
    an error the file is flushed to disk (fsync) and renamed onto ``path``
    (atomic on POSIX), otherwise it is removed.  An interrupted process
    therefore leaves either the previous file or nothing under ``path``.

    ``tmp`` chooses the temporary path (on the same file system), e.g. inside a work directory
    that is removed afterwards, so that not even a ``kill -9`` leaves a stray file beside ``path``.
    """
    import threading

    path = Path(path)
    if tmp is None:
        tmp = path.with_name(f".{path.name}.tmp-{os.getpid()}-{threading.get_ident()}")
    with contextlib.suppress(FileNotFoundError):
        tmp.unlink()  # a leftover of a killed run
    try:
        yield tmp
        with open(tmp, "rb+") as fh:
            os.fsync(fh.fileno())
        os.replace(tmp, path)
    except BaseException:
        with contextlib.suppress(OSError):
            tmp.unlink()
        raise



def fsync_dir(path: Path) -> None:
    """Flush a directory entry to disk (after a rename); best effort."""
    with contextlib.suppress(OSError, AttributeError):
        fd = os.open(path, os.O_RDONLY)
        try:
            os.fsync(fd)
        finally:
            os.close(fd)
