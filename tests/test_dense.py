"""Dense gas: occupation probabilities, the ln U correction hook and the Debye-Hueckel option (ionbal.dense)."""

from __future__ import annotations

import math

import numpy as np
import pytest

from ionbal.core import status as st
from ionbal.core.constants import A_BOHR, E_CHARGE, EV, K_B
from ionbal.core.occupation import dlnu_many, w_charged, w_neutral
from ionbal.core.solver import (
    MODE_GAS_PRESSURE,
    MODE_NUCLEI_DENSITY,
    log_fractions_many,
    log_fractions_many_dlnu,
    solve_many,
    solve_many_dlnu,
)
from ionbal.data.dissolution import dissolution_arrays
from ionbal.data.levels import hydrogen_partition_function, inglis_teller_n_max
from ionbal.data.mixture import Mixture
from ionbal.data.pack import freeze_overrides, pack
from ionbal.data.tables import partition_function
from ionbal.dense import debye_parameters, solve_dense


@pytest.fixture(scope="module")
def packed():
    return pack(Mixture.solar("AGSS09"))


def _today(packed, mode, T, value):
    n = T.size
    x, lnn = np.empty(n), np.empty(n)
    it, code = np.empty(n, np.int64), np.empty(n, np.int64)
    solve_many(mode, T, value, np.full(n, np.nan), packed.arrays, 1e-13, 200, x, lnn, it, code)
    return x, lnn, code


def _u(packed, species, T, ne, n_neutral):
    """U of ``species`` with dissolved levels at the given perturber densities."""
    d = dissolution_arrays(packed)
    T = np.broadcast_to(np.asarray(T, float), np.shape(ne)).copy()
    ne = np.asarray(ne, float)
    out = np.empty((ne.size, d.stage.size))
    dlnu_many(T, np.log(ne), np.log(np.broadcast_to(n_neutral, ne.shape).astype(float)), d.stage, d.start,
              d.nstar, d.lng, d.energy, d.z, packed.arrays, out)
    j = list(d.stage).index(packed.stage_index(species))
    return partition_function(species, T) * np.exp(out[:, j])


# --------------------------------------------------------------------------- occupation probabilities


def test_microfield_term_follows_inglis_teller():
    # Hummer & Mihalas 1988 (ApJ 331, 794) with the fit of Hubeny, Hummer & Lanz 1994 (A&A 282, 151):
    # without correlations (a -> 0, very hot gas) the level with w = 1/2 is the last resolved level of
    # Inglis & Teller 1939 (ApJ 90, 439; relation from memory), to within 10 %, with the same scaling.
    for ne in (1e10, 1e12, 1e14, 1e16):
        n_half = next(n for n in range(1, 400) if w_charged(float(n), 1.0, ne, 1e9) < 0.5)
        assert abs(n_half - inglis_teller_n_max(ne)) <= 0.1 * inglis_teller_n_max(ne)


def test_occupation_limits():
    # w -> 1 at low density; w decreases with n and with density (HM88, sect. 4)
    assert w_charged(1.0, 1.0, 1e10, 1e4) == pytest.approx(1.0, abs=1e-14)
    assert w_neutral(1.0, 1.0, 0.0) == 1.0
    ws = [w_charged(float(n), 1.0, 1e15, 1e4) for n in range(1, 30)]
    assert all(a >= b for a, b in zip(ws, ws[1:]))
    # neutral term of the H I ground level = exp(-(4 pi/3) N (2 a0)^3), the validity flag's parameter
    N = 1e22
    assert w_neutral(1.0, 1.0, N) == pytest.approx(math.exp(-4 * math.pi / 3 * N * (2 * A_BOHR) ** 3), rel=1e-14)


def test_partition_function_of_h_i_vs_density(packed):
    # U(H I) equals the tabulated level sum (n <= 17) at low density, is bounded by it, decreases with
    # density at fixed T and tends to the ground-level weight 2 at high density (HM88)
    ne = np.geomspace(1e6, 1e21, 31)
    for T in (2e4, 5e4, 1e6):
        u = _u(packed, "H I", T, ne, 1e-3 * ne)
        u_levels = partition_function("H I", T)  # the table: the level sum to n = 17, interpolated in T
        assert u[0] == pytest.approx(u_levels, rel=1e-9)
        assert u[0] == pytest.approx(hydrogen_partition_function(T), rel=1e-3)
        assert np.all(u <= u_levels * (1 + 1e-12))
        assert np.all(np.diff(u) <= 1e-12 * u[:-1])
        # the excited levels go first: U passes within 5 % of 2 before the ground level itself
        # dissolves (n_e > 1e21, where the HM88 microfield term makes w_1 < 1); at 1e6 K the excited
        # levels weigh so much that both go together (U = 2.3 at n_e = 1e21)
        if T < 1e5:
            assert np.min(np.abs(u - 2.0)) < 0.1


def test_no_correction_where_nothing_is_dissolved(packed):
    # photospheric densities and temperatures: U within 0.1 % of the table for every treated stage whose
    # levels stop below n* = 20; the alkali atoms' NIST lists reach n* ~ 75 (Rb I), levels that are
    # dissolved at n_e = 1e13-1e14 (Inglis & Teller 1939: n_max ~ 17-20), so their U drops there
    d = dissolution_arrays(packed)
    short = np.array([d.nstar[d.start[j]] < 20.0 for j in range(d.stage.size)])
    assert short.sum() > 150
    T = np.array([4000.0, 5000.0, 5800.0])
    ne = np.array([1e11, 1e12, 1e12])
    out = np.empty((3, d.stage.size))
    dlnu_many(T, np.log(ne), np.log(ne * 1e3), d.stage, d.start, d.nstar, d.lng, d.energy, d.z, packed.arrays, out)
    assert np.max(np.abs(out[:, short])) < 1e-3
    assert np.max(np.abs(out[0])) < 2e-3  # 4000 K, n_e = 1e11: nothing moves


# --------------------------------------------------------------------------- the solver hook


def test_hook_without_corrections_is_bitwise_today(packed):
    rng = np.random.default_rng(3)
    T = 10 ** rng.uniform(3.3, 5.5, 200)
    P = 10 ** rng.uniform(-3, 7, 200)
    x0, l0, c0 = _today(packed, MODE_GAS_PRESSURE, T, P)
    x, lnn = np.empty(200), np.empty(200)
    it, code = np.empty(200, np.int64), np.empty(200, np.int64)
    solve_many_dlnu(MODE_GAS_PRESSURE, T, P, np.full(200, np.nan), packed.arrays, np.zeros(0, np.int64),
                    np.zeros((200, 0)), 1e-13, 200, x, lnn, it, code)
    assert np.array_equal(x, x0) and np.array_equal(lnn, l0) and np.array_equal(code, c0)


def test_hook_matches_an_overridden_partition_function(packed):
    # a correction d ln U = ln U* - ln U_table(T) of H I is the same as overriding U(H I) = U*
    T = np.geomspace(6000.0, 30000.0, 20)
    P = np.full(20, 1e3)
    u_star = 2.5
    over = pack(Mixture.solar("AGSS09"), freeze_overrides({"H I": u_star}, None))
    x_ref, _, _ = _today(over, MODE_GAS_PRESSURE, T, P)
    s = packed.stage_index("H I")
    dl = (math.log(u_star) - np.log(partition_function("H I", T)))[:, None].copy()
    x, lnn = np.empty(20), np.empty(20)
    it, code = np.empty(20, np.int64), np.empty(20, np.int64)
    solve_many_dlnu(MODE_GAS_PRESSURE, T, P, np.full(20, np.nan), packed.arrays, np.array([s]), dl, 1e-13, 200,
                    x, lnn, it, code)
    np.testing.assert_allclose(x, x_ref, rtol=0, atol=1e-11)
    lf_ref = np.full((20, over.n_stages), np.nan)
    lf = np.full((20, packed.n_stages), np.nan)
    log_fractions_many(T, x_ref, np.array([0]), over.arrays, lf_ref)
    log_fractions_many_dlnu(T, x, np.array([0]), packed.arrays, np.array([s]), dl, lf)
    np.testing.assert_allclose(lf[:, :3], lf_ref[:, :3], atol=1e-10)


# --------------------------------------------------------------------------- the issue's checks


def test_hot_dense_gas_is_ionized(packed):
    # 1e6 K, rho = 1e-2 g cm^-3: hydrogen >= 99.7 % ionized and n_e within 0.5 % of full ionization
    # (the issue's check; with ground-state-only partition functions hydrogen is 99.7 % ionized there)
    T = np.array([1e6])
    nn = np.array([1e-2 / packed.mean_mass])
    r = solve_dense(MODE_NUCLEI_DENSITY, T, nn, packed)
    assert r.status[0] == st.OK
    assert math.exp(r.ln_ne[0]) / (nn[0] * packed.q_max) > 0.995
    lf = np.full((1, packed.n_stages), np.nan)
    log_fractions_many_dlnu(T, r.ln_ne, np.array([0]), packed.arrays, r.dl_stage, r.dl_val, lf)
    assert math.exp(lf[0, packed.stage_index("H II")]) >= 0.997


def test_issue_states_converge_and_gain_electrons(packed):
    T = np.array([1e6, 3e5, 1e5, 5e4])
    nn = np.array([1e-2, 1e-2, 1e-2, 1e-4]) / packed.mean_mass
    x0, _, _ = _today(packed, MODE_NUCLEI_DENSITY, T, nn)
    for coulomb in (False, True):
        r = solve_dense(MODE_NUCLEI_DENSITY, T, nn, packed, coulomb=coulomb)
        assert np.all(r.status == st.OK)
        assert np.all(r.ln_ne > x0 + 0.5)  # the issue: today's n_e is 2.2-7.1x too low there


def test_photosphere_does_not_move(packed):
    # FAL-C-like photospheric states (Fontenla, Avrett & Loeser 1993, ApJ 406, 319; values rounded,
    # from memory): n_e and every stage holding more than 1 % of its element within 0.1 % of today
    # (minor neutral alkali stages move: their Rydberg levels are dissolved, see above)
    # (T <= 6500 K: above tau = 1; deeper, at 8000-9500 K and 1.3e5 dyn cm^-2, levels with n* >~ 15 are
    # dissolved and minor stages move by up to 0.7 %, the physics this module adds)
    T = np.array([4400.0, 4700.0, 5000.0, 5400.0, 5800.0, 6500.0])
    P = np.array([1e3, 3e3, 1e4, 3e4, 6e4, 1.1e5])
    x0, _, _ = _today(packed, MODE_GAS_PRESSURE, T, P)
    r = solve_dense(MODE_GAS_PRESSURE, T, P, packed)
    assert np.all(r.status == st.OK)
    np.testing.assert_allclose(r.ln_ne, x0, rtol=0, atol=1e-3)
    allel = np.arange(packed.elem_w.size)
    lf0 = np.full((6, packed.n_stages), np.nan)
    lf = np.full((6, packed.n_stages), np.nan)
    log_fractions_many(T, x0, allel, packed.arrays, lf0)
    log_fractions_many_dlnu(T, r.ln_ne, allel, packed.arrays, r.dl_stage, r.dl_val, lf)
    big = lf0 > math.log(1e-2)
    np.testing.assert_allclose(lf[big], lf0[big], rtol=0, atol=1e-3)


def test_continuity_along_t_and_p(packed):
    # no jump in n_e or in the H, He fractions along fine T and P lines through the whole range
    T = np.geomspace(3000.0, 1e6, 700)
    for P in (1e2, 1e6, 1e9):
        r = solve_dense(MODE_GAS_PRESSURE, T, np.full(T.size, P), packed)
        assert np.all(r.status == st.OK)
        x0, _, _ = _today(packed, MODE_GAS_PRESSURE, T, np.full(T.size, P))
        assert np.max(np.abs(np.diff(r.ln_ne - x0))) < 0.02  # the change from today is smooth
        assert np.max(np.abs(np.diff(r.ln_ne, 2))) < 0.01  # no kink
        lf = np.full((T.size, packed.n_stages), np.nan)
        log_fractions_many_dlnu(T, r.ln_ne, np.array([0, 1]), packed.arrays, r.dl_stage, r.dl_val, lf)
        assert np.max(np.abs(np.diff(np.exp(lf[:, :6]), axis=0))) < 0.05
    P = np.geomspace(1e-4, 1e10, 700)
    for TT in (8000.0, 3e4, 2e5):
        r = solve_dense(MODE_GAS_PRESSURE, np.full(P.size, TT), P, packed)
        assert np.all(r.status == st.OK)
        assert np.max(np.abs(np.diff(r.ln_ne, 2))) < 0.01


# --------------------------------------------------------------------------- Debye-Hueckel


def test_debye_length_textbook_value():
    # NRL Plasma Formulary (Huba 2019): lambda_De = 7.43e2 T_eV^{1/2} n_e^{-1/2} cm (electrons only)
    T = np.array([1e4, 1e6])
    ne = np.array([1e15, 1e20])
    gamma, _ = debye_parameters(T, np.log(ne), np.full(2, -np.inf), np.zeros(2))
    lam = E_CHARGE**2 / (gamma * K_B * T)
    t_ev = K_B * T / EV
    np.testing.assert_allclose(lam, 7.43e2 * np.sqrt(t_ev / ne), rtol=2e-3)
    # lowering e^2 / lambda_D: e^2 = 1.44e-7 eV cm (common practice)
    np.testing.assert_allclose(gamma * K_B * T / EV, 1.44e-7 / lam, rtol=2e-3)


def test_debye_pressure_is_consistent_with_the_lowering():
    # F_ex = -kT V kappa^3 / (12 pi); P_ex = -dF_ex/dV at fixed particle numbers (Debye & Hueckel 1923)
    T, ne, nn, q2 = 1e5, 1e20, 1e20, 1.2
    _, p = debye_parameters(np.array([T]), np.log([ne]), np.log([nn]), np.array([q2]))

    def f_ex(V):
        kappa = math.sqrt(4 * math.pi * E_CHARGE**2 * (ne + nn * q2) / V / (K_B * T))
        return -K_B * T * V * kappa**3 / (12 * math.pi)

    h = 1e-4
    p_num = -(f_ex(1 + h) - f_ex(1 - h)) / (2 * h)
    assert p[0] == pytest.approx(p_num, rel=1e-6)


def test_coulomb_is_off_by_default(packed):
    T = np.array([2e4, 1e5])
    nn = np.array([1e20, 1e22])
    a = solve_dense(MODE_NUCLEI_DENSITY, T, nn, packed)
    b = solve_dense(MODE_NUCLEI_DENSITY, T, nn, packed, coulomb=False)
    c = solve_dense(MODE_NUCLEI_DENSITY, T, nn, packed, coulomb=True)
    assert np.array_equal(a.ln_ne, b.ln_ne) and np.all(a.p_coulomb == 0.0)
    assert np.all(c.ln_ne > a.ln_ne) and np.all(c.p_coulomb < 0.0)


def test_bad_input(packed):
    with pytest.raises(ValueError, match="mode"):
        solve_dense(7, np.array([1e4]), np.array([1e3]), packed)
    with pytest.raises(ValueError, match="same size"):
        solve_dense(MODE_GAS_PRESSURE, np.array([1e4, 2e4]), np.array([1e3]), packed)
    r = solve_dense(MODE_GAS_PRESSURE, np.array([-1.0, 1e4]), np.array([1e3, 1e3]), packed)
    assert r.status[0] == st.INVALID_INPUT and r.status[1] == st.OK
