"""The work directory of a run, ``<output>.parts``: a lock, ``spec.json`` and one file per finished tile."""

from __future__ import annotations

import contextlib
import json
import os
import shutil
import sys
import zipfile
from pathlib import Path
from typing import Callable, Mapping

import numpy as np

from ..io.atomic import atomic_output, fsync_dir as _fsync_dir
from .spec import GridSpec, Tile

__all__ = ["WorkDir", "parts_dir_for", "remove_stale_parts", "GridMismatchError", "GridBusyError"]

_SPEC_FILE = "spec.json"
_LOCK_FILE = "lock"


class GridMismatchError(ValueError):
    """The work directory of an output holds parts of a different grid."""


class GridBusyError(OSError):
    """Another process is computing the same output."""


def parts_dir_for(output: str | os.PathLike) -> Path:
    """The work directory of an output: ``<output>.parts`` beside it."""
    p = Path(output)
    return p.with_name(p.name + ".parts")


def _atomic_write_bytes(path: Path, write: Callable) -> None:
    """Write via ``write(fileobj)`` so that ``path`` appears only when complete (see :func:`io.atomic_output`)."""
    with atomic_output(path) as tmp:
        with open(tmp, "wb") as fh:
            write(fh)


class WorkDir:
    """The ``<output>.parts`` directory of a run: a lock, ``spec.json`` and one file per finished tile."""

    def __init__(self, path: Path, spec: GridSpec):
        self.path = path
        self.spec = spec
        self.digest = spec.digest()
        self._lock_fh = None

    # -- lifecycle ----------------------------------------------------------------------------------
    def open(self, *, discard: bool = False) -> int:
        """Create or reuse the directory; returns the number of finished tiles found.

        Raises :class:`GridMismatchError` if it holds another grid's parts
        (unless ``discard``), :class:`GridBusyError` if another process holds the lock.
        """
        if self.path.exists() and not self.path.is_dir():
            raise FileExistsError(f"{self.path} exists and is not a directory; it is in the way of the "
                                  "work directory of this grid")
        self.path.mkdir(exist_ok=True)
        self._lock()
        spec_file = self.path / _SPEC_FILE
        if spec_file.exists():
            try:
                stored = json.loads(spec_file.read_text())
                same = stored.get("digest") == self.digest
            except (OSError, ValueError, AttributeError):
                stored, same = None, False
            if not same:
                if not discard:
                    what = _describe_mismatch(stored, self.spec) if stored else "its spec.json is unreadable"
                    self.close()
                    raise GridMismatchError(
                        f"{self.path} holds the parts of a different grid ({what}); finish that run, remove "
                        "the directory, or start over with --discard-parts")
                self._clear()
        else:
            # no spec.json: a run killed before writing it leaves at most the lock and hidden
            # temporary files; anything else means the directory is not ours
            foreign = [p.name for p in self.path.iterdir()
                       if p.name != _LOCK_FILE and not (p.name.startswith(".") and ".tmp-" in p.name)]
            if foreign:
                self.close()
                raise FileExistsError(f"{self.path} exists but is not an ionbal work directory (it holds "
                                      f"{', '.join(sorted(foreign)[:3])}{', ...' if len(foreign) > 3 else ''}); "
                                      "move it away")
            self._clear()
        if not spec_file.exists():
            payload = {"digest": self.digest, **self.spec.fingerprint()}
            text = json.dumps(payload, sort_keys=True, indent=1).encode()
            _atomic_write_bytes(spec_file, lambda fh: fh.write(text))
            _fsync_dir(self.path)
        return len(self.finished())

    def _lock(self) -> None:
        try:
            import fcntl
        except ImportError:  # pragma: no cover - not POSIX
            return
        fh = open(self.path / _LOCK_FILE, "a+b")
        try:
            fcntl.flock(fh.fileno(), fcntl.LOCK_EX | fcntl.LOCK_NB)
        except OSError:
            fh.close()
            raise GridBusyError(f"another ionbal process is computing this grid (lock held on "
                                f"{self.path / _LOCK_FILE}); wait for it or stop it") from None
        self._lock_fh = fh

    def close(self) -> None:
        if self._lock_fh is not None:
            with contextlib.suppress(OSError):
                self._lock_fh.close()
            self._lock_fh = None

    def _clear(self) -> None:
        for p in self.path.iterdir():
            if p.name == _LOCK_FILE:
                continue
            if p.is_dir() and not p.is_symlink():
                shutil.rmtree(p, ignore_errors=True)
            else:
                with contextlib.suppress(OSError):
                    p.unlink()

    def remove(self) -> None:
        """Remove the directory: rename it away atomically first, then delete it."""
        self.close()
        trash = self.path.with_name(f".{self.path.name}.removing-{os.getpid()}")
        try:
            os.replace(self.path, trash)
        except OSError:
            trash = self.path
        shutil.rmtree(trash, ignore_errors=True)

    # -- tiles ---------------------------------------------------------------------------------------
    def tile_path(self, index: int) -> Path:
        return self.path / f"tile-{index:07d}.npz"

    def finished(self) -> set[int]:
        done = set()
        for p in self.path.glob("tile-*.npz"):
            with contextlib.suppress(ValueError):
                done.add(int(p.stem.split("-")[1]))
        return done

    def save(self, tile: Tile, arrays: Mapping[str, np.ndarray]) -> None:
        meta = np.frombuffer(json.dumps({"digest": self.digest, "index": tile.index}).encode(), dtype=np.uint8)

        def write(fh):
            np.savez(fh, _meta=meta, **arrays)

        _atomic_write_bytes(self.tile_path(tile.index), write)

    def load(self, tile: Tile) -> dict[str, np.ndarray] | None:
        """The stored arrays of a tile, or None if missing or damaged (then it is recomputed)."""
        path = self.tile_path(tile.index)
        try:
            with np.load(path, allow_pickle=False) as z:
                data = {k: z[k] for k in z.files}
        except FileNotFoundError:
            return None
        except (OSError, ValueError, EOFError, KeyError, zipfile.BadZipFile) as exc:  # damaged part
            _warn(f"tile file {path.name} is damaged ({exc.__class__.__name__}); it will be recomputed")
            with contextlib.suppress(OSError):
                path.unlink()
            return None
        try:
            meta = json.loads(bytes(data.pop("_meta")).decode())
            ok = meta.get("digest") == self.digest and meta.get("index") == tile.index
            ok = ok and all(v.shape[-2:] == tile.shape for v in data.values())
        except (KeyError, ValueError, AttributeError):
            ok = False
        if not ok:
            _warn(f"tile file {path.name} does not match this grid; it will be recomputed")
            with contextlib.suppress(OSError):
                path.unlink()
            return None
        return data


def remove_stale_parts(output: Path) -> bool:
    """Remove ``<output>.parts`` when it only duplicates the complete grid file ``output``.

    A run killed after publishing its file but before removing its work directory leaves both; the
    parts are stale when their ``spec.json`` matches the file's spec, version and data tables.
    Nothing is removed while another process holds the directory's lock.  Returns True if removed.
    """
    from ..io.reader import read_fingerprint

    parts = parts_dir_for(output)
    spec_file = parts / _SPEC_FILE
    if not (Path(output).is_file() and spec_file.is_file()):
        return False
    try:
        stored = json.loads(spec_file.read_text())
    except (OSError, ValueError):
        return False
    made_of = read_fingerprint(output)
    if made_of is None or not isinstance(stored, Mapping) or any(stored.get(k) != v for k, v in made_of.items()):
        return False
    try:
        import fcntl
    except ImportError:  # pragma: no cover - not POSIX
        return False
    with open(parts / _LOCK_FILE, "a+b") as fh:
        try:
            fcntl.flock(fh.fileno(), fcntl.LOCK_EX | fcntl.LOCK_NB)
        except OSError:
            return False  # a run is using it
        trash = parts.with_name(f".{parts.name}.removing-{os.getpid()}")
        try:
            os.replace(parts, trash)
        except OSError:
            return False
    shutil.rmtree(trash, ignore_errors=True)
    return True


def _describe_mismatch(stored: Mapping, spec: GridSpec) -> str:
    now = spec.fingerprint()
    diffs = []
    old_spec = stored.get("spec", {}) if isinstance(stored, Mapping) else {}
    for key, value in now["spec"].items():
        if old_spec.get(key) != value:
            diffs.append(key.replace("_", " "))
    if stored.get("ionbal_version") != now["ionbal_version"]:
        diffs.append(f"ionbal version {stored.get('ionbal_version')} vs {now['ionbal_version']}")
    if stored.get("tables") != now["tables"]:
        diffs.append("data tables")
    return "differs in " + ", ".join(diffs) if diffs else "different fingerprint"


def _warn(message: str) -> None:
    print(f"ionbal: warning: {message}", file=sys.stderr)

