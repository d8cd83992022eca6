"""Shared pieces of the figures: matplotlib on demand, the house style and palette, figure files, labels."""

from __future__ import annotations

import contextlib
import os
import threading
from pathlib import Path

import numpy as np

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
    from ..validate import check_output_path

    check_output_path(path, overwrite=overwrite)  # the one rule for every file ionbal writes
    return FORMATS[ext]


def save_figure(fig, path, *, overwrite: bool = False) -> Path:
    """Write ``fig`` to ``path`` (format from the extension), atomically; returns the path."""
    from .. import __version__

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


