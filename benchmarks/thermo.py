#!/usr/bin/env python
"""Cost of the thermodynamic quantities (ionbal.thermo) against the plain solve.

Usage::

    python benchmarks/thermo.py            # 10^6 random AGSS09 states and the default grid (301 x 241)
    python benchmarks/thermo.py --quick    # 20,000 random states and a 61 x 49 grid

plus, with molecules (``molecules=True``, every tabulated molecule), random states of the
molecular regime (1e3-6e3 K; 20,000, or 2,000 with ``--quick``).

For each set: wall time of ``ionbal.solve`` (gas-pressure input, all numba threads) and of the
first thermodynamic request on its result (``result.gamma1``: one pass of
``ionbal.core.thermo.thermo_many`` fills every quantity, the donor shares and d ln n_e/dA(X)),
timed in turn over ``--repeats`` rounds after a warm-up that compiles; the figure is the median
per-round ratio (solve + thermo) / solve.  Target (issue 13): <= 1.5.
"""

from __future__ import annotations

import argparse
import statistics
import time

import numpy as np

import ionbal
from ionbal._problems import random_states, structured_grid


def one_round(T, P, molecules=False):
    t0 = time.perf_counter()
    r = ionbal.solve(T, gas_pressure=P, errors="mask", molecules=molecules)
    t1 = time.perf_counter()
    r.gamma1
    t2 = time.perf_counter()
    return t1 - t0, t2 - t1


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("--quick", action="store_true")
    ap.add_argument("--repeats", type=int, default=5)
    a = ap.parse_args(argv)
    n = 20_000 if a.quick else 1_000_000
    sets = {"random AGSS09": random_states(n), "default grid": structured_grid(61, 49) if a.quick
            else structured_grid()}
    sets["molecular regime, molecules=True"] = random_states(2_000 if a.quick else 20_000, t_range=(1e3, 6e3))
    one_round(*(np.asarray(v)[:100] for v in sets["random AGSS09"]))  # compile
    one_round(*(np.asarray(v)[:100] for v in sets["molecular regime, molecules=True"]), molecules=True)
    for label, (T, P) in sets.items():
        T, P = np.asarray(T, dtype=float).ravel(), np.asarray(P, dtype=float).ravel()
        mol = label.endswith("molecules=True")
        rounds = [one_round(T, P, mol) for _ in range(a.repeats)]
        ratio = statistics.median((s + t) / s for s, t in rounds)
        solve = statistics.median(s for s, _ in rounds)
        thermo = statistics.median(t for _, t in rounds)
        print(f"{label}: {T.size:,} states; solve {T.size / solve:,.0f} states/s, thermodynamics "
              f"{T.size / thermo:,.0f} states/s; (solve + thermo) / solve = {ratio:.2f} (target <= 1.5)")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
