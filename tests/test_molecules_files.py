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


def test_grid_interpolates_molecules_and_records_the_choice(tmp_path):
    spec = _spec(molecules=["CO", "H2", "H2O"])
    run_grid(spec, tmp_path / "m.h5", progress=False)
    with open_grid(tmp_path / "m.h5") as g:
        # at the grid's own nodes, interpolation gives the stored number (log-linear interpolation)
        T0, P0 = T_AXIS.array[2], P_AXIS.array[1]
        got = g.interpolate_number_density("CO", T0, P0)
        assert float(got) == pytest.approx(float(g.number_density("CO")[2, 1]), rel=1e-12)
        # between nodes: within a few per cent of a direct solve on this coarse grid
        T1, P1 = np.sqrt(T_AXIS.array[2] * T_AXIS.array[3]), np.sqrt(P_AXIS.array[1] * P_AXIS.array[2])
        r = ionbal.solve(T1, gas_pressure=P1, molecules=["CO", "H2", "H2O"])
        assert float(g.interpolate_number_density("H2", T1, P1)) == pytest.approx(float(r.number_density("H2")),
                                                                                   rel=0.05)
        assert float(g.interpolate_number_density("H I", T1, P1)) == pytest.approx(float(r.number_density("H I")),
                                                                                    rel=0.05)
        with pytest.raises(ValueError, match="not stored"):
            g.interpolate_number_density("TiO", T1, P1)
    with h5py.File(tmp_path / "m.h5") as f:
        rec = json.loads(f.attrs["ionbal_molecules"])
        assert rec["molecules"] is True and set(rec["solved"]) == {"CO", "H2", "H2O"}
        assert "3 gas-phase molecules" in f.attrs["comment"]
    run_grid(_spec(molecules=False), tmp_path / "a.h5", progress=False)
    with h5py.File(tmp_path / "a.h5") as f:
        assert json.loads(f.attrs["ionbal_molecules"]) == {"molecules": False, "solved": []}
        assert "atoms and atomic ions only" in f.attrs["comment"]


def test_column_files_record_the_molecules(tmp_path):
    from astropy.table import Table

    from ionbal.column import read_model, solve_column, write_column

    table = read_model(EXAMPLE)
    res = solve_column(table, molecules=["CO", "H2"])
    write_column(res, tmp_path / "c.h5")
    with h5py.File(tmp_path / "c.h5") as f:
        assert set(json.loads(f.attrs["ionbal_molecules"])["solved"]) == {"CO", "H2"}
        assert "number_density_CO" in f
    write_column(res, tmp_path / "c.txt")
    assert "# molecules: 2 solved with the ions" in (tmp_path / "c.txt").read_text()
    write_column(res, tmp_path / "c.ecsv")
    meta = Table.read(tmp_path / "c.ecsv").meta
    assert set(meta["ionbal_molecules"]) == {"CO", "H2"} and "molecules" in meta["ionbal_physics"]
    atoms = solve_column(table, molecules=False)
    write_column(atoms, tmp_path / "a.txt")
    assert "# molecules: none" in (tmp_path / "a.txt").read_text()


def test_state_shows_where_the_nuclei_are(capsys):
    """Text and JSON: each element's share in molecules (issue 10 example: H in H2, C in CO at 3,000 K)."""
    assert main(["state", "-T", "3000", "-P", "1e5", "--molecules", "--elements", "H,C,Fe"]) == 0
    out = capsys.readouterr().out
    lines = {ln.split()[0]: ln for ln in out.splitlines() if ln.startswith("  ") and ln.split()
             and ln.split()[0] in ("H", "C", "Fe")}
    assert lines["C"].split()[1] == "CO" and "in molecules" in lines["C"]
    assert lines["H"].split()[1] == "H2" and "(H2 0.7" in lines["H"]
    assert "dyn cm^-2" in out  # molecule partial pressures
    assert main(["state", "-T", "3000", "-P", "1e5", "--molecules", "--elements", "H,C", "--json"]) == 0
    rec = json.loads(capsys.readouterr().out)
    r = ionbal.solve(3000.0, gas_pressure=1e5, molecules=True)
    h = r.element_budget("H")
    assert rec["in_molecules"]["H"]["H2"] == pytest.approx(float(h["H2"]), rel=1e-12)
    stages_h = sum(v for k, v in rec["fractions"].items() if k.startswith("H"))
    assert stages_h + rec["in_molecules"]["H"]["total"] == pytest.approx(1.0, abs=1e-12)
    assert rec["molecule_partial_pressures"]["CO"] == pytest.approx(float(r.partial_pressure("CO")), rel=1e-12)
    assert rec["units"]["molecule_partial_pressures"] == "dyn cm-2"


def test_state_table_output_has_molecules(tmp_path, monkeypatch, capsys):
    from astropy.table import Table

    monkeypatch.chdir(tmp_path)
    assert main(["state", "-T", "3000", "-P", "1e5", "--molecules", "CO,H2O", "--elements", "C", "-o",
                 "s.ecsv"]) == 0
    t = Table.read(tmp_path / "s.ecsv")
    r = ionbal.solve(3000.0, gas_pressure=1e5, molecules=["CO", "H2O"])
    assert float(t["number_density_CO"][0]) == pytest.approx(float(r.number_density("CO")), rel=1e-12)
    assert "number_density_H2O" in t.colnames and "fraction_CO" not in t.colnames
