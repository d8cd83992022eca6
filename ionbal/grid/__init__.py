"""Grids of states: specification, tiling, executors, progress and resumable runs.

Modules: :mod:`~ionbal.grid.axis` (axes), :mod:`~ionbal.grid.spec` (:class:`GridSpec`, tiles),
:mod:`~ionbal.grid.compute` (one tile), :mod:`~ionbal.grid.executors` (the table of executors),
:mod:`~ionbal.grid.workdir` (the resumable work directory and its lock),
:mod:`~ionbal.grid.progress` (progress bar) and :mod:`~ionbal.grid.runner` (:func:`run_grid`).

A grid has two state axes, temperature and one more state variable (gas
pressure by default; or mass density, hydrogen density, electron pressure),
each log-spaced, linear or given as explicit values, and optionally two
composition axes, [M/H] and [alpha/M].  It is computed tile by tile: a tile is
a block of temperatures x state values at one composition, solved with one
call of :func:`ionbal.solve`.  Every point is solved on its own, so the
numbers do not depend on the tiling, the executor or the number of threads.

Runs are resumable.  Each finished tile is saved atomically as a small file in
a work directory beside the output, ``<output>.parts/``, together with the
grid specification (``spec.json``).  When all tiles are done the driver
streams them, one at a time, into the HDF5 file (:mod:`ionbal.io`), which is
written under a temporary name inside the work directory and renamed into place
only when complete, with the work directory's lock held; then the work directory
is removed (Ctrl-C is held off from the rename to that removal).  An existing
output is replaced only with ``overwrite``, even one that appeared during the
run (the file is published with a hard link, which fails if the target exists).
An interrupted run (Ctrl-C, ``kill -9``, a lost machine) therefore leaves either
nothing, the previous complete file, or resumable parts: running the same grid
again continues where it stopped and gives bitwise the numbers of an
uninterrupted run.  Parts left beside a complete file of the same grid (a kill
between the rename and the cleanup) are removed by the next run.

Executors: ``"serial"`` (the default: tiles one after another; the kernels
already use every core within a tile), ``"threads"`` (a pool of Python
threads; useful with few, large tiles) and ``"dask"`` (``dask.distributed``:
workers compute tiles, the driver alone writes files).

Example
-------
>>> from ionbal.grid import Axis, GridSpec, run_grid
>>> spec = GridSpec(Axis.log("temperature", 3000, 8000, 11),
...                 Axis.log("gas_pressure", 1e2, 1e6, 9))          # doctest: +SKIP
>>> summary = run_grid(spec, "small.h5")                              # doctest: +SKIP
"""

from __future__ import annotations

from ..quantities import POINT_OUTPUTS as POINT_QUANTITIES
from ..selection import all_species, default_species, resolve_species
from . import compute
from .axis import AXIS_NAMES, DEFAULT_STATE_AXIS, DEFAULT_TEMPERATURE_AXIS, STATE_AXES, Axis
from .compute import compute_tile, species_fractions
from .executors import EXECUTORS, dask_client
from .progress import Progress
from .runner import DEFAULT_OUTPUT, GridRun, run_grid
from .spec import CHUNK_SIDE, DEFAULT_TILE_SIZE, MAX_POINTS, GridSpec, Tile, TileTask, default_spec
from .workdir import GridBusyError, GridMismatchError, WorkDir, parts_dir_for

__all__ = [
    "Axis",
    "GridSpec",
    "Tile",
    "TileTask",
    "GridRun",
    "GridMismatchError",
    "GridBusyError",
    "WorkDir",
    "STATE_AXES",
    "AXIS_NAMES",
    "POINT_QUANTITIES",
    "DEFAULT_OUTPUT",
    "DEFAULT_TEMPERATURE_AXIS",
    "DEFAULT_STATE_AXIS",
    "DEFAULT_TILE_SIZE",
    "CHUNK_SIDE",
    "MAX_POINTS",
    "EXECUTORS",
    "default_spec",
    "default_species",
    "all_species",
    "resolve_species",
    "compute",
    "compute_tile",
    "species_fractions",
    "dask_client",
    "parts_dir_for",
    "run_grid",
    "Progress",
]
