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
