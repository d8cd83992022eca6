"""Files of ionbal: atomic writes, netCDF-4/CF helpers, provenance, grid and table files, model files.

Modules: :mod:`~ionbal.io.atomic` (atomic writes), :mod:`~ionbal.io.netcdf` (CF helpers),
:mod:`~ionbal.io.provenance` (data sources, history), :mod:`~ionbal.io.gridfile` (grid writer),
:mod:`~ionbal.io.reader` (:class:`GridFile`), :mod:`~ionbal.io.interpolate`,
:mod:`~ionbal.io.tablefile` (column files), :mod:`~ionbal.io.models` (reading depth structures) and
:mod:`~ionbal.io.formats` (the table of formats keyed by extension).

Files are written with h5py in the netCDF-4 layout: every dimension has a
coordinate variable that is an HDF5 dimension scale, every variable has its
dimension scales attached and carries CF-style ``units`` and ``long_name``
attributes.  Plain h5py and ``xarray.open_dataset(path, engine="h5netcdf")``
both read them with named dimensions and coordinates.

Grid file layout (root group; ``X`` is the state variable, e.g. ``gas_pressure``;
``[metallicity, alpha,]`` appear only for grids with composition axes)::

    dims:  [metallicity, alpha,] temperature, X, species, element[, molecule]
    coordinates
        temperature(temperature)           K
        X(X)                               cgs (dyn cm-2, g cm-3 or cm-3)
        metallicity(metallicity), alpha(alpha)   dex   (composition axes only)
        species(species)                   names in spectroscopic notation, "Fe II", "H-"
        element(element)                   symbols
        molecule(molecule)                 formulas, "H2", "CO", "H2O", "H2+" (grids with molecules only)
    per point, dims ([metallicity, alpha,] temperature, X)
        electron_density, electron_pressure, gas_pressure, mass_density,
        hydrogen_density, nuclei_density, mean_molecular_weight  (float64; the
        one that is the state axis itself is not repeated), status (int8, CF
        flag_values/flag_meanings), iterations (int32)
    cubes, dims ([metallicity, alpha,] species, temperature, X)
        ion_fraction                       fraction of the element's nuclei in that stage
        number_density                     cm-3 (optional)
    molecule_number_density([metallicity, alpha,] molecule, temperature, X)   cm-3 (with molecules)
    partition_function(species, temperature)
    atomic_number(element), atomic_mass(element)
    abundance([metallicity, alpha,] element)    A(X) = log10(N_X/N_H) + 12

Root attributes: ``title``, ``Conventions``, ``source``, ``history`` (the
command that made the file), ``ionbal_version``, ``ionbal_file_type``
("grid"), ``state_variable``, ``mixture_name``, ``data_sources`` (JSON: every
data table's title, sources and SHA-256), ``ionbal_grid_spec`` (JSON),
``ionbal_complete`` (1, written last).  Every numeric dataset is chunked
(tiles of at most 64 x 64 points along the state axes, so slices along either
axis read fast) and checksummed (Fletcher-32: a damaged chunk is detected when
read); all but the double-precision cubes (``ion_fraction``, ``number_density``,
``molecule_number_density`` without ``--float32``) are also compressed (shuffle
+ deflate): those barely compress (~20 %) and would cost most of the writing time.
"""

from __future__ import annotations

from .atomic import atomic_output, fsync_dir
from .formats import FORMATS, format_of
from .gridfile import write_grid_file
from .models import read_model
from .netcdf import (
    FILE_TYPE_COLUMN,
    FILE_TYPE_GRID,
    FORMAT_VERSION,
    QUANTITY_LONG_NAMES,
    QUANTITY_UNITS,
    GridFileError,
)
from .provenance import data_sources
from .reader import GridFile, is_grid_file, open_grid, read_attr_json, read_grid
from .tablefile import write_table_file

__all__ = [
    "GridFile",
    "GridFileError",
    "open_grid",
    "read_grid",
    "is_grid_file",
    "read_attr_json",
    "write_grid_file",
    "write_table_file",
    "read_model",
    "atomic_output",
    "fsync_dir",
    "data_sources",
    "FORMATS",
    "format_of",
    "QUANTITY_UNITS",
    "QUANTITY_LONG_NAMES",
    "FILE_TYPE_GRID",
    "FILE_TYPE_COLUMN",
    "FORMAT_VERSION",
]
