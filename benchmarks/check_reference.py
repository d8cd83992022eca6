"""Compare ln n_e of the installed ionbal with a reference saved by ``benchmarks/save_reference.py``.

    python benchmarks/check_reference.py REF.npz

Prints the worst relative difference of n_e (random states and default grid), the number of states
not converged, and the solve throughput of both sets (median of 3, all numba threads).  Exits 1 when
a state does not converge or n_e differs by more than 1e-12 relative.
"""

from __future__ import annotations

import sys
import time

import numpy as np

sys.path.insert(0, __file__.rsplit("/", 1)[0])
from save_reference import solve_x  # noqa: E402


def main(argv=None) -> int:
    argv = sys.argv[1:] if argv is None else argv
    ref = np.load(argv[0])
    bad = False
    for tag, T, P, xr in (("random", ref["T"], ref["P"], ref["x"]), ("grid", ref["Tg"], ref["Pg"], ref["xg"])):
        solve_x(T[:100], P[:100])  # compile / load the cache
        times = []
        for _ in range(3):
            t0 = time.perf_counter()
            x, code = solve_x(T, P)
            times.append(time.perf_counter() - t0)
        rel = np.max(np.abs(np.expm1(x - xr)))
        nbad = int(np.sum(code != 0))
        print(f"{tag:7s} {T.size:8d} states  {T.size / np.median(times):12,.0f} states/s  "
              f"max |dn_e/n_e| vs {ref['commit']} = {rel:.2e}  not converged: {nbad}")
        bad |= nbad > 0 or not rel <= 1e-12
    return int(bad)


if __name__ == "__main__":
    raise SystemExit(main())
