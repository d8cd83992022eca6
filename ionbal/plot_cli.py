"""``ionbal plot``: pictures from the command line (needs the ``plot`` extra).

Kinds
-----
``ionbal plot fractions EL [EL ...]``   stage fractions against temperature at a fixed state
``ionbal plot map GRID.h5``             n_e and mu (or other quantities) over a grid file, flags hatched
``ionbal plot column MODEL``            ionbal vs the model's own n_e / P_e along a column (or stage fractions)
``ionbal plot budget``                  which elements give the free electrons, against temperature

Wiring into ``ionbal/cli.py`` takes two lines: ``from .plot_cli import add_plot_command`` and adding
``add_plot_command`` to the list of command extensions (the sub-parser sets ``func=run_plot``).
``python -m ionbal.plot_cli ...`` runs it on its own.
"""

from __future__ import annotations

import argparse
import sys
from pathlib import Path
from typing import Sequence

__all__ = ["add_plot_command", "run_plot", "main"]

_STATES = (
    ("gas_pressure", "--gas-pressure", "-P", "gas pressure [dyn cm^-2]"),
    ("mass_density", "--mass-density", "-r", "mass density [g cm^-3]"),
    ("hydrogen_density", "--hydrogen-density", "-n", "number density of hydrogen nuclei [cm^-3]"),
    ("electron_pressure", "--electron-pressure", "-e", "electron pressure [dyn cm^-2]"),
)
_DEFAULT_OUTPUT = {"fractions": "ionbal-fractions.png", "map": "ionbal-map.png", "column": "ionbal-column.png",
                   "budget": "ionbal-budget.png"}


def _mixture_options(p: argparse.ArgumentParser) -> None:
    g = p.add_argument_group("mixture")
    g.add_argument("--abundance-set", default="AGSS09", metavar="KEY",
                   help="solar abundance set: AG89, GS98, AGSS09 (default), AAG21 or LPG09")
    g.add_argument("--metallicity", type=float, default=0.0, metavar="M_H", help="[M/H] in dex (default 0)")
    g.add_argument("--alpha", type=float, default=0.0, metavar="ALPHA_M", help="[alpha/M] in dex (default 0)")
    g.add_argument("--abundance", action="append", default=[], metavar="EL=A",
                   help="override one element's A(X) (H = 12), e.g. He=11.0; repeatable; after the scaling")


def _mixture(args):
    from .data import Mixture

    mix = Mixture.solar(args.abundance_set)
    if args.metallicity or args.alpha:
        mix = mix.scaled(metallicity=args.metallicity, alpha=args.alpha)
    over = {}
    for item in args.abundance:
        el, sep, val = item.partition("=")
        if not sep:
            raise ValueError(f"--abundance expects EL=A(X), e.g. He=11.0; got {item!r}")
        try:
            over[el.strip()] = float(val)
        except ValueError:
            raise ValueError(f"--abundance {item!r}: {val!r} is not a number") from None
    return mix.with_abundances(over) if over else mix


def _output_options(p: argparse.ArgumentParser, kind: str) -> None:
    g = p.add_argument_group("output")
    g.add_argument("-o", "--output", default=_DEFAULT_OUTPUT[kind], metavar="FILE",
                   help=f"figure file; .png, .pdf or .svg (default {_DEFAULT_OUTPUT[kind]})")
    g.add_argument("--overwrite", action="store_true", help="replace an existing figure file")


def _temperature_range(text: str):
    parts = text.split(":")
    try:
        values = [float(v) for v in parts]
    except ValueError:
        raise argparse.ArgumentTypeError(f"expected TMIN:TMAX[:NUM] in K, got {text!r}") from None
    if len(values) not in (2, 3):
        raise argparse.ArgumentTypeError(f"expected TMIN:TMAX[:NUM] in K, got {text!r}")
    if len(values) == 3 and (values[2] != int(values[2]) or values[2] < 2):
        raise argparse.ArgumentTypeError(f"NUM in {text!r} must be a whole number of at least 2")
    return values


def _elements_list(items) -> list:
    out = []
    for item in items:
        out += [e.strip() for e in item.replace(",", " ").split() if e.strip()]
    return out


def add_plot_command(subparsers) -> argparse.ArgumentParser:
    """Add ``plot`` and its kinds to an argparse sub-parser collection; returns the ``plot`` parser."""
    p = subparsers.add_parser(
        "plot", help="draw a figure (PNG, PDF or SVG): fractions, map, column, budget",
        description="Draw a figure of an ionization balance into a PNG, PDF or SVG file (format from the "
                    "extension; needs matplotlib: pip install 'ionbal[plot]').")
    kinds = p.add_subparsers(dest="plot_kind", metavar="KIND", parser_class=type(p))
    p.set_defaults(func=run_plot, plot_parser=p)

    f = kinds.add_parser("fractions", help="stage fractions of elements against temperature at a fixed state",
                         description="Stage fractions of the given elements against temperature at one fixed "
                                     "gas pressure (default 1e5 dyn cm^-2) or other state variable; one panel "
                                     "per element. Example: ionbal plot fractions Fe Ca -P 1e5 -o fe.png")
    f.add_argument("elements", nargs="+", metavar="EL", help="element symbols, e.g. Fe Ca (or Fe,Ca)")
    f.add_argument("-T", "--temperature", type=_temperature_range, default=[2000.0, 50000.0, 400],
                   metavar="TMIN:TMAX[:NUM]", help="temperature range [K], log-spaced (default 2000:50000:400)")
    st = f.add_mutually_exclusive_group()
    for name, flag, short, text in _STATES:
        st.add_argument(short, flag, dest=name, type=float, default=None, help=text)
    f.add_argument("--log", action="store_true", help="logarithmic fraction axis")
    f.add_argument("--min-fraction", type=float, default=None,
                   help="leave out stages that never reach this fraction (default 1e-3; 1e-4 with --log)")
    _mixture_options(f)
    _output_options(f, "fractions")

    m = kinds.add_parser("map", help="n_e and mu (or other quantities) over a grid file, validity flags hatched",
                         description="Maps over the temperature x state plane of a grid file (from ionbal "
                                     "grid), one panel per quantity; points with a validity flag are hatched, "
                                     "unsolved points grey.")
    m.add_argument("grid", help="grid file (HDF5)")
    m.add_argument("-q", "--quantity", action="append", default=None, metavar="NAME",
                   help="stored quantity (electron_density, mean_molecular_weight, electron_pressure, ...) or "
                        "species such as 'Fe II'; repeatable (default electron_density and mean_molecular_weight)")
    m.add_argument("--at-metallicity", type=float, default=None, metavar="M_H",
                   help="composition grids: the [M/H] to show (default nearest 0)")
    m.add_argument("--at-alpha", type=float, default=None, metavar="ALPHA_M",
                   help="composition grids: the [alpha/M] to show (default nearest 0)")
    m.add_argument("--no-validity", action="store_true", help="do not hatch the validity-flagged points")
    _output_options(m, "map")

    c = kinds.add_parser("column", help="ionbal vs the model's own n_e or P_e along a column (or fractions)",
                         description="Solve a model-atmosphere column (as ionbal column) and draw ionbal's "
                                     "n_e or P_e against the model's own values with the deviation; with "
                                     "--elements, the stage fractions along the column instead.")
    c.add_argument("model", help="model-atmosphere depth structure (ECSV, CSV or whitespace text)")
    c.add_argument("--state", default=None, choices=[s[0] for s in _STATES],
                   help="which state column to use (default the first present)")
    c.add_argument("--elements", default=None, metavar="EL,EL,...",
                   help="draw the stage fractions of these elements along the column instead")
    c.add_argument("-x", "--x-axis", default="auto", metavar="COLUMN",
                   help="abscissa: auto (column mass, else log tau, else depth index), index, temperature or "
                        "any column of the model (default auto)")
    c.add_argument("--dex", action="store_true", help="deviation in dex instead of per cent")
    c.add_argument("--log", action="store_true", help="logarithmic fraction axis (with --elements)")
    _mixture_options(c)
    _output_options(c, "column")

    b = kinds.add_parser("budget", help="which elements give the free electrons, against temperature",
                         description="Share of the free electrons given by each element (w_X <q>_X / sum) "
                                     "against temperature at a fixed state; the largest donors one by one.")
    b.add_argument("-T", "--temperature", type=_temperature_range, default=[2500.0, 30000.0, 300],
                   metavar="TMIN:TMAX[:NUM]", help="temperature range [K], log-spaced (default 2500:30000:300)")
    st = b.add_mutually_exclusive_group()
    for name, flag, short, text in _STATES:
        st.add_argument(short, flag, dest=name, type=float, default=None, help=text)
    b.add_argument("--max-elements", type=int, default=7, help="donors shown one by one (default 7)")
    _mixture_options(b)
    _output_options(b, "budget")
    return p


def _state(args) -> dict:
    given = {name: getattr(args, name) for name, *_ in _STATES if getattr(args, name, None) is not None}
    return given or {"gas_pressure": 1e5}


def _temperatures(values):
    import numpy as np

    lo, hi = values[0], values[1]
    n = int(values[2]) if len(values) > 2 else 400
    if not (lo > 0 and hi > lo):
        raise ValueError(f"temperature range {lo:g}:{hi:g} must be two increasing positive numbers [K]")
    return np.geomspace(lo, hi, n)


def run_plot(args: argparse.Namespace) -> int:
    """Run ``ionbal plot KIND``; returns the exit status (errors raise ValueError / OSError)."""
    from . import plot
    from .plot._base import _state_text

    kind = getattr(args, "plot_kind", None)
    if not kind:
        args.plot_parser.print_help()
        return 0
    out = Path(args.output)
    plot.check_figure_path(out, overwrite=args.overwrite)  # before any work
    if kind == "fractions":
        mf = args.min_fraction if args.min_fraction is not None else (1e-4 if args.log else 1e-3)
        T = args.temperature
        fig = plot.plot_fractions(_elements_list(args.elements), (T[0], T[1]),
                                  n_points=int(T[2]) if len(T) > 2 else 400, mixture=_mixture(args),
                                  min_fraction=mf, log=args.log, path=out, overwrite=args.overwrite,
                                  **_state(args))
    elif kind == "map":
        fig = plot.plot_grid_map(args.grid, args.quantity or ("electron_density", "mean_molecular_weight"),
                                 metallicity=args.at_metallicity, alpha=args.at_alpha,
                                 show_validity=not args.no_validity, path=out, overwrite=args.overwrite)
    elif kind == "column":
        from .column import read_model, solve_column

        result = solve_column(read_model(args.model), mixture=_mixture(args), state=args.state)
        if args.elements:
            fig = plot.plot_column_fractions(result, _elements_list([args.elements]), x=args.x_axis,
                                             log=args.log, min_fraction=1e-4 if args.log else 1e-3,
                                             path=out, overwrite=args.overwrite)
        else:
            fig = plot.plot_column_comparison(result, x=args.x_axis, unit="dex" if args.dex else "percent",
                                              path=out, overwrite=args.overwrite)
    elif kind == "budget":
        from .api import solve

        T = _temperatures(args.temperature)
        state = _state(args)
        r = solve(T, mixture=_mixture(args), **state)
        (name, value), = state.items()
        title = f"Electron donors: {r.mixture.name}, {_state_text(name, value)}"
        fig = plot.plot_electron_budget(plot.electron_shares(r), T, max_elements=args.max_elements, title=title,
                                        path=out, overwrite=args.overwrite)
    else:  # pragma: no cover - argparse refuses unknown kinds
        raise ValueError(f"unknown plot kind {kind!r}")
    del fig
    print(f"ionbal plot {kind}: wrote {out}")
    return 0


class _Parser(argparse.ArgumentParser):
    def error(self, message):  # one line, exit status 2
        self.exit(2, f"{self.prog}: error: {message}\n")


def main(argv: Sequence[str] | None = None) -> int:
    """``python -m ionbal.plot_cli KIND ...`` (the same as ``ionbal plot KIND ...``)."""
    parser = _Parser(prog="ionbal", description="ionbal pictures")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND", parser_class=_Parser)
    add_plot_command(sub)
    argv = list(sys.argv[1:] if argv is None else argv)
    if not argv or argv[0] != "plot":
        argv = ["plot"] + argv
    args = parser.parse_args(argv)
    try:
        return run_plot(args)
    except (ValueError, OSError, KeyError, ImportError) as exc:
        print(f"ionbal: error: {str(exc).splitlines()[0] if str(exc) else type(exc).__name__}", file=sys.stderr)
        return 2


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
