"""The solve of this tree against an older commit's, interleaved, in child processes (issue 12).

    git worktree add /work/wt-speed-old 322962b          # the old solver, once
    python benchmarks/old_vs_new.py --old /work/wt-speed-old [--n 100000] [--rounds 3]

Each round runs one child per tree (old, new, old, new, ...), with ``NUMBA_NUM_THREADS=1`` so that
CPU time per point is what is compared (wall time on a shared machine says little); the old tree is
put first on ``PYTHONPATH``.  Per tree: median CPU microseconds per point on AGSS09 random states
(1e3-1e6 K x 1e-6-1e12 dyn cm^-2) and on the structured default grid, mean Newton iterations, and
the worst relative difference of n_e between the trees (target: 1e-12), every state converged.
"""
import argparse
import json
import os
import statistics
import subprocess
import sys
import tempfile

CHILD = r"""
import json, sys, time, numpy as np, ionbal
from ionbal._problems import random_states, structured_grid, mixtures
n, out = int(sys.argv[1]), sys.argv[2]
mix = mixtures()["AGSS09"]
sets = {"random": random_states(n, seed=3), "grid": structured_grid()}
res = {}
for name, (T, P) in sets.items():
    ionbal.solve(T[:50], gas_pressure=P[:50], mixture=mix)  # compile or load the cache
    t0 = time.process_time(); r = ionbal.solve(T, gas_pressure=P, mixture=mix); t1 = time.process_time()
    res[name] = dict(us=(t1 - t0) / T.size * 1e6, iters=float(np.mean(r.iterations)),
                     ok=bool(np.all(r.status == 0)))
    np.save(out + name + ".npy", r.electron_density)
print(json.dumps({"file": ionbal.core.solver.__file__, **res}))
"""


def main():
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--old", required=True, help="worktree of the old commit")
    ap.add_argument("--n", type=int, default=100_000)
    ap.add_argument("--rounds", type=int, default=3)
    a = ap.parse_args()
    import numpy as np
    tmp = tempfile.mkdtemp()
    times = {"old": {"random": [], "grid": []}, "new": {"random": [], "grid": []}}
    info = {}
    for _ in range(a.rounds):
        for tree in ("old", "new"):
            env = dict(os.environ, NUMBA_NUM_THREADS="1")
            if tree == "old":
                env["PYTHONPATH"] = os.path.abspath(a.old) + os.pathsep + env.get("PYTHONPATH", "")
            out = subprocess.run([sys.executable, "-c", CHILD, str(a.n), os.path.join(tmp, tree)], env=env,
                                 capture_output=True, text=True, check=True, cwd=tmp).stdout
            r = json.loads(out.strip().splitlines()[-1])
            info[tree] = r
            for k in ("random", "grid"):
                times[tree][k].append(r[k]["us"])
    for k in ("random", "grid"):
        old = np.load(os.path.join(tmp, "old" + k + ".npy"))
        new = np.load(os.path.join(tmp, "new" + k + ".npy"))
        mo, mn = statistics.median(times["old"][k]), statistics.median(times["new"][k])
        print(f"{k:7s} old {mo:7.2f} us/pt  new {mn:7.2f} us/pt  (1 thread, CPU)  speed-up {mo / mn:5.2f}x  "
              f"iterations {info['old'][k]['iters']:.3f} -> {info['new'][k]['iters']:.3f}  "
              f"all converged {info['old'][k]['ok'] and info['new'][k]['ok']}  "
              f"max |n_e rel diff| {np.max(np.abs(new / old - 1)):.2e}")
    print("pairs (old, new) us/pt:", json.dumps(times))
    print("trees:", info["old"]["file"], info["new"]["file"])


if __name__ == "__main__":
    main()
