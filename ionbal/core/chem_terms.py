"""Building blocks of the joint molecular + ionization solve (:mod:`ionbal.core.chem`).

Per-point Saha weights relative to each element's neutral stage, the atomic sums of one element,
the dissociation constants at T, and the small dense linear solve and merit function of the
Newton step.  Plain float arrays in fixed cgs units (energies in eV).
"""

from __future__ import annotations

import math

import numpy as np

from .config import jit
from .constants import K_B_EV, LN_SAHA_CONST

#: terms more than this (in ln) below an element's peak are dropped: exp(-CUT) ~ 1e-20 relative
CUT = 46.0
LN2 = math.log(2.0)


@jit
def _log_weights(T, mix, C):
    """Cumulative log Saha weights of all stages: ``ln(n_s/n_first) = C[s] - k x`` (own copy of the recurrence)."""
    lnU = mix.lnU
    n_t = lnU.shape[1]
    u = (math.log10(T) - mix.lt0) / mix.dlt
    i = int(math.floor(u))
    if i < 0:
        i = 0
    elif i > n_t - 2:
        i = n_t - 2
    w = min(max(u - i, 0.0), 1.0)
    base = LN2 + LN_SAHA_CONST + 1.5 * math.log(T)
    beta = 1.0 / (K_B_EV * T)
    for e in range(mix.elem_w.size):
        f = mix.elem_first[e]
        prev = 0.0
        for k in range(mix.elem_n[e]):
            s = f + k
            r = mix.stage_row[s]
            if r < 0:
                lnu = mix.stage_lnu_const[s]
            else:
                lnu = (1.0 - w) * lnU[r, i] + w * lnU[r, i + 1]
            if k == 0:
                C[s] = 0.0
            else:
                C[s] = C[s - 1] + base + lnu - prev - mix.stage_chi[s - 1] * beta
            prev = lnu


@jit
def _atomic_sums(C, f, n, q0, x):
    """``(lnA, pos, pos2, neg, neg2)`` of one element at ``x``.

    ``A = sum_q exp(D_q - q x)`` = atoms per neutral atom; ``pos = <q>_{q>0}``,
    ``pos2 = <q^2>_{q>0}``, ``neg = <-q>_{q<0}``, ``neg2 = <q^2>_{q<0}`` per atom.
    """
    kn = -q0
    cn = C[f + kn]
    m = -np.inf
    for k in range(n):
        t = C[f + k] - cn - (k - kn) * x
        if t > m:
            m = t
    # terms far below the peak are dropped -- but not the charged stages next to the neutral atom,
    # which carry the element's charge however rare they are (cool gas)
    low = m
    if kn + 1 < n:
        low = min(low, C[f + kn + 1] - cn - x)
    if kn >= 1:
        low = min(low, C[f + kn - 1] - cn + x)
    low = low - CUT - m
    s0 = 0.0
    sp = 0.0
    sp2 = 0.0
    sn = 0.0
    sn2 = 0.0
    for k in range(n):
        t = C[f + k] - cn - (k - kn) * x - m
        if t < low:
            continue
        p = math.exp(t)
        q = k - kn
        s0 += p
        if q > 0:
            sp += q * p
            sp2 += q * q * p
        elif q < 0:
            sn -= q * p
            sn2 += q * q * p
    return m + math.log(s0), sp / s0, sp2 / s0, sn / s0, sn2 / s0


@jit
def _ln_kp(T, mol, out):
    """ln Kp (cgs) of every molecule at T."""
    g = mol.mol_g
    n_t = g.shape[1]
    lt = math.log10(T)
    u = (lt - mol.g_lt0) / mol.g_dlt
    beta = 1.0 / (K_B_EV * T)
    if u >= n_t - 1:
        dl = (lt - (mol.g_lt0 + (n_t - 1) * mol.g_dlt)) * math.log(10.0)
        for m in range(g.shape[0]):
            out[m] = g[m, n_t - 1] + mol.mol_slope[m] * dl - mol.mol_d0[m] * beta
        return
    i = int(math.floor(u))
    if i < 0:
        i = 0
    w = min(max(u - i, 0.0), 1.0)
    for m in range(g.shape[0]):
        out[m] = (1.0 - w) * g[m, i] + w * g[m, i + 1] - mol.mol_d0[m] * beta


@jit
def _pivot(A, c, n):
    """Partial pivoting of column ``c`` of ``A[:n, :n]``: the row of largest ``|A[i, c]|`` (``i >= c``)
    is swapped into row ``c``; returns its former index, or -1 when the column is zero there."""
    p = c
    big = abs(A[c, c])
    for i in range(c + 1, n):
        if abs(A[i, c]) > big:
            big = abs(A[i, c])
            p = i
    if not (big > 0.0):
        return -1
    if p != c:
        for k in range(n):
            t = A[c, k]
            A[c, k] = A[p, k]
            A[p, k] = t
    return p


@jit
def _solve_linear(A, b, n, nz):
    """Solve ``A[:n, :n] d = b[:n]`` in place (Gaussian elimination, partial pivoting); ``b`` becomes ``d``.

    ``nz`` is integer work space of length >= n.
    """
    for c in range(n):
        p = _pivot(A, c, n)
        if p < 0:
            return False
        if p != c:
            t = b[c]
            b[c] = b[p]
            b[p] = t
        inv = 1.0 / A[c, c]
        # the pivot row's non-zero columns once (the Newton matrix of the molecular solve is sparse)
        m = 0
        for k in range(c + 1, n):
            if A[c, k] != 0.0:
                nz[m] = k
                m += 1
        for i in range(c + 1, n):
            fct = A[i, c] * inv
            if fct != 0.0:
                for t in range(m):
                    k = nz[t]
                    A[i, k] -= fct * A[c, k]
                b[i] -= fct * b[c]
    for c in range(n - 1, -1, -1):
        s = b[c]
        for k in range(c + 1, n):
            s -= A[c, k] * b[k]
        b[c] = s / A[c, c]
    return True


@jit
def _solve_multi(A, B, n, m):
    """:func:`_solve_linear` for ``m`` right-hand sides at once: ``A[:n, :n] X = B[:n, :m]``, ``B`` becomes ``X``.

    (The Newton step keeps the one-column version: it runs in the solve's inner loop.)
    """
    for c in range(n):
        p = _pivot(A, c, n)
        if p < 0:
            return False
        if p != c:
            for k in range(m):
                t = B[c, k]
                B[c, k] = B[p, k]
                B[p, k] = t
        inv = 1.0 / A[c, c]
        for i in range(c + 1, n):
            fct = A[i, c] * inv
            if fct != 0.0:
                for k in range(c + 1, n):
                    A[i, k] -= fct * A[c, k]
                for k in range(m):
                    B[i, k] -= fct * B[c, k]
    for c in range(n - 1, -1, -1):
        for k in range(m):
            t = B[c, k]
            for i in range(c + 1, n):
                t -= A[c, i] * B[i, k]
            B[c, k] = t / A[c, c]
    return True


@jit
def _merit(r, rows, n):
    s = 0.0
    worst = 0.0
    for a in range(n):
        v = r[rows[a]]
        s += v * v
        t = abs(math.expm1(v))
        if t > worst:
            worst = t
    return 0.5 * s, worst
