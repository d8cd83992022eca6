"""Model files as people write them: aliases, an explicit column mapping, no silent switch of the input."""

import numpy as np
import pytest

import ionbal
from ionbal.column import read_model, solve_column
from ionbal.io.models import parse_column_map, resolve_columns

T = np.array([4500.0, 5500.0, 6500.0])
P = np.array([1e3, 1e4, 1e5])


def _model(tmp_path, names, sep=" "):
    pe = ionbal.solve(T, gas_pressure=P).electron_pressure * 1.01  # an invented "published" P_e, 1 % off
    lines = ["# an invented test structure", sep.join(names)]
    lines += [sep.join(f"{v:.10e}" for v in (i, T[i], P[i], pe[i])) for i in range(len(T))]
    p = tmp_path / ("m.csv" if sep == "," else "m.txt")
    p.write_text("\n".join(lines) + "\n")
    return p


@pytest.mark.parametrize("names", [("depth", "T", "Pgas", "Pe"), ("depth", "temp", "P_gas", "p_e"),
                                   ("depth", "Temperature", "PG", "PE")])
def test_aliases_keep_gas_pressure_and_the_comparison(tmp_path, names):
    # the case of the issue: a column named Pgas must not turn the electron pressure into the input
    res = solve_column(read_model(_model(tmp_path, names)))
    assert res.state_variable == "gas_pressure"
    assert [c.quantity for c in res.comparisons] == ["electron_pressure"]
    assert res.columns["gas_pressure"] == names[2] and res.columns["temperature"] == names[1]
    assert res.passed_through == ("depth",)
    text = "\n".join(res.input_lines())
    assert f"gas_pressure <- {names[2]!r}" in text and "compared with" in text
    np.testing.assert_allclose(res.table["electron_density"], ionbal.solve(T, gas_pressure=P).electron_density,
                               rtol=1e-13)


def test_explicit_mapping(tmp_path):
    p = _model(tmp_path, ("depth", "Tgas_K", "pressure_total_cgs", "Pelec_x"), sep=",")
    with pytest.raises(ValueError, match="no temperature column"):
        solve_column(read_model(p))
    t = read_model(p, columns="Tgas_K=temperature, pressure_total_cgs=gas_pressure,Pelec_x=electron_pressure")
    res = solve_column(t)
    assert res.state_variable == "gas_pressure" and len(res.comparisons) == 1
    assert res.columns == {"temperature": "Tgas_K", "gas_pressure": "pressure_total_cgs",
                           "electron_pressure": "Pelec_x"}


def test_mapping_errors(tmp_path):
    p = _model(tmp_path, ("depth", "T", "Pgas", "Pe"))
    with pytest.raises(ValueError, match="not a column ionbal knows"):
        read_model(p, columns="T=temprature")
    with pytest.raises(ValueError, match="has no column 'X'"):
        read_model(p, columns="X=temperature")
    with pytest.raises(ValueError, match="FILE_COLUMN=NAME"):
        parse_column_map("T:temperature")
    with pytest.raises(ValueError, match="both read as gas_pressure"):
        resolve_columns(["T", "P", "Pgas"])
    # an explicit mapping settles the ambiguity; the other column passes through
    assert resolve_columns(["T", "P", "Pgas"], {"Pgas": "gas_pressure"}) == {"temperature": "T",
                                                                             "gas_pressure": "Pgas"}


def test_state_input_that_is_compared_is_said(tmp_path):
    p = tmp_path / "pe.txt"
    p.write_text("T Pe\n5000 1.0\n6000 10.0\n")
    res = solve_column(read_model(p))
    assert res.state_variable == "electron_pressure" and res.comparisons == []
    assert any("not compared" in n for n in res.notes)


def test_partial_pressures_column(tmp_path):
    res = solve_column(read_model(_model(tmp_path, ("depth", "T", "Pgas", "Pe"))), species="H I,Fe II",
                       partial_pressures=True)
    # Dalton's law for an ideal gas, p_i = n_i k T (common practice)
    from ionbal.core.constants import K_B
    np.testing.assert_allclose(res.table["partial_pressure_H_I"], res.table["number_density_H_I"] * K_B * T,
                               rtol=1e-14)


def test_csv_and_text_outputs_read_back(tmp_path):
    from astropy.table import Table

    from ionbal.column import write_column

    res = solve_column(read_model(_model(tmp_path, ("depth", "T", "Pgas", "Pe"))), species="H I,Fe II")
    csv, txt = tmp_path / "o.csv", tmp_path / "o.txt"
    write_column(res, csv)
    write_column(res, txt, command="test")
    c = Table.read(csv, format="ascii.csv")
    assert c.colnames == res.table.colnames
    np.testing.assert_array_equal(c["electron_density"], res.table["electron_density"])  # repr: lossless
    text = txt.read_text()
    assert text.startswith("# ionbal") and "electron_density [cm-3]" in text and "# command: test" in text
    back = read_model(txt)  # the text table is a model file again
    np.testing.assert_allclose(back["electron_density"], res.table["electron_density"], rtol=1e-15)
    np.testing.assert_allclose(back["fraction_Fe_II"], res.table["fraction_Fe_II"], rtol=1e-15)
    with pytest.raises(ValueError, match="unknown extension .fits"):
        write_column(res, tmp_path / "o.fits")


@pytest.mark.parametrize("name", ["out.txt", "out.csv", "out", "out.ecsv"])
def test_grid_refuses_non_hdf5_names(tmp_path, monkeypatch, capsys, name):
    from ionbal.cli import main

    monkeypatch.chdir(tmp_path)
    assert main(["grid", "-T", "4000,5000", "-P", "1e3,1e4", "-o", name]) == 2
    assert "a grid file is HDF5" in capsys.readouterr().err
    assert list(tmp_path.iterdir()) == []


def test_mapping_given_to_both_reader_and_solver(tmp_path):
    p = _model(tmp_path, ("depth", "Tgas_K", "Pgas", "Pe"))
    t = read_model(p, columns="Tgas_K=temperature")
    assert solve_column(t, columns="Tgas_K=temperature").columns["temperature"] == "Tgas_K"


def test_long_model_is_solved_in_chunks_with_progress(tmp_path, monkeypatch, capsys):
    import ionbal.column as C

    monkeypatch.setattr(C, "CHUNK_POINTS", 2)  # 3 points: two chunks
    t = read_model(_model(tmp_path, ("depth", "T", "Pgas", "Pe")))
    res = solve_column(t, progress=None)
    np.testing.assert_array_equal(res.table["electron_density"],
                                  ionbal.solve(T, gas_pressure=P).electron_density)
    assert "ionbal column: 100.0% 3/3 pts" in capsys.readouterr().err  # not a terminal: a log line


def test_cli_column_mapping_option(tmp_path, monkeypatch, capsys):
    from ionbal.cli import main

    p = _model(tmp_path, ("depth", "Tgas_K", "Pg_x", "Pe"))
    monkeypatch.chdir(tmp_path)
    assert main(["column", str(p), "-q", "-o", "o.csv", "--columns", "Tgas_K=temperature,Pg_x=gas_pressure"]) == 0
    out = capsys.readouterr().out
    assert "state input      gas_pressure <- 'Pg_x'" in out and "compared with    electron_pressure" in out
    assert main(["column", str(p), "-q", "-o", "o2.csv"]) == 2
    assert "--columns" in capsys.readouterr().err  # the CLI remedy, not the Python keyword
