"""Layer 3 entry point of the joint molecular + ionization solve (plain arrays in, plain arrays out).

:func:`solve_chemistry` takes a packed mixture (:func:`ionbal.data.pack.pack`), temperatures and
one state input, and returns the solution of :mod:`ionbal.core.chem` as plain numpy arrays.  The
user-facing ``solve(..., molecules=...)`` wraps it (units, names, result object).
"""

from __future__ import annotations

from typing import NamedTuple

import numpy as np

from .core import chem
from .core.constants import K_B
from .data.molecules import PackedMolecules, pack_molecules

__all__ = ["ChemistrySolution", "solve_chemistry", "STATE_INPUTS"]

#: state input -> how it is handed to the kernel
STATE_INPUTS = ("gas_pressure", "nuclei_density", "hydrogen_density", "mass_density", "electron_pressure")


class ChemistrySolution(NamedTuple):
    """Per point (1-D arrays, or 2-D with a trailing species axis)."""

    ln_electron_density: np.ndarray
    ln_nuclei_density: np.ndarray
    free_neutral_atoms: np.ndarray   # (n, n_elements): n of the neutral atom of every element [cm^-3]
    ln_free_neutral_atoms: np.ndarray  # its natural log (no underflow in hot gas)
    free_atoms: np.ndarray           # (n, n_elements): all atomic stages of every element [cm^-3]
    molecule_density: np.ndarray     # (n, n_molecules) [cm^-3]
    status: np.ndarray
    iterations: np.ndarray
    molecules: PackedMolecules


def solve_chemistry(packed, temperature, *, state: str, value, molecules=True, tol: float = chem.TOL,
                    max_iter: int = chem.MAX_ITER, parallel: bool | None = None) -> ChemistrySolution:
    """Solve molecules and ions together at every point.

    ``state`` is one of :data:`STATE_INPUTS` (cgs values: dyn cm^-2, cm^-3, g cm^-3);
    ``molecules``: True, False or a list of formulas (see :func:`ionbal.data.molecules.pack_molecules`).
    """
    if state not in STATE_INPUTS:
        raise ValueError(f"state must be one of {', '.join(STATE_INPUTS)}, got {state!r}")
    T = np.ascontiguousarray(np.asarray(temperature, dtype=np.float64).ravel())
    v = np.ascontiguousarray(np.broadcast_to(np.asarray(value, dtype=np.float64).ravel(), T.shape), dtype=np.float64)
    if T.size != v.size:
        raise ValueError("temperature and value must have the same number of points")
    pm = pack_molecules(packed, molecules)
    if state == "gas_pressure":
        mode = chem.MODE_GAS_PRESSURE
    elif state == "electron_pressure":
        mode = chem.MODE_ELECTRON_PRESSURE
    else:
        mode = chem.MODE_NUCLEI_DENSITY
        if state == "hydrogen_density":
            wh = packed.hydrogen_weight
            if wh <= 0.0:
                raise ValueError("hydrogen_density needs a mixture that contains hydrogen")
            v = v / wh
        elif state == "mass_density":
            v = v / packed.mean_mass  # nuclei keep their mass whether free or bound
    n = T.size
    n_el = packed.elem_w.size
    x = np.empty(n)
    L = np.empty(n)
    atoms = np.empty((n, n_el))
    lnn = np.empty((n, len(pm.molecules)))
    it = np.empty(n, dtype=np.int64)
    code = np.empty(n, dtype=np.int64)
    driver = chem.chem_solve_many if (parallel if parallel is not None else n > 64) else chem.chem_solve_few
    driver(mode, T, v, packed.arrays, pm.arrays, pm.elem_former, float(tol), int(max_iter), x, L, atoms, lnn,
           it, code)
    with np.errstate(divide="ignore"):
        ln_neutral = _ln_neutral_fraction(packed, T, x) + np.log(atoms)
    return ChemistrySolution(x, L, np.exp(ln_neutral), ln_neutral, atoms, np.exp(lnn), code, it, pm)


def _ln_neutral_fraction(packed, T, x) -> np.ndarray:
    """ln of the fraction of each element's free atoms in the neutral stage, (n, n_elements).

    From the joint solve's own Saha sums (:func:`ionbal.core.chem.ln_neutral_fraction_many`);
    this used to be a pass over the log fractions of every stage, an (n, n_stages) array that
    took more time than the solve in hot gas.
    """
    out = np.empty((T.size, packed.elem_w.size))
    chem.ln_neutral_fraction_many(np.ascontiguousarray(T, dtype=np.float64),
                                  np.ascontiguousarray(x, dtype=np.float64), packed.arrays, out)
    return out


def gas_pressure(sol: ChemistrySolution, T) -> np.ndarray:
    """P_gas [dyn cm^-2] of a solution: free atoms + molecules (one particle each) + electrons."""
    T = np.asarray(T, dtype=np.float64).ravel()
    return (sol.free_atoms.sum(axis=1) + sol.molecule_density.sum(axis=1) + np.exp(sol.ln_electron_density)) \
        * K_B * T
