"""``solve(..., molecules=...)`` and the result's molecule layer (issue 10).

Sources named beside each check:
* issue 10's worked example (an independent check with the NIST-JANAF tables, Chase 1998): at
  3,000 K and P_gas = 1e5 dyn cm^-2 (AGSS09, Asplund et al. 2009, ARA&A 47, 481) about 74 % of
  the hydrogen is in H2 and essentially all carbon in CO;
* common practice: an element's nuclei are conserved, so its stages and molecules share them all;
  the ideal-gas law counts each molecule as one particle.
"""

from __future__ import annotations

import numpy as np
import pytest

from ionbal import solve
from ionbal.core.constants import K_B


def test_atoms_only_is_bitwise_unchanged():
    """molecules=False runs the atoms-only kernel itself: every output is bitwise what it was."""
    from ionbal.api import SERIAL_POINTS

    for n in (3, SERIAL_POINTS + 10):
        T = np.geomspace(2500.0, 40000.0, n)
        P = np.geomspace(1e1, 1e7, n)
        r = solve(T, gas_pressure=P, molecules=False)
        assert r.molecules == ()
        # the reference: the atoms-only kernel called directly, as solve did before molecules
        from ionbal.core.solver import solve_few, solve_many
        from ionbal.data.pack import pack
        from ionbal.data.mixture import Mixture

        p = pack(Mixture.solar("AGSS09"))
        x = np.empty(n)
        lnn = np.empty(n)
        it = np.empty(n, dtype=np.int32)
        code = np.empty(n, dtype=np.int8)
        driver = solve_few if n <= SERIAL_POINTS else solve_many
        from ionbal.core.solver import MAX_ITER, MODE_GAS_PRESSURE, TOL

        driver(MODE_GAS_PRESSURE, T, P, np.full(n, np.nan), p.arrays, TOL, MAX_ITER, x, lnn, it, code)
        assert np.array_equal(r.electron_density, np.exp(x))
        assert np.array_equal(r.nuclei_density, np.exp(lnn))
        kT = K_B * T
        assert np.array_equal(r.gas_pressure, (np.exp(lnn) + np.exp(x)) * kT)


def test_issue_example_3000K():
    """Issue 10: 74 % of H in H2, all C in CO at 3,000 K, P_gas = 1e5 (AGSS09)."""
    r = solve(3000.0, gas_pressure=1e5, molecules=True)
    h = r.element_budget("H")
    c = r.element_budget("C")
    assert float(h["H2"]) == pytest.approx(0.74, abs=0.02)
    assert float(c["CO"]) > 0.999
    assert sum(float(v) for v in h.values()) == pytest.approx(1.0, abs=1e-12)
    assert sum(float(v) for v in c.values()) == pytest.approx(1.0, abs=1e-12)
    # the H2 share from number densities: 2 n(H2) / n_H
    assert float(2 * r.number_density("H2") / r.hydrogen_density) == pytest.approx(float(h["H2"]), rel=1e-12)
    assert float(r.partial_pressure("CO")) == pytest.approx(float(r.number_density("CO") * K_B * 3000.0),
                                                            rel=1e-15)


def test_budgets_sum_to_one_and_gas_pressure_is_the_input():
    T = np.array([1800.0, 2500.0, 3000.0, 4000.0, 5000.0, 7000.0])[:, None]
    P = np.array([1e2, 1e4, 1e6])[None, :]
    r = solve(T, gas_pressure=P, molecules=True)
    assert np.all(r.converged)
    np.testing.assert_allclose(r.gas_pressure, np.broadcast_to(P, r.shape), rtol=1e-12)
    for el in r.mixture.elements:
        total = sum(r.element_budget(el).values())
        np.testing.assert_allclose(total, 1.0, atol=1e-12, err_msg=el)
    # mean molecular weight counts molecules as one particle: rho / (P/kT m_u)
    from ionbal.core.constants import AMU

    mu = r.mass_density / (r.gas_pressure / (K_B * r.temperature) * AMU)
    np.testing.assert_allclose(r.mean_molecular_weight, mu, rtol=1e-12)
    # stage fractions are of the element's nuclei: fraction * w N is the stage's number density
    np.testing.assert_allclose(r.fractions("C")[0] * r.nuclei_density * r._weight(r._species("C I")),
                               r.number_density("C I"), rtol=1e-12)


def test_hot_states_match_atoms_only():
    """Hot, thin gas: molecules hold nothing, the answer is the atoms-only one (within 1e-12).

    Hotter but dense states keep a few molecular ions (H2+, HeH+); there n_e moves by no more
    than a few times the share of nuclei they hold (measured up to 2e-5 at 10,000 K, 1e6).
    """
    T = np.array([2e4, 3e4, 5e4])[:, None]
    P = np.array([1e0, 1e1, 1e2])[None, :]
    a = solve(T, gas_pressure=P, molecules=True)
    b = solve(T, gas_pressure=P, molecules=False)
    np.testing.assert_allclose(a.electron_density, b.electron_density, rtol=1e-12)
    np.testing.assert_allclose(a.fractions("Fe"), b.fractions("Fe"), rtol=1e-12, atol=1e-300)
    T = np.array([1e4, 1.5e4, 2e4, 5e4])[:, None]
    P = np.array([1e2, 1e4, 1e6])[None, :]
    a = solve(T, gas_pressure=P, molecules=True)
    b = solve(T, gas_pressure=P, molecules=False)
    share = (a.molecule_densities() * 2).sum(axis=0) / a.nuclei_density
    assert np.all(np.abs(a.electron_density / b.electron_density - 1) <= 5 * share + 1e-12)


def test_every_state_input_with_molecules():
    r = solve(3000.0, gas_pressure=1e5, molecules=True)
    for var in ("mass_density", "hydrogen_density", "electron_pressure"):
        o = solve(3000.0, molecules=True, **{var: r[var]})
        np.testing.assert_allclose(o.electron_density, r.electron_density, rtol=1e-8, err_msg=var)
        np.testing.assert_allclose(o.number_density("CO"), r.number_density("CO"), rtol=1e-8, err_msg=var)


def test_molecule_subset_and_errors():
    r = solve(3000.0, gas_pressure=1e5, molecules=["CO", "H2"])
    assert set(r.molecules) == {"CO", "H2"}
    s = solve(3000.0, gas_pressure=1e5, molecules="CO,H2")
    assert s.electron_density == r.electron_density
    with pytest.raises(ValueError, match="number_density"):
        r.fraction("CO")
    with pytest.raises(ValueError, match="not part of this solve"):
        r.number_density("H2O")
    with pytest.raises(ValueError, match="not part of this solve"):
        solve(3000.0, gas_pressure=1e5, molecules=False).number_density("CO")
    for bad in ([], 3, ["Xx2"], ["CO", 5]):
        with pytest.raises(ValueError):
            solve(3000.0, gas_pressure=1e5, molecules=bad)
    # "Co" is cobalt, "CO" carbon monoxide
    assert float(r.number_density("Co I")) > 0
    with pytest.raises(ValueError, match="element"):
        r.fraction("Co")


def test_mask_keeps_status_codes():
    r = solve(np.array([3000.0, -1.0, np.nan]), gas_pressure=1e5, errors="mask", molecules=True)
    b = solve(np.array([3000.0, -1.0, np.nan]), gas_pressure=1e5, errors="mask", molecules=False)
    assert np.array_equal(r.status, b.status)
    assert np.isnan(r.number_density("CO")[1:]).all()
    with pytest.raises(ValueError):
        solve(np.array([3000.0, -1.0]), gas_pressure=1e5, molecules=True)


def test_number_densities_and_tables_take_molecules():
    r = solve(np.array([2500.0, 3000.0, 4000.0]), gas_pressure=1e5, molecules=True)
    names = ["H I", "CO", "Fe II", "H2+", "H2O"]
    nd = r.number_densities(names)
    for k, name in enumerate(names):
        np.testing.assert_array_equal(nd[k], r.number_density(name), err_msg=name)
    t = r.to_table("Fe II,CO,H2", partial_pressures=True)
    np.testing.assert_array_equal(np.asarray(t["number_density_CO"].value), r.number_density("CO"))
    np.testing.assert_allclose(np.asarray(t["partial_pressure_H2"].value), r.partial_pressure("H2"), rtol=1e-15)
    assert "fraction_CO" not in t.colnames and "fraction_Fe_II" in t.colnames
    full = r.to_table("default")
    from ionbal.quantities import species_column_name

    assert all(species_column_name("number_density", m) in full.colnames for m in r.molecules)
    assert full.meta["molecules"] == list(r.molecules)
    sub = solve(3000.0, gas_pressure=1e5, molecules=["CO"])
    with pytest.raises(ValueError, match="not part of this solve"):
        sub.to_table(["H I", "H2O"])
    with pytest.raises(ValueError, match="not part of this solve"):
        sub.number_densities(["H I", "H2O"])
    with pytest.raises(ValueError, match="more than once"):
        sub.to_table(["CO", "CO"])


def test_validity_counts_the_molecular_ions():
    """The Debye sum n_e + sum n_j q_j^2 (Debye & Hueckel 1923) holds every charged particle.

    At 20,000 K and 1e12 dyn cm^-2 the molecular ions (H2+, H2-, HeH+) hold much of the charge;
    the parameter computed by ionbal.validity must equal the one summed here from the public
    number densities of every stage and every molecule.
    """
    import math

    from ionbal.core.constants import E_CHARGE

    r = solve(20000.0, gas_pressure=1e12, molecules=True)
    T = float(r.temperature)
    ne = float(r.electron_density)
    sq = 0.0
    for el in r.mixture.elements:
        for sp in r.stages(el):
            q = r._species(sp).charge
            if q:
                sq += q * q * float(r.number_density(sp))
    from ionbal.data.molecules import parse_molecule

    mol_q = 0.0
    for m in r.molecules:
        q = parse_molecule(m).charge
        if q:
            mol_q += q * q * float(r.number_density(parse_molecule(m)))
    assert mol_q > 0.1 * sq  # the molecular ions matter here
    lam = math.sqrt(K_B * T / (4 * math.pi * E_CHARGE**2 * (ne + sq + mol_q)))
    v = r.validity
    assert float(v.debye_parameter) == pytest.approx(E_CHARGE**2 / (lam * K_B * T), rel=1e-10)
    assert bool(v.debye_lowering) and bool(v.pressure_ionization)


def test_molecular_ion_names_that_read_as_atomic_ions():
    """"C2+" is C III in the atomic notation (common practice) and the C2+ molecular ion (B&C 2016)."""
    r = solve(20000.0, gas_pressure=1e12, molecules=True)
    assert "C2+" in r.molecules and "He2+" in r.molecules
    with pytest.raises(ValueError, match="ambiguous.*'C III'.*'C2\\^\\+'"):
        r.number_density("C2+")
    assert float(r.number_density("C III")) == float(r.fraction("C III") * r.nuclei_density * r._weight(
        r._species("C III")))
    from ionbal.data.molecules import parse_molecule

    np.testing.assert_array_equal(r.number_density("C2^+"), r.molecule_densities(["C2+"])[0])
    np.testing.assert_array_equal(r.number_density(parse_molecule("He2+")), r.molecule_densities(["He2+"])[0])
    # without that molecule in the solve the atomic reading stands
    a = solve(20000.0, gas_pressure=1e12, molecules=["CO"])
    assert float(a.number_density("C2+")) == float(a.number_density("C III"))
