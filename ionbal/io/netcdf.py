"""netCDF-4 / CF helpers on h5py: coordinates (dimension scales), variables with units and long names,
flag attributes of the status and validity datasets, string attributes.

Units and long names come from the quantity registry (:mod:`ionbal.quantities`).
"""

from __future__ import annotations

from typing import Any, Sequence

import numpy as np

from ..core import status as st
from ..quantities import QUANTITIES

__all__ = ["FILE_TYPE_GRID", "FILE_TYPE_COLUMN", "FORMAT_VERSION", "GridFileError", "QUANTITY_UNITS",
           "QUANTITY_LONG_NAMES"]

FILE_TYPE_GRID = "grid"
FILE_TYPE_COLUMN = "column"
FORMAT_VERSION = 1

#: CF-style units of the stored quantities (from the registry)
QUANTITY_UNITS: dict[str, str] = {n: q.unit for n, q in QUANTITIES.items() if q.unit}
#: long names of the stored quantities (from the registry)
QUANTITY_LONG_NAMES: dict[str, str] = {n: q.long_name for n, q in QUANTITIES.items()}


class GridFileError(ValueError):
    """A file is not a (complete, readable) ionbal file."""


def _h5py():
    import h5py

    return h5py


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
    from ..validity import FLAG_BITS, VALIDITY_FLAGS

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


def _attr_str(value) -> str:
    if isinstance(value, bytes):
        return value.decode("utf-8", errors="replace")
    if isinstance(value, np.ndarray) and value.shape == ():
        return _attr_str(value[()])
    return "" if value is None else str(value)


def _short(exc: BaseException) -> str:
    msg = str(exc).strip().splitlines()
    msg = msg[0] if msg else exc.__class__.__name__
    return msg[:200]

