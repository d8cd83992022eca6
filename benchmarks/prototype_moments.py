"""Prototype for tuning: later Newton evaluations as polynomial updates instead of fresh exps.

    NUMBA_NUM_THREADS=1 python benchmarks/prototype_moments.py [MIXTURE]   # AGSS09 (default), "30 elements"

After the first charge-moment evaluation of a point at x0, every stage of an
element's window has the weight a_k = exp(C_k - k x0 - m0).  At a later x the
weights are a_k z^(k - kp) with z = exp(-(x - x0)): one exp per evaluation and
one multiply per stage, walking out from the peak kp.  This script times, per
point, the core's evaluation (a fresh exp per visited stage) against the
update, at x shifted by 1e-3 per repeat, and checks that the two agree.  Not
used by run.py.  A real implementation must re-base (new x0, new window)
when x moves far or the peak leaves the window.
"""
import math
import statistics
import sys
import time

import numpy as np
import ionbal
from ionbal._problems import random_states, mixtures
from ionbal.data.pack import pack
from ionbal.core.saha import log_weights, charge_moments, CUT, find_peak
from numba import njit  # plain numba on purpose: a throw-away prototype, never cached

@njit(cache=False)
def elem_setup(C, f, n, x0, kp0, A):
    kp, m = find_peak(C, f, n, x0, kp0)
    lo = kp
    while lo > 0 and C[f + lo - 1] - (lo - 1) * x0 - m >= -CUT:
        lo -= 1
    hi = kp
    while hi + 1 < n and C[f + hi + 1] - (hi + 1) * x0 - m >= -CUT:
        hi += 1
    for k in range(lo, hi + 1):
        A[f + k] = math.exp(C[f + k] - k * x0 - m)
    return kp, lo, hi

@njit(cache=False)
def elem_poly(A, f, kp, lo, hi, q0, z, iz):
    # moments relative to the peak with weights a_k z^(k-kp)
    s0 = A[f + kp]; s1 = 0.0; s2 = 0.0; sp = 0.0; sn = 0.0; spd = 0.0; snd = 0.0
    if q0 < 0:
        q = q0 + kp
        if q > 0: sp += q * s0
        elif q < 0: sn -= q * s0
    p = 1.0
    for k in range(kp + 1, hi + 1):
        p *= z
        wt = A[f + k] * p
        d = k - kp
        s0 += wt; s1 += wt * d; s2 += wt * d * d
        if q0 < 0:
            q = q0 + k
            if q > 0:
                sp += q * wt; spd += q * d * wt
    p = 1.0
    for k in range(kp - 1, lo - 1, -1):
        p *= iz
        wt = A[f + k] * p
        d = k - kp
        s0 += wt; s1 += wt * d; s2 += wt * d * d
        if q0 < 0:
            q = q0 + k
            if q > 0:
                sp += q * wt; spd += q * d * wt
            elif q < 0:
                sn -= q * wt; snd -= q * d * wt
    mean_d = s1 / s0
    if q0 < 0:
        return sp / s0, -(spd - mean_d * sp) / s0
    var = s2 / s0 - mean_d * mean_d
    return (q0 + kp) + mean_d, -var

@njit(cache=False)
def proto_many(T, x, repeats, mode, elem_w, elem_first, elem_n, elem_q0, stage_chi, stage_row, stage_lnu_const, lnU, lt0, dlt, out):
    C = np.empty(stage_chi.size); A = np.empty(stage_chi.size)
    ne = elem_w.size
    kpk = np.empty(ne, dtype=np.int64); los = np.empty(ne, dtype=np.int64); his = np.empty(ne, dtype=np.int64)
    for p in range(T.size):
        log_weights(T[p], elem_first, elem_n, stage_chi, stage_row, stage_lnu_const, lnU, lt0, dlt, C)
        for e in range(ne):
            kpk[e] = -1
        acc = 0.0
        if mode == 0:  # current: fresh exps each evaluation
            for r in range(repeats):
                a, b, c, d = charge_moments(C, x[p] + 1e-3 * r, elem_w, elem_first, elem_n, elem_q0, kpk)
                acc += a
        else:  # first evaluation sets up the window weights, later ones are polynomial updates
            for e in range(ne):
                kp, lo, hi = elem_setup(C, elem_first[e], elem_n[e], x[p], -1, A)
                kpk[e] = kp; los[e] = lo; his[e] = hi
            for r in range(repeats):
                dx = 1e-3 * r
                z = math.exp(-dx); iz = 1.0 / z
                for e in range(ne):
                    pos, dpos = elem_poly(A, elem_first[e], kpk[e], los[e], his[e], elem_q0[e], z, iz)
                    acc += elem_w[e] * pos
        out[p] = acc

mix = mixtures()[sys.argv[1] if len(sys.argv) > 1 else "AGSS09"]
pk = pack(mix)
T, P = random_states(50_000, seed=5)
r = ionbal.solve(T, gas_pressure=P, mixture=mix)
x = np.log(r.electron_density)
out = np.empty(T.size)
def t(mode, reps):
    proto_many(T[:10], x[:10], reps, mode, *pk.arrays[:10], out[:10])
    ts = []
    for _ in range(3):
        t0 = time.perf_counter(); proto_many(T, x, reps, mode, *pk.arrays[:10], out); ts.append(time.perf_counter() - t0)
    return statistics.median(ts) / T.size * 1e6
a1, a5 = t(0, 1), t(0, 5)
b1, b5 = t(1, 1), t(1, 5)
print(f"current : weights+1 eval {a1:.2f} us, per later eval {(a5-a1)/4:.2f} us")
print(f"poly    : weights+setup+1 eval {b1:.2f} us, per later eval {(b5-b1)/4:.2f} us")
# check values agree
o0 = np.empty(T.size); o1 = np.empty(T.size)
proto_many(T, x, 3, 0, *pk.arrays[:10], o0); proto_many(T, x, 3, 1, *pk.arrays[:10], o1)
print("max rel diff of summed Qpos:", np.max(np.abs(o0 - o1) / np.abs(o0)))
