#!/usr/bin/env python
"""Where the solve spends its time: a profile to point the tuning at.

    python benchmarks/profile_solve.py [--n 200000] [--threads 1] [--mixture AGSS09]

Not part of the figures of ``run.py``; prints

1. the cost per point of the pieces of a solve (on ``--threads``, default 1,
   so the figures are CPU time per point): the Saha weights of every stage,
   the first charge-moment evaluation (full peak scan), each later one (peak
   climbed from the previous), and the whole solve, with the model
   ``weights + first + (iterations - 1) x later``;
2. the Newton iteration histogram and the mean iteration count by region of
   (T, P_gas), and how the count changes with a start from the neighbouring
   solution along the pressure axis of the structured grid, from a near-exact
   start, and with a looser tolerance;
3. how many stages the windowed moment sums visit per evaluation, against the
   total, and how many an abundance-aware cut would visit;
4. the solve cost per point by temperature band;
5. thread scaling 1 -> 2 on random states and on the structured grid (whose
   points are ordered by temperature, so contiguous chunks differ in cost),
   with numba's default split of the ``prange`` and with
   ``numba.set_parallel_chunksize(1)`` (chunks handed out one at a time).
"""

from __future__ import annotations

import argparse
import statistics
import sys
import time
from pathlib import Path

import numpy as np

HERE = Path(__file__).resolve().parent
if str(HERE) not in sys.path:
    sys.path.insert(0, str(HERE))


def med_time(fn, repeats=3):
    ts = []
    for _ in range(repeats):
        t0 = time.perf_counter()
        fn()
        ts.append(time.perf_counter() - t0)
    return statistics.median(ts)


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("--n", type=int, default=200_000, help="random states (default 200,000)")
    ap.add_argument("--threads", type=int, default=1, help="numba threads (default 1: CPU time per point)")
    ap.add_argument("--mixture", default="AGSS09", help="a mixture of ionbal._problems.mixtures()")
    ap.add_argument("--repeats", type=int, default=3)
    args = ap.parse_args(argv)

    import numba

    import ionbal
    from ionbal._problems import mixtures, random_states, structured_grid
    from ionbal.core.saha import CUT
    from ionbal.core.solver import log_fractions_many
    from ionbal.data.pack import pack

    import floors

    numba.set_num_threads(args.threads)
    mix = mixtures()[args.mixture]
    p = pack(mix)
    T, P = random_states(args.n, seed=3)
    n = T.size
    us = 1e6 / n
    print(f"mixture {args.mixture}: {p.elem_w.size} elements, {p.n_stages} stages; {n:,} random states; "
          f"{args.threads} thread(s)\n")

    # ---- 1. cost of the pieces ----------------------------------------------------------------
    r = ionbal.solve(T, gas_pressure=P, mixture=mix)
    x = np.ascontiguousarray(np.log(r.electron_density))
    it = np.asarray(r.iterations)
    floors.weights_only(T[:16], p)
    floors.moments_repeated(T[:16], x[:16], p, 2, True)
    t_solve = med_time(lambda: ionbal.solve(T, gas_pressure=P, mixture=mix), args.repeats)
    t_w = med_time(lambda: floors.weights_only(T, p), args.repeats)
    t_w1 = med_time(lambda: floors.moments_repeated(T, x, p, 1, True), args.repeats)
    t_w5 = med_time(lambda: floors.moments_repeated(T, x, p, 5, True), args.repeats)
    t_w5c = med_time(lambda: floors.moments_repeated(T, x, p, 5, False), args.repeats)
    m_first = t_w1 - t_w
    m_later = (t_w5 - t_w1) / 4
    m_scan = (t_w5c - t_w1) / 4
    model = t_w + m_first + (it.mean() - 1) * m_later
    print("1. cost per point [us]")
    print(f"   Saha weights of all stages (log_weights)        {t_w * us:8.2f}")
    print(f"   first moment evaluation (full peak scan)         {m_first * us:8.2f}")
    print(f"   later moment evaluation (peak climbed)           {m_later * us:8.2f}")
    print(f"   moment evaluation, always full scan              {m_scan * us:8.2f}")
    print(f"   mean iterations                                  {it.mean():8.2f}")
    print(f"   model: weights + first + (it-1) x later          {model * us:8.2f}")
    print(f"   measured ionbal.solve                            {t_solve * us:8.2f}")
    print(f"   shares of the model: weights {t_w / model:.0%}, first evaluation {m_first / model:.0%}, "
          f"later evaluations {(it.mean() - 1) * m_later / model:.0%}\n")

    # ---- 2. iterations ---------------------------------------------------------------------------
    print("2. Newton iterations")
    vals, counts = np.unique(it, return_counts=True)
    print("   histogram: " + ", ".join(f"{v}: {c / n:.1%}" for v, c in zip(vals, counts)))
    lt, lp = np.log10(T), np.log10(P)
    t_edges = np.arange(3.0, 6.01, 0.5)
    p_edges = np.arange(-6.0, 12.01, 3.0)
    print("   mean iterations by region (rows log10 T, columns log10 P_gas):")
    print("   " + " " * 10 + "".join(f"{f'[{a:g},{b:g})':>10}" for a, b in zip(p_edges[:-1], p_edges[1:])))
    for a, b in zip(t_edges[:-1], t_edges[1:]):
        row = []
        for c, d in zip(p_edges[:-1], p_edges[1:]):
            sel = (lt >= a) & (lt < b) & (lp >= c) & (lp < d)
            row.append(f"{it[sel].mean():10.2f}" if sel.any() else f"{'-':>10}")
        print(f"   {f'[{a:g},{b:g})':>10}" + "".join(row))
    nt, np_ = 301, 241
    Tg, Pg = structured_grid(nt, np_)
    rg = ionbal.solve(Tg, gas_pressure=Pg, mixture=mix)
    neg = rg.electron_density.reshape(nt, np_)
    guess = np.full_like(neg, np.nan)
    guess[:, 1:] = neg[:, :-1]  # the solution at the previous pressure of the same temperature
    rn = ionbal.solve(Tg, gas_pressure=Pg, mixture=mix, initial_electron_density=guess.ravel())
    rx = ionbal.solve(Tg, gas_pressure=Pg, mixture=mix, initial_electron_density=rg.electron_density * 1.001)
    rt = ionbal.solve(T, gas_pressure=P, mixture=mix, tol=1e-10)
    print(f"   structured grid {nt}x{np_}: mean {rg.iterations.mean():.2f}; started from the neighbour along "
          f"P_gas {rn.iterations.mean():.2f}; from n_e x 1.001 {rx.iterations.mean():.2f}")
    print(f"   random states with tol 1e-10 instead of 1e-13: {rt.iterations.mean():.2f} "
          f"(max |d ln n_e| {np.nanmax(np.abs(np.log(rt.electron_density) - x)):.1e})\n")

    # ---- 3. window sizes -------------------------------------------------------------------------
    m = min(n, 20_000)
    sel_all = np.arange(p.elem_w.size, dtype=np.int64)
    lf = np.empty((m, p.n_stages))
    log_fractions_many(T[:m], x[:m], sel_all, p.arrays, lf)
    charges = np.concatenate([np.arange(q0, q0 + k) for q0, k in zip(p.elem_q0, p.elem_n)]).astype(float)
    owner = np.repeat(np.arange(p.elem_w.size), p.elem_n)
    frac = np.exp(lf)
    qpos = (frac * np.clip(charges, 0, None) * p.elem_w[owner]).sum(axis=1)
    win = np.zeros(m)
    win_abund = np.zeros(m)
    z = p.atomic_numbers.astype(float)
    for e in range(p.elem_w.size):
        f, k = int(p.elem_first[e]), int(p.elem_n[e])
        block = lf[:, f:f + k]
        rel = block - block.max(axis=1, keepdims=True)
        win += (rel >= -CUT).sum(axis=1)
        # keep a term only if it can change the total charge by more than exp(-CUT) relative
        cut_e = CUT + np.log(p.elem_w[e] * z[e] / qpos)
        win_abund += np.maximum(1, (rel >= -np.maximum(cut_e, 0.0)[:, None]).sum(axis=1))
    print("3. stages visited per moment evaluation (at the converged n_e)")
    print(f"   all stages {p.n_stages}; window of CUT={CUT:g} per element: mean {win.mean():.0f} "
          f"(median {np.median(win):.0f}, max {win.max():.0f}); abundance-aware cut: mean {win_abund.mean():.0f}")
    print(f"   => later evaluation {m_later * us * 1e3 / win.mean():.1f} ns per visited stage\n")

    # ---- 4. cost by temperature band --------------------------------------------------------------
    print("4. solve cost by temperature band [us per point] and mean window")
    for a, b in zip(t_edges[:-1], t_edges[1:]):
        s = (lt >= a) & (lt < b)
        Ts, Ps = np.ascontiguousarray(T[s]), np.ascontiguousarray(P[s])
        ts = med_time(lambda: ionbal.solve(Ts, gas_pressure=Ps, mixture=mix), args.repeats)
        sw = s[:m]
        print(f"   log10 T [{a:g},{b:g}): {ts / s.sum() * 1e6:7.2f} us, iterations {it[s].mean():.2f}, "
              f"window {win[sw].mean():.0f} stages")

    # ---- 5. thread scaling and the split of the prange ----------------------------------------------
    print("\n5. thread scaling 1 -> 2 (medians of interleaved repeats)")
    if numba.config.NUMBA_NUM_THREADS < 2:
        print("   skipped: numba has one thread")
        return 0
    k = min(n, 100_000)
    cases = [("random states", T[:k], P[:k]), (f"structured grid {nt}x{np_}", Tg, Pg)]
    for label, Ts, Ps in cases:
        for chunk in (0, 1):
            times = {1: [], 2: []}
            old = numba.set_parallel_chunksize(chunk)
            try:
                for _ in range(max(3, args.repeats)):
                    for th in (1, 2):
                        numba.set_num_threads(th)
                        t0 = time.perf_counter()
                        ionbal.solve(Ts, gas_pressure=Ps, mixture=mix)
                        times[th].append(time.perf_counter() - t0)
            finally:
                numba.set_parallel_chunksize(old)
                numba.set_num_threads(args.threads)
            t1, t2 = statistics.median(times[1]), statistics.median(times[2])
            how = "default split" if chunk == 0 else "chunksize 1 "
            print(f"   {label:<28} {how}: 1 thread {Ts.size / t1:9,.0f}/s, 2 threads {Ts.size / t2:9,.0f}/s, "
                  f"x{t1 / t2:.2f}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
