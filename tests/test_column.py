"""Model-atmosphere columns: reading depth structures, solving, comparing, writing."""

from __future__ import annotations

from pathlib import Path

import h5py
import numpy as np
import pytest
from astropy.table import Table
import astropy.units as u

import ionbal
from ionbal.column import read_model, solve_column, species_column_name, write_column

EXAMPLE = Path(__file__).resolve().parents[1] / "examples" / "vessa7-model.txt"

# an invented five-point structure (made up for these tests)
T = np.array([4100.0, 4500.0, 5200.0, 6300.0, 7600.0])
P = np.array([3.0e3, 1.2e4, 4.0e4, 9.0e4, 1.6e5])
TAU = np.array([-3.0, -2.0, -1.0, 0.0, 1.0])


def write_text(tmp_path, text, name="model.txt"):
    p = tmp_path / name
    p.write_text(text)
    return p


def plain_model(tmp_path, sep=" ", extra_pe=None):
    head = sep.join(["log_tau", "temperature", "gas_pressure", "label"] + (["electron_pressure"] if extra_pe is
                                                                           not None else []))
    lines = ["# an invented test structure", head]
    for i in range(len(T)):
        row = [f"{TAU[i]:.1f}", f"{T[i]:.1f}", f"{P[i]:.6e}", f"layer{i}"]
        if extra_pe is not None:
            row.append(f"{extra_pe[i]:.10e}")
        lines.append(sep.join(row))
    return write_text(tmp_path, "\n".join(lines) + "\n", "model.csv" if sep == "," else "model.txt")


@pytest.mark.parametrize("sep", [" ", ",", "\t"])
def test_plain_text_and_csv(tmp_path, sep):
    t = read_model(plain_model(tmp_path, sep))
    assert t.colnames == ["log_tau", "temperature", "gas_pressure", "label"]
    assert t["temperature"].unit == u.K and t["gas_pressure"].unit == u.dyn / u.cm**2
    res = solve_column(t)
    r = ionbal.solve(T, gas_pressure=P)
    assert res.state_variable == "gas_pressure"
    assert np.array_equal(res.table["electron_density"], r.electron_density)
    assert list(res.table["label"]) == [f"layer{i}" for i in range(5)]  # passed through
    assert np.array_equal(res.table["log_tau"], TAU)
    assert np.array_equal(res.table[species_column_name("fraction", "Fe II")], r.fraction("Fe II"))
    assert np.array_equal(res.table[species_column_name("number_density", "H-")], r.number_density("H-"))
    assert "fraction_H_minus" in res.table.colnames
    assert res.comparisons == []


def test_ecsv_with_units_is_converted(tmp_path):
    t = Table()
    t["depth"] = np.arange(5.0) * u.km
    t["temperature"] = T * u.K
    t["gas_pressure"] = (P * u.dyn / u.cm**2).to(u.Pa)  # stored in Pa: converted back
    p = tmp_path / "m.ecsv"
    t.write(p, format="ascii.ecsv")
    m = read_model(p)
    np.testing.assert_allclose(m["gas_pressure"], P, rtol=1e-14)
    res = solve_column(m)
    np.testing.assert_allclose(res.table["electron_density"], ionbal.solve(T, gas_pressure=P).electron_density,
                               rtol=1e-12)
    assert res.table["depth"].unit == u.km


def test_state_choice_and_other_inputs(tmp_path):
    rho = ionbal.solve(T, gas_pressure=P).mass_density
    t = Table({"temperature": T, "mass_density": rho, "Gas_Pressure": P})
    p = tmp_path / "m.ecsv"
    t.write(p, format="ascii.ecsv")
    m = read_model(p)
    assert solve_column(m).state_variable == "gas_pressure"  # first in order; names matched ignoring case
    res = solve_column(m, state="mass_density")
    assert res.state_variable == "mass_density"
    assert "input_gas_pressure" in res.table.colnames  # read as gas_pressure; collides with an output
    np.testing.assert_allclose(res.table["gas_pressure"], P, rtol=1e-10)
    with pytest.raises(ValueError, match="no hydrogen_density column"):
        solve_column(m, state="hydrogen_density")


def test_comparison_with_input_electron_pressure(tmp_path):
    r = ionbal.solve(T, gas_pressure=P)
    factors = np.array([1.0, 1.1, 0.9, 1.0, 1.02])
    published = r.electron_pressure * factors  # an invented "published" column
    res = solve_column(read_model(plain_model(tmp_path, extra_pe=published)))
    (c,) = res.comparisons
    assert c.quantity == "electron_pressure"
    expected = 100 * (1 / factors - 1)
    np.testing.assert_allclose(c.percent, expected, rtol=1e-8, atol=1e-8)
    np.testing.assert_allclose(c.dex, -np.log10(factors), atol=1e-10)
    assert c.worst_percent == (pytest.approx(expected[2]), 2)
    assert c.median_percent == pytest.approx(np.median(np.abs(expected)))
    assert "worst +11.1 %" in c.summary()
    assert "input_electron_pressure" in res.table.colnames
    assert "electron_pressure_deviation_percent" in res.table.colnames
    lines = res.deviation_lines()
    assert len(lines) == 1 + len(T) and "P_e input" in lines[0]


def test_comparison_skips_unusable_input_values(tmp_path):
    text = ("temperature gas_pressure electron_density\n"
            "5000 1e4 nan\n5500 2e4 1e12\n6000 4e4 -3\n")
    res = solve_column(read_model(write_text(tmp_path, text)))
    (c,) = res.comparisons
    assert c.skipped == 2 and np.isfinite(c.percent).sum() == 1
    assert "2 point(s) without a usable input value skipped" in c.summary()


def test_species_selection(tmp_path):
    m = read_model(plain_model(tmp_path))
    res = solve_column(m, species=["Fe II", "Ca II"])
    assert res.species == ("Ca II", "Fe II")
    assert "fraction_Fe_II" in res.table.colnames and "fraction_Fe_I" not in res.table.colnames
    res = solve_column(m, species="all")
    assert "fraction_Fe_XXVII" in res.table.colnames
    with pytest.raises(ValueError, match="cannot parse species"):
        solve_column(m, species=["Qq II"])


def test_write_ecsv_and_hdf5(tmp_path):
    res = solve_column(read_model(plain_model(tmp_path, extra_pe=np.full(5, 1.0))), species=["Fe I", "Fe II"])
    e = write_column(res, tmp_path / "out.ecsv", command="test")
    back = Table.read(e, format="ascii.ecsv")
    assert back["electron_density"].unit == u.cm**-3
    np.testing.assert_array_equal(back["electron_density"], res.table["electron_density"])
    assert back.meta["ionbal_version"] == ionbal.__version__
    h = write_column(res, tmp_path / "out.h5")
    with h5py.File(h) as f:
        assert f["ion_fraction"].shape == (2, 5)
        assert f["electron_density"].attrs["units"] == "cm-3"
        assert f.attrs["ionbal_file_type"] == "column"
    xr = pytest.importorskip("xarray")
    with xr.open_dataset(h, engine="h5netcdf") as ds:
        assert ds["ion_fraction"].dims == ("species", "depth_point")
        assert list(ds["species"].values) == ["Fe I", "Fe II"]
    with pytest.raises(FileExistsError):
        write_column(res, e)
    with pytest.raises(ValueError, match="unknown extension"):
        write_column(res, tmp_path / "out.fits")


def test_example_model_reads_and_solves():
    t = read_model(EXAMPLE)
    assert {"log_tau", "depth", "temperature", "gas_pressure", "electron_pressure"} <= set(t.colnames)
    mix = ionbal.Mixture.solar("AGSS09").scaled(metallicity=-1.5, alpha=0.4)
    res = solve_column(t, mixture=mix)
    (c,) = res.comparisons
    assert c.median_percent < 10  # the invented "published" values were made near ionbal's


@pytest.mark.parametrize("text, match", [
    ("", "is empty"),
    ("# only a comment\n", "no header line"),
    ("temperature gas_pressure\n", "no data rows"),
    ("5000 1e4\n6000 1e5\n", "holds numbers, not column names"),
    ("depth gas_pressure\n1 1e4\n", "no temperature column"),
    ("temperature depth\n5000 1\n", "needs one of the columns"),
    ("temperature gas_pressure\n5000 1e4 7\n", "line 2: 3 values for 2 columns"),
    ("temperature gas_pressure\n5000 abc\n", "line 2: gas_pressure value 'abc' is not a number"),
    ("temperature gas_pressure\nnan 1e4\n", "temperature at depth point 0 \\(line 2\\) is nan"),
    ("temperature gas_pressure\n5000 -1e4\n", "must be a finite positive"),
    ("temperature gas_pressure\n5000 inf\n", "must be a finite positive"),
    ("temperature gas_pressure\n5e7 1e4\n", "outside the partition-function tables"),
    ("temperature temperature gas_pressure\n1 2 3\n", "appears twice"),
    ("temperature,,gas_pressure\n1,2,3\n", "empty column name"),
])
def test_bad_plain_models(tmp_path, text, match):
    p = write_text(tmp_path, text)
    with pytest.raises(ValueError, match=match):
        solve_column(read_model(p))


def test_bad_files(tmp_path):
    with pytest.raises(FileNotFoundError, match="does not exist"):
        read_model(tmp_path / "none.txt")
    with pytest.raises(IsADirectoryError):
        read_model(tmp_path)
    p = tmp_path / "bin.txt"
    p.write_bytes(b"\x89HDF\r\n\x1a\n\x00\x00binary")
    with pytest.raises(ValueError, match="not a text file"):
        read_model(p)
    p.write_bytes(b"temperature gas_pressure\n\xff\xfe 1\n")
    with pytest.raises(ValueError, match="not UTF-8"):
        read_model(p)


def test_bad_ecsv(tmp_path):
    t = Table({"temperature": T * u.K, "gas_pressure": P * u.s})
    p = tmp_path / "bad.ecsv"
    t.write(p, format="ascii.ecsv")
    with pytest.raises(ValueError, match="unit 's', which does not convert"):
        read_model(p)
    p.write_text("# %ECSV 1.0\n# ---\n# datatype: [oops\ntemperature gas_pressure\n1 2\n")
    with pytest.raises(ValueError, match="cannot read ECSV model file"):
        read_model(p)
    t = Table({"temperature": ["hot"] * 2, "gas_pressure": [1.0, 2.0]})
    t.write(p, format="ascii.ecsv", overwrite=True)
    with pytest.raises(ValueError, match="must be numeric"):
        read_model(p)
