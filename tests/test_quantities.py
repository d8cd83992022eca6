"""The quantity registry, the enumerable result and the species protocol.

* Every quantity of :mod:`ionbal.quantities` has a unit astropy reads, in cgs; the state inputs
  are the four of the README, in their order of preference.
* The result lists and returns every per-point quantity of the registry, the same numbers as its
  attributes; its batch number densities equal the one-species ones.
* Every species has the protocol the molecules will share: label, charge, composition, kind.
"""

from __future__ import annotations

import astropy.units as u
import numpy as np
import pytest

import ionbal
from ionbal import quantities as Q
from ionbal.data.species import Species, parse_species


def test_every_unit_is_read_by_astropy_and_is_cgs():
    cgs = {u.K, u.dyn / u.cm**2, u.g / u.cm**3, u.cm**-3, u.dimensionless_unscaled, u.u,
           u.erg / u.g, u.erg / u.g / u.K}  # the thermodynamic quantities: per gram
    for name, q in Q.QUANTITIES.items():
        if not q.unit:
            continue  # labels (species, element)
        unit = Q.astropy_unit(name)
        assert any(unit == c for c in cgs), f"{name}: {q.unit}"
        assert q.long_name and q.label


def test_state_inputs_in_order_of_preference():
    # README, "State variables": gas pressure first, then mass density, hydrogen density, electron pressure
    assert Q.STATE_INPUTS == ("gas_pressure", "mass_density", "hydrogen_density", "electron_pressure")
    assert set(Q.STATE_INPUTS) <= set(Q.POINT_OUTPUTS)
    assert [Q.QUANTITIES[n].flag for n in Q.STATE_INPUTS] == ["--gas-pressure", "--mass-density",
                                                              "--hydrogen-density", "--electron-pressure"]


def test_unit_text_for_people():
    assert Q.unit_text("dyn cm-2") == "dyn cm^-2"
    assert Q.QUANTITIES["mass_density"].help == "mass density [g cm^-3]"


def test_quantity_inputs_are_converted_by_the_registry_unit():
    # 1 Pa = 10 dyn cm^-2 (common practice: SI to cgs)
    a = ionbal.solve(6000.0, gas_pressure=1e4 * u.Pa)
    b = ionbal.solve(6000.0, gas_pressure=1e5)
    assert a.electron_density.to_value(u.cm**-3) == pytest.approx(float(b.electron_density), rel=1e-12)
    with pytest.raises(ValueError, match="does not convert"):
        ionbal.solve(6000.0, gas_pressure=1e4 * u.K)


def test_result_is_enumerable():
    r = ionbal.solve([5000.0, 9000.0], gas_pressure=[1e4, 1e3])
    keys = r.keys()
    assert keys[0] == "temperature" and set(Q.POINT_OUTPUTS) <= set(keys)
    for name in keys:
        np.testing.assert_array_equal(r[name], getattr(r, name))
    assert dict(r.items()).keys() == set(keys)
    assert "electron_density" in r and "nonsense" not in r
    with pytest.raises(KeyError, match="not a per-point quantity"):
        r["nonsense"]
    with pytest.raises(AttributeError):
        r.nonsense  # noqa: B018
    assert r.quantity("gas_pressure").unit == u.dyn / u.cm**2


def test_number_densities_in_one_pass_equal_one_at_a_time():
    r = ionbal.solve(np.array([4000.0, 7000.0, 15000.0]), gas_pressure=1e4)
    names = ["H-", "H I", "Fe II", "Ca III"]
    many = r.number_densities(names)
    for k, name in enumerate(names):
        np.testing.assert_array_equal(many[k], r.number_density(name))


def test_ion_moments_kernel_matches_the_fractions():
    r = ionbal.solve(np.geomspace(3000.0, 50000.0, 7), gas_pressure=1e3)
    for a, b in zip(r.ion_moments(), r.ion_moments(use_kernel=False)):
        np.testing.assert_allclose(a, b, rtol=1e-10, atol=1e-300)


def test_species_protocol():
    fe2 = parse_species("Fe II")
    assert str(fe2) == "Fe II" and fe2.charge == 1 and fe2.composition == ((26, 1),)
    assert fe2.is_molecule is False
    hm = Species(1, -1)
    assert str(hm) == "H-" and hm.charge == -1 and hm.composition == ((1, 1),)
    assert len({fe2, parse_species("Fe+"), hm}) == 2  # hashable, equal by value
    with pytest.raises(ValueError):
        parse_species("CO")  # a molecule is not an atomic species (ionbal.data.species docstring)
