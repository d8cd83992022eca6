#!/usr/bin/env python
"""ionbal's benchmark suite: every figure of issue "Benchmarks" in one run.

    python benchmarks/run.py                 # the full run (several minutes)
    python benchmarks/run.py --quick         # tiny sizes, for the smoke test
    python benchmarks/run.py --json out.json # also write every figure as JSON

Prints one table (figure, value, target, verdict) and optionally writes the
same figures, the machine and the settings as JSON.  See benchmarks/README.md
for what each figure means.  Timings are medians over repeats: the machine may
be shared.  These are the figures of the atoms-only solve (``molecules=False``,
``--no-molecules``); the joint molecular solve is timed by benchmarks/molecules.py.
"""

from __future__ import annotations

import argparse
import datetime as _dt
import json
import math
import os
import platform
import shutil
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

HERE = Path(__file__).resolve().parent
if str(HERE) not in sys.path:
    sys.path.insert(0, str(HERE))

#: sizes of the full and the quick run
SIZES = {
    "full": dict(n_random=1_000_000, grid=(301, 241), n_baseline=1_000, n_scaling=100_000, repeats=3,
                 scaling_repeats=5, cached_repeats=3),
    "quick": dict(n_random=2_000, grid=(31, 25), n_baseline=10, n_scaling=2_000, repeats=1,
                  scaling_repeats=1, cached_repeats=1),
}

TARGETS = {
    "solve_over_floor": ("<=", 2.0),
    "speedup_vs_scipy": (">=", 1000.0),
    "thread_scaling": (">=", 1.7),
    "cached_over_cold_start": ("<=", 0.30),
    "grid_memory_ratio": ("<=", 1.2),
}

#: the default grid of ``ionbal grid`` (see ionbal._problems.structured_grid)
GRID_T = (2.0e3, 5.0e4)
GRID_P = (1.0e-4, 1.0e8)


# ------------------------------------------------------------------------------------------------
# helpers
# ------------------------------------------------------------------------------------------------

def log(msg: str) -> None:
    print(f"[{time.strftime('%H:%M:%S')}] {msg}", file=sys.stderr, flush=True)


def timed(fn, repeats: int):
    """Median wall time of ``fn()`` over ``repeats`` calls, and all the times."""
    times = []
    for _ in range(max(1, repeats)):
        t0 = time.perf_counter()
        fn()
        times.append(time.perf_counter() - t0)
    return statistics.median(times), times


def _loadavg():
    try:
        return round(os.getloadavg()[0], 2)
    except (AttributeError, OSError):
        return None


def machine_info() -> dict:
    info = {
        "nproc": os.cpu_count(),
        "cpu_model": platform.processor() or platform.machine(),
        "memory_gib": None,
        "python": platform.python_version(),
        "platform": platform.platform(),
        "date": _dt.datetime.now().astimezone().isoformat(timespec="seconds"),
    }
    try:
        with open("/proc/cpuinfo") as fh:
            for line in fh:
                if line.startswith("model name"):
                    info["cpu_model"] = line.split(":", 1)[1].strip()
                    break
    except OSError:
        pass
    try:
        with open("/proc/meminfo") as fh:
            for line in fh:
                if line.startswith("MemTotal"):
                    info["memory_gib"] = round(int(line.split()[1]) / 2**20, 1)
                    break
    except OSError:
        pass
    try:
        import numba
        import scipy

        import ionbal

        info.update(numpy=np.__version__, scipy=scipy.__version__, numba=numba.__version__,
                    ionbal=ionbal.__version__, numba_threads=numba.get_num_threads())
    except Exception:  # noqa: BLE001 - informative only
        pass
    try:
        git = ["git", "-C", str(HERE.parent)]
        info["git_commit"] = subprocess.run(git + ["rev-parse", "--short", "HEAD"], capture_output=True, text=True,
                                            timeout=10).stdout.strip() or None
        dirty = subprocess.run(git + ["status", "--porcelain", "--", "ionbal"], capture_output=True, text=True,
                               timeout=10).stdout.strip()
        info["ionbal_sources_modified"] = bool(dirty) if info["git_commit"] else None
    except (OSError, subprocess.SubprocessError):
        info["git_commit"] = None
    return info


def ionbal_command() -> list:
    """How to start the ionbal command line in a new process."""
    exe = Path(sys.executable).parent / ("ionbal.exe" if os.name == "nt" else "ionbal")
    if exe.exists():
        return [str(exe)]
    found = shutil.which("ionbal")
    if found:
        return [found]
    return [sys.executable, "-c", "import sys; from ionbal.cli import main; sys.exit(main())"]


class Report:
    """Collects figures: key -> dict(label, value, unit, target, ok, note)."""

    def __init__(self):
        self.figures: dict = {}
        self.skipped: dict = {}

    def add(self, key, label, value, unit="", note="", target=None, **extra):
        ok = None
        if target is not None and value is not None and math.isfinite(value):
            op, lim = TARGETS[target]
            ok = value <= lim if op == "<=" else value >= lim
        self.figures[key] = dict(label=label, value=value, unit=unit, note=note,
                                 target=None if target is None else f"{TARGETS[target][0]} {TARGETS[target][1]:g}",
                                 ok=ok, **extra)

    def skip(self, key, label, reason):
        self.skipped[key] = dict(label=label, reason=reason)
        log(f"SKIPPED {label}: {reason}")

    def table(self) -> str:
        rows = [("figure", "value", "target", "")]
        for f in self.figures.values():
            v = f["value"]
            if v is None:
                vs = "-"
            elif abs(v) >= 1000:
                vs = f"{v:,.0f}"
            elif abs(v) >= 10:
                vs = f"{v:.1f}"
            else:
                vs = f"{v:.3g}"
            verdict = "" if f["ok"] is None else ("met" if f["ok"] else "NOT MET")
            if f["ok"] is False and f.get("note"):
                verdict += f" ({f['note']})"
            rows.append((f["label"], f"{vs} {f['unit']}".strip(), f["target"] or "", verdict))
        for s in self.skipped.values():
            rows.append((s["label"], "skipped", "", s["reason"]))
        w = [max(len(r[i]) for r in rows) for i in range(3)]
        lines = []
        for j, r in enumerate(rows):
            lines.append(f"{r[0]:<{w[0]}}  {r[1]:>{w[1]}}  {r[2]:<{w[2]}}  {r[3]}".rstrip())
            if j == 0:
                lines.append("-" * (sum(w) + 6 + 8))
        return "\n".join(lines)


# ------------------------------------------------------------------------------------------------
# sections
# ------------------------------------------------------------------------------------------------

def _count(n: int) -> str:
    """1000000 -> '1e6'."""
    return f"{n:.0e}".replace("e+0", "e").replace("e+", "e")


def problem_sets(sz):
    """The three state sets timed: (key, label, T, P, mixture)."""
    from ionbal._problems import mixtures, random_states, structured_grid

    mix = mixtures()
    T, P = random_states(sz["n_random"], seed=0)
    nt, np_ = sz["grid"]
    Tg, Pg = structured_grid(nt, np_)
    n = _count(sz["n_random"])
    return [
        ("agss09", f"AGSS09, {n} random states", T, P, mix["AGSS09"]),
        ("thirty", f"30 elements, {n} random states", T, P, mix["30 elements"]),
        ("grid", f"AGSS09, structured grid {nt}x{np_}", Tg, Pg, mix["AGSS09"]),
    ]


def bench_throughput_and_floors(rep: Report, sz, sets):
    import ionbal
    from ionbal.data.pack import pack

    import floors

    repeats = sz["repeats"]
    results = {}
    for key, label, T, P, mixture in sets:
        packed = pack(mixture)
        # warm-up: compile (or load from cache) and pack, outside the timings
        r0 = ionbal.solve(T[:64], gas_pressure=P[:64], mixture=mixture, molecules=False)
        floors.full_floor(T[:64], np.log(r0.electron_density).ravel(), packed)
        floors.lean_floor(T[:64], np.log(r0.electron_density).ravel(), packed)

        log(f"solve and floors: {label} ({packed.elem_w.size} elements, {packed.n_stages} stages), "
            f"{repeats} interleaved repeat(s)")
        n = T.size
        q = np.empty(n)
        qn = np.empty(n)
        res = {}
        wall = {"solve": [], "full": [], "lean": []}
        cpu = {"solve": [], "full": [], "lean": []}

        def solve_run():
            res["r"] = ionbal.solve(T, gas_pressure=P, mixture=mixture, molecules=False)
            if "x" not in res:
                res["x"] = np.ascontiguousarray(np.log(res["r"].electron_density), dtype=np.float64).ravel()

        runs = {"solve": solve_run,
                "full": lambda: floors.full_floor(T, res["x"], packed, q, qn),
                "lean": lambda: floors.lean_floor(T, res["x"], packed, q, qn)}
        for _ in range(max(1, repeats)):
            # solve, full floor, lean floor in turn: a burst of outside load hits all three alike
            for name, fn in runs.items():
                w0, c0 = time.perf_counter(), time.process_time()
                fn()
                wall[name].append(time.perf_counter() - w0)
                cpu[name].append(time.process_time() - c0)
        t_solve, t_full, t_lean = (statistics.median(wall[k]) for k in ("solve", "full", "lean"))
        all_solve, all_full, all_lean = wall["solve"], wall["full"], wall["lean"]
        ratio_full = statistics.median(a / b for a, b in zip(wall["solve"], wall["full"]))
        ratio_lean = statistics.median(a / b for a, b in zip(wall["solve"], wall["lean"]))
        cpu_ratio_full = statistics.median(cpu["solve"]) / statistics.median(cpu["full"])
        cpu_ratio_lean = statistics.median(cpu["solve"]) / statistics.median(cpu["lean"])
        r = res["r"]
        x = res["x"]
        it = np.asarray(r.iterations)
        conv = float(np.mean(r.converged))
        log(f"  solve {n / t_solve:,.0f} points/s, mean iterations {it.mean():.2f}, converged {conv:.6f}; "
            f"full floor {n / t_full:,.0f} points/s, lean floor {n / t_lean:,.0f} points/s")

        rep.add(f"throughput_{key}", f"throughput: {label}", n / t_solve, "points/s",
                seconds=t_solve, all_seconds=all_solve, cpu_seconds=cpu["solve"], points=n,
                elements=int(packed.elem_w.size), stages=int(packed.n_stages), converged_fraction=conv)
        rep.add(f"iterations_{key}", f"  mean Newton iterations ({key})", float(it.mean()), "",
                max=int(it.max()), histogram={int(k): int(v) for k, v in zip(*np.unique(it, return_counts=True))})
        rep.add(f"floor_full_{key}", f"  full floor: all Saha factors + all fractions ({key})", n / t_full,
                "points/s", seconds=t_full, all_seconds=all_full, cpu_seconds=cpu["full"])
        rep.add(f"solve_over_floor_{key}", f"  solve / full floor ({key})", ratio_full, "",
                target="solve_over_floor", cpu_time_ratio=cpu_ratio_full,
                note="median over repeats of the per-repeat wall-time ratio")
        rep.add(f"floor_lean_{key}", f"  lean floor: all Saha factors + 1 moment eval ({key})", n / t_lean,
                "points/s", seconds=t_lean, all_seconds=all_lean, cpu_seconds=cpu["lean"])
        rep.add(f"solve_over_lean_floor_{key}", f"  solve / lean floor ({key})", ratio_lean, "",
                cpu_time_ratio=cpu_ratio_lean, note="for reference; the target applies to the full floor")
        results[key] = dict(T=T, P=P, mixture=mixture, x=x, seconds=t_solve)
    return results


def bench_baseline(rep: Report, sz, throughput):
    """Plain numpy + brentq per point on n_baseline states from the same distribution."""
    import ionbal
    from ionbal._problems import mixtures, random_states
    from ionbal.data.pack import pack

    from baseline import BaselineSolver

    n = sz["n_baseline"]
    T, P = random_states(n, seed=1)
    mixture = mixtures()["AGSS09"]
    solver = BaselineSolver(pack(mixture))
    log(f"numpy + brentq baseline: {n} states, AGSS09")
    t0 = time.perf_counter()
    x_base = solver.solve(T, P)
    t_base = time.perf_counter() - t0
    ionbal.solve(T, gas_pressure=P, mixture=mixture, molecules=False)  # warm
    res = {}

    def run():
        res["r"] = ionbal.solve(T, gas_pressure=P, mixture=mixture, molecules=False)

    t_same, _ = timed(run, max(5, sz["repeats"]))
    x_ib = np.log(res["r"].electron_density)
    dev = np.abs(x_base - x_ib)
    base_rate = n / t_base
    log(f"  baseline {base_rate:,.0f} points/s; max |d ln n_e| = {dev.max():.2e}")
    rep.add("baseline_rate", f"numpy + brentq per point (AGSS09, {n} states)", base_rate, "points/s",
            seconds=t_base, points=n)
    big = throughput.get("agss09")
    if big is not None:
        rate_big = big["T"].size / big["seconds"]
        rep.add("speedup_vs_scipy", f"  speed-up of ionbal ({_count(big['T'].size)}-state throughput) over it",
                rate_big / base_rate, "x", target="speedup_vs_scipy")
    rep.add("speedup_vs_scipy_same_states", f"  speed-up, ionbal on the same {n} states", t_base / t_same, "x",
            ionbal_seconds=t_same)
    rep.add("baseline_agreement", "  agreement: max |ln n_e(ionbal) - ln n_e(baseline)|", float(dev.max()), "",
            median=float(np.median(dev)))


def bench_scaling(rep: Report, sz):
    import numba

    import ionbal
    from ionbal._problems import mixtures, random_states

    max_threads = numba.config.NUMBA_NUM_THREADS
    if max_threads < 2:
        rep.skip("thread_scaling", "thread scaling 1 -> 2", f"numba has {max_threads} thread(s) on this machine")
        return
    n = sz["n_scaling"]
    T, P = random_states(n, seed=2)
    mixture = mixtures()["AGSS09"]
    ionbal.solve(T[:64], gas_pressure=P[:64], mixture=mixture, molecules=False)
    before = numba.get_num_threads()
    times = {1: [], 2: []}
    cpus = {1: [], 2: []}
    log(f"thread scaling: {n} states, AGSS09, {sz['scaling_repeats']} interleaved repeat(s)")
    try:
        for _ in range(sz["scaling_repeats"]):
            for k in (1, 2):  # interleaved, so a burst of outside load hits both
                numba.set_num_threads(k)
                t0, c0 = time.perf_counter(), time.process_time()
                ionbal.solve(T, gas_pressure=P, mixture=mixture, molecules=False)
                times[k].append(time.perf_counter() - t0)
                cpus[k].append(time.process_time() - c0)
    finally:
        numba.set_num_threads(before)
    t1 = statistics.median(times[1])
    t2 = statistics.median(times[2])
    # CPU seconds per wall second of the 2-thread runs: ~2 when both cores were ours, ~1 when
    # another process held one of them (then the scaling says nothing about ionbal)
    busy = statistics.median(c / w for c, w in zip(cpus[2], times[2]))
    log(f"  1 thread {n / t1:,.0f} points/s, 2 threads {n / t2:,.0f} points/s; "
        f"2-thread runs got {busy:.2f} CPU-s per wall-s")
    rep.add("rate_1_thread", f"throughput, 1 thread (AGSS09, {n} states)", n / t1, "points/s", all_seconds=times[1],
            cpu_seconds=cpus[1])
    rep.add("rate_2_threads", "throughput, 2 threads", n / t2, "points/s", all_seconds=times[2],
            cpu_seconds=cpus[2])
    note = "" if busy >= 1.8 else "the 2-thread runs did not get two cores: the machine was busy"
    rep.add("thread_scaling", "  thread scaling 1 -> 2", statistics.median(a / b for a, b in zip(times[1], times[2])),
            "x", target="thread_scaling", note=note)
    rep.add("cpu_per_wall_2_threads", "  CPU-s per wall-s in the 2-thread runs (2 = both cores ours)", busy, "")


def bench_startup(rep: Report, sz):
    cmd = ionbal_command() + ["state", "-T", "5800", "-P", "1e5"]
    with tempfile.TemporaryDirectory(prefix="ionbal-numba-cache-") as cache:
        env = dict(os.environ, NUMBA_CACHE_DIR=cache)

        def run(c):
            t0 = time.perf_counter()
            p = subprocess.run(c, env=env, capture_output=True, text=True)
            dt = time.perf_counter() - t0
            if p.returncode != 0:
                raise RuntimeError(f"{' '.join(c)} failed: {p.stderr.strip()[-500:]}")
            return dt

        log("start-up: one-point CLI call, empty numba cache")
        cold = run(cmd)
        log(f"  cold {cold:.2f} s; now with the cache it wrote")
        cached = statistics.median(run(cmd) for _ in range(sz["cached_repeats"]))
        imp = run([sys.executable, "-c", "import numba, ionbal.api"])
    log(f"  cached {cached:.2f} s; imports alone {imp:.2f} s")
    rep.add("cold_start", "start-up: `ionbal state` with an empty numba cache", cold, "s")
    rep.add("compile_time", "  compile time on first use (cold - cached)", cold - cached, "s")
    rep.add("cached_start", "  `ionbal state` with the cache warm", cached, "s", imports_seconds=imp)
    rep.add("cached_over_cold_start", "  cached / cold", cached / cold, "", target="cached_over_cold_start")


def _peak_rss_of(cmd, env=None) -> tuple[float, float]:
    """Peak RSS [MiB] and wall time [s] of ``cmd``, measured in a fresh intermediate process."""
    probe = ("import json, resource, subprocess, sys, time\n"
             "t = time.perf_counter()\n"
             "p = subprocess.run(sys.argv[1:], capture_output=True, text=True)\n"
             "dt = time.perf_counter() - t\n"
             "ru = resource.getrusage(resource.RUSAGE_CHILDREN)\n"
             "print(json.dumps(dict(rc=p.returncode, maxrss_kib=ru.ru_maxrss, seconds=dt, err=p.stderr[-800:])))\n")
    out = subprocess.run([sys.executable, "-c", probe, *cmd], capture_output=True, text=True, env=env)
    if out.returncode != 0:
        raise RuntimeError(out.stderr.strip()[-800:])
    d = json.loads(out.stdout.strip().splitlines()[-1])
    if d["rc"] != 0:
        raise RuntimeError(f"{' '.join(cmd)} exited {d['rc']}: {d['err'].strip()}")
    return d["maxrss_kib"] / 1024.0, d["seconds"]


def bench_memory(rep: Report, sz):
    try:
        import resource  # noqa: F401 - POSIX only
    except ImportError:
        rep.skip("grid_memory_ratio", "memory of `ionbal grid`", "the resource module (POSIX) is not available")
        return
    base = ionbal_command()
    helped = subprocess.run(base + ["grid", "--help"], capture_output=True, text=True)
    if helped.returncode != 0 or "--temperature" not in helped.stdout or "--gas-pressure" not in helped.stdout:
        rep.skip("grid_memory_ratio", "memory of `ionbal grid`",
                 "`ionbal grid` (with --temperature/--gas-pressure axis options) is not available yet")
        return
    nt, np_ = sz["grid"]
    figures = {}
    with tempfile.TemporaryDirectory(prefix="ionbal-grid-bench-") as tmp:
        for scale, (a, b) in (("1x", (nt, np_)), ("4x", (2 * nt, 2 * np_))):
            out = Path(tmp) / f"grid-{scale}.h5"
            cmd = base + ["grid", "-T", f"{GRID_T[0]:g}:{GRID_T[1]:g}:{a}", "-P", f"{GRID_P[0]:g}:{GRID_P[1]:g}:{b}",
                          "-o", str(out), "--overwrite", "-q", "--no-molecules"]
            log(f"memory: ionbal grid {a}x{b}")
            rss, secs = _peak_rss_of(cmd)
            figures[scale] = (rss, secs, a * b)
            log(f"  peak RSS {rss:.0f} MiB, {secs:.1f} s, {a * b / secs:,.0f} points/s end to end")
            out.unlink(missing_ok=True)
    (r1, s1, n1), (r4, s4, n4) = figures["1x"], figures["4x"]
    rep.add("grid_rss_1x", f"memory: `ionbal grid` {nt}x{np_}, peak RSS", r1, "MiB", seconds=s1, points=n1,
            points_per_second=n1 / s1)
    rep.add("grid_rss_4x", f"  `ionbal grid` {2 * nt}x{2 * np_}, peak RSS", r4, "MiB", seconds=s4, points=n4,
            points_per_second=n4 / s4)
    rep.add("grid_memory_ratio", "  ratio 4x / 1x", r4 / r1, "", target="grid_memory_ratio")
    rep.add("grid_command_rate", f"  `ionbal grid` {nt}x{np_} end to end (process, HDF5, validity)", n1 / s1,
            "points/s", seconds=s1)


SECTIONS = ("throughput", "baseline", "scaling", "startup", "memory")


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0],
                                 formatter_class=argparse.RawDescriptionHelpFormatter)
    ap.add_argument("--quick", action="store_true", help="tiny sizes, one repeat (smoke test; figures meaningless)")
    ap.add_argument("--json", metavar="FILE", help="also write the figures, machine and settings as JSON")
    ap.add_argument("--only", metavar="LIST", default=None,
                    help=f"comma-separated subset of the sections {','.join(SECTIONS)}")
    ap.add_argument("--repeats", type=int, default=None, help="repeats of each in-process timing (median taken)")
    args = ap.parse_args(argv)

    mode = "quick" if args.quick else "full"
    sz = dict(SIZES[mode])
    if args.repeats:
        sz["repeats"] = args.repeats
        sz["scaling_repeats"] = max(args.repeats, sz["scaling_repeats"])
    sections = SECTIONS if not args.only else tuple(s.strip() for s in args.only.split(",") if s.strip())
    unknown = set(sections) - set(SECTIONS)
    if unknown:
        ap.error(f"unknown section(s) {', '.join(sorted(unknown))}; choose from {', '.join(SECTIONS)}")

    machine = machine_info()
    log(f"{mode} run on {machine['nproc']} CPU(s), {machine['cpu_model']}, {machine['memory_gib']} GiB")
    rep = Report()
    t_start = time.perf_counter()
    load = {"start": _loadavg()}
    throughput = {}
    if "throughput" in sections:
        throughput = bench_throughput_and_floors(rep, sz, problem_sets(sz))
    if "baseline" in sections:
        bench_baseline(rep, sz, throughput)
    if "scaling" in sections:
        bench_scaling(rep, sz)
    if "startup" in sections:
        bench_startup(rep, sz)
    if "memory" in sections:
        bench_memory(rep, sz)
    total = time.perf_counter() - t_start
    load["end"] = _loadavg()

    print()
    print(f"ionbal benchmarks ({mode} run; {machine['date']}; {machine['nproc']} CPU(s) {machine['cpu_model']}, "
          f"{machine['memory_gib']} GiB; numba threads {machine.get('numba_threads')}; {total:.0f} s; "
          f"load average {load['start']} at start, {load['end']} at end)")
    print(rep.table())
    if args.json:
        payload = dict(mode=mode, sizes=sz, sections=list(sections), machine=machine, total_seconds=total,
                       load_average=load,
                       targets={k: f"{op} {v:g}" for k, (op, v) in TARGETS.items()},
                       figures=rep.figures, skipped=rep.skipped)
        Path(args.json).write_text(json.dumps(payload, indent=2, default=float) + "\n")
        log(f"wrote {args.json}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
