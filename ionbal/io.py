"""HDF5 files of ionbal: writing grids and columns, reading grids back, interpolating in them.

Files are written with h5py in the netCDF-4 layout: every dimension has a
coordinate variable that is an HDF5 dimension scale, every variable has its
dimension scales attached and carries CF-style ``units`` and ``long_name``
attributes.  Plain h5py and ``xarray.open_dataset(path, engine="h5netcdf")``
both read them with named dimensions and coordinates.

Grid file layout (root group; ``X`` is the state variable, e.g. ``gas_pressure``;
``[metallicity, alpha,]`` appear only for grids with composition axes)::

    dims:  [metallicity, alpha,] temperature, X, species, element
    coordinates
        temperature(temperature)           K
        X(X)                               cgs (dyn cm-2, g cm-3 or cm-3)
        metallicity(metallicity), alpha(alpha)   dex   (composition axes only)
        species(species)                   names in spectroscopic notation, "Fe II", "H-"
        element(element)                   symbols
    per point, dims ([metallicity, alpha,] temperature, X)
        electron_density, electron_pressure, gas_pressure, mass_density,
        hydrogen_density, nuclei_density, mean_molecular_weight  (float64; the
        one that is the state axis itself is not repeated), status (int8, CF
        flag_values/flag_meanings), iterations (int32)
    cubes, dims ([metallicity, alpha,] species, temperature, X)
        ion_fraction                       fraction of the element in that stage
        number_density                     cm-3 (optional)
    partition_function(species, temperature)
    atomic_number(element), atomic_mass(element)
    abundance([metallicity, alpha,] element)    A(X) = log10(N_X/N_H) + 12

Root attributes: ``title``, ``Conventions``, ``source``, ``history`` (the
command that made the file), ``ionbal_version``, ``ionbal_file_type``
("grid"), ``state_variable``, ``mixture_name``, ``data_sources`` (JSON: every
data table's title, sources and SHA-256), ``ionbal_grid_spec`` (JSON),
``ionbal_complete`` (1, written last).  Every numeric dataset is chunked
(tiles of at most 64 x 64 points along the state axes, so slices along either
axis read fast), compressed (shuffle + deflate) and checksummed (Fletcher-32:
a damaged chunk is detected when read).
"""

from __future__ import annotations

import contextlib
import datetime as _dt
import hashlib
import json
import math
import os
from collections import OrderedDict
from functools import lru_cache
from pathlib import Path
from typing import Any, Iterable, Mapping, Sequence

import numpy as np

from ._version import __version__
from .core import status as st

__all__ = [
    "GridFile",
    "GridFileError",
    "open_grid",
    "read_grid",
    "is_grid_file",
    "write_grid_file",
    "write_table_file",
    "data_sources",
    "QUANTITY_UNITS",
    "QUANTITY_LONG_NAMES",
]

FILE_TYPE_GRID = "grid"
FILE_TYPE_COLUMN = "column"
FORMAT_VERSION = 1

#: CF-style units of the stored quantities
QUANTITY_UNITS: dict[str, str] = {
    "temperature": "K",
    "gas_pressure": "dyn cm-2",
    "mass_density": "g cm-3",
    "hydrogen_density": "cm-3",
    "electron_pressure": "dyn cm-2",
    "electron_density": "cm-3",
    "nuclei_density": "cm-3",
    "mean_molecular_weight": "1",
    "metallicity": "1",
    "alpha": "1",
    "ion_fraction": "1",
    "number_density": "cm-3",
    "partition_function": "1",
    "abundance": "1",
    "atomic_mass": "u",
    "status": "1",
    "iterations": "1",
}
QUANTITY_LONG_NAMES: dict[str, str] = {
    "temperature": "temperature",
    "gas_pressure": "gas pressure (ideal gas: nuclei and free electrons)",
    "mass_density": "mass density",
    "hydrogen_density": "number density of hydrogen nuclei (H-, H I, H II)",
    "electron_pressure": "electron pressure",
    "electron_density": "free-electron number density",
    "nuclei_density": "number density of all nuclei (every element and stage)",
    "mean_molecular_weight": "mean molecular weight per free particle, rho / ((n_nuclei + n_e) m_u)",
    "metallicity": "[M/H], shift of log abundance of every element heavier than He",
    "alpha": "[alpha/M], extra shift of log abundance of O, Ne, Mg, Si, S, Ar, Ca, Ti",
    "ion_fraction": "fraction of the element's nuclei in this ionization stage",
    "number_density": "number density of the species",
    "partition_function": "partition function of the species",
    "abundance": "A(X) = log10(N_X / N_H) + 12",
    "atomic_mass": "standard atomic weight",
    "atomic_number": "atomic number Z",
    "status": "solver status per point",
    "iterations": "solver iterations per point",
    "species": "species in spectroscopic notation (Fe II = Fe+; H- is the hydrogen anion)",
    "element": "element symbol",
}
_POINT_VARIABLES = ("electron_density", "electron_pressure", "gas_pressure", "mass_density", "hydrogen_density",
                    "nuclei_density", "mean_molecular_weight")


class GridFileError(ValueError):
    """A file is not a (complete, readable) ionbal file."""


def _h5py():
    import h5py

    return h5py


# ---------------------------------------------------------------------------------------------------
# provenance of the data tables
# ---------------------------------------------------------------------------------------------------

@lru_cache(maxsize=1)
def _data_sources_cached() -> str:
    from importlib import resources

    out = {}
    try:
        root = resources.files("ionbal.tables")
        names = sorted(p.name for p in root.iterdir() if p.name.endswith(".ecsv"))
    except (ModuleNotFoundError, FileNotFoundError, OSError):  # pragma: no cover - broken install
        return json.dumps({})
    for name in names:
        raw = root.joinpath(name).read_bytes()
        info: dict[str, Any] = {"sha256": hashlib.sha256(raw).hexdigest()}
        header = []
        for line in raw.decode("utf-8", errors="replace").splitlines():
            if not line.startswith("#"):
                break
            header.append(line[2:] if line.startswith("# ") else line[1:])
        try:
            from astropy.table.meta import get_header_from_yaml

            meta = get_header_from_yaml(header).get("meta", {}) or {}
        except Exception:  # noqa: BLE001 - provenance is informative; never fail a run on it
            meta = {}
        for key in ("title", "source", "generated_by"):
            if key in meta:
                info[key] = _jsonable(meta[key])
        out[name] = info
    return json.dumps(out, sort_keys=True)


def _jsonable(obj):
    if isinstance(obj, Mapping):
        return {str(k): _jsonable(v) for k, v in obj.items()}
    if isinstance(obj, (list, tuple)):
        return [_jsonable(v) for v in obj]
    if isinstance(obj, (str, int, float, bool)) or obj is None:
        return obj
    return str(obj)


def data_sources() -> dict:
    """The data tables of this installation: per file its title, sources and SHA-256.

    Read from the provenance headers of the packaged ECSV tables.
    """
    return json.loads(_data_sources_cached())


def _references_text(sources: Mapping) -> str:
    lines = []
    for name, info in sources.items():
        src = info.get("source")
        if isinstance(src, Mapping):
            src = "; ".join(f"{k}: {v}" for k, v in src.items())
        elif isinstance(src, list):
            src = "; ".join(str(s) for s in src)
        if src:
            lines.append(f"{name}: {src}")
    return "\n".join(lines)


# ---------------------------------------------------------------------------------------------------
# low-level netCDF-4 helpers
# ---------------------------------------------------------------------------------------------------

def _str_array(values: Sequence[str]) -> np.ndarray:
    return np.array([str(v) for v in values], dtype=object)


def _coordinate(f, name: str, values, *, units: str | None = None, long_name: str | None = None,
                dimid: int = 0):
    """A coordinate variable (dimension scale) ``name(name)``."""
    h5py = _h5py()
    if np.asarray(values).dtype == object or (len(values) and isinstance(values[0], str)):
        ds = f.create_dataset(name, data=_str_array(values), dtype=h5py.string_dtype())
    else:
        arr = np.asarray(values)
        ds = f.create_dataset(name, data=arr, chunks=(max(1, arr.size),), fletcher32=True)
    ds.make_scale(name)
    ds.attrs["_Netcdf4Dimid"] = np.int32(dimid)
    if units is not None:
        ds.attrs["units"] = units
    ds.attrs["long_name"] = long_name or QUANTITY_LONG_NAMES.get(name, name)
    return ds


def _variable(f, name: str, dims: Sequence[str], shape: Sequence[int], dtype, *, chunks=None,
              units: str | None = None, long_name: str | None = None, compress: bool = True, data=None):
    kw: dict[str, Any] = {"fletcher32": True}
    if chunks is None:
        chunks = tuple(max(1, int(n)) for n in shape)
    kw["chunks"] = tuple(int(c) for c in chunks)
    if compress:
        kw.update(compression="gzip", compression_opts=1, shuffle=True)
    if data is not None:
        ds = f.create_dataset(name, data=data, dtype=dtype, **kw)
    else:
        ds = f.create_dataset(name, shape=tuple(int(n) for n in shape), dtype=dtype, **kw)
    for i, d in enumerate(dims):
        ds.dims[i].attach_scale(f[d])
    u = units if units is not None else QUANTITY_UNITS.get(name)
    if u is not None:
        ds.attrs["units"] = u
    ds.attrs["long_name"] = long_name or QUANTITY_LONG_NAMES.get(name, name)
    return ds


def _status_attrs(ds) -> None:
    codes = sorted(st.STATUS_TABLE)
    ds.attrs["flag_values"] = np.array(codes, dtype=np.int8)
    ds.attrs["flag_meanings"] = " ".join(st.STATUS_TABLE[c][0] for c in codes)
    ds.attrs["comment"] = "; ".join(f"{c} {st.STATUS_TABLE[c][0]}: {st.STATUS_TABLE[c][1]}" for c in codes)


def _validity_flags() -> dict:
    try:
        from .validity import FLAG_BITS, VALIDITY_FLAGS
    except ImportError:  # pragma: no cover
        return {}
    return {name: (bit, VALIDITY_FLAGS.get(name, ("", 0, ""))[2]) for name, bit in FLAG_BITS.items()}


def _validity_attrs(ds) -> None:
    flags = _validity_flags()
    ds.attrs["long_name"] = "validity flags of ideal-gas LTE Saha per point (bitmask; 0 = no flag)"
    ds.attrs["flag_masks"] = np.array([b for b, _ in flags.values()], dtype=np.uint8)
    ds.attrs["flag_meanings"] = " ".join(flags)
    ds.attrs["comment"] = "; ".join(f"bit {b} {name}: {text}" for name, (b, text) in flags.items())


def _flag_counts_dict(flag_counts) -> dict:
    out = {}
    for name, (bit, _) in _validity_flags().items():
        out[name] = int(flag_counts[int(bit).bit_length() - 1])
    return out


def _history(command: str | None) -> str:
    now = _dt.datetime.now(_dt.timezone.utc).replace(microsecond=0).isoformat()
    return f"{now} {command or 'ionbal'} (ionbal {__version__})"


_ASSUMPTIONS = ("LTE ionization balance (Saha equation for every stage, H- included) with charge and "
                "nuclei conservation; ideal, non-degenerate gas; atoms and atomic ions only (no molecules).")


# ---------------------------------------------------------------------------------------------------
# writing a grid
# ---------------------------------------------------------------------------------------------------

def write_grid_file(path, spec, tiles: Iterable[tuple[Any, Mapping[str, np.ndarray]]], *,
                    command: str | None = None) -> dict:
    """Write a complete grid file at ``path`` (created; must not exist) from finished tiles.

    ``tiles`` yields ``(Tile, arrays)`` as made by :func:`ionbal.grid.compute_tile`;
    every tile of ``spec`` must come exactly once.  Memory stays bounded by one
    tile.  The completeness marker is written last.  This is the low-level
    writer used by :func:`ionbal.grid.run_grid`, which also handles temporary
    names, resuming and overwriting.

    Returns
    -------
    dict
        Point counts per status name (``{"ok": ..., ...}``).
    """
    h5py = _h5py()
    from .data.elements import atomic_mass
    from .data.tables import partition_function

    path = Path(path)
    comp = spec.has_composition
    sv = spec.state_variable
    nt, ns = len(spec.temperature), len(spec.state)
    comp_shape = (len(spec.metallicity), len(spec.alpha)) if comp else ()
    comp_dims = ("metallicity", "alpha") if comp else ()
    ct, cs = spec.chunk_shape
    n_sp = len(spec.species)
    mix = spec.mixture
    elements = mix.elements
    counts = np.zeros(256, dtype=np.int64)
    flag_counts = np.zeros(8, dtype=np.int64)
    seen = np.zeros(len(spec.tiles()), dtype=bool)

    with h5py.File(path, "w", track_order=True, libver=("earliest", "latest")) as f:
        dimid = 0
        for name, values in ((("metallicity", spec.metallicity), ("alpha", spec.alpha)) if comp else ()):
            _coordinate(f, name, np.array(values, dtype=np.float64), units="1", dimid=dimid)
            dimid += 1
        _coordinate(f, "temperature", spec.temperature.array, units="K", dimid=dimid)
        _coordinate(f, sv, spec.state.array, units=QUANTITY_UNITS[sv], dimid=dimid + 1)
        f["temperature"].attrs["spacing"] = spec.temperature.spacing
        f[sv].attrs["spacing"] = spec.state.spacing
        _coordinate(f, "species", spec.species, dimid=dimid + 2)
        _coordinate(f, "element", elements, dimid=dimid + 3)

        pdims = comp_dims + ("temperature", sv)
        pshape = comp_shape + (nt, ns)
        pchunks = (1,) * len(comp_shape) + (ct, cs)
        point_vars = {}
        for name in _POINT_VARIABLES:
            if name != sv:
                point_vars[name] = _variable(f, name, pdims, pshape, np.float64, chunks=pchunks)
        point_vars["status"] = _variable(f, "status", pdims, pshape, np.int8, chunks=pchunks)
        _status_attrs(point_vars["status"])
        point_vars["iterations"] = _variable(f, "iterations", pdims, pshape, np.int32, chunks=pchunks)
        if spec.validity:
            point_vars["validity"] = _variable(f, "validity", pdims, pshape, np.uint8, chunks=pchunks)
            _validity_attrs(point_vars["validity"])

        cdims = comp_dims + ("species", "temperature", sv)
        cshape = comp_shape + (n_sp, nt, ns)
        cchunks = (1,) * len(comp_shape) + (1, ct, cs)
        cubes = {"ion_fraction": _variable(f, "ion_fraction", cdims, cshape, spec.cube_dtype, chunks=cchunks)}
        if spec.number_densities:
            cubes["number_density"] = _variable(f, "number_density", cdims, cshape, spec.cube_dtype,
                                                chunks=cchunks)
        for ds in cubes.values():
            ds.attrs["comment"] = ("species are labelled by the 'species' coordinate; "
                                   + ("single precision: values below ~1e-45 are stored as 0"
                                      if spec.float32 else "double precision"))

        T = spec.temperature.array
        pf = np.empty((n_sp, nt))
        for k, name in enumerate(spec.species):
            pf[k] = partition_function(name, T)
        _variable(f, "partition_function", ("species", "temperature"), (n_sp, nt), np.float64,
                  chunks=(min(n_sp, 64), nt), data=pf,
                  long_name="partition function of the species on the temperature axis (H- and bare nuclei: 1)")

        _variable(f, "atomic_number", ("element",), (len(elements),), np.int32,
                  data=np.asarray(mix.atomic_numbers, dtype=np.int32), units="1")
        _variable(f, "atomic_mass", ("element",), (len(elements),), np.float64,
                  data=np.array([atomic_mass(el) for el in elements]))
        if comp:
            ab = np.empty(comp_shape + (len(elements),))
            for c in spec.compositions():
                m = spec.mixture_at(c)
                ab[c] = [m[el] for el in elements]
        else:
            ab = np.asarray(mix.log_eps, dtype=np.float64)
        _variable(f, "abundance", comp_dims + ("element",), ab.shape, np.float64, data=ab,
                  long_name="A(X) = log10(N_X / N_H) + 12 of every element of the mixture")

        sources = data_sources()
        f.attrs["title"] = "ionbal LTE ionization-balance grid"
        f.attrs["Conventions"] = "CF-1.10"
        f.attrs["source"] = f"ionbal {__version__}"
        f.attrs["history"] = _history(command)
        f.attrs["references"] = _references_text(sources)
        f.attrs["comment"] = (_ASSUMPTIONS + " Default species: stages I-III of every element of the mixture "
                              "plus H-. Failed points (status != 0) hold NaN.")
        f.attrs["ionbal_version"] = __version__
        f.attrs["ionbal_file_type"] = FILE_TYPE_GRID
        f.attrs["ionbal_format_version"] = np.int32(FORMAT_VERSION)
        f.attrs["state_variable"] = sv
        f.attrs["mixture_name"] = mix.name
        f.attrs["data_sources"] = json.dumps(sources, sort_keys=True)
        f.attrs["ionbal_grid_spec"] = json.dumps(spec.to_dict(), sort_keys=True)
        f.attrs["ionbal_complete"] = np.int8(0)

        tiles_list = spec.tiles()
        for tile, arrays in tiles:
            if seen[tile.index]:
                raise ValueError(f"tile {tile.index} was given twice")
            seen[tile.index] = True
            sel = tuple(tile.composition) + (slice(tile.t0, tile.t1), slice(tile.s0, tile.s1))
            csel = tuple(tile.composition) + (slice(None), slice(tile.t0, tile.t1), slice(tile.s0, tile.s1))
            for name, ds in point_vars.items():
                ds[sel] = arrays[name]
            for name, ds in cubes.items():
                ds[csel] = arrays[name]
            counts += np.bincount(arrays["status"].ravel().astype(np.uint8), minlength=256)
            if spec.validity:
                vm = np.asarray(arrays["validity"], dtype=np.uint8)
                for bit in range(8):
                    flag_counts[bit] += int(np.count_nonzero(vm & np.uint8(1 << bit)))
        if not seen.all():
            missing = int(np.flatnonzero(~seen)[0])
            raise ValueError(f"tile {missing} of {len(tiles_list)} was never written")
        status_counts = {st.STATUS_TABLE.get(c, (f"code_{c}",))[0]: int(counts[c])
                         for c in range(256) if counts[c] or c in st.STATUS_TABLE}
        f.attrs["status_counts"] = json.dumps(status_counts)
        if spec.validity:
            f.attrs["validity_counts"] = json.dumps(_flag_counts_dict(flag_counts))
        f.flush()
        f.attrs["ionbal_complete"] = np.int8(1)
    return status_counts


# ---------------------------------------------------------------------------------------------------
# writing a table (model-atmosphere columns)
# ---------------------------------------------------------------------------------------------------

@contextlib.contextmanager
def atomic_output(path: Path):
    """Write a file so that it appears under ``path`` only when complete.

    Yields a temporary sibling path to write to; when the block ends without
    an error the file is flushed to disk (fsync) and renamed onto ``path``
    (atomic on POSIX), otherwise it is removed.  An interrupted process
    therefore leaves either the previous file or nothing under ``path``.
    """
    import threading

    tmp = path.with_name(f".{path.name}.tmp-{os.getpid()}-{threading.get_ident()}")
    try:
        yield tmp
        with open(tmp, "rb+") as fh:
            os.fsync(fh.fileno())
        os.replace(tmp, path)
    except BaseException:
        with contextlib.suppress(OSError):
            tmp.unlink()
        raise


def write_table_file(path, columns: Mapping[str, tuple], *, species: Sequence[str] = (),
                     cubes: Mapping[str, np.ndarray] | None = None, attrs: Mapping[str, Any] | None = None,
                     overwrite: bool = False, dim: str = "depth_point") -> None:
    """Write a depth structure (one dimension) as a netCDF-4 style HDF5 file, atomically.

    Parameters
    ----------
    path : path
        Output file; written under a temporary name, then renamed.
    columns : mapping name -> (values, units or None, long_name or None)
        One-dimensional columns of equal length.  String columns are allowed.
    species : sequence of str
        Labels of the ``species`` dimension of ``cubes``.
    cubes : mapping name -> array (n_species, n)
        E.g. ``ion_fraction`` and ``number_density``.
    attrs : mapping
        Root attributes.
    overwrite : bool
        Replace an existing file (only once the new one is complete).
    """
    h5py = _h5py()
    path = Path(path)
    if path.exists() and not overwrite:
        raise FileExistsError(f"output {path} already exists; pass --overwrite to replace it")
    n = None
    for name, (values, _, _) in columns.items():
        m = len(values)
        if n is None:
            n = m
        elif m != n:
            raise ValueError(f"column {name} has {m} rows, expected {n}")
    n = n or 0
    with atomic_output(path) as tmp:
        with h5py.File(tmp, "w", track_order=True) as f:
            _coordinate(f, dim, np.arange(n, dtype=np.int32), units="1", long_name="index of the depth point "
                        "(0 = first row of the input)")
            if species:
                _coordinate(f, "species", list(species), dimid=1)
            for name, (values, units, long_name) in columns.items():
                arr = np.asarray(values)
                if arr.dtype.kind in "US" or arr.dtype == object:
                    ds = f.create_dataset(name, data=_str_array(arr.tolist()), dtype=h5py.string_dtype())
                    ds.dims[0].attach_scale(f[dim])
                    if long_name:
                        ds.attrs["long_name"] = long_name
                    continue
                _variable(f, name, (dim,), (n,), arr.dtype, data=arr, units=units, long_name=long_name,
                          compress=False)
            for name, arr in (cubes or {}).items():
                _variable(f, name, ("species", dim), arr.shape, arr.dtype, data=arr)
            f.attrs["Conventions"] = "CF-1.10"
            f.attrs["source"] = f"ionbal {__version__}"
            f.attrs["ionbal_version"] = __version__
            f.attrs["ionbal_file_type"] = FILE_TYPE_COLUMN
            f.attrs["ionbal_format_version"] = np.int32(FORMAT_VERSION)
            f.attrs["data_sources"] = json.dumps(data_sources(), sort_keys=True)
            for k, v in (attrs or {}).items():
                f.attrs[k] = v
            f.attrs["ionbal_complete"] = np.int8(1)


# ---------------------------------------------------------------------------------------------------
# reading
# ---------------------------------------------------------------------------------------------------

def is_grid_file(path) -> bool:
    """True if ``path`` is an HDF5 file written by ionbal as a grid (complete or not).

    Never raises for unreadable or foreign files; it returns False.
    """
    try:
        h5py = _h5py()
        if not Path(path).is_file() or not h5py.is_hdf5(path):
            return False
        with h5py.File(path, "r") as f:
            return _attr_str(f.attrs.get("ionbal_file_type")) == FILE_TYPE_GRID
    except Exception:  # noqa: BLE001 - identification must not fail
        return False


def _attr_str(value) -> str:
    if isinstance(value, bytes):
        return value.decode("utf-8", errors="replace")
    if isinstance(value, np.ndarray) and value.shape == ():
        return _attr_str(value[()])
    return "" if value is None else str(value)


def _unit(u: str):
    import astropy.units as au

    if u in ("1", ""):
        return au.dimensionless_unscaled
    return au.Unit(u)


class GridFile:
    """An ionbal grid file opened for reading (use :func:`open_grid`).

    Arrays are read on demand and returned as numpy arrays in the stored
    units (cgs; see :attr:`units`).  The object is a context manager; close it
    (or leave the ``with`` block) to release the file.

    Attributes
    ----------
    path : Path
    dims : tuple of str
        Dimension names of the per-point arrays, e.g. ``("temperature", "gas_pressure")``.
    shape : tuple of int
    axes : dict name -> ndarray
        Coordinate values of every grid axis (composition axes first).
    temperature, state : ndarray
        The two state axes; ``state_variable`` names the second.
    metallicity, alpha : ndarray or None
        Composition axes (None when the grid has none).
    species : tuple of str
        Species of the cubes, in spectroscopic notation.
    elements : tuple of str
    abundances : ndarray
        A(X) per element (``[i_metallicity, i_alpha, element]`` with composition axes).
    sources : dict
        Data tables used (title, sources, SHA-256).
    version, history : str
        The ionbal version and the command that wrote the file.
    variables : tuple of str
        Names of every stored dataset.
    units : dict name -> str
    """

    def __init__(self, path):
        h5py = _h5py()
        self.path = Path(path)
        p = self.path
        if not p.exists():
            raise FileNotFoundError(f"grid file {p} does not exist")
        if p.is_dir():
            raise IsADirectoryError(f"{p} is a directory, not a grid file")
        try:
            with open(p, "rb") as fh:
                head = fh.read(8)
        except OSError as exc:
            raise OSError(f"cannot read {p}: {exc.strerror or exc}") from None
        if head != b"\x89HDF\r\n\x1a\n":
            if not h5py.is_hdf5(p):
                raise GridFileError(f"{p} is not an HDF5 file (an ionbal grid file is HDF5)")
        try:
            self._f = h5py.File(p, "r")
        except (OSError, RuntimeError, ValueError) as exc:
            raise GridFileError(f"cannot open {p}: the HDF5 file is truncated or damaged "
                                f"({_short(exc)})") from None
        try:
            self._validate()
        except BaseException:
            self.close()
            raise
        self._cache: OrderedDict = OrderedDict()

    # -- validation -----------------------------------------------------------------------------
    def _validate(self) -> None:
        f = self._f
        p = self.path
        try:
            attrs = dict(f.attrs)
        except Exception as exc:  # noqa: BLE001
            raise GridFileError(f"cannot read the attributes of {p}: file damaged ({_short(exc)})") from None
        kind = _attr_str(attrs.get("ionbal_file_type"))
        if kind != FILE_TYPE_GRID:
            what = f"an ionbal {kind} file" if kind else "not an ionbal file"
            raise GridFileError(f"{p} is not an ionbal grid file ({what})")
        if int(np.asarray(attrs.get("ionbal_complete", 0))) != 1:
            raise GridFileError(f"{p} is incomplete: its writing was interrupted (no completeness marker)")
        self.state_variable = _attr_str(attrs.get("state_variable"))
        from .grid import STATE_AXES

        if self.state_variable not in STATE_AXES:
            raise GridFileError(f"{p}: unknown state variable {self.state_variable!r}")
        try:
            comp = "metallicity" in f
            self.dims = (("metallicity", "alpha") if comp else ()) + ("temperature", self.state_variable)
            self.axes = {d: self._read_raw(d) for d in self.dims}
            self.species = tuple(_attr_str(s) for s in self._read_raw("species"))
            self.elements = tuple(_attr_str(s) for s in self._read_raw("element"))
            self.abundances = self._read_raw("abundance")
            self.variables = tuple(f.keys())
        except KeyError as exc:
            raise GridFileError(f"{p} lacks a required dataset ({_short(exc)}); the file is damaged") from None
        self.shape = tuple(len(self.axes[d]) for d in self.dims)
        required = {name: self.shape for name in ("electron_density", "status", "nuclei_density")}
        required["ion_fraction"] = self.shape[:-2] + (len(self.species),) + self.shape[-2:]
        required["partition_function"] = (len(self.species), self.shape[-2])
        for name, shape in required.items():
            if name not in f:
                raise GridFileError(f"{p} lacks the dataset {name!r}; the file is damaged or not a grid")
            if tuple(f[name].shape) != tuple(shape):
                raise GridFileError(f"{p}: dataset {name!r} has shape {f[name].shape}, expected {shape} from "
                                    "the axes; the file is damaged")
        for d in self.dims:
            ax = self.axes[d]
            if ax.ndim != 1 or ax.size < 1 or not np.all(np.isfinite(ax)) or np.any(np.diff(ax) <= 0):
                raise GridFileError(f"{p}: the {d} axis is not a strictly increasing list of numbers")
        self.units = {name: _attr_str(f[name].attrs.get("units")) for name in self.variables
                      if "units" in f[name].attrs}
        self.version = _attr_str(attrs.get("ionbal_version"))
        self.history = _attr_str(attrs.get("history"))
        self.mixture_name = _attr_str(attrs.get("mixture_name"))
        try:
            self.sources = json.loads(_attr_str(attrs.get("data_sources")) or "{}")
        except ValueError:
            self.sources = {}
        try:
            self.spec_dict = json.loads(_attr_str(attrs.get("ionbal_grid_spec")) or "{}")
        except ValueError:
            self.spec_dict = {}
        try:
            self._status_counts = json.loads(_attr_str(attrs.get("status_counts")) or "{}")
        except ValueError:
            self._status_counts = None
        try:
            self._validity_counts = json.loads(_attr_str(attrs.get("validity_counts")) or "{}")
        except ValueError:
            self._validity_counts = {}

    # -- basic access ---------------------------------------------------------------------------
    def _read_raw(self, name, sel=()):
        try:
            ds = self._f[name]
            return ds[sel] if sel != () else ds[()]
        except KeyError:
            raise
        except (OSError, RuntimeError, ValueError) as exc:
            raise GridFileError(f"cannot read {name!r} from {self.path}: the data are damaged "
                                f"({_short(exc)})") from None

    @property
    def temperature(self) -> np.ndarray:
        return self.axes["temperature"]

    @property
    def state(self) -> np.ndarray:
        return self.axes[self.state_variable]

    @property
    def metallicity(self):
        return self.axes.get("metallicity")

    @property
    def alpha(self):
        return self.axes.get("alpha")

    @property
    def has_composition(self) -> bool:
        return "metallicity" in self.axes

    @property
    def complete(self) -> bool:
        return True  # an incomplete file cannot be opened

    @property
    def mixture(self):
        """The mixture (an :class:`ionbal.Mixture`); for composition grids, the base mixture ([M/H] = 0)."""
        from .data.mixture import Mixture

        d = self.spec_dict.get("mixture", {})
        if d.get("abundances"):
            return Mixture(d["abundances"], name=d.get("name", self.mixture_name or "custom"))
        return Mixture(dict(zip(self.elements, np.asarray(self.abundances).reshape(-1, len(self.elements))[0])),
                       name=self.mixture_name or "custom")

    def __getitem__(self, name: str) -> np.ndarray:
        """A stored variable as numpy, e.g. ``g["electron_density"]``.

        ``"temperature"`` and the state variable give their axis broadcast over
        the grid (shape :attr:`shape`, read-only); the axes themselves are
        :attr:`temperature` and :attr:`state`.
        """
        if name == self.state_variable or name == "temperature":
            ax = self.axes[name]
            full = np.broadcast_to(ax[:, None] if name == "temperature" else ax[None, :], self.shape[-2:])
            return np.broadcast_to(full, self.shape)
        if name not in self.variables:
            raise KeyError(f"{name!r} is not stored in {self.path}; it has {', '.join(self.variables)}")
        return self._cached(name, lambda: self._read_raw(name))

    def _cached(self, key, make):
        if key in self._cache:
            self._cache.move_to_end(key)
            return self._cache[key]
        value = make()
        self._cache[key] = value
        while len(self._cache) > 12:
            self._cache.popitem(last=False)
        return value

    def quantity(self, name: str):
        """A variable as an astropy Quantity."""
        unit = self.units.get(name, QUANTITY_UNITS.get(name, "1"))
        return self[name] * _unit(unit)

    def _species_index(self, species) -> int:
        from .data.species import parse_species

        name = str(parse_species(species))
        try:
            return self.species.index(name)
        except ValueError:
            raise ValueError(f"species {name} is not stored in {self.path}; it holds "
                             f"{_abbrev(self.species)}") from None

    def fraction(self, species) -> np.ndarray:
        """Ion fraction of one species over the whole grid (shape :attr:`shape`), float64."""
        k = self._species_index(species)
        lead = (slice(None),) * (len(self.shape) - 2)
        return self._cached(("fraction", k),
                            lambda: np.asarray(self._read_raw("ion_fraction", lead + (k,)), dtype=np.float64))

    def number_density(self, species) -> np.ndarray:
        """Number density [cm^-3] of one species over the whole grid.

        Read from the file when stored, else fraction x nuclei density x the
        element's share of the nuclei (from the stored abundances).
        """
        k = self._species_index(species)
        if "number_density" in self.variables:
            lead = (slice(None),) * (len(self.shape) - 2)
            return self._cached(("number_density", k), lambda: np.asarray(
                self._read_raw("number_density", lead + (k,)), dtype=np.float64))
        from .data.species import parse_species

        el = parse_species(species).element
        e = self.elements.index(el)
        ab = np.asarray(self.abundances, dtype=np.float64)
        w = 10.0 ** (ab - ab.max(axis=-1, keepdims=True))
        share = (w[..., e] / w.sum(axis=-1))[..., None, None]
        with np.errstate(under="ignore"):
            return self.fraction(species) * self["nuclei_density"] * share

    def partition_function(self, species) -> np.ndarray:
        """Partition function of one species on the temperature axis."""
        k = self._species_index(species)
        return np.asarray(self._read_raw("partition_function", (k,)), dtype=np.float64)

    def status_counts(self) -> dict:
        """Points per status (``{"ok": n, ...}``)."""
        if self._status_counts:
            return dict(self._status_counts)
        codes = np.bincount(np.asarray(self["status"]).ravel().astype(np.uint8), minlength=256)
        return {st.STATUS_TABLE.get(c, (f"code_{c}",))[0]: int(codes[c]) for c in range(256)
                if codes[c] or c in st.STATUS_TABLE}

    def validity_counts(self) -> dict:
        """Points carrying each validity flag (``{"degenerate": n, ...}``; see :mod:`ionbal.validity`)."""
        return dict(self._validity_counts or {})

    def verify(self) -> None:
        """Read every dataset completely (checking each chunk's checksum); raises GridFileError if damaged."""
        for name in self.variables:
            ds = self._f[name]
            try:
                if ds.chunks:
                    for chunk in ds.iter_chunks():
                        ds[chunk]
                else:
                    ds[()]
            except (OSError, RuntimeError, ValueError) as exc:
                raise GridFileError(f"{self.path}: dataset {name!r} is damaged ({_short(exc)})") from None

    # -- interpolation --------------------------------------------------------------------------
    def _query(self, temperature, state, metallicity, alpha):
        from .quantities import unit
        from .validate import as_cgs_array

        cols = {"temperature": as_cgs_array(temperature, unit("temperature"), "temperature"),
                self.state_variable: as_cgs_array(state, unit(self.state_variable), self.state_variable)}
        if self.has_composition:
            for name, v in (("metallicity", metallicity), ("alpha", alpha)):
                ax = self.axes[name]
                if v is None:
                    if ax.size == 1:
                        v = ax[0]
                    else:
                        raise ValueError(f"this grid has a {name} axis ({ax[0]:g} to {ax[-1]:g}); give {name}=")
                cols[name] = np.asarray(v, dtype=np.float64)
        else:
            for name, v in (("metallicity", metallicity), ("alpha", alpha)):
                if v is not None:
                    raise ValueError(f"this grid has no {name} axis; its mixture is {self.mixture_name}")
        try:
            b = np.broadcast_arrays(*(cols[d] for d in self.dims))
        except ValueError:
            raise ValueError("the coordinates of the points do not broadcast together: shapes "
                             + ", ".join(f"{d} {cols[d].shape}" for d in self.dims)) from None
        return dict(zip(self.dims, b))

    def _cell(self, name, ax: np.ndarray, q: np.ndarray, log: bool):
        """Lower index and weight per query value; raises for values outside the axis."""
        flat = q.ravel()
        bad = ~np.isfinite(flat)
        if log:
            bad |= ~(flat > 0)
        if bad.any():
            i = int(np.flatnonzero(bad)[0])
            raise ValueError(f"{name} {float(flat[i])!r} at index {i} is not a valid value"
                             + (" (must be finite and positive)" if log else " (must be finite)"))
        lo, hi = ax[0], ax[-1]
        tol = 1e-12 * max(abs(lo), abs(hi), 1e-300) if not log else 0.0
        if log:
            outside = (flat < lo * (1 - 1e-12)) | (flat > hi * (1 + 1e-12))
        else:
            outside = (flat < lo - tol - 1e-12) | (flat > hi + tol + 1e-12)
        if outside.any():
            i = int(np.flatnonzero(outside)[0])
            unit = QUANTITY_UNITS.get(name, "")
            unit = "" if unit in ("", "1") else f" {unit}"
            where = f" at index {i}" if flat.size > 1 else ""
            raise ValueError(f"{name} {flat[i]:.6g}{unit}{where} is outside the grid: its {name} axis covers "
                             f"{lo:.6g} to {hi:.6g}{unit} ({int(outside.sum())} point(s) outside)")
        if ax.size == 1:
            return np.zeros(flat.size, dtype=np.int64), np.zeros(flat.size)
        x = np.log(ax) if log else ax
        qx = np.log(np.clip(flat, lo, hi)) if log else np.clip(flat, lo, hi)
        i = np.clip(np.searchsorted(x, qx, side="right") - 1, 0, x.size - 2)
        w = (qx - x[i]) / (x[i + 1] - x[i])
        return i, np.clip(w, 0.0, 1.0)

    def _interp_field(self, field_key: str, field, q: dict, method: str) -> np.ndarray:
        """Interpolate log(field) multilinearly (or cubically) at the query points; returns exp of it."""
        shape = next(iter(q.values())).shape
        logs = {d: d in ("temperature", self.state_variable) for d in self.dims}
        if method == "linear":
            cells = [self._cell(d, self.axes[d], q[d], logs[d]) for d in self.dims]
            with np.errstate(divide="ignore", invalid="ignore"):
                lf = self._cached(("log", field_key), lambda: np.log(np.asarray(field(), dtype=np.float64)))
            n = cells[0][0].size
            acc = np.zeros(n)
            bad = np.zeros(n, dtype=bool)
            d = len(self.dims)
            for corner in range(2 ** d):
                idx = []
                wt = np.ones(n)
                for j, (i, w) in enumerate(cells):
                    up = (corner >> j) & 1
                    if up and self.axes[self.dims[j]].size == 1:
                        wt = wt * 0.0
                        idx.append(i)
                        continue
                    idx.append(i + up)
                    wt = wt * (w if up else (1.0 - w))
                vals = lf[tuple(idx)]
                use = wt > 0
                bad |= use & np.isnan(vals)
                with np.errstate(invalid="ignore"):
                    acc += np.where(use, wt * np.where(np.isnan(vals), 0.0, vals), 0.0)
            if bad.any():
                k = int(np.flatnonzero(bad)[0])
                pt = ", ".join(f"{dd}={q[dd].ravel()[k]:.6g}" for dd in self.dims)
                raise ValueError(f"cannot interpolate {field_key} at point {k} ({pt}): the surrounding grid "
                                 "points did not converge (status != 0)")
            with np.errstate(under="ignore", over="ignore"):
                return np.exp(acc).reshape(shape)
        if method == "cubic":
            from scipy.interpolate import RegularGridInterpolator

            for d in self.dims:
                self._cell(d, self.axes[d], q[d], logs[d])  # range checks and messages
                if self.axes[d].size < 4:
                    raise ValueError(f"cubic interpolation needs at least 4 values on every axis; {d} has "
                                     f"{self.axes[d].size} (use method='linear')")
            with np.errstate(divide="ignore", invalid="ignore"):
                lf = np.log(np.asarray(field(), dtype=np.float64))
            if np.isnan(lf).any():
                raise ValueError(f"cannot interpolate {field_key} cubically: the grid has points that did not "
                                 "converge (use method='linear')")
            lf = np.maximum(lf, math.log(np.finfo(np.float64).tiny))
            pts = [np.log(self.axes[d]) if logs[d] else self.axes[d] for d in self.dims]
            qs = [np.log(np.clip(q[d].ravel(), self.axes[d][0], self.axes[d][-1])) if logs[d]
                  else np.clip(q[d].ravel(), self.axes[d][0], self.axes[d][-1]) for d in self.dims]
            rgi = RegularGridInterpolator(pts, lf, method="cubic", bounds_error=False, fill_value=None)
            with np.errstate(under="ignore", over="ignore"):
                return np.exp(rgi(np.stack(qs, axis=-1))).reshape(shape)
        raise ValueError(f"method must be 'linear' or 'cubic', got {method!r}")

    def interpolate(self, name: str, temperature, state, *, metallicity=None, alpha=None,
                    method: str = "linear") -> np.ndarray:
        """Interpolate a per-point quantity (e.g. ``"electron_density"``) at arbitrary points inside the grid.

        Interpolation is in log T, log(state variable) (and linear in the
        composition axes) of the log of the quantity: multilinear by default,
        ``method="cubic"`` for cubic splines.

        Parameters
        ----------
        name : str
            A per-point variable: electron_density, electron_pressure,
            gas_pressure, mass_density, hydrogen_density, nuclei_density,
            mean_molecular_weight.
        temperature, state : float, array or Quantity
            The points (broadcast together); ``state`` is the grid's state
            variable (:attr:`state_variable`), cgs for bare numbers.
        metallicity, alpha : float or array, optional
            Needed for grids with composition axes of more than one value.

        Raises
        ------
        ValueError
            For points outside the grid (naming the offending value and the
            grid range), or next to grid points that did not converge.
        """
        allowed = [v for v in _POINT_VARIABLES if v in self.variables or v == self.state_variable]
        if name not in allowed:
            raise ValueError(f"cannot interpolate {name!r}: choose one of {', '.join(allowed)}, or use "
                             "interpolate_fraction / interpolate_number_density for species")
        q = self._query(temperature, state, metallicity, alpha)
        return self._interp_field(name, lambda: self[name], q, method)

    def interpolate_fraction(self, species, temperature, state, *, metallicity=None, alpha=None,
                             method: str = "linear") -> np.ndarray:
        """Interpolate the ion fraction of one species (see :meth:`interpolate`)."""
        k = self._species_index(species)
        q = self._query(temperature, state, metallicity, alpha)
        return self._interp_field(f"fraction {self.species[k]}", lambda: self.fraction(species), q, method)

    def interpolate_number_density(self, species, temperature, state, *, metallicity=None, alpha=None,
                                   method: str = "linear") -> np.ndarray:
        """Interpolate the number density [cm^-3] of one species (see :meth:`interpolate`)."""
        k = self._species_index(species)
        q = self._query(temperature, state, metallicity, alpha)
        return self._interp_field(f"number_density {self.species[k]}", lambda: self.number_density(species), q,
                                  method)

    # -- lifecycle ------------------------------------------------------------------------------
    def close(self) -> None:
        f = getattr(self, "_f", None)
        if f is not None:
            with contextlib.suppress(Exception):
                f.close()
            self._f = None

    def __enter__(self) -> "GridFile":
        return self

    def __exit__(self, *exc) -> None:
        self.close()

    def __del__(self):  # pragma: no cover - best effort
        with contextlib.suppress(Exception):
            self.close()

    def summary(self) -> str:
        """A readable multi-line description (what ``ionbal info`` prints)."""
        lines = [f"{self.path}: ionbal grid file (written by ionbal {self.version})"]
        for d in self.dims:
            ax = self.axes[d]
            unit = QUANTITY_UNITS.get(d, "")
            unit = "" if unit in ("", "1") else f" {unit}"
            spacing = _attr_str(self._f[d].attrs.get("spacing")) or "values"
            lines.append(f"  axis {d:<18} {len(ax):>6} values  {ax[0]:.6g} to {ax[-1]:.6g}{unit}"
                         + (f"  ({spacing})" if d in ("temperature", self.state_variable) else ""))
        n = int(np.prod(self.shape, dtype=np.int64))
        lines.append(f"  points            {n:,}")
        mix = self.mixture
        lines.append(f"  mixture           {self.mixture_name} ({len(self.elements)} elements: "
                     f"{_abbrev(self.elements, 12)})")
        show = [f"{el}={a:.2f}" for el, a in zip(mix.elements, mix.log_eps) if el in ("H", "He", "C", "N", "O",
                                                                                     "Mg", "Si", "Fe")]
        lines.append(f"  A(X)              {' '.join(show)}")
        cube = self._f["ion_fraction"]
        lines.append(f"  species           {len(self.species)} ({_abbrev(self.species, 8)}); cube "
                     f"{cube.dtype}" + (", number densities stored" if "number_density" in self.variables
                                       else ""))
        counts = self.status_counts()
        lines.append("  status            " + ", ".join(f"{k} {v:,}" for k, v in counts.items()))
        vc = self.validity_counts()
        if vc:
            lines.append("  validity flags    " + ", ".join(f"{k} {v:,}" for k, v in vc.items())
                         + " (points where ideal-gas LTE Saha is doubtful; see ionbal.validity)")
        lines.append("  complete          yes (completeness marker set)")
        lines.append(f"  made by           {self.history}")
        for name, info in self.sources.items():
            title = info.get("title", "")
            lines.append(f"  source            {name}: {title} (sha256 {info.get('sha256', '')[:12]})")
        return "\n".join(lines)

    def __repr__(self) -> str:
        if getattr(self, "_f", None) is None:
            return f"<GridFile {self.path} (closed)>"
        dims = " x ".join(f"{d}[{n}]" for d, n in zip(self.dims, self.shape))
        return f"<GridFile {self.path}: {dims}, {len(self.species)} species, mixture {self.mixture_name!r}>"


def _abbrev(items: Sequence[str], n: int = 10) -> str:
    items = list(items)
    if len(items) <= n:
        return ", ".join(items)
    return ", ".join(items[: n - 2]) + ", ..., " + items[-1]


def _short(exc: BaseException) -> str:
    msg = str(exc).strip().splitlines()
    msg = msg[0] if msg else exc.__class__.__name__
    return msg[:200]


def open_grid(path) -> GridFile:
    """Open an ionbal grid file for reading and interpolation.

    Raises
    ------
    FileNotFoundError
        If the file does not exist.
    GridFileError
        (a ValueError) if it is not an HDF5 file, not an ionbal grid, truncated,
        damaged or incomplete.

    Examples
    --------
    >>> with ionbal.open_grid("ionbal-grid.h5") as g:                   # doctest: +SKIP
    ...     ne = g.interpolate("electron_density", 5777.0, 1.2e5)
    ...     fe2 = g.interpolate_fraction("Fe II", 5777.0, 1.2e5)
    """
    return GridFile(path)


#: alias of :func:`open_grid`, to pair with the writers
read_grid = open_grid


def read_attr_json(path, name: str) -> dict:
    """A JSON-valued root attribute of an HDF5 file ({} if absent or unreadable)."""
    h5py = _h5py()
    try:
        with h5py.File(path, "r") as f:
            return json.loads(_attr_str(f.attrs.get(name)) or "{}")
    except (OSError, ValueError):
        return {}
