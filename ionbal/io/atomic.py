"""Atomic writes: a file appears under its name only when complete (grid files, column files, tile parts)."""

from __future__ import annotations

import contextlib
import os
from pathlib import Path

__all__ = ["atomic_output", "publish", "fsync_dir"]


@contextlib.contextmanager
def atomic_output(path: Path, tmp: Path | None = None, *, overwrite: bool = True):
    """Write a file so that it appears under ``path`` only when complete.

    Yields a temporary sibling path to write to; when the block ends without
    an error the file is flushed to disk (fsync) and renamed onto ``path``
    (atomic on POSIX), otherwise it is removed.  An interrupted process
    therefore leaves either the previous file or nothing under ``path``.

    ``tmp`` chooses the temporary path (on the same file system), e.g. inside a work directory
    that is removed afterwards, so that not even a ``kill -9`` leaves a stray file beside ``path``.

    With ``overwrite=False`` an existing ``path`` is never replaced, not even one that appeared
    while the file was being written: the file is published with a hard link, which fails if the
    target exists (``FileExistsError``; the temporary file is removed).
    """
    import threading

    path = Path(path)
    if tmp is None:
        tmp = path.with_name(f".{path.name}.tmp-{os.getpid()}-{threading.get_ident()}")
    with contextlib.suppress(FileNotFoundError):
        tmp.unlink()  # a leftover of a killed run
    try:
        yield tmp
        publish(tmp, path, overwrite=overwrite)
    except BaseException:
        with contextlib.suppress(OSError):
            tmp.unlink()
        raise



def publish(tmp: Path, path: Path, *, overwrite: bool = True) -> None:
    """Flush ``tmp`` to disk and rename it onto ``path`` (atomic on POSIX); see :func:`atomic_output`."""
    with open(tmp, "rb+") as fh:
        os.fsync(fh.fileno())
    if overwrite:
        os.replace(tmp, path)
    else:
        _publish_new(tmp, path)


def _publish_new(tmp: Path, path: Path) -> None:
    """Rename ``tmp`` onto ``path`` only if ``path`` does not exist (atomically where hard links work)."""
    try:
        os.link(tmp, path)
    except FileExistsError:
        raise FileExistsError(f"output {path} appeared while it was being written; it was left untouched "
                              "(pass --overwrite (overwrite=True) to replace it)") from None
    except (OSError, AttributeError, NotImplementedError):  # no hard links on this file system
        if os.path.lexists(path):
            raise FileExistsError(f"output {path} appeared while it was being written; it was left untouched "
                                  "(pass --overwrite (overwrite=True) to replace it)") from None
        os.replace(tmp, path)
        return
    os.unlink(tmp)


def fsync_dir(path: Path) -> None:
    """Flush a directory entry to disk (after a rename); best effort."""
    with contextlib.suppress(OSError, AttributeError):
        fd = os.open(path, os.O_RDONLY)
        try:
            os.fsync(fd)
        finally:
            os.close(fd)
