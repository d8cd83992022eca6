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
from .core.solver import ion_moments_many, log_fractions_many
from .data.mixture import Mixture
from .data.pack import PackedMixture
from .data.species import parse_species
from .quantities import POINT_OUTPUTS, QUANTITIES, SolvedState, astropy_unit

__all__ = ["IonizationResult"]

#: points per batch of the fraction kernels: bounded memory, independent of the mixture size
_BATCH_VALUES = 1_000_000


class IonizationResult:
    """The ionization balance at every input point.

    All arrays have the broadcast shape of the inputs and are in cgs units:
    densities in cm^-3, pressures in dyn cm^-2, mass density in g cm^-3,
    temperature in K.  Stage fractions and number densities are computed on
    request from (T, n_e), which determine them completely.
    """

    def __init__(self, packed: PackedMixture, shape: tuple, temperature: np.ndarray, x: np.ndarray,
                 ln_nuclei: np.ndarray, iterations: np.ndarray, status: np.ndarray, state_variable: str):
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
        self._state = SolvedState(temperature, ne, nn, K_B * temperature, packed, x)
        self._flat: dict[str, np.ndarray] = {"temperature": temperature, "iterations": iterations,
                                             "status": status}
        self._logfrac_cache: dict[int, np.ndarray] = {}
        self._validity = None

    # -- enumeration (registry quantities) --------------------------------------------------------
    def keys(self) -> tuple:
        """Names of the per-point quantities: temperature, every output of the registry, iterations, status."""
        return ("temperature",) + POINT_OUTPUTS + ("iterations", "status")

    def items(self):
        return [(k, self[k]) for k in self.keys()]

    def __contains__(self, name) -> bool:
        return name in self.keys()

    def __getitem__(self, name: str) -> np.ndarray:
        """A per-point quantity by name, e.g. ``result["gas_pressure"]`` (shape :attr:`shape`)."""
        if name not in self._flat:
            q = QUANTITIES.get(name)
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
        if q is not None and q.compute is not None:
            return self[name]
        raise AttributeError(f"'IonizationResult' object has no attribute {name!r}")

    def quantity(self, name: str):
        """A per-point quantity as an astropy Quantity in its registry unit."""
        return self[name] * astropy_unit(name)

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
        return st.success(self.status)

    @property
    def message(self) -> np.ndarray:
        """Per-point status message."""
        return st.messages(self.status)

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
        sp = parse_species(species)
        if getattr(sp, "is_molecule", False):  # pragma: no cover - molecules are not solved yet
            raise ValueError(f"{sp} is a molecule; this solve has atoms and atomic ions only")
        return sp

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
            log_fractions_many(T[a:b], x[a:b], sel, p.arrays, buf[: b - a])
            yield a, b, buf[: b - a]

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

    # -- number densities --------------------------------------------------------------------------
    def number_density(self, species) -> np.ndarray:
        """Number density of one species [cm^-3], e.g. ``number_density("H-")``."""
        sp = self._species(species)
        return self.fraction(sp) * self.nuclei_density * self._weight(sp)

    def number_densities(self, species, fractions: np.ndarray | None = None) -> np.ndarray:
        """Number densities of many species [cm^-3], shape ``(len(species), *shape)``.

        ``fractions`` (the :meth:`species_fractions` of the same species) saves computing them again.
        """
        names = [self._species(s) for s in species]
        frac = self.species_fractions(names) if fractions is None else fractions
        nuclei = self.nuclei_density
        out = np.empty((len(names),) + self.shape)
        with np.errstate(under="ignore", over="ignore", invalid="ignore"):
            for k, sp in enumerate(names):
                out[k] = frac[k] * nuclei * self._weight(sp)
        return out

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
        public :meth:`fractions` instead (slower; for checks).
        """
        if use_kernel:
            out = np.empty((self._T.size, 3))
            ion_moments_many(self._T, self._x, self._packed.arrays, out)
            return tuple(out[:, j].reshape(self.shape) for j in range(3))
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
        return s_q2, s_q53, s_pos

    # -- tables ------------------------------------------------------------------------------------
    def to_table(self, species=None):
        """An astropy Table of the state (0-D and 1-D results only).

        Parameters
        ----------
        species : iterable of species names, optional
            Species whose fractions and number densities to add as columns.
        """
        from astropy.table import QTable

        if len(self.shape) > 1:
            raise ValueError(f"to_table() needs a 0-D or 1-D result; this one has shape {self.shape}")
        t = QTable()
        t["temperature"] = np.atleast_1d(self.temperature) * astropy_unit("temperature")
        for name in POINT_OUTPUTS:
            t[name] = np.atleast_1d(self[name]) * astropy_unit(name)
        for sp in species or ():
            name = str(parse_species(sp))
            t[f"fraction {name}"] = np.atleast_1d(self.fraction(name))
            t[f"n {name}"] = np.atleast_1d(self.number_density(name)) * astropy_unit("number_density")
        t["status"] = np.atleast_1d(self.status)
        t["iterations"] = np.atleast_1d(self.iterations)
        t.meta["mixture"] = self.mixture.name
        t.meta["state_variable"] = self.state_variable
        return t

    def __repr__(self) -> str:
        n = int(np.prod(self.shape, dtype=np.int64))
        ok = int(np.count_nonzero(self._status == st.OK))
        return (f"<IonizationResult shape={self.shape} mixture={self.mixture.name!r} "
                f"input={self.state_variable} converged={ok}/{n}>")
