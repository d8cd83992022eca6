"""The result of a solve: :class:`IonizationResult`.

A result holds the state at every point (temperature, free-electron and nuclei densities) and the
packed mixture; everything else is computed from these on request.  It is enumerable like scipy's
result objects: ``result.keys()`` lists the per-point quantities of the registry
(:mod:`ionbal.quantities`), ``result["electron_pressure"]`` gives one, ``dict(result.items())``
all of them.  It holds the only implementations of stage fractions, number densities and the ion
moments used by :mod:`ionbal.validity`; writers go through it, never through species labels.
"""

from __future__ import annotations

import numpy as np

from .core import status as st
from .core.constants import K_B
from .core.config import SERIAL_POINTS
from .core.solver import (
    ion_moments_many,
    log_fractions_chunk,
    log_fractions_many,
    no_dlnu,
    tile_chunk,
    tile_outputs_many,
)
from .data.mixture import Mixture
from .data.pack import PackedMixture
from .data.molecules import molecule_or_none, parse_molecule
from .data.species import parse_species
from .quantities import POINT_OUTPUTS, QUANTITIES, SolvedState, astropy_unit

__all__ = ["IonizationResult"]

#: points per batch of the fraction kernels: bounded memory, independent of the mixture size
_BATCH_VALUES = 1_000_000

#: (id of the packed mixture, species names) -> (packed mixture, stage columns): a grid asks for the
#: same few hundred names in every tile; the packed mixtures themselves are cached by ``pack``
_COLUMNS: dict = {}


class IonizationResult:
    """The ionization balance at every input point.

    All arrays have the broadcast shape of the inputs and are in cgs units:
    densities in cm^-3, pressures in dyn cm^-2, mass density in g cm^-3,
    temperature in K.  Stage fractions and number densities are computed on
    request from (T, n_e), which determine them completely.

    With ``units`` (:func:`ionbal.solve` sets it when an input was an astropy
    Quantity, or on request) every dimensional output (temperature, densities,
    pressures, number and partial densities) is an astropy Quantity in its cgs
    unit; dimensionless ones (fractions, mean molecular weight, mean charge,
    status, iterations) stay plain arrays.  Without it everything is a plain
    array in cgs.
    """

    def __init__(self, packed: PackedMixture, shape: tuple, temperature: np.ndarray, x: np.ndarray,
                 ln_nuclei: np.ndarray, iterations: np.ndarray, status: np.ndarray, state_variable: str,
                 *, units: bool = False, chemistry=None):
        self.units = bool(units)
        self._packed = packed
        self.shape = tuple(shape)
        self._T = temperature  # flat
        self._x = x
        self._status = status
        self.state_variable = state_variable
        good = np.isfinite(x) & np.isfinite(ln_nuclei)
        with np.errstate(over="ignore", invalid="ignore"):
            ne = np.where(good, np.exp(x), np.nan)
            nn = np.where(good, np.exp(ln_nuclei), np.nan)
        self._chem = chemistry
        self._ln_share = None
        nh = None
        if chemistry is not None:
            with np.errstate(over="ignore", invalid="ignore"):
                nh = np.where(good, chemistry.free_atoms.sum(axis=1) + chemistry.molecule_density.sum(axis=1),
                              np.nan)
        self._state = SolvedState(temperature, ne, nn, K_B * temperature, packed, x, nh)
        self._flat: dict[str, np.ndarray] = {"temperature": temperature, "iterations": iterations,
                                             "status": status}
        self._logfrac_cache: dict[int, np.ndarray] = {}
        self._validity = None
        self._moments = None
        self._thermo = None

    # -- enumeration (registry quantities) --------------------------------------------------------
    def keys(self) -> tuple:
        """Names of the per-point quantities: temperature, every output of the registry, iterations, status."""
        return ("temperature",) + POINT_OUTPUTS + ("iterations", "status")

    def items(self):
        return [(k, self[k]) for k in self.keys()]

    def __contains__(self, name) -> bool:
        return name in self.keys()

    def __getitem__(self, name: str) -> np.ndarray:
        """A per-point quantity by name, e.g. ``result["gas_pressure"]`` (shape :attr:`shape`).

        A Quantity when the result has :attr:`units` and the quantity a dimension.
        """
        return self._out(self._plain(name), name)

    def _out(self, values: np.ndarray, name: str):
        """``values`` as the caller gets them: a Quantity in the unit of ``name`` with :attr:`units`."""
        if self.units and QUANTITIES[name].unit not in ("", "1"):
            return values * astropy_unit(name)
        return values

    def _plain(self, name: str) -> np.ndarray:
        """A per-point quantity as a plain cgs array (what the other methods compute with)."""
        if name not in self._flat:
            q = QUANTITIES.get(name)
            if q is not None and q.kind == "thermo":
                self._thermo_block()
                return self._flat[name].reshape(self.shape)
            if q is None or q.compute is None:
                raise KeyError(f"{name!r} is not a per-point quantity of the result; it has "
                               f"{', '.join(self.keys())}")
            with np.errstate(over="ignore", invalid="ignore", divide="ignore"):
                self._flat[name] = q.compute(self._state)
        return self._flat[name].reshape(self.shape)

    def __getattr__(self, name: str):
        # a quantity added to the registry is an attribute of the result without more code
        if name.startswith("_"):
            raise AttributeError(name)
        q = QUANTITIES.get(name)
        if q is not None and (q.compute is not None or q.kind == "thermo"):
            return self[name]
        raise AttributeError(f"'IonizationResult' object has no attribute {name!r}")

    def quantity(self, name: str):
        """A per-point quantity as an astropy Quantity in its registry unit (whatever :attr:`units` says)."""
        return self._plain(name) * astropy_unit(name)

    # -- plain arrays ------------------------------------------------------------------------------
    @property
    def mixture(self) -> Mixture:
        """The mixture that was solved for."""
        return self._packed.mixture

    @property
    def temperature(self) -> np.ndarray:
        """Temperature [K]."""
        return self["temperature"]

    @property
    def electron_density(self) -> np.ndarray:
        """Free-electron number density n_e [cm^-3]."""
        return self["electron_density"]

    @property
    def electron_pressure(self) -> np.ndarray:
        """Electron pressure P_e = n_e k T [dyn cm^-2]."""
        return self["electron_pressure"]

    @property
    def gas_pressure(self) -> np.ndarray:
        """Ideal-gas pressure (n_nuclei + n_e) k T [dyn cm^-2]."""
        return self["gas_pressure"]

    @property
    def mass_density(self) -> np.ndarray:
        """Mass density [g cm^-3]."""
        return self["mass_density"]

    @property
    def hydrogen_density(self) -> np.ndarray:
        """Number density of all hydrogen nuclei (H-, H I, H II) [cm^-3]."""
        return self["hydrogen_density"]

    @property
    def nuclei_density(self) -> np.ndarray:
        """Number density of all nuclei, every element and stage [cm^-3]."""
        return self["nuclei_density"]

    @property
    def mean_molecular_weight(self) -> np.ndarray:
        """Mean molecular weight per free particle, rho / ((n_nuclei + n_e) m_u)."""
        return self["mean_molecular_weight"]

    @property
    def status(self) -> np.ndarray:
        """Per-point status code (see :data:`ionbal.core.status.STATUS_TABLE`)."""
        return self["status"]

    @property
    def converged(self) -> np.ndarray:
        """True where the solve converged."""
        return st.success(self._plain("status"))

    @property
    def message(self) -> np.ndarray:
        """Per-point status message."""
        return st.messages(self._plain("status"))

    @property
    def iterations(self) -> np.ndarray:
        """Newton iterations used per point."""
        return self["iterations"]

    @property
    def species(self) -> tuple:
        """Every species (ionization stage) in the solve, as canonical names."""
        return tuple(str(s) for s in self._packed.species)

    @property
    def validity(self):
        """Where ideal-gas LTE Saha stops being trustworthy, per point.

        See :func:`ionbal.validity.assess` for the flags and their thresholds.
        """
        if self._validity is None:
            from .validity import assess

            self._validity = assess(self)
        return self._validity

    def stages(self, element) -> tuple:
        """Canonical names of the stages of one element, lowest charge first."""
        return tuple(str(s) for s in self._packed.element_species(element))

    # -- species: the one place that maps a species to the packed arrays ---------------------------
    def _species(self, species):
        m = self._as_molecule(species)
        if m is not None:
            raise ValueError(f"{m} is a molecule: it has no stage fraction; use number_density('{m}') or "
                             f"partial_pressure('{m}'), or element_budget(element) for the share of an "
                             "element's nuclei it holds")
        # a bare element symbol would parse as the neutral atom: refuse it rather than guess
        text = species.strip() if isinstance(species, str) else ""
        if text.isalpha() and len(text) <= 2 and text.capitalize() in self._packed.mixture.elements:
            el = text.capitalize()
            raise ValueError(f"{species!r} is an element, not a species; name the stage, e.g. '{el} I' or "
                             f"'{el} II', or use fractions('{el}') for all its stages")
        return parse_species(species)

    def _as_molecule(self, species):
        """The :class:`~ionbal.data.molecules.Molecule` a name means, or None for an atomic species.

        A few molecular-ion formulas read as atomic ions too ("C2+" is C III in the atomic
        notation, and the C2+ molecule); where both are in the solve, the name is refused as
        ambiguous (write "C III", or "C2^+" for the molecule).
        """
        return molecule_or_none(species, self.molecules)

    def _molecule_column(self, m) -> np.ndarray:
        """Number density [cm^-3] of one molecule of the solve, flat."""
        if self._chem is None:
            raise ValueError(f"molecule {m} is not part of this solve (it was solved without molecules; "
                             "pass molecules=True or a list that includes it)")
        try:
            i = self._chem.molecules.index(m)
        except ValueError:
            raise ValueError(f"molecule {m} is not part of this solve; it has {len(self.molecules)} "
                             "(see result.molecules)") from None
        good = np.isfinite(self._state.nn)
        return np.where(good, self._chem.molecule_density[:, i], np.nan)

    @property
    def molecules(self) -> tuple:
        """Labels of the molecules of the solve (``()`` without molecules), e.g. ``("H2", "CO", ...)``."""
        return () if self._chem is None else tuple(str(m) for m in self._chem.molecules.molecules)

    def molecule_densities(self, molecules=None) -> np.ndarray:
        """Number densities [cm^-3] of molecules (default: all of :attr:`molecules`), shape ``(n, *shape)``."""
        names = self.molecules if molecules is None else [str(parse_molecule(m)) for m in molecules]
        out = np.empty((len(names),) + self.shape)
        for k, m in enumerate(names):
            out[k] = self._molecule_column(parse_molecule(m)).reshape(self.shape)
        return self._out(out, "number_density")

    def element_budget(self, element) -> dict:
        """Where the nuclei of one element are: ``{label: share}`` over its stages and molecules.

        Shares (arrays of :attr:`shape`) are of the element's nuclei: a stage's fraction, and
        ``count * n(molecule) / n(element's nuclei)`` for each molecule holding it; they sum to 1.
        """
        p = self._packed
        e = p.element_index(element)
        out = {name: f for name, f in zip(self.stages(element), self.fractions(element))}
        if self._chem is not None:
            z = int(p.atomic_numbers[e])
            nuclei = self._plain("nuclei_density").ravel() * float(p.elem_w[e])
            for m in self._chem.molecules.molecules:
                count = dict(m.composition).get(z, 0)
                if count:
                    with np.errstate(invalid="ignore", divide="ignore"):
                        out[str(m)] = (count * self._molecule_column(m) / nuclei).reshape(self.shape)
        return out

    # -- thermodynamics (ionbal.thermo) -------------------------------------------------------------
    def _thermo_block(self, per_element: bool = False):
        if self._thermo is None or (per_element and self._thermo.share is None):
            from .thermo import thermodynamics

            self._thermo = thermodynamics(self, per_element)
            self._flat.update(self._thermo.fields)
        return self._thermo

    def electron_donors(self) -> dict:
        """Share of the free electrons each element supplies: ``{element: array}``, summing to 1.

        ``a_X <q>_X / (n_e / n_nuclei)`` with ``<q>`` the element's mean charge; hydrogen's share is
        negative where H- holds more electrons than H II gives.  With molecules a molecular ion
        counts for the element of its charged product (H2+ for H, ...).
        """
        blk = self._thermo_block(per_element=True)
        return {el: blk.share[:, e].reshape(self.shape) for e, el in enumerate(blk.elements)}

    def abundance_sensitivity(self) -> dict:
        """``{element: d ln n_e / d A(X)}`` at constant T and gas pressure (per dex of ``A(X)``).

        Exact implicit derivative of the solve (see :mod:`ionbal.core.thermo` and
        :mod:`ionbal.core.thermo_mol`); the other elements' abundances ``eps`` stay fixed.
        """
        blk = self._thermo_block(per_element=True)
        return {el: blk.dlna[:, e].reshape(self.shape) for e, el in enumerate(blk.elements)}

    def _weight(self, sp) -> float:
        """Share of all nuclei held by the element (atoms) of a species."""
        p = self._packed
        return float(p.elem_w[p.element_index(sp)])

    # -- stage fractions ---------------------------------------------------------------------------
    def _element_logfrac(self, e: int) -> np.ndarray:
        if e not in self._logfrac_cache:
            p = self._packed
            f, n = int(p.elem_first[e]), int(p.elem_n[e])
            out = np.empty((self._T.size, n))
            for a, b, rows in self._log_fraction_batches([e]):
                out[a:b] = rows[:, f:f + n]
            self._logfrac_cache[e] = out
        return self._logfrac_cache[e]

    def _log_fraction_batches(self, elements):
        """Yield ``(a, b, rows)``: ln stage fractions of the given elements at points ``a:b``.

        ``rows`` has the full stage width (only the given elements' columns are
        filled); points are taken in batches of bounded size, so memory does not
        grow with the mixture times the number of points.
        """
        p = self._packed
        T, x = self._T, self._x
        sel = np.array(sorted(elements), dtype=np.int64)
        n = T.size
        batch = max(1, min(n, _BATCH_VALUES // max(1, p.n_stages)))
        buf = np.empty((batch, p.n_stages))
        for a in range(0, n, batch):
            b = min(n, a + batch)
            if b - a <= SERIAL_POINTS:  # on the calling thread: a small call never wakes the thread pool
                log_fractions_chunk(T[a:b], x[a:b], sel, p.arrays, *no_dlnu(b - a), buf[: b - a])
            else:
                log_fractions_many(T[a:b], x[a:b], sel, p.arrays, buf[: b - a])
            if self._chem is not None:
                # Saha gives fractions of the free atoms; the element's nuclei are shared with molecules
                share = self._log_atom_share()
                for e in sel:
                    f, k = int(p.elem_first[e]), int(p.elem_n[e])
                    buf[: b - a, f:f + k] += share[a:b, e, None]
            yield a, b, buf[: b - a]

    def _log_atom_share(self) -> np.ndarray:
        """ln of the share of each element's nuclei in free atoms and atomic ions, (n_points, n_elements).

        0 for elements that form no molecule of the solve (all their nuclei are atomic).
        """
        if self._ln_share is None:
            p = self._packed
            ch = self._chem
            share = np.zeros((self._T.size, p.elem_w.size))
            formers = np.flatnonzero(ch.molecules.elem_former >= 0)
            with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
                nn = np.exp(ch.ln_nuclei_density)
                for e in formers:
                    share[:, e] = np.log(ch.free_atoms[:, e] / (p.elem_w[e] * nn))
            self._ln_share = share
        return self._ln_share

    def log_fraction(self, species) -> np.ndarray:
        """Natural log of the fraction of the element in this stage (finite even when tiny)."""
        sp = self._species(species)
        p = self._packed
        e = p.element_index(sp)
        k = p.stage_index(sp) - int(p.elem_first[e])
        return self._element_logfrac(e)[:, k].reshape(self.shape)

    def fraction(self, species) -> np.ndarray:
        """Fraction of the element in this stage, e.g. ``fraction("Fe II")``."""
        return np.exp(self.log_fraction(species))

    def fractions(self, element) -> np.ndarray:
        """All stage fractions of one element, stacked: shape ``(n_stages, *shape)``."""
        e = self._packed.element_index(element)
        lf = self._element_logfrac(e)
        return np.exp(lf.T).reshape((lf.shape[1],) + self.shape)

    def species_fractions(self, species) -> np.ndarray:
        """Fractions of many species at once, stacked: shape ``(len(species), *shape)``.

        The same numbers as :meth:`fraction`, computed in one pass over the
        elements involved, in batches of points so that memory stays bounded
        (the fast way to fill an ion-fraction cube).
        """
        p = self._packed
        names = [self._species(s) for s in species]
        elems = {p.element_index(sp) for sp in names}
        cols = np.array([p.stage_index(sp) for sp in names], dtype=np.int64)
        out = np.empty((len(names), self._T.size))
        with np.errstate(under="ignore", over="ignore"):
            for a, b, rows in self._log_fraction_batches(elems):
                out[:, a:b] = np.exp(rows[:, cols].T)
        return out.reshape((len(names),) + self.shape)

    def fractions_and_moments(self, species) -> np.ndarray:
        """:meth:`species_fractions` of many species, with the :meth:`ion_moments` from the same pass.

        One core pass per point (:func:`ionbal.core.solver.tile_outputs_many`) gives the fractions
        and the three moments the validity flags need; the moments are kept, so :attr:`validity`
        costs no second pass.  The same numbers as :meth:`species_fractions` and :meth:`ion_moments`.
        """
        if self._chem is not None:  # the kernel knows free atoms only, not the molecules' share
            return self.species_fractions(species)
        p = self._packed
        cols = self._stage_columns(species)
        n = self._T.size
        out = np.empty((cols.size, n))
        mom = np.empty((n, 3))
        batch = max(1, min(n, _BATCH_VALUES // max(1, cols.size)))
        buf = np.empty((batch, cols.size))
        for a in range(0, n, batch):
            b = min(n, a + batch)
            if b - a <= SERIAL_POINTS:
                tile_chunk(self._T[a:b], self._x[a:b], cols, p.arrays, *no_dlnu(b - a), buf[: b - a], mom[a:b],
                           True)
            else:
                tile_outputs_many(self._T[a:b], self._x[a:b], cols, p.arrays, buf[: b - a], mom[a:b])
            out[:, a:b] = buf[: b - a].T
        if self._moments is None:
            self._moments = tuple(mom[:, j].reshape(self.shape) for j in range(3))
        return out.reshape((cols.size,) + self.shape)

    def _stage_columns(self, species) -> np.ndarray:
        """Stage indices (int64) of the given species in the packed arrays (checked names)."""
        p = self._packed
        key = (id(p), tuple(species)) if all(isinstance(s, str) for s in species) else None
        hit = _COLUMNS.get(key) if key is not None else None
        if hit is not None and hit[0] is p:
            return hit[1]
        cols = np.array([p.stage_index(sp) for sp in (self._species(s) for s in species)], dtype=np.int64)
        if key is not None:
            if len(_COLUMNS) >= 64:
                _COLUMNS.clear()
            _COLUMNS[key] = (p, cols)
        return cols

    # -- number densities --------------------------------------------------------------------------
    def number_density(self, species) -> np.ndarray:
        """Number density of one species or molecule [cm^-3], e.g. ``number_density("H-")``, ``("CO")``."""
        m = self._as_molecule(species)
        if m is not None:
            return self._out(self._molecule_column(m).reshape(self.shape), "number_density")
        sp = self._species(species)
        return self._out(self.fraction(sp) * self._plain("nuclei_density") * self._weight(sp), "number_density")

    def partial_pressure(self, species) -> np.ndarray:
        """Partial pressure of one species or molecule, n k T [dyn cm^-2], e.g. ``partial_pressure("H2O")``."""
        m = self._as_molecule(species)
        if m is not None:
            n = self._molecule_column(m).reshape(self.shape)
            return self._out(n * K_B * self._plain("temperature"), "partial_pressure")
        sp = self._species(species)
        n = self.fraction(sp) * self._plain("nuclei_density") * self._weight(sp)
        return self._out(n * K_B * self._plain("temperature"), "partial_pressure")

    def number_densities(self, species, fractions: np.ndarray | None = None) -> np.ndarray:
        """Number densities of many species and molecules [cm^-3], shape ``(len(species), *shape)``.

        Atomic species (``"Fe II"``, ``"H-"``) and molecules of the solve (``"CO"``, ``"H2+"``)
        may be mixed.  ``fractions`` (the :meth:`species_fractions` of the same atomic species, in
        the same order, without the molecules) saves computing them again.
        """
        kinds = [(self._as_molecule(s), s) for s in species]
        atoms = [self._species(s) for m, s in kinds if m is None]
        if fractions is None:
            frac = self.species_fractions(atoms) if atoms else np.empty((0,) + self.shape)
        else:
            frac = np.asarray(fractions)
            if frac.shape[0] != len(atoms):
                raise ValueError(f"fractions has {frac.shape[0]} row(s) but {len(atoms)} atomic species were "
                                 "named; pass the species_fractions of the atomic species only")
        nuclei = self._plain("nuclei_density")
        out = np.empty((len(kinds),) + self.shape)
        k_atom = 0
        with np.errstate(under="ignore", over="ignore", invalid="ignore"):
            for k, (m, _) in enumerate(kinds):
                if m is None:
                    sp = atoms[k_atom]
                    out[k] = frac[k_atom].reshape(self.shape) * nuclei * self._weight(sp)
                    k_atom += 1
                else:
                    out[k] = self._molecule_column(m).reshape(self.shape)
        return self._out(out, "number_density")

    def mean_charge(self, element) -> np.ndarray:
        """Mean charge of one element's nuclei (including H- for hydrogen)."""
        p = self._packed
        e = p.element_index(element)
        charges = np.array([s.charge for s in p.element_species(element)], dtype=float)
        lf = self._element_logfrac(e)
        return (np.exp(lf) @ charges).reshape(self.shape)

    # -- moments of the charge distribution (for ionbal.validity) ----------------------------------
    def ion_moments(self, *, use_kernel: bool = True) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """Per nucleus: Σ w f q² (all charged stages), Σ w f q^{5/3} and Σ w f over positive ions.

        Summed in the core (:func:`ionbal.core.solver.ion_moments_many`) over the populated stages
        of each element, without building any fraction array; ``use_kernel=False`` sums the
        public :meth:`fractions` instead (slower; for checks).  With molecules the stage fractions
        are of the element's nuclei (the molecules' share taken out) and the molecular ions
        (H2+, H2-, HeH+, ...) count as charged particles of their charge, per nucleus
        ``n(molecule) / n_nuclei``: at 20,000 K and 1e12 dyn cm^-2 they hold most of the charge.
        """
        if use_kernel and self._chem is None:  # the kernel knows free atoms only, not the molecules' share
            if self._moments is None:
                n = self._T.size
                out = np.empty((n, 3))
                if n <= SERIAL_POINTS:
                    tile_chunk(self._T, self._x, np.empty(0, dtype=np.int64), self._packed.arrays, *no_dlnu(n),
                               out[:, :0], out, False)
                else:
                    ion_moments_many(self._T, self._x, self._packed.arrays, out)
                self._moments = tuple(out[:, j].reshape(self.shape) for j in range(3))
            return self._moments
        p = self._packed
        s_q2 = np.zeros(self.shape)
        s_q53 = np.zeros(self.shape)
        s_pos = np.zeros(self.shape)
        for el, we in zip(self.mixture.elements, self.mixture.number_fractions):
            fr = self.fractions(el)
            for k, sp in enumerate(p.element_species(el)):
                qk = sp.charge
                if qk == 0:
                    continue
                s_q2 = s_q2 + we * qk * qk * fr[k]
                if qk > 0:
                    s_q53 = s_q53 + we * qk ** (5.0 / 3.0) * fr[k]
                    s_pos = s_pos + we * fr[k]
        if self._chem is not None:
            nn = self._plain("nuclei_density")
            for m in self._chem.molecules.molecules:
                if m.charge == 0:
                    continue
                with np.errstate(invalid="ignore", divide="ignore"):
                    per = self._molecule_column(m).reshape(self.shape) / nn
                s_q2 = s_q2 + m.charge * m.charge * per
                if m.charge > 0:
                    s_q53 = s_q53 + m.charge ** (5.0 / 3.0) * per
                    s_pos = s_pos + per
        return s_q2, s_q53, s_pos

    # -- tables ------------------------------------------------------------------------------------
    def to_table(self, species=None, *, partial_pressures: bool = False):
        """An astropy QTable of the state (0-D and 1-D results only), in cgs units.

        Parameters
        ----------
        species : "default", "all", a name, a comma-separated list or an iterable of names, optional
            Species whose fractions and number densities to add as columns
            (``"default"``: stages I-III of every element and H-; ``"all"``: every stage; both
            with every molecule of the solve).  Molecules (``"CO"``, ``"H2+"``) get a number
            density column (and a partial pressure), no fraction.
        partial_pressures : bool
            Also add the partial pressure of each of these species.

        Columns are named as in ``ionbal column`` files: ``electron_density``, ...,
        ``fraction_Fe_II``, ``number_density_Fe_II``, ``partial_pressure_Fe_II``,
        ``number_density_CO`` (:func:`ionbal.quantities.species_column_name`).
        """
        from .result_table import result_table

        return result_table(self, species, partial_pressures=partial_pressures)

    def __repr__(self) -> str:
        n = int(np.prod(self.shape, dtype=np.int64))
        ok = int(np.count_nonzero(self._status == st.OK))
        return (f"<IonizationResult shape={self.shape} mixture={self.mixture.name!r} "
                f"input={self.state_variable} converged={ok}/{n}>")
