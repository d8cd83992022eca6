"""Stage fractions: against temperature at a fixed state, and along model-atmosphere columns."""

from __future__ import annotations

from pathlib import Path

import numpy as np

from ..quantities import astropy_unit

from ._base import (
    OKABE_ITO,
    _QUANTITY_LABELS,
    _SHORT,
    _axis_label,
    _finish,
    _new_figure,
    _plain_log_ticks,
    _state_text,
    _style,
    _style_of,
    check_figure_path,
)

# ---------------------------------------------------------------------------------------------------
# stage fractions
# ---------------------------------------------------------------------------------------------------

def _elements(elements) -> list[str]:
    from ..data import parse_species

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
    from ..api import solve

    given = {k: v for k, v in (("gas_pressure", gas_pressure), ("mass_density", mass_density),
                               ("hydrogen_density", hydrogen_density), ("electron_pressure", electron_pressure))
             if v is not None}
    if len(given) > 1:
        raise ValueError(f"give one fixed state variable, not {len(given)} ({', '.join(given)})")
    if not given:
        given = {"gas_pressure": 1e5}
    (state, value), = given.items()
    if hasattr(value, "to_value"):  # an astropy Quantity
        value = value.to_value(astropy_unit(state))
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


