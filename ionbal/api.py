"""The public solve: validate inputs, strip units, call the core, put units and names back."""

from __future__ import annotations

import warnings
from numbers import Integral, Real
from typing import Mapping

import numpy as np

from .core import status as st
from .core.constants import AMU, K_B
from .core.solver import (
    MAX_ITER,
    MODE_ELECTRON_PRESSURE,
    MODE_GAS_PRESSURE,
    MODE_NUCLEI_DENSITY,
    TOL,
    log_fractions_many,
    solve_few,
    solve_many,
)
from .data.mixture import Mixture
from .data.pack import PackedMixture, freeze_overrides, pack
from .data.species import parse_species

__all__ = ["solve", "IonizationResult", "STATE_VARIABLES", "default_mixture"]

#: state variable -> (cgs unit string, description)
STATE_VARIABLES: dict[str, tuple[str, str]] = {
    "gas_pressure": ("dyn / cm2", "gas pressure"),
    "mass_density": ("g / cm3", "mass density"),
    "hydrogen_density": ("1 / cm3", "number density of hydrogen nuclei"),
    "electron_pressure": ("dyn / cm2", "electron pressure"),
}

_ERRORS = ("raise", "mask")

#: up to this many points are solved on the calling thread (waking the thread pool costs more)
SERIAL_POINTS = 16


def default_mixture() -> Mixture:
    """The default mixture: the AGSS09 solar set."""
    return Mixture.solar("AGSS09")


def _strip_unit(value, unit: str, name: str) -> np.ndarray:
    """Convert ``value`` (number, array or Quantity) to a float64 array in ``unit``.

    Only real numbers are accepted: strings, bytes, booleans, complex numbers,
    dates, ``None`` and masked arrays are refused with a message naming
    ``name`` (and the first offending index of an array).
    """
    if value is None:
        raise ValueError(f"{name} is None; give a number or an array of numbers")
    if hasattr(value, "unit") and hasattr(value, "to_value"):
        import astropy.units as u

        try:
            value = value.to_value(u.Unit(unit))
        except u.UnitConversionError:
            raise ValueError(f"{name} has unit '{value.unit}', which does not convert to '{unit}'") from None
    if isinstance(value, np.ma.MaskedArray):
        raise ValueError(f"{name} is a masked array; fill or drop the masked values first "
                         "(or pass NaN with errors='mask')")
    if isinstance(value, (str, bytes)):
        raise ValueError(f"{name} must be a number or an array of numbers, got the string {value!r}")
    try:
        raw = np.asarray(value)
    except (TypeError, ValueError):
        raise ValueError(f"{name} must be a number or an array of numbers, got {type(value).__name__}") from None
    if raw.dtype == object:
        flat = raw.ravel()
        for k, item in enumerate(flat):
            if item is None or isinstance(item, (str, bytes, bool, np.bool_)) or not isinstance(item, Real):
                where = "" if raw.ndim == 0 else f" at index {_unravel(k, raw.shape)}"
                what = "None" if item is None else f"{type(item).__name__} {item!r}"
                raise ValueError(f"{name} must hold numbers only; found {what}{where}")
    elif raw.dtype.kind not in "iuf":
        kinds = {"b": "booleans", "c": "complex numbers", "U": "strings", "S": "bytes", "M": "dates",
                 "m": "time differences", "V": "raw records"}
        raise ValueError(f"{name} must be real numbers; got {kinds.get(raw.dtype.kind, raw.dtype.name)} "
                         f"(dtype {raw.dtype})")
    try:
        return raw.astype(np.float64)
    except (TypeError, ValueError):
        raise ValueError(f"{name} must be a number or an array of numbers") from None


def _unravel(k: int, shape: tuple):
    idx = np.unravel_index(k, shape)
    return int(idx[0]) if len(idx) == 1 else tuple(int(i) for i in idx)


def _first_bad(arr: np.ndarray, bad: np.ndarray):
    idx = np.argwhere(bad)[0]
    where = "" if arr.ndim == 0 else f" at index {tuple(int(i) for i in idx) if idx.size > 1 else int(idx[0])}"
    return where, arr[tuple(idx)] if arr.ndim else arr[()]


def _check_positive(arr: np.ndarray, name: str) -> None:
    bad = ~(np.isfinite(arr) & (arr > 0))
    if bad.any():
        where, v = _first_bad(arr, bad)
        raise ValueError(f"{name} must be finite and positive; got {v!r}{where} ({int(bad.sum())} bad value(s))")


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
        kT = K_B * temperature
        with np.errstate(over="ignore", invalid="ignore", divide="ignore"):
            flat = {
                "temperature": temperature,
                "electron_density": ne,
                "nuclei_density": nn,
                "electron_pressure": ne * kT,
                "gas_pressure": (nn + ne) * kT,
                "hydrogen_density": nn * packed.hydrogen_weight,
                "mass_density": nn * packed.mean_mass,
                "mean_molecular_weight": packed.mean_mass / ((1.0 + ne / nn) * AMU),
                "iterations": iterations,
                "status": status,
            }
        self._flat = flat
        self._logfrac_cache: dict[int, np.ndarray] = {}
        self._validity = None

    # -- plain arrays ---------------------------------------------------------------------------
    def _get(self, key: str) -> np.ndarray:
        return self._flat[key].reshape(self.shape)

    @property
    def mixture(self) -> Mixture:
        """The mixture that was solved for."""
        return self._packed.mixture

    @property
    def temperature(self) -> np.ndarray:
        """Temperature [K]."""
        return self._get("temperature")

    @property
    def electron_density(self) -> np.ndarray:
        """Free-electron number density n_e [cm^-3]."""
        return self._get("electron_density")

    @property
    def electron_pressure(self) -> np.ndarray:
        """Electron pressure P_e = n_e k T [dyn cm^-2]."""
        return self._get("electron_pressure")

    @property
    def gas_pressure(self) -> np.ndarray:
        """Ideal-gas pressure (n_nuclei + n_e) k T [dyn cm^-2]."""
        return self._get("gas_pressure")

    @property
    def mass_density(self) -> np.ndarray:
        """Mass density [g cm^-3]."""
        return self._get("mass_density")

    @property
    def hydrogen_density(self) -> np.ndarray:
        """Number density of all hydrogen nuclei (H-, H I, H II) [cm^-3]."""
        return self._get("hydrogen_density")

    @property
    def nuclei_density(self) -> np.ndarray:
        """Number density of all nuclei, every element and stage [cm^-3]."""
        return self._get("nuclei_density")

    @property
    def mean_molecular_weight(self) -> np.ndarray:
        """Mean molecular weight per free particle, rho / ((n_nuclei + n_e) m_u)."""
        return self._get("mean_molecular_weight")

    @property
    def status(self) -> np.ndarray:
        """Per-point status code (see :data:`ionbal.core.status.STATUS_TABLE`)."""
        return self._get("status")

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
        return self._get("iterations")

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

    # -- stage fractions ---------------------------------------------------------------------------
    def _element_logfrac(self, e: int) -> np.ndarray:
        if e not in self._logfrac_cache:
            self._logfrac_cache[e] = _element_log_fractions(self._packed, e, self._T, self._x)
        return self._logfrac_cache[e]

    def log_fraction(self, species) -> np.ndarray:
        """Natural log of the fraction of the element in this stage (finite even when tiny)."""
        sp = parse_species(species)
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
        names = [parse_species(s) for s in species]
        elems = {p.element_index(sp) for sp in names}
        cols = np.array([p.stage_index(sp) for sp in names], dtype=np.int64)
        out = np.empty((len(names), self._T.size))
        with np.errstate(under="ignore", over="ignore"):
            for a, b, rows in _log_fraction_batches(p, elems, self._T, self._x):
                out[:, a:b] = np.exp(rows[:, cols].T)
        return out.reshape((len(names),) + self.shape)

    def number_density(self, species) -> np.ndarray:
        """Number density of one species [cm^-3], e.g. ``number_density("H-")``."""
        sp = parse_species(species)
        p = self._packed
        e = p.element_index(sp)
        return self.fraction(sp) * self.nuclei_density * float(p.elem_w[e])

    def mean_charge(self, element) -> np.ndarray:
        """Mean charge of one element's nuclei (including H- for hydrogen)."""
        p = self._packed
        e = p.element_index(element)
        charges = np.array([s.charge for s in p.element_species(element)], dtype=float)
        lf = self._element_logfrac(e)
        return (np.exp(lf) @ charges).reshape(self.shape)

    # -- tables ------------------------------------------------------------------------------------
    def to_table(self, species=None):
        """An astropy Table of the state (0-D and 1-D results only).

        Parameters
        ----------
        species : iterable of species names, optional
            Species whose fractions and number densities to add as columns.
        """
        from astropy.table import QTable
        import astropy.units as u

        if len(self.shape) > 1:
            raise ValueError(f"to_table() needs a 0-D or 1-D result; this one has shape {self.shape}")
        t = QTable()
        t["temperature"] = np.atleast_1d(self.temperature) * u.K
        cols = [("electron_density", u.cm**-3), ("electron_pressure", u.dyn / u.cm**2),
                ("gas_pressure", u.dyn / u.cm**2), ("mass_density", u.g / u.cm**3),
                ("hydrogen_density", u.cm**-3), ("nuclei_density", u.cm**-3),
                ("mean_molecular_weight", u.dimensionless_unscaled)]
        for name, unit in cols:
            t[name] = np.atleast_1d(getattr(self, name)) * unit
        for sp in species or ():
            name = str(parse_species(sp))
            t[f"fraction {name}"] = np.atleast_1d(self.fraction(name))
            t[f"n {name}"] = np.atleast_1d(self.number_density(name)) * u.cm**-3
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


def _log_fraction_batches(p: PackedMixture, elements, T: np.ndarray, x: np.ndarray):
    """Yield ``(a, b, rows)``: ln stage fractions of the given elements at points ``a:b``.

    ``rows`` has the full stage width (only the given elements' columns are
    filled); points are taken in batches of bounded size, so memory does not
    grow with the mixture times the number of points.
    """
    sel = np.array(sorted(elements), dtype=np.int64)
    n = T.size
    batch = max(1, min(n, 1_000_000 // max(1, p.n_stages)))
    buf = np.empty((batch, p.n_stages))
    for a in range(0, n, batch):
        b = min(n, a + batch)
        log_fractions_many(T[a:b], x[a:b], sel, p.arrays, buf[: b - a])
        yield a, b, buf[: b - a]


def _element_log_fractions(p: PackedMixture, e: int, T: np.ndarray, x: np.ndarray) -> np.ndarray:
    """ln of the stage fractions of element ``e`` at every point, shape ``(n_points, n_stages_e)``."""
    f, n = int(p.elem_first[e]), int(p.elem_n[e])
    out = np.empty((T.size, n))
    for a, b, rows in _log_fraction_batches(p, [e], T, x):
        out[a:b] = rows[:, f:f + n]
    return out


def solve(temperature, *, gas_pressure=None, mass_density=None, hydrogen_density=None, electron_pressure=None,
          mixture: Mixture | None = None, partition_functions: Mapping | None = None,
          ionization_energies: Mapping | None = None, h_minus: bool = True, tol: float = TOL,
          max_iterations: int = MAX_ITER, errors: str = "raise", initial_electron_density=None
          ) -> IonizationResult:
    """Solve the LTE ionization balance of a mixture at given temperature and one more state variable.

    For every element of the mixture the Saha equation links each pair of
    successive ionization stages (all stages, neutral to bare nucleus), with
    temperature-dependent partition functions; hydrogen also forms H- from
    H I + e-.  Charge conservation (n_e = sum of ion charges - n(H-)),
    conservation of nuclei per element and the ideal-gas law close the system,
    which is solved for the free-electron density at every point.

    Assumptions: local thermodynamic equilibrium; ideal, non-degenerate gas
    (no Coulomb corrections, no pressure ionization, partition functions from
    a fixed level list); atoms and atomic ions only (no molecules).  These
    fail in chromospheres and low-density hot winds (non-LTE), and in dense,
    degenerate interiors (non-ideal gas).

    Parameters
    ----------
    temperature : float, array or Quantity
        Temperature [K].
    gas_pressure, mass_density, hydrogen_density, electron_pressure : float, array or Quantity
        Exactly one of these: gas pressure [dyn cm^-2], mass density [g cm^-3],
        number density of hydrogen nuclei [cm^-3] or electron pressure
        [dyn cm^-2].  Bare numbers are cgs; Quantities are converted.
        All inputs broadcast together.
    mixture : Mixture, optional
        Chemical composition; default the AGSS09 solar set.
    partition_functions : mapping, optional
        Fixed partition functions for chosen species for this call, e.g.
        ``{"H I": 2.0, "H II": 1.0}``.
    ionization_energies : mapping, optional
        Fixed ionization energies [eV, or Quantity] for chosen species, e.g.
        ``{"H I": 13.6}`` (the energy that takes that species to the next stage).
    h_minus : bool
        Include H- (default True).
    tol : float
        Relative tolerance of charge conservation, with respect to the total
        positive charge (default 1e-13).
    max_iterations : int
        Iteration limit per point.
    errors : {"raise", "mask"}
        "raise" (default): invalid inputs (non-finite, zero or negative, a
        temperature outside the tables) and states without solution raise a
        ValueError naming the first offending index.  "mask": such points get
        a status code and NaN results instead.
    initial_electron_density : float or array, optional
        Starting guess of n_e [cm^-3] (NaN = none).

    Returns
    -------
    IonizationResult
    """
    if errors not in _ERRORS:
        raise ValueError(f"errors must be one of {_ERRORS}, got {errors!r}")
    given = {name: v for name, v in (("gas_pressure", gas_pressure), ("mass_density", mass_density),
                                      ("hydrogen_density", hydrogen_density),
                                      ("electron_pressure", electron_pressure)) if v is not None}
    if len(given) != 1:
        names = ", ".join(STATE_VARIABLES)
        got = ", ".join(given) or "none"
        raise ValueError(f"give exactly one state variable besides temperature ({names}); got {got}")
    (var, raw), = given.items()
    if mixture is None:
        mixture = default_mixture()
    if not isinstance(mixture, Mixture):
        raise TypeError(f"mixture must be an ionbal.Mixture, got {type(mixture).__name__}")
    if isinstance(tol, (bool, np.bool_)) or not isinstance(tol, Real) or not (0 < tol < 1e-3):
        raise ValueError(f"tol must be a number in (0, 1e-3), got {tol!r}")
    if (isinstance(max_iterations, (bool, np.bool_)) or not isinstance(max_iterations, Integral)
            or not 1 <= max_iterations <= 1_000_000):
        raise ValueError(f"max_iterations must be an integer from 1 to 1,000,000, got {max_iterations!r}")
    if not isinstance(h_minus, (bool, np.bool_)):
        raise ValueError(f"h_minus must be True or False, got {h_minus!r}")
    for arg, over in (("partition_functions", partition_functions), ("ionization_energies", ionization_energies)):
        if over is not None and not isinstance(over, Mapping):
            raise ValueError(f"{arg} must be a mapping of species to values, e.g. {{'H I': 2.0}}; "
                             f"got {type(over).__name__}")

    packed = pack(mixture, freeze_overrides(partition_functions, ionization_energies), bool(h_minus))

    T = _strip_unit(temperature, "K", "temperature")
    value = _strip_unit(raw, STATE_VARIABLES[var][0], var)
    guess = None
    if initial_electron_density is not None:
        guess = _strip_unit(initial_electron_density, "1 / cm3", "initial_electron_density")
        bad = ~(np.isnan(guess) | ((guess > 0) & np.isfinite(guess)))
        if bad.any():
            where, v = _first_bad(guess, bad)
            raise ValueError(f"initial_electron_density must be positive and finite (NaN = no guess); "
                             f"got {v!r}{where}")
    try:
        arrays = np.broadcast_arrays(T, value)
    except ValueError:
        raise ValueError(f"temperature (shape {T.shape}) and {var} (shape {value.shape}) do not broadcast "
                         "together") from None
    if guess is not None:
        try:
            arrays = np.broadcast_arrays(*arrays, guess)
        except ValueError:
            raise ValueError(f"initial_electron_density (shape {guess.shape}) does not broadcast to the "
                             f"shape of the states {arrays[0].shape}") from None
        if arrays[0].shape != np.broadcast_shapes(T.shape, value.shape):
            raise ValueError(f"initial_electron_density (shape {guess.shape}) does not broadcast to the "
                             f"shape of the states {np.broadcast_shapes(T.shape, value.shape)}")
    shape = arrays[0].shape
    T_b, v_b = arrays[0], arrays[1]
    if T_b.size == 0:
        raise ValueError("temperature and the state variable are empty arrays; nothing to solve")

    t_lo, t_hi = packed.temperature_range
    if errors == "raise":
        _check_positive(T_b, "temperature")
        _check_positive(v_b, var)
        out = (T_b < t_lo * (1 - 1e-12)) | (T_b > t_hi * (1 + 1e-12))
        if out.any():
            where, v = _first_bad(T_b, out)
            raise ValueError(f"temperature {v:g} K{where} is outside the tabulated range "
                             f"{t_lo:.4g}-{t_hi:.4g} K")

    if var == "gas_pressure":
        mode, kval = MODE_GAS_PRESSURE, v_b
    elif var == "electron_pressure":
        mode, kval = MODE_ELECTRON_PRESSURE, v_b
    elif var == "hydrogen_density":
        wh = packed.hydrogen_weight
        if wh <= 0:
            raise ValueError("hydrogen_density was given, but the mixture has no hydrogen; "
                             "use gas_pressure or mass_density")
        mode, kval = MODE_NUCLEI_DENSITY, v_b / wh
    else:
        with np.errstate(over="ignore"):
            mode, kval = MODE_NUCLEI_DENSITY, v_b / packed.mean_mass

    # the density scale the kernel works with must be representable
    with np.errstate(over="ignore", divide="ignore", invalid="ignore"):
        scale = kval / (K_B * T_b) if mode != MODE_NUCLEI_DENSITY else kval
        overflow = np.isfinite(T_b) & (T_b > 0) & np.isfinite(v_b) & (v_b > 0) & ~(scale < 1e305)
    if overflow.any():
        if errors == "raise":
            where, v = _first_bad(v_b, overflow)
            raise ValueError(f"{var} = {v:g}{where} gives a density beyond the range of double precision "
                             "(above 1e305 cm^-3)")
        kval = np.where(overflow, np.nan, kval)  # status: invalid input
    Tf = np.ascontiguousarray(T_b, dtype=np.float64).ravel()
    vf = np.ascontiguousarray(kval, dtype=np.float64).ravel()
    if guess is None:
        gf = np.full(Tf.size, np.nan)
    else:
        with np.errstate(divide="ignore", invalid="ignore"):
            gf = np.log(np.ascontiguousarray(arrays[2], dtype=np.float64).ravel())
    n = Tf.size
    x = np.empty(n)
    lnn = np.empty(n)
    it = np.empty(n, dtype=np.int32)
    code = np.empty(n, dtype=np.int8)
    driver = solve_few if n <= SERIAL_POINTS else solve_many
    driver(mode, Tf, vf, gf, packed.arrays, float(tol), int(max_iterations), x, lnn, it, code)

    if errors == "raise":
        bad = (code != st.OK) & (code != st.NO_SOLUTION) & (code != st.MAX_ITERATIONS)
        if bad.any():
            where, _ = _first_bad(code.reshape(shape), bad.reshape(shape))
            k = int(np.argmax(bad))
            raise ValueError(f"state{where} (T={Tf[k]:g} K, {var}={v_b.ravel()[k]:g}) cannot be solved: "
                             f"{st.STATUS_TABLE[int(code[k])][1]}")
        bad = code == st.NO_SOLUTION
        if bad.any():
            where, _ = _first_bad(code.reshape(shape), bad.reshape(shape))
            raise ValueError(f"no physical solution{where}: the mixture cannot supply this many free electrons "
                             "at this temperature "
                             f"({var}={v_b.ravel()[np.argmax(bad)]:g}, T={Tf[np.argmax(bad)]:g} K); "
                             "pass errors='mask' to get a status code instead")
    bad_iter = code == st.MAX_ITERATIONS
    if bad_iter.any():
        warnings.warn(f"{int(bad_iter.sum())} point(s) did not converge within {max_iterations} iterations; "
                      "see result.status", RuntimeWarning, stacklevel=2)
    failed = code != st.OK
    x = np.where(failed & (code != st.MAX_ITERATIONS), np.nan, x)
    lnn = np.where(failed & (code != st.MAX_ITERATIONS), np.nan, lnn)
    return IonizationResult(packed, shape, Tf, x, lnn, it.reshape(-1), code, var)
