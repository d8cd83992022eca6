"""Maps of grid files, with the validity-flagged points hatched."""

from __future__ import annotations

from pathlib import Path

import numpy as np

from ._base import (
    _CMAPS,
    _LINEAR,
    _QUANTITY_LABELS,
    _axis_label,
    _finish,
    _mpl,
    _new_figure,
    _plain_log_ticks,
    _style,
    check_figure_path,
)
from .fractions import (
    _stage_label,
)

# ---------------------------------------------------------------------------------------------------
# grid maps
# ---------------------------------------------------------------------------------------------------

#: hatch pattern of each validity flag on maps
_HATCHES = {"degenerate": "///", "coupled": "\\\\\\", "debye_lowering": "...", "pressure_ionization": "|||"}
_FLAG_TEXT = {"degenerate": "electron degeneracy", "coupled": "strong Coulomb coupling",
              "debye_lowering": "Debye lowering > 0.1 kT", "pressure_ionization": "pressure ionization"}


def _edges(axis: np.ndarray, log: bool) -> np.ndarray:
    """Cell edges around the nodes (geometric midpoints on a log axis)."""
    a = np.log10(axis) if log else np.asarray(axis, dtype=np.float64)
    if a.size == 1:
        e = np.array([a[0] - 0.5, a[0] + 0.5])
    else:
        mid = 0.5 * (a[1:] + a[:-1])
        e = np.concatenate([[a[0] - (mid[0] - a[0])], mid, [a[-1] + (a[-1] - mid[-1])]])
    return 10.0**e if log else e


def _composition_index(g, metallicity, alpha):
    if not g.has_composition:
        if metallicity is not None or alpha is not None:
            raise ValueError(f"{g.path} has no [M/H] or [alpha/M] axis; leave metallicity and alpha unset")
        return (), ""
    idx = []
    text = []
    for name, axis, value in (("metallicity", g.metallicity, metallicity), ("alpha", g.alpha, alpha)):
        axis = np.asarray(axis, dtype=np.float64)
        if value is None:
            i = int(np.argmin(np.abs(axis)))  # solar-scaled if present
        else:
            hit = np.flatnonzero(np.isclose(axis, float(value), atol=1e-6))
            if not hit.size:
                raise ValueError(f"{name} {value:g} is not on the grid's {name} axis "
                                 f"({', '.join(f'{v:g}' for v in axis)})")
            i = int(hit[0])
        idx.append(i)
        text.append(("[M/H]" if name == "metallicity" else "[α/M]") + f" = {axis[i]:+.2f}")
    return tuple(idx), ", ".join(text)


def _map_field(g, name: str, sel: tuple):
    """(values, label, colour-bar log scale) of a grid quantity or species fraction."""
    if name in g.variables and name not in ("ion_fraction", "number_density", "partition_function", "status",
                                            "validity", "species", "element", "abundance"):
        v = np.asarray(g[name], dtype=np.float64)[sel]
        return v, _axis_label(name, None if name in _QUANTITY_LABELS else g.units.get(name, "")), \
            name not in _LINEAR
    try:
        v = np.asarray(g.fraction(name), dtype=np.float64)[sel]
    except ValueError:
        stored = [n for n in ("electron_density", "electron_pressure", "gas_pressure", "mass_density",
                              "hydrogen_density", "nuclei_density", "mean_molecular_weight", "iterations")
                  if n in g.variables and n != g.state_variable]
        raise ValueError(f"{name!r} is neither a quantity nor a species stored in {g.path}; quantities: "
                         f"{', '.join(stored)}; species e.g. {', '.join(g.species[:6])}") from None
    from ..data import parse_species

    return v, f"Fraction of {_stage_label(str(parse_species(name)))}", True


def plot_grid_map(grid, quantities=("electron_density", "mean_molecular_weight"), *, metallicity=None,
                  alpha=None, show_validity: bool = True, path=None, overwrite: bool = False):
    """Maps of grid quantities over temperature x state, with the validity-flagged points hatched.

    Parameters
    ----------
    grid : str, Path or GridFile
        A grid file (from ``ionbal grid``) or an open :func:`ionbal.open_grid`.
    quantities : str or sequence of str
        Stored per-point quantities (``electron_density``, ``mean_molecular_weight``,
        ``electron_pressure``, ``mass_density``, ...) or species (``"Fe II"``,
        its fraction): one panel each.
    metallicity, alpha : float, optional
        For composition grids: which [M/H], [alpha/M] (default the values
        nearest zero).
    show_validity : bool
        Hatch the points where a validity flag of ideal-gas LTE Saha is set
        (see :mod:`ionbal.validity`); points not solved are grey.
    """
    mpl = _mpl()
    from ..io import open_grid

    if isinstance(quantities, str):
        quantities = [quantities]
    quantities = list(quantities)
    if not quantities:
        raise ValueError("no quantity to map: give e.g. electron_density")
    if path is not None:
        check_figure_path(path, overwrite=overwrite)
    own = not hasattr(grid, "fraction")
    g = open_grid(grid) if own else grid
    try:
        sel, comp_text = _composition_index(g, metallicity, alpha)
        T, S = np.asarray(g.temperature), np.asarray(g.state)
        status = np.asarray(g["status"])[sel]
        fields = [_map_field(g, q, sel) for q in quantities]
        mask = np.asarray(g["validity"])[sel] if show_validity and "validity" in g.variables else None
        mixture = g.mixture_name or "mixture"
        sv = g.state_variable
        name = Path(g.path).name
    finally:
        if own:
            g.close()
    unsolved = status != 0
    Te, Se = _edges(T, True), _edges(S, True)
    flags = _flags_of(mask) if mask is not None else {}
    with _style():
        ncol = len(fields)
        fig = _new_figure(4.6 * ncol + 0.6, 4.4)
        axes = fig.subplots(1, ncol, squeeze=False, sharey=True)[0]
        for j, (ax, (values, label, logscale)) in enumerate(zip(axes, fields)):
            cmap = mpl.colormaps[_CMAPS.get(quantities[j], "viridis")].with_extremes(bad="0.75")
            v = np.where(unsolved | ~np.isfinite(values), np.nan, values)
            if logscale:
                pos = v[np.isfinite(v) & (v > 0)]
                v = np.where(v > 0, v, np.nan)
                if quantities[j] not in _QUANTITY_LABELS:  # a species fraction: show six decades at most
                    lo = max(pos.min(), pos.max() * 1e-6) if pos.size else 1e-6
                else:
                    lo = pos.min() if pos.size else 1e-30
                norm = mpl.colors.LogNorm(vmin=lo, vmax=pos.max() if pos.size else 1.0)
            else:
                norm = None
            # pcolormesh wants (rows = y = state, columns = x = temperature)
            m = ax.pcolormesh(Te, Se, np.ma.masked_invalid(v).T, cmap=cmap, norm=norm, shading="flat",
                              rasterized=True)
            cb = fig.colorbar(m, ax=ax, location="top", shrink=0.9, aspect=30, pad=0.02)
            cb.set_label(label)
            handles = _draw_flags(ax, Te, Se, flags)
            if unsolved.any():
                handles.append(mpl.patches.Patch(facecolor="0.75", edgecolor="none",
                                                 label=f"not solved ({int(unsolved.sum())} points)"))
            if handles and j == ncol - 1:
                ax.legend(handles=handles, loc="upper left", bbox_to_anchor=(1.02, 1.0), borderaxespad=0.0,
                          title="validity flags" if flags else None, title_fontsize=8.5, handleheight=1.6,
                          handlelength=2.2)
            ax.set_xscale("log")
            ax.set_yscale("log")
            ax.set_xlim(Te[0], Te[-1])
            ax.set_ylim(Se[0], Se[-1])
            _plain_log_ticks(ax.xaxis, Te[0], Te[-1])
            ax.set_xlabel(_axis_label("temperature"))
            if j == 0:
                ax.set_ylabel(_axis_label(sv))
        title = f"{name}: {mixture}" + (f", {comp_text}" if comp_text else "")
        if mask is not None and not flags:
            title += " (no validity flag raised)"
        fig.suptitle(title)
    return _finish(fig, path, overwrite)


def _flags_of(mask) -> dict:
    """flag name -> boolean array, for the physics flags that are set somewhere."""
    from ..validity import FLAG_BITS, PHYSICS_FLAGS

    m = np.asarray(mask).astype(np.int64)
    out = {}
    for name in PHYSICS_FLAGS:
        on = (m & int(FLAG_BITS[name])) != 0
        if on.any():
            out[name] = on
    return out


def _cell_outline(on: np.ndarray, Te: np.ndarray, Se: np.ndarray) -> list:
    """Segments of the boundary of the flagged cells (``on[i_T, i_S]``) along the cell edges."""
    pad = np.pad(on, 1, constant_values=False)
    segs = []
    core = pad[1:-1, 1:-1]
    for di, dj in ((-1, 0), (1, 0), (0, -1), (0, 1)):
        other = pad[1 + di: pad.shape[0] - 1 + di, 1 + dj: pad.shape[1] - 1 + dj]
        for i, j in zip(*np.nonzero(core & ~other)):
            if di:  # a vertical edge at the low (di = -1) or high temperature side of the cell
                x = Te[i] if di < 0 else Te[i + 1]
                segs.append([(x, Se[j]), (x, Se[j + 1])])
            else:
                y = Se[j] if dj < 0 else Se[j + 1]
                segs.append([(Te[i], y), (Te[i + 1], y)])
    return segs


def _draw_flags(ax, Te, Se, flags) -> list:
    """Hatch the flagged cells (one pattern per flag) over a light wash, outline them; legend handles."""
    import matplotlib as mpl
    from matplotlib.collections import LineCollection

    if not flags:
        return []
    ones = np.ones(next(iter(flags.values())).shape)
    anyflag = np.logical_or.reduce(list(flags.values()))
    wash = mpl.colors.ListedColormap([(1.0, 1.0, 1.0, 0.35)])
    clear = mpl.colors.ListedColormap([(1.0, 1.0, 1.0, 0.0)])
    ax.pcolor(Te, Se, np.ma.masked_where(~anyflag, ones).T, cmap=wash, linewidth=0.0, zorder=2, rasterized=True)
    handles = []
    for name, on in flags.items():
        hatch = _HATCHES.get(name, "xx")
        ax.pcolor(Te, Se, np.ma.masked_where(~on, ones).T, cmap=clear, edgecolor="black", linewidth=0.0,
                  hatch=hatch, zorder=3)
        handles.append(mpl.patches.Patch(facecolor="0.9", edgecolor="black", hatch=hatch,
                                         label=f"{_FLAG_TEXT.get(name, name)} ({int(on.sum())})"))
    ax.add_collection(LineCollection(_cell_outline(anyflag, Te, Se), colors="black", linewidths=1.0, zorder=4))
    return handles


