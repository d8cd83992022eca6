"""Interpolation in grid files: multilinear (or cubic) in log T, log(state) and the composition axes,
of the log of the quantity.  Used by :meth:`ionbal.io.GridFile.interpolate` and its relatives.
"""

from __future__ import annotations

import math

import numpy as np

from ..quantities import unit
from ..validate import as_cgs_array
from .netcdf import QUANTITY_UNITS

__all__ = ["query", "cell", "interp_field"]


def query(g, temperature, state, metallicity, alpha):
    cols = {"temperature": as_cgs_array(temperature, unit("temperature"), "temperature"),
            g.state_variable: as_cgs_array(state, unit(g.state_variable), g.state_variable)}
    if g.has_composition:
        for name, v in (("metallicity", metallicity), ("alpha", alpha)):
            ax = g.axes[name]
            if v is None:
                if ax.size == 1:
                    v = ax[0]
                else:
                    raise ValueError(f"this grid has a {name} axis ({ax[0]:g} to {ax[-1]:g}); give {name}=")
            cols[name] = np.asarray(v, dtype=np.float64)
    else:
        for name, v in (("metallicity", metallicity), ("alpha", alpha)):
            if v is not None:
                raise ValueError(f"this grid has no {name} axis; its mixture is {g.mixture_name}")
    try:
        b = np.broadcast_arrays(*(cols[d] for d in g.dims))
    except ValueError:
        raise ValueError("the coordinates of the points do not broadcast together: shapes "
                         + ", ".join(f"{d} {cols[d].shape}" for d in g.dims)) from None
    return dict(zip(g.dims, b))

def cell(name, ax: np.ndarray, q: np.ndarray, log: bool):
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

def interp_field(g, field_key: str, field, q: dict, method: str) -> np.ndarray:
    """Interpolate log(field) multilinearly (or cubically) at the query points; returns exp of it.

    Both methods are :class:`scipy.interpolate.RegularGridInterpolator` on the log of the field
    over log T, log(state) and the (linear) composition axes; axes of one value are dropped.
    For ``"linear"`` a point is refused when a grid point of its cell that did not converge
    (NaN) would get a non-zero weight; unconverged points elsewhere do not matter.
    """
    from scipy.interpolate import RegularGridInterpolator

    if method not in ("linear", "cubic"):
        raise ValueError(f"method must be 'linear' or 'cubic', got {method!r}")
    shape = next(iter(q.values())).shape
    logs = {d: d in ("temperature", g.state_variable) for d in g.dims}
    for d in g.dims:
        cell(d, g.axes[d], q[d], logs[d])  # range checks and messages
        if method == "cubic" and g.axes[d].size < 4:
            raise ValueError(f"cubic interpolation needs at least 4 values on every axis; {d} has "
                             f"{g.axes[d].size} (use method='linear')")
    with np.errstate(divide="ignore", invalid="ignore"):
        lf = g._cached(("log", field_key), lambda: np.log(np.asarray(field(), dtype=np.float64)))
    kept = [d for d in g.dims if g.axes[d].size > 1]
    lf = lf[tuple(slice(None) if g.axes[d].size > 1 else 0 for d in g.dims)]
    nan = np.isnan(lf)
    if method == "cubic" and nan.any():
        raise ValueError(f"cannot interpolate {field_key} cubically: the grid has points that did not "
                         "converge (use method='linear')")
    # log of an underflowed value (0) is -inf: floor it at the log of the smallest normal double
    lf = np.where(nan, 0.0, np.maximum(lf, math.log(np.finfo(np.float64).tiny)))
    n = int(np.prod(shape, dtype=np.int64))
    if not kept:  # a grid of one point
        acc = np.full(n, float(lf))
        bad = np.full(n, bool(nan))
    else:
        pts = [np.log(g.axes[d]) if logs[d] else np.asarray(g.axes[d]) for d in kept]
        xi = np.stack([np.log(np.clip(q[d].ravel(), g.axes[d][0], g.axes[d][-1])) if logs[d]
                       else np.clip(q[d].ravel(), g.axes[d][0], g.axes[d][-1]) for d in kept], axis=-1)
        acc = RegularGridInterpolator(pts, lf, method=method, bounds_error=False, fill_value=None)(xi)
        bad = np.zeros(n, dtype=bool)
        if nan.any():  # weight of the unconverged corners at each point
            bad = RegularGridInterpolator(pts, nan.astype(np.float64), method="linear", bounds_error=False,
                                          fill_value=None)(xi) > 0
    if bad.any():
        k = int(np.flatnonzero(bad)[0])
        pt = ", ".join(f"{dd}={q[dd].ravel()[k]:.6g}" for dd in g.dims)
        raise ValueError(f"cannot interpolate {field_key} at point {k} ({pt}): the surrounding grid "
                         "points did not converge (status != 0)")
    with np.errstate(under="ignore", over="ignore"):
        return np.exp(acc).reshape(shape)
