"""The result object as users reach for it: units, species arguments, column names, partial pressures."""

import astropy.units as u
import numpy as np
import pytest

import ionbal
from ionbal.core.constants import K_B
from ionbal.quantities import species_column_name


@pytest.fixture(scope="module")
def plain():
    return ionbal.solve(np.array([5000.0, 8000.0]), gas_pressure=1e4)


def test_plain_input_gives_plain_arrays(plain):
    assert type(plain.electron_density) is np.ndarray
    assert type(plain.number_density("Fe II")) is np.ndarray


def test_quantity_input_gives_quantities():
    r = ionbal.solve(np.array([5000.0, 8000.0]) * u.K, gas_pressure=1e3 * u.Pa)
    assert r.units
    assert r.electron_density.unit == u.cm**-3
    assert r.gas_pressure.unit == u.dyn / u.cm**2
    assert r["mass_density"].unit == u.g / u.cm**3
    assert r.number_density("H-").unit == u.cm**-3
    assert r.partial_pressure("H I").unit == u.dyn / u.cm**2
    # dimensionless outputs stay plain arrays
    assert not hasattr(r.fraction("Fe II"), "unit")
    assert not hasattr(r.mean_molecular_weight, "unit")
    assert r.converged.all()
    # the option overrides the automatic choice both ways
    assert not hasattr(ionbal.solve(5000.0 * u.K, gas_pressure=1e4, units=False).electron_density, "unit")
    assert ionbal.solve(5000.0, gas_pressure=1e4, units=True).electron_density.unit == u.cm**-3
    with pytest.raises(ValueError, match="units must be"):
        ionbal.solve(5000.0, gas_pressure=1e4, units="yes")


def test_validity_works_with_quantities():
    r = ionbal.solve(20000.0 * u.K, gas_pressure=1e12 * u.dyn / u.cm**2)
    assert not bool(np.all(r.validity.trustworthy))


@pytest.mark.parametrize("species", ["Fe II", "Fe I,Fe II", ["Fe II"], ("H-", "Fe II")])
def test_to_table_species_forms(plain, species):
    t = plain.to_table(species=species)
    assert "fraction_Fe_II" in t.colnames and "number_density_Fe_II" in t.colnames
    np.testing.assert_allclose(t["fraction_Fe_II"], plain.fraction("Fe II"), rtol=1e-14)


def test_to_table_default_and_all(plain):
    d = plain.to_table(species="default")
    assert {"fraction_H_minus", "fraction_Fe_III", "number_density_He_II"} <= set(d.colnames)
    a = plain.to_table(species="all")
    assert "fraction_Fe_XXVII" in a.colnames


def test_to_table_partial_pressures(plain):
    t = plain.to_table(species="H I", partial_pressures=True)
    # p_i = n_i k T (ideal gas; common practice)
    np.testing.assert_allclose(t["partial_pressure_H_I"].to_value(u.dyn / u.cm**2),
                               plain.number_density("H I") * K_B * plain.temperature, rtol=1e-14)


def test_partial_pressures_sum_to_the_gas_pressure(plain):
    # Dalton's law: the partial pressures of every species and of the electrons add up to P_gas
    total = sum(plain.partial_pressure(sp) for sp in plain.species) + plain.electron_pressure
    np.testing.assert_allclose(total, plain.gas_pressure, rtol=1e-10)


@pytest.mark.parametrize("name", ["Fe", "fe", "H"])
def test_bare_element_is_an_error(plain, name):
    with pytest.raises(ValueError, match="is an element, not a species"):
        plain.fraction(name)
    with pytest.raises(ValueError, match="is an element"):
        plain.number_density(name)


def test_one_column_name_convention():
    assert species_column_name("fraction", "Fe II") == "fraction_Fe_II"
    assert species_column_name("number_density", "H-") == "number_density_H_minus"
