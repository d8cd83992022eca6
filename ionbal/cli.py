"""ionbal's command line: thin argument parsing on top of the API.

Commands
--------
``ionbal state``   the ionization balance of one state, printed as a summary.
``ionbal grid``    a temperature x state grid (optionally x [M/H] x [alpha/M]) into an HDF5 file.
``ionbal info``    a summary of a grid file.
``ionbal column``  the ionization balance along a model-atmosphere depth structure.

Every command has ``--help``.  Errors are reported as one line on stderr with
a non-zero exit status; ``--debug`` shows the traceback instead.
"""

from __future__ import annotations

import argparse
import contextlib
import sys
from typing import Sequence

import numpy as np

from .plot_cli import add_plot_command
from .quantities import QUANTITIES, STATE_INPUTS
from .state_report import format_state, state_record

__all__ = ["main", "build_parser", "CLIError", "format_state", "state_record", "cli_wording"]


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


def add_molecule_options(parser: argparse.ArgumentParser) -> None:
    """Options that choose the molecules solved with the ions."""
    g = parser.add_argument_group("molecules")
    g.add_argument("--no-molecules", action="store_true",
                   help="atoms and atomic ions only (the default for now)")
    g.add_argument("--molecules", default=None, nargs="?", const="all", metavar="LIST",
                   help="solve molecules with the ions: 'all' (every tabulated molecule the mixture can form; "
                        "also --molecules alone) or a list of formulas, e.g. CO,H2O,H2,H2+")


def molecules_from_args(args: argparse.Namespace):
    """``molecules=`` of :func:`ionbal.solve` from the options: True, False or a tuple of formulas."""
    if args.no_molecules and args.molecules is not None:
        raise CLIError("give either --no-molecules or --molecules LIST, not both")
    if args.no_molecules:
        return False
    if args.molecules is None:
        return False  # the default of ionbal.solve, for now
    if args.molecules.strip().lower() == "all":
        return True
    names = tuple(m.strip() for m in args.molecules.split(",") if m.strip())
    if not names:
        raise CLIError("--molecules is empty; give formulas such as CO,H2O (or --no-molecules)")
    return names


#: (name, flag, short flag, help) of every state input, from the quantity registry
STATE_OPTIONS = tuple((n, QUANTITIES[n].flag, QUANTITIES[n].short_flag, QUANTITIES[n].help) for n in STATE_INPUTS)


# ---------------------------------------------------------------------------------------------------
# ionbal state
# ---------------------------------------------------------------------------------------------------

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
    if args.output:
        from .io.formats import format_of
        from .validate import check_output_path

        fmt = format_of(args.output)
        if fmt == "hdf5":
            raise CLIError(f"output {args.output}: ionbal state writes .ecsv, .csv or .txt tables; "
                           "for HDF5 use ionbal grid")
        check_output_path(args.output, overwrite=args.overwrite)
    _compile_note(args)
    result = solve(args.temperature, mixture=mix, molecules=molecules_from_args(args), **given)
    if args.json:
        import json

        print(json.dumps(state_record(result, elements=elements, thermo=args.thermo), indent=2))
    else:
        print(format_state(result, min_fraction=args.min_fraction, elements=elements, thermo=args.thermo))
    if args.output:
        from .io.tablefile import write_text_table
        from .validity import bitmask

        species = [s for el in (elements or mix.elements) for s in result.stages(el)] + list(result.molecules)
        table = result.to_table(species=species)
        table["validity"] = np.atleast_1d(bitmask(result.validity)).astype(np.uint8)
        table.meta["ionbal_command"] = _command_line()
        write_text_table(table, args.output, fmt, overwrite=args.overwrite,
                         comments=[f"ionbal state: command {_command_line()}", f"mixture: {mix.name}"])
        if not args.json:
            print(f"  wrote {args.output}")
    return 0


# ---------------------------------------------------------------------------------------------------
# ionbal grid / info / column
# ---------------------------------------------------------------------------------------------------

def _note(args: argparse.Namespace):
    """A printer of one-line notes on stderr (silent with --quiet)."""
    def note(message: str) -> None:
        if not getattr(args, "quiet", False):
            print(f"ionbal: {message}", file=sys.stderr)
    return note


def _compile_note(args: argparse.Namespace | None = None, *, points: int = 1) -> None:
    """Say so before numba compiles the kernels (first run only; otherwise a silent wait of 5-30 s)."""
    if args is not None and getattr(args, "quiet", False):
        return
    from .api import SERIAL_POINTS
    from .core.config import needs_compiling
    from .core.solver import ion_moments_many, log_fractions_many, solve_few, solve_many, tile_outputs_many

    driver = solve_few if points <= SERIAL_POINTS else solve_many
    if args is None or molecules_from_args(args) is not False:  # the joint kernel holds its own solve_few
        from .core.chem import chem_solve_few, chem_solve_many

        driver = chem_solve_few if points <= SERIAL_POINTS else chem_solve_many
    if needs_compiling(driver, log_fractions_many, ion_moments_many, tile_outputs_many):
        print("ionbal: compiling kernels (first run only; about half a minute, cached afterwards)",
              file=sys.stderr, flush=True)


def _command_line(argv_name: str = "ionbal") -> str:
    import shlex

    return " ".join([argv_name] + [shlex.quote(a) for a in _CURRENT_ARGV])


def _parse_overrides(items) -> dict:
    over = {}
    for item in items:
        if "=" not in item:
            raise CLIError(f"--abundance expects EL=A(X), e.g. He=11.0; got {item!r}")
        el, val = item.split("=", 1)
        try:
            over[el.strip()] = float(val)
        except ValueError:
            raise CLIError(f"--abundance {item!r}: {val!r} is not a number") from None
    return over


def _composition_axis(text: str | None, name: str):
    from .grid import Axis

    if text is None:
        return None
    return Axis.parse(name, text)


def grid_spec_from_args(args: argparse.Namespace):
    """The :class:`~ionbal.grid.GridSpec` that the ``ionbal grid`` options describe."""
    from .grid import DEFAULT_STATE_AXIS, DEFAULT_TEMPERATURE_AXIS, Axis, GridSpec

    temperature = Axis.parse("temperature", DEFAULT_TEMPERATURE_AXIS if args.temperature is None
                             else args.temperature)
    given = [(name, getattr(args, name)) for name, *_ in STATE_OPTIONS if getattr(args, name) is not None]
    if len(given) > 1:
        raise CLIError("give only one state axis: " + ", ".join("--" + n.replace("_", "-") for n, _ in given))
    if given:
        state = Axis.parse(given[0][0], given[0][1])
    else:
        state = Axis.parse("gas_pressure", DEFAULT_STATE_AXIS)
    m_axis = _composition_axis(args.metallicity_axis, "metallicity")
    a_axis = _composition_axis(args.alpha_axis, "alpha")
    if m_axis is None and a_axis is None:
        mixture = mixture_from_args(args)
        return GridSpec(temperature, state, mixture, species=_species_arg(args),
                        number_densities=args.number_densities, float32=args.float32, tile_size=args.tile_size,
                        validity=not args.no_validity, molecules=molecules_from_args(args), thermo=args.thermo)
    if m_axis is not None and args.metallicity:
        raise CLIError("give [M/H] either as --metallicity or as --metallicity-axis, not both")
    if a_axis is not None and args.alpha:
        raise CLIError("give [alpha/M] either as --alpha or as --alpha-axis, not both")
    metallicity = m_axis.values if m_axis is not None else (float(args.metallicity),)
    alpha = a_axis.values if a_axis is not None else (float(args.alpha),)
    base_args = argparse.Namespace(**{**vars(args), "metallicity": 0.0, "alpha": 0.0, "abundance": []})
    base = mixture_from_args(base_args)
    return GridSpec(temperature, state, base, metallicity=metallicity, alpha=alpha,
                    overrides=_parse_overrides(args.abundance), species=_species_arg(args),
                    number_densities=args.number_densities, float32=args.float32, tile_size=args.tile_size,
                    validity=not args.no_validity, molecules=molecules_from_args(args), thermo=args.thermo)


def _species_arg(args: argparse.Namespace):
    if args.species is None:
        return "default"
    if not args.species.strip():
        raise CLIError("--species is empty; give 'default', 'all' or a list such as 'Fe I,Fe II'")
    return args.species


def _cmd_grid(args: argparse.Namespace) -> int:
    from .grid import parts_dir_for, run_grid

    from .io.formats import check_grid_output_name

    check_grid_output_name(args.output)
    spec = grid_spec_from_args(args)
    if args.scheduler and args.local_cluster:
        raise CLIError("give either --scheduler ADDRESS or --local-cluster, not both")
    if args.executor == "threads" and (args.scheduler or args.local_cluster):
        raise CLIError("--executor threads runs locally; it cannot be combined with --scheduler/--local-cluster")
    executor = "dask" if (args.scheduler or args.local_cluster) else args.executor
    progress = False if args.quiet else None
    _compile_note(args, points=spec.n_points)
    try:
        run = run_grid(spec, args.output, overwrite=args.overwrite, discard_parts=args.discard_parts,
                       executor=executor, workers=args.workers, scheduler=args.scheduler,
                       local_cluster=args.local_cluster, progress=progress, command=_command_line(),
                       keep_parts=args.keep_parts, notify=_note(args))
    except KeyboardInterrupt:
        parts = parts_dir_for(args.output)
        kept = f"; finished tiles are kept in {parts}, run the same command again to resume" \
            if parts.is_dir() else ""
        print(f"ionbal: interrupted{kept}", file=sys.stderr)
        return 130
    print(run.summary())
    return 0


def _cmd_info(args: argparse.Namespace) -> int:
    from .io import open_grid

    with open_grid(args.file) as g:
        print(g.summary())
        if args.species:
            print("species: " + ", ".join(g.species))
        if args.verify:
            g.verify()
            print("  checksums         every chunk of every dataset read back and verified")
    return 0


def _cmd_column(args: argparse.Namespace) -> int:
    from pathlib import Path

    from .column import check_output, default_output, read_model, solve_column, write_column

    outputs = [Path(o) for o in (args.output or [default_output(args.model)])]
    seen = set()
    for out in outputs:
        key = str(out.resolve()) if out.parent.exists() else str(out)
        if key in seen:
            raise CLIError(f"output {out} is given twice")
        seen.add(key)
        check_output(out, overwrite=args.overwrite)  # every output is checked before anything is written
        if Path(args.model).exists() and out.exists() and out.resolve() == Path(args.model).resolve():
            raise CLIError(f"output {out} is the model file itself; choose another name")
    mixture = mixture_from_args(args)
    table = read_model(args.model, columns=args.columns)
    _compile_note(args, points=len(table))
    result = solve_column(table, mixture=mixture, species=_species_arg(args), state=args.state,
                          partial_pressures=args.partial_pressures, molecules=molecules_from_args(args),
                          progress=False if args.quiet else None, thermo=args.thermo)
    written = [write_column(result, out, overwrite=args.overwrite, command=_command_line()) for out in outputs]
    n = len(result.table)
    print(f"ionbal column: {args.model}: {n} depth points, state input {result.state_variable}, mixture "
          f"{result.mixture_name}, {len(result.species)} species, {len(result.molecules)} molecules")
    print(cli_wording("\n".join(result.input_lines())))
    for path in written:
        print(f"  wrote {path}")
    if result.comparisons:
        if not args.quiet:
            print()
            print("\n".join(result.deviation_lines()))
            print()
        for c in result.comparisons:
            print("  " + c.summary())
    return 0


def _add_grid_command(sub) -> None:
    from .grid import DEFAULT_OUTPUT, DEFAULT_STATE_AXIS, DEFAULT_TEMPERATURE_AXIS, DEFAULT_TILE_SIZE

    p = sub.add_parser(
        "grid", help="compute a temperature x state grid into an HDF5 file (the main job)",
        description="Compute the ionization balance over a grid of temperature and one more state variable "
                    "(and optionally [M/H] and [alpha/M]) and store it as an HDF5 (netCDF-4 layout) file. "
                    "Without arguments: AGSS09 mixture, T 2,000-50,000 K (301, log) x P_gas 1e-4-1e8 "
                    f"dyn cm^-2 (241, log), written to {DEFAULT_OUTPUT}. An interrupted run resumes from "
                    "OUTPUT.parts when the same command is run again.",
        epilog="Axis syntax: START:STOP:NUM (log-spaced), START:STOP:NUM:linear, or V1,V2,... "
               "Examples: ionbal grid -T 3000:12000:181 -P 1e-2:1e7:141 -o dwarfs.h5; "
               "ionbal grid --metallicity-axis -2,-1,0 --alpha-axis 0,0.4 -o metal-poor.h5")
    ax = p.add_argument_group("axes (cgs units)")
    ax.add_argument("-T", "--temperature", default=None, metavar="AXIS",
                    help=f"temperature axis [K] (default {DEFAULT_TEMPERATURE_AXIS})")
    for name, flag, short, helptext in STATE_OPTIONS:
        extra = f" (default {DEFAULT_STATE_AXIS})" if name == "gas_pressure" else ""
        ax.add_argument(short, flag, dest=name, default=None, metavar="AXIS",
                        help=f"state axis: {helptext}{extra}")
    add_mixture_options(p)
    add_molecule_options(p)
    comp = p.add_argument_group("composition axes (one file, several mixtures)")
    comp.add_argument("--metallicity-axis", default=None, metavar="LIST",
                      help="[M/H] values, e.g. -2,-1,0 or -2:0:5 (linear); scales the abundance set")
    comp.add_argument("--alpha-axis", default=None, metavar="LIST",
                      help="[alpha/M] values, e.g. 0,0.2,0.4")
    out = p.add_argument_group("output")
    out.add_argument("-o", "--output", default=DEFAULT_OUTPUT, metavar="FILE",
                     help=f"HDF5 file to write: .h5, .hdf5 or .nc (default {DEFAULT_OUTPUT})")
    out.add_argument("--species", default=None, metavar="LIST",
                     help="species of the ion-fraction cube: 'default' (stages I-III of every element, and H-), "
                          "'all' (every stage), or a list such as 'H-,H I,Fe I,Fe II'")
    out.add_argument("--number-densities", action="store_true", help="also store number densities of the species")
    out.add_argument("--float32", action="store_true",
                     help="store the ion-fraction and number-density cubes in single precision")
    out.add_argument("--no-validity", action="store_true",
                     help="do not store the per-point validity flags (ionbal.validity); they come from the same "
                          "core pass as the fractions, so this saves little time")
    out.add_argument("--thermo", action="store_true",
                     help="also store the thermodynamics per point (internal_energy, enthalpy, entropy, "
                          "heat_capacity_p/_v, chi_temperature, chi_density, gamma1, gamma3, adiabatic_gradient, "
                          "d ln n_e / d ln T and d ln P) and the per-element cubes electron_donor and dlnne_dA "
                          "(with molecules too)")
    out.add_argument("--overwrite", action="store_true",
                     help="replace an existing output file (it is kept until the new one is complete)")
    run = p.add_argument_group("running")
    run.add_argument("--tile-size", type=int, default=DEFAULT_TILE_SIZE, metavar="N",
                     help=f"points per tile (default {DEFAULT_TILE_SIZE}); finished tiles survive interruptions")
    run.add_argument("--workers", type=int, default=None, metavar="N",
                     help="local: threads (default all cores); with --local-cluster: worker processes")
    run.add_argument("--executor", choices=("serial", "threads"), default="serial",
                     help="local execution: tiles one after another, each on all cores (serial, default), "
                          "or a pool of --workers threads")
    run.add_argument("--scheduler", default=None, metavar="ADDRESS",
                     help="run the tiles on a Dask cluster, e.g. tcp://10.0.0.5:8786 (needs ionbal[dask] on "
                          "every worker); this process alone writes the file")
    run.add_argument("--local-cluster", action="store_true",
                     help="start a local Dask cluster of --workers processes on 127.0.0.1")
    run.add_argument("--discard-parts", action="store_true",
                     help="start over if OUTPUT.parts holds the parts of a different grid (matching parts are "
                          "always resumed)")
    run.add_argument("--keep-parts", action="store_true", help=argparse.SUPPRESS)
    run.add_argument("-q", "--quiet", action="store_true", help="no progress bar and no notes")
    p.set_defaults(func=_cmd_grid)


def _add_info_command(sub) -> None:
    p = sub.add_parser("info", help="summarise a grid file",
                       description="Summarise an ionbal grid file: axes and ranges, mixture, species, data "
                                   "sources, completeness and status counts.")
    p.add_argument("file", metavar="FILE", help="an ionbal grid file (HDF5)")
    p.add_argument("--species", action="store_true", help="list every species of the cube")
    p.add_argument("--verify", action="store_true",
                   help="read every dataset back and verify its checksums (slower)")
    p.set_defaults(func=_cmd_info)


def _add_column_command(sub) -> None:
    p = sub.add_parser(
        "column", help="ionization balance along a model-atmosphere depth structure",
        description="Read a depth structure (ECSV with units, or CSV / whitespace-separated text whose "
                    "header names the columns, cgs) with temperature and one of gas_pressure, mass_density, "
                    "hydrogen_density, electron_pressure (or common spellings such as T, Pgas, rho, Pe; "
                    "others with --columns); write n_e, P_e, mu, rho and the fractions and number "
                    "densities of the species at every depth point. Other columns pass through unchanged. "
                    "An input electron_density or electron_pressure column is compared with ionbal's. "
                    "The columns read, compared and passed through are printed.",
        epilog="Examples: ionbal column model.txt -o model.ionbal.ecsv -o model.ionbal.h5; "
               "ionbal column atm.csv --columns Tgas=temperature,Ptot=gas_pressure -o atm.ionbal.csv")
    p.add_argument("model", metavar="MODEL", help="the depth structure (.ecsv, .csv or whitespace text)")
    p.add_argument("-o", "--output", action="append", default=None, metavar="FILE",
                   help="output file: .ecsv (with units), .csv, .txt (fixed-width text) or .h5 (repeatable; "
                        "default MODEL-STEM.ionbal.ecsv here)")
    p.add_argument("--state", choices=tuple(n for n, *_ in STATE_OPTIONS), default=None,
                   help="which state column to use (default: the first present of gas_pressure, mass_density, "
                        "hydrogen_density, electron_pressure)")
    p.add_argument("--columns", default=None, metavar="COL=NAME,...",
                   help="which column of the file is which quantity, e.g. T=temperature,Pg=gas_pressure "
                        "(names: temperature, gas_pressure, mass_density, hydrogen_density, electron_pressure, "
                        "electron_density); common spellings such as T, Pgas, rho, Pe, ne are recognised "
                        "without it")
    p.add_argument("--species", default=None, metavar="LIST",
                   help="'default' (stages I-III of every element, and H-), 'all', or a list such as 'Fe I,Fe II'")
    p.add_argument("--partial-pressures", action="store_true",
                   help="also write the partial pressure n k T of every species (partial_pressure_Fe_II, ...)")
    p.add_argument("--thermo", action="store_true",
                   help="also write the thermodynamics (internal_energy, enthalpy, entropy, heat_capacity_p/_v, "
                        "chi_temperature, chi_density, gamma1, gamma3, adiabatic_gradient, d ln n_e / d ln T and "
                        "d ln P) and, per electron-donating element, electron_donor_Fe and dlnne_dA_Fe "
                        "(with molecules too)")
    add_mixture_options(p)
    add_molecule_options(p)
    p.add_argument("--overwrite", action="store_true", help="replace existing output files")
    p.add_argument("-q", "--quiet", action="store_true", help="print only the summary, not every depth point")
    p.set_defaults(func=_cmd_column)


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
                                   "n_e, P_e, rho, mu, the validity flags of ideal-gas LTE Saha and, per "
                                   "element, the dominant stage and the stage fractions.",
                       epilog="Examples: ionbal state -T 5800 -P 1e5; ionbal state -T 20000 -P 1e12 --json; "
                              "ionbal state -T 5800 -P 1e5 -o state.ecsv")
    p.add_argument("-T", "--temperature", type=float, required=True, help="temperature [K]")
    for name, flag, short, helptext in STATE_OPTIONS:
        p.add_argument(short, flag, dest=name, type=float, default=None, help=helptext)
    add_mixture_options(p)
    add_molecule_options(p)
    out = p.add_argument_group("output")
    out.add_argument("--elements", default=None, metavar="EL,EL,...", help="show only these elements")
    out.add_argument("--min-fraction", type=float, default=1e-4,
                     help="list the stages whose fraction exceeds this (default 1e-4)")
    out.add_argument("--json", action="store_true",
                     help="print everything as JSON (cgs values, units, validity flags, every stage fraction) "
                          "for scripts")
    out.add_argument("--thermo", action="store_true", help="also show the thermodynamics (gamma1, nabla_ad, c_p, "
                     "...) and the largest electron donors with d ln n_e / d A(X)")
    out.add_argument("-o", "--output", default=None, metavar="FILE",
                     help="also write the state as a one-row table: .ecsv (with units), .csv or .txt; columns "
                          "named as in ionbal column files (fraction_Fe_II, number_density_Fe_II, ...)")
    out.add_argument("--overwrite", action="store_true", help="replace an existing output file")
    p.set_defaults(func=_cmd_state)

    for extend in _EXTENSIONS:
        extend(sub)
    return parser


#: functions ``f(subparsers)`` that add further commands
_EXTENSIONS: list = [_add_grid_command, _add_info_command, _add_column_command, add_plot_command]
#: the arguments of the running command (recorded in the files it writes)
_CURRENT_ARGV: list = []


#: long options whose value may start with "-" (lists of [M/H] values such as -2,-1,0)
_SIGNED_LIST_OPTIONS = ("--metallicity-axis", "--alpha-axis")


def _join_negative_lists(argv: list) -> list:
    """Let ``--metallicity-axis -2,-1,0`` through argparse (which takes ``-2,-1,0`` for an option)."""
    import re

    out = []
    i = 0
    while i < len(argv):
        a = argv[i]
        if a in _SIGNED_LIST_OPTIONS and i + 1 < len(argv) and re.match(r"^-[0-9.]", str(argv[i + 1])):
            out.append(f"{a}={argv[i + 1]}")
            i += 2
            continue
        out.append(a)
        i += 1
    return out


#: remedies that the layers below phrase for Python callers, and how a CLI user applies them
_CLI_REMEDIES: tuple[tuple[str, str], ...] = (
    (r"pass --overwrite \(overwrite=True\)", "pass --overwrite"),
    (r"pass overwrite=True", "pass --overwrite"),
    (r"; pass errors='mask' to get a status code instead", "; check the temperature and the state value"),
    (r" \(or pass NaN with errors='mask'\)", ""),
    (r"choose with state=\)", "choose with --state)"),
    (r"columns=\{'([^']*)': '([^']*)'\}", r"--columns \1=\2"),
    (r"\(use method='linear'\)", "(use linear interpolation)"),
)


def cli_wording(message: str) -> str:
    """A message of the layers below, with Python-only remedies put as the CLI's options."""
    import re

    for pattern, repl in _CLI_REMEDIES:
        message = re.sub(pattern, repl, message)
    return message


def main(argv: Sequence[str] | None = None) -> int:
    """Run the command line; returns the exit status."""
    argv = list(sys.argv[1:] if argv is None else argv)
    debug = "--debug" in argv
    _CURRENT_ARGV[:] = [str(a) for a in argv]
    argv = _join_negative_lists(argv)
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
    except BrokenPipeError:  # e.g. `ionbal column ... | head`: the reader left; not an error of ours
        import os

        with contextlib.suppress(OSError):
            os.dup2(os.open(os.devnull, os.O_WRONLY), sys.stdout.fileno())
        return 0
    except (CLIError, ValueError, TypeError, OSError, KeyError, ImportError) as exc:
        if debug:
            raise
        msg = cli_wording(str(exc) or exc.__class__.__name__)
        if not msg.startswith("ionbal"):
            msg = f"ionbal: error: {msg}"
        print(msg.splitlines()[0] if msg else msg, file=sys.stderr)
        return 2
    except Exception as exc:  # noqa: BLE001 - last resort: one line, never a traceback
        if debug:
            raise
        lines = str(exc).strip().splitlines()
        detail = f": {lines[0]}" if lines else ""
        print(f"ionbal: error: {exc.__class__.__name__}{detail} (run with --debug for the traceback)",
              file=sys.stderr)
        return 1


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
