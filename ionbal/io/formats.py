"""The tables of file formats, keyed by extension: column results and grid files."""

from __future__ import annotations

from pathlib import Path

__all__ = ["FORMATS", "GRID_EXTENSIONS", "format_of", "check_grid_output_name"]

#: extension -> format of a column result
FORMATS: dict[str, str] = {
    ".ecsv": "ecsv",    # astropy's ECSV: units and metadata kept
    ".csv": "csv",      # comma-separated, one header line of column names, cgs, no comments
    ".txt": "text",     # fixed-width columns separated by blanks, '#' comment lines with units and provenance
    ".dat": "text",
    ".h5": "hdf5",
    ".hdf5": "hdf5",
    ".nc": "hdf5",
    ".he5": "hdf5",
}
#: extensions of grid files (always HDF5 in the netCDF-4 layout)
GRID_EXTENSIONS: tuple[str, ...] = (".h5", ".hdf5", ".nc", ".he5")


def _known() -> str:
    return ", ".join(FORMATS)


def format_of(path) -> str:
    """The format (``"ecsv"``, ``"csv"``, ``"text"`` or ``"hdf5"``) of a column output, from its extension."""
    path = Path(path)
    ext = path.suffix.lower()
    try:
        return FORMATS[ext]
    except KeyError:
        raise ValueError(f"output {path}: unknown extension {ext or '(none)'}; column results are written as "
                         f"{_known()} (ECSV, CSV, fixed-width text or HDF5)") from None


def check_grid_output_name(path) -> Path:
    """Refuse a grid output whose extension is not an HDF5 one (a grid is never written as text)."""
    path = Path(path)
    ext = path.suffix.lower()
    if ext not in GRID_EXTENSIONS:
        raise ValueError(f"output {path}: a grid file is HDF5 (netCDF-4 layout); give it one of the extensions "
                         f"{', '.join(GRID_EXTENSIONS)} (got {ext or 'none'}). For tables of a few states or a "
                         "model column, use ionbal column with .csv, .txt or .ecsv")
    return path
