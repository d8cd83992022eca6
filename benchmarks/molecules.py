#!/usr/bin/env python
"""Cost of the joint molecular + ionization solve vs the atoms-only solve on the same states.

    python benchmarks/molecules.py [--n 20000] [--repeats 3] [--json out.json]

Log-uniform random states (``ionbal._problems.random_states``: 1,000-1e6 K x 1e-6-1e12 dyn cm^-2),
AGSS09, gas-pressure input, split into the molecular regime (T < 6,000 K) and the hot states
(T >= 6,000 K).  Both solves go through :func:`ionbal.chemistry.solve_chemistry` (``molecules=True``
vs ``molecules=False``, the latter being the atoms-only kernel plus the same packing and output
work), all numba threads; medians over repeats.  Targets (issue 10): molecular regime <= 3x the
atoms-only cost per state, hot states within 10 %.
"""

from __future__ import annotations

import argparse
import json
import statistics
import time

import numpy as np

from ionbal import _problems
from ionbal.chemistry import solve_chemistry
from ionbal.data.pack import pack


def _time(fn, repeats):
    out = []
    for _ in range(repeats):
        t0 = time.perf_counter()
        fn()
        out.append(time.perf_counter() - t0)
    return statistics.median(out), out


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("--n", type=int, default=20000)
    ap.add_argument("--repeats", type=int, default=3)
    ap.add_argument("--json", default=None)
    a = ap.parse_args(argv)
    p = pack(_problems.mixtures()["AGSS09"])
    T, P = _problems.random_states(a.n, seed=4)
    solve_chemistry(p, T[:300], state="gas_pressure", value=P[:300])  # compile
    solve_chemistry(p, T[:300], state="gas_pressure", value=P[:300], molecules=False)
    figures = {}
    for label, sel in (("molecular regime (T < 6,000 K)", T < 6000.0), ("hot (T >= 6,000 K)", T >= 6000.0)):
        t, v = np.ascontiguousarray(T[sel]), np.ascontiguousarray(P[sel])
        tm, tm_all = _time(lambda: solve_chemistry(p, t, state="gas_pressure", value=v), a.repeats)
        ta, ta_all = _time(lambda: solve_chemistry(p, t, state="gas_pressure", value=v, molecules=False),
                           a.repeats)
        s = solve_chemistry(p, t, state="gas_pressure", value=v)
        figures[label] = dict(n=int(t.size), us_per_state_molecules=1e6 * tm / t.size,
                              us_per_state_atoms=1e6 * ta / t.size, ratio=tm / ta,
                              converged=float(np.mean(s.status == 0)), mean_iterations=float(s.iterations.mean()),
                              times_molecules=tm_all, times_atoms=ta_all)
        f = figures[label]
        target = 3.0 if "molecular" in label else 1.10
        print(f"{label:34s} n={f['n']:6d}  molecules {f['us_per_state_molecules']:8.1f} us/state  atoms-only "
              f"{f['us_per_state_atoms']:7.1f} us/state  ratio {f['ratio']:5.2f} (target <= {target:.2f}: "
              f"{'met' if f['ratio'] <= target else 'NOT met'})  converged {100 * f['converged']:.1f} %")
    if a.json:
        with open(a.json, "w") as fh:
            json.dump(figures, fh, indent=2)
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
