"""The table of file formats, keyed by extension (column results; grid files are always HDF5)."""

from __future__ import annotations

from pathlib import Path

__all__ = ["FORMATS", "format_of"]

#: extension -> format of a column result
FORMATS: dict[str, str] = {
    ".ecsv": "ecsv",
    ".h5": "hdf5",
    ".hdf5": "hdf5",
    ".nc": "hdf5",
    ".he5": "hdf5",
}
#: extensions people try that are refused with a hint (plain text loses the units)
_REFUSED = (".txt", ".csv")


def format_of(path) -> str:
    """The format (``"ecsv"`` or ``"hdf5"``) of an output path, from its extension."""
    path = Path(path)
    ext = path.suffix.lower()
    if ext in _REFUSED:
        raise ValueError(f"output {path}: column results are written as ECSV (.ecsv) or HDF5 (.h5, .hdf5, "
                         ".nc)")
    try:
        return FORMATS[ext]
    except KeyError:
        raise ValueError(f"output {path}: unknown extension {ext or '(none)'}; use .ecsv or .h5") from None
