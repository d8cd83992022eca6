"""Pack a mixture and the atomic tables into the flat arrays the core kernels take.

This is done once per (mixture, overrides) and cached: the solver's inner
loops then only ever see contiguous float and int arrays (see
:mod:`ionbal.core.saha` for their layout).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from functools import lru_cache
from typing import Mapping

import numpy as np

from ..core.bundle import MixtureArrays, closed_form_fields
from ..core.constants import AMU
from .elements import atomic_mass
from .mixture import Mixture
from .species import Species, parse_species
from .tables import H_MINUS_BINDING_EV, ground_weight, ionization_energy_table, partition_grid

__all__ = ["PackedMixture", "pack", "freeze_overrides"]


@dataclass(frozen=True, eq=False)
class PackedMixture:
    """A mixture packed for the kernels.

    Attributes
    ----------
    mixture : Mixture
    atomic_numbers : ndarray of int
        Z of each packed element, in kernel order.
    species : tuple of Species
        Every packed stage, in kernel (stage) order.
    elem_w, elem_first, elem_n, elem_q0, stage_chi, stage_row, stage_lnu_const, lnU, lt0, dlt
        The kernel arrays (see :mod:`ionbal.core.saha`).
    q_max : float
        Net charge per nucleus at full ionization.
    arrays : MixtureArrays
        The kernel arrays bundled once, at pack time: the one argument every
        kernel takes (see :mod:`ionbal.core.bundle`).
    mean_mass : float
        Mean mass per nucleus [g] (neutral-atom masses, so electrons included).
    """

    mixture: Mixture
    atomic_numbers: np.ndarray
    species: tuple
    elem_w: np.ndarray
    elem_first: np.ndarray
    elem_n: np.ndarray
    elem_q0: np.ndarray
    stage_chi: np.ndarray
    stage_row: np.ndarray
    stage_lnu_const: np.ndarray
    lnU: np.ndarray
    lt0: float
    dlt: float
    q_max: float
    mean_mass: float
    h_minus: bool
    arrays: MixtureArrays = field(repr=False, default=None)
    _stage_index: dict = field(repr=False, default_factory=dict)
    _elem_index: dict = field(repr=False, default_factory=dict)

    @property
    def n_stages(self) -> int:
        return int(self.stage_chi.size)

    @property
    def temperature_range(self) -> tuple[float, float]:
        """Range of T [K] covered by the partition-function tables."""
        n_t = self.lnU.shape[1]
        return 10.0**self.lt0, 10.0 ** (self.lt0 + (n_t - 1) * self.dlt)

    @property
    def hydrogen_weight(self) -> float:
        """Number fraction of hydrogen among all nuclei (0 if none)."""
        e = self._elem_index.get(1)
        return 0.0 if e is None else float(self.elem_w[e])

    def element_index(self, element) -> int:
        """Kernel index of an element given by symbol, Z or Species."""
        if isinstance(element, Species):
            z = element.Z
        else:
            from .elements import atomic_number

            z = atomic_number(element)
        try:
            return self._elem_index[z]
        except KeyError:
            raise ValueError(
                f"element {element!r} is not in the mixture; it holds {', '.join(self.mixture.elements)}"
            ) from None

    def stage_index(self, species) -> int:
        """Index of a species in the stage arrays."""
        sp = parse_species(species)
        self.element_index(sp)  # clear error if the element is absent
        try:
            return self._stage_index[sp]
        except KeyError:
            if sp.charge == -1:
                raise ValueError("H- is not included in this solve (h_minus=False)") from None
            raise ValueError(f"species {sp} is not available") from None

    def element_species(self, element) -> tuple:
        """All packed stages of one element, lowest charge first."""
        e = self.element_index(element)
        f, n = int(self.elem_first[e]), int(self.elem_n[e])
        return self.species[f:f + n]


def _check_override_value(kind: str, sp: Species, value) -> float:
    try:
        if hasattr(value, "unit"):
            import astropy.units as u

            value = value.to_value(u.eV if kind == "ionization energy" else u.dimensionless_unscaled)
        v = float(value)
    except Exception as exc:  # noqa: BLE001 - reported with context
        raise ValueError(f"{kind} override for {sp} must be a positive number, got {value!r} ({exc})") from None
    if not (math.isfinite(v) and v > 0.0):
        raise ValueError(f"{kind} override for {sp} must be a finite positive number, got {value!r}")
    return v


def freeze_overrides(partition_functions: Mapping | None, ionization_energies: Mapping | None) -> tuple:
    """Normalise per-call species overrides into a hashable key."""
    pf = tuple(sorted(((parse_species(k), _check_override_value("partition function", parse_species(k), v))
                       for k, v in (partition_functions or {}).items()), key=lambda t: (t[0].Z, t[0].charge)))
    ie = tuple(sorted(((parse_species(k), _check_override_value("ionization energy", parse_species(k), v))
                       for k, v in (ionization_energies or {}).items()), key=lambda t: (t[0].Z, t[0].charge)))
    for sp, _ in ie:
        if sp.charge == sp.Z:
            raise ValueError(f"{sp} is a bare nucleus and has no ionization energy to override")
    return pf, ie


@lru_cache(maxsize=32)
def pack(mixture: Mixture, overrides: tuple = ((), ()), h_minus: bool = True) -> PackedMixture:
    """Pack ``mixture`` (with frozen ``overrides`` from :func:`freeze_overrides`)."""
    pf_over = dict(overrides[0])
    ie_over = dict(overrides[1])
    for sp in list(pf_over) + list(ie_over):
        if sp.Z not in set(int(z) for z in mixture.atomic_numbers):
            raise ValueError(f"override given for {sp}, but {sp.element} is not in the mixture")
        if sp.charge == -1 and not h_minus:
            raise ValueError("override given for H-, but H- is switched off (h_minus=False)")

    grid = partition_grid()
    ie_table = ionization_energy_table()
    zs = np.asarray(mixture.atomic_numbers, dtype=np.int64)
    w = np.asarray(mixture.number_fractions, dtype=np.float64)

    species: list[Species] = []
    extra_rows: list[np.ndarray] = []
    chi: list[float] = []
    rows: list[int] = []
    lnu: list[float] = []
    first = np.empty(zs.size, dtype=np.int64)
    nst = np.empty(zs.size, dtype=np.int64)
    q0 = np.zeros(zs.size, dtype=np.int64)
    for e, z in enumerate(zs):
        z = int(z)
        first[e] = len(species)
        charges = list(range(0, z + 1))
        if z == 1 and h_minus:
            charges = [-1] + charges
            q0[e] = -1
        for q in charges:
            sp = Species(z, q)
            species.append(sp)
            # partition function
            if sp in pf_over:
                # a fixed U becomes a constant row of the table, so tabulated stages stay contiguous
                rows.append(grid.lnU.shape[0] + len(extra_rows))
                extra_rows.append(np.full(grid.lnU.shape[1], math.log(pf_over[sp])))
                lnu.append(0.0)
            elif q == -1:
                rows.append(-1)
                lnu.append(0.0)  # U(H-) = 1
            elif (z, q) in grid.row:
                rows.append(int(grid.row[(z, q)]))
                lnu.append(0.0)
            else:
                rows.append(-1)
                lnu.append(math.log(ground_weight(z, q)))
            # energy to the next stage
            if q == z:
                chi.append(0.0)
            elif sp in ie_over:
                chi.append(ie_over[sp])
            elif q == -1:
                chi.append(H_MINUS_BINDING_EV)
            else:
                value = float(ie_table[z, q])
                if not math.isfinite(value):
                    raise ValueError(f"no ionization energy for {sp}")
                chi.append(value)
        nst[e] = len(species) - first[e]
        # the kernels expect tabulated partition functions in one leading block of an element's
        # stages (after H-, whose U is a constant)
        tab = [r >= 0 for r in rows[first[e]:]]
        start = 1 if q0[e] < 0 else 0
        n_tab = sum(tab)
        if n_tab and not all(tab[start:start + n_tab]):
            raise AssertionError(f"partition-function rows of Z={z} are not one leading block")
    lnU = grid.lnU
    if extra_rows:
        lnU = np.vstack([lnU, np.array(extra_rows)])

    masses = np.array([atomic_mass(int(z)) for z in zs], dtype=np.float64)
    packed = PackedMixture(
        mixture=mixture,
        atomic_numbers=zs,
        species=tuple(species),
        elem_w=np.ascontiguousarray(w),
        elem_first=first,
        elem_n=nst,
        elem_q0=q0,
        stage_chi=np.asarray(chi, dtype=np.float64),
        stage_row=np.asarray(rows, dtype=np.int64),
        stage_lnu_const=np.asarray(lnu, dtype=np.float64),
        lnU=np.ascontiguousarray(lnU, dtype=np.float64),
        lt0=float(grid.log10_T_start),
        dlt=float(grid.dlog10_T),
        q_max=float(np.sum(w * zs)),
        mean_mass=float(np.sum(w * masses)) * AMU,
        h_minus=bool(h_minus),
    )
    object.__setattr__(packed, "arrays", MixtureArrays(
        packed.elem_w, packed.elem_first, packed.elem_n, packed.elem_q0, packed.stage_chi, packed.stage_row,
        packed.stage_lnu_const, packed.lnU, packed.lt0, packed.dlt, packed.q_max,
        *closed_form_fields(packed.elem_w, packed.elem_first, packed.elem_n, packed.elem_q0, packed.stage_chi,
                            packed.stage_row, packed.stage_lnu_const)))
    packed._stage_index.update({sp: i for i, sp in enumerate(species)})
    packed._elem_index.update({int(z): e for e, z in enumerate(zs)})
    return packed
