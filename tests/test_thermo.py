"""Thermodynamics of the ionizing gas (ionbal.thermo): exact derivatives, closed forms, limits, budgets.

Sources beside each check:

* finite differences of :func:`ionbal.solve` itself (central, step 1e-5 in ln T, ln rho, ln P, or
  1e-4 dex in A(X)) at temperatures in the middle of a partition-function table interval, where
  ln U(log T) is linear and the exact derivatives are those of the tabulated model;
* thermodynamic identities (common practice; e.g. Cox & Giuli 1968, *Principles of Stellar
  Structure*, ch. 9): c_v = T (ds/dT)_rho, Gamma_3 - 1 = (d ln T/d ln rho)_s,
  nabla_ad = (d ln T/d ln P)_s, Gamma_1 = chi_rho / (1 - chi_T nabla_ad),
  c_p - c_v = P chi_T^2 / (rho T chi_rho);
* pure hydrogen with constant partition functions: nabla_ad in terms of the ionization degree x
  and chi/kT as in Kippenhahn, Weigert & Weiss 2012, *Stellar Structure and Evolution*, 2nd ed.,
  sect. 14.3 (formula typed from memory), and chi_T, c_v, u derived here from the Saha equation;
* ideal monatomic gas limits (common practice): Gamma_1 = 5/3, nabla_ad = 2/5,
  c_p = (5/2) k / (mu m_u) for neutral and for fully ionized gas;
* a plain-numpy evaluation of the internal energy and entropy from the result's stage fractions,
  ionbal's partition functions and ionization energies (independent of the kernel).
"""

from __future__ import annotations

import math

import numpy as np
import pytest

import ionbal
from ionbal import Mixture
from ionbal.core.constants import AMU, EV, H_PLANCK, K_B, M_E
from ionbal.data.elements import atomic_mass
from ionbal.quantities import QUANTITIES, THERMO_OUTPUTS

H = 1e-5  # relative step of the central differences
RTOL = 1e-6  # the bound for exact vs finite-difference derivatives


def _mid_interval(T, packed):
    """T moved to the middle of its partition-function table interval (ln U linear there)."""
    u = (np.log10(T) - packed.lt0) / packed.dlt
    return 10.0 ** (packed.lt0 + (np.floor(u) + 0.5) * packed.dlt)


def _packed():
    return ionbal.solve(5000.0, gas_pressure=1e4)._packed


def _states():
    T = _mid_interval(np.array([3500.0, 4500.0, 5800.0, 7000.0, 9000.0, 12000.0, 20000.0, 40000.0, 1.0e5]),
                      _packed())
    rho = np.array([1e-10, 1e-8, 1e-6])
    return np.meshgrid(T, rho, indexing="ij")


def _close(a, b, rtol=RTOL, atol=1e-9):
    a, b = np.asarray(a), np.asarray(b)
    err = np.abs(a - b) / (np.abs(b) + atol / rtol)
    assert np.all(err <= rtol), f"worst relative difference {err.max():.3g} at {np.unravel_index(err.argmax(), err.shape)}"


def test_registry_lists_the_thermo_quantities_with_units():
    assert THERMO_OUTPUTS[:3] == ("internal_energy", "enthalpy", "entropy")
    assert QUANTITIES["entropy"].unit == "erg g-1 K-1"
    assert QUANTITIES["heat_capacity_p"].unit == "erg g-1 K-1"
    assert QUANTITIES["gamma1"].unit == "1"
    r = ionbal.solve(6000.0 * ionbal_units().K, gas_pressure=1e5 * ionbal_units().Unit("dyn cm-2"))
    assert r.internal_energy.unit == ionbal_units().Unit("erg g-1")
    assert not hasattr(r.gamma1, "unit") or r.gamma1.unit == ionbal_units().dimensionless_unscaled


def ionbal_units():
    import astropy.units as u

    return u


def test_derivatives_at_fixed_density_match_finite_differences():
    """chi_T, chi_rho, (dln n_e/dln T)_rho, (dln n_e/dln rho)_T, c_v vs central differences of solve."""
    T, rho = _states()
    r = ionbal.solve(T, mass_density=rho)
    up, dn = ionbal.solve(T * (1 + H), mass_density=rho), ionbal.solve(T * (1 - H), mass_density=rho)
    dlnT = math.log((1 + H) / (1 - H))
    _close(r.chi_temperature, (np.log(up.gas_pressure) - np.log(dn.gas_pressure)) / dlnT)
    _close(r.dlnne_dlnT_rho, (np.log(up.electron_density) - np.log(dn.electron_density)) / dlnT)
    _close(r.heat_capacity_v, (up.internal_energy - dn.internal_energy) / (2 * H * T))
    # entropy consistent with the energy: c_v = T (ds/dT)_rho
    _close(r.heat_capacity_v, T * (up.entropy - dn.entropy) / (2 * H * T))
    rp, rm = ionbal.solve(T, mass_density=rho * (1 + H)), ionbal.solve(T, mass_density=rho * (1 - H))
    dlnr = math.log((1 + H) / (1 - H))
    _close(r.chi_density, (np.log(rp.gas_pressure) - np.log(rm.gas_pressure)) / dlnr)
    _close(r.dlnne_dlnrho_T, (np.log(rp.electron_density) - np.log(rm.electron_density)) / dlnr)
    # Gamma_3 - 1 = (d ln T / d ln rho)_s = -(ds/dln rho)_T / (ds/dln T)_rho
    g3 = 1 - (rp.entropy - rm.entropy) / dlnr / ((up.entropy - dn.entropy) / dlnT)
    _close(r.gamma3, g3)
    # Gamma_1 = chi_rho + chi_T (Gamma_3 - 1), with the finite-difference chi's and Gamma_3
    chi_t = (np.log(up.gas_pressure) - np.log(dn.gas_pressure)) / dlnT
    chi_r = (np.log(rp.gas_pressure) - np.log(rm.gas_pressure)) / dlnr
    _close(r.gamma1, chi_r + chi_t * (g3 - 1))


def test_derivatives_at_fixed_pressure_match_finite_differences():
    """c_p = (dh/dT)_P, nabla_ad = (d ln T/d ln P)_s, n_e sensitivities at fixed P vs central differences."""
    T, rho = _states()
    P = ionbal.solve(T, mass_density=rho).gas_pressure
    r = ionbal.solve(T, gas_pressure=P)
    up, dn = ionbal.solve(T * (1 + H), gas_pressure=P), ionbal.solve(T * (1 - H), gas_pressure=P)
    pp, pm = ionbal.solve(T, gas_pressure=P * (1 + H)), ionbal.solve(T, gas_pressure=P * (1 - H))
    dl = math.log((1 + H) / (1 - H))
    _close(r.heat_capacity_p, (up.enthalpy - dn.enthalpy) / (2 * H * T))
    _close(r.heat_capacity_p, T * (up.entropy - dn.entropy) / (2 * H * T))
    _close(r.dlnne_dlnT_p, (np.log(up.electron_density) - np.log(dn.electron_density)) / dl, atol=1e-8)
    _close(r.dlnne_dlnp_T, (np.log(pp.electron_density) - np.log(pm.electron_density)) / dl)
    nabla = -((pp.entropy - pm.entropy) / dl) / ((up.entropy - dn.entropy) / dl)
    _close(r.adiabatic_gradient, nabla)


def test_thermodynamic_identities_hold_on_a_sweep():
    T = np.geomspace(2500.0, 5e5, 40)[:, None]
    P = np.geomspace(1e-2, 1e9, 12)[None, :]
    r = ionbal.solve(T, gas_pressure=P)
    rho, p = r.mass_density, r.gas_pressure
    _close(r.gamma1, r.chi_density / (1 - r.chi_temperature * r.adiabatic_gradient), rtol=1e-12)
    _close(r.heat_capacity_p - r.heat_capacity_v,
           p * r.chi_temperature**2 / (rho * T * r.chi_density), rtol=1e-10)
    _close(r.enthalpy - r.internal_energy, p / rho, rtol=1e-12)
    for name in THERMO_OUTPUTS:
        assert np.all(np.isfinite(r[name])), name
    assert np.all((r.gamma1 > 1.0) & (r.gamma1 < 5 / 3 + 1e-9))
    assert np.all((r.adiabatic_gradient > 0.0) & (r.adiabatic_gradient < 0.4 + 1e-9))


def _pure_hydrogen(T, P):
    fixed = {"H I": 2.0, "H II": 1.0}
    return ionbal.solve(T, gas_pressure=P, mixture=Mixture({"H": 12.0}, name="pure H"),
                        partition_functions=fixed, h_minus=False)


def test_pure_hydrogen_against_closed_forms():
    T = np.geomspace(4000.0, 40000.0, 37)[:, None]
    P = np.array([1e1, 1e3, 1e5])[None, :]
    r = _pure_hydrogen(T, P)
    x = r.fraction("H II")
    theta = float(ionbal.ionization_energy("H I")) * EV / (K_B * T)
    m = r.mass_density / r.nuclei_density
    # Kippenhahn, Weigert & Weiss 2012, sect. 14.3 (from memory)
    a = x * (1 - x)
    nabla = (2 + a * (2.5 + theta)) / (5 + a * (2.5 + theta) ** 2)
    _close(r.adiabatic_gradient, nabla, rtol=1e-9)
    # derived here from x^2/(1-x) = S(T)/N at constant rho: (dx/dlnT)_rho = x(1-x)/(2-x) (3/2 + theta)
    dx = x * (1 - x) / (2 - x) * (1.5 + theta)
    _close(r.chi_temperature, 1 + dx / (1 + x), rtol=1e-9)
    _close(r.internal_energy, K_B * T / m * (1.5 * (1 + x) + x * theta), rtol=1e-10)
    _close(r.heat_capacity_v, K_B / m * (1.5 * (1 + x) + (1.5 + theta) * dx), rtol=1e-9)
    # the minimum of Gamma_1 through hydrogen ionization lies well below 5/3 (common practice)
    assert r.gamma1.min() < 1.2


@pytest.mark.parametrize("T, P, label", [(3000.0, 1e4, "neutral"), (9.0e5, 1.0, "fully ionized")])
def test_ideal_monatomic_limits(T, P, label):
    fixed = {"H I": 2.0, "H II": 1.0, "He I": 1.0, "He II": 2.0, "He III": 1.0}
    mix = Mixture({"H": 12.0, "He": 10.93}, name="H+He")
    r = ionbal.solve(_mid_interval(np.array([T]), _packed()), gas_pressure=P, mixture=mix,
                     partition_functions=fixed, h_minus=False)
    assert abs(r.gamma1[0] - 5 / 3) < 1e-6, label
    assert abs(r.adiabatic_gradient[0] - 0.4) < 1e-6, label
    cp = 2.5 * K_B / (r.mean_molecular_weight[0] * AMU)
    assert abs(r.heat_capacity_p[0] / cp - 1) < 1e-6, label


def test_energy_and_entropy_against_a_plain_numpy_evaluation():
    """u and s from the result's fractions, partition functions and ionization energies (numpy only)."""
    mix = Mixture({"H": 12.0, "He": 10.93, "C": 8.43, "Na": 6.24, "Fe": 7.50}, name="five elements")
    T = _mid_interval(np.array([4200.0, 6100.0, 9800.0, 16000.0, 30000.0]), _packed())
    r = ionbal.solve(T, gas_pressure=1e4, mixture=mix)
    nn, ne, kT = r.nuclei_density, r.electron_density, K_B * T
    rho = r.mass_density
    e = 1.5 * (nn + ne) * kT  # erg cm^-3
    s = ne * (2.5 + np.log(2.0 * (2 * np.pi * M_E * kT / H_PLANCK**2) ** 1.5 / ne))  # / k
    for el in mix.elements:
        w = 10 ** (mix[el] - 12) / sum(10 ** (v - 12) for v in mix.values())
        stages = r.stages(el)
        frac = r.fractions(el)
        m = atomic_mass(el) * AMU
        cum = 0.0
        x_neutral = None
        energies = []
        for sp in stages:
            energies.append(cum)
            if ionbal.parse_species(sp).charge == 0:
                x_neutral = cum
            if sp != stages[-1]:
                cum += float(ionbal.ionization_energy(sp))
        for k, sp in enumerate(stages):
            n_s = nn * w * frac[k]
            U = np.array([ionbal.partition_function(sp, t) for t in T])
            dlnu = np.array([(math.log(ionbal.partition_function(sp, t * (1 + H)))
                              - math.log(ionbal.partition_function(sp, t * (1 - H)))) / math.log((1 + H) / (1 - H))
                             for t in T])
            e = e + n_s * ((energies[k] - x_neutral) * EV + kT * dlnu)
            ok = n_s > 1e-280
            ln_n = np.log(np.where(ok, n_s, 1.0))
            term = n_s * (2.5 + dlnu + np.log(U) + 1.5 * np.log(2 * np.pi * m * kT / H_PLANCK**2) - ln_n)
            s = s + np.where(ok, term, 0.0)
    _close(r.internal_energy, e / rho, rtol=1e-9)
    _close(r.entropy, K_B * s / rho, rtol=1e-9)


def test_electron_donors_sum_to_one_and_name_the_donors():
    T = np.geomspace(3000.0, 1e5, 30)[:, None]
    P = np.geomspace(1e-1, 1e8, 8)[None, :]
    r = ionbal.solve(T, gas_pressure=P)
    donors = r.electron_donors()
    assert set(donors) == set(r.mixture.elements)
    _close(sum(donors.values()), np.ones(r.shape), rtol=1e-12)
    # in a cool photosphere the metals Mg, Si and Fe give most electrons (common practice)
    cool = ionbal.solve(4500.0, gas_pressure=1e5).electron_donors()
    assert float(cool["Mg"] + cool["Si"] + cool["Fe"]) > 0.6
    hot = ionbal.solve(12000.0, gas_pressure=1e3).electron_donors()
    assert float(hot["H"]) > 0.9


@pytest.mark.parametrize("T, P", [(4500.0, 1e5), (6000.0, 1e4), (9000.0, 1e3), (20000.0, 1e2)])
def test_abundance_sensitivity_matches_finite_differences(T, P):
    base = Mixture.solar("AGSS09")
    r = ionbal.solve(T, gas_pressure=P, mixture=base)
    sens = r.abundance_sensitivity()
    d = 1e-4
    for el in ("H", "He", "C", "Mg", "Si", "Fe", "Na"):
        up = ionbal.solve(T, gas_pressure=P, mixture=base.with_abundances({el: base[el] + d}))
        dn = ionbal.solve(T, gas_pressure=P, mixture=base.with_abundances({el: base[el] - d}))
        fd = (math.log(float(up.electron_density)) - math.log(float(dn.electron_density))) / (2 * d)
        assert abs(float(sens[el]) - fd) <= 1e-6 * abs(fd) + 1e-9, (el, float(sens[el]), fd)


def test_unsolved_points_are_nan():
    r = ionbal.solve([5000.0, -1.0], gas_pressure=1e4, errors="mask")
    assert np.isfinite(r.gamma1[0]) and np.isnan(r.gamma1[1])
    assert np.isnan(r.electron_donors()["Fe"][1])
    rm = ionbal.solve([3000.0, -1.0], gas_pressure=1e4, molecules=["H2", "CO"], errors="mask")
    assert np.isfinite(rm.gamma1[0]) and np.isnan(rm.gamma1[1])  # molecules: tests/test_thermo_molecules.py
    assert np.isnan(rm.electron_donors()["Fe"][1])


# -- grid files, model columns and the CLI -------------------------------------------------------------

def test_grid_stores_thermo_variables_equal_to_the_api(tmp_path):
    import h5py

    from ionbal.grid import Axis, GridSpec, run_grid

    T = Axis.parse("temperature", "4000:12000:5")
    P = Axis.parse("gas_pressure", "1e2:1e6:4")
    spec = GridSpec(T, P, species=("Fe I", "Fe II"), thermo=True, tile_size=7)
    out = tmp_path / "thermo.h5"
    run_grid(spec, out, progress=False)
    r = ionbal.solve(T.array[:, None], gas_pressure=P.array[None, :])
    g = ionbal.open_grid(out)
    for name in THERMO_OUTPUTS:
        np.testing.assert_array_equal(g[name], r[name], err_msg=name)
    with h5py.File(out) as f:
        donors = f["electron_donor"][...]
        assert f["electron_donor"].dims[0][0].name == "/element"
        assert f["entropy"].attrs["units"] == "erg g-1 K-1"
        k = list(g.elements).index("Fe")
        np.testing.assert_array_equal(donors[k], r.electron_donors()["Fe"])
        np.testing.assert_array_equal(f["dlnne_dA"][k], r.abundance_sensitivity()["Fe"])
    np.testing.assert_allclose(donors.sum(axis=0), 1.0, rtol=1e-12)
    assert abs(g.interpolate("gamma1", float(T.array[1]), float(P.array[2])) - r.gamma1[1, 2]) < 1e-12
    assert "thermodynamics" in g.summary()
    g.close()
    # the choice is part of the spec (resuming with another choice is refused by the fingerprint)
    plain = GridSpec(T, P, species=("Fe I", "Fe II"), tile_size=7)
    assert spec.to_dict()["thermo"] is True and "thermo" not in plain.to_dict()
    assert GridSpec.from_dict(spec.to_dict()) == spec
    assert GridSpec(T, P, thermo=True, molecules=["CO"]).thermo  # per-point quantities with molecules


def test_column_and_cli_write_thermo_columns(tmp_path, capsys):
    from astropy.table import Table

    from ionbal.cli import main

    model = tmp_path / "invented-star.txt"  # an invented depth structure, not a published model
    T = np.linspace(4200.0, 9000.0, 12)
    P = np.geomspace(1e3, 1e5, 12)
    model.write_text("temperature gas_pressure\n" + "".join(f"{float(t)!r} {float(p)!r}\n" for t, p in zip(T, P)))
    out = tmp_path / "col.ecsv"
    assert main(["column", str(model), "-o", str(out), "--thermo", "-q"]) == 0
    t = Table.read(out)
    r = ionbal.solve(T, gas_pressure=P)
    for name in ("gamma1", "adiabatic_gradient", "heat_capacity_p", "dlnne_dlnT_p"):
        np.testing.assert_allclose(np.asarray(t[name]), r[name], rtol=1e-12, err_msg=name)
    assert t["entropy"].unit == ionbal_units().Unit("erg g-1 K-1")
    donors = [c for c in t.colnames if c.startswith("electron_donor_")]
    assert "electron_donor_Fe" in donors and "dlnne_dA_Fe" in t.colnames
    assert np.all(np.abs(sum(np.asarray(t[c]) for c in donors) - 1) < 1e-3)  # the dropped ones give < 1e-4 each
    capsys.readouterr()


def test_readme_thermo_figures():
    # README, "Thermodynamics and what drives n_e": the minima through the hydrogen ionization zone
    r = ionbal.solve(np.geomspace(4000, 30000, 200), gas_pressure=1e4)
    assert round(float(r.gamma1.min()), 2) == 1.15
    assert round(float(r.adiabatic_gradient.min()), 3) == 0.082


def test_peak_bisection_equals_the_full_scan():
    """The kernel's bisection for each element's most populated stage gives what a scan of every stage gives.

    The scan also sums the solve's whole window (no abundance-aware cut), so this checks that
    the cut leaves every quantity as it was.  1e3-1e6 K x 1e-6-1e12 dyn cm^-2 (the solver's sweep
    range), AGSS09.
    """
    from ionbal.core.thermo import N_THERMO, thermo_many

    T = np.geomspace(1.0e3, 1.0e6, 160)[:, None]
    P = np.geomspace(1e-6, 1e12, 60)[None, :]
    r = ionbal.solve(T, gas_pressure=P, errors="mask")
    s, p = r._state, r._packed
    lnN = np.log(s.nn)
    lnm = np.zeros(p.elem_w.size)
    outs = []
    for scan in (False, True):
        out = np.empty((s.x.size, N_THERMO))
        share = np.empty((s.x.size, p.elem_w.size))
        dlna = np.empty_like(share)
        thermo_many(np.array(s.temperature), np.array(s.x), lnN, p.arrays, lnm, float(p.mean_mass), out, share,
                    dlna, scan)
        outs.append((out, share))
    # equal up to round-off where two stages tie for the peak (the moments are then shifted differently)
    # (atol: d ln n_e / d ln T at fixed rho is a difference of O(1) terms that nearly cancel in
    # fully ionized gas, where it is ~1e-5; the cut moves it by < 1e-16 absolute)
    np.testing.assert_allclose(outs[0][0], outs[1][0], rtol=1e-13, atol=1e-15)
    # donor shares: the cut drops stages holding < ~1e-20 of the free electrons (share 0, not 1e-20)
    np.testing.assert_allclose(outs[0][1], outs[1][1], rtol=1e-13, atol=1e-18)


def test_state_command_shows_thermo(capsys):
    import json

    from ionbal.cli import main

    assert main(["state", "-T", "5800", "-P", "1e5", "--thermo", "--elements", "Fe"]) == 0
    out = capsys.readouterr().out
    assert "Gamma_1" in out and "nabla_ad" in out and "electron donors" in out
    assert main(["state", "-T", "5800", "-P", "1e5", "--thermo", "--json"]) == 0
    rec = json.loads(capsys.readouterr().out)
    r = ionbal.solve(5800.0, gas_pressure=1e5)
    assert rec["gamma1"] == float(r.gamma1) and rec["units"]["heat_capacity_p"] == "erg g-1 K-1"
    assert abs(sum(rec["electron_donors"].values()) - 1) < 1e-12
    assert main(["state", "-T", "3000", "-P", "1e4", "--thermo", "--molecules", "CO"]) == 0
    out = capsys.readouterr().out
    assert "molecules included" in out and "Gamma_1" in out and "electron donors" in out


def test_per_point_quantities_without_the_element_arrays():
    """Asking for gamma1 alone skips the (n, n_elem) donor arrays and gives the same numbers."""
    T = np.geomspace(2.0e3, 1.0e6, 50)
    r = ionbal.solve(T, gas_pressure=1e3)
    g1 = np.array(r.gamma1)
    assert r._thermo.share is None
    donors = r.electron_donors()
    assert r._thermo.share is not None
    np.testing.assert_array_equal(np.array(r.gamma1), g1)
    np.testing.assert_allclose(sum(donors.values()), 1.0, rtol=0, atol=1e-12)
    again = ionbal.solve(T, gas_pressure=1e3)
    again.electron_donors()
    np.testing.assert_array_equal(np.array(again.gamma1), g1)
