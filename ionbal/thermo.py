"""Thermodynamics of a solved state: energies, heat capacities, adiabatic exponents, n_e sensitivities.

Computed from the converged solution by exact implicit differentiation of the charge and
particle conservation equations (:mod:`ionbal.core.thermo` has the formulas), not by finite
differences.  Scope: ideal gas in LTE, the atoms-only solve and (through
:mod:`ionbal.core.thermo_mol`) the joint molecular solve.  The partition
functions of the solve (piecewise-linear ln U in log T between table nodes, so the excitation
energy ``kT dlnU/dlnT`` is constant inside a table interval and steps at the nodes; the nodes
lie 0.01 dex apart, and the step is small against the ionization terms).

The per-point quantities are entries of the quantity registry (kind ``"thermo"``,
:data:`ionbal.quantities.THERMO_OUTPUTS`): ``result.gamma1``, ``result["adiabatic_gradient"]``, the
optional variables of grid files and columns of ``ionbal column --thermo``.  The per-element
ones are :meth:`ionbal.result.IonizationResult.electron_donors` and
:meth:`~ionbal.result.IonizationResult.abundance_sensitivity`.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .core.constants import AMU, M_E
from .core.thermo import N_THERMO, THERMO_FIELDS, thermo_many
from .data.elements import atomic_mass, symbol
from .quantities import THERMO_OUTPUTS

assert THERMO_OUTPUTS == THERMO_FIELDS, "the registry's thermo quantities are the kernel's columns"

__all__ = ["ThermoBlock", "thermodynamics", "THERMO_FIELDS"]


@dataclass(frozen=True)
class ThermoBlock:
    """Flat arrays of one thermodynamics evaluation: ``fields[name]`` (n,), ``share``/``dlna`` (n, n_elem).

    ``share`` and ``dlna`` are None when the evaluation was asked for the per-point quantities only.
    """

    fields: dict
    share: np.ndarray
    dlna: np.ndarray
    elements: tuple


def thermodynamics(result, per_element: bool = True) -> ThermoBlock:
    """Evaluate every thermodynamic quantity of a result (one kernel pass over its points).

    ``per_element=False`` leaves out the donor shares and d ln n_e/dA(X) (two (n, n_elem) arrays:
    with 83 elements they would outweigh the 14 per-point quantities twelve times).
    """
    s = result._state
    p = s.packed
    T = np.array(s.temperature, dtype=np.float64)  # writeable copies (results may hold broadcast views)
    x = np.array(s.x, dtype=np.float64)
    with np.errstate(divide="ignore", invalid="ignore"):
        lnN = np.ascontiguousarray(np.where(np.isfinite(s.ne), np.log(s.nn), np.nan))
    # 1.5 ln(m_atom / m_e) per element: the constant of its translational entropy
    lnm = 1.5 * np.log(np.array([atomic_mass(int(z)) for z in p.atomic_numbers]) * AMU / M_E)
    out = np.empty((T.size, N_THERMO))
    rows = T.size if per_element else 0
    share = np.empty((rows, p.elem_w.size))
    dlna = np.empty((rows, p.elem_w.size))
    if result.molecules:
        from .core.thermo_mol import thermo_mol_many

        chem = result._chem
        lny = np.ascontiguousarray(chem.ln_free_neutral_atoms, dtype=np.float64)
        pm = chem.molecules
        thermo_mol_many(T, x, lnN, lny, p.arrays, pm.arrays, pm.elem_former, lnm, float(p.mean_mass), out,
                        share, dlna)
    else:
        with np.errstate(divide="ignore"):
            elem_lnm = lnm - np.log(np.asarray(p.elem_w, dtype=np.float64))
        thermo_many(T, x, lnN, p.arrays, elem_lnm, float(p.mean_mass), out, share, dlna)
    return ThermoBlock({name: np.ascontiguousarray(out[:, j]) for j, name in enumerate(THERMO_FIELDS)},
                       share if per_element else None, dlna if per_element else None,
                       tuple(symbol(int(z)) for z in p.atomic_numbers))
