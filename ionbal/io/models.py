"""Reading model-atmosphere depth structures (ECSV with units, or CSV / whitespace-separated text in cgs).

Columns that the quantity registry knows (temperature, the state inputs, electron_density) are
found by name, by a common alias (``T``, ``Pgas``, ``rho``, ``Pe``, ``ne``, ...: :data:`ALIASES`)
or by an explicit mapping (``columns={"Tgas": "temperature"}``), renamed to their registry names
and given their registry units; every other column is kept as it is.  The mapping used is kept in
``table.meta["ionbal_columns"]`` (registry name -> column of the file).

A depth column (:data:`DEPTH_COLUMNS`: depth, height, optical depth, column mass) that does not run
one way (rows out of order, two models joined, a repeated point) is not an error, since every depth
point is solved on its own, but it is never silent: ``table.meta["ionbal_warnings"]`` holds a
warning naming the first rows where the order breaks, and ``ionbal column`` prints it.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np

from ..quantities import STATE_INPUTS, QUANTITIES, astropy_unit

__all__ = ["read_model", "resolve_columns", "parse_column_map", "MODEL_UNITS", "ALIASES", "MAX_MODEL_BYTES",
           "canonical_column_name", "DEPTH_COLUMNS"]

#: cgs units of the model columns ionbal knows (registry spelling)
MODEL_UNITS: dict[str, str] = {n: QUANTITIES[n].unit for n in ("temperature",) + STATE_INPUTS + ("electron_density",)}

#: common spellings of the known columns (compared after lower-casing, with '-' and ' ' read as '_')
ALIASES: dict[str, tuple[str, ...]] = {
    "temperature": ("t", "temp", "t_k", "temperature_k"),
    "gas_pressure": ("p", "pg", "pgas", "p_gas", "pressure", "gas_pressure_cgs"),
    "mass_density": ("rho", "density", "dens"),
    "hydrogen_density": ("nh", "n_h", "n_hydrogen"),
    "electron_pressure": ("pe", "p_e", "pelec"),
    "electron_density": ("ne", "n_e", "nelec"),
}
_BY_ALIAS: dict[str, str] = {a: name for name, aliases in ALIASES.items() for a in aliases}
assert set(ALIASES) == set(MODEL_UNITS), "every known model column needs an alias entry"

MAX_MODEL_BYTES = 512 * 1024 * 1024

#: pass-through columns that order the depth points (compared as canonical names): each must run one way
DEPTH_COLUMNS = ("depth", "height", "z", "tau", "log_tau", "logtau", "tau_ross", "log_tau_ross", "tau_5000",
                 "log_tau_5000", "column_mass", "log_column_mass", "log_m")


def _canon(name: str) -> str:
    return name.strip().lower().replace("-", "_").replace(" ", "_")


def _read_text(path: Path) -> str:
    if not path.exists():
        raise FileNotFoundError(f"model file {path} does not exist")
    if path.is_dir():
        raise IsADirectoryError(f"model file {path} is a directory")
    size = path.stat().st_size
    if size > MAX_MODEL_BYTES:
        raise ValueError(f"model file {path} is {size / 1e6:.0f} MB; a depth structure should be far smaller")
    try:
        raw = path.read_bytes()
    except OSError as exc:
        raise OSError(f"cannot read model file {path}: {exc.strerror or exc}") from None
    if b"\x00" in raw:
        raise ValueError(f"model file {path} is not a text file (it contains NUL bytes)")
    try:
        return raw.decode("utf-8-sig")
    except UnicodeDecodeError as exc:
        raise ValueError(f"model file {path} is not UTF-8 text (byte {exc.start})") from None


def parse_column_map(text) -> dict[str, str]:
    """``"T=temperature,Pg=gas_pressure"`` (or a mapping) -> ``{"T": "temperature", "Pg": "gas_pressure"}``.

    Keys are column names of the file, values registry names (:data:`MODEL_UNITS`).
    """
    if text is None:
        return {}
    if isinstance(text, dict):
        items = list(text.items())
    else:
        items = []
        for part in str(text).split(","):
            if not part.strip():
                continue
            if "=" not in part:
                raise ValueError(f"column mapping {part.strip()!r} must be FILE_COLUMN=NAME, e.g. "
                                 "T=temperature,Pg=gas_pressure")
            k, v = part.split("=", 1)
            items.append((k.strip(), v.strip()))
    out = {}
    for k, v in items:
        target = _canon(str(v))
        if target not in MODEL_UNITS:
            raise ValueError(f"column mapping {k}={v}: {v!r} is not a column ionbal knows; use one of "
                             f"{', '.join(MODEL_UNITS)}")
        if target in out.values():
            raise ValueError(f"column mapping: two columns are mapped to {target}")
        out[str(k)] = target
    return out


def resolve_columns(colnames, columns=None, *, source: str = "the model") -> dict[str, str]:
    """Which column of a table is which known quantity: ``{registry name: column name}``.

    An explicit ``columns`` mapping (file column -> registry name, or ``"T=temperature,..."``) comes
    first; every other column is matched by its name or a common alias (:data:`ALIASES`), without
    regard to case.  Two columns that read as the same quantity are an error naming both.
    """
    colnames = list(colnames)
    explicit = parse_column_map(columns)
    used: dict[str, str] = {}
    mapped = set()
    by_canon = {_canon(n): n for n in colnames}
    for k, target in explicit.items():
        name = k if k in colnames else by_canon.get(_canon(k))
        if name is None:
            raise ValueError(f"column mapping {k}={target}: {source} has no column {k!r}; it has "
                             f"{', '.join(colnames)}")
        used[target] = name
        mapped.add(name)
    for name in colnames:
        if name in mapped:
            continue
        c = _canon(name)
        target = c if c in MODEL_UNITS else _BY_ALIAS.get(c)
        if target is None:
            continue
        if target in used:
            if target in explicit.values():
                continue  # the explicit mapping decides; this column passes through
            raise ValueError(f"{source}: columns {used[target]!r} and {name!r} both read as {target}; say "
                             f"which one with columns={{{name!r}: {target!r}}} (or rename the other)")
        used[target] = name
    return {n: used[n] for n in MODEL_UNITS if n in used}


def read_model(path, columns=None) -> "Table":  # noqa: F821
    """Read a depth structure into an astropy Table.

    Known columns (temperature, the state variables, electron_density; by name, by an alias of
    :data:`ALIASES` or by the ``columns`` mapping, e.g. ``{"Tgas": "temperature"}`` or
    ``"Tgas=temperature"``) are renamed to their registry names and get cgs units: converted
    from the file's units for ECSV, assumed cgs for plain text.  Other columns are kept as they
    are.  Row order is kept.  ``table.meta["ionbal_columns"]`` records which column of the file
    became which quantity.

    Raises
    ------
    FileNotFoundError, ValueError
        With a message naming the file, line and column of the problem.
    """
    path = Path(path)
    text = _read_text(path)
    first = next((ln for ln in text.splitlines() if ln.strip()), "")
    if not first:
        raise ValueError(f"model file {path} is empty")
    ecsv = first.lstrip().startswith("# %ECSV")
    t = _read_ecsv(path, text) if ecsv else _read_plain(path, text)
    if len(t) == 0:
        raise ValueError(f"model file {path} has a header but no data rows")
    used = resolve_columns(t.colnames, columns, source=f"model file {path}")
    for target, name in used.items():
        if name != target and target in t.colnames:
            raise ValueError(f"model file {path}: column {name!r} is read as {target}, but the file also has a "
                             f"column named {target}; rename one of them")
    for target, name in used.items():
        _known_column(path, t, name, target, ecsv)
    t.meta["ionbal_columns"] = dict(used)
    t.meta["ionbal_model_file"] = str(path)
    t.meta["ionbal_warnings"] = _depth_order_warnings(path, t)
    return t


def _depth_order_warnings(path: Path, t, shown: int = 3) -> list[str]:
    """A warning per depth column that does not run one way, naming the first rows that break it."""
    out = []
    lines = t.meta.get("line_numbers")
    for name in t.colnames:
        if _canon(name) not in DEPTH_COLUMNS or t[name].dtype.kind not in "fiu" or len(t) < 2:
            continue
        v = np.asarray(t[name], dtype=np.float64)
        step = np.diff(v)
        way = np.sign(v[-1] - v[0]) or np.sign(step[np.flatnonzero(step)[0]] if np.any(step) else 0.0)
        broken = np.flatnonzero(~(np.sign(step) == way)) + 1  # rows (0-based) out of order or repeated
        if broken.size == 0:
            continue
        where = ", ".join(f"data row {i + 1}" + (f" (line {lines[i]})" if lines and i < len(lines) else "")
                          + f" {name} = {v[i]:g} after {v[i - 1]:g}" for i in broken[:shown])
        more = f" and {broken.size - shown} more" if broken.size > shown else ""
        out.append(f"WARNING: model file {path}: column {name} is not monotonic: {where}{more}; every depth point "
                   "is solved on its own, but check the file (rows out of order? two models joined?) before "
                   "plotting or integrating along depth")
    return out


def _known_column(path: Path, t, name: str, target: str, ecsv: bool) -> None:
    """Check a known column, convert it to its cgs unit and rename it to ``target``."""
    import astropy.units as u

    col = t[name]
    if getattr(col, "mask", None) is not None and np.any(col.mask):
        i = int(np.flatnonzero(col.mask)[0])
        raise ValueError(f"model file {path}: column {name} has a missing value at data row {i + 1}")
    if col.dtype.kind not in "fiu":
        if ecsv:
            raise ValueError(f"model file {path}: column {name} must be numeric, it has type {col.dtype}")
        lines = t.meta.get("line_numbers") or range(2, len(col) + 2)
        for v, n in zip(col, lines):
            try:
                float(v)
            except ValueError:
                raise ValueError(f"model file {path}, line {n}: {name} value {str(v)!r} is not a number") from None
        col = np.asarray(col, dtype=np.float64)  # every value parses (e.g. 'nan' read as text)
    target_unit = astropy_unit(MODEL_UNITS[target])
    values = np.asarray(col, dtype=np.float64)
    unit = getattr(t[name], "unit", None) if ecsv else None
    if unit is not None and unit != u.dimensionless_unscaled:
        try:
            values = (values * unit).to_value(target_unit)
        except u.UnitConversionError:
            raise ValueError(f"model file {path}: column {name} has unit '{unit}', which does not "
                             f"convert to {target_unit}") from None
    t[name] = values
    t[name].unit = target_unit
    if name != target:
        t.rename_column(name, target)


def _read_ecsv(path: Path, text: str):
    from astropy.table import Table

    import warnings

    try:
        with warnings.catch_warnings(record=True) as caught:
            warnings.simplefilter("always")
            t = Table.read(text, format="ascii.ecsv")
    except Exception as exc:  # noqa: BLE001 - astropy raises many kinds; report one line
        msg = str(exc).strip().splitlines()
        raise ValueError(f"cannot read ECSV model file {path}: {msg[0] if msg else type(exc).__name__}") from None
    for w in caught:  # e.g. a datatype ECSV does not allow: a damaged header, not a multi-line warning
        if "datatype" in str(w.message):
            msg = str(w.message).split(" Using anyway")[0].strip()
            raise ValueError(f"cannot read ECSV model file {path}: {msg}")
    t = Table(t, masked=False, copy=False) if not t.has_masked_columns else t
    seen = {}
    for name in t.colnames:
        c = _canon(name)
        if c in seen:
            raise ValueError(f"model file {path}: columns {seen[c]!r} and {name!r} have the same name")
        seen[c] = name
    return t


def _header(path: Path, text: str):
    """``(line number, names, comma)`` of the header: the first line that is neither blank nor a comment."""
    for n, ln in enumerate(text.splitlines(), start=1):
        if ln.strip() and not ln.lstrip().startswith("#"):
            comma = "," in ln
            names = [f.strip().strip('"').strip("'") for f in ln.split(",")] if comma else ln.split()
            return n, names, comma
    raise ValueError(f"model file {path} has no header line naming its columns")


def _is_number(text: str) -> bool:
    try:
        float(text)
    except ValueError:
        return False
    return True


def _data_lines(text: str, header_line: int) -> list[tuple[int, str]]:
    """``(line number, text)`` of the data rows after the header (blank and comment lines skipped)."""
    return [(n, ln) for n, ln in enumerate(text.splitlines(), start=1)
            if n > header_line and ln.strip() and not ln.lstrip().startswith("#")]


def _read_plain(path: Path, text: str):
    """CSV or whitespace-separated text with a header line, read by astropy's ASCII readers."""
    from astropy.io import ascii as astropy_ascii

    hline, names, comma = _header(path, text)
    if any(not n for n in names):
        raise ValueError(f"model file {path}, line {hline}: empty column name in the header")
    seen = {}
    for n in names:
        c = _canon(n)
        if c in seen:
            raise ValueError(f"model file {path}, line {hline}: column {n!r} appears twice in the header")
        seen[c] = n
    if all(_is_number(n) for n in names):
        raise ValueError(f"model file {path}, line {hline}: the first line holds numbers, not column names; "
                         "the header must name the columns (e.g. 'depth temperature gas_pressure')")
    rows = _data_lines(text, hline)
    if not rows:
        raise ValueError(f"model file {path} has a header but no data rows")
    try:
        t = astropy_ascii.read(text, format="csv" if comma else "basic", delimiter="," if comma else r"\s",
                               comment=r"\s*#", guess=False,
                               fast_reader=False)
    except Exception as exc:  # noqa: BLE001 - astropy raises many kinds; find the line ourselves
        split = (lambda ln: ln.split(",")) if comma else str.split
        for n, ln in rows:
            if len(split(ln)) != len(names):
                raise ValueError(f"model file {path}, line {n}: {len(split(ln))} values for {len(names)} "
                                 f"columns ({', '.join(names)})") from None
        msg = str(exc).strip().splitlines()
        raise ValueError(f"cannot read model file {path}: {msg[0] if msg else type(exc).__name__}") from None
    t.meta.clear()
    t.meta["line_numbers"] = [n for n, _ in rows]
    return t


canonical_column_name = _canon
