"""Ionization balance of hot, dense gas: dissolved levels and an optional Coulomb correction.

Entry point :func:`solve_dense` (layer 3, plain arrays in and out; wired into
``ionbal.solve``, ``ionbal grid`` and ``ionbal column`` separately).

Physics
-------
*Occupation probabilities* (Hummer & Mihalas 1988, ApJ 331, 794; charged-perturber
term as fitted by Hubeny, Hummer & Lanz 1994, A&A 282, 151): every level of
the tabulated level sums gets a probability w of surviving the neutral
(excluded volume) and charged (microfield) perturbers, and ln U of each
treated stage is corrected by ``ln(sum w g e^{-E/kT} / U_table)``; see
:mod:`ionbal.core.occupation`.  The correction is 0 where no level is
dissolved, so low-density answers do not move.  Treated: every stage whose
table column is a level sum (stages I-III with NIST levels, H I analytic to
n = 17; He II and Li III to n = 20).  Stages IV and higher keep their
ground-level weight (hydrogenic C VI ... are ground-only in the table and are
not corrected; their ground levels survive far beyond the densities of stellar
atmospheres).

*Debye-Hueckel* (Debye & Hueckel 1923, Phys. Z. 24, 185), off by default
(``coulomb=True``): with ``1/lambda_D^2 = 4 pi e^2 (n_e + sum_j n_j q_j^2) / kT``
(electrons and every ion, H- included) the excess free energy is
``F_ex = -kT V / (12 pi lambda_D^3)``, so the excess chemical potential of a
particle of charge q is ``-q^2 e^2 / (2 lambda_D)`` and the pressure is
``P = (n_nuc + n_e) kT - kT / (24 pi lambda_D^3)``.  Chemical equilibrium
``mu_q = mu_{q+1} + mu_e`` then lowers the ionization energy of stage q by
``Delta chi_q = (q + 1) e^2 / lambda_D`` (electrons included in lambda_D) --
equivalently ln U_q += q (q + 1) / 2 * e^2 / (lambda_D kT).  The lowering and the
pressure correction come from the same F_ex, which makes them thermodynamically
consistent (common practice; e.g. the textbook treatment of the Debye-Hueckel
plasma in Landau & Lifshitz, Statistical Physics, sect. 78-79 -- from memory).

Solution
--------
The corrections depend on the solution (n_e, the neutral density, the ion
charges), so an *outer fixed point* wraps the unchanged Newton solve: solve
with the current corrections (kernel ``solve_many_dlnu``, warm-started from the
previous x = ln n_e), recompute the corrections from that solution, repeat at
the points whose corrections still change by more than ``dl_tol``.  The first
pass has no corrections (today's solve); points where nothing is dissolved stop
after it.  For the gas-pressure input with ``coulomb=True`` the ideal-gas
pressure the solver sees is ``P + kT / (24 pi lambda_D^3)``.
"""

from __future__ import annotations

import math
from typing import NamedTuple

import numpy as np

from .core import status as st
from .core.constants import E_CHARGE, K_B
from .core.occupation import dlnu_many, neutral_density_many
from .core.solver import (
    MAX_ITER,
    MODE_ELECTRON_PRESSURE,
    MODE_GAS_PRESSURE,
    MODE_NUCLEI_DENSITY,
    TOL,
    ion_moments_many_dlnu,
    solve_many_dlnu,
)
from .data.dissolution import dissolution_arrays

__all__ = ["DenseSolution", "solve_dense", "debye_parameters"]

#: points per block of the outer iteration (bounds the memory of the correction arrays)
CHUNK = 4096
#: outer iterations allowed; the update is damped (1/2) from :data:`DAMP_AFTER` on.  In gas at
#: P > 1e11 dyn cm^-2 (far above the default grid) the excluded-volume term can keep the iteration
#: from settling (more ionization, fewer neutral perturbers, less dissolution): status MAX_ITERATIONS
MAX_OUTER = 60
DAMP_AFTER = 12


class DenseSolution(NamedTuple):
    """Result of :func:`solve_dense`, flat arrays over the points."""

    ln_ne: np.ndarray        # ln n_e [cm^-3]
    ln_nuc: np.ndarray       # ln n_nuclei [cm^-3]
    status: np.ndarray       # int status codes (ionbal.core.status)
    iterations: np.ndarray   # Newton iterations summed over the outer passes
    outer: np.ndarray        # outer (fixed-point) passes
    dl_stage: np.ndarray     # int64 [k]: stages with a ln U correction
    dl_val: np.ndarray       # float64 [n, k]: the corrections the solution converged to
    p_coulomb: np.ndarray    # Debye-Hueckel pressure correction [dyn cm^-2] (<= 0; 0 without coulomb)


def debye_parameters(T, ln_ne, ln_nuc, q2_per_nucleus):
    """``(Gamma_D, p_corr)``: e^2 / (lambda_D kT) and the pressure correction -kT / (24 pi lambda_D^3)."""
    T = np.asarray(T, dtype=np.float64)
    kT = K_B * T
    charge_density = np.exp(ln_ne) + np.exp(ln_nuc) * q2_per_nucleus
    inv_lambda = np.sqrt(4.0 * math.pi * E_CHARGE**2 * charge_density / kT)
    gamma = E_CHARGE**2 * inv_lambda / kT
    with np.errstate(over="ignore", invalid="ignore"):
        return gamma, -kT * inv_lambda**3 / (24.0 * math.pi)


def _stage_set(packed, diss, occupation, coulomb):
    """Union of the corrected stages, with the column of each occupation-treated stage."""
    stages = set(int(s) for s in diss.stage) if occupation else set()
    charges = np.array([sp.charge for sp in packed.species])
    if coulomb:
        stages |= set(int(s) for s in np.nonzero(charges >= 1)[0])
    dl_stage = np.array(sorted(stages), dtype=np.int64)
    col = {s: j for j, s in enumerate(dl_stage)}
    occ_cols = np.array([col[int(s)] for s in diss.stage], dtype=np.int64) if occupation else np.zeros(0, np.int64)
    q = charges[dl_stage].astype(np.float64)
    return dl_stage, occ_cols, 0.5 * q * (q + 1.0)


def _neutral(T, x, lnn, packed, sel, dl_stage, dl_cur):
    out = np.empty(T.size)
    neutral_density_many(T, x, lnn, sel, packed.arrays, dl_stage, dl_cur, out)
    return out


def _corrections(T, x, lnn, ln_neutral, packed, diss, occ_cols, coul_factor, occupation, coulomb, dl_stage,
                 dl_cur):
    """The corrections (n, k) implied by the solution ``x, lnn`` (and the current ones for the fractions)."""
    mix = packed.arrays
    n = T.size
    out = np.zeros((n, dl_stage.size))
    p_corr = np.zeros(n)
    if occupation and diss.stage.size:
        occ = np.empty((n, diss.stage.size))
        dlnu_many(T, x, ln_neutral, diss.stage, diss.start, diss.nstar, diss.lng, diss.energy, diss.z, mix, occ)
        out[:, occ_cols] += occ
    if coulomb:
        mom = np.empty((n, 3))
        ion_moments_many_dlnu(T, x, mix, dl_stage, dl_cur, mom)
        gamma, p_corr = debye_parameters(T, x, lnn, mom[:, 0])
        out += gamma[:, None] * coul_factor[None, :]
    return out, p_corr


def solve_dense(mode, T, value, packed, *, occupation=True, coulomb=False, tol=TOL, max_iter=MAX_ITER,
                dl_tol=1e-8, max_outer=MAX_OUTER, x_guess=None):
    """Solve the ionization balance with dissolved levels (and, optionally, the Debye-Hueckel correction).

    Parameters
    ----------
    mode : int
        ``MODE_GAS_PRESSURE``, ``MODE_NUCLEI_DENSITY`` or ``MODE_ELECTRON_PRESSURE`` of
        :mod:`ionbal.core.solver`.
    T, value : array_like
        Temperature [K] and the state input (cgs), flattened.
    packed : PackedMixture
        From :func:`ionbal.data.pack.pack`.
    occupation : bool
        Apply the occupation probabilities (default True).
    coulomb : bool
        Apply the Debye-Hueckel lowering and pressure correction (default False).
    dl_tol : float
        The outer iteration stops at a point when no correction changes by more than this.

    Returns
    -------
    DenseSolution
    """
    if mode not in (MODE_GAS_PRESSURE, MODE_NUCLEI_DENSITY, MODE_ELECTRON_PRESSURE):
        raise ValueError(f"unknown mode {mode!r}")
    if not (dl_tol > 0.0):
        raise ValueError(f"dl_tol must be positive, got {dl_tol!r}")
    T = np.ascontiguousarray(T, dtype=np.float64).ravel()
    value = np.ascontiguousarray(value, dtype=np.float64).ravel()
    if T.shape != value.shape:
        raise ValueError(f"T and value must have the same size, got {T.size} and {value.size}")
    n = T.size
    diss = dissolution_arrays(packed)
    dl_stage, occ_cols, coul_factor = _stage_set(packed, diss, occupation, coulomb)
    sel = np.array([packed.element_index(z) for z in (1, 2) if z in set(int(a) for a in packed.atomic_numbers)],
                   dtype=np.int64)
    k = dl_stage.size
    res = DenseSolution(np.full(n, np.nan), np.full(n, np.nan), np.zeros(n, np.int64), np.zeros(n, np.int64),
                        np.zeros(n, np.int64), dl_stage, np.zeros((n, k)), np.zeros(n))
    xg_all = np.full(n, np.nan) if x_guess is None else np.ascontiguousarray(x_guess, dtype=np.float64).ravel()
    for a in range(0, n, CHUNK):
        b = min(n, a + CHUNK)
        _solve_block(mode, T[a:b], value[a:b], xg_all[a:b], packed, diss, sel, occ_cols, coul_factor,
                     occupation, coulomb, dl_stage, tol, max_iter, dl_tol, max_outer, res, a)
    return res


def _solve_block(mode, T, value, xg, packed, diss, sel, occ_cols, coul_factor, occupation, coulomb, dl_stage,
                 tol, max_iter, dl_tol, max_outer, res, a0):
    mix = packed.arrays
    n = T.size
    k = dl_stage.size
    x = np.empty(n)
    lnn = np.empty(n)
    it = np.empty(n, np.int64)
    code = np.empty(n, np.int64)
    dl = np.zeros((n, k))
    p_corr = np.zeros(n)
    solve_many_dlnu(mode, T, value, xg.copy(), mix, dl_stage, dl, tol, max_iter, x, lnn, it, code)
    iters = it.copy()
    outer = np.ones(n, np.int64)
    active = np.nonzero(code == st.OK)[0] if k else np.zeros(0, np.int64)
    # the occupation corrections depend on the point only through (x, ln n_neutral): where neither moved
    # since the corrections were last evaluated, they are converged without evaluating them again
    seen_x = np.full(n, np.nan)
    seen_neu = np.full(n, np.nan)
    for rnd in range(1, max_outer + 1):
        if active.size == 0:
            break
        Ta = T[active]
        dla = np.ascontiguousarray(dl[active])
        neu = _neutral(Ta, x[active], lnn[active], packed, sel, dl_stage, dla)
        if not coulomb and rnd - 1 < DAMP_AFTER:  # the last update was undamped: dl = f(seen state)
            # d ln U moves by at most ~3 |d ln U| times the relative change of n_e or n_neutral (the
            # microfield term goes as n_e^-2 at most, with the correlation factor as n_e^{1/6}; the
            # excluded-volume term as n_neutral): below dl_tol / 4 nothing needs evaluating
            shift = np.maximum(np.abs(x[active] - seen_x[active]), np.abs(neu - seen_neu[active]))
            same = 3.0 * np.max(np.abs(dla), axis=1, initial=0.0) * np.expm1(shift) < 0.25 * dl_tol
            active, Ta, dla, neu = active[~same], Ta[~same], dla[~same], neu[~same]
            if active.size == 0:
                break
        seen_x[active] = x[active]
        seen_neu[active] = neu
        new, pc = _corrections(Ta, x[active], lnn[active], neu, packed, diss, occ_cols, coul_factor, occupation,
                               coulomb, dl_stage, dla)
        change = np.max(np.abs(new - dla), axis=1) if k else np.zeros(active.size)
        if coulomb and mode == MODE_GAS_PRESSURE:
            change = np.maximum(change, np.abs(pc - p_corr[active]) / value[active])
        moving = change > dl_tol
        done = active[~moving]
        p_corr[done] = pc[~moving]
        active = active[moving]
        if active.size == 0:
            break
        theta = 1.0 if rnd < DAMP_AFTER else 0.5
        dl[active] += theta * (new[moving] - dl[active])
        p_corr[active] += theta * (pc[moving] - p_corr[active])
        va = value[active]
        if coulomb and mode == MODE_GAS_PRESSURE:
            va = va - p_corr[active]  # the ideal-gas pressure: P + kT / (24 pi lambda_D^3)
            # Debye-Hueckel beyond weak coupling: the correction no longer stays finite
            runaway = ~(np.isfinite(va) & (va < 1e3 * value[active]))
            if runaway.any():
                code[active[runaway]] = st.NO_SOLUTION
                keep = ~runaway
                active, va = active[keep], va[keep]
                if active.size == 0:
                    break
        xa = np.empty(active.size)
        la = np.empty(active.size)
        ia = np.empty(active.size, np.int64)
        ca = np.empty(active.size, np.int64)
        solve_many_dlnu(mode, np.ascontiguousarray(T[active]), np.ascontiguousarray(va), x[active].copy(), mix,
                        dl_stage, np.ascontiguousarray(dl[active]), tol, max_iter, xa, la, ia, ca)
        x[active] = xa
        lnn[active] = la
        iters[active] += ia
        code[active] = ca
        outer[active] += 1
        active = active[ca == st.OK]
    if active.size:
        code[active] = st.MAX_ITERATIONS  # the outer iteration did not settle
    s = slice(a0, a0 + n)
    res.ln_ne[s] = x
    res.ln_nuc[s] = lnn
    res.status[s] = code
    res.iterations[s] = iters
    res.outer[s] = outer
    res.dl_val[s] = dl
    res.p_coulomb[s] = p_corr
