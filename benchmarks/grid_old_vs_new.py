"""``ionbal grid`` of this tree against an older tree's, interleaved, as whole processes (issue 12).

    git archive main | tar -x -C /tmp/ionbal-old && ln -s ../tables /tmp/ionbal-old/ionbal/tables
    python benchmarks/grid_old_vs_new.py --old /tmp/ionbal-old [--rounds 3] [-- GRID OPTIONS]

Each round runs the default grid (or the options after ``--``) once per tree, old first, each in
a new process (warm numba cache: run once before measuring), the old tree first on
``PYTHONPATH``.  Per run: wall seconds, CPU seconds of the process (user + system, both threads),
peak resident memory; then the two files are compared with ``compare_grid_files.py --rtol 1e-12``.
On a shared machine only the ratios of the same round mean anything.
"""
from __future__ import annotations

import argparse
import os
import resource
import statistics
import subprocess
import sys
import tempfile
import time

HERE = os.path.dirname(os.path.abspath(__file__))


def run(tree_env, out, extra):
    before = resource.getrusage(resource.RUSAGE_CHILDREN)
    t0 = time.perf_counter()
    # a fresh intermediate process per run, so that ru_maxrss of the children is this run's own
    code = ("import resource, subprocess, sys; subprocess.run(sys.argv[1:], check=True, "
            "stdout=subprocess.DEVNULL); print(resource.getrusage(resource.RUSAGE_CHILDREN).ru_maxrss)")
    res = subprocess.run([sys.executable, "-c", code, sys.executable, "-m", "ionbal.cli", "grid", "-o", out,
                          "--overwrite", "-q", *extra], env=tree_env, capture_output=True, text=True, check=True)
    wall = time.perf_counter() - t0
    after = resource.getrusage(resource.RUSAGE_CHILDREN)
    cpu = (after.ru_utime - before.ru_utime) + (after.ru_stime - before.ru_stime)
    return wall, cpu, int(res.stdout.strip().splitlines()[-1]) / 1024.0


def main():
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--old", required=True, help="source tree of the old commit (its ionbal/ first on PYTHONPATH)")
    ap.add_argument("--rounds", type=int, default=3)
    ap.add_argument("grid_args", nargs="*", help="options of ionbal grid (after --)")
    a = ap.parse_args()
    tmp = tempfile.mkdtemp()
    envs = {"old": dict(os.environ, PYTHONPATH=os.path.abspath(a.old)), "new": dict(os.environ)}
    envs["new"].pop("PYTHONPATH", None)
    res = {"old": [], "new": []}
    for r in range(a.rounds):
        for tree in ("old", "new"):
            res[tree].append(run(envs[tree], os.path.join(tmp, tree + ".h5"), a.grid_args))
            w, c, m = res[tree][-1]
            print(f"round {r + 1} {tree}: wall {w:6.1f} s  CPU {c:6.1f} s  peak RSS {m:6.0f} MB", flush=True)
    for k, label in ((0, "wall"), (1, "CPU")):
        ratios = [o[k] / n[k] for o, n in zip(res["old"], res["new"])]
        print(f"{label}: old / new per round {', '.join(f'{x:.2f}' for x in ratios)}; "
              f"median {statistics.median(ratios):.2f}x")
    for tree in ("old", "new"):
        print(f"{tree} file {os.path.getsize(os.path.join(tmp, tree + '.h5')) / 1e6:.1f} MB")
    subprocess.run([sys.executable, os.path.join(HERE, "compare_grid_files.py"), os.path.join(tmp, "old.h5"),
                    os.path.join(tmp, "new.h5"), "--rtol", "1e-12"])


if __name__ == "__main__":
    main()
