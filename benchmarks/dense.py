#!/usr/bin/env python
"""Dense gas (ionbal.dense): speed against today's solve, what moves, and convergence.

Usage::

    python benchmarks/dense.py              # the default grid of `ionbal grid` (301 x 241), AGSS09
    python benchmarks/dense.py --quick      # 61 x 49 points
    python benchmarks/dense.py --coulomb    # with the Debye-Hueckel correction too

Prints: wall time of today's solve (``solve_many``) and of ``solve_dense`` on the same points (median
of ``--repeats``, after a warm-up that compiles), their ratio, the outer-iteration histogram, the
share of points whose n_e moves by > 1 % and whose n(H I) moves by > 10 %, the convergence, the
issue's four states, and U(H I) against density at 2e4 K.
"""

from __future__ import annotations

import argparse
import math
import statistics
import time

import numpy as np

from ionbal._problems import structured_grid
from ionbal.core.solver import MODE_GAS_PRESSURE, MODE_NUCLEI_DENSITY, log_fractions_many, \
    log_fractions_many_dlnu, solve_many
from ionbal.data.mixture import Mixture
from ionbal.data.pack import pack
from ionbal.dense import solve_dense


def today(packed, mode, T, V):
    n = T.size
    x, lnn = np.empty(n), np.empty(n)
    it, code = np.empty(n, np.int64), np.empty(n, np.int64)
    solve_many(mode, T, V, np.full(n, np.nan), packed.arrays, 1e-13, 200, x, lnn, it, code)
    return x, lnn, code


def timed(fn, repeats):
    fn()
    times = []
    for _ in range(repeats):
        t0 = time.perf_counter()
        out = fn()
        times.append(time.perf_counter() - t0)
    return statistics.median(times), out


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("--quick", action="store_true")
    ap.add_argument("--coulomb", action="store_true")
    ap.add_argument("--repeats", type=int, default=3)
    a = ap.parse_args()
    packed = pack(Mixture.solar("AGSS09"))
    T, P = structured_grid(61, 49) if a.quick else structured_grid()
    n = T.size
    t_old, (x0, l0, c0) = timed(lambda: today(packed, MODE_GAS_PRESSURE, T, P), a.repeats)
    t_new, r = timed(lambda: solve_dense(MODE_GAS_PRESSURE, T, P, packed, coulomb=a.coulomb), a.repeats)
    print(f"points: {n} (AGSS09, default grid{' quick' if a.quick else ''}), coulomb={a.coulomb}")
    print(f"today solve_many:  {t_old:.3f} s   ({n / t_old:,.0f} points/s)")
    print(f"solve_dense:       {t_new:.3f} s   ({n / t_new:,.0f} points/s)   ratio {t_new / t_old:.2f}")
    ok = r.status == 0
    print(f"converged: {ok.sum()} / {n} ({100 * ok.mean():.2f} %); today {np.sum(c0 == 0)} / {n}")
    hist = np.bincount(r.outer)
    print("outer passes histogram:", {k: int(v) for k, v in enumerate(hist) if v})
    dne = np.abs(np.expm1(r.ln_ne - x0))
    lf0 = np.full((n, packed.n_stages), np.nan)
    lf1 = np.full((n, packed.n_stages), np.nan)
    log_fractions_many(T, x0, np.array([0]), packed.arrays, lf0)
    log_fractions_many_dlnu(T, r.ln_ne, np.array([0]), packed.arrays, r.dl_stage, r.dl_val, lf1)
    s = packed.stage_index("H I")
    dh = np.abs(np.expm1(lf1[:, s] + r.ln_nuc - lf0[:, s] - l0))
    print(f"n_e moves > 1 %: {100 * np.mean(dne > 0.01):.2f} % of points; > 0.1 %: {100 * np.mean(dne > 1e-3):.2f} %;"
          f" max {100 * dne.max():.1f} %")
    print(f"n(H I) moves > 10 %: {100 * np.mean(dh > 0.1):.2f} % of points; max {100 * dh.max():.1f} %")

    # the four states (rho in g cm^-3)
    Ts = np.array([1e6, 3e5, 1e5, 5e4])
    rho = np.array([1e-2, 1e-2, 1e-2, 1e-4])
    nn = rho / packed.mean_mass
    xo, _, _ = today(packed, MODE_NUCLEI_DENSITY, Ts, nn)
    for coul in (False, True):
        rr = solve_dense(MODE_NUCLEI_DENSITY, Ts, nn, packed, coulomb=coul)
        lf = np.full((4, packed.n_stages), np.nan)
        log_fractions_many_dlnu(Ts, rr.ln_ne, np.array([0]), packed.arrays, rr.dl_stage, rr.dl_val, lf)
        for i in range(4):
            print(f"coulomb={coul!s:5} T={Ts[i]:.0e} rho={rho[i]:.0e}: n_e/n_e(full) = "
                  f"{math.exp(rr.ln_ne[i]) / (nn[i] * packed.q_max):.4f} (today {math.exp(xo[i]) / (nn[i] * packed.q_max):.4f}),"
                  f" H II fraction {math.exp(lf[i, packed.stage_index('H II')]):.5f}, n_e gain x{math.exp(rr.ln_ne[i] - xo[i]):.2f},"
                  f" outer {rr.outer[i]}, status {rr.status[i]}")


if __name__ == "__main__":
    main()
