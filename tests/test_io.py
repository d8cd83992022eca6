"""The HDF5 grid file: netCDF-4 layout, xarray interop, reading back, interpolation, damaged files."""

from __future__ import annotations

import json
import shutil

import h5py
import numpy as np
import pytest

import ionbal
from ionbal import io as gio
from ionbal.grid import Axis, GridSpec, run_grid

SPECIES = ("H-", "H I", "H II", "C I", "Ca II", "Fe I", "Fe II", "Fe III")


@pytest.fixture(scope="module")
def grid_path(tmp_path_factory):
    """A small grid: T 3,000-12,000 K (41, log; 0.015 dex) x P_gas 1-1e6 dyn cm^-2 (25, log; 0.25 dex)."""
    spec = GridSpec(Axis.log("temperature", 3000.0, 12000.0, 41), Axis.log("gas_pressure", 1e0, 1e6, 25),
                    species=SPECIES, number_densities=True, tile_size=300)
    path = tmp_path_factory.mktemp("grid") / "grid.h5"
    run_grid(spec, path, progress=False, command="pytest grid fixture")
    return path


@pytest.fixture(scope="module")
def composition_path(tmp_path_factory):
    spec = GridSpec(Axis.log("temperature", 4000.0, 8000.0, 9), Axis.log("gas_pressure", 1e2, 1e5, 7),
                    metallicity=(-2.0, -1.0, 0.0), alpha=(0.0, 0.4), species=("Fe I", "Fe II", "Mg II"))
    path = tmp_path_factory.mktemp("comp") / "comp.h5"
    run_grid(spec, path, progress=False)
    return path


def copy(path, tmp_path, name="copy.h5"):
    dst = tmp_path / name
    shutil.copy(path, dst)
    return dst


# --------------------------------------------------------------------------------------------------
# layout and interop
# --------------------------------------------------------------------------------------------------

def test_xarray_reads_named_dims_and_coords(grid_path):
    xr = pytest.importorskip("xarray")
    pytest.importorskip("h5netcdf")
    with xr.open_dataset(grid_path, engine="h5netcdf") as ds:
        assert ds["electron_density"].dims == ("temperature", "gas_pressure")
        assert ds["ion_fraction"].dims == ("species", "temperature", "gas_pressure")
        assert ds["partition_function"].dims == ("species", "temperature")
        assert list(ds["species"].values) == list(SPECIES)
        assert ds["temperature"].attrs["units"] == "K"
        assert ds["gas_pressure"].attrs["units"] == "dyn cm-2"
        assert ds["electron_density"].attrs["units"] == "cm-3"
        assert "long_name" in ds["ion_fraction"].attrs
        fe2 = ds["ion_fraction"].sel(species="Fe II").values
        ne = ds["electron_density"].values
        assert ds.attrs["ionbal_file_type"] == "grid"
    with h5py.File(grid_path, "r") as f:
        assert np.array_equal(f["ion_fraction"][SPECIES.index("Fe II")], fe2)
        assert np.array_equal(f["electron_density"][()], ne)
        # dimension scales: plain h5py sees the same names
        assert [d.label or d[0].name for d in f["electron_density"].dims] == ["/temperature", "/gas_pressure"]


def test_contents_and_metadata(grid_path):
    with h5py.File(grid_path, "r") as f:
        for name in ("electron_density", "electron_pressure", "hydrogen_density", "nuclei_density",
                     "mass_density", "mean_molecular_weight", "status", "iterations", "validity",
                     "ion_fraction", "number_density", "partition_function", "abundance", "element"):
            assert name in f, name
        assert "gas_pressure" in f and f["gas_pressure"].ndim == 1  # the axis, not repeated as a 2-D field
        assert f["status"].dtype == np.int8
        assert list(f["status"].attrs["flag_values"]) == sorted(ionbal.core.status.STATUS_TABLE)
        # double-precision cubes: checksummed, not deflated (benchmarks/storage.py); point arrays deflated
        assert f["ion_fraction"].fletcher32 and f["ion_fraction"].compression is None
        assert f["electron_density"].fletcher32 and f["electron_density"].compression == "gzip"
        assert f["ion_fraction"].chunks[0] == 1
        attrs = f.attrs
        assert int(attrs["ionbal_complete"]) == 1
        assert attrs["ionbal_version"] == ionbal.__version__
        assert "pytest grid fixture" in attrs["history"]
        sources = json.loads(attrs["data_sources"])
        assert "partition_functions.ecsv" in sources and len(sources["partition_functions.ecsv"]["sha256"]) == 64
        spec = json.loads(attrs["ionbal_grid_spec"])
        assert spec["species"] == list(SPECIES)
        els = [e.decode() if isinstance(e, bytes) else e for e in f["element"][()]]
        ab = f["abundance"][()]
        mix = ionbal.Mixture.solar("AGSS09")
        assert els == list(mix.elements)
        assert np.array_equal(ab, mix.log_eps)


def test_open_grid_arrays(grid_path):
    with gio.open_grid(grid_path) as g:
        assert g.dims == ("temperature", "gas_pressure") and g.shape == (41, 25)
        assert g.species == SPECIES and g.state_variable == "gas_pressure"
        T, P = g.temperature, g.state
        r = ionbal.solve(T[:, None], gas_pressure=P[None, :])
        assert g["electron_density"].tobytes() == np.ascontiguousarray(r.electron_density).tobytes()
        assert g.fraction("Fe II").tobytes() == np.ascontiguousarray(r.fraction("Fe II")).tobytes()
        assert g.fraction("fe+").tobytes() == g.fraction("Fe II").tobytes()  # any spelling
        np.testing.assert_allclose(g.number_density("H-"), r.number_density("H-"), rtol=1e-14)
        np.testing.assert_allclose(g["gas_pressure"], np.broadcast_to(P, (41, 25)))
        np.testing.assert_allclose(g.partition_function("Fe I"), ionbal.partition_function("Fe I", T), rtol=1e-15)
        q = g.quantity("electron_density")
        assert str(q.unit) == "1 / cm3"
        assert g.mixture == ionbal.Mixture.solar("AGSS09")
        assert g.status_counts()["ok"] == 41 * 25
        assert "partition_functions.ecsv" in g.sources
        with pytest.raises(ValueError, match="not stored"):
            g.fraction("Ti II")
        with pytest.raises(KeyError, match="not stored"):
            g["nonsense"]
        g.verify()
        assert "grid.h5" in g.summary() and "41 values" in g.summary()


def test_float32_cubes(tmp_path):
    spec = dict(temperature=Axis.log("temperature", 4000.0, 8000.0, 5), state=Axis.log("gas_pressure", 1e2, 1e5, 4),
                species=("Fe I", "Fe II"), number_densities=True)
    a = run_grid(GridSpec(**spec), tmp_path / "a.h5", progress=False).path
    b = run_grid(GridSpec(**spec, float32=True), tmp_path / "b.h5", progress=False).path
    with h5py.File(a) as fa, h5py.File(b) as fb:
        assert fb["ion_fraction"].dtype == np.float32 and fb["number_density"].dtype == np.float32
        assert fb["ion_fraction"].compression == "gzip" and fa["ion_fraction"].compression is None
        assert fb["electron_density"].dtype == np.float64
        assert np.array_equal(fa["ion_fraction"][()].astype(np.float32), fb["ion_fraction"][()])


def test_is_grid_file(grid_path, tmp_path):
    assert gio.is_grid_file(grid_path)
    assert not gio.is_grid_file(tmp_path / "missing.h5")
    (tmp_path / "text.h5").write_text("hello")
    assert not gio.is_grid_file(tmp_path / "text.h5")
    with h5py.File(tmp_path / "other.h5", "w") as f:
        f["x"] = [1, 2, 3]
    assert not gio.is_grid_file(tmp_path / "other.h5")
    assert not gio.is_grid_file(tmp_path)


# --------------------------------------------------------------------------------------------------
# interpolation
# --------------------------------------------------------------------------------------------------

def test_interpolation_at_nodes_is_exact(grid_path):
    with gio.open_grid(grid_path) as g:
        T, P = g.temperature, g.state
        ne = g.interpolate("electron_density", T[7], P[11])
        assert ne == pytest.approx(g["electron_density"][7, 11], rel=1e-12)
        f = g.interpolate_fraction("Fe II", T[[0, -1]], P[[0, -1]])  # the corners are inside
        np.testing.assert_allclose(f, g.fraction("Fe II")[[0, -1], [0, -1]], rtol=1e-12)


@pytest.mark.parametrize("method, tol_dex", [("linear", 0.02), ("cubic", 0.002)])
def test_interpolation_against_direct_solve(grid_path, method, tol_dex):
    """Off-grid points against ionbal.solve.

    Tolerances (this grid: 0.015 dex in T, 0.25 dex in P): multilinear in
    log-log-log within 0.02 dex (measured worst 0.015 dex), cubic within
    0.002 dex (measured worst 0.0009 dex).
    """
    rng = np.random.default_rng(42)
    T = 10 ** rng.uniform(np.log10(3000), np.log10(12000), 200)
    P = 10 ** rng.uniform(0.0, 6.0, 200)
    r = ionbal.solve(T, gas_pressure=P)
    with gio.open_grid(grid_path) as g:
        dev = np.log10(g.interpolate("electron_density", T, P, method=method) / r.electron_density)
        assert np.max(np.abs(dev)) < tol_dex
        for sp in ("Fe II", "Fe I", "H-", "Ca II"):
            dev = np.log10(g.interpolate_fraction(sp, T, P, method=method) / r.fraction(sp))
            assert np.max(np.abs(dev)) < tol_dex, sp
        dev = np.log10(g.interpolate_number_density("Fe II", T, P, method=method) / r.number_density("Fe II"))
        assert np.max(np.abs(dev)) < tol_dex


def test_interpolation_accepts_quantities_and_broadcasts(grid_path):
    import astropy.units as u

    with gio.open_grid(grid_path) as g:
        a = g.interpolate("electron_density", 5000 * u.K, 1e3 * u.Pa)  # 1e3 Pa = 1e4 dyn cm^-2
        b = g.interpolate("electron_density", 5000.0, 1e4)
        assert a == pytest.approx(b, rel=1e-13)
        out = g.interpolate("electron_density", np.array([4000.0, 5000.0, 6000.0])[:, None],
                            np.array([1e2, 1e3])[None, :])
        assert out.shape == (3, 2)


@pytest.mark.parametrize("T, P, match", [
    (2000.0, 1e3, r"temperature 2000 K is outside the grid: its temperature axis covers 3000 to 12000 K"),
    (5000.0, 1e7, r"gas_pressure 1e\+07 dyn cm-2 is outside the grid: its gas_pressure axis covers 1 to 1e\+06"),
    ([5000.0, 13000.0], 1e3, r"temperature 13000 K at index 1 is outside the grid"),
    (float("nan"), 1e3, "not a valid value"),
    (5000.0, -1.0, "must be finite and positive"),
])
def test_interpolation_refuses_points_outside(grid_path, T, P, match):
    with gio.open_grid(grid_path) as g:
        with pytest.raises(ValueError, match=match):
            g.interpolate("electron_density", T, P)
        with pytest.raises(ValueError, match=match):
            g.interpolate_fraction("Fe II", T, P)


def test_interpolation_argument_errors(grid_path):
    with gio.open_grid(grid_path) as g:
        with pytest.raises(ValueError, match="choose one of"):
            g.interpolate("ion_fraction", 5000.0, 1e3)
        with pytest.raises(ValueError, match="method"):
            g.interpolate("electron_density", 5000.0, 1e3, method="spline")
        with pytest.raises(ValueError, match="no metallicity axis"):
            g.interpolate("electron_density", 5000.0, 1e3, metallicity=-1.0)
        with pytest.raises(ValueError, match="do not broadcast"):
            g.interpolate("electron_density", [5000.0, 6000.0], [1e3, 1e4, 1e5])


def test_composition_grid(composition_path):
    with gio.open_grid(composition_path) as g:
        assert g.dims == ("metallicity", "alpha", "temperature", "gas_pressure")
        assert g.shape == (3, 2, 9, 7)
        with pytest.raises(ValueError, match="give metallicity="):
            g.interpolate("electron_density", 5000.0, 1e3)
        ne = g.interpolate("electron_density", g.temperature[3], g.state[2], metallicity=-1.0, alpha=0.4)
        assert ne == pytest.approx(g["electron_density"][1, 1, 3, 2], rel=1e-12)
        mid = g.interpolate("electron_density", 5000.0, 1e3, metallicity=-1.5, alpha=0.2)
        lo = g.interpolate("electron_density", 5000.0, 1e3, metallicity=-2.0, alpha=0.2)
        hi = g.interpolate("electron_density", 5000.0, 1e3, metallicity=-1.0, alpha=0.2)
        assert min(lo, hi) < mid < max(lo, hi)
        with pytest.raises(ValueError, match="metallicity 0.5 is outside the grid"):
            g.interpolate("electron_density", 5000.0, 1e3, metallicity=0.5, alpha=0.0)
        # number density from fraction x nuclei x element share at each composition
        n = g.number_density("Fe II")
        mix = ionbal.Mixture.solar("AGSS09").scaled(metallicity=-2.0, alpha=0.0)
        r = ionbal.solve(g.temperature[:, None], gas_pressure=g.state[None, :], mixture=mix)
        np.testing.assert_allclose(n[0, 0], r.number_density("Fe II"), rtol=1e-12)


# --------------------------------------------------------------------------------------------------
# damaged, truncated, foreign and incomplete files
# --------------------------------------------------------------------------------------------------

def test_missing_file(tmp_path):
    with pytest.raises(FileNotFoundError, match="does not exist"):
        gio.open_grid(tmp_path / "nothing.h5")


def test_not_hdf5(tmp_path):
    p = tmp_path / "x.h5"
    p.write_text("temperature gas_pressure\n5000 1e4\n")
    with pytest.raises(gio.GridFileError, match="not an HDF5 file"):
        gio.open_grid(p)


@pytest.mark.parametrize("fraction", [0.1, 0.5, 0.9, 0.999])
def test_truncated_file(grid_path, tmp_path, fraction):
    raw = grid_path.read_bytes()
    p = tmp_path / "cut.h5"
    p.write_bytes(raw[: int(len(raw) * fraction)])
    with pytest.raises(gio.GridFileError, match="truncated or damaged"):
        gio.open_grid(p)


def test_damaged_chunk_is_detected(grid_path, tmp_path):
    p = copy(grid_path, tmp_path)
    with h5py.File(p, "r") as f:
        ds = f["ion_fraction"]
        # a whole chunk (not an edge chunk: the double-precision cube is stored plain, and bytes in the
        # padding of an edge chunk are never read); damage in the middle of its data
        info = ds.id.get_chunk_info(0)
        assert ds.chunks[1] < ds.shape[1] and ds.chunks[2] < ds.shape[2]
        offset, size = info.byte_offset, info.size
    raw = bytearray(p.read_bytes())
    for i in range(offset + size // 3, offset + size // 3 + 16):
        raw[i] ^= 0xFF
    p.write_bytes(bytes(raw))
    with gio.open_grid(p) as g:  # the metadata are intact
        with pytest.raises(gio.GridFileError, match="damaged"):
            g.verify()
        with pytest.raises(gio.GridFileError, match="damaged"):
            for sp in g.species:
                g.fraction(sp)


def test_foreign_hdf5(tmp_path):
    p = tmp_path / "foreign.h5"
    with h5py.File(p, "w") as f:
        f["temperature"] = [1.0, 2.0]
    with pytest.raises(gio.GridFileError, match="not an ionbal grid file"):
        gio.open_grid(p)


def test_incomplete_marker(grid_path, tmp_path):
    p = copy(grid_path, tmp_path)
    with h5py.File(p, "r+") as f:
        f.attrs["ionbal_complete"] = np.int8(0)
    with pytest.raises(gio.GridFileError, match="incomplete"):
        gio.open_grid(p)


def test_missing_or_misshapen_dataset(grid_path, tmp_path):
    p = copy(grid_path, tmp_path)
    with h5py.File(p, "r+") as f:
        del f["electron_density"]
    with pytest.raises(gio.GridFileError, match="electron_density"):
        gio.open_grid(p)
    p = copy(grid_path, tmp_path, "b.h5")
    with h5py.File(p, "r+") as f:
        del f["partition_function"]
        f["partition_function"] = np.zeros((3, 3))
    with pytest.raises(gio.GridFileError, match="has shape"):
        gio.open_grid(p)


def test_column_file_is_not_a_grid(tmp_path):
    p = tmp_path / "col.h5"
    gio.write_table_file(p, {"temperature": (np.array([5000.0]), "K", None)})
    with pytest.raises(gio.GridFileError, match="ionbal column file"):
        gio.open_grid(p)
    with pytest.raises(FileExistsError, match="already exists"):
        gio.write_table_file(p, {"temperature": (np.array([6000.0]), "K", None)})
    gio.write_table_file(p, {"temperature": (np.array([6000.0]), "K", None)}, overwrite=True)
    with h5py.File(p) as f:
        assert f["temperature"][0] == 6000.0


def test_data_sources_have_provenance():
    src = gio.data_sources()
    assert {"ionization_energies.ecsv", "partition_functions.ecsv", "abundances.ecsv"} <= set(src)
    assert "NIST" in json.dumps(src["ionization_energies.ecsv"].get("source", ""))


def test_linear_interpolation_is_multilinear_in_the_logs(tmp_path):
    # scipy's RegularGridInterpolator does the work; check it against the textbook bilinear formula
    # in (ln T, ln P) of ln n_e at one cell (common practice: multilinear interpolation)
    import ionbal
    from ionbal.grid import Axis, GridSpec, run_grid

    spec = GridSpec(Axis.parse("temperature", "4000:8000:3"), Axis.parse("gas_pressure", "1e2:1e4:3"),
                    ionbal.Mixture.solar())
    out = tmp_path / "g.h5"
    run_grid(spec, out, progress=False)
    T, P = 5123.0, 345.0
    with ionbal.open_grid(out) as g:
        ne = np.log(g["electron_density"])
        tx, px = np.log(g.axes["temperature"]), np.log(g.axes["gas_pressure"])
        got = g.interpolate("electron_density", T, P)
    i, j = 0, 0
    u_ = (np.log(T) - tx[i]) / (tx[i + 1] - tx[i])
    v_ = (np.log(P) - px[j]) / (px[j + 1] - px[j])
    want = ((1 - u_) * (1 - v_) * ne[i, j] + u_ * (1 - v_) * ne[i + 1, j] + (1 - u_) * v_ * ne[i, j + 1]
            + u_ * v_ * ne[i + 1, j + 1])
    assert float(got) == pytest.approx(np.exp(want), rel=1e-13)
