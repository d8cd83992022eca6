"""Model-atmosphere columns: the ionization balance at every depth point of a given structure.

Input: a depth structure as

* ECSV (with units; known columns are converted to cgs), or
* CSV or whitespace-separated text whose first non-comment line names the
  columns (``#`` starts a comment line), values in cgs.

It needs ``temperature`` [K] and one of ``gas_pressure`` [dyn cm^-2],
``mass_density`` [g cm^-3], ``hydrogen_density`` [cm^-3] or
``electron_pressure`` [dyn cm^-2] (the first present in this order is used
unless one is chosen).  Column names are matched without regard to case.
Every other column (depth, optical depth, ...) is passed through unchanged.

Output, per depth point: electron density and pressure, gas pressure, mass
density, hydrogen and nuclei densities, mean molecular weight, solver status,
and the fraction and number density of each requested species (by default
stages I-III of every element plus H-), as ECSV (with units) and/or HDF5.

Comparison: when the input also has an ``electron_density`` or
``electron_pressure`` column (a published model's values) that is not the
state input, ionbal's value is compared with it at every depth point
(deviation in percent, ``100 (ionbal / input - 1)``, and in dex,
``log10(ionbal / input)``), with a summary of the median and the worst
absolute deviation.  Input columns whose names collide with ionbal's outputs
are kept under the name ``input_<name>``.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from ._version import __version__
from .core.constants import K_B
from .io.atomic import atomic_output
from .io.formats import format_of
from .io.models import MODEL_UNITS, parse_column_map, read_model, resolve_columns
from .io.models import canonical_column_name as _canon
from .io.provenance import assumptions, data_sources, molecules_record
from .io.tablefile import write_table_file, write_text_table
from .quantities import POINT_OUTPUTS, QUANTITIES, THERMO_OUTPUTS, STATE_INPUTS, astropy_unit, species_column_name, unit_of_astropy
from .selection import resolve_species
from .validate import check_output_path, outside_temperature_range, table_temperature_range

__all__ = [
    "read_model",
    "solve_column",
    "ColumnResult",
    "Comparison",
    "write_column",
    "check_output",
    "species_column_name",
    "MODEL_UNITS",
]

_COMPARED = ("electron_density", "electron_pressure")




# ---------------------------------------------------------------------------------------------------
# reading
# ---------------------------------------------------------------------------------------------------






# ---------------------------------------------------------------------------------------------------
# solving
# ---------------------------------------------------------------------------------------------------

@dataclass
class Comparison:
    """ionbal versus an input column, per depth point and summarised."""

    quantity: str
    input_values: np.ndarray
    ionbal_values: np.ndarray
    percent: np.ndarray  # NaN where the input value is not usable
    dex: np.ndarray
    skipped: int

    def _worst(self, arr):
        ok = np.isfinite(arr)
        if not ok.any():
            return float("nan"), -1
        i = int(np.nanargmax(np.where(ok, np.abs(arr), -np.inf)))
        return float(arr[i]), i

    @property
    def median_percent(self) -> float:
        v = np.abs(self.percent[np.isfinite(self.percent)])
        return float(np.median(v)) if v.size else float("nan")

    @property
    def median_dex(self) -> float:
        v = np.abs(self.dex[np.isfinite(self.dex)])
        return float(np.median(v)) if v.size else float("nan")

    @property
    def worst_percent(self) -> tuple[float, int]:
        """Signed deviation of largest size, and its depth index."""
        return self._worst(self.percent)

    @property
    def worst_dex(self) -> tuple[float, int]:
        return self._worst(self.dex)

    def summary(self) -> str:
        wp, ip = self.worst_percent
        wd, idx = self.worst_dex
        n = int(np.isfinite(self.percent).sum())
        text = (f"{self.quantity}: ionbal vs input at {n} depth points: median |deviation| "
                f"{self.median_percent:.3g} % ({self.median_dex:.3g} dex); worst {wp:+.3g} % ({wd:+.3g} dex) "
                f"at depth point {ip}")
        if self.skipped:
            text += f"; {self.skipped} point(s) without a usable input value skipped"
        return text


@dataclass
class ColumnResult:
    """The output table of a column run and its comparisons."""

    table: "Table"  # noqa: F821
    state_variable: str
    species: tuple
    fractions: np.ndarray
    number_densities: np.ndarray
    comparisons: list = field(default_factory=list)
    mixture_name: str = ""
    #: which column of the input became which quantity: registry name -> column name in the model file
    columns: dict = field(default_factory=dict)
    #: input columns passed through unchanged (not read by ionbal)
    passed_through: tuple = ()
    #: notes on the choice of columns (e.g. a comparison column used as the state input)
    notes: tuple = ()
    #: name of the temperature column in :attr:`table`
    temperature_column: str = "temperature"
    #: molecules whose number densities are columns of :attr:`table` (``number_density_CO``)
    molecules: tuple = ()

    def input_lines(self) -> list[str]:
        """Which columns were read as what: the state input, the compared columns, the rest."""
        def src(q):
            name = self.columns.get(q, q)
            return q if name == q else f"{q} <- {name!r}"
        compared = [c.quantity for c in self.comparisons]
        lines = [f"  temperature      {src('temperature')}",
                 f"  state input      {src(self.state_variable)}"]
        if compared:
            lines.append(f"  compared with    {', '.join(src(q) for q in compared)}")
        if self.passed_through:
            lines.append(f"  passed through   {', '.join(self.passed_through)}")
        lines += [f"  note: {n}" for n in self.notes]
        return lines

    def deviation_lines(self) -> list[str]:
        """Per-depth-point comparison lines (empty without comparisons)."""
        if not self.comparisons:
            return []
        head = f"{'depth':>5} {'T [K]':>9}"
        for c in self.comparisons:
            short = "n_e" if c.quantity == "electron_density" else "P_e"
            head += f"  {short + ' input':>12} {short + ' ionbal':>12} {'dev %':>8} {'dex':>8}"
        lines = [head]
        T = np.asarray(self.table[self._tname()], dtype=np.float64)
        for i in range(len(T)):
            s = f"{i:>5} {T[i]:>9.1f}"
            for c in self.comparisons:
                s += (f"  {c.input_values[i]:>12.4e} {c.ionbal_values[i]:>12.4e} "
                      f"{c.percent[i]:>+8.3f} {c.dex[i]:>+8.4f}")
            lines.append(s)
        return lines

    def _tname(self) -> str:
        if self.temperature_column in self.table.colnames:
            return self.temperature_column
        return next(n for n in self.table.colnames if _canon(n) == "temperature")


def _where(table, i: int) -> str:
    lines = table.meta.get("line_numbers")
    if lines and i < len(lines):
        return f"depth point {i} (line {lines[i]})"
    return f"depth point {i} (data row {i + 1})"


#: depth points solved at once (bounded memory; the unit of progress of long models)
CHUNK_POINTS = 20_000
#: with ``thermo``, elements that supply at least this share of the free electrons somewhere get columns
DONOR_MIN = 1e-4


def _solve_rows(T, X, sv, mix, sp_names, outputs, where, progress, molecules=True, thermo=False) -> dict:
    """Solve the depth points in chunks: the per-point outputs, status, iterations, validity bitmask,
    fractions and number densities of the species, as plain arrays over all points."""
    from .api import solve
    from .grid.progress import Progress
    from .validity import bitmask

    n = len(T)
    got = {name: np.empty(n) for name in set(outputs) | set(_COMPARED)}
    got["status"] = np.empty(n, dtype=np.int8)
    got["iterations"] = np.empty(n, dtype=np.int32)
    got["validity"] = np.empty(n, dtype=np.uint8)
    got["fractions"] = np.empty((len(sp_names), n))
    got["number_densities"] = np.empty((len(sp_names), n))
    got["molecules"] = ()
    bar = Progress(n, enabled=False if (progress is False or n <= CHUNK_POINTS) else progress,
                   label="ionbal column")
    try:
        for a in range(0, n, CHUNK_POINTS):
            b = min(n, a + CHUNK_POINTS)
            r = solve(T[a:b], mixture=mix, errors="mask", units=False, molecules=molecules, **{sv: X[a:b]})
            if a == 0:
                got["molecules"] = r.molecules
                got["molecule_densities"] = np.empty((len(r.molecules), n))
            status = np.asarray(r.status)
            if (status != 0).any():
                i = int(np.flatnonzero(status != 0)[0])
                raise ValueError(f"no converged solution at {where(a + i)} (T={T[a + i]:g} K, {sv}="
                                 f"{X[a + i]:g}): {r.message[i]}")
            for name in got:
                if name != "molecules" and name in QUANTITIES and (QUANTITIES[name].compute is not None
                                                                   or QUANTITIES[name].kind == "thermo"):
                    got[name][a:b] = r[name]
            if thermo:
                for key, values in (("donors", r.electron_donors()), ("sensitivity", r.abundance_sensitivity())):
                    got.setdefault(key, {el: np.empty(n) for el in values})
                    for el, v in values.items():
                        got[key][el][a:b] = v
            got["status"][a:b] = status
            got["iterations"][a:b] = r.iterations
            got["validity"][a:b] = bitmask(r.validity)
            got["fractions"][:, a:b] = r.species_fractions(sp_names)
            got["number_densities"][:, a:b] = r.number_densities(sp_names, fractions=got["fractions"][:, a:b])
            if r.molecules:
                got["molecule_densities"][:, a:b] = r.molecule_densities()
            bar.update(b - a)
    finally:
        bar.close()
    return got


def solve_column(table, *, mixture=None, species="default", state: str | None = None, columns=None,
                 partial_pressures: bool = False, molecules=False, progress: bool | None = False,
                 thermo: bool = False) -> ColumnResult:
    """Solve the ionization balance at every depth point of a model table.

    Parameters
    ----------
    table : astropy Table
        From :func:`read_model` (cgs units on the known columns).
    mixture : Mixture, optional
        Default AGSS09.
    species : "default", "all" or list of names
        Species whose fractions and number densities are written.
    state : str, optional
        Which state column to use; default the first present of
        gas_pressure, mass_density, hydrogen_density, electron_pressure.
    columns : mapping or str, optional
        Which column is which quantity, e.g. ``{"Tgas": "temperature"}`` or
        ``"Tgas=temperature,Pg=gas_pressure"``, for names that are neither the
        registry names nor their aliases (:data:`ionbal.io.models.ALIASES`).
    partial_pressures : bool
        Also write the partial pressure of every species (``partial_pressure_Fe_II``).
    molecules : bool or list of formulas
        As in :func:`ionbal.solve` (default False); the number density of every molecule of the
        solve is written as a column (``number_density_CO``, and ``partial_pressure_CO`` with
        ``partial_pressures``).
    progress : bool or None
        Progress on stderr for models longer than :data:`CHUNK_POINTS` (solved chunk by
        chunk): ``None`` a bar on a terminal and periodic lines elsewhere, ``False`` (default) none.
    thermo : bool
        Also write the thermodynamic quantities (:data:`ionbal.quantities.THERMO_OUTPUTS`:
        energies, heat capacities, Gamma_1, nabla_ad, d ln n_e / d ln T and d ln P, ...) and, for
        every element that supplies at least :data:`DONOR_MIN` of the free electrons at some
        depth, its donor share ``electron_donor_Fe`` and ``dlnne_dA_Fe``.

    The columns used, those passed through and notes on the choice are in the
    result (:meth:`ColumnResult.input_lines`); nothing is chosen silently.
    """
    from astropy.table import Table

    from .api import default_mixture

    mix = default_mixture() if mixture is None else mixture
    origin = dict(table.meta.get("ionbal_columns") or {})
    if columns is not None and origin:  # entries read_model has applied already (renamed) are dropped
        columns = {k: v for k, v in parse_column_map(columns).items() if origin.get(v) != k}
    used = resolve_columns(table.colnames, columns)
    tname = used.get("temperature")
    if tname is None:
        raise ValueError(f"the model has no temperature column; it has {', '.join(table.colnames)}; "
                         f"name the columns temperature and one of {', '.join(STATE_INPUTS)} (or map them: "
                         "columns={'Tgas': 'temperature'})")
    present = [s for s in STATE_INPUTS if s in used]
    if state is not None:
        if state not in STATE_INPUTS:
            raise ValueError(f"state column must be one of {', '.join(STATE_INPUTS)}, got {state!r}")
        if state not in present:
            raise ValueError(f"the model has no {state} column; it has {', '.join(table.colnames)}")
        sv = state
    elif present:
        sv = present[0]
    else:
        raise ValueError(f"the model needs one of the columns {', '.join(STATE_INPUTS)} besides temperature; "
                         f"it has {', '.join(table.colnames)} (map one: columns={{'Pg': 'gas_pressure'}})")
    sname = used[sv]
    notes = list(table.meta.get("ionbal_warnings") or ())  # e.g. a depth column out of order
    others = [s for s in present if s != sv and s not in _COMPARED]
    if others:
        notes.append(f"{', '.join(others)} also present; {sv} is the state input"
                     + ("" if state else " (the first of " + ", ".join(STATE_INPUTS) + "; choose with state=)"))
    if sv in _COMPARED:
        notes.append(f"{sv} is the state input, so it is not compared with ionbal's")
    T = np.asarray(table[tname], dtype=np.float64)
    X = np.asarray(table[sname], dtype=np.float64)
    for name, arr in ((tname, T), (sname, X)):
        bad = ~(np.isfinite(arr) & (arr > 0))
        if bad.any():
            i = int(np.flatnonzero(bad)[0])
            raise ValueError(f"{name} at {_where(table, i)} is {float(arr[i])!r}; it must be a finite positive "
                             "number")
    out = outside_temperature_range(T)
    if out.any():
        i = int(np.flatnonzero(out)[0])
        t_lo, t_hi = table_temperature_range()
        raise ValueError(f"temperature {T[i]:g} K at {_where(table, i)} is outside the partition-function "
                         f"tables ({t_lo:.4g}-{t_hi:.4g} K)")
    sp_names = resolve_species(mix, species)
    outputs = [name for name in POINT_OUTPUTS if name != sv] + (list(THERMO_OUTPUTS) if thermo else [])
    got = _solve_rows(T, X, sv, mix, sp_names, outputs, lambda i: _where(table, i), progress, molecules,
                      thermo=thermo)
    status = got["status"]

    res = Table(meta={k: v for k, v in table.meta.items() if k != "line_numbers"})
    read = set(used.values())
    for name in table.colnames:
        c = _canon(name)
        new = name
        if c in outputs or c in ("status", "iterations", "validity") or c.startswith(("fraction_", "number_density_",
                                                                                        "partial_pressure_")):
            new = f"input_{name}"
        res[new] = table[name]
    for name in outputs:
        res[name] = got[name]
        if QUANTITIES[name].unit not in ("", "1"):
            res[name].unit = astropy_unit(name)
    res["status"] = status.astype(np.int8)
    res["iterations"] = got["iterations"]
    res["validity"] = got["validity"]
    res["validity"].description = "validity flags of ideal-gas LTE Saha (bitmask, see ionbal.validity)"
    if thermo:
        # the electron donors: every element that supplies at least 1e-4 of the free electrons somewhere
        for el, share in got["donors"].items():
            if np.nanmax(np.abs(share)) >= DONOR_MIN:
                res[f"electron_donor_{el}"] = share
                res[f"electron_donor_{el}"].description = f"share of the free electrons supplied by {el}"
                res[f"dlnne_dA_{el}"] = got["sensitivity"][el]
                res[f"dlnne_dA_{el}"].description = (f"d ln n_e / d A({el}) at constant T and gas pressure "
                                                     "[per dex]")

    comparisons = []
    for q in _COMPARED:
        iname = used.get(q)
        if iname is None or q == sv:
            continue
        ref = np.asarray(table[iname], dtype=np.float64)
        ours = got[q]
        ok = np.isfinite(ref) & (ref > 0)
        with np.errstate(divide="ignore", invalid="ignore"):
            pct = np.where(ok, 100.0 * (ours / ref - 1.0), np.nan)
            dex = np.where(ok, np.log10(ours / ref), np.nan)
        cmp_ = Comparison(q, ref, ours, pct, dex, int((~ok).sum()))
        comparisons.append(cmp_)
        res[f"{q}_deviation_percent"] = pct
        res[f"{q}_deviation_dex"] = dex

    frac, dens = got["fractions"], got["number_densities"]
    for k, name in enumerate(sp_names):
        res[species_column_name("fraction", name)] = frac[k]
    for k, name in enumerate(sp_names):
        res[species_column_name("number_density", name)] = dens[k]
        res[species_column_name("number_density", name)].unit = astropy_unit("number_density")
    if partial_pressures:
        kT = K_B * T
        for k, name in enumerate(sp_names):
            res[species_column_name("partial_pressure", name)] = dens[k] * kT
            res[species_column_name("partial_pressure", name)].unit = astropy_unit("partial_pressure")
    mols = tuple(got["molecules"])
    for k, name in enumerate(mols):
        res[species_column_name("number_density", name)] = got["molecule_densities"][k]
        res[species_column_name("number_density", name)].unit = astropy_unit("number_density")
    if partial_pressures:
        for k, name in enumerate(mols):
            res[species_column_name("partial_pressure", name)] = got["molecule_densities"][k] * K_B * T
            res[species_column_name("partial_pressure", name)].unit = astropy_unit("partial_pressure")
    res.meta["ionbal_molecules"] = list(mols)
    res.meta["ionbal_state_variable"] = sv
    res.meta["ionbal_mixture"] = mix.name
    res.meta["ionbal_species"] = list(sp_names)
    res.meta["ionbal_abundances"] = {el: float(a) for el, a in zip(mix.elements, mix.log_eps)}
    sources = {q: origin.get(q, name) for q, name in used.items()}
    passed = tuple(n for n in table.colnames if n not in read)
    return ColumnResult(res, sv, sp_names, frac, dens, comparisons, mix.name, sources, passed, tuple(notes),
                        tname if tname in res.colnames else f"input_{tname}", mols)


# ---------------------------------------------------------------------------------------------------
# writing
# ---------------------------------------------------------------------------------------------------


def check_output(path, *, overwrite: bool = False) -> str:
    """Check that a column result can be written to ``path``; returns its format (see :data:`FORMATS`)."""
    fmt = format_of(path)
    check_output_path(path, overwrite=overwrite)
    return fmt


def write_column(result: ColumnResult, path, *, overwrite: bool = False, command: str | None = None) -> Path:
    """Write a column result, atomically, in the format of its extension:

    * ``.ecsv``: astropy's ECSV, with units and metadata;
    * ``.csv``: comma-separated values with one header line of column names (values in cgs, the
      units of the registry; no comment lines, so spreadsheets and ``pandas.read_csv`` read it);
    * ``.txt`` / ``.dat``: a fixed-width table, columns separated by blanks, preceded by ``#``
      comment lines with the units of every column and the provenance (``ionbal column`` reads
      it back; so do ``numpy.loadtxt(..., skiprows=...)``-style readers of other codes);
    * ``.h5`` / ``.hdf5`` / ``.nc``: netCDF-4 style HDF5.

    An existing file is replaced only with ``overwrite`` and only once the new
    one is complete.
    """

    path = Path(path)
    fmt = check_output(path, overwrite=overwrite)
    meta_extra = {"ionbal_version": __version__, "ionbal_command": command or "ionbal.column.write_column"}
    if fmt in ("csv", "text"):
        _write_text_table(result, path, fmt, overwrite=overwrite, meta_extra=meta_extra)
        return path
    if fmt == "ecsv":
        t = result.table.copy(copy_data=False)
        t.meta.update(meta_extra)
        t.meta["ionbal_data_sources"] = {k: v.get("title", "") for k, v in data_sources().items()}
        t.meta["ionbal_physics"] = assumptions(result.molecules)
        for c in result.comparisons:
            t.meta[f"ionbal_comparison_{c.quantity}"] = c.summary()
        with atomic_output(path, overwrite=overwrite) as tmp:
            t.write(tmp, format="ascii.ecsv", overwrite=True)
        return path
    cols = {}
    sp_cols = {species_column_name("fraction", s) for s in result.species} | \
              {species_column_name("number_density", s) for s in result.species}
    for name in result.table.colnames:
        if name in sp_cols:
            continue
        col = result.table[name]
        unit = None if col.unit is None else _unit_string(col.unit)
        cols[name] = (np.asarray(col), unit, None)
    attrs = {
        "title": "ionbal LTE ionization balance of a model-atmosphere column",
        "history": f"{command or 'ionbal.column.write_column'} (ionbal {__version__})",
        "state_variable": result.state_variable,
        "mixture_name": result.mixture_name,
        "ionbal_molecules": molecules_record(result.molecules),
        "comment": assumptions(result.molecules),
    }
    for c in result.comparisons:
        attrs[f"comparison_{c.quantity}"] = c.summary()
    write_table_file(path, cols, species=result.species,
                     cubes={"ion_fraction": result.fractions, "number_density": result.number_densities},
                     attrs=attrs, overwrite=overwrite)
    return path


def _write_text_table(result: ColumnResult, path: Path, fmt: str, *, overwrite: bool, meta_extra: dict) -> None:
    comments = [f"ionbal {meta_extra['ionbal_version']}: LTE ionization balance of a model-atmosphere column",
                f"command: {meta_extra['ionbal_command']}",
                f"mixture: {result.mixture_name}; state input: {result.state_variable}",
                _molecules_line(result.molecules),
                *[c.summary() for c in result.comparisons]]
    write_text_table(result.table, path, fmt, overwrite=overwrite, comments=comments)


def _molecules_line(molecules) -> str:
    """The comment line of text files on the molecule choice."""
    if not molecules:
        return "molecules: none (atoms and atomic ions only)"
    return f"molecules: {len(molecules)} solved with the ions (number_density_<formula> columns)"


def _unit_string(unit) -> str:
    """The ``units`` attribute of a column in an HDF5 file: the registry's spelling (``"dyn cm-2"``)."""
    return unit_of_astropy(unit)


def default_output(model_path) -> Path:
    """``<model stem>.ionbal.ecsv`` in the current directory."""
    return Path(Path(model_path).stem + ".ionbal.ecsv")
