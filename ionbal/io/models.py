"""Reading model-atmosphere depth structures (ECSV with units, or CSV / whitespace-separated text in cgs).

Columns that the quantity registry knows (temperature, the state inputs, electron_density) get
their registry units; every other column is kept as it is.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np

from ..quantities import STATE_INPUTS, QUANTITIES, astropy_unit

__all__ = ["read_model", "MODEL_UNITS", "MAX_MODEL_BYTES", "canonical_column_name"]

#: cgs units of the model columns ionbal knows (registry spelling)
MODEL_UNITS: dict[str, str] = {n: QUANTITIES[n].unit for n in ("temperature",) + STATE_INPUTS + ("electron_density",)}

MAX_MODEL_BYTES = 512 * 1024 * 1024


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


def read_model(path) -> "Table":  # noqa: F821
    """Read a depth structure into an astropy Table.

    Known columns (temperature, the state variables, electron_density) get
    cgs units: converted from the file's units for ECSV, assumed cgs for plain
    text.  Other columns are kept as they are.  Row order is kept.

    Raises
    ------
    FileNotFoundError, ValueError
        With a message naming the file, line and column of the problem.
    """
    from astropy.table import Table

    path = Path(path)
    text = _read_text(path)
    first = next((ln for ln in text.splitlines() if ln.strip()), "")
    if not first:
        raise ValueError(f"model file {path} is empty")
    if first.lstrip().startswith("# %ECSV"):
        t = _read_ecsv(path, text)
    else:
        t = _read_plain(path, text)
    if len(t) == 0:
        raise ValueError(f"model file {path} has a header but no data rows")
    t.meta["ionbal_model_file"] = str(path)
    return t


def _read_ecsv(path: Path, text: str):
    import astropy.units as u
    from astropy.table import Table

    try:
        t = Table.read(text, format="ascii.ecsv")
    except Exception as exc:  # noqa: BLE001 - astropy raises many kinds; report one line
        msg = str(exc).strip().splitlines()
        raise ValueError(f"cannot read ECSV model file {path}: {msg[0] if msg else type(exc).__name__}") from None
    t = Table(t, masked=False, copy=False) if not t.has_masked_columns else t
    seen = {}
    for name in t.colnames:
        c = _canon(name)
        if c in seen:
            raise ValueError(f"model file {path}: columns {seen[c]!r} and {name!r} have the same name")
        seen[c] = name
    for name in list(t.colnames):
        c = _canon(name)
        if c not in MODEL_UNITS:
            continue
        col = t[name]
        if getattr(col, "mask", None) is not None and np.any(col.mask):
            i = int(np.flatnonzero(col.mask)[0])
            raise ValueError(f"model file {path}: column {name} has a missing value at data row {i + 1}")
        if col.dtype.kind not in "fiu":
            raise ValueError(f"model file {path}: column {name} must be numeric, it has type {col.dtype}")
        target = astropy_unit(MODEL_UNITS[c])
        values = np.asarray(col, dtype=np.float64)
        if col.unit is not None and col.unit != u.dimensionless_unscaled:
            try:
                values = (values * col.unit).to_value(target)
            except u.UnitConversionError:
                raise ValueError(f"model file {path}: column {name} has unit '{col.unit}', which does not "
                                 f"convert to {target}") from None
        t[name] = values
        t[name].unit = target
    return t


def _split(line: str, comma: bool) -> list[str]:
    if comma:
        return [f.strip().strip('"').strip("'") for f in line.split(",")]
    return line.split()


def _read_plain(path: Path, text: str):
    import astropy.units as u
    from astropy.table import Table

    lines = [(i + 1, ln) for i, ln in enumerate(text.splitlines())]
    body = [(n, ln) for n, ln in lines if ln.strip() and not ln.lstrip().startswith("#")]
    if not body:
        raise ValueError(f"model file {path} has no header line naming its columns")
    hline, header = body[0]
    comma = "," in header
    names = _split(header, comma)
    if any(not n for n in names):
        raise ValueError(f"model file {path}, line {hline}: empty column name in the header")
    seen = {}
    for n in names:
        c = _canon(n)
        if c in seen:
            raise ValueError(f"model file {path}, line {hline}: column {n!r} appears twice in the header")
        seen[c] = n
    try:
        [float(n) for n in names]
        all_numbers = True
    except ValueError:
        all_numbers = False
    if all_numbers:
        raise ValueError(f"model file {path}, line {hline}: the first line holds numbers, not column names; "
                         "the header must name the columns (e.g. 'depth temperature gas_pressure')")
    rows = []
    line_numbers = []
    for n, ln in body[1:]:
        fields = _split(ln, comma)
        if len(fields) != len(names):
            raise ValueError(f"model file {path}, line {n}: {len(fields)} values for {len(names)} columns "
                             f"({', '.join(names)})")
        rows.append(fields)
        line_numbers.append(n)
    if not rows:
        raise ValueError(f"model file {path} has a header but no data rows")
    cols = list(zip(*rows))
    t = Table()
    for name, values in zip(names, cols):
        c = _canon(name)
        try:
            arr = np.array([float(v) for v in values], dtype=np.float64)
        except ValueError:
            if c in MODEL_UNITS:
                for v, n in zip(values, line_numbers):
                    try:
                        float(v)
                    except ValueError:
                        raise ValueError(f"model file {path}, line {n}: {name} value {v!r} is not a "
                                         "number") from None
            arr = np.array(values, dtype=str)
        t[name] = arr
        if c in MODEL_UNITS:
            t[name].unit = astropy_unit(MODEL_UNITS[c])
    t.meta["line_numbers"] = line_numbers
    return t


canonical_column_name = _canon
