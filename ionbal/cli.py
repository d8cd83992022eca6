"""ionbal's command line: thin argument parsing on top of the API.

Commands
--------
``ionbal state``   the ionization balance of one state, printed as a summary.

Every command has ``--help``.  Errors are reported as one line on stderr with
a non-zero exit status; ``--debug`` shows the traceback instead.
"""

from __future__ import annotations

import argparse
import sys
from typing import Sequence

import numpy as np

__all__ = ["main", "build_parser", "CLIError"]


class CLIError(Exception):
    """An error to report as one line, without a traceback."""


# ---------------------------------------------------------------------------------------------------
# shared option groups
# ---------------------------------------------------------------------------------------------------

def add_mixture_options(parser: argparse.ArgumentParser) -> None:
    """Options that choose and modify the chemical mixture."""
    g = parser.add_argument_group("mixture")
    g.add_argument("--abundance-set", default="AGSS09", metavar="KEY",
                   help="solar abundance set: AG89, GS98, AGSS09 (default), AAG21 or LPG09")
    g.add_argument("--metallicity", type=float, default=0.0, metavar="M_H",
                   help="[M/H]: shift of every element heavier than He, in dex (default 0)")
    g.add_argument("--alpha", type=float, default=0.0, metavar="ALPHA_M",
                   help="[alpha/M]: extra shift of O, Ne, Mg, Si, S, Ar, Ca, Ti, in dex (default 0)")
    g.add_argument("--abundance", action="append", default=[], metavar="EL=A",
                   help="override one element's A(X) = log eps (H = 12), e.g. --abundance He=11.0; "
                        "repeatable; applied after the scaling")
    g.add_argument("--only", default=None, metavar="EL,EL,...",
                   help="keep only these elements of the set (e.g. H,He for a pure H-He gas)")


def mixture_from_args(args: argparse.Namespace):
    """Build the Mixture the options describe."""
    from .data.mixture import Mixture
    from .data.elements import atomic_number, symbol

    mix = Mixture.solar(args.abundance_set)
    if args.metallicity or args.alpha:
        mix = mix.scaled(metallicity=args.metallicity, alpha=args.alpha)
    if args.only:
        keep = {symbol(atomic_number(s.strip())) for s in args.only.split(",") if s.strip()}
        mix = Mixture({el: mix[el] for el in mix.elements if el in keep})
    over = {}
    for item in args.abundance:
        if "=" not in item:
            raise CLIError(f"--abundance expects EL=A(X), e.g. He=11.0; got {item!r}")
        el, val = item.split("=", 1)
        try:
            over[el.strip()] = float(val)
        except ValueError:
            raise CLIError(f"--abundance {item!r}: {val!r} is not a number") from None
    if over:
        mix = mix.with_abundances(over)
    return mix


STATE_OPTIONS = (
    ("gas_pressure", "--gas-pressure", "-P", "gas pressure [dyn cm^-2]"),
    ("mass_density", "--mass-density", "-r", "mass density [g cm^-3]"),
    ("hydrogen_density", "--hydrogen-density", "-n", "number density of hydrogen nuclei [cm^-3]"),
    ("electron_pressure", "--electron-pressure", "-e", "electron pressure [dyn cm^-2]"),
)


# ---------------------------------------------------------------------------------------------------
# ionbal state
# ---------------------------------------------------------------------------------------------------

def _fmt_fraction(f: float) -> str:
    return f"{f:.5f}" if f >= 1e-3 else f"{f:.2e}"


def format_state(result, *, min_fraction: float = 1e-4, elements=None) -> str:
    """A readable summary of a 0-D :class:`~ionbal.IonizationResult`."""
    import ionbal

    r = result
    f = lambda name: float(np.asarray(getattr(r, name)))  # noqa: E731
    mix = r.mixture
    lines = [
        f"ionbal {ionbal.__version__}: LTE ionization balance (ideal gas, atoms and ions, no molecules)",
        f"  mixture          {mix.name} ({len(mix.elements)} elements)",
        f"  temperature      {f('temperature'):.6g} K",
        f"  given            {r.state_variable.replace('_', ' ')}",
        f"  n_e              {f('electron_density'):.6e} cm^-3",
        f"  P_e              {f('electron_pressure'):.6e} dyn cm^-2",
        f"  P_gas            {f('gas_pressure'):.6e} dyn cm^-2",
        f"  rho              {f('mass_density'):.6e} g cm^-3",
        f"  n_H (all H)      {f('hydrogen_density'):.6e} cm^-3",
        f"  n_nuclei         {f('nuclei_density'):.6e} cm^-3",
        f"  mu               {f('mean_molecular_weight'):.6f}",
        f"  status           {str(np.asarray(r.message))} ({int(np.asarray(r.iterations))} iterations)",
        "",
        f"  {'element':<8} {'dominant':<10} stage fractions (stages above {min_fraction:g})",
    ]
    for el in (elements or mix.elements):
        names = r.stages(el)
        fr = np.asarray(r.fractions(el)).reshape(len(names))
        dom = names[int(np.argmax(fr))]
        shown = [f"{n} {_fmt_fraction(x)}" for n, x in zip(names, fr) if x >= min_fraction]
        lines.append(f"  {el:<8} {dom:<10} " + "  ".join(shown))
    return "\n".join(lines)


def _cmd_state(args: argparse.Namespace) -> int:
    from .api import solve

    given = {name: getattr(args, name) for name, *_ in STATE_OPTIONS if getattr(args, name) is not None}
    if len(given) != 1:
        flags = ", ".join(flag for _, flag, _, _ in STATE_OPTIONS)
        raise CLIError(f"give exactly one of {flags}")
    mix = mixture_from_args(args)
    elements = None
    if args.elements:
        from .data.elements import atomic_number, symbol

        elements = [symbol(atomic_number(s.strip())) for s in args.elements.split(",") if s.strip()]
        for el in elements:
            if el not in mix.elements:
                raise CLIError(f"element {el} is not in the mixture")
    result = solve(args.temperature, mixture=mix, **given)
    print(format_state(result, min_fraction=args.min_fraction, elements=elements))
    return 0


# ---------------------------------------------------------------------------------------------------
# parser and entry point
# ---------------------------------------------------------------------------------------------------

class _Parser(argparse.ArgumentParser):
    def error(self, message):  # one line, exit status 2
        raise CLIError(f"{self.prog}: {message}")


def build_parser() -> argparse.ArgumentParser:
    """The full argument parser (exposed for documentation and tests)."""
    from . import __version__

    parser = _Parser(prog="ionbal", description="LTE ionization balance of stellar atmospheres.")
    parser.add_argument("--version", action="version", version=f"ionbal {__version__}")
    parser.add_argument("--debug", action="store_true", help="show tracebacks instead of one-line errors")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND", parser_class=_Parser)

    p = sub.add_parser("state", help="ionization balance of one state, printed as a summary",
                       description="Solve one state (temperature plus one more state variable) and print "
                                   "n_e, P_e, rho, mu and, per element, the dominant stage and the stage "
                                   "fractions.")
    p.add_argument("-T", "--temperature", type=float, required=True, help="temperature [K]")
    for name, flag, short, helptext in STATE_OPTIONS:
        p.add_argument(short, flag, dest=name, type=float, default=None, help=helptext)
    add_mixture_options(p)
    out = p.add_argument_group("output")
    out.add_argument("--elements", default=None, metavar="EL,EL,...", help="show only these elements")
    out.add_argument("--min-fraction", type=float, default=1e-4,
                     help="list the stages whose fraction exceeds this (default 1e-4)")
    p.set_defaults(func=_cmd_state)

    for extend in _EXTENSIONS:
        extend(sub)
    return parser


#: functions ``f(subparsers)`` that add further commands (grid, info, column, ...)
_EXTENSIONS: list = []


def main(argv: Sequence[str] | None = None) -> int:
    """Run the command line; returns the exit status."""
    argv = list(sys.argv[1:] if argv is None else argv)
    debug = "--debug" in argv
    try:
        parser = build_parser()
        args = parser.parse_args(argv)
        if not getattr(args, "command", None):
            parser.print_help()
            return 0
        return int(args.func(args) or 0)
    except KeyboardInterrupt:
        print("ionbal: interrupted", file=sys.stderr)
        return 130
    except (CLIError, ValueError, TypeError, OSError, KeyError) as exc:
        if debug:
            raise
        msg = str(exc) or exc.__class__.__name__
        if not msg.startswith("ionbal"):
            msg = f"ionbal: error: {msg}"
        print(msg.splitlines()[0] if msg else msg, file=sys.stderr)
        return 2


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
