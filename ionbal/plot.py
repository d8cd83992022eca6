"""Pictures of ionization balances (needs the ``plot`` extra: ``pip install 'ionbal[plot]'``).

Every function builds one :class:`matplotlib.figure.Figure` (no pyplot, no
global state), returns it, and writes it when given ``path``: the format
follows the extension (``.png``, ``.pdf`` or ``.svg``), an existing file is
replaced only with ``overwrite=True``, and the file appears under its name
only when complete.

* :func:`plot_fractions`: stage fractions of chosen elements against
  temperature at a fixed pressure (or density);
* :func:`plot_column_fractions`: the same along a model-atmosphere column
  (against depth index, temperature, column mass, optical depth, ...);
* :func:`plot_grid_map`: maps of n_e, mu (or any stored quantity or species
  fraction) over a grid file, with the validity-flagged points hatched;
* :func:`plot_column_comparison`: ionbal's n_e or P_e along a column against
  the model's own values, and the deviation;
* :func:`plot_electron_budget`: which elements give the free electrons, from
  a mapping element -> share (:func:`electron_shares` computes it from a
  result's mean charges).

Colours: lines use the colour-blind-safe palette of Okabe & Ito (2008,
"Color Universal Design (CUD): how to make figures and presentations that are
friendly to colorblind people", https://jfly.uni-koeln.de/color/), with line
styles as a second cue; maps use viridis (van der Walt & Smith 2015, the
matplotlib default; perceptually uniform and readable with colour-vision
deficiencies) and cividis (Nunez, Anderton & Renslow 2018, PLoS ONE 13,
e0199239).
"""

from __future__ import annotations

import contextlib
import os
import threading
from collections.abc import Mapping, Sequence
from pathlib import Path

import numpy as np

__all__ = [
    "OKABE_ITO",
    "FORMATS",
    "plot_fractions",
    "plot_column_fractions",
    "plot_grid_map",
    "plot_column_comparison",
    "plot_electron_budget",
    "electron_shares",
    "check_figure_path",
    "save_figure",
]

#: Okabe & Ito (2008) colour-blind-safe palette, in the order lines use it
#: (yellow last: it is faint on white)
OKABE_ITO: dict[str, str] = {
    "blue": "#0072B2",
    "vermillion": "#D55E00",
    "bluish green": "#009E73",
    "reddish purple": "#CC79A7",
    "orange": "#E69F00",
    "sky blue": "#56B4E9",
    "black": "#000000",
    "yellow": "#F0E442",
}
_COLOURS = tuple(OKABE_ITO.values())
_LINESTYLES = ("-", "--", "-.", ":")
#: file formats by extension
FORMATS = {".png": "png", ".pdf": "pdf", ".svg": "svg"}
#: default colour maps of the maps (both colour-blind-safe and perceptually uniform)
_CMAPS = {"electron_density": "viridis", "electron_pressure": "viridis", "mean_molecular_weight": "cividis"}

_MPL_MISSING = "plotting needs matplotlib: pip install 'ionbal[plot]'"

#: labels and units of the quantities ionbal computes (mathtext)
_QUANTITY_LABELS = {
    "temperature": (r"Temperature $T$", "K"),
    "gas_pressure": (r"Gas pressure $P_\mathrm{gas}$", r"dyn cm$^{-2}$"),
    "electron_pressure": (r"Electron pressure $P_e$", r"dyn cm$^{-2}$"),
    "mass_density": (r"Mass density $\rho$", r"g cm$^{-3}$"),
    "hydrogen_density": (r"Hydrogen density $n_\mathrm{H}$", r"cm$^{-3}$"),
    "nuclei_density": (r"Nuclei density $n_\mathrm{nuc}$", r"cm$^{-3}$"),
    "electron_density": (r"Electron density $n_e$", r"cm$^{-3}$"),
    "mean_molecular_weight": (r"Mean molecular weight $\mu$", ""),
    "iterations": ("Newton iterations", ""),
}
_SHORT = {
    "gas_pressure": r"$P_\mathrm{gas}$", "electron_pressure": r"$P_e$", "mass_density": r"$\rho$",
    "hydrogen_density": r"$n_\mathrm{H}$", "electron_density": r"$n_e$", "temperature": r"$T$",
}
#: cgs units of the state variables (astropy unit strings)
_CGS = {"gas_pressure": "dyn / cm2", "mass_density": "g / cm3", "hydrogen_density": "1 / cm3",
        "electron_pressure": "dyn / cm2"}
#: quantities shown on a linear colour scale (all others are positive and spread over decades)
_LINEAR = {"mean_molecular_weight", "iterations"}

#: a quiet, readable house style, applied only while a figure is drawn and saved (rc_context)
_STYLE = {
    "font.size": 10.0,
    "axes.titlesize": 10.0,
    "axes.labelsize": 10.0,
    "legend.fontsize": 8.5,
    "legend.frameon": False,
    "xtick.direction": "in",
    "ytick.direction": "in",
    "xtick.top": True,
    "ytick.right": True,
    "xtick.minor.visible": True,
    "ytick.minor.visible": True,
    "axes.grid": False,
    "lines.linewidth": 1.6,
    "savefig.dpi": 150,
    "svg.hashsalt": "ionbal",
}


# ---------------------------------------------------------------------------------------------------
# matplotlib, files
# ---------------------------------------------------------------------------------------------------

def _mpl():
    """matplotlib, imported on first use, with a clear message when it is missing."""
    try:
        import matplotlib
        import matplotlib.figure  # noqa: F401
    except ImportError:
        raise ImportError(_MPL_MISSING) from None
    return matplotlib


def _new_figure(width: float, height: float):
    """A Figure outside pyplot (nothing global), with an Agg canvas and constrained layout."""
    _mpl()
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure

    fig = Figure(figsize=(width, height), layout="constrained")
    FigureCanvasAgg(fig)
    return fig


def _style():
    return _mpl().rc_context(_STYLE)


def check_figure_path(path, *, overwrite: bool = False) -> str:
    """Check that a figure can be written to ``path``; returns the format (``png``, ``pdf``, ``svg``).

    Raises ValueError for an unknown extension, FileExistsError for an existing
    file without ``overwrite``, and FileNotFoundError / PermissionError /
    IsADirectoryError when the place cannot take the file.
    """
    path = Path(path)
    ext = path.suffix.lower()
    if ext not in FORMATS:
        raise ValueError(f"figure {path}: unknown extension {ext or '(none)'}; use .png, .pdf or .svg")
    if path.is_dir():
        raise IsADirectoryError(f"figure {path} is a directory")
    if path.exists() and not overwrite:
        raise FileExistsError(f"figure {path} already exists; pass overwrite=True (--overwrite) to replace it")
    parent = path.parent if str(path.parent) else Path(".")
    if not parent.is_dir():
        raise FileNotFoundError(f"cannot write {path}: directory {parent} does not exist")
    if not os.access(parent, os.W_OK | os.X_OK):
        raise PermissionError(f"cannot write {path}: directory {parent} is not writable")
    return FORMATS[ext]


def save_figure(fig, path, *, overwrite: bool = False) -> Path:
    """Write ``fig`` to ``path`` (format from the extension), atomically; returns the path."""
    from . import __version__

    path = Path(path)
    fmt = check_figure_path(path, overwrite=overwrite)
    key = {"png": "Software", "pdf": "Creator", "svg": "Creator"}[fmt]
    meta = {key: f"ionbal {__version__} (matplotlib {_mpl().__version__})"}
    if fmt == "svg":
        meta["Date"] = None  # reproducible files
    tmp = path.with_name(f".{path.name}.tmp-{os.getpid()}-{threading.get_ident()}")
    try:
        with _style():
            fig.savefig(tmp, format=fmt, metadata=meta)
        os.replace(tmp, path)
    except BaseException:
        with contextlib.suppress(OSError):
            tmp.unlink()
        raise
    return path


def _finish(fig, path, overwrite: bool):
    if path is not None:
        save_figure(fig, path, overwrite=overwrite)
    return fig


# ---------------------------------------------------------------------------------------------------
# labels
# ---------------------------------------------------------------------------------------------------

def _sci(v: float, digits: int = 2) -> str:
    """A number in mathtext: ``$5800$``, ``$1.0 \\times 10^{5}$``, ``$10^{-3}$``."""
    v = float(v)
    if v == 0 or not np.isfinite(v):
        return f"${v:g}$"
    if 1e-2 <= abs(v) < 1e5:
        return f"${v:.{digits + 1}g}$"
    exp = int(np.floor(np.log10(abs(v))))
    mant = v / 10.0**exp
    if abs(mant - round(mant)) < 1e-9 and round(mant) == 1:
        return f"$10^{{{exp}}}$"
    return f"${mant:.{digits}g} \\times 10^{{{exp}}}$"


def _axis_label(name: str, unit: str | None = None) -> str:
    label, default_unit = _QUANTITY_LABELS.get(name, (name.replace("_", " "), ""))
    u = default_unit if unit is None else unit
    return f"{label} [{u}]" if u else label


def _state_text(name: str, value: float) -> str:
    return f"{_SHORT.get(name, name)} = {_sci(value)} {_QUANTITY_LABELS[name][1]}".rstrip()


def _plain_log_ticks(axis, lo: float, hi: float) -> None:
    """On a log axis spanning less than ~2.5 decades, ticks at 1, 2, 5 x 10^n labelled as plain numbers."""
    from matplotlib import ticker

    if not (lo > 0 and hi > 0) or abs(np.log10(hi / lo)) > 2.5:
        return
    axis.set_major_locator(ticker.LogLocator(base=10.0, subs=(1.0, 2.0, 5.0)))
    axis.set_major_formatter(ticker.FuncFormatter(lambda v, _pos: f"{v:.0f}" if v >= 1 else f"{v:g}"))
    axis.set_minor_locator(ticker.LogLocator(base=10.0, subs=(3.0, 4.0, 6.0, 7.0, 8.0, 9.0)))
    axis.set_minor_formatter(ticker.NullFormatter())


def _style_of(k: int) -> dict:
    """Colour and line style of the k-th curve: colours first, then the next line style."""
    return {"color": _COLOURS[k % len(_COLOURS)], "linestyle": _LINESTYLES[(k // len(_COLOURS)) % len(_LINESTYLES)]}


# ---------------------------------------------------------------------------------------------------
# stage fractions
# ---------------------------------------------------------------------------------------------------

def _elements(elements) -> list[str]:
    from .data import parse_species

    if isinstance(elements, str):
        elements = [e for e in elements.replace(",", " ").split() if e]
    out = []
    for e in elements:
        text = str(e).strip()
        try:
            if not text.isalpha():
                raise ValueError(text)
            el = str(parse_species(text + " I")).split()[0]
        except ValueError:
            raise ValueError(f"{e!r} is not an element symbol (give elements such as Fe, Ca, H)") from None
        if el not in out:
            out.append(el)
    if not out:
        raise ValueError("no element to plot: give at least one element symbol, e.g. Fe")
    return out


def _temperatures(temperature, n_points: int) -> np.ndarray:
    T = np.asarray(temperature, dtype=np.float64).ravel()
    if T.size == 2 and n_points:
        lo, hi = float(T[0]), float(T[1])
        if not (np.isfinite(lo) and np.isfinite(hi) and 0 < lo < hi):
            raise ValueError(f"temperature range must be two increasing positive numbers, got {lo:g}, {hi:g}")
        if int(n_points) < 2:
            raise ValueError(f"n_points must be at least 2, got {n_points}")
        return np.geomspace(lo, hi, int(n_points))
    if T.size < 2:
        raise ValueError("temperature must be a (min, max) range or an array of at least two values")
    if not np.all(np.isfinite(T) & (T > 0)):
        i = int(np.flatnonzero(~(np.isfinite(T) & (T > 0)))[0])
        raise ValueError(f"temperature[{i}] is {T[i]!r}; temperatures must be finite positive numbers [K]")
    return T


def _stage_label(species: str) -> str:
    return species.replace("H-", r"H$^-$")


def _draw_fractions(fig, x, groups, *, min_fraction: float, log: bool, xlabel: str, xlog: bool,
                    invert_x: bool = False):
    """One panel per element; ``groups`` is a list of (element, [(species, fraction array), ...])."""
    axes = fig.subplots(len(groups), 1, sharex=True, squeeze=False)[:, 0]
    for ax, (el, curves) in zip(axes, groups):
        k = 0
        for sp, f in curves:
            f = np.asarray(f, dtype=np.float64)
            if not np.any(f >= min_fraction):
                continue
            ax.plot(x, f, label=_stage_label(sp), **_style_of(k))
            k += 1
        if log:
            ax.set_yscale("log")
            ax.set_ylim(min_fraction, 1.6)
        else:
            ax.set_ylim(-0.02, 1.04)
        ax.set_ylabel(f"{el}: fraction")
        if k:
            ax.legend(loc="center left", bbox_to_anchor=(1.01, 0.5), ncols=1 + (k - 1) // 9,
                      handlelength=2.4, borderaxespad=0.0)
        else:
            ax.text(0.5, 0.5, f"no stage of {el} above {min_fraction:g}", transform=ax.transAxes,
                    ha="center", va="center", color="0.4")
    last = axes[-1]
    if xlog:
        last.set_xscale("log")
        _plain_log_ticks(last.xaxis, float(np.min(x)), float(np.max(x)))
    last.set_xlabel(xlabel)
    last.set_xlim(*((max(x), min(x)) if invert_x else (min(x), max(x))))
    return axes


def plot_fractions(elements, temperature=(2000.0, 50000.0), *, gas_pressure=None, mass_density=None,
                   hydrogen_density=None, electron_pressure=None, mixture=None, n_points: int = 400,
                   min_fraction: float = 1e-3, log: bool = False, path=None, overwrite: bool = False):
    """Stage fractions of ``elements`` against temperature at one fixed state variable.

    Parameters
    ----------
    elements : str or sequence of str
        Element symbols, e.g. ``["Fe", "Ca"]`` or ``"Fe Ca"``: one panel each.
    temperature : (min, max) or array
        A range (``n_points`` log-spaced values) or the temperatures themselves [K].
    gas_pressure, mass_density, hydrogen_density, electron_pressure : float
        The fixed state (cgs; at most one; default ``gas_pressure=1e5`` dyn cm^-2).
    mixture : Mixture, optional
        Default AGSS09 (as :func:`ionbal.solve`).
    min_fraction : float
        Stages whose fraction never reaches this are left out (and the lower
        limit of the log axis).
    log : bool
        Logarithmic fraction axis.
    path : str or Path, optional
        Write the figure there (``.png``, ``.pdf``, ``.svg``).

    Returns
    -------
    matplotlib.figure.Figure
    """
    from .api import solve

    given = {k: v for k, v in (("gas_pressure", gas_pressure), ("mass_density", mass_density),
                               ("hydrogen_density", hydrogen_density), ("electron_pressure", electron_pressure))
             if v is not None}
    if len(given) > 1:
        raise ValueError(f"give one fixed state variable, not {len(given)} ({', '.join(given)})")
    if not given:
        given = {"gas_pressure": 1e5}
    (state, value), = given.items()
    if hasattr(value, "to_value"):  # an astropy Quantity
        value = value.to_value(_CGS[state])
    if np.ndim(value) != 0:
        raise ValueError(f"{state} must be one number (the fixed state), got an array of shape {np.shape(value)}")
    value = float(value)
    if not (np.isfinite(value) and value > 0):
        raise ValueError(f"{state} must be a finite positive number, got {value!r}")
    _check_min_fraction(min_fraction)
    els = _elements(elements)
    T = _temperatures(temperature, n_points)
    if path is not None:
        check_figure_path(path, overwrite=overwrite)
    r = solve(T, mixture=mixture, **{state: value})
    missing = [e for e in els if e not in r.mixture.elements]
    if missing:
        raise ValueError(f"element(s) {', '.join(missing)} not in the mixture {r.mixture.name}")
    groups = [(el, list(zip(r.stages(el), r.fractions(el)))) for el in els]
    with _style():
        fig = _new_figure(7.0, 0.6 + 2.1 * len(els))
        _draw_fractions(fig, T, groups, min_fraction=min_fraction, log=log, xlabel=_axis_label("temperature"),
                        xlog=True)
        fig.suptitle(f"LTE ionization stages: {r.mixture.name}, {_state_text(state, value)}")
    return _finish(fig, path, overwrite)


def _check_min_fraction(min_fraction) -> None:
    if not (np.isfinite(min_fraction) and 0 < float(min_fraction) < 1):
        raise ValueError(f"min_fraction must be between 0 and 1, got {min_fraction!r}")


# ---------------------------------------------------------------------------------------------------
# columns
# ---------------------------------------------------------------------------------------------------

#: pass-through columns tried, in order, for the depth axis of a column plot: (name, log axis, invert)
_DEPTH_COLUMNS = (
    ("column_mass", True, False), ("mass_column", True, False), ("log_column_mass", False, False),
    ("log_tau", False, False), ("log_tau_ross", False, False), ("log_tau5000", False, False),
    ("tau", True, False), ("tau_ross", True, False),
)


def _canon(name: str) -> str:
    return name.strip().lower().replace("-", "_").replace(" ", "_")


def _column_table(result):
    table = getattr(result, "table", None)
    if table is None or not hasattr(table, "colnames"):
        raise ValueError("expected a column result (from ionbal.column.solve_column), got "
                         f"{type(result).__name__}")
    return table


def _find_column(table, name: str):
    for n in table.colnames:
        if _canon(n) == _canon(name):
            return n
    return None


def _column_x(result, x: str):
    """(values, label, log axis, invert) of the x axis of a column plot."""
    table = _column_table(result)
    n = len(table)
    if x == "index":
        return np.arange(n, dtype=np.float64), "Depth point", False, False
    if x == "auto":
        for name, xlog, inv in _DEPTH_COLUMNS:
            col = _find_column(table, name)
            if col is not None:
                vals = np.asarray(table[col], dtype=np.float64)
                if np.all(np.isfinite(vals)) and (not xlog or np.all(vals > 0)):
                    return vals, _column_label(table, col), xlog, inv
        return np.arange(n, dtype=np.float64), "Depth point", False, False
    col = _find_column(table, x)
    if col is None:
        raise ValueError(f"the column result has no column {x!r}; use 'index', 'auto' or one of "
                         f"{', '.join(c for c in table.colnames if not c.startswith(('fraction_', 'number_density_')))}")
    vals = np.asarray(table[col], dtype=np.float64)
    if not np.all(np.isfinite(vals)):
        raise ValueError(f"column {col!r} has non-finite values; it cannot be the x axis")
    c = _canon(col)
    xlog = bool(np.all(vals > 0)) and (c in _QUANTITY_LABELS or c in ("column_mass", "mass_column", "tau",
                                                                      "tau_ross"))
    return vals, _column_label(table, col), xlog, False


def _column_label(table, col: str) -> str:
    c = _canon(col)
    unit = table[col].unit
    unit_text = None if unit is None else unit.to_string(format="latex_inline")
    if c in _QUANTITY_LABELS:  # known columns are in cgs (read_model converts them; ionbal writes cgs)
        return _axis_label(c)
    names = {"column_mass": r"Column mass $m$", "mass_column": r"Column mass $m$",
             "log_column_mass": r"$\log_{10}$ column mass", "log_tau": r"$\log_{10}\,\tau$",
             "log_tau_ross": r"$\log_{10}\,\tau_\mathrm{Ross}$", "log_tau5000": r"$\log_{10}\,\tau_{5000}$",
             "tau": r"Optical depth $\tau$", "tau_ross": r"Rosseland optical depth $\tau_\mathrm{Ross}$",
             "depth": "Depth"}
    label = names.get(c, col.replace("_", " "))
    if c == "column_mass" and not unit_text:
        unit_text = r"g cm$^{-2}$"
    return f"{label} [{unit_text}]" if unit_text else label


def plot_column_fractions(result, elements, *, x: str = "auto", min_fraction: float = 1e-3, log: bool = False,
                          path=None, overwrite: bool = False):
    """Stage fractions of ``elements`` along a model-atmosphere column.

    Parameters
    ----------
    result : ColumnResult
        From :func:`ionbal.column.solve_column`; its species (default stages
        I-III plus H-) are the stages shown.
    x : str
        ``"auto"`` (column mass, else log tau, else the depth index),
        ``"index"``, ``"temperature"`` or the name of any column of the result.
    """
    table = _column_table(result)
    _check_min_fraction(min_fraction)
    els = _elements(elements)
    xv, xlabel, xlog, inv = _column_x(result, x)
    if path is not None:
        check_figure_path(path, overwrite=overwrite)
    species = tuple(result.species)
    frac = np.asarray(result.fractions, dtype=np.float64).reshape(len(species), len(table))
    groups = []
    for el in els:
        curves = [(sp, frac[k]) for k, sp in enumerate(species) if sp.split()[0].rstrip("-") == el or
                  (el == "H" and sp == "H-")]
        if not curves:
            raise ValueError(f"the column result holds no stage of {el}; its species are "
                             f"{', '.join(species[:12])}{', ...' if len(species) > 12 else ''}")
        groups.append((el, curves))
    with _style():
        fig = _new_figure(7.0, 0.6 + 2.1 * len(els))
        _draw_fractions(fig, xv, groups, min_fraction=min_fraction, log=log, xlabel=xlabel, xlog=xlog,
                        invert_x=inv)
        fig.suptitle(f"LTE ionization stages along a model column\n{result.mixture_name or 'mixture'}, "
                     f"{len(table)} depth points")
    return _finish(fig, path, overwrite)


def plot_column_comparison(result, *, quantity: str | None = None, x: str = "auto", unit: str = "percent",
                           path=None, overwrite: bool = False):
    """ionbal's n_e (or P_e) along a column against the model's own values, and the deviation.

    Parameters
    ----------
    result : ColumnResult
        From :func:`ionbal.column.solve_column` on a model that carries an
        ``electron_density`` or ``electron_pressure`` column besides its state input.
    quantity : {"electron_density", "electron_pressure"}, optional
        Which comparison; default the first the result has.
    unit : {"percent", "dex"}
        Unit of the deviation panel.
    """
    table = _column_table(result)
    comps = list(getattr(result, "comparisons", []) or [])
    if not comps:
        raise ValueError("the column result has no comparison: the model carries no electron_density or "
                         "electron_pressure column besides its state input")
    if quantity is not None:
        match = [c for c in comps if c.quantity == quantity]
        if not match:
            raise ValueError(f"the column result has no comparison of {quantity}; it has "
                             f"{', '.join(c.quantity for c in comps)}")
        comps = match
    if unit not in ("percent", "dex"):
        raise ValueError(f"unit must be 'percent' or 'dex', got {unit!r}")
    xv, xlabel, xlog, inv = _column_x(result, x)
    if path is not None:
        check_figure_path(path, overwrite=overwrite)
    with _style():
        fig = _new_figure(7.0, 2.0 + 3.4 * len(comps))
        axes = fig.subplots(2 * len(comps), 1, sharex=True, squeeze=False,
                            gridspec_kw={"height_ratios": [2.2, 1.0] * len(comps)})[:, 0]
        summaries = []
        for j, c in enumerate(comps):
            top, bottom = axes[2 * j], axes[2 * j + 1]
            sym = _SHORT.get(c.quantity, c.quantity)
            ref = np.asarray(c.input_values, dtype=np.float64)
            ours = np.asarray(c.ionbal_values, dtype=np.float64)
            ok = np.isfinite(ref) & (ref > 0)
            top.plot(xv, ours, color=OKABE_ITO["blue"], label=f"ionbal {sym}", zorder=2)
            top.plot(xv[ok], ref[ok], linestyle="none", marker="o", markersize=4.0, markerfacecolor="none",
                     markeredgecolor=OKABE_ITO["black"], markeredgewidth=0.9, label=f"model {sym}", zorder=3)
            top.set_yscale("log")
            top.set_ylabel(_axis_label(c.quantity))
            top.legend(loc="best")
            dev = np.asarray(c.percent if unit == "percent" else c.dex, dtype=np.float64)
            bottom.axhline(0.0, color="0.6", linewidth=0.8, zorder=1)
            bottom.plot(xv, dev, color=OKABE_ITO["vermillion"], marker="o", markersize=2.5, zorder=2,
                        label="deviation")
            wp, ip = c.worst_percent
            wd, _ = c.worst_dex
            if ip >= 0:
                bottom.plot([xv[ip]], [dev[ip]], linestyle="none", marker="o", markersize=7.0,
                            markerfacecolor="none", markeredgecolor=OKABE_ITO["vermillion"], zorder=3)
            lim = np.nanmax(np.abs(dev)) if np.any(np.isfinite(dev)) else 1.0
            bottom.set_ylim(-1.25 * lim, 1.25 * lim)
            bottom.set_ylabel("ionbal / model − 1 [%]" if unit == "percent"
                              else r"$\log_{10}$(ionbal / model) [dex]")
            if unit == "percent":
                summaries.append(f"{sym}: median |dev| {c.median_percent:.2g} %, worst {wp:+.2g} % "
                                 f"at depth point {ip}")
            else:
                summaries.append(f"{sym}: median |dev| {c.median_dex:.2g} dex, worst {wd:+.2g} dex "
                                 f"at depth point {ip}")
        last = axes[-1]
        if xlog:
            last.set_xscale("log")
        last.set_xlabel(xlabel)
        if inv:
            last.invert_xaxis()
        fig.suptitle(f"ionbal vs the model's own values: {result.mixture_name or 'mixture'}\n"
                     + "; ".join(summaries))
    return _finish(fig, path, overwrite)


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
    from .data import parse_species

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
    from .io import open_grid

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
    from .validity import FLAG_BITS, PHYSICS_FLAGS

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


# ---------------------------------------------------------------------------------------------------
# electron donors
# ---------------------------------------------------------------------------------------------------

def electron_shares(result, elements=None) -> dict[str, np.ndarray]:
    """Share of the free electrons given by each element, from a result's mean charges.

    ``share_X = w_X <q>_X / sum_Y w_Y <q>_Y``, with ``w_X`` the number fraction
    of element X among all nuclei and ``<q>_X`` its mean charge per nucleus
    (:meth:`IonizationResult.mean_charge`; H- counts -1, so hydrogen's share
    is net of the electrons H- binds).  By charge conservation the denominator
    times the nuclei density is n_e.  A stopgap until results carry their own
    electron budget; the plot takes any mapping of this form.
    """
    mix = result.mixture
    weights = dict(zip(mix.elements, np.asarray(mix.number_fractions, dtype=np.float64)))
    names = list(mix.elements) if elements is None else _elements(elements)
    missing = [e for e in names if e not in weights]
    if missing:
        raise ValueError(f"element(s) {', '.join(missing)} not in the mixture {mix.name}")
    contrib = {e: weights[e] * np.asarray(result.mean_charge(e), dtype=np.float64) for e in mix.elements}
    total = sum(contrib.values())
    with np.errstate(divide="ignore", invalid="ignore"):
        return {e: contrib[e] / total for e in names}


def plot_electron_budget(shares: Mapping[str, Sequence[float]], x, *, xlabel: str | None = None,
                         xlog: bool | None = None, max_elements: int = 7, title: str | None = None,
                         path=None, overwrite: bool = False):
    """Stacked shares of the free electrons given by each element, against ``x``.

    Parameters
    ----------
    shares : mapping element -> array
        Each element's share of n_e at every x (they should add up to 1;
        negative shares, e.g. hydrogen where H- binds more electrons than H II
        gives, are drawn as zero and named in the legend).
    x : array
        The abscissa (default: temperature in K, log axis).
    max_elements : int
        The largest donors shown one by one; the others are summed as "others".
    """
    if not isinstance(shares, Mapping) or not shares:
        raise ValueError("shares must be a non-empty mapping element -> share array")
    xv = np.asarray(x, dtype=np.float64).ravel()
    if xv.size < 2 or not np.all(np.isfinite(xv)):
        raise ValueError("x must hold at least two finite values")
    arr = {}
    for el, s in shares.items():
        a = np.asarray(s, dtype=np.float64).ravel()
        if a.shape != xv.shape:
            raise ValueError(f"the share of {el} has {a.size} values but x has {xv.size}")
        if not np.all(np.isfinite(a)):
            i = int(np.flatnonzero(~np.isfinite(a))[0])
            raise ValueError(f"the share of {el} is {a[i]!r} at point {i}; shares must be finite")
        arr[str(el)] = a
    if int(max_elements) < 1:
        raise ValueError(f"max_elements must be at least 1, got {max_elements}")
    if xlabel is None:
        xlabel = _axis_label("temperature")
        xlog = True if xlog is None else xlog
    xlog = bool(np.all(xv > 0)) if xlog is None else xlog
    if path is not None:
        check_figure_path(path, overwrite=overwrite)
    order = sorted(arr, key=lambda e: -float(np.max(arr[e])))
    shown, rest = order[:max_elements], order[max_elements:]
    if len(rest) == 1:
        shown, rest = order, []
    negative = [e for e in order if np.min(arr[e]) < -1e-3]
    ys = [np.clip(arr[e], 0.0, None) for e in shown]
    labels = [e + (" (net < 0 in part)" if e in negative else "") for e in shown]
    colours = [_COLOURS[k % len(_COLOURS)] for k in range(len(shown))]
    if rest:
        ys.append(np.clip(sum(arr[e] for e in rest), 0.0, None))
        labels.append(f"{len(rest)} others")
        colours.append("0.8")
    with _style():
        fig = _new_figure(7.0, 3.8)
        ax = fig.subplots()
        polys = ax.stackplot(xv, *ys, labels=labels, colors=colours, edgecolor="white", linewidth=0.4)
        hatch = ("", "//", "", "\\\\", "", "..", "", "xx")
        for k, p in enumerate(polys[: len(shown)]):
            p.set_hatch(hatch[k % len(hatch)] if k >= len(_COLOURS) else "")
        ax.set_ylim(0.0, 1.0)
        ax.set_xlim(xv.min(), xv.max())
        if xlog:
            ax.set_xscale("log")
            _plain_log_ticks(ax.xaxis, float(xv.min()), float(xv.max()))
        ax.set_xlabel(xlabel)
        ax.set_ylabel(r"Share of the free electrons $n_e$")
        handles, labs = ax.get_legend_handles_labels()
        ax.legend(handles[::-1], labs[::-1], loc="center left", bbox_to_anchor=(1.01, 0.5), borderaxespad=0.0)
        fig.suptitle(title or "Electron donors")
    return _finish(fig, path, overwrite)
