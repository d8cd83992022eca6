"""Thermodynamics of the joint molecular + ionization solve (ionbal.core.thermo_mol).

Checks, each against something outside the kernel:
- where molecules hold less than round-off, the quantities equal those of the atoms-only kernel
  (ionbal.core.thermo, itself checked against closed forms and textbook values in test_thermo.py);
- the exact derivatives against central finite differences of ``ionbal.solve(molecules=True)``
  (chi_T, chi_rho, both n_e sensitivities), in the molecular regime (1,500-7,000 K, where up to
  46 % of the nuclei are in molecules);
- the energy and entropy against thermodynamic identities that involve only the pressure of the
  solve (common practice): c_v = (de/dT)_rho = T (ds/dT)_rho, and the Maxwell relations
  (de/drho)_T = (P - T (dP/dT)_rho) / rho^2 and (ds/drho)_T = -(dP/dT)_rho / rho^2.  The second
  pair tests the dissociation energies inside e and s: how the molecules' share moves with density
  is fixed by the equilibrium constants, and so is the heat it takes.
"""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as hs

import ionbal
from ionbal.thermo import THERMO_FIELDS

H = 1e-4  # step in ln T and ln rho of the finite differences
T0 = np.repeat([1500.0, 2500.0, 3500.0, 5000.0, 7000.0], 3)
RHO0 = np.tile([1e-9, 1e-7, 1e-5], 5)


def _solve(T, rho):
    return ionbal.solve(T, mass_density=rho, molecules=True)


@pytest.fixture(scope="module")
def sweep():
    r0 = _solve(T0, RHO0)
    up_T, dn_T = _solve(T0 * np.exp(H), RHO0), _solve(T0 * np.exp(-H), RHO0)
    up_r, dn_r = _solve(T0, RHO0 * np.exp(H)), _solve(T0, RHO0 * np.exp(-H))
    return r0, up_T, dn_T, up_r, dn_r


def _fd(a, b):
    return (np.asarray(a) - np.asarray(b)) / (2 * H)


def _g(r, name):
    return np.asarray(r[name], dtype=float)


def test_the_sweep_is_molecular(sweep):
    r0 = sweep[0]
    share = r0._chem.molecule_density.sum(axis=1) / np.exp(r0._chem.ln_nuclei_density)
    assert share.max() > 0.4 and share.min() < 1e-3  # from mostly molecular to nearly atomic


def test_derivatives_against_finite_differences_of_the_solve(sweep):
    r0, up_T, dn_T, up_r, dn_r = sweep
    lnP = lambda r: np.log(np.asarray(r.gas_pressure))  # noqa: E731
    lnne = lambda r: np.log(np.asarray(r.electron_density))  # noqa: E731
    checks = {
        "chi_temperature": _fd(lnP(up_T), lnP(dn_T)),
        "chi_density": _fd(lnP(up_r), lnP(dn_r)),
        "dlnne_dlnT_rho": _fd(lnne(up_T), lnne(dn_T)),
        "dlnne_dlnrho_T": _fd(lnne(up_r), lnne(dn_r)),
    }
    for name, fd in checks.items():
        np.testing.assert_allclose(_g(r0, name), fd, rtol=1e-6, atol=0, err_msg=name)


def test_energy_and_entropy_against_thermodynamic_identities(sweep):
    r0, up_T, dn_T, up_r, dn_r = sweep
    cv = _g(r0, "heat_capacity_v")
    np.testing.assert_allclose(cv, _fd(_g(up_T, "internal_energy"), _g(dn_T, "internal_energy")) / T0,
                               rtol=1e-6, err_msg="c_v = de/dT")
    np.testing.assert_allclose(cv, _fd(_g(up_T, "entropy"), _g(dn_T, "entropy")), rtol=1e-6,
                               err_msg="c_v = T ds/dT")
    P = np.asarray(r0.gas_pressure)
    dPdT = _fd(up_T.gas_pressure, dn_T.gas_pressure) / T0
    de_drho = _fd(_g(up_r, "internal_energy"), _g(dn_r, "internal_energy")) / RHO0
    # (the two sides are small differences: compare on the scale P / rho^2 of their terms)
    np.testing.assert_allclose(de_drho * RHO0**2 / P, (P - T0 * dPdT) / P, rtol=0, atol=1e-6,
                               err_msg="(de/drho)_T = (P - T dP/dT) / rho^2")
    ds_drho = _fd(_g(up_r, "entropy"), _g(dn_r, "entropy")) / RHO0
    np.testing.assert_allclose(ds_drho, -dPdT / RHO0**2, rtol=1e-6, err_msg="(ds/drho)_T = -(dP/dT) / rho^2")
    # and the identities of the relations the kernel closes with (to round-off)
    chi_t, chi_r = _g(r0, "chi_temperature"), _g(r0, "chi_density")
    np.testing.assert_allclose(_g(r0, "gamma1"), chi_r / (1 - chi_t * _g(r0, "adiabatic_gradient")), rtol=1e-12)
    rho = np.asarray(r0.mass_density)
    np.testing.assert_allclose(_g(r0, "heat_capacity_p") - cv, P * chi_t**2 / (rho * T0 * chi_r), rtol=1e-10)


def test_equal_to_the_atoms_only_kernel_where_molecules_are_negligible():
    T = np.array([2.0e4, 3.0e4, 5.0e4, 8.0e4])
    P = np.array([1e2, 1e4, 1e3, 1e5])
    ra = ionbal.solve(T, gas_pressure=P)
    rm = ionbal.solve(T, gas_pressure=P, molecules=True)
    assert np.max(np.abs(np.asarray(rm.electron_density) / np.asarray(ra.electron_density) - 1)) < 1e-12
    share = rm._chem.molecule_density.sum(axis=1) / np.exp(rm._chem.ln_nuclei_density)
    assert share.max() < 1e-10  # molecular ions (H2+, HeH+ ...) still hold 1e-14 - 2e-11 of the nuclei
    for name in THERMO_FIELDS:
        # (dlnne_dlnT_rho is ~1e-3 in fully ionized gas, a difference of O(1) terms: atol)
        np.testing.assert_allclose(_g(rm, name), _g(ra, name), rtol=1e-9, atol=1e-10, err_msg=name)


@pytest.mark.parametrize("T, P", [(3000.0, 1e5), (4000.0, 1e3), (2000.0, 1e7)])
def test_donors_and_abundance_sensitivity_with_molecules(T, P):
    """Donor shares sum to 1 (charge conservation); d ln n_e / d A(X) against central finite
    differences of the molecular solve in A(X) (step 1e-4 dex), for H, C, O (CO-locked below
    ~3,000 K) and the main donors."""
    r = ionbal.solve(T, gas_pressure=P, molecules=True)
    shares = r.electron_donors()
    assert abs(sum(float(v) for v in shares.values()) - 1) < 1e-12
    sens = r.abundance_sensitivity()
    base = r.mixture
    d = 1e-4
    for el in ("H", "C", "O", "Na", "K", "Mg", "Fe", "Si"):
        up = ionbal.solve(T, gas_pressure=P, molecules=True, mixture=base.with_abundances({el: base[el] + d}))
        dn = ionbal.solve(T, gas_pressure=P, molecules=True, mixture=base.with_abundances({el: base[el] - d}))
        fd = (np.log(float(up.electron_density)) - np.log(float(dn.electron_density))) / (2 * d)
        assert abs(float(sens[el]) - fd) <= 1e-5 * abs(fd) + 1e-9, (el, float(sens[el]), fd)


def test_molecules_lower_gamma1_in_the_h2_dissociation_zone():
    """Textbook behaviour (common practice): dissociation of H2 absorbs heat, which lowers Gamma_1 and
    nabla_ad below their ideal values and raises c_p, where H2 <-> 2H turns over."""
    T = np.geomspace(1500.0, 6000.0, 60)
    rm = ionbal.solve(T, gas_pressure=1e5, molecules=True)
    ra = ionbal.solve(T, gas_pressure=1e5)
    assert float(np.min(rm.adiabatic_gradient)) < 0.25 < float(np.min(ra.adiabatic_gradient))
    assert np.max(_g(rm, "heat_capacity_p") / _g(ra, "heat_capacity_p")) > 3


def test_molecular_grid_and_column_store_the_per_point_quantities(tmp_path, capsys):
    import h5py
    from astropy.table import Table

    from ionbal.cli import main
    from ionbal.grid import Axis, GridSpec, run_grid

    T = Axis.parse("temperature", "2500:9000:3")
    P = Axis.parse("gas_pressure", "1e2:1e6:3")
    spec = GridSpec(T, P, species=("C I",), thermo=True, molecules=["H2", "CO"], tile_size=4)
    path = tmp_path / "mol-thermo.h5"
    run_grid(spec, path, progress=False)
    r = ionbal.solve(T.array[:, None], gas_pressure=P.array[None, :], molecules=["H2", "CO"])
    with h5py.File(path, "r") as f:
        np.testing.assert_allclose(f["gamma1"][...], r.gamma1, rtol=1e-12)
        k = list(f["element"][...].astype(str)).index("C")
        np.testing.assert_allclose(f["dlnne_dA"][k], r.abundance_sensitivity()["C"], rtol=1e-12)
        np.testing.assert_allclose(f["electron_donor"][...].sum(axis=0), 1.0, rtol=1e-12)
    g = ionbal.open_grid(path)
    assert "thermodynamics" in g.summary()
    g.close()
    model = tmp_path / "invented-cool-star.txt"  # an invented depth structure, not a published model
    Tm, Pm = np.linspace(2800.0, 6000.0, 8), np.geomspace(1e3, 1e5, 8)
    model.write_text("temperature gas_pressure\n" + "".join(f"{float(t)!r} {float(p)!r}\n" for t, p in zip(Tm, Pm)))
    out = tmp_path / "col.ecsv"
    assert main(["column", str(model), "-o", str(out), "--thermo", "--molecules", "H2,CO", "-q"]) == 0
    t = Table.read(out)
    rm = ionbal.solve(Tm, gas_pressure=Pm, molecules=["H2", "CO"])
    np.testing.assert_allclose(np.asarray(t["gamma1"]), rm.gamma1, rtol=1e-12)
    assert "electron_donor_Na" in t.colnames and "dlnne_dA_Na" in t.colnames
    capsys.readouterr()


# -- properties on random molecular states (hypothesis; deadline=None for jitted code) --------------------

@settings(deadline=None, max_examples=40)
@given(lgT=hs.floats(np.log10(1200.0), np.log10(9000.0)), lgP=hs.floats(-2.0, 8.0))
def test_molecular_thermo_properties(lgT, lgP):
    """Stability and the closing identities on random molecular states (common practice): c_v > 0,
    chi_rho > 0, 1 < Gamma_1 <= 5/3, Gamma_1 = chi_rho / (1 - chi_T nabla_ad), donors sum to 1."""
    r = ionbal.solve(10.0**lgT, gas_pressure=10.0**lgP, molecules=True)
    f = {name: float(np.asarray(r[name])) for name in THERMO_FIELDS}
    assert all(np.isfinite(v) for v in f.values()), f
    assert f["heat_capacity_v"] > 0 and f["chi_density"] > 0 and f["heat_capacity_p"] > f["heat_capacity_v"]
    assert 1.0 < f["gamma1"] <= 5.0 / 3.0 + 1e-9
    assert abs(f["gamma1"] - f["chi_density"] / (1 - f["chi_temperature"] * f["adiabatic_gradient"])) \
        <= 1e-12 * f["gamma1"]
    assert abs(sum(float(np.asarray(v)) for v in r.electron_donors().values()) - 1) < 1e-12
