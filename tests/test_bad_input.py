"""Bad input to the API: a clear exception that names the problem (and, for arrays, the first offending
index), or, with ``errors="mask"``, a status code per point; never a silent NaN by default.

Cases that the API does not handle may be kept here as ``xfail(strict=True)`` with the reason: when
the API is fixed they pass, strict mode fails the run, and the mark is removed.
"""

from __future__ import annotations

import math
import re
import warnings

import numpy as np
import pytest

import ionbal
from ionbal import Mixture
from ionbal.core import status as st

STATE_VARIABLES = ("gas_pressure", "mass_density", "hydrogen_density", "electron_pressure")
INPUTS = ("temperature",) + STATE_VARIABLES
# a valid value of every input, cgs (a solar-photosphere-like state; common practice)
GOOD = {"temperature": 5800.0, "gas_pressure": 1e5, "mass_density": 2.5e-7,
        "hydrogen_density": 1.1e17, "electron_pressure": 20.0}
UNITS = {"temperature": "K", "gas_pressure": "dyn / cm2", "mass_density": "g / cm3",
         "hydrogen_density": "1 / cm3", "electron_pressure": "dyn / cm2"}
PURE_H = Mixture({"H": 12.0})


def xfail(reason):
    return pytest.mark.xfail(strict=True, reason=reason)


def _solve(name, value, var="gas_pressure", **kw):
    """Solve with ``value`` given for input ``name`` and good values for the rest."""
    if name == "temperature":
        return ionbal.solve(value, **{var: GOOD[var]}, **kw)
    return ionbal.solve(GOOD["temperature"], **{name: value}, **kw)


def _index_text(idx):
    if idx is None:
        return None
    if isinstance(idx, tuple) and len(idx) > 1:
        return f"at index ({', '.join(str(i) for i in idx)})"
    return f"at index {idx[0] if isinstance(idx, tuple) else idx}"


def _assert_names(exc_info, *words):
    msg = str(exc_info.value)
    for w in words:
        assert w in msg, f"{w!r} not in message {msg!r}"


def _no_silent_nan(r):
    """NaN in a result only where the status says the point failed."""
    status = np.asarray(r.status)
    for name in ("electron_density", "nuclei_density", "gas_pressure", "electron_pressure",
                 "mass_density", "mean_molecular_weight"):
        a = np.asarray(getattr(r, name))
        assert not np.any(np.isnan(a) & (status == st.OK)), name


# ----------------------------------------------------------------------------------------------
# 1. Non-finite, zero and negative values: every input, scalar / 1-D / 2-D
# ----------------------------------------------------------------------------------------------

BAD_VALUES = [math.nan, math.inf, -math.inf, 0.0, -0.0, -1.0, -1e300]
LAYOUTS = ["scalar", "1-D", "2-D"]


def _place(name, bad, layout):
    good = GOOD[name]
    if layout == "scalar":
        return bad, None
    if layout == "1-D":
        a = np.full(5, good)
        a[3] = bad
        return a, (3,)
    a = np.full((3, 4), good)
    a[1, 2] = bad
    a[2, 3] = bad  # a later bad value: the message names the first
    return a, (1, 2)


@pytest.mark.parametrize("layout", LAYOUTS)
@pytest.mark.parametrize("bad", BAD_VALUES, ids=repr)
@pytest.mark.parametrize("name", INPUTS)
def test_non_positive_or_non_finite_values_raise(name, bad, layout):
    value, idx = _place(name, bad, layout)
    with pytest.raises(ValueError) as exc:
        _solve(name, value)
    _assert_names(exc, name, "finite and positive")
    if idx is not None:
        _assert_names(exc, _index_text(idx))
    else:
        assert "index" not in str(exc.value)


@pytest.mark.parametrize("bad", BAD_VALUES, ids=repr)
@pytest.mark.parametrize("name", INPUTS)
def test_mask_flags_bad_values_with_a_status(name, bad):
    value, idx = _place(name, bad, "1-D")
    r = _solve(name, value, errors="mask")
    status = np.asarray(r.status)
    assert status[idx] == st.INVALID_INPUT
    assert np.all(np.delete(status, idx) == st.OK)
    assert np.isnan(r.electron_density[idx])
    assert not r.converged[idx] and r.converged.sum() == 4
    assert "not a finite positive number" in r.message[idx]
    _no_silent_nan(r)


@pytest.mark.parametrize("T", [1.0, 100.0, 300.0, 1.0001e6, 1e7, 1e300])
def test_temperature_outside_the_tables(T):
    with pytest.raises(ValueError, match="outside the tabulated range"):
        ionbal.solve(T, gas_pressure=1e4)
    with pytest.raises(ValueError, match=r"at index 2"):
        ionbal.solve([5000.0, 6000.0, T], gas_pressure=1e4)
    r = ionbal.solve([5000.0, T], gas_pressure=1e4, errors="mask")
    assert list(r.status) == [st.OK, st.TEMPERATURE_OUT_OF_RANGE]
    _no_silent_nan(r)


def test_the_first_offending_index_is_named_in_c_order():
    T = np.full((3, 3), 5000.0)
    T[2, 0] = -1.0
    T[0, 2] = np.nan
    with pytest.raises(ValueError, match=re.escape("at index (0, 2)")):
        ionbal.solve(T, gas_pressure=1e4)
    # the count of bad values is given too
    with pytest.raises(ValueError, match=r"2 bad value"):
        ionbal.solve(T, gas_pressure=1e4)


def test_unattainable_electron_pressure_names_the_index():
    # at 1,900 K and P_e = 493 dyn cm^-2 no ideal-gas state exists (see test_solver.py)
    # atoms only (molecules=False): with molecules the joint solve finds a (wildly dense) state here
    with pytest.raises(ValueError, match=re.escape("no physical solution at index (1, 0)")):
        ionbal.solve(np.array([[5000.0], [1886.9]]), electron_pressure=np.array([[1.0], [493.0]]),
                     molecules=False)


# ----------------------------------------------------------------------------------------------
# 2. Shapes and empty arrays
# ----------------------------------------------------------------------------------------------

MISMATCHED = [
    ((2,), (3,)), ((3,), (2,)), ((2, 3), (2,)), ((4, 1), (3, 2)), ((2, 2), (3, 3)),
    ((5,), (4, 4)), ((1, 2, 3), (4,)), ((0,), (2,)),
]


@pytest.mark.parametrize("tshape, vshape", MISMATCHED, ids=str)
@pytest.mark.parametrize("var", STATE_VARIABLES)
def test_mismatched_shapes_raise(var, tshape, vshape):
    with pytest.raises(ValueError) as exc:
        ionbal.solve(np.full(tshape, 5000.0), **{var: np.full(vshape, GOOD[var])})
    _assert_names(exc, "do not broadcast", str(tshape), str(vshape), var)


EMPTY = [
    (np.empty(0), 1e4), (5000.0, np.empty(0)), (np.empty(0), np.empty(0)), (np.empty((0, 3)), 1e4),
    (np.empty((3, 0)), np.empty((3, 0))), ([], []), ([], 1e4), (np.empty((2, 0, 2)), 1e4),
]


@pytest.mark.parametrize("T, P", EMPTY, ids=range(len(EMPTY)))
def test_empty_arrays_raise(T, P):
    with pytest.raises(ValueError, match="empty"):
        ionbal.solve(T, gas_pressure=P)
    with pytest.raises(ValueError, match="empty"):
        ionbal.solve(T, gas_pressure=P, errors="mask")


def test_broadcasting_still_works():
    r = ionbal.solve(np.full((2, 1, 3), 5000.0), gas_pressure=np.geomspace(1, 1e4, 4)[:, None])
    assert r.shape == (2, 4, 3) and r.converged.all()


# ----------------------------------------------------------------------------------------------
# 3. Non-numeric input
# ----------------------------------------------------------------------------------------------

NON_NUMERIC = [
    pytest.param("hot", id="word"),
    pytest.param("", id="empty string"),
    pytest.param({"T": 5000.0}, id="dict"),
    pytest.param({5000.0}, id="set"),
    pytest.param(5000.0 + 1j, id="complex"),
    pytest.param(np.array([5000.0 + 1j, 6000.0]), id="complex array"),
    pytest.param([[5000.0], [5000.0, 6000.0]], id="ragged list"),
    pytest.param(np.array([5000.0, "x"], dtype=object), id="object array with a string"),
    pytest.param(np.array([5000.0, None], dtype=object), id="object array with None"),
    pytest.param(object(), id="object"),
    pytest.param(ionbal.solve, id="function"),
    pytest.param("5000", id="numeric string"),
    pytest.param(b"5000", id="bytes"),
    pytest.param(np.datetime64("2020-01-01"), id="datetime64"),
    pytest.param(np.timedelta64(5000, "s"), id="timedelta64"),
    pytest.param(True, id="bool True"),
    pytest.param(np.array([True, True]), id="bool array"),
]


@pytest.mark.parametrize("value", NON_NUMERIC)
@pytest.mark.parametrize("name", INPUTS)
def test_non_numeric_input_raises(name, value):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        with pytest.raises((ValueError, TypeError)) as exc:
            _solve(name, value)
    msg = str(exc.value)
    assert name in msg
    # the message is about the kind of value, not a consequence of reading it as some number
    assert "number" in msg or "type" in msg, msg
    assert "nan" not in msg.lower(), msg


@pytest.mark.parametrize("name", INPUTS)
def test_none_inside_a_list_names_the_index(name):
    with pytest.raises(ValueError) as exc:
        _solve(name, [GOOD[name], GOOD[name], None])
    _assert_names(exc, name, "at index 2")


@pytest.mark.parametrize("name", INPUTS)
def test_none_inside_a_list_is_called_none(name):
    with pytest.raises(ValueError, match="None"):
        _solve(name, [GOOD[name], None])


def test_temperature_none_is_named():
    with pytest.raises((ValueError, TypeError), match="None"):
        ionbal.solve(None, gas_pressure=1e4)


@pytest.mark.parametrize("name", INPUTS)
def test_masked_arrays_are_refused_or_honoured(name):
    a = np.ma.masked_array([GOOD[name], GOOD[name]], mask=[False, True])
    try:
        r = _solve(name, a, errors="mask")
    except (ValueError, TypeError):
        return
    assert r.status[0] == st.OK and r.status[1] != st.OK


@pytest.mark.parametrize("name", INPUTS)
def test_object_arrays_of_numbers_are_accepted(name):
    r = _solve(name, np.array([GOOD[name], GOOD[name]], dtype=object))
    assert r.converged.all()


# ----------------------------------------------------------------------------------------------
# 4. Quantities in units that do not convert
# ----------------------------------------------------------------------------------------------

WRONG_UNITS = {
    "temperature": ["m", "kg", "s", "eV", "deg_C", "dyn / cm2", ""],
    "gas_pressure": ["m", "kg", "K", "g / cm3", "1 / cm3", "erg", ""],
    "mass_density": ["m", "kg", "K", "dyn / cm2", "1 / cm3", "g", ""],
    "hydrogen_density": ["m", "kg", "K", "g / cm3", "dyn / cm2", "cm3", ""],
    "electron_pressure": ["m", "kg", "K", "g / cm3", "1 / cm3", "erg", ""],
}
RIGHT_UNITS = {
    "temperature": [("K", 1.0), ("mK", 1e3)],
    "gas_pressure": [("Pa", 0.1), ("bar", 1e-6), ("N / m2", 0.1)],
    "mass_density": [("kg / m3", 1e3), ("g / m3", 1e6)],
    "hydrogen_density": [("1 / m3", 1e6), ("1 / mm3", 1e-3)],
    "electron_pressure": [("Pa", 0.1), ("dyn / cm2", 1.0)],
}


@pytest.mark.parametrize("name, unit", [(n, u) for n in INPUTS for u in WRONG_UNITS[n]], ids=str)
def test_quantities_that_do_not_convert_raise(name, unit):
    import astropy.units as u

    q = GOOD[name] * u.Unit(unit)
    with pytest.raises(ValueError) as exc:
        _solve(name, q)
    _assert_names(exc, name, "does not convert", UNITS[name])


@pytest.mark.parametrize("name, unit, factor", [(n, u, f) for n in INPUTS for u, f in RIGHT_UNITS[n]], ids=str)
def test_quantities_that_convert_give_the_same_answer(name, unit, factor):
    import astropy.units as u

    a = _solve(name, GOOD[name])
    b = _solve(name, GOOD[name] * factor * u.Unit(unit))
    # a Quantity in gives Quantities out (cgs); plain numbers give plain arrays
    assert b.electron_density.to_value(u.cm**-3) == pytest.approx(float(a.electron_density), rel=1e-12)
    assert not hasattr(a.electron_density, "unit")


@pytest.mark.parametrize("name", INPUTS)
def test_quantity_with_nan_names_the_index(name):
    import astropy.units as u

    q = np.array([GOOD[name], np.nan]) * u.Unit(UNITS[name])
    with pytest.raises(ValueError, match="at index 1"):
        _solve(name, q)


def test_initial_guess_quantity_in_wrong_unit():
    import astropy.units as u

    with pytest.raises(ValueError, match="initial_electron_density.*does not convert"):
        ionbal.solve(5000.0, gas_pressure=1e4, initial_electron_density=1e12 * u.K)


# ----------------------------------------------------------------------------------------------
# 5. State variables: none, several, hydrogen density without hydrogen
# ----------------------------------------------------------------------------------------------

def _subsets():
    import itertools

    out = [()]
    for k in (2, 3, 4):
        out += list(itertools.combinations(STATE_VARIABLES, k))
    return out


@pytest.mark.parametrize("given", _subsets(), ids=lambda g: "+".join(g) or "none")
def test_exactly_one_state_variable(given):
    with pytest.raises(ValueError, match="exactly one state variable") as exc:
        ionbal.solve(5000.0, **{v: GOOD[v] for v in given})
    for v in given:
        assert v in str(exc.value)


@pytest.mark.parametrize("mix", [Mixture({"He": 12.0}), Mixture({"He": 12.0, "C": 9.0, "O": 9.0})],
                         ids=["He", "He-C-O"])
@pytest.mark.parametrize("errors", ["raise", "mask"])
def test_hydrogen_density_without_hydrogen(mix, errors):
    with pytest.raises(ValueError, match="no hydrogen"):
        ionbal.solve([5000.0, 6000.0], hydrogen_density=1e15, mixture=mix, errors=errors)


# ----------------------------------------------------------------------------------------------
# 6. Mixtures
# ----------------------------------------------------------------------------------------------

NOT_MIXTURES = ["AGSS09", {"H": 12.0}, [("H", 12.0)], 12.0, Mixture, ionbal.Mixture.solar, np.array([12.0])]


@pytest.mark.parametrize("mix", NOT_MIXTURES, ids=lambda m: type(m).__name__)
def test_mixture_that_is_not_a_mixture(mix):
    with pytest.raises(TypeError, match="mixture must be an ionbal.Mixture"):
        ionbal.solve(5000.0, gas_pressure=1e4, mixture=mix)


BAD_ABUNDANCES = [-15.01, 15.01, -20.0, 16.0, 1e6, -1e6, 1e300, math.nan, math.inf, -math.inf]
BAD_ABUNDANCE_TYPES = ["12", None, [12.0], 12 + 0j, True, np.array(12.0), {"A": 12}]


@pytest.mark.parametrize("value", BAD_ABUNDANCES, ids=repr)
def test_absurd_abundances_raise(value):
    with pytest.raises(ValueError, match="abundance of Fe"):
        Mixture({"H": 12.0, "Fe": value})
    with pytest.raises(ValueError, match="abundance of Fe"):
        Mixture.solar().with_abundances(Fe=value)


@pytest.mark.parametrize("value", BAD_ABUNDANCE_TYPES, ids=lambda v: type(v).__name__)
def test_non_numeric_abundances_raise(value):
    with pytest.raises(ValueError, match="abundance of Fe"):
        Mixture({"H": 12.0, "Fe": value})


def test_negative_log_abundances_are_valid():
    # A(X) = log10(N_X/N_H) + 12 is negative for rare elements (AGSS09 U = -0.54): not an error
    m = Mixture({"H": 12.0, "U": -0.54, "Th": -14.9})
    assert ionbal.solve(5000.0, gas_pressure=1e4, mixture=m).converged


BAD_ELEMENT_KEYS = ["Xx", "", "XX", "H2", "26", 0, 93, -1, 26.0, None, ("Fe",)]


@pytest.mark.parametrize("key", BAD_ELEMENT_KEYS, ids=repr)
def test_bad_element_keys_raise(key):
    with pytest.raises(ValueError):
        Mixture({"H": 12.0, key: 7.5})


@pytest.mark.parametrize("data", [{}, [], [1, 2], "H", 12.0, None], ids=repr)
def test_bad_mixture_data_raise(data):
    with pytest.raises(ValueError):
        Mixture(data)


def test_duplicate_and_empty_mixtures():
    with pytest.raises(ValueError, match="more than once"):
        Mixture({"H": 12.0, 1: 12.0})
    with pytest.raises(ValueError, match="empty"):
        Mixture({"H": 12.0}).with_abundances(H=None)


@pytest.mark.parametrize("key", ["FE", "fe", "Fe", " fe "], ids=repr)
def test_abundance_keys_in_any_case(key):
    # abundance keys are always elements, so every letter case is read (species names are too)
    assert Mixture({"H": 12.0, key: 7.5})["Fe"] == 7.5
    assert Mixture.solar().with_abundances({key: 7.0})["Fe"] == 7.0


@pytest.mark.parametrize("key", ["agss09", "AGSS09 ", "Agss09"], ids=repr)
def test_abundance_set_key_in_any_case(key):
    assert Mixture.solar(key) == Mixture.solar("AGSS09")


@pytest.mark.parametrize("key", ["AGSS10", "solar", "", None, 2009, "Asplund"], ids=repr)
def test_unknown_abundance_set_key(key):
    with pytest.raises(ValueError) as exc:
        Mixture.solar(key)
    _assert_names(exc, "unknown solar mixture", "AGSS09", "AG89", "LPG09")


@pytest.mark.parametrize("kw", [dict(metallicity=math.nan), dict(metallicity=math.inf), dict(alpha=-math.inf),
                                dict(metallicity="1"), dict(metallicity=None), dict(alpha=True),
                                dict(metallicity=40.0)], ids=repr)
def test_bad_scaling_raises(kw):
    with pytest.raises(ValueError):
        Mixture.solar().scaled(**kw)


# ----------------------------------------------------------------------------------------------
# 7. Species and elements asked of a result
# ----------------------------------------------------------------------------------------------

@pytest.fixture(scope="module")
def result():
    return ionbal.solve([5000.0, 6000.0], gas_pressure=1e4)


@pytest.fixture(scope="module")
def result_h():
    return ionbal.solve([5000.0, 6000.0], gas_pressure=1e4, mixture=PURE_H, h_minus=False)


BAD_SPECIES = ["Xx I", "Fe XXX", "H III", "", None, 5, 3.5, "FeII", "FE I", ("Fe", 30), (0, 0), "He-",
               "Fe--", "Fe+27", ("Fe",), "H I I", "U XCV", [26, 1]]


@pytest.mark.parametrize("method", ["fraction", "number_density", "log_fraction"])
@pytest.mark.parametrize("sp", BAD_SPECIES, ids=repr)
def test_unknown_species_raise(result, method, sp):
    with pytest.raises(ValueError) as exc:
        getattr(result, method)(sp)
    assert "species" in str(exc.value) or "element" in str(exc.value)


BAD_ELEMENTS = ["Xx", "Fe II", "", None, 0, 93, "FE", 3.5, 26.0, ("Fe", 0), "Fe I"]


@pytest.mark.parametrize("method", ["fractions", "mean_charge", "stages"])
@pytest.mark.parametrize("el", BAD_ELEMENTS, ids=repr)
def test_unknown_elements_raise(result, method, el):
    with pytest.raises(ValueError, match="element|atomic number"):
        getattr(result, method)(el)


@pytest.mark.parametrize("call", [("fraction", "Fe I"), ("number_density", "He II"), ("fractions", "Fe"),
                                  ("mean_charge", "O"), ("stages", "C"), ("log_fraction", "U I")], ids=str)
def test_elements_absent_from_the_mixture(result_h, call):
    method, arg = call
    with pytest.raises(ValueError, match="not in the mixture"):
        getattr(result_h, method)(arg)


def test_h_minus_when_switched_off(result_h):
    with pytest.raises(ValueError, match="h_minus=False"):
        result_h.fraction("H-")
    assert result_h.stages("H") == ("H I", "H II")


# ----------------------------------------------------------------------------------------------
# 8. Options: errors, tol, max_iterations, h_minus, initial guess
# ----------------------------------------------------------------------------------------------

@pytest.mark.parametrize("errors", ["ignore", "RAISE", "Mask", "", None, 1, True, "coerce"], ids=repr)
def test_bad_errors_option(errors):
    with pytest.raises(ValueError, match="errors must be one of"):
        ionbal.solve(5000.0, gas_pressure=1e4, errors=errors)


@pytest.mark.parametrize("tol", [0, 0.0, -1e-13, 1e-3, 1.0, math.nan, math.inf, "1e-13", None, True,
                                 [1e-13], np.array([1e-13])], ids=repr)
def test_bad_tolerance(tol):
    with pytest.raises(ValueError, match="tol must be"):
        ionbal.solve(5000.0, gas_pressure=1e4, tol=tol)


@pytest.mark.parametrize("tol", [1e-12, np.float64(1e-12),
                                 pytest.param(np.float32(1e-12))], ids=repr)
def test_numeric_tolerance_types_are_accepted(tol):
    assert ionbal.solve(5000.0, gas_pressure=1e4, tol=tol).converged


@pytest.mark.parametrize("m", [0, -1, 1.5, 10.0, "10", None, np.int64(0), [10],
                               pytest.param(True),
                               pytest.param(10**20)],
                         ids=repr)
def test_bad_max_iterations(m):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        with pytest.raises(ValueError, match="max_iterations"):
            ionbal.solve(5000.0, gas_pressure=1e4, max_iterations=m)


def test_iteration_limit_is_reported_not_silent():
    with pytest.warns(RuntimeWarning, match="did not converge"):
        # atoms-only: the joint molecular solve converges in its own number of iterations
        r = ionbal.solve([5000.0, 20000.0], gas_pressure=1e4, max_iterations=1, molecules=False)
    assert np.all(r.status == st.MAX_ITERATIONS)
    assert "iteration limit" in r.message[0]


@pytest.mark.parametrize("h", ["no", None, "False"],
                         ids=repr)
def test_bad_h_minus(h):
    with pytest.raises((ValueError, TypeError), match="h_minus"):
        ionbal.solve(5000.0, gas_pressure=1e4, h_minus=h)


@pytest.mark.parametrize("guess", ["x", {"a": 1}, 1 + 1j])
def test_bad_initial_guess_type(guess):
    with pytest.raises(ValueError, match="initial_electron_density"):
        ionbal.solve(5000.0, gas_pressure=1e4, initial_electron_density=guess)


@pytest.mark.parametrize("guess", [-1.0, 0.0, -math.inf])
def test_non_positive_initial_guess(guess):
    with pytest.raises(ValueError, match="initial_electron_density"):
        ionbal.solve(5000.0, gas_pressure=1e4, initial_electron_density=guess)


def test_misshaped_initial_guess_is_named():
    with pytest.raises(ValueError, match="initial_electron_density"):
        ionbal.solve([5000.0, 6000.0], gas_pressure=1e4, initial_electron_density=[1e12, 1e12, 1e12])


def test_nan_initial_guess_means_none():
    a = ionbal.solve(5000.0, gas_pressure=1e4)
    b = ionbal.solve(5000.0, gas_pressure=1e4, initial_electron_density=np.nan)
    assert float(a.electron_density) == float(b.electron_density)


# ----------------------------------------------------------------------------------------------
# 9. Species overrides
# ----------------------------------------------------------------------------------------------

OVERRIDE_CASES = [
    (dict(partition_functions={"Tc I": 2.0}), "not in the mixture"),
    (dict(ionization_energies={"Fe I": 7.9}), "not in the mixture"),
    (dict(partition_functions={"Xx I": 2.0}), "unknown element"),
    (dict(partition_functions={"H III": 2.0}), "impossible"),
    (dict(partition_functions={"": 2.0}), "cannot parse"),
    (dict(partition_functions={"H I": -2.0}), "finite positive"),
    (dict(partition_functions={"H I": 0.0}), "finite positive"),
    (dict(partition_functions={"H I": math.nan}), "finite positive"),
    (dict(partition_functions={"H I": math.inf}), "finite positive"),
    (dict(partition_functions={"H I": "two"}), "positive number"),
    (dict(partition_functions={"H I": None}), "positive number"),
    (dict(partition_functions={"H I": np.array([2.0, 3.0])}), "positive number"),
    (dict(ionization_energies={"H I": -13.6}), "finite positive"),
    (dict(ionization_energies={"H I": math.nan}), "finite positive"),
    (dict(ionization_energies={"H I": "abc"}), "positive number"),
    (dict(ionization_energies={"H II": 1.0}), "bare nucleus"),
    (dict(partition_functions={"H-": 1.0}, h_minus=False), "switched off"),
    (dict(ionization_energies={"H-": 0.75}, h_minus=False), "switched off"),
]


@pytest.mark.parametrize("kw, words", OVERRIDE_CASES, ids=lambda v: repr(v)[:40])
def test_bad_overrides(kw, words):
    with pytest.raises(ValueError, match=words):
        ionbal.solve(5000.0, gas_pressure=1e4, mixture=PURE_H, **kw)


def test_override_quantities():
    import astropy.units as u

    with pytest.raises(ValueError, match="ionization energy override for H I"):
        ionbal.solve(5000.0, gas_pressure=1e4, mixture=PURE_H, ionization_energies={"H I": 13.6 * u.m})
    with pytest.raises(ValueError, match="partition function override for H I"):
        ionbal.solve(5000.0, gas_pressure=1e4, mixture=PURE_H, partition_functions={"H I": 2.0 * u.K})
    a = ionbal.solve(5000.0, gas_pressure=1e4, mixture=PURE_H, ionization_energies={"H I": 13.6})
    b = ionbal.solve(5000.0, gas_pressure=1e4, mixture=PURE_H,
                     ionization_energies={"H I": (13.6 * u.eV).to(u.kJ / u.mol, u.molar_mass_amu())
                                          if False else 13.6 * u.eV})
    assert float(a.electron_density) == float(b.electron_density)


@pytest.mark.parametrize("arg", ["partition_functions", "ionization_energies"])
@pytest.mark.parametrize("value", [[("H I", 2.0)], 2.0, "H I"], ids=repr)
def test_overrides_that_are_not_mappings(arg, value):
    with pytest.raises((ValueError, TypeError), match=arg):
        ionbal.solve(5000.0, gas_pressure=1e4, mixture=PURE_H, **{arg: value})


# ----------------------------------------------------------------------------------------------
# 10. Magnitudes at the ends of double precision
# ----------------------------------------------------------------------------------------------

@pytest.mark.parametrize("kw", [dict(gas_pressure=1e300), dict(mass_density=1e290), dict(mass_density=1e300)],
                         ids=repr)
def test_overflowing_densities_raise(kw):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        with pytest.raises(ValueError):
            ionbal.solve(5000.0, **kw)


@pytest.mark.parametrize("kw", [dict(gas_pressure=1e300), dict(mass_density=1e290)], ids=repr)
def test_overflowing_densities_are_flagged_when_masked(kw):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        r = ionbal.solve([5000.0, 5000.0], errors="mask", **{k: [GOOD[k], v] for k, v in kw.items()})
    assert r.status[0] == st.OK and r.status[1] != st.OK
    _no_silent_nan(r)


def test_subnormal_densities_give_no_nan():
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        # atoms only: the joint molecular kernel does not yet converge at subnormal densities (issue 10, open)
        r = ionbal.solve(1e6, gas_pressure=1e-310, molecules=False)
    assert bool(r.converged)
    _no_silent_nan(r)


@pytest.mark.parametrize("kw", [dict(gas_pressure=1e-300), dict(gas_pressure=1e30), dict(hydrogen_density=1e-300),
                                dict(hydrogen_density=1e300), dict(electron_pressure=1e-300),
                                dict(mass_density=1e-300), dict(mass_density=1e10)], ids=repr)
def test_extreme_but_representable_states_converge(kw):
    # atoms only: the joint molecular kernel does not yet converge at 1e-300 densities (issue 10, open)
    r = ionbal.solve(np.array([1e3, 5e3, 1e6]), molecules=False, **kw)
    assert r.converged.all()
    _no_silent_nan(r)


# ----------------------------------------------------------------------------------------------
# 11. Fuzz: random arrays mixing good and bad values, random shapes and inputs (seeded)
# ----------------------------------------------------------------------------------------------

FUZZ_BAD = [np.nan, np.inf, -np.inf, 0.0, -1.0, -1e-300]
N_FUZZ = 300


def _fuzz_case(rng):
    var = STATE_VARIABLES[rng.integers(0, 4)]
    ndim = int(rng.integers(0, 3))
    shape = tuple(int(s) for s in rng.integers(1, 5, ndim))
    # T between 1,000 K and 1e5 K; state variables within a factor 100 of the good value
    T = 10 ** rng.uniform(3.0, 5.0, shape)
    v = GOOD[var] * 10 ** rng.uniform(-2.0, 2.0, shape)
    if var == "electron_pressure":
        T = 10 ** rng.uniform(3.7, 5.0, shape)  # P_e of this size needs a warm gas (test_solver.py)
    T = np.asarray(T, dtype=float)
    v = np.asarray(v, dtype=float)
    for arr in (T, v):
        if arr.size and rng.random() < 0.6:
            for _ in range(int(rng.integers(1, 3))):
                idx = tuple(int(rng.integers(0, s)) for s in arr.shape)
                arr[idx] = FUZZ_BAD[rng.integers(0, len(FUZZ_BAD))]
    if rng.random() < 0.2 and T.size:
        idx = tuple(int(rng.integers(0, s)) for s in T.shape)
        T[idx] = rng.choice([10.0, 200.0, 2e6, 1e9])  # finite and positive, outside the tables
    return var, T, v


def _first(bad):
    if not bad.any():
        return None
    idx = tuple(int(i) for i in np.argwhere(bad)[0])
    return idx


def test_fuzz_arrays_of_good_and_bad_values():
    rng = np.random.default_rng(20240611)
    raised = masked = clean = 0
    for case in range(N_FUZZ):
        var, T, v = _fuzz_case(rng)
        invalid_T = ~(np.isfinite(T) & (T > 0))
        invalid_v = ~(np.isfinite(v) & (v > 0))
        out_T = ~invalid_T & ((T < 316.0) | (T > 1.0001e6))
        ctx = f"case {case}: {var}, T={T!r}, value={v!r}"
        if invalid_T.any() or invalid_v.any() or out_T.any():
            with pytest.raises(ValueError) as exc:
                ionbal.solve(T, **{var: v})
            msg = str(exc.value)
            if invalid_T.any():
                name, idx = "temperature", _first(invalid_T)
            elif invalid_v.any():
                name, idx = var, _first(invalid_v)
            else:
                name, idx = "temperature", _first(out_T)
            assert name in msg, (ctx, msg)
            if T.ndim:
                assert _index_text(idx) in msg, (ctx, msg)
            raised += 1
            r = ionbal.solve(T, errors="mask", **{var: v})
            status = np.asarray(r.status)
            assert np.all(status[invalid_T | invalid_v] == st.INVALID_INPUT), ctx
            assert np.all(status[out_T & ~invalid_v] == st.TEMPERATURE_OUT_OF_RANGE), ctx
            good = ~(invalid_T | invalid_v | out_T)
            assert np.all(status[good] == st.OK), ctx
            assert np.all(np.isnan(np.asarray(r.electron_density)[~good])), ctx
            _no_silent_nan(r)
            masked += 1
        else:
            r = ionbal.solve(T, **{var: v})
            assert r.converged.all(), ctx
            _no_silent_nan(r)
            clean += 1
    assert raised > 100 and clean > 30, (raised, clean)


def test_fuzz_result_accessors():
    # random strings and objects as species / element names: a ValueError, never another exception
    rng = np.random.default_rng(7)
    r = ionbal.solve(5000.0, gas_pressure=1e4)
    alphabet = list("HeFCaOXIVx+-_ 0123456789^")
    n_err = 0
    for _ in range(300):
        k = int(rng.integers(0, 8))
        name = "".join(rng.choice(alphabet, k))
        for method in ("fraction", "fractions", "number_density", "mean_charge"):
            try:
                getattr(r, method)(name)
            except ValueError:
                n_err += 1
    assert n_err > 500
