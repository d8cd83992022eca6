"""The two floors of the solve: arithmetic that no solve can avoid, built from the core's own pieces.

* :func:`full_floor` calls :func:`ionbal.core.solver.charge_balance_many`:
  at a given ``x = ln n_e`` it builds the cumulative Saha weights of every
  stage of every element and every stage fraction (one ``exp`` per stage and
  one ``log`` per element), and sums the charge.  This is what a user of the
  fractions needs at least once per point, whatever solved for n_e.
* :func:`lean_floor` (jitted here) builds the Saha weights of every stage
  (:func:`ionbal.core.saha.log_weights`) and makes ONE windowed charge-moment
  evaluation (:func:`ionbal.core.saha.charge_moments`, starting from an
  unknown peak, i.e. a full peak scan) per point: what the solve spends
  before and in its first Newton iteration.  A solve that converges in ``k``
  iterations costs at least this plus ``k - 1`` cheaper moment evaluations.

Both drivers split the points into the same contiguous chunks as the solver's
``prange`` drivers, one work array per chunk.

The kernels here are compiled with ionbal's numba settings but never cached on
disk: they inline core kernels, and numba's cache would not notice a change
in the core.
"""

from __future__ import annotations

import numpy as np

from ionbal.core.config import pjit, prange
from ionbal.core.saha import charge_moments, log_weights
from ionbal.core.solver import N_CHUNKS, charge_balance_many, chunk_bounds

__all__ = ["full_floor", "lean_floor", "weights_only", "moments_repeated"]


def full_floor(T, x, packed, out_q=None, out_qneg=None):
    """Every Saha factor and every stage fraction at ``x = ln n_e``; returns (Qpos, Qneg)."""
    if out_q is None:
        out_q = np.empty(T.size)
        out_qneg = np.empty(T.size)
    charge_balance_many(T, x, packed.arrays, out_q, out_qneg)
    return out_q, out_qneg


@pjit(cache=False)
def _lean_floor_many(T, x, elem_w, elem_first, elem_n, elem_q0, stage_chi, stage_row, stage_lnu_const,
                     lnU, lt0, dlt, out_q, out_qneg):
    n = T.size
    n_chunks = min(n, N_CHUNKS)
    for c in prange(n_chunks):
        start, stop = chunk_bounds(c, n, n_chunks)
        C = np.empty(stage_chi.size)
        kpk = np.empty(elem_w.size, dtype=np.int64)
        for p in range(start, stop):
            log_weights(T[p], elem_first, elem_n, stage_chi, stage_row, stage_lnu_const, lnU, lt0, dlt, C)
            for e in range(kpk.size):
                kpk[e] = -1
            qpos, qneg, dqpos, dqneg = charge_moments(C, x[p], elem_w, elem_first, elem_n, elem_q0, kpk)
            out_q[p] = qpos
            out_qneg[p] = qneg


def lean_floor(T, x, packed, out_q=None, out_qneg=None):
    """Saha weights of every stage plus one windowed charge-moment evaluation per point."""
    if out_q is None:
        out_q = np.empty(T.size)
        out_qneg = np.empty(T.size)
    _lean_floor_many(T, x, *packed.arrays[:10], out_q, out_qneg)
    return out_q, out_qneg


# ------------------------------------------------------------------------------------------------
# pieces, for profiling (benchmarks/profile_solve.py)
# ------------------------------------------------------------------------------------------------

@pjit(cache=False)
def _weights_many(T, elem_first, elem_n, stage_chi, stage_row, stage_lnu_const, lnU, lt0, dlt, out):
    n = T.size
    n_chunks = min(n, N_CHUNKS)
    for c in prange(n_chunks):
        start, stop = chunk_bounds(c, n, n_chunks)
        C = np.empty(stage_chi.size)
        acc = 0.0
        for p in range(start, stop):
            log_weights(T[p], elem_first, elem_n, stage_chi, stage_row, stage_lnu_const, lnU, lt0, dlt, C)
            acc += C[C.size - 1]
        out[c] = acc


def weights_only(T, packed):
    """Only the cumulative Saha weights of every stage at every point (result reduced per chunk)."""
    p = packed
    out = np.empty(min(T.size, 256))
    _weights_many(T, p.elem_first, p.elem_n, p.stage_chi, p.stage_row, p.stage_lnu_const, p.lnU, p.lt0, p.dlt,
                  out)
    return out


@pjit(cache=False)
def _moments_many(T, x, repeats, warm, elem_w, elem_first, elem_n, elem_q0, stage_chi, stage_row,
                  stage_lnu_const, lnU, lt0, dlt, out_q):
    """Saha weights once per point, then ``repeats`` moment evaluations at ``x`` (timed by difference).

    ``warm``: evaluations after the first start from the previous peak (as in
    later Newton iterations); otherwise every evaluation scans all stages.
    """
    n = T.size
    n_chunks = min(n, N_CHUNKS)
    for c in prange(n_chunks):
        start, stop = chunk_bounds(c, n, n_chunks)
        C = np.empty(stage_chi.size)
        kpk = np.empty(elem_w.size, dtype=np.int64)
        for p in range(start, stop):
            log_weights(T[p], elem_first, elem_n, stage_chi, stage_row, stage_lnu_const, lnU, lt0, dlt, C)
            for e in range(kpk.size):
                kpk[e] = -1
            q = 0.0
            for r in range(repeats):
                if not warm:
                    for e in range(kpk.size):
                        kpk[e] = -1
                # tiny shift so the evaluations cannot be merged by the compiler
                qpos, qneg, dqpos, dqneg = charge_moments(C, x[p] + 1e-9 * r, elem_w, elem_first, elem_n,
                                                          elem_q0, kpk)
                q += qpos
            out_q[p] = q


def moments_repeated(T, x, packed, repeats, warm):
    """Saha weights once, then ``repeats`` charge-moment evaluations per point."""
    out = np.empty(T.size)
    _moments_many(T, x, int(repeats), bool(warm), *packed.arrays[:10], out)
    return out

