"""Charge- and particle-conservation solve: scalar kernel plus ``prange`` drivers.

Unknowns per point: ``x = ln n_e`` and the total nuclei density ``n_nuc``.
With ``Qpos(x)`` and ``Qneg(x)`` the positive charge (ions) and negative
charge (H-) per nucleus (see :func:`.saha.charge_moments`), charge
conservation reads ``n_e + n_nuc Qneg = n_nuc Qpos``; the state variable
closes the system:

``MODE_GAS_PRESSURE`` (value = P_gas [dyn cm^-2])
    ideal gas, ``P_gas = (n_nuc + n_e) k T``, so ``n_nuc = P/kT - n_e``.
``MODE_NUCLEI_DENSITY`` (value = n_nuc [cm^-3])
    hydrogen and mass density are converted to it by the caller.
``MODE_ELECTRON_PRESSURE`` (value = P_e [dyn cm^-2])
    ``x`` is known and ``n_nuc = n_e / (Qpos - Qneg)`` follows directly.

For the first two the root of

    h(x) = ln(n_nuc Qpos) - ln(n_e + n_nuc Qneg)

is found; ``h`` is strictly decreasing (positive charge falls and negative
charge rises with n_e), defined for every x, and the root is unique.  The
iteration is Newton's method on ``x`` inside a bracket ``[lo, hi]`` that
always holds the root: ``hi`` starts at the full-ionization bound
``n_e <= P/kT * Qmax / (1 + Qmax)`` (``n_nuc Qmax`` for the density input),
each evaluation moves one end, and a Newton step leaving the bracket is
replaced by bisection.  Convergence: ``|n_e + n(H-) - sum q n_ion|`` at most
``tol`` times the total positive charge ``sum q n_ion``.
"""

from __future__ import annotations

import math

import numpy as np

from . import status as st
from .config import jit, pjit, prange
from .constants import K_B
from .saha import (
    charge_moments,
    element_charge_powers,
    element_log_fractions,
    element_log_weights,
    log_weights,
    saha_base,
    table_position,
)

MODE_GAS_PRESSURE = 0
MODE_NUCLEI_DENSITY = 1
MODE_ELECTRON_PRESSURE = 2

#: default relative tolerance on charge conservation (w.r.t. total positive charge)
TOL = 1e-13
#: tolerance accepted when the Newton step has stagnated at round-off level
TOL_STAGNATION = 1e-12
MAX_ITER = 200
#: the parallel drivers split their points into at most this many contiguous chunks (one work array each)
N_CHUNKS = 256
#: |h| below which the last Newton step is taken without evaluating its residual (quadratic convergence)
FINAL_STEP = 1e-8


@jit
def chunk_bounds(c, n, n_chunks):
    """``(start, stop)`` of chunk ``c`` when ``n`` points are split into ``n_chunks`` contiguous chunks."""
    return (c * n) // n_chunks, ((c + 1) * n) // n_chunks


@jit
def weak_ionization_guess(C, lnN, elem_w, elem_first, elem_q0):
    """Starting ln n_e when every element is at most singly and weakly ionized.

    Then ``n_e^2 = n_nuc sum_e w_e S_e`` with ``S_e`` the Saha factor of each
    element's neutral stage, so ``x = (ln n_nuc + ln sum_e w_e S_e) / 2``;
    where ionization is strong this overshoots and the caller clips it to
    the full-ionization bound.
    """
    m = -np.inf
    for e in range(elem_w.size):
        f = elem_first[e] - elem_q0[e]  # the neutral stage (after H-)
        t = math.log(elem_w[e]) + C[f + 1] - C[f]
        if t > m:
            m = t
    s = 0.0
    for e in range(elem_w.size):
        f = elem_first[e] - elem_q0[e]
        s += math.exp(math.log(elem_w[e]) + C[f + 1] - C[f] - m)
    return 0.5 * (lnN + m + math.log(s))


@jit
def solve_point(mode, T, value, x_guess, C, kpk, mix, tol, max_iter):
    """Solve one state.  ``C`` (n_stages) and ``kpk`` (int, n_elements) are work arrays.

    ``mix`` is the :class:`~ionbal.core.bundle.MixtureArrays` bundle.
    Returns ``(x, ln_n_nuc, iterations, status)``.
    """
    elem_w = mix.elem_w
    elem_first = mix.elem_first
    elem_n = mix.elem_n
    elem_q0 = mix.elem_q0
    stage_chi = mix.stage_chi
    stage_row = mix.stage_row
    stage_lnu_const = mix.stage_lnu_const
    lnU = mix.lnU
    lt0 = mix.lt0
    dlt = mix.dlt
    q_max = mix.q_max
    nan = np.nan
    if not (T > 0.0 and T < np.inf and value > 0.0 and value < np.inf):
        return nan, nan, 0, st.INVALID_INPUT
    n_t = lnU.shape[1]
    lgT = math.log10(T)
    if lgT < lt0 - 1e-12 or lgT > lt0 + (n_t - 1) * dlt + 1e-12:
        return nan, nan, 0, st.TEMPERATURE_OUT_OF_RANGE

    log_weights(T, elem_first, elem_n, stage_chi, stage_row, stage_lnu_const, lnU, lt0, dlt, C)
    return solve_from_weights(mode, T, value, x_guess, C, kpk, mix, tol, max_iter)


@jit
def solve_from_weights(mode, T, value, x_guess, C, kpk, mix, tol, max_iter):
    """The solve of :func:`solve_point` once the cumulative log Saha weights ``C`` of the point are known."""
    elem_w = mix.elem_w
    elem_first = mix.elem_first
    elem_n = mix.elem_n
    elem_q0 = mix.elem_q0
    q_max = mix.q_max
    nan = np.nan
    kT = K_B * T
    for e in range(kpk.size):
        kpk[e] = -1  # first evaluation scans every stage: no state carried between points

    if mode == MODE_ELECTRON_PRESSURE:
        x = math.log(value) - math.log(kT)
        Qpos, Qneg, dQpos, dQneg = charge_moments(C, x, elem_w, elem_first, elem_n, elem_q0, kpk)
        Q = Qpos - Qneg
        if not (Q > 0.0):
            return x, nan, 1, st.NO_SOLUTION
        return x, x - math.log(Q), 1, st.OK

    if mode == MODE_GAS_PRESSURE:
        lnN = math.log(value) - math.log(kT)
        hi = lnN + math.log(q_max / (1.0 + q_max))
    else:
        lnN = math.log(value)
        hi = lnN + math.log(q_max)
    lo = -np.inf

    x = x_guess
    if not (x == x):
        x = weak_ionization_guess(C, lnN, elem_w, elem_first, elem_q0)
    if not (x < hi):
        x = hi
    down = 1.0  # step used while the lower end of the bracket is unknown
    final = min(FINAL_STEP, 0.03 * math.sqrt(tol))
    best_res = np.inf
    best_x = x
    best_ln = nan
    lnn = lnN
    dlnn = 0.0
    for it in range(1, max_iter + 1):
        Qpos, Qneg, dQpos, dQneg = charge_moments(C, x, elem_w, elem_first, elem_n, elem_q0, kpk)
        valid = Qpos > 0.0
        if mode == MODE_GAS_PRESSURE:
            ex = math.exp(x - lnN)
            if ex >= 1.0:
                valid = False  # n_e >= P/kT: beyond the upper end
            else:
                lnn = lnN + math.log1p(-ex)
                dlnn = -ex / (1.0 - ex)
        if not valid:
            hi = x
            if lo > -np.inf:
                x = 0.5 * (lo + hi)
            else:
                x = x - down
                down *= 2.0
            continue
        # h(x) = ln(n_nuc Qpos) - ln(n_e + n_nuc Qneg): positive charge over negative charge
        nn = math.exp(lnn)
        ne = math.exp(x)
        D = ne + nn * Qneg
        h = lnn + math.log(Qpos) - math.log(D)
        res = abs(math.expm1(-h))
        if res < best_res:
            best_res = res
            best_x = x
            best_ln = lnn
        if res <= tol:
            return x, lnn, it, st.OK
        hp = dlnn + dQpos / Qpos - (ne + nn * (dlnn * Qneg + dQneg)) / D
        if h > 0.0:
            lo = x
        else:
            hi = x
        xn = x - h / hp
        if abs(h) <= final and xn > lo and xn < hi:
            # Newton converges quadratically: from |h| <= 1e-8 the step leaves a residual of order
            # h^2 (~1e-16), so take it without another evaluation
            if mode == MODE_GAS_PRESSURE:
                lnn = lnN + math.log1p(-math.exp(xn - lnN))
            return xn, lnn, it, st.OK
        if not (xn > lo and xn < hi):
            if lo > -np.inf:
                xn = 0.5 * (lo + hi)
            else:
                xn = x - down
                down *= 2.0
        if abs(xn - x) <= 4e-16 * max(1.0, abs(x)) or hi - lo <= 4e-16 * max(1.0, abs(x)):
            # round-off floor reached
            if best_res <= TOL_STAGNATION:
                return best_x, best_ln, it, st.OK
            return best_x, best_ln, it, st.MAX_ITERATIONS
        x = xn
    if best_res <= TOL_STAGNATION:
        return best_x, best_ln, max_iter, st.OK
    return best_x, best_ln, max_iter, st.MAX_ITERATIONS


@jit
def solve_few(mode, T, value, x_guess, mix, tol, max_iter, out_x, out_ln_nuc, out_iter, out_status):
    """Solve the points one after another on the calling thread (work arrays allocated once).

    Same arguments as :func:`solve_many` and (bitwise) the same results: the
    parallel driver runs this on each of its chunks, and the API calls it
    directly for a handful of points, where waking the thread pool would cost
    more than the solve (on a busy machine much more).
    """
    C = np.empty(mix.stage_chi.size)
    kpk = np.empty(mix.elem_w.size, dtype=np.int64)
    for i in range(T.size):
        x, lnn, it, code = solve_point(mode, T[i], value[i], x_guess[i], C, kpk, mix, tol, max_iter)
        out_x[i] = x
        out_ln_nuc[i] = lnn
        out_iter[i] = it
        out_status[i] = code


@pjit
def solve_many(mode, T, value, x_guess, mix, tol, max_iter, out_x, out_ln_nuc, out_iter, out_status):
    """Solve every point of the 1-D arrays ``T``, ``value`` (and ``x_guess``, NaN = none).

    Points are split into contiguous chunks, one work array per chunk, so the
    ``prange`` body allocates nothing per point.  Each point is solved on its
    own (no state carried between points), so results do not depend on how
    the points are split into calls, chunks or tiles.
    """
    n = T.size
    n_chunks = min(n, N_CHUNKS)
    for c in prange(n_chunks):
        start, stop = chunk_bounds(c, n, n_chunks)
        solve_few(mode, T[start:stop], value[start:stop], x_guess[start:stop], mix, tol, max_iter,
                  out_x[start:stop], out_ln_nuc[start:stop], out_iter[start:stop], out_status[start:stop])


@pjit
def log_fractions_many(T, x, sel_elem, mix, out):
    """ln of the stage fractions of the selected elements at every point.

    ``sel_elem`` lists element indices; ``out`` has shape ``(n_points, n_stages)``
    and only the columns of the selected elements are written (others are left
    untouched).  Points with non-finite ``x`` get NaN.
    """
    elem_w = mix.elem_w
    elem_first = mix.elem_first
    elem_n = mix.elem_n
    elem_q0 = mix.elem_q0
    stage_chi = mix.stage_chi
    stage_row = mix.stage_row
    stage_lnu_const = mix.stage_lnu_const
    lnU = mix.lnU
    lt0 = mix.lt0
    dlt = mix.dlt
    n = T.size
    n_stage = stage_chi.size
    n_t = lnU.shape[1]
    n_chunks = min(n, N_CHUNKS)
    for c in prange(n_chunks):
        start, stop = chunk_bounds(c, n, n_chunks)
        C = np.empty(n_stage)
        row = np.empty(n_stage)
        i = 0
        w = 0.0
        base = 0.0
        beta = 0.0
        for p in range(start, stop):
            ok = T[p] > 0.0 and T[p] < np.inf and x[p] == x[p] and abs(x[p]) < np.inf
            if ok:
                i, w = table_position(T[p], lt0, dlt, n_t)
                base, beta = saha_base(T[p])
            for j in range(sel_elem.size):
                e = sel_elem[j]
                f = elem_first[e]
                if ok:
                    element_log_weights(e, base, beta, i, w, elem_first, elem_n, stage_chi, stage_row,
                                        stage_lnu_const, lnU, C)
                    element_log_fractions(C, f, elem_n[e], x[p], row)
                    for k in range(elem_n[e]):
                        out[p, f + k] = row[f + k]
                else:
                    for k in range(elem_n[e]):
                        out[p, f + k] = np.nan


@pjit
def charge_balance_many(T, x, mix, out_q, out_qneg):
    """One evaluation of every Saha factor and every stage fraction at given ``x = ln n_e``.

    The arithmetic that no solve can avoid and every user of the fractions
    needs: the cumulative Saha weights of all stages, the fraction of every
    stage, and from them the positive and negative charge per nucleus.  Used
    as the benchmark floor and by the tests to check conservation.
    """
    elem_w = mix.elem_w
    elem_first = mix.elem_first
    elem_n = mix.elem_n
    elem_q0 = mix.elem_q0
    stage_chi = mix.stage_chi
    stage_row = mix.stage_row
    stage_lnu_const = mix.stage_lnu_const
    lnU = mix.lnU
    lt0 = mix.lt0
    dlt = mix.dlt
    n = T.size
    n_stage = stage_chi.size
    n_chunks = min(n, N_CHUNKS)
    for c in prange(n_chunks):
        start, stop = chunk_bounds(c, n, n_chunks)
        C = np.empty(n_stage)
        lf = np.empty(n_stage)
        for p in range(start, stop):
            log_weights(T[p], elem_first, elem_n, stage_chi, stage_row, stage_lnu_const, lnU, lt0, dlt, C)
            qpos = 0.0
            qneg = 0.0
            for e in range(elem_w.size):
                f = elem_first[e]
                element_log_fractions(C, f, elem_n[e], x[p], lf)
                for k in range(elem_n[e]):
                    q = elem_q0[e] + k
                    fr = math.exp(lf[f + k])
                    if q > 0:
                        qpos += elem_w[e] * q * fr
                    elif q < 0:
                        qneg -= elem_w[e] * q * fr
            out_q[p] = qpos
            out_qneg[p] = qneg


@pjit
def ion_moments_many(T, x, mix, out):
    """Per nucleus at every point: ``sum f q^2``, ``sum_{q>0} f q^{5/3}`` and ``sum_{q>0} f``.

    ``out`` has shape ``(n_points, 3)``; points with non-finite ``x`` get NaN.
    Used by the validity flags (Debye length, Coulomb coupling).
    """
    elem_w = mix.elem_w
    elem_first = mix.elem_first
    elem_n = mix.elem_n
    elem_q0 = mix.elem_q0
    stage_chi = mix.stage_chi
    stage_row = mix.stage_row
    stage_lnu_const = mix.stage_lnu_const
    lnU = mix.lnU
    lt0 = mix.lt0
    dlt = mix.dlt
    n = T.size
    n_stage = stage_chi.size
    n_chunks = min(n, N_CHUNKS)
    for c in prange(n_chunks):
        start, stop = chunk_bounds(c, n, n_chunks)
        C = np.empty(n_stage)
        for p in range(start, stop):
            if not (T[p] > 0.0 and T[p] < np.inf and x[p] == x[p] and abs(x[p]) < np.inf):
                out[p, 0] = np.nan
                out[p, 1] = np.nan
                out[p, 2] = np.nan
                continue
            log_weights(T[p], elem_first, elem_n, stage_chi, stage_row, stage_lnu_const, lnU, lt0, dlt, C)
            a = 0.0
            b = 0.0
            d = 0.0
            for e in range(elem_w.size):
                q2, q53, pos = element_charge_powers(C, elem_first[e], elem_n[e], elem_q0[e], x[p])
                a += elem_w[e] * q2
                b += elem_w[e] * q53
                d += elem_w[e] * pos
            out[p, 0] = a
            out[p, 1] = b
            out[p, 2] = d


# --------------------------------------------------------------------------- ln U corrections (dense gas)
# The hook for per-point additive corrections of ln U (occupation probabilities, Coulomb lowering;
# see ionbal.dense).  ``dl_stage`` int64[k] lists flat stage indices, ``dl_val`` float64[n_points, k]
# the corrections of ln U of those stages at each point (k may be 0).  A correction d of ln U_s adds d
# to C[s] (C[s] - C[first] = ln(U_s / U_first) + ...), i.e. it changes the Saha ratios U_{s+1}/U_s and
# U_s/U_{s-1}; each element's weights are then shifted back to C[first] = 0.


@jit
def apply_dlnu(C, p, dl_stage, dl_val, elem_first):
    """Add the corrections of point ``p`` to the cumulative log weights ``C`` (renormalised per element)."""
    k = dl_stage.size
    if k == 0:
        return
    for j in range(k):
        C[dl_stage[j]] += dl_val[p, j]
    n_el = elem_first.size
    for e in range(n_el):
        f = elem_first[e]
        c0 = C[f]
        if c0 != 0.0:
            stop = elem_first[e + 1] if e + 1 < n_el else C.size
            for s in range(f, stop):
                C[s] -= c0


@jit
def solve_few_dlnu(mode, T, value, x_guess, mix, dl_stage, dl_val, tol, max_iter, out_x, out_ln_nuc,
                   out_iter, out_status):
    """:func:`solve_few` with the ln U corrections ``dl_val`` (rows = the points of this call)."""
    C = np.empty(mix.stage_chi.size)
    kpk = np.empty(mix.elem_w.size, dtype=np.int64)
    n_t = mix.lnU.shape[1]
    for i in range(T.size):
        Ti = T[i]
        vi = value[i]
        if not (Ti > 0.0 and Ti < np.inf and vi > 0.0 and vi < np.inf):
            out_x[i], out_ln_nuc[i], out_iter[i], out_status[i] = np.nan, np.nan, 0, st.INVALID_INPUT
            continue
        lgT = math.log10(Ti)
        if lgT < mix.lt0 - 1e-12 or lgT > mix.lt0 + (n_t - 1) * mix.dlt + 1e-12:
            out_x[i], out_ln_nuc[i], out_iter[i], out_status[i] = np.nan, np.nan, 0, st.TEMPERATURE_OUT_OF_RANGE
            continue
        log_weights(Ti, mix.elem_first, mix.elem_n, mix.stage_chi, mix.stage_row, mix.stage_lnu_const,
                    mix.lnU, mix.lt0, mix.dlt, C)
        apply_dlnu(C, i, dl_stage, dl_val, mix.elem_first)
        x, lnn, it, code = solve_from_weights(mode, Ti, vi, x_guess[i], C, kpk, mix, tol, max_iter)
        out_x[i] = x
        out_ln_nuc[i] = lnn
        out_iter[i] = it
        out_status[i] = code


@pjit
def solve_many_dlnu(mode, T, value, x_guess, mix, dl_stage, dl_val, tol, max_iter, out_x, out_ln_nuc,
                    out_iter, out_status):
    """:func:`solve_many` with per-point additive corrections ``dl_val`` of ln U of the stages ``dl_stage``."""
    n = T.size
    n_chunks = min(n, N_CHUNKS)
    for c in prange(n_chunks):
        start, stop = chunk_bounds(c, n, n_chunks)
        solve_few_dlnu(mode, T[start:stop], value[start:stop], x_guess[start:stop], mix, dl_stage,
                       dl_val[start:stop], tol, max_iter, out_x[start:stop], out_ln_nuc[start:stop],
                       out_iter[start:stop], out_status[start:stop])


@pjit
def log_fractions_many_dlnu(T, x, sel_elem, mix, dl_stage, dl_val, out):
    """:func:`log_fractions_many` with the ln U corrections (``out`` (n_points, n_stages), selected columns)."""
    n = T.size
    n_stage = mix.stage_chi.size
    n_chunks = min(n, N_CHUNKS)
    for c in prange(n_chunks):
        start, stop = chunk_bounds(c, n, n_chunks)
        C = np.empty(n_stage)
        row = np.empty(n_stage)
        for p in range(start, stop):
            ok = T[p] > 0.0 and T[p] < np.inf and x[p] == x[p] and abs(x[p]) < np.inf
            if ok:
                log_weights(T[p], mix.elem_first, mix.elem_n, mix.stage_chi, mix.stage_row, mix.stage_lnu_const,
                            mix.lnU, mix.lt0, mix.dlt, C)
                apply_dlnu(C, p, dl_stage, dl_val, mix.elem_first)
            for j in range(sel_elem.size):
                e = sel_elem[j]
                f = mix.elem_first[e]
                if ok:
                    element_log_fractions(C, f, mix.elem_n[e], x[p], row)
                    for k in range(mix.elem_n[e]):
                        out[p, f + k] = row[f + k]
                else:
                    for k in range(mix.elem_n[e]):
                        out[p, f + k] = np.nan


@pjit
def ion_moments_many_dlnu(T, x, mix, dl_stage, dl_val, out):
    """:func:`ion_moments_many` with the ln U corrections."""
    n = T.size
    n_stage = mix.stage_chi.size
    n_chunks = min(n, N_CHUNKS)
    for c in prange(n_chunks):
        start, stop = chunk_bounds(c, n, n_chunks)
        C = np.empty(n_stage)
        for p in range(start, stop):
            if not (T[p] > 0.0 and T[p] < np.inf and x[p] == x[p] and abs(x[p]) < np.inf):
                out[p, 0] = np.nan
                out[p, 1] = np.nan
                out[p, 2] = np.nan
                continue
            log_weights(T[p], mix.elem_first, mix.elem_n, mix.stage_chi, mix.stage_row, mix.stage_lnu_const,
                        mix.lnU, mix.lt0, mix.dlt, C)
            apply_dlnu(C, p, dl_stage, dl_val, mix.elem_first)
            a = 0.0
            b = 0.0
            d = 0.0
            for e in range(mix.elem_w.size):
                q2, q53, pos = element_charge_powers(C, mix.elem_first[e], mix.elem_n[e], mix.elem_q0[e], x[p])
                a += mix.elem_w[e] * q2
                b += mix.elem_w[e] * q53
                d += mix.elem_w[e] * pos
            out[p, 0] = a
            out[p, 1] = b
            out[p, 2] = d
