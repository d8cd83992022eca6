"""Save ln n_e of the benchmark states from the installed ionbal, for :mod:`benchmarks.check_reference`.

Run once with the solver to compare against (e.g. before changing the core):

    python benchmarks/save_reference.py OUT.npz [--n 200000]

The states are those of ``benchmarks/run.py``: ``ionbal._problems.random_states`` (AGSS09,
1e3-1e6 K, 1e-6-1e12 dyn cm^-2) and ``structured_grid()``; ``x = ln n_e`` and the status of
every state are stored, with the ionbal commit when it can be read from git.
"""

from __future__ import annotations

import argparse
import subprocess
from pathlib import Path

import numpy as np

import ionbal
from ionbal import _problems


def states(n: int):
    T, P = _problems.random_states(n, seed=0)
    Tg, Pg = _problems.structured_grid()
    return (np.asarray(T, float).ravel(), np.asarray(P, float).ravel(),
            np.asarray(Tg, float).ravel(), np.asarray(Pg, float).ravel())


def solve_x(T, P):
    """ln n_e and status of every state, straight from the core driver (AGSS09, gas pressure)."""
    from ionbal.core.solver import MAX_ITER, MODE_GAS_PRESSURE, TOL, solve_many
    from ionbal.data.pack import pack

    arrays = pack(_problems.mixtures()["AGSS09"]).arrays
    n = T.size
    x, lnn = np.empty(n), np.empty(n)
    it, code = np.empty(n, dtype=np.int32), np.empty(n, dtype=np.int8)
    solve_many(MODE_GAS_PRESSURE, T, P, np.full(n, np.nan), arrays, TOL, MAX_ITER, x, lnn, it, code)
    return x, code


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("out")
    ap.add_argument("--n", type=int, default=200_000)
    a = ap.parse_args(argv)
    T, P, Tg, Pg = states(a.n)
    x, s = solve_x(T, P)
    xg, sg = solve_x(Tg, Pg)
    try:
        commit = subprocess.run(["git", "-C", str(Path(ionbal.__file__).parent), "rev-parse", "--short", "HEAD"],
                                capture_output=True, text=True, check=True).stdout.strip()
    except Exception:  # noqa: BLE001 - provenance only
        commit = "unknown"
    np.savez(a.out, T=T, P=P, x=x, status=s, Tg=Tg, Pg=Pg, xg=xg, statusg=sg, commit=commit)
    print(f"saved {T.size} random + {Tg.size} grid states from ionbal {commit} to {a.out}")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
