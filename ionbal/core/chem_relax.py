"""Relaxation pieces of the joint molecular + ionization solve (:mod:`ionbal.core.chem`).

One element's conservation solved for its free-atom density with everything else fixed, the most
abundant formers solved together the same way (the block of the Gauss-Seidel sweeps), the CSR lists
of the molecules of every former, and the elimination order of the Newton matrix.  Plain float
arrays in fixed cgs units.
"""

from __future__ import annotations

import math

import numpy as np

from .config import jit
from .chem_terms import _atomic_sums, _solve_linear

#: largest change of any unknown (in ln) per Newton step
STEP_CAP = 4.0


@jit
def _element_1d(j, u, C, phi, mix, mol, mol_of, cnt_of, start_of, lnA):
    """Solve element ``j``'s conservation for ``y_j`` with every other unknown fixed.

    ``ln(sum_k exp(nu_k y + c_k)) = ln w_j + L`` is convex and increasing in ``y``, so Newton
    converges from either side (at most one overshoot, then monotonically).
    """
    J = mol.former_elem.size
    e = mol.former_elem[j]
    x = u[J]
    target = math.log(mix.elem_w[e]) + u[J + 1]
    y = u[j]
    for _ in range(60):
        # terms: atomic (nu = 1) and every molecule holding j
        m0 = y + lnA
        for k in range(start_of[j], start_of[j + 1]):
            m = mol_of[k]
            t = phi[m] - mol.mol_charge[m] * x
            for c in range(3):
                jj = mol.mol_comp[m, c]
                if jj >= 0:
                    t += mol.mol_count[m, c] * u[jj] if jj != j else mol.mol_count[m, c] * y
            if t > m0:
                m0 = t
        s0 = math.exp(y + lnA - m0)
        s1 = s0
        for k in range(start_of[j], start_of[j + 1]):
            m = mol_of[k]
            t = phi[m] - mol.mol_charge[m] * x
            for c in range(3):
                jj = mol.mol_comp[m, c]
                if jj >= 0:
                    t += mol.mol_count[m, c] * u[jj] if jj != j else mol.mol_count[m, c] * y
            w = cnt_of[k] * math.exp(t - m0)
            s0 += w
            s1 += cnt_of[k] * w
        f = m0 + math.log(s0) - target
        step = f / (s1 / s0)
        y -= step
        if abs(step) <= 1e-15 * max(1.0, abs(y)):
            break
    u[j] = y


#: the most abundant formers solved together in the Gauss-Seidel sweeps (C and O locked in CO
#: converge one sweep at a time, by a factor ~n(CO)/n(O) per sweep, if solved one by one)
N_HUBS = 8


@jit
def _hub_residual(hubs, K, u, C, phi, mix, mol, mol_of, cnt_of, start_of, hub_of, G, g, want_jac):
    """Log residuals ``g`` of the hub element equations (and with ``want_jac`` their Jacobian ``G``); returns max |g|."""
    J = mol.former_elem.size
    x = u[J]
    worst = 0.0
    for a in range(K):
        if want_jac:
            for b in range(K):
                G[a, b] = 0.0
        j = hubs[a]
        e = mol.former_elem[j]
        lnA, p1, p2, n1, n2 = _atomic_sums(C, mix.elem_first[e], mix.elem_n[e], mix.elem_q0[e], x)
        m0 = u[j] + lnA
        for k in range(start_of[j], start_of[j + 1]):
            m = mol_of[k]
            t = phi[m] - mol.mol_charge[m] * x
            for c in range(3):
                jj = mol.mol_comp[m, c]
                if jj >= 0:
                    t += mol.mol_count[m, c] * u[jj]
            if t > m0:
                m0 = t
        s0 = math.exp(u[j] + lnA - m0)
        if want_jac:
            G[a, a] += s0
        for k in range(start_of[j], start_of[j + 1]):
            m = mol_of[k]
            t = phi[m] - mol.mol_charge[m] * x
            for c in range(3):
                jj = mol.mol_comp[m, c]
                if jj >= 0:
                    t += mol.mol_count[m, c] * u[jj]
            w = math.exp(t - m0)
            s0 += cnt_of[k] * w
            if want_jac:
                for c in range(3):
                    jj = mol.mol_comp[m, c]
                    if jj >= 0 and hub_of[jj] >= 0:
                        G[a, hub_of[jj]] += cnt_of[k] * mol.mol_count[m, c] * w
        if want_jac:
            for b in range(K):
                G[a, b] /= s0
        g[a] = m0 + math.log(s0) - math.log(mix.elem_w[e]) - u[J + 1]
        worst = max(worst, abs(g[a]))
    return worst


@jit
def _hub_block(hubs, K, u, C, phi, mix, mol, mol_of, cnt_of, start_of, hub_of, G, g, d, y0, nz):
    """Solve the element equations of the ``K`` formers ``hubs`` together, every other unknown fixed.

    Damped Newton on their log residuals; a step is kept only if it lowers the worst of them, so
    the block never undoes the one-by-one solves before it.  ``hub_of`` maps a former to its
    position in ``hubs`` (-1 otherwise); ``G``, ``g``, ``d``, ``y0``, ``nz``: work space.
    """
    worst = _hub_residual(hubs, K, u, C, phi, mix, mol, mol_of, cnt_of, start_of, hub_of, G, g, True)
    for _ in range(20):
        if not (worst > 1e-14):
            return
        for a in range(K):
            d[a] = -g[a]
            y0[a] = u[hubs[a]]
        if not _solve_linear(G, d, K, nz):
            return
        big = 0.0
        for a in range(K):
            big = max(big, abs(d[a]))
        alpha = 1.0 if big <= STEP_CAP else STEP_CAP / big
        ok = False
        for _b in range(12):
            for a in range(K):
                u[hubs[a]] = y0[a] + alpha * d[a]
            w1 = _hub_residual(hubs, K, u, C, phi, mix, mol, mol_of, cnt_of, start_of, hub_of, G, g, True)
            if w1 < worst:
                ok = True
                break
            alpha *= 0.5
        if not ok:
            for a in range(K):
                u[hubs[a]] = y0[a]
            return
        worst = w1


@jit
def former_molecules(mol):
    """CSR lists of the molecules of every former: ``(mol_of, cnt_of, start_of)``."""
    J = mol.former_elem.size
    M = mol.mol_d0.size
    start = np.zeros(J + 1, dtype=np.int64)
    for m in range(M):
        for c in range(3):
            j = mol.mol_comp[m, c]
            if j >= 0:
                start[j + 1] += 1
    for j in range(J):
        start[j + 1] += start[j]
    fill = start[:J].copy()
    mol_of = np.empty(start[J], dtype=np.int64)
    cnt_of = np.empty(start[J], dtype=np.int64)
    for m in range(M):
        for c in range(3):
            j = mol.mol_comp[m, c]
            if j >= 0:
                mol_of[fill[j]] = m
                cnt_of[fill[j]] = mol.mol_count[m, c]
                fill[j] += 1
    return mol_of, cnt_of, start


@jit
def elimination_order(mix, mol):
    """The former unknowns, rarest element first.

    The Newton matrix is sparse: a trace element's row and column are non-zero only towards the
    few abundant partners it forms molecules with (its hydride, oxide, ...), and towards ``x`` and
    ``L``.  Eliminated first, the trace elements leave no fill-in, and Gaussian elimination (which
    skips zero multipliers and zero pivot-row entries) costs ~J instead of ~J^3/3.
    """
    J = mol.former_elem.size
    w = np.empty(J)
    for j in range(J):
        w[j] = mix.elem_w[mol.former_elem[j]]
    return np.argsort(w, kind="mergesort")


@jit
def relaxation_plan(mix, mol):
    """Everything the sweeps need that depends only on the mixture, built once per chunk.

    ``(mol_of, cnt_of, start_of, order, hubs, hub_of, G, g, d, y0, nz)``: the CSR lists of
    :func:`former_molecules`, the :func:`elimination_order`, the ``K = min(J, N_HUBS)`` most abundant
    formers ``hubs`` with their positions ``hub_of`` (-1 for the others), and the work space of
    :func:`_hub_block`.
    """
    J = mol.former_elem.size
    mol_of, cnt_of, start_of = former_molecules(mol)
    order = elimination_order(mix, mol)
    K = min(J, N_HUBS)
    hubs = order[J - K:].copy()
    hub_of = np.full(J, -1, dtype=np.int64)
    for a in range(K):
        hub_of[hubs[a]] = a
    return (mol_of, cnt_of, start_of, order, hubs, hub_of, np.empty((K, K)), np.empty(K), np.empty(K),
            np.empty(K), np.empty(K, dtype=np.int64))
