"""The public solve: validate inputs, strip units, call the core, put units and names back."""

from __future__ import annotations

import warnings
from typing import Mapping

import numpy as np

from .core import status as st
from .core.config import SERIAL_POINTS  # up to this many points: solved on the calling thread
from .core.constants import K_B
from .core.solver import (
    MAX_ITER,
    MODE_ELECTRON_PRESSURE,
    MODE_GAS_PRESSURE,
    MODE_NUCLEI_DENSITY,
    TOL,
    solve_few,
    solve_many,
)
from .chemistry import solve_chemistry
from .data.mixture import Mixture
from .data.molecules import Molecule, molecule_table, pack_molecules, parse_molecule
from .data.pack import freeze_overrides, pack
from .quantities import QUANTITIES, STATE_INPUTS
from .result import IonizationResult
from .validate import (
    as_cgs_array,
    check_max_iterations,
    check_positive,
    check_tol,
    first_bad,
    outside_temperature_range,
)

__all__ = ["solve", "IonizationResult", "STATE_VARIABLES", "default_mixture"]

#: state variable -> (cgs unit, description), read from the quantity registry
STATE_VARIABLES: dict[str, tuple[str, str]] = {n: (QUANTITIES[n].unit, QUANTITIES[n].label) for n in STATE_INPUTS}

_ERRORS = ("raise", "mask")


def _nuclei_from_hydrogen(value, packed):
    wh = packed.hydrogen_weight
    if wh <= 0:
        raise ValueError("hydrogen_density was given, but the mixture has no hydrogen; "
                         "use gas_pressure or mass_density")
    return MODE_NUCLEI_DENSITY, value / wh


def _nuclei_from_mass(value, packed):
    with np.errstate(over="ignore"):
        return MODE_NUCLEI_DENSITY, value / packed.mean_mass


#: state input -> (value, packed) -> (kernel mode, the value the kernel takes); one entry per
#: state input of the quantity registry
_KERNEL_INPUTS = {
    "gas_pressure": lambda value, packed: (MODE_GAS_PRESSURE, value),
    "electron_pressure": lambda value, packed: (MODE_ELECTRON_PRESSURE, value),
    "hydrogen_density": _nuclei_from_hydrogen,
    "mass_density": _nuclei_from_mass,
}
assert set(_KERNEL_INPUTS) == set(STATE_INPUTS), "every state input of the registry needs a kernel mode"


def default_mixture() -> Mixture:
    """The default mixture: the AGSS09 solar set."""
    return Mixture.solar("AGSS09")


def solve(temperature, *, gas_pressure=None, mass_density=None, hydrogen_density=None, electron_pressure=None,
          mixture: Mixture | None = None, partition_functions: Mapping | None = None,
          ionization_energies: Mapping | None = None, h_minus: bool = True, tol: float = TOL,
          max_iterations: int = MAX_ITER, errors: str = "raise", initial_electron_density=None,
          units: bool | None = None, molecules=False) -> IonizationResult:
    """Solve the LTE ionization balance of a mixture at given temperature and one more state variable.

    For every element of the mixture the Saha equation links each pair of
    successive ionization stages (all stages, neutral to bare nucleus), with
    temperature-dependent partition functions; hydrogen also forms H- from
    H I + e-.  Charge conservation (n_e = sum of ion charges - n(H-)),
    conservation of nuclei per element and the ideal-gas law close the system,
    which is solved for the free-electron density at every point.

    With ``molecules`` the gas-phase molecules of ionbal's
    tables whose atoms are all in the mixture (diatomics and their ions from
    Barklem & Collet 2016, A&A 588, A96; polyatomics from the NIST-JANAF
    tables, Chase 1998) are solved together with the ions: every element's
    nuclei are then shared between its free atomic stages and the molecules
    that hold it (:meth:`IonizationResult.element_budget`), and the gas
    pressure and mean molecular weight count each molecule as one particle.
    Above the tables' upper temperature (6,000 K for Barklem & Collet,
    JANAF's own limit) ln K is continued with value and slope continuous.

    Assumptions: local thermodynamic equilibrium; ideal, non-degenerate gas
    (no Coulomb corrections, no pressure ionization, partition functions from
    a fixed level list); gas phase only (no condensation or dust, which
    matter below about 2,000 K at high pressure).  These fail in
    chromospheres and low-density hot winds (non-LTE), and in dense,
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
    units : bool, optional
        Return astropy Quantities (cgs) for the dimensional outputs of the result.
        Default: yes when the temperature or the state variable was given as a
        Quantity, plain arrays for plain numbers.
    molecules : bool or list of str
        True: every tabulated molecule whose atoms are in the mixture;
        False (default for now; issue 10 makes True the default once the
        atoms-only tests are pinned): atoms and atomic ions only (the
        atoms-only solve, bit for bit); a list of formulas (``["CO", "H2O", "H2+"]``) picks
        those.  With molecules, ``initial_electron_density`` is not used
        (the joint solve starts from the atoms-only solution).

    Returns
    -------
    IonizationResult
    """
    if errors not in _ERRORS:
        raise ValueError(f"errors must be one of {_ERRORS}, got {errors!r}")
    if units is not None and not isinstance(units, (bool, np.bool_)):
        raise ValueError(f"units must be True, False or None (automatic), got {units!r}")
    inputs = {"gas_pressure": gas_pressure, "mass_density": mass_density, "hydrogen_density": hydrogen_density,
              "electron_pressure": electron_pressure}
    given = {name: inputs[name] for name in STATE_INPUTS if inputs[name] is not None}
    if len(given) != 1:
        names = ", ".join(STATE_VARIABLES)
        got = ", ".join(given) or "none"
        raise ValueError(f"give exactly one state variable besides temperature ({names}); got {got}")
    (var, raw), = given.items()
    if units is None:
        units = any(hasattr(v, "unit") and hasattr(v, "to_value") for v in (temperature, raw))
    if mixture is None:
        mixture = default_mixture()
    if not isinstance(mixture, Mixture):
        raise TypeError(f"mixture must be an ionbal.Mixture, got {type(mixture).__name__}")
    tol = check_tol(tol)
    max_iterations = check_max_iterations(max_iterations)
    if not isinstance(h_minus, (bool, np.bool_)):
        raise ValueError(f"h_minus must be True or False, got {h_minus!r}")
    for arg, over in (("partition_functions", partition_functions), ("ionization_energies", ionization_energies)):
        if over is not None and not isinstance(over, Mapping):
            raise ValueError(f"{arg} must be a mapping of species to values, e.g. {{'H I': 2.0}}; "
                             f"got {type(over).__name__}")

    molecules = _check_molecules(molecules)
    packed = pack(mixture, freeze_overrides(partition_functions, ionization_energies), bool(h_minus))
    if molecules is True and not h_minus:
        molecules = _without_h_minus_molecules(packed)  # those that form from H- need it switched on
    mol_pack = pack_molecules(packed, molecules) if molecules is not False else None
    if mol_pack is not None and not mol_pack.molecules:
        mol_pack = None  # no molecule can form from this mixture: the atoms-only solve is the answer

    T = as_cgs_array(temperature, QUANTITIES["temperature"].unit, "temperature")
    value = as_cgs_array(raw, QUANTITIES[var].unit, var)
    guess = None
    if initial_electron_density is not None:
        guess = as_cgs_array(initial_electron_density, QUANTITIES["electron_density"].unit,
                             "initial_electron_density")
        bad = ~(np.isnan(guess) | ((guess > 0) & np.isfinite(guess)))
        if bad.any():
            where, v = first_bad(guess, bad)
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
        check_positive(T_b, "temperature")
        check_positive(v_b, var)
        out = outside_temperature_range(T_b, (t_lo, t_hi))
        if out.any():
            where, v = first_bad(T_b, out)
            raise ValueError(f"temperature {v:g} K{where} is outside the tabulated range "
                             f"{t_lo:.4g}-{t_hi:.4g} K")

    mode, kval = _KERNEL_INPUTS[var](v_b, packed)

    # the density scale the kernel works with must be representable
    with np.errstate(over="ignore", divide="ignore", invalid="ignore"):
        scale = kval / (K_B * T_b) if mode != MODE_NUCLEI_DENSITY else kval
        overflow = np.isfinite(T_b) & (T_b > 0) & np.isfinite(v_b) & (v_b > 0) & ~(scale < 1e305)
    if overflow.any():
        if errors == "raise":
            where, v = first_bad(v_b, overflow)
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
    chemistry = None
    if mol_pack is None:
        x = np.empty(n)
        lnn = np.empty(n)
        it = np.empty(n, dtype=np.int32)
        code = np.empty(n, dtype=np.int8)
        driver = solve_few if n <= SERIAL_POINTS else solve_many
        driver(mode, Tf, vf, gf, packed.arrays, float(tol), int(max_iterations), x, lnn, it, code)
    else:
        chemistry = solve_chemistry(packed, Tf, state=_CHEMISTRY_STATE[mode], value=vf, molecules=molecules,
                                    tol=float(tol), max_iter=int(max_iterations), parallel=n > SERIAL_POINTS)
        x = chemistry.ln_electron_density
        lnn = chemistry.ln_nuclei_density
        it = chemistry.iterations.astype(np.int32)
        code = chemistry.status.astype(np.int8)

    if errors == "raise":
        bad = (code != st.OK) & (code != st.NO_SOLUTION) & (code != st.MAX_ITERATIONS)
        if bad.any():
            where, _ = first_bad(code.reshape(shape), bad.reshape(shape))
            k = int(np.argmax(bad))
            raise ValueError(f"state{where} (T={Tf[k]:g} K, {var}={v_b.ravel()[k]:g}) cannot be solved: "
                             f"{st.STATUS_TABLE[int(code[k])][1]}")
        bad = code == st.NO_SOLUTION
        if bad.any():
            where, _ = first_bad(code.reshape(shape), bad.reshape(shape))
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
    return IonizationResult(packed, shape, Tf, x, lnn, it.reshape(-1), code, var, units=bool(units),
                            chemistry=chemistry)


#: kernel mode of the atoms-only table above -> the state input of :func:`ionbal.chemistry.solve_chemistry`
_CHEMISTRY_STATE = {MODE_GAS_PRESSURE: "gas_pressure", MODE_ELECTRON_PRESSURE: "electron_pressure",
                    MODE_NUCLEI_DENSITY: "nuclei_density"}


def _without_h_minus_molecules(packed):
    """Every tabulated molecule the mixture can form except those whose reaction has H- (or False)."""
    tab = molecule_table()
    present = {int(z) for z in packed.atomic_numbers}
    chosen = tuple(str(m) for m, q in zip(tab.molecules, tab.ion_q)
                   if q >= 0 and all(z in present for z, _ in m.composition))
    return chosen or False


def _check_molecules(molecules):
    """``molecules`` as :func:`pack_molecules` takes it: True, False or a tuple of formulas."""
    if isinstance(molecules, (bool, np.bool_)):
        return bool(molecules)
    if isinstance(molecules, str):
        molecules = [m for m in molecules.split(",") if m.strip()] if "," in molecules else [molecules]
    try:
        items = list(molecules)
    except TypeError:
        raise ValueError(f"molecules must be True, False or a list of formulas such as ['CO', 'H2O']; "
                         f"got {molecules!r}") from None
    chosen = []
    for item in items:
        if not isinstance(item, (str, Molecule)):
            raise ValueError(f"molecules: every item must be a formula string such as 'CO'; got {item!r}")
        chosen.append(parse_molecule(item.strip() if isinstance(item, str) else item))
    if not chosen:
        raise ValueError("molecules is an empty list; pass molecules=False for atoms and atomic ions only")
    return tuple(str(m) for m in chosen)
