"""Reading the packaged ECSV tables (``ionbal.tables``) without astropy: the one file reader of the data layer.

It imports nothing else of ionbal, so every data module (elements, mixtures, tables) can use it
without an import cycle.
"""

from __future__ import annotations

import csv
import io
from importlib import resources

_PACKAGE = "ionbal.tables"


def _table_text(name: str) -> str:
    try:
        return resources.files(_PACKAGE).joinpath(name).read_text(encoding="utf-8")
    except (FileNotFoundError, ModuleNotFoundError) as exc:  # pragma: no cover - broken install
        raise RuntimeError(
            f"table {name} not found in package data {_PACKAGE}; regenerate the tables with "
            f"'python tables/build_tables.py <shared>/data' and reinstall"
        ) from exc


def _split_ecsv(text: str) -> tuple[list[str], list[str]]:
    """Column names and the data lines of an ECSV text (space-delimited, '#' header)."""
    lines = [ln for ln in text.splitlines() if ln and not ln.startswith("#")]
    names = next(csv.reader([lines[0]], delimiter=" ", quotechar='"'))
    return names, lines[1:]


def _read_ecsv(name: str) -> tuple[list[str], list[list[str]]]:
    """Column names and rows (lists of strings; '' for masked values) of a packaged ECSV table."""
    names, data = _split_ecsv(_table_text(name))
    rows = list(csv.reader(io.StringIO("\n".join(data)), delimiter=" ", quotechar='"'))
    return names, rows
