"""The ionization-balance solve: outside references, the plain reference solver, conservation and limits."""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as hs
from scipy.optimize import brentq

import ionbal
from ionbal.core.constants import K_B
from ionbal.data.pack import pack

from reference_solver import solve_reference

AGSS09 = ionbal.Mixture.solar("AGSS09")
PURE_H = ionbal.Mixture({"H": 12.0})


# ----------------------------------------------------------------------------------------------
# Textbook worked examples
# ----------------------------------------------------------------------------------------------

def test_pure_hydrogen_half_ionized_near_9600K():
    # Carroll & Ostlie, An Introduction to Modern Astrophysics, 2nd ed., Sect. 8.1 (Saha equation):
    # pure hydrogen at P_e = 200 dyn cm^-2 (20 N m^-2) is half ionized near 9,600 K; the book fixes
    # U(H I) = 2, U(H II) = 1 and chi = 13.6 eV.  With exactly those inputs the half-ionization
    # temperature is 9,556 K (solving the book's equation numerically); test to 0.5 %.
    over = dict(partition_functions={"H I": 2.0, "H II": 1.0}, ionization_energies={"H I": 13.6},
                h_minus=False)

    def excess(T):
        r = ionbal.solve(T, electron_pressure=200.0, mixture=PURE_H, **over)
        return float(r.fraction("H II")) - 0.5

    t_half = brentq(excess, 7000.0, 12000.0, xtol=0.01)
    assert t_half == pytest.approx(9556.0, rel=0.005)
    # and the book's own equation reproduced independently, to 1e-6
    kT = 8.617333262e-5 * t_half
    ne = 200.0 / (K_B * t_half)
    saha = 2 * 1.0 / 2.0 * 2.4146830e15 * t_half**1.5 * np.exp(-13.6 / kT) / ne
    assert saha == pytest.approx(1.0, rel=1e-4)


def test_calcium_ratio_in_the_solar_photosphere():
    # Carroll & Ostlie, An Introduction to Modern Astrophysics, 2nd ed., Sect. 8.1 (Example 8.1.4):
    # N(Ca II)/N(Ca I) = 918 at T = 5,777 K and P_e = 15 dyn cm^-2 with U(Ca I) = 1.32,
    # U(Ca II) = 2.30 and chi(Ca I) = 6.11 eV.  Test within 0.5 %.
    r = ionbal.solve(5777.0, electron_pressure=15.0, mixture=AGSS09,
                     partition_functions={"Ca I": 1.32, "Ca II": 2.30}, ionization_energies={"Ca I": 6.11})
    ratio = float(r.fraction("Ca II") / r.fraction("Ca I"))
    assert ratio == pytest.approx(918.0, rel=0.005)


# ----------------------------------------------------------------------------------------------
# Agreement with the plain numpy + scipy reference solver
# ----------------------------------------------------------------------------------------------

def _random_states(n, seed, t_range=(1e3, 1e6)):
    rng = np.random.default_rng(seed)
    T = 10 ** rng.uniform(np.log10(t_range[0]), np.log10(t_range[1]), n)
    return rng, T


@pytest.mark.parametrize("mixture", [AGSS09, ionbal.Mixture({"H": 12, "He": 10.93, "Na": 6.24, "Fe": 7.5}),
                                     ionbal.Mixture({"He": 12.0, "C": 10.0, "O": 10.0})],
                         ids=["AGSS09", "H-He-Na-Fe", "hydrogen-free"])
def test_kernel_matches_reference_gas_pressure(mixture):
    rng, T = _random_states(12, seed=1)
    P = 10 ** rng.uniform(-6, 12, T.size)
    r = ionbal.solve(T, gas_pressure=P, mixture=mixture)
    assert r.converged.all()
    p = pack(mixture)
    for i in range(T.size):
        ne, nn = solve_reference(p, T[i], gas_pressure=P[i])
        assert r.electron_density[i] == pytest.approx(ne, rel=1e-10), (T[i], P[i])
        assert r.nuclei_density[i] == pytest.approx(nn, rel=1e-10), (T[i], P[i])


@pytest.mark.parametrize("var", ["hydrogen_density", "mass_density", "electron_pressure"])
def test_kernel_matches_reference_other_inputs(var):
    # states drawn from gas-pressure solves, so every input lies in the physical range
    rng, T = _random_states(10, seed=2)
    P = 10 ** rng.uniform(-6, 12, T.size)
    base = ionbal.solve(T, gas_pressure=P, mixture=AGSS09)
    v = getattr(base, var)
    p = pack(AGSS09)
    r = ionbal.solve(T, mixture=AGSS09, **{var: v})
    assert r.converged.all()
    for i in range(T.size):
        if var == "electron_pressure":
            ne, nn = solve_reference(p, T[i], electron_pressure=v[i])
        elif var == "hydrogen_density":
            ne, nn = solve_reference(p, T[i], nuclei_density=v[i] / p.hydrogen_weight)
        else:
            ne, nn = solve_reference(p, T[i], nuclei_density=v[i] / p.mean_mass)
        assert r.electron_density[i] == pytest.approx(ne, rel=1e-10)
        assert r.nuclei_density[i] == pytest.approx(nn, rel=1e-10)
        assert r.electron_density[i] == pytest.approx(base.electron_density[i], rel=1e-10)


def test_unattainable_electron_pressure_is_reported():
    # at 1,900 K an electron pressure of ~500 dyn cm^-2 would need more positive ions than H- can
    # balance: no ideal-gas state has it
    with pytest.raises(ValueError, match="no physical solution"):
        ionbal.solve(1886.9, electron_pressure=493.0)
    r = ionbal.solve([1886.9, 5000.0], electron_pressure=[493.0, 1.0], errors="mask")
    assert list(r.status) == [4, 0]


# ----------------------------------------------------------------------------------------------
# Conservation (hypothesis)
# ----------------------------------------------------------------------------------------------

def _charge_residual(r):
    """|n_e + n(H-) - sum of positive charges| / sum of positive charges, per point."""
    pos = np.zeros(r.shape)
    neg = np.zeros(r.shape)
    for el in r.mixture.elements:
        names = r.stages(el)
        for name in names:
            q = ionbal.parse_species(name).charge
            n = r.number_density(name)
            if q > 0:
                pos = pos + q * n
            elif q < 0:
                neg = neg - q * n
    return np.abs(r.electron_density + neg - pos) / pos


@settings(deadline=None, max_examples=40)
@given(logT=hs.floats(3.0, 6.0), logP=hs.floats(-6.0, 12.0))
def test_conservation_gas_pressure(logT, logP):
    T, P = 10**logT, 10**logP
    r = ionbal.solve(T, gas_pressure=P)
    assert bool(r.converged)
    assert _charge_residual(r) <= 1e-12
    # nuclei conservation: the stages of each element add up to the element's nuclei
    for el in ("H", "He", "C", "O", "Fe", "U"):
        assert float(np.sum(r.fractions(el))) == pytest.approx(1.0, abs=1e-12)
    # ideal gas closes the system
    assert float(r.gas_pressure) == pytest.approx(P, rel=1e-12)


@settings(deadline=None, max_examples=25)
@given(logT=hs.floats(3.0, 6.0), logn=hs.floats(-2.0, 24.0))
def test_conservation_hydrogen_density(logT, logn):
    r = ionbal.solve(10**logT, hydrogen_density=10**logn)
    assert bool(r.converged)
    assert _charge_residual(r) <= 1e-12
    assert float(r.hydrogen_density) == pytest.approx(10**logn, rel=1e-12)


# ----------------------------------------------------------------------------------------------
# Limits (common practice)
# ----------------------------------------------------------------------------------------------

def test_hot_low_density_gas_is_fully_stripped():
    # At 1e6 K and low pressure every light element is fully ionized, so n_e equals the total
    # nuclear charge density (common practice: coronal conditions, LTE Saha for the arithmetic only).
    r = ionbal.solve(1e6, gas_pressure=1e-4)
    for el in ("H", "He", "C", "N", "O"):
        z = ionbal.parse_species((el, 0)).Z
        assert float(r.fraction((el, z))) > 1 - 1e-6, el
    p = pack(r.mixture)
    heavy = float(np.sum(p.elem_w * p.atomic_numbers * (p.atomic_numbers > 8)))
    total = float(np.sum(p.elem_w * p.atomic_numbers))
    # heavier elements may keep a few bound electrons; they carry < 0.1 % of the charge
    assert float(r.electron_density) == pytest.approx(float(r.nuclei_density) * total, rel=heavy / total)
    assert float(r.electron_density) == pytest.approx(float(r.nuclei_density) * total, rel=1e-3)


def test_cool_gas_electrons_come_from_alkali_metals():
    # At 1,500 K hydrogen is neutral and the free electrons come from the elements of lowest
    # ionization energy, the alkali metals (common practice; cool-star atmospheres).
    r = ionbal.solve(1500.0, gas_pressure=1e4)
    assert float(r.fraction("H I")) > 1 - 1e-6
    from_alkalis = sum(float(r.number_density(f"{el} II")) for el in ("Li", "Na", "K", "Rb", "Cs"))
    assert from_alkalis / float(r.electron_density + r.number_density("H-")) > 0.95


# ----------------------------------------------------------------------------------------------
# API behaviour
# ----------------------------------------------------------------------------------------------

def test_broadcasting_and_shapes():
    T = np.array([[4000.0], [6000.0], [9000.0]])
    P = np.array([1e2, 1e4, 1e6, 1e8])
    r = ionbal.solve(T, gas_pressure=P)
    assert r.electron_density.shape == (3, 4)
    assert r.fractions("Fe").shape == (27, 3, 4)
    assert r.status.shape == (3, 4) and r.converged.all()
    # the same numbers point by point
    for i in range(3):
        for j in range(4):
            s = ionbal.solve(T[i, 0], gas_pressure=P[j])
            assert float(s.electron_density) == pytest.approx(r.electron_density[i, j], rel=1e-12)


def test_quantities_are_converted():
    import astropy.units as u

    a = ionbal.solve(6000.0, gas_pressure=1e5)
    b = ionbal.solve(6000.0 * u.K, gas_pressure=1e4 * u.Pa)
    assert b.electron_density.to_value(u.cm**-3) == pytest.approx(float(a.electron_density), rel=1e-12)
    with pytest.raises(ValueError, match="does not convert"):
        ionbal.solve(6000.0, gas_pressure=1.0 * u.m)


def test_four_inputs_agree():
    a = ionbal.solve(7000.0, gas_pressure=3e4)
    for var in ("mass_density", "hydrogen_density", "electron_pressure"):
        b = ionbal.solve(7000.0, **{var: getattr(a, var)})
        assert float(b.electron_density) == pytest.approx(float(a.electron_density), rel=1e-11), var
        assert float(b.gas_pressure) == pytest.approx(3e4, rel=1e-11), var
        assert float(b.fraction("Fe II")) == pytest.approx(float(a.fraction("Fe II")), rel=1e-10), var


def test_exactly_one_state_variable():
    with pytest.raises(ValueError, match="exactly one"):
        ionbal.solve(5000.0)
    with pytest.raises(ValueError, match="exactly one"):
        ionbal.solve(5000.0, gas_pressure=1.0, mass_density=1e-7)


def test_bad_values_name_the_first_index():
    with pytest.raises(ValueError, match="index 2"):
        ionbal.solve([5000.0, 6000.0, np.nan], gas_pressure=1e4)
    with pytest.raises(ValueError, match="gas_pressure"):
        ionbal.solve(5000.0, gas_pressure=-1.0)
    with pytest.raises(ValueError, match="outside the tabulated range"):
        ionbal.solve(1e7, gas_pressure=1.0)
    r = ionbal.solve([5000.0, -1.0], gas_pressure=1e4, errors="mask")
    assert list(r.converged) == [True, False]
    assert np.isnan(r.electron_density[1])


def test_h_minus_is_reported():
    r = ionbal.solve(5000.0, gas_pressure=1e5)
    nhm = float(r.number_density("H-"))
    assert 0 < nhm < 1e-6 * float(r.hydrogen_density)
    assert r.stages("H") == ("H-", "H I", "H II")


def test_to_table():
    r = ionbal.solve([5000.0, 6000.0], gas_pressure=1e5)
    t = r.to_table(species=["Fe I", "Fe II"])
    assert len(t) == 2 and "fraction_Fe_II" in t.colnames and "number_density_Fe_I" in t.colnames
    assert t["electron_density"].unit.to_string() == "1 / cm3"
    with pytest.raises(ValueError, match="0-D or 1-D"):
        ionbal.solve(np.full((2, 2), 5000.0), gas_pressure=1e5).to_table()


# --- issue 12: cached window weights, ln U corrections (dense-gas hook), one pass per grid tile ---------

def _states(n=400, seed=11):
    from ionbal._problems import random_states
    return random_states(n, seed=seed)


def _solve_kernel(packed, T, P, dl_stage=None, dl_val=None):
    from ionbal.core import solver as sv
    n = T.size
    outs = (np.empty(n), np.empty(n), np.empty(n, dtype=np.int32), np.empty(n, dtype=np.int8))
    args = (sv.MODE_GAS_PRESSURE, T, P, np.full(n, np.nan), packed.arrays)
    if dl_stage is None:
        sv.solve_many(*args, sv.TOL, sv.MAX_ITER, *outs)
    else:
        sv.solve_many_dlnu(*args, dl_stage, dl_val, sv.TOL, sv.MAX_ITER, *outs)
    return outs


def _lnu_at(packed, s, T):
    from ionbal.core.saha import stage_lnu, table_position
    a = packed.arrays
    out = np.empty(T.size)
    for j, t in enumerate(T):
        i, w = table_position(t, a.lt0, a.dlt, a.lnU.shape[1])
        out[j] = stage_lnu(s, i, w, a.stage_row, a.stage_lnu_const, a.lnU)
    return out


def test_lnu_correction_equals_partition_function_override():
    """A ln U correction equal to ln(U_override) - ln U(T) gives the override's answer (self-consistency)."""
    from ionbal.core import solver as sv
    T, P = _states()
    over = {"Fe II": 50.0, "Ca I": 3.0, "H I": 2.5}
    ref = ionbal.solve(T, gas_pressure=P, partition_functions=over)
    base = ionbal.solve(T[:1], gas_pressure=P[:1])._packed
    stages = np.array([base.stage_index(s) for s in over], dtype=np.int64)
    dl = np.column_stack([np.log(v) - _lnu_at(base, s, T) for s, v in zip(stages, over.values())])
    x, lnn, it, code = _solve_kernel(base, T, P, stages, dl)
    assert np.all(code == 0)
    np.testing.assert_allclose(x, np.log(ref.electron_density), rtol=1e-12, atol=0)
    # fractions and moments with the same corrections
    over_packed = ref._packed
    sel = np.arange(base.arrays.elem_w.size, dtype=np.int64)
    lf_ref = np.full((T.size, base.arrays.stage_chi.size), np.nan)
    sv.log_fractions_many(T, x, sel, over_packed.arrays, lf_ref)
    lf = np.full_like(lf_ref, np.nan)
    sv.log_fractions_many_dlnu(T, x, sel, base.arrays, stages, dl, lf)
    ok = lf_ref > -600
    np.testing.assert_allclose(np.exp(lf[ok]), np.exp(lf_ref[ok]), rtol=1e-11, atol=1e-300)
    m_ref = np.empty((T.size, 3))
    sv.ion_moments_many(T, x, over_packed.arrays, m_ref)
    m = np.empty((T.size, 3))
    sv.ion_moments_many_dlnu(T, x, base.arrays, stages, dl, m)
    np.testing.assert_allclose(m, m_ref, rtol=1e-11)
    fr = np.empty((T.size, stages.size))
    m2 = np.empty((T.size, 3))
    sv.tile_outputs_many_dlnu(T, x, stages, base.arrays, stages, dl, fr, m2)
    np.testing.assert_allclose(fr, np.exp(lf_ref[:, stages]), rtol=1e-11, atol=1e-300)
    np.testing.assert_allclose(m2, m_ref, rtol=1e-11)


def test_empty_correction_list_is_bitwise_the_plain_solve_and_bad_lists_are_flagged():
    T, P = _states(300, seed=2)
    base = ionbal.solve(T[:1], gas_pressure=P[:1])._packed
    a = _solve_kernel(base, T, P)
    b = _solve_kernel(base, T, P, np.empty(0, dtype=np.int64), np.empty((T.size, 0)))
    for u, v in zip(a, b):
        assert np.array_equal(u, v)
    bad = _solve_kernel(base, T, P, np.array([10**6], dtype=np.int64), np.zeros((T.size, 1)))
    assert np.all(bad[3] == ionbal.core.status.INVALID_INPUT) and np.all(np.isnan(bad[0]))
    bad = _solve_kernel(base, T, P, np.array([1], dtype=np.int64), np.zeros((T.size + 1, 1)))
    assert np.all(bad[3] == ionbal.core.status.INVALID_INPUT)


def test_tile_outputs_match_log_fractions_and_moments():
    """One pass per tile equals exp(log_fractions_many) and ion_moments_many; NaN where x is not finite."""
    from ionbal.core import solver as sv
    from ionbal._problems import structured_grid
    T, P = structured_grid(12, 9)
    r = ionbal.solve(T, gas_pressure=P)
    p = r._packed
    x = np.log(r.electron_density)
    x[5] = np.nan
    n_stage = p.arrays.stage_chi.size
    sel_stage = np.array([p.stage_index(s) for s in ("H-", "H I", "H II", "Fe I", "Fe II", "Fe XXVI", "O III",
                                                      "Ca II", "U I")], dtype=np.int64)
    sel_elem = np.arange(p.arrays.elem_w.size, dtype=np.int64)
    lf = np.full((T.size, n_stage), np.nan)
    sv.log_fractions_many(T, x, sel_elem, p.arrays, lf)
    mom = np.empty((T.size, 3))
    sv.ion_moments_many(T, x, p.arrays, mom)
    fr = np.empty((T.size, sel_stage.size))
    m2 = np.empty((T.size, 3))
    sv.tile_outputs_many(T, x, sel_stage, p.arrays, fr, m2)
    np.testing.assert_allclose(fr, np.exp(lf[:, sel_stage]), rtol=1e-14, atol=1e-300)  # to an ulp or two
    np.testing.assert_allclose(m2, mom, rtol=1e-14)
    assert np.all(np.isnan(fr[5])) and np.all(np.isnan(m2[5]))
    # split into tiles of any size: bitwise the same
    fr2 = np.empty_like(fr)
    m3 = np.empty_like(m2)
    for a in range(0, T.size, 7):
        sv.tile_outputs_many(T[a:a + 7], x[a:a + 7], sel_stage, p.arrays, fr2[a:a + 7], m3[a:a + 7])
    assert np.array_equal(fr2, fr, equal_nan=True) and np.array_equal(m3, m2, equal_nan=True)
