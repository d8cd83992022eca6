"""Thermodynamics of the joint molecular + ionization solution (:mod:`.chem`), exact derivatives.

The same quantities as :mod:`.thermo` (:data:`.thermo.THERMO_FIELDS`), for a gas of atoms, atomic
ions, molecules and molecular ions.  Every heavy species ``i`` has

    ln n_i = sum_c nu_ic y_c - q_i x + phi_i(T),

with ``y_c`` the ln density of the neutral atom of element ``c``, ``x = ln n_e`` and ``phi_i``
the species' constant: ``C_k - C_neutral`` for an atomic stage (the Saha weights of
:func:`.chem_terms._log_weights`), ``-ln Kp + (n_atoms - 1) ln kT`` plus the shift of a charged
product for a molecule (as in :func:`.chem.chem_point`).  For an ideal gas
``d phi_i / d lnT = (eps_i - sum nu eps_neutral + q_i eps_e) / kT``, so each species' mean energy
(translation + excitation + ionization - dissociation; zero point: neutral atoms in their ground
states) is

    eps_i = sum_c nu_ic kT (3/2 + u_c) - 3/2 q_i kT + kT dphi_i/dlnT,
    d eps_i / dlnT = eps_i + kT d^2 phi_i / dlnT^2

(``u_c = dlnU/dlnT`` of the neutral atom; ``d^2 phi = -dX/kT + D0/kT`` since ``g = ln Kp + D0/kT`` and
ln U are linear in log T inside a table interval).  At fixed density of nuclei ``N`` the
converged element and charge equations of :mod:`.chem` are differentiated implicitly: one linear
system of the molecule formers' ``y_j`` and ``x`` for a change of ln T and one for a change of
ln N.  Elements that form no molecule are eliminated: their stage fractions move as in
:mod:`.thermo` (``d ln n_k = (h_k - <h>) dlnT - (q_k - <q>) dx + dlnN``).

The per-element quantities: each element's share of the free electrons (its atomic ions and the
molecular ions whose charged product is one of its ions; they sum to 1 by charge conservation) and
``d ln n_e / d A(X)`` at fixed T and P_gas, from the same equations with ``ln N`` as an unknown and
the ideal-gas law as its equation, driven by ``d ln w_e / d A(X) = ln 10 (delta_eX - w_X)``.

The entropy follows from Euler's relation with every chemical potential expressed through the
neutral atoms (charge neutrality removes the electrons'):
``T S = E + P - sum_e N_e mu_e``, ``mu_e = kT ln(n_e,0 lambda_e^3 / U_e,0)`` for the neutral atom of
element ``e`` (same zero point as the energies).
"""

from __future__ import annotations

import math

import numpy as np

from .chem_terms import _ln_kp, _log_weights, _solve_multi
from .config import jit, pjit, prange
from .constants import EV, K_B, K_B_EV, LN_SAHA_CONST
from .solver import N_CHUNKS, chunk_bounds
from .saha import table_position
from .thermo import close_relations

LN10 = math.log(10.0)
#: stages more than this (in ln) below their element's peak, or below its ions next to the neutral
#: atom, are left out (exp(-46) ~ 1e-20)
CUT = 46.0


@jit
def _stage_slopes(T, mix, du, lnu):
    """``du[s] = dlnU_s/dlnT`` (0 outside the table and for constant U) and ``lnu[s] = ln U_s``."""
    lnU = mix.lnU
    n_t = lnU.shape[1]
    i, w = table_position(T, mix.lt0, mix.dlt, n_t)
    uu = (math.log10(T) - mix.lt0) / mix.dlt
    scale = 1.0 / (mix.dlt * LN10) if 0.0 <= uu <= n_t - 1.0 else 0.0
    for s in range(mix.stage_row.size):
        r = mix.stage_row[s]
        if r < 0:
            du[s] = 0.0
            lnu[s] = mix.stage_lnu_const[s]
        else:
            du[s] = (lnU[r, i + 1] - lnU[r, i]) * scale
            lnu[s] = (1.0 - w) * lnU[r, i] + w * lnU[r, i + 1]


@jit
def _dlnkp(T, mol, out):
    """``dg/dlnT`` of every molecule at T (``g = ln Kp + D0/kT``, as interpolated by :func:`.chem_terms._ln_kp`)."""
    g = mol.mol_g
    n_t = g.shape[1]
    uu = (math.log10(T) - mol.g_lt0) / mol.g_dlt
    for m in range(g.shape[0]):
        if uu >= n_t - 1:
            out[m] = mol.mol_slope[m]
        elif uu < 0.0:
            out[m] = 0.0
        else:
            i = int(math.floor(uu))
            out[m] = (g[m, i + 1] - g[m, i]) / (mol.g_dlt * LN10)


@jit
def _add(G, row, n, g, dvec, ncol):
    for c in range(ncol):
        G[row, c] += n * g * dvec[c]


@jit
def _all_nan(out, share, dlna, per_element):
    for c in range(out.size):
        out[c] = math.nan
    if per_element:
        for e in range(share.size):
            share[e] = math.nan
            dlna[e] = math.nan


@jit
def thermo_mol_point(T, x, L, lny, mix, mol, elem_former, elem_lnm, mean_mass, wk, out, share, dlna, per_element):
    """All :data:`.thermo.THERMO_FIELDS` of one solved molecular state into ``out``.

    ``lny`` (n_elements,): ln density of every element's neutral atom; ``elem_lnm`` = 1.5 ln(m_atom /
    m_e) per element; ``wk`` a tuple of work arrays from :func:`work_arrays`.  With
    ``per_element`` also ``share`` (the share of the free electrons each element supplies: its
    atomic ions and the molecular ions whose charged product is one of its ions) and ``dlna``
    (d ln n_e / d A(X) at fixed T and P_gas, from the system with ln N as a third kind of unknown
    and the ideal-gas law as its equation).
    """
    C, du, lnu, lnkp, gslope, dvec, G, A, B2, tot, chg, gpos, gneg, gpart, A3, B3 = wk
    J = mol.former_elem.size
    nE = mix.elem_w.size
    M = mol.mol_d0.size
    nv = J + 1          # unknowns: y_j (formers), x
    iT = nv             # column of the explicit ln T drive
    iL = nv + 1         # column of the ln N drive
    ncol = nv + 2
    r_pos = J
    r_neg = J + 1
    r_part = J + 2
    r_en = J + 3
    kT = K_B * T
    kT_ev = K_B_EV * T
    beta = 1.0 / kT_ev
    lnT = math.log(T)
    lnkT = math.log(kT)
    N = math.exp(L)
    _log_weights(T, mix, C)
    _stage_slopes(T, mix, du, lnu)
    _ln_kp(T, mol, lnkp)
    _dlnkp(T, mol, gslope)
    for a in range(G.shape[0]):
        for c in range(ncol):
            G[a, c] = 0.0
    for a in range(J + 4):  # values of the rows of G: element totals, pos, neg, particles, energy [eV cm^-3]
        tot[a] = 0.0
    edot = 0.0             # sum n (eps + kT d2phi) [eV cm^-3]: the explicit part of dE/dlnT
    mu_sum = 0.0           # sum_e N_e mu_e / kT
    # electrons
    ne = math.exp(x)
    for c in range(ncol):
        dvec[c] = 0.0
    dvec[J] = 1.0
    tot[r_neg] += ne
    tot[r_part] += ne
    tot[r_en] += 1.5 * kT_ev * ne
    edot += 1.5 * kT_ev * ne
    _add(G, r_neg, ne, 1.0, dvec, ncol)
    _add(G, r_part, ne, 1.0, dvec, ncol)
    _add(G, r_en, ne, 1.5 * kT_ev, dvec, ncol)
    # atomic stages
    for e in range(nE):
        a_e = mix.elem_w[e]
        if a_e <= 0.0:
            continue
        f = mix.elem_first[e]
        n = mix.elem_n[e]
        kn = -mix.elem_q0[e]
        sn = f + kn
        y = lny[e]
        j = elem_former[e]
        chg[e] = 0.0
        gpos[e] = 0.0
        gneg[e] = 0.0
        gpart[e] = 0.0
        eps0 = kT_ev * (1.5 + du[sn])  # the neutral atom's mean energy [eV]
        mu_sum += a_e * N * (y - lnu[sn] - LN_SAHA_CONST - 1.5 * lnT - elem_lnm[e])
        # window: within CUT of the peak, and of the ions next to the neutral atom
        m = -np.inf
        for k in range(n):
            t = C[f + k] - C[sn] - (k - kn) * x
            if t > m:
                m = t
        low = m
        if kn + 1 < n:
            low = min(low, C[sn + 1] - C[sn] - x)
        if kn >= 1:
            low = min(low, C[sn - 1] - C[sn] + x)
        low -= CUT
        # non-formers: first the moments <h> and <q> of the element's stages
        mh = 0.0
        mq = 0.0
        if j < 0:
            s0 = 0.0
            for k in range(n):
                t = C[f + k] - C[sn] - (k - kn) * x
                if t < low:
                    continue
                wt = math.exp(t - m)
                q = k - kn
                dX = mix.stage_xcum[f + k] - mix.stage_xcum[sn]
                s0 += wt
                mh += wt * (1.5 * q + dX * beta + du[f + k] - du[sn])
                mq += wt * q
            mh /= s0
            mq /= s0
        for k in range(n):
            t = C[f + k] - C[sn] - (k - kn) * x
            if t < low:
                continue
            q = k - kn
            dX = mix.stage_xcum[f + k] - mix.stage_xcum[sn]
            h = 1.5 * q + dX * beta + du[f + k] - du[sn]
            dens = math.exp(y + t)
            eps = eps0 - 1.5 * q * kT_ev + kT_ev * h
            for c in range(ncol):
                dvec[c] = 0.0
            if j >= 0:
                dvec[j] = 1.0
                dvec[J] = -q
                dvec[iT] = h
                tot[j] += dens
                _add(G, j, dens, 1.0, dvec, ncol)
            else:
                dvec[J] = -(q - mq)
                dvec[iT] = h - mh
                dvec[iL] = 1.0
            chg[e] += q * dens
            if q > 0:
                tot[r_pos] += q * dens
                _add(G, r_pos, dens, q, dvec, ncol)
                gpos[e] += q * dens * dvec[iL]
            elif q < 0:
                tot[r_neg] -= q * dens
                _add(G, r_neg, dens, -q, dvec, ncol)
                gneg[e] -= q * dens * dvec[iL]
            gpart[e] += dens * dvec[iL]
            tot[r_part] += dens
            _add(G, r_part, dens, 1.0, dvec, ncol)
            tot[r_en] += eps * dens
            _add(G, r_en, dens, eps, dvec, ncol)
            edot += dens * (eps - dX)  # kT d2phi = -dX
    # molecules
    for mm in range(M):
        qm = mol.mol_charge[mm]
        phi = -lnkp[mm] + (mol.mol_natoms[mm] - 1) * lnkT
        dphi = -(gslope[mm] + mol.mol_d0[mm] * beta) + (mol.mol_natoms[mm] - 1)
        d2 = mol.mol_d0[mm] * beta
        ie = mol.mol_ion_elem[mm]
        if ie >= 0:
            fi = mix.elem_first[ie]
            sn = fi + (-mix.elem_q0[ie])
            si = sn + mol.mol_ion_q[mm]
            qi = mol.mol_ion_q[mm]
            dX = mix.stage_xcum[si] - mix.stage_xcum[sn]
            phi += C[si] - C[sn]
            dphi += 1.5 * qi + dX * beta + du[si] - du[sn]
            d2 -= dX * beta
        for c in range(ncol):
            dvec[c] = 0.0
        t = phi - qm * x
        eps = -1.5 * qm * kT_ev + kT_ev * dphi
        for c in range(3):
            jj = mol.mol_comp[mm, c]
            if jj >= 0:
                nu = mol.mol_count[mm, c]
                e = mol.former_elem[jj]
                sn = mix.elem_first[e] - mix.elem_q0[e]
                t += nu * lny[e]
                eps += nu * kT_ev * (1.5 + du[sn])
                dvec[jj] += nu
        dvec[J] = -qm
        dvec[iT] = dphi
        dens = math.exp(t)
        if ie >= 0:
            chg[ie] += qm * dens
        for c in range(3):
            jj = mol.mol_comp[mm, c]
            if jj >= 0:
                nu = mol.mol_count[mm, c]
                tot[jj] += nu * dens
                _add(G, jj, dens, float(nu), dvec, ncol)
        if qm > 0:
            tot[r_pos] += qm * dens
            _add(G, r_pos, dens, float(qm), dvec, ncol)
        elif qm < 0:
            tot[r_neg] -= qm * dens
            _add(G, r_neg, dens, float(-qm), dvec, ncol)
        tot[r_part] += dens
        _add(G, r_part, dens, 1.0, dvec, ncol)
        tot[r_en] += eps * dens
        _add(G, r_en, dens, eps, dvec, ncol)
        edot += dens * (eps + kT_ev * d2)
    if not (tot[r_pos] > 0.0):
        _all_nan(out, share, dlna, per_element)
        return
    # implicit derivatives at fixed N (dv_T) and at fixed T per unit ln N (dv_L)
    for a in range(nv):
        if a < J:
            scale_r = 1.0 / tot[a]
            for c in range(nv):
                A[a, c] = G[a, c] * scale_r
            B2[a, 0] = -G[a, iT] * scale_r
            B2[a, 1] = 1.0 - G[a, iL] * scale_r
        else:
            ip = 1.0 / tot[r_pos]
            ineg = 1.0 / tot[r_neg]
            for c in range(nv):
                A[a, c] = G[r_neg, c] * ineg - G[r_pos, c] * ip
            B2[a, 0] = -(G[r_neg, iT] * ineg - G[r_pos, iT] * ip)
            B2[a, 1] = -(G[r_neg, iL] * ineg - G[r_pos, iL] * ip)
    if not _solve_multi(A, B2, nv, 2):
        _all_nan(out, share, dlna, per_element)
        return
    part = tot[r_part]
    dpart_t = G[r_part, iT]
    dpart_l = G[r_part, iL]
    den_t = G[r_en, iT]
    for c in range(nv):
        dpart_t += G[r_part, c] * B2[c, 0]
        dpart_l += G[r_part, c] * B2[c, 1]
        den_t += G[r_en, c] * B2[c, 0]
    rho = N * mean_mass
    P = part * kT
    chi_t = 1.0 + dpart_t / part
    chi_r = dpart_l / part
    e_v = EV * tot[r_en]
    s_v = (e_v + P) / T - K_B * mu_sum
    close_relations(out, T, e_v / rho, s_v / rho, EV * (edot + den_t) / (rho * T), P / rho, chi_t, chi_r,
                    B2[J, 0], B2[J, 1])
    if not per_element:
        return
    ne = math.exp(x)
    for e in range(nE):
        share[e] = chg[e] / ne
    # d ln n_e / d A(X) at fixed T and P_gas: unknowns (y_j, x, L); rows: elements, charge, particles.
    # d ln w_e / d A(X) = ln10 (delta_eX - w_X): solve for the drive of each element alone (column
    # e) and for all together (column nE), then combine.
    n3 = J + 2
    ip = 1.0 / tot[r_pos]
    ineg = 1.0 / tot[r_neg]
    ipart = 1.0 / part
    for a in range(n3):
        for c in range(nE + 1):
            B3[a, c] = 0.0
    for a in range(J):
        for c in range(nv):
            A3[a, c] = G[a, c] / tot[a]
        A3[a, J + 1] = G[a, iL] / tot[a] - 1.0
        B3[a, mol.former_elem[a]] = 1.0
        B3[a, nE] = 1.0
    for c in range(nv):
        A3[J, c] = G[r_neg, c] * ineg - G[r_pos, c] * ip
        A3[J + 1, c] = G[r_part, c] * ipart
    A3[J, J + 1] = G[r_neg, iL] * ineg - G[r_pos, iL] * ip
    A3[J + 1, J + 1] = G[r_part, iL] * ipart
    for e in range(nE):
        if elem_former[e] < 0:
            B3[J, e] = -(gneg[e] * ineg - gpos[e] * ip)
            B3[J + 1, e] = -gpart[e] * ipart
    B3[J, nE] = -(G[r_neg, iL] * ineg - G[r_pos, iL] * ip)
    B3[J + 1, nE] = -G[r_part, iL] * ipart
    if not _solve_multi(A3, B3, n3, nE + 1):
        for e in range(nE):
            dlna[e] = math.nan
        return
    for e in range(nE):
        dlna[e] = LN10 * (B3[J, e] - mix.elem_w[e] * B3[J, nE])


@jit
def work_arrays(mix, mol):
    """Work arrays of :func:`thermo_mol_point` for one thread."""
    n_st = mix.stage_chi.size
    M = mol.mol_d0.size
    J = mol.former_elem.size
    nE = mix.elem_w.size
    return (np.empty(n_st), np.empty(n_st), np.empty(n_st), np.empty(M), np.empty(M), np.empty(J + 3),
            np.empty((J + 4, J + 3)), np.empty((J + 1, J + 1)), np.empty((J + 1, 2)), np.empty(J + 4),
            np.empty(nE), np.empty(nE), np.empty(nE), np.empty(nE), np.empty((J + 2, J + 2)),
            np.empty((J + 2, nE + 1)))


@pjit
def thermo_mol_many(T, x, L, lny, mix, mol, elem_former, elem_lnm, mean_mass, out, share, dlna):
    """:func:`thermo_mol_point` at every point (``out``: (n, N_THERMO); ``share``, ``dlna``: (n, n_elem),
    or of zero rows for the per-point quantities only); unsolved points get NaN."""
    n = T.size
    nE = mix.elem_w.size
    per_element = share.shape[0] > 0
    n_chunks = min(N_CHUNKS, n)
    for c in prange(n_chunks):
        a, b = chunk_bounds(c, n, n_chunks)
        wk = work_arrays(mix, mol)
        scratch = np.empty(nE)
        for p in range(a, b):
            sh = share[p] if per_element else scratch
            dl = dlna[p] if per_element else scratch
            if math.isfinite(x[p]) and math.isfinite(L[p]):
                thermo_mol_point(T[p], x[p], L[p], lny[p], mix, mol, elem_former, elem_lnm, mean_mass, wk, out[p],
                                 sh, dl, per_element)
            else:
                out[p, :] = math.nan
                if per_element:
                    share[p, :] = math.nan
                    dlna[p, :] = math.nan

