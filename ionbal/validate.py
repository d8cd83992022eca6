"""Checks of inputs, done once at the edge (the API, grid specs, model columns, output paths).

Each rule lives here once: what a number array may hold, the temperature range of the
partition-function tables, the limits of ``tol`` and ``max_iterations``, when an output path can
be written.  The layers below (data, core) trust what they are handed.
"""

from __future__ import annotations

import os
from numbers import Integral, Real
from pathlib import Path

import numpy as np

__all__ = [
    "as_cgs_array",
    "check_positive",
    "first_bad",
    "table_temperature_range",
    "outside_temperature_range",
    "check_tol",
    "check_max_iterations",
    "check_output_path",
    "MAX_ITERATIONS_LIMIT",
    "TOL_LIMIT",
]

#: largest iteration limit accepted anywhere (solve, grid specs)
MAX_ITERATIONS_LIMIT = 1_000_000
#: tolerances must lie in (0, TOL_LIMIT)
TOL_LIMIT = 1e-3
#: relative slack at the ends of the temperature tables (float round-off of axis values)
_T_SLACK = 1e-12


def _unravel(k: int, shape: tuple):
    idx = np.unravel_index(k, shape)
    return int(idx[0]) if len(idx) == 1 else tuple(int(i) for i in idx)


def as_cgs_array(value, unit: str, name: str) -> np.ndarray:
    """Convert ``value`` (number, array or Quantity) to a float64 array in ``unit``.

    Only real numbers are accepted: strings, bytes, booleans, complex numbers,
    dates, ``None`` and masked arrays are refused with a message naming
    ``name`` (and the first offending index of an array).
    """
    if value is None:
        raise ValueError(f"{name} is None; give a number or an array of numbers")
    if hasattr(value, "unit") and hasattr(value, "to_value"):
        import astropy.units as u

        from .quantities import astropy_unit

        try:
            value = value.to_value(astropy_unit(unit))
        except u.UnitConversionError:
            raise ValueError(f"{name} has unit '{value.unit}', which does not convert to "
                             f"'{astropy_unit(unit)}'") from None
    if isinstance(value, np.ma.MaskedArray):
        raise ValueError(f"{name} is a masked array; fill or drop the masked values first "
                         "(or pass NaN with errors='mask')")
    if isinstance(value, (str, bytes)):
        raise ValueError(f"{name} must be a number or an array of numbers, got the string {value!r}")
    try:
        raw = np.asarray(value)
    except (TypeError, ValueError):
        raise ValueError(f"{name} must be a number or an array of numbers, got {type(value).__name__}") from None
    if raw.dtype == object:
        flat = raw.ravel()
        for k, item in enumerate(flat):
            if item is None or isinstance(item, (str, bytes, bool, np.bool_)) or not isinstance(item, Real):
                where = "" if raw.ndim == 0 else f" at index {_unravel(k, raw.shape)}"
                what = "None" if item is None else f"{type(item).__name__} {item!r}"
                raise ValueError(f"{name} must hold numbers only; found {what}{where}")
    elif raw.dtype.kind not in "iuf":
        kinds = {"b": "booleans", "c": "complex numbers", "U": "strings", "S": "bytes", "M": "dates",
                 "m": "time differences", "V": "raw records"}
        raise ValueError(f"{name} must be real numbers; got {kinds.get(raw.dtype.kind, raw.dtype.name)} "
                         f"(dtype {raw.dtype})")
    try:
        return raw.astype(np.float64)
    except (TypeError, ValueError):
        raise ValueError(f"{name} must be a number or an array of numbers") from None


def first_bad(arr: np.ndarray, bad: np.ndarray):
    """``(" at index i", value)`` of the first True of ``bad`` (``""`` for a 0-D array)."""
    idx = np.argwhere(bad)[0]
    where = "" if arr.ndim == 0 else f" at index {tuple(int(i) for i in idx) if idx.size > 1 else int(idx[0])}"
    return where, arr[tuple(idx)] if arr.ndim else arr[()]


def check_positive(arr: np.ndarray, name: str) -> None:
    bad = ~(np.isfinite(arr) & (arr > 0))
    if bad.any():
        where, v = first_bad(arr, bad)
        raise ValueError(f"{name} must be finite and positive; got {v!r}{where} ({int(bad.sum())} bad value(s))")


def table_temperature_range() -> tuple[float, float]:
    """``(T_min, T_max)`` [K] of the partition-function tables: the temperatures ionbal accepts."""
    from .data.tables import partition_grid

    g = partition_grid()
    return g.T_min, g.T_max


def outside_temperature_range(T, t_range: tuple[float, float] | None = None) -> np.ndarray:
    """Boolean mask of temperatures outside the tables (with a round-off slack of 1e-12)."""
    t_lo, t_hi = table_temperature_range() if t_range is None else t_range
    T = np.asarray(T, dtype=np.float64)
    return (T < t_lo * (1 - _T_SLACK)) | (T > t_hi * (1 + _T_SLACK))


def check_tol(tol) -> float:
    if isinstance(tol, (bool, np.bool_)) or not isinstance(tol, Real) or not (0 < tol < TOL_LIMIT):
        raise ValueError(f"tol must be a number in (0, {TOL_LIMIT:g}), got {tol!r}")
    return float(tol)


def check_max_iterations(max_iterations) -> int:
    if (isinstance(max_iterations, (bool, np.bool_)) or not isinstance(max_iterations, Integral)
            or not 1 <= max_iterations <= MAX_ITERATIONS_LIMIT):
        raise ValueError(f"max_iterations must be an integer from 1 to {MAX_ITERATIONS_LIMIT:,}, "
                         f"got {max_iterations!r}")
    return int(max_iterations)


def check_output_path(path, *, overwrite: bool = False) -> Path:
    """Check that ``path`` can be written (a file, in a writable directory, not in the way); returns it."""
    path = Path(path)
    if path.exists() and path.is_dir():
        raise IsADirectoryError(f"output {path} is a directory; give a file name")
    if path.exists() and not overwrite:
        raise FileExistsError(f"output {path} already exists; pass overwrite=True to replace it")
    parent = path.parent if str(path.parent) else Path(".")
    if not parent.is_dir():
        raise FileNotFoundError(f"cannot write {path}: directory {parent} does not exist")
    if not os.access(parent, os.W_OK | os.X_OK):
        raise PermissionError(f"cannot write {path}: directory {parent} is not writable")
    return path
