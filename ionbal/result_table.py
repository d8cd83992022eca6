"""Astropy tables of a solved state: the body of :meth:`ionbal.result.IonizationResult.to_table`."""

from __future__ import annotations

import numpy as np

from .core.constants import K_B
from .data.molecules import parse_molecule
from .quantities import POINT_OUTPUTS, astropy_unit, species_column_name
from .selection import resolve_species

__all__ = ["table_species", "result_table"]


def table_species(result, species) -> tuple[tuple, tuple]:
    """``species`` of :meth:`IonizationResult.to_table` as (atomic species, molecules), each list in canonical labels.

    ``"default"`` and ``"all"`` add every molecule of the solve; molecules may be named among
    the species (``"Fe II,CO"``, ``["H I", "H2"]``).
    """
    if species is None:
        return (), ()
    if isinstance(species, str) and species.strip().lower() in ("default", "all"):
        return resolve_species(result.mixture, species), result.molecules
    items = [s for s in species.split(",")] if isinstance(species, str) else list(species)
    mols, atoms, seen = [], [], set()
    for item in items:
        m = result._as_molecule(item.strip() if isinstance(item, str) else item)
        if m is None:
            atoms.append(item)
            continue
        label = str(m)
        if label in seen:
            raise ValueError(f"molecule {label} is listed more than once")
        result._molecule_column(m)  # a molecule outside the solve: the error that names the remedy
        seen.add(label)
        mols.append(label)
    return (resolve_species(result.mixture, atoms) if atoms else ()), tuple(mols)


def result_table(result, species=None, *, partial_pressures: bool = False):
    """The QTable of :meth:`IonizationResult.to_table` (documented there)."""
    from astropy.table import QTable

    if len(result.shape) > 1:
        raise ValueError(f"to_table() needs a 0-D or 1-D result; this one has shape {result.shape}")
    names, mols = table_species(result, species)
    t = QTable()
    t["temperature"] = np.atleast_1d(result._plain("temperature")) * astropy_unit("temperature")
    for name in POINT_OUTPUTS:
        t[name] = np.atleast_1d(result._plain(name)) * astropy_unit(name)
    kT = K_B * np.atleast_1d(result._plain("temperature"))
    if names:
        frac = result.species_fractions(names).reshape(len(names), -1)
        nuclei = np.atleast_1d(result._plain("nuclei_density"))
        for k, name in enumerate(names):
            t[species_column_name("fraction", name)] = frac[k]
        for k, name in enumerate(names):
            dens = frac[k] * nuclei * result._weight(result._species(name))
            t[species_column_name("number_density", name)] = dens * astropy_unit("number_density")
        if partial_pressures:
            for k, name in enumerate(names):
                dens = frac[k] * nuclei * result._weight(result._species(name))
                t[species_column_name("partial_pressure", name)] = dens * kT * astropy_unit("partial_pressure")
    dens_m = [np.atleast_1d(result._molecule_column(parse_molecule(m))) for m in mols]
    for name, dens in zip(mols, dens_m):
        t[species_column_name("number_density", name)] = dens * astropy_unit("number_density")
    if partial_pressures:
        for name, dens in zip(mols, dens_m):
            t[species_column_name("partial_pressure", name)] = dens * kT * astropy_unit("partial_pressure")
    t["status"] = np.atleast_1d(result._plain("status"))
    t["iterations"] = np.atleast_1d(result._plain("iterations"))
    t.meta["mixture"] = result.mixture.name
    t.meta["state_variable"] = result.state_variable
    t.meta["molecules"] = list(result.molecules)
    return t
