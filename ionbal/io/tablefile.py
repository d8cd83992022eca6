"""Writing tables: a model-atmosphere column (one dimension) as a netCDF-4 style HDF5 file, and any
astropy table as ECSV, CSV or fixed-width text (:func:`write_text_table`)."""

from __future__ import annotations

import json
from pathlib import Path
from typing import Any, Mapping, Sequence

import numpy as np

from .._version import __version__
from ..validate import check_output_path
from .atomic import atomic_output
from .netcdf import FILE_TYPE_COLUMN, FORMAT_VERSION, _coordinate, _h5py, _str_array, _variable
from .provenance import data_sources

__all__ = ["write_table_file", "write_text_table"]


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
    check_output_path(path, overwrite=overwrite)
    n = None
    for name, (values, _, _) in columns.items():
        m = len(values)
        if n is None:
            n = m
        elif m != n:
            raise ValueError(f"column {name} has {m} rows, expected {n}")
    n = n or 0
    with atomic_output(path, overwrite=overwrite) as tmp:
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



def write_text_table(table, path, fmt: str, *, overwrite: bool = False, comments=()) -> None:
    """Write an astropy table atomically as ``"ecsv"``, ``"csv"`` or ``"text"`` (fixed width).

    ECSV keeps units and ``table.meta``; CSV is one header line of names and the rows, nothing
    else (what spreadsheets and ``pandas.read_csv`` expect); text is a fixed-width table with the
    columns separated by blanks (floats as ``%.15e``), after ``#`` lines: the ``comments`` and the
    unit of every column that has one.
    """
    from astropy.table import Table

    from ..quantities import unit_of_astropy

    check_output_path(path, overwrite=overwrite)
    if fmt == "ecsv":
        with atomic_output(Path(path), overwrite=overwrite) as tmp:
            table.write(tmp, format="ascii.ecsv", overwrite=True)
        return
    t = Table(table, copy=False)
    t.meta.clear()
    if fmt == "csv":
        with atomic_output(Path(path), overwrite=overwrite) as tmp:
            t.write(tmp, format="ascii.csv", overwrite=True)
        return
    if fmt != "text":
        raise ValueError(f"unknown table format {fmt!r}; use 'ecsv', 'csv' or 'text'")
    for n in t.colnames:
        if t[n].dtype.kind in "US" and any(" " in str(v) or not str(v) for v in t[n]):
            raise ValueError(f"column {n} has values with blanks or empty values; a fixed-width text table "
                             "cannot hold them, write .csv or .ecsv")
    units = [f"{n} [{unit_of_astropy(t[n].unit)}]" for n in t.colnames
             if t[n].unit is not None and str(t[n].unit) != ""]
    t.meta["comments"] = list(comments) + (["units (cgs): " + ", ".join(units)] if units else [])
    formats = {n: "%.15e" for n in t.colnames if t[n].dtype.kind == "f"}
    with atomic_output(Path(path), overwrite=overwrite) as tmp:
        t.write(tmp, format="ascii.fixed_width", delimiter=" ", bookend=False, formats=formats, overwrite=True)
