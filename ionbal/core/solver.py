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
    cached_charge_moments,
    charge_power_table,
    closed_log_weights,
    dlnu_apply,
    dlnu_check,
    dlnu_restore,
    element_charge_powers,
    element_log_fractions,
    log_weights,
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
def state_check(T, value, lt0, dlt, n_t):
    """Status of a state before any solve: OK, INVALID_INPUT or TEMPERATURE_OUT_OF_RANGE."""
    if not (T > 0.0 and T < np.inf and value > 0.0 and value < np.inf):
        return st.INVALID_INPUT
    lgT = math.log10(T)
    if lgT < lt0 - 1e-12 or lgT > lt0 + (n_t - 1) * dlt + 1e-12:
        return st.TEMPERATURE_OUT_OF_RANGE
    return st.OK


@jit
def solve_point(mode, T, value, x_guess, C, work, mix, tol, max_iter):
    """Solve one state whose log Saha weights ``C`` (n_stages) are already built at ``T``.

    ``work = (kpk, wlo, whi, wx0, A)`` are per-element / per-stage work arrays
    of :func:`.saha.cached_charge_moments` (reset here: no state carried
    between points).  The caller has checked the state (:func:`state_check`).
    Returns ``(x, ln_n_nuc, iterations, status)``.
    """
    kpk, wlo, whi, wx0, A = work
    elem_w = mix.elem_w
    elem_first = mix.elem_first
    elem_n = mix.elem_n
    elem_q0 = mix.elem_q0
    q_max = mix.q_max
    nan = np.nan
    kT = K_B * T
    for e in range(kpk.size):
        kpk[e] = -1  # first evaluation scans every stage

    if mode == MODE_ELECTRON_PRESSURE:
        x = math.log(value) - math.log(kT)
        Qpos, Qneg, dQpos, dQneg = cached_charge_moments(C, x, elem_w, elem_first, elem_n, elem_q0,
                                                         kpk, wlo, whi, wx0, A)
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
        Qpos, Qneg, dQpos, dQneg = cached_charge_moments(C, x, elem_w, elem_first, elem_n, elem_q0,
                                                         kpk, wlo, whi, wx0, A)
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
def point_weights(T, T_done, C, mix, dl_stage, dl_row, saved, applied):
    """Make ``C`` the log Saha weights at ``T`` with this point's ln U corrections; returns the new ``T_done``.

    ``C`` holds the weights at ``T_done`` plus the corrections of the previous
    point when ``applied``; those are undone exactly, the weights are rebuilt
    only when ``T`` differs from ``T_done`` (a row of a T-major grid builds
    them once), and this point's corrections are added.  Reusing a row is
    bitwise the same as rebuilding it, so results do not depend on the order
    or chunking of the points.
    """
    if applied:
        dlnu_restore(C, dl_stage, saved)
    if not (T == T_done):
        closed_log_weights(T, mix, C)
    dlnu_apply(C, dl_stage, dl_row, saved)
    return T


@jit
def solve_chunk(mode, T, value, x_guess, mix, dl_stage, dl_val, tol, max_iter, out_x, out_ln_nuc, out_iter,
                out_status):
    """Solve the points one after another on the calling thread; the one implementation of every solve."""
    n_stage = mix.stage_chi.size
    n_elem = mix.elem_w.size
    if not dlnu_check(n_stage, T.size, dl_stage, dl_val):
        for i in range(T.size):
            out_x[i] = np.nan
            out_ln_nuc[i] = np.nan
            out_iter[i] = 0
            out_status[i] = st.INVALID_INPUT
        return
    C = np.empty(n_stage)
    A = np.empty(n_stage)
    work = (np.empty(n_elem, dtype=np.int64), np.empty(n_elem, dtype=np.int64),
            np.empty(n_elem, dtype=np.int64), np.empty(n_elem), A)
    saved = np.empty(dl_stage.size)
    n_t = mix.lnU.shape[1]
    T_done = np.nan
    applied = False
    for i in range(T.size):
        code = state_check(T[i], value[i], mix.lt0, mix.dlt, n_t)
        if code != st.OK:
            out_x[i] = np.nan
            out_ln_nuc[i] = np.nan
            out_iter[i] = 0
            out_status[i] = code
            continue
        T_done = point_weights(T[i], T_done, C, mix, dl_stage, dl_val[i], saved, applied)
        applied = True
        x, lnn, it, code = solve_point(mode, T[i], value[i], x_guess[i], C, work, mix, tol, max_iter)
        out_x[i] = x
        out_ln_nuc[i] = lnn
        out_iter[i] = it
        out_status[i] = code


@jit
def no_dlnu(n):
    """The empty ln U correction list for ``n`` points (k = 0)."""
    return np.empty(0, dtype=np.int64), np.empty((n, 0))


@jit
def solve_few(mode, T, value, x_guess, mix, tol, max_iter, out_x, out_ln_nuc, out_iter, out_status):
    """Solve the points one after another on the calling thread (work arrays allocated once).

    Same arguments as :func:`solve_many` and (bitwise) the same results: the
    parallel driver runs the same chunk solve on each of its chunks, and the
    API calls this directly for a handful of points, where waking the thread
    pool would cost more than the solve (on a busy machine much more).
    """
    dl_stage, dl_val = no_dlnu(T.size)
    solve_chunk(mode, T, value, x_guess, mix, dl_stage, dl_val, tol, max_iter, out_x, out_ln_nuc, out_iter,
                out_status)


@pjit
def solve_many_dlnu(mode, T, value, x_guess, mix, dl_stage, dl_val, tol, max_iter, out_x, out_ln_nuc, out_iter,
                    out_status):
    """:func:`solve_many` with additive ln U corrections per point (dense-gas hook).

    ``dl_stage`` (int64[k]) lists flat stage indices and ``dl_val``
    (float64[n_points, k]) the corrections to ln U of those stages at each
    point; k may be 0.  A bad list (index out of range, wrong shape) marks
    every point INVALID_INPUT.
    """
    n = T.size
    if not dlnu_check(mix.stage_chi.size, n, dl_stage, dl_val):
        for i in range(n):
            out_x[i] = np.nan
            out_ln_nuc[i] = np.nan
            out_iter[i] = 0
            out_status[i] = st.INVALID_INPUT
        return
    n_chunks = min(n, N_CHUNKS)
    for c in prange(n_chunks):
        start, stop = chunk_bounds(c, n, n_chunks)
        solve_chunk(mode, T[start:stop], value[start:stop], x_guess[start:stop], mix, dl_stage,
                    dl_val[start:stop], tol, max_iter, out_x[start:stop], out_ln_nuc[start:stop],
                    out_iter[start:stop], out_status[start:stop])


@pjit
def solve_many(mode, T, value, x_guess, mix, tol, max_iter, out_x, out_ln_nuc, out_iter, out_status):
    """Solve every point of the 1-D arrays ``T``, ``value`` (and ``x_guess``, NaN = none).

    Points are split into contiguous chunks, one set of work arrays per chunk,
    so the ``prange`` body allocates nothing per point.  Each point is solved
    on its own (no state carried between points; consecutive points of equal
    T share the Saha weights, bitwise the same as rebuilding them), so results
    do not depend on how the points are split into calls, chunks or tiles.
    """
    n = T.size
    dl_stage, dl_val = no_dlnu(n)
    n_chunks = min(n, N_CHUNKS)
    for c in prange(n_chunks):
        start, stop = chunk_bounds(c, n, n_chunks)
        solve_chunk(mode, T[start:stop], value[start:stop], x_guess[start:stop], mix, dl_stage,
                    dl_val[start:stop], tol, max_iter, out_x[start:stop], out_ln_nuc[start:stop],
                    out_iter[start:stop], out_status[start:stop])


@jit
def point_ok(T, x):
    return T > 0.0 and T < np.inf and x == x and abs(x) < np.inf


@jit
def log_fractions_chunk(T, x, sel_elem, mix, dl_stage, dl_val, out):
    """Serial body of :func:`log_fractions_many_dlnu` for one chunk of points."""
    elem_first = mix.elem_first
    elem_n = mix.elem_n
    C = np.empty(mix.stage_chi.size)
    row = np.empty(mix.stage_chi.size)
    saved = np.empty(dl_stage.size)
    T_done = np.nan
    applied = False
    for p in range(T.size):
        ok = point_ok(T[p], x[p])
        if ok:
            T_done = point_weights(T[p], T_done, C, mix, dl_stage, dl_val[p], saved, applied)
            applied = True
        for j in range(sel_elem.size):
            e = sel_elem[j]
            f = elem_first[e]
            ne = elem_n[e]
            if ok:
                element_log_fractions(C, f, ne, x[p], row)
                for k in range(ne):
                    out[p, f + k] = row[f + k]
            else:
                for k in range(ne):
                    out[p, f + k] = np.nan


@pjit
def log_fractions_many_dlnu(T, x, sel_elem, mix, dl_stage, dl_val, out):
    """:func:`log_fractions_many` with additive ln U corrections (see :func:`solve_many_dlnu`).

    A bad correction list gives NaN in every selected column.
    """
    n = T.size
    if not dlnu_check(mix.stage_chi.size, n, dl_stage, dl_val):
        for p in range(n):
            for j in range(sel_elem.size):
                e = sel_elem[j]
                for k in range(mix.elem_n[e]):
                    out[p, mix.elem_first[e] + k] = np.nan
        return
    n_chunks = min(n, N_CHUNKS)
    for c in prange(n_chunks):
        start, stop = chunk_bounds(c, n, n_chunks)
        log_fractions_chunk(T[start:stop], x[start:stop], sel_elem, mix, dl_stage, dl_val[start:stop],
                            out[start:stop])


@pjit
def log_fractions_many(T, x, sel_elem, mix, out):
    """ln of the stage fractions of the selected elements at every point.

    ``sel_elem`` lists element indices; ``out`` has shape ``(n_points, n_stages)``
    and only the columns of the selected elements are written (others are left
    untouched).  Points with non-finite ``x`` get NaN.
    """
    n = T.size
    dl_stage, dl_val = no_dlnu(n)
    n_chunks = min(n, N_CHUNKS)
    for c in prange(n_chunks):
        start, stop = chunk_bounds(c, n, n_chunks)
        log_fractions_chunk(T[start:stop], x[start:stop], sel_elem, mix, dl_stage, dl_val[start:stop],
                            out[start:stop])


@jit
def tile_chunk(T, x, sel_stage, mix, dl_stage, dl_val, out_frac, out_moments, want_frac):
    """Serial body of :func:`tile_outputs_many_dlnu` (and of the moments kernels) for one chunk.

    Per point: the log Saha weights of every stage once (shared by a row of
    equal T), each element's populated window once (its exps give the three
    validity moments of :func:`ion_moments_many` and the normalization of the
    fractions) and, when ``want_frac``, one ``exp`` per selected stage.
    """
    elem_w = mix.elem_w
    elem_first = mix.elem_first
    elem_n = mix.elem_n
    elem_q0 = mix.elem_q0
    n_elem = elem_w.size
    C = np.empty(mix.stage_chi.size)
    saved = np.empty(dl_stage.size)
    q53 = charge_power_table(int(np.max(elem_n)) + 1)
    # element of each selected stage
    sel_e = np.empty(sel_stage.size, dtype=np.int64)
    for j in range(sel_stage.size if want_frac else 0):
        for e in range(n_elem):
            if sel_stage[j] >= elem_first[e] and sel_stage[j] < elem_first[e] + elem_n[e]:
                sel_e[j] = e
                break
    norm = np.empty(n_elem)
    norm_l = np.empty(n_elem)
    T_done = np.nan
    applied = False
    for p in range(T.size):
        if not point_ok(T[p], x[p]):
            for j in range(3):
                out_moments[p, j] = np.nan
            if want_frac:
                for j in range(sel_stage.size):
                    out_frac[p, j] = np.nan
            continue
        T_done = point_weights(T[p], T_done, C, mix, dl_stage, dl_val[p], saved, applied)
        applied = True
        xp = x[p]
        a = 0.0
        b = 0.0
        d = 0.0
        for e in range(n_elem):
            q2, qf, pos, m, lns = element_charge_powers(C, elem_first[e], elem_n[e], elem_q0[e], xp, q53)
            a += elem_w[e] * q2
            b += elem_w[e] * qf
            d += elem_w[e] * pos
            norm[e] = m
            norm_l[e] = lns
        out_moments[p, 0] = a
        out_moments[p, 1] = b
        out_moments[p, 2] = d
        if want_frac:
            for j in range(sel_stage.size):
                s = sel_stage[j]
                e = sel_e[j]
                out_frac[p, j] = math.exp(C[s] - (s - elem_first[e]) * xp - norm[e] - norm_l[e])


@pjit
def tile_outputs_many_dlnu(T, x, sel_stage, mix, dl_stage, dl_val, out_frac, out_moments):
    """:func:`tile_outputs_many` with additive ln U corrections (see :func:`solve_many_dlnu`)."""
    n = T.size
    ok = dlnu_check(mix.stage_chi.size, n, dl_stage, dl_val)
    for j in range(sel_stage.size):
        if sel_stage[j] < 0 or sel_stage[j] >= mix.stage_chi.size:
            ok = False
    if not ok:
        out_frac[:, :] = np.nan
        out_moments[:, :] = np.nan
        return
    n_chunks = min(n, N_CHUNKS)
    for c in prange(n_chunks):
        start, stop = chunk_bounds(c, n, n_chunks)
        tile_chunk(T[start:stop], x[start:stop], sel_stage, mix, dl_stage, dl_val[start:stop],
                   out_frac[start:stop], out_moments[start:stop], True)


@pjit
def tile_outputs_many(T, x, sel_stage, mix, out_frac, out_moments):
    """One pass per point for a grid tile: fractions of the selected stages and the validity moments.

    ``sel_stage`` (int64) lists flat stage indices of any elements;
    ``out_frac[n_points, len(sel_stage)]`` gets their fractions (float64,
    equal to ``exp`` of :func:`log_fractions_many`) and ``out_moments[n_points, 3]``
    the moments of :func:`ion_moments_many`; NaN where ``x`` is not finite
    (and everywhere for a stage index out of range).
    """
    n = T.size
    dl_stage, dl_val = no_dlnu(n)
    ok = True
    for j in range(sel_stage.size):
        if sel_stage[j] < 0 or sel_stage[j] >= mix.stage_chi.size:
            ok = False
    if not ok:
        out_frac[:, :] = np.nan
        out_moments[:, :] = np.nan
        return
    n_chunks = min(n, N_CHUNKS)
    for c in prange(n_chunks):
        start, stop = chunk_bounds(c, n, n_chunks)
        tile_chunk(T[start:stop], x[start:stop], sel_stage, mix, dl_stage, dl_val[start:stop],
                   out_frac[start:stop], out_moments[start:stop], True)


@pjit
def ion_moments_many_dlnu(T, x, mix, dl_stage, dl_val, out):
    """:func:`ion_moments_many` with additive ln U corrections (see :func:`solve_many_dlnu`)."""
    n = T.size
    if not dlnu_check(mix.stage_chi.size, n, dl_stage, dl_val):
        out[:, :] = np.nan
        return
    sel = np.empty(0, dtype=np.int64)
    n_chunks = min(n, N_CHUNKS)
    for c in prange(n_chunks):
        start, stop = chunk_bounds(c, n, n_chunks)
        tile_chunk(T[start:stop], x[start:stop], sel, mix, dl_stage, dl_val[start:stop],
                   out[start:stop, :0], out[start:stop], False)


@pjit
def ion_moments_many(T, x, mix, out):
    """Per nucleus at every point: ``sum f q^2``, ``sum_{q>0} f q^{5/3}`` and ``sum_{q>0} f``.

    ``out`` has shape ``(n_points, 3)``; points with non-finite ``x`` get NaN.
    Used by the validity flags (Debye length, Coulomb coupling).
    """
    n = T.size
    dl_stage, dl_val = no_dlnu(n)
    sel = np.empty(0, dtype=np.int64)
    n_chunks = min(n, N_CHUNKS)
    for c in prange(n_chunks):
        start, stop = chunk_bounds(c, n, n_chunks)
        tile_chunk(T[start:stop], x[start:stop], sel, mix, dl_stage, dl_val[start:stop],
                   out[start:stop, :0], out[start:stop], False)


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
