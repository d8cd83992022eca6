"""The one registry of quantities: state inputs and outputs, their units, names and formulas.

Every quantity ionbal takes or gives is declared here once, as a :class:`Quantity`:

* its name (the Python keyword of :func:`ionbal.solve`, the attribute of the result, the dataset of
  grid files, the column of model files),
* its cgs unit in one spelling (CF/FITS style, ``"dyn cm-2"``; converted by astropy where needed),
* a short label (messages, CLI help) and a long name (the ``long_name`` of files),
* its kind: ``"state"`` (temperature, which every state has), ``"point"`` (one value per point),
  ``"thermo"`` (one value per point, computed on request by :mod:`ionbal.thermo`),
  ``"species"`` (one value per species and point), ``"axis"`` or ``"label"`` (file coordinates),
* whether it can be the second state input (``state_input``: its rank of preference, with its CLI flag), and
* for outputs, how it is computed from a solved state (``compute``, see :class:`SolvedState`) and
  the short symbol ``ionbal state`` prints it under.

:func:`ionbal.solve`, :class:`ionbal.result.IonizationResult`, the grid writer and reader, the
model-column files and the CLI all read this table: a new state input or output quantity is one
entry here (plus, for an input, its solver mode in :func:`ionbal.api.solve`).
"""

from __future__ import annotations

import re
from dataclasses import dataclass
from functools import lru_cache
from typing import Callable

import numpy as np

from .core.constants import AMU

__all__ = [
    "Quantity",
    "SolvedState",
    "QUANTITIES",
    "STATE_INPUTS",
    "POINT_OUTPUTS",
    "THERMO_OUTPUTS",
    "SPECIES_OUTPUTS",
    "get",
    "unit",
    "astropy_unit",
    "long_name",
    "unit_text",
    "species_column_name",
    "unit_of_astropy",
]

KINDS = ("state", "point", "thermo", "species", "axis", "label", "meta")


@dataclass(frozen=True)
class SolvedState:
    """What every output is computed from: flat arrays of one solve (cgs) and the packed mixture.

    ``ne`` and ``nn`` are the free-electron and nuclei densities (NaN where unsolved), ``kT`` is
    ``k_B T``; ``packed`` is the :class:`ionbal.data.pack.PackedMixture` (weights, masses, and the
    kernels' bundle ``packed.arrays``); ``x`` is ln n_e as the solver returned it, the variable the
    core kernels take (e.g. ``ion_moments_many(s.temperature, s.x, s.packed.arrays, out)``).
    ``nh`` is the density of heavy particles, free atoms and ions plus molecules (each molecule one
    particle); without molecules it is ``nn`` (``None`` means the same).
    """

    temperature: np.ndarray
    ne: np.ndarray
    nn: np.ndarray
    kT: np.ndarray
    packed: object
    x: np.ndarray
    nh: np.ndarray | None = None

    @property
    def heavy(self) -> np.ndarray:
        """Heavy particles (free atoms and ions, molecules) per cm^3: ``nn`` without molecules."""
        return self.nn if self.nh is None else self.nh


@dataclass(frozen=True)
class Quantity:
    """One quantity of the registry (see the module docstring)."""

    name: str
    unit: str
    label: str
    long_name: str
    kind: str = "point"
    state_input: int = 0
    flag: str | None = None
    short_flag: str | None = None
    compute: Callable[[SolvedState], np.ndarray] | None = None
    dtype: str = "float64"
    symbol: str | None = None

    def __post_init__(self) -> None:
        if self.kind not in KINDS:
            raise ValueError(f"quantity {self.name}: kind must be one of {KINDS}, got {self.kind!r}")

    @property
    def help(self) -> str:
        """CLI help text, e.g. ``gas pressure [dyn cm^-2]``."""
        return f"{self.label} [{unit_text(self.unit)}]"


def _mean_molecular_weight(s: SolvedState) -> np.ndarray:
    """rho / ((free atoms and ions + molecules + n_e) m_u); without molecules exactly the atoms-only formula."""
    if s.nh is None:
        return s.packed.mean_mass / ((1.0 + s.ne / s.nn) * AMU)
    return s.packed.mean_mass / (((s.nh + s.ne) / s.nn) * AMU)


def _q(*args, **kw) -> Quantity:
    return Quantity(*args, **kw)


#: every quantity, in the order files and tables list them
QUANTITIES: dict[str, Quantity] = {q.name: q for q in (
    _q("temperature", "K", "temperature", "temperature", kind="state"),
    # --- per-point outputs, in file order; state_input=k makes one a possible second state input
    #     (k = order of preference when a model has several such columns)
    _q("electron_density", "cm-3", "free-electron number density", "free-electron number density",
       compute=lambda s: s.ne, symbol="n_e"),
    _q("electron_pressure", "dyn cm-2", "electron pressure", "electron pressure",
       state_input=4, flag="--electron-pressure", short_flag="-e",
       compute=lambda s: s.ne * s.kT, symbol="P_e"),
    _q("gas_pressure", "dyn cm-2", "gas pressure",
       "gas pressure (ideal gas: free atoms and ions, molecules, free electrons)",
       state_input=1, flag="--gas-pressure", short_flag="-P",
       compute=lambda s: (s.heavy + s.ne) * s.kT, symbol="P_gas"),
    _q("mass_density", "g cm-3", "mass density", "mass density",
       state_input=2, flag="--mass-density", short_flag="-r",
       compute=lambda s: s.nn * s.packed.mean_mass, symbol="rho"),
    _q("hydrogen_density", "cm-3", "number density of hydrogen nuclei",
       "number density of hydrogen nuclei (H-, H I, H II)",
       state_input=3, flag="--hydrogen-density", short_flag="-n",
       compute=lambda s: s.nn * s.packed.hydrogen_weight, symbol="n_H (all H)"),
    _q("nuclei_density", "cm-3", "number density of all nuclei",
       "number density of all nuclei (every element and stage)", compute=lambda s: s.nn,
       symbol="n_nuclei"),
    _q("mean_molecular_weight", "1", "mean molecular weight",
       "mean molecular weight per free particle, rho / ((n_atoms + n_molecules + n_e) m_u)",
       compute=lambda s: _mean_molecular_weight(s), symbol="mu"),
    # --- thermodynamics (on request: result attributes, optional variables of grids and columns)
    _q("internal_energy", "erg g-1", "internal energy per gram",
       "internal energy per gram: translation, ionization and excitation (zero: neutral atoms in the "
       "ground state)", kind="thermo", symbol="u"),
    _q("enthalpy", "erg g-1", "enthalpy per gram", "enthalpy per gram, u + P / rho", kind="thermo",
       symbol="h"),
    _q("entropy", "erg g-1 K-1", "entropy per gram",
       "entropy per gram of the ideal mixture (Sackur-Tetrode with partition functions)", kind="thermo",
       symbol="s"),
    _q("heat_capacity_v", "erg g-1 K-1", "specific heat at constant volume",
       "specific heat at constant density, (du/dT)_rho", kind="thermo", symbol="c_v"),
    _q("heat_capacity_p", "erg g-1 K-1", "specific heat at constant pressure",
       "specific heat at constant pressure, (dh/dT)_P", kind="thermo", symbol="c_p"),
    _q("chi_temperature", "1", "chi_T", "(d ln P / d ln T) at constant density", kind="thermo",
       symbol="chi_T"),
    _q("chi_density", "1", "chi_rho", "(d ln P / d ln rho) at constant temperature", kind="thermo",
       symbol="chi_rho"),
    _q("gamma1", "1", "Gamma_1", "first adiabatic exponent, (d ln P / d ln rho) at constant entropy",
       kind="thermo", symbol="Gamma_1"),
    _q("gamma3", "1", "Gamma_3", "third adiabatic exponent, 1 + (d ln T / d ln rho) at constant entropy",
       kind="thermo", symbol="Gamma_3"),
    _q("adiabatic_gradient", "1", "adiabatic gradient",
       "adiabatic temperature gradient, (d ln T / d ln P) at constant entropy", kind="thermo",
       symbol="nabla_ad"),
    _q("dlnne_dlnT_p", "1", "d ln n_e / d ln T at constant P_gas",
       "d ln n_e / d ln T at constant gas pressure", kind="thermo", symbol="dlnne/dlnT|P"),
    _q("dlnne_dlnp_T", "1", "d ln n_e / d ln P_gas at constant T",
       "d ln n_e / d ln P_gas at constant temperature", kind="thermo", symbol="dlnne/dlnP|T"),
    _q("dlnne_dlnT_rho", "1", "d ln n_e / d ln T at constant density",
       "d ln n_e / d ln T at constant mass density", kind="thermo", symbol="dlnne/dlnT|rho"),
    _q("dlnne_dlnrho_T", "1", "d ln n_e / d ln rho at constant T",
       "d ln n_e / d ln rho at constant temperature", kind="thermo", symbol="dlnne/dlnrho|T"),
    # --- per-species outputs (cubes)
    _q("ion_fraction", "1", "ion fraction", "fraction of the element's nuclei in this ionization stage",
       kind="species"),
    _q("number_density", "cm-3", "number density", "number density of the species", kind="species"),
    _q("partial_pressure", "dyn cm-2", "partial pressure", "partial pressure of the species, n k T",
       kind="species"),
    # --- solver bookkeeping, composition axes, coordinates and tables of files
    _q("status", "1", "solver status", "solver status per point", kind="meta", dtype="int8"),
    _q("iterations", "1", "solver iterations", "solver iterations per point", kind="meta", dtype="int32"),
    _q("metallicity", "1", "[M/H]", "[M/H], shift of log abundance of every element heavier than He",
       kind="axis"),
    _q("alpha", "1", "[alpha/M]", "[alpha/M], extra shift of log abundance of O, Ne, Mg, Si, S, Ar, Ca, Ti",
       kind="axis"),
    _q("partition_function", "1", "partition function", "partition function of the species", kind="label"),
    _q("abundance", "1", "abundance", "A(X) = log10(N_X / N_H) + 12", kind="label"),
    _q("atomic_mass", "u", "atomic mass", "standard atomic weight", kind="label"),
    _q("atomic_number", "1", "atomic number", "atomic number Z", kind="label"),
    _q("species", "", "species", "species in spectroscopic notation (Fe II = Fe+; H- is the hydrogen anion)",
       kind="label"),
    _q("element", "", "element", "element symbol", kind="label"),
)}

#: the state variables besides temperature, in order of preference (solve keywords, grid axes, model columns)
STATE_INPUTS: tuple[str, ...] = tuple(sorted((n for n, q in QUANTITIES.items() if q.state_input),
                                             key=lambda n: QUANTITIES[n].state_input))
#: per-point outputs of a solve (every quantity with a formula), in file order; the state inputs are outputs too
POINT_OUTPUTS: tuple[str, ...] = tuple(n for n, q in QUANTITIES.items() if q.compute is not None)
#: thermodynamic outputs (on request; :mod:`ionbal.thermo`), in file order
THERMO_OUTPUTS: tuple[str, ...] = tuple(n for n, q in QUANTITIES.items() if q.kind == "thermo")
#: per-species outputs (cubes of grid files)
SPECIES_OUTPUTS: tuple[str, ...] = tuple(n for n, q in QUANTITIES.items() if q.kind == "species")

assert len({QUANTITIES[n].state_input for n in STATE_INPUTS}) == len(STATE_INPUTS), "state_input ranks must differ"


def get(name: str) -> Quantity:
    """The registry entry of ``name``; a ValueError lists the known quantities."""
    try:
        return QUANTITIES[name]
    except KeyError:
        raise ValueError(f"unknown quantity {name!r}; known: {', '.join(QUANTITIES)}") from None


def unit(name: str) -> str:
    """cgs unit of a quantity in the one spelling of the registry (``"dyn cm-2"``; ``""`` if unknown)."""
    q = QUANTITIES.get(name)
    return q.unit if q is not None else ""


@lru_cache(maxsize=None)
def _astropy_unit(text: str):
    import astropy.units as u

    if text in ("", "1"):
        return u.dimensionless_unscaled
    return u.Unit(text)


def astropy_unit(name_or_unit: str):
    """The astropy unit of a quantity name (or of a unit string of the registry's spelling)."""
    q = QUANTITIES.get(name_or_unit)
    return _astropy_unit(q.unit if q is not None else name_or_unit)


def long_name(name: str) -> str:
    q = QUANTITIES.get(name)
    return q.long_name if q is not None else name


def unit_text(text: str) -> str:
    """A unit for people: ``"dyn cm-2"`` -> ``"dyn cm^-2"``."""
    return re.sub(r"([A-Za-z])(-?\d+)", r"\1^\2", text)


def species_column_name(quantity: str, species) -> str:
    """The one column name of a per-species quantity in tables and files: ``fraction_Fe_II``.

    ``quantity`` is ``"fraction"`` or a per-species quantity of the registry (``number_density``,
    ``partial_pressure``); ``H-`` becomes ``H_minus`` (``number_density_H_minus``).
    """
    label = str(species)
    return f"{quantity}_{label.replace('-', '_minus').replace(' ', '_')}"


def unit_of_astropy(u) -> str:
    """The registry's spelling of an astropy unit (``"dyn cm-2"``), else astropy's own string."""
    for q in QUANTITIES.values():
        if q.unit not in ("", "1") and _astropy_unit(q.unit) == u:
            return q.unit
    return u.to_string()
