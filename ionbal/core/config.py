"""All numba settings of ionbal, in one place.

Every kernel in :mod:`ionbal.core` is compiled through :func:`jit` (serial
scalar and array kernels) or :func:`pjit` (``prange`` drivers).  The settings
are read once, at import, from environment variables:

``IONBAL_DISABLE_JIT=1``
    Run the kernels as plain Python (slow; for debugging and coverage).
``IONBAL_NUMBA_CACHE=0``
    Do not write or read numba's on-disk cache (``cache=True`` otherwise).
``IONBAL_PARALLEL=0``
    Compile the ``prange`` drivers serially.
``IONBAL_FASTMATH=1``
    Allow fast-math reassociation.  Off by default: the solver tests its
    residuals against 1e-12 and relies on IEEE ``inf`` handling.

The number of threads used by the parallel drivers is numba's
(``NUMBA_NUM_THREADS``, or :func:`set_num_threads` at run time).

numba's on-disk cache checks only the source file of each cached function,
not the files of the kernels it inlines; :func:`_drop_stale_cache` therefore
keeps a hash of all core sources and empties the core's cache when any of
them changed.
"""

from __future__ import annotations

import os

__all__ = [
    "DISABLE_JIT",
    "CACHE",
    "PARALLEL",
    "FASTMATH",
    "jit",
    "pjit",
    "prange",
    "set_num_threads",
    "get_num_threads",
    "max_num_threads",
    "needs_compiling",
]


def _flag(name: str, default: bool) -> bool:
    value = os.environ.get(name)
    if value is None or value.strip() == "":
        return default
    return value.strip().lower() not in {"0", "false", "no", "off"}


DISABLE_JIT: bool = _flag("IONBAL_DISABLE_JIT", False)
CACHE: bool = _flag("IONBAL_NUMBA_CACHE", True)
PARALLEL: bool = _flag("IONBAL_PARALLEL", True)
FASTMATH: bool = _flag("IONBAL_FASTMATH", False)

if DISABLE_JIT:

    def jit(func=None, **_ignored):
        """Identity decorator used when the JIT is switched off."""
        if func is None:
            return lambda f: f
        return func

    pjit = jit
    prange = range

    def set_num_threads(n: int) -> None:  # noqa: D103 - trivial
        return None

    def get_num_threads() -> int:  # noqa: D103 - trivial
        return 1

    def max_num_threads() -> int:  # noqa: D103 - trivial
        return 1

else:
    import numba

    def _drop_stale_cache() -> None:
        """Remove numba cache files of ionbal.core when any core source changed."""
        import glob
        import hashlib

        here = os.path.dirname(os.path.abspath(__file__))
        digest = hashlib.sha256()
        for path in sorted(glob.glob(os.path.join(here, "*.py"))):
            with open(path, "rb") as fh:
                digest.update(fh.read())
        stamp_dir = os.path.join(here, "__pycache__")
        stamp = os.path.join(stamp_dir, "ionbal-core-sources.sha256")
        try:
            with open(stamp) as fh:
                if fh.read().strip() == digest.hexdigest():
                    return
        except OSError:
            pass
        try:
            for path in glob.glob(os.path.join(stamp_dir, "*.nb[ic]")):
                os.remove(path)
            os.makedirs(stamp_dir, exist_ok=True)
            with open(stamp, "w") as fh:
                fh.write(digest.hexdigest())
        except OSError:  # read-only install: numba falls back to its own cache locations
            pass

    if CACHE:
        _drop_stale_cache()

    prange = numba.prange
    set_num_threads = numba.set_num_threads
    get_num_threads = numba.get_num_threads

    def max_num_threads() -> int:
        """The most threads the parallel drivers may use (``NUMBA_NUM_THREADS``)."""
        return int(numba.config.NUMBA_NUM_THREADS)

    _COMMON = dict(nopython=True, nogil=True, cache=CACHE, fastmath=FASTMATH, error_model="numpy")

    def jit(func=None, **overrides):
        """``numba.jit`` with ionbal's settings (serial kernels)."""
        options = {**_COMMON, **overrides}
        if func is None:
            return numba.jit(**options)
        return numba.jit(**options)(func)

    def pjit(func=None, **overrides):
        """``numba.jit`` with ionbal's settings for ``prange`` drivers."""
        options = {**_COMMON, "parallel": PARALLEL, **overrides}
        if func is None:
            return numba.jit(**options)
        return numba.jit(**options)(func)


#: calls of up to this many points run on the calling thread: waking numba's thread pool costs more
#: than their work (on a busy machine much more), so small calls never start it
SERIAL_POINTS = 16


def needs_compiling(*kernels) -> bool:
    """Whether calling these kernels will compile them: not yet compiled in this process and no
    cache index of theirs on disk (a guess for the "compiling kernels" note; never raises).
    """
    if DISABLE_JIT:
        return False
    for k in kernels:
        try:
            if k.signatures:
                continue
            cache = getattr(k, "_cache", None)
            index = getattr(getattr(cache, "_cache_file", None), "_index_path", None)
            if not CACHE or index is None or not os.path.exists(index):
                return True
        except Exception:  # noqa: BLE001 - numba internals differ between versions; only a note depends on it
            continue
    return False
