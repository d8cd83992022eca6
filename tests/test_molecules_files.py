"""Molecules in ``ionbal state``, column files and grid files (issue 10).

Sources: issue 10's example (NIST-JANAF, Chase 1998): at 3,000 K and P_gas = 1e5 dyn cm^-2
(AGSS09) H2 and CO are the most abundant molecules; the files must hold the numbers of
:func:`ionbal.solve` itself.
"""

from __future__ import annotations

import json
from pathlib import Path

import h5py
import numpy as np
import pytest

import ionbal
from ionbal.cli import main
from ionbal.grid import Axis, GridMismatchError, GridSpec, run_grid
from ionbal.io import open_grid

EXAMPLE = Path(__file__).resolve().parents[1] / "examples" / "vessa7-model.txt"
T_AXIS = Axis.log("temperature", 2500.0, 6000.0, 6)
P_AXIS = Axis.log("gas_pressure", 1e2, 1e6, 4)


def test_state_lists_molecules(capsys):
    assert main(["state", "-T", "3000", "-P", "1e5", "--molecules", "all"]) == 0
    out = capsys.readouterr().out
    assert "molecules" in out and "\n    H2 " in out and "\n    CO " in out
    assert main(["state", "-T", "3000", "-P", "1e5", "--no-molecules"]) == 0
    assert "not included" in capsys.readouterr().out
    assert main(["state", "-T", "3000", "-P", "1e5", "--molecules", "CO,H2", "--json"]) == 0
    rec = json.loads(capsys.readouterr().out)
    assert set(rec["molecules"]) == {"CO", "H2"}
    r = ionbal.solve(3000.0, gas_pressure=1e5, molecules=["CO", "H2"])
    assert rec["molecules"]["CO"] == pytest.approx(float(r.number_density("CO")), rel=1e-12)
    assert main(["state", "-T", "3000", "-P", "1e5", "--molecules", "CO", "--no-molecules"]) == 2
    assert "not both" in capsys.readouterr().err
    assert main(["state", "-T", "3000", "-P", "1e5", "--molecules", "Qq2"]) == 2


def test_column_writes_molecule_columns(tmp_path):
    from ionbal.column import read_model, solve_column, write_column

    table = read_model(EXAMPLE)
    res = solve_column(table, molecules=["CO", "H2", "H2O"], partial_pressures=True)
    assert res.molecules == ("H2", "CO", "H2O") or set(res.molecules) == {"H2", "CO", "H2O"}
    t = res.table
    for m in ("CO", "H2", "H2O"):
        assert f"number_density_{m}" in t.colnames and f"partial_pressure_{m}" in t.colnames
    T = np.asarray(t["temperature"] if "temperature" in t.colnames else t[res.temperature_column], float)
    r = ionbal.solve(T, gas_pressure=np.asarray(t["gas_pressure"] if "gas_pressure" in t.colnames
                                                else t["input_gas_pressure"], float),
                     molecules=["CO", "H2", "H2O"]) if res.state_variable == "gas_pressure" else None
    if r is not None:
        np.testing.assert_allclose(np.asarray(t["number_density_CO"]), r.number_density("CO"), rtol=1e-12)
    out = write_column(res, tmp_path / "c.ecsv")
    assert "number_density_H2O" in out.read_text()
    atoms = solve_column(table, molecules=False)
    assert atoms.molecules == () and not any(c.endswith("_CO") for c in atoms.table.colnames)


def _spec(**kw):
    return GridSpec(T_AXIS, P_AXIS, species=("H I", "C I", "Fe II"), tile_size=12, validity=False, **kw)


def test_grid_stores_molecules(tmp_path):
    spec = _spec(molecules=["CO", "H2", "H2O"])
    assert spec.molecules == tuple(m for m in spec.molecules) and set(spec.molecules) == {"CO", "H2", "H2O"}
    run_grid(spec, tmp_path / "m.h5", progress=False)
    with open_grid(tmp_path / "m.h5") as g:
        assert set(g.molecules) == {"CO", "H2", "H2O"}
        r = ionbal.solve(T_AXIS.array[:, None], gas_pressure=P_AXIS.array[None, :], molecules=["CO", "H2", "H2O"])
        np.testing.assert_array_equal(g.number_density("CO"), r.number_density("CO"))
        np.testing.assert_array_equal(g.fraction("H I"), r.fraction("H I"))
        with pytest.raises(ValueError, match="not stored"):
            g.number_density("TiO")
    with h5py.File(tmp_path / "m.h5") as f:
        assert f["molecule_number_density"].shape == (3, 6, 4)
        assert f["molecule_number_density"].attrs["units"] == "cm-3"


def test_atoms_only_grid_keeps_its_layout(tmp_path):
    spec = _spec(molecules=False)
    assert "molecules" not in spec.to_dict()
    assert GridSpec.from_dict(spec.to_dict()) == spec
    run_grid(spec, tmp_path / "a.h5", progress=False)
    with h5py.File(tmp_path / "a.h5") as f:
        assert "molecule" not in f and "molecule_number_density" not in f
    with open_grid(tmp_path / "a.h5") as g:
        assert g.molecules == ()
        with pytest.raises(ValueError, match="atoms-only"):
            g.number_density("CO")


def test_resume_with_other_molecules_is_refused(tmp_path, monkeypatch):
    from ionbal import grid as G

    out = tmp_path / "g.h5"
    real = G.compute.compute_tile
    calls = []

    def interrupted(task, *a, **k):
        if len(calls) == 1:
            raise KeyboardInterrupt
        calls.append(1)
        return real(task, *a, **k)

    monkeypatch.setattr(G.compute, "compute_tile", interrupted)
    with pytest.raises(KeyboardInterrupt):
        run_grid(_spec(molecules=["CO"]), out, progress=False)
    monkeypatch.setattr(G.compute, "compute_tile", real)
    with pytest.raises(GridMismatchError, match="molecules"):
        run_grid(_spec(molecules=["CO", "H2"]), out, progress=False)
