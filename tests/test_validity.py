"""Validity flags: where the ideal-gas LTE Saha balance stops being trustworthy (ionbal.validity)."""

from __future__ import annotations

import dataclasses
import math

import numpy as np
import pytest
from scipy import constants as sc

import ionbal
from ionbal import validity as V

PURE_H = ionbal.Mixture({"H": 12.0})

# CODATA 2018 via scipy, converted to cgs here, independently of ionbal.core.constants
H_CGS = sc.h * 1e7
ME_CGS = sc.m_e * 1e3
KB_CGS = sc.k * 1e7
E2_CGS = (sc.e * sc.c * 10.0) ** 2
A0_CGS = sc.physical_constants["Bohr radius"][0] * 100.0


def _thermal_wavelength(T):
    return H_CGS / math.sqrt(2.0 * math.pi * ME_CGS * KB_CGS * T)


# ----------------------------------------------------------------------------------------------
# States that must be unflagged or flagged
# ----------------------------------------------------------------------------------------------

def test_solar_photosphere_is_trustworthy():
    # T = 5,800 K, P_gas = 1e5 dyn cm^-2: the solar photosphere near tau = 1 (common practice),
    # an ideal, non-degenerate, weakly coupled gas
    v = ionbal.solve(5800.0, gas_pressure=1e5).validity
    assert bool(v.trustworthy)
    assert not any(bool(v.flag(name)) for name in V.FLAG_NAMES)
    assert float(v.degeneracy) < 1e-6
    assert float(v.coupling) < 0.05
    assert float(v.debye_parameter) < 0.01
    assert float(v.pressure_parameter) < 1e-5


@pytest.mark.parametrize("T, P", [(1e6, 1e-4), (1e6, 1.0), (3e4, 1e-2), (1e5, 1e-6)])
def test_hot_low_density_gas_is_not_flagged(T, P):
    # coronal / hot-wind densities: none of the dense-plasma flags applies (non-LTE is a separate
    # caution, documented in the README, and deliberately not assessed here)
    v = ionbal.solve(T, gas_pressure=P).validity
    assert bool(v.trustworthy), v.summary()


def test_white_dwarf_like_interior_is_flagged_degenerate_and_coupled():
    # T = 3e5 K, rho = 1e4 g cm^-3: a white-dwarf envelope (common practice).  Even the Saha solution,
    # which recombines most of the gas at this density, holds degenerate, strongly coupled electrons.
    v = ionbal.solve(3e5, mass_density=1e4).validity
    assert bool(v.degenerate) and bool(v.coupled)
    assert bool(v.pressure_ionization) and bool(v.debye_lowering)
    assert not bool(v.trustworthy)


@pytest.mark.parametrize("rho", [1e3, 1e4, 1e5])
def test_dense_hot_interior_is_flagged(rho):
    # T = 1e6 K, rho = 1e3 .. 1e5 g cm^-3 (white-dwarf-like densities).  The Saha solution recombines
    # the gas (n_e saturates near 5e25 cm^-3), so its own coupling stays just below Gamma = 1; the
    # degeneracy, Debye and pressure-ionization flags all mark the point.
    v = ionbal.solve(1e6, mass_density=rho).validity
    assert bool(v.degenerate)
    assert bool(v.pressure_ionization)
    assert bool(v.debye_lowering)
    assert not bool(v.trustworthy)
    assert float(v.coupling) > 0.3


def test_parameters_grow_with_density():
    rho = np.geomspace(1e-12, 1e4, 40)
    v = ionbal.solve(1e5, mass_density=rho).validity
    for name in ("degeneracy", "coupling", "debye_parameter", "pressure_parameter"):
        a = getattr(v, name)
        assert np.all(np.diff(a) > 0), name
    # the flags switch on once and stay on
    for name in V.PHYSICS_FLAGS:
        f = getattr(v, name).astype(int)
        assert np.all(np.diff(f) >= 0), name


# ----------------------------------------------------------------------------------------------
# The parameters themselves, recomputed by hand
# ----------------------------------------------------------------------------------------------

def test_degeneracy_parameter_is_n_lambda_cubed():
    for T in (1e3, 1e4, 1e6):
        lam = _thermal_wavelength(T)
        assert float(V.electron_degeneracy(T, 1.0 / lam**3)) == pytest.approx(1.0, rel=1e-9)
    # the electron thermal wavelength is about 0.745 nm at 1e4 K (from memory)
    assert _thermal_wavelength(1e4) == pytest.approx(7.4533e-8, rel=1e-4)


def test_pure_hydrogen_parameters_by_hand():
    # pure hydrogen: the only positive ion is H II, so every parameter follows from T, n_e, n(H II)
    # and n(H-) by the formulas of the module docstring
    r = ionbal.solve(np.array([1e4, 1e6]), mass_density=np.array([1e-6, 1e-1]), mixture=PURE_H)
    v = r.validity
    for i in range(2):
        T = float(r.temperature[i])
        ne = float(r.electron_density[i])
        nn = float(r.nuclei_density[i])
        charged = float(r.number_density("H II")[i] + r.number_density("H-")[i])  # q^2 = 1 for both
        a_e = (3.0 / (4.0 * math.pi * ne)) ** (1.0 / 3.0)
        # the only positive ion is H II (q = 1), so <q^5/3> = 1 and Gamma = Gamma_e
        assert v.coupling[i] == pytest.approx(E2_CGS / (a_e * KB_CGS * T), rel=1e-9)
        lam_d = math.sqrt(KB_CGS * T / (4.0 * math.pi * E2_CGS * (ne + charged)))
        assert v.debye_parameter[i] == pytest.approx(E2_CGS / (lam_d * KB_CGS * T), rel=1e-9)
        assert v.pressure_parameter[i] == pytest.approx(4.0 * math.pi / 3.0 * nn * (2 * A0_CGS) ** 3, rel=1e-9)
        assert v.degeneracy[i] == pytest.approx(ne * _thermal_wavelength(T) ** 3, rel=1e-9)


def test_pressure_threshold_is_about_four_bohr_radii():
    # (4 pi / 3) n (2 a0)^3 = 0.1  <=>  mean distance (3 / 4 pi n)^(1/3) = 2 a0 / 0.1^(1/3) = 4.31 a0
    n = V.PRESSURE_LIMIT / (4.0 * math.pi / 3.0 * (2.0 * A0_CGS) ** 3)
    d = (3.0 / (4.0 * math.pi * n)) ** (1.0 / 3.0)
    assert d / A0_CGS == pytest.approx(4.31, abs=0.01)


def test_kernel_and_public_paths_agree():
    T = np.geomspace(2e3, 1e6, 7)[:, None]
    rho = np.geomspace(1e-10, 1e2, 6)
    r = ionbal.solve(T, mass_density=rho)
    a = V.assess(r)
    b = V.assess(r, use_kernel=False)
    for f in dataclasses.fields(V.Validity):
        x, y = getattr(a, f.name), getattr(b, f.name)
        if x.dtype == bool:
            assert np.array_equal(x, y), f.name
        else:
            np.testing.assert_allclose(x, y, rtol=1e-12, err_msg=f.name)


# ----------------------------------------------------------------------------------------------
# Interface: shapes, unsolved points, bitmask, summary
# ----------------------------------------------------------------------------------------------

def test_shapes_follow_the_result():
    r = ionbal.solve(np.full((3, 1), 6000.0), gas_pressure=np.geomspace(1, 1e6, 4))
    v = r.validity
    assert v is r.validity  # computed once
    for f in dataclasses.fields(V.Validity):
        assert getattr(v, f.name).shape == (3, 4), f.name
    assert v.trustworthy.shape == (3, 4)
    s = ionbal.solve(6000.0, gas_pressure=1e4).validity
    assert s.shape == () and s.size == 1


def test_unsolved_points_are_never_trustworthy():
    r = ionbal.solve([5000.0, np.nan, 1e7, 1886.9], electron_pressure=[1.0, 1.0, 1.0, 493.0], errors="mask")
    v = r.validity
    assert list(v.unsolved) == [False, True, True, True]
    assert list(v.trustworthy) == [True, False, False, False]
    for name in V.PHYSICS_FLAGS:
        assert not getattr(v, name)[1:].any()
    assert np.isnan(v.degeneracy[1:]).all() and np.isfinite(v.degeneracy[0])
    assert v.counts() == {"degenerate": 0, "coupled": 0, "debye_lowering": 0, "pressure_ionization": 0,
                          "unsolved": 3, "trustworthy": 1, "total": 4}


def test_bitmask_round_trip():
    bits = list(V.FLAG_BITS.values())
    assert len(set(bits)) == len(bits)
    assert all(b > 0 and b & (b - 1) == 0 and b < 256 for b in bits)  # distinct powers of two in a uint8
    assert set(V.VALIDITY_FLAGS) == set(V.FLAG_BITS) == set(V.FLAG_NAMES)
    T = np.array([5800.0, 3e5, 1e6, 1e6, np.nan])
    rho = np.array([2e-7, 1e4, 1e3, 1e-12, 1.0])
    v = ionbal.solve(T, mass_density=rho, errors="mask").validity
    m = V.bitmask(v)
    assert m.dtype == np.uint8 and m.shape == (5,)
    assert m[0] == 0 and m[3] == 0
    assert m[1] == V.FLAG_BITS["degenerate"] | V.FLAG_BITS["coupled"] | V.FLAG_BITS["debye_lowering"] \
        | V.FLAG_BITS["pressure_ionization"]
    assert m[4] == V.FLAG_BITS["unsolved"]
    back = V.from_bitmask(m)
    for name in V.FLAG_NAMES:
        assert np.array_equal(back[name], getattr(v, name)), name
    assert np.array_equal(back["trustworthy"], v.trustworthy)
    with pytest.raises(ValueError, match="integer"):
        V.from_bitmask(np.array([0.5]))


def test_summary_and_counts():
    r = ionbal.solve(np.array([5800.0, 3e5, 1e6]), mass_density=np.array([2e-7, 1e4, 1e-12]))
    v = r.validity
    c = v.counts()
    assert c["total"] == 3 and c["trustworthy"] == 2 and c["degenerate"] == 1
    text = v.summary()
    assert "2 of 3" in text
    for name in V.FLAG_NAMES:
        assert name in text
    assert "Ichimaru 1982" in text and "Hummer & Mihalas 1988" in text
    assert "trustworthy=2/3" in repr(v)


def test_validity_is_frozen_and_flags_are_checked():
    v = ionbal.solve(5800.0, gas_pressure=1e5).validity
    with pytest.raises(dataclasses.FrozenInstanceError):
        v.degenerate = np.array(True)
    with pytest.raises(ValueError, match="unknown validity flag"):
        v.flag("hot")
