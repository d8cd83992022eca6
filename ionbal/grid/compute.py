"""Computing one tile (runs on workers): one :func:`ionbal.solve` call, the arrays to store."""

from __future__ import annotations

import contextlib
from typing import Sequence

import numpy as np

from ..quantities import POINT_OUTPUTS, THERMO_OUTPUTS
from .spec import TileTask

__all__ = ["compute_tile", "species_fractions"]


def compute_tile(task: TileTask) -> dict[str, np.ndarray]:
    """Solve one tile; returns the arrays to store, each of the tile's shape (cubes: species first).

    Keys: the :data:`ionbal.quantities.POINT_OUTPUTS` except the state variable, ``status``
    (int8), ``iterations`` (int32), ``validity`` (uint8 bitmask of
    :mod:`ionbal.validity`), ``ion_fraction`` (n_species, *shape) and, if
    requested, ``number_density``; with ``thermo`` the :data:`~ionbal.quantities.THERMO_OUTPUTS` and the
    element cubes ``electron_donor`` and ``dlnne_dA`` (n_elements, *shape).  Deterministic: the same task gives the
    same bits on any worker of the same installation.
    """
    from ..api import solve

    if task.numba_threads:
        from ..core.config import max_num_threads, set_num_threads

        with contextlib.suppress(Exception):
            set_num_threads(max(1, min(int(task.numba_threads), max_num_threads())))
    T = np.asarray(task.temperature, dtype=np.float64)[:, None]
    S = np.asarray(task.state, dtype=np.float64)[None, :]
    r = solve(T, mixture=task.mixture, errors="mask", tol=task.tol, max_iterations=task.max_iterations,
              molecules=task.molecules if task.molecules else False, **{task.state_variable: S})
    shape = (T.shape[0], S.shape[1])
    out: dict[str, np.ndarray] = {}
    for name in POINT_OUTPUTS:
        if name != task.state_variable:
            out[name] = np.ascontiguousarray(np.broadcast_to(r[name], shape), dtype=np.float64)
    out["status"] = np.ascontiguousarray(np.broadcast_to(r.status, shape), dtype=np.int8)
    out["iterations"] = np.ascontiguousarray(np.broadcast_to(r.iterations, shape), dtype=np.int32)
    dtype = np.dtype(task.dtype)
    # one pass per point for the fractions of every species and the moments of the validity flags
    frac = r.fractions_and_moments(task.species).reshape((len(task.species),) + shape)
    out["ion_fraction"] = frac.astype(dtype, copy=False) if frac.dtype != dtype else frac
    if task.number_densities:
        dens = r.number_densities(task.species, fractions=frac).reshape((len(task.species),) + shape)
        out["number_density"] = dens.astype(dtype, copy=False) if dens.dtype != dtype else dens
    if task.molecules:
        dens = r.molecule_densities(task.molecules).reshape((len(task.molecules),) + shape)
        out["molecule_number_density"] = dens.astype(dtype, copy=False) if dens.dtype != dtype else dens
    if task.thermo:
        for name in THERMO_OUTPUTS:
            out[name] = np.ascontiguousarray(np.broadcast_to(r[name], shape), dtype=np.float64)
        for key, values in (("electron_donor", r.electron_donors()), ("dlnne_dA", r.abundance_sensitivity())):
            out[key] = np.stack([np.broadcast_to(v, shape) for v in values.values()])
    if task.validity:
        from ..validity import bitmask

        out["validity"] = np.ascontiguousarray(np.broadcast_to(bitmask(r.validity), shape), dtype=np.uint8)
    return out


def species_fractions(result, species: Sequence[str]) -> np.ndarray:
    """Ion fractions of the given species at every point of a result, shape ``(n_species, n_points)``."""
    return result.species_fractions(species).reshape(len(species), -1)

