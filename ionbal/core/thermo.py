"""Thermodynamics of the ionizing gas with exact derivatives: scalar kernel plus ``prange`` driver.

Atoms and atomic ions only (the atoms-only solve of :mod:`.solver`), ideal gas, LTE.  Per
nucleus of the gas, with ``a_e`` the number fraction of element ``e``, ``f_s`` the fraction of
its nuclei in stage ``s`` (position ``k`` in the element, charge ``q = q0 + k``) and
``Zbar = sum_e a_e <q>_e = n_e / N`` (``N`` nuclei per cm^3):

* the log Saha weight of stage ``s`` is ``C_s = k base(T) - X_s / kT + ln U_s(T)``
  (:func:`.saha.closed_log_weights`), so ``ln f_s = C_s - k x - ln sum``, ``x = ln n_e``, and

      dC_s / dlnT = h_s = u_s + 1.5 k + X_s / kT,    u_s = dlnU_s / dlnT

  (``X_s``: cumulative ionization energy from the element's first stage; ``u_s`` is exact for
  the piecewise-linear ln U(log T) of the tables and zero for constant U);
* charge conservation ``x = ln N + ln Zbar(T, x)``, differentiated implicitly at fixed N:

      (dx/dlnT)_rho = Cov(k, h) / (Zbar + Var k),   (dx/dlnrho)_T = Zbar / (Zbar + Var k)

  where ``Var`` and ``Cov`` are the stage-fraction-weighted moments summed over elements with
  weights ``a_e`` (``d f_s = f_s [(g_s - <g>)]`` for any ``g = d ln w_s``);
* ``P = N (1 + Zbar) k T``:  chi_T = 1 + Zbar/(1+Zbar) (dx/dlnT)_rho,
  chi_rho = 1 + Zbar/(1+Zbar) ((dx/dlnrho)_T - 1);
* energy per nucleus ``e = 3/2 kT (1 + Zbar) + sum_e a_e <eps>_e`` with
  ``eps_s = X_s - X_neutral + kT u_s`` (ionization plus mean excitation energy; zero point: the
  neutral atoms in their ground states), and

      (de/dlnT)_rho = 3/2 kT (1 + Zbar) (1 + Zbar/(1+Zbar) (dx/dlnT)_rho)
                      + sum_e a_e [kT <u> + Cov(eps, h) - Cov(eps, k) (dx/dlnT)_rho]

  (``d(kT u_s)/dlnT = kT u_s`` because ``u_s`` is constant inside a table interval);
* entropy of the ideal mixture (Sackur-Tetrode with internal partition functions): per particle
  of species ``i``, ``s_i / k = 5/2 + u_i + ln(U_i / (n_i lambda_i^3))``, the ions with their
  atom's mass and the electrons with ``U = 2``;
* ``c_v = (de/dlnT)_rho / (m T)``, ``c_p = c_v + P chi_T^2 / (rho T chi_rho)``,
  ``Gamma_3 - 1 = P chi_T / (rho T c_v)``, ``Gamma_1 = chi_rho c_p / c_v``,
  ``nabla_ad = (Gamma_3 - 1) / Gamma_1`` (the standard relations, e.g. Cox & Giuli 1968,
  *Principles of Stellar Structure*, ch. 9; common practice).

Sensitivities at fixed T and P_gas: ``(dx/dlnT)_P = (dx/dlnT)_rho - (dx/dlnrho)_T chi_T / chi_rho``,
``(dx/dlnP)_T = (dx/dlnrho)_T / chi_rho``; for the abundance ``A(X) = log10 eps_X + 12`` of
element ``X`` (other eps fixed, T and P fixed)

    d ln n_e / d A(X) = ln 10 (d_X - a_X) / (1 + Zbar + Var k / Zbar),

with ``d_X = a_X <q>_X / Zbar`` the share of the free electrons that ``X`` supplies (the
electron-donor budget; it sums to 1 and is negative for hydrogen where H- holds more electrons
than H II gives).
"""

from __future__ import annotations

import math

import numpy as np

from .config import jit, pjit, prange
from .constants import EV, K_B, K_B_EV, LN_SAHA_CONST
from .saha import LN2, closed_log_weights, peak_guess, populated_window, table_position
from .solver import N_CHUNKS, chunk_bounds

#: per-point outputs of :func:`thermo_many`, in this column order
THERMO_FIELDS = (
    "internal_energy", "enthalpy", "entropy", "heat_capacity_v", "heat_capacity_p",
    "chi_temperature", "chi_density", "gamma1", "gamma3", "adiabatic_gradient",
    "dlnne_dlnT_p", "dlnne_dlnp_T", "dlnne_dlnT_rho", "dlnne_dlnrho_T",
)
N_THERMO = len(THERMO_FIELDS)
LN10 = math.log(10.0)
#: ln of the share of the gas below which a stage is left out of the sums (exp(-46) ~ 1e-20)
GAS_CUT = 46.0


@jit
def close_relations(out, T, e, s, cv, p_rho, chi_t, chi_r, dxt, dxr):
    """Fill the :data:`THERMO_FIELDS` of one state from e, s [per gram], c_v, P/rho, chi_T, chi_rho and the
    n_e sensitivities at fixed rho (``dxt``, ``dxr``), by the standard relations of the module docstring."""
    cp = cv + p_rho / T * chi_t * chi_t / chi_r
    g3m1 = p_rho / T * chi_t / cv
    g1 = chi_r * cp / cv
    out[0] = e
    out[1] = e + p_rho
    out[2] = s
    out[3] = cv
    out[4] = cp
    out[5] = chi_t
    out[6] = chi_r
    out[7] = g1
    out[8] = 1.0 + g3m1
    out[9] = g3m1 / g1
    out[10] = dxt - dxr * chi_t / chi_r
    out[11] = dxr / chi_r
    out[12] = dxt
    out[13] = dxr


@jit
def thermo_point(T, x, lnN, mix, elem_lnm, mean_mass, C, out, share, dlna, scan=False, per_element=True):
    """All :data:`THERMO_FIELDS` of one solved state into ``out``; donor shares and d ln n_e/dA(X).

    ``x = ln n_e``, ``lnN = ln`` (nuclei per cm^3), ``elem_lnm = 1.5 ln(m_atom / m_e) - ln a_e`` per
    element (the constant part of its translational entropy),
    ``mean_mass`` [g] per nucleus, ``C`` a work array of one value per stage.  ``share`` and
    ``dlna`` get one value per element (with ``per_element=False`` ``share`` is scratch and
    ``dlna`` is left alone).  Each element is summed over the stages of
    :func:`.saha.populated_window`, the window the solve itself sums, less the stages whose share
    of all nuclei is below ``exp(-GAS_CUT)`` of ``min(Zbar, 1)`` (an abundance-aware cut: trace
    elements keep one to three stages), so the moments here are those of the converged
    equations to ~1e-20 relative.  The peak of each element is found by bisection on the
    log-population steps ``C_{k+1} - C_k - x`` (decreasing in k: ionization energies grow with
    charge) and a climb from there (:func:`.saha.find_peak`); ``scan`` scans every stage instead
    and sums the solve's whole window, without the abundance-aware cut (the reference the tests
    compare with).
    """
    lnU = mix.lnU
    n_t = lnU.shape[1]
    i, w = table_position(T, mix.lt0, mix.dlt, n_t)
    u = (math.log10(T) - mix.lt0) / mix.dlt
    inside = 0.0 <= u <= n_t - 1.0  # outside the table ln U is held constant: no slope
    slope_scale = 1.0 / (mix.dlt * LN10) if inside else 0.0
    lnT = math.log(T)
    base = LN2 + LN_SAHA_CONST + 1.5 * lnT
    kT_ev = K_B_EV * T
    beta = 1.0 / kT_ev
    closed_log_weights(T, mix, C)  # C_s = k base - X_s / kT + ln U_s
    n_elem = mix.elem_first.size
    # abundance-aware cut: a stage of element e whose share of all nuclei, a_e f_s, lies below
    # exp(-GAS_CUT) of min(Zbar, 1) (Zbar = n_e / N is known at the converged point) adds less
    # than that to every sum below; its log weight then lies more than
    # GAS_CUT + ln a_e - ln min(Zbar, 1) below the element's peak
    lzb = min(x - lnN, 0.0)
    zbar = 0.0
    var = 0.0
    ckh = 0.0
    e_ion = 0.0      # sum a <eps> [eV]
    de_sum = 0.0     # sum a [kT <u> + Cov(eps, h)] [eV]
    cek = 0.0        # sum a Cov(eps, k) [eV]
    ent = 0.0        # sum a s_e / k (heavy particles)
    for e in range(n_elem):
        a = mix.elem_w[e]
        share[e] = 0.0
        if a <= 0.0:
            continue
        f = mix.elem_first[e]
        n = mix.elem_n[e]
        q0 = mix.elem_q0[e]
        gas_cut = math.inf if scan else GAS_CUT + math.log(a) - lzb
        kb, best, lo, hi = populated_window(C, f, n, q0, x, -1 if scan else peak_guess(C, f, n, x),
                                            gas_cut)
        xb = mix.stage_xcum[f + kb]
        # moments shifted to the most populated stage (no cancellation)
        # h_s = dC_s/dlnT = beta eps_s + 1.5 k (since beta kT = 1), so the moments of h follow from
        # those of eps and k
        s0 = 0.0
        sk = 0.0
        skk = 0.0
        se = 0.0
        see = 0.0
        sek = 0.0
        su = 0.0
        sent = 0.0
        for k in range(lo, hi + 1):
            s = f + k
            r = mix.stage_row[s]
            lu = mix.stage_lnu_fix[s]
            du = 0.0
            if r >= 0:
                lu = (1.0 - w) * lnU[r, i] + w * lnU[r, i + 1]
                du = (lnU[r, i + 1] - lnU[r, i]) * slope_scale
            lw = C[s] - k * x - best
            wt = 1.0 if k == kb else math.exp(lw)  # the peak's lw is 0 (best is its C - k x)
            kk = float(k - kb)
            eps = (mix.stage_xcum[s] - xb) + kT_ev * du
            we = wt * eps
            s0 += wt
            sk += wt * kk
            skk += wt * kk * kk
            se += we
            see += we * eps
            sek += we * kk
            su += wt * du
            sent += wt * (lu + du - lw)
        inv = 1.0 / s0
        mk = sk * inv
        me = se * inv
        q = q0 + kb + mk
        v = skk * inv - mk * mk
        c_ek = sek * inv - me * mk
        v_e = see * inv - me * me
        zbar += a * q
        share[e] = a * q
        var += a * v
        ckh += a * (beta * c_ek + 1.5 * v)
        # <eps> measured from the neutral ground state: shift back by X_best - X_neutral
        e_ion += a * (me + xb - mix.stage_xcum[f - q0])
        de_sum += a * (kT_ev * su * inv + beta * v_e + 1.5 * c_ek)
        cek += a * c_ek
        # s_e / k = 5/2 + <ln U + u - ln f> - ln(N a) + 3/2 ln(2 pi m kT / h^2)
        ent += a * (2.5 + sent * inv + (math.log(s0) if hi > lo else 0.0) - lnN + LN_SAHA_CONST + 1.5 * lnT
                    + elem_lnm[e])
    if not (zbar > 0.0):
        for j in range(out.size):
            out[j] = math.nan
        if per_element:
            for e in range(n_elem):
                share[e] = math.nan
                dlna[e] = math.nan
        return
    kT = K_B * T
    dxt = ckh / (zbar + var)
    dxr = zbar / (zbar + var)
    g = zbar / (1.0 + zbar)
    chi_t = 1.0 + g * dxt
    chi_r = 1.0 + g * (dxr - 1.0)
    e_nuc = 1.5 * kT * (1.0 + zbar) + EV * e_ion
    de_nuc = 1.5 * kT * (1.0 + zbar) * (1.0 + g * dxt) + EV * (de_sum - cek * dxt)
    # electrons: s/k = 5/2 + ln(2 / (n_e lambda_e^3)) = 5/2 + base - x
    s_nuc = ent + zbar * (2.5 + base - x)
    close_relations(out, T, e_nuc / mean_mass, K_B * s_nuc / mean_mass, de_nuc / (mean_mass * T),
                    (1.0 + zbar) * kT / mean_mass, chi_t, chi_r, dxt, dxr)
    if not per_element:
        return
    den = 1.0 + zbar + var / zbar
    for e in range(n_elem):
        share[e] = share[e] / zbar
        dlna[e] = LN10 * (share[e] - mix.elem_w[e]) / den


@pjit
def thermo_many(T, x, lnN, mix, elem_lnm, mean_mass, out, share, dlna, scan=False):
    """:func:`thermo_point` at every point (``out``: (n, N_THERMO); ``share``, ``dlna``: (n, n_elem)).

    ``share`` and ``dlna`` of zero rows: the per-point quantities only (no (n, n_elem) arrays to
    fill).  Points whose ``x`` or ``lnN`` is not finite (unsolved) get NaN everywhere.
    """
    n = T.size
    n_elem = mix.elem_first.size
    per_element = share.shape[0] > 0
    n_chunks = min(N_CHUNKS, n)
    for c in prange(n_chunks):
        a, b = chunk_bounds(c, n, n_chunks)
        C = np.empty(mix.stage_chi.size)
        scratch = np.empty(n_elem)
        for p in range(a, b):
            sh = share[p] if per_element else scratch
            dl = dlna[p] if per_element else scratch
            if math.isfinite(x[p]) and math.isfinite(lnN[p]):
                thermo_point(T[p], x[p], lnN[p], mix, elem_lnm, mean_mass, C, out[p], sh, dl, scan,
                             per_element)
            else:
                out[p, :] = math.nan
                if per_element:
                    share[p, :] = math.nan
                    dlna[p, :] = math.nan
