"""The run: :func:`run_grid` computes a grid resumably and publishes the file; :class:`GridRun` reports it."""

from __future__ import annotations

import contextlib
import os
import shutil
import signal
import sys
import threading
import time
from dataclasses import dataclass, field
from pathlib import Path
from typing import Callable, Iterator, Sequence

import numpy as np

from ..core import status as st
from ..io.atomic import fsync_dir as _fsync_dir
from ..io.atomic import publish
from ..io.gridfile import write_grid_file
from ..io.reader import read_attr_json
from ..selection import all_species, default_species
from ..validate import check_output_path
from . import compute as _compute
from .executors import EXECUTORS
from .progress import Progress
from .spec import GridSpec, Tile, TileTask
from .workdir import WorkDir, parts_dir_for, remove_stale_parts

__all__ = ["GridRun", "run_grid", "DEFAULT_OUTPUT"]


#: plain name of the default output file (in the current directory)
DEFAULT_OUTPUT = "ionbal-grid.h5"


@dataclass
class GridRun:
    """What a finished :func:`run_grid` did."""

    path: Path
    spec: GridSpec
    n_points: int
    n_tiles: int
    tiles_resumed: int
    points_computed: int
    wall_time: float
    compute_time: float
    write_time: float
    file_size: int
    status_counts: dict = field(default_factory=dict)
    validity_counts: dict = field(default_factory=dict)

    @property
    def points_per_second(self) -> float:
        """Points computed in this run per second of wall time (resumed tiles excluded)."""
        return self.points_computed / self.wall_time if self.wall_time > 0 else float("nan")

    @property
    def converged(self) -> int:
        return int(self.status_counts.get(st.STATUS_TABLE[st.OK][0], 0))

    def summary(self) -> str:
        """A few readable lines."""
        size = self.file_size
        size_s = f"{size / 1e9:.2f} GB" if size >= 1e9 else f"{size / 1e6:.1f} MB"
        sp = self.spec
        n_el = len(sp.mixture)
        lines = [f"ionbal grid: wrote {self.path} ({size_s})"]
        lines += ["  " + ln for ln in sp.describe()]
        lines.append(f"  species     {len(sp.species)} ({_species_summary(sp, n_el)})"
                     + (", with number densities" if sp.number_densities else "")
                     + (", float32 cubes" if sp.float32 else ""))
        lines.append(f"  points      {self.n_points:,} in {self.n_tiles} tiles of up to "
                     f"{sp.tile_shape[0]}x{sp.tile_shape[1]}"
                     + (f" ({self.tiles_resumed} resumed from an earlier run)" if self.tiles_resumed else ""))
        lines.append(f"  wall time   {self.wall_time:.1f} s (solving {self.compute_time:.1f} s, writing "
                     f"{self.write_time:.1f} s); {self.points_per_second:,.0f} points/s")
        counts = ", ".join(f"{k} {v:,}" for k, v in self.status_counts.items() if k != "ok" and v)
        lines.append(f"  converged   {self.converged:,} of {self.n_points:,}" + (f"  (other: {counts})" if counts
                                                                                   else ""))
        flagged = {k: v for k, v in self.validity_counts.items() if v and k != "unsolved"}
        if self.validity_counts:
            lines.append("  validity    " + (", ".join(f"{k} {v:,}" for k, v in flagged.items()) + " point(s) "
                                            "flagged (ideal-gas LTE Saha doubtful there; see ionbal.validity)"
                                            if flagged else "no point flagged"))
        return "\n".join(lines)


def _species_summary(spec: GridSpec, n_el: int) -> str:
    if tuple(spec.species) == default_species(spec.mixture):
        return f"stages I-III of {n_el} elements, and H-"
    if tuple(spec.species) == all_species(spec.mixture):
        return f"every stage of {n_el} elements, and H-"
    shown = list(spec.species[:6])
    return ", ".join(shown) + (", ..." if len(spec.species) > 6 else "")


def run_grid(spec: GridSpec, output: str | os.PathLike = DEFAULT_OUTPUT, *, overwrite: bool = False,
             discard_parts: bool = False, executor: str | None = None, workers: int | None = None,
             scheduler: str | None = None, local_cluster: bool = False, progress: bool | None = None,
             command: str | None = None, keep_parts: bool = False,
             notify: Callable[[str], None] | None = None) -> GridRun:
    """Compute a grid into an HDF5 file, resumably.

    Parameters
    ----------
    spec : GridSpec
        What to compute.
    output : path
        The HDF5 file to write.  It appears only when complete.
    overwrite : bool
        Replace an existing ``output`` (kept untouched until the new file is
        complete).  Without it an existing file is an error.
    discard_parts : bool
        Start over when ``<output>.parts`` holds the parts of a different grid
        (otherwise that is an error).  Matching parts are always resumed.
    executor : {"serial", "threads", "dask"}, optional
        Default: "dask" when ``scheduler`` or ``local_cluster`` is given, else "serial".
    workers : int, optional
        serial: numba threads (default all cores); threads: pool size;
        local Dask cluster: worker processes (one thread each).
    scheduler : str, optional
        Address of a running Dask scheduler (e.g. ``tcp://10.0.0.5:8786``).
    local_cluster : bool
        Start a local Dask cluster of ``workers`` processes on 127.0.0.1.
    progress : bool, optional
        Draw a progress bar on stderr; default: only when stderr is a terminal.
    command : str, optional
        The command or call that made the file (stored in its ``history``).
    keep_parts : bool
        Keep the work directory after writing (for debugging).
    notify : callable, optional
        Called with one-line notes (resuming, writing).

    Returns
    -------
    GridRun
    """
    if not isinstance(spec, GridSpec):
        raise TypeError(f"spec must be a GridSpec, got {type(spec).__name__}")
    t_start = time.monotonic()
    output = Path(output)
    # a run killed while deleting its work directory leaves it renamed away; clean that first, also when
    # the output already exists (the rerun is refused then, and nothing else would ever remove it)
    for stale in parts_dir_for(output).parent.glob(f".{parts_dir_for(output).name}.removing-*"):
        shutil.rmtree(stale, ignore_errors=True)
    if remove_stale_parts(output) and notify:  # left by a run killed between publishing and cleaning up
        notify(f"removed {parts_dir_for(output)}: it only duplicated the complete {output}")
    check_output_path(output, overwrite=overwrite)
    if executor is None:
        executor = "dask" if (scheduler or local_cluster) else "serial"
    if executor not in EXECUTORS:
        raise ValueError(f"executor must be one of {', '.join(repr(e) for e in EXECUTORS)}, got {executor!r}")
    if executor == "dask" and not (scheduler or local_cluster):
        raise ValueError("the Dask executor needs a scheduler address or local_cluster=True")
    if workers is not None and (isinstance(workers, bool) or not isinstance(workers, (int, np.integer))
                                or workers < 1):
        raise ValueError(f"workers must be a positive integer, got {workers!r}")
    if command is None:
        command = "ionbal.grid.run_grid(...) from " + (" ".join(sys.argv) or "python")

    work = WorkDir(parts_dir_for(output), spec)
    created = not work.path.exists()
    tiles = spec.tiles()
    compute_time = 0.0
    try:
        work.open(discard=discard_parts)
        done = work.finished() & set(range(len(tiles)))
        todo = [t for t in tiles if t.index not in done]
        if done and notify:
            notify(f"resuming: {len(done)} of {len(tiles)} tiles were already computed in {work.path}")
        bar = Progress(spec.n_points, enabled=progress)
        bar.skip(sum(tiles[i].size for i in done))
        t_compute = time.monotonic()
        try:
            if todo:
                stream = EXECUTORS[executor](lambda threads: _lazy_tasks(spec, todo, threads), workers=workers,
                                             scheduler=scheduler, local_cluster=local_cluster)
                with contextlib.closing(stream):
                    _consume(stream, work, bar)
        finally:
            bar.close()
        compute_time = time.monotonic() - t_compute
        points_computed = sum(t.size for t in todo)

        t_write = time.monotonic()
        if notify and todo:
            notify(f"writing {output}")
        # assembled inside the work directory, published with its lock held: the file appears only when
        # complete, and an existing output is replaced only with overwrite (even one that appeared
        # meanwhile).  Ctrl-C is held off from the rename until the work directory is gone, so an
        # interrupt leaves either resumable parts or the finished file, never both
        tmp = work.path / "assembling.h5"
        try:
            with contextlib.suppress(FileNotFoundError):
                tmp.unlink()
            counts = write_grid_file(tmp, spec, _tile_stream(work, spec, tiles), command=command)
            vcounts = read_attr_json(tmp, "validity_counts")
            with _interrupts_held(notify):
                publish(tmp, output, overwrite=overwrite)
                _fsync_dir(output.parent if str(output.parent) else Path("."))
                if keep_parts:
                    work.close()
                else:
                    work.remove()
        except BaseException:
            with contextlib.suppress(OSError):
                tmp.unlink()
            raise
        write_time = time.monotonic() - t_write
    except BaseException as exc:
        if created and work.path.is_dir() and not work.finished():
            work.remove()  # nothing worth keeping: leave no trace of this run
        else:
            work.close()
        if not isinstance(exc, KeyboardInterrupt) and _caused_by_interrupt(exc):
            raise KeyboardInterrupt from exc  # e.g. h5py turned Ctrl-C into an error while writing
        raise
    return GridRun(path=output, spec=spec, n_points=spec.n_points, n_tiles=len(tiles),
                   tiles_resumed=len(tiles) - len(todo), points_computed=points_computed,
                   wall_time=time.monotonic() - t_start, compute_time=compute_time, write_time=write_time,
                   file_size=output.stat().st_size, status_counts=counts, validity_counts=vcounts)


def _caused_by_interrupt(exc: BaseException) -> bool:
    seen = set()
    e = exc.__context__ or exc.__cause__
    while e is not None and id(e) not in seen:
        if isinstance(e, KeyboardInterrupt):
            return True
        seen.add(id(e))
        e = e.__context__ or e.__cause__
    return False


@contextlib.contextmanager
def _interrupts_held(notify: Callable[[str], None] | None = None):
    """Hold Ctrl-C (SIGINT) off for the block; one that arrives meanwhile is reported, not raised.

    Only the main thread can change signal handlers; elsewhere the block runs unprotected.
    """
    if threading.current_thread() is not threading.main_thread():
        yield
        return
    got = []
    previous = signal.signal(signal.SIGINT, lambda signum, frame: got.append(signum))
    try:
        yield
    finally:
        signal.signal(signal.SIGINT, previous)
    if got and notify:
        notify("interrupt received while publishing; the grid was already complete and is kept")


def _lazy_tasks(spec: GridSpec, tiles: Sequence[Tile], numba_threads: int | None = None) -> Iterator[TileTask]:
    for t in tiles:
        yield spec.task(t, numba_threads)


def _consume(stream: Iterator[tuple[Tile, dict]], work: WorkDir, bar: Progress) -> None:
    for tile, arrays in stream:
        work.save(tile, arrays)
        bar.update(tile.size)


def _tile_stream(work: WorkDir, spec: GridSpec, tiles: Sequence[Tile]) -> Iterator[tuple[Tile, dict]]:
    """Finished tiles in order, one at a time; a missing or damaged one is recomputed here."""
    for tile in tiles:
        data = work.load(tile)
        if data is None:
            data = _compute.compute_tile(spec.task(tile))
            work.save(tile, data)
        yield tile, data

