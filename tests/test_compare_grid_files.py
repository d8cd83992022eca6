"""benchmarks/compare_grid_files.py: the script that checks "behaviour unchanged" bitwise."""

from __future__ import annotations

import importlib.util
import io
from pathlib import Path

import h5py
import numpy as np

from ionbal.grid import Axis, GridSpec, run_grid

SCRIPT = Path(__file__).resolve().parents[1] / "benchmarks" / "compare_grid_files.py"


def _load():
    spec = importlib.util.spec_from_file_location("compare_grid_files", SCRIPT)
    mod = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(mod)
    return mod


def test_identical_runs_compare_equal_and_a_flipped_bit_does_not(tmp_path):
    cmp = _load()
    spec = GridSpec(Axis.log("temperature", 4000.0, 8000.0, 4), Axis.log("gas_pressure", 1e2, 1e5, 3),
                    species=("H I", "Fe I", "Fe II"))
    a, b = tmp_path / "a.h5", tmp_path / "b.h5"
    run_grid(spec, a, progress=False)
    run_grid(spec, b, progress=False)
    out = io.StringIO()
    assert cmp.compare(str(a), str(b), out=out) == 0, out.getvalue()
    assert "all bitwise equal" in out.getvalue()
    with h5py.File(b, "r+") as f:
        x = f["electron_density"][()]
        x[0, 0] = np.nextafter(x[0, 0], np.inf)  # one ulp
        f["electron_density"][...] = x
    out = io.StringIO()
    assert cmp.compare(str(a), str(b), out=out) == 1
    assert "electron_density" in out.getvalue() and "DIFFERS" in out.getvalue()
