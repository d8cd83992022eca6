"""Smoke test of the benchmark suite: it runs in quick mode and reports every figure.

Untimed: nothing here checks a speed, a memory figure or a target (those are
measured by ``python benchmarks/run.py`` and recorded in benchmarks/README.md).
It only keeps the benchmarks from rotting as the code they time changes.
"""

from __future__ import annotations

import json
import math
import subprocess
import sys
from pathlib import Path

import pytest

RUN = Path(__file__).resolve().parents[1] / "benchmarks" / "run.py"

SETS = ("agss09", "thirty", "grid")
EXPECTED = (
    [f"{kind}_{s}" for s in SETS for kind in ("throughput", "iterations", "floor_full", "solve_over_floor",
                                               "floor_lean", "solve_over_lean_floor")]
    + ["baseline_rate", "speedup_vs_scipy", "speedup_vs_scipy_same_states", "baseline_agreement",
       "rate_1_thread", "rate_2_threads", "thread_scaling", "cpu_per_wall_2_threads",
       "cold_start", "compile_time", "cached_start", "cached_over_cold_start",
       "grid_rss_1x", "grid_rss_4x", "grid_memory_ratio", "grid_command_rate"]
)
#: figures that may be skipped, with a stated reason, on some machines
MAY_SKIP = {"thread_scaling": ("rate_1_thread", "rate_2_threads", "cpu_per_wall_2_threads"),
            "grid_memory_ratio": ("grid_rss_1x", "grid_rss_4x", "grid_command_rate")}


@pytest.fixture(scope="module")
def quick_run(tmp_path_factory):
    if not RUN.is_file():
        pytest.skip(f"benchmark suite not found at {RUN} (not a source checkout)")
    out = tmp_path_factory.mktemp("bench") / "quick.json"
    proc = subprocess.run([sys.executable, str(RUN), "--quick", "--json", str(out)],
                          capture_output=True, text=True, timeout=900)
    assert proc.returncode == 0, f"benchmarks/run.py --quick failed:\n{proc.stdout}\n{proc.stderr[-3000:]}"
    return proc.stdout, json.loads(out.read_text())


def test_quick_run_reports_every_figure(quick_run):
    stdout, data = quick_run
    figures, skipped = data["figures"], data["skipped"]
    for key in EXPECTED:
        if key in figures:
            value = figures[key]["value"]
            assert value is not None and math.isfinite(value), (key, value)
            assert figures[key]["label"].strip() in stdout, key
            continue
        owner = next((k for k, deps in MAY_SKIP.items() if key == k or key in deps), None)
        assert owner is not None and owner in skipped and skipped[owner]["reason"], f"figure {key} missing"


def test_quick_run_records_machine_and_targets(quick_run):
    _, data = quick_run
    assert data["mode"] == "quick"
    for field in ("nproc", "cpu_model", "memory_gib", "date"):
        assert field in data["machine"], field
    assert set(data["targets"]) == {"solve_over_floor", "speedup_vs_scipy", "thread_scaling",
                                    "cached_over_cold_start", "grid_memory_ratio"}


def test_baseline_agrees_with_ionbal(quick_run):
    # numerical agreement of the plain numpy + brentq solver with ionbal (not a speed check)
    _, data = quick_run
    assert data["figures"]["baseline_agreement"]["value"] < 1e-9
