"""The bundle of molecule arrays the joint molecular + ionization kernels take (:mod:`ionbal.core.chem`).

Built once per (mixture, molecule selection) by :func:`ionbal.data.molecules.pack_molecules`, like
:class:`~ionbal.core.bundle.MixtureArrays` for the atoms.
"""

from __future__ import annotations

from collections import namedtuple

__all__ = ["MoleculeArrays", "MOL_FIELDS"]

MOL_FIELDS = (
    "former_elem",   # (J,) kernel element index of each molecule former
    "mol_comp",      # (M, 3) former index of each component slot (-1: unused)
    "mol_count",     # (M, 3) number of atoms of that component
    "mol_natoms",    # (M,) atoms per molecule
    "mol_charge",    # (M,) net charge
    "mol_ion_elem",  # (M,) kernel element index of the charged product, or -1
    "mol_ion_q",     # (M,) its charge (+1, or -1 for H-)
    "mol_d0",        # (M,) D0 [eV] of the reaction
    "mol_g",         # (M, n_t) g = ln Kp + D0/kT on the grid log10 T = g_lt0 + i g_dlt (cgs Kp)
    "mol_slope",     # (M,) dg/dlnT used past the grid end
    "g_lt0",
    "g_dlt",
)

MoleculeArrays = namedtuple("MoleculeArrays", MOL_FIELDS)
MoleculeArrays.__doc__ = "The molecules of a mixture packed for the kernels (see :mod:`ionbal.data.molecules`)."
