"""Molecular and ionization equilibrium solved together: scalar numba kernel plus drivers.

Unknowns per point (natural logs, cgs):

``y_j = ln n(X_j)``  free neutral atoms of every *molecule former* ``j`` (an element of
                     the mixture that is a component of at least one packed molecule);
``x = ln n_e``       the free electrons;
``L = ln N``         the density of nuclei (all elements, free or bound).

Every other density follows from them.  The atomic stages of an element follow
from the Saha equation (Saha 1920, Phil. Mag. 40, 472) relative to its neutral
stage, ``ln(n_q / n_0) = D_q(T) - q x``, with ``D_q`` built from the mixture's
partition functions and ionization energies (the ``MixtureArrays`` bundle; this
module keeps its own copy of that recurrence).  A molecule ``m`` with
dissociation reaction ``m -> sum_i nu_i A_i`` (one product may be a singly
charged ion, or H-, as Barklem & Collet 2016 define their molecular ions) has

    ln n_m = sum_i nu_i y_i + D_ion - q_m x - ln Kp_m(T) + (n_m - 1) ln kT

with ``Kp`` the dissociation constant in (dyn cm^-2)^(n_m - 1).  Elements that
form no molecule enter only through their Saha sums.

Equations, all written as logs of ratios so that each is O(1) however rare the
element: element conservation ``ln(sum over its atoms and molecules) = ln(w_j N)``;
charge conservation ``ln(n_e + negative charge) = ln(positive charge)``; and the
state: ideal gas ``ln(n_particles + n_e) = ln(P/kT)`` (a molecule counts as one
particle), or fixed ``N`` or fixed ``n_e`` (then ``x`` or ``L`` drop out).

Newton's method on these log residuals: the Jacobian is nonsingular, so the
Newton direction always lowers ``|r|^2``; steps are capped (``STEP_CAP`` in ln)
and backtracked until ``|r|^2`` falls.  The start is the atoms-only solution
(:func:`ionbal.core.solver.solve_few`) with ``y_j`` from it; where it already
meets every joint equation to ``tol`` it is returned unchanged (nothing jumps
where molecules vanish).  Far from the root (worst log residual above
``SWEEP_UNTIL``) nonlinear Gauss-Seidel sweeps come first: each element alone,
then the ``N_HUBS`` most abundant formers together (C and O locked in CO
converge slowly one by one), then charge and the state equation
(:mod:`ionbal.core.chem_relax`).  The Newton matrix is eliminated rarest
element first, which leaves it sparse.

Equilibrium constants come from a table uniform in ``log10 T``; the kernel
interpolates the smooth ``g = ln Kp + D0/kT`` linearly and, past the table end,
continues ``g`` linearly in ``ln T`` with its slope at the end (value and slope
continuous; ``Kp`` grows towards the dissociation limit).
"""

from __future__ import annotations

import math
import numpy as np

from . import status as st
from .config import jit, pjit, prange
from .molecules import MOL_FIELDS, MoleculeArrays  # noqa: F401 - re-exported
from .constants import K_B
from .chem_terms import _atomic_sums, _ln_kp, _log_weights, _merit, _solve_linear
from .chem_relax import STEP_CAP, _element_1d, _hub_block, relaxation_plan
from .saha import charge_power_table, closed_log_weights, element_charge_powers
from .solver import MODE_ELECTRON_PRESSURE, MODE_GAS_PRESSURE, MODE_NUCLEI_DENSITY, solve_few

__all__ = ["MoleculeArrays", "MOL_FIELDS", "chem_solve_few", "chem_solve_many", "TOL", "MAX_ITER",
           "MODE_GAS_PRESSURE", "MODE_NUCLEI_DENSITY", "MODE_ELECTRON_PRESSURE"]

#: relative tolerance on every conservation equation
TOL = 1e-13
#: accepted when the iteration stagnates at round-off (at once when no descent is left, and for
#: the atoms-only start)
TOL_STAGNATION = 1e-12
MAX_ITER = 200
N_CHUNKS = 256
#: nonlinear Gauss-Seidel sweeps until the worst log residual is below this, then Newton
SWEEP_UNTIL = 0.2


@jit
def _residual(u, want_jac, mode, lnV, C, phi, mix, mol, elem_former, lnn_mol, atoms, r, Jm):
    """Log residuals ``r`` (rows: J elements, charge, state) at ``u = (y_0..y_{J-1}, x, L)``.

    With ``want_jac`` also fills the full (J+2)^2 Jacobian ``Jm``.  ``phi[m]`` holds the
    T-dependent constant of molecule ``m``; ``lnn_mol`` and ``atoms`` (free atoms of every
    element, all stages) are filled.  Returns ``False`` if a density overflows.
    """
    J = mol.former_elem.size
    nE = mix.elem_w.size
    x = u[J]
    L = u[J + 1]
    ix = J
    iL = J + 1
    if want_jac:
        for a in range(J + 2):
            for b in range(J + 2):
                Jm[a, b] = 0.0
    # accumulators of totals and their derivatives (kept in Jm rows before scaling)
    tot = np.zeros(J + 2)  # element totals, negative side of charge, state total
    pos = 0.0
    dpos = np.zeros(J + 2)
    neg = math.exp(x)  # n_e + negative charge
    dneg = np.zeros(J + 2)
    dneg[ix] = neg
    part = math.exp(x)  # particles + electrons
    dpart = np.zeros(J + 2)
    dpart[ix] = part
    lnN = L
    N = math.exp(lnN)
    for e in range(nE):
        f = mix.elem_first[e]
        lnA, p1, p2, n1, n2 = _atomic_sums(C, f, mix.elem_n[e], mix.elem_q0[e], x)
        j = elem_former[e]
        qbar = p1 - n1
        if j >= 0:
            a = math.exp(u[j] + lnA)
            atoms[e] = a
            tot[j] += a
            part += a
            pos += a * p1
            neg += a * n1
            if want_jac:
                Jm[j, j] += a
                Jm[j, ix] -= a * qbar
                dpart[j] += a
                dpart[ix] -= a * qbar
                dpos[j] += a * p1
                dpos[ix] -= a * p2
                dneg[j] += a * n1
                dneg[ix] += a * n2
        else:
            b = mix.elem_w[e] * N
            atoms[e] = b
            part += b
            pos += b * p1
            neg += b * n1
            if want_jac:
                dpart[iL] += b
                dpos[iL] += b * p1
                dpos[ix] += b * (qbar * p1 - p2)
                dneg[iL] += b * n1
                dneg[ix] += b * (n2 + qbar * n1)
    for m in range(lnn_mol.size):
        q = mol.mol_charge[m]
        t = phi[m] - q * x
        for c in range(3):
            j = mol.mol_comp[m, c]
            if j >= 0:
                t += mol.mol_count[m, c] * u[j]
        lnn_mol[m] = t
        if t > 700.0:
            return False
        nm = math.exp(t)
        part += nm
        if q > 0:
            pos += q * nm
        elif q < 0:
            neg -= q * nm
        for c in range(3):
            j = mol.mol_comp[m, c]
            if j >= 0:
                tot[j] += mol.mol_count[m, c] * nm
        if want_jac:
            for c in range(3):
                j = mol.mol_comp[m, c]
                if j < 0:
                    continue
                nu = mol.mol_count[m, c]
                dpart[j] += nu * nm
                if q > 0:
                    dpos[j] += q * nu * nm
                elif q < 0:
                    dneg[j] -= q * nu * nm
                for c2 in range(3):
                    k = mol.mol_comp[m, c2]
                    if k >= 0:
                        Jm[j, k] += nu * mol.mol_count[m, c2] * nm
                Jm[j, ix] -= nu * q * nm
            dpart[ix] -= q * nm
            if q > 0:
                dpos[ix] -= q * q * nm
            elif q < 0:
                dneg[ix] += q * q * nm
    if not (pos > 0.0):
        return False
    # element rows: ln(total_j) - ln(w_j) - L
    for j in range(J):
        e = mol.former_elem[j]
        r[j] = math.log(tot[j]) - math.log(mix.elem_w[e]) - L
        if want_jac:
            for k in range(J + 1):
                Jm[j, k] /= tot[j]
            Jm[j, iL] = -1.0
    # charge row: ln(n_e + negative) - ln(positive)
    r[ix] = math.log(neg) - math.log(pos)
    if want_jac:
        for k in range(J + 2):
            Jm[ix, k] = dneg[k] / neg - dpos[k] / pos
    # state row
    if mode == MODE_GAS_PRESSURE:
        r[iL] = math.log(part) - lnV
        if want_jac:
            for k in range(J + 2):
                Jm[iL, k] = dpart[k] / part
    else:
        r[iL] = 0.0
    return True


@jit
def _sweeps(n_sweeps, mode, lnV, u, C, phi, mix, mol, elem_former, lnn_mol, atoms, r, Jm, plan):
    """Nonlinear Gauss-Seidel: every element equation in turn, the most abundant formers once more
    together (:func:`_hub_block`), then charge, then the state equation.  ``plan``: see
    :func:`relaxation_plan`."""
    J = mol.former_elem.size
    mol_of, cnt_of, start_of, order, hubs, hub_of, G, g, dk, y0, nz = plan
    K = hubs.size
    for _ in range(n_sweeps):
        for j in range(J):
            e = mol.former_elem[j]
            lnA, p1, p2, n1, n2 = _atomic_sums(C, mix.elem_first[e], mix.elem_n[e], mix.elem_q0[e], u[J])
            _element_1d(j, u, C, phi, mix, mol, mol_of, cnt_of, start_of, lnA)
        if K > 1:
            _hub_block(hubs, K, u, C, phi, mix, mol, mol_of, cnt_of, start_of, hub_of, G, g, dk, y0, nz)
        for _k in range(3):
            if not _residual(u, True, mode, lnV, C, phi, mix, mol, elem_former, lnn_mol, atoms, r, Jm):
                return
            if mode != MODE_ELECTRON_PRESSURE:
                # charge: shift x (with every y fixed)
                dx = -r[J] / Jm[J, J]
                u[J] += max(-STEP_CAP, min(STEP_CAP, dx))
            if mode == MODE_GAS_PRESSURE:
                # state: scale every neutral density and N together
                dsum = Jm[J + 1, J + 1]
                for j in range(J):
                    dsum += Jm[J + 1, j]
                dd = -r[J + 1] / dsum
                dd = max(-STEP_CAP, min(STEP_CAP, dd))
                for j in range(J):
                    u[j] += dd
                u[J + 1] += dd
            elif mode == MODE_ELECTRON_PRESSURE:
                # charge at fixed n_e: scale every neutral density and N together
                dsum = Jm[J, J + 1]
                for j in range(J):
                    dsum += Jm[J, j]
                dd = -r[J] / dsum
                dd = max(-STEP_CAP, min(STEP_CAP, dd))
                for j in range(J):
                    u[j] += dd
                u[J + 1] += dd


@jit
def chem_point(mode, T, value, mix, mol, elem_former, tol, max_iter, x0, L0, C, phi, lnn_mol, atoms,
               u, ut, r, Jm, A, d, rows, cols, nz, plan):
    """Solve one state from the atoms-only start ``(x0, L0)``.  Returns ``(x, L, iterations, status)``.

    ``plan`` is the mixture's :func:`relaxation_plan` (the elimination order of the former unknowns
    among it); ``nz``: integer work space of length J + 2.

    Fills ``lnn_mol`` (ln n of every molecule) and ``atoms`` (free-atom density of every
    element, all its atomic stages together) at the solution.
    """
    J = mol.former_elem.size
    order = plan[3]
    kT = K_B * T
    lnkT = math.log(kT)
    _log_weights(T, mix, C)
    lnkp = phi  # reuse: ln Kp first, then the constant of each molecule
    _ln_kp(T, mol, lnkp)
    for m in range(phi.size):
        t = -lnkp[m] + (mol.mol_natoms[m] - 1) * lnkT
        ie = mol.mol_ion_elem[m]
        if ie >= 0:
            f = mix.elem_first[ie]
            kn = -mix.elem_q0[ie]
            t += C[f + kn + mol.mol_ion_q[m]] - C[f + kn]
        phi[m] = t
    # atoms-only start: neutral densities from the Saha sums
    for j in range(J):
        e = mol.former_elem[j]
        lnA, p1, p2, n1, n2 = _atomic_sums(C, mix.elem_first[e], mix.elem_n[e], mix.elem_q0[e], x0)
        u[j] = math.log(mix.elem_w[e]) + L0 - lnA
    u[J] = x0
    u[J + 1] = L0
    if mode == MODE_GAS_PRESSURE:
        lnV = math.log(value) - lnkT
    else:
        lnV = 0.0
    # active rows and columns
    n = 0
    for j in range(J):
        rows[n] = order[j]
        cols[n] = order[j]
        n += 1
    rows[n] = J
    if mode == MODE_ELECTRON_PRESSURE:
        cols[n] = J + 1
    else:
        cols[n] = J
    n += 1
    if mode == MODE_GAS_PRESSURE:
        rows[n] = J + 1
        cols[n] = J + 1
        n += 1
    if not _residual(u, False, mode, lnV, C, phi, mix, mol, elem_former, lnn_mol, atoms, r, Jm):
        return np.nan, np.nan, 0, st.MAX_ITERATIONS
    f0, worst = _merit(r, rows, n)
    if worst <= tol:
        # molecules below round-off: the atoms-only answer
        return u[J], u[J + 1], 0, st.OK
    # far from the solution (molecules far off their share at the atoms-only start) Newton on the
    # coupled system can stall; nonlinear Gauss-Seidel sweeps first bring every equation near its root
    n_sw = 0
    while worst > SWEEP_UNTIL and n_sw < 60:
        _sweeps(1, mode, lnV, u, C, phi, mix, mol, elem_former, lnn_mol, atoms, r, Jm, plan)
        n_sw += 1
        if not _residual(u, False, mode, lnV, C, phi, mix, mol, elem_former, lnn_mol, atoms, r, Jm):
            return np.nan, np.nan, n_sw, st.MAX_ITERATIONS
        f0, worst = _merit(r, rows, n)
    best = worst
    for k in range(J + 2):
        ut[k] = u[k]
    for it in range(1 + n_sw, max_iter + 1):
        _residual(u, True, mode, lnV, C, phi, mix, mol, elem_former, lnn_mol, atoms, r, Jm)
        for a in range(n):
            d[a] = -r[rows[a]]
            for b in range(n):
                A[a, b] = Jm[rows[a], cols[b]]
        if not _solve_linear(A, d, n, nz):
            break
        big = 0.0
        for a in range(n):
            big = max(big, abs(d[a]))
        scale = 1.0 if big <= STEP_CAP else STEP_CAP / big
        alpha = scale
        ok = False
        for _ in range(40):
            for k in range(J + 2):
                ut[k] = u[k]
            for a in range(n):
                ut[cols[a]] = u[cols[a]] + alpha * d[a]
            if _residual(ut, False, mode, lnV, C, phi, mix, mol, elem_former, lnn_mol, atoms, r, Jm):
                f1, w1 = _merit(r, rows, n)
                if f1 < f0 or w1 <= tol:
                    ok = True
                    break
            alpha *= 0.5
        if not ok:
            if best <= TOL_STAGNATION:
                # no descent left at round-off: what the loop would accept after max_iter anyway
                # (hot gas, where the two codes' Saha sums differ by ~1e-13, stopped here after 200)
                _residual(u, False, mode, lnV, C, phi, mix, mol, elem_former, lnn_mol, atoms, r, Jm)
                return u[J], u[J + 1], it, st.OK
            # Newton stalled: more sweeps, then Newton again
            _sweeps(2, mode, lnV, u, C, phi, mix, mol, elem_former, lnn_mol, atoms, r, Jm, plan)
            if not _residual(u, False, mode, lnV, C, phi, mix, mol, elem_former, lnn_mol, atoms, r, Jm):
                break
            f0, w1 = _merit(r, rows, n)
            best = w1
            if w1 <= tol:
                return u[J], u[J + 1], it, st.OK
            continue
        for k in range(J + 2):
            u[k] = ut[k]
        f0 = f1
        best = w1
        if w1 <= tol:
            return u[J], u[J + 1], it, st.OK
    # stagnation: r, lnn_mol, atoms belong to the last accepted u
    _residual(u, False, mode, lnV, C, phi, mix, mol, elem_former, lnn_mol, atoms, r, Jm)
    f0, best = _merit(r, rows, n)
    if best <= TOL_STAGNATION:
        return u[J], u[J + 1], max_iter, st.OK
    return u[J], u[J + 1], max_iter, st.MAX_ITERATIONS


@jit
def chem_solve_few(mode, T, value, mix, mol, elem_former, tol, max_iter, out_x, out_ln_nuc, out_atoms,
                   out_lnn_mol, out_iter, out_status):
    """Solve every point serially.  ``out_atoms`` (n_points, n_elements): free-atom densities
    (all atomic stages) per element; ``out_lnn_mol`` (n_points, n_molecules): ln n of each molecule."""
    npt = T.size
    J = mol.former_elem.size
    M = mol.mol_d0.size
    C = np.empty(mix.stage_chi.size)
    phi = np.empty(M)
    lnn = np.empty(M)
    atoms = np.empty(mix.elem_w.size)
    u = np.empty(J + 2)
    ut = np.empty(J + 2)
    r = np.zeros(J + 2)
    Jm = np.empty((J + 2, J + 2))
    A = np.empty((J + 2, J + 2))
    d = np.empty(J + 2)
    rows = np.empty(J + 2, dtype=np.int64)
    cols = np.empty(J + 2, dtype=np.int64)
    x0 = np.empty(npt)
    L0 = np.empty(npt)
    it0 = np.empty(npt, dtype=np.int64)
    s0 = np.empty(npt, dtype=np.int64)
    guess = np.full(npt, np.nan)
    nz = np.empty(J + 2, dtype=np.int64)
    plan = relaxation_plan(mix, mol)
    solve_few(mode, T, value, guess, mix, 1e-13, 200, x0, L0, it0, s0)
    for p in range(npt):
        code = s0[p]
        if code == st.NO_SOLUTION and mode == MODE_ELECTRON_PRESSURE and x0[p] == x0[p]:
            code = st.OK  # molecular ions may still supply the charge: try the joint solve
            L0[p] = math.log(value[p]) - math.log(K_B * T[p])
        if code != st.OK and code != st.MAX_ITERATIONS:
            out_x[p] = np.nan
            out_ln_nuc[p] = np.nan
            out_iter[p] = it0[p]
            out_status[p] = code
            for e in range(atoms.size):
                out_atoms[p, e] = np.nan
            for m in range(M):
                out_lnn_mol[p, m] = np.nan
            continue
        x, L, it, code = chem_point(mode, T[p], value[p], mix, mol, elem_former, tol, max_iter, x0[p], L0[p],
                                    C, phi, lnn, atoms, u, ut, r, Jm, A, d, rows, cols, nz, plan)
        out_x[p] = x
        out_ln_nuc[p] = L
        out_iter[p] = it0[p] + it
        out_status[p] = code
        for e in range(atoms.size):
            out_atoms[p, e] = atoms[e]
        for m in range(M):
            out_lnn_mol[p, m] = lnn[m]


@pjit
def chem_solve_many(mode, T, value, mix, mol, elem_former, tol, max_iter, out_x, out_ln_nuc, out_atoms,
                    out_lnn_mol, out_iter, out_status):
    """Parallel driver of :func:`chem_solve_few` over contiguous chunks (results independent of chunking)."""
    n = T.size
    n_chunks = min(n, N_CHUNKS)
    for c in prange(n_chunks):
        start = (c * n) // n_chunks
        stop = ((c + 1) * n) // n_chunks
        chem_solve_few(mode, T[start:stop], value[start:stop], mix, mol, elem_former, tol, max_iter,
                       out_x[start:stop], out_ln_nuc[start:stop], out_atoms[start:stop],
                       out_lnn_mol[start:stop], out_iter[start:stop], out_status[start:stop])


@pjit
def ln_neutral_fraction_many(T, x, mix, out):
    """ln of the share of each element's free atoms in its neutral stage: ``out`` (n_points, n_elements).

    From the closed-form Saha weights of :func:`.saha.closed_log_weights` (no recurrence, so no
    round-off accumulated over the stages of heavy elements in hot gas) and each element's
    populated window (:func:`.saha.element_charge_powers`); NaN where ``x`` is not finite.
    """
    n = T.size
    nE = mix.elem_w.size
    n_chunks = min(n, N_CHUNKS)
    q53 = charge_power_table(int(np.max(mix.elem_n)) + 1)
    for c in prange(n_chunks):
        start = (c * n) // n_chunks
        stop = ((c + 1) * n) // n_chunks
        C = np.empty(mix.stage_chi.size)
        for p in range(start, stop):
            if not (math.isfinite(x[p]) and T[p] > 0.0 and T[p] < np.inf):
                for e in range(nE):
                    out[p, e] = np.nan
                continue
            closed_log_weights(T[p], mix, C)
            for e in range(nE):
                f = mix.elem_first[e]
                kn = -mix.elem_q0[e]
                q2, qf, pos, m, lns = element_charge_powers(C, f, mix.elem_n[e], mix.elem_q0[e], x[p], q53)
                out[p, e] = C[f + kn] - kn * x[p] - m - lns
